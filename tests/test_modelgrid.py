"""`hydroatlas grid`: layer geometry, idomain, K and starting heads through the command line, read back with
xarray and numpy; the K-test orientation column; and the truth district.

The writers (NetCDF-CF, plain arrays, MODFLOW 6) have their own tests in tests/test_modelgrid_writers.py.
The hand-built district below puts every well at a cell centre of the test grid, so that the layer elevations
of a well's cell are the interpolated contacts at the well itself, where the interpolation is exact.
"""

import json
import math
import sqlite3
from dataclasses import replace

import numpy as np
import pytest
import shapely
import xarray as xr

from conftest import CRS, cli, write_csv
from truth_fixtures import copy_store

X0, Y0 = 610000.0, 4100000.0
CELL = 100.0
SHAPE = (12, 12)
AQ_K = {"AQ": 3.0, "LO": 0.4}  # geometric means of the invented slug tests, m/d (test input)
AT_KH_MS, AT_KV_MS = 1e-8, 1e-10  # packer (horizontal) and core (vertical) tests of the aquitard, m/s


def _site(length_unit="m", seed=11):
    """Wells on a 4 x 4 lattice of cell centres with picks of TOPS (east only), AQ, AT (absent at W05) and LO
    (never fully penetrated). Returns the CSV rows and, per well, the picked elevations."""
    rng = np.random.default_rng(seed)
    f = 1.0 if length_unit == "m" else 1 / 0.3048
    rows = {"units": [["code", "name", "rank", "role"], ["TOPS", "partial top", 1, "aquifer"],
                      ["AQ", "upper", 2, "aquifer"], ["AT", "tight", 3, "aquitard"], ["LO", "lower", 4, "aquifer"],
                      ["NOPE", "never picked", 5, "other"]],
            "wells": [["well_id", "x", "y", "ground_elev", "total_depth"]],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
            "heads": [["well_id", "zone_id", "measured_at", "head"]],
            "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "orientation"]]}
    wells = {}
    for n in range(16):
        i, j = n % 4, n // 4
        w = f"W{n:02d}"
        dx, dy = CELL * (1 + 3 * i) + CELL / 2, CELL * (1 + 3 * j) + CELL / 2
        g = round((400 + 0.01 * dx - 0.004 * dy + rng.uniform(-1, 1)) * f, 2)
        t_top = round(rng.uniform(5, 15) * f, 2) if i >= 2 else 0.0
        t_aq = round(rng.uniform(40, 60) * f, 2)
        t_at = 0.0 if n == 5 else round(rng.uniform(5, 15) * f, 2)
        d = [0.0, t_top, t_top + t_aq, t_top + t_aq + t_at]
        td = round(d[3] + rng.uniform(30, 50) * f, 2)
        rows["wells"].append([w, X0 + dx, Y0 + dy, g, td])
        if t_top:
            rows["picks"].append([w, "TOPS", 0, d[1]])
            rows["zones"].append([w, "S", round(1 * f, 2), round(3 * f, 2)])
            rows["ktests"].append([w, "S", "2024-01-01", "slug", round(20 * 10 ** rng.normal(0, 0.2), 3), "m/d", ""])
        rows["picks"].append([w, "AQ", d[1], round(d[2], 2)])
        if t_at:
            rows["picks"].append([w, "AT", round(d[2], 2), round(d[3], 2)])
        rows["picks"].append([w, "LO", round(d[3], 2), td])
        rows["zones"] += [[w, "U", round(d[1] + 5 * f, 2), round(d[1] + 10 * f, 2)],
                          [w, "L", round(d[3] + 10 * f, 2), round(d[3] + 20 * f, 2)]]
        rows["heads"] += [[w, "U", "2024-01-01", round((390 - 0.002 * dx) * f, 4)],
                          [w, "L", "2024-01-01", round((370 - 0.002 * dx) * f, 4)]]
        rows["ktests"] += [[w, "U", "2024-01-01", "slug", round(AQ_K["AQ"] * 10 ** rng.normal(0, 0.2), 4), "m/d", ""],
                           [w, "L", "2024-01-01", "slug", round(AQ_K["LO"] * 10 ** rng.normal(0, 0.2), 4), "m/d",
                            "horizontal"]]
        if t_at:
            mid = round(d[2] + t_at / 2, 2)
            rows["zones"].append([w, "T", round(mid - 0.5 * f, 2), round(mid + 0.5 * f, 2)])
            rows["heads"].append([w, "T", "2024-01-01", round(500 * f, 2)])  # far off: must not be used
            rows["ktests"].append([w, "T", "2024-01-01", "packer", AT_KH_MS, "m/s", ""])
            if n in (0, 6, 10):
                rows["ktests"].append([w, "T", "2024-02-01", "core", AT_KV_MS, "m/s", "vertical"])
        elev = [round(g - v, 2) for v in (d[0], round(d[1], 2), round(d[2], 2), round(d[3], 2))]
        wells[w] = {"x": X0 + dx, "y": Y0 + dy, "ground": g, "contacts": elev, "td_elev": round(g - td, 2),
                    "row": SHAPE[0] - 1 - (1 + 3 * j), "col": 1 + 3 * i, "tops": bool(t_top), "at": bool(t_at)}
    return rows, wells


def _build(tmp_path, runner, length_unit="m"):
    store = tmp_path / f"site_{length_unit}.gpkg"
    res = cli(runner, "init", store, "--crs", CRS, "--length-unit", length_unit)
    assert res.exit_code == 0, res.output
    rows, wells = _site(length_unit)
    for kind, r in rows.items():
        res = cli(runner, "import", store, kind, write_csv(tmp_path / f"{kind}_{length_unit}.csv", r))
        assert res.exit_code == 0, res.output
    out = tmp_path / f"model_{length_unit}"
    for unit in ("AQ", "AT", "LO"):
        res = cli(runner, "surface", store, "--unit", unit, "--quantity", "head", "--method", "idw", "--cell", 50,
                  "--out", out)
        assert res.exit_code == 0, res.output
    return store, out, wells


@pytest.fixture
def site(tmp_path, runner):
    return _build(tmp_path, runner)


def _grid(runner, store, out, name, *args):
    nc = out / f"{name}.nc"
    res = cli(runner, "grid", store, "--cell", CELL, "--origin", f"{X0},{Y0}", "--shape", f"{SHAPE[0]},{SHAPE[1]}",
              "--out", nc, *args)
    assert res.exit_code == 0, res.output
    ds = xr.open_dataset(nc)
    arrays = {v: ds[v].values for v in ("top", "botm", "idomain", "k", "k33", "strt", "icelltype")}
    units = [u.decode() if isinstance(u, bytes) else str(u) for u in ds["unit_code"].values]
    ds.close()
    manifest = json.loads((out / "manifest.json").read_text())
    return arrays, units, manifest, res.output


@pytest.mark.parametrize("length_unit", ["m", "ft"])
def test_layers_at_wells_equal_the_picked_elevations(tmp_path, runner, length_unit):
    """At every well (a cell centre) each layer's top and bottom equal the picked elevations (ground_elev -
    depth): the contacts are interpolated exactly (IDW of residuals, exact at data points; tolerance 1e-6 in the
    store's length unit). A feet store is written in feet. TOPS absent (west) and AT absent (W05): zero
    thickness and idomain -1 there; the layers below keep their picked elevations."""
    store, out, wells = _build(tmp_path, runner, length_unit)
    a, units, manifest, _ = _grid(runner, store, out, "full", "--base-thickness", 100, "--min-thickness", 1)
    assert units == ["TOPS", "AQ", "AT", "LO"]
    assert manifest["length_unit"] == length_unit and manifest["k_unit"] == f"{length_unit}/d"
    top, botm, idomain = a["top"], a["botm"], a["idomain"]
    upper = np.concatenate([top[None], botm[:-1]])
    assert (upper - botm >= 0).all()
    errors = []
    for wid, w in wells.items():
        r, c = w["row"], w["col"]
        ground, tops_bot, aq_bot, at_bot = w["contacts"]
        expect_bottoms = [tops_bot, aq_bot, at_bot, at_bot - 100.0]
        errors.append(abs(top[r, c] - ground))
        errors += [abs(botm[k, r, c] - e) for k, e in enumerate(expect_bottoms)]
        assert idomain[0, r, c] == (1 if w["tops"] else -1), wid
        assert idomain[2, r, c] == (1 if w["at"] else -1), wid
        assert idomain[1, r, c] == 1 and idomain[3, r, c] == 1
    assert max(errors) < 1e-6, max(errors)
    # the stack is never built down from the ground: where TOPS is absent the AQ layer starts at the ground
    west = [w for w in wells.values() if not w["tops"]]
    assert all(abs(botm[0, w["row"], w["col"]] - top[w["row"], w["col"]]) < 1e-9 for w in west)


def test_subset_of_layers_keeps_true_elevations_and_merges(site, runner):
    """Leaving a unit out moves no other layer: AQ,LO gives the same AQ top and LO bottom as the full grid; AT
    joins AQ (or LO with --merge-down), said in the manifest; TOPS above the first layer is not in the model
    and the model top is the top of AQ. The merged layer's K is the thickness-weighted arithmetic (K_h) and
    harmonic (K_v) mean of its units (SPEC 2.4, effective K of a profile)."""
    store, out, wells = site
    full, _, _, _ = _grid(runner, store, out, "full", "--base", 250)
    sub, units, manifest, _ = _grid(runner, store, out, "sub", "--layers", "AQ,LO", "--base", 250)
    assert units == ["AQ", "LO"] and manifest["merged"] == {"AQ": ["AT"]}
    assert any("TOPS" in n and "not in the model" in n for n in manifest["notes"])
    assert np.array_equal(sub["top"], full["botm"][0])  # the top of AQ, not the ground
    assert np.array_equal(sub["botm"][0], full["botm"][2])  # AQ + AT down to the top of LO
    assert np.array_equal(sub["botm"][1], full["botm"][3])
    down, units, manifest, _ = _grid(runner, store, out, "down", "--layers", "AQ,LO", "--merge-down", "--base", 250)
    assert manifest["merged"] == {"LO": ["AT"]}
    assert np.array_equal(down["botm"][0], full["botm"][1]) and np.array_equal(down["botm"][1], full["botm"][3])
    # K of the merged layer at a well with AT, against the definitions
    w = wells["W00"]
    r, c = w["row"], w["col"]
    b_aq, b_at = full["botm"][0, r, c] - full["botm"][1, r, c], full["botm"][1, r, c] - full["botm"][2, r, c]
    kh_aq, kh_at = full["k"][1, r, c], full["k"][2, r, c]
    kv_aq, kv_at = full["k33"][1, r, c], full["k33"][2, r, c]
    assert sub["k"][0, r, c] == pytest.approx((b_aq * kh_aq + b_at * kh_at) / (b_aq + b_at), rel=1e-9)
    assert sub["k33"][0, r, c] == pytest.approx((b_aq + b_at) / (b_aq / kv_aq + b_at / kv_at), rel=1e-9)
    # where AT is absent the merged layer has the K of AQ alone
    w5 = wells["W05"]
    assert sub["k"][0, w5["row"], w5["col"]] == pytest.approx(kh_aq, rel=1e-9)


def test_k_from_horizontal_and_vertical_tests(site, runner):
    """K_h: geometric mean of a unit's horizontal tests; K_v: of its vertical tests, else K_h / --kv-ratio."""
    from hydroatlas import open_store

    store, out, _ = site
    a, _, manifest, _ = _grid(runner, store, out, "k", "--kv-ratio", 5, "--base", 250)
    with open_store(store) as s:
        t = s.read("ktests").merge(s.read("zones")[["well_id", "zone_id"]], on=["well_id", "zone_id"])
    for k, zone in ((1, "U"), (3, "L")):
        gm = 10 ** np.mean(np.log10(t.loc[t["zone_id"] == zone, "k_ms"].to_numpy(float))) * 86400.0
        assert np.allclose(a["k"][k], gm, rtol=1e-9) and np.allclose(a["k33"][k], gm / 5, rtol=1e-9)
    assert np.allclose(a["k"][2], AT_KH_MS * 86400.0, rtol=1e-9)
    assert np.allclose(a["k33"][2], AT_KV_MS * 86400.0, rtol=1e-9)
    assert manifest["k_sources"]["AT"]["n_vertical_tests"] == 3
    assert "vertical" in manifest["k_sources"]["AT"]["k_v"]


def test_aquitard_heads_lie_between_the_aquifers(site, runner):
    """The aquitard's starting head is linear in elevation between the AQ head (at the AT top) and the LO head (at
    the AT bottom): at its mid elevation the mean of the two (steady leakage through a uniform layer, Darcy);
    its own head surface (readings far off at 500) is not used. TOPS has no head surface: the manifest says
    so and its heads come from the layer below."""
    store, out, _ = site
    a, _, manifest, _ = _grid(runner, store, out, "heads", "--base", 250)
    strt = a["strt"]
    assert np.allclose(strt[2], 0.5 * (strt[1] + strt[3]), atol=1e-9)
    assert strt[2].max() < 400
    assert np.array_equal(strt[0], strt[1])
    assert any(n.startswith("TOPS has no head surface of its own") for n in manifest["notes"])
    assert any(n.startswith("AT (aquitard): starting heads linear in elevation") for n in manifest["notes"])
    assert a["icelltype"].tolist()[0] == 1 and a["icelltype"].tolist()[2] == 0


def test_base_of_a_unit_no_well_goes_through(site, runner):
    """LO's picks all end at total depth: --base sets an elevation, --base-thickness a thickness, and without
    either the mean penetrated thickness is used with a warning."""
    store, out, wells = site
    a, _, manifest, output = _grid(runner, store, out, "default")
    assert "warning: no well reaches the base of LO" in output
    pen = np.mean([w["contacts"][3] - w["td_elev"] for w in wells.values()])
    upper = a["botm"][2]
    assert np.allclose(upper - a["botm"][3], pen, atol=1e-6)
    assert "mean penetrated thickness" in manifest["grid"]["base_rule"]
    a, _, manifest, output = _grid(runner, store, out, "base", "--base", 250)
    assert "warning" not in output and np.allclose(a["botm"][3], 250.0)
    assert manifest["grid"]["base"] == 250.0


def test_rotated_grid(site, runner):
    store, out, _ = site
    nc = out / "rot.nc"
    res = cli(runner, "grid", store, "--cell", 100, "--origin", f"{X0},{Y0}", "--shape", "20,25", "--rotation", 30,
              "--layers", "AQ,AT,LO", "--base", 250, "--out", nc)
    assert res.exit_code == 0, res.output
    ds = xr.open_dataset(nc)
    x, y = ds["x"].values, ds["y"].values
    assert x.shape == (20, 25)
    # the last row's first cell centre lies at (50, 50) along the rotated axes from the origin
    t = math.radians(30)
    assert x[-1, 0] == pytest.approx(X0 + 50 * math.cos(t) - 50 * math.sin(t))
    assert y[-1, 0] == pytest.approx(Y0 + 50 * math.sin(t) + 50 * math.cos(t))
    ds.close()


def test_grid_bad_input(site, runner):
    store, out, _ = site
    cases = [(["--cell", 0.1], "more than the maximum"),
             (["--cell", 100, "--rotation", 15], "needs --origin"),
             (["--cell", 100, "--layers", "AQ,NOPE"], "no picks anywhere"),
             (["--cell", 100, "--layers", "LO,AQ"], "stratigraphic order"),
             (["--cell", 100, "--layers", "AQ,AQ"], "stratigraphic order"),
             (["--cell", 100, "--origin", f"{X0},{Y0}"], "--shape"),
             (["--cell", 100, "--origin", "a,b", "--shape", "2,2"], "X,Y"),
             (["--cell", 100, "--base", 10, "--base-thickness", 5], "not both"),
             (["--cell", 100, "--base-thickness", 0], "--base-thickness must be"),
             (["--cell", 100, "--base", "nan"], "--base must be")]
    for args, message in cases:
        res = cli(runner, "grid", store, "--out", out / "bad.nc", *args)
        assert res.exit_code == 2, (args, res.output)
        assert message in res.output, (args, res.output)


# -- the orientation of K tests (store schema version 3) --------------------------------------------------------
def test_ktest_orientation_is_checked_on_import(mini_store, tmp_path, runner):
    bad = write_csv(tmp_path / "k.csv", [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "orientation"],
                                         ["W1", "P2", "2024-05-09", "core", 1e-10, "m/s", "sideways"]])
    res = cli(runner, "import", mini_store, "ktests", bad)
    assert res.exit_code == 2 and "column 'orientation'" in res.output and "horizontal, vertical" in res.output
    good = write_csv(tmp_path / "k2.csv", [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "orientation"],
                                           ["W1", "P2", "2024-05-09", "core", 1e-10, "m/s", "Vertical"],
                                           ["W1", "P2", "2024-05-10", "packer", 1e-9, "m/s", ""]])
    assert cli(runner, "import", mini_store, "ktests", good).exit_code == 0
    from hydroatlas import open_store

    with open_store(mini_store) as s:
        k = s.read("ktests").set_index("test_id")["orientation"]
    assert k["core@2024-05-09"] == "vertical" and k["packer@2024-05-10"] == "horizontal"
    assert k["slug@2024-05-01"] == "horizontal"  # a file without the column: the default


