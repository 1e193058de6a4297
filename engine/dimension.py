"""Choosing the embedding dimension: false nearest neighbours and Cao's E1/E2.

Both methods follow each delay vector's nearest neighbour at dimension d into
dimension d + 1. Distances are in the maximum norm; neighbours closer than the
Theiler window in time, and neighbours at distance exactly 0 (duplicates, e.g.
from a coarse A/D converter), are skipped, as Cao (1997) asks.

References
----------
Kennel, Brown & Abarbanel, Phys. Rev. A 45 (1992) 3403.
Cao, Physica D 110 (1997) 43.
Theiler, Phys. Rev. A 34 (1986) 2427.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .arguments import as_series, positive_number, whole_number
from .embedding import check_embedding
from .kernels.neighbours import nearest_neighbours
from .progress import Stage

E1_LEVEL = 0.9  # E1 must have come this close to 1 to count as saturated
E2_TOLERANCE = 0.1  # |E2 - 1| below this at every d reads as "looks stochastic" ...
E2_ERRORS = 3.0  # ... or below this many standard errors, whichever is larger


def _pairs(x, delay, dimension, theiler):
    """Nearest-neighbour pairs at ``dimension`` among the vectors that have a
    (d+1)-th coordinate: (distance at d, |difference of the (d+1)-th coordinate|)."""
    n = x.size - dimension * delay
    index, distance = nearest_neighbours(x, dimension, delay, theiler, n_vectors=n, exclude_zero=True)
    found = index >= 0
    i, j = np.flatnonzero(found), index[found]
    return distance[found], np.abs(x[i + dimension * delay] - x[j + dimension * delay])


def _checked(x, delay, max_dimension, theiler, extra):
    x = as_series(x)
    delay = whole_number("delay", delay, 1)
    max_dimension = whole_number("max_dimension", max_dimension, 1, 30)
    theiler = whole_number("theiler", theiler, 0)
    check_embedding(x.size, max_dimension + extra, delay, minimum=2 * theiler + 12)
    return x, delay, max_dimension, theiler


def _dimension_coord(max_dimension):
    return {"dimension": ("dimension", np.arange(1, max_dimension + 1),
                          {"units": "1", "long_name": "embedding dimension"})}


def _sweep(x, delay, max_dimension, theiler, stage, tolerances=None, with_cao=True):
    """One nearest-neighbour search per dimension, shared by both methods.

    False nearest neighbours (when ``tolerances`` = (rtol, atol)) need d = 1..max_dimension,
    Cao's E and E* (when ``with_cao``) d = 1..max_dimension + 1. Returns the fractions
    (either criterion, first, second; by d) and (E, E*, relative error of E*; by d).
    """
    top = max_dimension + 1 if with_cao else max_dimension
    label = " and ".join(([] if tolerances is None else ["false nearest neighbours"]) + (["Cao's E"] if with_cao else []))
    size = x.std()
    fractions, e = np.full((3, max_dimension), np.nan), np.full((3, max_dimension + 1), np.nan)
    for d in range(1, top + 1):
        stage(f"{label} at dimension {d}", (d - 1) / top)
        distance, extra = _pairs(x, delay, d, theiler)
        if not distance.size:
            continue
        if tolerances is not None and d <= max_dimension:
            by_ratio = extra > tolerances[0] * distance
            by_size = np.maximum(distance, extra) > tolerances[1] * size
            fractions[:, d - 1] = [np.mean(by_ratio | by_size), by_ratio.mean(), by_size.mean()]
        if with_cao:
            e[0, d - 1] = np.mean(np.maximum(distance, extra) / distance)
            e[1, d - 1] = extra.mean()
            if e[1, d - 1] > 0:
                e[2, d - 1] = extra.std() / np.sqrt(extra.size) / e[1, d - 1]
    return fractions, e


def _fnn_dataset(fractions, max_dimension, delay, theiler, rtol, atol):
    return xr.Dataset(
        {
            "false_nearest_fraction": ("dimension", fractions[0], {
                "units": "1", "long_name": "fraction of false nearest neighbours (either criterion)"}),
            "false_nearest_fraction_rtol": ("dimension", fractions[1], {
                "units": "1", "long_name": f"fraction of false nearest neighbours (distance ratio > {rtol:g})"}),
            "false_nearest_fraction_atol": ("dimension", fractions[2], {
                "units": "1", "long_name": f"fraction of false nearest neighbours (distance > {atol:g} R_A)"}),
        },
        coords=_dimension_coord(max_dimension),
        attrs={"delay": delay, "theiler": theiler, "rtol": rtol, "atol": atol},
    )


def _cao_dataset(e, max_dimension, delay, theiler):
    e, e_star, e_star_rel_err = e
    with np.errstate(divide="ignore", invalid="ignore"):
        e1 = e[1:] / e[:-1]
        e2 = e_star[1:] / e_star[:-1]
    e2_err = np.abs(e2) * np.hypot(e_star_rel_err[1:], e_star_rel_err[:-1])
    return xr.Dataset(
        {
            "cao_e1": ("dimension", e1, {"units": "1", "long_name": "Cao's E1 = E(d+1)/E(d)"}),
            "cao_e2": ("dimension", e2, {"units": "1", "long_name": "Cao's E2 = E*(d+1)/E*(d)"}),
            "cao_e2_error": ("dimension", e2_err, {"units": "1", "long_name": "standard error of Cao's E2"}),
        },
        coords=_dimension_coord(max_dimension),
        attrs={"delay": delay, "theiler": theiler},
    )


def false_nearest_neighbours(x, delay, max_dimension=10, theiler=0, rtol=15.0, atol=2.0,
                             progress=None, cancel=None) -> xr.Dataset:
    """Fraction of false nearest neighbours for d = 1..max_dimension.

    A neighbour at dimension d is false when going to d + 1 separates it:
    the new coordinate differs by more than ``rtol`` times the distance at d
    (first criterion), or the distance at d + 1 exceeds ``atol`` times the
    attractor size R_A, the standard deviation of ``x`` (second criterion).
    The max norm replaces Kennel et al.'s Euclidean norm, so the distance at
    d + 1 is ``max(R_d, |new coordinate difference|)``.

    Returns
    -------
    xr.Dataset with ``false_nearest_fraction(dimension)`` (either criterion),
    ``false_nearest_fraction_rtol`` and ``false_nearest_fraction_atol``.

    References
    ----------
    Kennel, Brown & Abarbanel, Phys. Rev. A 45 (1992) 3403.
    """
    x, delay, max_dimension, theiler = _checked(x, delay, max_dimension, theiler, extra=1)
    rtol, atol = positive_number("rtol", rtol), positive_number("atol", atol)
    stage = Stage(progress, cancel)
    fractions, _ = _sweep(x, delay, max_dimension, theiler, stage, tolerances=(rtol, atol), with_cao=False)
    stage("false nearest neighbours done", 1.0)
    return _fnn_dataset(fractions, max_dimension, delay, theiler, rtol, atol)


def cao(x, delay, max_dimension=10, theiler=0, progress=None, cancel=None) -> xr.Dataset:
    """Cao's E1(d) and E2(d) for d = 1..max_dimension.

    With n(i) the nearest neighbour of vector i at dimension d,
    ``E(d) = mean_i R_{d+1}(i) / R_d(i)`` and
    ``E*(d) = mean_i |x_{i+d tau} - x_{n(i)+d tau}|``; then
    ``E1(d) = E(d+1) / E(d)`` and ``E2(d) = E*(d+1) / E*(d)`` (so E is
    computed up to max_dimension + 1). E1 stops changing once d is large
    enough; E2 is about 1 at every d for independent random data.
    ``cao_e2_error`` is the standard error of E2 from the scatter of the
    terms of both means (treated as independent).

    References
    ----------
    Cao, Physica D 110 (1997) 43.
    """
    x, delay, max_dimension, theiler = _checked(x, delay, max_dimension, theiler, extra=2)
    stage = Stage(progress, cancel)
    _, e = _sweep(x, delay, max_dimension, theiler, stage)
    stage("Cao's E1 and E2 done", 1.0)
    return _cao_dataset(e, max_dimension, delay, theiler)


def false_nearest_neighbours_and_cao(x, delay, max_dimension=10, theiler=0, rtol=15.0, atol=2.0,
                                     progress=None, cancel=None) -> tuple[xr.Dataset, xr.Dataset]:
    """:func:`false_nearest_neighbours` and :func:`cao` together, from one nearest-neighbour
    search per dimension instead of two (both follow the same neighbours from d into d + 1).
    The datasets equal those of the two functions called one after the other.

    References
    ----------
    Kennel, Brown & Abarbanel, Phys. Rev. A 45 (1992) 3403.
    Cao, Physica D 110 (1997) 43.
    """
    x, delay, max_dimension, theiler = _checked(x, delay, max_dimension, theiler, extra=2)
    rtol, atol = positive_number("rtol", rtol), positive_number("atol", atol)
    stage = Stage(progress, cancel)
    fractions, e = _sweep(x, delay, max_dimension, theiler, stage, tolerances=(rtol, atol))
    stage("false nearest neighbours and Cao's E1 and E2 done", 1.0)
    return (_fnn_dataset(fractions, max_dimension, delay, theiler, rtol, atol),
            _cao_dataset(e, max_dimension, delay, theiler))


def _first_fnn(fnn_ds, threshold):
    frac = fnn_ds["false_nearest_fraction"]
    below = frac.where(frac < threshold, drop=True)
    return (int(below["dimension"][0]), float(below[0])) if below.size else None


def _first_cao(cao_ds, cao_threshold):
    """Smallest d with E1(d) > E1_LEVEL and |E1(d+1) - E1(d)| < cao_threshold."""
    e1 = cao_ds["cao_e1"].values
    dims = cao_ds["dimension"].values
    for k in range(e1.size - 1):
        if e1[k] > E1_LEVEL and abs(e1[k + 1] - e1[k]) < cao_threshold:
            return int(dims[k]), float(e1[k]), float(e1[k + 1])
    return None


def _stochastic(cao_ds):
    """(looks stochastic, largest |E2 - 1|, tolerance used)."""
    e2 = cao_ds["cao_e2"].values
    err = cao_ds["cao_e2_error"].values if "cao_e2_error" in cao_ds else np.zeros_like(e2)
    ok = np.isfinite(e2)
    if not ok.any():
        return False, None, None
    tolerance = max(E2_TOLERANCE, E2_ERRORS * float(np.nanmax(err[ok])) if np.isfinite(err[ok]).any() else 0.0)
    departure = float(np.max(np.abs(e2[ok] - 1)))
    return departure < tolerance, departure, tolerance


def suggest_dimension(fnn_ds: xr.Dataset, cao_ds: xr.Dataset, threshold=0.01, cao_threshold=0.05) -> dict:
    """Suggest an embedding dimension from false nearest neighbours and Cao's E1.

    False nearest neighbours give the smallest d whose false-neighbour fraction
    is below ``threshold`` (Kennel et al. 1992); Cao's E1 gives the smallest d
    where E1 exceeds 0.9 and changes by less than ``cao_threshold`` to d + 1
    (Cao 1997). False nearest neighbours decide when they settle, since they
    test directly for the false crossings an embedding must remove, while E1
    approaches 1 only gradually for noisy or periodic data, so where it
    "levels off" depends on the tolerance; E1 decides only when false
    neighbours never vanish. The reason says whether the two agree. "looks_stochastic" is set when |E2 - 1|
    stays below max(0.1, 3 standard errors) at every d: deterministic signals
    show E2 clearly below 1 at small d (Cao 1997), independent noise does not,
    and the error term keeps short records from reading scatter as structure.

    Returns
    -------
    dict with "value" (int), "method", "reason", "warnings", "looks_stochastic",
    "false_nearest_neighbours" and "cao" (the dimension each criterion gave, or
    null), "criteria_agree" (null unless both gave one) and
    "e2_largest_departure" (largest |E2 - 1|).

    References
    ----------
    Kennel, Brown & Abarbanel, Phys. Rev. A 45 (1992) 3403.
    Cao, Physica D 110 (1997) 43.
    """
    threshold = positive_number("threshold", threshold)
    cao_threshold = positive_number("cao_threshold", cao_threshold)
    max_dimension = int(fnn_ds["dimension"].max())
    fnn, cao_hit = _first_fnn(fnn_ds, threshold), _first_cao(cao_ds, cao_threshold)
    warnings = []
    fnn_text = (f"the false-neighbour fraction falls to {fnn[1]:.3f} (below {threshold:g}) at dimension {fnn[0]}"
                if fnn else f"the false-neighbour fraction stays at or above {threshold:g} up to dimension "
                            f"{max_dimension} (lowest {float(fnn_ds['false_nearest_fraction'].min()):.3f})")
    cao_text = (f"Cao's E1 levels off at dimension {cao_hit[0]} (E1 = {cao_hit[1]:.3f}, then {cao_hit[2]:.3f})"
                if cao_hit else f"Cao's E1 does not level off above {E1_LEVEL:g} up to dimension {max_dimension}")
    agree = None if not (fnn and cao_hit) else fnn[0] == cao_hit[0]
    if fnn:
        value, method = fnn[0], "false nearest neighbours"
        if agree:
            verdict = "the two agree"
        elif agree is None:
            verdict = f"using {value} from false nearest neighbours alone"
        else:
            verdict = f"they disagree; {value} from false nearest neighbours is used"
            warnings.append(f"false nearest neighbours suggest {fnn[0]} but Cao's E1 suggests {cao_hit[0]}; "
                            f"using {value}: check the embedding at both")
        reason = f"{fnn_text[0].upper()}{fnn_text[1:]}, and {cao_text}; {verdict}."
    elif cao_hit:
        value, method = cao_hit[0], "Cao E1"
        reason = f"{fnn_text[0].upper()}{fnn_text[1:]}, but {cao_text}; using {value} from Cao's E1."
        warnings.append(f"false neighbours do not vanish up to dimension {max_dimension}; the dimension comes "
                        "from Cao's E1 alone, which creeps towards 1 for noisy data")
    else:
        value, method = max_dimension, "none (largest dimension tried)"
        reason = (f"{fnn_text[0].upper()}{fnn_text[1:]}, and {cao_text}; neither settles, so the largest "
                  f"dimension tried, {max_dimension}, is returned.")
        warnings.append(f"no embedding dimension up to {max_dimension} removes false neighbours; the data may "
                        "be noise-dominated or need a larger max_dimension")
    stochastic, departure, tolerance = _stochastic(cao_ds)
    if stochastic:
        warnings.append(f"Cao's E2 stays within {tolerance:.2f} of 1 at every dimension (largest departure "
                        f"{departure:.3f}): the data look stochastic, and an embedding dimension may mean nothing")
    return {
        "value": int(value),
        "method": method,
        "reason": reason,
        "warnings": warnings,
        "looks_stochastic": bool(stochastic),
        "false_nearest_neighbours": fnn[0] if fnn else None,
        "cao": cao_hit[0] if cao_hit else None,
        "criteria_agree": agree,
        "e2_largest_departure": departure,
    }


__all__ = ["false_nearest_neighbours", "cao", "false_nearest_neighbours_and_cao", "suggest_dimension"]
