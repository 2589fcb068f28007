"""Model layers from unit surfaces (SPEC 2.10): the numeric core behind ``hydroatlas grid``.

Pure functions on numpy arrays and plain values: no store, no files. :func:`hydroatlas.modelbuild.build_model_layers`
strings them together into a :class:`ModelLayers`; the workflow (:func:`hydroatlas.workflows.model_grid`) reads the
picks, K tests and head surfaces, calls it and hands the result to the writers (NetCDF, plain arrays, MODFLOW 6).

Geometry in one paragraph. The units of the store, top first, are separated by *contacts*: contact ``j`` is
the top of unit ``j`` and contact ``n`` the bottom of the last unit; contact 0 is the ground. At each well the
picks give the elevation (``ground_elev - depth``) of the contacts they touch (:func:`well_contacts`); a unit
that the picks show absent makes its top and bottom one contact. Each contact is interpolated on its own from
the wells that give it (:func:`interpolate_surface`: a least-squares plane plus inverse-distance weighting of the
residuals, exact at the wells), then the contacts are put in order (:func:`order_contacts`: each at or below
the one above, and a unit has zero thickness outside its extent). A model layer runs from the contact at the top
of its unit to the contact at its bottom (:func:`layer_geometry`), so choosing a subset of units never moves a
layer, and a unit thinner than the minimum becomes a vertical pass-through cell (``idomain = -1``) without
moving any other layer.

Lengths are in the store's length unit, K in that unit per day, heads in the length unit above the datum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import InsufficientDataError, ParameterError

#: idomain values (MODFLOW 6 convention)
ACTIVE, INACTIVE, PASS_THROUGH = 1, 0, -1
#: unit roles whose layers are confined (icelltype 0) and whose starting heads lie between their neighbours'
CONFINING_ROLES = frozenset({"aquitard", "confining"})
#: where a starting head comes from (``ModelLayers.strt_source``)
STRT_OWN, STRT_BETWEEN, STRT_ONE_SIDE, STRT_MEAN = 0, 1, 2, 3
STRT_SOURCES = {STRT_OWN: "the unit's own head surface",
                STRT_BETWEEN: "linear in elevation between the layers with heads above and below",
                STRT_ONE_SIDE: "the head of the nearest layer with heads (above or below only)",
                STRT_MEAN: "the layer's mean starting head (no layer has a head at this cell)"}
MODEL_LENGTH_UNITS = ("m", "ft")


# -- the value object handed to the writers --------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class ModelLayers:
    """Layer geometry, K and starting heads of a model grid, in the store's units.

    Parameters
    ----------
    units : list of str
        Unit code of each layer, top first (nlay).
    roles : list of str
        Role of each layer's unit: aquifer, aquitard, confining or other.
    top : array (nrow, ncol)
        Elevation of the top of layer 1 (the top of the first chosen unit; the ground where it is the top unit).
    botm : array (nlay, nrow, ncol)
        Elevation of the bottom of each layer; the top of layer k + 1 is the bottom of layer k.
    idomain : int array (nlay, nrow, ncol)
        1 active, 0 outside the model domain, -1 vertical pass-through (the unit is absent or thinner than the
        minimum thickness; MODFLOW 6 removes the cell and connects the cells above and below it).
    k, k33 : arrays (nlay, nrow, ncol)
        Horizontal and vertical hydraulic conductivity in ``k_unit``.
    strt : array (nlay, nrow, ncol)
        Starting head (length unit above the vertical datum).
    icelltype : int array (nlay,)
        0 confined, 1 convertible (see :func:`cell_types`).
    length_unit : {'m', 'ft'}
        The store's length unit: of the elevations, heads and the grid's vertical axis.
    k_unit : str
        ``length_unit`` per day: 'm/d' or 'ft/d'.
    time_unit : str
        'days'.
    merged : dict
        Layer unit code -> list of the omitted unit codes merged into that layer.
    notes : list of str
        What the arrays rest on: defaults used, units without heads of their own, pass-through cells, ...
    x0, y0 : float
        Lower-left corner of the grid in the CRS.
    cell : float
        Cell size in CRS units (square cells).
    nrow, ncol : int
        Rows and columns; row 1 (index 0) is the row farthest from the origin along the grid's y axis.
    rotation : float
        Degrees counter-clockwise about the lower-left corner.
    crs : pyproj.CRS
        The store's horizontal CRS.
    strt_source : int array (nlay, nrow, ncol), optional
        Where each starting head comes from (:data:`STRT_SOURCES`).
    """

    units: list
    roles: list
    top: np.ndarray
    botm: np.ndarray
    idomain: np.ndarray
    k: np.ndarray
    k33: np.ndarray
    strt: np.ndarray
    icelltype: np.ndarray
    length_unit: str
    k_unit: str
    time_unit: str = "days"
    merged: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    x0: float
    y0: float
    cell: float
    nrow: int
    ncol: int
    rotation: float = 0.0
    crs: object = None
    strt_source: np.ndarray | None = None

    def __post_init__(self):
        def put(name, value):
            object.__setattr__(self, name, value)

        put("units", [str(u) for u in self.units])
        put("roles", [str(r) for r in self.roles])
        nlay = len(self.units)
        if nlay < 1:
            raise ParameterError("a model needs at least one layer")
        if len(self.roles) != nlay:
            raise ParameterError(f"{len(self.roles)} roles for {nlay} layers")
        if self.length_unit not in MODEL_LENGTH_UNITS:
            raise ParameterError(f"length_unit must be one of {', '.join(MODEL_LENGTH_UNITS)}; "
                                 f"got {self.length_unit!r}")
        if self.k_unit != f"{self.length_unit}/d":
            raise ParameterError(f"k_unit must be {self.length_unit}/d for a {self.length_unit} model; "
                                 f"got {self.k_unit!r}")
        if self.time_unit != "days":
            raise ParameterError(f"time_unit must be 'days'; got {self.time_unit!r}")
        if not (isinstance(self.cell, (int, float, np.number)) and math.isfinite(self.cell) and self.cell > 0):
            raise ParameterError(f"cell must be > 0; got {self.cell}")
        for name in ("x0", "y0", "rotation"):
            if not math.isfinite(float(getattr(self, name))):
                raise ParameterError(f"{name} must be finite; got {getattr(self, name)}")
        nrow, ncol = int(self.nrow), int(self.ncol)
        put("nrow", nrow)
        put("ncol", ncol)
        shapes = {"top": (nrow, ncol), "icelltype": (nlay,)}
        for name in ("top", "botm", "idomain", "k", "k33", "strt", "icelltype"):
            arr = np.asarray(getattr(self, name))
            want = shapes.get(name, (nlay, nrow, ncol))
            if arr.shape != want:
                raise ParameterError(f"{name} has shape {arr.shape}; expected {want}")
            put(name, arr)
        if not np.isin(self.idomain, (ACTIVE, INACTIVE, PASS_THROUGH)).all():
            raise ParameterError("idomain holds values other than -1, 0 and 1")
        if not np.isin(self.icelltype, (0, 1)).all():
            raise ParameterError("icelltype holds values other than 0 and 1")
        put("idomain", self.idomain.astype("int32"))
        put("icelltype", self.icelltype.astype("int32"))
        live = self.idomain == ACTIVE
        thick = self.thickness
        if not (thick[live] > 0).all():
            raise ParameterError("an active cell (idomain 1) has zero or negative thickness")
        if (thick[self.idomain == PASS_THROUGH] < 0).any():
            raise ParameterError("a pass-through cell (idomain -1) has a bottom above its top")
        for name in ("k", "k33"):
            v = getattr(self, name)[live]
            if not (np.isfinite(v) & (v > 0)).all():
                raise ParameterError(f"{name} must be finite and > 0 in every active cell")
        if not np.isfinite(self.strt[live]).all():
            raise ParameterError("strt must be finite in every active cell")
        unknown = set(self.merged) - set(self.units)
        if unknown:
            raise ParameterError(f"merged names units that are not layers: {', '.join(sorted(unknown))}")
        put("merged", {str(k): [str(c) for c in v] for k, v in self.merged.items()})
        put("notes", [str(n) for n in self.notes])
        if self.strt_source is not None:
            src = np.asarray(self.strt_source)
            if src.shape != (nlay, nrow, ncol):
                raise ParameterError(f"strt_source has shape {src.shape}; expected {(nlay, nrow, ncol)}")
            put("strt_source", src.astype("int8"))

    @property
    def nlay(self) -> int:
        return len(self.units)

    @property
    def layer_top(self) -> np.ndarray:
        """Elevation of the top of every layer (nlay, nrow, ncol): ``top``, then the bottom of the layer above."""
        return np.concatenate([self.top[None], self.botm[:-1]], axis=0)

    @property
    def thickness(self) -> np.ndarray:
        """Layer thickness (nlay, nrow, ncol) in the length unit; zero where a unit is absent."""
        return self.layer_top - self.botm

    def cell_centres(self) -> tuple[np.ndarray, np.ndarray]:
        """x, y (nrow, ncol) of the cell centres in the CRS; row index 0 is the far side from the origin."""
        return grid_cell_centres(self.x0, self.y0, self.cell, self.nrow, self.ncol, self.rotation)


def grid_cell_centres(x0: float, y0: float, cell: float, nrow: int, ncol: int,
                      rotation: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre coordinates (nrow, ncol) of a regular grid with its lower-left corner at (x0, y0).

    Row index 0 is the row farthest from the origin along the grid's y axis (north when ``rotation`` is 0);
    ``rotation`` is in degrees counter-clockwise about the origin.

    >>> x, y = grid_cell_centres(0.0, 0.0, 10.0, 2, 3)
    >>> x[0].tolist(), y[:, 0].tolist()
    ([5.0, 15.0, 25.0], [15.0, 5.0])
    """
    t = math.radians(float(rotation))
    u, v = np.meshgrid((np.arange(ncol) + 0.5) * cell, (nrow - np.arange(nrow) - 0.5) * cell)
    return x0 + u * math.cos(t) - v * math.sin(t), y0 + u * math.sin(t) + v * math.cos(t)