def _make_version_2(path):
    """Turn a current store into what schema version 2 wrote: the ktests table without orientation."""
    from hydroatlas.store.geopackage import table_ddl
    from hydroatlas.store.schema import TABLES

    spec = TABLES["ktests"]
    old = replace(spec, columns=tuple(c for c in spec.columns if c.name != "orientation"),
                  checks=tuple(c for c in spec.checks if "orientation" not in c))
    cols = ["fid"] + list(old.column_names) + list(old.lifecycle)
    conn = sqlite3.connect(path)
    conn.execute("BEGIN")
    conn.execute("ALTER TABLE ktests RENAME TO ktests_v3")
    conn.execute("DROP INDEX ktests_key")
    for suffix in ("_keep_history_update", "_keep_history_delete"):
        conn.execute(f'DROP TRIGGER "ktests{suffix}"')
    for stmt in table_ddl(old):
        conn.execute(stmt)
    names = ", ".join(f'"{c}"' for c in cols)
    conn.execute(f"INSERT INTO ktests ({names}) SELECT {names} FROM ktests_v3")
    conn.execute("DROP TABLE ktests_v3")
    conn.execute("UPDATE hydroatlas_settings SET value = '2' WHERE key = 'schema_version'")
    conn.execute("COMMIT")
    trigger = conn.execute("SELECT sql FROM sqlite_master WHERE name = 'ktests_keep_history_update'").fetchone()[0]
    assert "orientation" not in trigger and "k_ms" in trigger
    conn.close()


