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


@njit(cache=True, parallel=True)
def knn_sets(q, pts, x0, y0, size, nbx, nby, order, starts, k, radius2, keys):
    """The k nearest points of every query point, as sorted index sets with a set hash.

    Returns idx (m, k) sorted by point index (-1 padded), count (m,), hash (m,)
    where hash = sum of ``keys`` over the set (uint64, wrapping).
    """
    m = q.shape[0]
    idx = np.full((m, k), -1, dtype=np.int64)
    count = np.zeros(m, dtype=np.int64)
    hashes = np.zeros(m, dtype=np.uint64)
    max_ring = max(nbx, nby)
    for c in prange(m):
        qx, qy = q[c, 0], q[c, 1]
        bi = int((qx - x0) // size)
        bj = int((qy - y0) // size)
        bi = min(max(bi, 0), nbx - 1)
        bj = min(max(bj, 0), nby - 1)
        best_d = np.empty(k)
        best_i = np.empty(k, dtype=np.int64)
        found = 0
        for r in range(max_ring + 1):
            for jj in range(bj - r, bj + r + 1):
                if jj < 0 or jj >= nby:
                    continue
                edge_row = jj == bj - r or jj == bj + r
                step = 1 if edge_row else 2 * r
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
        sel = np.sort(best_i[:found])
        h = np.uint64(0)
        for t in range(found):
            idx[c, t] = sel[t]
            h += keys[sel[t]]
        count[c] = found
        hashes[c] = h
    return idx, count, hashes


@njit(cache=True, parallel=True)
def apply_systems(q, pts, idx, count, group, rep_idx, ainv, alpha, code, nugget, psill, rng, n_drift,
                  cx, cy, scale, min_points):
    """Estimate and kriging variance of each query point from its group's inverted system.

    ``ainv[g]`` is the inverse of the (k + n_drift) square kriging matrix of
    group g (dummy rows for sets smaller than k), ``alpha[g] = ainv[g] @ [z; 0]``.
    Cells whose set differs from their group's representative (a hash collision)
    get ``ok = False`` and are solved again by the caller.
    """
    m = q.shape[0]
    k = idx.shape[1]
    s = k + n_drift
    est = np.full(m, np.nan)
    var = np.full(m, np.nan)
    ok = np.ones(m, dtype=np.bool_)
    for c in prange(m):
        n = count[c]
        if n < min_points:
            continue
        g = group[c]
        same = True
        for t in range(k):
            if idx[c, t] != rep_idx[g, t]:
                same = False
                break
        if not same:
            ok[c] = False
            continue
        b = np.zeros(s)
        for t in range(n):
            p = idx[c, t]
            dx = pts[p, 0] - q[c, 0]
            dy = pts[p, 1] - q[c, 1]
            b[t] = gamma_scalar(np.sqrt(dx * dx + dy * dy), code, nugget, psill, rng)
        b[k] = 1.0
        if n_drift == 3:
            b[k + 1] = (q[c, 0] - cx) / scale
            b[k + 2] = (q[c, 1] - cy) / scale
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
    return est, var, ok
