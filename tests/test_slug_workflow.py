"""The slug-test workflow through the command line: one K test per physical test, method choice, raw
transducer data, figures, the store's K unit, and the demo region's slug tests against their known K.

Synthetic records come from the published models' own equations with a known K:
- Hvorslev (1951), basic time lag: H/H0 = exp(-t/T0), T0 = r_c^2 ln(L/R) / (2 L K) (VERIFY.md);
- the damped oscillator of high-K slug tests (Butler 1998; Butler, Garnett and Healey 2003):
  w'' + C_D w' + w = 0 in t_d = t sqrt(g/Le), C_D = (r_c^2 ln(b/r_w) / (2 K b) + T_f) sqrt(g/Le) (Hvorslev-based,
  T_f the laminar friction of the water column);
- Cooper, Bredehoeft and Papadopulos (1967): H/H0 = (8 a / pi^2) int_0^inf exp(-b u^2 / a) / (u D(u)) du,
  D(u) = (u J0 - 2 a J1)^2 + (u Y0 - 2 a Y1)^2, a = r_w^2 S / r_c^2, b = T t / r_c^2, evaluated here with
  scipy.integrate.quad.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest

from hydroatlas import open_store
from hydroatlas.demo import demo_region_dir

from conftest import cli, write_csv

G = 9.80665  # m/s2, standard gravity
SLUG_HEADER = ["well_id", "zone_id", "test_id", "t_s", "displacement"]
GEOM_HEADER = ["well_id", "zone_id", "test_id", "casing_radius", "well_radius", "screen_length",
               "aquifer_thickness", "static_depth", "tested_on", "screen_top_depth", "confined", "geometry_kind"]


def hvorslev_record(k, *, rc, length, radius, h0=0.5, n=60, span=4.0):
    t0 = rc * rc * math.log(length / radius) / (2 * length * k)
    t = np.linspace(0, span * t0, n)
    return t, h0 * np.exp(-t / t0)


def oscillator_record(k, *, rc, rw, b, le, h0=0.6, dt=0.1, duration=40.0):
    # with the laminar friction of the column, Tf = 8 nu Lc / (g rc^2), Lc = Le - (b/2)(rc/rw)^2 (Butler 1998;
    # nu = 1.0e-6 m2/s from memory)
    friction = 8 * 1.0e-6 * (le - 0.5 * b * (rc / rw) ** 2) / (G * rc * rc)
    c_d = (rc * rc * math.log(b / rw) / (2 * k * b) + friction) * math.sqrt(G / le)
    assert c_d < 2  # underdamped
    t = np.arange(0.0, duration + 1e-9, dt)
    td = t * math.sqrt(G / le)
    w = math.sqrt(1 - c_d * c_d / 4)
    return t, h0 * np.exp(-c_d * td / 2) * (np.cos(w * td) + c_d / (2 * w) * np.sin(w * td))


def cbp_head(alpha, beta):
    from scipy import integrate, special

    def f(u):
        d = (u * special.j0(u) - 2 * alpha * special.j1(u)) ** 2 + (u * special.y0(u) - 2 * alpha * special.y1(u)) ** 2
        return np.exp(-beta * u * u / alpha) / (u * d)

    edges = np.concatenate([[0.0], np.geomspace(1e-8, 9.0 * math.sqrt(alpha / beta), 60)])
    return 8 * alpha / math.pi**2 * sum(integrate.quad(f, a, b, limit=200, epsrel=1e-10, epsabs=0)[0]
                                        for a, b in zip(edges[:-1], edges[1:]))


def cbp_record(k, *, rc, rw, b, storativity, h0=1.0, n=120):
    alpha = rw * rw * storativity / (rc * rc)
    beta = np.geomspace(1e-3, 30.0, n)
    t = np.concatenate([[0.0], beta * rc * rc / (k * b)])
    return t, h0 * np.concatenate([[1.0], [cbp_head(alpha, x) for x in beta]])


def test_cbp_evaluation_limits():
    """source: Cooper, Bredehoeft and Papadopulos (1967): H/H0 -> 1 as beta -> 0 and falls monotonically to 0."""
    values = [cbp_head(1e-3, b) for b in (1e-6, 1e-3, 1e-1, 1.0, 10.0, 100.0)]
    assert values[0] == pytest.approx(1.0, abs=2e-3)
    assert all(a > b for a, b in zip(values, values[1:])) and values[-1] < 0.01


def _rows(well, zone, test, t, h):
    return [[well, zone, test, f"{a:.6f}", f"{b:.9f}"] for a, b in zip(t, h)]


def _import(runner, store, tmp_path, kind, rows, name):
    res = cli(runner, "import", store, kind, write_csv(tmp_path / name, rows))
    assert res.exit_code == 0, res.output
    return res


def _json(res):
    """The JSON document of a command's output (notes printed before it are not part of it)."""
    text = res.output
    return json.loads(text[min(i for i in (text.find("["), text.find("{")) if i >= 0):])


