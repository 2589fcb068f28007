"""The numerical parts moved out of the workflows into the pure core (issue 13): model-grid builder, seeding,
contributing areas, travel summaries, scenario superposition, method rules, and errors that name parameters.

Every check says what it rests on: an analytic solution, a published value (VERIFY.md) or a definition.
"""

import doctest
import math
import pickle

import numpy as np
import pandas as pd
import pytest
import shapely
from scipy.optimize import brentq
from scipy.special import exp1
from scipy.stats import gmean

from hydroatlas import flow, modelbuild, pumping
from hydroatlas.errors import HydroatlasError, InsufficientDataError, ParameterError
from hydroatlas.interp import IDW, methods
from hydroatlas.interp.grid import GridSpec


# -- the docstring examples of the new core functions -------------------------------------------------------------
@pytest.mark.parametrize("module", [modelbuild, flow, pumping, methods, __import__("hydroatlas.errors").errors])
def test_docstring_examples(module):
    res = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert res.failed == 0 and res.attempted > 0


# -- errors name Python parameters; the front end renames them ------------------------------------------------------
def test_parameter_error_names_and_renames_its_parameter():
    exc = ParameterError("give base= or base_thickness=, not both", param=("base", "base_thickness"))
    assert exc.params == ("base", "base_thickness")
    assert exc.renamed(lambda p: "--" + p.replace("_", "-")) == "give --base or --base-thickness, not both"
    assert exc.renamed({"base": "BASE"}) == "give BASE or base_thickness=, not both"  # an unmapped name stays
    again = pickle.loads(pickle.dumps(exc))  # process pools pickle errors
    assert type(again) is ParameterError and again.param == exc.param and str(again) == str(exc)
    assert InsufficientDataError("give transmissivity=", param="transmissivity").renamed(
        {"transmissivity": "-T"}) == "give -T"
    assert HydroatlasError("plain").params == () and isinstance(exc, ValueError)


# -- model grid options and placement --------------------------------------------------------------------------------
@pytest.mark.parametrize("kwargs, param", [
    ({"cell": 0}, "cell"),
    ({"cell": 10, "rotation": 15}, "origin"),
    ({"cell": 10, "kv_ratio": 0}, "kv_ratio"),
    ({"cell": 10, "min_thickness": -1}, "min_thickness"),
    ({"cell": 10, "k_source": "median"}, "k_source"),
    ({"cell": 10, "base": 1.0, "base_thickness": 2.0}, ("base", "base_thickness")),
    ({"cell": 10, "base": float("nan")}, "base"),
    ({"cell": 10, "base_thickness": 0.0}, "base_thickness"),
    ({"cell": 10, "origin": (0, 0)}, ("origin", "shape")),
    ({"cell": 10, "origin": ("a", "b"), "shape": (2, 2)}, "origin"),
    ({"cell": 10, "shape": (0, 3)}, "shape"),
])
def test_model_grid_options_refuse_naming_the_parameter(kwargs, param):
    with pytest.raises(ParameterError) as info:
        modelbuild.ModelGridOptions(**kwargs)
    assert info.value.param == param
    assert "--" not in str(info.value)  # a library message, not a command-line one
    first = param if isinstance(param, str) else param[0]
    assert f"{first}=" in str(info.value)


def test_grid_frame_snaps_and_limits():
    """Definition: without an origin the corner is the largest whole multiple of the cell at or below the extent's
    lower-left corner, and enough whole cells cover the extent."""
    f = modelbuild.grid_frame(modelbuild.ModelGridOptions(cell=250.0), (1010.0, -740.0, 2001.0, 260.0), nlay=3)
    assert (f.x0, f.y0, f.nrow, f.ncol) == (1000.0, -750.0, 5, 5)
    x, y = f.centres()
    assert x[0, 0] == 1125.0 and y[-1, 0] == -625.0  # row 0 is the far (north) side
    with pytest.raises(ParameterError, match="more than the maximum of 50") as info:
        modelbuild.grid_frame(modelbuild.ModelGridOptions(cell=250.0, max_cells=50), (0, 0, 1000, 1000), nlay=4)
    assert info.value.param == "cell"
    given = modelbuild.grid_frame(modelbuild.ModelGridOptions(cell=5, origin=(1, 2), shape=(3, 4), rotation=30),
                                  (0, 0, 1, 1), nlay=1)
    assert (given.x0, given.y0, given.nrow, given.ncol, given.rotation) == (1.0, 2.0, 3, 4, 30.0)


