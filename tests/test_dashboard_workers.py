"""The worker processes that run the dashboard's estimates and invariants (dashboard.workers)."""

import os
import signal
import subprocess
import sys
import textwrap
import threading
import time

import numpy as np
import pytest
import xarray as xr

import systems
from dashboard import workers
from engine.analysis import run_standard_analysis
from engine.diagnostics import estimate
from engine.errors import Cancelled, LagspaceError
from engine.recording import make_recording
from engine.settings import Settings
from served import ROOT


@pytest.fixture(scope="module")
def henon():
    return make_recording(systems.henon(1500))


def test_a_worker_gives_what_the_engine_gives_in_this_process(henon):
    # The reference is the same engine function called here: running it elsewhere must change nothing.
    reports = []
    here = estimate(henon, Settings())
    there = workers.call(estimate, henon, Settings(),
                         progress=lambda f, m: reports.append((f, m, threading.get_ident())))
    xr.testing.assert_identical(there, here)
    assert reports and all(0.0 <= f <= 1.0 and isinstance(m, str) for f, m, _ in reports)
    # the dashboard hands progress to the page from the thread that made the call, so it must arrive there
    assert {thread for _, _, thread in reports} == {threading.get_ident()}


def test_cancel_reaches_the_worker(henon):
    cancel = threading.Event()
    started = time.monotonic()

    def progress(fraction, message):
        cancel.set()  # cancel as soon as the work reports anything

    with pytest.raises(Cancelled):
        workers.call(run_standard_analysis, henon, Settings(surrogates=99), progress=progress, cancel=cancel)
    assert time.monotonic() - started < 30


def test_the_engines_errors_arrive_as_they_are():
    with pytest.raises(LagspaceError, match="diagnostics must be"):
        workers.call(run_standard_analysis, make_recording(np.sin(np.arange(500.0))), Settings(),
                     diagnostics="not a dataset")


def test_workers_exit_when_the_server_is_killed(tmp_path):
    # SIGKILL leaves no chance to clean up: the workers must notice on their own.
    script = textwrap.dedent("""
        import time
        from dashboard import workers
        pool, _ = workers._pool_and_shared()
        pool.submit(time.sleep, 0.1).result()
        print(" ".join(str(pid) for pid in pool._processes), flush=True)
        time.sleep(600)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], cwd=ROOT, stdout=subprocess.PIPE, text=True)
    try:
        pids = [int(p) for p in proc.stdout.readline().split()]
        assert pids, "the pool started no worker"
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    deadline = time.monotonic() + 20
    alive = pids
    while alive and time.monotonic() < deadline:
        time.sleep(0.5)
        alive = [pid for pid in alive if _running(pid)]
    assert not alive, f"workers {alive} outlived the killed server"


def _running(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split()[2] != "Z"  # a zombie has exited; only its parent has not reaped it
    except FileNotFoundError:
        return False
