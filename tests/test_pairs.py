"""Exact pair counts of the one-pass kernel against brute force and scipy.spatial.

Every check compares integer counts for equality: the kernel must count a pair
with max-norm distance d at radius r exactly when d <= r, the convention of
scipy.spatial.cKDTree.count_neighbors (p=inf) and of a brute-force
scipy.spatial.distance.pdist(metric="chebyshev").
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy.spatial import cKDTree
from scipy.spatial.distance import pdist, squareform

from engine.kernels.pairs import pair_counts, pair_counts_reference, pair_total
from systems import henon, lorenz


def brute_force(x, delay, max_dimension, radii, theiler, rows=None):
    """Counts from the full chebyshev distance matrix of scipy.spatial.distance.pdist."""
    n = x.size - (max_dimension - 1) * delay
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    if rows is None:
        keep = j > i + theiler
    else:
        keep = np.zeros((n, n), bool)
        keep[rows] = True
        keep &= np.abs(i - j) > theiler
    out = []
    for m in range(1, max_dimension + 1):
        v = np.stack([x[k * delay:k * delay + n] for k in range(m)], axis=1)
        d = squareform(pdist(v, metric="chebyshev"))[keep]
        out.append([(d <= r).sum() for r in radii])
    return np.array(out)


@pytest.mark.parametrize("delay,max_dimension,theiler", [(1, 1, 0), (3, 5, 0), (2, 4, 7), (9, 3, 30)])
def test_counts_equal_pdist_brute_force(delay, max_dimension, theiler):
    # source: scipy.spatial.distance.pdist(metric="chebyshev"), all pairs, exact
    x = np.asarray(lorenz(700))
    radii = np.geomspace(0.05, 30.0, 24)
    expected = brute_force(x, delay, max_dimension, radii, theiler)
    np.testing.assert_array_equal(pair_counts(x, delay, max_dimension, radii, theiler), expected)


def test_ties_with_radii_count_as_closer():
    # source: pdist brute force; quantised data puts many distances exactly on the radii,
    # where "<=" (cKDTree.count_neighbors convention) must hold exactly
    x = np.random.default_rng(3).integers(0, 12, 600) * 0.125
    radii = np.array([0.125, 0.25, 0.375, 0.5, 1.0, 1.375])
    np.testing.assert_array_equal(pair_counts(x, 2, 4, radii, theiler=2), brute_force(x, 2, 4, radii, 2))


def test_reference_points_equal_pdist_brute_force():
    # source: pdist brute force restricted to the rows of the reference points, both sides of i
    x = np.asarray(henon(800))
    radii = np.geomspace(1e-3, 1.0, 20)
    n = x.size - 3 * 2
    rows = np.sort(np.random.default_rng(0).choice(n, 60, replace=False))
    got = pair_counts(x, 2, 4, radii, theiler=5, rows=rows, one_sided=False)
    np.testing.assert_array_equal(got, brute_force(x, 2, 4, radii, 5, rows=rows))


def test_counts_equal_ckdtree_count_neighbors():
    # source: scipy.spatial.cKDTree.count_neighbors(p=inf) once per m; it counts ordered pairs with
    # d <= r including i == j, and the Theiler band 0 < j - i <= w is taken off by brute force
    x = np.asarray(lorenz(3000))
    delay, top, w = 8, 6, 10
    radii = np.geomspace(0.02, 20.0, 32)
    n = x.size - (top - 1) * delay
    got = pair_counts(x, delay, top, radii, theiler=w)
    for m in range(1, top + 1):
        v = np.stack([x[k * delay:k * delay + n] for k in range(m)], axis=1)
        tree = cKDTree(v)
        ordered = tree.count_neighbors(tree, radii, p=np.inf)
        band = np.concatenate([np.abs(v[g:] - v[:-g]).max(axis=1) for g in range(1, w + 1)])
        band_counts = (band[:, None] <= radii).sum(axis=0)
        np.testing.assert_array_equal(got[m - 1], (ordered - n) // 2 - band_counts)


def test_numpy_twin_agrees_on_irregular_radii():
    # the kernel's bin lookup is exact for any sorted radii, not only geometric ones
    x = np.asarray(lorenz(900))
    radii = np.sort(np.random.default_rng(1).uniform(0.01, 25.0, 17))
    for rows, one_sided in ((None, True), (np.arange(0, 870, 13), False)):
        np.testing.assert_array_equal(pair_counts(x, 5, 7, radii, 4, rows, one_sided),
                                      pair_counts_reference(x, 5, 7, radii, 4, rows, one_sided))


def test_pair_total_is_the_count_beyond_every_distance():
    # analytic: with r above the extent every pair counts; all pairs i < j with j - i > w number
    # (n - w - 1)(n - w) / 2
    x = np.asarray(henon(500))
    radii = np.array([0.5, 10.0])
    n, w = 500 - 2 * 3, 4
    counts = pair_counts(x, 3, 3, radii, theiler=w)
    assert counts[-1, -1] == pair_total(n, w) == (n - w - 1) * (n - w) // 2
    rows = np.array([0, 3, 250, n - 1])
    by_hand = sum(int((np.abs(np.arange(n) - i) > w).sum()) for i in rows)
    assert pair_counts(x, 3, 3, radii, w, rows, False)[0, -1] == pair_total(n, w, rows, False) == by_hand


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(-5, 5, allow_nan=False, width=32), min_size=20, max_size=80),
       st.integers(1, 4), st.integers(1, 4), st.integers(0, 5))
def test_random_series_match_the_numpy_twin(values, delay, max_dimension, theiler):
    # property: identical counts for arbitrary short series (many exact ties among float32 values)
    x = np.asarray(values, dtype=float)
    if x.size - (max_dimension - 1) * delay < 2:
        return
    radii = np.array([1e-3, 0.01, 0.1, 0.5, 1.0, 2.0, 4.0, 8.0])
    np.testing.assert_array_equal(pair_counts(x, delay, max_dimension, radii, theiler),
                                  pair_counts_reference(x, delay, max_dimension, radii, theiler))
