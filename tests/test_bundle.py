"""Bundles: round trip to the same summary, and refusal of damaged or hostile zips."""

import io
import json
import zipfile

import numpy as np
import pytest

import systems
from engine.analysis import run_standard_analysis
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
