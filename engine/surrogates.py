"""Surrogate data: FT, AAFT and IAAFT surrogates, two statistics and the rank test.

A surrogate keeps the linear properties of the data (its power spectrum, and
for AAFT/IAAFT also its values) and randomises everything else. If a nonlinear
statistic of the data falls outside the surrogates' values, the null hypothesis
that the data come from a linear Gaussian process (seen through a monotone
static function, for AAFT/IAAFT) is rejected.

References
----------
Theiler, Eubank, Longtin, Galdrikian & Farmer, Physica D 58 (1992) 77.
Schreiber & Schmitz, Phys. Rev. Lett. 77 (1996) 635.
Schreiber & Schmitz, Physica D 142 (2000) 346.
"""

from __future__ import annotations

import json
import numbers
from concurrent.futures import ThreadPoolExecutor, as_completed

import numpy as np
import xarray as xr

from .arguments import as_series, whole_number
from .embedding import check_embedding
from .errors import LagspaceError
from .kernels.prediction import locally_constant_predictions
from .progress import Stage

KINDS = ("ft", "aaft", "iaaft")
IAAFT_MAX_ITERATIONS = 1000
WORKERS = 2
NULL_HYPOTHESES = {
    "ft": "a stationary linear Gaussian process",
    "aaft": "a stationary linear Gaussian process seen through a monotone static function",
    "iaaft": "a stationary linear Gaussian process seen through a monotone static function",
}


def _random_phases(spectrum: np.ndarray, n: int, rng) -> np.ndarray:
    """Real series with the moduli of ``spectrum`` (an rfft) and random phases."""
    phases = np.exp(2j * np.pi * rng.random(spectrum.size))
    phases[0] = 1.0  # keep the mean
    if n % 2 == 0:
        phases[-1] = 1.0  # the Nyquist term of a real series is real
    return np.fft.irfft(spectrum * phases, n)


def _rank_like(values_sorted: np.ndarray, template: np.ndarray) -> np.ndarray:
    """``values_sorted`` rearranged into the rank order of ``template``."""
    out = np.empty_like(values_sorted)
    out[np.argsort(template, kind="stable")] = values_sorted
    return out


def _iaaft(x: np.ndarray, rng, max_iterations: int) -> np.ndarray:
    amplitudes = np.abs(np.fft.rfft(x))
    values = np.sort(x)
    s = rng.permutation(x)
    order = None
    for _ in range(max_iterations):
        spectrum = np.fft.rfft(s)
        spectrum *= amplitudes / np.maximum(np.abs(spectrum), np.finfo(float).tiny)
        new_order = np.argsort(np.fft.irfft(spectrum, x.size), kind="stable")
        s = np.empty_like(values)
        s[new_order] = values
        if order is not None and np.array_equal(order, new_order):
            break
        order = new_order
    return s


def surrogate(x, kind: str = "iaaft", rng=0, max_iterations: int = IAAFT_MAX_ITERATIONS) -> np.ndarray:
    """One surrogate of ``x``.

    - ``"ft"``: phase randomised (Theiler et al. 1992): the periodogram is kept
      exactly (to rounding), the phases are uniform random; DC and Nyquist kept.
    - ``"aaft"``: amplitude adjusted FT (Theiler et al. 1992): Gaussian numbers
      put in the rank order of ``x``, phase randomised, then the values of ``x``
      put in the rank order of the result. Keeps the values exactly.
    - ``"iaaft"``: iterative AAFT (Schreiber & Schmitz 1996): from a random
      shuffle, alternately impose the periodogram and the values of ``x`` until
      the rank order stops changing (or ``max_iterations``). Keeps the values
      exactly and the periodogram closely.

    ``rng`` is a ``numpy.random.Generator`` or a seed (default 0: reproducible).

    References
    ----------
    Theiler et al., Physica D 58 (1992) 77. Schreiber & Schmitz, PRL 77 (1996) 635.
    """
    x = as_series(x)
    kind = _check_kind(kind)
    rng = np.random.default_rng(rng)
    if kind == "ft":
        return _random_phases(np.fft.rfft(x), x.size, rng)
    if kind == "aaft":
        gaussian = _rank_like(np.sort(rng.standard_normal(x.size)), x)
        return _rank_like(np.sort(x), _random_phases(np.fft.rfft(gaussian), x.size, rng))
    return _iaaft(x, rng, whole_number("max_iterations", max_iterations, 1))


def _check_kind(kind) -> str:
    if kind not in KINDS:
        raise LagspaceError(f"surrogate kind must be one of {', '.join(KINDS)}, got {kind!r}")
    return kind


