"""Largest Lyapunov exponent from the divergence of neighbouring delay vectors.

Two estimators of the mean logarithmic separation after k steps are offered:
Rosenstein et al. follow each vector's nearest neighbour, Kantz averages over
all neighbours within a radius before taking the logarithm. In the range where
separations grow exponentially both curves rise with slope equal to the
largest exponent (per sample); the slope is read off a straight-line fit.
Distances are between whole delay vectors in the maximum norm, and neighbours
closer in time than the Theiler window are skipped.

References
----------
Rosenstein, Collins & De Luca, Physica D 65 (1993) 117.
Kantz, Phys. Lett. A 185 (1994) 77.
Theiler, Phys. Rev. A 34 (1986) 2427.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .arguments import as_series, positive_number, whole_number
from .errors import LagspaceError
from .kernels.divergence import kantz_kernel, rosenstein_kernel
from .kernels.neighbours import nearest_neighbours, neighbours_within, radius_for_count_kernel
from .progress import Stage
from .recording import duration_text

# automatic Kantz radius: the median reference point has about this many neighbours. Small
# neighbourhoods start from small separations and so give the longest range of exponential
# growth (larger ones shorten it and lean the fit towards the fast early transient of flows).
KANTZ_NEIGHBOURS = 5
KANTZ_REFERENCE_POINTS = 2000


def _checked(x, delay, dimensions, theiler, steps):
    x = as_series(x)
    delay = whole_number("delay", delay, 1)
    theiler = whole_number("theiler", theiler, 0)
    steps = whole_number("steps", steps, 2)
    dims = np.atleast_1d(np.asarray(dimensions))
    if dims.size == 0 or dims.ndim != 1 or not np.issubdtype(dims.dtype, np.integer) or dims.min() < 1:
        raise LagspaceError(f"dimensions must be whole numbers >= 1, got {dimensions!r}")
    dims = np.unique(dims)
    n = x.size - (int(dims.max()) - 1) * delay - steps
    if n < 2 * theiler + 20:
        raise LagspaceError(
            f"{x.size} samples leave {max(n, 0)} starting vectors at dimension {dims.max()}, delay {delay} "
            f"and {steps} steps, too few for a Theiler window of {theiler}: use fewer steps, a smaller "
            "dimension or Theiler window, or a longer recording")
    return x, delay, [int(d) for d in dims], theiler, steps


def _coords(dims, steps):
    return {
        "dimension": ("dimension", np.asarray(dims), {"units": "1", "long_name": "embedding dimension"}),
        "step": ("step", np.arange(steps + 1), {"units": "sample", "long_name": "steps after the start"}),
    }


def _dataset(name, method, div, long_name, level, level_long_name, more, dims, steps, delay, theiler):
    """A divergence dataset: curve ``name`` (dimension, step), its saturation level and the
    per-dimension variables ``more`` ({name: (values, units, long name)})."""
    return xr.Dataset(
        {
            name: (("dimension", "step"), div, {"units": "ln(signal units)", "long_name": long_name, "method": method}),
            f"{name}_saturation": ("dimension", level, {"units": "ln(signal units)", "long_name": level_long_name}),
            **{key: ("dimension", values, {"units": units, "long_name": text})
               for key, (values, units, text) in more.items()},
        },
        coords=_coords(dims, steps),
        attrs={"delay": delay, "theiler": theiler, "method": method},
    )


def divergence_rosenstein(x, delay, dimensions, theiler, steps, progress=None, cancel=None) -> xr.Dataset:
    """Mean ln distance of nearest-neighbour pairs after k = 0..steps steps.

    Each delay vector among those that can be followed for ``steps`` steps is
    paired with its nearest neighbour (outside the Theiler window, at nonzero
    distance); ``divergence(dimension, step)`` is the mean of ln d_k over pairs.

    References
    ----------
    Rosenstein, Collins & De Luca, Physica D 65 (1993) 117.
    """
    x, delay, dims, theiler, steps = _checked(x, delay, dimensions, theiler, steps)
    stage = Stage(progress, cancel)
    div = np.full((len(dims), steps + 1), np.nan)
    pairs = np.zeros(len(dims), dtype=np.int64)
    level = np.full(len(dims), np.nan)
    for a, m in enumerate(dims):
        stage(f"nearest neighbours at dimension {m}", a / len(dims))
        n = x.size - (m - 1) * delay - steps
        partner, _ = nearest_neighbours(x, m, delay, theiler, n_vectors=n, exclude_zero=True)
        stage(f"following neighbours at dimension {m}", (a + 0.5) / len(dims))
        total, number = rosenstein_kernel(x, m, delay, partner, steps, float(x.std()))
        with np.errstate(invalid="ignore", divide="ignore"):
            div[a] = np.where(number > 0, total / number, np.nan)
        pairs[a] = int(np.count_nonzero(partner >= 0))
        level[a] = _far_level(x, m, delay, theiler, n, inside_log=True)
    stage("divergence done", 1.0)
    return _dataset("divergence", "Rosenstein", div, "mean ln distance of nearest neighbours after k steps",
                    level, "mean ln distance of vectors far apart in time",
                    {"divergence_pairs": (pairs, "1", "neighbour pairs followed")}, dims, steps, delay, theiler)


def divergence_kantz(x, delay, dimensions, theiler, steps, radius=None,
                     reference_points=KANTZ_REFERENCE_POINTS, progress=None, cancel=None) -> xr.Dataset:
    """Kantz's S(k): mean over reference points of ln(mean distance to their
    neighbours within ``radius`` after k steps), k = 0..steps.

    Parameters
    ----------
    radius : float, optional, in signal units, the same at every dimension.
        By default each dimension gets the radius at which the median
        reference point has about 5 neighbours (stored as ``kantz_radius``).
    reference_points : int, at most this many reference points, evenly spaced
        in time (all vectors that can be followed when there are fewer).

    References
    ----------
    Kantz, Phys. Lett. A 185 (1994) 77.
    """
    x, delay, dims, theiler, steps = _checked(x, delay, dimensions, theiler, steps)
    if radius is not None:
        radius = positive_number("radius", radius)
    reference_points = whole_number("reference_points", reference_points, 10)
    stage = Stage(progress, cancel)
    div = np.full((len(dims), steps + 1), np.nan)
    radii, used, level = np.zeros(len(dims)), np.zeros(len(dims), dtype=np.int64), np.full(len(dims), np.nan)
    for a, m in enumerate(dims):
        stage(f"neighbours within a radius at dimension {m}", a / len(dims))
        n = x.size - (m - 1) * delay - steps
        points = np.unique(np.linspace(0, n - 1, min(reference_points, n)).astype(np.int64))
        if radius is None:  # median of up to 200 of the reference points gets about KANTZ_NEIGHBOURS
            probes = points[:: max(1, points.size // 200)]
            r = radius_for_count_kernel(x, m, delay, theiler, n, probes, KANTZ_NEIGHBOURS,
                                        1e-6 * float(np.ptp(x)), float(np.ptp(x)))
        else:
            r = radius
        indptr, indices = neighbours_within(x, m, delay, theiler, r, points, n_vectors=n)
        logs = kantz_kernel(x, m, delay, points, indptr, indices, steps)
        have = np.isfinite(logs[:, 0])
        if have.any():
            div[a] = np.nanmean(logs[have], axis=0)
        radii[a], used[a] = r, int(have.sum())
        level[a] = _far_level(x, m, delay, theiler, n, inside_log=False)
    stage("divergence done", 1.0)
    return _dataset("divergence_kantz", "Kantz", div,
                    "mean ln of the mean distance to neighbours within the radius after k steps",
                    level, "ln mean distance of vectors far apart in time",
                    {"kantz_radius": (radii, "signal units", "neighbourhood radius"),
                     "kantz_reference_points": (used, "1", "reference points with at least one neighbour")},
                    dims, steps, delay, theiler)


def _far_level(x, m, delay, theiler, n, inside_log):
    """Level a divergence curve saturates at: the mean ln distance (Rosenstein)
    or ln of the mean distance (Kantz) between vectors far apart in time, from
    all pairs of up to 400 evenly spaced vectors outside the Theiler window."""
    points = np.unique(np.linspace(0, n - 1, min(400, n)).astype(np.int64))
    d = np.zeros((points.size, points.size))
    for c in range(m):
        v = x[points + c * delay]
        d = np.maximum(d, np.abs(v[:, None] - v[None, :]))
    far = (np.abs(points[:, None] - points[None, :]) > theiler) & (d > 0)
    if not far.any():
        return np.nan
    return float(np.mean(np.log(d[far]))) if inside_log else float(np.log(np.mean(d[far])))


# -- the exponent from a divergence curve -----------------------------------------

MIN_FIT_POINTS = 5  # a straight line needs at least this many steps to mean anything
SATURATION = 0.2  # the fit ends before the curve is within 20 % of its growth room from saturation
# RMS residual of the straight line: at most 0.5 % of the growth room. For a stretch spanning
# most of the room this keeps the local slope within about +-10 % of the fitted one (a bend
# with slope change f over a stretch of rise R leaves an RMS residual of about f R / 27).
LINEARITY = 0.005
DOUBLING = np.log(2.0)  # less growth than this over the fit range is no clear divergence
CURVES = {"divergence": "Rosenstein", "divergence_kantz": "Kantz"}


def _curve(div_ds, name, m):
    y = div_ds[name].sel(dimension=m).values.astype(float)
    k = div_ds["step"].values.astype(float)
    ok = np.isfinite(y)
    return k[ok], y[ok]


def _line(k, y):
    """Least-squares slope, its standard error and the RMS residual."""
    kc, yc = k - k.mean(), y - y.mean()
    sxx = float(kc @ kc)
    slope = float(kc @ yc) / sxx
    sse = max(float(yc @ yc) - slope * float(kc @ yc), 0.0)
    se = np.sqrt(sse / (k.size - 2) / sxx) if k.size > 2 else np.nan
    return slope, float(se), float(np.sqrt(sse / k.size))


def _auto_range(k, y, level):
    """(first, last) index of the longest straight stretch before saturation, or (None, why).

    Growth room is ``level - y[0]``: the rise from the first separation to the
    separation of unrelated vectors. The stretch must end before the curve
    comes within 20 % of that room from the level, span at least 5 steps and
    be fitted by a line with RMS residual at most 0.5 % of the room; the
    longest such stretch wins (the earliest on ties).
    """
    top = level if np.isfinite(level) else float(y.max())
    room = top - y[0]
    if not room > 0:
        return None, ("the neighbours start as far apart as unrelated vectors, so there is no divergence to "
                      "follow (the data look like noise at this scale)")
    above = np.flatnonzero(y >= top - SATURATION * room)
    end = int(above[0]) if above.size else y.size - 1
    if end + 1 < MIN_FIT_POINTS:
        return None, (f"the divergence saturates after {int(k[end])} steps, too soon for a straight-line fit: "
                      "no range of exponential growth (noise-like data, or too coarse sampling)")
    # prefix sums give every candidate line fit in O(1)
    c = [np.concatenate([[0.0], np.cumsum(v)]) for v in (np.ones_like(k), k, y, k * k, k * y, y * y)]
    edges = np.unique(np.linspace(0, end, min(end + 1, 101)).astype(int))
    a, b = np.meshgrid(edges, edges, indexing="ij")
    ok = b - a + 1 >= MIN_FIT_POINTS
    a, b = a[ok], b[ok]
    n, sk, sy, skk, sky, syy = (s[b + 1] - s[a] for s in c)
    sxx, sxy = skk - sk * sk / n, sky - sk * sy / n
    sse = np.maximum(syy - sy * sy / n - sxy * sxy / sxx, 0.0)
    good = np.sqrt(sse / n) <= LINEARITY * room
    if not good.any():
        return None, (f"no stretch of at least {MIN_FIT_POINTS} steps before saturation is straight to within "
                      f"{100 * LINEARITY:g} % of the growth room; set the fit range by hand")
    length = np.where(good, b - a, -1)
    best = np.flatnonzero(length == length.max())
    pick = best[np.argmin(a[best])]
    return (int(a[pick]), int(b[pick])), (
        f"fit over the longest stretch before saturation that a straight line follows to within "
        f"{100 * LINEARITY:g} % of the growth room ({room:.2f} ln units)")


def _estimate(div_ds, name, m, fit_range, dt, unit):
    """One estimate from curve ``name`` at dimension m (automatic range when fit_range is None)."""
    method = div_ds[name].attrs.get("method", CURVES.get(name, name))
    units = {"per_sample": "1/sample", "per_time_unit": f"1/{unit}", "value": f"1/{unit}",
             "uncertainty": f"1/{unit}", "lyapunov_time": unit, "fit_range": "sample", "fit_range_time": unit}
    out = {"value": None, "per_sample": None, "per_time_unit": None, "uncertainty": None, "fit_range": None,
           "fit_range_time": None, "lyapunov_time": None, "method": method, "embedding_dimension": int(m),
           "dimensions_used": [], "units": units, "warnings": []}
    if m not in div_ds["dimension"].values:
        out["reason"] = f"no divergence curve at dimension {m}; compute it with {m} among the dimensions"
        return out
    k, y = _curve(div_ds, name, m)
    if k.size < MIN_FIT_POINTS:
        out["reason"] = f"the divergence curve at dimension {m} has fewer than {MIN_FIT_POINTS} usable steps"
        return out
    if fit_range is None:
        level = div_ds[f"{name}_saturation"].sel(dimension=m).item() if f"{name}_saturation" in div_ds else np.nan
        picked, how = _auto_range(k, y, level)
        if picked is None:
            out["reason"] = f"no exponent: {how}."
            return out
        inside = slice(picked[0], picked[1] + 1)
    else:
        first, last = fit_range
        mask = (k >= first) & (k <= last)
        if mask.sum() < 3:
            out["reason"] = f"the fit range {first:g} to {last:g} steps holds fewer than 3 points of the curve"
            return out
        inside = np.flatnonzero(mask)
        how = "fit over a range set by the user"
    kk, yy = k[inside], y[inside]
    slope, se, _ = _line(kk, yy)
    # spread across neighbouring dimensions, over the same range
    slopes, used = [], []
    for d in (m - 1, m, m + 1):
        if d in div_ds["dimension"].values:
            kd, yd = _curve(div_ds, name, d)
            sel = (kd >= kk[0]) & (kd <= kk[-1])
            if sel.sum() >= 3:
                slopes.append(_line(kd[sel], yd[sel])[0])
                used.append(int(d))
    spread = float(np.std(slopes, ddof=1)) if len(slopes) > 1 else 0.0
    half = kk.size // 2
    halves = (abs(_line(kk[:half + 1], yy[:half + 1])[0] - _line(kk[half:], yy[half:])[0]) / 2
              if kk.size >= 6 else 0.0)
    total = float(np.sqrt(np.nan_to_num(se) ** 2 + spread ** 2 + halves ** 2))
    lam = slope / dt
    out.update(
        value=lam, per_sample=slope, per_time_unit=lam, uncertainty=total / dt,
        uncertainty_parts={"fit": float(np.nan_to_num(se)) / dt, "dimensions": spread / dt, "range": halves / dt},
        fit_range=[int(kk[0]), int(kk[-1])], fit_range_time=[float(kk[0] * dt), float(kk[-1] * dt)],
        dimensions_used=used,
    )
    units["uncertainty_parts"] = f"1/{unit}"
    growth = slope * (kk[-1] - kk[0])
    out["growth_over_range"] = float(growth)
    units["growth_over_range"] = "ln units"
    if growth < DOUBLING:
        out["warnings"].append(
            f"over the {method} fit range the separation grows by a factor {np.exp(growth):.2f}, less than 2: "
            "no clear exponential divergence, so the exponent is consistent with zero (periodic or "
            "quasi-periodic motion, or too short a range)")
    elif abs(lam) <= 2 * out["uncertainty"]:
        out["warnings"].append(f"the {method} exponent is consistent with zero within twice its uncertainty")
    elif lam > 0:
        out["lyapunov_time"] = 1.0 / lam
    out["reason"] = (
        f"{method} divergence at dimension {m}: {how}, steps {int(kk[0])} to {int(kk[-1])} "
        f"({kk[0] * dt:g} to {duration_text(kk[-1] * dt, unit)}); slope {slope:.4g} per sample = {lam:.4g} per {unit}. "
        f"The uncertainty combines the fit's standard error, the spread over dimensions {used} and the "
        "difference between the slopes of the range's two halves.")
    return out


def _compare(first: dict, second: dict, unit: str) -> str:
    a, b = first["per_time_unit"], second["per_time_unit"]
    if a is None or b is None:
        missing = first if a is None else second
        return f"only one method gives an exponent; {missing['method']}: {missing['reason']}"
    if first["growth_over_range"] < DOUBLING and second["growth_over_range"] < DOUBLING:
        return (f"neither {first['method']} ({a:.3g} per {unit}) nor {second['method']} ({b:.3g} per {unit}) sees "
                "separations even double over its fit range: both say the exponent is consistent with zero.")
    allowed = 2 * np.hypot(first["uncertainty"], second["uncertainty"])
    text = (f"{first['method']} gives {a:.3g} ± {first['uncertainty']:.2g} and {second['method']} "
            f"{b:.3g} ± {second['uncertainty']:.2g} per {unit}")
    if abs(a - b) <= allowed:
        return text + "; they agree within twice their combined uncertainty."
    longer = max((first, second), key=lambda e: e["fit_range"][1] - e["fit_range"][0])
    return (text + "; they disagree. Rosenstein follows each vector's single nearest neighbour (the smallest "
            "starting separations, most exposed to noise); Kantz the mean distance to all neighbours within a "
            "radius (larger starting separations, so a shorter straight range, nearer the early transient and "
            f"saturation). Compare the two curves; the longer straight range here is {longer['method']}'s "
            f"({longer['fit_range'][0]} to {longer['fit_range'][1]} steps).")


def _estimates(div_ds, embedding_dimension, fit_range, sampling_interval, time_unit):
    m = whole_number("embedding_dimension", embedding_dimension, 1)
    dt = positive_number("sampling_interval", sampling_interval)
    names = [name for name in CURVES if name in div_ds]
    if not names:
        raise LagspaceError("the dataset holds no divergence curve; compute one with divergence_rosenstein "
                            "or divergence_kantz first")
    found = [_estimate(div_ds, name, m, fit_range, dt, str(time_unit)) for name in names]
    main = dict(found[0])
    if len(found) == 2:
        main["kantz"] = found[1]
        main["comparison"] = _compare(found[0], found[1], str(time_unit))
        main["warnings"] = found[0]["warnings"] + found[1]["warnings"]
        a, b = found[0]["per_time_unit"], found[1]["per_time_unit"]
        if a is not None and b is not None:
            # Two accepted estimators that differ say how well the method itself knows the
            # exponent: their difference joins the headline uncertainty.
            main["uncertainty_parts"] = dict(main["uncertainty_parts"], between_methods=abs(a - b))
            main["uncertainty"] = float(np.hypot(main["uncertainty"], a - b))
            main["reason"] += " The difference from the Kantz estimate is added to the uncertainty."
    return main


def largest_lyapunov(div_ds: xr.Dataset, embedding_dimension, sampling_interval=1.0, time_unit="sample") -> dict:
    """Largest Lyapunov exponent from a divergence curve, with an automatic fit range.

    The slope of the mean ln separation against steps is fitted over the
    longest straight stretch before saturation (see ``_auto_range``). With
    both ``divergence`` (Rosenstein) and ``divergence_kantz`` in ``div_ds``
    the Rosenstein estimate is returned with the Kantz one under "kantz" and a
    "comparison" sentence.

    Returns
    -------
    dict: "value" (= "per_time_unit"), "per_sample", "per_time_unit",
    "uncertainty" (per time unit: fit standard error, spread over the
    neighbouring dimensions and over the two halves of the range, and, with
    both curves, the difference between the two methods, combined in
    quadrature; broken down in "uncertainty_parts"), "fit_range" (steps),
    "fit_range_time", "lyapunov_time" (1/exponent, null unless clearly positive),
    "growth_over_range" (ln of the separation's growth over the fit range),
    "method", "reason", "dimensions_used", "warnings", "units". Values are
    null, with a reason, when no exponent can be read off.

    References
    ----------
    Rosenstein, Collins & De Luca, Physica D 65 (1993) 117.
    Kantz, Phys. Lett. A 185 (1994) 77.
    """
    return _estimates(div_ds, embedding_dimension, None, sampling_interval, time_unit)


def fit_divergence(div_ds: xr.Dataset, dimension, fit_range, sampling_interval=1.0, time_unit="sample") -> dict:
    """The estimate of :func:`largest_lyapunov` over a fit range chosen by the user.

    ``fit_range`` is (first_step, last_step) in samples.
    """
    try:
        first, last = (float(v) for v in fit_range)
    except (TypeError, ValueError):
        raise LagspaceError(f"fit_range must be two step numbers (first, last), got {fit_range!r}") from None
    if not 0 <= first < last:
        raise LagspaceError(f"fit_range must run from a first step >= 0 to a later last step, got {fit_range!r}")
    return _estimates(div_ds, dimension, (first, last), sampling_interval, time_unit)


__all__ = ["divergence_rosenstein", "divergence_kantz", "largest_lyapunov", "fit_divergence"]
