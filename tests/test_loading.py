"""Loading: every format, written by the reference libraries that define it, reads back exactly.

The outside references are the writers themselves (xarray's h5netcdf and scipy
NetCDF engines, numpy.save, scipy.io.wavfile, pandas.DataFrame.to_csv) and
hashlib for the SHA-256.
"""

import hashlib
import io
import json
import os
import pickle
import tempfile

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy.io import wavfile

from engine.errors import LagspaceError, RecordingError
from engine import loading
from engine.loading import describe_source, load_recording
from engine.recording import sampling_interval, signal, time_unit, variable_name

from systems import lorenz, sine, white_noise

N = 2000


def one_line(exc_info):
    msg = str(exc_info.value)
    assert "\n" not in msg and msg
    return msg


@pytest.fixture(scope="module")
def x():
    return np.asarray(lorenz(N))


# -- text ------------------------------------------------------------------------


def test_csv_with_header_and_time(tmp_path, x):
    t = 0.01 * np.arange(N)
    path = tmp_path / "rig.csv"
    pd.DataFrame({"time [s]": t, "strain [ue]": x}).to_csv(path, index=False)  # writer: pandas
    rec = load_recording(path)
    name = variable_name(rec)
    assert name == "strain" and rec[name].attrs["units"] == "ue"
    np.testing.assert_allclose(signal(rec), x, rtol=1e-14)
    np.testing.assert_allclose(rec["time"].values, t, rtol=1e-14)
    assert time_unit(rec) == "s" and sampling_interval(rec) == pytest.approx(0.01)
    assert rec.attrs["source"] == "rig.csv"
    # the hash is of the file's bytes (reference: hashlib)
    assert rec.attrs["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert isinstance(json.loads(rec.attrs["checks"]), list)


def test_csv_without_header_or_time(x):
    data = "\n".join(f"{v:.17g}" for v in x).encode()
    rec = load_recording(data, name="plain.txt")
    np.testing.assert_array_equal(signal(rec), x)
    assert time_unit(rec) == "sample" and sampling_interval(rec) == 1.0
    np.testing.assert_array_equal(rec["time"].values, np.arange(N))


def test_sampling_interval_sets_seconds(x):
    data = "\n".join(f"{v:.17g}" for v in x).encode()
    rec = load_recording(data, name="plain.txt", sampling_interval=0.002)
    assert time_unit(rec) == "s" and sampling_interval(rec) == 0.002
    np.testing.assert_allclose(rec["time"].values, 0.002 * np.arange(N))


def test_tsv_and_units_in_parentheses(x):
    frame = pd.DataFrame({"t (ms)": 5.0 * np.arange(N), "temp (K)": 300 + x, "pressure (Pa)": 2 * x})
    data = frame.to_csv(sep="\t", index=False).encode()
    info = describe_source(data, name="loop.tsv")
    assert info["variables"] == ["temp", "pressure"] and info["needs_variable"]
    assert info["time_columns"] == ["t (ms)"]
    with pytest.raises(RecordingError) as err:
        load_recording(data, name="loop.tsv")
    assert "temp" in one_line(err) and "pressure" in str(err.value)
    rec = load_recording(data, name="loop.tsv", variable="temp")
    assert rec["temp"].attrs["units"] == "K"
    np.testing.assert_allclose(signal(rec), 300 + x, rtol=1e-14)
    # milliseconds become seconds
    assert time_unit(rec) == "s" and sampling_interval(rec) == pytest.approx(0.005)
    by_index = load_recording(data, name="loop.tsv", variable=2)  # file column 2
    np.testing.assert_allclose(signal(by_index), 2 * x, rtol=1e-14)


def test_whitespace_semicolon_and_decimal_comma(x):
    lines = ["time [s]  strain [ue]"] + [f"{0.1 * k:.1f}   {v:.6f}" for k, v in enumerate(x)]
    rec = load_recording("\n".join(lines).encode(), name="rig.dat")
    assert variable_name(rec) == "strain" and rec["strain"].attrs["units"] == "ue"
    np.testing.assert_allclose(signal(rec), x, atol=1e-6)
    european = ["Zeit;Wert"] + [f"{k};{v:.6f}".replace(".", ",") for k, v in enumerate(x)]
    rec = load_recording("\n".join(european).encode(), name="messung.csv")
    np.testing.assert_allclose(signal(rec), x, atol=1e-6)


def test_windows_line_endings_comments_trailing_column(x):
    body = "# logged by the rig\r\ntime,value,\r\n" + "".join(f"{k},{v:.17g},\r\n" for k, v in enumerate(x[:600]))
    rec = load_recording(body.encode(), name="win.csv")
    assert list(rec.data_vars) == ["value"]
    np.testing.assert_array_equal(signal(rec), x[:600])


def test_datetime_time_column(x):
    stamps = pd.date_range("2024-03-01 12:00:00", periods=600, freq="250ms")  # reference: pandas
    frame = pd.DataFrame({"timestamp": stamps.strftime("%Y-%m-%d %H:%M:%S.%f"), "level": x[:600]})
    rec = load_recording(frame.to_csv(index=False).encode(), name="log.csv")
    assert time_unit(rec) == "s"
    np.testing.assert_allclose(rec["time"].values, 0.25 * np.arange(600), atol=1e-9)


def test_day_first_dotted_dates_in_a_semicolon_file(tmp_path):
    # Open data shipped in statsmodels: weekly Mauna Loa CO2 (1958-2001, with missing weeks), written as a
    # European logger would: day-first dotted dates, semicolons, decimal commas. Weekly stamps are 7 days
    # = 604800 s apart (calendar arithmetic).
    from statsmodels.datasets import co2

    data = co2.load_pandas().data.iloc[:600]
    lines = ["Datum;CO2 [ppm]"] + [f"{d:%d.%m.%Y};{'' if np.isnan(v) else f'{v:.1f}'.replace('.', ',')}"
                                   for d, v in zip(data.index, data["co2"])]
    rec = load_recording("\n".join(lines).encode(), name="co2.csv")
    assert time_unit(rec) == "s" and rec["CO2"].attrs["units"] == "ppm"
    np.testing.assert_array_equal(np.diff(rec["time"].values), 604800.0)
    np.testing.assert_allclose(signal(rec), data["co2"].to_numpy(), atol=1e-9)


def test_names_then_units_rows():
    rows = "time,temp\ns,K\n" + "".join(f"{k},{300 + k % 7}\n" for k in range(600))
    rec = load_recording(rows.encode(), name="two_headers.csv")
    assert rec["temp"].attrs["units"] == "K" and time_unit(rec) == "s"


def test_yearly_column_gives_years(tmp_path):
    # Open data shipped in statsmodels: yearly sunspot numbers 1700-2008 in columns YEAR, SUNACTIVITY.
    from statsmodels.datasets import sunspots

    path = tmp_path / "sunspots.csv"
    sunspots.load_pandas().data.to_csv(path, index=False)
    rec = load_recording(path)
    assert variable_name(rec) == "SUNACTIVITY" and rec.sizes["time"] == 309
    # a year has no fixed length in seconds: it stays the time unit, one sample per year
    assert time_unit(rec) == "year" and sampling_interval(rec) == 1.0
    assert rec["time"].values[0] == 1700.0 and signal(rec)[0] == 5.0


def test_first_column_increasing_is_time():
    t = np.cumsum(np.full(600, 0.5))
    data = "\n".join(f"{a},{b}" for a, b in zip(t, white_noise(600))).encode()
    info = describe_source(data, name="two.csv")
    assert info["time_columns"] == ["column_0"] and info["variables"] == ["column_1"]
    np.testing.assert_array_equal(load_recording(data, name="two.csv")["time"].values, t)
    chosen = load_recording(data, name="two.csv", time_column=None, variable="column_1")
    assert variable_name(chosen) == "column_1"


# -- binary formats ------------------------------------------------------------------


@pytest.mark.parametrize("engine, magic", [("h5netcdf", b"\x89HDF"), ("scipy", b"CDF")])
def test_netcdf_both_kinds(tmp_path, x, engine, magic):
    ds = xr.Dataset(
        {"temperature": ("time", 300 + x, {"units": "K", "long_name": "loop temperature"}),
         "heater": ("time", np.ones(N), {"units": "W"}),
         "map": (("time", "probe"), np.zeros((N, 3)))},
        coords={"time": ("time", 0.1 * np.arange(N), {"units": "s"})},
    )
    path = tmp_path / f"loop_{engine}.nc"
    ds.to_netcdf(path, engine=engine)  # writer: xarray
    assert path.read_bytes().startswith(magic)  # NetCDF4 is HDF5 inside; NetCDF3 is classic
    info = describe_source(path)
    assert info == {"format": "netcdf", "variables": ["temperature", "heater"], "time_columns": ["time"],
                    "needs_variable": True}
    rec = load_recording(path, variable="temperature")
    np.testing.assert_allclose(signal(rec), 300 + x, rtol=1e-14)
    assert rec["temperature"].attrs["units"] == "K" and rec.attrs["format"] == "netcdf"
    assert sampling_interval(rec) == pytest.approx(0.1) and time_unit(rec) == "s"
    # one reading for both answers: the same description, the same Recording
    assert loading.describe_and_load(path) == (info, None)
    both, chosen = loading.describe_and_load(path, variable="temperature")
    assert both == info and chosen.identical(rec)
    from_bytes = load_recording(path.read_bytes(), name="upload/dir/loop.nc", variable=0)
    assert from_bytes.attrs["source"] == "loop.nc"
    np.testing.assert_array_equal(signal(from_bytes), signal(rec))
    with pytest.raises(RecordingError) as err:
        load_recording(path)
    assert "temperature" in one_line(err)
    with pytest.raises(RecordingError) as err:
        load_recording(path, variable="temperature", time_column="time")
    assert "time_column" in one_line(err)


@pytest.mark.parametrize("engine", ["h5netcdf", "scipy"])
def test_netcdf_cf_datetime(x, engine):
    ds = xr.Dataset({"v": ("time", x[:600])},
                    coords={"time": pd.date_range("2024-01-01", periods=600, freq="20ms")})
    rec = load_recording(bytes(ds.to_netcdf(engine=engine)), name="cf.nc")
    assert time_unit(rec) == "s"
    np.testing.assert_allclose(rec["time"].values, 0.02 * np.arange(600), atol=1e-12)


def test_netcdf4_packed_and_masked_like_xarray(x):
    # Reference: xarray's own CF decoding (scale_factor, add_offset, _FillValue) in this process;
    # the loader reads NetCDF4 in a child process and must hand back the same numbers.
    values = x[:600].copy()
    values[[5, 300]] = np.nan
    ds = xr.Dataset({"v": ("time", values, {"units": "mV"})}, coords={"time": ("time", 0.5 * np.arange(600))})
    data = bytes(ds.to_netcdf(engine="h5netcdf", encoding={"v": {
        "dtype": "int16", "scale_factor": 0.01, "add_offset": 3.0, "_FillValue": -32768}}))
    expected = xr.open_dataset(io.BytesIO(data), engine="h5netcdf")["v"].values.astype(float)
    rec = load_recording(data, name="packed.nc")
    np.testing.assert_array_equal(signal(rec), expected)
    assert np.isnan(signal(rec)[[5, 300]]).all() and sampling_interval(rec) == 0.5


@pytest.fixture()
def nc4(x):
    return bytes(xr.Dataset({"v": ("time", x[:600])}).to_netcdf(engine="h5netcdf"))


@pytest.fixture()
def scratch(tmp_path, monkeypatch):
    """The temporary folder the loader uses, so a test can see that nothing is left behind."""
    folder = tmp_path / "tmp"
    folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(folder))
    return folder


