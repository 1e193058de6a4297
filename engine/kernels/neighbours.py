"""Nearest neighbours and fixed-radius neighbours among delay vectors (max norm).

Delay vector ``i`` of series ``x`` at (dimension m, delay tau) is
``[x[i], x[i+tau], ..., x[i+(m-1)tau]]``; only the first ``n`` vectors take part.
Pairs with ``|i - j| <= theiler`` are excluded (so ``theiler=0`` excludes only
``i`` itself; Theiler 1986). Distances are in the maximum norm.

The search is box-assisted (Grassberger 1990; Schreiber 1995): vectors are
sorted into a square grid on their first and last coordinates, and a query
visits rings of boxes outward until no unvisited box can hold a closer vector.
Ties go to the smallest index, so results match the brute-force reference
exactly.

References
----------
Theiler, Phys. Rev. A 34 (1986) 2427.
Grassberger, Phys. Lett. A 148 (1990) 63.
Schreiber, Int. J. Bifurcation and Chaos 5 (1995) 349.
"""

from __future__ import annotations

import numba
import numpy as np

from ..embedding import check_embedding
from ..errors import LagspaceError

# Average number of vectors per occupied box that the grid aims at.
_POINTS_PER_BOX = 2.0
# Guard against rounding when comparing a ring's geometric bound with a distance.
_SLACK = 1.0 - 1e-9


@numba.njit(cache=True, nogil=True)
def _extent(x, dimension, delay, n):
    """(min, max) of the first and of the last coordinate over vectors 0..n-1
    (the last is taken as 0 for m = 1, where the grid is one row of boxes)."""
    last = (dimension - 1) * delay
    lo_a, hi_a, lo_b, hi_b = np.inf, -np.inf, 0.0, 0.0
    for i in range(n):
        lo_a = min(lo_a, x[i])
        hi_a = max(hi_a, x[i])
    if dimension > 1:
        lo_b, hi_b = np.inf, -np.inf
        for i in range(n):
            lo_b = min(lo_b, x[i + last])
            hi_b = max(hi_b, x[i + last])
    return lo_a, hi_a, lo_b, hi_b


@numba.njit(cache=True, nogil=True, inline="always")
def _second(x, i, dimension, delay):
    """The grid's second coordinate of vector i: its last, or 0 when m = 1."""
    return x[i + (dimension - 1) * delay] if dimension > 1 else 0.0


@numba.njit(cache=True, nogil=True)
def _grid(x, dimension, delay, n, min_width):
    """Sort vectors 0..n-1 into square boxes on their (first, last) coordinate.

    The box width starts at the value that would put ``_POINTS_PER_BOX``
    vectors in each box of a filled square and is halved (not below
    ``min_width``) while occupied boxes hold more than twice that and halving
    still splits them, so thin sets (maps, m=1) get small boxes too. Boxes are
    stored sparsely: ``keys`` is the sorted box number ``a * boxes_b + b`` of
    the vectors ``order``.
    """
    lo_a, hi_a, lo_b, hi_b = _extent(x, dimension, delay, n)
    span = max(hi_a - lo_a, hi_b - lo_b)
    boxes = n / _POINTS_PER_BOX if dimension == 1 else np.sqrt(n / _POINTS_PER_BOX)
    width = span / max(boxes, 1.0) if span > 0.0 else 1.0
    width = max(width, min_width)
    keys = np.empty(n, dtype=np.int64)
    previous = 0
    while True:
        boxes_a = int((hi_a - lo_a) / width) + 1
        boxes_b = int((hi_b - lo_b) / width) + 1
        for i in range(n):
            a = min(int((x[i] - lo_a) / width), boxes_a - 1)
            b = min(int((_second(x, i, dimension, delay) - lo_b) / width), boxes_b - 1)
            keys[i] = a * boxes_b + b
        sorted_keys = np.sort(keys)
        occupied = 1
        for k in range(1, n):
            occupied += sorted_keys[k] != sorted_keys[k - 1]
        # stop when boxes are small enough, or halving no longer splits them (duplicates)
        if (n <= 2.0 * _POINTS_PER_BOX * occupied or width / 2 < min_width or occupied < 1.2 * previous
                or span / width > 1e9):
            break
        previous = occupied
        width /= 2
    order = np.argsort(keys)
    return lo_a, lo_b, width, boxes_a, boxes_b, keys[order], order


