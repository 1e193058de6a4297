"""Is a recording fit for delay embedding? Structured findings, each with a fix.

A finding is a dict ``{"code", "severity", "message", "fix", "details"}``;
severity ``"refuse"`` stops the analysis, ``"warn"`` should be read before
trusting the numbers, ``"note"`` is for the record.

Delay coordinates need an evenly sampled, gap-free series of enough samples
(Packard et al. 1980; Takens 1981; common practice), and a finite recording of
N samples cannot credibly resolve a correlation dimension above about
``2 log10 N`` (Eckmann & Ruelle 1992). Embedding also assumes a stationary
signal (Kantz & Schreiber 2004, sec. 2.4); :func:`check_trend` flags the plainest
departure, a level that drifts along a straight line.

References
----------
Packard, Crutchfield, Farmer & Shaw, Phys. Rev. Lett. 45 (1980) 712.
Takens, in Dynamical Systems and Turbulence (Rand & Young, eds.), Springer (1981) 366.
Eckmann & Ruelle, Physica D 56 (1992) 185.
Kantz & Schreiber, Nonlinear Time Series Analysis, 2nd ed., Cambridge (2004).
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from .errors import RecordingError
from .recording import UNSTATED, signal, time_unit, with_json_attr
from .settings import Settings

MAX_GAP = Settings.max_gap  # the default longest run that interpolation fills
# Longer interior gaps are still offered interpolation when each is at most this share of the
# recording and all together at most FILL_TOTAL of it: our own cautious rule, not a published one.
FILL_LONGEST, FILL_TOTAL = 0.01, 0.05

SEVERITIES = ("refuse", "warn", "note")
LARGEST_VALUE = 1e100  # sums of N squared distances stay finite in float64
SMALLEST_SPREAD = 1e-100  # squared distances stay normal floats


def true_runs(mask) -> np.ndarray:
    """``(k, 2)`` array of [start, stop) index pairs of the runs of True in ``mask``."""
    m = np.concatenate(([False], np.asarray(mask, dtype=bool), [False]))
    edges = np.flatnonzero(np.diff(m.astype(np.int8)))
    return edges.reshape(-1, 2)


def compact_positions(runs: np.ndarray, limit: int = 8) -> str:
    """``"10-12, 50 and 3 more"`` for runs [[10, 13], [50, 51], ...]."""
    parts = [f"{a}" if b - a == 1 else f"{a}-{b - 1}" for a, b in runs[:limit]]
    more = f" and {len(runs) - limit} more" if len(runs) > limit else ""
    return ", ".join(parts) + more


def _finding(code, severity, message, fix, **details) -> dict:
    return {"code": code, "severity": severity, "message": message, "fix": fix, "details": details}


def check_recording(
    rec: xr.Dataset,
    *,
    min_samples: int = 200,
    few_samples: int = 2000,
    gap_factor: float = 1.5,
    jitter_tolerance: float = 0.01,
    quantisation_levels: int = 50,
    clip_run: int = 5,
) -> list[dict]:
    """Findings about a Recording: length, missing values, sampling, resolution.

    Parameters
    ----------
    rec : a Recording
    min_samples : fewer samples than this are refused (common practice: delay
        embedding statistics need hundreds to thousands of samples).
    few_samples : fewer samples than this are accepted with a warning that the
        invariants will be fragile.
    gap_factor : a time step longer than ``gap_factor`` times the median is a gap.
    jitter_tolerance : largest accepted relative deviation of a time step from
        the median step.
    quantisation_levels : fewer distinct values than this is heavy quantisation.
    clip_run : this many equal samples in a row at the minimum or maximum
        look like clipping.

    Returns
    -------
    list of findings (dicts, JSON-able), in the order the checks run.
    """
    if not isinstance(rec, xr.Dataset) or "time" not in rec.coords:
        raise RecordingError("check_recording needs a Recording (an xr.Dataset on a time coordinate)")
    for label, value, low in (("min_samples", min_samples, 1), ("quantisation_levels", quantisation_levels, 2),
                              ("clip_run", clip_run, 2)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise RecordingError(f"{label} must be a whole number >= {low}, got {value!r}")
    if not (isinstance(gap_factor, (int, float)) and gap_factor > 1):
        raise RecordingError(f"gap_factor must be a number above 1, got {gap_factor!r}")
    if not (isinstance(jitter_tolerance, (int, float)) and 0 < jitter_tolerance < 1):
        raise RecordingError(f"jitter_tolerance must be between 0 and 1, got {jitter_tolerance!r}")
    x = signal(rec)
    t = np.asarray(rec["time"].values, dtype=float)
    findings = []
    findings += _length(x.size, min_samples, few_samples)
    findings += _not_finite(x)
    finite = x[np.isfinite(x)]
    with np.errstate(over="ignore", invalid="ignore"):  # differences of values near 1e308 overflow: found below
        if finite.size and finite.min() == finite.max():
            findings.append(_finding(
                "constant", "refuse", f"all {finite.size} finite samples equal {finite[0]:g}",
                "check that the right channel was chosen and the sensor was connected", value=float(finite[0]),
            ))
        elif finite.size > 1:
            findings += _magnitude(finite)
            findings += _quantisation(finite, quantisation_levels)
            findings += _clipping(x, clip_run)
        findings += _sampling(t, gap_factor, jitter_tolerance)
    if time_unit(rec) == UNSTATED:
        findings.append(_finding(
            "time_unit_unknown", "note", "the file does not say in what unit time is given",
            "give the sampling interval in seconds so that rates and exponents come out per second",
        ))
    return findings


def _length(n, min_samples, few_samples):
    if n < min_samples:
        return [_finding(
            "too_short", "refuse",
            f"only {n} samples; delay embedding needs at least {min_samples} (common practice)",
            f"use a longer recording (at least {min_samples} samples) or a shorter crop", samples=n,
        )]
    ceiling = 2 * math.log10(n) if n > 1 else 0.0
    short = []
    if n < few_samples:
        short = [_finding(
            "few_samples", "warn",
            f"only {n} samples: delay and dimension can be estimated, but dimensions and exponents will be fragile",
            f"record at least {few_samples} samples (ideally 10,000 or more) for invariants you can defend",
            samples=n,
        )]
    return short + [_finding(
        "dimension_ceiling", "note",
        f"{n:,} samples cannot credibly resolve a correlation dimension above about {ceiling:.1f} "
        "(2 log10 N, Eckmann & Ruelle 1992)",
        "treat larger estimates as unresolved; a longer recording raises the ceiling", samples=n,
        ceiling=round(ceiling, 3),
    )]


def _not_finite(x):
    bad = ~np.isfinite(x)
    if not bad.any():
        return []
    runs = true_runs(bad)
    lengths = runs[:, 1] - runs[:, 0]
    edge = bool(runs[0, 0] == 0 or runs[-1, 1] == x.size)
    longest = int(lengths.max())
    fillable = not edge and longest <= max(MAX_GAP, FILL_LONGEST * x.size) and bad.sum() <= FILL_TOTAL * x.size
    fix = (f"short gaps can be filled by linear interpolation (the fill-gaps option, up to {MAX_GAP} samples "
           f"each unless a longer max gap is set; the longest here is {longest})")
    if fillable and longest > MAX_GAP:
        fix += ("; a straight line across a gap this long hides the dynamics there, so treat results "
                "that depend on fine structure with care")
    fix += "; gaps at the start or end cannot be interpolated: crop them off" if edge else ""
    fix += "; or crop to a stretch without gaps"
    return [_finding(
        "not_finite", "refuse",
        f"{int(bad.sum())} samples are missing or infinite, at {compact_positions(runs)}",
        fix, nan=int(np.isnan(x).sum()), infinite=int(np.isinf(x).sum()),
        runs=runs[:50].tolist(), run_count=len(runs), longest_run=longest, at_edge=edge,
        fill_up_to=longest if fillable else None,
    )]


def _magnitude(finite):
    """Squared distances between delay vectors must neither overflow nor underflow in float64."""
    largest, spread = float(np.max(np.abs(finite))), float(np.max(finite) - np.min(finite))
    if largest <= LARGEST_VALUE and spread >= SMALLEST_SPREAD:
        return []
    what = (f"samples reach {largest:g}, beyond {LARGEST_VALUE:g}, where squared distances overflow"
            if largest > LARGEST_VALUE else
            f"samples spread over only {spread:g}, below {SMALLEST_SPREAD:g}, where squared distances underflow")
    return [_finding(
        "magnitude", "refuse", what,
        f"rescale the values (e.g. give them in other units) so that they lie within +-{LARGEST_VALUE:g} "
        f"and spread over more than {SMALLEST_SPREAD:g}", largest=largest, spread=spread,
    )]


def _sampling(t, gap_factor, tolerance):
    if t.size < 2:
        return []
    if not np.isfinite(t).all():
        runs = true_runs(~np.isfinite(t))
        return [_finding("time_not_finite", "refuse", f"time is missing at samples {compact_positions(runs)}",
                         "give every sample a time, or give the sampling interval instead of a time column",
                         runs=runs[:50].tolist())]
    d = np.diff(t)
    back = true_runs(d < 0)
    same = true_runs(d == 0)
    if len(back) or len(same):
        parts = []
        if len(back):
            parts.append(f"goes backwards after samples {compact_positions(back)}")
        if len(same):
            parts.append(f"repeats after samples {compact_positions(same)}")
        return [_finding(
            "time_not_increasing", "refuse", "time " + " and ".join(parts),
            "sort the rows by time and remove repeated samples (or give the right time column)",
            backwards=back[:50].tolist(), repeated=same[:50].tolist(),
        )]
    step = float(np.median(d))
    if not SMALLEST_SPREAD <= step <= LARGEST_VALUE:
        return [_finding(
            "time_step_magnitude", "refuse",
            f"the time step is {step:g}, outside {SMALLEST_SPREAD:g} to {LARGEST_VALUE:g}, where rates per unit "
            "time overflow or underflow", "give the sampling interval in seconds (or time in a fitting unit)",
            median_interval=step,
        )]
    gaps = np.flatnonzero(d > gap_factor * step)
    regular = np.delete(d, gaps)
    deviation = np.abs(regular - step) / step
    worst = float(deviation.max()) if deviation.size else 0.0
    if not len(gaps) and worst <= tolerance:
        return []
    words = []
    if len(gaps):
        words.append(f"{len(gaps)} gaps in time (steps over {gap_factor} x the median {step:g}, "
                     f"the first after sample {gaps[0]})")
    if worst > tolerance:
        words.append(f"time steps deviate up to {100 * worst:.2g}% from the median {step:g}")
    return [_finding(
        "uneven_sampling", "refuse",
        "; ".join(words) + "; even sampling is required for delay coordinates (common practice)",
        "turn on resampling to interpolate onto an even grid (this smooths the signal slightly), "
        "or crop to an evenly sampled stretch",
        median_interval=step, max_relative_deviation=worst,
        rms_relative_deviation=float(np.sqrt(np.mean(deviation ** 2))) if deviation.size else 0.0,
        gaps=[[float(t[i]), float(d[i] / step)] for i in gaps[:50]], gap_count=len(gaps),
    )]


def _quantisation(finite, levels):
    values = np.unique(finite)
    if values.size >= levels:
        return []
    step = float(np.min(np.diff(values)))
    return [_finding(
        "quantised", "warn",
        f"only {values.size} distinct values in {finite.size} samples (step {step:g}); "
        "many distances are ties, so neighbour searches and correlation sums below a few steps are unreliable",
        "read scaling only at distances well above the step, or record with finer resolution",
        distinct_values=int(values.size), step=step,
    )]


def _clipping(x, clip_run):
    details, words = {}, []
    for side, value in (("max", np.nanmax(x)), ("min", np.nanmin(x))):
        runs = true_runs(x == value)
        runs = runs[runs[:, 1] - runs[:, 0] >= clip_run]
        if len(runs):
            samples = int((runs[:, 1] - runs[:, 0]).sum())
            details[f"at_{side}"] = {"value": float(value), "runs": len(runs), "samples": samples,
                                     "first": runs[:20].tolist()}
            words.append(f"{samples} samples in {len(runs)} runs sit at the {side}imum {value:g}")
    if not words:
        return []
    return [_finding(
        "clipped", "warn", " and ".join(words) + f" (runs of {clip_run} or more: the sensor or recorder may have saturated)",
        "crop to a stretch without clipping, or record again with more headroom", **details,
    )]


def refusals(findings: list[dict]) -> list[dict]:
    """The findings that stop an analysis."""
    return [f for f in findings if f["severity"] == "refuse"]


def raise_if_refused(findings: list[dict]) -> None:
    """Raise :class:`RecordingError` with the first refusal's message and fix, in one line."""
    refused = refusals(findings)
    if refused:
        more = f" ({len(refused) - 1} more problems found)" if len(refused) > 1 else ""
        raise RecordingError(f"{refused[0]['message']}: {refused[0]['fix']}{more}")