# -- contacts at the wells --------------------------------------------------------------------------------
def well_contacts(ground, top, bottom, bottom_known, presence) -> tuple[np.ndarray, np.ndarray]:
    """Elevation of every contact between successive units at each well, from the well's picks.

    Contact ``j`` is the top of unit ``j`` (units top first, ``j = 0 .. n-1``) and contact ``n`` the bottom of
    the last unit; contact 0 is the ground surface. A pick gives its unit's top contact and, unless it ends at
    the well's total depth, its bottom contact. A unit absent at the well (``presence`` 0) has its top and
    bottom contacts at one elevation, given by the picks next to it (or the ground). Picks that give one
    contact different elevations (an unlogged gap, an overlap) are averaged; ``mismatch`` says by how much they
    disagree.

    Parameters
    ----------
    ground : array (nwell,)
        Ground elevation of each well.
    top, bottom : arrays (nwell, n)
        Elevations of the top and bottom of each unit's pick (``ground_elev - depth``); NaN without a pick.
    bottom_known : bool array (nwell, n)
        False where the pick ends at the well's total depth (drilling stopped in the unit).
    presence : int array (nwell, n)
        1 present, 0 absent, -1 unknown (:func:`hydroatlas.assign.unit_presence`).

    Returns
    -------
    contacts : array (nwell, n + 1)
        Elevation of each contact; NaN where the well does not tell.
    mismatch : array (nwell, n + 1)
        Largest difference between the picks that give a contact (0 where they agree or only one gives it).

    Examples
    --------
    One well, ground 100, unit A 0-10 m deep, unit B absent, unit C from 10 m to the total depth:

    >>> c, _ = well_contacts([100.0], [[100.0, np.nan, 90.0]], [[90.0, np.nan, 50.0]],
    ...                      [[True, False, False]], [[1, 0, 1]])
    >>> c.tolist()
    [[100.0, 90.0, 90.0, nan]]
    """
    ground = np.asarray(ground, float).reshape(-1)
    top = np.atleast_2d(np.asarray(top, float))
    bottom = np.atleast_2d(np.asarray(bottom, float))
    known = np.atleast_2d(np.asarray(bottom_known, bool))
    pres = np.atleast_2d(np.asarray(presence))
    nwell, n = top.shape
    for name, arr in (("bottom", bottom), ("bottom_known", known), ("presence", pres)):
        if arr.shape != (nwell, n):
            raise ParameterError(f"{name} has shape {arr.shape}; expected {(nwell, n)} like top")
    if ground.shape != (nwell,):
        raise ParameterError(f"ground has shape {ground.shape}; expected ({nwell},)")
    # contacts j and j + 1 are one where unit j is absent: label runs of linked contacts
    starts = np.concatenate([np.ones((nwell, 1), bool), pres != 0], axis=1)
    label = np.cumsum(starts, axis=1) - 1  # (nwell, n + 1), labels 0 .. n
    cand = np.full((nwell, n + 1, 2), np.nan)
    cand[:, :n, 0] = top
    cand[:, 1:, 1] = np.where(known, bottom, np.nan)
    flat = (np.arange(nwell)[:, None] * (n + 1) + label)  # (nwell, n + 1)
    idx = np.repeat(flat[:, :, None], 2, axis=2).ravel()
    vals = cand.ravel()
    ok = np.isfinite(vals)
    size = nwell * (n + 1)
    total = np.zeros(size)
    count = np.zeros(size)
    hi = np.full(size, -np.inf)
    lo = np.full(size, np.inf)
    np.add.at(total, idx[ok], vals[ok])
    np.add.at(count, idx[ok], 1.0)
    np.maximum.at(hi, idx[ok], vals[ok])
    np.minimum.at(lo, idx[ok], vals[ok])
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    spread = np.where(count > 1, hi - lo, 0.0)
    # the group of contact 0 is the ground surface, whatever the picks say
    ground_group = np.arange(nwell) * (n + 1)
    mean[ground_group] = ground
    spread[ground_group] = 0.0
    return mean[flat], spread[flat]


