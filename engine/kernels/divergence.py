"""Average logarithmic divergence of neighbouring delay vectors (max norm).

``rosenstein_kernel`` follows each vector's nearest neighbour; ``kantz_kernel``
averages the distance over all neighbours within a radius before taking the
logarithm. Sums over vectors run in a fixed number of chunks added in a fixed
order, so results do not depend on the number of threads.

References
----------
Rosenstein, Collins & De Luca, Physica D 65 (1993) 117.
Kantz, Phys. Lett. A 185 (1994) 77.
"""

from __future__ import annotations

import numba
import numpy as np

_CHUNKS = 64
_GROUP = 8  # pairs whose (scaled) distances are multiplied before one logarithm


@numba.njit(cache=True, nogil=True)
def _follow(x, i, j, dimension, delay, steps, e, d):
    """d[k] = max-norm distance of vectors i+k and j+k, k = 0..steps, through the
    buffer e[t] = |x[i+t] - x[j+t]| (each sample difference is taken once)."""
    for t in range(e.size):
        e[t] = abs(x[i + t] - x[j + t])
    d[:] = e[:steps + 1]
    for c in range(1, dimension):
        offset = c * delay
        for k in range(steps + 1):
            d[k] = max(d[k], e[k + offset])


@numba.njit(cache=True, nogil=True, parallel=True)
def rosenstein_kernel(x, dimension, delay, partner, steps, scale):
    """Sum of ln d_k(i, partner[i]) over i and its count, for k = 0..steps.

    ``d_k(i, j)`` is the max-norm distance of vectors i+k and j+k; pairs with
    ``partner[i] < 0`` and zero distances are left out. Logarithms are taken
    of products of ``_GROUP`` distances divided by ``scale`` (a typical
    distance, e.g. the series' standard deviation, so products stay far from
    under- and overflow); ln(scale) is added back per term.
    """
    n = partner.size
    span = steps + (dimension - 1) * delay + 1
    sums = np.zeros((_CHUNKS, steps + 1))
    counts = np.zeros((_CHUNKS, steps + 1), dtype=np.int64)
    for c in numba.prange(_CHUNKS):
        e, d, product = np.empty(span), np.empty(steps + 1), np.ones(steps + 1)
        grouped = 0
        for i in range(c * n // _CHUNKS, (c + 1) * n // _CHUNKS):
            j = partner[i]
            if j < 0:
                continue
            _follow(x, i, j, dimension, delay, steps, e, d)
            for k in range(steps + 1):
                if d[k] > 0.0:
                    product[k] *= d[k] / scale
                    counts[c, k] += 1
            grouped += 1
            if grouped == _GROUP:
                for k in range(steps + 1):
                    sums[c, k] += np.log(product[k])
                product[:] = 1.0
                grouped = 0
        for k in range(steps + 1):
            sums[c, k] += np.log(product[k])
    total, number = np.zeros(steps + 1), np.zeros(steps + 1, dtype=np.int64)
    for c in range(_CHUNKS):
        total += sums[c]
        number += counts[c]
    return total + number * np.log(scale), number


@numba.njit(cache=True, nogil=True, parallel=True)
def kantz_kernel(x, dimension, delay, points, indptr, indices, steps):
    """ln of the mean distance after k steps from ``points[r]`` to its neighbours
    ``indices[indptr[r]:indptr[r+1]]``; array (points, steps + 1), NaN where a
    point has no neighbours or the mean distance is 0."""
    out = np.full((points.size, steps + 1), np.nan)
    span = steps + (dimension - 1) * delay + 1
    for c in numba.prange(_CHUNKS):
        e, d, total = np.empty(span), np.empty(steps + 1), np.empty(steps + 1)
        for r in range(c * points.size // _CHUNKS, (c + 1) * points.size // _CHUNKS):
            count = indptr[r + 1] - indptr[r]
            if count == 0:
                continue
            total[:] = 0.0
            for p in range(indptr[r], indptr[r + 1]):
                _follow(x, points[r], indices[p], dimension, delay, steps, e, d)
                total += d
            for k in range(steps + 1):
                if total[k] > 0.0:
                    out[r, k] = np.log(total[k] / count)
    return out


def _distances_reference(x, dimension, delay, i, j, k):
    return np.max([np.abs(x[i + k + c * delay] - x[j + k + c * delay]) for c in range(dimension)], axis=0)


def rosenstein_reference(x, dimension, delay, partner, steps):
    """Plain-numpy twin of :func:`rosenstein_kernel` (tests only)."""
    i = np.flatnonzero(partner >= 0)
    total, number = np.zeros(steps + 1), np.zeros(steps + 1, dtype=np.int64)
    for k in range(steps + 1):
        d = _distances_reference(x, dimension, delay, i, partner[i], k)
        total[k], number[k] = np.log(d[d > 0]).sum(), np.count_nonzero(d > 0)
    return total, number


def kantz_reference(x, dimension, delay, points, indptr, indices, steps):
    """Plain-numpy twin of :func:`kantz_kernel` (tests only)."""
    out = np.full((points.size, steps + 1), np.nan)
    for r, i in enumerate(points):
        js = indices[indptr[r]:indptr[r + 1]]
        if js.size:
            for k in range(steps + 1):
                mean = _distances_reference(x, dimension, delay, i, js, k).mean()
                if mean > 0:
                    out[r, k] = np.log(mean)
    return out


__all__ = ["rosenstein_kernel", "kantz_kernel", "rosenstein_reference", "kantz_reference"]
