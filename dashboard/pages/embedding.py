"""Page 2 · Delay & dimension: the curves behind the suggested delay and embedding dimension,
their reasons, the user's overrides, and views of the reconstructed state space."""

from __future__ import annotations

import json

import panel as pn

from engine.recording import json_attr, lag_text, time_unit

from .. import figures
from .common import Page, card, esc, estimate_if_ready, run


def _reason_html(value_text: str, est: dict) -> str:
    method = est.get("method") or ""
    parts = [f"<div class='big-number'>{esc(value_text)}</div>",
             f"<p><b>Why:</b> {esc(est.get('reason') or 'no reason given')}</p>"]
    if method:
        parts.append(f"<p><small>Method: {esc(method)}</small></p>")
    suggested = est.get("suggested")
    if suggested:
        parts.append(f"<p><small>The data alone suggested: {esc(suggested.get('reason', ''))}</small></p>")
    for w in est.get("warnings") or []:
        parts.append(f"<p class='warning-text'>⚠ {esc(w)}</p>")
    return "".join(parts)


class EmbeddingPage(Page):
    title = "2 · Delay & dimension"

    def __init__(self, **params):
        super().__init__(**params)
        s = self.state
        self._estimate = pn.widgets.Button(label="Estimate delay and dimension", color="primary", width=260)
        self._estimate.on_click(self._on_estimate)
        self._intro = pn.pane.HTML(sizing_mode="stretch_width")

        self._delay_text = pn.pane.HTML(sizing_mode="stretch_width")
        self._delay_in = pn.widgets.IntInput(label="Use this delay (samples)", start=1, value=None, width=200)
        self._delay_use = pn.widgets.Button(label="Use", width=70, align="end")
        self._delay_back = pn.widgets.Button(label="Back to the suggestion", width=190, align="end")
        self._delay_use.on_click(lambda e: self._override(delay=self._delay_in.value))
        self._delay_back.on_click(lambda e: self._override(delay=None))

        self._dim_text = pn.pane.HTML(sizing_mode="stretch_width")
        self._dim_in = pn.widgets.IntInput(label="Use this dimension", start=1, end=30, value=None, width=200)
        self._dim_use = pn.widgets.Button(label="Use", width=70, align="end")
        self._dim_back = pn.widgets.Button(label="Back to the suggestion", width=190, align="end")
        self._dim_use.on_click(lambda e: self._override(dimension=self._dim_in.value))
        self._dim_back.on_click(lambda e: self._override(dimension=None))

        # one pane per figure: an hv.Layout drawn while its tab is hidden loses titles and axes
        self._delay_curves = [pn.pane.HoloViews(sizing_mode="stretch_width") for _ in range(2)]
        self._dim_curves = [pn.pane.HoloViews(sizing_mode="stretch_width") for _ in range(2)]
        self._delay_plot = pn.pane.HoloViews(sizing_mode="stretch_width")
        self._turn = pn.widgets.IntSlider(label="Turn (°)", start=-180, end=180, value=30, step=5)
        self._tilt = pn.widgets.IntSlider(label="Tilt (°)", start=-90, end=90, value=20, step=5)
        self._view3d = pn.pane.Bokeh(sizing_mode="stretch_width")
        self._multiples = pn.Row(sizing_mode="stretch_width")
        self._space_time = pn.pane.HoloViews(sizing_mode="stretch_width")
        self._curves_area = pn.Column(sizing_mode="stretch_width", visible=False)
        self._space_time_text = pn.pane.HTML(sizing_mode="stretch_width")
        self._theiler_in = pn.widgets.IntInput(label="Use this Theiler window (samples)", start=0, value=None,
                                               width=240)
        self._theiler_use = pn.widgets.Button(label="Use", width=70, align="end")
        self._theiler_back = pn.widgets.Button(label="Back to the suggestion", width=190, align="end")
        self._theiler_use.on_click(lambda e: self._override(theiler=self._theiler_in.value))
        self._theiler_back.on_click(lambda e: self._override(theiler=None))

        s.param.watch(self._show, ["diagnostics", "prepared", "settings"])
        s.param.watch(self._show_busy, ["busy"])
        self._drawn, self._space_time_key = (None, None), None
        s.param.watch(self._show_space_time, ["analysis"])
        self._turn.param.watch(self._turn_view3d, "value_throttled")
        self._tilt.param.watch(self._turn_view3d, "value_throttled")
        self._show()
        self._show_busy()
        self._show_space_time()

    # -- callbacks ----------------------------------------------------------------------------------
    async def _on_estimate(self, event):
        await run(self.state, self.state.estimate)

    async def _override(self, **changes):
        if await run(self.state, self.state.change_settings, **changes):
            await estimate_if_ready(self.state)

    # -- views --------------------------------------------------------------------------------------
    def _delay(self):
        diag = self.state.diagnostics
        return None if diag is None else json_attr(diag, "delay", {}).get("samples")

    def _show_busy(self, *events):
        for w in (self._estimate, self._delay_use, self._delay_back, self._dim_use, self._dim_back,
                  self._theiler_use, self._theiler_back):
            w.disabled = self.state.busy

    def _show(self, *events):
        s = self.state
        diag, rec = s.diagnostics, s.prepared
        if rec is None:
            self._intro.object = "<p>Load a recording on page 1 first.</p>"
        elif diag is None:
            self._intro.object = ("<p>Press the button to estimate the delay and the embedding dimension "
                                  "from the recording.</p>")
        elif not s.diagnostics_current:
            self._intro.object = "<p class='warning-text'>The settings changed since this estimate: estimate again.</p>"
        else:
            self._intro.object = ("<p>Suggestions come from the curves below; each has its reason. "
                                  "Override them only with a reason of your own.</p>")
        self._estimate.visible = rec is not None and (diag is None or not s.diagnostics_current)
        # a Column, not the HoloViews panes: hiding those trips Panel 1.9 (Bokeh stylesheets copied into a str list)
        self._curves_area.visible = diag is not None
        if diag is None:
            self._delay_text.object = self._dim_text.object = ""
            return
        d = json_attr(diag, "delay", {})
        unit = time_unit(rec) if rec is not None else "sample"
        tau = d.get("samples")
        self._delay_text.object = _reason_html(lag_text(d, unit), d)
        m = json_attr(diag, "embedding_dimension", {})
        self._dim_text.object = _reason_html(f"{m.get('value')}", m)
        self._delay_in.placeholder = str(tau)
        self._dim_in.placeholder = str(m.get("value"))
        if self._drawn[0] is diag and self._drawn[1] is rec:
            return
        self._drawn = (diag, rec)
        draws = [lambda: _fill(self._delay_curves, figures.delay_curves(diag)),
                 lambda: _fill(self._dim_curves, figures.dimension_curves(diag))]
        if rec is not None and tau:
            draws += [lambda: setattr(self._delay_plot, "object", figures.delay_plot(rec, tau)),
                      lambda: _fill_row(self._multiples, figures.delay_multiples(rec, _delay_steps(tau))),
                      self._show_view3d]
        self.draw("estimates", [self._unless_replaced(draw, diag, rec) for draw in draws])

    def _unless_replaced(self, draw, diag, rec):
        """``draw``, skipped if newer diagnostics or recording came before its turn."""
        return lambda: draw() if self._drawn == (diag, rec) else None

    def _show_view3d(self, *events):
        rec, tau = self.state.prepared, self._delay()
        if rec is not None and tau:
            self._view3d.object = figures.rotated_view(rec, tau, azimuth=self._turn.value, elevation=self._tilt.value)

    def _turn_view3d(self, *events):
        """A slider step turns the drawn view in place (new points, same plot): cheap for the server."""
        rec, tau = self.state.prepared, self._delay()
        if rec is not None and tau and self._view3d.object is not None:
            # through Panel's hold, so that this change is written after any message still queued for
            # the socket (such as the one that brought this view): written directly, as a slider's
            # watcher otherwise is, it could overtake it and the browser would meet a model it lacks
            with pn.io.hold():
                figures.turn_view(self._view3d.object, rec, tau, azimuth=self._turn.value,
                                  elevation=self._tilt.value)

    def _show_space_time(self, *events):
        a = self.state.analysis
        if a is None or a.results is None:
            self._space_time.object, self._space_time_key = None, None
            self._space_time_text.object = ("<p>The space-time separation plot and the Theiler window are "
                                            "computed with the invariants: press Run on page 3.</p>")
            return
        w = a.summary.get("theiler_window") or {}
        unit = a.summary.get("input", {}).get("time_unit", "sample")
        key = (a.settings, json.dumps(a.summary.get("input"), sort_keys=True), w.get("samples"))
        if key != self._space_time_key:  # refits of other estimates do not redraw this
            self._space_time_key = key
            self.draw("space-time", [lambda: self._draw_space_time(a, key)])
        self._space_time_text.object = _reason_html(lag_text(w, unit), w)
        self._theiler_in.placeholder = str(w.get("samples"))

    def _draw_space_time(self, analysis, key) -> None:
        if self._space_time_key == key:  # no newer analysis came before this turn
            w = analysis.summary.get("theiler_window") or {}
            self._space_time.object = figures.space_time(analysis.results, w.get("samples"))

    def __panel__(self):
        delay_card = card("Delay", self._delay_text, pn.FlexBox(self._delay_in, self._delay_use, self._delay_back),
                          sizing_mode="stretch_width")
        dim_card = card("Embedding dimension", self._dim_text, pn.FlexBox(self._dim_in, self._dim_use, self._dim_back),
                        sizing_mode="stretch_width")
        self._curves_area.objects = [
            pn.Row(card("Mutual information and autocorrelation", *self._delay_curves, sizing_mode="stretch_width"),
                   card("False nearest neighbours and Cao's test", *self._dim_curves, sizing_mode="stretch_width"),
                   sizing_mode="stretch_width"),
            pn.Row(card("Delay plot", self._delay_plot, sizing_mode="stretch_width"),
                   card("3-D view (turn and tilt it with the sliders)", self._view3d, pn.Row(self._turn, self._tilt),
                        sizing_mode="stretch_width"),
                   sizing_mode="stretch_width"),
            card("The same plot at other delays: too short a delay squeezes the cloud onto the diagonal, "
                 "too long a delay smears it", self._multiples, sizing_mode="stretch_width"),
        ]
        return pn.Column(
            pn.Row(self._intro, self._estimate, sizing_mode="stretch_width"),
            pn.Row(delay_card, dim_card, sizing_mode="stretch_width"),
            self._curves_area,
            card("Space-time separation and Theiler window", self._space_time_text, self._space_time,
                 pn.FlexBox(self._theiler_in, self._theiler_use, self._theiler_back), sizing_mode="stretch_width"),
            sizing_mode="stretch_width")


def _fill(panes, figs) -> None:
    for pane, fig in zip(panes, figs):
        pane.object = fig


def _fill_row(row, figs) -> None:
    """Replace a row's panes at once; each responsive pane sizes itself when its tab is shown."""
    row.objects = [pn.pane.HoloViews(fig, sizing_mode="stretch_width") for fig in figs]


def _delay_steps(tau: int) -> list:
    """Delays for the small multiples: a quarter, half, one, two and four times the chosen delay."""
    return sorted({max(1, tau // 4), max(1, tau // 2), tau, 2 * tau, 4 * tau})