# -- the model-grid builder on an invented three-unit site with planar contacts ------------------------------------
L_SIDE = 1000.0
UNITS = pd.DataFrame({"code": ["TOPAQ", "MIDAT", "LOWAQ"], "name": ["top", "mid", "low"], "rank": [1, 2, 3],
                      "role": ["aquifer", "aquitard", "aquifer"], "parent": [None, None, None]})
WELLS = pd.DataFrame({"well_id": ["A", "B", "C", "D", "E"], "x": [0.0, L_SIDE, 0.0, L_SIDE, 400.0],
                      "y": [0.0, 0.0, L_SIDE, L_SIDE, 700.0], "total_depth": [50.0] * 5})
WELLS["ground_elev"] = 300.0 + 0.01 * WELLS["x"] - 0.02 * WELLS["y"]
DEPTHS = {"TOPAQ": (0.0, 10.0), "MIDAT": (10.0, 20.0), "LOWAQ": (20.0, 40.0)}
PICKS = pd.DataFrame([{"well_id": w, "unit": u, "top_depth": a, "bottom_depth": b}
                      for w in WELLS["well_id"] for u, (a, b) in DEPTHS.items()])


def _ground(x, y):
    return 300.0 + 0.01 * x - 0.02 * y


def _head(x, y, level):
    return level - 0.002 * x + 0.001 * y


def _head_surface(level):
    grid = GridSpec(-100.0, L_SIDE + 100.0, 20.0, 60, 60)
    xx, yy = np.meshgrid(grid.x_centers(), grid.y_centers())
    return grid, _head(xx, yy, level)


def _tests(k_md: dict, kv_md: dict | None = None) -> pd.DataFrame:
    rows = [{"unit": u, "k_ms": k / 86400.0, "orientation": "horizontal"} for u, ks in k_md.items() for k in ks]
    rows += [{"unit": u, "k_ms": k / 86400.0, "orientation": "vertical"} for u, ks in (kv_md or {}).items()
             for k in ks]
    return pd.DataFrame(rows)


def _build(options, tests, heads, **kw):
    return modelbuild.build_model_layers(options, units=UNITS, picks=PICKS, wells=WELLS, tests=tests,
                                         head_surfaces=heads, length_unit="m", **kw)


def test_builder_planar_contacts_k_and_heads():
    """Analytic: contacts that are planes are reproduced exactly (least-squares plane, zero residuals); K_h is the
    geometric mean of the horizontal tests (scipy.stats.gmean); K_v = K_h / kv_ratio without vertical tests; the
    aquitard's K_h = K_v x kv_ratio from its vertical tests only; a planar head surface is sampled exactly
    (bilinear interpolation reproduces a plane); the aquitard between the two aquifers takes heads linear in
    elevation between theirs (steady leakage through a uniform layer, Darcy), so at its mid elevation the mean."""
    tests = _tests({"TOPAQ": [1.0, 10.0, 100.0], "LOWAQ": [4.0]}, {"MIDAT": [1e-4, 1e-6]})
    heads = {"TOPAQ": _head_surface(250.0), "LOWAQ": _head_surface(240.0)}
    opts = modelbuild.ModelGridOptions(cell=100.0, kv_ratio=5.0, min_thickness=0.5)
    built = _build(opts, tests, heads, heads_from="invented planes")
    m = built.model
    assert m.units == ["TOPAQ", "MIDAT", "LOWAQ"] and (m.nrow, m.ncol) == (10, 10)
    g = _ground(built.x, built.y)
    assert np.allclose(m.top, g, atol=1e-8)
    for k, (_, bottom) in enumerate(DEPTHS.values()):
        assert np.allclose(m.botm[k], g - bottom, atol=1e-8)
    assert (m.idomain == 1).all() and np.allclose(built.thickness, [[[10.0]], [[10.0]], [[20.0]]])
    assert np.allclose(m.k[0], gmean([1.0, 10.0, 100.0]), rtol=1e-12)
    assert np.allclose(m.k33[0], gmean([1.0, 10.0, 100.0]) / 5.0, rtol=1e-12)
    assert np.allclose(m.k33[1], gmean([1e-4, 1e-6]), rtol=1e-12)
    assert np.allclose(m.k[1], gmean([1e-4, 1e-6]) * 5.0, rtol=1e-12)
    assert np.allclose(m.strt[0], _head(built.x, built.y, 250.0), atol=1e-9)
    assert np.allclose(m.strt[2], _head(built.x, built.y, 240.0), atol=1e-9)
    # the aquitard's mid elevation lies halfway between TOPAQ's bottom and LOWAQ's top: the mean of the two heads
    assert np.allclose(m.strt[1], 0.5 * (m.strt[0] + m.strt[2]), atol=1e-9)
    # common practice (layering.cell_types): the aquitard is confined; LOWAQ's heads (about 240) lie below its top
    # (about 280), so it may desaturate at its top: convertible
    assert m.icelltype.tolist() == [1, 0, 1]
    assert any(n.startswith("MIDAT has no head surface of its own (none in invented planes)") for n in m.notes)
    assert built.k_info["MIDAT"]["n_vertical_tests"] == 2 and built.has_heads == [True, False, True]
    assert built.grid_info["base_rule"] == "picked at 5 well(s)"


