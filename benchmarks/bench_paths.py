"""Benchmark of particle tracking and superposed drawdown, against scipy baselines run in the same process.

Run from the repository root::

    .venv/bin/python benchmarks/bench_paths.py [--quick] [--json FILE] [--profile N]

Every ratio compares figures measured in this run, on this machine.

1. Particle tracking. An invented, smooth head field on a 1000 x 1000 grid of
   10 m cells (local coordinates, upper-left corner at (0, 10000)): a regional
   slope, five Gaussian depressions and a sinusoidal undulation; K = 5 m/d,
   effective porosity 0.1. The sinks are the head minima of the depressions
   (the discrete minimum, refined to the zero of the bilinear velocity) with a
   capture radius of 2 cells. 10,000 seeds, uniform random (fixed seed), are
   tracked for at most 20 years (7305 d) with ``hydroatlas.flow.track``
   (defaults: max_step 0.5 cell, tol 0.01 max_step).

   Baseline: one ``scipy.integrate.solve_ivp(method="RK45")`` call per
   particle on the *same* ``VelocityGrid`` object (``fun`` calls
   ``vg(np.array([y]))``), with a terminal leave-the-grid event and a terminal
   nearest-sink event. 10,000 such calls would take far too long, so the
   baseline runs on a random subset of the seeds (200; 50 with --quick); its
   measured per-particle time is extrapolated to 10,000 particles (printed as
   such, with a 95 % interval from the spread of per-particle times). The
   subset's end points are compared with ours for the same seeds, taken from
   our full 10,000-particle run.

2. Drawdown. 100 wells on a 1000 x 1000 grid (1e8 well-cell pairs) with
   ``hydroatlas.pumping.superpose_drawdown_grid`` (numba; warmed up once on a
   tiny grid before timing, so compilation or cache loading is not timed;
   median of 3 timed runs). Reference: ``hydroatlas.pumping.theis_drawdown``
   (scipy.special.exp1) on a (100 wells x 10,000 random cells) array, summed
   over wells; its time is extrapolated to 1e8 pairs and the largest relative
   difference from ours on those cells is reported.

Targets: tracking >= 20x faster than the extrapolated baseline with end points
within one cell (>= 99 % of the subset; the largest distance is printed too);
drawdown of 100 wells on 1e6 cells under 2 s, agreeing with the reference to
a relative 1e-6.

``--profile N`` additionally runs cProfile on ``track`` for N particles
(untimed for the table) and prints the top functions by internal time.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import json
import math
import os
import platform
import pstats
import sys
import time
from pathlib import Path

import numpy as np

# -- settings ------------------------------------------------------------------
NROWS = NCOLS = 1000
CELL = 10.0                 # m
X0, Y0 = 0.0, 10_000.0      # upper-left corner (invented local coordinates, m)
K = 5.0                     # m/d
POROSITY = 0.1
T_MAX = 7305.0              # d (20 years)
SINK_RADIUS_CELLS = 2.0
N_PARTICLES = 10_000
N_BASELINE = 200
N_BASELINE_QUICK = 50
SEED = 20240601

# regional slope (head falls towards the east and south), undulation, depressions (cx, cy, depth, sigma)
SLOPE_X, SLOPE_Y = -0.010, 0.003
UNDULATION = (1.5, 2500.0, 3100.0)   # amplitude m, wavelength in x, wavelength in y
DEPRESSIONS = ((2500.0, 7500.0, 25.0, 700.0),
               (6000.0, 8200.0, 30.0, 800.0),
               (4200.0, 4300.0, 35.0, 900.0),
               (7800.0, 3000.0, 25.0, 600.0),
               (2000.0, 1800.0, 20.0, 650.0))

N_WELLS = 100
DD_T = 365.0                # d
DD_T_TRANS = 500.0          # m2/d
DD_S = 1e-4
DD_REF_CELLS = 10_000
DD_REF_CELLS_QUICK = 2_000
DD_REPEAT = 3

TRACK_RATIO_TARGET = 20.0
TRACK_WITHIN_TARGET = 0.99
DD_TARGET_S = 2.0
DD_DIFF_TARGET = 1e-6


def _say(msg: str = "") -> None:
    print(msg, flush=True)


# -- the invented field ----------------------------------------------------------
def cell_centres():
    xc = X0 + (np.arange(NCOLS) + 0.5) * CELL
    yc = Y0 - (np.arange(NROWS) + 0.5) * CELL  # row 0 = north
    return xc, yc


def head_field() -> np.ndarray:
    xc, yc = cell_centres()
    X, Y = np.meshgrid(xc, yc)
    a, lx, ly = UNDULATION
    h = 150.0 + SLOPE_X * X + SLOPE_Y * (Y - 5000.0) + a * np.sin(2 * np.pi * X / lx) * np.cos(2 * np.pi * Y / ly)
    for cx, cy, depth, sig in DEPRESSIONS:
        h -= depth * np.exp(-((X - cx) ** 2 + (Y - cy) ** 2) / (2.0 * sig * sig))
    return h


def find_sinks(h, vg) -> tuple[np.ndarray, list[float]]:
    """Head minimum of each depression: the discrete minimum near its centre, refined by Newton
    iterations to the zero of the bilinear velocity (finite-difference Jacobian). Returns the
    sinks and the speed left at each (m/d)."""
    xc, yc = cell_centres()
    sinks, resid = [], []
    for cx, cy, _depth, sig in DEPRESSIONS:
        j0 = int((cx - X0) / CELL)
        i0 = int((Y0 - cy) / CELL)
        w = int(sig / CELL)
        sub = h[i0 - w:i0 + w, j0 - w:j0 + w]
        ii, jj = np.unravel_index(np.argmin(sub), sub.shape)
        if ii in (0, 2 * w - 1) or jj in (0, 2 * w - 1):
            raise RuntimeError(f"depression at ({cx}, {cy}) has no interior head minimum")
        p = np.array([xc[j0 - w + jj], yc[i0 - w + ii]])
        for _ in range(20):
            v = np.array([a[0] for a in vg(p[None, :])])
            eps = 0.05 * CELL
            jac = np.empty((2, 2))
            for d in range(2):
                q = p.copy()
                q[d] += eps
                jac[:, d] = (np.array([a[0] for a in vg(q[None, :])]) - v) / eps
            step = np.linalg.solve(jac, -v)
            if np.hypot(*step) > CELL:  # stay near the discrete minimum
                break
            p = p + step
            if np.hypot(*step) < 1e-6 * CELL:
                break
        sinks.append(p)
        resid.append(float(np.hypot(*[a[0] for a in vg(p[None, :])])))
    return np.array(sinks), resid


# -- particle tracking -------------------------------------------------------------
def baseline_solve_ivp(seeds, vg, sinks, radius, t_max, *, max_step_t, rtol, atol):
    """One solve_ivp (RK45) call per particle on the same bilinear field; returns ends and timings."""
    from scipy.integrate import solve_ivp

    xmin, xmax = vg.x0, vg.x0 + vg.ncols * vg.cell
    ymin, ymax = vg.y0 - vg.nrows * vg.cell, vg.y0
    # the convex hull of the cell centres, where all four bilinear corners exist
    hxmin, hxmax, hymin, hymax = xmin + 0.5 * CELL, xmax - 0.5 * CELL, ymin + 0.5 * CELL, ymax - 0.5 * CELL
    eps = 1e-9 * CELL

    def fun(t, y):
        vx, vy = vg(np.array([y]))
        if np.isfinite(vx[0]) and np.isfinite(vy[0]):
            return np.array([vx[0], vy[0]])
        # Outside the grid (a trial stage of the step that crosses the edge) the field is extended by
        # its value at the nearest edge point, so that the solver can take that step and the edge
        # event can locate the crossing; inside, the field is exactly vg's.
        q = np.array([[min(max(y[0], xmin + eps), xmax - eps), min(max(y[1], ymin + eps), ymax - eps)]])
        vx, vy = vg(q)
        if not (np.isfinite(vx[0]) and np.isfinite(vy[0])):  # corner quarter-cells, where vg gives NaN
            q = np.array([[min(max(y[0], hxmin), hxmax), min(max(y[1], hymin), hymax)]])
            vx, vy = vg(q)
        return np.array([vx[0], vy[0]])

    def leave_grid(t, y):
        return min(y[0] - xmin, xmax - y[0], y[1] - ymin, ymax - y[1])

    leave_grid.terminal = True
    leave_grid.direction = -1

    sx, sy = sinks[:, 0].copy(), sinks[:, 1].copy()

    def near_sink(t, y):
        return float(np.min(np.hypot(y[0] - sx, y[1] - sy) - radius))

    near_sink.terminal = True
    near_sink.direction = -1

    n = len(seeds)
    end_xy = np.empty((n, 2))
    end_t = np.empty(n)
    kind = np.empty(n, dtype=object)
    nfev = np.zeros(n, dtype=np.int64)
    per = np.empty(n)
    for i in range(n):
        y0 = seeds[i]
        t0 = time.perf_counter()
        if np.min(np.hypot(y0[0] - sx, y0[1] - sy) - radius) <= 0:  # seeded inside a capture radius
            end_xy[i], end_t[i], kind[i] = y0, 0.0, "sink"
            per[i] = time.perf_counter() - t0
            continue
        sol = solve_ivp(fun, (0.0, t_max), y0, method="RK45", rtol=rtol, atol=atol, max_step=max_step_t,
                        events=[leave_grid, near_sink])
        per[i] = time.perf_counter() - t0
        nfev[i] = sol.nfev
        if sol.status == 1:
            ev = 0 if len(sol.t_events[0]) else 1
            end_xy[i], end_t[i] = sol.y_events[ev][0], sol.t_events[ev][0]
            kind[i] = "edge" if ev == 0 else "sink"
        else:
            end_xy[i], end_t[i] = sol.y[:, -1], sol.t[-1]
            kind[i] = "max_time" if sol.status == 0 else "failed"
    return {"end_xy": end_xy, "time": end_t, "kind": kind.astype(str), "nfev": nfev, "per_particle_s": per}


class _Counting:
    """Velocity wrapper that counts evaluated points (used only in an untimed run)."""

    def __init__(self, vg):
        self.vg, self.cell, self.points, self.calls = vg, vg.cell, 0, 0

    def __call__(self, xy):
        xy = np.atleast_2d(xy)
        self.points += len(xy)
        self.calls += 1
        return self.vg(xy)


def run_tracking(args) -> dict:
    from hydroatlas.flow import VelocityGrid, track

    out: dict = {}
    t0 = time.perf_counter()
    h = head_field()
    vg = VelocityGrid.from_head(X0, Y0, CELL, h, K, POROSITY)
    sinks, resid = find_sinks(h, vg)
    out["setup_s"] = time.perf_counter() - t0
    speed = np.hypot(vg.vx, vg.vy)
    pct = np.percentile(speed, [10, 50, 90, 99])
    radius = SINK_RADIUS_CELLS * CELL
    _say(f"field: {NROWS} x {NCOLS} cells of {CELL:g} m, K = {K:g} m/d, porosity {POROSITY:g}; "
         f"seepage speed p10/p50/p90/p99/max = {pct[0]:.3f}/{pct[1]:.3f}/{pct[2]:.3f}/{pct[3]:.3f}/"
         f"{speed.max():.3f} m/d")
    _say(f"sinks: {len(sinks)} head minima, capture radius {radius:g} m ({SINK_RADIUS_CELLS:g} cells); "
         f"speed left at the refined minima <= {max(resid):.1e} m/d")

    rng = np.random.default_rng(SEED)
    xmin, ymax = X0, Y0
    seeds = np.column_stack([rng.uniform(xmin, xmin + NCOLS * CELL, args.particles),
                             rng.uniform(ymax - NROWS * CELL, ymax, args.particles)])
    n_sub = min(args.baseline, args.particles)
    sub = np.sort(rng.choice(args.particles, n_sub, replace=False))

    max_step = 0.5 * CELL
    tol = 0.01 * max_step
    # ours, full set
    t0 = time.perf_counter()
    res = track(seeds, vg, t_max=T_MAX, sinks=sinks, sink_radius=radius)
    ours_s = time.perf_counter() - t0
    kinds, counts = np.unique(res.end_kind, return_counts=True)
    end_counts = {str(k): int(c) for k, c in zip(kinds, counts)}
    n_pts = int(sum(len(p) for p in res.paths))
    _say(f"ours: track() on {args.particles} particles, t_max {T_MAX:g} d, max_step {max_step:g} m, "
         f"tol {tol:g} m: {ours_s:.2f} s = {args.particles / ours_s:,.0f} particles/s")
    _say(f"      end kinds: {end_counts}; {n_pts:,} path points recorded")

    # untimed count of velocity evaluations per particle for the subset, to compare work with solve_ivp
    cnt = _Counting(vg)
    res_cnt = track(seeds[sub], cnt, t_max=T_MAX, sinks=sinks, sink_radius=radius)
    same = np.allclose(res_cnt.end_xy, res.end_xy[sub], rtol=0, atol=1e-6 * CELL)

    # baseline
    atol = tol / math.sqrt(2.0)   # scipy's error norm is the RMS over the 2 components: ||e||_2 <= sqrt(2) atol
    rtol = 1e-10                  # negligible next to atol for coordinates of up to 1e4 m
    v_ref = float(np.percentile(speed, 90))
    max_step_t = max_step / v_ref
    _say(f"baseline: scipy solve_ivp RK45 per particle on the same VelocityGrid, rtol {rtol:g}, "
         f"atol {atol:.4f} m (= tol/sqrt 2, same bound on the 2-norm of the local error estimate as ours), "
         f"max_step {max_step_t:.2f} d (= {max_step:g} m at the p90 speed {v_ref:.3f} m/d), "
         f"terminal events: leave grid, nearest sink within {radius:g} m")
    t0 = time.perf_counter()
    base = baseline_solve_ivp(seeds[sub], vg, sinks, radius, T_MAX, max_step_t=max_step_t, rtol=rtol, atol=atol)
    base_sub_s = time.perf_counter() - t0
    per = base["per_particle_s"]
    per_mean = base_sub_s / n_sub
    base_extrap = per_mean * args.particles
    half = 1.96 * per.std(ddof=1) / math.sqrt(n_sub) * args.particles if n_sub > 1 else float("nan")
    _say(f"          measured on a random subset of {n_sub} particles: {base_sub_s:.2f} s "
         f"({per_mean * 1e3:.1f} ms/particle)")
    _say(f"          EXTRAPOLATED to {args.particles} particles: {base_extrap:.0f} s "
         f"(95 % interval {base_extrap - half:.0f} to {base_extrap + half:.0f} s)")

    # agreement on the subset
    d_cells = np.hypot(*(res.end_xy[sub] - base["end_xy"]).T) / CELL
    within = float(np.mean(d_cells <= 1.0))
    kind_ours = res.end_kind[sub]
    kind_agree = float(np.mean(kind_ours == base["kind"]))
    bk, bc = np.unique(base["kind"], return_counts=True)
    ok_t = (kind_ours == base["kind"]) & (base["time"] > 0)
    t_rel = np.abs(res.time[sub] - base["time"])[ok_t] / base["time"][ok_t]
    nfev_ours = cnt.points / n_sub
    nfev_base = float(base["nfev"].mean())
    _say(f"          agreement on the subset: max end-point distance {d_cells.max():.3f} cells, "
         f"median {np.median(d_cells):.4f} cells; {within * 100:.1f} % within one cell; "
         f"end kind agrees for {kind_agree * 100:.1f} %; travel time rel. diff median "
         f"{np.median(t_rel) if len(t_rel) else float('nan'):.1e}, max {t_rel.max() if len(t_rel) else float('nan'):.1e}")
    _say(f"          baseline end kinds on the subset: {dict(zip(map(str, bk), map(int, bc)))}; "
         f"ours on the subset: {dict(zip(*[list(map(str, a)) if i == 0 else list(map(int, a)) for i, a in enumerate(np.unique(kind_ours, return_counts=True))]))}")
    _say(f"          velocity evaluations per particle (subset): ours {nfev_ours:.0f}, solve_ivp {nfev_base:.0f} "
         f"(count run reproduces the timed end points: {same})")
    by_kind = {}
    for kd in np.unique(base["kind"]):
        m = (base["kind"] == kd) & (kind_ours == kd)
        mt = m & (base["time"] > 0)
        tr_k = np.abs(res.time[sub] - base["time"])[mt] / base["time"][mt]
        by_kind[str(kd)] = {"n": int(m.sum()), "max_cells": float(d_cells[m].max()) if m.any() else None,
                            "time_rel_median": float(np.median(tr_k)) if len(tr_k) else None,
                            "time_rel_max": float(tr_k.max()) if len(tr_k) else None,
                            "time_abs_max_d": float(np.abs(res.time[sub] - base["time"])[m].max()) if m.any() else None}
        if m.any():
            _say(f"          ... ending '{kd}' in both ({m.sum()}): max distance {d_cells[m].max():.3f} cells, "
                 f"travel time diff max {by_kind[str(kd)]['time_abs_max_d']:.1f} d"
                 + (f", rel. median {np.median(tr_k):.1e} max {tr_k.max():.1e}" if len(tr_k) else ""))
    work = nfev_ours / nfev_base if nfev_base > 0 else float("nan")
    bad = np.flatnonzero((d_cells > 1.0) | (kind_ours != base["kind"]))
    for b in bad[:10]:
        i = sub[b]
        _say(f"          differs: seed {i} at ({seeds[i, 0]:.1f}, {seeds[i, 1]:.1f}): ours {kind_ours[b]} at "
             f"({res.end_xy[i, 0]:.1f}, {res.end_xy[i, 1]:.1f}) t={res.time[i]:.1f} d; solve_ivp {base['kind'][b]} at "
             f"({base['end_xy'][b, 0]:.1f}, {base['end_xy'][b, 1]:.1f}) t={base['time'][b]:.1f} d; "
             f"distance {d_cells[b]:.2f} cells")

    ratio = base_extrap / ours_s
    _say(f"          speed-up {ratio:.0f}x; per velocity evaluation (speed-up x ours/solve_ivp evaluations = "
         f"{work:.2f}) {ratio * work:.0f}x")
    out.update({
        "particles": args.particles, "t_max_d": T_MAX, "max_step_m": max_step, "tol_m": tol,
        "sinks": sinks.tolist(), "sink_radius_m": radius, "sink_residual_speed_m_per_d": resid,
        "speed_percentiles_m_per_d": {"p10": pct[0], "p50": pct[1], "p90": pct[2], "p99": pct[3],
                                      "max": float(speed.max())},
        "ours_s": ours_s, "ours_particles_per_s": args.particles / ours_s, "ours_end_kinds": end_counts,
        "ours_path_points": n_pts,
        "baseline": {"method": "RK45", "rtol": rtol, "atol_m": atol, "max_step_d": max_step_t,
                     "subset": n_sub, "measured_s": base_sub_s, "per_particle_s": per_mean,
                     "extrapolated_s": base_extrap, "extrapolated_95_half_width_s": half,
                     "end_kinds": dict(zip(map(str, bk), map(int, bc))), "nfev_per_particle": nfev_base},
        "ours_evals_per_particle_subset": nfev_ours,
        "agreement": {"max_cells": float(d_cells.max()), "median_cells": float(np.median(d_cells)),
                      "within_one_cell": within, "kind_agreement": kind_agree,
                      "time_rel_diff_median": float(np.median(t_rel)) if len(t_rel) else None,
                      "time_rel_diff_max": float(t_rel.max()) if len(t_rel) else None, "by_kind": by_kind},
        "evals_ratio_ours_over_baseline": work, "ratio_per_evaluation": ratio * work,
        "ratio": ratio,
        "pass": bool(ratio >= TRACK_RATIO_TARGET and within >= TRACK_WITHIN_TARGET),
    })
    if args.profile:
        out["profile"] = profile_track(vg, seeds[: args.profile], sinks, radius, track)
    return out


def profile_track(vg, seeds, sinks, radius, track) -> str:
    pr = cProfile.Profile()
    t0 = time.perf_counter()
    pr.enable()
    track(seeds, vg, t_max=T_MAX, sinks=sinks, sink_radius=radius)
    pr.disable()
    wall = time.perf_counter() - t0
    buf = io.StringIO()
    st = pstats.Stats(pr, stream=buf)
    st.sort_stats("tottime").print_stats(15)
    text = f"cProfile of track() on {len(seeds)} particles ({wall:.2f} s under the profiler), top by tottime:\n"
    lines = buf.getvalue().splitlines()
    start = next((i for i, ln in enumerate(lines) if ln.strip().startswith("ncalls")), 0)
    text += "\n".join(ln for ln in lines[start:] if ln.strip())
    _say(text)
    return text


# -- drawdown ---------------------------------------------------------------------
def run_drawdown(args) -> dict:
    import numba

    from hydroatlas.pumping import superpose_drawdown_grid, theis_drawdown

    rng = np.random.default_rng(SEED + 1)
    xc, yc = cell_centres()
    wells = np.column_stack([rng.uniform(X0, X0 + NCOLS * CELL, N_WELLS),
                             rng.uniform(Y0 - NROWS * CELL, Y0, N_WELLS)])
    rates = rng.uniform(100.0, 2000.0, N_WELLS)
    kw = {"T": DD_T_TRANS, "S": DD_S}

    t0 = time.perf_counter()
    superpose_drawdown_grid(xc[:8], yc[:8], wells[:4], rates[:4], DD_T, **kw)
    warm_s = time.perf_counter() - t0
    runs = []
    s = None
    for _ in range(DD_REPEAT):
        del s
        t0 = time.perf_counter()
        s = superpose_drawdown_grid(xc, yc, wells, rates, DD_T, **kw)
        runs.append(time.perf_counter() - t0)
    ours_s = float(np.median(runs))
    _say(f"ours: superpose_drawdown_grid, {N_WELLS} wells on {NROWS} x {NCOLS} cells (1e8 pairs), t {DD_T:g} d, "
         f"T {DD_T_TRANS:g} m2/d, S {DD_S:g}; numba threads {numba.get_num_threads()}; warm-up call "
         f"(compile or cache load, untimed) {warm_s:.2f} s; runs {', '.join(f'{r:.3f}' for r in runs)} s, "
         f"median {ours_s:.3f} s; drawdown {s.min():.2f} to {s.max():.2f} m")

    n_ref = min(args.dd_cells, NROWS * NCOLS)
    flat = rng.choice(NROWS * NCOLS, n_ref, replace=False)
    ri, cj = np.divmod(flat, NCOLS)
    px, py = xc[cj], yc[ri]
    r = np.hypot(px[None, :] - wells[:, 0, None], py[None, :] - wells[:, 1, None])  # (wells, cells)
    t0 = time.perf_counter()
    ref = (theis_drawdown(r, DD_T, Q=rates[:, None], **kw)).sum(axis=0)
    ref_s = time.perf_counter() - t0
    pairs = r.size
    ref_per_1e8 = ref_s * 1e8 / pairs
    from scipy.special import exp1
    t0 = time.perf_counter()
    raw = (rates[:, None] / (4 * np.pi * DD_T_TRANS) * exp1(r * r * DD_S / (4 * DD_T_TRANS * DD_T))).sum(axis=0)
    raw_s = time.perf_counter() - t0
    ours_cells = s[ri, cj]
    rel = np.abs(ours_cells - ref) / np.abs(ref)
    _say(f"reference: theis_drawdown (scipy exp1) on {N_WELLS} x {n_ref} = {pairs:,} pairs, summed over wells: "
         f"{ref_s:.3f} s measured, EXTRAPOLATED {ref_per_1e8:.1f} s per 1e8 pairs "
         f"(bare scipy.special.exp1 expression: {raw_s:.3f} s, {raw_s * 1e8 / pairs:.1f} s per 1e8)")
    _say(f"           max relative difference ours vs reference on those cells {rel.max():.2e} "
         f"(bare exp1 vs theis_drawdown {np.max(np.abs(raw - ref) / np.abs(ref)):.1e})")
    ratio = ref_per_1e8 / ours_s
    return {"wells": N_WELLS, "cells": NROWS * NCOLS, "t_d": DD_T, "T_m2_per_d": DD_T_TRANS, "S": DD_S,
            "numba_threads": numba.get_num_threads(), "warmup_s": warm_s, "runs_s": runs, "ours_s": ours_s,
            "ref_cells": n_ref, "ref_pairs": pairs, "ref_measured_s": ref_s, "ref_per_1e8_s": ref_per_1e8,
            "raw_exp1_measured_s": raw_s, "max_rel_diff": float(rel.max()), "ratio": ratio,
            "pass": bool(ours_s < DD_TARGET_S and rel.max() < DD_DIFF_TARGET)}


# -- main -----------------------------------------------------------------------------
def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true",
                    help=f"baseline on {N_BASELINE_QUICK} particles, drawdown reference on {DD_REF_CELLS_QUICK} cells")
    ap.add_argument("--json", metavar="FILE", help="write every figure to this JSON file")
    ap.add_argument("--particles", type=int, default=N_PARTICLES, help="particles tracked by ours")
    ap.add_argument("--baseline", type=int, default=None, help="solve_ivp subset size (default 200, 50 with --quick)")
    ap.add_argument("--dd-cells", type=int, default=None, help="drawdown reference cells (default 10000)")
    ap.add_argument("--profile", type=int, default=0, metavar="N", help="also cProfile track() on N particles")
    args = ap.parse_args(argv)
    if args.baseline is None:
        args.baseline = N_BASELINE_QUICK if args.quick else N_BASELINE
    if args.dd_cells is None:
        args.dd_cells = DD_REF_CELLS_QUICK if args.quick else DD_REF_CELLS

    import numba
    import scipy

    t_all = time.perf_counter()
    _say(f"bench_paths: python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}, "
         f"numba {numba.__version__}, {os.cpu_count()} CPUs, {platform.machine()}"
         f"{' (quick)' if args.quick else ''}")
    _say("\n== 1. particle tracking ==")
    tr = run_tracking(args)
    _say("\n== 2. drawdown ==")
    dd = run_drawdown(args)
    total = time.perf_counter() - t_all

    rows = [
        ("tracking", f"{tr['ours_s']:.2f}",
         f"{tr['baseline']['measured_s']:.1f} meas. ({tr['baseline']['subset']} p) / "
         f"{tr['baseline']['extrapolated_s']:.0f} extrap. ({tr['particles']} p)",
         f"{tr['ratio']:.0f}x", f">= {TRACK_RATIO_TARGET:g}x, >= {TRACK_WITHIN_TARGET:.0%} within 1 cell",
         f"max {tr['agreement']['max_cells']:.2f} cells, {tr['agreement']['within_one_cell']:.1%} <= 1 cell, "
         f"kind {tr['agreement']['kind_agreement']:.1%}",
         "PASS" if tr["pass"] else "FAIL"),
        ("drawdown", f"{dd['ours_s']:.3f}",
         f"{dd['ref_measured_s']:.2f} meas. ({dd['ref_pairs']:.0e} pairs) / {dd['ref_per_1e8_s']:.1f} extrap. (1e8)",
         f"{dd['ratio']:.0f}x", f"< {DD_TARGET_S:g} s, rel. diff < {DD_DIFF_TARGET:g}",
         f"max rel. diff {dd['max_rel_diff']:.1e}", "PASS" if dd["pass"] else "FAIL"),
    ]
    head = ("case", "ours s", "reference s (measured / extrapolated)", "ratio", "target", "agreement", "result")
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    _say("\n== summary ==")
    _say("  ".join(h.ljust(w) for h, w in zip(head, widths)))
    _say("  ".join("-" * w for w in widths))
    for r in rows:
        _say("  ".join(c.ljust(w) for c, w in zip(r, widths)))
    _say(f"(reference times marked 'extrap.' are extrapolated from the measured subset; total run {total:.0f} s)")

    if args.json:
        res = {"quick": args.quick, "tracking": tr, "drawdown": dd, "total_s": total,
               "python": platform.python_version(), "cpus": os.cpu_count()}
        Path(args.json).write_text(json.dumps(res, indent=2, default=float), encoding="utf-8")
        _say(f"figures written to {args.json}")
    return 0 if (tr["pass"] and dd["pass"]) else 1


if __name__ == "__main__":
    sys.exit(main())
