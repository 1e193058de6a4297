"""The standard analysis: from a Recording to delay, dimension, invariants and a verdict.

``run_standard_analysis`` chains the pure steps of the data flow::

    prepare -> estimate (delay, dimension) -> Theiler window -> correlation sums, D2, K2
    -> box counts -> Lyapunov divergence -> surrogate test -> recurrence -> summarise

Each step is a pure function of (input, settings); the result is an
:class:`Analysis` that a bundle stores and reads back.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Optional

import xarray as xr

from . import boxcount, correlation, lyapunov, recurrence, surrogates, theiler
from .diagnostics import chosen_delay, chosen_dimension, estimate
from .errors import LagspaceError
from .loading import load_recording
from .preparation import prepare
from .progress import Stage
from .recording import json_attr, sampling_interval, series_units, signal, time_unit
from .settings import Settings
from .summary import summarise


@dataclass(frozen=True)
class Analysis:
    """Everything one analysis produced. ``recording`` is the file as loaded;
    ``prepared`` is what the methods saw (derived from it and ``settings``)."""

    recording: xr.Dataset
    settings: Settings
    prepared: xr.Dataset
    diagnostics: xr.Dataset
    results: Optional[xr.Dataset]
    summary: dict


def estimate_parameters(recording: xr.Dataset, settings: Settings, progress=None, cancel=None) -> Analysis:
    """Prepare the recording and estimate delay and dimension only (no invariants)."""
    prepared = prepare(recording, settings)
    diagnostics = estimate(prepared, settings, progress=progress, cancel=cancel)
    return Analysis(recording, settings, prepared, diagnostics, None,
                    summarise(prepared, diagnostics, None, settings))


def invariants(prepared: xr.Dataset, diagnostics: xr.Dataset, settings: Settings,
               progress=None, cancel=None) -> xr.Dataset:
    """The Results dataset: every invariant at the chosen delay and dimension."""
    stage = Stage(progress, cancel)
    x = signal(prepared)
    dt, unit = sampling_interval(prepared), time_unit(prepared)
    tau, m = chosen_delay(diagnostics), chosen_dimension(diagnostics)
    acf_times = json_attr(diagnostics, "autocorrelation_times", {})
    parts, estimates = [], {}

    stage("space-time separation", 0.0)
    st = theiler.space_time_separation(x, delay=tau, dimension=m, seed=settings.seed)
    theiler_choice = theiler.suggest_theiler(st, autocorrelation_time=acf_times.get("one_over_e"))
    if settings.theiler is not None:
        theiler_choice = {"value": int(settings.theiler), "method": "set by the user",
                          "reason": f"set by the user; the space-time separation plot suggested "
                                    f"{theiler_choice['value']} samples", "suggested": theiler_choice}
    w = int(theiler_choice["value"])
    estimates["theiler_window"] = theiler_choice
    st["space_time_quantile"].attrs["units"] = series_units(prepared)
    parts.append(st)

    stage("correlation sums", 0.05)
    max_dim = max(settings.max_dimension, m + 2)
    # The Recording itself, not its samples, so radii and box sizes carry the signal's units.
    cs = correlation.correlation_sums(
        prepared, delay=tau, max_dimension=max_dim, theiler=w, n_radii=settings.radii,
        reference_points=settings.reference_points, seed=settings.seed,
        progress=stage.callback(0.05, 0.35), cancel=cancel,
    )
    estimates.update(_correlation_estimates(cs, m, settings.scaling_range, dt))
    parts.append(cs)

    stage("box counting", 0.35)
    bc = boxcount.box_counts(prepared, delay=tau, dimension=m)
    estimates["capacity_dimension"] = boxcount.capacity_dimension(bc)
    parts.append(bc)

    stage("divergence of neighbours", 0.4)
    dims = [d for d in (m - 1, m, m + 1) if d >= 1]
    div = lyapunov.divergence_rosenstein(
        x, delay=tau, dimensions=dims, theiler=w, steps=_steps(settings, tau, x.size),
        progress=stage.callback(0.4, 0.55), cancel=cancel,
    )
    kantz = lyapunov.divergence_kantz(x, delay=tau, dimensions=dims, theiler=w, steps=_steps(settings, tau, x.size))
    # Both curves in one dataset: the Rosenstein estimate carries the Kantz one and a comparison.
    estimates["largest_lyapunov_exponent"] = _lyapunov(xr.merge([div, kantz]), m, settings.divergence_range, dt, unit)
    parts += [div, kantz]

    stage("surrogate data test", 0.6)
    if settings.surrogates > 0:
        segment = x[: settings.surrogate_max_samples]
        sur = surrogates.surrogate_test(
            segment, kind=settings.surrogate_kind, statistic=settings.surrogate_statistic,
            count=settings.surrogates, seed=settings.seed, delay=tau, dimension=m, theiler=w,
            sided="two" if settings.surrogates >= 39 else "one",
            progress=stage.callback(0.6, 0.9), cancel=cancel,
        )
        test = json_attr(sur, "surrogate_test")
        test["samples_used"] = int(segment.size)
        estimates["surrogate_test"] = test
        parts.append(sur)
    else:
        estimates["surrogate_test"] = {"kind": None, "statistic": None, "surrogates": 0, "p_value": None,
                                       "rejects_linear_null": None, "reason": "surrogate test skipped (0 surrogates)"}

    stage("recurrence quantification", 0.9)
    rq = recurrence.recurrence_quantification(
        x, delay=tau, dimension=m, rate=settings.recurrence_rate, max_points=settings.recurrence_max_points,
        theiler=w, min_line=settings.min_line, seed=settings.seed,
    )
    estimates["recurrence"] = json_attr(rq, "recurrence")
    parts.append(rq)

    refs = int(cs.attrs.get("reference_points", 0))
    estimates["subsampling"] = {
        "correlation_sum_reference_points": refs or None,
        "correlation_sum_pairs": int(cs.attrs.get("n_pairs", 0)),
        "correlation_sum_note": (f"pairs from {refs} seeded reference vectors against all {cs.attrs.get('n_vectors')}"
                                 if refs else "all pairs outside the Theiler window"),
        "surrogate_test_samples": (estimates["surrogate_test"] or {}).get("samples_used"),
        "recurrence_points": (estimates.get("recurrence") or {}).get("points_used"),
    }
    results = xr.merge([_plain(p) for p in parts], join="outer", combine_attrs="override")
    results.attrs = {key: json.dumps(value) for key, value in estimates.items()}
    results.attrs["delay"] = tau
    results.attrs["embedding_dimension"] = m
    stage("invariants done", 1.0)
    return results


def _plain(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy()
    out.attrs = {}
    return out


def _correlation_estimates(sums: xr.Dataset, m: int, scaling_range, dt: float) -> dict:
    """D2 over the user's scaling range (else the detected one), and the Takens estimate and
    K2 over the range D2 used."""
    d2 = correlation.correlation_dimension(sums, m, scaling_range=scaling_range)
    used = d2.get("scaling_range")
    return {
        "correlation_dimension": d2,
        "correlation_dimension_ml": correlation.takens_estimator(sums, m, r_max=used[1] if used else None),
        "correlation_entropy": correlation.correlation_entropy(sums, used, dt, embedding_dimension=m),
    }


def _lyapunov(curves: xr.Dataset, m: int, fit_range, dt: float, unit: str) -> dict:
    """The largest exponent over the user's fit range, else over the detected one."""
    if fit_range is None:
        return lyapunov.largest_lyapunov(curves, m, dt, unit)
    return lyapunov.fit_divergence(curves, m, tuple(fit_range), dt, unit)