def _slugs(runner, store, *args):
    res = cli(runner, "slugs", store, "--format", "json", *args)
    assert res.exit_code == 0, res.output
    return {r["test_id"]: r for r in _json(res)}


def _stats(runner, store, unit):
    res = cli(runner, "stats", store, "--unit", unit, "--format", "json")
    assert res.exit_code == 0, res.output
    return _json(res)[0]


def _ktest(store, well, zone, test_id):
    with open_store(store) as s:
        kt = s.read("ktests")
    row = kt[(kt["well_id"] == well) & (kt["zone_id"] == zone) & (kt["test_id"] == test_id)]
    assert len(row) == 1, kt[["well_id", "zone_id", "test_id"]]
    return row.iloc[0], json.loads(row.iloc[0]["attrs"])


# W1/P1 lies in the top aquifer TOP (depth 10-20 m, nothing above it: unconfined); static level 5 m deep, the
# aquifer saturated from there to its base at 40 m, so both Hvorslev and Bouwer and Rice apply.
RC, RADIUS = 0.0254, 0.0508


@pytest.fixture()
def p1_test(mini_store, tmp_path, runner):
    t, h = hvorslev_record(4e-5, rc=RC, length=10.0, radius=RADIUS)
    _import(runner, mini_store, tmp_path, "slugtests", [SLUG_HEADER] + _rows("W1", "P1", "T1", t, h), "s.csv")
    _import(runner, mini_store, tmp_path, "sluggeometry",
            [GEOM_HEADER, ["W1", "P1", "T1", RC, RADIUS, 10.0, 35.0, 5.0, "2024-06-02", 10.0, "false", "screen"]],
            "g.csv")
    return mini_store


def test_one_k_test_per_physical_test(p1_test, runner):
    """Reducing one test with two methods in turn updates one K test; stats count it once."""
    before = _stats(runner, p1_test, "TOP")["n_tests"]
    first = _slugs(runner, p1_test, "--method", "hvorslev")["T1"]
    assert first["method"] == "hvorslev"
    assert first["k_ms"] == pytest.approx(4e-5, rel=5e-3)  # source: Hvorslev (1951), exact exponential recovery
    after_one = _stats(runner, p1_test, "TOP")["n_tests"]
    second = _slugs(runner, p1_test, "--method", "bouwer-rice")["T1"]
    assert second["method"] == "bouwer-rice" and second["k_ms"] > 0
    after_two = _stats(runner, p1_test, "TOP")["n_tests"]
    assert after_one == before + 1 and after_two == after_one
    row, attrs = _ktest(p1_test, "W1", "P1", "slug:T1")
    assert row["method"] == "slug" and attrs["method"] == "bouwer-rice" and attrs["method_asked"] == "bouwer-rice"
    assert row["k_ms"] == pytest.approx(second["k_ms"], rel=1e-9)
    with open_store(p1_test) as s:
        kt = s.read("ktests")
    assert not kt["test_id"].str.contains(":hvorslev|:bouwer-rice", regex=True).any()
    res = cli(runner, "history", p1_test, "ktests", "W1/P1/slug:T1", "--format", "json")
    assert res.exit_code == 0, res.output
    versions = _json(res)
    assert len(versions) == 2  # the Hvorslev version kept in the record history
    assert versions[0]["k_ms"] == pytest.approx(first["k_ms"], rel=1e-9)


