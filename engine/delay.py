"""Choosing the delay: autocorrelation, average mutual information, power spectrum, dominant period.

References
----------
Fraser & Swinney, Phys. Rev. A 33 (1986) 1134 (first minimum of mutual information).
Cellucci, Albano & Rapp, Phys. Rev. E 71 (2005) 066208 (equiprobable bins, bin count).
Roulston, Physica D 125 (1999) 285 (bias of histogram mutual information).
Welch, IEEE Trans. Audio Electroacoust. 15 (1967) 70 (averaged periodograms).
"""

from __future__ import annotations

import json
import math

import numpy as np
import xarray as xr
import scipy.fft
from scipy import signal as sps

from .arguments import as_series, positive_number, whole_number
from .errors import LagspaceError
from .kernels.delay import lagged_mutual_information
from .recording import sampling_interval as recording_interval
from .recording import duration_text, series_units
from .recording import time_unit as recording_time_unit

MAX_BINS = 128
STRONG_PEAK = 0.5  # fraction of power in the spectral peak above which a period counts as strong
PERIOD_TOLERANCE = 0.1  # warn when the delay is within 10 % of a multiple of the half-period
MINIMUM_WINDOW = 2  # a minimum must be the lowest value within +-2 lags
TONE_PEAK = 0.95  # fraction of power in one peak above which a signal is treated as a tone (Roessler: 0.87)
SHALLOW = 0.1  # a minimum below this fraction of the lag-1 value is flagged as shallow
NOISE_FACTOR = 3.0  # standard deviations that make a level or a rise "clear"


def _first_below(values: np.ndarray, level: float):
    hit = np.flatnonzero(values < level)
    return int(hit[0]) if hit.size else None


def autocorrelation(x, max_lag: int) -> xr.Dataset:
    """Sample autocorrelation for lags 0..max_lag, with its characteristic times.

    The biased estimator ``r(k) = sum_i (x_i - m)(x_{i+k} - m) / sum_i (x_i - m)^2``,
    computed by FFT of the zero-padded, mean-removed series (Wiener-Khinchin).
    ``attrs["autocorrelation_times"]`` holds the first lag at which ``r`` drops to
    or below zero and the first lag at which it drops below 1/e (null, with a
    reason, when that does not happen up to ``max_lag``).

    References
    ----------
    Box, Jenkins & Reinsel, *Time Series Analysis*, Wiley (2008), sec. 2.1.
    """
    x = as_series(x)
    max_lag = whole_number("max_lag", max_lag, 1, x.size - 1)
    d = x - x.mean()
    size = scipy.fft.next_fast_len(2 * x.size - 1, real=True)
    spectrum = np.fft.rfft(d, size)
    acov = np.fft.irfft(spectrum.real**2 + spectrum.imag**2, size)[: max_lag + 1]
    r = acov / acov[0]
    first_zero = _first_below(r, np.nextafter(0.0, 1.0))
    one_over_e = _first_below(r, math.exp(-1.0))
    times = {"first_zero": first_zero, "one_over_e": one_over_e}
    missing = [name for name, v in times.items() if v is None]
    if missing:
        times["reason"] = f"{' and '.join(missing)} not reached up to lag {max_lag}; increase max_lag"
    return xr.Dataset(
        {"autocorrelation": ("lag", r, {"units": "1", "long_name": "autocorrelation"})},
        coords={"lag": ("lag", np.arange(max_lag + 1), {"units": "sample", "long_name": "lag"})},
        attrs={"autocorrelation_times": json.dumps(times)},
    )


def default_bins(n_samples: int) -> int:
    """Equiprobable bins per axis: ``floor(sqrt(N / 5))`` within [4, 128].

    With B bins per axis and equal marginal mass, each of the B^2 joint cells
    expects N / B^2 = 5 pairs, the occupancy Cellucci et al. (2005) ask for.
    The cap of 128 keeps the joint histogram (16 384 cells) in cache for long
    recordings; the delay is read from the position of the minimum, which finer
    bins do not move (Lorenz x, N = 1e6: 16 samples with 64 to 447 bins).
    """
    return int(np.clip(math.floor(math.sqrt(n_samples / 5.0)), 4, MAX_BINS))


