"""The self-contained ``report.html`` of a bundle: figures, numbers, reasons, cautions.

Figures are drawn with matplotlib (Agg) and embedded as base64 PNG, so the page
opens with no network. Only the stored datasets and Summary are read: nothing is
computed here that the Summary does not already say.
"""

from __future__ import annotations

import base64
import html
import io

import numpy as np

from .recording import duration_text, lag_text, signal, time_unit
from .summary import STATISTIC_WORDS, format_estimate, step_text, surrogate_words


def _figure_png(draw, width=6.0, height=2.6) -> str:
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=90, layout="constrained")
    draw(fig.add_subplot())
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return base64.b64encode(buf.getvalue()).decode()


def _series(analysis):
    x = signal(analysis.prepared)
    t = analysis.prepared["time"].values
    step = max(1, x.size // 4000)

    def draw(ax):
        ax.plot(t[::step], x[::step], lw=0.6, color="#2f5d62")
        ax.set_xlabel(f"time [{time_unit(analysis.prepared)}]")
        ax.set_ylabel(analysis.summary["input"]["variable"])
        ax.set_title("Recording (as analysed)")
    return draw


def _mutual_information(analysis):
    d = analysis.diagnostics
    tau = analysis.summary["delay"]["samples"]

    def draw(ax):
        ax.plot(d["lag"], d["mutual_information"], color="#2f5d62")
        ax.axvline(tau, color="#c8553d", ls="--", label=f"delay {tau}")
        ax.set_xlabel("lag [samples]")
        ax.set_ylabel("mutual information [nats]")
        ax.legend()
    return draw


def _false_neighbours(analysis):
    d = analysis.diagnostics
    m = analysis.summary["embedding_dimension"]["value"]

    def draw(ax):
        ax.plot(d["dimension"], d["false_nearest_fraction"], "o-", color="#2f5d62", label="false neighbours")
        ax.plot(d["dimension"], d["cao_e1"], "s-", color="#5e8c61", label="Cao E1")
        ax.plot(d["dimension"], d["cao_e2"], "^-", color="#a39171", label="Cao E2")
        ax.axvline(m, color="#c8553d", ls="--")
        ax.set_xlabel("embedding dimension")
        ax.legend(fontsize=7)
    return draw


def _curves_per_dimension(results, variable, x, span, span_label, labels, log_x=False):
    """One curve of ``variable`` per embedding dimension, with a shaded fit range."""

    def draw(ax):
        top = results["dimension"].max().item()
        for m in results["dimension"].values:
            curve = results[variable].sel(dimension=m)
            if np.isfinite(curve).any():
                ax.plot(results[x], curve, lw=0.8, color="#2f5d62", alpha=0.4 + 0.6 * m / top)
        if log_x:
            ax.set_xscale("log")
        if span:
            ax.axvspan(*span, color="#c8553d", alpha=0.15, label=span_label)
            ax.legend(fontsize=7)
        ax.set_xlabel(labels[0])
        ax.set_ylabel(labels[1])
        ax.set_title(labels[2])
    return draw


def _local_slopes(analysis):
    d2 = analysis.summary.get("correlation_dimension") or {}
    units = analysis.results["radius"].attrs.get("units", "1")
    label = "radius r" + ("" if units in ("", "1") else f" [{units}]")
    return _curves_per_dimension(analysis.results, "local_slope", "radius", d2.get("scaling_range"), "scaling range",
                                 (label, "d ln C / d ln r", "Local slopes of the correlation sum"), log_x=True)


def _divergence(analysis):
    lle = analysis.summary.get("largest_lyapunov_exponent") or {}
    return _curves_per_dimension(analysis.results, "divergence", "step", lle.get("fit_range"), "fit range",
                                 ("steps [samples]", "mean ln divergence", "Divergence of nearest neighbours"))


def _surrogates(analysis):
    r = analysis.results
    test = analysis.summary.get("surrogate_test") or {}

    def draw(ax):
        ax.hist(r["surrogate_statistic"].values, bins=15, color="#a39171")
        if test.get("data_statistic") is not None:
            ax.axvline(test["data_statistic"], color="#c8553d", lw=2, label="data")
            ax.legend(fontsize=7)
        ax.set_xlabel(STATISTIC_WORDS.get(test.get("statistic"), str(test.get("statistic"))))
        ax.set_ylabel("surrogates")
    return draw


def _row(name, value, reason=""):
    return f"<tr><th>{html.escape(name)}</th><td>{html.escape(value)}</td><td>{html.escape(reason or '')}</td></tr>"


def _pm(est, key="value", unc="uncertainty", unit=""):
    if not est or est.get(key) is None:
        return "not measured"
    return format_estimate(est[key], est.get(unc), digits=4) + (f" {unit}" if unit else "")


def report_html(analysis) -> str:
    """A complete HTML page describing one analysis."""
    s = analysis.summary
    inp, unit = s["input"], s["input"]["time_unit"]
    rows = [
        _row("file", f"{inp['file']} ({inp['variable']} [{inp['units']}])", f"SHA-256 {inp['sha256']}"),
        _row("samples", f"{inp['samples']:,} every {duration_text(inp['sampling_interval'], unit)}"),
        _row("delay", lag_text(s["delay"], unit), s["delay"]["reason"]),
        _row("embedding dimension", str(s["embedding_dimension"]["value"]), s["embedding_dimension"]["reason"]),
    ]
    figures = [_series(analysis), _mutual_information(analysis), _false_neighbours(analysis)]
    if analysis.results is not None:
        lle, test = s["largest_lyapunov_exponent"] or {}, s["surrogate_test"] or {}
        rows += [
            _row("Theiler window", lag_text(s["theiler_window"], unit), s["theiler_window"]["reason"]),
            _row("correlation dimension D2", _pm(s["correlation_dimension"]), s["correlation_dimension"].get("reason")),
            _row("correlation entropy K2", _pm(s.get("correlation_entropy"), "per_time_unit", unit=f"per {unit}"),
                 (s.get("correlation_entropy") or {}).get("reason")),
            _row("capacity dimension", _pm(s.get("capacity_dimension")), (s.get("capacity_dimension") or {}).get("reason")),
            _row("largest Lyapunov exponent", _pm(lle, "per_time_unit", unit=f"per {unit}"), lle.get("reason")),
            _row("surrogate test", f"p = {format_estimate(test.get('p_value'), digits=2)}: {surrogate_words(test)}",
                 test.get("reason")),
        ]
        figures += [_local_slopes(analysis), _divergence(analysis)]
        if "surrogate_statistic" in analysis.results:
            figures.append(_surrogates(analysis))
    images = "\n".join(f'<img alt="figure" src="data:image/png;base64,{_figure_png(f)}">' for f in figures)
    warnings = "".join(f"<li>{html.escape(w)}</li>" for w in s["warnings"]) or "<li>none</li>"
    steps = "".join(f"<li>{html.escape(step_text(step))}</li>" for step in inp["preparation"]) or "<li>none</li>"
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>lagspace report: {html.escape(inp['file'])}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}}
th,td{{text-align:left;vertical-align:top;padding:.3em .6em;border-bottom:1px solid #ddd}}
.verdict{{background:#eef4f2;padding:1em;border-left:4px solid #2f5d62}}
.caution{{background:#fbeee9;padding:.8em;border-left:4px solid #c8553d}} img{{max-width:100%}}</style></head>
<body><h1>lagspace report</h1>
<p class="verdict">{html.escape(s['verdict'])}</p>
<table>{''.join(rows)}</table>
<h2>Warnings</h2><ul>{warnings}</ul>
<h2>Preparation steps</h2><ul>{steps}</ul>
<h2>Figures</h2>{images}
<p class="caution">{html.escape(s['caution'])}</p>
<p>Seed {s['seed']}; lagspace {html.escape(s['software']['version'])}.</p>
</body></html>"""