def _steps(settings: Settings, tau: int, n: int) -> int:
    """Divergence steps: the user's, else 30 delays, between 30 and min(1000, N/10)."""
    if settings.lyapunov_steps is not None:
        return int(settings.lyapunov_steps)
    return int(max(10, min(max(30, 30 * tau), 1000, n // 10)))


def run_standard_analysis(recording: xr.Dataset, settings: Settings | None = None,
                          diagnostics: xr.Dataset | None = None, progress=None, cancel=None) -> Analysis:
    """Prepare, estimate delay and dimension, compute every invariant, and summarise.

    ``diagnostics``, when given, must be those :func:`engine.diagnostics.estimate`
    made from the same recording prepared with the same settings; they are used as
    they are instead of being estimated again (the dashboard has them already).
    """
    settings = settings or Settings()
    if diagnostics is not None and not (isinstance(diagnostics, xr.Dataset)
                                        and {"delay", "embedding_dimension"} <= set(diagnostics.attrs)):
        raise LagspaceError("diagnostics must be the dataset returned by engine.diagnostics.estimate, or None "
                            "to estimate them here")
    stage = Stage(progress, cancel)
    prepared = prepare(recording, settings)
    start = 0.0
    if diagnostics is None:
        diagnostics = estimate(prepared, settings, progress=stage.callback(0.0, 0.25), cancel=cancel)
        start = 0.25
    results = invariants(prepared, diagnostics, settings, progress=stage.callback(start, 1.0), cancel=cancel)
    return Analysis(recording, settings, prepared, diagnostics, results,
                    summarise(prepared, diagnostics, results, settings))


def refit(analysis: Analysis, *, scaling_range=None, divergence_range=None) -> Analysis:
    """Recompute the estimates for a user-chosen scaling range and/or divergence fit range.

    ``None`` keeps the range the analysis has. The returned settings carry the ranges
    (``Settings.scaling_range``, ``Settings.divergence_range``), so running the analysis
    again with them, e.g. from its bundle, gives the same Summary.
    """
    changes = {k: v for k, v in (("scaling_range", scaling_range), ("divergence_range", _whole_steps(divergence_range)))
               if v is not None}
    return _refitted(analysis, analysis.settings.replace(**changes),  # replace() validates the ranges
                     scaling=scaling_range is not None, divergence=divergence_range is not None)


def detect_ranges(analysis: Analysis) -> Analysis:
    """Undo :func:`refit`: forget the chosen ranges and detect both again, as a fresh run does."""
    return _refitted(analysis, analysis.settings.replace(scaling_range=None, divergence_range=None),
                     scaling=True, divergence=True)


def _refitted(analysis: Analysis, settings: Settings, scaling: bool, divergence: bool) -> Analysis:
    """The analysis with the chosen estimates recomputed from its curves under ``settings``."""
    if analysis.results is None:
        raise LagspaceError("run the analysis before adjusting its fit ranges")
    res = analysis.results.copy()
    res.attrs = dict(analysis.results.attrs)
    m = int(res.attrs["embedding_dimension"])
    dt, unit = sampling_interval(analysis.prepared), time_unit(analysis.prepared)
    if scaling:
        res.attrs.update({k: json.dumps(v) for k, v in _correlation_estimates(res, m, settings.scaling_range, dt).items()})
    if divergence:
        res.attrs["largest_lyapunov_exponent"] = json.dumps(_lyapunov(res, m, settings.divergence_range, dt, unit))
    summary = summarise(analysis.prepared, analysis.diagnostics, res, settings)
    return replace(analysis, settings=settings, results=res, summary=summary)


def _whole_steps(fit_range):
    """A dragged range (any numbers) as the whole steps it holds: (ceil(first), floor(last))."""
    if fit_range is None:
        return None
    try:
        first, last = (float(v) for v in fit_range)
        return math.ceil(first), math.floor(last)
    except (TypeError, ValueError, OverflowError):
        raise LagspaceError(f"divergence_range must be two step numbers (first, last), got {fit_range!r}") from None


def analyse_file(path, overrides: dict | None = None, quick: bool = False, progress=None, cancel=None) -> Analysis:
    """Load a recording or a bundle from ``path`` and analyse it (the CLI and batch use this).

    ``overrides`` are settings laid over the defaults, or over a bundle's own settings.
    """
    from .bundle import is_bundle, read_bundle

    path, overrides = Path(path), dict(overrides or {})
    if is_bundle(path):
        previous = read_bundle(path)
        recording, settings = previous.recording, previous.settings.replace(**overrides)
    else:
        settings = Settings(**overrides)
        recording = load_recording(path, variable=settings.variable, sampling_interval=settings.sampling_interval)
    if quick:
        return estimate_parameters(recording, settings, progress=progress, cancel=cancel)
    return run_standard_analysis(recording, settings, progress=progress, cancel=cancel)
