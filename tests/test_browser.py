"""End to end in headless Chromium: upload, checks, suggestions, run, download, re-open, same numbers.

The server runs in a subprocess on a free port. Skips only when Chromium is missing and the
``CI`` environment variable is not set (in CI a missing browser is a failure).
"""

import io
import os
import time
import zipfile

import numpy as np

import pytest
from PIL import Image
from playwright.sync_api import sync_playwright

import systems
from dashboard import style
from served import ARGS, CHROMIUM, dashboard

BUNDLE_MEMBERS = {"manifest.json", "recording.nc", "diagnostics.nc", "results.nc", "settings.json",
                  "summary.json", "report.html"}

pytestmark = [pytest.mark.browser, pytest.mark.slow]
if not os.path.exists(CHROMIUM) and not os.environ.get("CI"):
    pytestmark.append(pytest.mark.skip(reason="no Chromium at /usr/bin/chromium (install it: see BROWSER.md)"))


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    """The dashboard's URL; its log is ``server.log`` beside it (see ``served.dashboard``)."""
    log = tmp_path_factory.mktemp("server") / "server.log"
    with dashboard(log) as url:
        yield url


@pytest.fixture(scope="module")
def browser():
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def recording_file(tmp_path_factory):
    x = systems.lorenz(3000, dt=0.01)
    path = tmp_path_factory.mktemp("data") / "lorenz_x.csv"
    path.write_text("time_s,x_V\n" + "\n".join(f"{0.01 * i:.2f},{v:.9g}" for i, v in enumerate(x)) + "\n")
    return path


def _open(browser, url):
    page = browser.new_page(viewport={"width": 1400, "height": 1000}, accept_downloads=True)
    problems = []
    page.on("console", lambda m: problems.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: problems.append(str(e)))
    page.on("requestfailed", lambda r: problems.append(f"request failed: {r.url}"))
    page.goto(url)
    page.get_by_text("1 · Recording").first.wait_for(timeout=60_000)
    return page, problems


def _results(page) -> str:
    table = page.locator("table.results")
    table.wait_for(timeout=240_000)
    return table.inner_text()


def _pixels_of(card, colour: str, at_least: int, seconds: float = 30) -> int:
    """How many pixels of ``card`` (a Playwright locator) have ``colour`` (within 40 per channel,
    for antialiasing), waiting up to ``seconds`` for ``at_least`` of them: a figure whose glyphs
    fail to draw (as with WebGL and no GPU) shows its axes and legend but never the curve."""
    target = np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)])
    deadline, count = time.monotonic() + seconds, 0
    while time.monotonic() < deadline and count < at_least:
        image = np.asarray(Image.open(io.BytesIO(card.screenshot())).convert("RGB"), dtype=int)
        count = int(np.sum(np.all(np.abs(image - target) <= 40, axis=-1)))
        time.sleep(0.5)
    return count


def test_upload_run_download_reopen(server, browser, recording_file, tmp_path):
    page, problems = _open(browser, server)

    # 1. upload: the sample count, the interval with its unit, and the checks appear
    page.locator("input.filepond--browser").set_input_files(str(recording_file))
    page.locator("table.facts").get_by_text("3,000").wait_for(timeout=60_000)
    assert page.locator("table.facts").get_by_text("0.01 s").count() == 1
    assert page.locator(".check-finding").count() >= 1

    # 2. the suggestions arrive with their reasons; accept them as they are
    page.get_by_text("2 · Delay & dimension").first.click()
    page.get_by_text("Why:").first.wait_for(timeout=120_000)
    assert page.get_by_text("Why:").count() >= 2

    # 3. run with a cheap surrogate test and read the numbers
    page.get_by_text("3 · Invariants").first.click()
    count = page.locator(".surrogate-count input")
    count.fill("19")
    count.press("Enter")
    page.locator(".run-analysis button").click()
    first = _results(page)
    assert "Correlation dimension D2" in first and "Largest Lyapunov exponent" in first
    assert "per s" in first  # exponents carry their time unit
    assert page.get_by_text("research tool, not a diagnostic").count() >= 1

    # 4. the curves are drawn (the chosen dimension's divergence curve is in CLAY; the legend's sample
    # of it is about 60 pixels), then drag across the plot: the exponent is refitted over the chosen steps
    divergence_card = page.locator(".card", has_text="Divergence of neighbours").first
    assert _pixels_of(divergence_card, style.CLAY, at_least=400) >= 400
    divergence_card.scroll_into_view_if_needed()
    box = divergence_card.bounding_box()
    x, y = box["x"] + 0.3 * box["width"], box["y"] + 0.55 * box["height"]
    page.mouse.move(x, y)
    page.mouse.down()
    page.mouse.move(x + 0.2 * box["width"], y, steps=8)
    page.mouse.up()
    page.locator("table.results").get_by_text("set by the user").first.wait_for(timeout=60_000)
    first = _results(page)

    # 5. download the bundle and check what it holds
    with page.expect_download(timeout=60_000) as info:
        page.locator(".download-bundle button").click()
    saved = tmp_path / "bundle.zip"
    info.value.save_as(saved)
    with zipfile.ZipFile(saved) as zf:
        assert BUNDLE_MEMBERS <= set(zf.namelist())
        assert zf.testzip() is None

    # 6. a fresh session opens the bundle and shows the same numbers
    fresh, fresh_problems = _open(browser, server)
    fresh.locator("input[type=file][accept='.zip']").set_input_files(str(saved))
    fresh.get_by_text("3 · Invariants").first.click()
    assert _results(fresh) == first

    # 7. back to the detected ranges: the estimates are no longer the user's
    fresh.locator(".detected-ranges button").click()
    fresh.locator(".detected-ranges").wait_for(state="hidden", timeout=60_000)
    assert "set by the user" not in _results(fresh)

    assert problems == [] and fresh_problems == []
    page.close()
    fresh.close()


def test_dragging_across_the_time_series_crops_the_recording(server, browser, recording_file):
    page, problems = _open(browser, server)
    page.locator("input.filepond--browser").set_input_files(str(recording_file))
    page.locator("table.facts").get_by_text("3,000").wait_for(timeout=60_000)
    series = page.locator(".card", has_text="Time series").last.locator("canvas").first
    series.scroll_into_view_if_needed()
    box = series.bounding_box()
    y = box["y"] + 0.5 * box["height"]
    page.mouse.move(box["x"] + 0.3 * box["width"], y)
    page.mouse.down()
    page.mouse.move(box["x"] + 0.6 * box["width"], y, steps=8)
    page.mouse.up()
    page.get_by_text("Press Apply preparation").wait_for(timeout=30_000)
    fields = page.locator(".card", has_text="Preparation").last.locator("input[type=text], input:not([type])")
    lo, hi = (float(v) for v in fields.evaluate_all("els => els.map(e => e.value)")[:2])
    # the fields hold the times of samples (every 0.01 s) inside the recording's 0 to 29.99 s
    assert 0 < lo < hi < 29.99 and abs(lo * 100 - round(lo * 100)) < 1e-6 and abs(hi * 100 - round(hi * 100)) < 1e-6
    page.get_by_role("button", name="Apply preparation").click()
    kept = round((hi - lo) / 0.01) + 1
    page.locator("table.facts").get_by_text(f"{kept:,}", exact=True).wait_for(timeout=60_000)
    assert "cropped" in page.locator("table.facts").inner_text()
    assert problems == []
    page.close()
