"""Serve the dashboard: one fresh SessionState per browser session.

``serve()`` binds to this machine only unless told otherwise; a non-local
address needs a password file (or an explicit ``allow_unprotected=True``).
"""

from __future__ import annotations

import ipaddress
import logging
import os
import secrets
import signal
import sys
from pathlib import Path

import platformdirs

from engine.errors import LagspaceError

from . import workers
from .state import check_limits

log = logging.getLogger(__name__)

DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_data"
DEMO_SUFFIXES = (".csv", ".tsv", ".txt", ".nc", ".npy", ".wav")
PREFERRED_DEMO = "thermosyphon_thermocouple.nc"
MAX_MESSAGE = 256 * 1024 * 1024  # largest single upload message (bundles go in one piece)


def demo_files() -> list[Path]:
    """The demo recordings shipped in demo_data/ (empty when there are none)."""
    if not DEMO_DIR.is_dir():
        return []
    return sorted(p for p in DEMO_DIR.iterdir() if p.suffix.lower() in DEMO_SUFFIXES and p.is_file())


def default_demo() -> Path | None:
    files = demo_files()
    preferred = [p for p in files if p.name == PREFERRED_DEMO]
    return (preferred or files or [None])[0]


def _is_local(address: str) -> bool:
    if address == "localhost":
        return True
    try:
        return ipaddress.ip_address(address).is_loopback
    except ValueError:
        return False


def _read_password(password_file) -> str:
    try:
        password = Path(password_file).read_text(encoding="utf-8").strip()
    except OSError as exc:
        raise LagspaceError(f"cannot read the password file {password_file}: {exc.strerror}") from None
    if len(password) < 8:
        raise LagspaceError(f"the password in {password_file} is shorter than 8 characters; use a longer one")
    return password


def cookie_secret_path() -> Path:
    """Where the login-cookie secret is kept: the user's config folder (``$XDG_CONFIG_HOME/lagspace``)."""
    return Path(platformdirs.user_config_dir("lagspace")) / "cookie_secret"


def _cookie_secret() -> str:
    """The secret that signs login cookies: made once, kept readable by this user only, reused on restart
    (so logins survive a restart); remade when the file is missing, damaged or readable by others."""
    path = cookie_secret_path()
    try:
        if path.stat().st_mode & 0o077 == 0:
            secret = path.read_text(encoding="ascii").strip()
            if len(secret) == 64 and all(c in "0123456789abcdef" for c in secret):
                return secret
        log.warning("the cookie secret in %s was readable by others or damaged; making a new one", path)
    except (OSError, UnicodeDecodeError):
        pass
    path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
    secret = secrets.token_hex(32)
    temporary = path.with_name(f".{path.name}.{os.getpid()}")
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(descriptor, "w", encoding="ascii") as handle:
        handle.write(secret + "\n")
    os.replace(temporary, path)
    return secret


def _origins(address: str, port: int) -> list[str]:
    if address in ("0.0.0.0", "::", ""):
        return ["*"]
    return sorted({f"localhost:{port}", f"127.0.0.1:{port}", f"{address}:{port}"})


def _limits(max_upload_mb, max_samples) -> dict:
    """The session limits from the serve options (positive numbers, else one line saying so)."""
    try:
        mb = float(max_upload_mb)
    except (TypeError, ValueError):
        mb = float("nan")
    if isinstance(max_upload_mb, bool) or not 0 < mb < 1e6:
        raise LagspaceError(f"--max-upload-mb must be a positive number of megabytes (e.g. 200), got {max_upload_mb!r}")
    if isinstance(max_samples, bool) or not isinstance(max_samples, int) or max_samples <= 0:
        raise LagspaceError(f"--max-samples must be a positive whole number (e.g. 10000000), got {max_samples!r}")
    return check_limits(max_bytes=int(mb * 1_000_000), max_samples=max_samples)


def serve(address: str = "127.0.0.1", port: int = 5006, demo: bool = False, show: bool = False,
          password_file=None, allow_unprotected: bool = False, max_upload_mb: float = 200,
          max_samples: int = 10_000_000):
    """Start the dashboard server and block until it is stopped (Ctrl-C).

    Parameters
    ----------
    address, port : where to listen (default: this machine only, port 5006).
    demo : open every new session with a demo recording loaded.
    show : open a browser tab.
    password_file : file whose first line is the password asked at login.
    allow_unprotected : serve a non-local address without a password anyway.
    max_upload_mb, max_samples : the largest file (megabytes) and recording (samples) a session may
        load; shown to the user on the recording page.
    """
    if not _is_local(address) and password_file is None and not allow_unprotected:
        raise LagspaceError(
            f"serving on {address} lets anyone on the network use this dashboard; "
            "give --password-file F, or --allow-unprotected to accept that")
    if not 0 <= int(port) <= 65535:
        raise LagspaceError(f"port must be between 0 and 65535, got {port}")
    limits = _limits(max_upload_mb, max_samples)
    import panel as pn

    from .app import build_app

    demo_path = default_demo() if demo else None
    if demo and demo_path is None:
        log.warning("no demo recordings found in %s; starting empty", DEMO_DIR)
    auth = {}
    if password_file is not None:
        auth = dict(basic_auth=_read_password(password_file), cookie_secret=_cookie_secret())
    elif not _is_local(address):
        print(f"lagspace: WARNING serving {address}:{port} without a password (--allow-unprotected): "
              "anyone who can reach this port can use the dashboard", flush=True)
    workers.warm_up()  # compile the engine's kernels while the first user uploads
    host = "localhost" if _is_local(address) else address
    print(f"lagspace dashboard: http://{host}:{port}/  (Ctrl-C stops it)", flush=True)
    message = max(MAX_MESSAGE, 2 * limits["max_bytes"])  # a bundle arrives base64-encoded in one message
    def session():
        return build_app(demo_path=demo_path, limits=limits)

    signal.signal(signal.SIGTERM, lambda signum, frame: sys.exit(0))  # a clean stop, as Ctrl-C gives
    try:
        pn.serve({"/": session}, address=address, port=int(port), show=show,
                 title="lagspace", websocket_origin=_origins(address, int(port)), verbose=False,
                 websocket_max_message_size=message, max_buffer_size=message, **auth)
    finally:
        workers.stop()
