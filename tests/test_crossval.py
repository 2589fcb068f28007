"""Leave-one-out cross-validation: the fast paths against a refit per point, and by hand.

Outside-world checks, each named beside the test:

- the closed form of Dubrule (1983, Mathematical Geology 15(6), "Cross validation of kriging in a unique
  neighborhood") for global systems, against refitting without each point (an algebraic identity);
- the neighbourhood paths (k + 1 nearest, the point dropped, one batched solve) against the plain definition
  of leave-one-out: refit the model on the other n - 1 points and predict the left-out one;
- IDW left-out estimates worked by hand from the definition of inverse-distance weighting (Shepard 1968).
"""

from __future__ import annotations

import numpy as np
import pytest

from hydroatlas.errors import InsufficientDataError
from hydroatlas.interp import IDW, OrdinaryKriging, UniversalKriging, Variogram
from hydroatlas.interp.crossval import leave_one_out, leave_one_out_refit, summary

VARIO = Variogram("spherical", nugget=0.02, sill=1.0, range=35.0)
ANISO = Variogram("exponential", nugget=0.0, sill=1.0, range=50.0, angle=30.0, ratio=0.5)


def field(n, seed):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, 100.0, (n, 2))
    z = 120.0 + 0.08 * xy[:, 0] - 0.03 * xy[:, 1] + np.sin(xy[:, 0] / 11.0) + rng.normal(0.0, 0.2, n)
    return xy, z


CASES = {
    "ok-global": lambda: OrdinaryKriging(VARIO, neighbors=None),
    "ok-neighbors8": lambda: OrdinaryKriging(VARIO, neighbors=8),
    "ok-neighbors16-radius": lambda: OrdinaryKriging(VARIO, neighbors=16, radius=14.0),
    "ok-anisotropic-neighbors10": lambda: OrdinaryKriging(ANISO, neighbors=10),
    "ok-neighbors-n-1": lambda: OrdinaryKriging(VARIO, neighbors=59),
    "uk-global": lambda: UniversalKriging(VARIO, neighbors=None),
    "uk-neighbors12": lambda: UniversalKriging(VARIO, neighbors=12),
    "idw-global": lambda: IDW(2.0, neighbors=None),
    "idw-neighbors8": lambda: IDW(2.0, neighbors=8),
    "idw-power3-radius": lambda: IDW(3.0, neighbors=10, radius=12.0),
}


@pytest.mark.parametrize("name", list(CASES))
def test_fast_leave_one_out_equals_a_refit_per_point(name):
    """The definition of leave-one-out (refit on the others, predict the point) and the fast path agree to 1e-10."""
    xy, z = field(60, 7)
    fast = leave_one_out(CASES[name](), xy, z)
    slow = leave_one_out_refit(CASES[name](), xy, z)
    assert fast["n"] == slow["n"] == 60
    np.testing.assert_allclose(fast["estimate"], slow["estimate"], rtol=0, atol=1e-10, equal_nan=True)
    if slow["std"] is None:
        assert fast["std"] is None
    else:
        np.testing.assert_allclose(fast["std"], slow["std"], rtol=0, atol=1e-10, equal_nan=True)
    # the radius cases must really exercise points with too few neighbours, the others none
    has_nan = np.isnan(slow["estimate"]).any()
    assert has_nan == (name == "ok-neighbors16-radius" or name == "idw-power3-radius")
    if not has_nan:
        assert fast["rmse"] == pytest.approx(slow["rmse"], abs=1e-10)
        assert 0.0 < fast["rmse"] < 2.0


def test_fast_path_is_not_the_global_one():
    """With a neighbourhood smaller than the data the left-out estimate differs from the global one."""
    xy, z = field(60, 11)
    local = leave_one_out(OrdinaryKriging(VARIO, neighbors=6), xy, z)["estimate"]
    whole = leave_one_out(OrdinaryKriging(VARIO, neighbors=None), xy, z)["estimate"]
    assert np.abs(local - whole).max() > 1e-3


def test_idw_left_out_estimate_by_hand():
    """Shepard (1968) weights 1/d^p over the other points: four points, every left-out value by hand."""
    xy = np.array([[0.0, 0.0], [3.0, 0.0], [0.0, 4.0], [3.0, 4.0]])
    z = np.array([1.0, 2.0, 3.0, 5.0])
    d = np.sqrt(((xy[:, None] - xy[None]) ** 2).sum(-1))
    expected = []
    for i in range(4):
        o = [j for j in range(4) if j != i]
        w = 1.0 / d[i, o] ** 2
        expected.append((w * z[o]).sum() / w.sum())
    cv = leave_one_out(IDW(2.0, neighbors=None), xy, z)
    np.testing.assert_allclose(cv["estimate"], expected, rtol=1e-14)
    # two neighbours: the nearest are at 3 and 4 (the diagonal, 5, is left out)
    cv2 = leave_one_out(IDW(2.0, neighbors=2), xy, z)
    w = np.array([1 / 9, 1 / 16])
    assert cv2["estimate"][0] == pytest.approx((w @ [z[1], z[2]]) / w.sum(), rel=1e-14)
    assert summary(cv)["mean_standardized_error"] is None


