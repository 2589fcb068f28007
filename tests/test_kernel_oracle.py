"""The compiled kernels (hydroatlas/interp/_kernels.py) and the public interpolators against the plain-numpy
oracle (tests/kernel_oracle.py: the textbook equations, one target at a time; sources named there).

Random data on several seeds, with geometric anisotropy and a nugget, every variogram model. Agreement is
asked to 1e-9 relative: estimates relative to the spread of the data, kriging variances relative to the sill
(an absolute floor of that size keeps a zero variance at a data point comparable).
"""

from __future__ import annotations

import numpy as np
import pytest

import kernel_oracle as oracle
from hydroatlas.interp import IDW, OrdinaryKriging, UniversalKriging, Variogram
from hydroatlas.interp import _kernels, crossval
from hydroatlas.interp.kriging import _tiles, tile_width

RTOL = 1e-9
SEEDS = (0, 1, 2)
MODELS = ("spherical", "exponential", "gaussian")
X0, Y0 = 612_000.0, 4_101_000.0  # coordinates of the size of a projected CRS: drift and distances must cope


def data(seed: int, n: int = 60):
    """Random points over a 1 km square and a smooth field with noise (invented for the check)."""
    rng = np.random.default_rng(seed)
    xy = np.column_stack([X0 + rng.uniform(0, 1000, n), Y0 + rng.uniform(0, 1000, n)])
    z = 300.0 + 0.004 * (xy[:, 0] - X0) - 0.002 * (xy[:, 1] - Y0) + rng.normal(0, 1.5, n)
    targets = np.column_stack([X0 + rng.uniform(-100, 1100, 40), Y0 + rng.uniform(-100, 1100, 40)])
    targets = np.vstack([targets, xy[:3]])  # three targets on data points
    return rng, xy, z, targets


def variogram(model: str, *, nugget: float = 0.4, anisotropic: bool = True) -> Variogram:
    return Variogram(model, nugget=nugget, sill=4.0, range=450.0, angle=35.0 if anisotropic else 0.0,
                     ratio=0.55 if anisotropic else 1.0)


def assert_estimates(got, want, z):
    scale = float(np.ptp(z))
    np.testing.assert_allclose(got, want, rtol=RTOL, atol=RTOL * scale)


def assert_variances(got, want, v: Variogram):
    np.testing.assert_allclose(got, want, rtol=RTOL, atol=RTOL * v.sill)


def oracle_kriging(v: Variogram, xy, z, targets, **kw):
    return oracle.kriging_at(xy, z, targets, v.model, v.nugget, v.sill, v.range, angle=v.angle, ratio=v.ratio, **kw)


# -- the variogram ----------------------------------------------------------------------------------------------
@pytest.mark.parametrize("model", MODELS)
def test_gamma_kernel_equals_the_model(model):
    v = variogram(model)
    h = np.concatenate([[0.0, 1e-12], np.random.default_rng(4).uniform(0, 1500, 500), [450.0, 449.999999]])
    want = oracle.gamma(h, model, v.nugget, v.sill, v.range)
    got = np.array([_kernels.gamma_scalar(x, v.code, v.nugget, v.partial_sill, v.range) for x in h])
    np.testing.assert_allclose(got, want, rtol=RTOL, atol=0)
    np.testing.assert_allclose(v(h), want, rtol=RTOL, atol=0)  # the vectorised model of the package too
    assert got[0] == 0.0 and got[1] == pytest.approx(v.nugget)  # gamma(0) = 0, the nugget just after


def test_anisotropic_distance_equals_the_isotropic_transform():
    v = variogram("spherical")
    _, xy, _, targets = data(0)
    want = oracle.distance(xy, targets, v.angle, v.ratio)
    iso_p, iso_q = v.to_isotropic(xy), v.to_isotropic(targets)
    got = np.sqrt(((iso_p[:, None, :] - iso_q[None, :, :]) ** 2).sum(-1))
    np.testing.assert_allclose(got, want, rtol=RTOL, atol=1e-9)


# -- neighbour search -------------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("k, radius", [(1, None), (8, None), (16, None), (8, 150.0)])
def test_knn_kernel_finds_the_k_nearest(seed, k, radius):
    rng, xy, _, targets = data(seed, n=300)
    q = np.vstack([targets, np.column_stack([X0 + rng.uniform(0, 1000, 800), Y0 + rng.uniform(0, 1000, 800)])])
    pts = np.ascontiguousarray(xy)
    x0, y0, size, nbx, nby, order, starts = _kernels.build_buckets(pts)
    keys = rng.integers(1, 2**63, (len(pts), 2), dtype=np.int64).astype(np.uint64)
    perm, tile_starts, centers, half_diag = _tiles(q, tile_width(pts, k))
    sq = np.ascontiguousarray(q[perm])
    radius2 = np.inf if radius is None else radius**2
    idx, count, hashes = _kernels.knn_tiles(sq, tile_starts, centers, half_diag, pts, x0, y0, size, nbx, nby,
                                            order, starts, k, radius2, keys)
    for row, target in enumerate(sq):
        want = oracle.nearest(xy, target, k, radius=radius)
        got = idx[row, :count[row]]
        assert count[row] == len(want) and sorted(got) == sorted(want), row
        assert (idx[row, count[row]:] == -1).all()
        for j in (0, 1):  # the set hash: the wrapping uint64 sum of the members' keys
            assert int(hashes[row, j]) == sum(int(keys[p, j]) for p in want) % 2**64


