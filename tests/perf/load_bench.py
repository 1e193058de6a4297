"""Concurrency benchmark: several browser sessions run the standard analysis at once.

    python tests/perf/load_bench.py                 # 4 sessions, the page's own surrogate count
    python tests/perf/load_bench.py --sessions 2 --surrogates 19

The dashboard server runs in a subprocess on a free loopback port; each session is its own
headless Chromium context. Every session uploads the same Lorenz recording, accepts the
suggestions, and all press Run together. While the analyses run, each page keeps doing one
UI action that needs the server: a step of the "Turn" slider of the 3-D view on page 2, which
the server answers with a redrawn view (the action is answered when the view naming the new
angle reaches the page). Switching tabs would not do: the browser draws tabs alone.

Prints the analysis wall time of each session and the action latencies (median, 95th
percentile, maximum, count), idle and under load, and the server's share of them: from the
slider's websocket message leaving the page to the redrawn view's data arriving. The rest is
the browser's own drawing, which on this one machine shares the cores with the server.
Exit status 0 when every session got results, all with the same correlation dimension, and
every action was answered within ACTION_TIMEOUT; 1 otherwise. Not collected by pytest: tests/test_concurrent_sessions.py runs
it once and checks the untimed facts.
"""

from __future__ import annotations

import argparse
import asyncio
import re
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Optional

import numpy as np
from playwright.async_api import TimeoutError as PlaywrightTimeout, async_playwright

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent.parent), str(HERE.parent)]

import systems  # noqa: E402
from served import ARGS, CHROMIUM, dashboard  # noqa: E402

ACTION_TIMEOUT = 15.0     # seconds before an action counts as unanswered
BUDGET = 170.0            # seconds for all sessions, from opening the pages to reading the results
IDLE_ACTIONS = 3          # actions per page before Run, for comparison
PAUSE = 1.0               # seconds between two actions of one page (a person's pace)

# the 3-D view's titles; the slider only moves forwards, so each angle's view is new when it appears
TURN_TITLES = ("() => [...Bokeh.documents[0].all_models]"
               ".filter(m => m.type == 'Title' && m.text.includes(': turn ')).map(m => m.text)")
NEW_VIEW = ("angle => [...Bokeh.documents[0].all_models].some(m => m.type == 'Title'"
            " && m.text.includes(`: turn ${angle}°`))")
LAST_ANGLE = 180          # the slider's end: no more actions after it
FINISHED = re.compile("Analysis done|failed; earlier results are kept")
RUN_PRESSED = 0.0         # time.monotonic() when the sessions pressed Run (for the report)


@dataclass
class Session:
    """What one browser session measured and got."""

    idle: list = field(default_factory=list)      # latencies (s) of the actions before Run
    loaded: list = field(default_factory=list)    # latencies (s) of the actions during the analysis
    unanswered: list = field(default_factory=list)  # what the page showed when an action got no answer
    prepare_time: Optional[float] = None          # s from opening the page to pressing Run (upload, estimates)
    analysis_time: Optional[float] = None         # s from pressing Run to "Analysis done"
    d2: Optional[str] = None                      # the correlation dimension as the results table shows it
    errors: list = field(default_factory=list)    # page errors and the status line of a failed run
    server: list = field(default_factory=list)    # s from the slider's message leaving the page to the new view's data arriving
    frames: list = field(default_factory=list)    # (time.monotonic(), "sent" | "view") of the websocket messages that matter

    def watch(self, ws) -> None:
        """Note when a slider step leaves the page and when a redrawn view's data arrives, as
        Playwright hears of the frames from the browser's network side (the page's own drawing
        does not delay that)."""
        ws.on("framesent", lambda p: "value_throttled" in str(p) and self.frames.append((time.monotonic(), "sent")))
        ws.on("framereceived", lambda p: "ColumnDataChanged" in str(p) and self.frames.append((time.monotonic(), "view")))

    def server_time(self, since: float) -> Optional[float]:
        """Seconds between the first slider message after ``since`` and the next view data, if both came."""
        sent = next((t for t, kind in self.frames if kind == "sent" and t >= since), None)
        view = None if sent is None else next((t for t, kind in self.frames if kind == "view" and t >= sent), None)
        return None if view is None else view - sent


def write_recording(path: Path) -> Path:
    """Lorenz x, 5,000 samples every 0.02 s, as CSV with a time column (long enough for a D2 plateau)."""
    x = systems.lorenz(5000, dt=0.02)
    path.write_text("time_s,x_V\n" + "\n".join(f"{0.02 * i:.2f},{v:.9g}" for i, v in enumerate(x)) + "\n")
    return path


