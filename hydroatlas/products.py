"""The product registry: every derived product recorded in the store, found by later commands, checked for freshness.

A product is what a command makes from the store's rows: a surface (head, log K, head difference), the gradient
beside a head surface, pathways and contributing areas, a drawdown scenario, a model grid, a map, GIS layers,
figures. Each is one row of the store table ``products``: its name (unique in the store), kind, unit, quantity,
parameters, head window, selection policy, code version, files (absolute paths), the products it used
(``inputs``), the command that remakes it, when it was made, and a digest of each store table it was made from
(``input_digests``). Later commands ask the store for their inputs (:func:`find_product`: the named product, else
the latest one of that kind, unit and quantity) instead of looking for file names in a folder, and refuse a
product whose tables changed since it was made (:func:`check_fresh`), unless told to use it anyway.

Which tables a kind of product is made from is declared once, in :data:`INPUT_TABLES`.

What a table digest covers
--------------------------
Not the row values themselves: reading a million head rows out of SQLite takes seconds, and a digest is
computed by every command that makes or uses a product. A digest is the SHA-256 (first 16 hex digits) of the
table's change state, which SQLite and the store's history triggers keep up to date for any writer (imports,
``retire``/``restore``, a desktop GIS editing the file):

- the number of rows of the table and its largest ``fid`` (``fid`` is AUTOINCREMENT, never reused): every
  insert raises one of them, every delete lowers the count;
- the ``fid`` of the table's latest entry in ``record_history``: every update that changes a value, every
  retirement, restoration and deletion adds one (``hydroatlas.store.geopackage.history_triggers``).

So any change of a row changes the digest, and a re-import of an unchanged file (which writes nothing) does not.
A change undone by a later one still counts as a change (the product is reported stale; remaking it is cheap
next to using a wrong one). The store gives this state (``change_marker`` of the backend); the queries take
milliseconds whatever the table size: in a GeoPackage ``count(*)`` and ``max(fid)`` of the table (SQLite counts
from the b-tree), and ``max(fid)`` of its history entries through the index ``record_history_by_table`` (made by
``upgrade`` and by the first product recorded). The same text on both backends: a product recorded in a
GeoPackage stays fresh in its PostGIS copy (``hydroatlas copy``). On PostgreSQL ``count(*)`` reads the whole table.
"""

from __future__ import annotations

import hashlib
import json
import shlex
import uuid
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

from .errors import ParameterError, StaleProductError, StoreError

TABLE = "products"

#: kinds of product the commands record; the registry takes other kinds too (their tables given by the caller)
KINDS = ("surface", "gradient", "pathways", "contributing_areas", "drawdown", "model_grid", "map", "layers",
         "figures")

# zone assignment, unit extents and inferred picks read these four
_ASSIGNMENT = ("units", "wells", "zones", "picks")
# a head selection reads pumping records too (readings taken while a zone or well pumped are left out)
_HEADS = _ASSIGNMENT + ("heads", "pumping")
_HEAD_SURFACE = _HEADS + ("springs", "areas")  # springs issuing from the unit are heads; domain polygons
#: the store tables each kind of product is made from (``kind`` or ``kind:quantity``); read from the workflows
INPUT_TABLES: dict[str, tuple[str, ...]] = {
    "surface:head": _HEAD_SURFACE,
    "surface:dhead": _HEADS + ("areas",),
    "surface:logk": _ASSIGNMENT + ("ktests", "areas"),
    "surface:change": _HEADS + ("areas",),  # head in a window minus head in a baseline window
    "gradient": _HEAD_SURFACE,
    # sinks: springs, their discharge and the pumping wells; recharge areas; K: the unit's tests
    "pathways": _HEAD_SURFACE + ("ktests", "discharge"),
    "contributing_areas": _HEAD_SURFACE + ("ktests", "discharge"),
    # baseline pumping, T from the unit's K tests and thickness from the picks, impacts at springs and zones
    "drawdown": _HEAD_SURFACE + ("ktests",),
    "model_grid": _HEAD_SURFACE + ("ktests",),
    "map": _HEAD_SURFACE + ("ktests",),
    "layers": _HEAD_SURFACE + ("ktests",),
    "figures": _HEAD_SURFACE + ("ktests", "slug_records", "slug_geometry"),
}

_JSON_COLUMNS = ("parameters", "head_window", "selection", "files", "input_digests", "inputs")