# -- surfaces ----------------------------------------------------------------------------------------------
def interpolate_surface(xy, z, points, *, power: float = 2.0, neighbors: int | None = 12,
                        trend: bool = True) -> np.ndarray:
    """A surface through scattered elevations, exact at the data points.

    With ``trend`` and at least three points not on one line, a least-squares plane is fitted and the
    residuals are interpolated by inverse-distance weighting (:class:`hydroatlas.interp.IDW`, exact at the
    data points); the plane is evaluated at the point nearest to each target inside the data's bounding box,
    so it is flat beyond the data instead of running on. Otherwise plain IDW. At a data point the estimate
    is the datum itself (to floating-point rounding, about 1e-9 of the values).

    Parameters
    ----------
    xy : array (m, 2)
        Data locations; rows with a NaN ``z`` are dropped.
    z : array (m,)
        Elevations.
    points : array (p, 2)
        Where to estimate.

    Returns
    -------
    array (p,)
        Estimates; all NaN when no datum is finite.

    Examples
    --------
    >>> xy = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [10.0, 10.0]])
    >>> z = 100.0 - 0.5 * xy[:, 0] + 0.1 * xy[:, 1]
    >>> interpolate_surface(xy, z, np.array([[5.0, 5.0], [10.0, 0.0]])).round(6).tolist()
    [98.0, 95.0]
    """
    from .interp import IDW

    xy = np.asarray(xy, float).reshape(-1, 2)
    z = np.asarray(z, float).reshape(-1)
    pts = np.asarray(points, float).reshape(-1, 2)
    if len(xy) != len(z):
        raise ParameterError(f"xy has {len(xy)} points and z {len(z)} values")
    keep = np.isfinite(z) & np.isfinite(xy).all(axis=1)
    xy, z = xy[keep], z[keep]
    if len(z) == 0:
        return np.full(len(pts), np.nan)
    plane = np.zeros(3)
    centre = xy.mean(axis=0)
    if trend and len(z) >= 3:
        design = np.column_stack([np.ones(len(z)), xy - centre])
        if np.linalg.matrix_rank(design) == 3:
            plane = np.linalg.lstsq(design, z, rcond=None)[0]
    lo, hi = xy.min(axis=0), xy.max(axis=0)

    def trend_at(p):
        q = np.clip(p, lo, hi) - centre
        return plane[0] + q[:, 0] * plane[1] + q[:, 1] * plane[2]

    resid = z - trend_at(xy)
    model = IDW(power, neighbors=neighbors).fit(xy, resid)
    return trend_at(pts) + model.predict(pts)


