"""Bad input matrix in headless Chromium: the hostile files of test_hostile_inputs are uploaded
through the page's own file inputs (recordings on the drop area, bundles on "Open a bundle") into
one session that already holds an analysed recording. Each gets one error line holding the same
words the engine's message holds (the rule of ``_says``), and the recording, its sample count and
the result numbers shown before stay shown, with no traceback in the server log and no console error.
Skips like test_browser (no Chromium outside CI).
"""

import os
import re
from types import SimpleNamespace

import pytest

from served import dashboard
from test_browser import _open, _results, browser, pytestmark, recording_file  # noqa: F401
from test_hostile_inputs import BUNDLES, RECORDINGS, _case_file, _says

# Refused by the checks, but one click fixes them: they load (replacing the analysed recording, as any
# new recording does) and show the finding with its fix button. They run last.
FIXABLE = {"NaN inside": "Interpolate the gaps", "inf inside": "Interpolate the gaps",
           "uneven time (gap)": "Resample onto an even grid", "uneven time (jitter)": "Resample onto an even grid"}
# The dashboard's own line where it differs from the engine's (which lists channels to pass to --variable).
WORDS = {".wav of 3000 channels": ["3000 channels", "too many", "--variable"]}

# Each upload costs about 3 s here, the whole matrix about 4 minutes; by default one case of each way a
# file can fail runs, LAGSPACE_FULL_MATRIX=1 runs them all.
QUICK = {"empty", "words", "pickled object .npy", "random bytes .wav", ".npy header promising 72 TiB", "5000 columns",
         "huge header (one 10 MB name)", "line break in the file name", "random bytes .zip", "constant",
         ".wav of 3000 channels", "truncated HDF5", "CDF-5", "backwards time", "member escapes with ../",
         "zip bomb (50 MB of zeros)", "zip bomb (header claims 4 GB)", "encrypted member", "hashes do not match",
         "manifest nested 100000 deep", "NetCDF bomb inside (6e7 numbers)", "no manifest", "uneven time (gap)"}
FULL = os.environ.get("LAGSPACE_FULL_MATRIX") == "1"


def _order():
    """Cases that keep the session first, the fixable ones (which replace what is loaded) last."""
    cases = [("recording", c) for c in sorted(RECORDINGS)] + [("bundle", c) for c in sorted(BUNDLES)]
    cases = [(k, c) for k, c in cases if FULL or c in QUICK]
    cases.sort(key=lambda kc: kc[1] in FIXABLE)
    names = [RECORDINGS[c][0] if k == "recording" else c for k, c in cases]
    assert all(a != b for a, b in zip(names, names[1:])), "two cases in a row upload the same file name"
    return cases


def test_quick_cases_exist():
    assert QUICK <= set(RECORDINGS) | set(BUNDLES) and set(FIXABLE) <= set(RECORDINGS)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    """The dashboard; its log is read per case for tracebacks."""
    log = tmp_path_factory.mktemp("server") / "server.log"
    with dashboard(log) as url:
        yield SimpleNamespace(url=url, log=log)


def _shown(page) -> dict:
    """What the session shows of its recording and results (the results tab need not be open)."""
    return {"recording": page.locator("table.facts").text_content(),
            "results": page.locator("table.results").text_content(),
            "bundle": page.get_by_text(re.compile("The bundle holds|to make a bundle")).text_content()}


@pytest.fixture(scope="module")
def session(browser, server, recording_file):  # noqa: F811
    """One page with the Lorenz recording uploaded, suggestions accepted and the analysis run
    (without the surrogate test, the slowest part, which is not what is tested here)."""
    page, problems = _open(browser, server.url)
    page.locator("input.filepond--browser").set_input_files(str(recording_file))
    page.locator("table.facts").get_by_text("3,000").wait_for(timeout=60_000)
    page.get_by_text("2 · Delay & dimension").first.click()
    page.get_by_text("Why:").first.wait_for(timeout=120_000)
    page.get_by_text("3 · Invariants").first.click()
    count = page.locator(".surrogate-count input")
    count.fill("0")
    count.press("Enter")
    page.locator(".run-analysis button").click()
    _results(page)
    page.get_by_text("1 · Recording").first.click()
    before = _shown(page)
    assert "lorenz_x.csv" in before["recording"] and "3,000" in before["recording"]
    assert "Largest Lyapunov exponent" in before["results"] and "every result" in before["bundle"]
    yield SimpleNamespace(page=page, problems=problems, before=before, log=server.log)
    page.close()


@pytest.mark.parametrize("kind, case", [pytest.param(k, c, id=f"{k}: {c}") for k, c in _order()])
def test_bad_file_gets_one_line_and_session_kept(session, kind, case, tmp_path):
    page = session.page
    path, words = _case_file(case, tmp_path)
    words = WORDS.get(case, words)
    name = path.name
    if kind == "bundle":  # a name of its own, so that each case's outcome can be told from the last one's
        name = re.sub(r"[^a-z0-9]+", "-", case.lower()).strip("-") + ".zip"
        words = [] if "zip archive" in words else words  # the bundle reader only says it is no bundle
    target = "input[type=file][accept='.zip']" if kind == "bundle" else "input.filepond--browser"
    logged = session.log.stat().st_size

    page.locator(target).set_input_files(files=[{"name": name, "mimeType": "", "buffer": path.read_bytes()}])
    status = page.locator(".status-line span")
    failed = status.filter(has_text=f"{name} failed")
    loaded = page.locator("table.facts td").filter(has_text=name)
    failed.or_(loaded).first.wait_for(timeout=60_000)

    if case in FIXABLE:
        finding = page.locator(".check-finding :has(> span.badge)").filter(has_text=words[0])  # inside its shadow root
        fix = page.get_by_role("button", name=FIXABLE[case])
        assert loaded.count() == 1 and finding.count() == 1 and fix.count() == 1, "not loaded with its one-click fix"
        _says(finding.text_content(), words)
    else:
        error = page.locator(".alert-danger p")
        assert error.count() == 1 and error.is_visible(), "no error line shown"
        _says(error.text_content(), words)
        assert _shown(page) == session.before, "what was loaded or computed before is no longer shown"
    with open(session.log) as f:
        f.seek(logged)
        assert "Traceback" not in f.read(), "the server logged a traceback"


def test_no_console_errors(session):
    assert session.problems == []
