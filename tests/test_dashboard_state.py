"""SessionState without a browser: loading, choices, fixes, recomputation, errors, background work."""

import asyncio
import dataclasses
import io
import threading
import zipfile

import numpy as np
import pytest

import systems
from engine.errors import LagspaceError
from engine.recording import signal
from engine.settings import Settings

from dashboard import state as state_mod
from dashboard.state import SessionState


def csv_bytes(x, dt=0.01, header="time_s,x_V", extra=None):
    lines = [header]
    for i, v in enumerate(x):
        row = f"{i * dt:.6f},{v:.9g}"
        if extra is not None:
            row += f",{extra[i]:.9g}"
        lines.append(row)
    return ("\n".join(lines) + "\n").encode()


@pytest.fixture(scope="module")
def lorenz():
    return np.asarray(systems.lorenz(3000, dt=0.01))


@pytest.fixture
def loaded(lorenz):
    s = SessionState()
    assert s.load_bytes(csv_bytes(lorenz), "lorenz.csv"), s.error
    return s


def test_every_setting_belongs_to_exactly_one_stage():
    groups = [state_mod.INPUT, state_mod.PREPARATION, state_mod.DIAGNOSTICS, state_mod.INVARIANTS]
    names = [f.name for f in dataclasses.fields(Settings)]
    for name in names:
        assert sum(name in g for g in groups) == 1, name
    assert set().union(*groups) == set(names)


def test_load_csv_keeps_values_and_interval(loaded, lorenz):
    # Reference: the numbers written into the CSV (9 significant digits) and their 0.01 s spacing.
    assert loaded.raw.sizes["time"] == 3000
    assert loaded.raw.attrs["sampling_interval"] == pytest.approx(0.01)
    assert np.allclose(signal(loaded.raw), lorenz, rtol=1e-8)
    assert loaded.prepared is not None and not loaded.refusals
    assert loaded.error == "" and "3,000 samples" in loaded.message
    # the default preparation removes the mean (numpy mean as reference)
    assert np.allclose(signal(loaded.prepared), lorenz - lorenz.mean(), atol=1e-7)


def test_ambiguous_file_waits_for_a_choice(lorenz):
    other = systems.white_noise(lorenz.size, seed=2)
    s = SessionState()
    assert s.load_bytes(csv_bytes(lorenz, header="time_s,x_V,y_V", extra=other), "two.csv")
    assert s.raw is None and s.pending["variables"] == ["x", "y"]
    assert s.choose(variable="y"), s.error
    assert s.pending is None and s.settings.variable == "y"
    assert np.allclose(signal(s.raw), other, rtol=1e-8)
    # switching the variable reloads from the kept bytes
    assert s.change_settings(variable="x")
    assert np.allclose(signal(s.raw), lorenz, rtol=1e-8)


def test_bad_file_keeps_what_was_loaded(loaded):
    before = loaded.raw
    assert not loaded.load_bytes(b"\x00\x01\x02 not a recording", "junk.bin")
    assert loaded.error and "\n" not in loaded.error
    assert loaded.raw is before and loaded.source_name == "lorenz.csv"


def test_file_no_click_can_fix_keeps_what_was_loaded(loaded):
    """A constant signal is refused by the checks with no one-click fix: it must not replace the
    analysable recording (issue 6); a fixable one (uneven time) loads, to be fixed with one click."""
    before = loaded.raw
    assert not loaded.load_bytes(b"1.0\n" * 2000, "constant.csv")
    assert "constant.csv cannot be analysed" in loaded.error and "\n" not in loaded.error
    assert loaded.raw is before and loaded.source_name == "lorenz.csv"
    x = signal(before)
    t = 0.01 * np.arange(x.size)
    t[1000:] += 0.5
    uneven = ("time_s,x_V\n" + "\n".join(f"{a:.6f},{v:.9g}" for a, v in zip(t, x))).encode()
    assert loaded.load_bytes(uneven, "gap.csv") and loaded.source_name == "gap.csv"
    assert [loaded.fix_changes(c) for c in loaded.refusals] == [{"resample": True}]


