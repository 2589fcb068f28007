"""The model-grid builder (SPEC 2.10): units, picks, K tests and head surfaces in, :class:`ModelLayers` out.

Pure: pandas frames, numpy arrays and shapely geometries in, the same out; no store, no files. The workflow
(:func:`hydroatlas.workflows.model_grid`) reads the selection from the store, finds the head (and log-K)
surfaces, calls :func:`build_model_layers` and hands the result to the writers (NetCDF and plain arrays,
MODFLOW 6). The numerical steps themselves are in :mod:`hydroatlas.layering`; this module strings them together:

1. :class:`ModelGridOptions` checks the user's choices (cell, origin, shape, rotation, layers, K and thickness
   rules) on creation;
2. :func:`plan_layers` turns the units and picks into the sequence of units and the layers that hold them
   (left-out units merged into a neighbour);
3. :func:`grid_frame` places the grid (origin snapped to the cell, enough rows and columns to cover the
   domain or the wells);
4. :func:`build_model_layers` interpolates the contacts between units from the picks, applies the base rule,
   the minimum thickness and the unit extents, gives each layer its K_h and K_v, takes starting heads from
   the head surfaces and sets the cell types.

Lengths and elevations are in the store's length unit (``length_unit``), K in that unit per day, x and y in
the CRS unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import assign, layering
from .errors import InsufficientDataError, ParameterError

#: largest number of model cells (layers x rows x columns) unless ``max_cells`` says otherwise
MODEL_MAX_CELLS = 20_000_000
#: inverse-distance weighting of the contact surfaces (residuals from a least-squares plane)
CONTACT_IDW_POWER = 2.0
CONTACT_IDW_NEIGHBORS = 12
CONTACT_METHOD = ("each contact between units (a unit's top and bottom) interpolated on its own from the picked "
                  "elevations (ground_elev - depth) of the wells that give it: least-squares plane plus inverse-"
                  f"distance weighting (power {CONTACT_IDW_POWER:g}, {CONTACT_IDW_NEIGHBORS} nearest wells) of the "
                  "residuals, exact at the wells (to floating-point rounding); the plane is held flat beyond the "
                  "wells' bounding box; each contact kept at or below the one above, and a unit's top and bottom "
                  "made one outside its extent from the picks")
K_SOURCES = ("mean", "surface")


# -- the user's choices --------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class ModelGridOptions:
    """What a model grid is asked to be; checks itself on creation (:class:`ParameterError` naming the field).

    Parameters
    ----------
    cell : float
        Cell size in CRS units (square cells), > 0.
    origin : (x, y), optional
        Lower-left corner of the grid (required with a rotation; needs ``shape``). Default: snapped to whole
        multiples of ``cell`` below the domain's (or the wells') lower-left corner.
    shape : (rows, cols), optional
        Default: enough cells to cover the domain (or wells) extent.
    rotation : float
        Degrees counter-clockwise about the origin.
    layers : sequence of unit codes, optional
        In stratigraphic order, top first; default every unit with picks (see :func:`plan_layers`).
    kv_ratio : float
        K_h / K_v of a unit without vertical K tests (and K_h = K_v x ratio of a unit with vertical tests only).
    k_source : {'mean', 'surface'}
        K_h of a layer's unit from the geometric mean of its horizontal tests, or from its log-K surface.
    min_thickness : float
        Thinnest active cell (length unit); thinner cells are vertical pass-through cells (idomain -1).
    merge_down : bool
        Merge left-out units into the layer below instead of the layer above.
    base, base_thickness : float, optional
        Bottom of the lowest layer as an elevation, or as a thickness below its top (length unit); not both.
    max_cells : int, optional
        Largest layers x rows x columns (default :data:`MODEL_MAX_CELLS`).
    """

    cell: float
    origin: tuple | None = None
    shape: tuple | None = None
    rotation: float = 0.0
    layers: tuple | None = None
    kv_ratio: float = 10.0
    k_source: str = "mean"
    min_thickness: float = 1.0
    merge_down: bool = False
    base: float | None = None
    base_thickness: float | None = None
    max_cells: int | None = None

    def __post_init__(self):
        cell, kv_ratio, min_thickness = self.cell, self.kv_ratio, self.min_thickness
        base, base_thickness = self.base, self.base_thickness
        if not (isinstance(cell, (int, float)) and cell > 0):
            raise ParameterError(f"cell= must be > 0; got {cell}", param="cell")
        if self.rotation and self.origin is None:
            raise ParameterError("a rotated grid needs origin= (x, y), the lower-left corner it rotates about",
                                 param="origin")
        if not kv_ratio > 0:
            raise ParameterError(f"kv_ratio= must be > 0; got {kv_ratio}", param="kv_ratio")
        if not min_thickness > 0:
            raise ParameterError(f"min_thickness= must be > 0; got {min_thickness}", param="min_thickness")
        if self.k_source not in K_SOURCES:
            raise ParameterError(f"k_source= must be 'mean' or 'surface'; got {self.k_source!r}", param="k_source")
        if base is not None and base_thickness is not None:
            raise ParameterError("give base= or base_thickness=, not both", param=("base", "base_thickness"))
        if base is not None and not math.isfinite(base):
            raise ParameterError(f"base= must be a finite elevation; got {base}", param="base")
        if base_thickness is not None and not (math.isfinite(base_thickness) and base_thickness > 0):
            raise ParameterError(f"base_thickness= must be > 0; got {base_thickness}", param="base_thickness")
        if self.origin is not None:
            try:
                x0, y0 = (float(v) for v in self.origin)
            except (TypeError, ValueError):
                raise ParameterError(f"origin= must be two numbers (x, y); got {self.origin!r}",
                                     param="origin") from None
            object.__setattr__(self, "origin", (x0, y0))
            if self.shape is None:
                raise ParameterError("origin= needs shape= (rows, cols)", param=("origin", "shape"))
        if self.shape is not None:
            try:
                nrow, ncol = (int(v) for v in self.shape)
            except (TypeError, ValueError):
                raise ParameterError(f"shape= must be two whole numbers (rows, cols); got {self.shape!r}",
                                     param="shape") from None
            if nrow < 1 or ncol < 1:
                raise ParameterError(f"shape= must be at least (1, 1); got {self.shape}", param="shape")
            object.__setattr__(self, "shape", (nrow, ncol))
        if self.layers is not None:
            object.__setattr__(self, "layers", tuple(str(c) for c in self.layers))


# -- which units make which layer -------------------------------------------------------------------------------
def unit_members(units: pd.DataFrame, code: str) -> set[str]:
    """A unit code and the codes of all its sub-units (any depth), from the ``code`` and ``parent`` columns."""
    if code not in set(units["code"]):
        raise ParameterError(f"unit {code!r} is not one of the units: {', '.join(units['code'])}", param="layers")
    return {c for c, chain in assign.unit_ancestors(units).items() if c == code or code in chain}


@dataclass(frozen=True)
class LayerPlan:
    """The sequence of units and the layers that hold them (:func:`plan_layers`).

    Attributes
    ----------
    leaves : tuple of str
        The finest unit sequence, top first (sub-units instead of their parent); index ``j`` is unit ``j`` of
        :mod:`hydroatlas.layering` (contact ``j`` is its top).
    layers : tuple of str
        The unit code of each layer, top first.
    spans : tuple of (first, last)
        The leaf index range (inclusive) each layer's own unit covers.
    groups : tuple of (first, last)
        The leaf index range of each layer after merging (:func:`hydroatlas.layering.layer_groups`).
    merged_idx : tuple of tuple of int
        Leaf indices merged into each layer.
    above_idx, below_idx : tuple of int
        Leaves above the first and below the last layer (not in the model).
    merged : dict
        Layer code -> codes merged into it.
    notes : tuple of str
        What the plan rests on, in words.
    """

    leaves: tuple
    layers: tuple
    spans: tuple
    groups: tuple
    merged_idx: tuple
    above_idx: tuple
    below_idx: tuple
    merged: dict
    notes: tuple
    chains: dict = field(repr=False)

    def leaf_span(self, code: str) -> tuple[int, int]:
        """Leaf index range (inclusive) of a unit: itself if a leaf, else its sub-units (which must be adjacent)."""
        return _leaf_span(self.leaves, self.chains, code)


def _leaf_span(leaves, chains: dict, code: str) -> tuple[int, int]:
    idx = sorted(i for i, c in enumerate(leaves) if c == code or code in chains.get(c, ()))
    if not idx:
        raise ParameterError(f"unit {code} has no sub-units without sub-units of their own", param="layers")
    if idx != list(range(idx[0], idx[-1] + 1)):
        raise ParameterError(f"the sub-units of {code} are not next to each other in rank; choose them as layers",
                             param="layers")
    return idx[0], idx[-1]


def plan_layers(units: pd.DataFrame, picks: pd.DataFrame, *, layers=None, merge_down: bool = False) -> LayerPlan:
    """Which units become layers, and which left-out units each layer takes in.

    Parameters
    ----------
    units : DataFrame
        code, rank (1 = top), role, parent.
    picks : DataFrame
        well_id, unit, top_depth, bottom_depth (as imported: a parent's pick where sub-units are picked too is
        dropped here).
    layers : sequence of str, optional
        Unit codes in stratigraphic order, top first. Default: every unit with picks (a parent only where none
        of its sub-units is picked). A unit left out between two chosen ones is merged into the layer above
        (below with ``merge_down``); units above the first or below the last chosen one are not in the model.
    merge_down : bool

    Returns
    -------
    LayerPlan
    """
    units = units.sort_values("rank").reset_index(drop=True)
    picks_all = assign.finest_picks(picks, units)
    picked = set(picks_all["unit"])
    parents = set(units["parent"].dropna())
    leaves = tuple(c for c in units["code"] if c not in parents)
    chains = assign.unit_ancestors(units)
    if layers is None:
        layers = [c for c in units["code"] if c in picked
                  and not (c in parents and any(code in picked for code in unit_members(units, c) - {c}))]
        if not layers:
            raise ParameterError("there are no unit picks; a model grid needs them", param="picks")
    layers = [str(c) for c in layers]
    for code in layers:
        if not unit_members(units, code) & picked:
            raise ParameterError(f"unit {code} has no picks anywhere; its layer geometry is unknown", param="layers")
    spans = [_leaf_span(leaves, chains, c) for c in layers]
    rank = dict(zip(units["code"], units["rank"]))
    if len(set(layers)) != len(layers) or any(b[0] <= a[1] for a, b in zip(spans, spans[1:])):
        raise ParameterError(f"layers {','.join(layers)} are not in stratigraphic order (top first) or overlap: "
                             f"expected e.g. {','.join(sorted(dict.fromkeys(layers), key=rank.get))}",
                             param="layers")
    groups, merged_idx, above_idx, below_idx = layering.layer_groups(len(leaves), spans, merge_down=merge_down)
    merged = {code: [leaves[j] for j in m] for code, m in zip(layers, merged_idx) if m}
    notes = [f"layer geometry: {CONTACT_METHOD}"]
    if above_idx:
        notes.append(f"units above the first layer are not in the model: {', '.join(leaves[j] for j in above_idx)}; "
                     f"the model top is the top of {layers[0]}")
    if below_idx:
        notes.append(f"units below the last layer are not in the model: {', '.join(leaves[j] for j in below_idx)}")
    for code, m in merged.items():
        notes.append(f"{', '.join(m)} merged into layer {code} ({'below' if merge_down else 'above'} "
                     f"{'them' if len(m) > 1 else 'it'}): thickness-weighted arithmetic K_h, harmonic K_v")
    return LayerPlan(leaves, tuple(layers), tuple(spans), tuple(groups), tuple(tuple(m) for m in merged_idx),
                     tuple(above_idx), tuple(below_idx), merged, tuple(notes), chains)


# -- where the grid lies -------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class GridFrame:
    """A regular model grid's placement: lower-left corner, cell size, rows, columns, rotation (degrees CCW)."""

    x0: float
    y0: float
    cell: float
    nrow: int
    ncol: int
    rotation: float = 0.0

    def centres(self) -> tuple[np.ndarray, np.ndarray]:
        """x, y (nrow, ncol) of the cell centres; row index 0 is the far side from the origin."""
        return layering.grid_cell_centres(self.x0, self.y0, self.cell, self.nrow, self.ncol, self.rotation)