def test_builder_merged_layer_effective_k():
    """VERIFY.md (Statistics, layered check): two layers of equal thickness with K = 1 and 100 give
    K_h = 50.5 (thickness-weighted arithmetic mean) and K_v = 1.980 (harmonic mean)."""
    tests = _tests({"TOPAQ": [1.0], "MIDAT": [100.0], "LOWAQ": [7.0]})
    heads = {"TOPAQ": _head_surface(250.0)}
    opts = modelbuild.ModelGridOptions(cell=100.0, kv_ratio=1.0, layers=("TOPAQ", "LOWAQ"))
    built = _build(opts, tests, heads)
    m = built.model
    assert m.units == ["TOPAQ", "LOWAQ"] and m.merged == {"TOPAQ": ["MIDAT"]}
    assert np.allclose(m.k[0], 50.5, rtol=1e-12) and np.allclose(m.k33[0], 1.980, atol=5e-4)
    assert np.allclose(m.botm[0], _ground(built.x, built.y) - 20.0, atol=1e-8)  # TOPAQ + MIDAT
    down = _build(modelbuild.ModelGridOptions(cell=100.0, kv_ratio=1.0, layers=("TOPAQ", "LOWAQ"),
                                              merge_down=True), tests, heads)
    assert down.model.merged == {"LOWAQ": ["MIDAT"]}
    assert np.allclose(down.model.k[1], (10 * 100.0 + 20 * 7.0) / 30, rtol=1e-12)


def test_builder_domain_base_and_refusals():
    """Definition: cells whose centre lies outside the domain polygon are inactive (idomain 0); base= sets the
    bottom of the lowest layer as an elevation."""
    tests = _tests({"TOPAQ": [1.0], "MIDAT": [0.01], "LOWAQ": [5.0]})
    heads = {"LOWAQ": _head_surface(240.0)}
    domain = shapely.box(0.0, 0.0, 500.0, L_SIDE)
    built = _build(modelbuild.ModelGridOptions(cell=100.0, base=200.0), tests, heads, domain=domain)
    m = built.model
    assert (m.ncol, m.nrow) == (5, 10)
    assert (m.idomain == 1).all()  # every cell centre of a grid placed on the domain lies inside it
    half = _build(modelbuild.ModelGridOptions(cell=100.0, base=200.0), tests, heads,
                  domain=shapely.box(0.0, 0.0, 500.0, 500.0))
    assert half.model.nrow == 5 and (half.model.idomain == 1).all()
    wide = _build(modelbuild.ModelGridOptions(cell=100.0, origin=(0.0, 0.0), shape=(10, 10), base=200.0), tests,
                  heads, domain=domain)
    assert (wide.model.idomain[:, :, 5:] == 0).all() and (wide.model.idomain[:, :, :5] == 1).all()
    assert np.allclose(m.botm[2], 200.0) and built.grid_info["base"] == 200.0
    with pytest.raises(ParameterError) as info:
        _build(modelbuild.ModelGridOptions(cell=100.0), tests, {})
    assert info.value.param == "head_surfaces"
    with pytest.raises(InsufficientDataError, match="unit MIDAT has no K tests") as info:
        _build(modelbuild.ModelGridOptions(cell=100.0), _tests({"TOPAQ": [1.0], "LOWAQ": [5.0]}), heads)
    assert info.value.param == "layers" and "layers=" in str(info.value)
    with pytest.raises(ParameterError, match="not in stratigraphic order") as info:
        modelbuild.plan_layers(UNITS, PICKS, layers=["LOWAQ", "TOPAQ"])
    assert info.value.param == "layers"


