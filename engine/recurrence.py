"""Recurrence plots and recurrence quantification analysis.

The recurrence plot of delay vectors v_i marks the pairs (i, j) with
``|v_i - v_j| <= radius`` (maximum norm). Its diagonal lines are stretches
where two pieces of trajectory run together (determinism); its vertical lines
are states that persist (laminarity). Pairs with ``|i - j| <= theiler`` (always
the main diagonal) are left out of the plot and of every measure.

References
----------
Eckmann, Kamphorst & Ruelle, Europhys. Lett. 4 (1987) 973.
Marwan, Romano, Thiel & Kurths, Physics Reports 438 (2007) 237.
"""

from __future__ import annotations

import json
import math
import numbers
from typing import NamedTuple

import numpy as np
import scipy.sparse
import xarray as xr

from .arguments import as_series, whole_number
from .embedding import check_embedding, embedded_length
from .errors import LagspaceError
from .kernels.recurrence import line_histograms, pair_distances, recurrence_matrix
from .progress import Stage

MAX_POINTS = 20_000  # 2e8 pairs; at a 5 % rate 2e7 recurrences, about 0.3 GB with their copies
MAX_DISTANCE_SAMPLES = 1_000_000  # pairs drawn to choose the radius when there are more


class RecurrencePlot(NamedTuple):
    matrix: scipy.sparse.csr_matrix  # symmetric boolean, Theiler band empty
    radius: float
    recurrence_rate: float  # recurrent pairs / pairs outside the Theiler band
    points_used: int


def _eligible_pairs(n: int, theiler: int) -> int:
    """Pairs i < j with j - i > theiler among n vectors."""
    k = n - theiler - 1
    return k * (k + 1) // 2 if k > 0 else 0


def _radius_for_rate(x, dimension, delay, n, theiler, rate, seed) -> float:
    """Distance below which a fraction ``rate`` of the eligible pairs lie.

    Exact (all pairs) up to MAX_DISTANCE_SAMPLES pairs, otherwise from that many
    pairs drawn uniformly with ``seed``: the rate then misses by about
    sqrt(rate (1 - rate) / 1e6), 2e-4 at rate 0.05.
    """
    if _eligible_pairs(n, theiler) <= MAX_DISTANCE_SAMPLES:
        rows, cols = np.triu_indices(n, k=theiler + 1)
    else:
        rng = np.random.default_rng(seed)
        rows = rng.integers(0, n, size=2 * MAX_DISTANCE_SAMPLES)
        cols = rng.integers(0, n, size=2 * MAX_DISTANCE_SAMPLES)
        keep = np.flatnonzero(np.abs(rows - cols) > theiler)[:MAX_DISTANCE_SAMPLES]
        rows, cols = rows[keep], cols[keep]
    d = pair_distances(x, dimension, delay, rows.astype(np.int64), cols.astype(np.int64))
    k = max(1, math.ceil(rate * d.size))
    return float(np.partition(d, k - 1)[k - 1])


def recurrence_plot(x, delay: int, dimension: int, rate: float = 0.05, radius: float | None = None,
                    max_points: int = 4000, theiler: int = 0, seed: int = 0) -> RecurrencePlot:
    """Sparse recurrence matrix of the first ``max_points`` delay vectors.

    The first vectors are used as they are (not a strided subset) because lines
    need consecutive vectors. With ``radius=None`` the radius is chosen so that
    a fraction ``rate`` of the pairs outside the Theiler band recur (a fixed
    recurrence rate; Marwan et al. 2007, sec. 3.2.2); ``seed`` draws the pairs
    used for that when there are more than a million. A given ``radius`` (in
    the units of ``x``) overrides ``rate``.

    Returns a :class:`RecurrencePlot` (matrix, radius, recurrence_rate, points_used).

    References
    ----------
    Marwan, Romano, Thiel & Kurths, Physics Reports 438 (2007) 237.
    """
    x = as_series(x)
    check_embedding(x.size, dimension, delay, minimum=3)
    delay, dimension = int(delay), int(dimension)
    max_points = whole_number("max_points (time and memory grow with its square)", max_points, 3, MAX_POINTS)
    theiler = whole_number("theiler", theiler, 0)
    seed = whole_number("seed", seed, 0)
    n = min(embedded_length(x.size, dimension, delay), max_points)
    pairs = _eligible_pairs(n, theiler)
    if pairs == 0:
        raise LagspaceError(f"a Theiler window of {theiler} leaves no pairs among {n} vectors; use a smaller window")
    if radius is None:
        if isinstance(rate, bool) or not isinstance(rate, numbers.Real) or not 0 < rate < 1:
            raise LagspaceError(f"rate must be a number between 0 and 1 (e.g. 0.05), got {rate!r}")
        radius = _radius_for_rate(x, dimension, delay, n, theiler, float(rate), seed)
    elif isinstance(radius, bool) or not isinstance(radius, numbers.Real) or not 0 <= radius < math.inf:
        raise LagspaceError(f"radius must be a finite number >= 0 in the units of the signal, got {radius!r}")
    indptr, indices = recurrence_matrix(x, dimension, delay, n, theiler, float(radius))
    data = np.ones(indices.size, dtype=bool)
    matrix = scipy.sparse.csr_matrix((data, indices, indptr), shape=(n, n))
    return RecurrencePlot(matrix, float(radius), indices.size / 2 / pairs, n)


