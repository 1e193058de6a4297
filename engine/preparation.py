"""Preparation steps: each returns a new Recording and records itself in ``attrs["preparation"]``.

The steps leave ``attrs["checks"]`` as they found it; :func:`prepare` runs the
checks again at the end and stores the new findings.

Delay coordinates assume evenly spaced samples (Packard et al. 1980; Takens
1981; common practice); linear interpolation onto an even grid or across short
gaps alters the signal at scales below the sampling interval, and each step
says how much it changed.

References
----------
Packard, Crutchfield, Farmer & Shaw, Phys. Rev. Lett. 45 (1980) 712.
Takens, in Dynamical Systems and Turbulence (Rand & Young, eds.), Springer (1981) 366.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .checks import attach_checks, check_recording, check_trend, compact_positions, raise_if_refused, true_runs
from .errors import RecordingError
from .recording import append_step, signal, time_unit, variable_name
from .settings import DETREND_KINDS, Settings

MAX_GRID = 10_000_000


def _rebuild(rec: xr.Dataset, values, time=None, *, units=None, long_name=None, unit_of_time=None) -> xr.Dataset:
    """A Recording like ``rec`` with new values (and optionally a new time axis)."""
    name = variable_name(rec)
    var_attrs = dict(rec[name].attrs)
    var_attrs.update({k: v for k, v in (("units", units), ("long_name", long_name)) if v is not None})
    t = rec["time"].values if time is None else np.asarray(time, dtype=float)
    t_attrs = dict(rec["time"].attrs)
    attrs = dict(rec.attrs)
    if unit_of_time is not None:
        t_attrs["units"] = attrs["time_unit"] = unit_of_time
    if time is not None and t.size > 1:
        attrs["sampling_interval"] = float(np.median(np.diff(t)))
    return xr.Dataset(
        {name: ("time", np.asarray(values, dtype=float), var_attrs)},
        coords={"time": ("time", t, t_attrs)},
        attrs=attrs,
    )


def _series(rec) -> tuple[np.ndarray, np.ndarray]:
    """(samples, times) of a Recording, after checking that it is one."""
    if not isinstance(rec, xr.Dataset) or "time" not in rec.coords:
        raise RecordingError("preparation needs a Recording (an xr.Dataset on a time coordinate), e.g. from load_recording")
    return signal(rec), np.asarray(rec["time"].values, dtype=float)


def _positive(label, value):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) or not (
        np.isfinite(value) and value > 0
    ):
        raise RecordingError(f"{label} must be a positive number, got {value!r}")
    return float(value)


def set_sampling_interval(rec: xr.Dataset, interval: float) -> xr.Dataset:
    """Re-stamp the time as ``t0 + i * interval`` in seconds (the file's own time is replaced)."""
    x, t = _series(rec)
    dt = _positive("sampling_interval", interval)
    t0 = float(t[0]) if time_unit(rec) == "s" and t.size else 0.0
    out = _rebuild(rec, x, t0 + dt * np.arange(t.size), unit_of_time="s")
    out.attrs["sampling_interval"] = dt
    return append_step(out, {"step": "set_sampling_interval", "interval": dt, "time_unit": "s",
                             "previous_time_unit": time_unit(rec)})


def fill_gaps(rec: xr.Dataset, max_gap: int = Settings.max_gap) -> xr.Dataset:
    """Fill runs of at most ``max_gap`` missing (NaN or infinite) samples by linear interpolation in time.

    Runs touching the start or end are left as they are (there is nothing to
    interpolate from on one side; crop them off). A longer interior run raises
    :class:`RecordingError`.
    """
    if isinstance(max_gap, bool) or not isinstance(max_gap, (int, np.integer)) or max_gap < 1:
        raise RecordingError(f"max_gap must be a whole number of samples >= 1, got {max_gap!r}")
    x, t = _series(rec)
    x = x.copy()
    runs = true_runs(~np.isfinite(x))
    interior = runs[(runs[:, 0] > 0) & (runs[:, 1] < x.size)] if len(runs) else runs
    edges = runs[(runs[:, 0] == 0) | (runs[:, 1] == x.size)] if len(runs) else runs
    long = interior[interior[:, 1] - interior[:, 0] > max_gap]
    if len(long):
        raise RecordingError(
            f"{len(long)} gaps are longer than {max_gap} samples (at {compact_positions(long)}): "
            "crop around them, or set a max gap that long if interpolating that far is acceptable"
        )
    good = np.isfinite(x)
    filled = ~good
    for a, b in edges:
        filled[a:b] = False
    if filled.any():
        x[filled] = np.interp(t[filled], t[good], x[good])
    out = _rebuild(rec, x)
    return append_step(out, {
        "step": "fill_gaps", "max_gap": int(max_gap), "method": "linear interpolation in time",
        "filled": interior.tolist(), "samples_filled": int(filled.sum()), "left_at_edges": edges.tolist(),
        "message": f"filled {int(filled.sum())} samples at {compact_positions(interior)}" if len(interior)
        else "no interior gaps to fill",
    })


def resample(rec: xr.Dataset, interval: float | None = None) -> xr.Dataset:
    """Linear interpolation onto an even grid ``t0 + k * interval`` (default: the median time step).

    A sample next to a missing one stays missing (NaN spreads to its neighbours).
    """
    x, t = _series(rec)
    with np.errstate(over="ignore", invalid="ignore"):  # times near 1e308 overflow: refused below
        steps = np.diff(t)
        if t.size < 2 or not np.all(steps > 0):
            raise RecordingError("resampling needs two or more samples with time increasing from each to the next: "
                                 "sort the rows by time and remove repeats")
        dt = float(np.median(steps)) if interval is None else _positive("interval", interval)
        span = float((t[-1] - t[0]) / dt)
    if not span < MAX_GRID:
        raise RecordingError(f"resampling at {dt:g} would make {span + 1:g} samples (limit {MAX_GRID}): "
                             "choose a longer interval")
    count = int(np.floor(span * (1 + 1e-12))) + 1
    grid = t[0] + dt * np.arange(count)
    out = _rebuild(rec, np.interp(grid, t, x), grid)
    out.attrs["sampling_interval"] = dt
    return append_step(out, {
        "step": "resample", "interval": dt, "interval_from": "median step" if interval is None else "given",
        "method": "linear interpolation", "samples_before": int(t.size), "samples_after": count,
        "largest_step_before": float(steps.max()), "smallest_step_before": float(steps.min()),
        "warning": "values between the original samples are interpolated, which smooths the signal; "
                   "dimension and Lyapunov estimates at scales below the old steps are affected",
    })


def crop(rec: xr.Dataset, start: float | None = None, stop: float | None = None) -> xr.Dataset:
    """Keep the samples with ``start <= time <= stop`` (either end open when None)."""
    for label, value in (("start", start), ("stop", stop)):
        if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float, np.number))
                                  or not np.isfinite(value)):
            raise RecordingError(f"crop {label} must be a time (a finite number), got {value!r}")
    if start is not None and stop is not None and not start < stop:
        raise RecordingError(f"crop start ({start}) must be before crop stop ({stop})")
    x, t = _series(rec)
    keep = np.ones(t.size, dtype=bool)
    if start is not None:
        keep &= t >= start
    if stop is not None:
        keep &= t <= stop
    if not keep.any():
        raise RecordingError(
            f"crop [{start}, {stop}] holds no samples; the recording runs from {t.min():g} to {t.max():g} {time_unit(rec)}"
        )
    out = _rebuild(rec, x[keep], t[keep])
    return append_step(out, {"step": "crop", "start": start, "stop": stop, "samples_before": int(t.size),
                             "samples_after": int(keep.sum())})


