"""Number of occupied boxes of a grid on the delay vectors.

The grid index of every sample is computed once (``q = floor((x - origin) / eps)``);
a delay vector's box is then the row ``(q[i], q[i+tau], ..., q[i+(m-1)tau])``,
never copied: the kernel keeps an open-addressing hash table of row starts
and compares rows in place, so memory stays O(N).
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def _count_distinct_rows(q, dimension, delay, n_vectors):
    capacity = 1
    while capacity < 2 * n_vectors:
        capacity *= 2
    table = np.full(capacity, -1, dtype=np.int64)
    mask = np.uint64(capacity - 1)
    occupied = 0
    for i in range(n_vectors):
        h = np.uint64(14695981039346656037)
        for m in range(dimension):
            h = (h ^ np.uint64(q[i + m * delay])) * np.uint64(1099511628211)
        h ^= h >> np.uint64(29)
        slot = h & mask
        while True:
            s = table[slot]
            if s < 0:
                table[slot] = i
                occupied += 1
                break
            same = True
            for m in range(dimension):
                if q[s + m * delay] != q[i + m * delay]:
                    same = False
                    break
            if same:
                break
            slot = (slot + np.uint64(1)) & mask
    return occupied


def box_indices(x, origin, extent, n_boxes):
    """Grid index (0..n_boxes-1) of every sample on n_boxes boxes that tile [origin, origin + extent]."""
    q = np.floor((np.asarray(x, dtype=np.float64) - origin) * (n_boxes / extent)).astype(np.int64)
    return np.clip(q, 0, n_boxes - 1)


def occupied_boxes(q, dimension, delay):
    """Number of distinct delay vectors of the integer series ``q`` (occupied boxes)."""
    q = np.ascontiguousarray(q, dtype=np.int64)
    return int(_count_distinct_rows(q, int(dimension), int(delay), q.size - (dimension - 1) * delay))


def occupied_boxes_reference(q, dimension, delay):
    """Plain-numpy twin of :func:`occupied_boxes`, for tests."""
    q = np.asarray(q, dtype=np.int64)
    n = q.size - (dimension - 1) * delay
    rows = np.stack([q[m * delay:m * delay + n] for m in range(dimension)], axis=1)
    return int(np.unique(rows, axis=0).shape[0])
