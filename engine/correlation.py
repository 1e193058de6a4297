"""Correlation sums, local slopes, correlation dimension D2, Takens' estimate, entropy K2.

The correlation sum C_m(r) is the fraction of pairs of delay vectors (dimension
m, max norm) closer than r, leaving out pairs closer in time than the Theiler
window. Its log-log slope over a scaling range, once it stops growing with m,
is the correlation dimension D2; the drop of ln C_m with m is the correlation
entropy K2.

References
----------
Grassberger & Procaccia, Physica D 9 (1983) 189 (correlation sum, D2).
Grassberger & Procaccia, Phys. Rev. A 28 (1983) 2591 (K2 from C_m / C_{m+1}).
Takens, in Dynamical Systems and Bifurcations (Braaksma et al., eds.), Springer
(1985) 99 (maximum-likelihood D2).
Theiler, Phys. Rev. A 34 (1986) 2427 (Theiler window).
Eckmann & Ruelle, Physica D 56 (1992) 185 (largest credible D2 ~ 2 log10 N).
"""

from __future__ import annotations


import numpy as np
import xarray as xr

from .arguments import as_series, positive_number, whole_number
from .embedding import check_embedding, embedded_length
from .errors import LagspaceError
from .kernels.pairs import pair_counts, pair_total
from .progress import Stage
from .recording import series_units
from .scaling import local_slopes, widest_flat_range

#: slopes count only where at least this many pairs are closer than r
MIN_PAIRS = 100
#: a plateau: all local slopes within this fraction of their mean
PLATEAU_TOLERANCE = 0.1
#: a plateau spans at least this factor in r
PLATEAU_MIN_FACTOR = 2.0
#: D2 "saturates" when it grows by less than this fraction over the dimensions looked at
SATURATION_TOLERANCE = 0.1
#: the largest radius, as a fraction of the extent: above it C(r) shows the attractor's size rather than
#: its dimension, and leaving those pairs out lets the count stop early
TOP_RADIUS_FRACTION = 0.25


def unit_suffix(ds, coordinate: str) -> str:
    """" K" for a coordinate in kelvin, "" when it has no unit: to follow a number in a sentence."""
    units = str(ds[coordinate].attrs.get("units", "1"))
    return "" if units in ("", "1") else f" {units}"


def _radii(values, n_radii, n_pairs):
    """Geometric radii from the data: resolution or pair statistics up to a quarter of the extent."""
    extent = float(values.max() - values.min())
    gaps = np.diff(np.unique(values))
    resolution = float(gaps.min()) if gaps.size else extent
    top = TOP_RADIUS_FRACTION * extent
    # C(low) ~ 1 / n_pairs for a set of dimension 2.5 spread over the extent
    low = max(2.0 * resolution, extent * float(n_pairs) ** -0.4)
    low = min(low, 0.01 * top)
    return np.geomspace(low, top, n_radii), extent


def _row_blocks(rows, weights, n_blocks):
    """Split rows into consecutive blocks of about equal total weight."""
    edges = np.searchsorted(np.cumsum(weights), np.linspace(0, weights.sum(), n_blocks + 1)[1:-1])
    return [b for b in np.split(rows, edges) if b.size]


