"""Which 2-D points lie near which: fixed-radius neighbour pairs by a grid of cells, in numpy.

The image stage asks a handful of neighbour questions about spot positions (mirror images of spots
near spots, candidate peaks within a suppression radius, the nearest other spot, the short vectors
between strong spots). They used to go through a k-d tree from ``scipy.spatial``, whose import
alone costs about 0.17 s of CPU in every cold ``saed index`` (issue 15 item 13: start-up) -- for
point sets of tens to a few thousand points, where a cell grid does the same work in numpy.

Method: the points are sorted into square cells of side ``r``; a query point can only be within
``r`` of points in its own cell and the eight around it, so for each of those nine cell offsets the
range of sorted points in that cell is found with ``searchsorted``, the ranges are expanded into
candidate pairs, and the pairs farther than ``r`` are dropped (distances ``<= r`` count as within,
as for ``scipy.spatial.cKDTree.query_ball_point``, which the tests use as the reference).
"""

from __future__ import annotations

import numpy as np

__all__ = ["close_pairs", "self_pairs", "nearest_within", "nearest_other_distance", "k_nearest"]


def _as_points(p) -> np.ndarray:
    return np.asarray(p, dtype=np.float64).reshape(-1, 2)


def close_pairs(queries, points, r: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every (query i, point j) with |queries[i] - points[j]| <= r: (i, j, distance), ordered by i, then j.

    >>> i, j, d = close_pairs([[0, 0], [5, 5]], [[0.5, 0], [9, 9], [5, 6]], 1.0)
    >>> i.tolist(), j.tolist(), d.tolist()
    ([0, 1], [0, 2], [0.5, 1.0])
    """
    q, p = _as_points(queries), _as_points(points)
    empty = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))
    if len(q) == 0 or len(p) == 0 or not r >= 0:
        return empty
    r = float(r)
    finite_q = np.all(np.isfinite(q), axis=1)
    finite_p = np.all(np.isfinite(p), axis=1)
    if not finite_q.any() or not finite_p.any():
        return empty
    cell = max(r, 1e-9)
    lo = np.minimum(q[finite_q].min(axis=0), p[finite_p].min(axis=0))
    cq = np.floor((np.where(finite_q[:, None], q, lo) - lo) / cell).astype(np.int64) + 1
    cp = np.floor((np.where(finite_p[:, None], p, lo) - lo) / cell).astype(np.int64) + 1
    width = int(max(cq[:, 1].max(), cp[:, 1].max())) + 2
    key_p = cp[:, 0] * width + cp[:, 1]
    key_p[~finite_p] = -1  # a cell no query reaches
    order = np.argsort(key_p, kind="stable")
    sorted_keys = key_p[order]
    qi_all = np.flatnonzero(finite_q)
    out_i, out_j = [], []
    for dx in (-1, 0, 1):
        for dy in (-1, 0, 1):
            key_q = (cq[qi_all, 0] + dx) * width + (cq[qi_all, 1] + dy)
            start = np.searchsorted(sorted_keys, key_q, side="left")
            stop = np.searchsorted(sorted_keys, key_q, side="right")
            count = stop - start
            total = int(count.sum())
            if total == 0:
                continue
            qi = np.repeat(qi_all, count)
            offset = np.arange(total) - np.repeat(np.cumsum(count) - count, count)
            out_i.append(qi)
            out_j.append(order[np.repeat(start, count) + offset])
    if not out_i:
        return empty
    i = np.concatenate(out_i)
    j = np.concatenate(out_j)
    d = np.hypot(q[i, 0] - p[j, 0], q[i, 1] - p[j, 1])
    keep = d <= r
    i, j, d = i[keep], j[keep], d[keep]
    sort = np.lexsort((j, i))
    return i[sort], j[sort], d[sort]


def self_pairs(points, r: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every pair i < j of `points` within `r` of each other: (i, j, distance), ordered by i, then j."""
    i, j, d = close_pairs(points, points, r)
    keep = i < j
    return i[keep], j[keep], d[keep]


def nearest_within(queries, points, r: float) -> tuple[np.ndarray, np.ndarray]:
    """For each query, the nearest point within `r`: (index, distance), index -1 and distance inf where none.

    Ties go to the lower point index.
    """
    q = _as_points(queries)
    index = np.full(len(q), -1, np.int64)
    dist = np.full(len(q), np.inf)
    i, j, d = close_pairs(q, points, r)
    if len(i):
        order = np.lexsort((j, d, i))
        first = np.ones(len(order), bool)
        first[1:] = i[order][1:] != i[order][:-1]
        pick = order[first]
        index[i[pick]] = j[pick]
        dist[i[pick]] = d[pick]
    return index, dist


def _chunked_distances(p: np.ndarray, rows: slice) -> np.ndarray:
    a = p[rows]
    return np.hypot(a[:, None, 0] - p[None, :, 0], a[:, None, 1] - p[None, :, 1])


def k_nearest(points, k: int, *, chunk: int = 512) -> tuple[np.ndarray, np.ndarray]:
    """The `k` nearest other points of each point: (distances (n, k), indices (n, k)), nearest first.

    Each point's own index is never among them (duplicates of a point are: at distance 0). Where there
    are fewer than `k` other points, the missing entries are inf and index n. Ties go to the lower index.
    """
    p = _as_points(points)
    n = len(p)
    dist = np.full((n, k), np.inf)
    idx = np.full((n, k), n, np.int64)
    if n < 2 or k < 1:
        return dist, idx
    m = min(k, n - 1)
    for start in range(0, n, chunk):
        rows = slice(start, min(n, start + chunk))
        d = _chunked_distances(p, rows)
        local = np.arange(rows.start, rows.stop)
        d[np.arange(len(local)), local] = np.inf  # never oneself
        order = np.argsort(d, axis=1, kind="stable")[:, :m]
        dist[rows, :m] = np.take_along_axis(d, order, axis=1)
        idx[rows, :m] = order
    return dist, idx


def nearest_other_distance(points, *, chunk: int = 512) -> np.ndarray:
    """Distance from each point to the nearest other point (inf for a lone point)."""
    p = _as_points(points)
    out = np.full(len(p), np.inf)
    for start in range(0, len(p) if len(p) > 1 else 0, chunk):
        rows = slice(start, min(len(p), start + chunk))
        d = _chunked_distances(p, rows)
        d[np.arange(rows.stop - rows.start), np.arange(rows.start, rows.stop)] = np.inf
        out[rows] = d.min(axis=1)
    return out