def test_sample_grid_reproduces_a_plane():
    """Analytic: bilinear interpolation is exact for a plane; outside the raster it gives NaN."""
    grid, h = _head_surface(100.0)
    pts = np.array([[13.7, 402.1], [999.0, 1.0], [5000.0, 5.0]])
    got = modelbuild.sample_grid(grid, h, pts)
    assert got[:2] == pytest.approx(_head(pts[:2, 0], pts[:2, 1], 100.0), abs=1e-9) and np.isnan(got[2])


# -- seeds ------------------------------------------------------------------------------------------------------------
def test_seed_points_count_and_spacing_on_a_square():
    """Definition of the lattice: a 100 x 100 square at spacing s holds (100 / s)^2 seeds, half a spacing in from
    the edges, s apart."""
    square = shapely.box(0.0, 0.0, 100.0, 100.0)
    for s in (10.0, 20.0, 25.0):
        pts = flow.seed_points(square, s)
        assert len(pts) == round((100.0 / s) ** 2)
        xs, ys = np.unique(pts[:, 0]), np.unique(pts[:, 1])
        assert np.allclose(np.diff(xs), s) and np.allclose(np.diff(ys), s)
        assert xs[0] == s / 2 and ys[0] == s / 2
        assert shapely.contains_xy(square, pts[:, 0], pts[:, 1]).all()
    triangle = shapely.Polygon([(0, 0), (100, 0), (0, 100)])
    pts = flow.seed_points(triangle, 10.0)
    assert len(pts) == 45  # cells of the 10 x 10 lattice strictly below the diagonal x + y < 100: 45 of them
    tiny = shapely.box(0.0, 0.0, 1.0, 1.0)
    one = flow.seed_points(tiny, 10.0)
    assert one.shape == (1, 2) and tiny.contains(shapely.Point(one[0]))
    with pytest.raises(ParameterError) as info:
        flow.seed_points(square, 0.0)
    assert info.value.param == "spacing"


def test_ring_seeds():
    """Definition: per_centre seeds evenly on a circle of factor x radius around each centre."""
    seeds, owner = flow.ring_seeds([[0.0, 0.0], [100.0, 50.0]], [10.0, 20.0], per_centre=8)
    assert seeds.shape == (16, 2) and owner.tolist() == [0] * 8 + [1] * 8
    d = np.hypot(seeds[:, 0] - np.repeat([0.0, 100.0], 8), seeds[:, 1] - np.repeat([0.0, 50.0], 8))
    assert np.allclose(d, np.repeat([10.1, 20.2], 8))
    assert seeds[0] == pytest.approx([10.1, 0.0])


# -- contributing area of one well in uniform flow against Javandel and Tsang (1986) -------------------------------
K_MD, GRAD, B_M, Q_M3D, N_E = 10.0, 0.001, 10.0, 100.0, 0.25
CELL = 20.0


def _well_in_uniform_flow():
    """Head of a well pumping Q in a confined aquifer with uniform regional flow in +x (superposition of the
    uniform field and the Thiem log term): h = h0 - i x + Q / (2 pi T) ln(r / R)."""
    x0, y0, ncols, nrows = -2500.0, 1000.0, 175, 100
    xc = x0 + (np.arange(ncols) + 0.5) * CELL
    yc = y0 - (np.arange(nrows) + 0.5) * CELL
    xx, yy = np.meshgrid(xc, yc)
    h = 100.0 - GRAD * xx + Q_M3D / (2 * np.pi * K_MD * B_M) * np.log(np.hypot(xx, yy) / 1000.0)
    return flow.VelocityGrid.from_head(x0, y0, CELL, h, K_MD, N_E), np.isfinite(h)