def test_kriging_scores_are_standardised_by_the_left_out_std():
    xy, z = field(80, 3)
    cv = leave_one_out(OrdinaryKriging(VARIO, neighbors=10), xy, z)
    se = cv["error"] / cv["std"]
    assert cv["mean_standardized_error"] == pytest.approx(se.mean(), rel=1e-12)
    assert cv["mean_squared_standardized_error"] == pytest.approx((se**2).mean(), rel=1e-12)
    assert set(summary(cv)) == {"n", "mean_error", "rmse", "mean_standardized_error",
                                "mean_squared_standardized_error"}


def test_a_fitted_model_keeps_its_data():
    """Cross-validation uses the parameters of the model, never its data or its fitted state."""
    xy, z = field(50, 5)
    model = OrdinaryKriging(VARIO, neighbors=8).fit(xy[:20], z[:20])
    before = model.predict(xy[30:35])
    cv = leave_one_out(model, xy, z)
    assert cv["n"] == 50
    np.testing.assert_array_equal(model.predict(xy[30:35]), before)


def test_duplicates_merged_before_leaving_out():
    xy, z = field(30, 9)
    xy2 = np.vstack([xy, xy[:1]])
    z2 = np.concatenate([z, [z[0] + 2.0]])
    with pytest.warns(UserWarning, match="duplicate"):
        cv = leave_one_out(OrdinaryKriging(VARIO, neighbors=8), xy2, z2)
    assert cv["n"] == 30


@pytest.mark.parametrize("model, n, needed", [(OrdinaryKriging(VARIO, neighbors=8), 2, 3),
                                              (UniversalKriging(VARIO, neighbors=8), 3, 4),
                                              (IDW(2.0), 2, 3)])
def test_too_few_points_for_cross_validation(model, n, needed):
    xy, z = field(n, 1)
    with pytest.raises(InsufficientDataError, match=f"cross-validation needs at least {needed} points; got {n}"):
        leave_one_out(model, xy, z)


def test_surface_cross_validates_the_chosen_method_unless_asked_to_compare(empty_store, runner, tmp_path):
    """`surface` records leave-one-out figures of --method only; --compare-methods adds the other two."""
    import json

    from conftest import cli, write_csv

    rng = np.random.default_rng(4)
    units = [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"]]
    wells = [["well_id", "x", "y", "ground_elev", "total_depth"]]
    picks = [["well_id", "unit", "top_depth", "bottom_depth"]]
    zones = [["well_id", "zone_id", "top_depth", "bottom_depth"]]
    heads = [["well_id", "zone_id", "measured_at", "head"]]
    for i, (x, y) in enumerate(rng.uniform(0.0, 3000.0, (25, 2))):
        w = f"W{i:02d}"
        wells.append([w, f"{610000 + x:.2f}", f"{4100000 + y:.2f}", 400, 100])
        picks.append([w, "AQ", 0, 100])
        zones.append([w, "S", 40, 50])
        heads.append([w, "S", "2024-03-15", f"{300.0 - 0.002 * x + 2.0 * np.sin(y / 400.0):.4f}"])
    for kind, rows in (("units", units), ("wells", wells), ("picks", picks), ("zones", zones), ("heads", heads)):
        res = cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", rows))
        assert res.exit_code == 0, res.output
    sides = {}
    for name, extra in (("one", ()), ("all", ("--compare-methods",))):
        out = tmp_path / name
        res = cli(runner, "surface", empty_store, "--unit", "AQ", "--method", "idw", "--cell", 100, "--out", out,
                  *extra)
        assert res.exit_code == 0, res.output
        sides[name] = json.loads((out / "AQ_head.json").read_text())
    assert set(sides["one"]["cross_validation"]) == {"idw"}
    assert set(sides["all"]["cross_validation"]) == {"kriging", "uk", "idw"}
    assert sides["one"]["cross_validation"]["idw"] == sides["all"]["cross_validation"]["idw"]
    assert all(sides["all"]["cross_validation"][m]["rmse"] > 0 for m in ("kriging", "uk", "idw"))
