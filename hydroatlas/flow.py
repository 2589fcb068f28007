"""Head gradients, flow directions, the three-point solution, particle tracking, seeding and contributing
areas (numpy and shapely in, numpy and pandas out; no store, no files)."""

from __future__ import annotations

import numpy as np

from .errors import ParameterError


def _number(name: str, value, *, minimum: float | None = 0.0, strict: bool = True) -> float:
    """``value`` as a finite float, > ``minimum`` (>= with ``strict=False``; no bound when None)."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number; got {value!r}") from None
    if minimum is None:
        if not np.isfinite(x):
            raise ParameterError(f"{name} must be a finite number; got {value}")
    elif not (np.isfinite(x) and (x > minimum if strict else x >= minimum)):
        raise ParameterError(f"{name} must be a finite number {'>' if strict else '>='} {minimum:g}; got {value}")
    return x


def azimuth_deg(east, north):
    """Azimuth in degrees clockwise from grid north of the vector (east, north), in [0, 360)."""
    return np.mod(np.degrees(np.arctan2(east, north)), 360.0)


def three_point(xy, heads) -> dict:
    """Plane through three head measurements: gradient magnitude and flow azimuth.

    Parameters
    ----------
    xy : array (3, 2)
        Well coordinates (x east, y north).
    heads : array (3,)
        Heads in the same length unit as the coordinates (or scale the result).

    Returns
    -------
    dict
        dh_dx, dh_dy, gradient (magnitude), azimuth (of -grad h, degrees clockwise from north).
    """
    xy = np.asarray(xy, float)
    h = np.asarray(heads, float)
    if xy.shape != (3, 2) or h.shape != (3,):
        raise ParameterError(f"three_point needs xy of shape (3, 2) and heads of shape (3,); got {xy.shape}, {h.shape}")
    a = np.column_stack([xy - xy.mean(axis=0), np.ones(3)])
    if abs(np.linalg.det(a)) < 1e-12 * max(1.0, np.ptp(xy) ** 2):
        raise ParameterError("the three wells lie on one line; no plane can be fitted")
    gx, gy, _ = np.linalg.solve(a, h)
    return {"dh_dx": float(gx), "dh_dy": float(gy), "gradient": float(np.hypot(gx, gy)),
            "azimuth": float(azimuth_deg(-gx, -gy))}


def grid_gradient(head, cell: float, *, vertical_per_horizontal: float = 1.0):
    """Gradient magnitude and flow azimuth of a north-up head grid.

    Parameters
    ----------
    head : array (nrows, ncols)
        Row 0 is the northernmost row; NaN cells are skipped (their neighbours use one-sided differences).
    cell : float
        Cell size in horizontal units.
    vertical_per_horizontal : float
        Factor turning head units into horizontal units (e.g. 0.3048 for heads in ft, x in m).

    Returns
    -------
    magnitude, azimuth : arrays of the grid shape (azimuth of -grad h, degrees clockwise from north)
    """
    cell = _number("cell", cell)
    h = np.asarray(head, float) * _number("vertical_per_horizontal", vertical_per_horizontal)
    if h.ndim != 2:
        raise ParameterError(f"head grid must be 2-D; got shape {h.shape}")
    d_drow, d_dcol = _nan_gradient(h)
    gx = d_dcol / cell
    gy = -d_drow / cell  # rows run south
    mag = np.hypot(gx, gy)
    az = azimuth_deg(-gx, -gy)
    az = np.where(np.isfinite(mag), az, np.nan)
    return mag, az


def _nan_gradient(h):
    """Central differences where both neighbours exist, one-sided at edges and beside NaN cells."""
    out = []
    for axis in (0, 1):
        fwd = np.full_like(h, np.nan)
        bwd = np.full_like(h, np.nan)
        sl_a = [slice(None)] * 2
        sl_b = [slice(None)] * 2
        sl_a[axis] = slice(1, None)
        sl_b[axis] = slice(None, -1)
        diff = h[tuple(sl_a)] - h[tuple(sl_b)]
        fwd[tuple(sl_b)] = diff  # h[i+1] - h[i] stored at i
        bwd[tuple(sl_a)] = diff  # h[i] - h[i-1] stored at i
        central = 0.5 * (fwd + bwd)
        g = np.where(np.isfinite(central), central, np.where(np.isfinite(fwd), fwd, bwd))
        out.append(g)
    return out[0], out[1]


def values_at(x0: float, y0: float, cell: float, grid, xy, *, search: int = 1) -> np.ndarray:
    """Values of a north-up grid at points: the cell holding each point, else the median of finite neighbours.

    Parameters
    ----------
    x0, y0 : float
        Upper-left corner of the grid.
    cell : float
        Cell size.
    grid : array (nrows, ncols)
        Values; NaN where there are none.
    xy : array (n, 2)
        Points (same CRS units).
    search : int
        Where the point's own cell is NaN, the median of the finite cells within this many cells around it.

    Returns
    -------
    array (n,)
        NaN for points outside the grid or without a finite value nearby.
    """
    cell = _number("cell", cell)
    g = np.asarray(grid, float)
    p = np.atleast_2d(np.asarray(xy, float))
    if g.ndim != 2 or p.ndim != 2 or p.shape[1] != 2:
        raise ParameterError(f"values_at needs a 2-D grid and points of shape (n, 2); got {g.shape}, {p.shape}")
    col = np.floor((p[:, 0] - x0) / cell).astype(np.int64)
    row = np.floor((y0 - p[:, 1]) / cell).astype(np.int64)
    out = np.full(len(p), np.nan)
    for i, (r, c) in enumerate(zip(row, col)):
        if not (0 <= r < g.shape[0] and 0 <= c < g.shape[1]):
            continue
        if np.isfinite(g[r, c]):
            out[i] = g[r, c]
            continue
        block = g[max(r - search, 0):r + search + 1, max(c - search, 0):c + search + 1]
        if np.isfinite(block).any():
            out[i] = float(np.nanmedian(block))
    return out


# -- capture of a pumping well in uniform flow (Javandel and Tsang 1986) -------------
def stagnation_distance(Q, b, q):
    """Distance from a well to the stagnation point downgradient of it, in uniform regional flow.

    x0 = Q / (2 pi b q) (Javandel and Tsang 1986), with Q the pumping rate
    (volume / time), b the aquifer thickness (length) and q the regional Darcy
    flux K i (length / time), all in consistent units. The capture zone's
    half-width is pi x0 at the well's line and its full width far upgradient is
    2 pi x0 = Q / (b q) (:func:`capture_width`). Scalars or arrays; q = 0 gives inf.
    """
    Q_ = np.asarray(Q, float)
    b_ = np.asarray(b, float)
    q_ = np.asarray(q, float)
    if np.any(~np.isfinite(Q_) | (Q_ < 0)) or np.any(~np.isfinite(b_) | (b_ <= 0)) or np.any(~(q_ >= 0)):
        raise ParameterError("stagnation distance needs Q >= 0, b > 0 and q >= 0, all finite (q may be inf)")
    with np.errstate(divide="ignore", invalid="ignore"):
        x0 = np.where(Q_ == 0, 0.0, Q_ / (2.0 * np.pi * b_ * q_))
    return float(x0) if x0.ndim == 0 else x0


def capture_width(Q, b, q):
    """Full width of a well's capture zone far upgradient in uniform flow: Q / (b q) (Javandel and Tsang 1986)."""
    return 2.0 * np.pi * stagnation_distance(Q, b, q)


