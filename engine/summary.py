"""The Summary: a plain dict (the JSON of ``lagspace analyze --json``) read off the datasets.

``summarise`` reads only the JSON attributes that the methods stored on their
datasets, so a bundle read back gives exactly the same Summary. The verdict is a
sentence about what the evidence supports and what it does not: evidence, never
proof.
"""

from __future__ import annotations

import math
from typing import Optional

import xarray as xr

from . import __version__
from .recording import duration_text, json_attr, lag_text, sampling_interval, series_units, time_unit, variable_name
from .settings import Settings

CAUTION = ("lagspace is a research tool, not a diagnostic or safety device; for clinical signals or "
           "machinery safety, defer to licensed practice and local codes.")


def clean(value):
    """Make a value JSON-safe: NaN and inf become None, numpy scalars plain numbers."""
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _input(prepared: xr.Dataset) -> dict:
    name = variable_name(prepared)
    checks = json_attr(prepared, "checks", [])
    return {
        "file": prepared.attrs.get("source", ""),
        "sha256": prepared.attrs.get("sha256", ""),
        "variable": name,
        "units": series_units(prepared),
        "samples": int(prepared.sizes["time"]),
        "sampling_interval": sampling_interval(prepared),
        "time_unit": time_unit(prepared),
        "preparation": json_attr(prepared, "preparation", []),
        "checks": [{"code": c.get("code"), "severity": c.get("severity"), "message": c.get("message")}
                   for c in checks],
    }


def _warnings(prepared: xr.Dataset, diagnostics: xr.Dataset, estimates: dict) -> list:
    out = []
    for c in json_attr(prepared, "checks", []):
        if c.get("severity") == "warn":
            out.append(f"{c['message']} Fix: {c['fix']}" if c.get("fix") else c["message"])
    out += json_attr(diagnostics, "warnings", [])
    for key in sorted(estimates):
        est = estimates[key]
        if isinstance(est, dict):
            out += [str(w) for w in est.get("warnings", [])]
    seen = set()
    return [w for w in out if not (w in seen or seen.add(w))]


def summarise(prepared: xr.Dataset, diagnostics: xr.Dataset, results: Optional[xr.Dataset],
              settings: Settings) -> dict:
    """The Summary of one analysis (``results=None`` after estimation only)."""
    dt, unit = sampling_interval(prepared), time_unit(prepared)
    delay = json_attr(diagnostics, "delay")
    delay = {"samples": delay["samples"], "time": delay["samples"] * dt, "time_unit": unit,
             "method": delay["method"], "reason": delay["reason"]}
    dim = json_attr(diagnostics, "embedding_dimension")
    out = {
        "software": {"name": "lagspace", "version": __version__},
        "input": _input(prepared),
        "seed": settings.seed,
        "delay": delay,
        "embedding_dimension": {"value": dim["value"], "method": dim["method"], "reason": dim["reason"],
                                "looks_stochastic": bool(dim.get("looks_stochastic", False))},
    }
    estimates = {}
    if results is not None:
        estimates = {k: json_attr(results, k) for k in results.attrs if isinstance(results.attrs[k], str)}
        w = estimates.get("theiler_window", {})
        out["theiler_window"] = {"samples": w.get("value"), "time": _times(w.get("value"), dt), "time_unit": unit,
                                 "method": w.get("method"), "reason": w.get("reason")}
        d2 = dict(estimates.get("correlation_dimension", {}))
        d2["maximum_likelihood"] = estimates.get("correlation_dimension_ml")
        out["correlation_dimension"] = d2
        out["correlation_entropy"] = estimates.get("correlation_entropy")
        out["capacity_dimension"] = estimates.get("capacity_dimension")
        out["largest_lyapunov_exponent"] = estimates.get("largest_lyapunov_exponent")
        out["surrogate_test"] = estimates.get("surrogate_test")
        out["recurrence"] = estimates.get("recurrence")
        out["subsampling"] = estimates.get("subsampling")
    out["warnings"] = _warnings(prepared, diagnostics, estimates)
    out["verdict"] = verdict(out)
    out["caution"] = CAUTION
    return clean(out)


