"""Pieces every page shares: the status line, the bundle tools, small formatting helpers."""

from __future__ import annotations

import html
import io

import panel as pn
import param
from panel.io.state import set_curdoc

from engine.errors import LagspaceError

from .. import style
from ..state import SessionState

SEVERITY_WORDS = {"refuse": "Must fix", "warn": "Warning", "note": "Note"}
SEVERITY_COLOURS = {"refuse": style.ALERT, "warn": style.CLAY, "note": style.SLATE}


def number(value, digits: int = 4) -> str:
    """A number for people: n/a for missing, a few significant digits otherwise."""
    if value is None:
        return "n/a"
    if isinstance(value, int):
        return f"{value:,}"
    return f"{value:.{digits}g}"


def esc(text) -> str:
    return html.escape(str(text))


def card(title: str, *objects, **kwargs) -> pn.Card:
    return pn.Card(*objects, title=title, collapsible=False, margin=(6, 6), **kwargs)


def one_per_tick(steps) -> None:
    """Call ``steps`` (figure draws, each costing the server a fraction of a second) one per
    turn of the served session's event loop, so that other sessions' clicks are answered in
    between; all at once when nothing is served (tests, notebooks). Each step walks the
    document's models once (a new figure's pane otherwise walks them twice)."""
    steps = list(steps)
    doc = pn.state.curdoc

    def step():
        with pn.io.hold(doc, freeze=True):
            steps.pop(0)()

    if doc is None or doc.session_context is None:
        while steps:
            step()
        return

    def next_step():
        with set_curdoc(doc):
            step()
        if steps:
            doc.add_next_tick_callback(next_step)

    if steps:
        doc.add_next_tick_callback(next_step)


class Page(pn.viewable.Viewer):
    """A page over the session state whose figures are drawn only while it is shown: the draws
    asked for while another page is open wait (the latest per figure group) until it opens, so
    that a session working elsewhere, and every other session on the server, do not pay for
    figures nobody is looking at."""

    state = param.ClassSelector(class_=SessionState)
    shown = param.Boolean(default=True, doc="whether the page is the open tab (the app sets it)")

    def __init__(self, **params):
        super().__init__(**params)
        self._waiting: dict = {}
        self.param.watch(self._draw_waiting, "shown")

    def draw(self, group: str, steps) -> None:
        """Draw ``steps`` (see :func:`one_per_tick`) now if the page is shown, else when it opens;
        a later call for the same ``group`` replaces draws still waiting."""
        if self.shown:
            self._waiting.pop(group, None)
            one_per_tick(steps)
        else:
            self._waiting[group] = list(steps)

    def _draw_waiting(self, *events):
        if self.shown and self._waiting:
            waiting, self._waiting = self._waiting, {}
            one_per_tick(step for steps in waiting.values() for step in steps)


async def run(state: SessionState, method, *args, **kwargs):
    """Run a state method off the event loop; returns its result (False on failure)."""
    return await state.in_background(method, *args, **kwargs)


async def estimate_if_ready(state: SessionState) -> None:
    """After loading or a fix: estimate delay and dimension if the recording can be analysed."""
    if state.prepared is not None and not state.refusals and not state.diagnostics_current:
        await run(state, state.estimate)


class StatusBar(pn.viewable.Viewer):
    """One line saying what happened, the error if any, and progress with Cancel while busy."""

    state = param.ClassSelector(class_=SessionState)

    def __init__(self, **params):
        super().__init__(**params)
        bar_css = f":host {{ --primary-bg-color: {style.INK}; }}"
        # not active: animated stripes repaint the page sixty times a second for as long as work runs
        self._bar = pn.indicators.Progress(value=0, max=1000, bar_color="primary", sizing_mode="stretch_width",
                                           height=16, margin=(8, 10), stylesheets=[bar_css], active=False)
        self._cancel = pn.widgets.Button(label="Cancel", color="warning", width=90, margin=(2, 6))
        self._cancel.on_click(lambda event: self.state.cancel())
        self._busy_row = pn.Row(self._bar, self._cancel, visible=False, sizing_mode="stretch_width")
        self._line = pn.pane.HTML("", sizing_mode="stretch_width", margin=(0, 10), css_classes=["status-line"])
        self._error = pn.pane.Alert("", alert_type="danger", visible=False, sizing_mode="stretch_width",
                                    margin=(4, 10))
        self.state.param.watch(self._update, ["message", "error", "busy", "progress"])
        self._update()

    def _update(self, *events):
        s = self.state
        self._line.object = f"<span style='color:{style.SLATE}'>{esc(s.message)}</span>"
        self._error.param.update(object=esc(s.error), visible=bool(s.error))
        self._bar.value = int(round(s.progress * 1000))
        self._busy_row.visible = s.busy

    def __panel__(self):
        return pn.Column(self._line, self._busy_row, self._error, sizing_mode="stretch_width", margin=0)


class BundleTools(pn.viewable.Viewer):
    """Download the bundle of what is shown; open a bundle saved earlier."""

    state = param.ClassSelector(class_=SessionState)

    def __init__(self, **params):
        super().__init__(**params)
        self._download = pn.widgets.FileDownload(callback=self._bundle, filename="lagspace.zip",
                                                 label="Download bundle", color="primary",
                                                 sizing_mode="stretch_width", disabled=True,
                                                 css_classes=["download-bundle"])
        self._open = pn.widgets.FileInput(accept=".zip", multiple=False, sizing_mode="stretch_width",
                                          css_classes=["open-bundle"])
        self._open.param.watch(self._on_open, "value")
        self._hint = pn.pane.HTML("", sizing_mode="stretch_width", margin=(0, 10))
        self.state.param.watch(self._update, ["diagnostics", "analysis", "source_name", "busy"])
        self._update()

    def _update(self, *events):
        s = self.state
        ready = s.diagnostics is not None or s.analysis is not None
        self._download.param.update(disabled=not ready or s.busy, filename=s.bundle_filename)
        if s.analysis is not None:
            hint = "The bundle holds the recording, settings, every result and a report."
        elif ready:
            hint = "The bundle holds the recording, settings, delay and dimension (no invariants yet)."
        else:
            hint = "Load a recording to make a bundle."
        self._hint.object = f"<small style='color:{style.SLATE}'>{hint}</small>"

    async def _bundle(self):
        try:
            data = await self.state.in_background(self.state.bundle_bytes)
        except LagspaceError as exc:
            self.state.error = str(exc)
            raise
        return io.BytesIO(data)

    async def _on_open(self, event):
        if event.new:
            await run(self.state, self.state.open_bundle, event.new, self._open.filename or "bundle.zip")

    def __panel__(self):
        return pn.Column(
            pn.pane.HTML("<b>Bundle</b>", margin=(10, 10, 0, 10)), self._download, self._hint,
            pn.pane.HTML("<b>Open a bundle</b> saved earlier (.zip)", margin=(10, 10, 0, 10)), self._open,
            sizing_mode="stretch_width")