def test_upgrade_from_version_2_adds_orientation(mini_store, tmp_path, runner):
    from hydroatlas import open_store
    from hydroatlas.store.schema import SCHEMA_VERSION

    _make_version_2(mini_store)
    res = cli(runner, "stats", mini_store)
    assert res.exit_code == 2 and "hydroatlas upgrade" in res.output
    res = cli(runner, "upgrade", mini_store)
    assert res.exit_code == 0 and f"upgraded to {SCHEMA_VERSION}" in res.output, res.output  # 2 -> current
    with open_store(mini_store) as s:
        assert set(s.read("ktests")["orientation"]) == {"horizontal"}
    conn = sqlite3.connect(mini_store)
    trigger = conn.execute("SELECT sql FROM sqlite_master WHERE name = 'ktests_keep_history_update'").fetchone()[0]
    assert "orientation" in trigger
    with pytest.raises(sqlite3.IntegrityError):
        conn.execute("UPDATE ktests SET orientation = 'sideways' WHERE fid = 1")
    conn.close()
    # a re-import that marks a test vertical keeps the earlier version, orientation included, in the history
    f = write_csv(tmp_path / "k.csv", [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "orientation"],
                                       ["W1", "P2", "2024-05-03", "packer", 1e-10, "m/s", "vertical"]])
    assert cli(runner, "import", mini_store, "ktests", f).exit_code == 0
    res = cli(runner, "history", mini_store, "ktests", "W1/P2/packer@2024-05-03", "--format", "json")
    assert json.loads(res.output)[0]["orientation"] == "horizontal"


