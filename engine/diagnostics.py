"""Delay and embedding-dimension estimation, gathered into one Diagnostics dataset.

The suggestions follow common practice: the delay at the first minimum of the
average mutual information (Fraser & Swinney 1986), the embedding dimension where
false nearest neighbours vanish (Kennel, Brown & Abarbanel 1992) or Cao's E1
saturates (Cao 1997). A user's choice overrides a suggestion; the suggestion and
its reason are kept beside it.

References
----------
Fraser & Swinney, Phys. Rev. A 33 (1986) 1134.
Kennel, Brown & Abarbanel, Phys. Rev. A 45 (1992) 3403.
Cao, Physica D 110 (1997) 43.
"""

from __future__ import annotations

import json

import xarray as xr

from . import delay as delay_methods
from . import dimension as dimension_methods
from .embedding import check_embedding
from .errors import LagspaceError
from .progress import Stage
from .recording import json_attr, sampling_interval, signal, time_unit
from .settings import Settings


def _max_lag(n: int, acf_times: dict, settings: Settings) -> int:
    """Lags to scan: four autocorrelation times, at least 20, at most N/4 and 1000."""
    if settings.max_delay is not None:
        return int(min(settings.max_delay, n // 2))
    t = acf_times.get("one_over_e") or acf_times.get("first_zero") or 10
    return int(max(2, min(max(20, 4 * t), n // 4, 1000)))


def _dimension_theiler(acf_times: dict, settings: Settings) -> int:
    """Theiler window for the neighbour searches: the user's, else the autocorrelation 1/e time."""
    if settings.theiler is not None:
        return int(settings.theiler)
    return int(acf_times.get("one_over_e") or acf_times.get("first_zero") or 1)


def estimate(recording: xr.Dataset, settings: Settings | None = None, progress=None, cancel=None) -> xr.Dataset:
    """Estimate the delay and the embedding dimension of a prepared Recording.

    Returns a Diagnostics dataset with ``autocorrelation(lag)``,
    ``mutual_information(lag)``, ``false_nearest_fraction(dimension)`` (and its two
    criteria), ``cao_e1(dimension)``, ``cao_e2(dimension)``, and JSON attributes
    ``delay``, ``embedding_dimension``, ``dominant_period``,
    ``autocorrelation_times``, ``dimension_theiler`` and ``warnings``.
    """
    settings = settings or Settings()
    stage = Stage(progress, cancel)
    x = signal(recording)
    dt, unit = sampling_interval(recording), time_unit(recording)
    n = x.size
    if n < 50:
        raise LagspaceError(f"{n} samples are too few to estimate a delay; record at least a few hundred")

    stage("autocorrelation", 0.0)
    acf_full = delay_methods.autocorrelation(x, max_lag=min(n - 1, max(n // 2, 1)))
    acf_times = json_attr(acf_full, "autocorrelation_times", {})
    max_lag = _max_lag(n, acf_times, settings)
    acf = acf_full.isel(lag=slice(0, max_lag + 1))
    acf.attrs = dict(acf_full.attrs)

    stage("mutual information", 0.1)
    ami = delay_methods.mutual_information(x, max_lag=max_lag, bins=settings.mi_bins)
    dominant = delay_methods.dominant_period(x, sampling_interval=dt)
    suggestion = delay_methods.suggest_delay(ami, acf, dominant=dominant, sampling_interval=dt, time_unit=unit)
    tau = _apply_delay_override(suggestion, settings, dt, unit)

    stage("false nearest neighbours and Cao's E1 and E2", 0.3)
    theiler = _dimension_theiler(acf_times, settings)
    max_dim = settings.max_dimension
    while max_dim > 2 and (n - max_dim * tau) < 3 * (2 * theiler + 10):
        max_dim -= 1
    check_embedding(n, max_dim + 1, tau, minimum=2 * theiler + 10)
    fnn, cao = dimension_methods.false_nearest_neighbours_and_cao(
        x, delay=tau, max_dimension=max_dim, theiler=theiler, rtol=settings.fnn_rtol, atol=settings.fnn_atol,
        progress=stage.callback(0.3, 0.98), cancel=cancel,
    )
    dim_suggestion = dimension_methods.suggest_dimension(
        fnn, cao, threshold=settings.fnn_threshold, cao_threshold=settings.cao_threshold
    )
    _apply_dimension_override(dim_suggestion, settings)

    stage("gathering diagnostics", 0.98)
    ds = xr.merge([acf, ami, fnn, cao], combine_attrs="override")
    warnings = list(suggestion.get("warnings", [])) + list(dim_suggestion.get("warnings", []))
    ds.attrs = {
        "delay": json.dumps(suggestion),
        "embedding_dimension": json.dumps(dim_suggestion),
        "dominant_period": json.dumps(dominant),
        "autocorrelation_times": json.dumps(acf_times),
        "dimension_theiler": int(theiler),
        "warnings": json.dumps(warnings),
    }
    stage("diagnostics done", 1.0)
    return ds


def _apply_delay_override(suggestion: dict, settings: Settings, dt: float, unit: str) -> int:
    if suggestion.get("samples") is None:
        suggestion.update(
            samples=1, time=dt, method="fallback",
            reason=f"no delay could be read off the data ({suggestion.get('reason', 'no minimum, no decay')}); "
                   "using 1 sample, the usual choice for maps; set a delay yourself if the signal is a flow",
        )
        suggestion.setdefault("warnings", []).append("the delay is a fallback of 1 sample, not an estimate")
    if settings.delay is None:
        return int(suggestion["samples"])
    suggested = dict(suggestion)
    suggestion.clear()
    suggestion.update(
        samples=int(settings.delay),
        time=float(settings.delay * dt),
        time_unit=unit,
        method="set by the user",
        reason=(f"set by the user to {settings.delay} samples; the data suggested {suggested['samples']} "
                f"samples ({suggested['method']})"),
        warnings=list(suggested.get("warnings", [])),
        suggested=suggested,
    )
    return int(settings.delay)


def _apply_dimension_override(suggestion: dict, settings: Settings) -> None:
    if settings.dimension is None:
        return
    suggested = dict(suggestion)
    suggestion.clear()
    suggestion.update(
        value=int(settings.dimension),
        method="set by the user",
        reason=f"set by the user to {settings.dimension}; the data suggested {suggested['value']} ({suggested['method']})",
        warnings=list(suggested.get("warnings", [])),
        looks_stochastic=bool(suggested.get("looks_stochastic", False)),
        suggested=suggested,
    )


def chosen_delay(diagnostics: xr.Dataset) -> int:
    return int(json_attr(diagnostics, "delay")["samples"])


def chosen_dimension(diagnostics: xr.Dataset) -> int:
    return int(json_attr(diagnostics, "embedding_dimension")["value"])


__all__ = ["estimate", "chosen_delay", "chosen_dimension"]
