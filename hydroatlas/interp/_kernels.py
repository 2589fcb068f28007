"""Compiled kernels of the local-neighbourhood kriging solver (numba).

Why hand-written and compiled: the neighbourhood solver must find the N
nearest data points of every grid cell and apply one factored system per
distinct neighbour set without building per-cell arrays. scipy's KD-tree
query alone costs about one second per million cells and returns arrays the
size of the grid; a bucket-grid search compiled with numba, fused with the
weight application, stays within a small memory budget and runs on all cores.
No general-purpose library offers this fused kernel.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

SPHERICAL, EXPONENTIAL, GAUSSIAN = 0, 1, 2


@njit(cache=True, inline="always")
def gamma_scalar(h, code, nugget, psill, rng):
    if h <= 0.0:
        return 0.0
    r = h / rng
    if code == SPHERICAL:
        core = 1.5 * r - 0.5 * r * r * r if r < 1.0 else 1.0
    elif code == EXPONENTIAL:
        core = 1.0 - np.exp(-3.0 * r)
    else:
        core = 1.0 - np.exp(-3.0 * r * r)
    return nugget + psill * core


def build_buckets(xy: np.ndarray, per_bucket: float = 2.0):
    """Sort points into a regular grid of buckets (about ``per_bucket`` points each)."""
    lo = xy.min(axis=0)
    hi = xy.max(axis=0)
    span = np.maximum(hi - lo, 1e-9)
    n = len(xy)
    size = float(np.sqrt(span[0] * span[1] * per_bucket / n)) if span.min() > 1e-9 else float(span.max() / n)
    size = max(size, float(span.max()) / 4096.0, 1e-12)
    nbx = int(span[0] // size) + 1
    nby = int(span[1] // size) + 1
    bx = np.minimum(((xy[:, 0] - lo[0]) / size).astype(np.int64), nbx - 1)
    by = np.minimum(((xy[:, 1] - lo[1]) / size).astype(np.int64), nby - 1)
    bucket = by * nbx + bx
    order = np.argsort(bucket, kind="stable").astype(np.int64)
    counts = np.bincount(bucket, minlength=nbx * nby)
    starts = np.zeros(nbx * nby + 1, dtype=np.int64)
    np.cumsum(counts, out=starts[1:])
    return (float(lo[0]), float(lo[1]), size, nbx, nby, order, starts)


@njit(cache=True)
def _insert(best_d, best_i, found, k, d2, j):
    """Insert (d2, j) into the ascending top-k arrays; returns the new count."""
    if found < k:
        pos = found
        found += 1
    elif d2 < best_d[k - 1]:
        pos = k - 1
    else:
        return found
    while pos > 0 and best_d[pos - 1] > d2:
        best_d[pos] = best_d[pos - 1]
        best_i[pos] = best_i[pos - 1]
        pos -= 1
    best_d[pos] = d2
    best_i[pos] = j
    return found


@njit(cache=True)
def _ring_knn(qx, qy, pts, x0, y0, size, nbx, nby, order, starts, k, radius2, best_d, best_i):
    """k nearest points of (qx, qy) by searching bucket rings outward; returns how many were found."""
    bi = min(max(int((qx - x0) // size), 0), nbx - 1)
    bj = min(max(int((qy - y0) // size), 0), nby - 1)
    found = 0
    for r in range(max(nbx, nby) + 1):
        for jj in range(bj - r, bj + r + 1):
            if jj < 0 or jj >= nby:
                continue
            step = 1 if (jj == bj - r or jj == bj + r) else 2 * r
            ii = bi - r
            while ii <= bi + r:
                if 0 <= ii < nbx:
                    b = jj * nbx + ii
                    for s in range(starts[b], starts[b + 1]):
                        p = order[s]
                        dx = pts[p, 0] - qx
                        dy = pts[p, 1] - qy
                        d2 = dx * dx + dy * dy
                        if d2 <= radius2:
                            found = _insert(best_d, best_i, found, k, d2, p)
                if step == 0:
                    break
                ii += step
        # every bucket of the next ring lies at least r * size away
        reach = r * size
        if found == k and reach * reach > best_d[k - 1]:
            break
        if reach * reach > radius2:
            break
    return found


@njit(cache=True, parallel=True)
def knn_tiles(q, tile_starts, centers, half_diag, pts, x0, y0, size, nbx, nby, order, starts, k, radius2, keys):
    """The k nearest points of every query, tile by tile, as sorted index sets with a set hash.

    Queries are grouped in tiles (``q[tile_starts[t]:tile_starts[t+1]]`` lie within
    ``half_diag[t]`` of ``centers[t]``). For each tile the candidates are the
    points within d_k(centre) + 2 * half_diag of the centre: by the triangle
    inequality they include the k nearest points of every query of the tile,
    so the per-query search scans a few dozen candidates only.

    Returns idx (m, k) in no particular order (-1 padded), count (m,) and two
    set hashes (m, 2): the sums of ``keys[:, 0]`` and ``keys[:, 1]`` over the set
    (uint64, wrapping), independent of order.
    """
    m = q.shape[0]
    idx = np.full((m, k), -1, dtype=np.int64)
    count = np.zeros(m, dtype=np.int64)
    hashes = np.zeros((m, 2), dtype=np.uint64)
    n_tiles = tile_starts.shape[0] - 1
    for t in prange(n_tiles):
        cx, cy = centers[t, 0], centers[t, 1]
        best_d = np.empty(k)
        best_i = np.empty(k, dtype=np.int64)
        found = _ring_knn(cx, cy, pts, x0, y0, size, nbx, nby, order, starts, k, np.inf, best_d, best_i)
        reach = np.sqrt(best_d[found - 1]) + 2.0 * half_diag[t]
        if radius2 < np.inf:
            reach = min(reach, np.sqrt(radius2) + half_diag[t])
        # candidates: points in the buckets overlapping the square of half-side `reach`
        i0 = min(max(int((cx - reach - x0) // size), 0), nbx - 1)
        i1 = min(max(int((cx + reach - x0) // size), 0), nbx - 1)
        j0 = min(max(int((cy - reach - y0) // size), 0), nby - 1)
        j1 = min(max(int((cy + reach - y0) // size), 0), nby - 1)
        total = 0
        for jj in range(j0, j1 + 1):
            total += starts[jj * nbx + i1 + 1] - starts[jj * nbx + i0]
        cand = np.empty(total, dtype=np.int64)
        nc = 0
        reach2 = reach * reach
        for jj in range(j0, j1 + 1):
            for s in range(starts[jj * nbx + i0], starts[jj * nbx + i1 + 1]):
                p = order[s]
                dx = pts[p, 0] - cx
                dy = pts[p, 1] - cy
                if dx * dx + dy * dy <= reach2:
                    cand[nc] = p
                    nc += 1
        # candidates nearest the tile centre first: the first k are usually the answer
        dc = np.empty(nc)
        for u in range(nc):
            dx = pts[cand[u], 0] - cx
            dy = pts[cand[u], 1] - cy
            dc[u] = dx * dx + dy * dy
        sort = np.argsort(dc)
        cand = cand[sort]
        cx_ = np.empty(nc)
        cy_ = np.empty(nc)
        for u in range(nc):
            cx_[u] = pts[cand[u], 0]
            cy_[u] = pts[cand[u], 1]
        for c in range(tile_starts[t], tile_starts[t + 1]):
            qx, qy = q[c, 0], q[c, 1]
            # unordered top-k: keep the k smallest, track the largest of them
            got = 0
            worst = -1.0
            wpos = 0
            for u in range(nc):
                dx = cx_[u] - qx
                dy = cy_[u] - qy
                d2 = dx * dx + dy * dy
                if d2 > radius2:
                    continue
                if got < k:
                    best_d[got] = d2
                    best_i[got] = cand[u]
                    if d2 > worst:
                        worst = d2
                        wpos = got
                    got += 1
                elif d2 < worst:
                    best_d[wpos] = d2
                    best_i[wpos] = cand[u]
                    worst = -1.0
                    for v in range(k):
                        if best_d[v] > worst:
                            worst = best_d[v]
                            wpos = v
            h1 = np.uint64(0)
            h2 = np.uint64(0)
            for u in range(got):
                val = best_i[u]
                idx[c, u] = val
                h1 += keys[val, 0]
                h2 += keys[val, 1]
            count[c] = got
            hashes[c, 0] = h1
            hashes[c, 1] = h2
    return idx, count, hashes


@njit(cache=True)
def _invert_pivoting(a, out):
    """Gauss-Jordan inverse with partial pivoting (kriging matrices have zero diagonals); False if singular."""
    s = a.shape[0]
    w = a.copy()
    for i in range(s):
        for j in range(s):
            out[i, j] = 1.0 if i == j else 0.0
    scale = 0.0
    for i in range(s):
        for j in range(s):
            scale = max(scale, abs(w[i, j]))
    tol = 1e-13 * max(scale, 1e-300)
    for col in range(s):
        piv = col
        best = abs(w[col, col])
        for r in range(col + 1, s):
            if abs(w[r, col]) > best:
                best = abs(w[r, col])
                piv = r
        if best <= tol:
            return False
        if piv != col:
            for j in range(s):
                w[col, j], w[piv, j] = w[piv, j], w[col, j]
                out[col, j], out[piv, j] = out[piv, j], out[col, j]
        inv = 1.0 / w[col, col]
        for j in range(s):
            w[col, j] *= inv
            out[col, j] *= inv
        for r in range(s):
            if r != col:
                f = w[r, col]
                if f != 0.0:
                    for j in range(s):
                        w[r, j] -= f * w[col, j]
                        out[r, j] -= f * out[col, j]
    return True


@njit(cache=True, parallel=True)
def build_systems(rep, iso, xy, z, code, nugget, psill, rng, n_drift, cx, cy, scale):
    """Inverse kriging matrix and alpha = inverse @ [z; 0] for each neighbour set (rows of ``rep``, -1 padded).

    Padded slots get identity rows so that they carry zero weight. Returns
    ainv (G, s, s), alpha (G, s) and ok (G,) False where a matrix is singular.
    """
    G, k = rep.shape
    s = k + n_drift
    ainv = np.zeros((G, s, s))
    alpha = np.zeros((G, s))
    ok = np.ones(G, dtype=np.bool_)
    for g in prange(G):
        a = np.zeros((s, s))
        for i in range(k):
            pi = rep[g, i]
            if pi < 0:
                a[i, i] = 1.0
                continue
            for j in range(i + 1, k):
                pj = rep[g, j]
                if pj < 0:
                    continue
                dx = iso[pi, 0] - iso[pj, 0]
                dy = iso[pi, 1] - iso[pj, 1]
                gm = gamma_scalar(np.sqrt(dx * dx + dy * dy), code, nugget, psill, rng)
                a[i, j] = gm
                a[j, i] = gm
            a[i, k] = 1.0
            a[k, i] = 1.0
            if n_drift == 3:
                fx = (xy[pi, 0] - cx) / scale
                fy = (xy[pi, 1] - cy) / scale
                a[i, k + 1] = fx
                a[k + 1, i] = fx
                a[i, k + 2] = fy
                a[k + 2, i] = fy
        inv = np.empty((s, s))
        if not _invert_pivoting(a, inv):
            ok[g] = False
            continue
        ainv[g] = inv
        for i in range(s):
            acc = 0.0
            for j in range(k):
                if rep[g, j] >= 0:
                    acc += inv[i, j] * z[rep[g, j]]
            alpha[g, i] = acc
    return ainv, alpha, ok


@njit(cache=True, parallel=True)
def apply_systems(q, q_raw, pts, count, group, rep_idx, ainv, alpha, code, nugget, psill, rng, n_drift,
                  cx, cy, scale, min_points):
    """Estimate and kriging variance of each query point from its group's inverted system.

    ``q`` holds the targets in isotropic coordinates (for distances), ``q_raw`` in
    the original ones (for the drift).

    ``ainv[g]`` is the inverse of the (k + n_drift) square kriging matrix of
    group g (dummy rows for sets smaller than k), ``alpha[g] = ainv[g] @ [z; 0]``.
    Every target of a group has the same neighbour set as the representative
    (the caller checks this with a second hash).
    """
    m = q.shape[0]
    k = rep_idx.shape[1]
    s = k + n_drift
    est = np.full(m, np.nan)
    var = np.full(m, np.nan)
    for c in prange(m):
        n = count[c]
        if n < min_points:
            continue
        g = group[c]
        # the group's matrix is ordered as its representative's set: map each point to its slot
        b = np.zeros(s)
        for t in range(n):
            p = rep_idx[g, t]
            dx = pts[p, 0] - q[c, 0]
            dy = pts[p, 1] - q[c, 1]
            b[t] = gamma_scalar(np.sqrt(dx * dx + dy * dy), code, nugget, psill, rng)
        b[k] = 1.0
        if n_drift == 3:  # the drift is in the original coordinates, as in build_systems
            b[k + 1] = (q_raw[c, 0] - cx) / scale
            b[k + 2] = (q_raw[c, 1] - cy) / scale
        e = 0.0
        for i in range(s):
            e += b[i] * alpha[g, i]
        v = 0.0
        for i in range(s):
            acc = 0.0
            for j in range(s):
                acc += ainv[g, i, j] * b[j]
            v += b[i] * acc
        est[c] = e
        var[c] = v
    return est, var


@njit(cache=True, parallel=True)
def build_cholesky_ok(rep, iso, z, code, nugget, psill, rng):
    """Ordinary kriging in covariance form, factored once per neighbour set (Cholesky).

    With C the covariance matrix of the set (C(h) = sill - gamma(h), C(0) = sill),
    L its Cholesky factor, ``u1 = L^-1 1``, ``s = 1' C^-1 1``, the kriged mean
    ``m = 1' C^-1 z / s`` and ``w = C^-1 (z - m 1)``, a target with covariances c
    has estimate ``m + c' w`` and variance ``sill - |L^-1 c|^2 + (1 - u1' L^-1 c)^2 / s``.
    This costs about a tenth of inverting the bordered variogram matrix.
    Padded slots (-1) get identity rows and zero entries. ``ok`` is False where C
    is not positive definite (the caller then uses the bordered system).
    """
    G, k = rep.shape
    sill = nugget + psill
    L = np.zeros((G, k, k))
    u1 = np.zeros((G, k))
    s_ = np.zeros(G)
    w = np.zeros((G, k))
    mhat = np.zeros(G)
    ok = np.ones(G, dtype=np.bool_)
    for g in prange(G):
        c = np.zeros((k, k))
        for i in range(k):
            pi = rep[g, i]
            if pi < 0:
                c[i, i] = 1.0
                continue
            c[i, i] = sill
            for j in range(i):
                pj = rep[g, j]
                if pj < 0:
                    continue
                dx = iso[pi, 0] - iso[pj, 0]
                dy = iso[pi, 1] - iso[pj, 1]
                cij = sill - gamma_scalar(np.sqrt(dx * dx + dy * dy), code, nugget, psill, rng)
                c[i, j] = cij
        # Cholesky (lower), in place
        lg = L[g]
        good = True
        for i in range(k):
            for j in range(i + 1):
                acc = c[i, j]
                for t in range(j):
                    acc -= lg[i, t] * lg[j, t]
                if i == j:
                    if acc <= 1e-12 * sill:
                        good = False
                        break
                    lg[i, i] = np.sqrt(acc)
                else:
                    lg[i, j] = acc / lg[j, j]
            if not good:
                break
        if not good:
            ok[g] = False
            continue
        one = np.zeros(k)
        zz = np.zeros(k)
        for i in range(k):
            if rep[g, i] >= 0:
                one[i] = 1.0
                zz[i] = z[rep[g, i]]
        a1 = _forward(lg, one)
        az = _forward(lg, zz)
        s = 0.0
        sz = 0.0
        for i in range(k):
            s += a1[i] * a1[i]
            sz += a1[i] * az[i]
        m = sz / s
        r = np.empty(k)
        for i in range(k):
            r[i] = az[i] - m * a1[i]
        w[g] = _backward(lg, r)
        u1[g] = a1
        s_[g] = s
        mhat[g] = m
    return L, u1, s_, w, mhat, ok


@njit(cache=True, inline="always")
def _forward(lg, b):
    k = b.shape[0]
    x = np.empty(k)
    for i in range(k):
        acc = b[i]
        for t in range(i):
            acc -= lg[i, t] * x[t]
        x[i] = acc / lg[i, i]
    return x


@njit(cache=True, inline="always")
def _backward(lg, b):
    k = b.shape[0]
    x = np.empty(k)
    for i in range(k - 1, -1, -1):
        acc = b[i]
        for t in range(i + 1, k):
            acc -= lg[t, i] * x[t]
        x[i] = acc / lg[i, i]
    return x


@njit(cache=True, parallel=True)
def apply_cholesky_ok(q, pts, count, group, rep_idx, L, u1, s_, w, mhat, code, nugget, psill, rng, min_points):
    """Estimate and ordinary-kriging variance of each target from its group's Cholesky factor."""
    m = q.shape[0]
    k = rep_idx.shape[1]
    sill = nugget + psill
    est = np.full(m, np.nan)
    var = np.full(m, np.nan)
    for c in prange(m):
        if count[c] < min_points:
            continue
        g = group[c]
        cv = np.zeros(k)
        for t in range(k):
            p = rep_idx[g, t]
            if p < 0:
                continue
            dx = pts[p, 0] - q[c, 0]
            dy = pts[p, 1] - q[c, 1]
            h = np.sqrt(dx * dx + dy * dy)
            cv[t] = sill if h <= 0.0 else sill - gamma_scalar(h, code, nugget, psill, rng)
        e = mhat[g]
        for t in range(k):
            e += cv[t] * w[g, t]
        lg = L[g]
        aa = 0.0
        ua = 0.0
        x = np.empty(k)
        for i in range(k):
            acc = cv[i]
            for t in range(i):
                acc -= lg[i, t] * x[t]
            x[i] = acc / lg[i, i]
            aa += x[i] * x[i]
            ua += u1[g, i] * x[i]
        est[c] = e
        var[c] = sill - aa + (1.0 - ua) ** 2 / s_[g]
    return est, var


@njit(cache=True, parallel=True)
def idw_apply(q, pts, z, idx, count, power):
    """Inverse-distance-weighted estimate of each target from its neighbour set (exact at data points)."""
    m = q.shape[0]
    out = np.full(m, np.nan)
    for c in prange(m):
        n = count[c]
        if n == 0:
            continue
        wsum = 0.0
        acc = 0.0
        exact = -1
        for t in range(n):
            p = idx[c, t]
            dx = pts[p, 0] - q[c, 0]
            dy = pts[p, 1] - q[c, 1]
            d2 = dx * dx + dy * dy
            if d2 == 0.0:
                exact = p
                break
            w = d2 ** (-0.5 * power)
            wsum += w
            acc += w * z[p]
        out[c] = z[exact] if exact >= 0 else acc / wsum
    return out
