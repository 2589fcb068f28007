"""Benchmark of validated imports into a hydroatlas store, against raw sqlite3 inserts.

Run from the repository root::

    .venv/bin/python benchmarks/bench_store.py [--heads N] [--tests N] [--wells N] [--json FILE]

What it does, all in one run so that every ratio compares figures measured
on the same machine at the same time:

1. Writes synthetic input CSV files (numpy, fixed seed) into a temporary
   directory: units, wells, picks, zones, ktests, heads. All values are
   invented; coordinates are in EPSG:32616 metres.
2. Creates a store and imports the six files in order through the public
   API (``create_store`` + ``import_file``), with full validation. Each
   import runs in its own freshly spawned process so that its peak RSS is
   not polluted by earlier phases (Linux: ``VmHWM`` of /proc/self/status,
   see :func:`_peak_mb` for why not ``ru_maxrss``; elsewhere ``ru_maxrss``).
   Only the ``import_file`` call is timed (not process start or imports).
3. Times ``workflows.unit_stats(store, k_unit="m/d")`` over all K tests, in
   its own process.
4. Reference: a raw ``sqlite3`` ``executemany`` of the same K-test and head
   rows into a plain table (same columns, no constraints, one transaction)
   in a fresh SQLite file, with the rows read by the ``csv`` module. Both
   "csv read + executemany" and "executemany alone" are timed.
5. Prints a table of phase, rows, seconds, rows/s, peak MB, ratio, target and
   pass/fail, and optionally writes every figure to ``--json FILE``.

The raw reference is run ``--repeat`` times (default 3) per table, each in a
fresh process and file, and the median run is used. Peak MB figures include
the interpreter and its libraries (the "baseline" printed per import).

Targets: validated import speed no less than 1/3 of raw sqlite3 speed
(for both definitions of raw), import peak RSS under 1 GB (1000 MB, decimal),
and unit statistics under 1 s.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import os
import platform
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))  # noqa: E402
from _common import maxrss_mb as _maxrss_mb, peak_mb as _peak_mb  # noqa: E402

CRS = "EPSG:32616"
KINDS = ("units", "wells", "picks", "zones", "ktests", "heads")
ZONES_PER_WELL = 2
TOTAL_DEPTH = 200.0
RATIO_TARGET = 1.0 / 3.0
PEAK_TARGET_MB = 1000.0
STATS_TARGET_S = 1.0

# Invented units, top to bottom: (code, name, rank, role).
UNITS = (
    ("UA1", "Upper sand and gravel", 1, "aquifer"),
    ("CL1", "Upper clay", 2, "aquitard"),
    ("LA2", "Lower fractured sandstone", 3, "aquifer"),
    ("SH2", "Basal shale", 4, "aquitard"),
)

RAW_COLUMNS = {
    "ktests": (("well_id", "TEXT"), ("zone_id", "TEXT"), ("tested_on", "TEXT"), ("method", "TEXT"),
               ("k", "REAL"), ("k_unit", "TEXT"), ("quality", "TEXT")),
    "heads": (("well_id", "TEXT"), ("zone_id", "TEXT"), ("measured_at", "TEXT"), ("head", "REAL")),
}


# -- helpers run in every process ----------------------------------------------




def _run_isolated(fn, *args):
    """Run ``fn(*args)`` in a fresh spawned process and return its result."""
    with ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("spawn")) as ex:
        return ex.submit(fn, *args).result()


# -- 1. synthetic input --------------------------------------------------------
def _fmt(values, spec: str) -> np.ndarray:
    return np.char.mod(spec, values)


def _write_csv(path: Path, header: tuple[str, ...], columns: list[np.ndarray]) -> None:
    """Write string columns as CSV; none of the generated values needs quoting."""
    n = len(columns[0])
    chunk = 200_000
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(header) + "\n")
        for start in range(0, n, chunk):
            parts = [np.asarray(c[start:start + chunk], dtype=str) for c in columns]
            lines = parts[0]
            for p in parts[1:]:
                lines = np.char.add(np.char.add(lines, ","), p)
            fh.write("\n".join(lines.tolist()))
            fh.write("\n")


def generate_inputs(folder: Path, *, n_wells: int, n_tests: int, n_heads: int, seed: int) -> dict:
    """Write the six CSV files; return their paths and row counts."""
    rng = np.random.default_rng(seed)
    files = {k: folder / f"{k}.csv" for k in KINDS}
    counts = {}

    # units
    with open(files["units"], "w", encoding="utf-8", newline="") as fh:
        fh.write("code,name,rank,role\n")
        for code, name, rank, role in UNITS:
            fh.write(f"{code},{name},{rank},{role}\n")
    counts["units"] = len(UNITS)

    # wells
    well_ids = np.char.add("W", np.char.zfill(np.arange(1, n_wells + 1).astype(str), 6))
    x = rng.uniform(600_000.0, 700_000.0, n_wells)
    y = rng.uniform(4_000_000.0, 4_100_000.0, n_wells)
    ground = 300.0 + rng.normal(0.0, 15.0, n_wells)
    _write_csv(files["wells"], ("well_id", "x", "y", "ground_elev", "total_depth"),
               [well_ids, _fmt(x, "%.2f"), _fmt(y, "%.2f"), _fmt(ground, "%.2f"),
                _fmt(np.full(n_wells, TOTAL_DEPTH), "%.1f")])
    counts["wells"] = n_wells

    # picks: contiguous intervals 0 | b1 | b2 | b3 | total_depth per well
    b1 = rng.uniform(20.0, 40.0, n_wells)
    b2 = b1 + rng.uniform(20.0, 40.0, n_wells)
    b3 = b2 + rng.uniform(40.0, 60.0, n_wells)
    bounds = np.column_stack([np.zeros(n_wells), b1, b2, b3, np.full(n_wells, TOTAL_DEPTH)])
    n_units = len(UNITS)
    codes = np.array([u[0] for u in UNITS])
    _write_csv(files["picks"], ("well_id", "unit", "top_depth", "bottom_depth"),
               [np.repeat(well_ids, n_units), np.tile(codes, n_wells),
                _fmt(bounds[:, :-1].ravel(), "%.2f"), _fmt(bounds[:, 1:].ravel(), "%.2f")])
    counts["picks"] = n_wells * n_units

    # zones: one shallow screen in the upper aquifer, one deeper in the lower aquifer
    z1_top = rng.uniform(3.0, 8.0, n_wells)
    z1_bot = z1_top + rng.uniform(5.0, 10.0, n_wells)
    z2_top = b2 + rng.uniform(2.0, 10.0, n_wells)
    z2_bot = z2_top + rng.uniform(10.0, 25.0, n_wells)
    assert (z2_bot < TOTAL_DEPTH).all()
    zone_well = np.repeat(well_ids, ZONES_PER_WELL)
    zone_id = np.tile(np.array([f"Z{i + 1}" for i in range(ZONES_PER_WELL)]), n_wells)
    zone_top = np.column_stack([z1_top, z2_top]).ravel()
    zone_bot = np.column_stack([z1_bot, z2_bot]).ravel()
    n_zones = n_wells * ZONES_PER_WELL
    _write_csv(files["zones"], ("well_id", "zone_id", "top_depth", "bottom_depth"),
               [zone_well, zone_id, _fmt(zone_top, "%.2f"), _fmt(zone_bot, "%.2f")])
    counts["zones"] = n_zones

    # ktests: row i tests zone i % n_zones on day (i // n_zones) after a start date,
    # so (well_id, zone_id, tested_on) - and with it the derived test_id - is unique.
    i = np.arange(n_tests)
    zi = i % n_zones
    day = np.datetime64("2015-03-02") + (i // n_zones).astype("timedelta64[D]")
    log10k = np.where(zi % 2 == 0, 1.0, 0.3) + rng.normal(0.0, 0.6, n_tests)  # m/d
    _write_csv(files["ktests"], ("well_id", "zone_id", "tested_on", "method", "k", "k_unit", "quality"),
               [zone_well[zi], zone_id[zi], np.datetime_as_string(day, unit="D"),
                np.full(n_tests, "slug"), _fmt(10.0 ** log10k, "%.6g"), np.full(n_tests, "m/d"),
                np.full(n_tests, "good")])
    counts["ktests"] = n_tests

    # heads: row i is reading (i // n_zones) of zone i % n_zones, 6 hours apart
    i = np.arange(n_heads)
    zi = i % n_zones
    stamp = np.datetime64("2020-01-15T10:00:00") + ((i // n_zones) * 6).astype("timedelta64[h]")
    head = ground[zi // ZONES_PER_WELL] - 10.0 - 0.05 * zone_top[zi] + rng.normal(0.0, 0.5, n_heads)
    _write_csv(files["heads"], ("well_id", "zone_id", "measured_at", "head"),
               [zone_well[zi], zone_id[zi], np.datetime_as_string(stamp, unit="s"), _fmt(head, "%.3f")])
    counts["heads"] = n_heads

    sizes = {k: files[k].stat().st_size for k in KINDS}
    return {"files": {k: str(v) for k, v in files.items()}, "rows": counts, "bytes": sizes}


# -- 2. validated imports (child processes) ------------------------------------
def phase_create(store_path: str) -> dict:
    base = _peak_mb()
    from hydroatlas.store import create_store

    t0 = time.perf_counter()
    store = create_store(store_path, crs=CRS, length_unit="m")
    seconds = time.perf_counter() - t0
    store.close()
    return {"seconds": seconds, "peak_mb": _peak_mb(), "start_mb": base}


def phase_import(store_path: str, kind: str, csv_path: str) -> dict:
    from hydroatlas.store import open_store
    from hydroatlas.store.importers import import_file

    store = open_store(store_path)
    base = _peak_mb()  # interpreter + hydroatlas and its libraries, store open
    t0 = time.perf_counter()
    report = import_file(store, kind, csv_path)
    seconds = time.perf_counter() - t0
    peak = _peak_mb()
    store.close()
    return {"seconds": seconds, "peak_mb": peak, "baseline_mb": base, "ru_maxrss_mb": _maxrss_mb(),
            "rows": report.rows,
            "inserted": report.inserted, "updated": report.updated}


def phase_profile(store_path: str, what: str, csv_path: str | None, top: int) -> str:
    """cProfile one import (or ``unit_stats``); return the top functions by cumulative time."""
    import cProfile
    import io
    import pstats

    from hydroatlas import workflows
    from hydroatlas.store import open_store
    from hydroatlas.store.importers import import_file

    store = open_store(store_path)
    prof = cProfile.Profile()
    prof.enable()
    if what == "unit_stats":
        workflows.unit_stats(store, k_unit="m/d")
    else:
        import_file(store, what, csv_path)
    prof.disable()
    store.close()
    out = io.StringIO()
    stats = pstats.Stats(prof, stream=out).sort_stats("cumulative")
    stats.print_stats(top)
    return out.getvalue()


# -- 3. unit statistics (child process) ----------------------------------------
def phase_unit_stats(store_path: str) -> dict:
    from hydroatlas import workflows
    from hydroatlas.store import open_store

    store = open_store(store_path)
    base = _peak_mb()
    t0 = time.perf_counter()
    rows = workflows.unit_stats(store, k_unit="m/d")
    seconds = time.perf_counter() - t0
    peak = _peak_mb()
    t0 = time.perf_counter()
    workflows.unit_stats(store, k_unit="m/d")
    second = time.perf_counter() - t0
    n = store.count("ktests")
    store.close()
    summary = [{"unit": r["unit"], "n_tests": r["n_tests"], "k_geomean": r["k_geomean"]} for r in rows]
    return {"seconds": seconds, "second_call_seconds": second, "peak_mb": peak, "baseline_mb": base,
            "rows": n, "units": summary}


# -- 4. raw sqlite3 reference (child process) ----------------------------------
def phase_raw(db_path: str, kind: str, csv_path: str) -> dict:
    import csv
    import sqlite3

    cols = RAW_COLUMNS[kind]
    conn = sqlite3.connect(db_path, isolation_level=None)
    conn.execute(f"CREATE TABLE {kind} ({', '.join(f'{n} {t}' for n, t in cols)})")
    sql = f"INSERT INTO {kind} VALUES ({', '.join('?' * len(cols))})"
    base = _peak_mb()
    t0 = time.perf_counter()
    with open(csv_path, newline="", encoding="utf-8") as fh:
        reader = csv.reader(fh)
        header = next(reader)
        assert tuple(header) == tuple(n for n, _ in cols), header
        rows = list(reader)
    t1 = time.perf_counter()
    conn.execute("BEGIN")
    conn.executemany(sql, rows)
    conn.execute("COMMIT")
    t2 = time.perf_counter()
    n = conn.execute(f"SELECT count(*) FROM {kind}").fetchone()[0]
    conn.close()
    assert n == len(rows)
    return {"rows": n, "csv_seconds": t1 - t0, "executemany_seconds": t2 - t1,
            "total_seconds": t2 - t0, "peak_mb": _peak_mb(), "baseline_mb": base}


# -- 5. report -----------------------------------------------------------------
def _rate(rows, seconds):
    return rows / seconds if seconds > 0 else float("inf")


def build_table(res: dict) -> list[dict]:
    lines = []
    imp = res["imports"]
    lines.append({"phase": "create store", "rows": None, "seconds": res["create"]["seconds"],
                  "peak_mb": res["create"]["peak_mb"]})
    for kind in KINDS:
        r = imp[kind]
        line = {"phase": f"import {kind}", "rows": r["rows"], "seconds": r["seconds"],
                "rows_s": _rate(r["rows"], r["seconds"]), "peak_mb": r["peak_mb"],
                "target": f"< {PEAK_TARGET_MB:.0f} MB", "ok": r["peak_mb"] < PEAK_TARGET_MB}
        lines.append(line)
    total_rows = sum(imp[k]["rows"] for k in KINDS)
    total_s = sum(imp[k]["seconds"] for k in KINDS)
    peak = max(imp[k]["peak_mb"] for k in KINDS)
    lines.append({"phase": "import all (peak RSS)", "rows": total_rows, "seconds": total_s,
                  "rows_s": _rate(total_rows, total_s), "peak_mb": peak,
                  "target": f"< {PEAK_TARGET_MB:.0f} MB", "ok": peak < PEAK_TARGET_MB})
    us = res["unit_stats"]
    lines.append({"phase": "unit_stats (m/d)", "rows": us["rows"], "seconds": us["seconds"],
                  "rows_s": _rate(us["rows"], us["seconds"]), "peak_mb": us["peak_mb"],
                  "target": f"< {STATS_TARGET_S:g} s", "ok": us["seconds"] < STATS_TARGET_S})
    for kind in ("ktests", "heads"):
        raw = res["raw"][kind]
        lines.append({"phase": f"raw {kind} csv+executemany", "rows": raw["rows"],
                      "seconds": raw["total_seconds"], "rows_s": _rate(raw["rows"], raw["total_seconds"]),
                      "peak_mb": raw["peak_mb"]})
        lines.append({"phase": f"raw {kind} executemany only", "rows": raw["rows"],
                      "seconds": raw["executemany_seconds"],
                      "rows_s": _rate(raw["rows"], raw["executemany_seconds"])})
    for kind in ("ktests", "heads"):
        v = _rate(imp[kind]["rows"], imp[kind]["seconds"])
        raw = res["raw"][kind]
        for label, seconds in (("csv+executemany", raw["total_seconds"]),
                               ("executemany only", raw["executemany_seconds"])):
            ratio = v / _rate(raw["rows"], seconds)
            lines.append({"phase": f"{kind} validated / raw {label}", "ratio": ratio,
                          "target": f">= {RATIO_TARGET:.2f}", "ok": ratio >= RATIO_TARGET})
    return lines


def format_table(lines: list[dict]) -> str:
    head = ("phase", "rows", "seconds", "rows/s", "peak MB", "ratio", "target", "pass/fail")
    body = []
    for ln in lines:
        body.append((
            ln["phase"],
            f"{ln['rows']:,}" if ln.get("rows") is not None else "",
            f"{ln['seconds']:.3f}" if ln.get("seconds") is not None else "",
            f"{ln['rows_s']:,.0f}" if ln.get("rows_s") is not None else "",
            f"{ln['peak_mb']:.0f}" if ln.get("peak_mb") is not None else "",
            f"{ln['ratio']:.3f}" if ln.get("ratio") is not None else "",
            ln.get("target", ""),
            ("pass" if ln["ok"] else "FAIL") if "ok" in ln else "",
        ))
    widths = [max(len(h), *(len(r[i]) for r in body)) for i, h in enumerate(head)]
    left = {0, 6, 7}

    def fmt(row):
        return "  ".join(c.ljust(w) if i in left else c.rjust(w) for i, (c, w) in enumerate(zip(row, widths)))

    out = [fmt(head), "  ".join("-" * w for w in widths)]
    out += [fmt(r) for r in body]
    return "\n".join(out)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--heads", type=int, default=1_000_000, help="head readings (default 1,000,000)")
    ap.add_argument("--tests", type=int, default=100_000, help="K tests (default 100,000)")
    ap.add_argument("--wells", type=int, default=10_000, help="wells, 2 zones each (default 10,000)")
    ap.add_argument("--seed", type=int, default=20240115)
    ap.add_argument("--json", metavar="FILE", help="write every figure to this JSON file")
    ap.add_argument("--workdir", metavar="DIR", help="keep inputs and stores in DIR (default: a temp dir, removed)")
    ap.add_argument("--repeat", type=int, default=3,
                    help="raw sqlite3 reference runs per table; the median is used (default 3)")
    ap.add_argument("--profile", metavar="WHAT", action="append", choices=KINDS + ("unit_stats",), default=[],
                    help="also cProfile the import of WHAT (a kind, in a second store) or unit_stats, "
                         "after the measured run, and print the top functions; may be repeated")
    ap.add_argument("--profile-top", type=int, default=40, help="functions shown per profile (default 40)")
    args = ap.parse_args(argv)
    for name in ("heads", "tests", "wells", "repeat"):
        if getattr(args, name) < 1:
            ap.error(f"--{name} must be at least 1")

    tmp = None
    if args.workdir:
        work = Path(args.workdir)
        work.mkdir(parents=True, exist_ok=True)
        for name in ("store.gpkg", "raw_ktests.sqlite", "raw_heads.sqlite", "profile.gpkg"):
            (work / name).unlink(missing_ok=True)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="hydroatlas-bench-")
        work = Path(tmp.name)

    def say(msg):
        print(msg, flush=True)

    try:
        import hydroatlas  # noqa: F401  (fail early, in the parent, if the package is missing)

        say(f"hydroatlas store benchmark: {args.wells:,} wells, {args.wells * ZONES_PER_WELL:,} zones, "
            f"{args.tests:,} K tests, {args.heads:,} head readings (seed {args.seed})")
        say(f"python {platform.python_version()} on {platform.platform()}, {os.cpu_count()} CPUs; "
            f"sqlite {__import__('sqlite3').sqlite_version}; work dir {work}")
        t0 = time.perf_counter()
        inputs = generate_inputs(work, n_wells=args.wells, n_tests=args.tests, n_heads=args.heads,
                                 seed=args.seed)
        say(f"generated inputs in {time.perf_counter() - t0:.1f} s: " + ", ".join(
            f"{k} {inputs['rows'][k]:,} rows ({inputs['bytes'][k] / 1e6:.1f} MB)" for k in KINDS))

        res = {"config": {"wells": args.wells, "zones": args.wells * ZONES_PER_WELL, "tests": args.tests,
                          "heads": args.heads, "seed": args.seed, "crs": CRS,
                          "python": platform.python_version(), "platform": platform.platform(),
                          "cpus": os.cpu_count(), "sqlite": __import__("sqlite3").sqlite_version},
               "inputs": inputs}
        store_path = str(work / "store.gpkg")
        res["create"] = _run_isolated(phase_create, store_path)
        res["imports"] = {}
        for kind in KINDS:
            r = _run_isolated(phase_import, store_path, kind, inputs["files"][kind])
            if r["rows"] != inputs["rows"][kind] or r["inserted"] != r["rows"]:
                raise RuntimeError(f"import {kind}: expected {inputs['rows'][kind]} new rows, got {r}")
            res["imports"][kind] = r
            say(f"import {kind:7s} {r['rows']:>10,} rows  {r['seconds']:8.3f} s  "
                f"{_rate(r['rows'], r['seconds']):>10,.0f} rows/s  peak {r['peak_mb']:6.0f} MB "
                f"(baseline {r['baseline_mb']:.0f} MB)")
        res["unit_stats"] = _run_isolated(phase_unit_stats, store_path)
        say(f"unit_stats over {res['unit_stats']['rows']:,} K tests: {res['unit_stats']['seconds']:.3f} s "
            f"(second call {res['unit_stats']['second_call_seconds']:.3f} s); tests per unit: "
            + ", ".join(f"{u['unit']} {u['n_tests']:,}" for u in res["unit_stats"]["units"]))
        res["raw"] = {}
        for kind in ("ktests", "heads"):
            runs = []
            for rep in range(args.repeat):
                db = work / f"raw_{kind}.sqlite"
                db.unlink(missing_ok=True)
                runs.append(_run_isolated(phase_raw, str(db), kind, inputs["files"][kind]))
                db.unlink(missing_ok=True)
            # median run by total time; it supplies both raw figures
            runs.sort(key=lambda r: r["total_seconds"])
            r = dict(runs[len(runs) // 2])
            r["runs"] = runs
            res["raw"][kind] = r
            say(f"raw sqlite3 {kind}: csv read {r['csv_seconds']:.3f} s + executemany "
                f"{r['executemany_seconds']:.3f} s for {r['rows']:,} rows (median of {len(runs)}; totals "
                + ", ".join(f"{x['total_seconds']:.3f}" for x in runs) + " s)")
        res["table"] = build_table(res)
        res["profile"] = {}
        for what in args.profile:
            if what == "unit_stats":
                text = _run_isolated(phase_profile, store_path, what, None, args.profile_top)
            else:
                # a second store holding everything imported before WHAT
                prof_store = work / "profile.gpkg"
                prof_store.unlink(missing_ok=True)
                _run_isolated(phase_create, str(prof_store))
                for kind in KINDS[:KINDS.index(what)]:
                    _run_isolated(phase_import, str(prof_store), kind, inputs["files"][kind])
                text = _run_isolated(phase_profile, str(prof_store), what, inputs["files"][what],
                                     args.profile_top)
            res["profile"][what] = text
            say(f"\ncProfile of {'import ' if what != 'unit_stats' else ''}{what} (cumulative):\n{text}")
        say("")
        say(format_table(res["table"]))
        checks = [ln["ok"] for ln in res["table"] if "ok" in ln]
        res["all_pass"] = all(checks)
        say(f"\n{sum(checks)}/{len(checks)} targets met; total benchmark time "
            f"{time.perf_counter() - t0:.1f} s")
        if args.json:
            Path(args.json).write_text(json.dumps(res, indent=2, default=float) + "\n", encoding="utf-8")
            say(f"figures written to {args.json}")
        return 0
    finally:
        if tmp is not None:
            tmp.cleanup()


if __name__ == "__main__":
    sys.exit(main())
