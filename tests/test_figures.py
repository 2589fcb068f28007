"""Figure writers: both files written, readable, labelled, drawing the right numbers, no figures left open.

All data here are invented for the tests. The numeric checks compare what is
drawn with values worked out by hand (the spherical model at half its range,
RMSE and mean error of four pairs), not only with the library's own functions.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("matplotlib")

import matplotlib.image as mpimg  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402

from hydroatlas.errors import ParameterError  # noqa: E402
from hydroatlas.export import figures  # noqa: E402

from conftest import cli  # noqa: E402
from hydroatlas.interp.variogram import gamma_values  # noqa: E402


# ---------------------------------------------------------------- invented data

def _zones():
    # deliberately not in elevation order; the function must sort top down
    return pd.DataFrame({"zone_id": ["Z2", "Z1", "Z3"], "unit": ["MDA", "UPA", "LWA"],
                         "head": [266.8, 288.2, 264.1], "top_elev": [240.0, 285.0, 175.0],
                         "bottom_elev": [225.0, 275.0, 160.0], "mid_elev": [232.5, 280.0, 167.5]})


def _units():
    return pd.DataFrame({"unit": ["UPA", "SHL", "MDA", "CLA", "LWA"],
                         "role": ["aquifer", "aquitard", "aquifer", "confining", "aquifer"],
                         "top_elev": [300.0, 270.0, 250.0, 210.0, 190.0],
                         "bottom_elev": [270.0, 250.0, 210.0, 190.0, 150.0]})


def _pairs():
    return pd.DataFrame({"upper_zone": ["Z1", "Z2"], "lower_zone": ["Z2", "Z3"], "dhead": [21.4, 2.7],
                         "aquitards": ["SHL", None], "leakage_flux": [3.1e-4, np.nan],
                         "leakage_unit": ["m/d", "m/d"]})


def _logk():
    rng = np.random.default_rng(7)
    values = pd.DataFrame({"unit": ["SND"] * 8 + ["CLY"] * 5,
                           "log10k": np.r_[rng.normal(1.0, 0.3, 8), rng.normal(-3.0, 0.5, 5)]})
    stats = [{"unit": "CLY", "k_geomean": 10**-3.0, "k_geomean_ci95": [10**-3.6, 10**-2.4], "n_tests": 5},
             {"unit": "SND", "k_geomean": 10**1.0, "k_geomean_ci95": None, "n_tests": 8}]
    return values, stats


EXPERIMENTAL = {"lags": [100.0, 300.0, 500.0, 700.0, 900.0, 1200.0], "gamma": [2.0, 4.6, 7.0, 8.8, 9.7, 10.2],
                "counts": [10, 35, 60, 70, 55, 20]}
SPHERICAL = {"model": "spherical", "nugget": 1.0, "sill": 10.0, "range": 1000.0}


# ---------------------------------------------------------------- helpers

@pytest.fixture
def captured(monkeypatch):
    """The figures handed to the writer, kept for inspection after the function closed them."""
    seen = []
    real = figures._write

    def spy(fig, stem):
        seen.append(fig)
        return real(fig, stem)

    monkeypatch.setattr(figures, "_write", spy)
    return seen


def _svg_text(path) -> str:
    root = ET.parse(path).getroot()  # raises if the SVG is not well-formed XML
    assert root.tag.endswith("svg")
    return "\n".join(t for el in root.iter() if el.tag.endswith("text") for t in el.itertext())


def _check_files(paths, stem, figsize):
    """Both files, non-empty, PNG at 150 dpi and not blank, SVG well-formed; no figure left open."""
    assert paths == [stem.with_name(stem.name + ".png"), stem.with_name(stem.name + ".svg")]
    for p in paths:
        assert p.is_file() and p.stat().st_size > 0
    img = mpimg.imread(paths[0])
    assert img.shape[:2] == (round(figsize[1] * 150), round(figsize[0] * 150))
    assert img.shape[2] in (3, 4)
    colours = np.unique((img[..., :3] * 255).round().astype(np.uint8).reshape(-1, 3), axis=0)
    assert len(colours) > 20, "PNG looks blank"
    assert plt.get_fignums() == []
    text = _svg_text(paths[1])
    assert figures.FOOTER in text
    return text


# ---------------------------------------------------------------- head_profile

def test_head_profile_files_labels_and_geometry(tmp_path, captured):
    stem = tmp_path / "profile" / "MW-1"  # the folder does not exist yet
    paths = figures.head_profile(stem, "MW-1", _zones(), _units(), _pairs())
    text = _check_files(paths, stem, (7.0, 6.0))
    for label in ("UPA", "SHL", "MDA", "CLA", "LWA", "Z1", "Z2", "Z3", "Hydraulic head (m)", "Elevation (m)",
                  "MW-1", "aquitard", "confining unit"):
        assert label in text, label
    assert "Δh = 21.4 m across SHL" in text
    assert "leakage ≈ 0.00031 m/d downward" in text
    assert text.count("Δh") == 1  # the pair without an aquitard is not annotated
    ax = captured[0].axes[0]
    line = next(ln for ln in ax.get_lines() if len(ln.get_xdata()) == 3)
    # successive zones are connected top down: Z1, Z2, Z3
    assert np.allclose(line.get_ydata(), [280.0, 232.5, 167.5])
    assert np.allclose(line.get_xdata(), [288.2, 266.8, 264.1])
    # the vertical bar of each zone spans its screened interval
    bars = [c for c in ax.containers if hasattr(c, "lines")][0].lines[2][0].get_segments()
    spans = sorted((float(s[:, 1].min()), float(s[:, 1].max())) for s in bars)
    assert spans == [(160.0, 175.0), (225.0, 240.0), (275.0, 285.0)]
    # every unit interval is drawn as a band, the tight ones hatched
    bands = [p for p in ax.patches if p.get_hatch() is not None]
    assert sorted(p.get_hatch() for p in bands) == ["///", "xx"]


def test_head_profile_selects_the_well_and_accepts_no_pairs(tmp_path):
    zones = pd.concat([_zones().assign(well_id="A"),
                       _zones().assign(well_id="B", zone_id=["Q2", "Q1", "Q3"])], ignore_index=True)
    units = pd.concat([_units().assign(well_id="A"),
                       pd.DataFrame({"well_id": ["B"], "unit": ["ZZZ"], "role": ["aquifer"],
                                     "top_elev": [300.0], "bottom_elev": [100.0]})], ignore_index=True)
    paths = figures.head_profile(tmp_path / "a", "A", zones, units, None, length_unit="ft")
    text = _svg_text(paths[1])
    assert "Z1" in text and "Q1" not in text and "ZZZ" not in text
    assert "Hydraulic head (ft)" in text and "Δh" not in text
    assert plt.get_fignums() == []


@pytest.mark.parametrize("zones, pairs, message", [
    (_zones().iloc[0:0], None, "no zone with a head"),
    (_zones().assign(head=np.nan), None, "no zone with a head"),
    (_zones().drop(columns="mid_elev"), None, "lacks column"),
    (_zones(), _pairs().assign(lower_zone=["Z9", "Z3"]), "Z9"),
])
def test_head_profile_refuses_bad_input(tmp_path, zones, pairs, message):
    with pytest.raises(ParameterError, match=message):
        figures.head_profile(tmp_path / "bad", "MW-1", zones, _units(), pairs)
    assert list(tmp_path.iterdir()) == []
    assert plt.get_fignums() == []


# ---------------------------------------------------------------- logk_distribution

def test_logk_distribution_files_order_and_means(tmp_path, captured):
    values, stats = _logk()
    values = pd.concat([values, pd.DataFrame({"unit": ["GRV"], "log10k": [2.0]})], ignore_index=True)
    stem = tmp_path / "logk"
    paths = figures.logk_distribution(stem, values, stats)
    text = _check_files(paths, stem, (max(5.0, 1.1 * 3 + 2.5), 5.0))
    assert "log10 K (K in m/d)" in text and "geometric mean" in text
    ax = captured[0].axes[0]
    # order: stats first (CLY, SND), then units only in values (GRV)
    assert [t.get_text() for t in ax.get_xticklabels()] == ["CLY\nn = 5", "SND\nn = 8", "GRV\nn = 1"]
    means = [ln for ln in ax.get_lines() if ln.get_marker() == "D"]
    assert sorted(float(m.get_ydata()[0]) for m in means) == pytest.approx([-3.0, 1.0])
    ci = [ln for ln in ax.get_lines() if ln.get_label() == "95 % CI of the geometric mean"]
    assert len(ci) == 1 and np.allclose(ci[0].get_ydata(), [-3.6, -2.4])
    # every test is drawn once, at its log10 K
    drawn = np.sort(np.concatenate([c.get_offsets()[:, 1] for c in ax.collections if len(c.get_offsets())]))
    assert np.allclose(drawn, np.sort(values["log10k"]))


def test_logk_distribution_is_reproducible_and_uses_k_unit(tmp_path):
    values, stats = _logk()
    a = figures.logk_distribution(tmp_path / "a", values, stats, k_unit="m/s")
    b = figures.logk_distribution(tmp_path / "b", values, stats, k_unit="m/s")
    assert a[1].read_bytes() == b[1].read_bytes()  # fixed jitter seed, no timestamp
    assert "log10 K (K in m/s)" in _svg_text(a[1])


def test_logk_distribution_refuses_bad_input(tmp_path):
    with pytest.raises(ParameterError, match="no units to draw"):
        figures.logk_distribution(tmp_path / "x", pd.DataFrame({"unit": [], "log10k": []}), [])
    with pytest.raises(ParameterError, match="lacks column"):
        figures.logk_distribution(tmp_path / "x", pd.DataFrame({"unit": ["A"]}), [])
    with pytest.raises(ParameterError, match="non-positive"):
        figures.logk_distribution(tmp_path / "x", *_logk()[:1], [{"unit": "SND", "k_geomean": 0.0,
                                                                  "k_geomean_ci95": None, "n_tests": 1}])
    assert list(tmp_path.iterdir()) == [] and plt.get_fignums() == []


# ---------------------------------------------------------------- variogram_fit

def test_variogram_fit_curve_follows_the_model(tmp_path, captured):
    stem = tmp_path / "vg"
    paths = figures.variogram_fit(stem, EXPERIMENTAL, SPHERICAL, title="Test variogram")
    text = _check_files(paths, stem, (6.5, 4.5))
    for label in ("nugget = 1", "sill = 10", "practical range = 1000", "spherical model", "Test variogram",
                  "Lag distance (CRS units)"):
        assert label in text, label
    assert 'id="variogram-model"' in paths[1].read_text(encoding="utf-8")
    ax = captured[0].axes[0]
    curve = next(ln for ln in ax.get_lines() if ln.get_gid() == "variogram-model")
    h, g = np.asarray(curve.get_xdata(), float), np.asarray(curve.get_ydata(), float)
    assert h[0] == 0.0 and g[0] == 0.0 and h[-1] == pytest.approx(1200.0)
    assert np.allclose(g, gamma_values(h, "spherical", 1.0, 10.0, 1000.0))
    # by hand: spherical at h = a/2 is nugget + psill * (0.75 - 0.0625) = 1 + 9 * 0.6875
    # (source: the definition of the spherical model, SPEC section 6 / interp.variogram docstring)
    assert np.interp(500.0, h, g) == pytest.approx(7.1875, abs=0.02)
    assert g[1] == pytest.approx(1.0, abs=1e-3)  # the nugget jump just after 0
    assert np.all(g[h >= 1000.0] == pytest.approx(10.0))
    # marker area grows with the pair count
    sizes = ax.collections[0].get_sizes()
    assert np.argmax(sizes) == int(np.argmax(EXPERIMENTAL["counts"]))
    assert np.argmin(sizes) == int(np.argmin(EXPERIMENTAL["counts"]))


def test_variogram_fit_axes_name_distance_and_value_units(tmp_path, captured):
    """Lags in the CRS's unit, semivariance in the square of the values' unit (issue 10: no "map units")."""
    paths = figures.variogram_fit(tmp_path / "vg", EXPERIMENTAL, SPHERICAL, title="AQ head", distance_unit="ftUS",
                                  value_unit="ft")
    ax = captured[0].axes[0]
    assert ax.get_xlabel() == "Lag distance (ftUS)"
    assert ax.get_ylabel() == "Semivariance γ(h) (ft²)"
    text = _svg_text(paths[1])
    for label in ("practical range = 1000 ftUS", "sill = 10 ft²", "nugget = 1 ft²"):
        assert label in text, label
    figures.variogram_fit(tmp_path / "vk", EXPERIMENTAL, SPHERICAL, distance_unit="m", value_unit="log10(ft/d)")
    ax = captured[1].axes[0]
    assert ax.get_xlabel() == "Lag distance (m)"
    assert ax.get_ylabel() == "Semivariance γ(h) ((log10 K)², K in ft/d)"
    assert "map units" not in ax.get_xlabel() + ax.get_ylabel()


def test_variogram_fit_range_beyond_lags_and_other_models(tmp_path, captured):
    params = {"model": "exponential", "nugget": 0.0, "sill": 5.0, "range": 5000.0}
    paths = figures.variogram_fit(tmp_path / "vg", EXPERIMENTAL, params)
    text = _svg_text(paths[1])
    assert "beyond the largest lag" in text and "Variogram" in text
    curve = next(ln for ln in captured[0].axes[0].get_lines() if ln.get_gid() == "variogram-model")
    # by hand: exponential at h = 1200, a = 5000 is 5 (1 - exp(-3 * 0.24))
    # (source: the definition of the exponential model with practical range, SPEC section 6)
    assert curve.get_ydata()[-1] == pytest.approx(5.0 * (1.0 - math.exp(-0.72)))


@pytest.mark.parametrize("experimental, params, message", [
    ({**EXPERIMENTAL, "counts": [1, 2]}, SPHERICAL, "equal length"),
    ({"lags": [], "gamma": [], "counts": []}, SPHERICAL, "non-empty"),
    ({"lags": [1.0], "gamma": [1.0]}, SPHERICAL, "counts"),
    (EXPERIMENTAL, {**SPHERICAL, "model": "cubic"}, "unknown model 'cubic'"),
    (EXPERIMENTAL, {**SPHERICAL, "range": 0.0}, "range must be > 0"),
])
def test_variogram_fit_refuses_bad_input(tmp_path, experimental, params, message):
    with pytest.raises(ParameterError, match=message):
        figures.variogram_fit(tmp_path / "vg", experimental, params)
    assert list(tmp_path.iterdir()) == [] and plt.get_fignums() == []


# ---------------------------------------------------------------- cross_validation

def test_cross_validation_scores_and_error_bars(tmp_path, captured):
    obs, est, std = [1.0, 2.0, 3.0, 4.0], [1.5, 2.0, 2.5, 5.0], [0.2, 0.4, 0.1, 0.5]
    stem = tmp_path / "cv"
    paths = figures.cross_validation(stem, obs, est, std=std, label="head", unit="m")
    text = _check_files(paths, stem, (5.5, 5.5))
    # by hand: errors 0.5, 0, -0.5, 1 -> RMSE sqrt(1.5 / 4) = 0.612, mean error 0.25
    # (source: the definitions of RMSE and mean error, est - obs)
    assert "RMSE = 0.612 m" in text
    assert "mean error (est − obs) = 0.25 m" in text
    assert "n = 4" in text and "Observed head (m)" in text and "Estimated head (m)" in text
    ax = captured[0].axes[0]
    one_to_one = next(ln for ln in ax.get_lines() if ln.get_label() == "1:1 line")
    assert np.allclose(one_to_one.get_xdata(), one_to_one.get_ydata())
    bars = ax.containers[0].lines[2][0].get_segments()
    assert np.allclose(sorted(abs(s[1, 1] - s[0, 1]) for s in bars), sorted(2 * np.array(std)))
    # the limits hold every bar
    lo, hi = ax.get_ylim()
    assert lo <= min(np.subtract(est, std)) and hi >= max(np.add(est, std))


def test_cross_validation_without_std_drops_missing_pairs(tmp_path):
    paths = figures.cross_validation(tmp_path / "cv", [1.0, 2.0, np.nan, 4.0], [1.0, 3.0, 7.0, 4.0])
    text = _svg_text(paths[1])
    # remaining errors 0, 1, 0: RMSE sqrt(1/3) = 0.577, mean error 0.333
    assert "n = 3" in text and "RMSE = 0.577" in text and "= 0.333" in text
    assert "std" not in text and plt.get_fignums() == []


@pytest.mark.parametrize("obs, est, std, message", [
    ([1.0, 2.0, 3.0], [1.0, 2.0], None, r"differ in length \(3 vs 2\)"),
    ([1.0, 2.0], [1.0, 2.0], [0.1], "std has 1 values for 2"),
    ([1.0, 2.0], [1.0, 2.0], [0.1, -0.1], "std must be >= 0"),
    ([np.nan], [1.0], None, "no pair of finite"),
])
def test_cross_validation_refuses_bad_input(tmp_path, obs, est, std, message):
    with pytest.raises(ParameterError, match=message) as info:
        figures.cross_validation(tmp_path / "cv", obs, est, std=std)
    assert isinstance(info.value, ValueError)
    assert list(tmp_path.iterdir()) == [] and plt.get_fignums() == []


def test_a_drawing_failure_still_closes_the_figure(tmp_path, monkeypatch):
    def broken(fig, stem):
        raise OSError("disk full")

    monkeypatch.setattr(figures, "_write", broken)
    with pytest.raises(OSError, match="disk full"):
        figures.cross_validation(tmp_path / "cv", [1.0, 2.0], [1.0, 2.0])
    assert plt.get_fignums() == []


def test_ids_with_dollar_signs_are_drawn_as_typed(tmp_path):
    """A "$" in a well, zone or unit code is text, not the start of a formula that matplotlib may refuse."""
    well = r"W$\frac{$1"
    zones = _zones().assign(zone_id=["Z$2", r"Z1$\sqrt{", "Z3"], well_id=well)
    paths = figures.head_profile(tmp_path / "p", well, zones, _units(), _pairs().iloc[1:])
    text = _check_files(paths, tmp_path / "p", (7.0, 6.0))
    assert f"Head profile at well {well}" in text and r"Z1$\sqrt{" in text


def test_a_failed_save_leaves_no_partial_file_and_keeps_the_old_one(tmp_path, monkeypatch):
    import errno

    from hydroatlas.errors import StoreError

    stem = tmp_path / "cv"
    figures.cross_validation(stem, [1.0, 2.0], [1.0, 2.5])
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    real = plt.Figure.savefig

    def half_then_full(fig, fname, **kw):
        with open(fname, "wb") as fh:
            fh.write(b"\x89PNG half")
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(plt.Figure, "savefig", half_then_full)
    with pytest.raises(StoreError, match=f"cannot write cv.png in the output folder {tmp_path}: the disk is full"):
        figures.cross_validation(stem, [1.0, 2.0], [3.0, 4.0])
    monkeypatch.setattr(plt.Figure, "savefig", real)
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before  # no temporary file, old files kept
    assert plt.get_fignums() == []


def test_figures_with_a_unit_of_one_test(mini_store, tmp_path, runner):
    """A unit with a single K test has no confidence interval (NaN bounds); the figures still draw."""
    res = cli(runner, "figures", mini_store, "--out", tmp_path / "figs")
    assert res.exit_code == 0, res.output
    assert (tmp_path / "figs" / "logk_by_unit.png").stat().st_size > 0
