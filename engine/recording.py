"""The Recording: the one shape in which a measured channel travels through lagspace.

A Recording is an ``xr.Dataset`` with exactly one data variable on a ``time``
coordinate. Attributes (all NetCDF-safe: strings and numbers):

- on the variable: ``units``, ``long_name``
- on ``time``: ``units`` (e.g. ``"s"``; ``"sample"`` when no time was given)
- on the dataset: ``source`` (file name, never a server path), ``sha256`` (of the
  file's bytes), ``sampling_interval`` (float, in time units), ``time_unit``,
  ``checks`` (JSON list of findings), ``preparation`` (JSON list of steps done).
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from .errors import RecordingError


def make_recording(
    values,
    time=None,
    *,
    name: str = "signal",
    units: str = "1",
    time_unit: str = "sample",
    source: str = "array",
    sha256: str = "",
    sampling_interval: float | None = None,
) -> xr.Dataset:
    """Build a Recording from values and (optionally) their times.

    With ``time=None`` the times are ``i * sampling_interval`` (interval 1 and
    unit ``"sample"`` when no interval is given).
    """
    values = np.asarray(values, dtype=float)
    if values.ndim != 1:
        raise RecordingError(f"a recording needs one channel (a 1-D series), got shape {values.shape}")
    if time is None:
        dt = 1.0 if sampling_interval is None else float(sampling_interval)
        time = np.arange(values.size) * dt
    else:
        time = np.asarray(time, dtype=float)
        if time.shape != values.shape:
            raise RecordingError(f"time has {time.size} entries but the signal has {values.size}")
        if sampling_interval is None:
            diffs = np.diff(time)
            dt = float(np.median(diffs)) if diffs.size else 1.0
        else:
            dt = float(sampling_interval)
    name = str(name) or "signal"
    ds = xr.Dataset(
        {name: ("time", values, {"units": str(units), "long_name": name})},
        coords={"time": ("time", time, {"units": str(time_unit), "long_name": "time"})},
        attrs={
            "source": str(source),
            "sha256": str(sha256),
            "sampling_interval": float(dt),
            "time_unit": str(time_unit),
            "checks": "[]",
            "preparation": "[]",
        },
    )
    return ds


def variable_name(rec: xr.Dataset) -> str:
    """Name of the Recording's one data variable."""
    names = list(rec.data_vars)
    if len(names) != 1:
        raise RecordingError(f"a recording has exactly one variable, this one has {len(names)}: {names}")
    return str(names[0])


def signal(rec: xr.Dataset) -> np.ndarray:
    """The samples as a contiguous float64 array."""
    return np.ascontiguousarray(rec[variable_name(rec)].values, dtype=np.float64)


def sampling_interval(rec: xr.Dataset) -> float:
    return float(rec.attrs.get("sampling_interval", 1.0))


def time_unit(rec: xr.Dataset) -> str:
    return str(rec.attrs.get("time_unit", "sample"))


UNSTATED = "time unit"  # the time unit of a time column whose file does not name one
WORD_UNITS = ("sample", "year", "month", UNSTATED)  # time units written as words, plural when not one


# longer readings of a span in seconds: (threshold in seconds, seconds per unit, unit)
_READINGS = ((2 * 365.25 * 86400, 365.25 * 86400, "years"), (2 * 86400, 86400, "days"), (7200, 3600, "hours"),
             (120, 60, "minutes"))


def _amount(value: float) -> str:
    """A plain number: whole numbers below 10**12 in full ("604,800"), others to 4 significant digits."""
    if abs(value) < 1e12 and value == int(value):
        return f"{int(value):,}"
    return f"{value:.4g}"


def duration_text(value, unit: str) -> str:
    """A duration with its unit: "0.05 s", "3 years", "1 sample", "604,800 s (7 days)"."""
    unit, value = str(unit), float(value)
    plural = unit in WORD_UNITS and value != 1.0
    text = f"{_amount(value)} {unit}{'s' if plural else ''}"
    if unit == "s" and np.isfinite(value):
        longer = next(((per, name) for limit, per, name in _READINGS if abs(value) >= limit), None)
        if longer:
            text += f" ({value / longer[0]:.3g} {longer[1]})"
    return text


def lag_text(lag: dict, unit: str) -> str:
    """"12 samples = 0.12 s" for ``{"samples": 12, "time": 0.12}`` ("12 samples" when time is in samples)."""
    text = duration_text(lag["samples"], "sample")
    return text if unit == "sample" or lag.get("time") is None else f"{text} = {duration_text(lag['time'], unit)}"


def json_attr(ds: xr.Dataset, key: str, default=None):
    """Read a JSON-encoded attribute (``default`` when absent)."""
    text = ds.attrs.get(key)
    if text is None:
        return default
    return json.loads(text)


def with_json_attr(ds: xr.Dataset, key: str, value) -> xr.Dataset:
    """A shallow copy of ``ds`` with ``attrs[key] = json.dumps(value)``."""
    out = ds.copy()
    out.attrs = dict(ds.attrs)
    out.attrs[key] = json.dumps(value)
    return out


def append_step(rec: xr.Dataset, step: dict) -> xr.Dataset:
    """Record one preparation step (a JSON-able dict with at least ``"step"``)."""
    steps = json_attr(rec, "preparation", [])
    steps.append(step)
    return with_json_attr(rec, "preparation", steps)


#: the units of a standardised series (mean removed, divided by its standard deviation)
STANDARDISED_UNITS = "standard deviations"


def series_units(x) -> str:
    """Units of a Recording's samples: its variable's, or "standard deviations" once it
    has been standardised ("1" for a plain array)."""
    if not isinstance(x, xr.Dataset):
        return "1"
    steps = json_attr(x, "preparation", [])
    if any(isinstance(s, dict) and s.get("step") == "standardise" for s in steps):
        return STANDARDISED_UNITS
    return str(x[variable_name(x)].attrs.get("units", "1"))
