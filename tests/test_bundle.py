"""Bundles: round trip to the same summary, and refusal of damaged or hostile zips."""

import hashlib
import io
import json
import os
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest

import systems
from engine.analysis import refit, run_standard_analysis
from engine.bundle import bundle_bytes, read_bundle, write_bundle
from engine.errors import BundleError
from engine.recording import make_recording
from engine.settings import Settings


@pytest.fixture(scope="module")
def analysis():
    # Hénon map (Hénon 1976): a small, fast, chaotic input.
    rec = make_recording(systems.henon(3000), name="x", source="henon.csv")
    return run_standard_analysis(rec, Settings(surrogates=19, seed=7, max_dimension=6))


@pytest.fixture(scope="module")
def data(analysis):
    return bundle_bytes(analysis)


def _rezip(data: bytes, change) -> bytes:
    """Copy a bundle, letting ``change(name, bytes)`` return new bytes (or None to drop)."""
    src = zipfile.ZipFile(io.BytesIO(data))
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            new = change(info.filename, src.read(info))
            if new is not None:
                dst.writestr(info.filename, new)
    return buf.getvalue()


def test_members_and_hashes(data):
    import hashlib

    zf = zipfile.ZipFile(io.BytesIO(data))
    names = set(zf.namelist())
    assert names == {"manifest.json", "recording.nc", "diagnostics.nc", "results.nc", "settings.json",
                     "summary.json", "report.html"}
    manifest = json.loads(zf.read("manifest.json"))
    assert manifest["format_version"] == 1 and manifest["seed"] == 7
    for name, entry in manifest["members"].items():
        assert hashlib.sha256(zf.read(name)).hexdigest() == entry["sha256"]
    assert "numpy" in manifest["software"]


def test_round_trip_gives_same_summary(analysis, data):
    back = read_bundle(data)
    assert back.summary == analysis.summary
    assert back.settings == analysis.settings
    stored = json.loads(zipfile.ZipFile(io.BytesIO(data)).read("summary.json"))
    assert stored == analysis.summary


def test_rerun_from_bundle_gives_same_summary(analysis, data):
    back = read_bundle(data)
    again = run_standard_analysis(back.recording, back.settings)
    assert again.summary == analysis.summary


def test_report_is_self_contained(data):
    page = zipfile.ZipFile(io.BytesIO(data)).read("report.html").decode()
    assert "research tool" in page and "data:image/png;base64," in page
    assert "http://" not in page and "https://" not in page


def test_report_speaks_plain_words(analysis, data):
    page = zipfile.ZipFile(io.BytesIO(data)).read("report.html").decode()
    assert "{'step'" not in page and "rejects linear null" not in page  # no raw records or flags
    assert "mean removed" in page  # the default preparation step, in words
    test = analysis.summary["surrogate_test"]
    words = {True: "differs from linear noise", False: "not distinguishable from linear noise"}
    assert words.get(test["rejects_linear_null"], test.get("reason") or "not run") in page


def test_atomic_write(tmp_path, analysis):
    out = write_bundle(analysis, tmp_path / "a.zip")
    assert out.is_file() and not list(tmp_path.glob("*.part"))
    read_bundle(out)


@pytest.mark.parametrize("case", ["tampered", "escape", "extra", "missing", "not_zip", "bad_manifest"])
def test_hostile_bundles_refused(data, case):
    if case == "tampered":
        bad = _rezip(data, lambda n, b: b + b" " if n == "settings.json" else b)
    elif case == "escape":
        bad = _rezip(data, lambda n, b: b)
        buf = io.BytesIO(bad)
        with zipfile.ZipFile(buf, "a") as zf:
            zf.writestr("../../evil.txt", b"x")
        bad = buf.getvalue()
    elif case == "extra":
        buf = io.BytesIO(data)
        with zipfile.ZipFile(buf, "a") as zf:
            zf.writestr("run_me.py", b"print('x')")
        bad = buf.getvalue()
    elif case == "missing":
        bad = _rezip(data, lambda n, b: None if n == "recording.nc" else b)
    elif case == "not_zip":
        bad = b"PK\x03\x04 not really a zip"
    else:
        bad = _rezip(data, lambda n, b: b"{not json" if n == "manifest.json" else b)
    with pytest.raises(BundleError) as err:
        read_bundle(bad)
    assert "\n" not in str(err.value)


def test_zip_bomb_refused(data):
    # A member that inflates far beyond any real bundle: 300 MB of zeros compress to ~300 kB.
    bomb = _rezip(data, lambda n, b: b"\0" * 300_000_000 if n == "report.html" else b)
    with pytest.raises(BundleError) as err:
        read_bundle(bomb, max_inflated=100_000_000)
    assert "inflate" in str(err.value)


def test_seed_changes_surrogates_only(analysis):
    rec = analysis.recording
    other = run_standard_analysis(rec, analysis.settings.replace(seed=8))
    assert other.summary["delay"] == analysis.summary["delay"]
    assert np.isfinite(other.summary["surrogate_test"]["p_value"])


def _with_settings(data: bytes, settings_json: bytes) -> bytes:
    """A bundle whose settings.json is replaced, with the manifest's hash made to match."""
    def change(name, raw):
        if name == "settings.json":
            return settings_json
        if name == "manifest.json":
            manifest = json.loads(raw)
            manifest["members"]["settings.json"] = {"sha256": hashlib.sha256(settings_json).hexdigest(),
                                                    "bytes": len(settings_json)}
            return json.dumps(manifest).encode()
        return raw
    return _rezip(data, change)


def test_refit_ranges_survive_bundle_and_full_rerun(analysis, tmp_path):
    d2 = analysis.summary["correlation_dimension"]
    (lo, hi), fit = d2["scaling_range"], analysis.summary["largest_lyapunov_exponent"]["fit_range"]
    # a dragged range: any numbers; the divergence range keeps the whole steps it holds
    moved = refit(analysis, scaling_range=(lo * 1.01, np.sqrt(lo * hi)), divergence_range=(fit[0] + 0.4, fit[1] - 1.6))
    assert moved.settings.scaling_range == (lo * 1.01, np.sqrt(lo * hi))
    assert moved.settings.divergence_range == (int(np.ceil(fit[0] + 0.4)), int(np.floor(fit[1] - 1.6)))
    assert moved.summary["correlation_dimension"] != d2
    path = write_bundle(moved, tmp_path / "refit.zip")
    assert read_bundle(path).settings == moved.settings
    # The full chain again, as a user would run it: `lagspace analyze refit.zip --json`.
    repo = Path(__file__).resolve().parents[1]
    out = subprocess.run([sys.executable, "-m", "engine.cli", "analyze", str(path), "--json"], capture_output=True,
                         text=True, timeout=600, env={**os.environ, "PYTHONPATH": str(repo)})
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout) == moved.summary


def test_bundle_from_before_the_range_settings_still_reads(analysis, data):
    old = {k: v for k, v in analysis.settings.to_dict().items() if k not in ("scaling_range", "divergence_range")}
    back = read_bundle(_with_settings(data, json.dumps(old).encode()))
    assert back.settings == analysis.settings and back.settings.scaling_range is None
    assert back.summary == analysis.summary


def test_given_diagnostics_are_reused_not_recomputed(analysis, monkeypatch):
    import engine.analysis

    def refuse(*args, **kwargs):
        raise AssertionError("diagnostics were estimated again")

    monkeypatch.setattr(engine.analysis, "estimate", refuse)
    again = run_standard_analysis(analysis.recording, analysis.settings, analysis.diagnostics)
    assert again.summary == analysis.summary and again.diagnostics is analysis.diagnostics