def _base(store):
    """The store itself when given a :class:`~hydroatlas.study.Study` (a Study reads once and never writes)."""
    inner = getattr(store, "store", None)
    return inner if inner is not None and hasattr(inner, "transaction") else store


def _conn(store):
    conn = getattr(_base(store), "_conn", None)
    if conn is None:
        raise StoreError(f"the store {getattr(store, 'location', store)} is closed or has no product registry")
    return conn


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


# -- digests -----------------------------------------------------------------------------------------------------
def input_tables(kind: str, quantity: str | None = None) -> tuple[str, ...]:
    """The store tables a product of ``kind`` (and ``quantity``, for surfaces) is made from.

    Raises ParameterError for a kind without a declaration (give ``tables=`` to :func:`record_product`).
    """
    key = f"{kind}:{quantity}" if f"{kind}:{quantity}" in INPUT_TABLES else kind
    if key not in INPUT_TABLES:
        raise ParameterError(f"no input tables are declared for products of kind {kind!r}"
                             + (f" and quantity {quantity!r}" if quantity else "") + "; give tables=",
                             param="tables")
    return INPUT_TABLES[key]


def table_digests(store, tables) -> dict[str, str]:
    """A digest of the change state of each table (see the module docstring for what is hashed).

    Parameters
    ----------
    store : Store (GeoPackage or PostGIS), or a Study on one
    tables : iterable of str
        Table names of :mod:`hydroatlas.store.schema`.

    Returns
    -------
    dict
        Table name -> 16 hex digits, in the order given.
    """
    from .store.schema import TABLES

    _conn(store)  # a closed store: the registry's one message
    base = _base(store)
    out = {}
    for table in dict.fromkeys(tables):
        if table not in TABLES:
            raise ParameterError(f"unknown table {table!r}; expected one of {sorted(TABLES)}", param="tables")
        text = base.change_marker(table)  # the backend's cheap, exact change state (see the module docstring)
        out[table] = hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]
    return out


def input_digests(store, kind: str, quantity: str | None = None) -> dict[str, str]:
    """:func:`table_digests` of the tables a product of ``kind`` is made from (:func:`input_tables`).

    Take them before reading the store for the product, so that a change made while it is computed shows as one.
    """
    return table_digests(store, input_tables(kind, quantity))


# -- the record ----------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Product:
    """One row of the product registry (JSON columns decoded)."""

    product_id: str
    name: str
    kind: str
    unit: str | None
    quantity: str | None
    value_unit: str | None
    parameters: dict = field(default_factory=dict)
    head_window: dict | None = None
    selection: dict | None = None
    code_version: str = ""
    files: tuple[str, ...] = ()
    input_digests: dict = field(default_factory=dict)
    inputs: tuple[str, ...] = ()
    command: str = ""
    created_utc: str = ""

    @classmethod
    def from_row(cls, row: dict) -> "Product":
        data = dict(row)
        for col in _JSON_COLUMNS:
            value = data.get(col)
            data[col] = json.loads(value) if isinstance(value, str) else value
        data["files"] = tuple(data.get("files") or ())
        data["inputs"] = tuple(data.get("inputs") or ())
        data["parameters"] = data.get("parameters") or {}
        data["input_digests"] = data.get("input_digests") or {}
        return cls(**{k: data.get(k) for k in cls.__dataclass_fields__})

    def describe(self) -> str:
        """'ULS_head (head surface of unit ULS)': the name and what it is, for messages."""
        what = self.kind.replace("_", " ")
        if self.kind == "surface" and self.quantity:
            what = f"{self.quantity} surface"
        elif self.kind == "drawdown":
            what = "drawdown scenario" + (f" {self.parameters['scenario']!r}" if self.parameters.get("scenario")
                                          else "")
        return f"{self.name} ({what}" + (f" of unit {self.unit})" if self.unit else ")")

    def file(self, tail: str) -> Path:
        """The product's file named ``<unit stem>_<tail>`` (``tail`` alone for a product without unit).

        Raises ParameterError when the product has no such file.
        """
        from .export.names import file_stem

        want = f"{file_stem(self.unit)}_{tail}" if self.unit else tail
        for f in self.files:
            if Path(f).name == want:
                return Path(f)
        raise ParameterError(f"product {self.describe()} has no file {want}; its files: "
                             f"{', '.join(Path(f).name for f in self.files) or 'none'}")

    def missing_files(self) -> list[str]:
        """The product's files that no longer exist (deleted or moved)."""
        return [f for f in self.files if not Path(f).exists()]

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.__dict__.items()}