def test_trend_warning_fixed_with_one_click(lorenz):
    # a straight-line trend carrying most of the variance (see test_checks) gets a fix that removes it
    t = 0.01 * np.arange(lorenz.size)
    text = "time_s,x_V\n" + "\n".join(f"{a:.6f},{b + 20 * a:.9g}" for a, b in zip(t, lorenz))
    s = SessionState()
    assert s.load_bytes(text.encode(), "drift.csv") and s.prepared is not None
    finding = next(c for c in s.checks if c["code"] == "trend")
    assert s.fix_changes(finding) == {"detrend": "linear"} and s.apply_fix(finding), s.error
    assert s.settings.detrend == "linear" and "trend" not in {c["code"] for c in s.checks}
    reopened = SessionState()
    assert s.estimate(), s.error
    assert reopened.open_bundle(s.bundle_bytes(), "drift.zip") and reopened.checks == s.checks


def test_crop_recomputes_preparation_and_rejects_impossible_crops(loaded):
    t = loaded.raw["time"].values
    assert loaded.change_settings(crop_start=5.0, crop_stop=25.0), loaded.error
    # Reference: numpy count of the times inside the crop.
    assert loaded.prepared.sizes["time"] == int(((t >= 5.0) & (t <= 25.0)).sum())
    kept = loaded.prepared
    assert not loaded.change_settings(crop_start=500.0, crop_stop=600.0)
    assert loaded.error and loaded.prepared is kept and loaded.settings.crop_start == 5.0


def test_invalid_setting_is_one_line_and_changes_nothing(loaded):
    settings = loaded.settings
    assert not loaded.change_settings(surrogates=-3)
    assert "surrogates" in loaded.error and loaded.settings is settings


def test_invariant_settings_do_not_touch_the_data(loaded):
    prepared = loaded.prepared
    assert loaded.change_settings(surrogates=19, seed=4)
    assert loaded.prepared is prepared and loaded.settings.surrogates == 19
    assert "Run" in loaded.message


def test_new_recording_keeps_analysis_preferences_only(loaded, lorenz):
    loaded.change_settings(surrogates=19, crop_start=1.0)
    assert loaded.load_bytes(csv_bytes(lorenz[:2000]), "short.csv")
    assert loaded.settings.surrogates == 19 and loaded.settings.crop_start is None


def test_uneven_sampling_fix_resamples(lorenz):
    # Uneven time stamps are refused (delay coordinates need even sampling: common practice).
    t = np.cumsum(np.random.default_rng(1).uniform(0.005, 0.015, lorenz.size))
    text = "time_s,x_V\n" + "\n".join(f"{a:.6f},{b:.9g}" for a, b in zip(t, lorenz))
    s = SessionState()
    assert s.load_bytes(text.encode(), "uneven.csv")
    assert s.prepared is None and [c["code"] for c in s.refusals] == ["uneven_sampling"]
    finding = s.refusals[0]
    assert s.fix_changes(finding) == {"resample": True}
    assert s.apply_fix(finding), s.error
    assert s.prepared is not None and not s.refusals and s.settings.resample
    steps = np.diff(s.prepared["time"].values)
    assert np.allclose(steps, steps[0])
    assert s.fix_changes(finding) is None  # already applied: no button any more


def test_short_gaps_fix_interpolates(lorenz):
    x = lorenz.copy()
    x[[500, 501, 1700]] = np.nan
    s = SessionState()
    assert s.load_bytes(csv_bytes(x).replace(b"nan", b""), "gaps.csv")
    finding = next(c for c in s.refusals if c["code"] == "not_finite")
    assert s.apply_fix(finding), s.error
    y = signal(s.prepared)  # gaps filled, then the mean removed
    assert np.isfinite(y).all()
    # Reference: linear interpolation (numpy.interp) between the neighbours of each gap.
    raw = signal(s.raw)
    good = np.isfinite(raw)
    expected = np.interp(np.arange(raw.size), np.flatnonzero(good), raw[good])
    assert np.allclose(y - y.mean(), expected - expected.mean(), atol=1e-6)


def test_longer_gaps_offer_interpolation_with_a_raised_max_gap(lorenz):
    x = lorenz.copy()
    x[1000:1018] = np.nan  # 18 samples, beyond the default max gap but under 1 % of the recording
    s = SessionState()
    assert s.load_bytes(csv_bytes(x).replace(b"nan", b""), "long_gap.csv"), s.error
    finding = next(c for c in s.refusals if c["code"] == "not_finite")
    assert s.fix_changes(finding) == {"fill_gaps": True, "max_gap": 18}
    assert s.apply_fix(finding), s.error
    assert s.settings.max_gap == 18 and not s.refusals
    # Reference: linear interpolation (numpy.interp) across the gap.
    raw, y = signal(s.raw), signal(s.prepared)
    good = np.isfinite(raw)
    expected = np.interp(np.arange(raw.size), np.flatnonzero(good), raw[good])
    assert np.allclose(y - y.mean(), expected - expected.mean(), atol=1e-6)


