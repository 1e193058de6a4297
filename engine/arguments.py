"""Argument checks shared by the public engine functions (one-line LagspaceError messages)."""

from __future__ import annotations

import numbers

import numpy as np
import xarray as xr

from .errors import LagspaceError


def as_series(x, minimum: int = 16, what: str = "the series") -> np.ndarray:
    """``x`` (array-like or Recording) as a finite, non-constant float64 1-D array."""
    if isinstance(x, xr.Dataset):
        from .recording import signal

        x = signal(x)
    try:
        x = np.ascontiguousarray(x, dtype=np.float64)
    except (TypeError, ValueError):
        raise LagspaceError(f"{what} must be numbers, got {type(x).__name__}") from None
    if x.ndim != 1:
        raise LagspaceError(f"{what} must be one channel (1-D), got shape {x.shape}; pick one column")
    if x.size < minimum:
        raise LagspaceError(f"{what} has {x.size} samples; need at least {minimum}: use a longer recording")
    if not np.all(np.isfinite(x)):
        raise LagspaceError(f"{what} contains NaN or infinite values; fill or crop the gaps first")
    if np.ptp(x) == 0:
        raise LagspaceError(f"{what} is constant; a constant signal carries no dynamics to embed")
    return x


def whole_number(name: str, value, low: int, high: int | None = None) -> int:
    """``value`` as an int in [low, high], else a LagspaceError naming the range."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low or (
            high is not None and value > high):
        wanted = f"between {low} and {high}" if high is not None else f">= {low}"
        raise LagspaceError(f"{name} must be a whole number {wanted}, got {value!r}")
    return int(value)


def positive_number(name: str, value) -> float:
    """``value`` as a finite float > 0, else a LagspaceError."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not 0 < value < float("inf"):
        raise LagspaceError(f"{name} must be a positive number, got {value!r}")
    return float(value)