def test_auto_keeps_alternatives_and_says_why(p1_test, runner):
    out = _slugs(runner, p1_test, "--method", "auto")["T1"]
    assert out["method"] in ("hvorslev", "bouwer-rice") and out["reason"]
    assert out["response"] and out["n_points"] >= 5 and out["h_range"]
    row, attrs = _ktest(p1_test, "W1", "P1", "slug:T1")
    assert attrs["method"] == out["method"] and attrs["reason"] == out["reason"]
    alternatives = {a["method"]: a for a in attrs["alternatives"]}
    assert alternatives and out["method"] not in alternatives
    assert {"hvorslev", "bouwer-rice"} <= set(alternatives) | {out["method"]}
    for a in attrs["alternatives"]:
        assert a["k_unit"] == "m/d" and a["k"] > 0 and "r2" in a and "valid" in a
    assert attrs["diagnostics"]["response"] == out["response"]
    assert attrs["geometry"]["confined"] is False and attrs["geometry"]["screen_bottom_depth"] == pytest.approx(20.0)
    table = cli(runner, "slugs", p1_test, "--no-write")
    assert table.exit_code == 0 and "m/d" in table.output and out["method"] in table.output


def test_auto_picks_oscillating_for_an_oscillating_record(mini_store, tmp_path, runner):
    """A damped-oscillator record of known K (Butler 1998) is reduced by the oscillating-response method."""
    k, rc, b, le = 3e-3, 0.0508, 10.0, 12.0
    t, h = oscillator_record(k, rc=rc, rw=rc, b=b, le=le)
    _import(runner, mini_store, tmp_path, "slugtests", [SLUG_HEADER] + _rows("W1", "P1", "OS", t, h), "s.csv")
    _import(runner, mini_store, tmp_path, "sluggeometry",
            [GEOM_HEADER, ["W1", "P1", "OS", rc, rc, b, "", "", "2024-06-03", "", "", ""]], "g.csv")
    out = _slugs(runner, mini_store)["OS"]
    assert out["method"] == "oscillating", out
    assert "oscillat" in out["reason"].lower() or "underdamped" in out["reason"].lower()
    assert out["k_ms"] == pytest.approx(k, rel=0.05)


def test_auto_picks_cbp_for_a_confined_packer_interval_with_storage(mini_store, tmp_path, runner):
    """W1/P3 lies in LOW below the aquitard MID; a CBP record (alpha = 0.01) is reduced by CBP."""
    k, rc, rw, b, storativity = 2e-6, 0.0127, 0.048, 10.0, 7e-4
    t, h = cbp_record(k, rc=rc, rw=rw, b=b, storativity=storativity)
    _import(runner, mini_store, tmp_path, "slugtests", [SLUG_HEADER] + _rows("W1", "P3", "PK", t, h), "s.csv")
    _import(runner, mini_store, tmp_path, "sluggeometry",
            [GEOM_HEADER, ["W1", "P3", "PK", rc, rw, b, b, "", "2024-06-04", 70.0, "", "packer"]], "g.csv")
    out = _slugs(runner, mini_store)["PK"]
    assert out["method"] == "cbp", out
    assert out["reason"]
    assert out["k_ms"] == pytest.approx(k, rel=0.05)
    _, attrs = _ktest(mini_store, "W1", "P3", "slug:PK")
    assert attrs["geometry"]["confined"] is True  # from the aquitard above the zone's unit
    assert "aquitard" in attrs["geometry_sources"]["confined"]
    assert attrs["fit"]["s"] == pytest.approx(storativity, rel=0.5)


