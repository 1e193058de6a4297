"""Delay estimation checked against statsmodels, analytic results and common practice."""

import json

import numpy as np
import pytest
import scipy.signal
from statsmodels.tsa.stattools import acf

import systems
from engine.delay import (
    autocorrelation,
    default_bins,
    dominant_period,
    equiprobable_bins,
    mutual_information,
    period_warning,
    power_spectrum,
    suggest_delay,
)
from engine.errors import LagspaceError
from engine.kernels.delay import lagged_mutual_information, lagged_mutual_information_reference
from engine.recording import make_recording


def suggestion(x, max_lag=60):
    return suggest_delay(mutual_information(x, max_lag), autocorrelation(x, max_lag), dominant_period(x))


def test_autocorrelation_matches_statsmodels_and_phi_to_the_k():
    phi, n = 0.8, 5000
    x = systems.ar1(n, phi, seed=3)
    r = autocorrelation(x, 20)["autocorrelation"].values
    # Reference library: statsmodels.tsa.stattools.acf (biased, FFT) -- exact agreement.
    np.testing.assert_allclose(r, acf(x, nlags=20, fft=True), rtol=0, atol=1e-10)
    # Analytic: r(k) = phi^k for AR(1); Bartlett (1946) variance of the sample autocorrelation.
    k = np.arange(1, 21)
    var = ((1 + phi**2) * (1 - phi ** (2 * k)) / (1 - phi**2) - 2 * k * phi ** (2 * k)) / n
    assert np.all(np.abs(r[1:] - phi**k) < 4 * np.sqrt(var))


def test_autocorrelation_times_of_ar1():
    x = systems.ar1(20000, 0.9, seed=1)
    times = json.loads(autocorrelation(x, 50).attrs["autocorrelation_times"])
    # Analytic: 0.9^k < 1/e first at k = 10 (1 / -ln 0.9 = 9.49); +-1 for sampling error.
    assert times["one_over_e"] in (9, 10, 11)
    assert times["first_zero"] is None or times["first_zero"] > 10
    short = json.loads(autocorrelation(x, 5).attrs["autocorrelation_times"])
    assert short["one_over_e"] is None and "increase max_lag" in short["reason"]


def test_mutual_information_kernel_matches_reference():
    rng = np.random.default_rng(0)
    bins = rng.integers(0, 7, size=500).astype(np.int32)
    lags = np.arange(12)
    info, bias = lagged_mutual_information(bins, 7, lags)
    ref_info, ref_bias = lagged_mutual_information_reference(bins, 7, lags)
    np.testing.assert_allclose(info, ref_info, rtol=1e-12, atol=1e-13)
    np.testing.assert_array_equal(bias, ref_bias)


@pytest.mark.parametrize("phi", [0.9, 0.6])
def test_mutual_information_of_gaussian_ar1_is_analytic(phi):
    x = systems.ar1(100_000, phi, seed=2)
    m = mutual_information(x, 10)["mutual_information"].values
    k = np.arange(1, 11)
    # Analytic (Cover & Thomas): a Gaussian pair with correlation rho = phi^k shares
    # -0.5 ln(1 - rho^2) nats. Tolerance 0.02 nats at N = 1e5 and 128 bins (measured
    # error <= 0.011; without the bias correction it would be about 0.08).
    np.testing.assert_allclose(m[1:], -0.5 * np.log(1 - phi ** (2 * k)), atol=0.02)


def test_mutual_information_of_white_noise_is_near_zero():
    ds = mutual_information(systems.white_noise(10_000, seed=4), 40)
    facts = json.loads(ds.attrs["mutual_information"])
    m = ds["mutual_information"].values[1:]
    # Analytic: independent samples share 0 nats; the estimate stays within its stated level.
    assert np.all(np.abs(m) < facts["independence_level"])
    assert facts["bins"] == default_bins(10_000) == 44
    assert ds["mutual_information"].attrs["units"] == "nat"


def test_equal_values_share_a_bin():
    x = np.repeat([3.0, 1.0, 2.0, 2.0, 5.0], 7)
    b = equiprobable_bins(x, 4)
    for value in np.unique(x):
        assert np.unique(b[x == value]).size == 1