# -- the truth district (tests/truthdistrict.py) -----------------------------------------------------------------
TRUTH_CELL = 200.0  # ft: a cell centre lies within 142 ft of its well, nearer to it than to any other well


@pytest.fixture(scope="module")
def truth_grids(truth, truth_store, tmp_path_factory):
    """Head surfaces of the truth district's aquifers and two grids of the units with K tests, untested units
    merged into the layer below: UB,UD,UE,UF (UC joins UD; UA, the cover, is above the first layer and stays out,
    so the model top is the top of UB, or of UC where UB is absent) and UB,UD,UF (UE joins UF too)."""
    from click.testing import CliRunner

    runner = CliRunner()
    folder = tmp_path_factory.mktemp("truth_grid")
    store = copy_store(truth_store, folder / "truth.gpkg")
    for unit in ("UB", "UD", "UF"):
        res = cli(runner, "surface", store, "--unit", unit, "--quantity", "head", "--method", "idw", "--cell", 500,
                  "--window", truth.normal_window, "--out", folder)
        assert res.exit_code == 0, res.output
    grids = {}
    for name, extra in (("all", ("--layers", "UB,UD,UE,UF")), ("some", ("--layers", "UB,UD,UF"))):
        nc = folder / f"{name}.nc"
        res = cli(runner, "grid", store, "--cell", TRUTH_CELL, "--merge-down", "--out", nc, *extra)
        assert res.exit_code == 0, res.output
        ds = xr.open_dataset(nc)
        grids[name] = {v: ds[v].values for v in ("top", "botm", "idomain", "x", "y")}
        ds.close()
        grids[name]["manifest"] = json.loads((folder / "manifest.json").read_text())
    return grids