def grid_frame(options: ModelGridOptions, bounds, *, nlay: int) -> GridFrame:
    """Place the grid: ``options.origin``/``shape`` when given, else cover ``bounds`` with whole cells.

    Parameters
    ----------
    options : ModelGridOptions
    bounds : (xmin, ymin, xmax, ymax)
        The extent to cover (the domain polygon's, else the wells') in CRS units.
    nlay : int
        Number of layers, for the cell limit.

    Returns
    -------
    GridFrame
        Without an origin, the corner is snapped down to whole multiples of the cell.

    >>> grid_frame(ModelGridOptions(cell=100.0), (1050.0, 2010.0, 1390.0, 2200.0), nlay=1)
    GridFrame(x0=1000.0, y0=2000.0, cell=100.0, nrow=2, ncol=4, rotation=0.0)
    """
    cell = options.cell
    if options.origin is None:
        xmin, ymin, xmax, ymax = (float(v) for v in bounds)
        x0, y0 = math.floor(xmin / cell) * cell, math.floor(ymin / cell) * cell
        ncol = max(1, int(math.ceil((xmax - x0) / cell - 1e-9)))
        nrow = max(1, int(math.ceil((ymax - y0) / cell - 1e-9)))
    else:
        x0, y0 = options.origin
    if options.shape is not None:
        nrow, ncol = options.shape
    limit = options.max_cells or MODEL_MAX_CELLS
    if nrow * ncol * nlay > limit:
        raise ParameterError(f"{nlay} layers x {nrow} x {ncol} cells = {nrow * ncol * nlay:,} cells, "
                             f"more than the maximum of {limit:,}; choose a larger cell=", param="cell")
    return GridFrame(float(x0), float(y0), float(cell), int(nrow), int(ncol), float(options.rotation))