def capture_radius(Q, b, q, *, r_min: float, r_max: float):
    """Radius within which a particle ends at a pumping well: its stagnation distance, bounded.

    The disc of radius x0 = Q / (2 pi b q) (:func:`stagnation_distance`) lies
    inside the well's capture zone in uniform flow (the zone's edge is nearest
    the well at the stagnation point), so a particle that enters it is captured.
    ``r_min`` keeps the disc from vanishing below grid resolution (a particle
    converging on a well resolved only to a cell would otherwise stall beside
    it); ``r_max`` keeps a strong well in a nearly flat head field from
    swallowing the map.

    Parameters
    ----------
    Q, b, q : float or array_like
        Rate (volume / time, >= 0), thickness (length, > 0) and regional Darcy flux (length / time, >= 0),
        consistent units.
    r_min, r_max : float
        Bounds (length), 0 <= r_min <= r_max.

    Returns
    -------
    float or numpy.ndarray
        The bounded radius (length).
    """
    r_min = _number("r_min", r_min, strict=False)
    r_max = _number("r_max", r_max, strict=False)
    if r_max < r_min:
        raise ParameterError(f"r_max must be >= r_min; got r_min={r_min}, r_max={r_max}")
    x0 = np.clip(np.asarray(stagnation_distance(Q, b, q), float), r_min, r_max)
    return float(x0) if x0.ndim == 0 else x0


