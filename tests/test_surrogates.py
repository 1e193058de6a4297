"""Surrogate data checked against numpy.fft, analytic results and published properties."""

import json
import threading

import numpy as np
import pytest

import engine.surrogates as surr
import systems
from engine.errors import Cancelled, LagspaceError
from engine.kernels.prediction import locally_constant_predictions, locally_constant_predictions_reference
from engine.surrogates import prediction_error, surrogate, surrogate_test, surrogates, time_asymmetry


def facts(ds):
    return json.loads(ds.attrs["surrogate_test"])


@pytest.mark.parametrize("n", [1000, 1001])
def test_ft_surrogate_keeps_the_power_spectrum(n):
    x = systems.lorenz(n)
    s = surrogate(x, "ft", np.random.default_rng(1))
    # Theiler et al., Physica D 58 (1992) 77: phase randomisation keeps the periodogram
    # exactly; checked with numpy.fft.
    np.testing.assert_allclose(np.abs(np.fft.rfft(s)) ** 2, np.abs(np.fft.rfft(x)) ** 2, rtol=1e-8, atol=1e-6)
    assert not np.allclose(s, x)


@pytest.mark.parametrize("kind", ["aaft", "iaaft"])
def test_amplitude_adjusted_surrogates_keep_the_values(kind):
    x = systems.henon(2000)
    s = surrogate(x, kind, np.random.default_rng(2))
    # Schreiber & Schmitz, PRL 77 (1996) 635: the sorted values are identical to the data's.
    np.testing.assert_array_equal(np.sort(s), np.sort(x))
    assert not np.array_equal(s, x)


def test_iaaft_corrects_the_spectrum_of_aaft():
    x = systems.lorenz(4000)
    spectrum = np.abs(np.fft.rfft(x))[1:]

    def deviation(kind):
        s = surrogate(x, kind, np.random.default_rng(3))
        return np.linalg.norm(np.abs(np.fft.rfft(s))[1:] - spectrum) / np.linalg.norm(spectrum)

    # Schreiber & Schmitz 1996: AAFT flattens the spectrum of a non-Gaussian signal,
    # IAAFT iterates it back (measured here: 0.17 against 0.0015).
    assert deviation("iaaft") < 0.01 < deviation("aaft")


@pytest.mark.parametrize("kind", ["ft", "aaft", "iaaft"])
def test_surrogates_are_reproducible_and_independent_of_threads(kind, monkeypatch):
    x = systems.ar1(500, 0.7, seed=1)
    first = surrogates(x, kind, count=5, seed=11)
    assert first.shape == (5, 500)
    np.testing.assert_array_equal(first, surrogates(x, kind, count=5, seed=11))
    monkeypatch.setattr(surr, "WORKERS", 1)
    np.testing.assert_array_equal(first, surrogates(x, kind, count=5, seed=11))
    child = np.random.SeedSequence(11).spawn(5)[3]
    np.testing.assert_array_equal(first[3], surrogate(x, kind, np.random.default_rng(child)))
    assert not np.array_equal(first, surrogates(x, kind, count=5, seed=12))


@pytest.mark.parametrize("theiler,neighbours", [(0, 1), (3, 4), (10, 2)])
def test_prediction_kernel_matches_reference(theiler, neighbours):
    rng = np.random.default_rng(theiler)
    x = rng.integers(0, 6, size=300).astype(float)  # many ties: checks the tie rule too
    points = np.arange(0, 280, 7)
    got = locally_constant_predictions(x, 3, 2, 2, theiler, neighbours, points)
    want = locally_constant_predictions_reference(x, 3, 2, 2, theiler, neighbours, points)
    np.testing.assert_array_equal(got, want)


