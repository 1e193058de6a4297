"""Space-time separation plot and the Theiler window it suggests.

Pairs of delay vectors close in time are close in space for a reason that has
nothing to do with the attractor's geometry; the Theiler window excludes them
(Theiler 1986). The space-time separation plot (Provenzale et al. 1992) shows,
for each time separation, quantiles of the spatial distance between vectors that
far apart: once the contours stop rising, time separation no longer brings pairs
closer, and pairs further apart than that are fair to count.

References
----------
Theiler, Phys. Rev. A 34 (1986) 2427.
Provenzale, Smith, Vio & Murante, Physica D 58 (1992) 31.
"""

from __future__ import annotations


import numpy as np
import xarray as xr

from .arguments import as_series, whole_number
from .embedding import check_embedding, embedded_length
from .errors import LagspaceError

SATURATION = 0.9  # a contour has levelled off once it reaches this fraction of its plateau
# ... provided it has stopped rising: a straight line fitted to its later half grows by less than
# 15 % of the plateau over that half (a random walk's contour grows by about 40 %, the approach of an
# AR(1) to its plateau at 2-4 correlation times by about 6 %)
RISING = 0.15


def space_time_separation(x, delay: int, dimension: int, max_separation: int | None = None,
                          quantiles=(0.01, 0.1, 0.5), reference_points: int = 2000, seed: int = 0) -> xr.Dataset:
    """Quantiles of the max-norm distance between delay vectors ``separation`` samples apart.

    Parameters
    ----------
    x : 1-D series
    delay, dimension : the embedding
    max_separation : largest time separation in samples (default: 50 delays but at
        least 200, at most a quarter of the vectors and 2000)
    quantiles : distance quantiles drawn as contours
    reference_points : vectors drawn (seeded) as the earlier member of each pair

    Returns
    -------
    Dataset with ``space_time_quantile(quantile, separation)`` in the units of ``x``.
    """
    x = as_series(x, minimum=20, what="space-time separation")
    delay, dimension = whole_number("delay", delay, 1), whole_number("dimension", dimension, 1)
    check_embedding(x.size, dimension, delay, minimum=20)
    n = embedded_length(x.size, dimension, delay)
    if max_separation is None:
        max_separation = int(min(max(50 * delay, 200), n // 4, 2000))
    max_separation = whole_number("max_separation", max_separation, 1)
    if max_separation >= n - 1:
        raise LagspaceError(f"max_separation {max_separation} leaves no pairs among {n} vectors; use at most {n // 4}")
    q = np.asarray(quantiles, dtype=float)
    if q.ndim != 1 or q.size == 0 or np.any((q <= 0) | (q >= 1)):
        raise LagspaceError(f"quantiles must be numbers strictly between 0 and 1, got {quantiles!r}")
    rng = np.random.default_rng(seed)
    last = n - max_separation
    count = min(int(reference_points), last)
    starts = np.sort(rng.choice(last, size=count, replace=False))
    offsets = np.arange(dimension) * delay
    first = x[starts[:, None] + offsets]  # (count, m)
    seps = np.arange(1, max_separation + 1)
    out = np.empty((q.size, seps.size))
    for k, s in enumerate(seps):
        dist = np.abs(x[starts[:, None] + s + offsets] - first).max(axis=1)
        out[:, k] = np.quantile(dist, q)
    return xr.Dataset(
        {"space_time_quantile": (("quantile", "separation"), out, {
            "units": "signal units", "long_name": "quantile of the distance between delay vectors"})},
        coords={"quantile": ("quantile", q, {"units": "1", "long_name": "distance quantile"}),
                "separation": ("separation", seps, {"units": "sample", "long_name": "time separation"})},
        attrs={"delay": delay, "dimension": dimension, "reference_points": count, "seed": int(seed)},
    )


def suggest_theiler(st_ds: xr.Dataset, autocorrelation_time=None) -> dict:
    """Theiler window from where the space-time contours level off.

    The contour of the 10 % quantile (the lowest but one, for a steadier curve) is
    taken to have levelled off at the first separation where it reaches 90 % of its
    plateau, the median over the later half of the separations. The window is that
    separation, and never shorter than the autocorrelation 1/e time when one is given
    (common practice). The contour counts as level only if a straight line fitted
    to its later half rises by less than 15 % of the plateau over that half; if it
    is still rising, the window falls back to three autocorrelation times
    (common practice), or, without one, to the largest separation examined (the
    window must be at least that long), as the reason and a warning say.

    Returns
    -------
    dict with "value" (samples), "method", "reason", "warnings", "contour_quantile",
    "plateau" (signal units), "levelled_off" and "units".

    References
    ----------
    Provenzale, Smith, Vio & Murante, Physica D 58 (1992) 31.
    Theiler, Phys. Rev. A 34 (1986) 2427.
    """
    if "space_time_quantile" not in st_ds:
        raise LagspaceError("suggest_theiler needs the dataset of space_time_separation")
    if autocorrelation_time is not None and not (isinstance(autocorrelation_time, (int, float, np.integer))
                                                 and autocorrelation_time > 0):
        raise LagspaceError(f"autocorrelation_time must be a positive number of samples, got {autocorrelation_time!r}")
    qs = st_ds["quantile"].values
    level = qs[np.argmin(np.abs(qs - 0.1))]
    curve = st_ds["space_time_quantile"].sel(quantile=level).values
    seps = st_ds["separation"].values
    plateau = float(np.median(curve[curve.size // 2:]))
    half = seps[curve.size // 2:]
    slope = np.polyfit(half, curve[curve.size // 2:], 1)[0] if half.size >= 2 else 0.0
    rise = float(slope * (half[-1] - half[0]))  # growth of the fitted line over the later half
    levelled = bool(plateau > 0 and rise < RISING * plateau)
    reached = np.flatnonzero(curve >= SATURATION * plateau) if levelled else np.array([], int)
    acf = int(np.ceil(autocorrelation_time)) if autocorrelation_time else None
    warnings = []
    if reached.size:
        where = int(seps[reached[0]])
        value = max(where, acf or 1)
        reason = (f"the {level:.0%} distance contour of the space-time separation plot levels off at "
                  f"{where} samples (reaches {SATURATION:.0%} of its plateau)")
        if acf and acf > where:
            reason += f"; raised to the autocorrelation 1/e time of {acf} samples (common practice)"
        method = "space-time separation plot"
    else:
        still = (f"the {level:.0%} distance contour is still rising at the largest separation examined, "
                 f"{int(seps[-1])} samples (by {rise:.3g} over the later half, against a plateau of {plateau:.3g})"
                 if plateau > 0 else f"the {level:.0%} distance contour stays at zero (repeated values)")
        if acf:
            value, method = 3 * acf, "fallback: three autocorrelation times"
            reason = f"{still}; using three autocorrelation 1/e times, {value} samples (common practice)"
        else:
            value, method = int(seps[-1]), "fallback: largest separation examined"
            reason = f"{still}; the window must be at least that long, so {value} samples are used"
        warnings.append(f"the Theiler window is a fallback ({value} samples): {still}; examine larger "
                        "separations or check the recording for drift")
    return {"value": int(value), "method": method, "reason": reason, "warnings": warnings,
            "contour_quantile": float(level), "plateau": plateau, "levelled_off": levelled,
            "units": {"value": "sample", "plateau": "signal units"}}


__all__ = ["space_time_separation", "suggest_theiler"]