# -- particle tracking -----------------------------------------------------------
END_KINDS = ("sink", "edge", "stagnation", "max_time", "max_steps")

# Dormand-Prince 5(4) coefficients (Dormand and Prince 1980).
_DP_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0])
_DP_A = [
    [],
    [1 / 5],
    [3 / 40, 9 / 40],
    [44 / 45, -56 / 15, 32 / 9],
    [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729],
    [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656],
    [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84],
]
_DP_B5 = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0])
_DP_B4 = np.array([5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40])


class VelocityGrid:
    """A seepage-velocity field given at the cell centres of a north-up grid, read by bilinear interpolation.

    Parameters
    ----------
    x0, y0 : float
        Upper-left corner of the grid.
    cell : float
        Cell size (CRS units).
    vx, vy : arrays (nrows, ncols)
        East and north velocity components (CRS units per day); NaN where there is no field.
    """

    def __init__(self, x0: float, y0: float, cell: float, vx, vy):
        self.x0 = _number("x0", x0, minimum=None)
        self.y0 = _number("y0", y0, minimum=None)
        self.cell = _number("cell", cell)
        self.vx = np.asarray(vx, float)
        self.vy = np.asarray(vy, float)
        if self.vx.shape != self.vy.shape or self.vx.ndim != 2:
            raise ParameterError(f"vx and vy must be 2-D arrays of one shape; got {self.vx.shape}, {self.vy.shape}")
        self.nrows, self.ncols = self.vx.shape
        # pad with NaN so that the four corners of any interior point can be gathered without bounds checks
        self._px = np.pad(self.vx, 1, constant_values=np.nan)
        self._py = np.pad(self.vy, 1, constant_values=np.nan)

    @classmethod
    def from_head(cls, x0, y0, cell, head, k, porosity: float, *, vertical_per_horizontal: float = 1.0,
                  k_per_day_to_crs: float = 1.0) -> "VelocityGrid":
        """Darcy seepage velocity v = -K grad(h) / n_e from a head grid.

        ``k`` is a scalar or a grid of hydraulic conductivity in length per day;
        ``k_per_day_to_crs`` turns it into CRS units per day; heads are turned into
        CRS units by ``vertical_per_horizontal``.
        """
        if not (isinstance(porosity, (int, float, np.number)) and 0 < porosity <= 1):
            raise ParameterError(f"effective porosity must be in (0, 1]; got {porosity}")
        cell = _number("cell", cell)
        h = np.asarray(head, float) * _number("vertical_per_horizontal", vertical_per_horizontal)
        d_drow, d_dcol = _nan_gradient(h)
        gx = d_dcol / cell
        gy = -d_drow / cell
        kk = np.asarray(k, float)
        if np.any(np.isinf(kk) | (kk <= 0)):  # NaN is allowed: no field there
            raise ParameterError("hydraulic conductivity k must be finite and > 0 (NaN where there is no field)")
        kk = kk * _number("k_per_day_to_crs", k_per_day_to_crs)
        return cls(x0, y0, cell, -kk * gx / porosity, -kk * gy / porosity)

    def __call__(self, xy) -> tuple[np.ndarray, np.ndarray]:
        xy = np.atleast_2d(np.asarray(xy, float))
        fc = (xy[:, 0] - self.x0) / self.cell - 0.5 + 1.0  # +1: padding
        fr = (self.y0 - xy[:, 1]) / self.cell - 0.5 + 1.0
        inside = (fc >= 0.5) & (fc <= self.ncols + 0.5) & (fr >= 0.5) & (fr <= self.nrows + 0.5)
        fc = np.where(inside, fc, 1.0)
        fr = np.where(inside, fr, 1.0)
        c0 = np.floor(fc).astype(np.int64)
        r0 = np.floor(fr).astype(np.int64)
        c0 = np.clip(c0, 0, self.ncols)
        r0 = np.clip(r0, 0, self.nrows)
        tc = fc - c0
        tr = fr - r0
        out = []
        for grid in (self._px, self._py):
            v00 = grid[r0, c0]
            v01 = grid[r0, c0 + 1]
            v10 = grid[r0 + 1, c0]
            v11 = grid[r0 + 1, c0 + 1]
            # near the edge of the field, fall back to the available corners (renormalised weights)
            w = np.stack([(1 - tr) * (1 - tc), (1 - tr) * tc, tr * (1 - tc), tr * tc])
            v = np.stack([v00, v01, v10, v11])
            ok = np.isfinite(v)
            wsum = np.where(ok, w, 0.0).sum(axis=0)
            val = np.where(ok, w * np.where(ok, v, 0.0), 0.0).sum(axis=0)
            with np.errstate(invalid="ignore", divide="ignore"):
                res = np.where(wsum > 0.25, val / wsum, np.nan)
            out.append(np.where(inside, res, np.nan))
        return out[0], out[1]