def test_sluggeometry_optional_columns_checked(mini_store, tmp_path, runner):
    bad_kind = [GEOM_HEADER, ["W1", "P1", "T1", RC, RADIUS, 10.0, "", "", "", "", "", "casing"]]
    res = cli(runner, "import", mini_store, "sluggeometry", write_csv(tmp_path / "g1.csv", bad_kind))
    assert res.exit_code == 2 and "geometry_kind" in res.output
    bad_flag = [GEOM_HEADER, ["W1", "P1", "T1", RC, RADIUS, 10.0, "", "", "", "", "maybe", ""]]
    res = cli(runner, "import", mini_store, "sluggeometry", write_csv(tmp_path / "g2.csv", bad_flag))
    assert res.exit_code == 2 and "confined" in res.output
    outside = [GEOM_HEADER, ["W1", "P1", "T1", RC, RADIUS, 10.0, "", "", "", 15.0, "", ""]]  # 15-25 m, zone 10-20
    res = cli(runner, "import", mini_store, "sluggeometry", write_csv(tmp_path / "g3.csv", outside))
    assert res.exit_code == 2 and "screen_top_depth" in res.output and "inside its zone" in res.output
    good = [GEOM_HEADER, ["W1", "P1", "T1", RC, RADIUS, 10.0, "", "", "", 10.0, "Yes", "open_hole"]]
    _import(runner, mini_store, tmp_path, "sluggeometry", good, "g4.csv")
    with open_store(mini_store) as s:
        attrs = json.loads(s.read("slug_geometry").iloc[0]["attrs"])
    assert attrs == {"screen_top_depth": 10.0, "confined": True, "geometry_kind": "open_hole"}


# -- raw transducer data -------------------------------------------------------------------------------------
# source: 1 psi = 6894.757 Pa (pint's definition, 6894.757293 Pa, is used below as the reference), a column of
# water of density 1000 kg/m3 under standard gravity 9.80665 m/s2; 1 ft = 0.3048 m exactly (VERIFY.md).


def _transducer(well, zone, test, t, level_m, *, unit, start=None, pre=5):
    pint = pytest.importorskip("pint")
    ureg = pint.UnitRegistry()
    metres_per = {"psi": (1 * ureg.psi).to("Pa").magnitude / (1000.0 * G), "ft": 0.3048, "kPa": 1000.0 / (1000 * G)}
    static_m = 3.2
    stamps = [np.datetime64("2024-06-02T09:59:00") + np.timedelta64(10 * i, "s") for i in range(pre)]
    t0 = np.datetime64("2024-06-02T10:00:00.000")
    stamps += [t0 + np.timedelta64(int(round(x * 1000)), "ms") for x in t]
    values = [static_m] * pre + list(static_m + np.asarray(level_m))
    rows = [["well_id", "zone_id", "test_id", "timestamp", "value", "value_unit", "test_start"]]
    for stamp, v in zip(stamps, values):
        rows.append([well, zone, test, str(stamp), f"{v / metres_per[unit]:.7f}", unit, start or ""])
    return rows


def test_transducer_import_matches_the_seconds_form(mini_store, tmp_path, runner):
    t, h = hvorslev_record(4e-5, rc=RC, length=10.0, radius=RADIUS, h0=0.45)
    t = np.round(t, 3)
    _import(runner, mini_store, tmp_path, "slugtests", [SLUG_HEADER] + _rows("W1", "P1", "SEC", t, h), "s.csv")
    _import(runner, mini_store, tmp_path, "transducer", _transducer("W1", "P1", "PSI", t, h, unit="psi"), "p.csv")
    _import(runner, mini_store, tmp_path, "transducer",
            _transducer("W1", "P1", "FTW", t, h, unit="ft", start="2024-06-02T10:00:00"), "f.csv")
    with open_store(mini_store) as s:
        rec = s.read("slug_records")
    by = {k: g.sort_values("t_s") for k, g in rec.groupby("test_id")}
    assert len(by["PSI"]) == len(by["SEC"]) == len(by["FTW"]) == len(t)  # readings before the start: static only
    for name in ("PSI", "FTW"):
        np.testing.assert_allclose(by[name]["t_s"].to_numpy(), by["SEC"]["t_s"].to_numpy(), atol=1e-6)
        # 7 decimals of psi are about 7e-8 m of water
        np.testing.assert_allclose(by[name]["displacement"].to_numpy(), by["SEC"]["displacement"].to_numpy(),
                                   atol=2e-6)
    first = json.loads(by["PSI"].iloc[0]["attrs"])
    assert first["start_from"].startswith("from the data") and first["test_start"] == "2024-06-02T10:00:00"
    assert first["static_readings"] == 5 and len(first["readings_before_start"]) == 5
    assert first["value_unit"] == "psi" and first["static_level"] == pytest.approx(3.2, abs=1e-6)
    assert json.loads(by["FTW"].iloc[0]["attrs"])["start_from"].startswith("given")