@numba.njit(cache=True, nogil=True, inline="always")
def _ring_segments(qb, ring, boxes_b):
    """Number of segments of a ring to visit: 1 for ring 0, else its two rows
    plus, unless both columns lie outside the grid, one box per side row."""
    if ring == 0:
        return 1
    return 2 if (qb - ring < 0 and qb + ring >= boxes_b) else 4 * ring


@numba.njit(cache=True, nogil=True, inline="always")
def _ring_segment(qa, qb, ring, s):
    """Segment ``s`` (row a, columns b0..b1) of the square ring of boxes at
    Chebyshev distance ``ring`` around box (qa, qb): two full rows, then the
    side boxes row by row."""
    if ring == 0:
        return qa, qb, qb
    if s < 2:
        return (qa - ring if s == 0 else qa + ring), qb - ring, qb + ring
    s -= 2
    return qa - ring + 1 + s // 2, (qb - ring if s % 2 == 0 else qb + ring), (qb - ring if s % 2 == 0 else qb + ring)


@numba.njit(cache=True, nogil=True, inline="always")
def _segment_range(sorted_keys, boxes_a, boxes_b, a, b0, b1):
    """Positions [start, stop) in ``order`` of the vectors in boxes (a, b0..b1)."""
    if a < 0 or a >= boxes_a:
        return 0, 0
    b0, b1 = max(b0, 0), min(b1, boxes_b - 1)
    if b0 > b1:
        return 0, 0
    start = np.searchsorted(sorted_keys, a * boxes_b + b0)
    stop = np.searchsorted(sorted_keys, a * boxes_b + b1, side="right")
    return start, stop


@numba.njit(cache=True, nogil=True, inline="always")
def _outside(qa, qb, ring, boxes_a, boxes_b):
    """True when the ring lies wholly outside the grid (nothing left to visit)."""
    return qa - ring < 0 and qa + ring >= boxes_a and qb - ring < 0 and qb + ring >= boxes_b


@numba.njit(cache=True, nogil=True, inline="always")
def _box_of(x, i, dimension, delay, lo_a, lo_b, width, boxes_a, boxes_b):
    qa = min(max(int(np.floor((x[i] - lo_a) / width)), 0), boxes_a - 1)
    qb = min(max(int(np.floor((_second(x, i, dimension, delay) - lo_b) / width)), 0), boxes_b - 1)
    return qa, qb


@numba.njit(cache=True, nogil=True, inline="always")
def _distance(x, i, j, dimension, delay, limit):
    """Max-norm distance of vectors i and j; stops early once it exceeds ``limit``."""
    d = 0.0
    for k in range(dimension):
        diff = abs(x[i + k * delay] - x[j + k * delay])
        if diff > d:
            d = diff
            if d > limit:
                break
    return d


@numba.njit(cache=True, nogil=True, parallel=True)
def nearest_neighbours_kernel(x, dimension, delay, theiler, n, exclude_zero):
    """Nearest neighbour of each of the first ``n`` delay vectors (see module doc).

    Returns (index int64[n], distance float64[n]); index -1 and distance inf
    where no admissible neighbour exists.
    """
    lo_a, lo_b, width, boxes_a, boxes_b, keys, order = _grid(x, dimension, delay, n, 0.0)
    index = np.full(n, -1, dtype=np.int64)
    distance = np.full(n, np.inf)
    for q in numba.prange(n):
        i = order[q]  # queries in box order, so that neighbouring queries share candidates in cache
        qa, qb = _box_of(x, i, dimension, delay, lo_a, lo_b, width, boxes_a, boxes_b)
        best, best_j = np.inf, -1
        ring = 0
        while not (ring > 0 and (ring - 1) * width * _SLACK > best) and not _outside(qa, qb, ring, boxes_a, boxes_b):
            for s in range(_ring_segments(qb, ring, boxes_b)):
                a, b0, b1 = _ring_segment(qa, qb, ring, s)
                start, stop = _segment_range(keys, boxes_a, boxes_b, a, b0, b1)
                for p in range(start, stop):
                    j = order[p]
                    if abs(i - j) <= theiler:
                        continue
                    d = _distance(x, i, j, dimension, delay, best)
                    if d > best or (exclude_zero and d == 0.0):
                        continue
                    if d < best or j < best_j:
                        best, best_j = d, j
            ring += 1
        index[i] = best_j
        distance[i] = best
    return index, distance