def _when(start: float) -> str:
    return "before Run" if not RUN_PRESSED else f"at {start - RUN_PRESSED:+.0f} s from Run"


async def turn(page) -> float | str | None:
    """Turn the 3-D view one slider step (5°) further; seconds until the server's redrawn view
    reached the page, what the page showed when it did not within ACTION_TIMEOUT, or None at the
    slider's end."""
    handle = page.locator(".card", has_text="3-D view").locator(".noUi-handle").first
    try:
        await handle.wait_for(timeout=ACTION_TIMEOUT * 1000)
    except PlaywrightTimeout:
        return f"the Turn slider did not appear within {ACTION_TIMEOUT:g} s"
    angle = round(float(await handle.get_attribute("aria-valuenow"))) + 5
    if angle > LAST_ANGLE:
        return None
    start = time.monotonic()
    await handle.press("ArrowRight")
    try:
        await page.wait_for_function(NEW_VIEW, arg=angle, polling=20, timeout=ACTION_TIMEOUT * 1000)
    except PlaywrightTimeout:
        titles = await page.evaluate(TURN_TITLES)
        return (f"turn to {angle}° {_when(start)} unanswered: slider at "
                f"{await handle.get_attribute('aria-valuenow')}, views {titles[-2:]}")
    return time.monotonic() - start


async def _act(page, session: Session, into: list) -> None:
    start = time.monotonic()
    latency = await turn(page)
    if isinstance(latency, str):
        session.unanswered.append(latency)
    elif latency is not None:
        into.append(latency)
        server = session.server_time(start)
        if server is not None:
            session.server.append(server)


async def prepare(page, url: str, recording: Path, surrogates: Optional[int], session: Session) -> None:
    """Open the page, upload, accept the suggestions, measure idle actions, go to page 3."""
    start = time.monotonic()
    page.on("websocket", session.watch)
    page.on("pageerror", lambda e: session.errors.append(f"page error {_when(time.monotonic())}: {e.name}: "
                                                         f"{e.message} {(e.stack or '')[:300]}"))
    await page.goto(url)
    await page.get_by_text("1 · Recording").first.wait_for(timeout=60_000)
    await page.locator("input.filepond--browser").set_input_files(str(recording))
    await page.locator("table.facts").get_by_text("5,000").wait_for(timeout=60_000)
    await page.get_by_text("2 · Delay & dimension").first.click()
    await page.get_by_text("Why:").first.wait_for(timeout=120_000)
    for _ in range(IDLE_ACTIONS):
        await _act(page, session, session.idle)
    await page.get_by_text("3 · Invariants").first.click()
    if surrogates is not None:
        count = page.locator(".surrogate-count input")
        await count.fill(str(surrogates))
        await count.press("Enter")
    session.prepare_time = time.monotonic() - start


async def run_and_act(page, session: Session, timeout: float) -> None:
    """Press Run, then keep turning the 3-D view until the status line says the analysis ended
    (at most ``timeout`` seconds)."""
    await page.locator(".run-analysis button").click()
    start = time.monotonic()
    finished = asyncio.ensure_future(
        page.locator(".status-line", has_text=FINISHED).wait_for(timeout=timeout * 1000))
    await page.get_by_text("2 · Delay & dimension").first.click()
    while not finished.done():
        await _act(page, session, session.loaded)
        await asyncio.sleep(PAUSE)
    try:
        await finished
    except PlaywrightTimeout:
        session.errors.append(f"the analysis did not end within {timeout:g} s")
        return
    session.analysis_time = time.monotonic() - start
    status = await page.locator(".status-line span").inner_text()
    if "Analysis done" not in status:
        session.errors.append(status)


async def read_results(page, session: Session) -> None:
    """The correlation dimension from the results table on page 3."""
    await page.get_by_text("3 · Invariants").first.click()
    row = page.locator("table.results tr", has_text="Correlation dimension D2")
    try:
        await row.wait_for(timeout=30_000)
    except PlaywrightTimeout:
        return
    session.d2 = (await row.locator("td.num").first.inner_text()).strip()


def niced_browser(folder: Path, nice: int) -> str:
    """A launcher running Chromium at ``nice`` (0: as is). The users' browsers run on their own
    machines; here they share the server's cores, and at a lower priority they take only what the
    server leaves, as if they were elsewhere."""
    if nice == 0:
        return CHROMIUM
    launcher = folder / "chromium"
    launcher.write_text(f'#!/bin/sh\nexec nice -n {nice} {CHROMIUM} "$@"\n')
    launcher.chmod(0o755)
    return str(launcher)