class TrackResult:
    """Paths and end states of tracked particles.

    Attributes
    ----------
    paths : list of arrays (n_i, 3)
        x, y, elapsed time (days) of recorded points.
    end_kind : array of str
        One of 'sink', 'edge', 'stagnation', 'max_time', 'max_steps'.
    end_sink : array of int
        Index of the sink reached, -1 otherwise.
    time : array
        Travel time (days) at the end.
    end_xy : array (n, 2)
    """

    def __init__(self, paths, end_kind, end_sink, time, end_xy):
        self.paths, self.end_kind, self.end_sink, self.time, self.end_xy = paths, end_kind, end_sink, time, end_xy


def track(seeds, velocity, *, backward: bool = False, t_max: float = 365_250.0, sinks=None,
          sink_radius=None, max_step: float | None = None, tol: float | None = None, min_speed: float | None = None,
          max_steps: int = 100_000, record_spacing: float | None = None) -> TrackResult:
    """Track particles through a velocity field with an adaptive Dormand-Prince 5(4) integrator.

    All particles advance together (vectorised), each with its own step size.
    The step is limited by the error estimate (``tol``, a distance) and by
    ``max_step`` (a distance, so that no sink or grid feature is jumped over).

    Parameters
    ----------
    seeds : array (n, 2)
    velocity : callable
        ``velocity(xy) -> (vx, vy)`` in CRS units per day; NaN outside the field.
    backward : bool
        Track against the flow (contributing areas).
    t_max : float
        Maximum travel time (days, finite and > 0).
    sinks : array (k, 2), optional
        Springs or wells; a particle closer than ``sink_radius`` (scalar or (k,)) ends there.
    max_step, tol : float
        Largest displacement per step and the error tolerance (distances; default
        from the field's cell size: 0.5 and 0.005 cells).
    min_speed : float
        Below this speed (CRS units per day) a particle ends as 'stagnation'
        (default 1e-6 max_step per day: a particle that would need thousands of
        years to cross a cell, as at a stagnation point).
    record_spacing : float
        Record a path point every time a particle has moved this far (default max_step).
    """
    p = np.array(seeds, dtype=float, copy=True)
    if p.ndim != 2 or p.shape[1] != 2:
        raise ParameterError(f"seeds must have shape (n, 2); got {p.shape}")
    if not np.isfinite(p).all():
        raise ParameterError("seeds hold NaN or infinite coordinates")
    n = len(p)
    t_max = _number("t_max (days)", t_max)
    cell = getattr(velocity, "cell", None)
    if max_step is None:
        if cell is None:
            raise ParameterError("give max_step for a velocity field without a cell size")
        max_step = 0.5 * cell
    max_step = _number("max_step", max_step)
    tol = _number("tol", tol) if tol is not None else 0.01 * max_step
    min_speed = 1e-6 * max_step if min_speed is None else _number("min_speed", min_speed, strict=False)
    record_spacing = max_step if record_spacing is None else _number("record_spacing", record_spacing)
    if isinstance(max_steps, bool) or not isinstance(max_steps, (int, np.integer)) or max_steps < 1:
        raise ParameterError(f"max_steps must be a whole number >= 1; got {max_steps!r}")
    sign = -1.0 if backward else 1.0
    sinks = np.zeros((0, 2)) if sinks is None or np.size(sinks) == 0 else np.atleast_2d(np.asarray(sinks, float))
    if sinks.ndim != 2 or sinks.shape[1] != 2 or not np.isfinite(sinks).all():
        raise ParameterError(f"sinks must be finite coordinates of shape (k, 2); got shape {sinks.shape}")
    try:
        radius = np.broadcast_to(np.asarray(0.0 if sink_radius is None else sink_radius, float), (len(sinks),))
    except ValueError:
        raise ParameterError(f"sink_radius must be one number or one per sink ({len(sinks)})") from None
    if not (np.isfinite(radius).all() and (radius >= 0).all()):
        raise ParameterError(f"sink_radius must be finite and >= 0; got {sink_radius}")

    def vel(xy):
        vx, vy = velocity(xy)
        return sign * np.asarray(vx, float), sign * np.asarray(vy, float)

    t = np.zeros(n)
    end_kind = np.array(["max_steps"] * n, dtype=object)
    end_sink = np.full(n, -1)
    active = np.ones(n, bool)
    paths = [[(p[i, 0], p[i, 1], 0.0)] for i in range(n)]
    last_rec = p.copy()
    steps = np.zeros(n, dtype=np.int64)

    vx, vy = vel(p)
    speed = np.hypot(vx, vy)
    _end(active, ~np.isfinite(speed), end_kind, "edge")
    _end(active, np.isfinite(speed) & (speed <= min_speed), end_kind, "stagnation")
    hit = _sink_hits(p, sinks, radius)
    _end(active, hit >= 0, end_kind, "sink")
    end_sink[hit >= 0] = hit[hit >= 0]
    dt = np.where(speed > 0, max_step / np.where(speed > 0, speed, 1.0), 1.0)
    k1x, k1y = vx.copy(), vy.copy()

    while active.any():
        a = np.flatnonzero(active)
        dta = np.minimum(dt[a], t_max - t[a])
        x0 = p[a]
        kx = np.empty((7, len(a)))
        ky = np.empty((7, len(a)))
        kx[0], ky[0] = k1x[a], k1y[a]
        for s in range(1, 7):
            xs = x0[:, 0] + dta * sum(_DP_A[s][j] * kx[j] for j in range(s))
            ys = x0[:, 1] + dta * sum(_DP_A[s][j] * ky[j] for j in range(s))
            kx[s], ky[s] = vel(np.column_stack([xs, ys]))
        x5 = x0[:, 0] + dta * (_DP_B5 @ kx)
        y5 = x0[:, 1] + dta * (_DP_B5 @ ky)
        ex = dta * ((_DP_B5 - _DP_B4) @ kx)
        ey = dta * ((_DP_B5 - _DP_B4) @ ky)
        err = np.hypot(ex, ey) / tol
        move = np.hypot(x5 - x0[:, 0], y5 - x0[:, 1])
        finite = np.isfinite(err) & np.isfinite(x5) & np.isfinite(y5)
        accept = finite & (err <= 1.0) & (move <= 1.5 * max_step)
        # step-size update (standard safety factor 0.9, exponent 1/5), capped by the displacement limit
        with np.errstate(divide="ignore", invalid="ignore"):
            grow = np.where(finite & (err > 0), 0.9 * err ** -0.2, 5.0)
        grow = np.clip(grow, 0.2, 5.0)
        too_far = finite & (move > 1.5 * max_step)
        grow = np.where(too_far, np.minimum(grow, 0.9 * max_step / np.where(too_far, move, 1.0)), grow)
        new_dt = dta * np.where(finite, grow, 0.25)
        sp = np.hypot(kx[6], ky[6])
        cap = np.where(np.isfinite(sp) & (sp > 0), max_step / np.where(sp > 0, sp, 1.0), np.inf)
        new_dt = np.minimum(new_dt, np.where(accept, cap, np.inf))
        # a particle whose step keeps failing at a tiny size has left the field
        stuck = ~finite & (dta * np.where(np.isfinite(speed[a]), speed[a], 0) < 1e-3 * max_step)
        acc = a[accept]
        p[acc, 0], p[acc, 1] = x5[accept], y5[accept]
        t[acc] += dta[accept]
        k1x[acc], k1y[acc] = kx[6][accept], ky[6][accept]  # first-same-as-last
        speed[acc] = sp[accept]
        dt[a] = new_dt
        steps[a] += 1
        # record thinned path points
        moved = np.hypot(p[acc, 0] - last_rec[acc, 0], p[acc, 1] - last_rec[acc, 1]) >= record_spacing
        for i in acc[moved]:
            paths[i].append((p[i, 0], p[i, 1], t[i]))
        last_rec[acc[moved]] = p[acc[moved]]
        # ends
        if len(sinks):
            hit = np.full(n, -1)
            hit_acc, frac = _sink_hits(p[acc], sinks, radius, x0[accept], with_fraction=True)
            hit[acc] = hit_acc
            done = hit >= 0
            # end where the step entered the capture radius, at the time it did
            entered = hit_acc >= 0
            ia = acc[entered]
            f = frac[entered]
            start = x0[accept][entered]
            p[ia] = start + f[:, None] * (p[ia] - start)
            t[ia] -= (1.0 - f) * dta[accept][entered]
            end_sink[done] = hit[done]
            _end(active, done, end_kind, "sink")
        _end(active, np.isin(np.arange(n), a[stuck]), end_kind, "edge")
        slow = np.zeros(n, bool)
        slow[acc] = sp[accept] <= min_speed
        _end(active, slow, end_kind, "stagnation")
        late = np.zeros(n, bool)
        late[acc] = t[acc] >= t_max * (1 - 1e-12)
        _end(active, late, end_kind, "max_time")
        many = active & (steps >= max_steps)
        _end(active, many, end_kind, "max_steps")
    for i in range(n):
        if paths[i][-1][2] != t[i]:
            paths[i].append((p[i, 0], p[i, 1], t[i]))
    return TrackResult([np.array(pth) for pth in paths], end_kind.astype(str), end_sink, t, p)