def _capture_half_width(x):
    """Javandel and Tsang (1986): the capture zone's edge is the streamline q B y - Q theta / (2 pi) = 0, so
    y = Q theta / (2 pi B q) with theta = atan2(y, x): Q / (4 B q) at the well's line and Q / (2 B q) far upstream."""
    q = K_MD * GRAD
    return brentq(lambda y: y - Q_M3D * math.atan2(y, x) / (2 * np.pi * B_M * q), 1e-9, Q_M3D / (2 * q * B_M))


@pytest.mark.slow
def test_contributing_area_of_a_well_in_uniform_flow():
    """source: Javandel and Tsang (1986), as worked in Kuo, Example 6.6 (VERIFY.md, Flow): capture-zone width Q / (B q)
    far upstream, Q / (2 B q) at the well's line, stagnation point Q / (2 pi B q) downgradient. The polygon's width
    across the flow at several distances upstream matches the analytic edge within one lattice spacing (the polygon
    is made of lattice cells: 2 x 20 m here, as the field of 17,500 cells is thinned to about 5,000 particles)."""
    velocity, valid = _well_in_uniform_flow()
    q = K_MD * GRAD
    recharge_in = shapely.box(-2000.0, -100.0, -1800.0, 100.0)   # on the well's streamline: all of it is captured
    recharge_out = shapely.box(-2000.0, 700.0, -1800.0, 900.0)   # beyond Q / (2 B q) = 500 m: none of it
    polys, table = flow.contributing_areas(velocity, valid, [[0.0, 0.0]], 2 * CELL, t_max=1e8, targets=["PW"],
                                           areas=[("in", recharge_in), ("out", recharge_out)], max_particles=5000)
    lattice = 2 * CELL
    assert polys["sink_id"].tolist() == ["PW"] and polys["cells"].iloc[0] > 0
    geom = polys.geometry.iloc[0]
    for x in (-2000.0, -1500.0, -1000.0, -500.0, 0.0):
        across = geom.intersection(shapely.LineString([(x, -1000.0), (x, 1000.0)])).length
        assert across == pytest.approx(2 * _capture_half_width(x), abs=lattice), x
    assert 2 * _capture_half_width(0.0) == pytest.approx(Q_M3D / (2 * B_M * q))
    assert geom.bounds[3] - geom.bounds[1] <= Q_M3D / (B_M * q) + lattice  # never wider than far upstream
    assert geom.bounds[2] == pytest.approx(Q_M3D / (2 * np.pi * B_M * q), abs=lattice)  # stagnation point
    share = dict(zip(table["area_id"], table["share"]))
    assert share == {"in": 1.0, "out": 0.0}
    assert table.loc[table["area_id"] == "in", "median_days"].iloc[0] > 0


def test_contributing_areas_refuse_a_mask_of_another_shape():
    velocity, valid = _well_in_uniform_flow()
    with pytest.raises(ParameterError) as info:
        flow.contributing_areas(velocity, valid[:, :10], [[0.0, 0.0]], 40.0, t_max=10.0)
    assert info.value.param == "valid"


# -- travel summary ---------------------------------------------------------------------------------------------------
def test_travel_summary_by_hand():
    """Definition: per origin and destination, the particle count, the share of the origin's particles and
    numpy's median and 10th/90th percentiles of the travel times (linear interpolation between order statistics)."""
    t = flow.travel_summary(["R1"] * 4 + ["R2"], ["spring S", "spring S", "edge", "spring S", "edge"],
                            [10.0, 30.0, 5.0, 20.0, 7.0])
    assert t[["origin", "destination", "particles"]].values.tolist() == [
        ["R1", "edge", 1], ["R1", "spring S", 3], ["R2", "edge", 1]]
    row = t.iloc[1]
    assert row["share"] == 0.75 and row["median_days"] == 20.0
    assert row["p10_days"] == pytest.approx(12.0) and row["p90_days"] == pytest.approx(28.0)
    assert row["median_years"] == pytest.approx(20.0 / 365.25)
    assert flow.travel_summary([], [], []).empty


# -- pumping scenarios ------------------------------------------------------------------------------------------------
def _theis(r, t, Q, T, S):
    """Theis (1935): s = Q / (4 pi T) W(u), u = r^2 S / (4 T t), W = E1 (scipy.special.exp1)."""
    return Q / (4 * np.pi * T) * exp1(r * r * S / (4 * T * t))


