"""Analysis settings: one frozen dataclass with validation and a JSON round-trip.

``None`` in a choice that can be estimated (delay, dimension, Theiler window)
means "estimate it from the data"; a number means "use this value".
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass, fields
from typing import Optional

from .errors import LagspaceError

SURROGATE_KINDS = ("ft", "aaft", "iaaft")
SURROGATE_STATISTICS = ("prediction_error", "time_asymmetry")
DETREND_KINDS = ("none", "mean", "linear")


@dataclass(frozen=True)
class Settings:
    """Everything that decides the result of an analysis, and nothing else."""

    # -- input -----------------------------------------------------------------
    variable: Optional[str] = None
    sampling_interval: Optional[float] = None
    # -- preparation -------------------------------------------------------------
    crop_start: Optional[float] = None
    crop_stop: Optional[float] = None
    detrend: str = "mean"
    standardise: bool = False
    resample: bool = False
    fill_gaps: bool = False
    max_gap: int = 3
    # -- delay and dimension -----------------------------------------------------
    delay: Optional[int] = None
    dimension: Optional[int] = None
    max_delay: Optional[int] = None
    max_dimension: int = 10
    mi_bins: Optional[int] = None
    fnn_rtol: float = 15.0
    fnn_atol: float = 2.0
    fnn_threshold: float = 0.01
    cao_threshold: float = 0.05
    # -- invariants --------------------------------------------------------------
    theiler: Optional[int] = None
    radii: int = 32
    scaling_range: Optional[tuple[float, float]] = None  # radii (signal units) for D2 and K2; None: detected
    divergence_range: Optional[tuple[int, int]] = None  # steps (samples) for the Lyapunov fit; None: detected
    reference_points: Optional[int] = 5000
    lyapunov_steps: Optional[int] = None
    surrogates: int = 39
    surrogate_max_samples: int = 10_000
    surrogate_kind: str = "iaaft"
    surrogate_statistic: str = "prediction_error"
    recurrence_rate: float = 0.05
    recurrence_max_points: int = 4000
    min_line: int = 2
    seed: int = 0

    def __post_init__(self):
        errs = []

        def positive_int(name, value, minimum=1, allow_none=False, maximum=10**9):
            if value is None and allow_none:
                return
            if isinstance(value, bool) or not isinstance(value, int) or not minimum <= value <= maximum:
                errs.append(f"{name} must be a whole number from {minimum} to {maximum}, got {value!r}")

        def positive_float(name, value, allow_none=False):
            if value is None and allow_none:
                return
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 or value != value:
                errs.append(f"{name} must be a positive number, got {value!r}")

        positive_float("sampling_interval", self.sampling_interval, allow_none=True)
        positive_int("delay", self.delay, allow_none=True, maximum=100000)
        positive_int("dimension", self.dimension, allow_none=True)
        positive_int("max_delay", self.max_delay, allow_none=True, maximum=100000)
        positive_int("max_dimension", self.max_dimension, minimum=2)
        positive_int("mi_bins", self.mi_bins, minimum=2, allow_none=True, maximum=1024)
        positive_int("max_gap", self.max_gap, maximum=10000)
        positive_float("fnn_rtol", self.fnn_rtol)
        positive_float("fnn_atol", self.fnn_atol)
        positive_float("fnn_threshold", self.fnn_threshold)
        positive_float("cao_threshold", self.cao_threshold)
        positive_int("theiler", self.theiler, minimum=0, allow_none=True, maximum=100000)
        positive_int("radii", self.radii, minimum=4, maximum=256)
        positive_int("reference_points", self.reference_points, minimum=10, allow_none=True, maximum=1000000)
        positive_int("lyapunov_steps", self.lyapunov_steps, minimum=2, allow_none=True, maximum=100000)
        positive_int("surrogates", self.surrogates, minimum=0, maximum=999)
        positive_int("surrogate_max_samples", self.surrogate_max_samples, minimum=100, maximum=10000000)
        positive_int("recurrence_max_points", self.recurrence_max_points, minimum=10, maximum=20000)
        positive_int("min_line", self.min_line, minimum=2, maximum=1000)
        positive_int("seed", self.seed, minimum=0, maximum=4294967295)
        if isinstance(self.surrogates, int) and 0 < self.surrogates < 19:
            errs.append(f"surrogates must be 0 (no test) or at least 19 (one-sided rank test at 5%), "
                        f"got {self.surrogates}")
        if not (0 < self.recurrence_rate < 1):
            errs.append(f"recurrence_rate must be between 0 and 1, got {self.recurrence_rate!r}")
        if self.detrend not in DETREND_KINDS:
            errs.append(f"detrend must be one of {', '.join(DETREND_KINDS)}, got {self.detrend!r}")
        if self.surrogate_kind not in SURROGATE_KINDS:
            errs.append(f"surrogate_kind must be one of {', '.join(SURROGATE_KINDS)}, got {self.surrogate_kind!r}")
        if self.surrogate_statistic not in SURROGATE_STATISTICS:
            errs.append(
                f"surrogate_statistic must be one of {', '.join(SURROGATE_STATISTICS)}, "
                f"got {self.surrogate_statistic!r}"
            )
        self._check_ranges(errs)
        if self.dimension is not None and self.dimension > 30:
            errs.append(f"dimension must be at most 30, got {self.dimension}")
        if self.max_dimension > 30:
            errs.append(f"max_dimension must be at most 30, got {self.max_dimension}")
        if (
            self.crop_start is not None
            and self.crop_stop is not None
            and not self.crop_start < self.crop_stop
        ):
            errs.append(f"crop_start ({self.crop_start}) must be before crop_stop ({self.crop_stop})")
        if errs:
            raise LagspaceError("; ".join(errs))

    def _check_ranges(self, errs: list) -> None:
        """Fit ranges: two numbers, first below last; stored as tuples (JSON gives lists)."""
        for name, whole in (("scaling_range", False), ("divergence_range", True)):
            value = getattr(self, name)
            if value is None:
                continue
            what = "two step numbers (first, last), 0 <= first < last <= 100000" if whole else \
                "two radii (low, high) in the signal's units, 0 < low < high"
            try:
                pair = tuple(float(v) for v in value)
                numeric = all(not isinstance(v, (bool, str)) for v in value)
            except (TypeError, ValueError):
                pair, numeric = (), False
            ok = numeric and len(pair) == 2 and all(v == v and abs(v) != float("inf") for v in pair)
            ok = ok and (0 <= pair[0] < pair[1] <= 100000 and all(v == int(v) for v in pair) if whole
                         else 0 < pair[0] < pair[1])
            if not ok:
                errs.append(f"{name} must be {what}, or null to detect it; got {value!r}")
                continue
            object.__setattr__(self, name, tuple(int(v) for v in pair) if whole else pair)

    # -- round trip --------------------------------------------------------------
    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True)

    @classmethod
    def from_dict(cls, data: dict) -> "Settings":
        if not isinstance(data, dict):
            raise LagspaceError("settings must be a JSON object of name: value pairs")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise LagspaceError(f"unknown settings: {', '.join(unknown)}; known settings are {', '.join(sorted(known))}")
        try:
            return cls(**data)
        except TypeError as exc:  # wrong types that dataclass itself rejects
            raise LagspaceError(f"settings could not be read: {exc}") from None

    @classmethod
    def from_json(cls, text: str) -> "Settings":
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise LagspaceError(f"settings are not valid JSON ({exc.msg} at line {exc.lineno})") from None
        return cls.from_dict(data)

    def replace(self, **changes) -> "Settings":
        """A copy with some settings changed (validated again)."""
        return dataclasses.replace(self, **changes)


__all__ = ["Settings", "SURROGATE_KINDS", "SURROGATE_STATISTICS", "DETREND_KINDS"]