def test_lorenz_delay_is_first_mutual_information_minimum():
    s = suggestion(systems.lorenz(10_000))
    # Common practice (memory): Lorenz x at dt = 0.01 has its first minimum at about 16-17 samples.
    assert 15 <= s["samples"] <= 18
    assert s["method"] == "first minimum of mutual information"
    assert s["time"] == s["samples"] * 1.0 and str(s["samples"]) in s["reason"]


def test_henon_delay_is_one():
    s = suggestion(systems.henon(10_000), 30)
    # Common practice: maps are embedded with delay 1.
    assert s["samples"] == 1
    assert s["method"] == "autocorrelation 1/e"


def test_ar1_has_no_mutual_information_minimum():
    # Analytic: -0.5 ln(1 - phi^(2k)) decreases monotonically, so no minimum exists
    # and the stated fallback (autocorrelation 1/e, 0.8^k < 1/e first at k = 5) is used.
    s = suggestion(systems.ar1(10_000, 0.8, seed=5))
    assert s["method"] == "autocorrelation 1/e"
    assert s["samples"] in (4, 5, 6)
    assert s["alternatives"]["autocorrelation_one_over_e"] == s["samples"]


def test_noisy_sine_delay_is_a_quarter_period():
    x = systems.sine(4000, 40, noise=0.3, seed=6)
    s = suggestion(x, 100)
    # Common practice: for a sine the first minimum of mutual information is at a quarter period.
    assert s["samples"] in (9, 10, 11) and s["warnings"] == []


def test_period_warning_for_sine_of_period_40():
    dom = dominant_period(systems.sine(4000, 40), sampling_interval=0.5)
    # Analytic: a pure tone of period 40 samples puts all its power in one peak.
    assert dom["samples"] == pytest.approx(40, rel=0.01)
    assert dom["time"] == pytest.approx(20, rel=0.01)
    assert dom["strength"] > 0.95
    # Fact of the trade: delays at multiples of a half-period fold the delay vectors onto a line.
    for delay in (19, 20, 21, 39, 40, 60):
        assert period_warning(delay, dom["samples"], dom["strength"]) is not None, delay
    for delay in (10, 12, 30):
        assert period_warning(delay, dom["samples"], dom["strength"]) is None, delay
    assert period_warning(20, dom["samples"], 0.2) is None  # weak peak: no warning


def test_white_noise_has_no_strong_period():
    dom = dominant_period(systems.white_noise(8000, seed=7))
    # Analytic: a flat spectrum spreads power evenly, 5 of 512 bins hold about 1 %.
    assert dom["strength"] < 0.05


def test_power_spectrum_of_a_sine_peaks_at_its_frequency():
    dt, period = 0.01, 25.0  # seconds per sample, samples per cycle
    x = 3.0 * systems.sine(6000, period)
    rec = make_recording(x, units="K", time_unit="s", sampling_interval=dt)
    spec = power_spectrum(rec)
    f = spec["frequency"].values
    # Analytic: a sine of period P samples at interval dt has all its power at f0 = 1 / (P dt) = 4 Hz;
    # the peak bin lies within one bin width of it.
    f_peak = f[np.argmax(spec["power"].values)]
    assert abs(f_peak - 1.0 / (period * dt)) <= f[1]
    assert spec["frequency"].attrs["units"] == "1/s"
    assert spec["power"].attrs["units"] == "K^2 per 1/s"
    assert {"units", "long_name"} <= set(spec["power"].attrs) and "long_name" in spec["frequency"].attrs
    # The same spectrum gives the dominant period (analytic: 25 samples = 0.25 s).
    dom = dominant_period(spec)
    assert dom == dominant_period(x, sampling_interval=dt)
    assert dom["samples"] == pytest.approx(period, rel=0.01) and dom["time"] == pytest.approx(0.25, rel=0.01)


