"""The dashboard served in a subprocess for the browser tests and the load benchmark."""

from __future__ import annotations

import contextlib
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run", "--disable-quic"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def dashboard(log: Path, seconds: float = 90, env: dict | None = None, **serve_options):
    """``dashboard.server.serve(**serve_options)`` on a free loopback port, its output in ``log``
    (a file, not a pipe nobody reads, which could fill and stall the server); yields the URL
    once the server answers (a login page counts)."""
    port = free_port()
    options = ", ".join(f"{k}={v!r}" for k, v in dict(serve_options, port=port).items())
    with open(log, "w") as out:
        proc = subprocess.Popen([sys.executable, "-c", f"from dashboard.server import serve; serve({options})"],
                                cwd=ROOT, stdout=out, stderr=subprocess.STDOUT, env=env)
    url = f"http://127.0.0.1:{port}/"
    deadline = time.monotonic() + seconds
    try:
        while True:
            try:
                urllib.request.urlopen(url, timeout=2)
                break
            except urllib.error.HTTPError:
                break
            except OSError:
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise RuntimeError(f"dashboard server did not start:\n{Path(log).read_text()}")
                time.sleep(0.5)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