def sample_grid(grid, values, points) -> np.ndarray:
    """Bilinear sample of a north-up raster at points; NaN outside it or next to no-data.

    Parameters
    ----------
    grid : GridSpec-like
        Has ``x_centers()`` (ncols,) and ``y_centers()`` (nrows,, north first) in CRS units.
    values : array (nrows, ncols)
    points : array (p, 2)
        x, y in the same CRS.

    Returns
    -------
    array (p,)
    """
    from scipy.interpolate import RegularGridInterpolator

    xs = grid.x_centers()
    ys = grid.y_centers()
    f = RegularGridInterpolator((ys[::-1], xs), np.asarray(values, float)[::-1], bounds_error=False,
                                fill_value=np.nan)
    pts = np.asarray(points, float).reshape(-1, 2)
    return f(np.column_stack([pts[:, 1], pts[:, 0]]))


# -- the whole build -------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ModelBuild:
    """What :func:`build_model_layers` made.

    Attributes
    ----------
    model : ModelLayers
        Geometry, idomain, K, starting heads and cell types; its ``notes`` say what they rest on.
    plan : LayerPlan
    frame : GridFrame
    active : bool array (nrow, ncol)
        Cells inside the domain polygon (all without one).
    x, y : arrays (nrow, ncol)
        Cell centres in the CRS.
    thickness : array (nlay, nrow, ncol)
        Layer thickness (length unit).
    grid_info : dict
        The base rule, cells outside each unit's extent, pass-through cells per layer (for a manifest).
    k_info : dict
        Per layer (and merged unit): what K_h and K_v rest on.
    has_heads : list of bool
        Per layer: whether it had a head surface of its own.
    """

    model: layering.ModelLayers
    plan: LayerPlan
    frame: GridFrame
    active: np.ndarray
    x: np.ndarray
    y: np.ndarray
    thickness: np.ndarray
    grid_info: dict
    k_info: dict
    has_heads: list