def check_trend(rec: xr.Dataset, share: float = 0.5) -> list[dict]:
    """A warning when a straight line in time explains more than ``share`` of the variance.

    The share is the squared correlation of the samples with their time, R² of the
    least-squares line. A trend that large dominates every distance between delay
    vectors: nearest neighbours become neighbours in time, and the dimension and
    exponents describe the drift, not the dynamics. The 0.5 threshold is this
    project's rule of thumb, not a published test. Run on the prepared series, so a
    linear detrend clears it.
    """
    x = signal(rec)
    t = np.asarray(rec["time"].values, dtype=float)
    ok = np.isfinite(x)
    if ok.sum() < 3 or np.ptp(x[ok]) == 0:
        return []
    r2 = float(np.corrcoef(t[ok], x[ok])[0, 1] ** 2)
    if not r2 > share:
        return []
    return [_finding(
        "trend", "warn",
        f"a straight-line trend carries {100 * r2:.0f} % of the variance: neighbours in the delay space "
        "would be neighbours in time, and the invariants would describe the drift",
        "remove the straight-line trend (the linear detrend option), or crop to a stretch whose level holds still",
        trend_share=round(r2, 4),
    )]


def attach_checks(rec: xr.Dataset, findings: list[dict] | None = None) -> xr.Dataset:
    """A copy of ``rec`` with ``findings`` (by default ``check_recording(rec)``) in ``attrs["checks"]``."""
    return with_json_attr(rec, "checks", check_recording(rec) if findings is None else findings)


__all__ = ["check_recording", "check_trend", "attach_checks", "refusals", "raise_if_refused", "true_runs",
           "compact_positions", "SEVERITIES"]
