"""CLI conventions: ``--format table|csv|json`` on every command that reports results, progress bars, and
library errors that name Python parameters turned back into option names by the command line.

The district here is invented: a planar head field h = 300 m - 0.004 (x - x0) over one aquifer (flow due
east), lognormal K, a spring, a recharge area and two multi-zone wells. Checks against the outside world:
the geometric mean of K against ``scipy.stats.gmean``, the three-point gradient against the plane's own
slope (analytic), the store CRS against ``pyproj.CRS``, rasters reopened with rasterio, layers with pyogrio.
"""

from __future__ import annotations

import csv
import io
import json
import sys

import click
import numpy as np
import pyogrio
import pytest
import rasterio
from click.testing import CliRunner
from pyproj import CRS as PyprojCRS
from pyproj import Transformer
from scipy.stats import gmean

from hydroatlas.cli import _common, main

from conftest import CRS, cli, write_csv

X0, Y0 = 610000.0, 4100000.0
SLOPE = -0.004  # dh/dx: head falls toward +x, flow east
K_SEED = 7


def plane(x, y):
    return 300.0 + SLOPE * (x - X0)


def district_rows():
    """CSV rows of the invented district (one dict of kind -> rows), and the K values written (m/d)."""
    rng = np.random.default_rng(K_SEED)
    xs, ys = X0 + rng.uniform(0, 6000, 20), Y0 + rng.uniform(0, 4000, 20)
    ks = np.exp(rng.normal(np.log(5.0), 0.8, 20))
    rows = {
        "units": [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"],
                  ["BASE", "base", 2, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
        "heads": [["well_id", "zone_id", "measured_at", "head"]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
    }
    for i, (x, y, k) in enumerate(zip(xs, ys, ks)):
        w = f"W{i:02d}"
        rows["wells"].append([w, f"{x:.3f}", f"{y:.3f}", 400, 170, "multizone" if i < 2 else "monitoring"])
        rows["picks"] += [[w, "AQ", 0, 150], [w, "BASE", 150, 170]]
        rows["zones"].append([w, "S", 50, 60])
        rows["heads"].append([w, "S", "2024-01-01", f"{plane(round(x, 3), round(y, 3)):.9f}"])
        rows["ktests"].append([w, "S", "2024-01-01", "slug", f"{k:.9g}", "m/d"])
        if i < 2:  # two multi-zone wells: a second zone in the aquitard, 5 m lower head (downward flow)
            rows["zones"].append([w, "D", 155, 165])
            rows["heads"].append([w, "D", "2024-01-01", f"{plane(round(x, 3), round(y, 3)) - 5.0:.9f}"])
            rows["ktests"].append([w, "D", "2024-01-01", "packer", 1e-3, "m/d"])
    return rows, [float(f"{k:.9g}") for k in ks]


def recharge_geojson(path):
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    x1, y1, x2, y2 = X0 + 800, Y0 + 1700, X0 + 1400, Y0 + 2300
    ring = [list(tr.transform(x, y)) for x, y in [(x1, y1), (x2, y1), (x2, y2), (x1, y2), (x1, y1)]]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"area_id": "REC", "kind": "recharge", "unit": "AQ"},
         "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    return path


def build_district(folder, runner):
    """The district's store, filled through ``import --format json``; returns (store, K values, import docs)."""
    store = folder / "district.gpkg"
    res = cli(runner, "init", store, "--crs", CRS, "--format", "json")
    assert res.exit_code == 0, res.output
    docs = {"init": json.loads(res.stdout)}
    rows, ks = district_rows()
    sx, sy = X0 + 5000.0, Y0 + 2000.0
    rows["springs"] = [["spring_id", "x", "y", "elev"], ["SPR", sx, sy, f"{plane(sx, sy):.9f}"]]
    for kind in ("units", "wells", "picks", "zones", "ktests", "heads", "springs"):
        res = cli(runner, "import", store, kind, write_csv(folder / f"{kind}.csv", rows[kind]), "--format", "json")
        assert res.exit_code == 0, res.output
        docs[kind] = json.loads(res.stdout)
    res = cli(runner, "import", store, "areas", recharge_geojson(folder / "areas.geojson"), "--format", "json")
    assert res.exit_code == 0, res.output
    return store, ks, docs


@pytest.fixture(scope="module")
def district(tmp_path_factory):
    folder = tmp_path_factory.mktemp("json_district")
    return (folder,) + build_district(folder, CliRunner())


def run_json(runner, *args):
    """The command with --format json: exit 0 and stdout one JSON document (notes and warnings on stderr)."""
    res = cli(runner, *args, "--format", "json")
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


# -- every command that reports results has --format --------------------------------------------------------------
def test_no_command_lacks_format():
    """Walk the click group: every command offers --format table|csv|json."""
    lacking = []
    for name, command in main.commands.items():
        options = {o: p for p in command.params if isinstance(p, click.Option) for o in p.opts}
        fmt = options.get("--format")
        if fmt is None or set(getattr(fmt.type, "choices", ())) != {"table", "csv", "json"}:
            lacking.append(name)
    assert lacking == []
    assert len(main.commands) >= 19  # the commands this test was written for are all there


def test_check_json_flag_stays_an_alias(district, runner):
    _, store, _, _ = district
    assert cli(runner, "check", store, "--json").stdout == cli(runner, "check", store, "--format", "json").stdout


# -- the store commands --------------------------------------------------------------------------------------------
def test_init_and_import_json(district):
    _, _, ks, docs = district
    init = docs["init"]
    assert PyprojCRS.from_user_input(init["crs"]) == PyprojCRS.from_user_input(CRS)
    assert init["length_unit"] == "m" and set(init) >= {"store", "crs_name", "vertical_datum"}
    wells = docs["wells"]
    assert wells["kind"] == "wells" and wells["rows"] == wells["inserted"] == len(ks)
    assert wells["updated"] == wells["unchanged"] == 0 and wells["notes"] == []
    assert docs["heads"]["rows"] == len(ks) + 2  # one head per well and one per lower zone


def test_reimport_json_counts_unchanged_rows(district, runner):
    folder, store, ks, _ = district
    doc = run_json(runner, "import", store, "wells", folder / "wells.csv")
    assert (doc["rows"], doc["inserted"], doc["updated"], doc["unchanged"]) == (len(ks), 0, 0, len(ks))


def test_import_csv_is_one_row_of_the_same_facts(district, runner):
    folder, store, ks, _ = district
    res = cli(runner, "import", store, "wells", folder / "wells.csv", "--format", "csv")
    assert res.exit_code == 0, res.output
    rows = list(csv.DictReader(io.StringIO(res.stdout)))
    assert len(rows) == 1 and rows[0]["kind"] == "wells" and int(rows[0]["rows"]) == len(ks)


def test_check_history_retire_restore_upgrade_json(district, runner):
    _, store, _, _ = district
    findings = run_json(runner, "check", store)
    assert isinstance(findings, list) and all({"kind", "severity", "message"} <= set(f) for f in findings)
    versions = run_json(runner, "history", store, "wells", "W05")
    assert isinstance(versions, list) and versions and versions[-1]["well_id"] == "W05"
    retired = run_json(runner, "retire", store, "ktests", "W05/S/slug@2024-01-01", "--reason", "test of json")
    assert retired == {"kind": "ktests", "ids": ["W05/S/slug@2024-01-01"], "retired": 1, "already_retired": 0,
                       "reason": "test of json"}
    restored = run_json(runner, "restore", store, "ktests", "W05/S/slug@2024-01-01")
    assert restored == {"kind": "ktests", "ids": ["W05/S/slug@2024-01-01"], "restored": 1, "not_retired": 0}
    up = run_json(runner, "upgrade", store)
    assert up["upgraded"] is False and up["old_version"] == up["new_version"]


# -- reports on measurements ---------------------------------------------------------------------------------------
def test_stats_verticals_threepoint_slugs_json(district, runner):
    _, store, ks, _ = district
    stats = {r["unit"]: r for r in run_json(runner, "stats", store, "--k-unit", "m/d")}
    aq = stats["AQ"]
    assert aq["n_tests"] == len(ks) and aq["k_unit"] == "m/d"
    assert aq["k_geomean"] == pytest.approx(gmean(ks), rel=1e-9)  # scipy's geometric mean of the same K
    pairs = run_json(runner, "verticals", store)
    assert {p["well_id"] for p in pairs} == {"W00", "W01"}
    assert all(p["dhead"] == pytest.approx(5.0, abs=1e-6) for p in pairs)  # upper minus lower, as written
    tp = run_json(runner, "threepoint", store, "--unit", "AQ", "--wells", "W02,W03,W04")
    assert tp["gradient"] == pytest.approx(abs(SLOPE), rel=1e-6)  # the plane's own slope (analytic)
    assert tp["azimuth"] == pytest.approx(90.0, abs=1e-4)  # flow due east
    assert tp["wells"] == ["W02", "W03", "W04"] and "selection" in tp


def test_slugs_json(district, runner, tmp_path):
    """One Hvorslev (1951) record with a known K: exp(-t/T0), T0 = r_c^2 ln(L/R) / (2 L K) (VERIFY.md)."""
    _, store, _, _ = district
    k, rc, radius, length = 4e-5, 0.0254, 0.0508, 10.0
    t0 = rc * rc * np.log(length / radius) / (2 * length * k)
    t = np.linspace(0, 4 * t0, 60)
    rows = [["well_id", "zone_id", "test_id", "t_s", "displacement"]]
    rows += [["W05", "S", "T1", f"{a:.6f}", f"{0.5 * np.exp(-a / t0):.9f}"] for a in t]
    geometry = [["well_id", "zone_id", "test_id", "casing_radius", "well_radius", "screen_length",
                 "aquifer_thickness", "static_depth", "tested_on", "screen_top_depth", "confined", "geometry_kind"],
                ["W05", "S", "T1", rc, radius, length, 150.0, 100.0, "2024-06-02", 50.0, "false", "screen"]]
    for kind, r in (("slugtests", rows), ("sluggeometry", geometry)):
        assert cli(runner, "import", store, kind, write_csv(tmp_path / f"{kind}.csv", r)).exit_code == 0
    (doc,) = run_json(runner, "slugs", store, "--method", "hvorslev", "--no-write")
    assert {"well_id", "zone_id", "test_id", "method", "k", "k_unit", "k_ms"} <= set(doc)
    assert doc["k_ms"] == pytest.approx(k, rel=5e-3) and doc["k_unit"] == "m/d"


# -- products: surface, paths, drawdown, map, layers, figures, grid ------------------------------------------------
@pytest.fixture(scope="module")
def products(district):
    folder, store, _, _ = district
    runner = CliRunner()
    out = folder / "out"
    docs = {"surface": run_json(runner, "surface", store, "--unit", "AQ", "--method", "uk", "--variogram",
                                "exponential", "--sill", 1.0, "--range", 3000, "--cell", 100, "--out", out)}
    docs["paths"] = run_json(runner, "paths", store, "--unit", "AQ", "--porosity", 0.05, "--capture-radius", 200,
                             "--seed-spacing", 100, "--out", out)
    docs["drawdown"] = run_json(runner, "drawdown", store, "--unit", "AQ", "--days", 100, "-S", 1e-3, "-T", 400,
                                "--new-well", f"P1,{X0 + 3000},{Y0 + 2000},1500", "--threshold", 0.01, "--out", out)
    docs["map"] = run_json(runner, "map", store, "--unit", "AQ", "--out", folder / "map.html")
    docs["layers"] = run_json(runner, "layers", store, "--out", out)
    docs["figures"] = run_json(runner, "figures", store, "--out", folder / "figures")
    docs["grid"] = run_json(runner, "grid", store, "--cell", 500, "--out", folder / "model" / "m.nc")
    return folder, store, out, docs


def test_surface_json(products):
    _, _, out, docs = products
    doc = docs["surface"]
    assert {"unit", "quantity", "value_unit", "method", "n_points", "cross_validation", "files", "selection",
            "warnings", "caution"} <= set(doc)
    assert (doc["unit"], doc["quantity"], doc["method"], doc["value_unit"]) == ("AQ", "head", "uk", "m")
    assert doc["n_points"] == 20 and doc["cross_validation"]["rmse"] >= 0
    with rasterio.open(doc["files"]["raster"]) as r:  # the file the document names is the surface
        assert r.count == 2 and PyprojCRS.from_user_input(r.crs.to_wkt()) == PyprojCRS.from_user_input(CRS)


def test_paths_json_and_csv(products, runner):
    _, store, out, docs = products
    doc = docs["paths"]
    assert {"unit", "direction", "n_particles", "pathways", "files", "warnings", "selection", "caution",
            "karst_warning"} <= set(doc)
    assert doc["direction"] == "forward" and doc["n_particles"] > 0
    assert abs(sum(r["share"] for r in doc["pathways"]) - 1.0) < 1e-9
    assert len(pyogrio.read_dataframe(doc["files"]["gpkg"] if "gpkg" in doc["files"] else out / "layers.gpkg",
                                      layer="pathlines")) > 0
    res = cli(runner, "paths", store, "--unit", "AQ", "--porosity", 0.05, "--capture-radius", 200,
              "--seed-spacing", 100, "--out", out, "--format", "csv")
    assert res.exit_code == 0, res.output
    table = list(csv.DictReader(io.StringIO(res.stdout)))  # csv: the pathway table itself
    assert [r["recharge_area"] for r in table] == [r["recharge_area"] for r in doc["pathways"]]


def test_drawdown_json(products):
    _, _, _, docs = products
    doc = docs["drawdown"]
    assert {"unit", "mode", "days", "storativity", "transmissivity", "length_unit", "max_drawdown", "impacts",
            "files", "warnings", "selection", "caution"} <= set(doc)
    assert doc["transmissivity"] == {"value": pytest.approx(400.0), "unit": "m2/d"} and doc["length_unit"] == "m"
    assert doc["days"] == 100 and doc["max_drawdown"] > 0
    with rasterio.open(doc["files"]["drawdown"]) as r:
        assert np.nanmax(r.read(1, masked=True)) == pytest.approx(doc["max_drawdown"], rel=1e-5)


def test_map_layers_figures_grid_json(products):
    folder, _, _, docs = products
    assert docs["map"]["files"]["map"].endswith("map.html") and (folder / "map.html").is_file()
    for kind, path in docs["layers"]["files"].items():
        assert (folder / "out").joinpath(path).exists(), kind
    fig = docs["figures"]
    assert fig["n_files"] == len(fig["files"]) > 0 and all(f.endswith((".png", ".svg")) for f in fig["files"])
    grid = docs["grid"]
    assert grid["layers"] == ["AQ", "BASE"] and grid["shape"]["layers"] == 2
    assert set(grid) >= {"files", "warnings", "selection", "notes"}
    assert (folder / "model" / "m.nc").is_file()


# -- notes stay on stderr; progress bars only on a terminal ---------------------------------------------------------
def test_json_stdout_is_only_the_document_when_there_are_notes_and_warnings(district, runner):
    """paths without --porosity warns: the warning goes to stderr and into the document; stdout stays one
    JSON document."""
    folder, store, _, _ = district
    out = folder / "warned"
    assert cli(runner, "surface", store, "--unit", "AQ", "--cell", 100, "--out", out).exit_code == 0
    res = cli(runner, "paths", store, "--unit", "AQ", "--capture-radius", 200, "--out", out, "--format", "json")
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert "warning: --porosity not given" in res.stderr
    assert any(w.startswith("--porosity not given") for w in doc["warnings"])


class _Terminal:
    def isatty(self):
        return True

    def write(self, text):
        return len(text)

    def flush(self):
        pass


def test_progress_bars_only_on_a_terminal_and_never_with_json_or_quiet(monkeypatch):
    monkeypatch.setattr(_common.sys, "stderr", _Terminal())
    cases = [({"verbosity": 0}, True), ({"verbosity": -1}, False), ({"verbosity": 0, "format": "json"}, False),
             ({"verbosity": 0, "format": "csv"}, True), ({"verbosity": 1, "format": "table"}, True)]
    for obj, shown in cases:
        with click.Context(main, obj=obj):
            assert _common._show_progress() is shown, obj
            bar = _common._progress("rows")
            assert bar.disable is (not shown), obj
            bar.close()
    monkeypatch.setattr(_common.sys, "stderr", sys.__stderr__)
    with click.Context(main, obj={"verbosity": 0}):
        if not sys.__stderr__.isatty():
            assert _common._show_progress() is False  # not a terminal: no bar


class _Recorder:
    """A progress callback with a total, as the command line hands to the library."""

    def __init__(self):
        self.total, self.done, self.total_before_first_step = None, 0, None

    def __call__(self, n=1):
        if self.done == 0:
            self.total_before_first_step = self.total
        self.done += n


def test_the_library_gives_progress_the_whole_jobs_total(district, tmp_path):
    """Import: the number of rows to write; surface: the grid's rows. Both known before the first step."""
    from hydroatlas import workflows
    from hydroatlas.store import open_store

    folder, store, ks, _ = district
    with open_store(store) as s:
        rec = _Recorder()
        report = workflows.import_data(s, "wells", folder / "wells.csv", progress=rec)
        assert rec.total_before_first_step == rec.total == rec.done == report.rows == len(ks)
        rec = _Recorder()
        res = workflows.build_surface(s, "AQ", "head", method="idw", cell=200.0, out=tmp_path, progress=rec)
        with rasterio.open(res["files"]["raster"]) as r:
            assert rec.total_before_first_step == rec.total == rec.done == r.height


# -- library errors name parameters; the command line names options -----------------------------------------------
def test_option_name_mapping():
    surface = main.commands["surface"]
    assert _common.option_name("cell", surface) == "--cell"
    assert _common.option_name("range_", surface) == "--range"  # the option's Python name, from the command
    assert _common.option_name("tolerance_days", surface) == "--tolerance"
    assert _common.option_name("rates", main.commands["drawdown"]) == "--rate"
    assert _common.option_name("new_wells") == "--new-well"
    assert _common.option_name("spring_conductance") == "--spring-conductance"  # dashes for the rest


def test_errors_name_options_on_the_command_line(district, runner, tmp_path):
    from hydroatlas.errors import ParameterError
    from hydroatlas.workflows.surfaces import make_interpolator

    _, store, _, _ = district
    with pytest.raises(ParameterError, match=r"needs both sill= and range_= \(and optionally nugget=\)") as info:
        make_interpolator("kriging", np.zeros((3, 2)), np.zeros(3), sill=1.0)
    assert info.value.params == ("sill", "range_", "nugget")
    res = cli(runner, "surface", store, "--unit", "AQ", "--sill", 1, "--out", tmp_path)
    assert res.exit_code == 2
    assert res.output == ("hydroatlas: error: a fixed variogram needs both --sill and --range (and optionally "
                          "--nugget)\n")
    res = cli(runner, "retire", store, "wells", "W01", "--reason", " ")
    assert res.exit_code == 2
    assert res.output == "hydroatlas: error: a retirement needs a reason (--reason TEXT); it is kept with the record\n"
    res = cli(runner, "import", store, "wells", tmp_path / "none.csv", "--input-crs", "NOT-A-CRS")
    assert res.exit_code == 2 and "--input-crs 'NOT-A-CRS' is not a CRS pyproj knows" in res.output


def test_drawdown_errors_name_options(products, runner):
    from hydroatlas import workflows
    from hydroatlas.errors import ParameterError
    from hydroatlas.store import open_store

    folder, store, out, _ = products
    with open_store(store) as s, pytest.raises(ParameterError, match=r"^rates= names well 'NOPE'") as info:
        workflows.drawdown_scenario(s, "AQ", days=10.0, storativity=1e-3, rates={"NOPE": 5.0}, out=folder / "x")
    assert info.value.params == ("rates", "new_wells") and "--" not in str(info.value)
    res = cli(runner, "drawdown", store, "--unit", "AQ", "--days", 10, "-S", 1e-3, "--rate", "NOPE=5",
              "--out", folder / "x")
    assert res.exit_code == 2
    assert res.output == ("hydroatlas: error: --rate names well 'NOPE', which is not in the store (use --new-well "
                          "for a proposed well)\n")
    res = cli(runner, "drawdown", store, "--unit", "AQ", "--days", 10, "-S", 1e-3, "--new-well", "W01,1,2,3",
              "--out", folder / "x")
    assert res.exit_code == 2
    assert res.output == ("hydroatlas: error: --new-well 'W01' has the id of a stored well; give its rate with "
                          "--rate W01=Q, or another name\n")


def _raised_texts(path):
    """(line, text) of each literal message passed to ``raise SomeError(...)`` or ``cells.fail(...)`` in a
    module; the text joins the literal parts of f-strings and concatenations (values left out)."""
    import ast

    tree = ast.parse(path.read_text(encoding="utf-8"))
    calls = [n.exc for n in ast.walk(tree) if isinstance(n, ast.Raise) and isinstance(n.exc, ast.Call)]
    calls += [n for n in ast.walk(tree) if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute)
              and n.func.attr == "fail"]
    for call in calls:
        for arg in call.args:
            parts = [c.value for c in ast.walk(arg) if isinstance(c, ast.Constant) and isinstance(c.value, str)]
            if parts:
                yield call.lineno, "".join(parts)


def test_library_errors_name_parameters_not_options():
    """Outside the command line, a message names no --option, except inside a quoted command to run
    ('hydroatlas surface ... --quantity head')."""
    import re
    from pathlib import Path

    import hydroatlas

    package = Path(hydroatlas.__file__).parent
    commands = "|".join(["hydroatlas", *map(re.escape, main.commands)])
    quoted_command = re.compile(rf"'(?:{commands})\b[^']*'")
    found = []
    for path in package.rglob("*.py"):
        if "cli" in path.relative_to(package).parts[:1] or "vendor" in path.parts:
            continue
        for line, text in _raised_texts(path):
            if re.search(r"(?<![\w-])--[a-z]", quoted_command.sub("", text)):
                found.append(f"{path.relative_to(package)}:{line}: {text}")
    assert found == []