def test_scenario_drawdown_superposes_theis():
    """Analytic: drawdown of several wells is the sum of each well's Theis drawdown (linear superposition), each
    with the transmissivity at that well; a well with a zero rate adds nothing (its T is not even looked at); the
    history terms (a record that started 30 d and stopped 10 d before) give Q W(u(30)) - Q W(u(10)) apart."""
    wells = np.array([[0.0, 0.0], [300.0, 0.0], [0.0, 400.0]])
    rates = np.array([500.0, -200.0, 0.0])
    T = np.array([250.0, 400.0, np.nan])
    S = 2e-4
    pts = np.array([[100.0, 50.0], [-250.0, 120.0]])
    idx, hq, ht = pumping.history_terms([300.0], [30.0], [10.0])
    history = (np.array([[50.0, -60.0]])[idx], hq, ht, np.array([250.0])[idx])
    s, past = pumping.scenario_drawdown(wells, rates, 5.0, T=T, S=S, r_min=0.1, history=history, points=pts)
    for p, got, got_past in zip(pts, s, past):
        want = sum(_theis(np.hypot(*(p - w)), 5.0, q, tt, S) for w, q, tt in zip(wells[:2], rates[:2], T[:2]))
        r_h = np.hypot(*(p - [50.0, -60.0]))
        assert got == pytest.approx(want, rel=1e-7)
        assert got_past == pytest.approx(_theis(r_h, 30.0, 300.0, 250.0, S) - _theis(r_h, 10.0, 300.0, 250.0, S),
                                         rel=1e-7)
    xc, yc = np.array([100.0, -250.0]), np.array([120.0, 50.0])
    sg, pg = pumping.scenario_drawdown(wells, rates, 5.0, T=T, S=S, r_min=0.1, history=history, grid=(xc, yc))
    assert sg.shape == (2, 2) and sg[1, 0] == pytest.approx(s[0], rel=1e-12) and pg[0, 1] == pytest.approx(past[1])
    none, nothing = pumping.scenario_drawdown(wells, np.zeros(3), 5.0, T=T, S=S, points=pts)
    assert (none == 0).all() and (nothing == 0).all()
    with pytest.raises(ParameterError):
        pumping.scenario_drawdown(wells, rates, 5.0, T=T, S=S)


def test_level_crossings_definition():
    """Definition: below the top where the head after is below the unit's top; 'taken' where it was at or above the
    top before; below the bottom where the head after is below the unit's bottom; unknown levels never cross."""
    c = pumping.level_crossings([50.0, 40.0, 50.0, 50.0], [45.0, 35.0, 20.0, 45.0],
                                [48.0, 48.0, 48.0, np.nan], [30.0, 30.0, 30.0, np.nan])
    assert c["below_top"].tolist() == [True, True, True, False]
    assert c["taken_below_top"].tolist() == [True, False, True, False]
    assert c["below_bottom"].tolist() == [False, False, True, False]


# -- method rules and the comparison of methods ----------------------------------------------------------------------
def test_cross_validate_methods_by_hand():
    """Shepard (1968) inverse-distance weighting, power 2, worked by hand on z = x at x = 0, 1, 3 (y = 0):
    leaving out x = 0 gives (1 * 1 + 3 / 9) / (1 + 1 / 9) = 1.2; x = 1 gives (0 + 3 / 4) / (1 + 1 / 4) = 0.6;
    x = 3 gives (0 / 9 + 1 / 4) / (1 / 9 + 1 / 4) = 0.6923; errors 1.2, -0.4, -2.3077."""
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [3.0, 0.0]])
    z = xy[:, 0].copy()

    def cannot():
        raise InsufficientDataError("too few points for this method")

    cv = methods.cross_validate_methods(xy, z, {"idw": IDW(2.0), "other": cannot})
    err = np.array([1.2, -0.4, 0.25 / (1 / 9 + 0.25) - 3.0])
    assert cv["idw"]["mean_error"] == pytest.approx(err.mean(), rel=1e-9)
    assert cv["idw"]["rmse"] == pytest.approx(np.sqrt(np.mean(err**2)), rel=1e-9)
    assert cv["other"] == {"error": "too few points for this method"} and list(cv) == ["idw", "other"]
    assert methods.resolve_neighbors("auto", 10) is None and methods.resolve_neighbors(None, 10**6) is None
    with pytest.raises(InsufficientDataError, match="kriging needs at least 3 wells; found 2"):
        methods.require_points("kriging", 2, what="wells")