def test_netcdf4_reader_that_hangs_is_killed(monkeypatch, tmp_path, scratch, nc4):
    # A stand-in for an HDF5 library stuck on a damaged file: a child that writes its process id and sleeps.
    pid_file = tmp_path / "pid"
    monkeypatch.setattr(loading, "_CHILD", f"import os, time; open({str(pid_file)!r}, 'w').write(str(os.getpid())); "
                                           "time.sleep(600)")
    with pytest.raises(RecordingError) as err:
        describe_source(nc4, name="stuck.nc", netcdf4_timeout=3)
    assert "within 3 s" in one_line(err) and "NetCDF3 or CSV" in one_line(err)
    pid = int(pid_file.read_text())
    with pytest.raises(OSError):  # POSIX kill(pid, 0): the child no longer exists
        os.kill(pid, 0)
    assert list(scratch.iterdir()) == []


def test_netcdf4_child_answers_are_never_unpickled(monkeypatch, tmp_path, scratch, nc4):
    # A child that crashes, and one that hands back a pickled array (as a compromised reader might).
    monkeypatch.setattr(loading, "_CHILD", "import os; os._exit(3)")
    with pytest.raises(RecordingError) as err:
        load_recording(nc4, name="crash.nc")
    assert "could not be read as NetCDF4" in one_line(err)
    marker = tmp_path / "unpickled"
    evil = ("import json, os, sys, numpy as np\n"
            "class Trap:\n"
            f"    def __reduce__(self): return (os.mkdir, ({str(marker)!r},))\n"
            "d = sys.argv[2]\n"
            "np.save(d + '/v0.npy', np.array([1.0, Trap()], dtype=object), allow_pickle=True)\n"
            "json.dump({'variables': [['v', '1', 'v', 'time']], 'coords': [], 'other': []}, open(d + '/out.json', 'w'))")
    monkeypatch.setattr(loading, "_CHILD", evil)
    with pytest.raises(RecordingError) as err:
        load_recording(nc4, name="evil.nc")
    assert "could not be read as NetCDF4" in one_line(err)
    assert not marker.exists(), "the loader unpickled what the child returned"
    assert list(scratch.iterdir()) == []