def _line_measures(hist: np.ndarray, total: int, min_line: int):
    """(share of recurrences in lines >= min_line, mean such length, entropy of their lengths)."""
    lengths = np.arange(hist.size)
    long = hist[min_line:]
    in_lines = float(np.sum(lengths[min_line:] * long))
    if total == 0 or long.sum() == 0:
        return (in_lines / total if total else None), None, None
    p = long[long > 0] / long.sum()
    return in_lines / total, in_lines / float(long.sum()), float(-np.sum(p * np.log(p)))


def recurrence_quantification(x, delay: int, dimension: int, rate: float = 0.05, radius: float | None = None,
                              max_points: int = 4000, theiler: int = 0, min_line: int = 2, seed: int = 0,
                              progress=None, cancel=None) -> xr.Dataset:
    """Recurrence quantification of the plot made by :func:`recurrence_plot`.

    With P(l) the diagonal lines of length l (above the main diagonal) and
    P(v) the vertical lines (whole matrix), all outside the Theiler band:
    determinism = sum_{l>=lmin} l P(l) / sum_l l P(l); mean_diagonal_line =
    sum_{l>=lmin} l P(l) / sum_{l>=lmin} P(l); diagonal_entropy = Shannon entropy
    (nats) of the lengths l >= lmin; laminarity and trapping_time likewise from
    P(v), with lmin = ``min_line``. Measures without lines are null with a reason.

    The dataset holds ``diagonal_line_histogram(line_length)``,
    ``vertical_line_histogram(line_length)``, the recurrent pairs above the main
    diagonal as ``recurrence_row(pair)`` / ``recurrence_column(pair)`` (int32;
    mirror them to draw the symmetric plot) and ``attrs["recurrence"]`` (JSON).

    References
    ----------
    Marwan, Romano, Thiel & Kurths, Physics Reports 438 (2007) 237.
    Zbilut & Webber, Phys. Lett. A 171 (1992) 199.
    """
    min_line = whole_number("min_line", min_line, 2)
    stage = Stage(progress, cancel)
    stage("recurrence plot: choosing the radius", 0.0)
    plot = recurrence_plot(x, delay, dimension, rate, radius, max_points, theiler, seed)
    stage("recurrence plot: counting lines", 0.6)
    m = plot.matrix
    diagonal, vertical = line_histograms(m.indptr, m.indices, plot.points_used, theiler)
    top = max(1, int(np.max(np.flatnonzero(diagonal + vertical), initial=1)))
    upper = scipy.sparse.triu(m, k=1, format="coo")
    det, mean_line, entropy = _line_measures(diagonal, upper.nnz, min_line)
    lam, trapping, _ = _line_measures(vertical, m.nnz, min_line)
    facts = {
        "radius": plot.radius, "recurrence_rate": plot.recurrence_rate, "determinism": det, "laminarity": lam,
        "mean_diagonal_line": mean_line, "diagonal_entropy": entropy, "trapping_time": trapping,
        "points_used": plot.points_used, "min_line": min_line, "theiler": int(theiler),
        "delay": int(delay), "dimension": int(dimension),
    }
    if upper.nnz == 0:
        facts["reason"] = f"no pair of vectors lies within radius {plot.radius:.3g}: use a larger radius or rate"
    elif mean_line is None or trapping is None:
        facts["reason"] = f"no diagonal or vertical line of length >= {min_line}: line measures are undefined"
    lengths = {"units": "sample", "long_name": "line length"}
    ds = xr.Dataset(
        {
            "diagonal_line_histogram": ("line_length", diagonal[1 : top + 1],
                                        {"units": "1", "long_name": "number of diagonal lines (above the main diagonal)"}),
            "vertical_line_histogram": ("line_length", vertical[1 : top + 1],
                                        {"units": "1", "long_name": "number of vertical lines"}),
            "recurrence_row": ("pair", upper.row.astype(np.int32),
                               {"units": "1", "long_name": "row (delay vector number) of a recurrent pair"}),
            "recurrence_column": ("pair", upper.col.astype(np.int32),
                                  {"units": "1", "long_name": "column (delay vector number) of a recurrent pair"}),
        },
        coords={"line_length": ("line_length", np.arange(1, top + 1), lengths)},
        attrs={"recurrence": json.dumps(facts)},
    )
    stage("recurrence plot: done", 1.0)
    return ds