def correlation_sums(x, delay, max_dimension=10, theiler=0, n_radii=32, reference_points=None,
                     seed=0, progress=None, cancel=None) -> xr.Dataset:
    """Correlation sums C_m(r) for m = 1..max_dimension in one pass over the pairs.

    Parameters
    ----------
    x : 1-D array or Recording
    delay : int, delay tau in samples
    max_dimension : int, largest embedding dimension M
    theiler : int, pairs need ``|i - j| > theiler`` samples (Theiler 1986)
    n_radii : int, number of geometric radii
    reference_points : int or None
        None counts all pairs; an int counts the pairs of that many randomly
        chosen vectors (seeded) with all others.
    seed : int, for the choice of reference points
    progress, cancel : see :mod:`engine.progress`

    Returns
    -------
    xr.Dataset with ``pair_count``, ``correlation_sum`` and ``local_slope`` on
    (dimension, radius). All dimensions use the same N - (M-1) tau vectors, so
    ratios across m compare the same pairs. The radii are geometric, from
    ``max(2 x resolution, extent x n_pairs^-0.4)`` to a quarter of the extent
    (max - min of the series); the local slope is the least-squares slope of
    ln C on ln r over five neighbouring radii, where at least ``MIN_PAIRS``
    pairs are closer than r.

    References
    ----------
    Grassberger & Procaccia, Physica D 9 (1983) 189.
    Theiler, Phys. Rev. A 34 (1986) 2427.
    """
    values, units = as_series(x), series_units(x)
    delay = whole_number("delay", delay, 1)
    max_dimension = whole_number("max_dimension", max_dimension, 1, 30)
    theiler = whole_number("theiler", theiler, 0)
    n_radii = whole_number("n_radii", n_radii, 4, 1000)
    seed = whole_number("seed", seed, 0)
    check_embedding(values.size, max_dimension, delay, minimum=theiler + 2)
    n_vectors = embedded_length(values.size, max_dimension, delay)
    if reference_points is not None:
        reference_points = whole_number("reference_points", reference_points, 1)
    stage = Stage(progress, cancel)
    stage("choosing radii", 0.0)

    if reference_points is None or reference_points >= n_vectors:
        rows, one_sided = np.arange(n_vectors, dtype=np.int64), True
        weights = np.clip(n_vectors - rows - theiler - 1, 0, None).astype(float)
    else:
        rng = np.random.default_rng(seed)
        rows = np.sort(rng.choice(n_vectors, size=reference_points, replace=False)).astype(np.int64)
        one_sided, weights = False, np.ones(rows.size)
    n_pairs = pair_total(n_vectors, theiler, rows, one_sided)
    radii, extent = _radii(values, n_radii, n_pairs)

    counts = np.zeros((max_dimension, n_radii), dtype=np.int64)
    # blocks of about 1e8 pair-dimensions (a fraction of a second) between progress reports
    blocks = _row_blocks(rows, weights, int(np.clip(n_pairs * max_dimension // 10**8, 1, min(20, rows.size))))
    for b, block in enumerate(blocks):
        stage(f"counting pairs, m = 1..{max_dimension}", b / len(blocks))
        counts += pair_counts(values, delay, max_dimension, radii, theiler, block, one_sided)
    stage("counting pairs done", 1.0)

    csum = counts / n_pairs
    with np.errstate(divide="ignore"):
        slope = local_slopes(np.where(counts >= MIN_PAIRS, np.log(csum), np.nan), np.log(radii))
    dims = ("dimension", "radius")
    return xr.Dataset(
        {
            "pair_count": (dims, counts, {"units": "1", "long_name": "number of pairs closer than r"}),
            "correlation_sum": (dims, csum, {"units": "1", "long_name": "correlation sum C(r)"}),
            "local_slope": (dims, slope, {"units": "1", "long_name": "local slope d ln C / d ln r"}),
        },
        coords={
            "dimension": ("dimension", np.arange(1, max_dimension + 1),
                          {"units": "1", "long_name": "embedding dimension"}),
            "radius": ("radius", radii, {"units": units, "long_name": "radius (max norm)"}),
        },
        attrs={
            "delay": delay, "theiler": theiler, "max_dimension": max_dimension,
            "n_samples": int(values.size), "n_vectors": int(n_vectors), "n_pairs": int(n_pairs),
            "reference_points": 0 if one_sided else int(rows.size), "seed": seed,
            "extent": extent, "norm": "max", "min_pairs": MIN_PAIRS,
        },
    )


# -- estimates -----------------------------------------------------------------
# They read only the variables and the "delay" attribute, so they also work on
# a Results dataset into which the correlation sums were merged.

def _check_sums(cs_ds, embedding_dimension=None):
    if not isinstance(cs_ds, xr.Dataset) or not {"pair_count", "correlation_sum", "local_slope"} <= set(cs_ds):
        raise LagspaceError("expected the dataset returned by correlation_sums "
                            "(with pair_count, correlation_sum and local_slope)")
    if embedding_dimension is None:
        return None
    return whole_number("embedding_dimension", embedding_dimension, 1, int(cs_ds.sizes["dimension"]))


def _pair_total(cs_ds) -> int:
    """Number of pairs the sums are fractions of (pair_count / correlation_sum)."""
    counts, csum = cs_ds["pair_count"].values, cs_ds["correlation_sum"].values
    k = np.unravel_index(np.nanargmax(counts), counts.shape)
    return int(round(counts[k] / csum[k]))


def _radius_range(cs_ds, scaling_range):
    """Indices of the first and last radius inside a user-given [r_lo, r_hi]."""
    try:
        lo, hi = (float(v) for v in scaling_range)
    except (TypeError, ValueError):
        raise LagspaceError(f"scaling_range must be two radii [r_lo, r_hi], got {scaling_range!r}") from None
    radii = cs_ds["radius"].values
    if not (0 < lo < hi):
        raise LagspaceError(f"scaling_range needs 0 < r_lo < r_hi, got [{lo:.4g}, {hi:.4g}]")
    inside = np.flatnonzero((radii >= lo * (1 - 1e-9)) & (radii <= hi * (1 + 1e-9)))
    if inside.size < 2:
        raise LagspaceError(
            f"scaling_range [{lo:.4g}, {hi:.4g}] holds fewer than 2 of the radii; "
            f"choose a wider range within [{radii[0]:.4g}, {radii[-1]:.4g}]")
    return int(inside[0]), int(inside[-1])


def _finite(v):
    return None if v is None or not np.isfinite(v) else float(v)


def _spread(block):
    """Spread of a (dimension, radius) block: across dimensions and across radii, in quadrature."""
    across_m = block.mean(axis=1).std() if block.shape[0] > 1 else 0.0
    across_r = block.mean(axis=0).std()
    return float(np.hypot(across_m, across_r))


def _saturates(values):
    """True when estimates over increasing m stop growing (fitted rise < tolerance x mean)."""
    values = np.asarray(values, dtype=float)
    if values.size < 2 or not np.isfinite(values).all():
        return False
    rise = np.polyfit(np.arange(values.size), values, 1)[0] * (values.size - 1)
    return bool(rise < SATURATION_TOLERANCE * values.mean())


def correlation_dimension(cs_ds, embedding_dimension, scaling_range=None) -> dict:
    """Correlation dimension D2 from a plateau of local slopes shared by m >= embedding_dimension.

    Parameters
    ----------
    cs_ds : dataset from :func:`correlation_sums`
    embedding_dimension : int, the chosen m0; dimensions m0..M must agree
    scaling_range : [r_lo, r_hi] or None
        None detects the range: the widest range of radii (at least a factor
        2) where all local slopes at m0..M lie within 10 % of their mean.

    Returns
    -------
    dict with ``value`` (mean local slope over the range and m0..M),
    ``uncertainty`` (spread across m and across the range, in quadrature),
    ``scaling_range``, ``saturates`` (the per-m values at m0..M stop growing),
    ``per_dimension`` ({str(m): mean slope over the range}), ``credible_limit``
    (2 log10 N, with N^2 / 2 the number of pairs), ``method``, ``reason`` and
    ``warnings`` (a list; D2 above the credible limit is one).

    References
    ----------
    Grassberger & Procaccia, Physica D 9 (1983) 189.
    Eckmann & Ruelle, Physica D 56 (1992) 185.
    """
    m0 = _check_sums(cs_ds, embedding_dimension)
    radii = cs_ds["radius"].values
    slopes = cs_ds["local_slope"].values
    top = slopes.shape[0]
    upper = slopes[m0 - 1:]
    out = {"value": None, "uncertainty": None, "scaling_range": None, "saturates": False,
           "embedding_dimension": m0, "per_dimension": {}, "warnings": []}
    if scaling_range is None:
        out["method"] = "Grassberger-Procaccia: mean local slope over a plateau shared by m0..M"
        found = widest_flat_range(upper, np.log(radii), PLATEAU_TOLERANCE, min_span=np.log(PLATEAU_MIN_FACTOR))
        if found is None:
            medians = [np.nanmedian(row) if np.isfinite(row).any() else np.nan for row in upper]
            out["reason"] = (
                f"no range of radii (factor >= {PLATEAU_MIN_FACTOR:g}) where the local slopes of m = {m0}..{top} "
                f"agree within {PLATEAU_TOLERANCE:.0%} (median slope {medians[0]:.2f} at m = {m0}, "
                f"{medians[-1]:.2f} at m = {top}): noise, too short a record, or too small an embedding dimension")
            return out
        a, b = found
    else:
        out["method"] = "Grassberger-Procaccia: mean local slope over the given scaling range"
        a, b = _radius_range(cs_ds, scaling_range)
    out["scaling_range"] = [float(radii[a]), float(radii[b])]
    per_m = slopes[:, a:b + 1].mean(axis=1)
    out["per_dimension"] = {str(m): _finite(v) for m, v in enumerate(per_m, start=1)}
    out["saturates"] = _saturates(per_m[min(m0, top - 1) - 1:])
    block = upper[:, a:b + 1]
    if not np.isfinite(block).all():
        out["reason"] = (f"fewer than {MIN_PAIRS} pairs at some radii of the range at m >= {m0}: "
                         "choose larger radii or use more data")
        return out
    value = float(block.mean())
    limit = float(np.log10(2.0 * _pair_total(cs_ds)))
    out.update(value=value, uncertainty=_spread(block), credible_limit=limit)
    out["reason"] = (f"local slopes of m = {m0}..{top} over r = {radii[a]:.4g}..{radii[b]:.4g}"
                     f"{unit_suffix(cs_ds, 'radius')}"
                     + ("" if out["saturates"] else "; they still grow with m"))
    if value > limit:
        out["warnings"].append(f"D2 = {value:.2f} exceeds 2 log10 N = {limit:.2f} (Eckmann & Ruelle 1992): "
                               "too few points to trust a value this large")
    return out


def _takens_one(csum, radii, k_max):
    """Takens' estimate from C on radii[:k_max+1], C a power law between neighbouring radii.

    D = C(r_max) / integral_0^r_max C(r) dr / r. Below the smallest radius with
    C > 0 the power law goes on with exponent D, which gives
    D = (C(r_max) - C(r_0)) / integral_{r_0}^{r_max} C d ln r.
    """
    c = csum[:k_max + 1]
    positive = np.flatnonzero(c > 0)
    if positive.size < 2:
        return np.nan
    c = c[positive[0]:]
    dlr = np.diff(np.log(radii[positive[0]:k_max + 1]))
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.log(c[1:] / c[:-1]) / dlr
        pieces = np.where(s > 0, (c[1:] - c[:-1]) / s, c[:-1] * dlr)
    return float((c[-1] - c[0]) / pieces.sum())


def takens_estimator(cs_ds, embedding_dimension, r_max) -> dict:
    """Takens' maximum-likelihood correlation dimension from the pairs closer than r_max.

    D_T = -1 / <ln(r_ij / r_max)> over pairs with r_ij < r_max, computed from
    the correlation sum (integration by parts), at m = embedding_dimension..M.

    Returns
    -------
    dict with ``value`` (mean over m0..M), ``uncertainty`` (the statistical
    error D / sqrt(number of pairs) and the spread across m, in quadrature;
    pairs are not independent, so the first part is a lower bound), ``r_max``
    (the largest radius <= r_max), ``per_dimension``, ``method``, ``reason``.
    ``r_max=None`` (no scaling range) gives value null with a reason.

    References
    ----------
    Takens, in Dynamical Systems and Bifurcations (Braaksma et al., eds.), Springer (1985) 99.
    Theiler, J. Opt. Soc. Am. A 7 (1990) 1055.
    """
    m0 = _check_sums(cs_ds, embedding_dimension)
    out = {"value": None, "uncertainty": None, "r_max": None, "embedding_dimension": m0,
           "per_dimension": {}, "method": "Takens maximum likelihood"}
    if r_max is None:
        out["reason"] = "no r_max: the correlation dimension found no scaling range"
        return out
    r_max = positive_number("r_max", r_max)
    radii = cs_ds["radius"].values
    k_max = int(np.searchsorted(radii, r_max * (1 + 1e-9), side="right")) - 1
    if k_max < 1:
        raise LagspaceError(f"r_max = {r_max:.4g} is below the second radius {radii[1]:.4g}; "
                            f"choose r_max within [{radii[1]:.4g}, {radii[-1]:.4g}]")
    out["r_max"] = float(radii[k_max])
    csum, counts = cs_ds["correlation_sum"].values, cs_ds["pair_count"].values
    per_m = np.array([_takens_one(csum[m], radii, k_max) for m in range(csum.shape[0])])
    out["per_dimension"] = {str(m): _finite(v) for m, v in enumerate(per_m, start=1)}
    upper = per_m[m0 - 1:]
    if np.nanmin(counts[m0 - 1:, k_max]) < MIN_PAIRS or not np.isfinite(upper).all():
        out["reason"] = f"fewer than {MIN_PAIRS} pairs closer than r_max at some m >= {m0}: choose a larger r_max"
        return out
    value = float(upper.mean())
    statistical = value / np.sqrt(counts[m0 - 1, k_max])
    out.update(value=value, uncertainty=float(np.hypot(statistical, upper.std())),
               reason=f"pairs closer than r = {radii[k_max]:.4g}{unit_suffix(cs_ds, 'radius')} "
                      f"at m = {m0}..{csum.shape[0]}")
    return out


def correlation_entropy(cs_ds, scaling_range, sampling_interval, embedding_dimension=None) -> dict:
    """Correlation entropy K2 from ln(C_m(r) / C_{m+1}(r)) over a scaling range.

    Going from m to m + 1 adds one coordinate one delay further on, so
    ln(C_m / C_{m+1}) estimates K2 per delay step: per sample it is divided by
    tau, per time unit by tau * sampling_interval.

    Parameters
    ----------
    cs_ds : dataset from :func:`correlation_sums` (``attrs["delay"]`` is read)
    scaling_range : [r_lo, r_hi], e.g. the one of :func:`correlation_dimension`;
        None (no scaling range) gives value null with a reason
    sampling_interval : float, time between samples
    embedding_dimension : int or None; m from here to M-1 are averaged
        (default: the last three, m = M-3..M-1, where K2(m) has settled most)

    Returns
    -------
    dict with ``value`` = ``per_time_unit`` and ``uncertainty`` (per time
    unit), ``per_sample`` and ``uncertainty_per_sample``, ``per_dimension``
    ({str(m): K2 per time unit}), ``settles`` (K2(m) changes by less than
    10 % over the dimensions used; if not, a line in ``warnings``),
    ``scaling_range``, ``dimensions``, ``method``, ``reason``.

    References
    ----------
    Grassberger & Procaccia, Phys. Rev. A 28 (1983) 2591.
    """
    _check_sums(cs_ds)
    n_dims = int(cs_ds.sizes["dimension"])
    if n_dims < 2:
        raise LagspaceError("K2 needs correlation sums at two dimensions at least: use max_dimension >= 2")
    dt = positive_number("sampling_interval", sampling_interval)
    if "delay" not in cs_ds.attrs:
        raise LagspaceError("K2 needs the delay: pass the dataset of correlation_sums (attrs['delay'])")
    tau = int(cs_ds.attrs["delay"])
    out = {"value": None, "per_time_unit": None, "uncertainty": None, "per_sample": None,
           "uncertainty_per_sample": None, "settles": False, "scaling_range": None, "dimensions": None,
           "per_dimension": {}, "warnings": [], "method": "Grassberger-Procaccia: ln(C_m / C_m+1) per delay step"}
    if scaling_range is None:
        out["reason"] = "no scaling range: the correlation dimension found none"
        return out
    a, b = _radius_range(cs_ds, scaling_range)
    m_lo = max(1, n_dims - 3) if embedding_dimension is None else \
        whole_number("embedding_dimension", embedding_dimension, 1, n_dims - 1)
    radii = cs_ds["radius"].values
    counts = cs_ds["pair_count"].values[:, a:b + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        k2 = np.where(counts[1:] >= MIN_PAIRS, np.log(counts[:-1] / counts[1:]), np.nan)  # (M-1, radii)
    out.update(scaling_range=[float(radii[a]), float(radii[b])], dimensions=[m_lo, n_dims - 1],
               per_dimension={str(m): _finite(v / (tau * dt)) for m, v in enumerate(k2.mean(axis=1), start=1)})
    block = k2[m_lo - 1:]
    if not np.isfinite(block).all():
        out["reason"] = f"fewer than {MIN_PAIRS} pairs at some radii of the range at m = {m_lo + 1}..{n_dims}"
        return out
    value, spread = float(block.mean()), _spread(block)
    per_m = block.mean(axis=1)
    rise = np.polyfit(np.arange(per_m.size), per_m, 1)[0] * (per_m.size - 1) if per_m.size > 1 else 0.0
    out.update(value=value / (tau * dt), per_time_unit=value / (tau * dt), uncertainty=spread / (tau * dt),
               per_sample=value / tau, uncertainty_per_sample=spread / tau,
               settles=bool(abs(rise) < SATURATION_TOLERANCE * value),
               reason=f"ln(C_m / C_m+1) for m = {m_lo}..{n_dims - 1} over r = {radii[a]:.4g}..{radii[b]:.4g}"
                      f"{unit_suffix(cs_ds, 'radius')}")
    if not out["settles"]:
        out["warnings"].append(
            f"K2(m) still changes with m ({per_m[0] / (tau * dt):.3g} at m = {m_lo}, {per_m[-1] / (tau * dt):.3g} "
            f"at m = {n_dims - 1} per time unit); K2 falls towards its limit as m grows, so this is an upper "
            "bound: raise the largest embedding dimension (setting max_dimension)")
    return out
