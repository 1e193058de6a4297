"""False nearest neighbours, Cao's E1/E2 and the dimension suggestion."""

import numpy as np
import pytest
import xarray as xr
from scipy.spatial.distance import cdist

import systems
from engine.dimension import cao, false_nearest_neighbours, false_nearest_neighbours_and_cao, suggest_dimension
from engine.embedding import delay_vectors
from engine.errors import LagspaceError


def _suggest(x, delay, theiler, max_dimension=8):
    fnn = false_nearest_neighbours(x, delay, max_dimension=max_dimension, theiler=theiler)
    e = cao(x, delay, max_dimension=max_dimension, theiler=theiler)
    return fnn, e, suggest_dimension(fnn, e)


def test_lorenz_needs_three():
    # Lorenz x at dt = 0.01, delay 16 (first minimum of mutual information, common practice, memory):
    # embedding dimension 3 (common practice; Kennel, Brown & Abarbanel 1992; Takens 1981)
    fnn, e, s = _suggest(np.array(systems.lorenz(5000)), delay=16, theiler=16)
    assert s["value"] == 3, s
    assert fnn["false_nearest_fraction"].sel(dimension=1) > 0.5
    assert not s["looks_stochastic"]
    # deterministic data: E2 clearly differs from 1 at some d (Cao 1997)
    assert float(np.max(np.abs(e["cao_e2"] - 1))) > 0.3


def test_henon_needs_two():
    # Hénon map x, delay 1: embedding dimension 2 (common practice, memory)
    _, _, s = _suggest(np.array(systems.henon(3000)), delay=1, theiler=0)
    assert s["value"] == 2, s
    assert s["criteria_agree"] is True


def test_white_noise_looks_stochastic():
    fnn, e, s = _suggest(systems.white_noise(3000, seed=3), delay=1, theiler=0, max_dimension=10)
    # false-neighbour fraction does not fall to zero for noise (Kennel, Brown & Abarbanel 1992)
    assert float(fnn["false_nearest_fraction"].min()) > 0.05
    assert s["false_nearest_neighbours"] is None
    # E2 about 1 at every d for independent random data (Cao 1997)
    np.testing.assert_allclose(e["cao_e2"], 1.0, atol=0.1)
    assert s["looks_stochastic"]
    assert any("stochastic" in w for w in s["warnings"])


def test_fractions_match_a_cdist_brute_force():
    # the whole method against scipy.spatial's max-norm distances (source: scipy)
    x = np.array(systems.henon(400)) + 0.01 * systems.white_noise(400, seed=1)
    delay, theiler, rtol, atol = 2, 3, 10.0, 1.5
    fnn = false_nearest_neighbours(x, delay, max_dimension=4, theiler=theiler, rtol=rtol, atol=atol)
    e = cao(x, delay, max_dimension=3, theiler=theiler)
    big_e, e_star = [], []
    for d in range(1, 5):
        n = x.size - d * delay
        v = delay_vectors(x, d, delay)[:n]
        dist = cdist(v, v, metric="chebyshev")
        dist[np.abs(np.subtract.outer(np.arange(n), np.arange(n))) <= theiler] = np.inf
        j = np.argmin(dist, axis=1)
        r = dist[np.arange(n), j]
        extra = np.abs(x[np.arange(n) + d * delay] - x[j + d * delay])
        false = (extra > rtol * r) | (np.maximum(r, extra) > atol * x.std())
        assert fnn["false_nearest_fraction"].sel(dimension=d) == pytest.approx(false.mean(), abs=1e-12)
        big_e.append(np.mean(np.maximum(r, extra) / r))
        e_star.append(extra.mean())
    np.testing.assert_allclose(e["cao_e1"], np.array(big_e[1:]) / big_e[:-1], rtol=1e-12)
    np.testing.assert_allclose(e["cao_e2"], np.array(e_star[1:]) / e_star[:-1], rtol=1e-12)


@pytest.mark.parametrize("kind", ["lorenz", "noise"])
def test_one_search_for_both_equals_two(kind):
    # The shared search must change nothing: the pair equals the two methods run apart, value for value
    # (xarray.testing.assert_identical: exact values, attributes and coordinates).
    x, delay, theiler = ((np.array(systems.lorenz(3000)), 16, 16) if kind == "lorenz"
                         else (systems.white_noise(2000, seed=4), 1, 0))
    messages = []
    fnn, e = false_nearest_neighbours_and_cao(x, delay, max_dimension=6, theiler=theiler, rtol=12.0, atol=1.5,
                                              progress=lambda f, m: messages.append(m))
    xr.testing.assert_identical(fnn, false_nearest_neighbours(x, delay, max_dimension=6, theiler=theiler,
                                                              rtol=12.0, atol=1.5))
    xr.testing.assert_identical(e, cao(x, delay, max_dimension=6, theiler=theiler))
    assert sum("at dimension" in m for m in messages) == 7  # one search per d = 1..max_dimension + 1
    with pytest.raises(LagspaceError):
        false_nearest_neighbours_and_cao(x, delay, atol=0)


def test_nothing_settles_returns_the_largest_with_a_warning():
    x = systems.white_noise(1500, seed=5)
    fnn = false_nearest_neighbours(x, 1, max_dimension=3)
    e = cao(x, 1, max_dimension=3)
    s = suggest_dimension(fnn, e)
    assert s["value"] == 3 and s["method"].startswith("none")
    assert s["warnings"] and "3" in s["reason"]


def test_dataset_shape_and_units():
    fnn = false_nearest_neighbours(np.array(systems.henon(500)), 1, max_dimension=5)
    e = cao(np.array(systems.henon(500)), 1, max_dimension=5)
    for ds in (fnn, e):
        assert list(ds["dimension"].values) == [1, 2, 3, 4, 5]
        for name in ds.variables:
            assert "units" in ds[name].attrs and "long_name" in ds[name].attrs


def test_bad_arguments_are_refused():
    x = systems.white_noise(200)
    with pytest.raises(LagspaceError):
        false_nearest_neighbours(x, 0)
    with pytest.raises(LagspaceError):
        cao(x, 30, max_dimension=10)  # too short for the embedding
    with pytest.raises(LagspaceError):
        false_nearest_neighbours(x, 1, rtol=-1)
    with pytest.raises(LagspaceError):
        false_nearest_neighbours(np.full(200, 2.0), 1)