def test_netcdf4_damaged_header_refused_before_reading(nc4):
    # HDF5 File Format Specification: superblock version 0 keeps the end-of-file address at byte 40.
    with pytest.raises(RecordingError) as err:
        load_recording(nc4[:len(nc4) - 10], name="cut.nc")
    assert f"says {len(nc4)} bytes" in one_line(err)
    with pytest.raises(RecordingError) as err:
        load_recording(nc4[:8] + b"\x07" + nc4[9:], name="v7.nc")  # no superblock version 7
    assert "header is damaged" in one_line(err)
    with pytest.raises(RecordingError) as err:
        load_recording(nc4, name="a.nc", netcdf4_timeout=0)
    assert "netcdf4_timeout" in one_line(err)


def test_npy_one_and_two_dimensional(x):
    def saved(arr, **kw):
        buf = io.BytesIO()
        np.save(buf, arr, **kw)  # writer: numpy
        return buf.getvalue()

    np.testing.assert_array_equal(signal(load_recording(saved(x), name="a.npy")), x)
    t = 0.01 * np.arange(N)
    rec = load_recording(saved(np.column_stack([t, x])), name="b.npy")
    np.testing.assert_array_equal(rec["time"].values, t)
    np.testing.assert_array_equal(signal(rec), x)
    cols = np.column_stack([x, -x, 2 * x])
    np.testing.assert_array_equal(signal(load_recording(saved(cols), name="c.npy", variable=2)), 2 * x)
    with pytest.raises(RecordingError) as err:
        load_recording(saved(cols), name="c.npy")
    assert "column_2" in one_line(err)