def order_contacts(surfaces, inside=None) -> np.ndarray:
    """Contacts made consistent: each at or below the contact above; zero thickness outside a unit's extent.

    Parameters
    ----------
    surfaces : array (n + 1, ...)
        Interpolated contacts, top first (contact ``j`` is the top of unit ``j``); NaN where unknown (a
        contact no well gives stays NaN and the next one is compared with the last known one above).
    inside : bool array (n, ...), optional
        True where unit ``j`` may be present (inside its extent); outside, its bottom contact is set to its
        top contact.

    Returns
    -------
    array like ``surfaces``
        Contact 0 unchanged; every other contact moved up where it lay above the one above it (never down),
        so that at a data point where the contacts were already in order nothing moves.
    """
    s = np.array(surfaces, float, copy=True)
    n = s.shape[0] - 1
    if inside is not None:
        inside = np.asarray(inside, bool)
        if inside.shape != (n,) + s.shape[1:]:
            raise ParameterError(f"inside has shape {inside.shape}; expected {(n,) + s.shape[1:]}")
    ceiling = s[0].copy()
    for j in range(n):
        lower = s[j + 1]
        if inside is not None:
            lower = np.where(inside[j] | ~np.isfinite(ceiling), lower, ceiling)
        both = np.isfinite(lower) & np.isfinite(ceiling)
        lower = np.where(both, np.minimum(lower, ceiling), lower)
        s[j + 1] = lower
        ceiling = np.where(np.isfinite(lower), lower, ceiling)
    return s


