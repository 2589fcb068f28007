"""Benchmarks at the scale of a state survey (issue 15): the store on PostGIS, and surfaces on a Dask cluster.

Run from the repository root::

    .venv/bin/python benchmarks/bench_scale.py [--only import,stats,surface] [--readings 10000000]
        [--ktests 1000000] [--cells 20000] [--points 100000] [--workers 2]

Every figure and ratio printed comes from this one run, on this machine. The defaults are the sizes of the
issue; a smoke run at small sizes, e.g. ``--readings 100000 --ktests 10000 --cells 2000 --points 10000``,
takes a minute or two.

- ``import``: head readings imported into a PostGIS store with full validation, against a bare ``COPY`` of
  the same rows into an unconstrained table (:func:`bench_import_postgis`).
- ``stats``: unit statistics over the K tests of a PostGIS store against the same over a GeoPackage of the same
  rows (:func:`bench_stats_postgis`).
- ``surface``: a ``--cells`` x ``--cells`` ordinary-kriging surface (estimate and standard deviation, 16
  neighbours) from ``--points`` invented points, written tile by tile into a GeoTIFF
  (:func:`hydroatlas.workflows.surface_tiles.predict_to_geotiff`) by a ``--workers``-process local pool and by a
  ``--workers``-worker ``dask.distributed.LocalCluster`` (one thread per worker) on the same grid
  (:func:`bench_surface_dask`). Targets: equal answers, peak memory per worker under 1.5 GB, Dask time within
  1.3 times the pool's.

Each side runs in its own freshly spawned process, so that its peak memory (VmHWM of /proc/self/status; MB =
10**6 bytes) is its own; the peak of each worker process is read from its own /proc entry.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from _common import peak_mb  # noqa: E402
from bench_kriging import _run_isolated  # noqa: E402

TARGET_RATIO = 1.3
TARGET_WORKER_MB = 1500.0
#: side of the square the surface covers, metres (the cell size follows from --cells)
SIDE = 200_000.0
CRS = "EPSG:32616"


# -- PostGIS: import and unit statistics (bench_import_postgis, bench_stats_postgis) -------------------------------
# Written by the PostGIS side of issue 15 in this file. main() calls them with (size, folder) and prints the dict
# each returns (figures and ratios measured in this run); where they are not in this file, main() says so.
#
# The server: the database named by HYDROATLAS_BENCH_PG (an admin URL such as
# postgresql://postgres@db.example.org/postgres; a database is created and dropped for each part), else a throwaway
# cluster started from the installed PostgreSQL binaries as the tests start it (tests/pg_server.py: fsync and
# synchronous_commit off, which favours the validated import and the bare COPY alike).
PG_ENV = "HYDROATLAS_BENCH_PG"
IMPORT_TARGET_RATIO = 0.5  # validated import at least half the speed of a bare COPY
IMPORT_TARGET_MB = 1000.0  # peak memory of the importing client
STATS_TARGET_S = 2.0


class _Server:
    """A PostgreSQL server for one benchmark part: new_database() gives a fresh database URL."""

    def __init__(self):
        self._own = None
        self._made = []
        admin = os.environ.get(PG_ENV)
        if admin:
            self.admin = admin
            self.kind = f"the server of {PG_ENV}"
        else:
            sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
            import pg_server

            reason = pg_server.missing_reason()
            if reason:
                raise RuntimeError(f"no PostgreSQL server: {reason}; or set {PG_ENV}")
            self._own = pg_server.PGServer.start()
            self.admin = self._own.admin_url
            self.kind = "a throwaway local cluster (fsync off)"

    def _exec(self, sql):
        import psycopg

        with psycopg.connect(self.admin, autocommit=True) as conn:
            conn.execute(sql)

    def new_database(self) -> str:
        from urllib.parse import urlsplit, urlunsplit

        name = f"hydroatlas_bench_{os.getpid()}_{len(self._made) + 1}"
        self._exec(f"CREATE DATABASE {name}")
        self._made.append(name)
        u = urlsplit(self.admin)
        return urlunsplit((u.scheme, u.netloc, "/" + name, u.query, ""))

    def close(self):
        for name in self._made:
            try:
                self._exec(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")
            except Exception:  # noqa: BLE001 - the benchmark's figures are printed already
                pass
        if self._own is not None:
            self._own.stop()


def _fill_store(location, inputs: dict, kinds) -> None:
    """Create a store at ``location`` and import ``kinds`` of the synthetic files (not timed)."""
    from bench_store import CRS as STORE_CRS

    from hydroatlas.store import create_store
    from hydroatlas.store.importers import import_file

    with create_store(location, crs=STORE_CRS, length_unit="m") as store:
        for kind in kinds:
            import_file(store, kind, inputs["files"][kind])


def phase_bare_copy(url: str, csv_path: str) -> dict:
    """COPY the CSV file's rows as they are into a table without key, constraint or index (one transaction)."""
    import psycopg

    base = peak_mb()
    with psycopg.connect(url) as conn:
        conn.execute("CREATE TABLE bare_heads (well_id text, zone_id text, measured_at text, head double precision)")
        conn.commit()
        t0 = time.perf_counter()
        with conn.cursor() as cur, open(csv_path, "rb") as fh:
            with cur.copy("COPY bare_heads FROM STDIN WITH (FORMAT csv, HEADER true)") as copy:
                while block := fh.read(8 << 20):
                    copy.write(block)
        conn.commit()
        seconds = time.perf_counter() - t0
        rows = conn.execute("SELECT count(*) FROM bare_heads").fetchone()[0]
    return {"seconds": seconds, "rows": rows, "peak_mb": peak_mb(), "baseline_mb": base}


