"""One SessionState per browser session: what is loaded, the settings, and what was computed.

The state only calls the engine and keeps its answers; it holds no science. Each
method runs its work in the calling thread; the pages call them through
:meth:`SessionState.in_background`, which moves the work to a shared thread pool
so that a long analysis in one session never blocks another. The estimates and
the invariants themselves run in worker processes (:mod:`dashboard.workers`). Errors become one
line in ``error`` and leave everything loaded or computed before untouched.

Settings fall into stages (input -> preparation -> diagnostics -> invariants). A
change recomputes its own stage and what follows it that was already computed;
the invariants are only recomputed when the user presses Run.
"""

from __future__ import annotations

import asyncio
import dataclasses
import logging
import re
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from functools import partial
from typing import Callable, Optional

import panel as pn
import param
from panel.io.state import set_curdoc

from engine import analysis as analysis_mod
from engine import bundle as bundle_mod
from engine import delay as delay_mod
from engine.checks import check_recording
from engine.diagnostics import estimate as estimate_diagnostics
from engine.errors import Cancelled, LagspaceError
from engine.loading import MAX_CHANNELS, describe_and_load, load_recording
from engine.preparation import prepare
from engine.recording import json_attr
from engine.settings import Settings
from engine.summary import summarise

from . import workers

log = logging.getLogger(__name__)


# One pool for every session of the server: loading, refits and bundles run here; the
# estimates and invariants wait here for their worker process.
EXECUTOR = ThreadPoolExecutor(max_workers=4, thread_name_prefix="lagspace-work")

INPUT = ("variable",)
PREPARATION = ("sampling_interval", "crop_start", "crop_stop", "detrend", "standardise", "resample", "fill_gaps",
               "max_gap")
DIAGNOSTICS = ("delay", "dimension", "max_delay", "max_dimension", "mi_bins", "fnn_rtol", "fnn_atol",
               "fnn_threshold", "cao_threshold", "theiler")
INVARIANTS = ("radii", "reference_points", "lyapunov_steps", "surrogates",
              "surrogate_max_samples", "surrogate_kind", "surrogate_statistic", "recurrence_rate",
              "recurrence_max_points", "min_line", "seed", "scaling_range", "divergence_range")
STAGES = ("input", "preparation", "diagnostics", "invariants")
STATUS = {"busy", "task", "progress", "message", "error"}  # parameters that redraw no figure


def stage_of(field: str) -> int:
    """Index in STAGES of the first computation a setting affects (unknown fields: preparation)."""
    for i, names in enumerate((INPUT, PREPARATION, DIAGNOSTICS, INVARIANTS)):
        if field in names:
            return i
    return 1


def _key(settings: Settings, upto: int) -> tuple:
    """The settings that the stages up to ``upto`` depend on (to know what is current)."""
    return tuple((f.name, getattr(settings, f.name)) for f in dataclasses.fields(settings)
                 if stage_of(f.name) <= upto)


DEFAULT_LIMITS = {"max_bytes": 200_000_000, "max_samples": 10_000_000}
BUNDLE_INFLATION = 10  # a bundle may inflate to this many times the upload limit (results beside the data)


def check_limits(max_bytes: int = DEFAULT_LIMITS["max_bytes"], max_samples: int = DEFAULT_LIMITS["max_samples"]) -> dict:
    """The upload limits as a dict, refusing anything but positive whole numbers."""
    for name, value in (("max_bytes", max_bytes), ("max_samples", max_samples)):
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            raise LagspaceError(f"{name} must be a positive whole number, got {value!r}")
    return {"max_bytes": max_bytes, "max_samples": max_samples}


def refusals(checks: list) -> list:
    """The findings that stop the analysis until they are fixed."""
    return [c for c in checks if c.get("severity") == "refuse"]


def one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