def test_prediction_error_of_white_noise_and_of_a_sine():
    # Analytic: for i.i.d. values the mean of k neighbours' futures is independent of
    # the true future, so the normalised error is sqrt(1 + 1/k) (k = 4 here: 1.118).
    noise = systems.white_noise(4000, seed=5)
    assert prediction_error(noise, 1, 3) == pytest.approx(np.sqrt(1.25), abs=0.05)
    # Analytic: a noise-free sine is a deterministic function of its delay vector.
    assert prediction_error(systems.sine(4000, 40), 10, 2) < 0.05


def test_time_asymmetry_equals_skewness_of_increments():
    rng = np.random.default_rng(6)
    x = np.cumsum(rng.exponential(size=100_000) - 1.0)
    # Analytic: increments of this walk are exponential, whose skewness is 2.
    assert time_asymmetry(x) == pytest.approx(2.0, abs=0.15)
    # Analytic: a linear Gaussian process is time reversible, Q = 0 (within sampling error).
    assert abs(time_asymmetry(systems.ar1(100_000, 0.8, seed=7))) < 0.03


def test_ar1_does_not_reject_the_linear_null():
    # Analytic: a linear Gaussian process *is* the null hypothesis; fixed seed.
    x = systems.ar1(3000, 0.8, seed=0)
    f = facts(surrogate_test(x, kind="iaaft", count=39, seed=0, delay=2, dimension=3))
    assert not f["rejects_linear_null"] and f["p_value"] > 0.05
    assert "cannot reject" in f["reason"]


def test_henon_rejects_the_linear_null_two_sided():
    x = systems.henon(2000)
    ds = surrogate_test(x, kind="iaaft", count=39, seed=0, delay=1, dimension=2)
    f = facts(ds)
    # Theiler et al. 1992: deterministic chaos is far more predictable than its surrogates;
    # rank 1 of 40 gives the smallest two-sided p = 2/40 = 0.05.
    assert f["rank"] == 1 and f["p_value"] == pytest.approx(0.05) and f["rejects_linear_null"]
    assert f["data_statistic"] < ds["surrogate_statistic"].min()
    assert ds.sizes["surrogate"] == 39 and ds["surrogate_statistic"].attrs["long_name"]


def test_lorenz_rejects_the_linear_null_one_sided():
    x = systems.lorenz(3000)
    f = facts(surrogate_test(x, kind="aaft", count=19, seed=1, delay=16, dimension=3, theiler=20, sided="one"))
    # Schreiber & Schmitz 2000: 19 surrogates suffice one-sided at alpha 0.05 (p = 1/20).
    assert f["rank"] == 1 and f["p_value"] == pytest.approx(0.05) and f["rejects_linear_null"]


def test_progress_and_cancel():
    x = systems.ar1(400, 0.5)
    seen = []
    surrogates(x, "ft", count=4, seed=0, progress=lambda f, msg: seen.append(f))
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)
    stop = threading.Event()
    stop.set()
    with pytest.raises(Cancelled):
        surrogate_test(x, kind="ft", count=39, delay=1, dimension=2, cancel=stop)


@pytest.mark.parametrize(
    "call",
    [
        lambda x: surrogate(x, "shuffle"),
        lambda x: surrogates(x, "ft", count=0),
        lambda x: surrogates(x, "ft", count=3, seed=-1),
        lambda x: surrogate_test(x, count=19, delay=1, dimension=2),  # two-sided needs 39
        lambda x: surrogate_test(x, count=39, delay=1, dimension=2, sided="left"),
        lambda x: surrogate_test(x, statistic="entropy", delay=1, dimension=2),
        lambda x: surrogate_test(x, count=39, delay=1, dimension=2, alpha=0.9),
        lambda x: prediction_error(x, 0, 2),
        lambda x: prediction_error(x, 1, 2, theiler=300),
        lambda x: time_asymmetry(x, lag=0),
    ],
)
def test_bad_arguments_raise_one_line_errors(call):
    with pytest.raises(LagspaceError) as info:
        call(systems.ar1(500, 0.5))
    assert "\n" not in str(info.value)