def _rows(store, where: str = "", args: tuple = ()) -> list[Product]:
    from .store.schema import TABLES

    cols = [c.name for c in TABLES[TABLE].columns]
    conn = _conn(store)
    cur = conn.execute(f"SELECT {', '.join(map(_q, cols))} FROM {TABLE}{where} ORDER BY created_utc, fid", args)
    return [Product.from_row(dict(zip(cols, r))) for r in cur.fetchall()]


def list_products(store, *, kind: str | None = None, unit: str | None = None,
                  quantity: str | None = None) -> list[Product]:
    """Recorded products, oldest first, optionally of one kind, unit and quantity."""
    conds, args = [], []
    for col, value in (("kind", kind), ("unit", unit), ("quantity", quantity)):
        if value is not None:
            conds.append(f"{col} = ?")
            args.append(value)
    return _rows(store, (" WHERE " + " AND ".join(conds)) if conds else "", tuple(args))


def get_product(store, name: str) -> Product | None:
    """The product called ``name``, or None."""
    found = _rows(store, " WHERE name = ?", (str(name),))
    return found[0] if found else None


def _inside(path, folder: Path) -> bool:
    try:
        return Path(path).resolve().is_relative_to(folder)
    except OSError:
        return False


def how_to_make(kind: str, store, *, unit: str | None = None, quantity: str | None = None) -> str:
    """A command that makes a product of ``kind`` (for messages when none is recorded)."""
    where = shlex.quote(str(getattr(store, "location", store)))
    u = f" --unit {shlex.quote(str(unit))}" if unit else ""
    return {
        "surface": f"hydroatlas surface {where}{u} --quantity {quantity or 'head'}",
        "gradient": f"hydroatlas surface {where}{u} --quantity head",
        "pathways": f"hydroatlas paths {where}{u} --porosity N",
        "contributing_areas": f"hydroatlas paths {where}{u} --porosity N --backward",
        "drawdown": f"hydroatlas drawdown {where}{u} --days N --name NAME",
        "model_grid": f"hydroatlas grid {where} --cell SIZE",
        "map": f"hydroatlas map {where}{u}",
        "layers": f"hydroatlas layers {where}",
        "figures": f"hydroatlas figures {where}",
    }.get(kind, f"hydroatlas {kind} {where}")


def find_product(store, *, kind: str, unit: str | None = None, quantity: str | None = None,
                 name: str | None = None, folder=None, required: bool = True,
                 match=None) -> Product | None:
    """The product called ``name``, else the latest of ``kind`` (and ``unit``, ``quantity``) in the store.

    Parameters
    ----------
    folder : path, optional
        Only products whose files all lie in this folder (or below it).
    required : bool
        Raise ParameterError when none is found (True), or return None.
    match : callable, optional
        Only products for which ``match(product)`` is true (e.g. a scenario name in the parameters).

    Raises
    ------
    ParameterError
        A named product that does not exist or is of another kind, unit or quantity; with ``required``, no
        product of the kind.
    """
    label = f"{quantity} surface" if kind == "surface" and quantity else kind.replace("_", " ")
    of_unit = f" of unit {unit}" if unit is not None else ""
    if name is not None:
        prod = get_product(store, name)
        if prod is None:
            names = [p.name for p in list_products(store, kind=kind, unit=unit, quantity=quantity)]
            raise ParameterError(f"no product {name!r} in the store {store.location}; recorded {label}s{of_unit}: "
                                 f"{', '.join(names) or 'none'} (see 'hydroatlas products {store.location}')",
                                 param="name")
        for attr, want in (("kind", kind), ("unit", unit), ("quantity", quantity)):
            if want is not None and getattr(prod, attr) != want:
                raise ParameterError(f"product {prod.describe()} is not a {label}{of_unit}", param="name")
        return prod
    found = list_products(store, kind=kind, unit=unit, quantity=quantity)
    if folder is not None:
        root = Path(folder).resolve()
        found = [p for p in found if p.files and all(_inside(f, root) for f in p.files)]
    if match is not None:
        found = [p for p in found if match(p)]
    if found:
        return found[-1]
    if not required:
        return None
    where = f" with its files in {folder}" if folder is not None else ""
    raise ParameterError(f"no {label}{of_unit} is recorded in the store {store.location}{where}; make one with "
                         f"'{how_to_make(kind, store, unit=unit, quantity=quantity)}'")


