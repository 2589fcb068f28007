"""Benchmark of hydroatlas kriging and IDW, against PyKrige's compiled moving-window backend.

Run from the repository root::

    .venv/bin/python benchmarks/bench_kriging.py [--quick] [--json FILE]
                                                 [--case dense|sparse|big|scaling|idw|all]

All figures and ratios printed come from this one run, on this machine.

Cases (full sizes; ``--quick`` shrinks them for a smoke run):

- ``dense``: 20,000 random points over a 5000 m square, 500 x 500 cell centres
  over the same square, exponential model (nugget 0.05, total sill 1,
  practical range 1500 m), 16 neighbours. Ours against PyKrige
  ``OrdinaryKriging(...).execute("grid", ..., backend="C", n_closest_points=16)``.
  Targets: ratio >= 30, max |difference| of estimate and of kriging variance
  <= 1e-6, our peak memory < 1500 MB.
- ``sparse``: 1,000 points over a 10,000 m square, 1000 x 1000 grid, spherical
  (nugget 0.1, sill 1, range 3000 m), 16 neighbours. Target ratio >= 5, same
  other targets.
- ``big``: 100,000 points over a 10,000 m square, 4000 x 4000 grid, exponential
  (nugget 0.05, sill 1, range 3000 m), 16 neighbours; ours only. Targets
  < 60 s and < 1500 MB. Skipped under ``--quick``.
- ``scaling``: our time (estimates *and* standard deviations) for about 1e5,
  1e6, 1e7 cells x 1e3, 1e4, 1e5 points; cells are regular grids of
  round(sqrt(m))**2 centres over the data square (5000 m, dense-case model).
  1e7 cells are skipped under ``--quick``.
- ``idw``: IDW (power 2, 16 neighbours) throughput in cells per second for
  1e6 cells and 1e4 points; as context, the same run also times a bare
  ``scipy.spatial.cKDTree.query(k=16)`` of the same cells.

How it measures:

- Every side of every case runs in its own freshly spawned process, so that
  its peak memory (``VmHWM`` of /proc/self/status, read at the end of the
  child; ``ru_maxrss`` elsewhere) is its own. MB are 10**6 bytes. The peak
  is the whole process: interpreter, libraries, synthetic data and cell
  coordinates included (the RSS after imports is printed as "base").
- Timed: our ``fit`` + ``predict(cells, return_std=True)``; PyKrige's
  constructor (given the variogram parameters, so no fitting, though it
  still bins all point pairs into an experimental variogram) and its
  ``execute`` separately. The ratio judged against the target is the
  conservative one: PyKrige ``execute`` alone / our ``fit`` + ``predict``.
  The ratio with PyKrige's constructor included is printed (and stored) too.
- Other processes on the machine slow both sides and make figures noisy,
  so for each case the script prints the CPU time that processes other than
  this benchmark used while it ran (all-CPU busy time from /proc/stat minus
  this process's and its children's CPU time, per second of wall time),
  and flags the case when that exceeds 0.2 CPUs.
- Our first call compiles (or loads from numba's cache) the kernels, so each
  of our child processes first does one tiny warm-up fit + predict with the
  same model; its time is printed and excluded from the timings.
- Ours is timed ``--repeat`` times (default 3) in the same process and the
  median is used (for scaling entries only when the first run is under 2 s);
  PyKrige is run once (it takes tens of seconds). All runs are printed.
- Differences are computed on the full grid, in a separate child process that
  reads both result arrays back from a temporary folder and returns only
  summary numbers. Variance difference: our ``std**2`` against PyKrige's
  ``sigmasq``.

Data are synthetic (numpy, fixed seed): uniform random points and a smooth
invented field plus noise.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import os
import platform
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))  # noqa: E402
from _common import peak_mb as _peak_mb  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
PEAK_TARGET_MB = 1500.0
DIFF_TARGET = 1e-6
BIG_TARGET_S = 60.0

FULL = {
    "dense": {"n_points": 20_000, "side": 5000.0, "nx": 500, "model": "exponential", "nugget": 0.05,
              "sill": 1.0, "range": 1500.0, "k": 16, "ratio_target": 30.0, "seed": 101},
    "sparse": {"n_points": 1_000, "side": 10_000.0, "nx": 1000, "model": "spherical", "nugget": 0.1,
               "sill": 1.0, "range": 3000.0, "k": 16, "ratio_target": 5.0, "seed": 202},
    "big": {"n_points": 100_000, "side": 10_000.0, "nx": 4000, "model": "exponential", "nugget": 0.05,
            "sill": 1.0, "range": 3000.0, "k": 16, "seed": 303},
    "scaling": {"cells": (100_000, 1_000_000, 10_000_000), "points": (1_000, 10_000, 100_000),
                "side": 5000.0, "model": "exponential", "nugget": 0.05, "sill": 1.0, "range": 1500.0,
                "k": 16, "seed": 404},
    "idw": {"n_points": 10_000, "side": 5000.0, "nx": 1000, "power": 2.0, "k": 16, "seed": 505},
}
QUICK = {
    "dense": {"n_points": 4_000, "nx": 150},
    "sparse": {"n_points": 1_000, "nx": 300},
    "scaling": {"cells": (100_000, 1_000_000)},
    "idw": {"nx": 300},
}
CASES = ("dense", "sparse", "big", "scaling", "idw")


# -- helpers run in every process ----------------------------------------------


def _run_isolated(fn, *args):
    """Run ``fn(*args)`` in a fresh spawned process; return its result or ``{"error": ...}``."""
    try:
        with ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("spawn")) as ex:
            return ex.submit(fn, *args).result()
    except BrokenProcessPool as exc:  # e.g. killed by the kernel for lack of memory
        return {"error": f"child process died ({exc}); out of memory?"}
    except MemoryError as exc:
        return {"error": f"MemoryError in child: {exc}"}


def make_data(n: int, side: float, seed: int):
    """``n`` uniform random points over [0, side]^2 and a smooth invented field plus noise."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, side, (n, 2))
    u, v = xy[:, 0] / side, xy[:, 1] / side
    z = (np.sin(2 * np.pi * 1.7 * u) * np.cos(2 * np.pi * 2.3 * v) + 0.5 * np.sin(2 * np.pi * 3.1 * (u + v))
         + rng.normal(0.0, 0.1, n))
    return xy, z


