"""Nearest neighbours and fixed-radius neighbours among delay vectors (max norm).

Delay vector ``i`` of series ``x`` at (dimension m, delay tau) is
``[x[i], x[i+tau], ..., x[i+(m-1)tau]]``; only the first ``n`` vectors take part.
Pairs with ``|i - j| <= theiler`` are excluded (so ``theiler=0`` excludes only
``i`` itself; Theiler 1986). Distances are in the maximum norm.

The search uses a k-d tree (Bentley 1975; Friedman, Bentley & Finkel 1977)
built on the series itself: a permutation of vector indices split at the
median of the widest coordinate, so memory stays O(N) and no vector is
copied. A query descends to the nearer side first and skips a side once the
distance to its splitting planes (a lower bound in the max norm) exceeds the
best distance found. Ties go to the smallest index, so results match the
brute-force reference exactly.

References
----------
Theiler, Phys. Rev. A 34 (1986) 2427.
Bentley, Commun. ACM 18 (1975) 509.
Friedman, Bentley & Finkel, ACM Trans. Math. Software 3 (1977) 209.
"""

from __future__ import annotations

import numba
import numpy as np

from ..embedding import check_embedding
from ..errors import LagspaceError

_LEAF = 12  # at most this many vectors in a leaf
_STACK = 256  # the tree is balanced, so a query never holds more than ~log2(N) pending nodes
_CHUNKS = 256  # queries run in this many blocks (threads take blocks)


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


