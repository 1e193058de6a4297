"""The server's guards and the session builder, without a browser."""

import os
import subprocess
import sys
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from engine.errors import LagspaceError

import served
from dashboard import server

ROOT = Path(__file__).resolve().parent.parent


def test_non_local_address_needs_a_password():
    with pytest.raises(LagspaceError, match="password"):
        server.serve(address="0.0.0.0", port=0)


def test_short_or_missing_password_file_is_refused(tmp_path):
    short = tmp_path / "pw"
    short.write_text("abc\n")
    with pytest.raises(LagspaceError, match="shorter than 8"):
        server.serve(address="0.0.0.0", port=0, password_file=short)
    with pytest.raises(LagspaceError, match="cannot read"):
        server.serve(port=0, password_file=tmp_path / "missing")


def test_bad_port_is_refused():
    with pytest.raises(LagspaceError, match="port"):
        server.serve(port=70000)


def test_loopback_addresses_are_local():
    assert server._is_local("127.0.0.1") and server._is_local("localhost") and server._is_local("::1")
    assert not server._is_local("0.0.0.0") and not server._is_local("192.168.1.20")


def test_demo_files_are_recordings_shipped_with_the_package():
    files = server.demo_files()
    assert all(p.parent == ROOT / "demo_data" and p.suffix in server.DEMO_SUFFIXES for p in files)
    if files:
        assert server.default_demo() in files


def test_each_session_gets_its_own_state():
    from dashboard.app import build_app

    a, b = build_app(), build_app()
    assert list(a.main[1]._names) == ["1 · Recording", "2 · Delay & dimension", "3 · Invariants"]
    assert a.session_state is not b.session_state
    a.session_state.change_settings(surrogates=19)
    assert b.session_state.settings.surrogates != 19


def test_password_file_puts_a_login_in_front(tmp_path):
    pw = tmp_path / "password"
    pw.write_text("correct horse battery\n")
    env = dict(os.environ, XDG_CONFIG_HOME=str(tmp_path))
    with served.dashboard(tmp_path / "server.log", seconds=60, env=env, password_file=str(pw)) as url:
        try:
            page = urllib.request.urlopen(url, timeout=10)
        except urllib.error.HTTPError as exc:
            page = exc
        assert "/login" in page.geturl() or "password" in page.read().decode().lower()
        assert (tmp_path / "lagspace" / "cookie_secret").stat().st_mode & 0o777 == 0o600


@pytest.mark.parametrize("options, words", [({"max_upload_mb": 0}, "--max-upload-mb"),
                                            ({"max_upload_mb": float("nan")}, "--max-upload-mb"),
                                            ({"max_samples": -5}, "--max-samples"),
                                            ({"max_samples": 2.5}, "--max-samples")])
def test_bad_limits_are_refused(options, words):
    with pytest.raises(LagspaceError, match=words):
        server.serve(port=0, **options)


def test_limits_options_reach_the_session():
    from engine.cli import _parser

    args = _parser().parse_args(["serve", "--max-upload-mb", "1.5", "--max-samples", "5000"])
    assert server._limits(args.max_upload_mb, args.max_samples) == {"max_bytes": 1_500_000, "max_samples": 5000}
    from dashboard.app import build_app

    assert build_app(limits={"max_bytes": 1_500_000, "max_samples": 5000}).session_state.limits["max_samples"] == 5000


def test_cookie_secret_is_kept_private_and_reused(tmp_path, monkeypatch):
    """Logins survive a restart only if the cookie secret does; nobody else may read it (common practice)."""
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path))
    first = server._cookie_secret()
    path = server.cookie_secret_path()
    assert path.parent == tmp_path / "lagspace"
    assert path.stat().st_mode & 0o777 == 0o600 and len(first) == 64
    assert server._cookie_secret() == first
    path.chmod(0o644)  # readable by others: it may have leaked, so a new one is made
    second = server._cookie_secret()
    assert second != first and path.stat().st_mode & 0o777 == 0o600
    path.write_text("short\n")
    assert server._cookie_secret() not in ("short", second)


