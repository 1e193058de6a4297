"""Space-time separation plot and Theiler window suggestion (Provenzale et al. 1992)."""

import numpy as np
import pytest
from scipy.spatial.distance import cdist

import systems
from engine.embedding import delay_vectors
from engine.errors import LagspaceError
from engine.theiler import space_time_separation, suggest_theiler


@pytest.mark.parametrize("n, phi, seed, delay, dimension, max_separation, quantiles", [
    (400, 0.6, 4, 3, 2, 40, (0.05, 0.5, 0.9)),
    (600, 0.7, 3, 2, 3, 30, None),  # the default quantiles (0.01, 0.1, 0.5)
])
def test_quantiles_match_cdist_pairs(n, phi, seed, delay, dimension, max_separation, quantiles):
    # every start point used: the quantiles are those of the max-norm distances of all pairs
    # (i, i + s) among the first n - max_separation vectors (reference: scipy.spatial + numpy)
    x = systems.ar1(n, phi, seed=seed)
    options = {} if quantiles is None else {"quantiles": quantiles}
    st = space_time_separation(x, delay=delay, dimension=dimension, max_separation=max_separation,
                               reference_points=10_000, seed=0, **options)
    v = delay_vectors(x, dimension, delay)
    d = cdist(v, v, metric="chebyshev")
    starts = np.arange(v.shape[0] - max_separation)
    for s in (1, 7, 13, max_separation):
        np.testing.assert_allclose(st["space_time_quantile"].sel(separation=s),
                                   np.quantile(d[starts, starts + s], quantiles or (0.01, 0.1, 0.5)), rtol=1e-12)


def test_white_noise_needs_a_short_window():
    # independent samples are uncorrelated beyond lag 0 (analytic): the window is tiny
    s = suggest_theiler(space_time_separation(systems.white_noise(4000, seed=7), delay=1, dimension=4))
    assert s["value"] <= 2 and s["levelled_off"] and not s["warnings"]
    assert s["units"]["value"] == "sample"


def test_window_grows_with_the_correlation_time():
    # AR(1): correlation time -1/ln(phi) samples = 1.4, 9.5, 49.5 (analytic); the window grows with
    # it and is of its order
    values = []
    for phi in (0.5, 0.9, 0.98):
        st = space_time_separation(systems.ar1(20_000, phi, seed=2), delay=1, dimension=3, seed=1)
        values.append(suggest_theiler(st)["value"])
    assert values[0] < values[1] < values[2], values
    for phi, w in zip((0.9, 0.98), values[1:]):
        assert 0.5 * (-1 / np.log(phi)) <= w <= 3 * (-1 / np.log(phi)), (phi, w)


def test_autocorrelation_time_is_a_floor():
    st = space_time_separation(systems.white_noise(5000), delay=1, dimension=3)
    choice = suggest_theiler(st, autocorrelation_time=12)
    assert choice["value"] == 12 and "autocorrelation" in choice["reason"]


def test_drifting_signal_falls_back():
    # a random walk never levels off: its distances grow like sqrt(separation) (analytic)
    st = space_time_separation(np.cumsum(systems.white_noise(10_000, seed=3)), delay=1, dimension=3)
    alone = suggest_theiler(st)
    assert not alone["levelled_off"] and alone["warnings"]
    assert alone["value"] == int(st["separation"].max()) and "largest separation" in alone["method"]
    with_acf = suggest_theiler(st, autocorrelation_time=40)
    assert with_acf["value"] == 120 and "three autocorrelation times" in with_acf["method"]
    assert "common practice" in with_acf["reason"]


def test_labels_and_seed():
    x = np.array(systems.lorenz(3000))
    a = space_time_separation(x, delay=16, dimension=3, reference_points=300, seed=5)
    b = space_time_separation(x, delay=16, dimension=3, reference_points=300, seed=5)
    c = space_time_separation(x, delay=16, dimension=3, reference_points=300, seed=6)
    assert a.identical(b) and not a.identical(c)
    assert a["space_time_quantile"].dims == ("quantile", "separation")
    for name in a.variables:
        assert "units" in a[name].attrs and "long_name" in a[name].attrs


def test_bad_arguments():
    with pytest.raises(LagspaceError):
        space_time_separation(np.arange(10.0), delay=1, dimension=3)
    with pytest.raises(LagspaceError):
        space_time_separation(systems.white_noise(500), delay=1, dimension=2, quantiles=(0.5, 1.5))