# -- freshness -------------------------------------------------------------------------------------------------------
def changed_tables(store, product: Product) -> list[str]:
    """The tables whose rows changed since ``product`` was made (its digests against the store's now)."""
    now = table_digests(store, list(product.input_digests))
    return [t for t, d in product.input_digests.items() if now.get(t) != d]


def check_files(product: Product) -> None:
    """ParameterError naming the product and the first of its files that was deleted or moved."""
    missing = product.missing_files()
    if missing:
        more = f" (and {len(missing) - 1} more of its files)" if len(missing) > 1 else ""
        raise ParameterError(f"product {product.describe()} is recorded in the store but its file {missing[0]} is "
                             f"gone{more} (deleted or moved); remake it with '{product.command}'")


def check_fresh(store, product, *, allow_stale: bool = False) -> list[str]:
    """Refuse products made from store rows that changed since, or (``allow_stale``) say so.

    Parameters
    ----------
    product : Product or iterable of Product
        One product, or several checked together (one error names every stale one).
    allow_stale : bool
        Return the warning texts instead of raising.

    Returns
    -------
    list of str
        One warning per stale product (empty when all are fresh). The caller writes them to its output (a note on
        stderr and ``"stale_inputs_used"`` in its sidecar).

    Raises
    ------
    StaleProductError
        Naming each stale product, the tables whose rows changed and the command that remakes it.
    """
    items = [product] if isinstance(product, Product) else [p for p in product if p is not None]
    texts, stale = [], []
    seen = set()
    for prod in items:
        if prod.name in seen:
            continue
        seen.add(prod.name)
        changed = changed_tables(store, prod)
        if changed:
            stale.append(prod.name)
            texts.append(f"product {prod.describe()} was made at {prod.created_utc} from rows of "
                         f"{', '.join(changed)} that changed since; remake it with '{prod.command}'")
    if not texts:
        return []
    if allow_stale:
        return [t + "; used as it is (allow_stale=True)" for t in texts]
    raise StaleProductError("; ".join(texts) + "; or pass allow_stale=True to use "
                            + ("it" if len(texts) == 1 else "them") + " as made", products=tuple(stale),
                            param="allow_stale")


def use_product(store, *, kind: str, unit: str | None = None, quantity: str | None = None,
                name: str | None = None, folder=None, allow_stale: bool = False, required: bool = True,
                match=None) -> tuple[Product | None, list[str]]:
    """:func:`find_product`, then :func:`check_files` and :func:`check_fresh`: the product a command reads.

    Returns (product or None, warnings).
    """
    prod = find_product(store, kind=kind, unit=unit, quantity=quantity, name=name, folder=folder,
                        required=required, match=match)
    if prod is None:
        return None, []
    check_files(prod)
    return prod, check_fresh(store, prod, allow_stale=allow_stale)


# -- recording -------------------------------------------------------------------------------------------------------
def command_line(command: str, store, *args) -> str:
    """'hydroatlas COMMAND STORE ARGS...' quoted for a POSIX shell; None and False arguments are left out.

    An argument may be a ``(option, value)`` pair, given as ``option value`` when the value is not None or
    False (``option`` alone when it is True).
    """
    parts = ["hydroatlas", command, str(getattr(store, "location", store))]
    for a in args:
        if isinstance(a, tuple):
            opt, value = a
            if value is None or value is False:
                continue
            parts += [opt] if value is True else [opt, _plain(value)]
        elif a is not None and a is not False:
            parts.append(_plain(a))
    return shlex.join(parts)


def _plain(value) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, (list, tuple)):
        return ",".join(map(str, value))
    return str(value)


def policy_args(policy) -> list:
    """The command-line arguments of a selection policy (nothing for the default policy)."""
    if policy is None:
        return []
    args = [("--include-poor", bool(policy.include_poor)), ("--include-pumping-wells", bool(policy.include_pumping_wells))]
    if policy.exclude_wells:
        args.append(("--exclude-wells", ",".join(policy.exclude_wells)))
    return args


def product_name(store, base: str, primary_file) -> str:
    """A name for a new product: ``base``, or ``base_2``, ``base_3``... when ``base`` names a product whose
    first file is another file (made in another folder). A product remade onto its own files keeps its name."""
    target = str(Path(primary_file).resolve())
    n = 1
    while True:
        name = base if n == 1 else f"{base}_{n}"
        prod = get_product(store, name)
        if prod is None or (prod.files and str(Path(prod.files[0]).resolve()) == target):
            return name
        n += 1