def _times(samples, dt):
    return None if samples is None else samples * dt


#: the surrogate-test statistics in plain words
STATISTIC_WORDS = {"prediction_error": "nonlinear prediction error", "time_asymmetry": "time asymmetry"}

#: outside 10^-3 .. 10^6 numbers are written with a shared power of ten
_PLAIN_EXPONENTS = range(-3, 6)


def format_estimate(value, uncertainty=None, digits: int = 3) -> str:
    """A measured value as text: rounded to its uncertainty, or to ``digits`` significant digits.

    The uncertainty is quoted with two significant digits and the value is
    rounded to the same decimal place (0.08799 ± 0.027 -> "0.088 ± 0.027",
    0.1136 ± 0.011 -> "0.114 ± 0.011"). Without an uncertainty the value gets
    ``digits`` significant digits; ``None`` or a non-finite value is "n/a".
    Very large or small numbers share one power of ten, "(1.20 ± 0.03)e-7".

    References
    ----------
    JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
    uncertainty in measurement (GUM), sec. 7.2.6.
    """
    if value is None or not math.isfinite(value):
        return "n/a"
    value = float(value)
    if uncertainty is None or not math.isfinite(uncertainty):
        return f"{value:.{digits}g}"
    u = abs(float(f"{float(uncertainty):.2g}"))
    if u == 0:
        return f"{value:.{digits}g} ± 0"
    exponent = math.floor(math.log10(max(abs(value), u)))
    scale = 0 if exponent in _PLAIN_EXPONENTS else exponent
    v, u = value / 10.0**scale, u / 10.0**scale
    place = 1 - math.floor(math.log10(u))  # decimal place of the uncertainty's second digit
    shown = max(0, place)
    text = f"{round(v, place) + 0.0:.{shown}f} ± {u:.{shown}f}"  # + 0.0: no "-0.000"
    return text if scale == 0 else f"({text})e{scale}"


def verdict(summary: dict) -> str:
    """One or two sentences on what the evidence supports, and what it does not."""
    if "correlation_dimension" not in summary:
        dim = summary["embedding_dimension"]
        return (f"Delay {summary['delay']['samples']} samples and embedding dimension {dim['value']} are suggested; "
                "run the invariants and the surrogate test before drawing any conclusion about the dynamics.")
    test = summary.get("surrogate_test") or {}
    d2 = summary.get("correlation_dimension") or {}
    lle = summary.get("largest_lyapunov_exponent") or {}
    unit = summary["input"]["time_unit"]
    rejects = test.get("rejects_linear_null")
    parts = []
    if rejects is None:
        parts.append("No surrogate test was run, so nothing here separates the data from linear noise")
    elif rejects:
        statistic = STATISTIC_WORDS.get(test.get("statistic"), test.get("statistic"))
        parts.append(f"The data differ from linear Gaussian noise passed through a static transform "
                     f"({test.get('kind', '').upper()} surrogate test on the {statistic}, "
                     f"p = {format_estimate(test.get('p_value'), digits=2)})")
    else:
        parts.append(f"The data cannot be told apart from linear Gaussian noise passed through a static transform "
                     f"({test.get('kind', '').upper()} surrogate test, p = {format_estimate(test.get('p_value'), digits=2)}), "
                     "so the invariants below should not be read as evidence of low-dimensional chaos")
    if d2.get("value") is not None:
        sat = "saturates" if d2.get("saturates") else "does not clearly saturate"
        parts.append(f"the correlation dimension {sat} at D2 = {format_estimate(d2['value'], d2.get('uncertainty'))}")
    else:
        parts.append(f"no correlation dimension could be measured ({d2.get('reason', 'no scaling range')})")
    lam, dlam = lle.get("per_time_unit"), lle.get("uncertainty")
    if lam is not None:
        if dlam is not None and abs(lam) <= 2 * dlam:
            parts.append(f"the largest Lyapunov exponent ({format_estimate(lam, dlam)} per {unit}) is consistent with zero")
        elif lam > 0:
            parts.append(f"the largest Lyapunov exponent is positive ({format_estimate(lam, dlam)} per {unit})")
        else:
            parts.append(f"the largest Lyapunov exponent is negative ({format_estimate(lam, dlam)} per {unit})")
    sentence = "; ".join(parts) + "."
    positive = lam is not None and lam > 0 and (dlam is None or lam > 2 * dlam)
    if rejects and d2.get("saturates") and positive:
        sentence += (" Together this is consistent with low-dimensional deterministic chaos; it is evidence, "
                     "not proof, and noise, non-stationarity or too short a recording can mimic it.")
    elif rejects and d2.get("value") is not None and not positive:
        sentence += (" Together this points to nonlinear but not clearly chaotic dynamics (for example a noisy "
                     "periodic or quasi-periodic motion); evidence, not proof.")
    else:
        sentence += " The evidence does not support a claim of low-dimensional chaos."
    return sentence