# -- the small dense solver ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", SEEDS)
def test_gauss_jordan_inverse_of_kriging_matrices(seed):
    rng, xy, _, _ = data(seed)
    v = variogram("exponential")
    for k in (3, 8, 16):
        idx = rng.choice(len(xy), k, replace=False)
        a = np.zeros((k + 1, k + 1))
        a[:k, :k] = oracle.gamma(oracle.distance(xy[idx], xy[idx], v.angle, v.ratio), v.model, v.nugget, v.sill,
                                 v.range)
        a[:k, k] = a[k, :k] = 1.0  # zero diagonal: partial pivoting is needed
        out = np.empty_like(a)
        assert _kernels._invert_pivoting(a, out)
        np.testing.assert_allclose(out, np.linalg.inv(a), rtol=0, atol=RTOL * np.abs(np.linalg.inv(a)).max())
    twin = np.zeros((3, 3))
    twin[:2, 2] = twin[2, :2] = 1.0  # two points at one place: singular
    assert not _kernels._invert_pivoting(twin, np.empty((3, 3)))


# -- the kernels that solve neighbour sets --------------------------------------------------------------------------
def neighbour_sets(rng, n, m, k, sizes, groups):
    """``groups`` random sets of ``sizes`` points (padded with -1 to k) and ``m`` targets spread over them."""
    rep = np.full((groups, k), -1, dtype=np.int64)
    counts = rng.integers(sizes[0], sizes[1] + 1, groups)
    for g in range(groups):
        rep[g, :counts[g]] = rng.choice(n, counts[g], replace=False)
    group = rng.integers(0, groups, m).astype(np.int64)
    return rep, counts[group].astype(np.int64), group


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n_drift", [1, 3])
def test_bordered_system_kernels_equal_textbook_kriging(seed, model, n_drift):
    """build_systems + apply_systems (variogram form, inverse per set) against OK / UK in covariance form."""
    rng, xy, z, targets = data(seed)
    v = variogram(model)
    k = 12
    rep, count, group = neighbour_sets(rng, len(xy), len(targets), k, (4, k), groups=9)
    iso = np.ascontiguousarray(v.to_isotropic(xy))
    q_iso = np.ascontiguousarray(v.to_isotropic(targets))
    cx, cy = xy.mean(axis=0)
    scale = float(np.ptp(xy, axis=0).max())
    ainv, alpha, ok = _kernels.build_systems(rep, iso, xy, z, v.code, v.nugget, v.partial_sill, v.range, n_drift,
                                             cx, cy, scale)
    assert ok.all()
    est, var = _kernels.apply_systems(q_iso, np.ascontiguousarray(targets), iso, count, group, rep, ainv, alpha,
                                      v.code, v.nugget, v.partial_sill, v.range, n_drift, cx, cy, scale, 1)
    want_e, want_v = np.empty(len(targets)), np.empty(len(targets))
    for i, t in enumerate(targets):
        members = rep[group[i]][rep[group[i]] >= 0]
        want_e[i], want_v[i] = oracle.kriging(xy[members], z[members], t, model, v.nugget, v.sill, v.range,
                                              drift=n_drift == 3, angle=v.angle, ratio=v.ratio)
    assert_estimates(est, want_e, z)
    assert_variances(var, want_v, v)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("model", MODELS)
def test_cholesky_kernels_equal_textbook_ordinary_kriging(seed, model):
    """build_cholesky_ok + apply_cholesky_ok (covariance form, closed-form mean) against the bordered system."""
    rng, xy, z, targets = data(seed)
    v = variogram(model)
    k = 16
    rep, count, group = neighbour_sets(rng, len(xy), len(targets), k, (2, k), groups=11)
    iso = np.ascontiguousarray(v.to_isotropic(xy))
    L, u1, s_, w, mhat, ok = _kernels.build_cholesky_ok(rep, iso, z, v.code, v.nugget, v.partial_sill, v.range)
    assert ok.all()
    est, var = _kernels.apply_cholesky_ok(np.ascontiguousarray(v.to_isotropic(targets)), iso, count, group, rep,
                                          L, u1, s_, w, mhat, v.code, v.nugget, v.partial_sill, v.range, 1)
    want_e, want_v = np.empty(len(targets)), np.empty(len(targets))
    for i, t in enumerate(targets):
        members = rep[group[i]][rep[group[i]] >= 0]
        want_e[i], want_v[i] = oracle.kriging(xy[members], z[members], t, model, v.nugget, v.sill, v.range,
                                              angle=v.angle, ratio=v.ratio)
    assert_estimates(est, want_e, z)
    assert_variances(var, want_v, v)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("power", [1.0, 2.0, 3.5])