@numba.njit(cache=True, nogil=True)
def _within(x, dimension, delay, theiler, radius, i, grid, out, offset):
    """Count the vectors closer than ``radius`` to vector i; write their
    indices from ``out[offset]`` on unless ``out`` is empty."""
    lo_a, lo_b, width, boxes_a, boxes_b, keys, order = grid
    qa, qb = _box_of(x, i, dimension, delay, lo_a, lo_b, width, boxes_a, boxes_b)
    count = 0
    ring = 0
    while (ring == 0 or (ring - 1) * width * _SLACK < radius) and not _outside(qa, qb, ring, boxes_a, boxes_b):
        for s in range(_ring_segments(qb, ring, boxes_b)):
            a, b0, b1 = _ring_segment(qa, qb, ring, s)
            start, stop = _segment_range(keys, boxes_a, boxes_b, a, b0, b1)
            for p in range(start, stop):
                j = order[p]
                if abs(i - j) > theiler and _distance(x, i, j, dimension, delay, radius) < radius:
                    if out.size:
                        out[offset + count] = j
                    count += 1
        ring += 1
    return count


@numba.njit(cache=True, nogil=True, parallel=True)
def neighbours_within_kernel(x, dimension, delay, theiler, n, radius, points):
    """All vectors among the first ``n`` closer than ``radius`` to each vector in
    ``points`` (Theiler exclusion applies). Returns CSR (indptr, indices), each
    row sorted by index."""
    grid = _grid(x, dimension, delay, n, 1.0001 * radius)
    counts = np.zeros(points.size, dtype=np.int64)
    empty = np.empty(0, dtype=np.int64)
    for r in numba.prange(points.size):
        counts[r] = _within(x, dimension, delay, theiler, radius, points[r], grid, empty, 0)
    indptr = np.zeros(points.size + 1, dtype=np.int64)
    for r in range(points.size):
        indptr[r + 1] = indptr[r] + counts[r]
    indices = np.empty(indptr[-1], dtype=np.int64)
    for r in numba.prange(points.size):
        _within(x, dimension, delay, theiler, radius, points[r], grid, indices, indptr[r])
        indices[indptr[r]:indptr[r + 1]].sort()
    return indptr, indices


def nearest_neighbours(x, dimension, delay, theiler, n_vectors=None, exclude_zero=False):
    """Nearest neighbour (max norm) of each of the first ``n_vectors`` delay vectors.

    Parameters
    ----------
    x : float64 1-D array
    dimension, delay : int, embedding dimension m >= 1 and delay tau >= 1
    theiler : int >= 0, candidates with ``|i - j| <= theiler`` are excluded
    n_vectors : int, optional, restrict queries and candidates to vectors
        ``0..n_vectors-1`` (default: all ``len(x) - (m-1) tau`` vectors)
    exclude_zero : bool, skip candidates at distance exactly 0 (duplicates)

    Returns
    -------
    index : int64[n], smallest index among the nearest (-1 if none)
    distance : float64[n] (inf if none)

    References
    ----------
    Schreiber, Int. J. Bifurcation and Chaos 5 (1995) 349.
    """
    x, dimension, delay, theiler, n = _checked(x, dimension, delay, theiler, n_vectors)
    return nearest_neighbours_kernel(x, dimension, delay, theiler, n, bool(exclude_zero))


