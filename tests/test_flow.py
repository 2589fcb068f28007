"""Gradients and the three-point solution against analytic planes."""

import numpy as np
import pytest

from hydroatlas.errors import ParameterError
from hydroatlas.flow import azimuth_deg, grid_gradient, three_point


def test_three_point_verify_example():
    """computed (VERIFY.md, Flow): heads 10 at (0,0), 9 at (100,0), 9.5 at (0,100): gradient 0.011180, azimuth 63.43."""
    r = three_point([(0, 0), (100, 0), (0, 100)], [10.0, 9.0, 9.5])
    assert r["gradient"] == pytest.approx(0.011180, abs=5e-7)
    assert r["azimuth"] == pytest.approx(63.43, abs=0.005)


def test_three_point_any_plane():
    """common practice (no source): a plane h = a x + b y + c through any three points is recovered exactly."""
    rng = np.random.default_rng(5)
    for _ in range(20):
        a, b, c = rng.normal(size=3)
        xy = rng.uniform(-500, 500, (3, 2))
        r = three_point(xy, a * xy[:, 0] + b * xy[:, 1] + c)
        assert (r["dh_dx"], r["dh_dy"]) == pytest.approx((a, b), rel=1e-9, abs=1e-12)
        assert r["azimuth"] == pytest.approx(float(azimuth_deg(-a, -b)), abs=1e-7)


def test_three_point_collinear_refused():
    with pytest.raises(ParameterError, match="one line"):
        three_point([(0, 0), (1, 1), (2, 2)], [1, 2, 3])
    with pytest.raises(ParameterError, match="shape"):
        three_point([(0, 0), (1, 1)], [1, 2])


def test_azimuth_convention():
    """Azimuth clockwise from grid north: north 0, east 90, south 180, west 270."""
    assert azimuth_deg(0, 1) == 0 and azimuth_deg(1, 0) == 90
    assert azimuth_deg(0, -1) == 180 and azimuth_deg(-1, 0) == 270


def test_grid_gradient_of_plane_is_exact():
    """Analytic: a planar head field has the same gradient everywhere, also at edges and beside holes."""
    a, b, cell = -0.002, 0.001, 25.0
    x = (np.arange(40) + 0.5) * cell
    y = 1000.0 - (np.arange(30) + 0.5) * cell  # row 0 is north
    head = 300 + a * x[None, :] + b * y[:, None]
    head[10:13, 20:22] = np.nan
    mag, az = grid_gradient(head, cell)
    ok = np.isfinite(head)
    assert np.allclose(mag[ok], np.hypot(a, b), rtol=1e-9)
    assert np.allclose(az[ok], azimuth_deg(-a, -b), atol=1e-7)
    assert np.isnan(mag[11, 20]) and np.isnan(az[11, 21])


def test_grid_gradient_unit_factor():
    """Heads in feet over coordinates in metres: the factor 0.3048 makes the gradient dimensionless."""
    head = np.tile(np.arange(10.0), (5, 1))  # 1 ft per column
    mag, _ = grid_gradient(head, 2.0, vertical_per_horizontal=0.3048)
    assert np.allclose(mag, 0.3048 / 2.0)
