"""The engine's long computations run in worker processes at a lower priority.

The server's event loop answers every session's clicks and slider steps. An analysis
run in a thread of the server process competes with it for the interpreter lock and
for the CPU; on a two-core machine four of them starve the loop for seconds. Worker
processes started by ``forkserver`` (the server has threads, so not ``fork``) with a
niceness of :data:`NICENESS` leave the loop the CPU whenever it needs it, and a worker
that dies (say, killed for memory) costs one analysis, not the server.

All workers send their progress reports, tagged with the call's number, into one queue
that a thread of the server hands on to the waiting call; a cancelled call's number goes
into a small shared ring the workers look at. A worker sends at most
:data:`REPORTS_PER_SECOND` reports and looks at the ring at most ten times a second, and
it exits by itself once the server process is gone (however the server was stopped).
"""

from __future__ import annotations

import itertools
import logging
import multiprocessing
import os
import queue
import threading
import time
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Callable

from engine.errors import LagspaceError

log = logging.getLogger(__name__)

WORKERS = 4              # analyses that run at once; more wait their turn
NICENESS = 10            # added to the workers' scheduling niceness (POSIX nice(2))
REPORTS_PER_SECOND = 5
CANCEL_RING = 64         # recently cancelled calls the workers can see
PRELOAD = ["engine.analysis", "engine.diagnostics", "engine.warmup"]

_lock = threading.Lock()
_pool: ProcessPoolExecutor | None = None
_shared = None           # (reports queue, cancel ring) of the pool
_inboxes: dict = {}      # call number -> queue.Queue of its progress reports
_numbers = itertools.count(1)

# in a worker process: what the pool's initializer handed over
_reports = _cancelled = None


def _start_worker(server_pid: int, reports, cancelled) -> None:
    global _reports, _cancelled
    _reports, _cancelled = reports, cancelled
    try:
        os.nice(NICENESS)
    except (AttributeError, OSError):  # not POSIX, or not allowed: run at the server's priority
        pass

    def watch():
        while True:
            time.sleep(1.0)
            try:
                os.kill(server_pid, 0)
            except OSError:
                os._exit(0)  # the server is gone: nobody waits for this work

    threading.Thread(target=watch, name="lagspace-orphan-watch", daemon=True).start()


def _relay(reports) -> None:
    """Sort the workers' reports into the inbox of their call (a server thread)."""
    while True:
        number, fraction, message = reports.get()
        inbox = _inboxes.get(number)
        if inbox is not None:
            inbox.put((fraction, message))


def _pool_and_shared():
    global _pool, _shared
    with _lock:
        if _pool is None:
            context = multiprocessing.get_context("forkserver")  # not fork: the server has threads
            context.set_forkserver_preload(PRELOAD)
            if _shared is None:
                _shared = (context.SimpleQueue(), context.Array("q", CANCEL_RING))
                threading.Thread(target=_relay, args=(_shared[0],), name="lagspace-progress", daemon=True).start()
            _pool = ProcessPoolExecutor(WORKERS, mp_context=context, initializer=_start_worker,
                                        initargs=(os.getpid(), *_shared))
        return _pool, _shared


def _forget_pool(pool: ProcessPoolExecutor) -> None:
    """A worker died: the next call starts a fresh pool."""
    global _pool
    with _lock:
        if _pool is pool:
            _pool = None
    pool.shutdown(wait=False, cancel_futures=True)


class _Flag:
    """Whether call ``number`` is in the cancel ring, read at most ten times a second."""

    def __init__(self, number: int):
        self.number, self.checked, self.value = number, 0.0, False

    def is_set(self) -> bool:
        now = time.monotonic()
        if not self.value and now - self.checked >= 0.1:
            self.checked, self.value = now, self.number in _cancelled[:]
        return self.value


def _in_worker(number: int, fn: Callable, args: tuple, kwargs: dict):
    last = 0.0

    def progress(fraction: float, message: str) -> None:
        nonlocal last
        now = time.monotonic()
        if now - last >= 1.0 / REPORTS_PER_SECOND or fraction >= 1.0:
            last = now
            _reports.put((number, fraction, message))

    return fn(*args, progress=progress, cancel=_Flag(number), **kwargs)


def call(fn: Callable, *args, progress=None, cancel=None, **kwargs):
    """``fn(*args, progress=..., cancel=..., **kwargs)`` in a worker process; blocks the calling
    thread until it returns, relaying its progress reports and the ``cancel`` flag (anything with
    ``is_set()``). ``fn`` and its arguments must be picklable; its exceptions are raised here."""
    pool, (_, ring) = _pool_and_shared()
    number = next(_numbers)
    inbox = _inboxes[number] = queue.Queue()
    try:
        try:
            future: Future = pool.submit(_in_worker, number, fn, args, kwargs)
        except BrokenProcessPool:
            _forget_pool(pool)
            pool, _ = _pool_and_shared()
            future = pool.submit(_in_worker, number, fn, args, kwargs)
        while not future.done():  # progress is called here, in the caller's thread
            try:
                fraction, message = inbox.get(timeout=0.1)
                if progress is not None:
                    progress(fraction, message)
            except queue.Empty:
                pass
            if cancel is not None and cancel.is_set():
                with ring.get_lock():
                    ring[number % CANCEL_RING] = number
        return future.result()
    except BrokenProcessPool:
        _forget_pool(pool)
        raise LagspaceError("the worker process running this stopped unexpectedly (perhaps out of memory): "
                            "crop the recording or lower the limits, then try again") from None
    finally:
        _inboxes.pop(number, None)


def stop() -> None:
    """Stop the workers now, running work and all (the server is shutting down: nobody waits)."""
    global _pool
    with _lock:
        pool, _pool = _pool, None
    if pool is not None:
        for process in list(pool._processes.values()):  # no public way to stop running work
            process.terminate()
        pool.shutdown(wait=False, cancel_futures=True)


def warm_up() -> None:
    """Compile the engine's kernels in a worker (they are cached on disk for the others); failures
    are logged, never raised."""
    from engine.warmup import warm_up as engine_warm_up

    pool, _ = _pool_and_shared()

    def done(future):
        try:
            log.info("kernels ready after %.1f s", future.result())
        except Exception as exc:  # a failed warm-up only costs the first user some seconds
            log.warning("kernel warm-up failed: %s", exc)

    pool.submit(engine_warm_up).add_done_callback(done)