# -- layers -------------------------------------------------------------------------------------------------
def layer_groups(n: int, chosen, *, merge_down: bool = False):
    """Which units each layer holds when only some units are chosen as layers.

    Parameters
    ----------
    n : int
        Number of units (top first).
    chosen : list of (first, last)
        The unit index range (inclusive) of each chosen layer, top first, not overlapping.
    merge_down : bool
        An omitted unit between two chosen ones joins the layer below instead of the layer above.

    Returns
    -------
    groups : list of (first, last)
        Unit index range of each layer after merging.
    merged : list of list of int
        The omitted unit indices merged into each layer.
    above, below : list of int
        Omitted units above the first and below the last layer (not in the model).

    >>> layer_groups(5, [(1, 1), (3, 3)])
    ([(1, 2), (3, 3)], [[2], []], [0], [4])
    >>> layer_groups(5, [(1, 1), (3, 3)], merge_down=True)
    ([(1, 1), (2, 3)], [[], [2]], [0], [4])
    """
    chosen = [(int(a), int(b)) for a, b in chosen]
    if not chosen:
        raise ParameterError("choose at least one layer")
    for (a, b), nxt in zip(chosen, chosen[1:] + [(n, n)]):
        if not (0 <= a <= b < n) or b >= nxt[0]:
            raise ParameterError(f"layer unit ranges must lie in 0..{n - 1}, top first, without overlap; "
                                 f"got {chosen}")
    groups = [list(g) for g in chosen]
    merged = [[] for _ in chosen]
    for i in range(len(chosen) - 1):
        gap = list(range(chosen[i][1] + 1, chosen[i + 1][0]))
        if not gap:
            continue
        if merge_down:
            groups[i + 1][0] = gap[0]
            merged[i + 1] = gap
        else:
            groups[i][1] = gap[-1]
            merged[i] = gap
    above = list(range(0, chosen[0][0]))
    below = list(range(chosen[-1][1] + 1, n))
    return [tuple(g) for g in groups], merged, above, below