async def run_sessions(url: str, recording: Path, found: list[Session], surrogates: Optional[int],
                       chromium: str = CHROMIUM, budget: float = BUDGET) -> None:
    """One browser context per Session in ``found``: prepare, run_and_act (started together, each
    given what is left of ``budget``), read_results."""
    start = time.monotonic()
    async with async_playwright() as pw:
        browser = await pw.chromium.launch(executable_path=chromium, args=ARGS)
        try:
            pages = [await (await browser.new_context(viewport={"width": 1400, "height": 1000})).new_page()
                     for _ in found]
            await asyncio.gather(*(prepare(p, url, recording, surrogates, s) for p, s in zip(pages, found)))
            global RUN_PRESSED
            RUN_PRESSED = time.monotonic()
            left = budget - (time.monotonic() - start)
            await asyncio.gather(*(run_and_act(p, s, left) for p, s in zip(pages, found)))
            await asyncio.gather(*(read_results(p, s) for p, s in zip(pages, found)))
        finally:
            await browser.close()


def measure(sessions: int = 4, surrogates: Optional[int] = None, browser_nice: int = 0,
            budget: float = BUDGET) -> list[Session]:
    """Start a server, run ``sessions`` sessions at once (within ``budget`` seconds), stop the
    server; the browsers run at ``browser_nice`` (see niced_browser)."""
    with tempfile.TemporaryDirectory() as tmp, dashboard(Path(tmp) / "server.log") as url:
        recording = write_recording(Path(tmp) / "lorenz_x.csv")
        found = [Session() for _ in range(sessions)]
        try:
            chromium = niced_browser(Path(tmp), browser_nice)
            asyncio.run(asyncio.wait_for(run_sessions(url, recording, found, surrogates, chromium, budget),
                                         budget + 30))
        except asyncio.TimeoutError:
            ready = sum(s.prepare_time is not None for s in found)
            done = sum(s.analysis_time is not None for s in found)
            found[0].errors.append(f"the sessions did not finish within {budget:g} s ({ready} of {len(found)} "
                                   f"ready to run, {done} analyses done)")
        return found


def problems(found: list[Session]) -> list[str]:
    """What went wrong: missing results, differing correlation dimensions, unanswered actions, page errors."""
    out = [f"session {i}: {e}" for i, s in enumerate(found) for e in s.errors]
    out += [f"session {i}: no correlation dimension in the results" for i, s in enumerate(found)
            if s.d2 in (None, "", "n/a")]
    if len({s.d2 for s in found}) > 1:
        out.append(f"the sessions disagree on the correlation dimension: {[s.d2 for s in found]}")
    out += [f"session {i}: {u} (after {ACTION_TIMEOUT:g} s)" for i, s in enumerate(found) for u in s.unanswered]
    out += [f"session {i}: no action during the analysis" for i, s in enumerate(found) if not s.loaded]
    return out


def _stats(latencies: list) -> str:
    if not latencies:
        return "no actions"
    ms = 1000 * np.asarray(latencies)
    return (f"median {np.median(ms):6.0f} ms   95th percentile {np.percentile(ms, 95):6.0f} ms   "
            f"max {ms.max():6.0f} ms   ({ms.size} actions)")


def report(found: list[Session]) -> None:
    """Print the analysis times and the action latencies."""
    print(f"{len(found)} sessions, UI action: one step of the 3-D view's Turn slider, answered by the server")
    for i, s in enumerate(found):
        t = "n/a" if s.analysis_time is None else f"{s.analysis_time:.1f} s"
        ready = "n/a" if s.prepare_time is None else f"{s.prepare_time:.1f} s"
        print(f"  session {i}: ready to run after {ready}, analysis wall time {t}, D2 = {s.d2}, "
              f"{len(s.loaded)} actions during it, {len(s.unanswered)} unanswered")
    print(f"idle (before Run):  {_stats([x for s in found for x in s.idle])}")
    print(f"during the runs:    {_stats([x for s in found for x in s.loaded])}")
    print("the server's share of every answered action (slider message out to redrawn view in, as the")
    print(f"browser's network side saw them): {_stats([x for s in found for x in s.server])}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sessions", type=int, default=4, help="browser sessions at once (default 4)")
    parser.add_argument("--surrogates", type=int, default=None,
                        help="surrogate count to type into each page (default: leave the page's own)")
    parser.add_argument("--browser-nice", type=int, default=0,
                        help="run the browsers at this nice level (19: as if on other machines; default 0)")
    args = parser.parse_args(argv)
    found = measure(args.sessions, args.surrogates, args.browser_nice)
    report(found)
    bad = problems(found)
    for line in bad:
        print("PROBLEM:", line)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