def ensure_writable(store) -> None:
    """Take and release the store's write lock: a read-only or locked store fails here, before any work.

    The same lock as imports (``BEGIN IMMEDIATE``, waiting up to the busy timeout for another writer); a
    read-only file gives a one-line StoreError.
    """
    with _base(store).transaction():
        pass


def record_product(store, *, kind: str, name: str, files, command: str, unit: str | None = None,
                   quantity: str | None = None, value_unit: str | None = None, parameters: dict | None = None,
                   head_window: dict | None = None, selection: dict | None = None, inputs=(),
                   digests: dict | None = None, tables=None) -> Product:
    """Record a product in the store (replacing the record of the same name), under the write lock.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS` or a new kind (then give ``tables``).
    name : str
        Unique in the store (see :func:`product_name`).
    files : iterable of path
        The files written (kept as absolute paths); the first is the product's main file.
    command : str
        The command line that remakes it (:func:`command_line`).
    digests : dict, optional
        :func:`input_digests` taken before the store was read; default: taken now from ``tables`` or the
        tables declared for the kind.
    selection : dict, optional
        A sidecar's ``selection`` (policy and what it left out); the record keeps the policy and the number of
        entries left out.
    inputs : iterable of str
        Names of the products it was made from.

    Returns
    -------
    Product
    """
    import pandas as pd

    from . import __version__
    from .store.upgrade import HISTORY_INDEX_SQL

    if not isinstance(kind, str) or not kind.replace("_", "").isalnum() or not kind.islower():
        raise ParameterError(f"kind= must be a lower-case word such as 'surface'; got {kind!r}", param="kind")
    if not isinstance(name, str) or not name.strip():
        raise ParameterError("name= must be a non-empty text", param="name")
    files = [str(Path(f).resolve()) for f in files]
    if not files:
        raise ParameterError(f"product {name} has no files", param="files")
    if digests is None:
        digests = table_digests(store, tables if tables is not None else input_tables(kind, quantity))
    if selection is not None and "left_out" in selection:
        selection = {"policy": selection.get("policy"), "n_left_out": len(selection.get("left_out") or [])}
    row = {"product_id": uuid.uuid4().hex, "name": name, "kind": kind, "unit": unit, "quantity": quantity,
           "value_unit": value_unit, "parameters": _dumps(parameters or {}),
           "head_window": None if head_window is None else _dumps(head_window),
           "selection": None if selection is None else _dumps(selection), "code_version": __version__,
           "files": _dumps(files), "input_digests": _dumps(dict(digests)), "inputs": _dumps(list(dict.fromkeys(inputs))),
           "command": command, "created_utc": _now()}
    base = _base(store)
    with base.transaction():
        _conn(base).execute(HISTORY_INDEX_SQL)
        base.upsert(TABLE, pd.DataFrame([row]))
    return get_product(store, name)


def _dumps(value) -> str:
    return json.dumps(_plain_json(value), ensure_ascii=False, sort_keys=False, allow_nan=False)


def _plain_json(value):
    """Numpy scalars, tuples, paths and timestamps as plain JSON values; NaN and inf as None."""
    import math

    if isinstance(value, dict):
        return {str(k): _plain_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain_json(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return str(value)


# -- listing -------------------------------------------------------------------------------------------------------
LISTING_COLUMNS = ("name", "kind", "unit", "quantity", "value_unit", "created_utc", "stale", "changed_tables",
                   "missing_files", "inputs", "code_version", "command", "files")


def product_table(store, *, kind: str | None = None, unit: str | None = None):
    """The recorded products as a DataFrame (oldest first) with their freshness.

    ``stale`` is True when rows of a table the product was made from changed since (``changed_tables`` names
    them); ``missing_files`` counts its files that no longer exist.
    """
    import pandas as pd

    rows = []
    for prod in list_products(store, kind=kind, unit=unit):
        changed = changed_tables(store, prod)
        rows.append({"name": prod.name, "kind": prod.kind, "unit": prod.unit, "quantity": prod.quantity,
                     "value_unit": prod.value_unit, "created_utc": prod.created_utc, "stale": bool(changed),
                     "changed_tables": changed, "missing_files": len(prod.missing_files()),
                     "inputs": list(prod.inputs), "code_version": prod.code_version, "command": prod.command,
                     "files": list(prod.files), "parameters": prod.parameters, "head_window": prod.head_window,
                     "selection": prod.selection})
    return pd.DataFrame(rows, columns=list(LISTING_COLUMNS) + ["parameters", "head_window", "selection"])
