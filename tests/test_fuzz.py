"""Fuzzing the loaders and the bundle reader with hypothesis.

Property (the engine's error contract, DEVELOPERS.md "Errors"): whatever the
bytes, ``load_recording`` (then ``prepare``) returns a valid Recording -- one
variable on a finite, float ``time`` coordinate -- or raises a ``LagspaceError``
whose message is one line; ``read_bundle`` returns an Analysis or raises a
``BundleError``. Never another exception type, never a hang (each case runs
under an alarm). Every test prints how many cases it ran and checks that
hypothesis ran at least ``max_examples`` of them. Runs are derandomized, so CI
sees the same cases each time.
"""

import contextlib
import hashlib
import io
import json
import signal
import warnings
import zipfile

import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings, strategies as st
from scipy.io import wavfile

import systems
from engine.bundle import read_bundle
from engine.errors import BundleError, LagspaceError
from engine.loading import load_recording
from engine.preparation import prepare
from engine.recording import make_recording
from engine.settings import Settings

pytestmark = pytest.mark.filterwarnings("error::pytest.PytestUnraisableExceptionWarning")  # noise on stderr
CASE_SECONDS = 20  # one case taking longer than this counts as a hang
NC4_SECONDS = 8  # the loader's limit for reading a NetCDF4 file (in a child process), well below CASE_SECONDS
EXTENSIONS = [".csv", ".txt", ".tsv", ".dat", ".nc", ".npy", ".wav", ".zip", ""]
MAGIC = [b"", b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n", b"\x93NUMPY\x01\x00",
         b"\x93NUMPY\x02\x00", b"\x93NUMPY\x03\x00", b"RIFF\x00\x10\x00\x00WAVEfmt ", b"PK\x03\x04",
         b"\xff\xfe", b"\xef\xbb\xbf"]


def _fuzz(name, strategy, check, max_examples):
    """Run ``check`` on ``max_examples`` cases drawn from ``strategy``; print and check the count.

    ``check`` returns True when the case gave a valid result (False: a clean refusal).
    Returns the number of valid results.
    """
    count = valid = 0

    @settings(max_examples=max_examples, deadline=None, derandomize=True, database=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                     HealthCheck.filter_too_much])
    @given(strategy)
    def case(value):
        nonlocal count, valid
        count += 1
        with alarm(CASE_SECONDS), warnings.catch_warnings():
            warnings.simplefilter("ignore")  # warnings are not the property; the CLI tests check stderr
            valid += bool(check(value))

    case()
    print(f"\n[fuzz] {name}: {count} cases, {valid} valid, {count - valid} refused with one line")
    assert count >= max_examples
    return valid


@contextlib.contextmanager
def alarm(seconds):
    """Raise TimeoutError in the main thread when the block runs longer than ``seconds``."""
    def hang(signum, frame):
        raise TimeoutError(f"one case ran longer than {seconds} s")

    old = signal.signal(signal.SIGALRM, hang)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def _one_line(exc):
    text = str(exc)
    assert text and len(text.splitlines()) == 1, repr(text)
    assert "Traceback" not in text


def _valid_recording(rec):
    assert isinstance(rec, xr.Dataset) and len(rec.data_vars) == 1 and "time" in rec.coords
    time = rec["time"].values
    assert time.dtype.kind == "f" and time.ndim == 1 and np.isfinite(time).all()
    assert rec[list(rec.data_vars)[0]].dims == ("time",)


def load_and_prepare(data, name, variable=None):
    """The property: a valid (prepared) Recording, or one LagspaceError line."""
    try:
        rec = load_recording(data, name=name, variable=variable, netcdf4_timeout=NC4_SECONDS)
        _valid_recording(rec)
        _valid_recording(prepare(rec, Settings()))
    except LagspaceError as exc:
        _one_line(exc)
        return False
    return True


# -- valid files to mutate ----------------------------------------------------------------

X = systems.henon(300)  # Hénon (1976) map, a short chaotic series
T = 0.01 * np.arange(X.size)


def _netcdf(engine, **encoding):
    ds = xr.Dataset({"x": ("time", X, {"units": "V"})}, coords={"time": ("time", T, {"units": "s"})})
    return bytes(ds.to_netcdf(engine=engine, encoding={"x": encoding} if encoding else None))


def _npy(array):
    buf = io.BytesIO()
    np.save(buf, array)
    return buf.getvalue()


def _wav():
    buf = io.BytesIO()
    wavfile.write(buf, 1000, (X * 10000).astype(np.int16))
    return buf.getvalue()


