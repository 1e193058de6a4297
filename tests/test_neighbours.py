"""Nearest-neighbour and fixed-radius kernels against brute force.

The outside reference is scipy.spatial.distance.cdist(metric="chebyshev"):
the max-norm distance of every pair of delay vectors, from which the nearest
admissible neighbour (smallest index on ties) is read off directly.
"""

import numpy as np
import pytest
from scipy.spatial.distance import cdist

import systems
from engine.embedding import delay_vectors
from engine.errors import LagspaceError
from engine.kernels.neighbours import (
    nearest_neighbours,
    nearest_neighbours_reference,
    neighbours_within,
    neighbours_within_reference,
)


def _series(kind, n, seed):
    rng = np.random.default_rng(seed)
    if kind == "noise":
        return rng.standard_normal(n)
    if kind == "quantised":  # many exact ties and duplicate vectors
        return np.round(rng.standard_normal(n), 1)
    if kind == "henon":
        return np.array(systems.henon(n))
    return np.array(systems.lorenz(n, dt=0.05))


def _cdist_nearest(x, m, tau, theiler, n, exclude_zero):
    v = delay_vectors(x, m, tau)[:n]
    d = cdist(v, v, metric="chebyshev")  # source: scipy.spatial
    gap = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    d[gap <= theiler] = np.inf
    if exclude_zero:
        d[d == 0] = np.inf
    index = np.argmin(d, axis=1)  # first occurrence: the smallest index wins ties
    return index, d[np.arange(n), index]


CASES = [
    ("noise", 300, 1, 1, 0, None, False),
    ("noise", 300, 4, 2, 5, 250, False),
    ("quantised", 400, 1, 1, 0, None, False),
    ("quantised", 400, 2, 1, 3, None, True),
    ("quantised", 250, 3, 2, 0, 200, False),
    ("henon", 500, 2, 1, 0, None, False),
    ("henon", 500, 1, 1, 10, 480, True),
    ("lorenz", 600, 3, 3, 20, None, False),
    ("lorenz", 600, 7, 2, 0, 580, False),
]


@pytest.mark.parametrize("kind,n,m,tau,theiler,n_vectors,exclude_zero", CASES)
def test_nearest_matches_cdist(kind, n, m, tau, theiler, n_vectors, exclude_zero):
    x = _series(kind, n, seed=n + m)
    index, distance = nearest_neighbours(x, m, tau, theiler, n_vectors, exclude_zero)
    count = x.size - (m - 1) * tau if n_vectors is None else n_vectors
    want_index, want_distance = _cdist_nearest(x, m, tau, theiler, count, exclude_zero)
    np.testing.assert_array_equal(index, want_index)
    np.testing.assert_array_equal(distance, want_distance)
    ref_index, ref_distance = nearest_neighbours_reference(x, m, tau, theiler, n_vectors, exclude_zero)
    np.testing.assert_array_equal(index, ref_index)
    np.testing.assert_array_equal(distance, ref_distance)


def test_nearest_when_nothing_is_admissible():
    # a Theiler window wider than the series leaves no candidate: -1 and inf
    index, distance = nearest_neighbours(np.arange(10.0), 1, 1, theiler=20)
    assert np.all(index == -1) and np.all(np.isinf(distance))
    # all vectors identical and duplicates excluded: again none
    index, distance = nearest_neighbours(np.zeros(50), 2, 1, 0, exclude_zero=True)
    assert np.all(index == -1)


@pytest.mark.parametrize("kind,m,tau,theiler,radius", [
    ("noise", 1, 1, 0, 0.05), ("noise", 3, 2, 4, 0.8), ("quantised", 2, 1, 0, 0.3),
    ("henon", 2, 1, 0, 0.1), ("lorenz", 4, 2, 10, 3.0), ("lorenz", 2, 1, 0, 100.0),
])
def test_within_matches_cdist(kind, m, tau, theiler, radius):
    x = _series(kind, 500, seed=m)
    n = x.size - (m - 1) * tau - 7  # candidates: a prefix of the vectors
    points = np.random.default_rng(1).choice(x.size - (m - 1) * tau, 40, replace=False)
    indptr, indices = neighbours_within(x, m, tau, theiler, radius, points, n_vectors=n)
    v = delay_vectors(x, m, tau)
    d = cdist(v[points], v[:n], metric="chebyshev")  # source: scipy.spatial
    hits = (d < radius) & (np.abs(points[:, None] - np.arange(n)[None, :]) > theiler)
    assert indptr[-1] == hits.sum()
    for r in range(points.size):
        np.testing.assert_array_equal(indices[indptr[r]:indptr[r + 1]], np.nonzero(hits[r])[0])
    ref = neighbours_within_reference(x, m, tau, theiler, radius, points, n_vectors=n)
    np.testing.assert_array_equal(indptr, ref[0])
    np.testing.assert_array_equal(indices, ref[1])


def test_bad_arguments_are_refused():
    x = np.random.default_rng(0).standard_normal(100)
    with pytest.raises(LagspaceError):
        nearest_neighbours(x, 0, 1, 0)
    with pytest.raises(LagspaceError):
        nearest_neighbours(x, 2, 1, -1)
    with pytest.raises(LagspaceError):
        nearest_neighbours(np.r_[x, np.nan], 2, 1, 0)
    with pytest.raises(LagspaceError):
        neighbours_within(x, 2, 1, 0, radius=0.0)
    with pytest.raises(LagspaceError):
        neighbours_within(x, 2, 1, 0, radius=1.0, points=[200])
