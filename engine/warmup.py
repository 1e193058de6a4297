"""Compile the numba kernels before the first user needs them.

The kernels use ``cache=True``, so a compiled copy is kept on disk and loaded on
the next start; ``warm_up`` runs the whole standard analysis once on a small
made-up series, which touches every kernel along the real code paths. The
dashboard runs it in a worker process at server start.
"""

from __future__ import annotations

import time

import numpy as np


def warm_up() -> float:
    """Run a tiny standard analysis; return the seconds it took."""
    from .analysis import run_standard_analysis
    from .recording import make_recording
    from .settings import Settings

    start = time.perf_counter()
    x = np.empty(800)
    x[0] = 0.3
    for k in range(1, x.size):  # logistic map at r = 3.9: any deterministic, non-trivial series will do
        x[k] = 3.9 * x[k - 1] * (1.0 - x[k - 1])
    run_standard_analysis(make_recording(x, source="warm-up"), Settings(surrogates=19, max_dimension=4))
    return time.perf_counter() - start
