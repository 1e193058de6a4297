"""Bad and hostile input files: each is refused with one line that names the problem and a fix.

The contract (DESIGN.md, "Command line"): bad input makes ``lagspace analyze`` exit 2
with exactly one ``error: ...`` line on stderr, no traceback and nothing on stdout;
uploaded files are never unpickled and never unpacked onto disk (DEVELOPERS.md, "Rules
of the house"). The same matrix runs twice: through the engine (``load_recording`` +
``prepare`` for recordings, ``read_bundle`` for bundles) and through the command line in
a subprocess (``analyze FILE --json --quick``), which needs the whole analysis chain.
"""

import contextlib
import hashlib
import io
import json
import os
import pickle
import re
import struct
import subprocess
import sys
import tracemalloc
import zipfile
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import h5netcdf
import numpy as np
import pytest
import xarray as xr
from scipy.io import wavfile

import systems
from test_fuzz import CASE_SECONDS, alarm
from engine.bundle import read_bundle
from engine.errors import BundleError, RecordingError
from engine.loading import describe_source, load_recording
from engine.preparation import prepare
from engine.recording import make_recording
from engine.settings import Settings

REPO = Path(__file__).resolve().parents[1]
# a message says what would work: it holds one of these verbs
FIX = re.compile(r"\b(give|use|save|crop|rescale|sort|open|add|fill|check|choose|record|unzip|export|raise|store)\b")

X = systems.henon(3000)  # Hénon (1976) map: a chaotic series that passes every check
T = 0.01 * np.arange(X.size)


def _csv(t, x, header="time_s,x"):
    return (header + "\n" + "\n".join(f"{float(a)!r},{float(b)!r}" for a, b in zip(t, x)) + "\n").encode()


def _column(x):
    return ("\n".join(repr(float(v)) for v in x) + "\n").encode()


def _with(values, at, value):
    out = np.array(values, dtype=float)
    out[at] = value
    return out


