"""Particle tracking against analytic solutions of steady flow."""

import numpy as np
import pytest

from hydroatlas.errors import ParameterError
from hydroatlas.flow import VelocityGrid, track


def radial_grid(b=20.0, n=0.25, Q=1000.0, K=10.0, cell=1.0, half=150):
    T = K * b
    N = 2 * half + 1
    x0, y0 = -(half + 0.5) * cell, (half + 0.5) * cell
    xc = x0 + (np.arange(N) + 0.5) * cell
    yc = y0 - (np.arange(N) + 0.5) * cell
    X, Y = np.meshgrid(xc, yc)
    r = np.maximum(np.hypot(X, Y), 0.05)
    head = 100 + Q / (2 * np.pi * T) * np.log(r)  # Thiem: steady radial flow to a well
    return VelocityGrid.from_head(x0, y0, cell, head, K, n)


def test_radial_travel_time():
    """computed (VERIFY.md, Flow): t = pi b n (r^2 - rw^2) / Q; b 20 m, n 0.25, r 100 m, Q 1000 m3/d -> 157.08 d.

    The particle stops at the capture radius rc = 2 m (the well itself is below grid resolution),
    so the expected time uses rc: pi b n (r^2 - rc^2) / Q.
    """
    b, n, Q, rc = 20.0, 0.25, 1000.0, 2.0
    assert np.pi * b * n * (100**2 - 0.1**2) / Q == pytest.approx(157.08, abs=0.005)
    vg = radial_grid(b=b, n=n, Q=Q)
    ang = np.linspace(0, 2 * np.pi, 24, endpoint=False)
    seeds = 100 * np.column_stack([np.cos(ang), np.sin(ang)])
    res = track(seeds, vg, sinks=[[0.0, 0.0]], sink_radius=rc, t_max=1e5)
    expected = np.pi * b * n * (100**2 - rc**2) / Q
    assert (res.end_kind == "sink").all()
    assert np.allclose(res.time, expected, rtol=0.01)


def test_uniform_gradient_straight_path():
    """Analytic (VERIFY.md, Flow): in h = a x + b y + c a particle moves straight along (-a, -b) at K i / n."""
    a, b, K, n = -0.01, 0.004, 5.0, 0.2
    cell = 10.0
    xc = (np.arange(200) + 0.5) * cell
    yc = 2000 - (np.arange(200) + 0.5) * cell
    X, Y = np.meshgrid(xc, yc)
    vg = VelocityGrid.from_head(0.0, 2000.0, cell, 50 + a * X + b * Y, K, n)
    speed = K * np.hypot(a, b) / n
    res = track([[300.0, 1200.0]], vg, t_max=1000.0)
    path = res.paths[0]
    direction = np.array([-a, -b]) / np.hypot(a, b)
    rel = path[:, :2] - path[0, :2]
    across = rel[:, 0] * direction[1] - rel[:, 1] * direction[0]
    assert np.abs(across).max() < 1e-6  # straight
    assert res.end_kind[0] == "max_time"
    assert np.allclose(np.hypot(*rel.T), speed * path[:, 2], rtol=1e-9)
    back = track([res.end_xy[0]], vg, backward=True, t_max=1000.0)
    assert back.end_xy[0] == pytest.approx([300.0, 1200.0], abs=1e-6)


def test_leaves_the_field_at_the_edge():
    vg = VelocityGrid(0.0, 100.0, 10.0, np.ones((10, 10)), np.zeros((10, 10)))
    res = track([[15.0, 50.0]], vg, t_max=1e6)
    assert res.end_kind[0] == "edge" and res.end_xy[0, 0] > 95.0


# Kuo, Example 6.6 (Javandel and Tsang 1986): K = 1000 gpd/ft2, i = 0.015, B = 80 ft, Q = 50 gpm; in ft and days.
GAL_FT3 = 3.785411784e-3 / 0.3048**3
K_FTD = 1000 * GAL_FT3
I, B, Q = 0.015, 80.0, 50 * GAL_FT3 * 1440
U = K_FTD * I  # Darcy flux