def equiprobable_bins(x: np.ndarray, n_bins: int) -> np.ndarray:
    """Bin index of every sample for ``n_bins`` bins of (nearly) equal count.

    Edges are order statistics; equal values always share a bin, so quantised
    data never get split at random across a bin edge.
    """
    ordered = np.sort(x)
    edges = ordered[(np.arange(1, n_bins) * x.size) // n_bins]
    return np.searchsorted(edges, x, side="right").astype(np.int32)


def mutual_information(x, max_lag: int, bins: int | None = None) -> xr.Dataset:
    """Average mutual information between x(t) and x(t + lag), in nats.

    Each sample is put in one of ``bins`` equiprobable bins (order statistics as
    edges); for each lag the joint histogram of (bin(x_i), bin(x_{i+lag})) gives
    the plug-in estimate ``sum p_ab ln(p_ab / (p_a p_b))``. Its first-order bias,
    ``(B_ab - B_a - B_b + 1) / (2 n)`` with B the counts of occupied cells, rows
    and columns (Roulston 1999), is subtracted, so independent values give about
    0 (small negative values are sampling error). ``bins=None`` uses
    :func:`default_bins`. Lag 0 is the entropy of the binned series.

    ``attrs["mutual_information"]`` records the bins, the bias correction,
    ``noise_level``, the standard deviation of the estimate for independent
    values, s = (B - 1) / (sqrt(2) N) (2 n times the plug-in estimate is then
    chi-square with (B - 1)^2 degrees of freedom), and ``independence_level``,
    B^4 / (6 N^2) + 3 s: the remaining second-order bias, B^4 / (12 N^2) for
    independent equiprobable bins, doubled to cover higher orders (as measured
    on white noise, N = 1e3 to 1e6), plus three standard deviations. Values
    below it are consistent with independence.

    References
    ----------
    Fraser & Swinney, Phys. Rev. A 33 (1986) 1134.
    Cellucci, Albano & Rapp, Phys. Rev. E 71 (2005) 066208.
    Roulston, Physica D 125 (1999) 285.
    """
    x = as_series(x)
    max_lag = whole_number("max_lag (at most half the samples)", max_lag, 1, x.size // 2)
    bins = default_bins(x.size) if bins is None else whole_number("bins", bins, 2, 1024)
    noise = (bins - 1) / (math.sqrt(2.0) * x.size)
    info, bias = lagged_mutual_information(equiprobable_bins(x, bins), bins, np.arange(max_lag + 1))
    facts = {
        "bins": bins,
        "samples": int(x.size),
        "binning": "equiprobable (order statistics as edges)",
        "bias_correction": "first order, occupied cells (Roulston 1999)",
        "noise_level": noise,
        "independence_level": bins**4 / (6.0 * x.size**2) + NOISE_FACTOR * noise,
    }
    return xr.Dataset(
        {"mutual_information": ("lag", info - bias, {"units": "nat", "long_name": "average mutual information"})},
        coords={"lag": ("lag", np.arange(max_lag + 1), {"units": "sample", "long_name": "lag"})},
        attrs={"mutual_information": json.dumps(facts)},
    )


def _segment_length(n: int) -> int:
    """Welch segment: a power of two near min(N / 8, 8 sqrt(N)), from 64 to N samples.

    At least about 15 half-overlapping segments are averaged, and their number
    grows as sqrt(N), so a long record gives a smooth estimate while the
    resolution still improves with length.
    """
    return int(min(n, 2 ** max(6, round(math.log2(min(n / 8.0, 8.0 * math.sqrt(n)))))))


def _squared(units: str) -> str:
    return units if units == "1" else (f"({units})^2" if " " in units else f"{units}^2")


def power_spectrum(x, sampling_interval: float | None = None) -> xr.Dataset:
    """One-sided power spectral density by Welch's averaged periodogram.

    Hann-windowed segments of :func:`_segment_length` samples with 50 % overlap,
    each with its mean removed, scaled as a density (``scipy.signal.welch``,
    ``scaling="density"``), so the integral of ``power`` over ``frequency`` is
    the mean windowed variance of the segments: the variance of the series
    when its correlation time is well below a segment. ``x`` is a Recording or a 1-D array; the
    interval defaults to the Recording's (1 for an array). ``power`` is in
    (signal units)^2 per (1 / time unit), ``frequency`` in 1 / time unit
    (cycles, not radians); an array has units "1" and time unit "sample"
    (or "time unit" for another interval).

    References
    ----------
    Welch, IEEE Trans. Audio Electroacoust. 15 (1967) 70.
    """
    values, units = as_series(x), series_units(x)
    if sampling_interval is None:
        sampling_interval = recording_interval(x) if isinstance(x, xr.Dataset) else 1.0
    dt = positive_number("sampling_interval", sampling_interval)
    unit = recording_time_unit(x) if isinstance(x, xr.Dataset) else ("sample" if dt == 1.0 else "time unit")
    segment = _segment_length(values.size)
    freq, power = sps.welch(values, fs=1.0 / dt, nperseg=segment)
    per_frequency = f"{_squared(units)} per 1/{unit}"
    return xr.Dataset(
        {"power": ("frequency", power, {"units": per_frequency,
                                        "long_name": "power spectral density (one-sided, Welch)"})},
        coords={"frequency": ("frequency", freq, {"units": f"1/{unit}", "long_name": "frequency"})},
        attrs={"segment": segment, "segments": int((values.size - segment) // (segment // 2) + 1),
               "window": "hann", "overlap": 0.5, "sampling_interval": dt, "time_unit": unit},
    )


def dominant_period(x, sampling_interval: float | None = None) -> dict:
    """Period of the highest peak of the Welch power spectrum, and its strength.

    ``x`` is a series (its spectrum is computed by :func:`power_spectrum`) or
    the dataset :func:`power_spectrum` returned. The peak frequency is refined
    by a parabola through the log power of the peak bin and its neighbours.
    ``strength`` is the fraction of the power (zero frequency left out) within
    +-2 bins of the peak: about 1 for a sine, small for broadband signals. A
    peak in the lowest two frequency bins is not a resolved period (red spectra
    peak there): then ``samples`` is null with a reason.

    References
    ----------
    Welch, IEEE Trans. Audio Electroacoust. 15 (1967) 70.
    """
    spectrum = x if isinstance(x, xr.Dataset) and "power" in x else power_spectrum(x, sampling_interval)
    freq, power = spectrum["frequency"].values, spectrum["power"].values
    dt = float(spectrum.attrs["sampling_interval"])
    k = 1 + int(np.argmax(power[1:]))
    strength = float(power[max(1, k - 2) : k + 3].sum() / power[1:].sum())
    if k < 3:
        return {"samples": None, "time": None, "strength": strength,
                "reason": f"the spectrum is largest at the lowest frequencies: no period shorter than a third "
                          f"of the {spectrum.attrs['segment']}-sample Welch segment stands out"}
    offset = 0.0
    if k < power.size - 1 and np.all(power[k - 1 : k + 2] > 0):
        a, b, c = np.log(power[k - 1 : k + 2])
        offset = 0.5 * (a - c) / (a - 2 * b + c) if a - 2 * b + c < 0 else 0.0
    period = 1.0 / ((k + offset) * freq[1])
    return {"samples": float(period / dt), "time": float(period), "strength": strength}


def period_warning(delay: int, period: float, strength: float) -> str | None:
    """A warning when ``delay`` sits within 10 % of a multiple of half the period.

    Only for a strong periodic component (``strength >= 0.5``). At a half-period
    x(t + tau) is close to -x(t), at a full period close to x(t): either way the
    delay vectors collapse towards a line (fact of the trade).
    """
    if period is None or strength is None or strength < STRONG_PEAK or not period > 0:
        return None
    half = period / 2.0
    multiple = round(delay / half)
    if multiple < 1 or abs(delay / half - multiple) > PERIOD_TOLERANCE:
        return None
    which = {1: "half the period", 2: "the period"}.get(multiple, f"{multiple / 2:g} periods")
    return (
        f"delay {delay} samples is close to {which} of the dominant oscillation ({period:.4g} samples, "
        f"{strength:.0%} of the power): delay vectors fold onto a line there; prefer about a quarter period "
        f"({period / 4:.3g} samples)"
    )


def _first_clear_minimum(m: np.ndarray, facts: dict):
    """First lag that is the lowest within +-2 lags, above the independence level
    and followed later by a rise of more than 3 noise levels; ``(lag, floor_lag)``."""
    floor, rise = facts["independence_level"], NOISE_FACTOR * facts["noise_level"]
    w = MINIMUM_WINDOW
    for k in range(1, m.size - w):
        if m[k] <= floor:
            return None, k
        if m[k] < m[k - 1] and m[k] <= m[max(1, k - w) : k + w + 1].min() and m[k + 1 :].max() - m[k] > rise:
            return k, None
    return None, None


def _lag_text(lag: int, dt: float, time_unit: str) -> str:
    unit = str(time_unit)
    return f"{lag}" if unit == "sample" else f"{lag} ({duration_text(lag * dt, unit)})"


def suggest_delay(ami_ds, acf_ds, dominant=None, sampling_interval: float = 1.0, time_unit: str = "sample") -> dict:
    """Suggest a delay with the reason, alternatives and warnings.

    Rule (Fraser & Swinney 1986): the first clear minimum of the mutual
    information. A lag counts when it is the lowest value within +-2 lags, when
    the curve there is still above the level of independent values and when it
    rises later by more than 3 noise levels (see :func:`mutual_information`).
    When there is none (the mutual information decays into its noise, as for
    linear processes and maps), the first lag at which the autocorrelation drops
    below 1/e is used; for maps that is usually 1. Without either, the delay is
    null with a reason. ``dominant`` (from :func:`dominant_period`) adds a warning
    when the delay is near a multiple of half a strong period. A near-pure tone
    (over 95 % of the power in one peak) gets a quarter period, the first zero of
    the autocorrelation: its binned mutual information has spurious minima at
    small lags, and at a quarter period the delay plot opens into a circle
    (analytic for a sine: cos(2 pi tau / T) = 0 at tau = T / 4).

    References
    ----------
    Fraser & Swinney, Phys. Rev. A 33 (1986) 1134.
    """
    dt = positive_number("sampling_interval", sampling_interval)
    for ds, name in ((ami_ds, "mutual_information"), (acf_ds, "autocorrelation")):
        if not isinstance(ds, xr.Dataset) or name not in ds:
            raise LagspaceError(f"suggest_delay needs the dataset returned by {name}(); got {type(ds).__name__}")
    m = np.asarray(ami_ds["mutual_information"].values, dtype=float)
    facts = json.loads(ami_ds.attrs["mutual_information"])
    times = json.loads(acf_ds.attrs["autocorrelation_times"])
    alternatives = {"autocorrelation_first_zero": times["first_zero"], "autocorrelation_one_over_e": times["one_over_e"]}
    warnings = []
    lag, floor_lag = _first_clear_minimum(m, facts)
    strength = (dominant or {}).get("strength")
    if (dominant or {}).get("samples") and (strength or 0.0) >= TONE_PEAK and times["first_zero"] is not None:
        lag, method = times["first_zero"], "quarter period (autocorrelation first zero)"
        reason = (f"{strength:.0%} of the power is in one spectral peak (period {dominant['samples']:.4g} samples): for "
                  f"so nearly periodic a signal the mutual information's minima come from its binning, so a quarter "
                  f"period is used, where the autocorrelation first crosses zero, {_lag_text(lag, dt, time_unit)}")
        warnings.append("the signal is nearly a pure tone: expect a correlation dimension near 1 and a largest "
                        "Lyapunov exponent near 0; its invariants say little beyond its period")
    elif lag is not None:
        method = "first minimum of mutual information"
        reason = (f"the mutual information has its first clear minimum at lag {_lag_text(lag, dt, time_unit)} "
                  f"where it is {m[lag]:.3g} nats, down from {m[1]:.3g} at lag 1")
        if m[lag] < SHALLOW * m[1]:
            warnings.append(
                f"the minimum is shallow ({m[lag]:.2g} nats, under a tenth of the lag-1 value), where the curve "
                f"is nearly flat and its wiggles are mostly sampling noise; compare the autocorrelation "
                f"alternatives")
    else:
        why = (f"the mutual information decays to the level of independent values "
               f"({facts['independence_level']:.2g} nats) "
               f"by lag {floor_lag} without a clear minimum" if floor_lag is not None else
               f"the mutual information has no clear minimum up to lag {m.size - 1}")
        lag = times["one_over_e"]
        if lag is not None:
            method = "autocorrelation 1/e"
            reason = (f"{why}; using the first lag at which the autocorrelation drops below 1/e, "
                      f"{_lag_text(lag, dt, time_unit)}")
            if lag == 1:
                reason += "; the series decorrelates within one sample, as maps do, and delay 1 is usual there"
        else:
            method = "none"
            reason = f"{why}, and the autocorrelation stays above 1/e up to lag {m.size - 1}: increase max_lag"
            warnings.append("no delay could be estimated; set one by hand or compute longer lags")
    if lag is not None and dominant is not None:
        note = period_warning(lag, dominant.get("samples"), dominant.get("strength"))
        if note:
            warnings.append(note)
    return {
        "samples": lag,
        "time": None if lag is None else lag * dt,
        "time_unit": str(time_unit),
        "method": method,
        "reason": reason,
        "warnings": warnings,
        "alternatives": alternatives,
    }