def _end(active, mask, end_kind, kind):
    mask = mask & active
    end_kind[mask] = kind
    active[mask] = False


def _sink_hits(p, sinks, radius, start=None, with_fraction=False):
    """Index of the first sink within its radius of each point (or of the segment start -> point), else -1.

    With ``with_fraction`` also the fraction of the segment at which it enters that sink's radius.
    """
    if len(sinks) == 0:
        none = np.full(len(p), -1)
        return (none, np.ones(len(p))) if with_fraction else none
    if start is None:
        d = np.hypot(p[:, None, 0] - sinks[None, :, 0], p[:, None, 1] - sinks[None, :, 1])
        u_enter = np.zeros(d.shape)
    else:  # closest approach of each step's segment, and where it first enters the radius
        seg = p - start
        rel = sinks[None, :, :] - start[:, None, :]
        e2 = (seg**2).sum(1)[:, None]
        L2 = np.maximum(e2, 1e-300)
        u = np.clip((rel * seg[:, None, :]).sum(2) / L2, 0.0, 1.0)
        closest = start[:, None, :] + u[:, :, None] * seg[:, None, :]
        d = np.hypot(closest[:, :, 0] - sinks[None, :, 0], closest[:, :, 1] - sinks[None, :, 1])
        # |start - sink + u seg| = radius: smallest root in [0, 1] (0 when the start is already inside)
        dd = -rel
        b = (dd * seg[:, None, :]).sum(2)
        c = (dd**2).sum(2) - radius[None, :] ** 2
        disc = np.maximum(b * b - e2 * c, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            root = (-b - np.sqrt(disc)) / L2
        u_enter = np.where(c <= 0, 0.0, np.clip(np.nan_to_num(root, nan=1.0), 0.0, 1.0))
    inside = d <= radius[None, :]
    first = np.where(inside.any(1), np.argmax(inside, axis=1), -1)
    if not with_fraction:
        return first
    frac = np.where(first >= 0, u_enter[np.arange(len(p)), np.maximum(first, 0)], 1.0)
    return first, frac


# -- seeds, contributing areas and travel summaries (pure: arrays and shapely geometries) -------------------------
def seed_points(polygon, spacing: float) -> np.ndarray:
    """Particle seeds on a square lattice inside a polygon.

    The lattice starts half a spacing in from the polygon's lower-left bounding-box corner (x and y step by
    ``spacing``) and keeps the points strictly inside the polygon; a polygon too small to hold one gets its
    representative point (shapely's ``representative_point``), so every polygon yields at least one seed.

    Parameters
    ----------
    polygon : shapely Polygon or MultiPolygon
        In CRS units.
    spacing : float
        Lattice spacing (CRS units), > 0.

    Returns
    -------
    array (n, 2)
        x, y of the seeds, row by row from the south.

    >>> import shapely
    >>> seed_points(shapely.box(0.0, 0.0, 10.0, 10.0), 5.0).tolist()
    [[2.5, 2.5], [7.5, 2.5], [2.5, 7.5], [7.5, 7.5]]
    """
    import shapely

    try:
        spacing = float(spacing)
    except (TypeError, ValueError):
        spacing = float("nan")
    if not (np.isfinite(spacing) and spacing > 0):
        raise ParameterError(f"spacing= must be a finite number > 0; got {spacing}", param="spacing")
    xmin, ymin, xmax, ymax = polygon.bounds
    xs = np.arange(xmin + spacing / 2, xmax, spacing)
    ys = np.arange(ymin + spacing / 2, ymax, spacing)
    gx, gy = np.meshgrid(xs, ys)
    gx, gy = gx.ravel(), gy.ravel()
    inside = shapely.contains_xy(polygon, gx, gy)
    pts = np.column_stack([gx[inside], gy[inside]])
    if len(pts) == 0:
        c = polygon.representative_point()
        pts = np.array([[c.x, c.y]])
    return pts


def ring_seeds(centres, radii, *, per_centre: int = 72, factor: float = 1.01) -> tuple[np.ndarray, np.ndarray]:
    """Seeds on a circle around each centre (backward tracking from springs or wells).

    Parameters
    ----------
    centres : array (k, 2)
    radii : array (k,) or float
        Capture radius of each centre (CRS units, >= 0); the seeds lie ``factor`` times farther out, just
        outside the radius, so that no seed starts captured.
    per_centre : int
        Seeds per circle, evenly spaced from east (angle 0), counter-clockwise.

    Returns
    -------
    seeds : array (k * per_centre, 2)
    owner : int array (k * per_centre,)
        Index of the centre of each seed.
    """
    c = np.asarray(centres, float).reshape(-1, 2)
    r = np.broadcast_to(np.asarray(radii, float), (len(c),))
    if isinstance(per_centre, bool) or not isinstance(per_centre, (int, np.integer)) or per_centre < 1:
        raise ParameterError(f"per_centre= must be a whole number >= 1; got {per_centre!r}", param="per_centre")
    ang = np.linspace(0, 2 * np.pi, per_centre, endpoint=False)
    seeds = [np.column_stack([x + factor * r_s * np.cos(ang), y + factor * r_s * np.sin(ang)])
             for (x, y), r_s in zip(c, r)]
    seeds = np.vstack(seeds) if seeds else np.zeros((0, 2))
    return seeds, np.repeat(np.arange(len(c)), per_centre)


def contributing_areas(velocity: VelocityGrid, valid, sinks, sink_radius, *, t_max: float, targets=None,
                       areas=None, max_particles: int = 20_000, max_step: float | None = None):
    """Contributing area of sinks: the cells whose forward path ends at each one.

    A lattice of particles at the centres of the ``valid`` cells of the velocity grid (thinned to every
    ``stride``-th row and column, stride = ceil(sqrt(valid cells / max_particles)), so about ``max_particles``)
    is tracked forward (:func:`track`); the cells whose particle reaches a sink are polygonised (cells of
    ``stride`` x the grid's cell size) into that sink's contributing area. Backward paths from a ring around a
    spring sample a converging catchment poorly (most of the ring maps to a few flow tubes), so the
    delineation is done this way.

    Parameters
    ----------
    velocity : VelocityGrid
        Seepage velocity (CRS units per day); its corner, cell size and shape place the lattice.
    valid : bool array (nrows, ncols)
        Cells that get a particle (where the head surface has a value).
    sinks : array (k, 2)
        Springs and wells (CRS units).
    sink_radius : float or array (k,)
        Capture radius of each sink (CRS units).
    t_max : float
        Longest travel time (days).
    targets : sequence, optional
        Ids of the first ``len(targets)`` sinks, whose areas are wanted (default: every sink, ids 0..k-1).
    areas : sequence of (id, polygon), optional
        Source areas (e.g. recharge areas): for each target and area, the share of the area's lattice points
        whose path ends at the target and their travel times.
    max_particles : int
    max_step : float, optional
        Largest step of the tracker (default half a cell).

    Returns
    -------
    polygons : DataFrame
        One row per target: ``sink_id``, ``cells`` (lattice points that reach it), ``area`` (CRS units
        squared), ``median_days`` (None without any) and ``geometry`` (shapely; empty polygon without any).
    table : DataFrame
        One row per target and area: ``sink_id``, ``area_id``, ``area_cells``, ``share`` (None for an area
        without lattice points), ``median_days``, ``p10_days``, ``p90_days`` (None where no path ends there).
    """
    import pandas as pd
    import shapely
    from rasterio.features import shapes
    from rasterio.transform import from_origin

    valid = np.asarray(valid, bool)
    if valid.shape != (velocity.nrows, velocity.ncols):
        raise ParameterError(f"valid has shape {valid.shape}; expected {(velocity.nrows, velocity.ncols)} like the "
                             "velocity grid", param="valid")
    sinks = np.asarray(sinks, float).reshape(-1, 2)
    targets = list(range(len(sinks))) if targets is None else list(targets)
    if len(targets) > len(sinks):
        raise ParameterError(f"{len(targets)} targets for {len(sinks)} sinks", param="targets")
    cell = velocity.cell
    stride = max(1, int(np.ceil(np.sqrt(valid.sum() / max_particles))))
    rows, cols = np.nonzero(valid[::stride, ::stride])
    xs = (velocity.x0 + (np.arange(velocity.ncols) + 0.5) * cell)[::stride][cols]
    ys = (velocity.y0 - (np.arange(velocity.nrows) + 0.5) * cell)[::stride][rows]
    res = track(np.column_stack([xs, ys]), velocity, t_max=t_max, sinks=sinks, sink_radius=sink_radius,
                max_step=0.5 * cell if max_step is None else max_step)
    shape = valid[::stride, ::stride].shape
    transform = from_origin(velocity.x0, velocity.y0, cell * stride, cell * stride)
    polys, rows_out = [], []
    for j, sid in enumerate(targets):
        reach = res.end_sink == j
        raster = np.zeros(shape, dtype=np.uint8)
        raster[rows[reach], cols[reach]] = 1
        parts = [shapely.geometry.shape(g) for g, v in shapes(raster, mask=raster == 1, transform=transform) if v == 1]
        geom = shapely.union_all(parts) if parts else shapely.Polygon()
        t = res.time[reach]
        polys.append({"sink_id": sid, "cells": int(reach.sum()), "area": float(geom.area),
                      "median_days": float(np.median(t)) if len(t) else None, "geometry": geom})
        for aid, poly in (areas or ()):
            inside = shapely.contains_xy(poly, xs, ys)
            hit = inside & reach
            tt = res.time[hit]
            rows_out.append({"sink_id": sid, "area_id": aid, "area_cells": int(inside.sum()),
                             "share": float(hit.sum() / inside.sum()) if inside.any() else None,
                             "median_days": float(np.median(tt)) if len(tt) else None,
                             "p10_days": float(np.percentile(tt, 10)) if len(tt) else None,
                             "p90_days": float(np.percentile(tt, 90)) if len(tt) else None})
    poly_cols = ["sink_id", "cells", "area", "median_days", "geometry"]
    table_cols = ["sink_id", "area_id", "area_cells", "share", "median_days", "p10_days", "p90_days"]
    return pd.DataFrame(polys, columns=poly_cols), pd.DataFrame(rows_out, columns=table_cols)


def travel_summary(origin, destination, days):
    """Where the particles from each origin end and how long they take.

    Parameters
    ----------
    origin, destination : sequences of labels (n,)
        Where each particle started (e.g. a recharge area) and where it ended (a sink or an end kind).
    days : array (n,)
        Travel time of each particle (days).

    Returns
    -------
    DataFrame
        One row per origin and destination, sorted by both: ``origin``, ``destination``, ``particles``,
        ``share`` (of the origin's particles), ``median_days``, ``p10_days``, ``p90_days`` and
        ``median_years`` (365.25-day years); no rows without particles.
    """
    import pandas as pd

    frame = pd.DataFrame({"origin": list(origin), "destination": list(destination),
                          "days": np.asarray(days, float)})
    rows = []
    for area, g in frame.groupby("origin", sort=True):
        for dest, gd in g.groupby("destination", sort=True):
            d = gd["days"].to_numpy()
            rows.append({"origin": area, "destination": dest, "particles": len(d),
                         "share": len(d) / len(g), "median_days": float(np.median(d)),
                         "p10_days": float(np.percentile(d, 10)), "p90_days": float(np.percentile(d, 90)),
                         "median_years": float(np.median(d)) / 365.25})
    return pd.DataFrame(rows, columns=["origin", "destination", "particles", "share", "median_days", "p10_days",
                                       "p90_days", "median_years"])