def _well_contacts(plan: LayerPlan, units, picks, wells):
    """Contacts (nwell, n + 1) at the wells, their mismatch, and each leaf's presence frame."""
    rank = dict(zip(units["code"], units["rank"]))
    leaf_index = {c: i for i, c in enumerate(plan.leaves)}
    row_of = {w: i for i, w in enumerate(wells["well_id"])}
    n = len(plan.leaves)
    top_w = np.full((len(wells), n), np.nan)
    bot_w = np.full((len(wells), n), np.nan)
    known_w = np.zeros((len(wells), n), bool)
    p = assign.finest_picks(picks, units).merge(wells[["well_id", "ground_elev", "total_depth"]], on="well_id")
    for r in p.itertuples(index=False):
        if r.unit not in rank or r.well_id not in row_of:
            continue
        first, last = plan.leaf_span(r.unit) if r.unit not in leaf_index else (leaf_index[r.unit],) * 2
        i = row_of[r.well_id]
        ended = np.isfinite(r.total_depth) and r.bottom_depth >= r.total_depth - 1e-6
        if np.isnan(top_w[i, first]):
            top_w[i, first] = r.ground_elev - r.top_depth
        if np.isnan(bot_w[i, last]):
            bot_w[i, last] = r.ground_elev - r.bottom_depth
            known_w[i, last] = not ended
    located = wells[["well_id", "x", "y"]]
    presence = []
    pres_w = np.full((len(wells), n), -1, dtype="int8")
    for j, code in enumerate(plan.leaves):
        pres = assign.unit_presence(picks, located, units, code)
        presence.append(pres)
        flag = pres["present"]
        pres_w[:, j] = np.where(flag.isna(), -1, np.where(flag.fillna(False).astype(bool), 1, 0))
    contacts_w, mismatch = layering.well_contacts(wells["ground_elev"].to_numpy(float), top_w, bot_w, known_w,
                                                  pres_w)
    return contacts_w, mismatch, presence, p