def test_gaps_too_long_to_interpolate_are_refused_with_the_crop_advice(lorenz):
    x = lorenz.copy()
    x[1000:1000 + x.size // 50] = np.nan  # 2 % of the recording in one run
    s = SessionState()
    assert not s.load_bytes(csv_bytes(x).replace(b"nan", b""), "long_gap.csv")
    assert "crop to a stretch without gaps" in s.error and s.raw is None


def test_findings_without_a_one_click_fix(lorenz):
    s = SessionState()
    s.load_bytes(csv_bytes(lorenz), "x.csv")
    note = next(c for c in s.checks if c["severity"] == "note")
    assert s.fix_changes(note) is None
    assert not s.apply_fix(note) and s.error


def test_nothing_to_bundle_before_estimates():
    s = SessionState()
    with pytest.raises(LagspaceError):
        s.bundle_bytes()
    assert not s.estimate() and "load a recording" in s.error


def test_one_job_at_a_time(loaded):
    started, release = threading.Event(), threading.Event()

    def slow(progress, cancel):
        started.set()
        release.wait(5)

    worker = threading.Thread(target=loaded._run, args=("Waiting", slow))
    worker.start()
    started.wait(5)
    assert loaded.busy
    assert not loaded.change_settings(crop_start=1.0)
    assert "still" in loaded.error and loaded.settings.crop_start is None
    release.set()
    worker.join(5)
    assert not loaded.busy


def test_in_background_runs_off_the_calling_thread(loaded):
    async def go():
        return await loaded.in_background(lambda: threading.current_thread().name)

    name = asyncio.run(go())
    assert name.startswith("lagspace-work") and name != threading.current_thread().name


def test_progress_and_cancel(loaded):
    seen = []
    loaded.param.watch(lambda e: seen.append(e.new), "progress")

    def work(progress, cancel):
        from engine.progress import Stage

        stage = Stage(progress, cancel)
        stage("first half", 0.5)
        loaded.cancel()
        stage("never", 0.9)

    assert not loaded._run("Testing", work)
    assert 0.5 in seen and "cancelled" in loaded.message and not loaded.busy


def test_estimate_then_override_recomputes_only_the_diagnostics(loaded):
    from engine.recording import json_attr

    assert loaded.estimate(), loaded.error
    assert loaded.diagnostics_current
    suggested = json_attr(loaded.diagnostics, "delay")
    prepared = loaded.prepared
    assert loaded.set_override(delay=7), loaded.error
    chosen = json_attr(loaded.diagnostics, "delay")
    assert chosen["samples"] == 7 and chosen["suggested"]["samples"] == suggested["samples"]
    assert loaded.prepared is prepared and loaded.diagnostics_current
    assert loaded.set_override(delay=None)
    assert json_attr(loaded.diagnostics, "delay")["samples"] == suggested["samples"]
    # a preparation change recomputes the preparation and, as they existed, the diagnostics
    assert loaded.change_settings(detrend="linear")
    assert loaded.prepared is not prepared and loaded.diagnostics_current


def test_bundle_of_estimates_only(loaded):
    assert loaded.estimate()
    data = loaded.bundle_bytes()
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        names = set(zf.namelist())
    assert {"manifest.json", "recording.nc", "diagnostics.nc", "settings.json", "summary.json"} <= names
    assert loaded.bundle_filename == "lorenz-lagspace.zip"


def test_background_work_touches_parameters_only_on_the_event_loop(lorenz):
    s = SessionState()
    threads = set()
    s.param.watch(lambda e: threads.add(threading.current_thread().name), ["raw", "busy", "message", "checks"])

    async def go():
        ok = await s.in_background(s.load_bytes, csv_bytes(lorenz), "lorenz.csv")
        return ok, s.raw is not None, s.busy  # every update has arrived when the await returns

    assert asyncio.run(go()) == (True, True, False)
    assert threads == {threading.current_thread().name}


@pytest.fixture(scope="module")
def analysed(lorenz):
    s = SessionState()
    assert s.load_bytes(csv_bytes(lorenz), "lorenz.csv")
    assert s.change_settings(surrogates=19, recurrence_max_points=800)
    assert s.estimate(), s.error
    diagnostics = s.diagnostics
    assert s.run_analysis(), s.error
    assert s.analysis.diagnostics is diagnostics  # the current delay and dimension were reused
    return s


def test_analysis_is_current_until_a_setting_changes(analysed):
    assert analysed.analysis_current and analysed.summary["surrogate_test"]["surrogates"] == 19
    analysis = analysed.analysis
    analysed.change_settings(seed=5)
    assert not analysed.analysis_current and analysed.analysis is analysis  # kept until the next Run
    analysed.change_settings(seed=0)
    assert analysed.analysis_current


def test_bundle_reopens_with_the_same_summary(analysed):
    # The reproducibility contract: a bundle read back gives exactly the summary it was made from.
    data = analysed.bundle_bytes()
    fresh = SessionState()
    assert fresh.open_bundle(data, "lorenz-lagspace.zip"), fresh.error
    assert fresh.summary == analysed.summary
    assert fresh.settings == analysed.settings and fresh.analysis_current
    assert np.array_equal(signal(fresh.prepared), signal(analysed.prepared))


def test_bad_bundle_keeps_the_session(analysed):
    analysis = analysed.analysis
    assert not analysed.open_bundle(b"PK\x03\x04 broken", "broken.zip")
    assert analysed.error and "\n" not in analysed.error and analysed.analysis is analysis


def test_refit_uses_the_chosen_range(analysed, lorenz):
    fresh = SessionState()
    fresh.open_bundle(analysed.bundle_bytes(), "b.zip")
    radii = fresh.analysis.results["radius"].values
    lo, hi = float(radii[8]), float(radii[16])
    steps = fresh.analysis.results["step"].values
    assert fresh.refit(scaling_range=(lo, hi), divergence_range=(int(steps[5]), int(steps[40]))), fresh.error
    fit = fresh.summary["largest_lyapunov_exponent"]["fit_range"]
    assert fit[0] >= steps[5] and fit[1] <= steps[40]
    rng = fresh.summary["correlation_dimension"]["scaling_range"]
    assert rng is None or (rng[0] >= lo * (1 - 1e-9) and rng[1] <= hi * (1 + 1e-9))
    # back to the detected ranges: exactly the estimates of the run itself
    assert fresh.detect_ranges(), fresh.error
    assert fresh.settings.scaling_range is None and fresh.settings.divergence_range is None
    assert fresh.summary == analysed.summary and fresh.analysis_current
    # a chosen range belongs to these curves: a new recording starts from detected ranges again
    assert fresh.load_bytes(csv_bytes(lorenz[:3000]), "next.csv"), fresh.error
    assert fresh.settings.scaling_range is None and fresh.settings.divergence_range is None


def test_cancel_stops_the_analysis_and_keeps_the_old_one(analysed):
    fresh = SessionState()
    fresh.open_bundle(analysed.bundle_bytes(), "b.zip")
    before = fresh.analysis
    fresh.change_settings(seed=1)
    fresh.param.watch(lambda e: fresh.cancel() if e.new > 0.3 else None, "progress")
    assert not fresh.run_analysis()
    assert "cancelled" in fresh.message and fresh.analysis is before and not fresh.busy


def test_two_sessions_work_at_the_same_time():
    # Each job waits until the other has started: this finishes only if they run side by side.
    barrier = threading.Barrier(2, timeout=10)
    a, b = SessionState(), SessionState()

    def job(progress, cancel):
        barrier.wait()

    async def go():
        return await asyncio.gather(a.in_background(a._run, "A", job), b.in_background(b._run, "B", job))

    assert asyncio.run(go()) == [True, True]


def test_limits_reach_every_load(lorenz):
    # The session's limits are the ones the engine applies (engine.loading refuses past them).
    data = csv_bytes(lorenz)
    s = SessionState(limits={"max_bytes": 200_000_000, "max_samples": 2000})
    assert s.limits == {"max_bytes": 200_000_000, "max_samples": 2000}
    assert not s.load_bytes(data, "lorenz.csv") and "2000" in s.error and s.raw is None
    s = SessionState(limits={"max_bytes": len(data) - 1, "max_samples": 10_000_000})
    assert not s.load_bytes(data, "lorenz.csv") and "MB" in s.error
    assert SessionState().limits == state_mod.DEFAULT_LIMITS
    with pytest.raises(LagspaceError, match="max_samples"):
        SessionState(limits={"max_bytes": 10, "max_samples": 0})


def test_bundle_limits(analysed):
    data = analysed.bundle_bytes()
    small = SessionState(limits={"max_bytes": len(data) - 1, "max_samples": 10_000_000})
    assert not small.open_bundle(data, "b.zip") and "upload limit" in small.error
    few = SessionState(limits={"max_bytes": 200_000_000, "max_samples": 1000})
    assert not few.open_bundle(data, "b.zip") and "3000 samples" in few.error and few.raw is None


def test_a_session_leaves_no_temporary_files(lorenz, tmp_path, monkeypatch):
    """Issue 6: per-session temporary files go when the work ends. Everything a session holds is in
    memory; the one temporary folder (the NetCDF4 reader's) must be gone once the load returns."""
    import tempfile

    import xarray as xr

    folder = tmp_path / "tmp"
    folder.mkdir()
    monkeypatch.setenv("TMPDIR", str(folder))
    monkeypatch.setattr(tempfile, "tempdir", str(folder))
    nc4 = bytes(xr.Dataset({"x": ("time", lorenz)}, coords={"time": 0.01 * np.arange(lorenz.size)})
                .to_netcdf(engine="h5netcdf"))
    s = SessionState()
    assert s.load_bytes(nc4, "lorenz.nc"), s.error
    assert s.raw.sizes["time"] == lorenz.size
    assert s.estimate(), s.error
    other = SessionState()
    assert other.open_bundle(s.bundle_bytes(), "lorenz-lagspace.zip"), other.error
    s.close()
    other.close()
    assert list(folder.iterdir()) == []


@pytest.mark.parametrize("name, download", [("../../x.csv", "x-lagspace.zip"), ("/etc/passwd", "passwd-lagspace.zip"),
                                            ("..\\..\\win.csv", "win-lagspace.zip"), ("..", "recording-lagspace.zip"),
                                            ("a b;rm -rf.csv", "a_b_rm_-rf-lagspace.zip")])
def test_uploaded_names_are_never_paths(lorenz, tmp_path, monkeypatch, name, download):
    """Issue 6: nothing the browser sends is used as a server-side path; the name only labels things."""
    work = tmp_path / "server" / "cwd"
    work.mkdir(parents=True)
    monkeypatch.chdir(work)
    s = SessionState()
    assert s.load_bytes(csv_bytes(lorenz[:1000]), name), s.error
    assert s.estimate(), s.error
    s.bundle_bytes()
    assert s.bundle_filename == download
    assert [p for p in tmp_path.rglob("*") if p.is_file()] == []


def test_a_netcdf4_upload_is_read_once(lorenz, monkeypatch):
    """Each NetCDF4 reading costs a child process (about a second): loading asks for one."""
    import xarray as xr

    from engine import loading

    calls = []
    real = loading._netcdf4_in_child
    monkeypatch.setattr(loading, "_netcdf4_in_child", lambda *a, **k: calls.append(1) or real(*a, **k))
    two = xr.Dataset({"x": ("time", lorenz), "y": ("time", lorenz[::-1].copy())},
                     coords={"time": 0.01 * np.arange(lorenz.size)})
    s = SessionState()
    assert s.load_bytes(bytes(two[["x"]].to_netcdf(engine="h5netcdf")), "one.nc"), s.error
    assert len(calls) == 1 and s.raw.sizes["time"] == lorenz.size
    assert s.load_bytes(bytes(two.to_netcdf(engine="h5netcdf")), "two.nc") and s.pending["variables"] == ["x", "y"]
    assert len(calls) == 2


def test_spectrum_is_computed_once_per_prepared_recording(loaded):
    spec, _ = loaded.spectrum()
    assert loaded.spectrum()[0] is spec
    assert loaded.change_settings(crop_start=0.0, crop_stop=20.0), loaded.error
    cropped, _ = loaded.spectrum()
    assert cropped is not spec and cropped["frequency"].size < spec["frequency"].size


def test_too_many_channels_to_list_is_one_line(loaded):
    # a .wav header may claim thousands of channels (test_hostile_inputs builds one with 3000)
    from test_hostile_inputs import RECORDINGS

    name, make, _ = RECORDINGS[".wav of 3000 channels"]
    before = loaded.raw
    assert not loaded.load_bytes(make(None), name)
    assert "3000 channels, too many" in loaded.error and "--variable" in loaded.error
    assert loaded.pending is None and loaded.raw is before