class SessionState(param.Parameterized):
    """Everything one browser session has loaded and computed."""

    source_name = param.String(default="", doc="file name of the recording or bundle")
    pending = param.Dict(default=None, allow_None=True,
                         doc="what engine.loading.describe_and_load said of a file that needs a choice before loading")
    raw = param.Parameter(default=None, doc="the Recording as loaded")
    prepared = param.Parameter(default=None, doc="the Recording after the preparation settings")
    checks = param.List(default=[], doc="findings of check_recording on what is shown")
    settings = param.ClassSelector(class_=Settings, default=Settings())
    diagnostics = param.Parameter(default=None, doc="Diagnostics dataset (delay and dimension)")
    analysis = param.Parameter(default=None, doc="engine Analysis of the last Run")

    limits = param.Dict(default=dict(DEFAULT_LIMITS),
                        doc="upload limits: {'max_bytes': file size, 'max_samples': samples in one recording}")

    busy = param.Boolean(default=False)
    task = param.String(default="", doc="what is running now")
    progress = param.Number(default=0.0, bounds=(0.0, 1.0))
    message = param.String(default="Load a recording to begin.")
    error = param.String(default="")

    def __init__(self, **params):
        super().__init__(**params)
        self.limits = check_limits(**self.limits)
        self._data: Optional[bytes] = None           # bytes of the loaded file (None after a bundle)
        self._load_options: dict = {}
        self._keys: dict = {}                        # stage name -> settings key it was computed with
        self._spectrum: tuple = (None, None)         # (prepared recording, its power spectrum)
        self._lock = threading.Lock()
        self._cancel = threading.Event()
        self._task = ""
        self._last_report = 0.0
        self._thread = threading.local()             # .post: how a worker thread hands updates to the page

    # -- what is current ----------------------------------------------------------------------------
    @property
    def refusals(self) -> list:
        return refusals(self.checks)

    @property
    def diagnostics_current(self) -> bool:
        return self.diagnostics is not None and self._keys.get("diagnostics") == _key(self.settings, 2)

    @property
    def analysis_current(self) -> bool:
        return (self.analysis is not None and self.analysis.results is not None
                and self.analysis.settings == self.settings and self._keys.get("analysis") == _key(self.settings, 3))

    @property
    def summary(self) -> Optional[dict]:
        return None if self.analysis is None else self.analysis.summary

    def spectrum(self):
        """(power spectrum dataset or None, dominant period dict or None) of the prepared recording,
        from ``engine.delay.power_spectrum`` (in the recording's units) and the diagnostics."""
        if self._spectrum[0] is not self.prepared:  # once per prepared recording
            self._spectrum = (self.prepared, None if self.prepared is None else delay_mod.power_spectrum(self.prepared))
        spec = self._spectrum[1]
        dominant = None if self.diagnostics is None else json_attr(self.diagnostics, "dominant_period")
        return spec, dominant

    # -- running work -------------------------------------------------------------------------------
    def _report(self, fraction: float, message: str) -> None:
        """Progress from the engine, at most four updates a second (each one costs the page a redraw)."""
        now = time.monotonic()
        if now - self._last_report >= 0.25 or fraction >= 1.0:
            self._last_report = now
            self._apply(progress=min(max(fraction, 0.0), 1.0), message=f"{self._task}: {message}")

    def _run(self, task: str, work: Callable) -> bool:
        """Run ``work(progress, cancel)``; on failure show one line and keep what was there."""
        if not self._lock.acquire(blocking=False):
            self._apply(error=f"still {self._task.lower()}; wait for it or press Cancel")
            return False
        self._cancel, self._task = threading.Event(), task
        self._apply(busy=True, task=task, progress=0.0, error="", message=f"{task} …")
        try:
            work(self._report, self._cancel)
        except Cancelled:
            self._apply(message=f"{task} cancelled; earlier results are kept.")
            return False
        except LagspaceError as exc:
            self._apply(error=one_line(exc), message=f"{task} failed; earlier results are kept.")
            return False
        except MemoryError:
            self._apply(error="not enough memory for this; crop the recording or lower the limits",
                              message=f"{task} failed; earlier results are kept.")
            return False
        except Exception as exc:  # a bug: keep the session alive, log the traceback server-side
            log.exception("%s failed", task)
            self._apply(error=f"unexpected problem ({type(exc).__name__}: {one_line(exc)}); "
                                    "please report it with the bundle or the file",
                              message=f"{task} failed; earlier results are kept.")
            return False
        finally:
            self._apply(busy=False, progress=0.0)
            self._lock.release()
        return True

    def cancel(self) -> None:
        """Ask the running work to stop at its next check."""
        self._cancel.set()

    def close(self) -> None:
        """The browser session ended: stop its work and let go of its data and results
        (quietly: no page is left to update)."""
        self.cancel()
        self._data, self._load_options, self._keys, self._spectrum = None, {}, {}, (None, None)
        with param.discard_events(self):
            self.param.update(source_name="", pending=None, raw=None, prepared=None, checks=[],
                              diagnostics=None, analysis=None)

    def _apply(self, **updates) -> None:
        """Set parameters; from a worker started by :meth:`in_background`, hand them to the
        session's event loop instead (in order), so that the page is only touched from there."""
        post = getattr(self._thread, "post", None)
        if post is None:
            self.param.update(**updates)
        else:  # freezing costs a walk of every model: only worth it when figures are redrawn
            post(partial(self.param.update, **updates), freeze=not set(updates) <= STATUS)

    async def in_background(self, method: Callable, *args, **kwargs):
        """Await ``method(*args, **kwargs)`` run in the shared worker pool (for the pages).

        Its parameter changes reach the page on the event loop, in order, before this returns.
        """
        loop = asyncio.get_running_loop()
        doc = pn.state.curdoc

        def in_session(fn, freeze):
            if doc is None:
                fn()
            else:  # freeze: one walk of the page's models for all the redraws one update causes
                with set_curdoc(doc), pn.io.hold(doc, freeze=freeze):
                    fn()

        def call():
            self._thread.post = lambda fn, freeze: loop.call_soon_threadsafe(in_session, fn, freeze)
            try:
                return method(*args, **kwargs)
            finally:
                self._thread.post = None

        return await loop.run_in_executor(EXECUTOR, call)

    # -- loading ------------------------------------------------------------------------------------
    def load_bytes(self, data, name: str, *, variable=None, time_column=None, sampling_interval=None) -> bool:
        """Load a recording from uploaded bytes. If the file is ambiguous (several variables)
        and no choice was given, keep its description in ``pending`` and load nothing yet."""
        data = data.encode("utf-8") if isinstance(data, str) else bytes(data)

        def work(progress, cancel):
            options = dict(variable=variable, time_column=time_column)
            info, rec = describe_and_load(data, name=name, **options, **self.limits)
            if rec is None and len(info["variables"]) > MAX_CHANNELS:
                raise LagspaceError(f"{name} holds {len(info['variables'])} channels, too many to choose from here "
                                    f"(at most {MAX_CHANNELS}): save the channel you want in a file of its own, "
                                    "or use `lagspace analyze --variable N`")
            if rec is None:
                self._data = data
                self._apply(pending=dict(info, name=name), message=(
                    f"{name} holds several variables: choose which one to analyse."))
                return
            # a fitted range belongs to the old recording's curves; other invariant settings carry over
            keep = {f: getattr(self.settings, f) for f in INVARIANTS
                    if f not in ("scaling_range", "divergence_range")}
            settings = Settings(variable=None if variable is None else str(variable),
                                sampling_interval=sampling_interval, **keep)
            prepared, checks = self._prepare(rec, settings)
            refused = refusals(checks)
            if prepared is None and not any(self.fix_changes(c, settings) for c in refused):
                first = refused[0]
                raise LagspaceError(f"{name} cannot be analysed: {first['message']}"
                                    + (f"; {first['fix']}" if first.get("fix") else ""))
            self._data, self._load_options = data, options
            self._keys = {"prepared": _key(settings, 1)}
            self._apply(source_name=name, pending=None, raw=rec, prepared=prepared, checks=checks,
                              settings=settings, diagnostics=None, analysis=None,
                              message=self._loaded_message(rec, checks))

        return self._run(f"Loading {name}", work)

    def choose(self, *, variable=None, time_column=None, sampling_interval=None) -> bool:
        """Finish loading a pending ambiguous file with the user's choices."""
        if self.pending is None or self._data is None:
            self._apply(error="no file is waiting for a choice; drop a recording first")
            return False
        return self.load_bytes(self._data, self.pending["name"], variable=variable,
                               time_column=time_column, sampling_interval=sampling_interval)

    @staticmethod
    def _prepare(rec, settings):
        """(prepared, findings): the findings of what was prepared, or of the file as loaded
        (and no prepared recording) when the checks refuse it."""
        try:
            prepared = prepare(rec, settings)
        except LagspaceError:
            findings = json_attr(rec, "checks", None) or check_recording(rec)
            if not refusals(findings):
                raise
            return None, findings
        return prepared, json_attr(prepared, "checks", [])

    @staticmethod
    def _loaded_message(rec, checks) -> str:
        n = rec.sizes["time"]
        refused = len(refusals(checks))
        if refused:
            return f"Loaded {n:,} samples; {refused} problem(s) must be fixed before the analysis."
        return f"Loaded {n:,} samples. Check the findings, then go on to delay and dimension."

    # -- settings -----------------------------------------------------------------------------------
    def change_settings(self, **changes) -> bool:
        """Change settings and recompute what depends on them (the invariants wait for Run)."""
        try:
            new = self.settings.replace(**changes)
        except (LagspaceError, TypeError) as exc:
            self._apply(error=one_line(exc))
            return False
        changed = [k for k in changes if getattr(new, k) != getattr(self.settings, k)]
        if not changed:
            return True
        first = min(stage_of(k) for k in changed)
        if first == 3:
            self._apply(settings=new, error="",
                              message="Settings changed; press Run to compute the invariants with them.")
            return True
        if self.raw is None:
            self._apply(settings=new)
            return True
        had_diagnostics = self.diagnostics is not None

        def work(progress, cancel):
            rec = self.raw
            if first == 0:
                if self._data is None:
                    raise LagspaceError("this recording came from a bundle; open the original file to "
                                        "choose another variable")
                opts = dict(self._load_options, variable=new.variable)
                rec = load_recording(self._data, name=self.source_name, **opts, **self.limits)
                self._load_options = opts
            prepared, checks = (self.prepared, self.checks) if first >= 2 else self._prepare(rec, new)
            update = dict(raw=rec, prepared=prepared, checks=checks, settings=new)
            if prepared is not None and had_diagnostics and not refusals(checks):
                update["diagnostics"] = estimate_diagnostics(prepared, new, progress=progress, cancel=cancel)
                self._keys["diagnostics"] = _key(new, 2)
            elif first <= 1:
                update["diagnostics"] = None
            self._keys["prepared"] = _key(new, 1)
            self._apply(**update, message="Settings changed; what depends on them was recomputed."
                              + (" Press Run for the invariants." if self.analysis is not None else ""))

        return self._run("Applying the settings", work)

    def fix_changes(self, finding: dict, settings: Optional[Settings] = None) -> Optional[dict]:
        """The settings changes of a finding's one-click fix (None: no such fix, or already made
        in ``settings``, by default the session's).

        Uneven sampling is fixed by resampling, a straight-line trend by removing it, missing
        values by interpolation when the check found them fillable (every run inside the series
        and short, see ``engine.checks``), raising ``max_gap`` where a run needs it. Other findings
        are fixed by hand (crop, another channel, a new recording), as their text says.
        """
        settings = settings or self.settings
        details = finding.get("details") or {}
        code = finding.get("code")
        changes = None
        if code == "uneven_sampling":
            changes = {"resample": True}
        elif code == "trend":
            changes = {"detrend": "linear"}
        elif code == "not_finite" and details.get("fill_up_to"):
            changes = {"fill_gaps": True}
            if details["fill_up_to"] > settings.max_gap:
                changes["max_gap"] = details["fill_up_to"]
        if not changes or all(getattr(settings, k) == v for k, v in changes.items()):
            return None
        return changes

    def apply_fix(self, finding: dict) -> bool:
        """Apply the one-click fix a check finding offers (its settings changes)."""
        changes = self.fix_changes(finding)
        if not changes:
            self._apply(error=f"this finding has no one-click fix; {finding.get('fix') or 'see its message'}")
            return False
        return self.change_settings(**changes)

    def set_override(self, *, delay="keep", dimension="keep") -> bool:
        """Use the user's delay and/or embedding dimension (``None``: back to the suggestion)."""
        changes = {k: v for k, v in (("delay", delay), ("dimension", dimension)) if v != "keep"}
        return self.change_settings(**changes)

    # -- computing ----------------------------------------------------------------------------------
    def _need_prepared(self):
        if self.raw is None:
            raise LagspaceError("load a recording first (drop a file on the Recording page or pick a demo)")
        if self.prepared is None or self.refusals:
            first = self.refusals[0] if self.refusals else {"message": "the preparation failed"}
            raise LagspaceError(f"fix this first: {first['message']}"
                                + (f" ({first['fix']})" if first.get("fix") else ""))
        return self.prepared

    def estimate(self) -> bool:
        """Estimate delay and embedding dimension of the prepared recording."""

        def work(progress, cancel):
            prepared, settings = self._need_prepared(), self.settings
            diag = workers.call(estimate_diagnostics, prepared, settings, progress=progress, cancel=cancel)
            self._keys["diagnostics"] = _key(settings, 2)
            self._apply(diagnostics=diag, message="Delay and embedding dimension estimated; "
                                                        "check the reasons, then run the invariants.")

        return self._run("Estimating delay and dimension", work)

    def run_analysis(self) -> bool:
        """Compute every invariant; reuses the delay and dimension when they are current."""

        def work(progress, cancel):
            prepared, settings = self._need_prepared(), self.settings
            if self.diagnostics_current:
                diag = self.diagnostics
                results = workers.call(analysis_mod.invariants, prepared, diag, settings,
                                       progress=progress, cancel=cancel)
                result = analysis_mod.Analysis(self.raw, settings, prepared, diag, results,
                                               summarise(prepared, diag, results, settings))
            else:
                result = workers.call(analysis_mod.run_standard_analysis, self.raw, settings,
                                      progress=progress, cancel=cancel)
            self._keys.update(diagnostics=_key(settings, 2), analysis=_key(settings, 3))
            if result.diagnostics is not self.diagnostics:
                self._apply(diagnostics=result.diagnostics)
            self._apply(analysis=result,
                              message="Analysis done. Read the verdict and the cautions before using the numbers.")

        return self._run("Running the analysis", work)

    def refit(self, *, scaling_range=None, divergence_range=None) -> bool:
        """Re-estimate with a user-chosen scaling range or divergence fit range."""
        return self._refit(partial(analysis_mod.refit, scaling_range=scaling_range, divergence_range=divergence_range),
                           "Estimates refitted over the range you chose.")

    def detect_ranges(self) -> bool:
        """Forget the chosen ranges: back to the detected scaling and divergence fit ranges."""
        return self._refit(analysis_mod.detect_ranges, "Estimates back on the detected ranges.")

    def _refit(self, method: Callable, done: str) -> bool:
        def work(progress, cancel):
            if self.analysis is None or self.analysis.results is None:
                raise LagspaceError("run the analysis before adjusting its fit ranges")
            new = method(self.analysis)
            self._keys["analysis"] = _key(new.settings, 3)  # the chosen ranges are settings now
            self._apply(analysis=new, settings=new.settings, message=done)

        return self._run("Refitting", work)

    # -- bundles ------------------------------------------------------------------------------------
    def open_bundle(self, data, name: str = "bundle.zip") -> bool:
        """Open a bundle: its recording, settings and results replace what was loaded."""
        data = bytes(data)

        def work(progress, cancel):
            result = self._read_bundle(data, name)
            checks = json_attr(result.prepared, "checks", None) or check_recording(result.prepared)
            self._data, self._load_options = None, {}
            self._keys = {"prepared": _key(result.settings, 1), "diagnostics": _key(result.settings, 2)}
            if result.results is not None:
                self._keys["analysis"] = _key(result.settings, 3)
            self._apply(source_name=name, pending=None, raw=result.recording, prepared=result.prepared,
                              checks=checks, settings=result.settings, diagnostics=result.diagnostics,
                              analysis=result if result.results is not None else None,
                              message=f"Opened {name}: the recording, settings and results it holds.")

        return self._run(f"Opening {name}", work)

    def _read_bundle(self, data: bytes, name: str):
        """read_bundle within the session's limits (upload size, inflated size, samples)."""
        limit, samples = self.limits["max_bytes"], self.limits["max_samples"]
        if len(data) > limit:
            raise LagspaceError(f"{name} is {len(data) / 1e6:.1f} MB, more than the upload limit of "
                                f"{limit / 1e6:.1f} MB: open a smaller bundle, or ask for a larger limit")
        result = bundle_mod.read_bundle(data, max_inflated=BUNDLE_INFLATION * limit)
        n = result.recording.sizes.get("time", 0)
        if n > samples:
            raise LagspaceError(f"{name} holds a recording of {n} samples, more than the limit of {samples}: "
                                "open it with `lagspace analyze`, or ask for a larger limit")
        return result

    def bundle_analysis(self):
        """The Analysis a download would hold: the last Run, else the delay and dimension so far."""
        if self.analysis is not None:
            return self.analysis
        if self.diagnostics is None or self.prepared is None:
            raise LagspaceError("nothing to download yet: load a recording and estimate delay and dimension first")
        s = self.settings
        return analysis_mod.Analysis(self.raw, s, self.prepared, self.diagnostics, None,
                                     summarise(self.prepared, self.diagnostics, None, s))

    def bundle_bytes(self) -> bytes:
        """The zip bundle of :meth:`bundle_analysis` (raises LagspaceError when there is nothing)."""
        return bundle_mod.bundle_bytes(self.bundle_analysis())

    @property
    def bundle_filename(self) -> str:
        """The download's name: the last part of the uploaded file's name, in safe characters only
        (the browser's name is never a path here)."""
        base = re.sub(r"[^\w.-]+", "_", self.source_name.replace("\\", "/").rsplit("/", 1)[-1])
        stem = base.rsplit(".", 1)[0].strip("._") or "recording"
        return f"{stem}-lagspace.zip"