def test_unprotected_network_address_is_announced(tmp_path):
    """--allow-unprotected serves a network address but says so before the URL."""
    port = served.free_port()
    proc = subprocess.Popen([sys.executable, "-m", "engine.cli", "serve", "--address", "0.0.0.0",
                             "--port", str(port), "--allow-unprotected"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        lines = [proc.stdout.readline() for _ in range(2)]
    finally:
        proc.terminate()
        proc.wait(10)
    assert "without a password" in lines[0] and "--allow-unprotected" in lines[0], lines
    assert f":{port}/" in lines[1], lines


def test_ended_session_lets_go_of_its_data():
    """Bokeh calls a document's session-destroyed callbacks when its browser tab goes; the session's
    recording and results must go with it (issue 6: nothing kept for a session that ended)."""
    from bokeh.document import Document
    from panel.io.state import set_curdoc

    import systems
    from dashboard.app import build_app

    doc = Document()
    with set_curdoc(doc):
        app = build_app()
    state = app.session_state
    x = systems.lorenz(1000, dt=0.01)
    assert state.load_bytes("\n".join(f"{v:.9g}" for v in x).encode(), "x.csv") and state.raw is not None
    callbacks = list(doc.session_destroyed_callbacks)
    assert callbacks, "build_app registered nothing for the end of the session"
    for callback in callbacks:
        callback(None)
    assert state.raw is None and state.prepared is None and state._data is None and state._cancel.is_set()


def test_pages_rendered_in_a_document_survive_plots_coming_and_going():
    """Rendered pages (as in a served session) must take diagnostics appearing and disappearing.
    Panel 1.9.4 fails when a drawn HoloViews pane is hidden (TypeError: Bokeh stylesheets copied into
    a str list); that once aborted the page update after a refused file or a bundle."""
    from bokeh.document import Document
    from panel.io.state import set_curdoc

    import systems
    from dashboard.app import build_app

    doc = Document()
    x = systems.lorenz(3000, dt=0.01)
    good = ("time_s,x_V\n" + "\n".join(f"{0.01 * i:.2f},{v:.9g}" for i, v in enumerate(x))).encode()
    with set_curdoc(doc):
        app = build_app()
        app.server_doc(doc)
        state = app.session_state
        assert state.load_bytes(good, "x.csv") and state.estimate(), state.error
        bundle = state.bundle_bytes()
        gap = ("time_s,x_V\n" + "\n".join(f"{0.01 * i + 0.5 * (i >= 1000):.2f},{v:.9g}"  # uneven time:
                                            for i, v in enumerate(x))).encode()  # refused until resampled
        assert state.load_bytes(gap, "gap.csv"), state.error                    # the plots go
        assert state.diagnostics is None and state.refusals and state.error == ""
        assert state.open_bundle(bundle, "x-lagspace.zip"), state.error         # and come back
        assert state.diagnostics is not None and state.error == ""


def test_figures_of_a_page_wait_until_it_is_opened():
    """A page draws its figures only while it is the open tab (each draw costs the server's event
    loop, which every session shares); the draws asked for meanwhile happen when it opens."""
    import systems
    from dashboard.app import build_app

    app = build_app()
    tabs, state = app.main[1], app.session_state
    recording, embedding, invariants = app.pages
    assert recording.shown and not embedding.shown and not invariants.shown
    x = systems.lorenz(2000, dt=0.01)
    assert state.load_bytes("\n".join(f"{v:.9g}" for v in x).encode(), "x.csv") and state.estimate(), state.error
    assert state.change_settings(surrogates=0) and state.run_analysis(), state.error
    assert embedding._delay_plot.object is None and invariants._plots["slopes"].object is None
    assert invariants._table.object  # the numbers are there at once; only figures wait
    tabs.active = 2
    assert invariants.shown and not recording.shown
    assert all(pane.object is not None for pane in invariants._plots.values())
    assert embedding._delay_plot.object is None
    tabs.active = 1
    assert embedding._delay_plot.object is not None and embedding._space_time.object is not None
