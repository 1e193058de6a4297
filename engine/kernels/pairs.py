"""Exact pair counts for correlation sums at every embedding dimension in one pass.

For a pair of delay vectors (i, j) the max-norm distance at dimension m is
``d_m = max(d_{m-1}, |x[i+(m-1)tau] - x[j+(m-1)tau]|)``, so it only grows with m.
One pass over the pairs therefore gives the counts of all dimensions 1..M: a
pair is binned at m = 1, its bin moves only when d_m crosses the upper edge of
the current bin, and it is dropped as soon as d_m exceeds the largest radius
(larger m can only make it larger).

Convention (the same as ``scipy.spatial.cKDTree.count_neighbors`` with
``p=inf``): ``counts[m-1, k]`` is the number of pairs with ``d_m <= radii[k]``.

All dimensions use the same pairs: the first ``N_M = N - (M-1) tau`` vectors,
the ones that exist at the largest dimension M. Then C_m and C_{m+1} are sums
over the same pairs, which the ratio C_m / C_{m+1} of the correlation entropy
and the comparison of local slopes across m need; the cost is (M-1) tau
vectors left out at the small dimensions.

References
----------
Grassberger & Procaccia, Physica D 9 (1983) 189 (correlation sum).
Theiler, Phys. Rev. A 34 (1986) 2427 (excluding pairs close in time).
"""

from __future__ import annotations

import numba
import numpy as np
from llvmlite import ir
from numba import prange, types
from numba.extending import intrinsic

# The bits of a non-negative double, read as an integer, grow with its value;
# the top 11 + 7 bits are its binary logarithm in steps of 1/128 octave.
_CELL_SHIFT = 45


@intrinsic
def _float_bits(typingctx, value):
    """The IEEE-754 bits of a float64 as an int64 (a free bit cast)."""
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))
    return types.int64(types.float64), codegen


def _cell_table(radii):
    """``table[c]``: first k with ``radii[k] >=`` the lower edge of log-cell ``base + c``."""
    base = int(np.float64(radii[0] / 2).view(np.int64)) >> _CELL_SHIFT
    top = int(np.float64(radii[-1]).view(np.int64)) >> _CELL_SHIFT
    edges = (np.arange(base, top + 1, dtype=np.int64) << _CELL_SHIFT).view(np.float64)
    return np.searchsorted(radii, edges, side="left").astype(np.int64), base


@numba.njit(cache=True, nogil=True)
def _bin(d, radii, table, base):
    """Smallest k with ``radii[k] >= d``, for 0 <= d <= radii[-1].

    The index is read from the table of the cell of log2(d) and then fixed up
    by comparison, so it is exact for any sorted radii: d is at or above its
    cell's lower edge, hence the answer is at or above ``table[cell]``.
    """
    cell = min(max((_float_bits(d) >> _CELL_SHIFT) - base, 0), table.size - 1)
    k = table[cell]
    while radii[k] < d:
        k += 1
    return k


@numba.njit(cache=True, nogil=True)
def _count_segment(x, xi, delay, radii, table, base, j_lo, j_hi, moves):
    """Add the pairs (i, j), j_lo <= j < j_hi, to ``moves`` (+1 entering a bin, -1 leaving)."""
    r_top = radii[radii.size - 1]
    for j in range(j_lo, j_hi):
        d = abs(xi[0] - x[j])
        if d > r_top:
            continue
        k = _bin(d, radii, table, base)
        moves[0, k] += 1
        edge = radii[k]
        for m in range(1, xi.size):
            d = max(d, abs(xi[m] - x[j + m * delay]))
            if d > edge:
                moves[m, k] -= 1
                if d > r_top:
                    break
                k = _bin(d, radii, table, base)
                moves[m, k] += 1
                edge = radii[k]


@numba.njit(cache=True, nogil=True, parallel=True)
def _count_rows(x, delay, max_dimension, theiler, radii, table, base, rows, one_sided, n_vectors, n_chunks):
    moves = np.zeros((n_chunks, max_dimension, radii.size), dtype=np.int64)
    for c in prange(n_chunks):  # one count array per chunk, chunks spread over threads
        xi = np.empty(max_dimension)
        for r in range(c, rows.size, n_chunks):  # interleaved rows balance the triangle
            i = rows[r]
            for m in range(max_dimension):
                xi[m] = x[i + m * delay]
            _count_segment(x, xi, delay, radii, table, base,
                           min(i + theiler + 1, n_vectors), n_vectors, moves[c])
            if not one_sided:
                _count_segment(x, xi, delay, radii, table, base, 0, max(i - theiler, 0), moves[c])
    return moves.sum(axis=0)


def pair_counts(x, delay, max_dimension, radii, theiler=0, rows=None, one_sided=True):
    """Pair counts ``counts[m-1, k] = #{pairs: d_m <= radii[k]}`` for m = 1..M.

    Parameters
    ----------
    x : 1-D array, the series
    delay, max_dimension : int, tau >= 1 and M >= 1
    radii : 1-D array, sorted ascending, positive
    theiler : int, pairs need ``|i - j| > theiler``
    rows : int array of vectors i to count from (default: all N_M vectors)
    one_sided : bool
        True counts j > i + theiler only, so all rows give every pair once;
        False counts every j with ``|i - j| > theiler`` (reference points).

    Returns
    -------
    int64 array of shape (M, len(radii)), cumulative in radius.

    Notes
    -----
    The kernel records +1 when a pair enters bin k at dimension m and -1 when
    it leaves; the cumulative sum over m is the histogram of d_m, and the
    cumulative sum of that over k is the count.
    """
    x = np.ascontiguousarray(x, dtype=np.float64)
    radii = np.ascontiguousarray(radii, dtype=np.float64)
    n_vectors = x.size - (max_dimension - 1) * delay
    rows = np.arange(n_vectors, dtype=np.int64) if rows is None else np.ascontiguousarray(rows, dtype=np.int64)
    table, base = _cell_table(radii)
    moves = _count_rows(x, int(delay), int(max_dimension), int(theiler), radii, table, base, rows,
                        bool(one_sided), n_vectors, 4 * numba.get_num_threads())
    return np.cumsum(np.cumsum(moves, axis=0), axis=1)


def pair_total(n_vectors, theiler=0, rows=None, one_sided=True) -> int:
    """Number of pairs :func:`pair_counts` looks at (its count at an infinite radius)."""
    rows = np.arange(n_vectors, dtype=np.int64) if rows is None else np.asarray(rows, dtype=np.int64)
    total = np.clip(n_vectors - rows - theiler - 1, 0, None).sum()
    if not one_sided:
        total += np.clip(rows - theiler, 0, None).sum()
    return int(total)


def pair_counts_reference(x, delay, max_dimension, radii, theiler=0, rows=None, one_sided=True):
    """Plain-numpy twin of :func:`pair_counts`, for tests on small inputs."""
    x = np.asarray(x, dtype=np.float64)
    radii = np.asarray(radii, dtype=np.float64)
    n = x.size - (max_dimension - 1) * delay
    vectors = np.stack([x[m * delay:m * delay + n] for m in range(max_dimension)], axis=1)
    j = np.arange(n)
    counts = np.zeros((max_dimension, radii.size), dtype=np.int64)
    for i in (range(n) if rows is None else rows):
        keep = (j > i + theiler) if one_sided else (np.abs(j - i) > theiler)
        d = np.maximum.accumulate(np.abs(vectors[keep] - vectors[i]), axis=1)
        counts += (d.T[:, :, None] <= radii).sum(axis=1)
    return counts