def test_transducer_refusals(mini_store, tmp_path, runner):
    t, h = hvorslev_record(4e-5, rc=RC, length=10.0, radius=RADIUS)
    no_static = _transducer("W1", "P1", "X", t, h, unit="psi", start="2024-06-02T09:00:00")
    res = cli(runner, "import", mini_store, "transducer", write_csv(tmp_path / "a.csv", no_static))
    assert res.exit_code == 2 and "static level" in res.output
    wrong_unit = _transducer("W1", "P1", "X", t, h, unit="psi")
    wrong_unit[3][5] = "bar"
    res = cli(runner, "import", mini_store, "transducer", write_csv(tmp_path / "b.csv", wrong_unit))
    assert res.exit_code == 2 and "value_unit" in res.output
    bare_date = _transducer("W1", "P1", "X", t, h, unit="psi")
    bare_date[2][3] = "2024-06-02"
    res = cli(runner, "import", mini_store, "transducer", write_csv(tmp_path / "c.csv", bare_date))
    assert res.exit_code == 2 and "timestamp" in res.output


# -- figures and units ---------------------------------------------------------------------------------------
def test_figures_per_test(empty_store, mini_files, tmp_path, runner):
    """A figure per test, and 'figures' draws them for every test (slug in and slug out at W1/P1)."""
    import matplotlib.image

    for kind in ("units", "wells", "picks", "zones", "heads"):  # no K tests: only the slug tests are K tests
        assert cli(runner, "import", empty_store, kind, mini_files / f"{kind}.csv").exit_code == 0
    rows, geom = [SLUG_HEADER], [GEOM_HEADER]
    for test, h0 in (("T1", 0.5), ("T2", -0.3)):
        t, h = hvorslev_record(4e-5, rc=RC, length=10.0, radius=RADIUS, h0=h0)
        rows += _rows("W1", "P1", test, t, h)
        geom.append(["W1", "P1", test, RC, RADIUS, 10.0, 35.0, 5.0, "2024-06-02", 10.0, "false", "screen"])
    _import(runner, empty_store, tmp_path, "slugtests", rows, "s.csv")
    _import(runner, empty_store, tmp_path, "sluggeometry", geom, "g.csv")
    p1_test = empty_store
    res = cli(runner, "slugs", p1_test, "--figures", tmp_path / "figs")
    assert res.exit_code == 0, res.output
    png = tmp_path / "figs" / "slug_W1_P1_T1.png"
    assert png.is_file() and (tmp_path / "figs" / "slug_W1_P1_T1.svg").is_file()
    image = matplotlib.image.imread(png)
    assert image.ndim == 3 and image.shape[0] > 300 and image.shape[1] > 300
    assert image[..., :3].std() > 0.05  # drawn, not blank
    res = cli(runner, "figures", p1_test, "--out", tmp_path / "all")
    assert res.exit_code == 0, res.output
    assert (tmp_path / "all" / "slugs" / "slug_W1_P1_T1.png").is_file()
    assert (tmp_path / "all" / "slugs" / "slug_W1_P1_T2.png").is_file()
    svg = (tmp_path / "all" / "slugs" / "slug_W1_P1_T1.svg").read_text()
    assert "K = " in svg and "m/d" in svg and "fit window" in svg and "T2 (H0 = -0.3 m), repeat" in svg