def grid_axes(side: float, nx: int) -> np.ndarray:
    """Centres of ``nx`` equal cells along [0, side]."""
    return (np.arange(nx) + 0.5) * (side / nx)


def grid_cells(side: float, nx: int) -> np.ndarray:
    """(nx*nx, 2) cell centres, x varying fastest (PyKrige's ``grid`` order), built without temporaries."""
    g = grid_axes(side, nx)
    cells = np.empty((nx, nx, 2))
    cells[:, :, 0] = g[None, :]
    cells[:, :, 1] = g[:, None]
    return cells.reshape(-1, 2)


def _variogram(spec):
    from hydroatlas.interp import Variogram

    return Variogram(spec["model"], nugget=spec["nugget"], sill=spec["sill"], range=spec["range"])


def _warm_up(spec) -> float:
    """One tiny fit + predict with the same model, so that numba compiles (or loads) the kernels."""
    from hydroatlas.interp import OrdinaryKriging

    t0 = time.perf_counter()
    xy, z = make_data(64, spec["side"], 1)
    OrdinaryKriging(_variogram(spec), neighbors=spec["k"]).fit(xy, z).predict(xy[:8] + 0.25, return_std=True)
    return time.perf_counter() - t0


# -- child processes -----------------------------------------------------------
def child_ours(spec: dict, nx: int, repeat: int, save_dir: str | None, adaptive: bool = False) -> dict:
    """Time our fit + predict(return_std=True) on an nx x nx grid; optionally save est and std."""
    import numba

    from hydroatlas.interp import OrdinaryKriging

    base = _peak_mb()
    warm = _warm_up(spec)
    after_warm = _peak_mb()
    xy, z = make_data(spec["n_points"], spec["side"], spec["seed"])
    cells = grid_cells(spec["side"], nx)
    runs = []
    est = std = None
    n_runs = repeat
    i = 0
    while i < n_runs:
        del est, std
        est = std = None
        t0 = time.perf_counter()
        model = OrdinaryKriging(_variogram(spec), neighbors=spec["k"]).fit(xy, z)
        t1 = time.perf_counter()
        est, std = model.predict(cells, return_std=True)
        t2 = time.perf_counter()
        runs.append({"fit_s": t1 - t0, "predict_s": t2 - t1, "total_s": t2 - t0})
        del model
        if adaptive and i == 0 and runs[0]["total_s"] >= 2.0:
            n_runs = 1
        i += 1
    peak = _peak_mb()
    nan = int(np.isnan(est).sum())
    if save_dir is not None:
        np.save(os.path.join(save_dir, "ours_est.npy"), est)
        np.save(os.path.join(save_dir, "ours_std.npy"), std)
    med = sorted(runs, key=lambda r: r["total_s"])[len(runs) // 2]
    return {"side": "ours", "cells": len(cells), "points": len(xy), "warmup_s": warm, "runs": runs,
            "fit_s": med["fit_s"], "predict_s": med["predict_s"], "total_s": med["total_s"],
            "peak_mb": peak, "base_mb": base, "after_warmup_mb": after_warm, "nan_cells": nan,
            "threads": numba.get_num_threads()}


def child_pykrige(spec: dict, nx: int, save_dir: str) -> dict:
    """Time PyKrige's constructor + execute('grid', backend='C', n_closest_points=k); save est and var."""
    from pykrige.ok import OrdinaryKriging as PK

    base = _peak_mb()
    xy, z = make_data(spec["n_points"], spec["side"], spec["seed"])
    g = grid_axes(spec["side"], nx)
    t0 = time.perf_counter()
    pk = PK(xy[:, 0], xy[:, 1], z, variogram_model=spec["model"],
            variogram_parameters={"sill": spec["sill"], "range": spec["range"], "nugget": spec["nugget"]},
            verbose=False, enable_plotting=False)
    t1 = time.perf_counter()
    est, var = pk.execute("grid", g, g, backend="C", n_closest_points=spec["k"])
    t2 = time.perf_counter()
    peak = _peak_mb()
    est = np.ma.getdata(est).reshape(-1)
    var = np.ma.getdata(var).reshape(-1)
    np.save(os.path.join(save_dir, "pk_est.npy"), est)
    np.save(os.path.join(save_dir, "pk_var.npy"), var)
    return {"side": "pykrige", "cells": est.size, "points": len(xy), "fit_s": t1 - t0, "predict_s": t2 - t1,
            "total_s": t2 - t0, "peak_mb": peak, "base_mb": base}


def child_compare(save_dir: str, side: float, nx: int) -> dict:
    """Summary of the differences between the saved result arrays of both sides."""
    ours_est = np.load(os.path.join(save_dir, "ours_est.npy"))
    ours_var = np.load(os.path.join(save_dir, "ours_std.npy")) ** 2
    pk_est = np.load(os.path.join(save_dir, "pk_est.npy"))
    pk_var = np.load(os.path.join(save_dir, "pk_var.npy"))
    if ours_est.shape != pk_est.shape:
        return {"error": f"shapes differ: ours {ours_est.shape}, pykrige {pk_est.shape}"}
    de = np.abs(ours_est - pk_est)
    dv = np.abs(ours_var - pk_var)
    g = grid_axes(side, nx)
    out = {"cells": int(de.size), "nan_ours": int(np.isnan(ours_est).sum()), "nan_pykrige": int(np.isnan(pk_est).sum())}
    for name, d in (("est", de), ("var", dv)):
        finite = np.isfinite(d)
        if not finite.any():
            out[f"max_diff_{name}"] = float("nan")
            continue
        i = int(np.nanargmax(d))
        out[f"max_diff_{name}"] = float(d[i])
        out[f"mean_diff_{name}"] = float(d[finite].mean())
        out[f"cells_over_target_{name}"] = int((d[finite] > DIFF_TARGET).sum())
        out[f"argmax_{name}_xy"] = [float(g[i % nx]), float(g[i // nx])]
    out["max_diff_std"] = float(np.nanmax(np.abs(np.sqrt(ours_var) - np.sqrt(np.maximum(pk_var, 0.0)))))
    out["pk_var_range"] = [float(np.nanmin(pk_var)), float(np.nanmax(pk_var))]
    out["est_range"] = [float(np.nanmin(pk_est)), float(np.nanmax(pk_est))]
    return out


def child_idw(spec: dict, repeat: int) -> dict:
    """IDW fit + predict throughput, and a bare cKDTree query of the same cells as context."""
    from scipy.spatial import cKDTree

    from hydroatlas.interp import IDW

    base = _peak_mb()
    xy, z = make_data(spec["n_points"], spec["side"], spec["seed"])
    cells = grid_cells(spec["side"], spec["nx"])
    IDW(power=spec["power"], neighbors=spec["k"]).fit(xy[:64], z[:64]).predict(cells[:16])  # warm-up
    runs = []
    est = None
    for _ in range(repeat):
        del est
        t0 = time.perf_counter()
        est = IDW(power=spec["power"], neighbors=spec["k"]).fit(xy, z).predict(cells)
        runs.append(time.perf_counter() - t0)
    peak = _peak_mb()
    # sanity: the estimates of a few cells against a brute-force sum
    check = np.random.default_rng(0).integers(0, len(cells), 200)
    d = np.hypot(*(cells[check, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    nn = np.argsort(d, axis=1)[:, : spec["k"]]
    w = 1.0 / np.take_along_axis(d, nn, 1) ** spec["power"]
    brute = (w * z[nn]).sum(1) / w.sum(1)
    max_check = float(np.abs(brute - est[check]).max())
    del est
    kd_runs = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        cKDTree(xy).query(cells, k=spec["k"])
        kd_runs.append(time.perf_counter() - t0)
    sec = float(np.median(runs))
    return {"cells": len(cells), "points": len(xy), "runs": runs, "total_s": sec, "cells_per_s": len(cells) / sec,
            "kdtree_query_runs": kd_runs, "kdtree_query_s": float(np.median(kd_runs)), "peak_mb": peak,
            "base_mb": base, "max_diff_bruteforce_200_cells": max_check}


# -- cases (parent) ------------------------------------------------------------
def _busy_cpu_s() -> float:
    """Busy CPU seconds of the whole machine since boot, from /proc/stat (NaN where unavailable)."""
    try:
        with open("/proc/stat", encoding="ascii") as fh:
            vals = [int(v) for v in fh.readline().split()[1:9]]
    except (OSError, ValueError):
        return float("nan")
    user, nice, system, idle, iowait, irq, softirq, steal = vals
    return (user + nice + system + irq + softirq + steal) / os.sysconf("SC_CLK_TCK")


def _own_cpu_s() -> float:
    """CPU seconds of this process and its reaped children (the finished child processes)."""
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


class OtherLoad:
    """Average CPUs used by other processes while the block runs."""

    def __enter__(self):
        self.t0, self.b0, self.o0 = time.perf_counter(), _busy_cpu_s(), _own_cpu_s()
        return self

    def __exit__(self, *exc):
        wall = time.perf_counter() - self.t0
        other = (_busy_cpu_s() - self.b0) - (_own_cpu_s() - self.o0)
        self.cpus = max(other, 0.0) / wall if wall > 0 else float("nan")
        return False


def _say(msg: str) -> None:
    print(msg, flush=True)


def _fmt_runs(runs) -> str:
    return ", ".join(f"{r['total_s']:.3f}" for r in runs)


def run_compared(name: str, spec: dict, repeat: int, tmp: str) -> dict:
    nx = spec["nx"]
    save = tempfile.mkdtemp(prefix=f"{name}_", dir=tmp)
    _say(f"== {name}: {spec['n_points']:,} points, {nx} x {nx} = {nx * nx:,} cells, {spec['model']} "
         f"(nugget {spec['nugget']}, sill {spec['sill']}, range {spec['range']:g}), {spec['k']} neighbours")
    ours = _run_isolated(child_ours, spec, nx, repeat, save)
    if "error" in ours:
        _say(f"  ours: {ours['error']}")
    else:
        _say(f"  ours    : warm-up (numba JIT compile / cache load, excluded) {ours['warmup_s']:.2f} s; "
             f"{ours['threads']} numba threads")
        _say(f"  ours    : fit {ours['fit_s']:.3f} s + predict {ours['predict_s']:.3f} s = {ours['total_s']:.3f} s "
             f"(median of {len(ours['runs'])}: {_fmt_runs(ours['runs'])}); peak {ours['peak_mb']:.0f} MB "
             f"(base {ours['base_mb']:.0f} MB)")
    pk = _run_isolated(child_pykrige, spec, nx, save)
    if "error" in pk:
        _say(f"  pykrige : {pk['error']}")
    else:
        _say(f"  pykrige : constructor {pk['fit_s']:.3f} s + execute {pk['predict_s']:.3f} s = {pk['total_s']:.3f} s "
             f"(one run); peak {pk['peak_mb']:.0f} MB (base {pk['base_mb']:.0f} MB)")
    res = {"spec": spec, "ours": ours, "pykrige": pk}
    if "error" not in ours and "error" not in pk:
        cmp_ = _run_isolated(child_compare, save, spec["side"], nx)
        res["compare"] = cmp_
        res["ratio"] = pk["predict_s"] / ours["total_s"]
        res["ratio_with_constructor"] = pk["total_s"] / ours["total_s"]
        res["ratio_predict_only"] = pk["predict_s"] / ours["predict_s"]
        _say(f"  ratio   : {res['ratio']:.2f} = pykrige execute / ours fit+predict (target >= "
             f"{spec['ratio_target']:g}); {res['ratio_with_constructor']:.2f} with pykrige's constructor included; "
             f"{res['ratio_predict_only']:.2f} execute / predict")
        if "error" in cmp_:
            _say(f"  compare : {cmp_['error']}")
        else:
            _say(f"  compare : max |est diff| {cmp_['max_diff_est']:.3e} (mean {cmp_.get('mean_diff_est', 0):.1e}, "
                 f"{cmp_.get('cells_over_target_est', 0)} cells > {DIFF_TARGET:g}); "
                 f"max |var diff| {cmp_['max_diff_var']:.3e} (mean {cmp_.get('mean_diff_var', 0):.1e}, "
                 f"{cmp_.get('cells_over_target_var', 0)} cells > {DIFF_TARGET:g}); "
                 f"NaN cells ours {cmp_['nan_ours']}, pykrige {cmp_['nan_pykrige']}")
    for f in Path(save).glob("*.npy"):
        f.unlink()
    return res


def run_big(spec: dict) -> dict:
    nx = spec["nx"]
    _say(f"== big: {spec['n_points']:,} points, {nx} x {nx} = {nx * nx:,} cells, {spec['model']}, "
         f"{spec['k']} neighbours, ours only, estimates and std")
    ours = _run_isolated(child_ours, spec, nx, 1, None)
    if "error" in ours:
        _say(f"  ours: {ours['error']}")
    else:
        _say(f"  ours    : warm-up {ours['warmup_s']:.2f} s (excluded); fit {ours['fit_s']:.3f} s + predict "
             f"{ours['predict_s']:.3f} s = {ours['total_s']:.3f} s (one run); "
             f"{ours['cells'] / ours['total_s']:,.0f} cells/s; peak {ours['peak_mb']:.0f} MB; "
             f"NaN cells {ours['nan_cells']}")
    return {"spec": spec, "ours": ours}


def run_scaling(spec: dict, repeat: int) -> dict:
    _say(f"== scaling: our fit + predict(return_std=True) time, {spec['model']} (range {spec['range']:g}), "
         f"{spec['k']} neighbours, {spec['side']:g} m square; median of {repeat} when the first run < 2 s")
    rows = []
    for m in spec["cells"]:
        nx = int(round(np.sqrt(m)))
        for n in spec["points"]:
            s = dict(spec, n_points=n, seed=spec["seed"] + n)
            r = _run_isolated(child_ours, s, nx, repeat, None, True)
            r.update({"target_cells": m, "nx": nx})
            rows.append(r)
            if "error" in r:
                _say(f"  {m:>10,.0f} cells x {n:>7,} points: {r['error']}")
            else:
                _say(f"  {r['cells']:>10,} cells x {n:>7,} points: {r['total_s']:8.3f} s "
                     f"(fit {r['fit_s']:.3f}, predict {r['predict_s']:.3f}); "
                     f"{r['cells'] / r['total_s']:>12,.0f} cells/s; peak {r['peak_mb']:6.0f} MB")
    return {"spec": spec, "rows": rows}


def run_idw(spec: dict, repeat: int) -> dict:
    nx = spec["nx"]
    _say(f"== idw: {spec['n_points']:,} points, {nx * nx:,} cells, power {spec['power']:g}, {spec['k']} neighbours")
    r = _run_isolated(child_idw, spec, repeat)
    if "error" in r:
        _say(f"  idw: {r['error']}")
    else:
        _say(f"  idw     : fit + predict {r['total_s']:.3f} s (median of {len(r['runs'])}: "
             + ", ".join(f"{t:.3f}" for t in r["runs"]) + f") = {r['cells_per_s']:,.0f} cells/s; "
             f"peak {r['peak_mb']:.0f} MB; max |diff| vs brute force on 200 cells {r['max_diff_bruteforce_200_cells']:.1e}")
        _say(f"  context : bare cKDTree(xy).query(cells, k={spec['k']}) {r['kdtree_query_s']:.3f} s "
             f"({r['cells'] / r['kdtree_query_s']:,.0f} cells/s)")
    return {"spec": spec, "result": r}


# -- report --------------------------------------------------------------------
def _f(x, spec):
    return "" if x is None else format(x, spec)


def build_table(res: dict) -> list[tuple]:
    rows = []
    for name in ("dense", "sparse"):
        if name not in res:
            continue
        r = res[name]
        o, p, c = r["ours"], r["pykrige"], r.get("compare", {})
        tgt = f"ratio>={r['spec']['ratio_target']:g}, diff<={DIFF_TARGET:g}, <{PEAK_TARGET_MB:.0f}MB"
        fails = []
        if "ratio" not in r or "error" in c:
            fails.append("error")
        else:
            if not r["ratio"] >= r["spec"]["ratio_target"]:
                fails.append("ratio")
            if not (c["max_diff_est"] <= DIFF_TARGET and c["max_diff_var"] <= DIFF_TARGET):
                fails.append("diff")
        if not o.get("peak_mb", np.inf) < PEAK_TARGET_MB:
            fails.append("mem")
        rows.append((name, _f(o.get("total_s"), ".3f"), _f(p.get("predict_s"), ".3f"), _f(r.get("ratio"), ".2f"),
                     tgt, _f(c.get("max_diff_est"), ".2e"), _f(c.get("max_diff_var"), ".2e"),
                     _f(o.get("peak_mb"), ".0f"), _f(p.get("peak_mb"), ".0f"),
                     "pass" if not fails else "FAIL (" + ",".join(fails) + ")"))
    if "big" in res:
        o = res["big"]["ours"]
        fails = [] if "error" not in o else ["error"]
        if not o.get("total_s", np.inf) < BIG_TARGET_S:
            fails.append("time")
        if not o.get("peak_mb", np.inf) < PEAK_TARGET_MB:
            fails.append("mem")
        rows.append(("big", _f(o.get("total_s"), ".3f"), "", "", f"<{BIG_TARGET_S:g}s, <{PEAK_TARGET_MB:.0f}MB",
                     "", "", _f(o.get("peak_mb"), ".0f"), "", "pass" if not fails else "FAIL (" + ",".join(fails) + ")"))
    if "scaling" in res:
        for r in res["scaling"]["rows"]:
            label = f"scaling {r['target_cells']:.0e} cells x {r.get('points', 0):.0e} pts".replace("e+0", "e")
            rows.append((label, _f(r.get("total_s"), ".3f"), "", "", "(with std)", "", "",
                         _f(r.get("peak_mb"), ".0f"), "", "error" if "error" in r else ""))
    if "idw" in res:
        r = res["idw"]["result"]
        rows.append((f"idw {r.get('cells', 0):.0e} cells x {r.get('points', 0):.0e} pts".replace("e+0", "e"),
                     _f(r.get("total_s"), ".3f"), "", "",
                     f"{r['cells_per_s']:,.0f} cells/s" if "cells_per_s" in r else "", "", "",
                     _f(r.get("peak_mb"), ".0f"), "", "error" if "error" in r else ""))
    return rows


def format_table(rows) -> str:
    head = ("case", "ours s", "pykrige s", "ratio", "target", "max diff est", "max diff var",
            "peak MB ours", "peak MB pykrige", "pass/fail")
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(head)]
    left = {0, 4, 9}

    def fmt(row):
        return "  ".join(c.ljust(w) if i in left else c.rjust(w) for i, (c, w) in enumerate(zip(row, widths)))

    return "\n".join([fmt(head), "  ".join("-" * w for w in widths)] + [fmt(r) for r in rows])


def source_fingerprint() -> str:
    """Short hash of hydroatlas/interp/*.py, to tell whether the code under test changed during the run."""
    import hashlib

    h = hashlib.sha256()
    for f in sorted((ROOT / "hydroatlas" / "interp").glob("*.py")):
        h.update(f.name.encode())
        h.update(f.read_bytes())
    return h.hexdigest()[:12]


def machine_info() -> dict:
    import numba
    import pykrige
    import scipy

    info = {"python": sys.version.split()[0], "platform": platform.platform(), "cpus": os.cpu_count(),
            "numpy": np.__version__, "scipy": scipy.__version__, "numba": numba.__version__,
            "numba_threads": numba.get_num_threads(), "pykrige": pykrige.__version__,
            "interp_source_sha256": source_fingerprint()}
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            info["mem_total_gib"] = round(int(fh.readline().split()[1]) / 2**20, 1)
    except OSError:
        pass
    try:  # read-only look at the source revision
        info["git_head"] = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, capture_output=True,
                                          text=True, timeout=10).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "hydroatlas"], cwd=ROOT, capture_output=True,
                               text=True, timeout=10).stdout.strip()
        info["hydroatlas_uncommitted_changes"] = bool(dirty)
    except (OSError, subprocess.SubprocessError):
        pass
    return info


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes for a fast smoke run; skips big and 1e7 cells")
    ap.add_argument("--json", metavar="FILE", help="write every figure to this JSON file")
    ap.add_argument("--case", action="append", choices=CASES + ("all",),
                    help="case to run (may be repeated; default all)")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs of ours (and of IDW) per case; median used")
    args = ap.parse_args(argv)
    if args.repeat < 1:
        ap.error("--repeat must be at least 1")
    chosen = args.case or ["all"]
    cases = list(CASES) if "all" in chosen else [c for c in CASES if c in chosen]
    specs = {k: dict(v) for k, v in FULL.items()}
    if args.quick:
        for k, v in QUICK.items():
            specs[k].update(v)
        if "big" in cases:
            cases.remove("big")
            _say("--quick: the big case is skipped")

    info = machine_info()
    _say(f"hydroatlas kriging benchmark{' (QUICK sizes)' if args.quick else ''}: python {info['python']}, "
         f"numpy {info['numpy']}, scipy {info['scipy']}, numba {info['numba']} ({info['numba_threads']} threads), "
         f"pykrige {info['pykrige']}; {info['cpus']} CPUs, {info.get('mem_total_gib', '?')} GiB; "
         f"git {info.get('git_head', '?')}{' + uncommitted changes in hydroatlas/' if info.get('hydroatlas_uncommitted_changes') else ''}"
         f"; hydroatlas/interp source sha256 {info['interp_source_sha256']}")
    _say("Each side runs in its own spawned process; peak = VmHWM of that process (MB = 1e6 bytes). "
         "Ours: one tiny warm-up fit+predict first (numba JIT), excluded from timings.")

    res: dict = {"machine": info, "quick": args.quick}
    t_all = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="bench_kriging_") as tmp:
        for case in cases:
            _say("")
            with OtherLoad() as other:
                if case in ("dense", "sparse"):
                    res[case] = run_compared(case, specs[case], args.repeat, tmp)
                elif case == "big":
                    res[case] = run_big(specs[case])
                elif case == "scaling":
                    res[case] = run_scaling(specs[case], args.repeat)
                elif case == "idw":
                    res[case] = run_idw(specs[case], args.repeat)
            res[case]["other_processes_cpus"] = other.cpus
            res.setdefault("other_processes_cpus", {})[case] = other.cpus
            _say(f"  [other processes used {other.cpus:.2f} of {os.cpu_count()} CPUs on average during {case}"
                 + ("; figures are disturbed]" if other.cpus > 0.2 else "]"))
    res["wall_s"] = time.perf_counter() - t_all
    res["interp_source_sha256_end"] = end_sha = source_fingerprint()
    if end_sha != info["interp_source_sha256"]:
        _say(f"\nWARNING: hydroatlas/interp/*.py changed during the run ({info['interp_source_sha256']} -> {end_sha}); "
             "later cases may have measured newer code than earlier ones.")

    rows = build_table(res)
    res["table"] = [dict(zip(("case", "ours_s", "pykrige_s", "ratio", "target", "max_diff_est", "max_diff_var",
                              "peak_mb_ours", "peak_mb_pykrige", "pass_fail"), r)) for r in rows]
    _say(f"\nSummary{' (QUICK sizes: targets are for the full sizes)' if args.quick else ''}; "
         f"ours s = fit + predict with std (median), pykrige s = execute only (constructor excluded); "
         f"ratio = pykrige s / ours s; "
         f"total wall {res['wall_s']:.0f} s")
    _say(format_table(rows))
    if args.json:
        Path(args.json).write_text(json.dumps(res, indent=2, default=float), encoding="utf-8")
        _say(f"figures written to {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