def test_pickled_npy_refused_and_never_unpickled():
    class Trap:
        def __reduce__(self):
            return (pytest.fail, ("the loader unpickled an upload",))

    buf = io.BytesIO()
    np.save(buf, np.array([Trap(), 1.0], dtype=object), allow_pickle=True)
    with pytest.raises(RecordingError) as err:
        load_recording(buf.getvalue(), name="evil.npy")
    assert "unpickled" in one_line(err)
    with pytest.raises(RecordingError):
        load_recording(pickle.dumps([1.0, 2.0]), name="evil.npy")


def test_wav_mono_and_stereo():
    mono = (sine(N, 40) * 12000).astype(np.int16)
    buf = io.BytesIO()
    wavfile.write(buf, 8000, mono)  # writer: scipy.io.wavfile
    rec = load_recording(buf.getvalue(), name="mic.wav")
    np.testing.assert_array_equal(signal(rec), mono)
    assert sampling_interval(rec) == pytest.approx(1 / 8000) and time_unit(rec) == "s"
    assert rec[variable_name(rec)].attrs["units"] == "1"
    stereo = np.column_stack([mono, -mono])
    buf = io.BytesIO()
    wavfile.write(buf, 44100, stereo)
    with pytest.raises(RecordingError) as err:
        load_recording(buf.getvalue(), name="pair.wav")
    assert "channel_1" in one_line(err)
    right = load_recording(buf.getvalue(), name="pair.wav", channel=1)
    np.testing.assert_array_equal(signal(right), -mono.astype(float))
    assert describe_source(buf.getvalue(), name="pair.wav")["variables"] == ["channel_0", "channel_1"]