def _map_seeded(task, count: int, seed: int, stage: Stage, what: str) -> list:
    """``task(rng_k)`` for k < count, on WORKERS threads; surrogate k always gets
    ``SeedSequence(seed).spawn(count)[k]``, so results do not depend on threads."""
    children = np.random.SeedSequence(seed).spawn(count)
    results = [None] * count
    stage(f"{what}: 0 of {count}", 0.0)
    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        futures = {pool.submit(task, np.random.default_rng(c)): k for k, c in enumerate(children)}
        try:
            for done, future in enumerate(as_completed(futures), start=1):
                results[futures[future]] = future.result()
                stage(f"{what}: {done} of {count}", done / count)
        except BaseException:
            pool.shutdown(wait=True, cancel_futures=True)
            raise
    return results


def surrogates(x, kind: str = "iaaft", count: int = 39, seed: int = 0, progress=None, cancel=None) -> np.ndarray:
    """``count`` surrogates of ``x`` as an array of shape (count, N).

    Surrogate k is drawn from ``np.random.SeedSequence(seed).spawn(count)[k]``;
    they are made on two threads. See :func:`surrogate` for the kinds.
    """
    x = as_series(x)
    kind = _check_kind(kind)
    count, seed = whole_number("count", count, 1), whole_number("seed", seed, 0)
    rows = _map_seeded(lambda rng: surrogate(x, kind, rng), count, seed, Stage(progress, cancel), f"{kind} surrogates")
    return np.stack(rows)


def time_asymmetry(x, lag: int = 1) -> float:
    """Normalised third moment of the increments, a test of time reversibility.

    ``Q = <(x_{i+lag} - x_i)^3> / <(x_{i+lag} - x_i)^2>^(3/2)``; about 0 for a
    time-reversible series, such as any linear Gaussian process.

    References
    ----------
    Theiler et al., Physica D 58 (1992) 77.
    Diks, van Houwelingen, Takens & DeGoede, Phys. Lett. A 201 (1995) 221.
    """
    x = as_series(x)
    lag = whole_number("lag", lag, 1, x.size - 2)
    d = x[lag:] - x[:-lag]
    second = np.mean(d * d)
    if second == 0:
        raise LagspaceError(f"the series does not change over lag {lag}; time asymmetry is undefined")
    return float(np.mean(d**3) / second**1.5)


def prediction_error(x, delay: int, dimension: int, theiler: int = 0, horizon: int = 1,
                     neighbours: int | None = None, points: int = 2000) -> float:
    """Normalised RMS error of the locally constant predictor in delay space.

    Each reference vector's future, ``horizon`` samples past its last
    coordinate, is predicted as the mean future of its ``neighbours`` nearest
    delay vectors (maximum norm, leaving out those within ``theiler`` samples).
    The RMS error is divided by the standard deviation of ``x``: 0 is perfect,
    about 1 (or more) is no better than the mean. ``neighbours=None`` uses
    ``dimension + 1``; at most ``points`` reference vectors, evenly spread, are
    predicted (all candidates are searched).

    References
    ----------
    Farmer & Sidorowich, Phys. Rev. Lett. 59 (1987) 845.
    Sugihara & May, Nature 344 (1990) 734.
    """
    x = as_series(x)
    theiler, horizon = whole_number("theiler", theiler, 0), whole_number("horizon", horizon, 1)
    points = whole_number("points", points, 1)
    check_embedding(x.size - horizon, dimension, delay, minimum=2)
    delay, dimension = int(delay), int(dimension)
    n = x.size - (dimension - 1) * delay - horizon
    candidates = n - 2 * theiler - 1
    if candidates < 1:
        raise LagspaceError(f"a Theiler window of {theiler} leaves no neighbours among {n} delay vectors; "
                            f"use a smaller window or a longer recording")
    neighbours = min(dimension + 1, candidates) if neighbours is None else whole_number(
        "neighbours (within the vectors outside the Theiler window)", neighbours, 1, candidates)
    refs = np.unique(np.linspace(0, n - 1, min(points, n)).astype(np.int64))
    predicted = locally_constant_predictions(x, dimension, delay, horizon, theiler, neighbours, refs)
    actual = x[refs + (dimension - 1) * delay + horizon]
    return float(np.sqrt(np.mean((actual - predicted) ** 2)) / np.std(x))


STATISTICS = {
    # name: (long name, "less" if the nonlinear alternative makes the data's value smaller)
    "prediction_error": ("normalised prediction error", "less"),
    "time_asymmetry": ("time asymmetry", "greater in size"),
}