def layer_geometry(contacts, groups, *, min_thickness: float, active=None):
    """Layer top, bottoms and idomain from ordered contacts.

    Layer ``i`` runs from contact ``groups[i][0]`` (the top of its first unit) down to contact
    ``groups[i][1] + 1`` (the bottom of its last unit), so every elevation is a unit's own contact and no
    layer moves when another layer is thin, absent or left out. A cell thinner than ``min_thickness``
    (absent unit: zero) becomes a vertical pass-through cell (-1) with its true elevations; a column with no
    active layer inside the domain is made inactive (0).

    Parameters
    ----------
    contacts : array (n + 1, nrow, ncol)
        Ordered contacts (:func:`order_contacts`), finite wherever used.
    groups : list of (first, last)
        Unit index range of each layer (:func:`layer_groups`).
    min_thickness : float
        Smallest thickness of an active cell (> 0, length unit).
    active : bool array (nrow, ncol), optional
        Cells inside the model domain (default: all).

    Returns
    -------
    top : array (nrow, ncol)
    botm : array (nlay, nrow, ncol)
    idomain : int32 array (nlay, nrow, ncol)
    emptied : int
        Columns inside the domain made inactive because no layer there reaches the minimum thickness.
    """
    if not (isinstance(min_thickness, (int, float, np.number)) and math.isfinite(min_thickness)
            and min_thickness > 0):
        raise ParameterError(f"min_thickness must be > 0 and finite; got {min_thickness}")
    c = np.asarray(contacts, float)
    top = c[groups[0][0]].copy()
    botm = np.stack([c[last + 1] for _, last in groups])
    upper = np.concatenate([top[None], botm[:-1]], axis=0)
    thick = upper - botm
    if active is None:
        active = np.ones(top.shape, bool)
    active = np.asarray(active, bool)
    idomain = np.where(thick >= min_thickness, ACTIVE, PASS_THROUGH).astype("int32")
    idomain[:, ~active] = INACTIVE
    empty = active & ~(idomain == ACTIVE).any(axis=0)
    idomain[:, empty] = INACTIVE
    return top, botm, idomain, int(empty.sum())