def test_truth_unit_absent_at_a_well_is_pass_through_there(truth, truth_grids):
    """UB is absent west of its edge: at every well there, the cell holding the well has idomain -1 in the UB
    layer; at every well where the picks show UB, the cell is active."""
    g = truth_grids["all"]
    xs, ys = g["x"], g["y"]
    layer = 0  # UB, the top layer
    absent = present = 0
    for wid, (x, y) in truth.well_xy.items():
        c, r = int(np.argmin(np.abs(xs - x))), int(np.argmin(np.abs(ys - y)))
        inside = truth.partial_extent.contains(shapely.Point(x, y))
        if inside:
            present += 1
            assert g["idomain"][layer, r, c] == 1, wid
        else:
            absent += 1
            assert g["idomain"][layer, r, c] == -1, wid
            assert g["botm"][layer, r, c] == g["top"][r, c]  # zero thickness
    assert absent >= 10 and present >= 10


def test_truth_leaving_units_out_moves_no_layer(truth, truth_grids):
    """Leaving UE out of the layers (it joins UF) moves no other layer: the model top, the bottom of UB, of UC+UD
    and of UF are the same arrays as with UE as a layer of its own."""
    full, some = truth_grids["all"], truth_grids["some"]
    assert full["manifest"]["merged"] == {"UD": ["UC"]}
    assert some["manifest"]["merged"] == {"UD": ["UC"], "UF": ["UE"]}
    assert np.array_equal(some["top"], full["top"])
    assert np.array_equal(some["botm"][0], full["botm"][0])
    assert np.array_equal(some["botm"][1], full["botm"][1])
    assert np.array_equal(some["botm"][2], full["botm"][3])
    assert not np.array_equal(full["botm"][1], full["botm"][2])  # UE has a thickness: the check can fail