def well_in_uniform_flow(xy, n=0.3):
    """Exact seepage velocity of a pumping well at the origin in uniform flow toward +x (NaN beyond the study box)."""
    xy = np.atleast_2d(xy)
    r2 = np.maximum((xy**2).sum(1), 1e-12)
    vx = U / n - Q / (2 * np.pi * B * n) * xy[:, 0] / r2
    vy = -Q / (2 * np.pi * B * n) * xy[:, 1] / r2
    outside = (xy[:, 0] < -3500) | (xy[:, 0] > 60) | (np.abs(xy[:, 1]) > 100)
    return np.where(outside, np.nan, vx), np.where(outside, np.nan, vy)


def _captured(seeds, field, **kw):
    res = track(seeds, field, sinks=[[0.0, 0.0]], sink_radius=0.5, t_max=1e5, **kw)
    return res.end_kind == "sink"


def _half_width(field, x_release, top=40.0, count=801, **kw):
    """Largest captured offset among particles released on a line across the flow (resolution top/count)."""
    ys = np.linspace(0.0, top, count)
    caught = _captured(np.column_stack([np.full(count, x_release), ys]), field, **kw)
    assert caught[0] and not caught[-1]
    return ys[caught].max() + 0.5 * (ys[1] - ys[0])


def test_capture_zone_stagnation_point():
    """source: Javandel and Tsang (1986); Kuo, Practical Design Calculations..., Example 6.6 (read):
    stagnation point Q / (2 pi B U) = 9.6 ft downgradient; found by tracking within 2 %."""
    xs = Q / (2 * np.pi * B * U)
    assert xs == pytest.approx(9.6, rel=0.01)  # 9.55 exactly; the example rounds its intermediate values
    seeds = np.array([[0.98 * xs, 0.0], [1.02 * xs, 0.0]])
    caught = _captured(seeds, well_in_uniform_flow, max_step=0.1)
    assert caught.tolist() == [True, False]


def test_capture_width_far_upstream():
    """source: Javandel and Tsang (1986); Kuo Example 6.6 (read): capture width far upstream Q / (B U) = 60 ft
    (half-width 30 ft), within 2 %."""
    assert Q / (B * U) == pytest.approx(60.0, abs=0.5)
    half = _half_width(well_in_uniform_flow, -3000.0, max_step=5.0)
    assert 2 * half == pytest.approx(Q / (B * U), rel=0.02)


def test_capture_width_on_a_head_grid():
    """The same well on a gridded head field (bilinear velocities from the head surface) gives the same capture
    half-width as the exact field at the same release line (within 2 %)."""
    n, cell = 0.3, 1.0
    x0, y0 = -400.0, 80.0
    xc = x0 + (np.arange(int(460 / cell)) + 0.5) * cell
    yc = y0 - (np.arange(int(160 / cell)) + 0.5) * cell
    X, Y = np.meshgrid(xc, yc)
    r = np.maximum(np.hypot(X, Y), 0.01)
    T = K_FTD * B
    head = 100 - I * X + Q / (2 * np.pi * T) * np.log(r)
    vg = VelocityGrid.from_head(x0, y0, cell, head, K_FTD, n)
    exact = _half_width(well_in_uniform_flow, -380.0, count=401, max_step=1.0)
    gridded = _half_width(vg, -380.0, count=401)
    assert gridded == pytest.approx(exact, rel=0.02)
    assert 25.0 < exact < 30.0  # approaching Q / (2 B U) = 30 ft from below


def test_bad_arguments():
    with pytest.raises(ParameterError, match="porosity"):
        VelocityGrid.from_head(0, 10, 1.0, np.zeros((10, 10)), 1.0, 0.0)
    with pytest.raises(ParameterError, match="shape"):
        track(np.zeros(3), radial_grid(half=5))
    with pytest.raises(ParameterError, match="max_step"):
        track([[0.0, 0.0]], well_in_uniform_flow)


# -- the capture radius of a sink (hydroatlas.flow.capture_radius) -------------------------------
def test_stagnation_distance_and_capture_width_kuo_example_6_6():
    """source: Javandel and Tsang (1986); Kuo, Practical Design Calculations..., Example 6.6 (read):
    K = 1000 gpd/ft2, i = 0.015, B = 80 ft, Q = 50 gpm give the stagnation point 9.6 ft downgradient and a
    capture width of 60 ft far upstream (30 ft each side)."""
    from hydroatlas.flow import capture_width, stagnation_distance

    assert stagnation_distance(Q, B, U) == pytest.approx(9.6, abs=0.06)
    assert capture_width(Q, B, U) == pytest.approx(60.0, abs=0.5)
    assert capture_width(Q, B, U) == pytest.approx(2 * np.pi * stagnation_distance(Q, B, U), rel=1e-12)
    np.testing.assert_allclose(stagnation_distance([Q, 2 * Q, 0.0], B, U), [Q / (2 * np.pi * B * U),
                                                                          Q / (np.pi * B * U), 0.0])


