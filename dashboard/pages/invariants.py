"""Page 3 · Invariants: run the analysis, read the verdict and the numbers with their units and
uncertainties, adjust the fit ranges by selecting them on the plots, read the cautions."""

from __future__ import annotations

import json
from functools import partial

import holoviews as hv
import panel as pn

from engine.settings import SURROGATE_KINDS, SURROGATE_STATISTICS
from engine.recording import duration_text
from engine.summary import STATISTIC_WORDS, format_estimate, surrogate_words

from .. import figures
from .common import Page, card, esc, number, run

KIND_WORDS = {"iaaft": "IAAFT (spectrum and values kept)", "aaft": "AAFT (amplitude adjusted)",
              "ft": "FT (spectrum kept, Gaussian)"}


def _pm(est: dict | None, key: str = "value", unc: str = "uncertainty") -> str:
    """An estimate rounded to its uncertainty (``engine.summary.format_estimate``)."""
    return "n/a" if not est else format_estimate(est.get(key), est.get(unc))


def _in_time(label: str, lag: dict, unit: str) -> str:
    """"samples (= 1.1 s)": a lag's unit with its length in time (none when time is in samples)."""
    return label if unit == "sample" or lag.get("time") is None else f"{label} (= {duration_text(lag['time'], unit)})"


def _then(reason: str) -> str:
    """The engine's reason as a sentence after ours (none when there is none)."""
    return f". {reason[:1].upper()}{reason[1:]}" if reason else ""


def result_rows(summary: dict) -> list[tuple[str, str, str, str]]:
    """(quantity, value ± uncertainty, unit, how it was obtained) for the results table."""
    unit = summary.get("input", {}).get("time_unit", "sample")
    sig_units = summary.get("input", {}).get("units", "1")
    rows = []
    d = summary.get("delay") or {}
    rows.append(("Delay", f"{d.get('samples')}", _in_time("samples", d, unit), d.get("reason", "")))
    m = summary.get("embedding_dimension") or {}
    rows.append(("Embedding dimension", f"{m.get('value')}", "", m.get("reason", "")))
    w = summary.get("theiler_window")
    if w:
        rows.append(("Theiler window", f"{w.get('samples')}", _in_time("samples", w, unit), w.get("reason") or ""))
    d2 = summary.get("correlation_dimension")
    if d2 is not None:
        v = _pm(d2)
        rng = d2.get("scaling_range")
        how = d2.get("reason") or ""
        if rng:  # the engine's reason names the dimensions and radii of the fit
            how = ("saturates with dimension" if d2.get("saturates") else "does NOT clearly saturate") + _then(how)
        rows.append(("Correlation dimension D2", v, "(no unit)", how))
        ml = d2.get("maximum_likelihood")
        if ml:
            v = _pm(ml)
            rows.append(("  … maximum-likelihood estimate", v, "(no unit)", ml.get("reason") or "Takens' estimator"))
    k2 = summary.get("correlation_entropy")
    if k2 is not None:
        v = _pm(k2, "per_time_unit")
        rows.append(("Correlation entropy K2", v, f"per {unit}", k2.get("reason") or ""))
        if unit != "sample" and k2.get("per_sample") is not None:
            v = _pm(k2, "per_sample", "uncertainty_per_sample")
            rows.append(("  … per sample", v, "per sample", ""))
    cap = summary.get("capacity_dimension")
    if cap is not None:
        v = _pm(cap)
        rows.append(("Capacity (box-counting) dimension", v, "(no unit)", cap.get("reason") or ""))
    lle = summary.get("largest_lyapunov_exponent")
    if lle is not None:
        v = _pm(lle, "per_time_unit")
        fit = lle.get("fit_range")
        how = lle.get("reason") or ""
        if fit and not how:  # the engine's reason names the fit range itself
            how = f"slope of the mean log divergence over steps {fit[0]} – {fit[1]}"
        rows.append(("Largest Lyapunov exponent", v, f"per {unit}", how))
        if unit != "sample" and lle.get("per_sample") is not None:
            v = _pm(lle, "per_sample", "uncertainty_per_sample")
            rows.append(("  … per sample", v, "per sample", ""))
        if lle.get("lyapunov_time") is not None:
            rows.append(("  … Lyapunov time (1 / exponent)", format_estimate(lle["lyapunov_time"]), unit,
                         "time for a small error to grow by a factor e"))
        kantz = lle.get("kantz")
        if kantz:
            v = _pm(kantz, "per_time_unit")
            rows.append(("  … cross-check (Kantz)", v, f"per {unit}", kantz.get("reason") or ""))
    test = summary.get("surrogate_test")
    if test is not None:
        p = test.get("p_value")
        rows.append(("Surrogate test p-value", format_estimate(p, digits=2), "",
                     f"{test.get('surrogates')} {str(test.get('kind') or '').upper()} surrogates, "
                     f"{STATISTIC_WORDS.get(test.get('statistic'), test.get('statistic'))}: {surrogate_words(test)}"))
    rec = summary.get("recurrence")
    if rec:
        if rec.get("radius") is not None:
            rows.append(("Recurrence radius", format_estimate(rec["radius"]), "(no unit)" if sig_units in ("", "1")
                         else sig_units, f"chosen so that a fraction {number(rec.get('recurrence_rate'), 2)} of "
                         "pairs recur (maximum norm)" if rec.get("recurrence_rate") is not None else ""))
        for key, label in (("recurrence_rate", "Recurrence rate"), ("determinism", "Determinism"),
                           ("laminarity", "Laminarity")):
            if key in rec:
                rows.append((label, format_estimate(rec[key]), "(fraction)", ""))
    return rows