def detrend(rec: xr.Dataset, kind: str = "mean") -> xr.Dataset:
    """Remove the mean (``"mean"``) or a least-squares straight line in time (``"linear"``).

    ``"none"`` returns ``rec`` unchanged and records nothing. Missing samples
    are ignored in the fit and stay missing.
    """
    if kind not in DETREND_KINDS:
        raise RecordingError(f"detrend must be one of {', '.join(DETREND_KINDS)}, got {kind!r}")
    x, t = _series(rec)
    if kind == "none":
        return rec
    good = np.isfinite(x)
    if not good.any():
        raise RecordingError("detrending needs finite samples; this recording has none")
    if kind == "mean":
        mean = float(x[good].mean())
        out, removed = x - mean, {"mean": mean}
    else:
        if good.sum() < 2:
            raise RecordingError("linear detrending needs at least two finite samples")
        slope, intercept = np.polyfit(t[good] - t[0], x[good], 1)
        out = x - (intercept + slope * (t - t[0]))
        removed = {"slope": float(slope), "intercept": float(intercept), "time_origin": float(t[0])}
    return append_step(_rebuild(rec, out), {"step": "detrend", "kind": kind, "removed": removed})


def standardise(rec: xr.Dataset) -> xr.Dataset:
    """Subtract the mean and divide by the standard deviation; the units become ``"1"``."""
    x, _ = _series(rec)
    good = np.isfinite(x)
    std = float(x[good].std()) if good.any() else 0.0
    if not std > 0:
        raise RecordingError("a constant (or empty) signal cannot be standardised: check the chosen channel")
    mean = float(x[good].mean())
    name = variable_name(rec)
    units = rec[name].attrs.get("units", "1")
    out = _rebuild(rec, (x - mean) / std, units="1",
                   long_name=f"{rec[name].attrs.get('long_name', name)} (standardised)")
    return append_step(out, {"step": "standardise", "mean": mean, "std": std, "original_units": units})