def test_capture_radius_bounds():
    """common practice (no source): the radius is the stagnation distance, raised to a lower bound (a weak
    well is below grid resolution) and cut to an upper bound (a strong well in a flat field)."""
    from hydroatlas.flow import capture_radius

    x0 = Q / (2 * np.pi * B * U)
    assert capture_radius(Q, B, U, r_min=0.5, r_max=100.0) == pytest.approx(x0, rel=1e-12)
    assert capture_radius(Q / 1000, B, U, r_min=0.5, r_max=100.0) == 0.5
    assert capture_radius(Q, B, 0.0, r_min=0.5, r_max=100.0) == 100.0  # no regional flow: x0 is infinite
    with pytest.raises(ParameterError, match="r_max must be >= r_min"):
        capture_radius(Q, B, U, r_min=5.0, r_max=1.0)
    with pytest.raises(ParameterError, match="b > 0"):
        capture_radius(Q, 0.0, U, r_min=0.5, r_max=100.0)


def test_disc_of_stagnation_radius_lies_in_the_capture_zone():
    """Javandel and Tsang (1986): the capture zone's edge is nearest the well at the stagnation point, so every
    particle released inside the disc of radius Q / (2 pi B U) is captured (exact field, tiny sink radius),
    while one just beyond the stagnation point escapes downgradient."""
    x0 = Q / (2 * np.pi * B * U)
    ang = np.linspace(0, 2 * np.pi, 36, endpoint=False)
    inside = 0.99 * x0 * np.column_stack([np.cos(ang), np.sin(ang)])
    res = track(inside, well_in_uniform_flow, sinks=[[0.0, 0.0]], sink_radius=0.01 * x0, t_max=1e5, max_step=0.1)
    assert (res.end_kind == "sink").all()
    res = track([[1.01 * x0, 0.0]], well_in_uniform_flow, sinks=[[0.0, 0.0]], sink_radius=0.01 * x0, t_max=1e5,
                max_step=0.1)
    assert res.end_kind[0] != "sink"


def test_capture_zone_on_a_head_grid_with_the_stagnation_radius():
    """source: Javandel and Tsang (1986); Kuo Example 6.6 (read): on a gridded head field (uniform flow plus the
    Thiem cone of the well) with the sink radius set by capture_radius, a particle just inside the stagnation
    point is captured and one just beyond is not, and the captured band 3000 ft upstream is Q / (B U) = 60 ft
    wide within 3 %."""
    from hydroatlas.flow import capture_radius

    n, cell = 0.3, 2.0
    x0g, y0g = -3100.0, 120.0
    xc = x0g + (np.arange(int(3200 / cell)) + 0.5) * cell
    yc = y0g - (np.arange(int(240 / cell)) + 0.5) * cell
    X, Y = np.meshgrid(xc, yc)
    r = np.maximum(np.hypot(X, Y), 0.01)
    head = 100 - I * X + Q / (2 * np.pi * K_FTD * B) * np.log(r)
    vg = VelocityGrid.from_head(x0g, y0g, cell, head, K_FTD, n)
    radius = capture_radius(Q, B, U, r_min=0.25 * cell, r_max=60 * cell)
    xs = Q / (2 * np.pi * B * U)
    assert radius == pytest.approx(xs)
    res = track([[0.9 * xs, 0.0], [1.1 * xs, 0.0]], vg, sinks=[[0.0, 0.0]], sink_radius=radius, t_max=1e5)
    assert res.end_kind.tolist()[0] == "sink" and res.end_kind.tolist()[1] != "sink"
    ys = np.linspace(0.0, 40.0, 161)
    res = track(np.column_stack([np.full(ys.size, -3000.0), ys]), vg, sinks=[[0.0, 0.0]], sink_radius=radius,
                t_max=1e6)
    caught = res.end_kind == "sink"
    assert caught[0] and not caught[-1]
    half = ys[caught].max() + 0.5 * (ys[1] - ys[0])
    assert 2 * half == pytest.approx(Q / (B * U), rel=0.03)