def test_k_in_ft_per_day_in_a_feet_store(tmp_path, runner):
    """source: Hvorslev (1951) in feet; ft/d against m/s checked with pint."""
    pint = pytest.importorskip("pint")
    ureg = pint.UnitRegistry()
    store = tmp_path / "ft.gpkg"
    assert cli(runner, "init", store, "--crs", "EPSG:32616", "--length-unit", "ft").exit_code == 0
    _import(runner, store, tmp_path, "units", [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"]],
            "u.csv")
    _import(runner, store, tmp_path, "wells", [["well_id", "x", "y", "ground_elev"], ["F1", 610000, 4100000, 900]],
            "w.csv")
    _import(runner, store, tmp_path, "picks", [["well_id", "unit", "top_depth", "bottom_depth"], ["F1", "AQ", 0, 200]],
            "p.csv")
    _import(runner, store, tmp_path, "zones", [["well_id", "zone_id", "top_depth", "bottom_depth"],
                                               ["F1", "S", 50, 60]], "z.csv")
    k_ftd, rc, radius, length = 12.0, 0.0833, 0.1667, 10.0  # ft
    t, h = hvorslev_record(k_ftd / 86400.0, rc=rc, length=length, radius=radius, h0=1.5)
    _import(runner, store, tmp_path, "slugtests", [SLUG_HEADER] + _rows("F1", "S", "T1", t, h), "s.csv")
    _import(runner, store, tmp_path, "sluggeometry",
            [GEOM_HEADER, ["F1", "S", "T1", rc, radius, length, "", "", "2024-06-01", "", "", ""]], "g.csv")
    out = _slugs(runner, store, "--method", "hvorslev")["T1"]
    assert out["k_unit"] == "ft/d" and out["k"] == pytest.approx(k_ftd, rel=5e-3)
    assert out["k_ms"] == pytest.approx((k_ftd * ureg("ft/day")).to("m/s").magnitude, rel=5e-3)
    row, attrs = _ktest(store, "F1", "S", "slug:T1")
    assert row["k_unit"] == "ft/d" and row["k"] == pytest.approx(k_ftd, rel=5e-3) and attrs["length_unit"] == "ft"


# -- the demo region -----------------------------------------------------------------------------------------
_KNOWN = re.compile(r"^\|\s*(ZP-\d+)/(\w+)\s*\|\s*(\w+)\s*\|\s*([^|]+?)\s*\|\s*([^|]+?)\s*\|\s*([0-9.eE+-]+)\s*\|$")


def _known_from_readme():
    rows = []
    for line in (demo_region_dir() / "README.md").read_text().splitlines():
        m = _KNOWN.match(line.strip())
        if m:
            rows.append({"well_id": m[1], "zone_id": m[2], "test_id": m[3], "response": m[4], "model": m[5],
                         "k_ms": float(m[6])})
    return rows


def test_demo_slug_tests_recover_their_known_k(tmp_path, runner):
    """Every demo slug test (generated from its model with the K in demo_region/README.md) comes back within 5 %."""
    known = _known_from_readme()
    responses = {r["response"] for r in known}
    assert {"overdamped", "double straight line", "oscillating", "confined, with storage"} <= responses
    res = cli(runner, "demo", "--out", tmp_path / "demo")
    assert res.exit_code == 0, res.output
    store = tmp_path / "demo" / "zephyrine.gpkg"
    with open_store(store) as s:
        kt = s.read("ktests")
    slug_k = kt[kt["test_id"].str.startswith("slug:")].set_index(["well_id", "zone_id", "test_id"])
    report = []
    for r in known:
        key = (r["well_id"], r["zone_id"], f"slug:{r['test_id']}")
        assert key in slug_k.index, key
        got = float(slug_k.loc[key, "k_ms"])
        attrs = json.loads(slug_k.loc[key, "attrs"])
        report.append((r["test_id"], r["response"], attrs["method"], r["k_ms"], got))
        assert got == pytest.approx(r["k_ms"], rel=0.05), (r, attrs["method"], attrs["reason"])
    methods = {m for _, _, m, _, _ in report}
    assert {"oscillating", "cbp"} <= methods
    figures = list((tmp_path / "demo" / "figures" / "slugs").glob("slug_*.png"))
    assert len(figures) == len(known)
