"""Build one browser session: a fresh SessionState, the three pages, the shared status and bundle tools."""

from __future__ import annotations

from pathlib import Path

import panel as pn

from engine.summary import CAUTION

from . import style
from .pages.common import BundleTools, StatusBar, estimate_if_ready, run
from .pages.embedding import EmbeddingPage
from .pages.invariants import InvariantsPage
from .pages.recording import RecordingPage
from .state import DEFAULT_LIMITS, SessionState

CSS = f"""
:root {{ --design-primary-color: {style.INK}; --design-primary-text-color: #ffffff;
         --design-secondary-color: {style.SAGE}; --design-secondary-text-color: #ffffff;
         --design-background-color: #ffffff; --panel-primary-color: {style.INK}; }}
body {{ background: {style.MIST}; }}
.facts th {{ text-align: left; padding: 2px 14px 2px 0; color: {style.SLATE}; font-weight: 600; }}
.facts td {{ padding: 2px 0; }}
.results {{ border-collapse: collapse; width: 100%; }}
.results th {{ text-align: left; border-bottom: 2px solid {style.INK}; padding: 4px 8px; }}
.results td {{ border-bottom: 1px solid #dde3e6; padding: 4px 8px; vertical-align: top; }}
.results td.num {{ font-variant-numeric: tabular-nums; white-space: nowrap; }}
.results td:nth-child(3), .results th:nth-child(2) {{ white-space: nowrap; }}
.results td:first-child {{ min-width: 13em; }}
.badge {{ color: white; border-radius: 4px; padding: 1px 6px; font-size: 0.8em; font-weight: 600; }}
.big-number {{ font-size: 1.5em; font-weight: 600; color: {style.INK}; }}
.warning-text {{ color: {style.CLAY}; }}
ul.warnings li {{ margin-bottom: 4px; }}
"""

pn.extension(raw_css=[CSS], notifications=False, sizing_mode="stretch_width")

HELP = """<div style='font-size: 0.92em'>
<b>How to use</b>
<ol style='padding-left: 18px; margin-top: 4px'>
<li><b>Recording</b>: drop a file, read the checks, apply fixes.</li>
<li><b>Delay &amp; dimension</b>: read the suggestions and their reasons; override only with a reason.</li>
<li><b>Invariants</b>: run, read the verdict, the numbers and the cautions.</li>
</ol>
Download the bundle to keep the data, settings and results together; a colleague can open it here and
see the same numbers.</div>"""


def build_app(demo_path: Path | str | None = None, limits: dict | None = None) -> pn.template.BootstrapTemplate:
    """The whole dashboard for one browser session.

    ``demo_path``: a recording to open at start; ``limits``: ``{"max_bytes", "max_samples"}`` for
    what the session may load (default: :data:`dashboard.state.DEFAULT_LIMITS`).
    """
    state = SessionState(limits=dict(limits or DEFAULT_LIMITS))
    pages = [RecordingPage(state=state), EmbeddingPage(state=state), InvariantsPage(state=state)]
    tabs = pn.Tabs(*[(p.title, p) for p in pages], sizing_mode="stretch_width")

    def show(active: int) -> None:  # a page draws its figures while it is the open tab
        for i, page in enumerate(pages):
            page.shown = i == active

    show(tabs.active)
    tabs.param.watch(lambda event: show(event.new), "active")
    template = pn.template.BootstrapTemplate(
        title="lagspace", sidebar=[BundleTools(state=state), pn.pane.HTML(HELP, margin=(16, 10)),
                                          pn.pane.Alert(CAUTION, alert_type="warning", margin=(8, 10))],
        main=[StatusBar(state=state), tabs], header_background=style.INK, sidebar_width=290,
    )
    template.session_state, template.pages = state, pages  # for tests and debugging
    if pn.state.curdoc is not None:  # served: the session's data goes when its browser tab does
        pn.state.on_session_destroyed(lambda context: state.close())
    if demo_path is not None:
        path = Path(demo_path)

        async def open_demo():
            if await run(state, state.load_bytes, path.read_bytes(), path.name):
                await estimate_if_ready(state)

        pn.state.onload(open_demo)
    return template