def results_table_html(summary: dict) -> str:
    head = "<tr><th>Quantity</th><th>Value ± uncertainty</th><th>Unit</th><th>How it was obtained</th></tr>"
    body = "".join(
        f"<tr><td>{esc(q)}</td><td class='num'>{esc(v)}</td>"
        f"<td>{esc(un)}</td><td><small>{esc(h)}</small></td></tr>" for q, v, un, h in result_rows(summary))
    return f"<table class='results'>{head}{body}</table>"


class InvariantsPage(Page):
    title = "3 · Invariants"

    def __init__(self, **params):
        super().__init__(**params)
        st = self.state.settings
        self._surrogates = pn.widgets.IntInput(
            label="Surrogates", value=st.surrogates, start=0, end=999, width=150, css_classes=["surrogate-count"],
            description="19 gives a one-sided test at the 5 % level, 39 a two-sided one (0: no test)")
        self._kind = pn.widgets.Select(label="Surrogate kind", value=st.surrogate_kind, width=270,
                                       options={KIND_WORDS.get(k, k): k for k in SURROGATE_KINDS})
        self._statistic = pn.widgets.Select(label="Test statistic", value=st.surrogate_statistic, width=230,
                                            options={STATISTIC_WORDS.get(k, k): k for k in SURROGATE_STATISTICS})
        self._seed = pn.widgets.IntInput(label="Seed", value=st.seed, start=0, width=150,
                                         description="the same seed gives the same surrogates and the same numbers")
        self._run = pn.widgets.Button(label="Run the analysis", color="primary", width=200, height=40,
                                      css_classes=["run-analysis"])
        self._run.on_click(self._on_run)
        self._detected = pn.widgets.Button(label="Back to the detected ranges", width=230, visible=False,
                                           css_classes=["detected-ranges"])
        self._detected.on_click(self._on_detected)
        self._intro = pn.pane.HTML(sizing_mode="stretch_width")
        self._verdict = pn.pane.Alert("", alert_type="info", sizing_mode="stretch_width")
        self._table = pn.pane.HTML(sizing_mode="stretch_width")
        self._warnings = pn.pane.HTML(sizing_mode="stretch_width")
        self._plots = {name: pn.pane.HoloViews(sizing_mode="stretch_width") for name in
                       ("slopes", "sums", "divergence", "boxes", "surrogates", "recurrence")}
        self._streams, self._drawn = {}, {}
        self._results_area = pn.Column(sizing_mode="stretch_width", visible=False)
        self.state.param.watch(self._show_controls, ["analysis", "settings", "busy", "prepared"])
        self.state.param.watch(self._show_results, ["analysis"])
        self._show_controls()
        self._show_results()

    async def _on_run(self, event):
        changes = dict(surrogates=int(self._surrogates.value or 0), surrogate_kind=self._kind.value,
                       surrogate_statistic=self._statistic.value, seed=int(self._seed.value or 0))
        if await run(self.state, self.state.change_settings, **changes):
            await run(self.state, self.state.run_analysis)

    async def _on_detected(self, event):
        await run(self.state, self.state.detect_ranges)

    def _on_bounds(self, kind: str, boundsx=None, **_):
        if boundsx is None or None in boundsx or boundsx[0] == boundsx[1]:
            return
        lo, hi = sorted(boundsx)
        ranges = ({"scaling_range": (float(lo), float(hi))} if kind == "slopes"
                  else {"divergence_range": (int(round(lo)), int(round(hi)))})
        pn.state.add_periodic_callback(partial(self.state.refit, **ranges), period=50, count=1)

    def _show_controls(self, *events):
        s = self.state
        st = s.settings
        self._run.disabled = s.busy or s.prepared is None
        self._detected.visible = s.analysis_current and (st.scaling_range, st.divergence_range) != (None, None)
        self._detected.disabled = s.busy
        self._surrogates.value, self._kind.value = st.surrogates, st.surrogate_kind
        self._statistic.value, self._seed.value = st.surrogate_statistic, st.seed
        a = s.analysis
        if s.prepared is None:
            self._intro.object = "<p>Load a recording on page 1 first.</p>"
        elif a is None:
            self._intro.object = ("<p>Press <b>Run the analysis</b> to compute the correlation dimension, the "
                                  "largest Lyapunov exponent, box counts, the surrogate test and the recurrence "
                                  "quantification at the delay and dimension of page 2.</p>")
        elif not s.analysis_current:
            self._intro.object = ("<p class='warning-text'>The settings changed since these results were "
                                  "computed: press Run again to bring them up to date.</p>")
        else:
            self._intro.object = ("<p>To refit an estimate over a range of your own, drag across that range "
                                  "on the local-slope or divergence plot (the range-select tool is active there; "
                                  "the table and the shading follow).</p>")

    def _show_results(self, *events):
        a = self.state.analysis
        self._results_area.visible = a is not None and a.results is not None
        if a is None or a.results is None:
            self._drawn = {}
            return
        summary = a.summary
        self._verdict.object = esc(summary.get("verdict", ""))
        self._table.object = results_table_html(summary)
        warnings = summary.get("warnings") or []
        self._warnings.object = ("<ul class='warnings'>" + "".join(f"<li>{esc(w)}</li>" for w in warnings)
                                 + "</ul>") if warnings else "<p>No warnings.</p>"
        builders = {
            "slopes": (("correlation_dimension", "embedding_dimension"), figures.local_slopes),
            "sums": (("correlation_dimension", "embedding_dimension"), figures.correlation_sums),
            "divergence": (("largest_lyapunov_exponent", "embedding_dimension"), figures.divergence),
            "boxes": (("capacity_dimension",), figures.box_counting),
            "surrogates": (("surrogate_test",), figures.surrogate_histogram),
            "recurrence": (("recurrence",), lambda r, s: figures.recurrence_plot(r, units=s["input"].get("units"))),
        }
        base = (a.settings.to_json(), json.dumps(summary.get("input"), sort_keys=True))
        keys = {name: base + tuple(json.dumps(summary.get(p), sort_keys=True) for p in parts)
                for name, (parts, build) in builders.items()}
        # a refit of one estimate redraws only the figures that show it
        self.draw("results", [partial(self._draw, a, name, keys[name], builders[name][1])
                              for name in builders if self._drawn.get(name) != keys[name]])

    def _draw(self, analysis, name: str, key: tuple, build) -> None:
        if self.state.analysis is not analysis or self._drawn.get(name) == key:
            return  # a newer analysis has its own draws, or this one is drawn already
        fig = build(analysis.results, analysis.summary)
        if name in ("slopes", "divergence"):
            source = figures.selectable(fig)
            if source is not None:
                stream = hv.streams.BoundsX(source=source)
                stream.add_subscriber(lambda kind=name, **kw: self._on_bounds(kind, **kw))
                self._streams[name] = stream
        self._plots[name].object = fig
        self._drawn[name] = key

    def __panel__(self):
        options = card("Surrogate test", pn.FlexBox(self._surrogates, self._kind, self._statistic, self._seed),
                       sizing_mode="stretch_width")
        p = self._plots
        self._results_area.objects = [
            self._verdict,
            card("Results", self._detected, self._table, sizing_mode="stretch_width"),
            card("Warnings", self._warnings, sizing_mode="stretch_width"),
            pn.Row(card("Local slopes (correlation dimension)", p["slopes"], sizing_mode="stretch_width"),
                   card("Correlation sums", p["sums"], sizing_mode="stretch_width"), sizing_mode="stretch_width"),
            pn.Row(card("Divergence of neighbours (Lyapunov exponent)", p["divergence"], sizing_mode="stretch_width"),
                   card("Box counting", p["boxes"], sizing_mode="stretch_width"), sizing_mode="stretch_width"),
            pn.Row(card("Surrogate test", p["surrogates"], sizing_mode="stretch_width"),
                   card("Recurrence plot", p["recurrence"], sizing_mode="stretch_width"), sizing_mode="stretch_width"),
        ]
        return pn.Column(
            self._intro, options, self._run,
            self._results_area,
            sizing_mode="stretch_width")