def bench_import_postgis(readings: int, folder: Path) -> dict:
    """Head readings imported into a PostGIS store with full validation (``import_file``: the CSV checks, the
    references to zones, then COPY into a staging table and one INSERT ... ON CONFLICT merge), against a bare
    COPY of the same file into an unconstrained table of the same server, each in a fresh process."""
    from bench_store import generate_inputs, phase_import

    try:
        server = _Server()
    except RuntimeError as exc:
        return {"error": str(exc)}
    try:
        n_wells = max(10, min(10_000, readings // 100))
        t0 = time.perf_counter()
        inputs = generate_inputs(folder, n_wells=n_wells, n_tests=n_wells, n_heads=readings, seed=15)
        url = server.new_database()
        _fill_store(url, inputs, ("units", "wells", "picks", "zones"))
        setup = time.perf_counter() - t0
        imp = _run_isolated(phase_import, url, "heads", inputs["files"]["heads"])
        if "error" in imp:
            return imp
        bare = _run_isolated(phase_bare_copy, url, inputs["files"]["heads"])
        if "error" in bare:
            return bare
    finally:
        server.close()
    ratio = bare["seconds"] / imp["seconds"]
    return {
        "server": server.kind,
        "readings": imp["rows"],
        "file_mb": inputs["bytes"]["heads"] / 1e6,
        "setup_s (files, store, wells, zones; not timed below)": setup,
        "validated_import_s": imp["seconds"],
        "validated_rows_per_s": imp["rows"] / imp["seconds"],
        "bare_copy_s": bare["seconds"],
        "bare_rows_per_s": bare["rows"] / bare["seconds"],
        "speed_ratio (validated / bare)": ratio,
        "target_ratio": f">= {IMPORT_TARGET_RATIO} ({'met' if ratio >= IMPORT_TARGET_RATIO else 'MISSED'})",
        "client_peak_mb": imp["peak_mb"],
        "client_baseline_mb": imp["baseline_mb"],
        "target_peak": f"< {IMPORT_TARGET_MB:.0f} MB ({'met' if imp['peak_mb'] < IMPORT_TARGET_MB else 'MISSED'})",
        "bare_copy_client_peak_mb": bare["peak_mb"],
    }


def phase_unit_stats(location: str) -> dict:
    """``workflows.unit_stats`` over every K test of the store (first and second call timed), per test and zone."""
    from hydroatlas import workflows
    from hydroatlas.store import open_store

    with open_store(location) as store:
        base = peak_mb()
        t0 = time.perf_counter()
        rows = workflows.unit_stats(store, k_unit="m/d")
        seconds = time.perf_counter() - t0
        t0 = time.perf_counter()
        workflows.unit_stats(store, k_unit="m/d")
        second = time.perf_counter() - t0
        t0 = time.perf_counter()
        zone_rows = workflows.unit_stats(store, k_unit="m/d", per="zone")
        zone_seconds = time.perf_counter() - t0
        n = store.count("ktests")
    return {"seconds": seconds, "second_seconds": second, "zone_seconds": zone_seconds, "tests": n,
            "peak_mb": peak_mb(), "baseline_mb": base, "rows": [dict(r) for r in rows],
            "zone_rows": [dict(r) for r in zone_rows]}


def _max_rel_diff(a: list[dict], b: list[dict]) -> tuple[float, bool]:
    """Largest relative difference of the numbers of two unit_stats results, and whether every count and text
    is equal."""
    worst, same = 0.0, len(a) == len(b)
    for ra, rb in zip(a, b):
        for key, va in ra.items():
            vb = rb.get(key)
            if isinstance(va, list):
                pairs = list(zip(va, vb or []))
            else:
                pairs = [(va, vb)]
            for x, y in pairs:
                if isinstance(x, float) and isinstance(y, float):
                    if np.isfinite(x) or np.isfinite(y):
                        worst = max(worst, abs(x - y) / max(abs(x), abs(y), 1e-300))
                elif x != y:
                    same = False
    return worst, same


def bench_stats_postgis(ktests: int, folder: Path) -> dict:
    """Unit statistics over ``ktests`` K tests: a PostGIS store (aggregated in SQL) against a GeoPackage of the
    same rows (the PostGIS store is a ``hydroatlas copy`` of it), each in a fresh process."""
    from bench_store import generate_inputs

    from hydroatlas.store.copying import copy_store

    try:
        server = _Server()
    except RuntimeError as exc:
        return {"error": str(exc)}
    try:
        n_wells = max(10, min(10_000, ktests // 100))
        t0 = time.perf_counter()
        inputs = generate_inputs(folder, n_wells=n_wells, n_tests=ktests, n_heads=n_wells, seed=15)
        gpkg = str(folder / "stats.gpkg")
        _fill_store(gpkg, inputs, ("units", "wells", "picks", "zones", "ktests"))
        url = server.new_database()
        t1 = time.perf_counter()
        copy_store(gpkg, url)
        copy_s = time.perf_counter() - t1
        setup = time.perf_counter() - t0
        g = _run_isolated(phase_unit_stats, gpkg)
        p = _run_isolated(phase_unit_stats, url)
    finally:
        server.close()
    for r in (g, p):
        if "error" in r:
            return r
    diff, same = _max_rel_diff(p["rows"], g["rows"])
    zdiff, zsame = _max_rel_diff(p["zone_rows"], g["zone_rows"])
    equal = same and zsame and max(diff, zdiff) <= 1e-9
    return {
        "server": server.kind,
        "ktests": p["tests"],
        "setup_s (files, GeoPackage store, copy to PostGIS; not timed below)": setup,
        "copy_gpkg_to_postgis_s": copy_s,
        "postgis_stats_s": p["seconds"],
        "postgis_second_call_s": p["second_seconds"],
        "postgis_per_zone_s": p["zone_seconds"],
        "postgis_client_peak_mb": p["peak_mb"],
        "gpkg_stats_s": g["seconds"],
        "gpkg_per_zone_s": g["zone_seconds"],
        "gpkg_client_peak_mb": g["peak_mb"],
        "max_relative_difference": max(diff, zdiff),
        "answers_equal": f"counts and texts equal, numbers to 1e-9 ({'met' if equal else 'MISSED'})",
        "target_time": f"< {STATS_TARGET_S} s ({'met' if p['seconds'] < STATS_TARGET_S else 'MISSED'})",
    }


# -- surfaces: a local process pool against a Dask LocalCluster -------------------------------------------------
def head_field(x, y):
    """Invented smooth regional head (m) over the square: a slope and two broad undulations."""
    u, v = x / SIDE, y / SIDE
    return 250.0 - 40.0 * u + 15.0 * v + 6.0 * np.sin(4.0 * u) * np.cos(3.0 * v)


def surface_model(points: int, seed: int = 2026):
    """Ordinary kriging with 16 neighbours, fitted to ``points`` invented heads uniformly over the square."""
    from hydroatlas.interp import OrdinaryKriging, Variogram

    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, SIDE, (points, 2))
    z = head_field(xy[:, 0], xy[:, 1]) + rng.normal(0.0, 0.3, points)
    variogram = Variogram("spherical", nugget=0.09, sill=30.0, range=0.4 * SIDE)
    return OrdinaryKriging(variogram, neighbors=16).fit(xy, z)


def _vmhwm_mb(pid: int) -> float | None:
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024 / 1e6
    except OSError:
        return None
    return None


class ChildPeaks:
    """Peak memory (VmHWM) of every child process of this one, read every ``every_s`` seconds while the block
    runs. VmHWM only grows, so the last reading before a child ends is its peak up to at most ``every_s``."""

    def __init__(self, every_s: float = 0.2):
        self.every_s = every_s
        self.peaks: dict[int, float] = {}
        self._stop = threading.Event()

    def _children(self):
        me = str(os.getpid())
        for entry in os.listdir("/proc"):
            if entry.isdigit():
                try:
                    with open(f"/proc/{entry}/stat", encoding="ascii") as fh:
                        fields = fh.read().rsplit(")", 1)[1].split()
                except OSError:
                    continue
                if fields[1] == me and self._is_worker(entry):
                    yield int(entry)

    @staticmethod
    def _is_worker(pid: str) -> bool:
        """A process of a multiprocessing pool (not its resource tracker)."""
        try:
            with open(f"/proc/{pid}/cmdline", "rb") as fh:
                return b"spawn_main" in fh.read()
        except OSError:
            return False

    def _watch(self):
        while not self._stop.is_set():
            for pid in self._children():
                mb = _vmhwm_mb(pid)
                if mb is not None:
                    self.peaks[pid] = max(mb, self.peaks.get(pid, 0.0))
            self._stop.wait(self.every_s)

    def __enter__(self):
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        return False


def _grid(cells: int):
    from hydroatlas.interp.grid import GridSpec

    return GridSpec(0.0, SIDE, SIDE / cells, cells, cells, CRS)


def _write(model, grid, path, budget_bytes: int, **where) -> dict:
    """predict_to_geotiff with timings: to the last tile, and in all (the rest is the COG layout copy)."""
    from hydroatlas.workflows.surface_tiles import predict_to_geotiff

    ticks, peaks = [], []

    def tick(rows):
        ticks.append(time.perf_counter())
        peaks.append(peak_mb())

    t0 = time.perf_counter()
    predict_to_geotiff(model, grid, path, crs=CRS, units="m", descriptions=["head estimate (m)", "kriging std (m)"],
                       budget_bytes=budget_bytes, progress=tick, **where)
    total = time.perf_counter() - t0
    return {"s": total, "tiles": len(ticks), "tiles_s": ticks[-1] - t0, "layout_s": total - (ticks[-1] - t0),
            "client_tiles_mb": peaks[-1]}


def child_pool(model, cells: int, path: str, workers: int, budget_bytes: int) -> dict:
    base = peak_mb()
    with ChildPeaks() as kids:
        run = _write(model, _grid(cells), path, budget_bytes, workers=workers)
    return {**run, "client_mb": peak_mb(), "client_base_mb": base, "worker_mb": sorted(kids.peaks.values())}


def child_dask(model, cells: int, path: str, workers: int, budget_bytes: int) -> dict:
    from distributed import Client, LocalCluster

    base = peak_mb()
    t0 = time.perf_counter()
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster, \
            Client(cluster, set_as_default=False) as client:
        start_s = time.perf_counter() - t0
        run = _write(model, _grid(cells), path, budget_bytes, scheduler=client)
        worker_mb = sorted(client.run(peak_mb).values())
    return {**run, "cluster_start_s": start_s, "client_mb": peak_mb(), "client_base_mb": base,
            "worker_mb": worker_mb}


def compare_rasters(a, b, rows_per_read: int = 512) -> dict:
    """Largest difference of two rasters' bands, and whether no-data falls in the same cells, read in blocks."""
    import rasterio
    from rasterio.windows import Window

    worst, same_nodata, cells = 0.0, True, 0
    with rasterio.open(a) as ra, rasterio.open(b) as rb:
        if (ra.count, ra.height, ra.width) != (rb.count, rb.height, rb.width):
            return {"max_abs_diff": float("inf"), "same_nodata": False, "cells": 0}
        for r0 in range(0, ra.height, rows_per_read):
            w = Window(0, r0, ra.width, min(rows_per_read, ra.height - r0))
            for i in range(1, ra.count + 1):
                x = ra.read(i, window=w, masked=True)
                y = rb.read(i, window=w, masked=True)
                same_nodata &= bool(np.array_equal(x.mask, y.mask))
                both = ~(x.mask | y.mask)
                if both.any():
                    worst = max(worst, float(np.abs(x.data[both].astype(float) - y.data[both]).max()))
                cells += int(both.sum())
    return {"max_abs_diff": worst, "same_nodata": same_nodata, "cells": cells}


def bench_surface_dask(cells: int, points: int, workers: int, folder: Path, *, tile_mb: float = 256.0) -> dict:
    """The surface line of the benchmark: the same grid through a local pool and a Dask LocalCluster.

    ``tile_mb``: the memory budget of one tile (MiB; :func:`hydroatlas.interp.grid.rows_per_tile`), which sets
    the number of tiles (at the default a 20,000-cell row gives 33 rows a tile, 607 tiles).
    """
    budget = int(tile_mb * 2**20)
    t0 = time.perf_counter()
    model = surface_model(points)
    fit_s = time.perf_counter() - t0
    pool = _run_isolated(child_pool, model, cells, str(folder / "pool.tif"), workers, budget)
    if "error" in pool:
        return {"error": f"local pool: {pool['error']}"}
    dask = _run_isolated(child_dask, model, cells, str(folder / "dask.tif"), workers, budget)
    if "error" in dask:
        return {"error": f"Dask: {dask['error']}"}
    same = compare_rasters(folder / "pool.tif", folder / "dask.tif")
    size_mb = {k: (folder / f"{k}.tif").stat().st_size / 1e6 for k in ("pool", "dask")}
    return {"cells": cells, "points": points, "workers": workers, "fit_s": fit_s, "pool": pool, "dask": dask,
            "ratio": dask["s"] / pool["s"], "ratio_with_start": (dask["s"] + dask["cluster_start_s"]) / pool["s"],
            "compare": same, "file_mb": size_mb}


def print_surface(r: dict) -> bool:
    if "error" in r:
        print(f"  surface: {r['error']}")
        return False
    n = r["cells"]
    pool, dask = r["pool"], r["dask"]
    worst_worker = max(pool["worker_mb"] + dask["worker_mb"] or [float("nan")])
    print(f"surface: {n:,} x {n:,} = {n * n:,} cells from {r['points']:,} points (ordinary kriging, 16 neighbours, "
          f"estimate and std) in {pool['tiles']} tiles, {r['workers']} workers; model fit {r['fit_s']:.2f} s "
          "(not counted)")
    for name, side in (("local process pool", pool), ("Dask LocalCluster", dask)):
        extra = f"; cluster start {side['cluster_start_s']:.2f} s (not counted)" if "cluster_start_s" in side else ""
        print(f"  {name}: {side['s']:.2f} s ({n * n / side['s']:,.0f} cells/s), of which tiles "
              f"{side['tiles_s']:.2f} s and COG layout copy {side['layout_s']:.2f} s{extra}; client peak "
              f"{side['client_mb']:.0f} MB (at start {side['client_base_mb']:.0f}, after the last tile "
              f"{side['client_tiles_mb']:.0f}); worker peaks "
              f"{', '.join(f'{m:.0f}' for m in side['worker_mb'])} MB")
    c = r["compare"]
    print(f"  answers: max |Dask - pool| {c['max_abs_diff']:.3g} m over {c['cells']:,} band cells; no-data in the "
          f"same cells: {c['same_nodata']}; files {r['file_mb']['pool']:.1f} / {r['file_mb']['dask']:.1f} MB")
    ok_ratio = r["ratio"] <= TARGET_RATIO
    ok_mem = worst_worker < TARGET_WORKER_MB
    ok_same = c["max_abs_diff"] <= 1e-12 and c["same_nodata"]
    print(f"  Dask / pool time {r['ratio']:.2f} (with cluster start {r['ratio_with_start']:.2f}; target <= "
          f"{TARGET_RATIO}): {'met' if ok_ratio else 'MISSED'}; largest worker peak {worst_worker:.0f} MB (target < "
          f"{TARGET_WORKER_MB:.0f}): {'met' if ok_mem else 'MISSED'}; equal answers: {'met' if ok_same else 'MISSED'}")
    return True


# -- the run ---------------------------------------------------------------------------------------------------
def _print_figures(name: str, result) -> bool:
    """Print what a PostGIS benchmark function returned (a dict of figures, or text)."""
    if isinstance(result, dict):
        if "error" in result:
            print(f"{name}: {result['error']}")
            return False
        print(f"{name}:")
        for key, value in result.items():
            print(f"  {key}: {value:,.4g}" if isinstance(value, float) else f"  {key}: {value}")
        return True
    if result is not None:
        print(f"{name}: {result}")
    return True


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--only", default="import,stats,surface",
                    help="comma-separated parts to run: import, stats, surface (default: all three)")
    ap.add_argument("--readings", type=int, default=10_000_000, help="head readings imported (default 10^7)")
    ap.add_argument("--ktests", type=int, default=1_000_000, help="K tests for the unit statistics (default 10^6)")
    ap.add_argument("--cells", type=int, default=20_000, help="cells along each side of the surface (default 20,000)")
    ap.add_argument("--points", type=int, default=100_000, help="data points of the surface (default 10^5)")
    ap.add_argument("--workers", type=int, default=2, help="pool processes and Dask workers (default 2)")
    ap.add_argument("--tile-mb", type=float, default=256.0,
                    help="memory budget of one surface tile, MiB (default 256, the library's)")
    args = ap.parse_args(argv)
    parts = [p.strip() for p in args.only.split(",") if p.strip()]
    unknown = sorted(set(parts) - {"import", "stats", "surface"})
    if unknown:
        ap.error(f"--only: unknown part(s) {', '.join(unknown)}; choose from import, stats, surface")
    if min(args.readings, args.ktests) < 1 or args.cells < 10 or args.points < 20 or args.workers < 1 \
            or not args.tile_mb > 0:
        ap.error("--readings and --ktests must be >= 1, --cells >= 10, --points >= 20, --workers >= 1 and "
                 "--tile-mb > 0")
    print(f"bench_scale: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.2f} at start; "
          "MB = 1e6 bytes (VmHWM)", flush=True)
    ok = True
    with tempfile.TemporaryDirectory(prefix="bench_scale_") as tmp:
        tmp = Path(tmp)
        for part, name, size in (("import", "bench_import_postgis", args.readings),
                                 ("stats", "bench_stats_postgis", args.ktests)):
            if part not in parts:
                continue
            fn = globals().get(name)
            if fn is None:
                print(f"{part}: {name} is not in this file yet; nothing measured")
                ok = False
                continue
            folder = tmp / part
            folder.mkdir()
            ok &= _print_figures(part, fn(size, folder))
        if "surface" in parts:
            folder = tmp / "surface"
            folder.mkdir()
            ok &= print_surface(bench_surface_dask(args.cells, args.points, args.workers, folder,
                                                   tile_mb=args.tile_mb))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