VALID = {
    "nc3.nc": _netcdf("scipy"),
    "nc4.nc": _netcdf("h5netcdf"),
    "nc4z.nc": _netcdf("h5netcdf", zlib=True, complevel=4, chunksizes=(64,)),
    "one.npy": _npy(X),
    "two.npy": _npy(np.column_stack([T, X])),
    "mic.wav": _wav(),
}


@st.composite
def mutations(draw, data: bytes):
    """``data`` with a few bytes overwritten, a slice removed or repeated, and/or truncated."""
    out = bytearray(data)
    for _ in range(draw(st.integers(0, 6))):
        kind = draw(st.sampled_from(["flip", "cut", "repeat", "truncate", "insert"]))
        if not out:
            break
        at = draw(st.integers(0, len(out) - 1))
        if kind == "flip":
            out[at] = draw(st.integers(0, 255))
        elif kind == "cut":
            del out[at:at + draw(st.integers(1, 64))]
        elif kind == "repeat":
            out[at:at] = out[at:at + draw(st.integers(1, 64))]
        elif kind == "insert":
            out[at:at] = draw(st.binary(min_size=1, max_size=16))
        else:
            del out[at:]
    return bytes(out)


# -- the loaders ---------------------------------------------------------------------------


def test_arbitrary_bytes_with_each_extension():
    strategy = st.tuples(st.sampled_from(MAGIC), st.binary(max_size=2000), st.sampled_from(EXTENSIONS))
    _fuzz("load_recording(arbitrary bytes)", strategy,
          lambda v: load_and_prepare(v[0] + v[1], "fuzz" + v[2]), 400)


