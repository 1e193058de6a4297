"""Recurrence plots checked against scipy.spatial, plain references and analytic cases."""

import json

import numpy as np
import pytest
import scipy.sparse
from scipy.spatial import cKDTree

import systems
from engine.embedding import delay_vectors
from engine.errors import LagspaceError
from engine.kernels.recurrence import (
    line_histograms,
    line_histograms_reference,
    recurrence_matrix,
    recurrence_matrix_reference,
)
from engine.recurrence import recurrence_plot, recurrence_quantification


def measures(ds):
    return json.loads(ds.attrs["recurrence"])


@pytest.mark.parametrize("seed", range(6))
def test_line_counts_match_reference_on_random_matrices(seed):
    rng = np.random.default_rng(seed)
    n, theiler = int(rng.integers(5, 60)), int(rng.integers(0, 4))
    dense = rng.random((n, n)) < rng.uniform(0.1, 0.9)
    dense |= dense.T
    dense &= np.abs(np.subtract.outer(np.arange(n), np.arange(n))) > theiler
    m = scipy.sparse.csr_matrix(dense)
    got = line_histograms(m.indptr, m.indices.astype(np.int32), n, theiler)
    want = line_histograms_reference(dense, theiler)
    np.testing.assert_array_equal(got[0], want[0])
    np.testing.assert_array_equal(got[1], want[1])


@pytest.mark.parametrize("theiler", [0, 3])
def test_recurrence_matrix_matches_reference_and_scipy_spatial(theiler):
    x = systems.henon(300)
    n, radius = 298, 0.2  # all 300 - 2 delay vectors
    indptr, indices = recurrence_matrix(x, 3, 1, n, theiler, radius)
    got = scipy.sparse.csr_matrix((np.ones(indices.size, bool), indices, indptr), shape=(n, n)).toarray()
    np.testing.assert_array_equal(got, recurrence_matrix_reference(x, 3, 1, n, theiler, radius))
    # Reference library: scipy.spatial.cKDTree pairs within radius in the maximum norm.
    pairs = cKDTree(delay_vectors(x, 3, 1)).query_pairs(radius, p=np.inf, output_type="ndarray")
    pairs = pairs[np.abs(pairs[:, 0] - pairs[:, 1]) > theiler]
    upper = np.argwhere(np.triu(got))
    assert {tuple(p) for p in np.sort(pairs, axis=1)} == {tuple(p) for p in upper}


@pytest.mark.parametrize("n,theiler,rate", [(600, 0, 0.05), (4000, 0, 0.05), (3000, 10, 0.1)])
def test_recurrence_rate_is_close_to_the_requested_one(n, theiler, rate):
    # n = 600 picks the radius from all pairs, larger n from a million drawn pairs.
    plot = recurrence_plot(systems.white_noise(n, seed=1), 1, 2, rate=rate, theiler=theiler)
    assert plot.recurrence_rate == pytest.approx(rate, abs=0.002)
    assert plot.matrix.diagonal().sum() == 0 and (plot.matrix != plot.matrix.T).nnz == 0


def test_given_radius_overrides_rate():
    x = systems.white_noise(500, seed=2)
    plot = recurrence_plot(x, 1, 1, rate=0.5, radius=0.0)
    assert plot.radius == 0.0 and plot.matrix.nnz == 0
    ds = recurrence_quantification(x, 1, 1, radius=0.0)
    f = measures(ds)
    assert f["determinism"] is None and "larger radius" in f["reason"]


def test_periodic_signal_is_deterministic():
    ds = recurrence_quantification(systems.sine(2000, 40), 10, 2, max_points=1500)
    f = measures(ds)
    # Marwan et al., Physics Reports 438 (2007) 237: a periodic orbit gives long diagonal
    # lines only, so determinism is about 1.
    assert f["determinism"] > 0.99
    assert f["mean_diagonal_line"] > 5
    assert f["points_used"] == 1500


def test_white_noise_has_low_determinism():
    ds = recurrence_quantification(systems.white_noise(3000, seed=3), 1, 1, rate=0.05)
    f = measures(ds)
    rr = f["recurrence_rate"]
    # Analytic (independent values, dimension 1): a recurrence lies on a line of length
    # >= 2 when either diagonal neighbour recurs, two independent events of chance RR,
    # so DET = 1 - (1 - RR)^2, about 0.098 at RR = 0.05. (Embedding in m > 1 with
    # delay 1 shares coordinates between neighbours and raises DET.)
    assert f["determinism"] == pytest.approx(1 - (1 - rr) ** 2, abs=0.01)
    assert f["determinism"] < 0.15


def test_dataset_layout():
    ds = recurrence_quantification(systems.henon(1200), 1, 2, max_points=1000, theiler=2)
    f = measures(ds)
    for name in ("diagonal_line_histogram", "vertical_line_histogram", "recurrence_row", "recurrence_column"):
        assert {"units", "long_name"} <= set(ds[name].attrs)
    assert ds["recurrence_row"].dtype == np.int32 and ds.sizes["pair"] == ds["recurrence_column"].size
    assert np.all(ds["recurrence_column"].values - ds["recurrence_row"].values > 2)
    pairs = (1000 - 3) * (1000 - 2) // 2
    assert ds.sizes["pair"] == round(f["recurrence_rate"] * pairs)
    # every recurrence above the diagonal lies on exactly one diagonal line
    lengths = ds["line_length"].values
    assert int((lengths * ds["diagonal_line_histogram"].values).sum()) == ds.sizes["pair"]
    assert 0 < f["laminarity"] < f["determinism"] <= 1
    assert f["trapping_time"] >= 2 and f["diagonal_entropy"] > 0


@pytest.mark.parametrize(
    "call",
    [
        lambda x: recurrence_plot(x, 0, 2),
        lambda x: recurrence_plot(x, 1, 2, rate=1.5),
        lambda x: recurrence_plot(x, 1, 2, radius=-1.0),
        lambda x: recurrence_plot(x, 1, 2, theiler=500),
        lambda x: recurrence_plot(x, 1, 2, max_points=10**6),
        lambda x: recurrence_quantification(x, 1, 2, min_line=1),
    ],
)
def test_bad_arguments_raise_one_line_errors(call):
    with pytest.raises(LagspaceError) as info:
        call(systems.white_noise(300))
    assert "\n" not in str(info.value)