def build_model_layers(options: ModelGridOptions, *, units: pd.DataFrame, picks: pd.DataFrame,
                       wells: pd.DataFrame, tests: pd.DataFrame, head_surfaces: dict, k_surfaces: dict | None = None,
                       domain=None, length_unit: str, crs=None, plan: LayerPlan | None = None,
                       heads_from: str = "the head surfaces given") -> ModelBuild:
    """A regular model grid with one layer per unit: geometry, idomain, K_h, K_v, starting heads, icelltype.

    Parameters
    ----------
    options : ModelGridOptions
    units : DataFrame
        code, rank, role, parent.
    picks : DataFrame
        well_id, unit, top_depth, bottom_depth (depths below ground, length unit).
    wells : DataFrame
        well_id, x, y (CRS), ground_elev (length unit above the datum), total_depth (NaN when unknown).
    tests : DataFrame
        The K tests that count: unit (the zone's unit), k_ms (K in m/s), orientation ('horizontal' or
        'vertical'; missing means horizontal).
    head_surfaces : dict
        Layer unit code -> (grid, head array (nrows, ncols)) of the unit's own head surface (length unit above
        the datum); ``grid`` has ``x_centers()``/``y_centers()`` (a :class:`hydroatlas.interp.grid.GridSpec`).
        A layer without one takes heads from its neighbours (:func:`hydroatlas.layering.starting_heads`).
    k_surfaces : dict, optional
        With ``options.k_source == 'surface'``: layer unit code -> (grid, K array in m/d) of its log-K surface.
    domain : shapely geometry, optional
        The model domain: its bounds place the grid (without ``options.origin``) and cells outside are inactive.
        Without it the wells' bounding box is covered and every cell is active.
    length_unit : {'m', 'ft'}
        The unit of depths, elevations and heads; K is written in ``length_unit``/d.
    crs : pyproj.CRS, optional
        Handed to the :class:`~hydroatlas.layering.ModelLayers`.
    plan : LayerPlan, optional
        From :func:`plan_layers` (made here from ``options.layers`` when None).
    heads_from : str
        Where the head surfaces came from, for the notes and messages (e.g. a folder).

    Returns
    -------
    ModelBuild

    Notes
    -----
    Each contact between successive units is interpolated from the picks of the wells that give it (exact at
    the wells); the ground is the top of the first unit; a unit absent at a well
    (:func:`hydroatlas.assign.unit_presence`) has its top and bottom at one elevation there and zero thickness
    outside its extent. Layers are never stacked down from the ground, so leaving a unit out or pinching one
    out moves no other layer. Where no well reaches the base of the lowest unit and neither ``base`` nor
    ``base_thickness`` is given, the lowest layer's bottom lies the mean penetrated thickness below its top,
    with a warning in the notes.
    """
    from .quantities import convert, k_from_ms

    L = length_unit
    k_unit = f"{L}/d"
    units = units.sort_values("rank").reset_index(drop=True)
    role_of = dict(zip(units["code"], units["role"]))
    if plan is None:
        plan = plan_layers(units, picks, layers=options.layers, merge_down=options.merge_down)
    layers, groups, leaves, spans = list(plan.layers), plan.groups, plan.leaves, plan.spans
    notes = list(plan.notes)
    kv_ratio, min_thickness = options.kv_ratio, options.min_thickness
    base, base_thickness = options.base, options.base_thickness
    # grid geometry
    if domain is not None:
        bounds = domain.bounds
    else:
        bounds = (*wells[["x", "y"]].min().to_numpy(float), *wells[["x", "y"]].max().to_numpy(float))
    frame = grid_frame(options, bounds, nlay=len(layers))
    nrow, ncol = frame.nrow, frame.ncol
    xc, yc = frame.centres()
    pts = np.column_stack([xc.ravel(), yc.ravel()])
    if domain is not None:
        import shapely

        active = shapely.contains_xy(domain, pts[:, 0], pts[:, 1]).reshape(nrow, ncol)
    else:
        active = np.ones((nrow, ncol), bool)
    if not active.any():
        raise ParameterError("no cell of the grid lies inside the domain polygon")
    # contacts at the wells, from the picks and the presence of each unit, then on the grid
    contacts_w, mismatch, presence, p = _well_contacts(plan, units, picks, wells)
    wxy = wells[["x", "y"]].to_numpy(float)
    c_first, c_last = groups[0][0], groups[-1][1] + 1
    raw = np.stack([layering.interpolate_surface(wxy, contacts_w[:, c], pts, power=CONTACT_IDW_POWER,
                                                 neighbors=CONTACT_IDW_NEIGHBORS).reshape(nrow, ncol)
                    for c in range(c_last + 1)])
    inside = np.stack([assign.inside_extent(presence[j], pts).reshape(nrow, ncol) for j in range(c_last)])
    outside_extent = {leaves[j]: int((~inside[j] & active).sum()) for j in range(c_first, c_last)}
    with_data = np.isfinite(contacts_w).any(axis=0)
    boundaries = {groups[0][0]} | {last + 1 for _, last in groups[:-1]}
    for c in sorted(boundaries):
        if c > 0 and not with_data[c]:
            raise InsufficientDataError(f"no well gives the contact between {leaves[c - 1]} and {leaves[c]} (the "
                                        f"picks of {leaves[c - 1]} all end at the wells' total depth and no well "
                                        f"has a pick of {leaves[c]}); the layers there are unknown")
    contacts = layering.order_contacts(raw, inside)
    # the bottom of the lowest layer: picked, or base / base_thickness, or the stated default
    base_unit = leaves[c_last - 1]
    ceiling = contacts[c_first].copy()
    for c in range(c_first + 1, c_last):
        ceiling = np.where(np.isfinite(contacts[c]), contacts[c], ceiling)
    n_base = int(np.isfinite(contacts_w[:, c_last]).sum())
    rule = None
    if base is not None:
        bottom = np.minimum(base, ceiling)
        rule = f"--base {base:g} {L}"
    elif base_thickness is not None:
        bottom = ceiling - base_thickness
        rule = f"--base-thickness {base_thickness:g} {L}"
    elif not with_data[c_last]:
        here = p[p["unit"].isin(unit_members(units, base_unit))]
        pen = (here["bottom_depth"] - here["top_depth"]).to_numpy(float)
        if pen.size == 0 or not np.isfinite(pen).any():
            raise InsufficientDataError(f"the base of {base_unit} is unknown: give base= (an elevation) or "
                                        "base_thickness=", param=("base", "base_thickness"))
        t_mean = float(np.nanmean(pen))
        bottom = ceiling - t_mean
        rule = f"default: the mean penetrated thickness of {base_unit}, {t_mean:.4g} {L}"
        notes.append(f"warning: no well reaches the base of {base_unit} (every pick of it ends at the well's total "
                     f"depth); the lowest layer's bottom lies the mean penetrated thickness ({t_mean:.4g} {L}, a lower "
                     "bound of the true thickness) below its top; give --base or --base-thickness to set it")
    if rule is not None:
        bottom = np.where(inside[c_last - 1], bottom, ceiling)
        contacts[c_last] = np.minimum(bottom, ceiling)
        if base is not None or base_thickness is not None:
            notes.append(f"bottom of the lowest layer ({base_unit}) from {rule}"
                         + (f"; it replaces the base picked at {n_base} well(s)" if n_base else ""))
    for c in range(c_first + 1, c_last):  # a contact inside a merged layer that no well gives: zero thickness
        miss = ~np.isfinite(contacts[c])
        if miss.any():
            contacts[c] = np.where(miss, contacts[c - 1], contacts[c])
            notes.append(f"no well gives the top of {leaves[c]}: inside its layer it counts as zero thickness "
                         "for the layer K")
    off = mismatch[:, c_first:c_last + 1] > assign.EXTENT_TOLERANCE
    if off.any():
        notes.append(f"{int(off.any(axis=1).sum())} well(s) have picks that leave a gap or overlap at a contact "
                     f"(largest {float(mismatch[:, c_first:c_last + 1].max()):.4g} {L}); the contact is the mean there")
    top, botm, idomain, emptied = layering.layer_geometry(contacts, groups, min_thickness=min_thickness,
                                                          active=active)
    thick = np.concatenate([top[None], botm[:-1]]) - botm
    pass_through = {code: int((idomain[k] == layering.PASS_THROUGH).sum()) for k, code in enumerate(layers)}
    for code, count in pass_through.items():
        if count:
            notes.append(f"{code}: {count} cell(s) thinner than {min_thickness:g} {L} or where the unit is absent "
                         "are vertical pass-through cells (idomain -1) with their true elevations")
    if emptied:
        notes.append(f"{emptied} column(s) inside the domain have no layer as thick as {min_thickness:g} {L}: "
                     "made inactive (idomain 0)")
    # hydraulic conductivity per unit: K_h from horizontal tests, K_v from vertical tests or the ratio
    orientation = tests["orientation"] if "orientation" in tests.columns else pd.Series("horizontal",
                                                                                          index=tests.index)
    tests = tests.assign(orientation=orientation.fillna("horizontal"))
    k_info = {}

    def unit_k(code, *, primary: bool):
        """(K_h, K_v) of a unit in k_unit (arrays (nrow, ncol)) and what they rest on; None if no tests."""
        mine = tests[tests["unit"].isin(unit_members(units, code))]
        horiz = mine.loc[mine["orientation"] == "horizontal", "k_ms"].to_numpy(float)
        vert = mine.loc[mine["orientation"] == "vertical", "k_ms"].to_numpy(float)
        gmean = (lambda v: float(k_from_ms(10.0 ** np.mean(np.log10(v)), k_unit)))
        info = {"n_horizontal_tests": int(horiz.size), "n_vertical_tests": int(vert.size)}
        if horiz.size:
            kh = np.full((nrow, ncol), gmean(horiz))
            info["k_h"] = f"geometric mean of {horiz.size} horizontal test(s)"
        elif vert.size:
            kh = np.full((nrow, ncol), gmean(vert) * kv_ratio)
            info["k_h"] = f"no horizontal tests: K_v x --kv-ratio {kv_ratio:g}"
        else:
            return None, info
        if primary and options.k_source == "surface":
            if not k_surfaces or code not in k_surfaces:
                raise ParameterError(f"k_source='surface' needs the log-K surface of {code} in k_surfaces=",
                                     param="k_surfaces")
            grid_s, k_surface_md = k_surfaces[code][:2]
            k_md = 10.0 ** sample_grid(grid_s, np.log10(k_surface_md), pts).reshape(nrow, ncol)
            kh = np.where(np.isfinite(k_md), convert(k_md, "m/d", k_unit, "hydraulic conductivity"), kh)
            info["k_h"] = "log-K surface sampled at the cells (the test mean where it has no value)"
        if vert.size:
            kv = np.full((nrow, ncol), gmean(vert))
            info["k_v"] = f"geometric mean of {vert.size} vertical test(s)"
        else:
            kv = kh / kv_ratio
            info["k_v"] = f"K_h / --kv-ratio {kv_ratio:g} (no vertical tests)"
        return (kh, kv), info

    kh_layers, kv_layers = [], []
    for k, (code, (first, last)) in enumerate(zip(layers, groups)):
        own, info = unit_k(code, primary=True)
        if own is None:
            raise InsufficientDataError(f"unit {code} has no K tests; its layer K is unknown: import tests of it, or "
                                        "leave it out of layers= (a unit between two layers joins one of them)",
                                        param="layers")
        k_info[code] = info
        parts_b, parts_h, parts_v = [], [], []
        own_first, own_last = spans[k]
        parts_b.append(contacts[own_first] - contacts[own_last + 1])
        parts_h.append(own[0])
        parts_v.append(own[1])
        for j in plan.merged_idx[k]:
            got, minfo = unit_k(leaves[j], primary=False)
            if got is None:
                got = own
                notes.append(f"warning: {leaves[j]} (merged into layer {code}) has no K tests: it takes the K of "
                             f"{code}; choose the layers so that it joins a unit of its kind (--merge-down)")
            k_info[f"{leaves[j]} (merged into {code})"] = minfo
            parts_b.append(contacts[j] - contacts[j + 1])
            parts_h.append(got[0])
            parts_v.append(got[1])
        kh, kv = layering.effective_k(np.stack(parts_b), np.stack(parts_h), np.stack(parts_v), primary=0)
        kh_layers.append(kh)
        kv_layers.append(kv)
        if role_of.get(code) in layering.CONFINING_ROLES and not info["n_vertical_tests"]:
            notes.append(f"{code} ({role_of.get(code)}): no vertical K tests (column orientation); "
                         f"K_v = K_h / {kv_ratio:g}")
    # starting heads: each layer's own head surface, masked outside its unit's extent; aquitards and layers
    # without a surface lie between the layers with heads above and below
    roles = [role_of.get(c, "other") for c in layers]
    confining = np.array([r in layering.CONFINING_ROLES for r in roles])
    own_heads = np.full((len(layers), nrow, ncol), np.nan)
    have = []
    for k, code in enumerate(layers):
        if code not in head_surfaces:
            have.append(False)
            continue
        grid_s, h = head_surfaces[code][:2]
        hv = sample_grid(grid_s, h, pts).reshape(nrow, ncol)
        own_first, own_last = spans[k]
        in_unit = inside[own_first:own_last + 1].any(axis=0)
        own_heads[k] = np.where(in_unit, hv, np.nan)
        have.append(True)
    if not any(have):
        raise ParameterError(f"no head surface for any layer ({', '.join(layers)}) in head_surfaces=",
                             param="head_surfaces")
    if not np.isfinite(own_heads).any():
        raise InsufficientDataError(f"the head surfaces in {heads_from} have no value inside the grid")
    strt, strt_source = layering.starting_heads(own_heads, top, botm, confining=confining)
    n_active = int(active.sum())
    for k, code in enumerate(layers):
        counts = {c: int((strt_source[k][active] == c).sum()) for c in layering.STRT_SOURCES}
        if not have[k]:
            notes.append(f"{code} has no head surface of its own (none in {heads_from}): its starting heads are "
                         f"{strt_words(counts)}")
        elif confining[k]:
            notes.append(f"{code} ({roles[k]}): starting heads {strt_words(counts)}; its own head surface is used "
                         "only where a side has no head")
        elif counts[layering.STRT_OWN] < n_active:
            notes.append(f"{code}: starting heads from its own head surface in {counts[layering.STRT_OWN]} of "
                         f"{n_active} active columns; elsewhere {strt_words(counts, skip_own=True)}")
    icelltype, icell_why = layering.cell_types(roles, strt, top, botm, idomain)
    notes += [f"{code}: icelltype {int(t)} ({why})" for code, t, why in zip(layers, icelltype, icell_why)]
    model = layering.ModelLayers(
        units=list(layers), roles=roles, top=top, botm=botm, idomain=idomain, k=np.stack(kh_layers),
        k33=np.stack(kv_layers), strt=strt, icelltype=icelltype, length_unit=L, k_unit=k_unit, time_unit="days",
        merged=plan.merged, notes=notes, x0=frame.x0, y0=frame.y0, cell=float(frame.cell), nrow=nrow, ncol=ncol,
        rotation=float(frame.rotation), crs=crs, strt_source=strt_source)
    grid_info = {"min_thickness": min_thickness, "kv_ratio": kv_ratio, "k_source": options.k_source,
                 "merge_down": bool(options.merge_down), "base": base, "base_thickness": base_thickness,
                 "base_rule": rule or f"picked at {n_base} well(s)",
                 "cells_outside_unit_extent": outside_extent, "pass_through_cells": pass_through}
    return ModelBuild(model=model, plan=plan, frame=frame, active=active, x=xc, y=yc, thickness=thick,
                      grid_info=grid_info, k_info=k_info, has_heads=have)


def strt_words(counts: dict, *, skip_own: bool = False) -> str:
    """Where a layer's starting heads come from, in words with cell counts (active columns).

    >>> strt_words({layering.STRT_OWN: 3, layering.STRT_BETWEEN: 0, layering.STRT_ONE_SIDE: 2,
    ...             layering.STRT_MEAN: 0})
    'from its own head surface in 3 cell(s); those of the nearest layer with heads (one side only) in 2 cell(s)'
    """
    words = {layering.STRT_OWN: "from its own head surface",
             layering.STRT_BETWEEN: "linear in elevation between the layers with heads above and below",
             layering.STRT_ONE_SIDE: "those of the nearest layer with heads (one side only)",
             layering.STRT_MEAN: "the layer's mean (no head in any layer)"}
    parts = [f"{words[c]} in {v} cell(s)" for c, v in counts.items()
             if v and not (skip_own and c == layering.STRT_OWN)]
    return "; ".join(parts) if parts else "none in the active cells"