def _rank_p_value(data: float, values: np.ndarray, sided: str, direction: str):
    """Rank of the data among data + surrogates (1 = smallest) and its p-value.

    Two-sided: ``p = min(1, 2 min(1 + #(s <= t), 1 + #(s >= t)) / (M + 1))``.
    One-sided: ``p = (1 + #(s <= t)) / (M + 1)`` when the alternative makes the
    statistic smaller, ``(1 + #(|s| >= |t|)) / (M + 1)`` when larger in size.
    Ties count against rejection.
    """
    m = values.size
    rank = 1 + int(np.sum(values < data))
    if sided == "two":
        extreme = min(1 + np.sum(values <= data), 1 + np.sum(values >= data))
        return rank, min(1.0, 2.0 * extreme / (m + 1))
    if direction == "less":
        return rank, (1 + int(np.sum(values <= data))) / (m + 1)
    return rank, (1 + int(np.sum(np.abs(values) >= abs(data)))) / (m + 1)


def surrogate_test(x, *, kind: str = "iaaft", statistic: str = "prediction_error", count: int = 39, seed: int = 0,
                   delay: int, dimension: int, theiler: int = 0, sided: str = "two", alpha: float = 0.05,
                   progress=None, cancel=None) -> xr.Dataset:
    """Rank-based surrogate data test of the linear null hypothesis.

    The statistic (``"prediction_error"`` at the given delay, dimension and
    Theiler window, or ``"time_asymmetry"`` at lag = delay) is computed on the
    data and on ``count`` surrogates. With M surrogates the smallest possible
    p-value is 2 / (M + 1) two-sided and 1 / (M + 1) one-sided, so alpha = 0.05
    needs 39 surrogates two-sided and 19 one-sided; fewer raise an error. The
    null is rejected when p <= alpha (see :func:`_rank_p_value` for p).
    One-sided tests look for a smaller prediction error or a larger size of the
    time asymmetry than the surrogates have.

    Returns a dataset with ``surrogate_statistic(surrogate)`` and
    ``attrs["surrogate_test"]`` (JSON): kind, statistic, surrogates,
    data_statistic, rank, p_value, sided, alpha, rejects_linear_null, reason.

    References
    ----------
    Theiler et al., Physica D 58 (1992) 77.
    Schreiber & Schmitz, Physica D 142 (2000) 346.
    """
    x = as_series(x)
    kind = _check_kind(kind)
    if statistic not in STATISTICS:
        raise LagspaceError(f"statistic must be one of {', '.join(STATISTICS)}, got {statistic!r}")
    if sided not in ("one", "two"):
        raise LagspaceError(f"sided must be 'one' or 'two', got {sided!r}")
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not 0 < alpha <= 0.5:
        raise LagspaceError(f"alpha must be a number in (0, 0.5], got {alpha!r}")
    needed = int(np.ceil((2.0 if sided == "two" else 1.0) / alpha - 1 - 1e-9))
    count, seed = whole_number("count", count, 1), whole_number("seed", seed, 0)
    if count < needed:
        raise LagspaceError(f"a {sided}-sided test at alpha {alpha:g} needs at least {needed} surrogates, got {count}; "
                            f"use count >= {needed}" + (" or sided='one'" if sided == "two" else ""))
    if statistic == "prediction_error":
        def measure(series):
            return prediction_error(series, delay, dimension, theiler)
    else:
        def measure(series):
            return time_asymmetry(series, delay)
    stage = Stage(progress, cancel)
    data_value = measure(x)  # also validates delay, dimension and theiler
    values = np.array(_map_seeded(lambda rng: measure(surrogate(x, kind, rng)), count, seed, stage,
                                  f"{kind} surrogate test"))
    long_name, direction = STATISTICS[statistic]
    rank, p = _rank_p_value(data_value, values, sided, direction)
    rejects = bool(p <= alpha)
    reason = (
        f"the data's {long_name} is {data_value:.4g}; the {count} {kind.upper()} surrogates range from "
        f"{values.min():.4g} to {values.max():.4g} (rank {rank} of {count + 1}); {sided}-sided p = {p:.3g} "
        + ("<=" if rejects else ">") + f" alpha {alpha:g}: "
        + ("reject" if rejects else "cannot reject") + f" that the data come from {NULL_HYPOTHESES[kind]}"
    )
    facts = {"kind": kind, "statistic": statistic, "surrogates": count, "seed": seed, "data_statistic": data_value,
             "rank": rank, "p_value": p, "sided": sided, "alpha": alpha, "rejects_linear_null": rejects,
             "reason": reason}
    return xr.Dataset(
        {"surrogate_statistic": ("surrogate", values, {"units": "1", "long_name": f"{long_name} of each surrogate"})},
        coords={"surrogate": ("surrogate", np.arange(count), {"units": "1", "long_name": "surrogate number"})},
        attrs={"surrogate_test": json.dumps(facts)},
    )