@st.composite
def text_tables(draw):
    """CSV-like text: random separators, headers, number formats, times, blanks, comments and junk."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    rows = draw(st.sampled_from([0, 3, 199, 200, 600, 600, 1200, 1200]))
    columns = draw(st.sampled_from([1, 1, 1, 2, 4]))
    sep = draw(st.sampled_from([",", ",", ";", "\t", " ", "  ", ", ", "|"]))
    decimal_comma = sep != "," and draw(st.booleans())
    scale = draw(st.sampled_from([1.0, 1.0, 1.0, 1e-300, 1e300, 1e-120, 1e120, 1e6]))
    values = rng.standard_normal((rows, columns)) * scale
    special = draw(st.sampled_from([None, None, None, None, np.nan, np.inf, -np.inf, 0.0]))
    if special is not None and rows:
        values.flat[rng.integers(0, values.size, 1 + values.size // 100)] = special
    time = draw(st.sampled_from(["none", "even", "even", "even", "uneven", "backwards", "repeated", "dates", "index"]))
    step = draw(st.sampled_from([0.01, 1.0, 1e-9, 1e9, 1e300]))
    t = step * np.arange(rows, dtype=float)
    if time == "uneven":
        t = np.cumsum(rng.exponential(step, rows))
    elif time == "backwards":
        t = t[::-1]
    elif time == "repeated" and rows > 2:
        t[rows // 2] = t[rows // 2 - 1]
    fmt = draw(st.sampled_from(["{!r}", "{!r}", "{:.3g}", "{:.6e}", "{:.0f}", "{:+.4f}"]))
    time_fmt = draw(st.sampled_from(["{!r}", "{!r}", "{:.6g}"]))

    def number(v, fmt=fmt):
        s = fmt.format(float(v))
        return s.replace(".", ",") if decimal_comma else s

    names = [draw(st.sampled_from(["x", "strain [ue]", "temp (K)", "v_mV", "T", "", "a,b", "\"q\"",
                                   "time", "nan", "1.5", "a\x0bb", "x\u2028y"])) for _ in range(columns)]
    lines = []
    if draw(st.booleans()):
        lines.append("# " + draw(st.text(max_size=30)).replace("\n", " "))
    if draw(st.booleans()):
        head = ([] if time == "none" else [draw(st.sampled_from(["time", "t", "time_s", "time [ms]", "index"]))])
        lines.append(sep.join(head + names))
        if draw(st.booleans()):
            lines.append(sep.join(["s"] * (len(head) + columns)))
    for i in range(rows):
        cells = [number(v) for v in values[i]]
        if time == "dates":
            cells.insert(0, str(np.datetime64("2024-01-01T00:00:00") + np.timedelta64(i, "s")))
        elif time == "index":
            cells.insert(0, str(i))
        elif time != "none":
            cells.insert(0, number(t[i], time_fmt))
        lines.append(sep.join(cells))
    for _ in range(draw(st.sampled_from([0, 0, 0, 1, 3]))):  # junk: a ragged row, a word, a blank line, a comment
        junk = draw(st.sampled_from(["", "oops", "1" + sep + "2" + sep + "3" + sep + "4" + sep + "5",
                                     "% note", sep * 3, "1e400", "-", "\x00", "\ufeff1"])
                    | st.text(alphabet="()[]-1:. x", min_size=1, max_size=6).map(lambda s: s * 8000))  # long fields
        lines.insert(draw(st.integers(0, len(lines))), junk)
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-16", "cp1252"]))
    variable = None if columns == 1 else draw(st.sampled_from([None, 0, 1, 2, "x", "column_1"]))
    return (newline.join(lines) + newline).encode(encoding, errors="replace"), variable


def test_structured_text_tables():
    valid = _fuzz("load_recording(CSV-like text)", st.tuples(text_tables(), st.sampled_from([".csv", ".txt", ""])),
                  lambda v: load_and_prepare(v[0][0], "table" + v[1], v[0][1]), 300)
    assert valid > 0  # the generator also reaches well-formed tables


@pytest.mark.parametrize("name", sorted(VALID))
def test_mutated_valid_files(name):
    # A mutated NetCDF4 file once held a CI run inside the HDF5 library for over 20 minutes: the loader
    # reads NetCDF4 in a child process with a time limit, so a hang is one clean RecordingError. Each
    # case that gets past the header check starts a Python process (about a second), hence fewer of them.
    assert load_and_prepare(VALID[name], name, variable=1 if name == "two.npy" else None)  # unmutated: loads
    _fuzz(f"load_recording(mutated {name})", mutations(VALID[name]),
          lambda data: load_and_prepare(data, name), 100 if name.startswith("nc4") else 150)


@st.composite
def recordings_and_settings(draw):
    """A Recording with odd values or times (NaN runs, gaps, jitter, huge or tiny steps) and odd preparation."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    n = draw(st.sampled_from([150, 300, 2500, 2500, 2500]))
    x = systems.henon(n) * draw(st.sampled_from([1.0, 1.0, 1e-120, 1e120]))
    for _ in range(draw(st.sampled_from([0, 0, 0, 1, 3]))):  # runs of missing samples, some at the edges
        at = int(rng.integers(0, n))
        x[at:at + draw(st.integers(1, 6))] = draw(st.sampled_from([np.nan, np.inf]))
    t = np.arange(n) * draw(st.sampled_from([1.0, 0.01, 0.01, 1e-9, 1e-200, 1e200]))
    kind = draw(st.sampled_from(["even", "even", "even", "jitter", "gap", "wide"]))
    if kind == "jitter":
        t = t + rng.uniform(-0.3, 0.3, n) * (t[1] - t[0])
    elif kind == "gap":
        t[n // 2:] += 10 * (t[1] - t[0])
    elif kind == "wide":
        t = np.linspace(-1.0, 1.0, n) * 1.7e308  # its span overflows
    rec = make_recording(x, t, name="x", time_unit="s")
    options = {"sampling_interval": draw(st.sampled_from([None, None, None, 0.01, 1e-320, 1e300])),
               "fill_gaps": draw(st.booleans()), "max_gap": draw(st.integers(1, 5)), "resample": draw(st.booleans()),
               "crop_start": draw(st.sampled_from([None, None, None, float(t[n // 10]), -1.0, 1e308])),
               "crop_stop": draw(st.sampled_from([None, None, None, float(t[-1]), float(t[n // 10 + 10])])),
               "detrend": draw(st.sampled_from(["none", "mean", "linear"])), "standardise": draw(st.booleans())}
    return rec, options


def prepare_property(case):
    rec, options = case
    try:
        _valid_recording(prepare(rec, Settings(**options)))
    except LagspaceError as exc:
        _one_line(exc)
        return False
    return True


def test_prepare_with_odd_times_and_settings():
    valid = _fuzz("prepare(odd recordings, odd settings)", recordings_and_settings(), prepare_property, 300)
    assert valid > 0


# -- the bundle reader -------------------------------------------------------------------


def read_bundle_property(data):
    try:
        analysis = read_bundle(data)
    except BundleError as exc:
        _one_line(exc)
        return False
    _valid_recording(analysis.recording)
    _valid_recording(analysis.prepared)
    json.dumps(analysis.summary, allow_nan=False)
    return True


BUNDLE_NAMES = ["manifest.json", "recording.nc", "diagnostics.nc", "results.nc", "settings.json",
                "summary.json", "report.html"]
HOSTILE_NAMES = ["../manifest.json", "/etc/passwd", "a/../../b", "x.nc", "manifest.json/", "C:\\evil",
                 "./recording.nc", "RECORDING.NC"]
SETTING_NAMES = sorted(Settings().to_dict()) + ["unknown", "two\nlines", "form\x0cfeed"]
JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-2**70, 2**70) | st.floats() | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4),
    max_leaves=12,
)


@st.composite
def member_contents(draw, name):
    if name == "settings.json":  # a settings object with odd values, or any JSON
        value = draw(st.dictionaries(st.sampled_from(SETTING_NAMES), JSON_VALUES, max_size=5) | JSON_VALUES)
        return json.dumps(value).encode()
    if name.endswith(".json") and draw(st.booleans()):
        return json.dumps(draw(JSON_VALUES)).encode()
    if name.endswith(".nc") and draw(st.booleans()):
        return draw(mutations(VALID["nc4.nc"]))
    return draw(st.binary(max_size=300))


@st.composite
def random_zips(draw):
    """Zips with bundle-like or hostile member names, random contents, and often a manifest whose hashes match."""
    names = [name for name in BUNDLE_NAMES[1:] if draw(st.integers(0, 9))]  # each member 9 times in 10
    if not draw(st.integers(0, 3)):
        extra = draw(st.sampled_from(BUNDLE_NAMES) | st.sampled_from(HOSTILE_NAMES) | st.text(min_size=1, max_size=12))
        names.insert(draw(st.integers(0, len(names))), extra)
    members = [(name, draw(member_contents(name))) for name in names]
    manifest_kind = draw(st.sampled_from(["matching", "matching", "matching", "random", "none"]))
    if manifest_kind == "matching":
        listed = {n: {"sha256": hashlib.sha256(c).hexdigest(), "bytes": len(c)} for n, c in members}
        manifest = {"format": "lagspace-bundle", "format_version": draw(st.sampled_from([1, 1, 1, 2, "1", None])),
                    "members": listed}
        members.insert(draw(st.integers(0, len(members))), ("manifest.json", json.dumps(manifest).encode()))
    elif manifest_kind == "random":
        members.append(("manifest.json", draw(member_contents("manifest.json"))))
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", draw(st.sampled_from([zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED]))) as zf:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # duplicate names are part of the fuzz
            for name, content in members:
                try:
                    zf.writestr(name, content)
                except (ValueError, OSError, IndexError):
                    pass  # names zipfile itself will not write
    return draw(mutations(buf.getvalue())) if draw(st.booleans()) else buf.getvalue()


def test_random_zips():
    _fuzz("read_bundle(random zips)", random_zips(), read_bundle_property, 300)


def _rezip(members: dict) -> bytes:
    """A bundle of ``members`` with a manifest whose hashes match (what a careful forger would write)."""
    manifest = {"format": "lagspace-bundle", "format_version": 1, "seed": 0,
                "members": {n: {"sha256": hashlib.sha256(d).hexdigest(), "bytes": len(d)} for n, d in members.items()}}
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("manifest.json", json.dumps(manifest))
        for name, data in members.items():
            zf.writestr(name, data)
    return buf.getvalue()


@pytest.fixture(scope="module")
def valid_bundle():
    analysis = pytest.importorskip("engine.analysis", exc_type=ImportError)  # needs the whole chain
    from engine.bundle import bundle_bytes

    rec = make_recording(systems.henon(1500), name="x", source="henon.csv")
    result = analysis.estimate_parameters(rec, Settings(max_dimension=5))
    return bundle_bytes(result)


def test_mutated_valid_bundle_bytes(valid_bundle):
    assert read_bundle_property(valid_bundle)
    _fuzz("read_bundle(mutated bundle bytes)", mutations(valid_bundle), read_bundle_property, 150)


def test_forged_bundle_members(valid_bundle):
    """One member changed and the manifest rewritten to match, so the reader parses the forgery:
    bytes mutated, or the JSON attributes of a NetCDF member replaced by other JSON."""
    with zipfile.ZipFile(io.BytesIO(valid_bundle)) as zf:
        members = {n: zf.read(n) for n in zf.namelist() if n != "manifest.json"}
    datasets = {n: xr.open_dataset(io.BytesIO(d), engine="h5netcdf").load() for n, d in members.items()
                if n.endswith(".nc")}

    @st.composite
    def forged(draw):
        name = draw(st.sampled_from(sorted(members)))
        changed = dict(members)
        if name in datasets and draw(st.booleans()):
            ds = datasets[name].copy()
            ds.attrs = dict(ds.attrs)
            for key in draw(st.lists(st.sampled_from(sorted(ds.attrs)), min_size=1, max_size=3)):
                ds.attrs[key] = json.dumps(draw(JSON_VALUES)) if draw(st.booleans()) else draw(
                    st.sampled_from([1e308, -1, 0, "x", 2**62]))
            changed[name] = bytes(ds.to_netcdf(engine="h5netcdf"))
        else:
            changed[name] = draw(mutations(members[name]))
        return _rezip(changed)

    _fuzz("read_bundle(forged members, matching hashes)", forged(), read_bundle_property, 120)