def neighbours_within(x, dimension, delay, theiler, radius, points=None, n_vectors=None):
    """Neighbours closer than ``radius`` (max norm) of the delay vectors in ``points``.

    Returns CSR arrays ``(indptr, indices)``: the neighbours of ``points[r]`` are
    ``indices[indptr[r]:indptr[r+1]]``, sorted by index. Candidates are vectors
    ``0..n_vectors-1`` with ``|i - j| > theiler``; ``points`` default to those.

    References
    ----------
    Grassberger, Phys. Lett. A 148 (1990) 63.
    """
    x, dimension, delay, theiler, n = _checked(x, dimension, delay, theiler, n_vectors)
    points = np.arange(n, dtype=np.int64) if points is None else np.ascontiguousarray(points, dtype=np.int64)
    available = x.size - (dimension - 1) * delay
    if points.ndim != 1 or (points.size and (points.min() < 0 or points.max() >= available)):
        raise LagspaceError(f"points must be indices of delay vectors, 0 to {available - 1}")
    if not radius > 0:
        raise LagspaceError(f"radius must be a positive distance, got {radius!r}")
    return neighbours_within_kernel(x, dimension, delay, theiler, n, float(radius), points)


def _checked(x, dimension, delay, theiler, n_vectors):
    """Validated (x, dimension, delay, theiler, n) for the kernels."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    if x.ndim != 1 or not np.all(np.isfinite(x)):
        raise LagspaceError("neighbour search needs a 1-D series of finite numbers; fill or crop gaps first")
    check_embedding(x.size, dimension, delay, minimum=2)
    if isinstance(theiler, bool) or int(theiler) != theiler or theiler < 0:
        raise LagspaceError(f"theiler window must be a whole number of samples >= 0, got {theiler!r}")
    n = _vector_count(x, dimension, delay, n_vectors)
    if n < 2:
        raise LagspaceError(f"n_vectors must be at least 2, got {n_vectors!r}")
    return x, int(dimension), int(delay), int(theiler), n


def _vector_count(x, dimension, delay, n_vectors):
    available = x.size - (int(dimension) - 1) * int(delay)
    return available if n_vectors is None else min(int(n_vectors), available)


def _distance_matrix_reference(x, dimension, delay, n):
    vectors = np.lib.stride_tricks.sliding_window_view(x, (dimension - 1) * delay + 1)[:n, ::delay]
    return np.abs(vectors[:, None, :] - vectors[None, :, :]).max(axis=2)


def nearest_neighbours_reference(x, dimension, delay, theiler, n_vectors=None, exclude_zero=False):
    """Plain-numpy brute force twin of :func:`nearest_neighbours` (tests only)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    n = _vector_count(x, dimension, delay, n_vectors)
    dist = _distance_matrix_reference(x, dimension, delay, n)
    gap = np.abs(np.arange(n)[:, None] - np.arange(n)[None, :])
    dist[gap <= theiler] = np.inf
    if exclude_zero:
        dist[dist == 0] = np.inf
    index = np.argmin(dist, axis=1).astype(np.int64) if n else np.empty(0, np.int64)
    distance = dist[np.arange(n), index] if n else np.empty(0)
    index[~np.isfinite(distance)] = -1
    return index, distance


def neighbours_within_reference(x, dimension, delay, theiler, radius, points=None, n_vectors=None):
    """Plain-numpy brute force twin of :func:`neighbours_within` (tests only)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    n = _vector_count(x, dimension, delay, n_vectors)
    points = np.arange(n) if points is None else np.asarray(points)
    dist = _distance_matrix_reference(x, dimension, delay, max(n, points.max(initial=-1) + 1))[points, :n]
    gap = np.abs(points[:, None] - np.arange(n)[None, :])
    hits = (dist < radius) & (gap > theiler)
    indptr = np.concatenate([[0], np.cumsum(hits.sum(axis=1))]).astype(np.int64)
    return indptr, np.nonzero(hits)[1].astype(np.int64)


__all__ = ["nearest_neighbours", "nearest_neighbours_reference", "neighbours_within",
           "neighbours_within_reference"]
