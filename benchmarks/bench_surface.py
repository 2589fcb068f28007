"""Benchmark of the whole ``surface`` path against the bare kriging prediction of the same points and cells.

Run from the repository root::

    .venv/bin/python benchmarks/bench_surface.py [--wells 1000,10000] [--big] [--cells 1000] [--repeat 1]

All figures and ratios printed come from this one run, on this machine.

For each number of wells (default 1,000 and 10,000; ``--big`` adds 100,000):

- setup (not timed against anything): a synthetic GeoPackage store is made with
  the library's own importers: one aquifer unit, the wells uniformly spread over
  a 20 km square, one screened zone each and one head reading in March 2024 of
  an invented smooth regional head field plus noise;
- ``whole``: :func:`hydroatlas.workflows.build_surface` with ``method="kriging"``,
  the default neighbourhood ("auto": 16 nearest points above 400 wells), a cell
  size giving about ``--cells`` x ``--cells`` cells over the data and their margin:
  the selection of heads by window, the variogram fit, leave-one-out of the
  chosen method, prediction with std, the mask, the GeoTIFF, the gradient raster
  and arrows and the JSON sidecar, as ``hydroatlas surface`` runs it (less the
  click layer);
- ``bare``: ``OrdinaryKriging(variogram, neighbors=16).fit(xy, z).predict(cells,
  return_std=True)`` with the variogram the whole run fitted, on the same wells,
  at every cell centre of the same grid (the whole run predicts only the cells in
  its mask, so it does a little less prediction work than the bare one).

Each side runs in its own freshly spawned process, so that its peak memory
(VmHWM of /proc/self/status; MB = 10**6 bytes) is its own. Each child first
warms the compiled kernels on a tiny case (excluded from the timing). The CPU
time used by other processes while a case ran is printed: other people's tests
on the same small machine slow both sides and make the figures noisy.

Each side is timed ``--repeat`` times in its process (default 3). The first
run ("cold") carries what a fresh ``hydroatlas surface`` process pays once:
importing pandas, geopandas, rasterio and pyogrio, and loading the compiled
kernels from numba's cache; the median of the later runs ("warm") is the work
itself. Both ratios are printed; the targets are judged on warm.
Targets: whole / bare <= 2, whole peak memory < 1500 MB.
"""

from __future__ import annotations

import argparse
import csv
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from _common import peak_mb  # noqa: E402
from bench_kriging import OtherLoad, _run_isolated  # noqa: E402

SIDE = 20_000.0
#: the grid covers the data's bounds plus a tenth of their extent on each side (workflows.grid_extent)
GRID_SIDE = 1.2 * SIDE
X0, Y0 = 500_000.0, 4_000_000.0
WINDOW = "2024-03-01/2024-03-31"
TARGET_RATIO = 2.0
TARGET_MB = 1500.0


def head_field(x, y):
    """Invented smooth regional head (m): a gentle slope and two broad undulations."""
    u, v = (x - X0) / SIDE, (y - Y0) / SIDE
    return 250.0 - 40.0 * u + 15.0 * v + 6.0 * np.sin(4.0 * u) * np.cos(3.0 * v)


def _write(path: Path, rows) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh).writerows(rows)
    return path


def child_setup(n: int, folder: str, seed: int) -> dict:
    """Make the synthetic store of ``n`` wells in ``folder``; returns its path and the time it took."""
    from hydroatlas.store import create_store
    from hydroatlas.store.importers import import_file

    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    xy = np.column_stack([X0 + rng.uniform(0, SIDE, n), Y0 + rng.uniform(0, SIDE, n)])
    head = head_field(xy[:, 0], xy[:, 1]) + rng.normal(0.0, 0.3, n)
    ids = [f"B{i:06d}" for i in range(n)]
    folder = Path(folder)
    files = {
        "units": [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth"]]
        + [[w, f"{x:.2f}", f"{y:.2f}", 300, 100] for w, (x, y) in zip(ids, xy)],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]] + [[w, "AQ", 0, 100] for w in ids],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]] + [[w, "S", 40, 50] for w in ids],
        "heads": [["well_id", "zone_id", "measured_at", "head"]]
        + [[w, "S", "2024-03-15", f"{h:.3f}"] for w, h in zip(ids, head)],
    }
    path = folder / f"bench_{n}.gpkg"
    store = create_store(path, crs="EPSG:32616", length_unit="m")
    try:
        for kind, rows in files.items():
            import_file(store, kind, _write(folder / f"{kind}_{n}.csv", rows))
    finally:
        store.close()
    return {"store": str(path), "setup_s": time.perf_counter() - t0}


def _warm_up():
    from hydroatlas.interp import OrdinaryKriging, Variogram

    rng = np.random.default_rng(0)
    xy = rng.uniform(0, 10, (50, 2))
    OrdinaryKriging(Variogram("spherical", sill=1.0, range=5.0), neighbors=16).fit(xy, xy[:, 0]).predict(
        xy + 0.5, return_std=True)


def child_whole(store_path: str, cells: int, out: str, repeat: int) -> dict:
    from hydroatlas import open_store
    from hydroatlas import workflows

    _warm_up()
    base = peak_mb()
    runs = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        with open_store(store_path) as s:
            side = workflows.build_surface(s, "AQ", "head", method="kriging", window=WINDOW, cell=GRID_SIDE / cells,
                                           out=out)
        runs.append(time.perf_counter() - t0)
    return {"runs": runs, "cold_s": runs[0], "s": float(np.median(runs[1:] or runs)), "peak_mb": peak_mb(),
            "base_mb": base,
            "grid": side["grid"], "variogram": side["variogram"], "neighbors": side["neighbors"],
            "n_points": side["n_points"], "cv_rmse": side["cross_validation"]["kriging"]["rmse"]}