def effective_k(thickness, kh, kv, *, primary: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """K_h and K_v of a layer that holds several units, from their thicknesses at each cell.

    K_h is the thickness-weighted arithmetic mean (flow along the layers), K_v the thickness-weighted
    harmonic mean (flow across them). Where the units have no thickness at all, the values of unit
    ``primary`` (the layer's named unit) are used.

    Parameters
    ----------
    thickness, kh, kv : arrays (m, ...)
        Per unit of the layer: thickness (>= 0), K_h and K_v (> 0), broadcastable to one shape.

    >>> kh, kv = effective_k(np.array([1.0, 1.0]), np.array([1.0, 100.0]), np.array([1.0, 100.0]))
    >>> round(float(kh), 3), round(float(kv), 3)
    (50.5, 1.98)
    """
    b, kh, kv = np.broadcast_arrays(np.asarray(thickness, float), np.asarray(kh, float), np.asarray(kv, float))
    b = np.clip(np.nan_to_num(b, nan=0.0), 0.0, None)
    total = b.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        arith = (b * kh).sum(axis=0) / total
        harm = total / (b / kv).sum(axis=0)
    thin = ~(total > 0)
    return np.where(thin, kh[primary], arith), np.where(thin, kv[primary], harm)


# -- starting heads -------------------------------------------------------------------------------------------
def starting_heads(own, top, botm, *, confining) -> tuple[np.ndarray, np.ndarray]:
    """Starting heads of every layer from the head surfaces of the layers that have them.

    A layer of an aquifer (or other non-confining unit) takes its own surface where it has a value. Elsewhere,
    and always in aquitard and confining layers, the head is linear in elevation between the nearest layers
    above and below that have their own heads at the cell: the head of the layer above applies at its bottom,
    the head of the layer below at its top, and the layer takes the value at its mid elevation. A tight
    layer between two far more permeable ones carries nearly all the head loss between them, and steady
    vertical leakage through a uniform layer has a linear head profile, so a single aquitard between two
    aquifers gets the mean of their heads. An aquitard's own surface is used only where one side has no head;
    a layer with heads on one side only takes that side's head; a cell with no head in any layer takes the
    layer's mean.

    Parameters
    ----------
    own : array (nlay, nrow, ncol)
        Each layer's own head surface sampled at the cells; NaN where it has none (no surface, outside its
        mask or outside the unit's extent).
    top : array (nrow, ncol)
    botm : array (nlay, nrow, ncol)
    confining : bool array (nlay,)
        True for aquitard and confining layers.

    Returns
    -------
    strt : array (nlay, nrow, ncol)
        NaN only where no layer has a head anywhere.
    source : int8 array (nlay, nrow, ncol)
        :data:`STRT_SOURCES` code of each value.
    """
    own = np.asarray(own, float)
    botm = np.asarray(botm, float)
    nlay = own.shape[0]
    confining = np.asarray(confining, bool).reshape(-1)
    if confining.shape != (nlay,) or botm.shape != own.shape or np.shape(top) != own.shape[1:]:
        raise ParameterError("own, botm (nlay, nrow, ncol), top (nrow, ncol) and confining (nlay,) disagree in "
                             "shape")
    upper = np.concatenate([np.asarray(top, float)[None], botm[:-1]], axis=0)
    mid = 0.5 * (upper + botm)
    anchor = np.isfinite(own) & ~confining[:, None, None]
    above = np.full(own.shape, -1)
    below = np.full(own.shape, -1)
    last = np.full(own.shape[1:], -1)
    for k in range(nlay):
        above[k] = last
        last = np.where(anchor[k], k, last)
    last = np.full(own.shape[1:], -1)
    for k in range(nlay - 1, -1, -1):
        below[k] = last
        last = np.where(anchor[k], k, last)

    def pick(arr, idx):
        return np.take_along_axis(arr, np.clip(idx, 0, nlay - 1)[None], axis=0)[0]

    strt = np.full(own.shape, np.nan)
    source = np.full(own.shape, STRT_MEAN, dtype="int8")
    for k in range(nlay):
        a, b = above[k], below[k]
        h_a, h_b = pick(own, a), pick(own, b)
        z_a, z_b = pick(botm, a), pick(upper, b)
        span = z_a - z_b
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(span > 0, np.clip((z_a - mid[k]) / span, 0.0, 1.0), 0.5)
        two = (a >= 0) & (b >= 0)
        between = h_a + frac * (h_b - h_a)
        one = np.where(a >= 0, h_a, h_b)
        has_one = (a >= 0) | (b >= 0)
        mine = np.isfinite(own[k])
        if confining[k]:
            choices = [(two, between, STRT_BETWEEN), (mine, own[k], STRT_OWN), (has_one, one, STRT_ONE_SIDE)]
        else:
            choices = [(mine, own[k], STRT_OWN), (two, between, STRT_BETWEEN), (has_one, one, STRT_ONE_SIDE)]
        for cond, value, code in reversed(choices):
            strt[k] = np.where(cond, value, strt[k])
            source[k] = np.where(cond, code, source[k])
    for k in range(nlay):
        miss = ~np.isfinite(strt[k])
        if miss.any():
            pool = strt[k][np.isfinite(strt[k])]
            if pool.size == 0:
                pool = strt[np.isfinite(strt)]
            if pool.size:
                strt[k][miss] = float(pool.mean())
    return strt, source


def cell_types(roles, strt, top, botm, idomain) -> tuple[np.ndarray, list[str]]:
    """icelltype of each layer (0 confined, 1 convertible) and the reason for each.

    Common practice (no source): the layers that can hold the water table are convertible, the others
    confined. Here: aquitard and confining layers are confined (0); a layer of another role is convertible
    (1) when it lies at or above the first aquifer layer, or when its starting head is below its top in some
    active cell; otherwise it is confined. Modellers change this freely: it is one number per layer.
    """
    roles = list(roles)
    nlay = len(roles)
    upper = np.concatenate([np.asarray(top, float)[None], np.asarray(botm, float)[:-1]], axis=0)
    aquifers = [k for k, r in enumerate(roles) if r == "aquifer"]
    first = aquifers[0] if aquifers else nlay - 1
    out, why = np.zeros(nlay, "int32"), []
    for k, role in enumerate(roles):
        live = np.asarray(idomain)[k] == ACTIVE
        below_top = bool((np.asarray(strt)[k][live] < upper[k][live]).any())
        if role in CONFINING_ROLES:
            why.append(f"confined: {role}")
        elif k <= first:
            out[k] = 1
            why.append("convertible: at or above the first aquifer layer" if aquifers else
                       "convertible: no aquifer layer, every non-confining layer may hold the water table")
        elif below_top:
            out[k] = 1
            why.append("convertible: its starting head lies below its top in some active cells")
        else:
            why.append("confined: below the first aquifer layer and saturated at its starting heads")
    return out, why


def require_heads(strt) -> None:
    """Refuse starting heads that are missing everywhere (no layer has a head surface)."""
    if not np.isfinite(np.asarray(strt, float)).any():
        raise InsufficientDataError("no layer has a head surface to start from")