def test_extension_missing_is_sniffed(x):
    buf = io.BytesIO()
    np.save(buf, x)
    np.testing.assert_array_equal(signal(load_recording(buf.getvalue())), x)
    assert load_recording(buf.getvalue()).attrs["source"] == "upload"


# -- bad inputs: one line, what is wrong and what would work ----------------------------

BAD = {
    "empty": (b"", "empty.csv", "empty"),
    "blank": (b"\n \n\n", "blank.csv", "empty"),
    "header only": (b"time,value\n", "h.csv", "no data rows"),
    "comments only": (b"# nothing\n# here\n", "c.csv", "comments"),
    "words": (b"the quick brown\nfox jumps over\n", "w.txt", "no numeric column"),
    "random bytes": (np.random.default_rng(0).bytes(4000), "r.bin", "not a recognised format"),
    "misnamed": (b"hello", "x.nc", "does not start like"),
    "ragged": (b"1,2\n3,4\n5,6,7\n", "r.csv", "same columns"),
    "word in numbers": (b"v\n1\n2\noops\n4\n5\n", "n.csv", "oops"),
    "complex npy": (None, "z.npy", "not real numbers"),
    # Office Open XML workbooks are zip archives (ECMA-376 Part 2); old .xls files start with the
    # compound-file signature D0 CF 11 E0 A1 B1 1A E1 ([MS-CFB] 2.2).
    "workbook": (b"PK\x03\x04" + bytes(60), "run3.xlsx", "save the sheet with the recording as CSV"),
    "old workbook, no name": (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(504), "upload", "spreadsheet"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_inputs_give_one_line(case):
    data, name, words = BAD[case]
    if data is None:
        buf = io.BytesIO()
        np.save(buf, np.arange(5) + 1j)
        data = buf.getvalue()
    with pytest.raises(LagspaceError) as err:
        load_recording(data, name=name)
    assert words in one_line(err)


def test_limits(tmp_path, x):
    path = tmp_path / "big.csv"
    path.write_text("\n".join(f"{v:.17g}" for v in x))
    with pytest.raises(RecordingError) as err:
        load_recording(path, max_bytes=1000)
    assert "max_bytes" in one_line(err)
    with pytest.raises(RecordingError) as err:
        load_recording(path, max_samples=100)
    assert "max_samples" in one_line(err)
    buf = io.BytesIO()
    np.save(buf, x)
    with pytest.raises(RecordingError) as err:
        load_recording(buf.getvalue(), name="a.npy", max_samples=100)
    assert "max_samples" in one_line(err)


def test_argument_errors(tmp_path, x):
    with pytest.raises(RecordingError) as err:
        load_recording(tmp_path / "missing.csv")
    assert "not found" in one_line(err) and str(tmp_path) not in str(err.value)
    data = "\n".join(f"{v:.17g}" for v in x).encode()
    for bad in (0, -1.0, float("nan"), "fast"):
        with pytest.raises(RecordingError) as err:
            load_recording(data, name="a.csv", sampling_interval=bad)
        one_line(err)
    with pytest.raises(RecordingError) as err:
        load_recording(data, name="a.csv", variable="nope")
    assert "column_0" in one_line(err)
    with pytest.raises(RecordingError):
        load_recording(data, name="a.csv", variable=0, channel=0)
    with pytest.raises(RecordingError):
        load_recording(12345)


def test_demo_files_load():
    import pathlib

    here = pathlib.Path(__file__).resolve().parent.parent / "demo_data"
    total = 0
    for path, unit in [("thermosyphon_thermocouple.nc", "K"), ("magnetoelastic_beam_strain.csv", "ue"),
                       ("pump_vibration.csv", "m s-2")]:
        rec = load_recording(here / path)
        assert rec[variable_name(rec)].attrs["units"] == unit
        assert not [f for f in json.loads(rec.attrs["checks"]) if f["severity"] == "refuse"]
        total += (here / path).stat().st_size
    assert total < 2_000_000


# -- file shapes met in practice ---------------------------------------------------------


def test_odd_but_sensible_shapes():
    values = np.round(np.asarray(lorenz(600)), 4)
    stamps = pd.date_range("2024-01-31 23:55", periods=600, freq="1s").strftime("%d.%m.%Y %H:%M:%S")
    german = "Datum;Temperatur [°C]\n" + "".join(f"{d};{str(v).replace('.', ',')}\n" for d, v in zip(stamps, values))
    rec = load_recording(german.encode("cp1252"), name="messung.csv")
    # day-first dates across midnight into February: one second apart (reference: pandas date_range)
    np.testing.assert_allclose(rec["time"].values, np.arange(600.0))
    assert rec[variable_name(rec)].attrs["units"] == "°C"
    np.testing.assert_allclose(signal(rec), values)
    utf16 = ("time\tvalue\r\n" + "".join(f"{k}\t{v}\r\n" for k, v in enumerate(values))).encode("utf-16")
    np.testing.assert_allclose(signal(load_recording(utf16, name="excel.txt")), values)
    old_mac = ("time,value\r" + "".join(f"{k},{v}\r" for k, v in enumerate(values))).encode()
    np.testing.assert_allclose(signal(load_recording(old_mac, name="mac.csv")), values)


def test_blank_entries_are_missing_and_refused_until_filled():
    rows = "time,value\n" + "".join(f"{k},{'' if k == 300 else np.sin(k / 9)}\n" for k in range(600))
    rec = load_recording(rows.encode(), name="gap.csv")
    assert np.isnan(signal(rec)[300]) and np.isfinite(np.delete(signal(rec), 300)).all()
    (finding,) = [f for f in json.loads(rec.attrs["checks"]) if f["code"] == "not_finite"]
    assert finding["severity"] == "refuse" and "fill" in finding["fix"]


def test_words_in_a_numeric_column_are_named():
    with pytest.raises(RecordingError) as err:
        load_recording(b'"time","value"\n"0","1,234.5"\n"1","1,300.0"\n', name="thousands.csv")
    assert "1,234.5" in one_line(err)
