"""Kernel for nonlinear prediction: the locally constant predictor in delay space.

Delay vector ``i`` is ``[x[i], x[i+tau], ..., x[i+(m-1)tau]]``; its future is
``x[i + (m-1)tau + horizon]``. Only vectors whose future lies inside the series
are candidates. For each reference vector the ``k`` nearest candidates in the
maximum norm, leaving out ``|i - j| <= theiler`` (so always ``j = i``), are
found by brute force; ties go to the smaller index. The prediction is the mean
of their futures, summed in order of increasing distance.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def locally_constant_predictions(x, dimension, delay, horizon, theiler, neighbours, points):
    """Predicted futures of the reference vectors ``points`` (see module docstring)."""
    last = (dimension - 1) * delay
    n = x.size - last - horizon
    out = np.empty(points.size)
    best_d = np.empty(neighbours)
    best_j = np.empty(neighbours, dtype=np.int64)
    for p in range(points.size):
        i = points[p]
        count = 0
        for j in range(n):
            if abs(i - j) <= theiler:
                continue
            limit = best_d[count - 1] if count == neighbours else np.inf
            d = 0.0
            for c in range(dimension):
                diff = abs(x[i + c * delay] - x[j + c * delay])
                if diff > d:
                    d = diff
                    if d >= limit:
                        break
            if d >= limit:
                continue
            if count < neighbours:
                count += 1
            pos = count - 1
            while pos > 0 and best_d[pos - 1] > d:
                best_d[pos] = best_d[pos - 1]
                best_j[pos] = best_j[pos - 1]
                pos -= 1
            best_d[pos] = d
            best_j[pos] = j
        total = 0.0
        for q in range(neighbours):
            total += x[best_j[q] + last + horizon]
        out[p] = total / neighbours
    return out


def locally_constant_predictions_reference(x, dimension, delay, horizon, theiler, neighbours, points):
    """Plain-numpy twin of :func:`locally_constant_predictions` (tests only)."""
    last = (dimension - 1) * delay
    n = x.size - last - horizon
    vectors = np.stack([x[c * delay : c * delay + n] for c in range(dimension)], axis=1)
    out = np.empty(len(points))
    for p, i in enumerate(points):
        d = np.abs(vectors - x[i : i + last + 1 : delay]).max(axis=1)
        d[max(0, i - theiler) : i + theiler + 1] = np.inf
        nearest = np.argsort(d, kind="stable")[:neighbours]
        total = 0.0
        for j in nearest:
            total += x[j + last + horizon]
        out[p] = total / neighbours
    return out