def child_bare(store_path: str, grid: dict, variogram: dict, neighbors, repeat: int) -> dict:
    from hydroatlas import open_store
    from hydroatlas import workflows
    from hydroatlas.interp import OrdinaryKriging, Variogram
    from hydroatlas.interp.grid import GridSpec

    with open_store(store_path) as s:  # the same points, read before the clock starts
        xy, z, _, _ = workflows.surface_points(s, "AQ", "head", window=WINDOW)
    v = Variogram(**{k: variogram[k] for k in ("model", "nugget", "sill", "range", "angle", "ratio")
                     if k in variogram})
    cells = GridSpec(**grid).centers()
    _warm_up()
    base = peak_mb()
    runs = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        est, std = OrdinaryKriging(v, neighbors=neighbors).fit(xy, z).predict(cells, return_std=True)
        runs.append(time.perf_counter() - t0)
    return {"runs": runs, "cold_s": runs[0], "s": float(np.median(runs[1:] or runs)), "peak_mb": peak_mb(),
            "base_mb": base,
            "n_cells": int(len(cells)), "finite": int(np.isfinite(est).sum())}


def run_case(n: int, cells: int, repeat: int, tmp: str) -> dict:
    folder = Path(tmp) / f"n{n}"
    folder.mkdir()
    setup = _run_isolated(child_setup, n, str(folder), 20_260 + n)
    if "error" in setup:
        return {"n": n, "error": setup["error"]}
    with OtherLoad() as load:
        whole = _run_isolated(child_whole, setup["store"], cells, str(folder / "out"), repeat)
        if "error" in whole:
            return {"n": n, "error": whole["error"]}
        bare = _run_isolated(child_bare, setup["store"], whole["grid"], whole["variogram"], whole["neighbors"],
                             repeat)
    if "error" in bare:
        return {"n": n, "error": bare["error"]}
    return {"n": n, "setup_s": setup["setup_s"], "whole": whole, "bare": bare, "other_cpus": load.cpus,
            "ratio": whole["s"] / bare["s"]}


def format_table(results) -> str:
    head = ("wells", "grid", "whole cold s", "bare cold s", "cold ratio", "whole warm s", "bare warm s",
            "warm ratio", "whole MB", "bare MB", "LOO RMSE m", "other CPUs", "targets")
    rows = [head]
    for r in results:
        if "error" in r:
            rows.append((f"{r['n']:,}", r["error"], *[""] * 10, "failed"))
            continue
        w, b = r["whole"], r["bare"]
        ok = r["ratio"] <= TARGET_RATIO and w["peak_mb"] < TARGET_MB
        rows.append((f"{r['n']:,}", f"{w['grid']['nrows']} x {w['grid']['ncols']}", f"{w['cold_s']:.2f}",
                     f"{b['cold_s']:.2f}", f"{w['cold_s'] / b['cold_s']:.2f}", f"{w['s']:.2f}",
                     f"{b['s']:.2f}", f"{r['ratio']:.2f}", f"{w['peak_mb']:.0f}", f"{b['peak_mb']:.0f}",
                     f"{w['cv_rmse']:.3f}", f"{r['other_cpus']:.2f}", "met" if ok else "MISSED"))
    widths = [max(len(str(row[i])) for row in rows) for i in range(len(head))]
    return "\n".join("  ".join(str(c).rjust(wd) for c, wd in zip(row, widths)) for row in rows)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--wells", default="1000,10000", help="comma-separated numbers of wells (default 1000,10000)")
    ap.add_argument("--big", action="store_true", help="add a store of 100,000 wells")
    ap.add_argument("--cells", type=int, default=1000, help="cells along each side of the grid (default 1000)")
    ap.add_argument("--repeat", type=int, default=3,
                    help="timed runs per side: the first is cold, the median of the others warm (default 3)")
    args = ap.parse_args(argv)
    sizes = [int(v) for v in args.wells.split(",") if v.strip()]
    if args.big:
        sizes.append(100_000)
    if args.cells < 10 or args.repeat < 1 or any(n < 50 for n in sizes):
        ap.error("--cells must be >= 10, --repeat >= 1 and every number of wells >= 50")
    print(f"whole `surface` path (build_surface) against bare OrdinaryKriging fit + predict(return_std=True); "
          f"{args.cells} x {args.cells} cells over a {SIDE / 1000:g} km square; {os.cpu_count()} CPUs; "
          "each side in its own spawned process; MB = 1e6 bytes (VmHWM)", flush=True)
    results = []
    with tempfile.TemporaryDirectory(prefix="bench_surface_") as tmp:
        for n in sizes:
            r = run_case(n, args.cells, args.repeat, tmp)
            results.append(r)
            if "error" not in r:
                print(f"  {n:,} wells: setup {r['setup_s']:.1f} s; whole runs {r['whole']['runs']}, "
                      f"bare runs {r['bare']['runs']}; bare predicted {r['bare']['finite']:,} of "
                      f"{r['bare']['n_cells']:,} cells", flush=True)
            else:
                print(f"  {n:,} wells: {r['error']}", flush=True)
    print(format_table(results))
    return 0 if all("error" not in r for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
