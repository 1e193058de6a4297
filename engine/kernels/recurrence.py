"""Kernels for recurrence plots: pair distances, the sparse matrix, line lengths.

Delay vector ``i`` is ``[x[i], x[i+tau], ..., x[i+(m-1)tau]]``; distances are in
the maximum norm. The recurrence matrix holds ``R[i, j] = 1`` for
``d(i, j) <= radius`` and ``|i - j| > theiler`` among the first ``n`` vectors;
it is symmetric, stored as CSR (``indptr``, ``indices``) with sorted rows.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True, inline="always")
def _distance(x, i, j, dimension, delay):
    d = 0.0
    for c in range(dimension):
        diff = abs(x[i + c * delay] - x[j + c * delay])
        if diff > d:
            d = diff
    return d


@numba.njit(cache=True, nogil=True)
def pair_distances(x, dimension, delay, rows, cols):
    """Max-norm distances between vectors ``rows[k]`` and ``cols[k]``."""
    out = np.empty(rows.size)
    for k in range(rows.size):
        out[k] = _distance(x, rows[k], cols[k], dimension, delay)
    return out


@numba.njit(cache=True, nogil=True, parallel=True)
def recurrence_matrix(x, dimension, delay, n, theiler, radius):
    """CSR arrays ``(indptr, indices)`` of the recurrence matrix (module docstring)."""
    counts = np.zeros(n + 1, dtype=np.int64)
    for i in numba.prange(n):
        c = 0
        for j in range(n):
            if abs(i - j) > theiler and _distance(x, i, j, dimension, delay) <= radius:
                c += 1
        counts[i + 1] = c
    indptr = np.cumsum(counts)
    indices = np.empty(indptr[n], dtype=np.int32)
    for i in numba.prange(n):
        k = indptr[i]
        for j in range(n):
            if abs(i - j) > theiler and _distance(x, i, j, dimension, delay) <= radius:
                indices[k] = j
                k += 1
    return indptr, indices


@numba.njit(cache=True, nogil=True)
def line_histograms(indptr, indices, n, theiler):
    """Histograms (index = length) of diagonal and vertical lines.

    Diagonal lines are counted above the main diagonal only (offsets
    ``> theiler``; the matrix is symmetric, so each line is counted once);
    vertical lines in every column of the whole matrix. A line is a maximal run
    of consecutive recurrences.
    """
    diagonal = np.zeros(n + 1, dtype=np.int64)
    vertical = np.zeros(n + 1, dtype=np.int64)
    last_row = np.full(n, -2, dtype=np.int64)  # by offset j - i: last row seen
    run = np.zeros(n, dtype=np.int64)
    for i in range(n):
        previous = -2
        length = 0
        for k in range(indptr[i], indptr[i + 1]):
            j = indices[k]
            # vertical runs: column i is row i by symmetry
            if j == previous + 1:
                length += 1
            else:
                if length > 0:
                    vertical[length] += 1
                length = 1
            previous = j
            d = j - i
            if d > theiler:
                if last_row[d] == i - 1:
                    run[d] += 1
                else:
                    if run[d] > 0:
                        diagonal[run[d]] += 1
                    run[d] = 1
                last_row[d] = i
        if length > 0:
            vertical[length] += 1
    for d in range(n):
        if run[d] > 0:
            diagonal[run[d]] += 1
    return diagonal, vertical


def _runs(values: np.ndarray) -> np.ndarray:
    """Lengths of the runs of True in a 1-D boolean array."""
    padded = np.concatenate(([0], values.astype(np.int8), [0]))
    edges = np.flatnonzero(np.diff(padded))
    return edges[1::2] - edges[::2]


def recurrence_matrix_reference(x, dimension, delay, n, theiler, radius):
    """Dense boolean twin of :func:`recurrence_matrix` (tests only)."""
    vectors = np.stack([x[c * delay : c * delay + n] for c in range(dimension)], axis=1)
    dist = np.abs(vectors[:, None, :] - vectors[None, :, :]).max(axis=2)
    offset = np.abs(np.arange(n)[:, None] - np.arange(n)[None, :])
    return (dist <= radius) & (offset > theiler)


def line_histograms_reference(dense, theiler):
    """Plain-numpy twin of :func:`line_histograms` on a dense symmetric matrix (tests only)."""
    n = dense.shape[0]
    diagonal = np.zeros(n + 1, dtype=np.int64)
    vertical = np.zeros(n + 1, dtype=np.int64)
    for d in range(theiler + 1, n):
        np.add.at(diagonal, _runs(np.diagonal(dense, d)), 1)
    for j in range(n):
        np.add.at(vertical, _runs(dense[:, j]), 1)
    return diagonal, vertical