def test_idw_kernel_equals_shepard(seed, power):
    rng, xy, z, targets = data(seed)
    k = 10
    idx = np.full((len(targets), k), -1, dtype=np.int64)
    count = rng.integers(1, k + 1, len(targets)).astype(np.int64)
    for i, c in enumerate(count):
        idx[i, :c] = oracle.nearest(xy, targets[i], c)
    got = _kernels.idw_apply(np.ascontiguousarray(targets), xy, z, idx, count, power)
    want = np.array([oracle.idw(xy[idx[i, :c]], z[idx[i, :c]], t, power)
                     for i, (t, c) in enumerate(zip(targets, count))])
    assert_estimates(got, want, z)
    np.testing.assert_array_equal(got[-3:], z[:3])  # exact at data points


# -- the public interpolators -------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("neighbors", [None, 12])
@pytest.mark.parametrize("cls, drift", [(OrdinaryKriging, False), (UniversalKriging, True)])
def test_public_kriging_equals_oracle(seed, model, neighbors, cls, drift):
    _, xy, z, targets = data(seed)
    v = variogram(model)
    est, std = cls(v, neighbors=neighbors).fit(xy, z).predict(targets, return_std=True)
    want_e, want_v = oracle_kriging(v, xy, z, targets, k=neighbors, drift=drift)
    assert_estimates(est, want_e, z)
    assert_variances(std**2, want_v, v)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("model", ["spherical", "exponential"])
def test_public_kriging_without_nugget_or_anisotropy_is_exact(seed, model):
    """Zero nugget: the oracle and the package agree, and both honour the data (estimate = datum, variance 0)."""
    _, xy, z, targets = data(seed)
    v = variogram(model, nugget=0.0, anisotropic=False)
    est, std = OrdinaryKriging(v, neighbors=16).fit(xy, z).predict(targets, return_std=True)
    want_e, want_v = oracle_kriging(v, xy, z, targets, k=16)
    assert_estimates(est, want_e, z)
    assert_variances(std**2, want_v, v)
    assert_estimates(est[-3:], z[:3], z)
    assert_variances(std[-3:] ** 2, np.zeros(3), v)


@pytest.mark.parametrize("seed", SEEDS)
def test_public_kriging_with_search_radius_equals_oracle(seed):
    _, xy, z, targets = data(seed)
    v = variogram("exponential")
    est, std = OrdinaryKriging(v, neighbors=12, radius=120.0).fit(xy, z).predict(targets, return_std=True)
    # the radius is measured in the isotropic frame, as every distance of the model
    want_e, want_v = oracle_kriging(v, xy, z, targets, k=12, radius=120.0)
    assert np.isnan(want_e).any() and np.isfinite(want_e).any()  # both cases occur
    np.testing.assert_array_equal(np.isnan(est), np.isnan(want_e))
    ok = np.isfinite(want_e)
    assert_estimates(est[ok], want_e[ok], z)
    assert_variances(std[ok] ** 2, want_v[ok], v)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("neighbors, radius", [(None, None), (8, None), (8, 150.0), (None, 150.0)])
@pytest.mark.parametrize("power", [1.5, 2.0])
def test_public_idw_equals_shepard(seed, neighbors, radius, power):
    _, xy, z, targets = data(seed)
    est = IDW(power, neighbors=neighbors, radius=radius).fit(xy, z).predict(targets)
    want = oracle.idw_at(xy, z, targets, power=power, k=neighbors, radius=radius)
    np.testing.assert_array_equal(np.isnan(est), np.isnan(want))
    ok = np.isfinite(want)
    assert_estimates(est[ok], want[ok], z)


# -- leave-one-out (fast paths against refitting by the oracle) ------------------------------------------------
@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("neighbors", [None, 10])
@pytest.mark.parametrize("cls, drift", [(OrdinaryKriging, False), (UniversalKriging, True)])
def test_leave_one_out_equals_oracle(seed, model, neighbors, cls, drift):
    """Dubrule's closed form (global) and the k + 1 neighbour query (local) against kriging each point from the
    others, solved as the textbook writes it."""
    _, xy, z, _ = data(seed, n=45)
    v = variogram(model)
    res = crossval.leave_one_out(cls(v, neighbors=neighbors), xy, z)
    want_e, want_v = oracle.kriging_leave_one_out(xy, z, model, v.nugget, v.sill, v.range, k=neighbors,
                                                  drift=drift, angle=v.angle, ratio=v.ratio)
    assert_estimates(res["estimate"], want_e, z)
    assert_variances(res["std"] ** 2, want_v, v)
