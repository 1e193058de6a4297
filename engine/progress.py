"""Progress reporting and cancellation for long work.

The engine reports through a plain callback ``progress(fraction, message)`` and
polls a cancel flag (anything with ``is_set()``, e.g. ``threading.Event``, or a
zero-argument callable returning bool). It knows nothing about who listens.
"""

from __future__ import annotations

from typing import Callable, Optional

from .errors import Cancelled

ProgressCallback = Optional[Callable[[float, str], None]]


def _is_cancelled(cancel) -> bool:
    if cancel is None:
        return False
    if hasattr(cancel, "is_set"):
        return bool(cancel.is_set())
    return bool(cancel())


class Stage:
    """Map the progress of one stage onto a sub-interval [start, stop] of the whole.

    ``Stage(progress, cancel, 0.2, 0.5)("counting pairs", 0.5)`` reports 0.35.
    Calling it also checks the cancel flag and raises :class:`Cancelled`.
    """

    def __init__(self, progress: ProgressCallback, cancel, start: float = 0.0, stop: float = 1.0):
        self.progress, self.cancel, self.start, self.stop = progress, cancel, start, stop

    def __call__(self, message: str, fraction: float = 0.0) -> None:
        if _is_cancelled(self.cancel):
            raise Cancelled("analysis cancelled")
        if self.progress is not None:
            f = self.start + (self.stop - self.start) * min(max(fraction, 0.0), 1.0)
            self.progress(float(f), message)

    def sub(self, start: float, stop: float) -> "Stage":
        """A stage covering [start, stop] of this stage."""
        span = self.stop - self.start
        return Stage(self.progress, self.cancel, self.start + span * start, self.start + span * stop)

    def callback(self, start: float, stop: float) -> Callable[[float, str], None]:
        """A plain ``progress(fraction, message)`` callback for [start, stop] of this stage,
        to hand to a function that makes its own Stage."""
        sub = self.sub(start, stop)
        return lambda fraction, message: sub(message, fraction)