def _regularise_time(rec: xr.Dataset) -> xr.Dataset:
    """Put an evenly sampled (within tolerance) recording on exact times ``t0 + i dt``."""
    x, t = _series(rec)
    if t.size < 2:
        return rec
    # The mean step over the whole record, cleared of float noise in the last digits
    # (times written as 0.01 * k come back as 0.0099999999999997868...).
    dt = float(f"{(t[-1] - t[0]) / (t.size - 1):.12g}")
    grid = t[0] + dt * np.arange(t.size)
    shift = float(np.max(np.abs(t - grid)))
    out = _rebuild(rec, x, grid)
    out.attrs["sampling_interval"] = dt
    if shift <= 1e-9 * dt:
        return out
    return append_step(out, {"step": "regularise_time", "interval": dt, "largest_shift": shift,
                             "message": "time stamps moved onto an exact even grid (within the accepted jitter)"})


def prepare(rec: xr.Dataset, settings: Settings) -> xr.Dataset:
    """Apply the preparation that ``settings`` asks for, check the result, and refuse unfit data.

    In order: ``sampling_interval`` (re-stamp), ``fill_gaps``, ``resample``,
    ``crop_start``/``crop_stop``; then :func:`engine.checks.check_recording`
    runs (a refusal raises :class:`RecordingError`, otherwise the findings go
    into ``attrs["checks"]``); then ``detrend``, :func:`engine.checks.check_trend`
    and ``standardise``.
    The time coordinate of the result is evenly spaced.
    """
    if not isinstance(settings, Settings):
        raise RecordingError("prepare needs an engine.settings.Settings")
    out = rec
    if settings.sampling_interval is not None:
        out = set_sampling_interval(out, settings.sampling_interval)
    if settings.fill_gaps:
        out = fill_gaps(out, settings.max_gap)
    if settings.resample:
        out = resample(out)
    if settings.crop_start is not None or settings.crop_stop is not None:
        out = crop(out, settings.crop_start, settings.crop_stop)
    findings = check_recording(out)  # before detrending, which would hide clipping and quantisation
    raise_if_refused(findings)
    out = detrend(out, settings.detrend)
    findings += check_trend(out)  # after detrending, which clears it
    if settings.standardise:
        out = standardise(out)
    return attach_checks(_regularise_time(out), findings)


__all__ = ["prepare", "fill_gaps", "resample", "crop", "detrend", "standardise", "set_sampling_interval"]
