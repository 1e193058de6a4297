"""Local slopes on log-log curves and the detection of scaling ranges.

Shared by the correlation-sum and box-counting estimates: a dimension is the
slope of a log-log curve over a range where that slope is constant.

References
----------
Grassberger & Procaccia, Physica D 9 (1983) 189 (scaling region of ln C vs ln r).
Theiler, J. Opt. Soc. Am. A 7 (1990) 1055 (local slopes, choosing the range).
"""

from __future__ import annotations

import numpy as np


def local_slopes(log_y, log_x, half_width=2):
    """d log_y / d log_x along the last axis by least squares over ``2 * half_width + 1`` points.

    A centred difference smoothed over neighbours; the window is cut at the
    ends (at least 3 points). NaN wherever a point of the window is not finite.
    """
    log_y = np.asarray(log_y, dtype=float)
    log_x = np.asarray(log_x, dtype=float)
    out = np.full(log_y.shape, np.nan)
    n = log_x.size
    for k in range(n):
        lo, hi = max(k - half_width, 0), min(k + half_width + 1, n)
        if hi - lo < 3:
            continue
        u = log_x[lo:hi] - log_x[lo:hi].mean()
        y = log_y[..., lo:hi]
        with np.errstate(invalid="ignore"):
            slope = ((y - y.mean(axis=-1, keepdims=True)) * u).sum(axis=-1) / (u * u).sum()
        out[..., k] = np.where(np.isfinite(y).all(axis=-1), slope, np.nan)
    return out


def widest_flat_range(slopes, log_x, rel_tol, min_points=4, min_span=np.log(2.0)):
    """The widest run of columns over which all rows of ``slopes`` agree.

    Parameters
    ----------
    slopes : 2-D array (curves, points); NaN marks unusable points
    log_x : 1-D array, the log of the abscissa (sorted ascending)
    rel_tol : every slope in the run lies within ``rel_tol`` times the run's
        mean slope of that mean
    min_points, min_span : the run needs this many points and this width in log_x

    Returns
    -------
    (first, last) column indices (inclusive), or None when no run qualifies.
    The widest run in log_x wins; among equally wide runs the flattest.
    """
    slopes = np.atleast_2d(np.asarray(slopes, dtype=float))
    n = slopes.shape[1]
    best, best_key = None, None
    for a in range(n):
        for b in range(a + min_points - 1, n):
            block = slopes[:, a:b + 1]
            if not np.isfinite(block).all():
                break
            span = log_x[b] - log_x[a]
            mean = block.mean()
            spread = np.abs(block - mean).max()
            if span < min_span or mean <= 0 or spread > rel_tol * mean:
                continue
            key = (span, -spread / mean)
            if best_key is None or key > best_key:
                best, best_key = (a, b), key
    return best