@numba.njit(cache=True, nogil=True)
def _select(x, perm, lo, hi, nth, offset):
    """Partially sort perm[lo:hi] by key ``x[perm + offset]`` so that position
    ``nth`` holds its sorted key, no larger keys before and no smaller after
    (Hoare's selection with a median-of-three pivot)."""
    while hi - lo > 1:
        a, b, c = x[perm[lo] + offset], x[perm[(lo + hi) // 2] + offset], x[perm[hi - 1] + offset]
        if a < b:
            pivot = b if b < c else (c if a < c else a)
        else:
            pivot = a if a < c else (c if b < c else b)
        i, j = lo, hi - 1
        while i <= j:
            while x[perm[i] + offset] < pivot:
                i += 1
            while x[perm[j] + offset] > pivot:
                j -= 1
            if i <= j:
                perm[i], perm[j] = perm[j], perm[i]
                i += 1
                j -= 1
        if nth <= j:
            hi = j + 1
        elif nth >= i:
            lo = i
        else:
            return


@numba.njit(cache=True, nogil=True)
def _tree(x, dimension, delay, n):
    """k-d tree over vectors 0..n-1.

    Returns (perm, start, stop, left, axis, split): node k holds vectors
    ``perm[start[k]:stop[k]]``; an inner node's children are ``left[k]`` and
    ``left[k] + 1`` (-1 for a leaf), holding coordinate ``axis[k]`` <= and >=
    ``split[k]`` respectively.
    """
    perm = np.arange(n, dtype=np.int64)
    cap = 4 * (n // _LEAF + 1) + 8
    start, stop = np.empty(cap, np.int64), np.empty(cap, np.int64)
    left, axis, split = np.full(cap, -1, np.int64), np.zeros(cap, np.int64), np.zeros(cap)
    start[0], stop[0] = 0, n
    count, todo, top = 1, np.empty(cap, np.int64), 1
    todo[0] = 0
    while top > 0:
        top -= 1
        node = todo[top]
        s, e = start[node], stop[node]
        widest, spread = 0, -1.0
        for c in range(dimension):
            a, b = np.inf, -np.inf
            for p in range(s, e):
                v = x[perm[p] + c * delay]
                a, b = min(a, v), max(b, v)
            if b - a > spread:
                widest, spread = c, b - a
        if e - s <= _LEAF or spread == 0.0:
            continue
        mid = (s + e) // 2
        _select(x, perm, s, e, mid, widest * delay)
        axis[node], split[node], left[node] = widest, x[perm[mid] + widest * delay], count
        start[count], stop[count], start[count + 1], stop[count + 1] = s, mid, mid, e
        todo[top], todo[top + 1] = count, count + 1
        top, count = top + 2, count + 2
    return perm, start[:count].copy(), stop[:count].copy(), left[:count].copy(), axis[:count].copy(), \
        split[:count].copy()


@numba.njit(cache=True, nogil=True, parallel=True)
def nearest_neighbours_kernel(x, dimension, delay, theiler, n, exclude_zero):
    """Nearest neighbour of each of the first ``n`` delay vectors (see module doc).

    Returns (index int64[n], distance float64[n]); index -1 and distance inf
    where no admissible neighbour exists.
    """
    perm, start, stop, left, axis, split = _tree(x, dimension, delay, n)
    index = np.full(n, -1, dtype=np.int64)
    distance = np.full(n, np.inf)
    for c in numba.prange(_CHUNKS):
        stack, bounds = np.empty(_STACK, np.int64), np.empty(_STACK)
        for q in range(c * n // _CHUNKS, (c + 1) * n // _CHUNKS):
            i = perm[q]  # queries in tree order, so neighbouring queries share cached candidates
            best, best_j = np.inf, -1
            stack[0], bounds[0], top = 0, 0.0, 1
            while top > 0:
                top -= 1
                node, bound = stack[top], bounds[top]
                if bound > best:  # equal bounds are visited: a tie with a smaller index may wait there
                    continue
                child = left[node]
                if child < 0:
                    for p in range(start[node], stop[node]):
                        j = perm[p]
                        if abs(i - j) <= theiler:
                            continue
                        d = _distance(x, i, j, dimension, delay, best)
                        if d > best or (exclude_zero and d == 0.0):
                            continue
                        if d < best or j < best_j:
                            best, best_j = d, j
                    continue
                gap = x[i + axis[node] * delay] - split[node]
                near, far = (child, child + 1) if gap < 0 else (child + 1, child)
                if max(bound, abs(gap)) <= best:
                    stack[top], bounds[top], top = far, max(bound, abs(gap)), top + 1
                stack[top], bounds[top], top = near, bound, top + 1
            index[i], distance[i] = best_j, best
    return index, distance


@numba.njit(cache=True, nogil=True)
def _within(x, dimension, delay, theiler, radius, i, tree, stack, bounds, out, offset):
    """Count the vectors closer than ``radius`` to vector i; write their
    indices from ``out[offset]`` on unless ``out`` is empty."""
    perm, start, stop, left, axis, split = tree
    count = 0
    stack[0], bounds[0], top = 0, 0.0, 1
    while top > 0:
        top -= 1
        node, bound = stack[top], bounds[top]
        child = left[node]
        if child < 0:
            for p in range(start[node], stop[node]):
                j = perm[p]
                if abs(i - j) > theiler and _distance(x, i, j, dimension, delay, radius) < radius:
                    if out.size:
                        out[offset + count] = j
                    count += 1
            continue
        gap = x[i + axis[node] * delay] - split[node]
        near, far = (child, child + 1) if gap < 0 else (child + 1, child)
        if max(bound, abs(gap)) < radius:
            stack[top], bounds[top], top = far, max(bound, abs(gap)), top + 1
        stack[top], bounds[top], top = near, bound, top + 1
    return count


@numba.njit(cache=True, nogil=True, parallel=True)
def neighbours_within_kernel(x, dimension, delay, theiler, n, radius, points):
    """All vectors among the first ``n`` closer than ``radius`` to each vector in
    ``points`` (Theiler exclusion applies). Returns CSR (indptr, indices), each
    row sorted by index."""
    tree = _tree(x, dimension, delay, n)
    empty = np.empty(0, dtype=np.int64)
    counts = np.zeros(points.size, dtype=np.int64)
    size = points.size
    for c in numba.prange(_CHUNKS):
        stack, bounds = np.empty(_STACK, np.int64), np.empty(_STACK)
        for r in range(c * size // _CHUNKS, (c + 1) * size // _CHUNKS):
            counts[r] = _within(x, dimension, delay, theiler, radius, points[r], tree, stack, bounds, empty, 0)
    indptr = np.zeros(size + 1, dtype=np.int64)
    for r in range(size):
        indptr[r + 1] = indptr[r] + counts[r]
    indices = np.empty(indptr[-1], dtype=np.int64)
    for c in numba.prange(_CHUNKS):
        stack, bounds = np.empty(_STACK, np.int64), np.empty(_STACK)
        for r in range(c * size // _CHUNKS, (c + 1) * size // _CHUNKS):
            _within(x, dimension, delay, theiler, radius, points[r], tree, stack, bounds, indices, indptr[r])
            indices[indptr[r]:indptr[r + 1]].sort()
    return indptr, indices


@numba.njit(cache=True, nogil=True)
def radius_for_count_kernel(x, dimension, delay, theiler, n, points, target, low, high):
    """Geometric bisection (to 10 %) for the radius at which the median of
    ``points`` has at least ``target`` neighbours closer than it."""
    tree = _tree(x, dimension, delay, n)
    empty = np.empty(0, dtype=np.int64)
    stack, bounds = np.empty(_STACK, np.int64), np.empty(_STACK)
    counts = np.empty(points.size)
    while high > 1.1 * low:
        middle = np.sqrt(low * high)
        for r in range(points.size):
            counts[r] = _within(x, dimension, delay, theiler, middle, points[r], tree, stack, bounds, empty, 0)
        if np.median(counts) < target:
            low = middle
        else:
            high = middle
    return high


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
    Friedman, Bentley & Finkel, ACM Trans. Math. Software 3 (1977) 209.
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
    Bentley, Commun. ACM 18 (1975) 509.
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