STEP_WORDS = {"set_sampling_interval": "time set from the sampling interval", "fill_gaps": "gaps interpolated",
              "resample": "resampled onto an even grid", "crop": "cropped", "standardise": "scaled to unit variance",
              "regularise_time": "time stamps evened out", "detrend none": "nothing removed",
              "detrend mean": "mean removed", "detrend linear": "straight line removed"}


def step_text(step: dict) -> str:
    """Plain words for one preparation step recorded in a Recording's ``preparation`` attribute."""
    name = step.get("step", "")
    if name == "detrend":
        name = f"detrend {step.get('kind', '')}"
    words = STEP_WORDS.get(name, name.replace("_", " "))
    return f"{words} (up to {step['max_gap']} samples each)" if name == "fill_gaps" and "max_gap" in step else words


def surrogate_words(test: dict) -> str:
    """What a surrogate test found, in words: "differs from linear noise", ... or why it was not run."""
    return {True: "differs from linear noise", False: "not distinguishable from linear noise"}.get(
        test.get("rejects_linear_null"), test.get("reason") or "not run")


def _per_time(text: str, unit: str) -> str:
    return text if text == "n/a" else f"{text} per {unit}"


def format_text(summary: dict) -> str:
    """A short human-readable report of a Summary, for the terminal."""
    inp = summary["input"]
    unit = inp["time_unit"]
    lines = [
        f"file            {inp['file']}  ({inp['variable']}, {inp['samples']:,} samples every "
        f"{duration_text(inp['sampling_interval'], unit)})",
        f"delay           {lag_text(summary['delay'], unit)}  -- {summary['delay']['reason']}",
        f"dimension       {summary['embedding_dimension']['value']}  -- {summary['embedding_dimension']['reason']}",
    ]
    if "correlation_dimension" in summary:
        d2 = summary["correlation_dimension"] or {}
        lle = summary["largest_lyapunov_exponent"] or {}
        cap = summary.get("capacity_dimension") or {}
        test = summary.get("surrogate_test") or {}
        lines += [
            f"Theiler window  {lag_text(summary['theiler_window'], unit)}",
            f"D2              {format_estimate(d2.get('value'), d2.get('uncertainty'))}",
            f"capacity dim.   {format_estimate(cap.get('value'), cap.get('uncertainty'))}",
            f"largest exp.    {_per_time(format_estimate(lle.get('per_time_unit'), lle.get('uncertainty')), unit)}",
            f"surrogates      p = {format_estimate(test.get('p_value'), digits=2)}: {surrogate_words(test)}",
        ]
    lines += [f"warning         {w}" for w in summary["warnings"]]
    lines += [f"verdict         {summary['verdict']}", f"caution         {summary['caution']}"]
    return "\n".join(lines)