def test_power_spectrum_of_white_noise_is_flat_at_twice_variance_times_interval():
    sigma, dt = 2.0, 0.5
    x = sigma * systems.white_noise(2**15, seed=11)
    spec = power_spectrum(x, sampling_interval=dt)
    p = spec["power"].values[1:-1]  # the zero and Nyquist bins carry half weight in a one-sided density
    # Analytic: white noise of variance s^2 sampled every dt has the one-sided density 2 s^2 dt,
    # flat in frequency; Welch's average of K segments scatters each bin by about 1/sqrt(K).
    assert p.mean() == pytest.approx(2 * sigma**2 * dt, rel=0.05)
    low, high = np.array_split(p, 2)
    assert low.mean() / high.mean() == pytest.approx(1.0, abs=0.05)
    assert spec["power"].attrs["units"] == "1 per 1/time unit" and spec["frequency"].attrs["units"] == "1/time unit"


@pytest.mark.parametrize("x", [systems.ar1(8192, 0.9, seed=2), systems.lorenz(8000)])
def test_power_spectrum_obeys_parseval_per_segment(x):
    # Parseval's theorem with scipy.signal.welch's documented density scaling: the one-sided PSD summed
    # over its bins times the bin width equals, exactly, the mean over segments of the Hann-weighted
    # mean square of each mean-removed segment (analytic identity; holds for any series, chaotic or not).
    spec = power_spectrum(x, sampling_interval=0.02)
    n, step = spec.attrs["segment"], spec.attrs["segment"] // 2
    w = scipy.signal.get_window("hann", n)
    segs = [x[i:i + n] - x[i:i + n].mean() for i in range(0, x.size - n + 1, step)]
    expected = np.mean([np.sum(w**2 * s**2) / np.sum(w**2) for s in segs])
    df = spec["frequency"].values[1] - spec["frequency"].values[0]
    assert len(segs) == spec.attrs["segments"]
    assert np.sum(spec["power"].values) * df == pytest.approx(expected, rel=1e-9)


def test_power_spectrum_integrates_to_the_variance_of_a_short_memory_series():
    # Same identity: when the correlation time (AR(1), phi=0.9: about 10 samples) is far below the
    # segment (512 samples), each segment's variance is the series' variance up to scatter between
    # segments. (A Lorenz record is not such a series: its lobe switching puts power below 1/segment.)
    x, dt = systems.ar1(8192, 0.9, seed=2), 0.02
    spec = power_spectrum(x, sampling_interval=dt)
    integral = np.trapezoid(spec["power"].values, spec["frequency"].values)
    assert integral == pytest.approx(np.var(x), rel=0.1)


def test_long_records_average_more_segments():
    # Welch (1967): averaging K segments cuts the variance of each bin by K; the segment count grows with N.
    short, long = (power_spectrum(systems.white_noise(n, seed=3)).attrs["segments"] for n in (4096, 2**20))
    assert short >= 15 and long > 8 * short


@pytest.mark.parametrize(
    "call",
    [
        lambda: autocorrelation(np.arange(100.0), 100),
        lambda: mutual_information(np.arange(100.0), 51),
        lambda: mutual_information(np.arange(100.0), "5"),
        lambda: autocorrelation(np.ones((10, 10)), 3),
        lambda: mutual_information(np.r_[np.arange(99.0), np.nan], 5),
        lambda: mutual_information(np.ones(100), 5),
        lambda: mutual_information(np.arange(100.0), 5, bins=1),
        lambda: dominant_period(np.arange(100.0), sampling_interval=0),
        lambda: power_spectrum(np.arange(100.0), sampling_interval=-1.0),
        lambda: power_spectrum(np.ones(100)),
        lambda: suggest_delay(None, None),
    ],
)
def test_bad_arguments_raise_one_line_errors(call):
    with pytest.raises(LagspaceError) as info:
        call()
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("period", [50, 100, 200])
def test_pure_tone_delay_is_a_quarter_period(period):
    # Analytic: the autocorrelation of a sine, cos(2 pi k / T), first crosses zero at k = T / 4, where the
    # delay plot of sin against its delayed copy is a circle. (Binned mutual information has spurious
    # minima at a few lags for a pure tone: 2 to 5 samples here before this rule.)
    s = suggestion(systems.sine(5000, period), 2 * period)
    assert s["method"] == "quarter period (autocorrelation first zero)"
    assert abs(s["samples"] - period / 4) <= 1
    assert any("pure tone" in w for w in s["warnings"])