class Trap:
    """Unpickling this calls ``open(marker, "w")``: the marker file appears if anything unpickles it."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return (open, (self.marker, "w"))


def _pickled_npy(tmp):
    buf = io.BytesIO()
    np.save(buf, np.array([Trap(tmp / "unpickled"), 1.0], dtype=object), allow_pickle=True)
    return buf.getvalue()


def _nc(engine="h5netcdf"):
    ds = xr.Dataset({"x": ("time", X[:500], {"units": "V"})}, coords={"time": ("time", T[:500], {"units": "s"})})
    return bytes(ds.to_netcdf(engine=engine))


def _hdf5_bomb(samples):
    """A NetCDF4 file of a few kB whose variable reads back as ``samples`` floats (unwritten chunks)."""
    buf = io.BytesIO()
    with h5netcdf.File(buf, "w") as f:
        f.dimensions = {"time": samples}
        f.create_variable("x", ("time",), "f8", chunks=(100_000,), compression="gzip")
    return buf.getvalue()


def _wav(samples):
    buf = io.BytesIO()
    wavfile.write(buf, 1000, samples)  # writer: scipy.io.wavfile
    return buf.getvalue()


def _npy_header_only(shape):
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": "<f8", "fortran_order": False, "shape": shape})
    return buf.getvalue() + bytes(800)


RANDOM = bytes(np.random.default_rng(0).integers(0, 256, 4000, dtype=np.uint8))
TIME_UNEVEN = np.concatenate([T[:1000], T[1000:] + 0.5])
TIME_JITTER = T + np.random.default_rng(1).uniform(-0.004, 0.004, T.size)

# case: (file name, bytes maker taking the tmp folder, words the message must hold)
RECORDINGS = {
    "empty": ("empty.csv", lambda tmp: b"", ["empty"]),
    "blank lines": ("blank.csv", lambda tmp: b"\n \n\t\n", ["empty"]),
    "header only": ("header.csv", lambda tmp: b"time,value\n", ["header", "no data rows"]),
    "words": ("words.csv", lambda tmp: b"hello,world\nfoo,bar\n", ["no numeric column", "hello"]),
    "only comments": ("notes.txt", lambda tmp: b"# a\n# b\n% c\n" * 1000, ["only comments"]),
    **{f"random bytes {ext or '(no extension)'}": (f"random{ext}", lambda tmp: RANDOM, ["random"])
       for ext in (".csv", ".nc", ".npy", ".wav", ".zip", "")},
    "constant": ("constant.csv", lambda tmp: b"1.0\n" * 2000, ["all 2000", "equal 1"]),
    "too short": ("short.csv", lambda tmp: b"1\n2\n3\n", ["only 3 samples"]),
    "below 200 samples": ("short.csv", lambda tmp: _column(X[:150]), ["only 150 samples"]),
    "NaN inside": ("nan.csv", lambda tmp: _csv(T, _with(X, 100, np.nan)), ["missing or infinite", "100"]),
    "inf inside": ("inf.csv", lambda tmp: _csv(T, _with(X, 200, np.inf)), ["missing or infinite", "200"]),
    "overflowing text": ("big.csv", lambda tmp: b"1e400\n-1e400\n" * 1500, ["missing or infinite"]),
    "uneven time (gap)": ("gap.csv", lambda tmp: _csv(TIME_UNEVEN, X), ["gaps in time", "even sampling"]),
    "uneven time (jitter)": ("jitter.csv", lambda tmp: _csv(TIME_JITTER, X), ["deviate", "even sampling"]),
    "backwards time": ("back.csv", lambda tmp: _csv(T[::-1], X), ["backwards"]),
    "repeated time": ("repeat.csv", lambda tmp: _csv(_with(T, 1001, T[1000]), X), ["repeats", "1000"]),
    "values 1e300": ("huge.csv", lambda tmp: _column(X * 1e300), ["e+300", "overflow"]),
    "values 1e-300": ("tiny.csv", lambda tmp: _column(X * 1e-300), ["underflow"]),
    "values mixed 1e300 and 1e-300": (
        "mixed.csv", lambda tmp: _column(np.where(np.arange(X.size) % 2, 1e300, 1e-300) * X), ["overflow"]),
    "subnormal values": ("subnormal.csv", lambda tmp: _column(X * 1e-310), ["underflow"]),
    "pickled object .npy": ("evil.npy", _pickled_npy, ["python objects", "never unpickled"]),
    "raw pickle named .npy": ("evil.npy", lambda tmp: pickle.dumps(Trap(tmp / "unpickled")), [".npy"]),
    ".npy header promising 72 TiB": ("bomb.npy", lambda tmp: _npy_header_only((10**13,)), ["truncated"]),
    "truncated HDF5": ("cut4.nc", lambda tmp: _nc()[:len(_nc()) // 2], ["netcdf4"]),
    "HDF5 signature only": ("sig.nc", lambda tmp: b"\x89HDF\r\n\x1a\n" + RANDOM[:200], ["netcdf4"]),
    "truncated CDF": ("cut3.nc", lambda tmp: _nc("scipy")[:40], ["netcdf3"]),
    "CDF header only": ("cdf.nc", lambda tmp: b"CDF\x01" + RANDOM[:100], ["netcdf3"]),
    "CDF-5": ("five.nc", lambda tmp: b"CDF\x05" + RANDOM[:100], ["cdf-5"]),
    "NetCDF4 bomb (2e7 samples in 6 kB)": ("bomb.nc", lambda tmp: _hdf5_bomb(20_000_000), ["20000000 samples"]),
    ".wav of 3000 channels": ("wide.wav", lambda tmp: _wav(np.zeros((3, 3000), dtype=np.int16)),
                              ["3000 channels", "and 2980 more"]),
    "zip that is not a bundle": ("data.zip", lambda tmp: _zip({"data.csv": _column(X)}), ["zip archive"]),
    "huge header (200k columns)": (
        "wide.csv", lambda tmp: (",".join(f"c{i}" for i in range(200_000)) + "\n" + "1," * 199_999 + "1\n").encode(),
        ["line of", "characters"]),
    "huge header (one 10 MB name)": ("long.csv", lambda tmp: b"a" * 10_000_000 + b"\n1\n2\n", ["line of"]),
    "5000 columns": (
        "many.csv", lambda tmp: (",".join(f"c{i}" for i in range(5000)) + "\n" + ",".join(["1"] * 5000) + "\n").encode(),
        ["5000 columns"]),
    "date-like fields of 98k characters": ("slow.csv", lambda tmp: (b"1-" * 49_000 + b"x\n") * 20,
                                           ["no numeric column", "..."]),
    "header of 40k nested brackets": ("brackets.csv", lambda tmp: b"( " * 40_000 + b"\n" + _column(X[:150]),
                                      ["only 150 samples"]),
    "line break in the file name": ("bad\nname.csv", lambda tmp: b"", ["empty"]),
}


# -- bundles -----------------------------------------------------------------------------


def _zip(members: dict, method=zipfile.ZIP_DEFLATED) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", method) as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return buf.getvalue()


def _members() -> dict:
    """Bundle members as lagspace names them (contents need not be an analysis: the archive checks come first)."""
    nc = bytes(make_recording(X[:500], name="x", source="henon.csv").to_netcdf(engine="h5netcdf"))
    return {"recording.nc": nc, "diagnostics.nc": nc, "settings.json": Settings().to_json().encode(),
            "summary.json": b"{}", "report.html": b"<html></html>"}


def _bundle(members: dict, extra: dict | None = None, manifest: bytes | None = None) -> bytes:
    """A zip with a manifest listing ``members`` with matching hashes, plus unlisted ``extra`` members."""
    listed = {n: {"sha256": hashlib.sha256(d).hexdigest(), "bytes": len(d)} for n, d in members.items()}
    if manifest is None:
        manifest = json.dumps({"format": "lagspace-bundle", "format_version": 1, "seed": 0, "members": listed}).encode()
    return _zip({"manifest.json": manifest, **members, **(extra or {})})


def _patch_central(data: bytes, name: str, offset: int, fmt: str, value) -> bytes:
    """Overwrite one field of ``name``'s central directory entry (offsets from the entry's signature)."""
    out = bytearray(data)
    at = out.find(b"PK\x01\x02")
    while at >= 0:
        length = struct.unpack_from("<H", out, at + 28)[0]
        if out[at + 46:at + 46 + length] == name.encode():
            struct.pack_into(fmt, out, at + offset, value)
            return bytes(out)
        at = out.find(b"PK\x01\x02", at + 4)
    raise AssertionError(f"{name} not in the central directory")


def _tampered():
    members = _members()
    data = _bundle(members)
    changed = dict(members, **{"summary.json": b'{"verdict": "forged"}'})
    manifest = zipfile.ZipFile(io.BytesIO(data)).read("manifest.json")
    return _bundle(changed, manifest=manifest)


BUNDLES = {
    "member escapes with ../": (lambda: _bundle(_members(), {"../evil.sh": b"rm -rf ~"}), ["'../evil.sh'"]),
    "member with an absolute path": (lambda: _bundle(_members(), {"/tmp/evil.sh": b"x"}), ["'/tmp/evil.sh'"]),
    "member escapes with ..\\": (lambda: _bundle(_members(), {"..\\evil.sh": b"x"}), ["evil.sh"]),
    "member in a folder": (lambda: _bundle(_members(), {"a/../../recording.nc": b"x"}), ["not one lagspace writes"]),
    "zip bomb (50 MB of zeros)": (lambda: _bundle(dict(_members(), **{"report.html": bytes(50_000_000)})),
                                  ["zip bomb"]),
    "zip bomb (header claims 4 GB)": (
        lambda: _patch_central(_bundle(_members()), "report.html", 24, "<I", 0xFFFFFFF0), ["would inflate", "limit"]),
    "member longer than its header says": (
        lambda: _patch_central(_bundle(_members()), "settings.json", 24, "<I", 10), ["cannot be read"]),
    "encrypted member": (lambda: _patch_central(_bundle(_members()), "summary.json", 8, "<H", 1), ["encrypted"]),
    "unknown compression": (lambda: _patch_central(_bundle(_members()), "summary.json", 10, "<H", 99),
                            ["cannot be read"]),
    "hashes do not match": (_tampered, ["summary.json", "sha-256"]),
    "manifest nested 100000 deep": (lambda: _bundle(_members(), manifest=b"[" * 100_000), ["not valid json"]),
    "settings nested 100000 deep": (
        lambda: _bundle(dict(_members(), **{"settings.json": b'{"seed": ' + b"[" * 100_000 + b"]" * 100_000 + b"}"})),
        ["settings"]),
    "NetCDF bomb inside (6e7 numbers)": (lambda: _bundle(dict(_members(), **{"recording.nc": _hdf5_bomb(60_000_000)})),
                                         ["recording.nc", "numbers, more than the limit"]),
    "damaged NetCDF inside": (lambda: _bundle(dict(_members(), **{"diagnostics.nc": _nc()[:3000]})),
                              ["diagnostics.nc", "not readable"]),
    "no manifest": (lambda: _zip(_members()), ["zip archive"]),
}


# -- the message -------------------------------------------------------------------------


def _says(message: str, words):
    low = message.lower()
    assert len(message.splitlines()) == 1 and len(message) < 600, message
    for word in words:
        assert word.lower() in low, f"{word!r} not in {message!r}"
    assert FIX.search(low), f"no fix offered in {message!r}"


# -- through the engine -------------------------------------------------------------------


@pytest.mark.parametrize("case", sorted(RECORDINGS))
def test_recording_refused_by_engine(tmp_path, case):
    name, make, words = RECORDINGS[case]
    data = make(tmp_path)
    tracemalloc.start()
    try:
        with pytest.raises(RecordingError) as err, alarm(CASE_SECONDS):
            prepare(load_recording(data, name=name), Settings())
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    _says(str(err.value), words if "random" not in case else [])
    assert not (tmp_path / "unpickled").exists(), "the loader unpickled an upload"
    assert peak < 60e6 + 30 * len(data), f"{peak / 1e6:.0f} MB allocated for a {len(data)}-byte file"
    try:  # what the dashboard asks first: a description, or the same kind of refusal
        assert isinstance(describe_source(data, name=name), dict)
    except RecordingError as exc:
        _says(str(exc), [])


def test_trap_would_fire(tmp_path):
    # The marker check above can fail: unpickling a Trap does create its file.
    pickle.loads(pickle.dumps(Trap(tmp_path / "fired")))
    assert (tmp_path / "fired").exists()


def test_random_bytes_named_by_format():
    for ext, words in ((".csv", "not a recognised format"), (".nc", "does not start like a .nc"),
                       (".npy", "does not start like a .npy"), (".wav", "does not start like a .wav")):
        with pytest.raises(RecordingError) as err:
            load_recording(RANDOM, name=f"random{ext}")
        _says(str(err.value), [words])


@pytest.mark.parametrize("case", sorted(BUNDLES))
def test_bundle_refused_by_engine(tmp_path, case):
    make, words = BUNDLES[case]
    data = make()
    before = sorted(tmp_path.parent.iterdir())
    tracemalloc.start()
    try:
        with pytest.raises(BundleError) as err, alarm(CASE_SECONDS):
            read_bundle(data)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    if "zip archive" in words:  # not a bundle: the loader says what it is
        _says(str(err.value), [])
        with pytest.raises(RecordingError) as err:
            load_recording(data, name="bundle.zip")
    _says(str(err.value), words)
    assert sorted(tmp_path.parent.iterdir()) == before, "reading a bundle wrote files"
    assert peak < 60e6 + 30 * len(data), f"{peak / 1e6:.0f} MB allocated for a {len(data)}-byte bundle"


def test_bundle_limit_on_total_size():
    with pytest.raises(BundleError) as err:
        read_bundle(_bundle(_members()), max_inflated=1000)
    _says(str(err.value), ["would inflate", "limit"])


# -- through the command line ----------------------------------------------------------------

# Run as real processes (a Python start and the chain's imports cost about 2 s each): one case
# of each kind. Every case also goes through the same `main` in this process, which is fast.
SUBPROCESS = ["empty", "values 1e300", "pickled object .npy", "truncated HDF5", "huge header (200k columns)",
              "member escapes with ../", "zip bomb (50 MB of zeros)", "line break in the file name"]


def _case_file(case, folder: Path) -> tuple[Path, list]:
    if case in RECORDINGS:
        name, make, words = RECORDINGS[case]
        data = make(folder)
    else:
        (make, words), name = BUNDLES[case], "bundle.zip"
        data = make()
    (folder / name).write_bytes(data)
    return folder / name, words if "random" not in case else []


def _one_error_line(code, stdout, stderr, path, words):
    assert code == 2, (code, stderr[-2000:])
    assert stdout == ""
    assert "Traceback" not in stderr
    lines = stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), stderr[-2000:]
    _says(lines[0], words)
    assert [p.name for p in path.parent.iterdir()] == [path.name], "the command line unpickled or unpacked files"


@pytest.fixture(scope="module")
def processes(tmp_path_factory):
    """The SUBPROCESS cases run as `python -m engine.cli analyze FILE --json --quick`, two at a time."""
    pytest.importorskip("engine.analysis", exc_type=ImportError)  # the CLI imports the whole chain
    files = {case: _case_file(case, tmp_path_factory.mktemp("cli")) for case in SUBPROCESS}

    def run(path):
        return subprocess.run([sys.executable, "-m", "engine.cli", "analyze", str(path), "--json", "--quick"],
                              capture_output=True, text=True, timeout=300, cwd=path.parent,
                              env={**os.environ, "PYTHONPATH": str(REPO)})

    with ThreadPoolExecutor(2) as pool:
        done = dict(zip(files, pool.map(run, [path for path, _ in files.values()])))
    return {case: (done[case], *files[case]) for case in files}


@pytest.mark.parametrize("case", SUBPROCESS)
def test_cli_process_exits_2_with_one_line(processes, case):
    out, path, words = processes[case]
    _one_error_line(out.returncode, out.stdout, out.stderr, path, words)


@pytest.mark.parametrize("case", sorted(RECORDINGS) + sorted(BUNDLES))
def test_cli_main_exits_2_with_one_line(tmp_path, case):
    pytest.importorskip("engine.analysis", exc_type=ImportError)
    from engine.cli import main

    path, words = _case_file(case, tmp_path)
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), alarm(CASE_SECONDS):
        code = main(["analyze", str(path), "--json", "--quick"])
    _one_error_line(code, out.getvalue(), err.getvalue(), path, words)


def test_subprocess_cases_exist():
    assert set(SUBPROCESS) <= set(RECORDINGS) | set(BUNDLES)


def test_bundle_written_with_the_users_umask(tmp_path):
    # Common practice: files a tool writes get the permissions the umask allows (0644 under umask 022),
    # so colleagues on the shared machine can read a bundle; a private temporary file's 0600 must not stay.
    from engine.bundle import write_bundle_bytes

    old = os.umask(0o022)
    try:
        path = write_bundle_bytes(_bundle(_members()), tmp_path / "out.zip")
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == 0o644
    assert [p.name for p in tmp_path.iterdir()] == ["out.zip"]
