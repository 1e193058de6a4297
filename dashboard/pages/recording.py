"""Page 1 · Recording: drop a file or pick a demo, answer only the questions the file leaves open,
read the checks in plain words and apply their fixes, look at the series and its spectrum."""

from __future__ import annotations

import holoviews as hv
import panel as pn
import param

from engine.recording import UNSTATED, duration_text, json_attr, sampling_interval, time_unit, variable_name
from engine.summary import step_text

from .. import figures, style
from ..server import demo_files
from ..state import SessionState
from .common import SEVERITY_COLOURS, SEVERITY_WORDS, card, esc, estimate_if_ready, run

NO_TIME = "(none: evenly sampled)"
CROP_HINT = "<small>Or drag across the time series below to select the stretch to keep.</small>"
UNIT_HINT = {"sample": "not given (times are sample numbers): set it under Preparation",
             UNSTATED: "{} (the file does not name the unit: set the interval in seconds under Preparation)"}
FIX_WORDS = {"resample": "Resample onto an even grid", "fill_gaps": "Interpolate the gaps",
             "detrend": "Remove the straight-line trend"}


class RecordingPage(pn.viewable.Viewer):
    title = "1 · Recording"
    state = param.ClassSelector(class_=SessionState)

    def __init__(self, **params):
        super().__init__(**params)
        s = self.state
        megabytes = max(1, s.limits["max_bytes"] // 1_000_000)
        self._dropper = pn.widgets.FileDropper(multiple=False,  # any type: the engine names what it cannot read
                                               max_file_size=f"{megabytes}MB", sizing_mode="stretch_width",
                                               height=110)
        self._limits_note = pn.pane.HTML(
            f"<span style='color:{style.SLATE}; font-size: 0.9em'>This server accepts files up to "
            f"{megabytes} MB and recordings up to {s.limits['max_samples']:,} samples.</span>",
            margin=(0, 10), sizing_mode="stretch_width")
        self._dropper.param.watch(self._on_drop, "value")
        self._seen: set = set()
        demos = {p.name: str(p) for p in demo_files()}
        self._demo = pn.widgets.Select(label="Demo recordings", options=demos, sizing_mode="stretch_width",
                                       disabled=not demos)
        self._demo_button = pn.widgets.Button(label="Open demo", color="default", disabled=not demos,
                                              width=110, align="end")
        self._demo_button.on_click(self._on_demo)

        # questions for ambiguous files
        self._variable = pn.widgets.Select(label="Variable to analyse", sizing_mode="stretch_width")
        self._time_column = pn.widgets.Select(label="Time column", sizing_mode="stretch_width")
        self._interval = pn.widgets.FloatInput(label="Sampling interval (s), if there is no time column",
                                               value=None, start=0, sizing_mode="stretch_width")
        self._choose = pn.widgets.Button(label="Load this variable", color="primary", width=180)
        self._choose.on_click(self._on_choose)
        self._time_column.param.watch(self._show_interval_question, "value")
        self._questions = card("This file needs a choice", self._variable, self._time_column, self._interval,
                               self._choose, visible=False, sizing_mode="stretch_width")

        # preparation
        st = s.settings
        self._detrend = pn.widgets.RadioButtonGroup(label="Remove", options={"nothing": "none", "the mean": "mean",
                                                                             "a straight line": "linear"},
                                                    value=st.detrend, color="default")
        self._crop_start = pn.widgets.FloatInput(label="Keep from (time)", value=None, sizing_mode="stretch_width")
        self._crop_stop = pn.widgets.FloatInput(label="Keep until (time)", value=None, sizing_mode="stretch_width")
        self._standardise = pn.widgets.Checkbox(label="Scale to unit variance", value=st.standardise)
        self._set_interval = pn.widgets.FloatInput(label="Sampling interval (s)", value=None, start=0,
                                                   sizing_mode="stretch_width")
        self._crop_hint = pn.pane.HTML(CROP_HINT, margin=(0, 10), sizing_mode="stretch_width")
        self._apply = pn.widgets.Button(label="Apply preparation", color="primary", width=170)
        self._apply.on_click(self._on_apply)

        self._summary = pn.pane.HTML(sizing_mode="stretch_width")
        self._loaded = pn.Column(sizing_mode="stretch_width", visible=False)
        self._empty = pn.pane.HTML(f"<p style='color:{style.SLATE}; margin-left: 8px'>No recording yet. Drop a "
                                   "file above or open a demo; what was loaded, its checks and its plots "
                                   "appear here.</p>", sizing_mode="stretch_width")
        self._checks = pn.Column(sizing_mode="stretch_width")
        self._series = pn.pane.HoloViews(sizing_mode="stretch_width", min_height=280)
        self._spectrum = pn.pane.HoloViews(sizing_mode="stretch_width", min_height=200)
        self._spectrum_card = card("Spectrum", self._spectrum, sizing_mode="stretch_width", max_width=460)
        s.param.watch(self._show_pending, "pending")
        s.param.watch(self._show_recording, ["raw", "prepared", "checks", "settings"])
        s.param.watch(self._show_busy, ["busy"])
        self._drawn = None
        s.param.watch(self._show_spectrum, ["diagnostics", "prepared"])
        self._show_pending()
        self._show_busy()
        self._show_recording()
        self._show_spectrum()

    # -- callbacks ----------------------------------------------------------------------------------
    async def _on_drop(self, event):
        new = {(name, len(data)) for name, data in event.new.items()} - self._seen
        if not new:
            return
        name, _ = sorted(new)[-1]
        self._seen |= new
        if await run(self.state, self.state.load_bytes, event.new[name], name):
            await estimate_if_ready(self.state)

    async def _on_demo(self, event):
        path = self._demo.value
        if not path:
            return
        with open(path, "rb") as f:
            data = f.read()
        if await run(self.state, self.state.load_bytes, data, path.rsplit("/", 1)[-1]):
            await estimate_if_ready(self.state)

    async def _on_choose(self, event):
        time_column = None if self._time_column.value in (None, NO_TIME) else self._time_column.value
        ok = await run(self.state, self.state.choose, variable=self._variable.value, time_column=time_column,
                       sampling_interval=self._interval.value or None)
        if ok:
            await estimate_if_ready(self.state)

    async def _on_apply(self, event):
        changes = dict(detrend=self._detrend.value, standardise=self._standardise.value,
                       crop_start=self._crop_start.value, crop_stop=self._crop_stop.value)
        if self._set_interval.visible and self._set_interval.value:
            changes["sampling_interval"] = float(self._set_interval.value)
        if await run(self.state, self.state.change_settings, **changes):
            await estimate_if_ready(self.state)

    async def _on_fix(self, finding):
        if await run(self.state, self.state.apply_fix, finding):
            await estimate_if_ready(self.state)

    # -- views --------------------------------------------------------------------------------------
    def _show_pending(self, *events):
        p = self.state.pending
        self._questions.visible = p is not None
        if p is None:
            return
        self._questions.title = f"{p['name']} holds {len(p['variables'])} variables: which one?"
        self._variable.options = list(p["variables"])
        self._time_column.options = [NO_TIME] + list(p.get("time_columns", []))
        self._time_column.value = (p.get("time_columns") or [NO_TIME])[0]
        self._time_column.visible = bool(p.get("time_columns"))
        self._show_interval_question()

    def _show_interval_question(self, *events):
        self._interval.visible = self._time_column.value in (None, NO_TIME)

    def _show_busy(self, *events):
        busy = self.state.busy
        for w in (self._apply, self._demo_button, self._choose):
            w.disabled = busy or (w is self._demo_button and not self._demo.options)

    def _show_recording(self, *events):
        s = self.state
        rec = s.prepared if s.prepared is not None else s.raw
        self._loaded.visible, self._empty.visible = rec is not None, rec is None
        if rec is None:
            return
        self._summary.object = self._summary_html(rec)
        if s.source_name in self._demo.options:
            self._demo.value = self._demo.options[s.source_name]
        st = s.settings
        self._detrend.value, self._standardise.value = st.detrend, st.standardise
        self._crop_start.value, self._crop_stop.value = st.crop_start, st.crop_stop
        unit = time_unit(rec)
        unit = {"sample": "sample number", UNSTATED: "the file's time unit"}.get(unit, unit)
        self._crop_start.label, self._crop_stop.label = f"Keep from ({unit})", f"Keep until ({unit})"
        self._set_interval.visible = time_unit(s.raw) in ("sample", UNSTATED) or st.sampling_interval is not None
        self._set_interval.value = st.sampling_interval
        self._checks.objects = self._check_rows(s.checks)
        if rec is not self._drawn:
            self._draw_series(rec)

    def _draw_series(self, rec) -> None:
        """The time series; a range dragged across it fills in the crop fields with the times of its
        first and last sample (applied when the user presses Apply preparation)."""
        fig = figures.time_series(rec)
        self._selection = hv.streams.BoundsX(source=fig)
        self._selection.add_subscriber(self._on_select)
        self._series.object, self._drawn = fig, rec
        self._crop_hint.object = CROP_HINT

    def _on_select(self, boundsx=None, **_):
        if boundsx is None or None in boundsx or boundsx[0] == boundsx[1]:
            return
        t = self._drawn["time"].values  # the first and last sample inside the selection
        inside = t[(t >= min(boundsx)) & (t <= max(boundsx))]
        if inside.size < 2:
            return
        lo, hi = float(inside[0]), float(inside[-1])
        self._crop_start.value, self._crop_stop.value = lo, hi
        self._crop_hint.object = (f"<small><b>Selected {lo:.10g} to {hi:.10g}.</b> Press Apply preparation to "
                                  "keep only this stretch, or clear the fields to keep everything.</small>")

    def _show_spectrum(self, *events):
        rec = self.state.prepared
        self._spectrum_card.visible = rec is not None
        if rec is not None:
            self._spectrum.object = figures.spectrum(*self.state.spectrum(), unit=time_unit(rec))

    def _summary_html(self, rec) -> str:
        s = self.state
        name = variable_name(rec)
        units = rec[name].attrs.get("units", "1")
        n = rec.sizes["time"]
        dt, unit = sampling_interval(rec), time_unit(rec)
        steps = [step_text(p) for p in json_attr(rec, "preparation", [])]
        rows = [
            ("File", esc(s.source_name or rec.attrs.get("source", ""))),
            ("Variable", f"{esc(name)} ({esc(units) if units not in ('', '1') else 'no unit given'})"),
            ("Samples", f"{n:,}"),
            ("Sampling interval", UNIT_HINT.get(unit, "{}").format(duration_text(dt, unit))),
            ("Duration", duration_text(n * dt, unit)),
            ("Preparation", esc(", ".join(steps)) if steps else "none"),
        ]
        body = "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows)
        return f"<table class='facts'>{body}</table>"

    def _check_rows(self, checks) -> list:
        if not checks:
            return [pn.pane.HTML(f"<p style='color:{style.SAGE}'>No problems found.</p>")]
        order = {"refuse": 0, "warn": 1, "note": 2}
        rows = []
        for finding in sorted(checks, key=lambda c: order.get(c.get("severity"), 3)):
            sev = finding.get("severity", "note")
            text = (f"<span class='badge' style='background:{SEVERITY_COLOURS.get(sev, style.SLATE)}'>"
                    f"{SEVERITY_WORDS.get(sev, sev)}</span> {esc(finding.get('message', ''))}")
            if finding.get("fix"):
                text += f"<br><small><b>Fix:</b> {esc(finding['fix'])}</small>"
            row = [pn.pane.HTML(text, sizing_mode="stretch_width", margin=(4, 6), css_classes=["check-finding"])]
            changes = self.state.fix_changes(finding)
            if changes:  # a setting such as max_gap goes with its fix and gets no words of its own
                words = " and ".join(FIX_WORDS[k] for k in changes if k in FIX_WORDS)
                button = pn.widgets.Button(label=words, color="primary", width=200, align="center")
                button.on_click(lambda event, f=finding: self._on_fix(f))
                row.append(button)
            rows.append(pn.Row(*row, sizing_mode="stretch_width"))
        return rows

    def __panel__(self):
        load = card("Open a recording",
                    pn.pane.HTML("<small>Drop a file here, or click to browse: CSV, TSV, TXT, NetCDF (.nc), "
                                 ".npy or .wav with one measured channel.</small>", margin=(0, 6)),
                    self._dropper, self._limits_note, pn.Row(self._demo, self._demo_button, sizing_mode="stretch_width"),
                    sizing_mode="stretch_width")
        prep = card("Preparation", pn.pane.HTML("<small>Remove before analysis:</small>", margin=(0, 6)),
                    self._detrend, pn.Row(self._crop_start, self._crop_stop), self._crop_hint, self._standardise,
                    self._set_interval, self._apply, sizing_mode="stretch_width")
        self._loaded.objects = [
            pn.Row(card("What was loaded", self._summary, sizing_mode="stretch_width"), prep,
                   sizing_mode="stretch_width"),
            card("Checks", self._checks, sizing_mode="stretch_width"),
            pn.Row(card("Time series", self._series, sizing_mode="stretch_width"), self._spectrum_card,
                   sizing_mode="stretch_width"),
        ]
        return pn.Column(pn.Row(load, self._questions, sizing_mode="stretch_width"), self._empty, self._loaded,
                         sizing_mode="stretch_width")
