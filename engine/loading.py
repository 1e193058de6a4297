"""Turn a file (or its bytes) into a Recording.

Formats, told apart by their first bytes and, failing that, by the file name:

- text: CSV, TSV, semicolon- or whitespace-separated, with or without a header
  and a time column; ``#`` and ``%`` lines are comments; a header field such as
  ``strain [ue]``, ``temp (K)`` or ``time_s`` gives the units; decimal commas
  are read when the separator is not a comma;
- NetCDF 3 (read with scipy) and NetCDF 4 / HDF5 (read with h5netcdf);
- ``.npy`` (never unpickled);
- ``.wav`` (raw counts, interval from the sample rate).

An integer ``variable`` (or ``channel``) counts columns from 0 as they stand in
the file (text, ``.npy``, ``.wav``) or 1-D variables in file order (NetCDF);
a column without a header is called ``column_<k>`` with that same ``k``.
"""

from __future__ import annotations

import csv
import hashlib
import io
import itertools
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr
from numpy.lib import format as npy_format
from pandas.tseries.api import guess_datetime_format

from .checks import attach_checks, compact_positions, true_runs
from .errors import RecordingError
from .recording import UNSTATED, make_recording

FORMATS = "CSV/TSV/TXT text, NetCDF 3 or 4 (.nc), .npy or .wav"
FORMAT_NAMES = ("text", "netcdf", "npy", "wav")  # the "format" that describe_source reports

# seconds per unit, for time units that have a fixed length
_SECONDS = {
    "s": 1.0, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0,
    "ms": 1e-3, "msec": 1e-3, "millisecond": 1e-3, "milliseconds": 1e-3,
    "us": 1e-6, "µs": 1e-6, "microsecond": 1e-6, "microseconds": 1e-6,
    "ns": 1e-9, "nanosecond": 1e-9, "nanoseconds": 1e-9,
    "min": 60.0, "minute": 60.0, "minutes": 60.0,
    "h": 3600.0, "hr": 3600.0, "hour": 3600.0, "hours": 3600.0,
    "d": 86400.0, "day": 86400.0, "days": 86400.0,
    "wk": 604800.0, "week": 604800.0, "weeks": 604800.0,
}
# calendar units of varying length in seconds: kept as they are, not converted
_CALENDAR = {"yr": "year", "year": "year", "years": "year", "month": "month", "months": "month"}
# units accepted as a name suffix, as in "strain_ue" or "time_ms"
_SUFFIX_UNITS = {"s", "ms", "us", "ns", "min", "h", "ue", "uV", "mV", "V", "mA", "K", "degC",
                 "Pa", "kPa", "hPa", "mbar", "bar", "mm", "um", "nm", "g", "Hz", "rpm"}
_TIME_NAMES = {"time", "t", "times", "timestamp", "timestamps", "datetime", "date", "seconds",
               "secs", "sec", "elapsed", "elapsed_time", "clock", "year", "years", "month", "months"}
_INDEX_NAMES = {"sample", "samples", "index", "idx", "n", "i", "sample_number", "step"}
_DATE_RE = re.compile(r"[\d\-/:. TZ+]*\d[\-/:][\d\-/:. TZ+]*"
                      r"|\d{1,2}\.\d{1,2}\.\d{2,4}(?:[ T][\d:.]+)?")  # or 31.01.2024 (day first)
_WS_HEADER_RE = re.compile(r"[^\s\[\(]+(?:\s*[\[\(][^\[\(\]\)]*[\]\)])?|[\[\(][^\[\(\]\)]*[\]\)]")  # linear: no nesting
MAX_LINE = 100_000  # characters in one line of a text file
MAX_CHANNELS = 200  # channels of one file offered one by one (a choice in the dashboard, a task in batch)
MAX_COLUMNS = 1000  # columns of a text file
NETCDF4_TIMEOUT = 60.0  # seconds a NetCDF4 file may take to read


@dataclass
class _Series:
    """One candidate channel of a file, with the time it comes on (if any)."""

    name: str
    values: np.ndarray
    units: str = "1"
    long_name: str = ""
    time: np.ndarray | None = None
    time_unit: str = "sample"
    interval: float | None = None


@dataclass
class _Contents:
    format: str
    series: list[tuple[int, _Series]]  # (index used by an integer `variable`, series)
    time_columns: list[str]


# -- public -----------------------------------------------------------------------------


def load_recording(
    source,
    *,
    name: str | None = None,
    variable: str | int | None = None,
    sampling_interval: float | None = None,
    channel: int | None = None,
    time_column: str | int | None = None,
    max_bytes: int = 200_000_000,
    max_samples: int = 10_000_000,
    netcdf4_timeout: float = NETCDF4_TIMEOUT,
) -> xr.Dataset:
    """Read one channel of a file into a Recording (see ``engine.recording``).

    Parameters
    ----------
    source : str, Path or bytes
        A file path, or the file's bytes (then ``name`` gives the file name).
    name : file name used for format detection and the ``source`` attribute
        (only its base name is kept).
    variable : column / variable name, or its 0-based index (see module notes).
    sampling_interval : seconds between samples; re-stamps the time as
        ``i * sampling_interval`` in ``"s"``, overriding any time in the file.
    channel : 0-based channel index (the same as an integer ``variable``).
    time_column : name or 0-based file column index of the time column (text
        and ``.npy``); by default a column named like time, a column of dates,
        or a strictly increasing first column of two or more.
    max_bytes, max_samples : limits beyond which the file is refused (a NetCDF4 file is refused
        before reading when a 1-D variable holds more than max_samples, or all of them more
        than 5 * max_samples: compressed variables can inflate far beyond the file's size).
    netcdf4_timeout : seconds a NetCDF4 (HDF5) file may take to read. It is read in a child
        process, killed after that time: a damaged HDF5 file can hold its reader for good.
        Starting the child costs about a second per NetCDF4 file.

    Returns
    -------
    xr.Dataset, a Recording with ``source`` (base name), ``sha256``, ``format``
    and ``checks`` (the findings of :func:`engine.checks.check_recording`;
    loading never refuses, preparation does). Without time information the
    time unit is ``"sample"`` and the interval 1.
    """
    if channel is not None and variable is not None:
        raise RecordingError("give either variable or channel, not both")
    interval = _check_interval(sampling_interval)
    data, base = _read_source(source, name, max_bytes)
    contents = _parse(data, base, time_column, max_samples, _check_timeout(netcdf4_timeout))
    return _recording(contents, data, base, channel if channel is not None else variable, interval, max_samples)


def describe_and_load(source, *, name: str | None = None, variable: str | int | None = None,
                      time_column: str | int | None = None, max_bytes: int = 200_000_000,
                      max_samples: int = 10_000_000, netcdf4_timeout: float = NETCDF4_TIMEOUT):
    """(:func:`describe_source`, :func:`load_recording`) from one reading of the file (a NetCDF4
    file costs a child process per reading). The Recording is None when the file needs a
    ``variable`` and none was given."""
    data, base = _read_source(source, name, max_bytes)
    contents = _parse(data, base, time_column, max_samples, _check_timeout(netcdf4_timeout))
    info = _description(contents)
    if info["needs_variable"] and variable is None:
        return info, None
    return info, _recording(contents, data, base, variable, None, max_samples)


def _recording(contents: _Contents, data: bytes, base: str, variable, interval, max_samples) -> xr.Dataset:
    """The Recording of the chosen channel of parsed ``contents``."""
    s = _choose(contents, variable)
    if s.values.size > max_samples:
        raise RecordingError(
            f"{base} holds {s.values.size} samples, more than the limit of {max_samples}: "
            "crop or decimate the file, or raise max_samples"
        )
    time, time_unit = (None, "s") if interval is not None else (s.time, s.time_unit)
    if time is not None and not np.isfinite(time).all():
        raise RecordingError(
            f"{base}: time is missing or infinite at samples {compact_positions(true_runs(~np.isfinite(time)))}: "
            "fill in those times or remove those rows, or give sampling_interval to replace the file's time"
        )
    interval = interval if interval is not None else s.interval
    rec = make_recording(
        s.values, time, name=s.name, units=s.units or "1", time_unit=time_unit, source=base,
        sha256=hashlib.sha256(data).hexdigest(), sampling_interval=interval,
    )
    rec[s.name].attrs["long_name"] = s.long_name or s.name
    rec.attrs["format"] = contents.format
    return attach_checks(rec)


def describe_source(source, *, name: str | None = None, max_bytes: int = 200_000_000,
                    max_samples: int = 10_000_000, netcdf4_timeout: float = NETCDF4_TIMEOUT) -> dict:
    """What a file offers, so that a UI can ask only the questions that matter.

    Returns ``{"format": str, "variables": [names], "time_columns": [names],
    "needs_variable": bool}``; ``needs_variable`` is true when more than one
    channel could be meant and ``load_recording`` needs ``variable``. The other arguments are
    those of :func:`load_recording`.
    """
    data, base = _read_source(source, name, max_bytes)
    return _description(_parse(data, base, None, max_samples, _check_timeout(netcdf4_timeout)))


def _description(contents: _Contents) -> dict:
    return {
        "format": contents.format,
        "variables": [s.name for _, s in contents.series],
        "time_columns": list(contents.time_columns),
        "needs_variable": len(contents.series) > 1,
    }


# -- reading bytes and telling formats apart ----------------------------------------------


def _check_timeout(value) -> float:
    seconds = float(value) if isinstance(value, (int, float, np.number)) and not isinstance(value, bool) else float("nan")
    if not (np.isfinite(seconds) and seconds > 0):
        raise RecordingError(f"netcdf4_timeout must be a positive number of seconds, got {value!r}")
    return seconds


def _check_interval(value):
    if value is None:
        return None
    try:
        dt = float(value)
    except (TypeError, ValueError):
        dt = float("nan")
    if isinstance(value, bool) or not (np.isfinite(dt) and dt > 0):
        raise RecordingError(f"sampling_interval must be a positive number of seconds, got {value!r}")
    return dt


def _base_name(text) -> str:
    """The file name without folders, with unprintable characters (line breaks...) as "?"."""
    return "".join(ch if ch.isprintable() else "?" for ch in re.split(r"[\\/]", str(text))[-1])


def _read_source(source, name, max_bytes) -> tuple[bytes, str]:
    if isinstance(source, (bytes, bytearray, memoryview)):
        data, base = bytes(source), _base_name(name) if name else "upload"
    elif isinstance(source, (str, os.PathLike)):
        path = os.fspath(source)
        base = _base_name(name) if name else _base_name(path)
        if not os.path.isfile(path):
            raise RecordingError(f"file {base!r} not found (or not a file): give the path of a {FORMATS} file")
        size = os.path.getsize(path)
        if size > max_bytes:
            raise _too_big(base, size, max_bytes)
        with open(path, "rb") as fh:
            data = fh.read()
    else:
        raise RecordingError(f"a recording is read from a file path or bytes, got {type(source).__name__}")
    if len(data) > max_bytes:
        raise _too_big(base, len(data), max_bytes)
    if not data.strip():
        raise RecordingError(f"{base} is empty: give a file with one sample per line or row ({FORMATS})")
    return data, base


def _too_big(base, size, limit):
    return RecordingError(
        f"{base} is {size / 1e6:.1f} MB, more than the limit of {limit / 1e6:.1f} MB: "
        "crop or decimate it first, or raise max_bytes"
    )


SPREADSHEETS = (".xlsx", ".xlsm", ".xls", ".ods")
OLE2 = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # the compound-file header of old .xls workbooks


def _magic(data: bytes) -> str | None:
    """The binary format that ``data`` starts like, if any."""
    if data[:4] in (b"CDF\x01", b"CDF\x02"):
        return "scipy"  # classic NetCDF3
    if data[:8] == b"\x89HDF\r\n\x1a\n":
        return "h5netcdf"  # NetCDF4 is HDF5 inside
    if data[:6] == b"\x93NUMPY":
        return "npy"
    if data[:4] == b"RIFF" and data[8:12] == b"WAVE":
        return "wav"
    return None


def _parse(data: bytes, base: str, time_column, max_samples, netcdf4_timeout) -> _Contents:
    ext = os.path.splitext(base)[1].lower()
    kind = _magic(data)
    if ext in SPREADSHEETS or data[:8] == OLE2:
        raise RecordingError(f"{base} is a spreadsheet workbook, which lagspace does not read: save the sheet "
                             "with the recording as CSV (Save As, CSV, in the spreadsheet program) and give that")
    if data[:4] in (b"PK\x03\x04", b"PK\x05\x06"):
        raise RecordingError(f"{base} is a zip archive, not a recording, and not a readable lagspace bundle: "
                             "unzip it and give the recording inside, or give a bundle that lagspace wrote")
    if data[:4] == b"CDF\x05":
        raise RecordingError(f"{base} is 64-bit-data NetCDF (CDF-5), which cannot be read: save it as NetCDF4 or NetCDF3")
    if kind in ("scipy", "h5netcdf", "wav") and time_column is not None:
        raise RecordingError(f"time_column applies to text and .npy files; {base} carries its own time: leave time_column out")
    if kind in ("scipy", "h5netcdf"):
        return _read_netcdf(data, base, kind, max_samples, netcdf4_timeout)
    if kind == "npy":
        return _read_npy(data, base, time_column)
    if kind == "wav":
        return _read_wav(data, base)
    if ext in (".nc", ".nc3", ".nc4", ".cdf", ".h5", ".hdf5", ".npy", ".wav"):
        raise RecordingError(f"{base} does not start like a {ext} file (damaged or misnamed): give a {FORMATS} file")
    text = _decode(data)
    if text is None:
        raise RecordingError(f"{base} is not a recognised format (binary data): give a {FORMATS} file")
    return _read_text(text, base, time_column, max_samples)


def _decode(data: bytes) -> str | None:
    """The text of ``data``, or None if it does not look like text."""
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError:
            return None
    head = data[:65536]
    if b"\x00" in head:
        return None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = data.decode("cp1252", errors="replace")
    controls = sum(ch < " " and ch not in "\t\r\n\f\v" for ch in text[:65536])
    return None if controls > 0.01 * min(len(text), 65536) else text


# -- choosing the channel --------------------------------------------------------------


def _choose(contents: _Contents, variable) -> _Series:
    series = contents.series
    names = {s.name for _, s in series}
    listing = _listing([f"{i}: {_quoted(s.name)}" for i, s in series])
    if variable is None:
        if len(series) > 1:
            raise RecordingError(f"the file has {len(series)} channels; choose one by name or index "
                                 f"(--variable on the command line): {listing}")
        return series[0][1]
    if isinstance(variable, (int, np.integer)) and not isinstance(variable, bool):
        for i, s in series:
            if i == variable:
                return s
    else:
        wanted = str(variable).strip()
        for i, s in series:
            if wanted in (s.name, s.long_name) or wanted == str(i) and wanted not in names:
                return s
    raise RecordingError(f"no channel {variable!r} in the file; choose one of {listing}")


def _quoted(text: str, limit: int = 60) -> str:
    """``repr(text)``, cut to about ``limit`` characters: file contents quoted in a one-line message."""
    return repr(text if len(text) <= limit else text[:limit] + "...")


def _is_date(text: str) -> bool:
    """Looks like a date or time of day. Long fields are not dates (and would make the regex quadratic)."""
    return len(text) <= 64 and _DATE_RE.fullmatch(text) is not None


def _listing(items: list[str], limit: int = 20) -> str:
    """``"a, b, c and 7 more"``: a list short enough for a one-line message."""
    more = f" and {len(items) - limit} more" if len(items) > limit else ""
    return ", ".join(items[:limit]) + more


def _time_factor(units: str):
    """(seconds per unit, unit label) for a time unit written in a file."""
    u = units.strip()
    if u.lower() in _SECONDS:
        return _SECONDS[u.lower()], "s"
    if u.lower() in _CALENDAR:
        return 1.0, _CALENDAR[u.lower()]
    if u.lower() in _INDEX_NAMES:
        return 1.0, "sample"
    return 1.0, (u or UNSTATED)


# -- text ---------------------------------------------------------------------------


def _split_units(field: str) -> tuple[str, str]:
    """``"strain [ue]"`` -> ("strain", "ue"); ``"time_ms"`` -> ("time", "ms")."""
    field = field.strip().strip('"').strip()
    if field[-1:] in ("]", ")"):  # "name [unit]": the first bracket opened after any other bracket closed
        after = max(field.rfind("]", 0, len(field) - 1), field.rfind(")", 0, len(field) - 1)) + 1
        opening = min((i for i in (field.find("[", after), field.find("(", after)) if i >= 0), default=-1)
        if opening > 0:
            return field[:opening].rstrip(), field[opening + 1:-1].strip()
    head, _, tail = field.rpartition("_")
    if head and tail in _SUFFIX_UNITS:
        return head, tail
    return field, ""


def _field_kind(field: str, decimal: str) -> str:
    field = field.strip().strip('"')
    if not field:
        return "empty"
    try:
        float(field.replace(decimal, ".") if decimal == "," else field)
        return "number"
    except ValueError:
        return "date" if _is_date(field) else "text"


def _fields(line: str, sep: str | None) -> list[str]:
    if sep is None:
        return [line]
    if sep == "whitespace":
        return line.split()
    return next(csv.reader([line], delimiter=sep, skipinitialspace=True))


def _sniff(lines: list[str]) -> tuple[str | None, str]:
    """(separator, decimal mark) that split the sample lines consistently."""
    sample = lines[1:51] if len(lines) > 1 else lines
    counts = {c: {len(_fields(ln, c)) for ln in sample} for c in ("\t", ";", ",", "whitespace")}
    consistent = [c for c, n in counts.items() if len(n) == 1 and min(n) > 1]
    everywhere = [c for c, n in counts.items() if min(n) > 1]  # ragged: let the reader say where
    sep = (consistent or everywhere or [None])[0]
    decimal = "."
    if sep != ",":
        cells = [f for ln in sample for f in _fields(ln, sep)]
        if any(re.fullmatch(r"[-+]?\d*,\d+(e[-+]?\d+)?", c, re.I) for c in cells) and not any(
            re.fullmatch(r"[-+]?\d*\.\d+", c) for c in cells
        ):
            decimal = ","
    return sep, decimal


def _header_fields(line: str, sep: str | None, n: int) -> list[str]:
    fields = _fields(line, sep)
    if sep == "whitespace" and len(fields) != n:
        fields = _WS_HEADER_RE.findall(line)
    return [f.strip().strip('"') for f in fields]


def _is_header(line: str, below: str | None, sep, decimal) -> bool:
    """A line is a header when one of its fields is words above a non-word field."""
    fields = _fields(line, sep)
    under = _fields(below, sep) if below is not None else []
    under += [""] * len(fields)
    return any(_field_kind(a, decimal) == "text" and _field_kind(b, decimal) != "text" for a, b in zip(fields, under))


def _read_text(text: str, base: str, time_column, max_samples) -> _Contents:
    text = re.sub(r"(?m)^[ \t]*[#%].*(\n|$)", "", text.replace("\r\n", "\n").replace("\r", "\n"))
    raw = [ln.rstrip("\n") for ln in itertools.islice(io.StringIO(text), 200)]
    content = [i for i, ln in enumerate(raw) if ln.strip()]
    head = [raw[i].strip() for i in content[:60]]
    if not head:
        raise RecordingError(f"{base} has only comments or blank lines: give one sample per line")
    longest = max(len(ln) for ln in head)
    if longest > MAX_LINE:
        raise RecordingError(f"{base} has a line of {longest} characters, more than the limit of {MAX_LINE}: "
                             f"give one sample per line, in at most {MAX_COLUMNS} columns")
    if max_samples is not None and text.count("\n") > max_samples + 2:
        raise RecordingError(
            f"{base} has {text.count(chr(10))} rows, more than the limit of {max_samples} samples: "
            "crop or decimate the file, or raise max_samples"
        )
    sep, decimal = _sniff(head)
    widest = max(len(_fields(ln, sep)) for ln in head)
    if widest > MAX_COLUMNS:
        raise RecordingError(f"{base} has {widest} columns, more than the limit of {MAX_COLUMNS}: "
                             "save the channel you want (and its time) in a file of its own")
    below = head[1] if len(head) > 1 else None
    if _is_header(head[0], below, sep, decimal):
        n_header = 1
    elif len(head) > 2 and _is_header(head[1], head[2], sep, decimal):
        n_header = 2  # a row of names, then a row of units
    else:
        n_header = 0
    if n_header and len(head) == n_header:
        raise RecordingError(f"{base} has a header but no data rows: add one sample per line below the header")
    skip = content[n_header - 1] + 1 if n_header else 0
    try:
        frame = pd.read_csv(
            io.StringIO(text), header=None, skiprows=skip, comment="#", decimal=decimal,
            sep=r"\s+" if sep == "whitespace" else (sep or "\x1f"), skipinitialspace=True, low_memory=False,
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        msg = " ".join(str(exc).split()).replace("Error tokenizing data. C error: ", "")
        raise RecordingError(f"{base} could not be read as a table ({msg}): every row needs the same columns") from None
    names = _header_fields(head[0], sep, frame.shape[1]) if n_header else []
    units = _header_fields(head[1], sep, frame.shape[1]) if n_header == 2 else []
    columns, words = [], ""  # (file index, header field, kind, float values); a word column, if any
    for k in range(frame.shape[1]):
        header = names[k] if k < len(names) else ""
        if k < len(units) and units[k] and not _split_units(header)[1]:
            header = f"{header} [{units[k]}]"
        kind, values = _column_values(frame[k], header or f"column_{k}", base)
        if kind == "number" and not header and np.isnan(values).all():
            continue  # a trailing separator's empty column
        if kind != "text":
            columns.append((k, header, kind, values))
        elif not words:
            example = str(frame[k].dropna().iloc[0]) if frame[k].notna().any() else ""
            words = f" (column {_quoted(header or f'column_{k}')} holds words such as {_quoted(example)})"
    if not columns:
        raise RecordingError(f"{base} has no numeric column{words}: give a file of numbers, one sample per row")
    return _table(columns, "text", time_column, base, words)


def _column_values(col: pd.Series, label: str, base: str):
    """("number" | "date" | "text", float values) of one text column."""
    if pd.api.types.is_numeric_dtype(col):
        return "number", col.to_numpy(dtype=float)
    present = col.notna().to_numpy()
    numbers = pd.to_numeric(col, errors="coerce")
    bad = present & numbers.isna().to_numpy()
    if not bad.any():
        return "number", numbers.to_numpy(dtype=float)
    if present.sum() and all(_is_date(str(v).strip()) for v in col[present].iloc[:20]):
        seconds = _seconds_since_first(col, present)
        if seconds is not None:
            return "date", seconds
    if bad.mean() < 0.5:
        row = int(np.flatnonzero(bad)[0])
        raise RecordingError(
            f"{base}: column {_quoted(label)} is numeric but data row {row + 1} holds {_quoted(str(col.iloc[row]))}: "
            "fix that entry or leave it blank (blank entries are read as missing)"
        )
    return "text", None


def _seconds_since_first(col: pd.Series, present: np.ndarray):
    """Seconds since the first date of a column of dates, or None when some present entry is no date."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            stamps = pd.to_datetime(col, errors="coerce", format="ISO8601")
            if (stamps.isna().to_numpy() & present).any():
                first = str(col[present].iloc[0]).strip()
                dayfirst = bool(re.match(r"\d{1,2}\.\d{1,2}\.\d{2,4}", first))  # 31.01.2024 is day first
                guess = guess_datetime_format(first, dayfirst=dayfirst) or "mixed"
                stamps = pd.to_datetime(col, errors="coerce", format=guess, dayfirst=dayfirst)
        except (ValueError, TypeError, OverflowError):  # e.g. mixed time zones: not a usable time column
            return None
    if (stamps.isna().to_numpy() & present).any():
        return None
    return (stamps - stamps.iloc[0]).dt.total_seconds().to_numpy(dtype=float)


def _is_time_name(header: str) -> bool:
    stem = _split_units(header)[0].strip()
    if len(stem) == 1:  # "T" is often a temperature, "N" a force
        return stem in _TIME_NAMES or stem in _INDEX_NAMES
    stem = stem.lower()
    return stem in _TIME_NAMES or stem in _INDEX_NAMES or stem.startswith("time")


def _table(columns, fmt: str, time_column, base: str, words: str = "") -> _Contents:
    """Pick the time column of a table and make one series per other column.

    ``columns`` holds (file index, header field, "number" | "date", values).
    """
    candidates = [c for c in columns if c[1] and (_is_time_name(c[1]) or _split_units(c[1])[1].lower() in _SECONDS)]
    candidates += [c for c in columns if c[2] == "date" and c not in candidates]
    first = columns[0]
    if len(columns) > 1 and first[0] == 0 and first not in candidates and _increasing(first[3]):
        candidates.append(first)
    if time_column is None:
        chosen = candidates[0] if candidates else None
    else:
        chosen = next((c for c in columns if _matches(c, time_column)), None)
        if chosen is None:
            listing = _listing([f"{c[0]}: {_quoted(c[1] or 'column_%d' % c[0])}" for c in columns])
            raise RecordingError(f"no numeric column {time_column!r} to use as time in {base}; columns are {listing}")
    time, time_unit = None, "sample"
    if chosen is not None:
        time = chosen[3]
        stem, units = _split_units(chosen[1]) if chosen[1] else ("", "")
        if chosen[2] == "date":
            time_unit = "s"
        else:
            factor, time_unit = _time_factor(units or (stem if stem.lower() in {**_SECONDS, **_CALENDAR} else ""))
            if not units and (stem.lower() in _INDEX_NAMES or not chosen[1] and np.all(np.diff(time) == 1)):
                time_unit = "sample"  # a sample counter
            time = time * factor
    series = []
    for k, header, kind, values in columns:
        if chosen is not None and k == chosen[0] or kind == "date":
            continue
        stem, units = _split_units(header) if header else (f"column_{k}", "")
        series.append((k, _Series(_safe_name(stem), values, units or "1", header or stem, time, time_unit)))
    if not series:
        raise RecordingError(
            f"{base} holds only a time column ({_quoted(chosen[1] or 'column_0')}){words}: add a column of measured values"
        )
    return _Contents(fmt, series, [c[1] or f"column_{c[0]}" for c in candidates])


def _matches(column, wanted) -> bool:
    k, header = column[0], column[1]
    if isinstance(wanted, (int, np.integer)) and not isinstance(wanted, bool):
        return k == wanted
    return str(wanted).strip() in (header, _split_units(header)[0], f"column_{k}")


def _increasing(values) -> bool:
    return values.size > 1 and bool(np.all(np.diff(values) > 0))


def _safe_name(stem: str) -> str:
    stem = stem.replace("/", "_").strip() or "signal"
    return "value" if stem == "time" else stem


# -- binary formats ------------------------------------------------------------------


def _read_netcdf(data: bytes, base: str, engine: str, max_samples: int, seconds: float) -> _Contents:
    label = "NetCDF3" if engine == "scipy" else "NetCDF4"
    try:
        if engine == "scipy":  # scipy's pure-Python reader: in this process
            with xr.open_dataset(io.BytesIO(data), engine="scipy", decode_times=False) as ds:
                variables, coords, other = _netcdf_table(ds)
        else:
            _check_hdf5_superblock(data, base)
            variables, coords, other = _netcdf4_in_child(data, base, max_samples, seconds)
    except RecordingError:
        raise
    except Exception as exc:  # the readers raise many types for damaged files
        raise RecordingError(f"{base} could not be read as {label} ({type(exc).__name__}): check the file is complete") from None
    if not variables:
        raise RecordingError(
            f"{base} has no 1-D numeric variable (found: {_listing(other) or 'none'}): "
            "save one channel as a 1-D variable along time"
        )
    series = []
    for i, (name, values, units, long_name, dim) in enumerate(variables):
        time, time_unit = _netcdf_time(coords.get(dim), dim, base)
        series.append((i, _Series(_safe_name(name), values, units, long_name, time, time_unit)))
    return _Contents("netcdf", series, sorted({v[4] for v in variables if v[4] in coords}))


def _netcdf_table(ds: xr.Dataset):
    """The plain contents of an open NetCDF dataset: its usable variables as
    (name, float values, units, long name, dimension), the coordinates of their dimensions as
    {dimension: (float values or None when not numeric, units)}, and a description of the rest."""
    variables, coords, other = [], {}, []
    for name, var in ds.data_vars.items():
        units = str(var.attrs.get("units", "1"))
        if var.ndim == 1 and var.dtype.kind in "biuf" and " since " not in units:
            dim = str(var.dims[0])
            variables.append((str(name), var.values.astype(float), units, str(var.attrs.get("long_name", name)), dim))
            if var.dims[0] in ds.coords and dim not in coords:
                coord = ds[var.dims[0]]
                numeric = coord.dtype.kind in "iuf"
                coords[dim] = (coord.values.astype(float) if numeric else None, str(coord.attrs.get("units", "")))
        else:
            other.append(f"{_quoted(str(name))} {tuple(var.dims)}")
    return variables, coords, other


def _check_hdf5_superblock(data: bytes, base: str) -> None:
    """Refuse, without opening it, an HDF5 file whose superblock is unknown or that is shorter than it
    says (the HDF5 File Format Specification, superblock versions 0-3)."""
    version = data[8] if len(data) > 8 else None
    if version in (0, 1):
        size, at = (data[13] if len(data) > 13 else 0), 24 + 4 * version  # base, free space, end of file
    elif version in (2, 3):
        size, at = (data[9] if len(data) > 9 else 0), 12  # base, extension, end of file
    else:
        size = at = 0
    fields = [int.from_bytes(data[at + k * size:at + (k + 1) * size], "little") for k in (0, 2)]
    if size not in (2, 4, 8, 16) or len(data) < at + 3 * size:
        raise RecordingError(f"{base} starts like a NetCDF4 file but its HDF5 header is damaged: "
                             "check the file is complete, or export it again")
    if fields[1] > len(data) + fields[0]:
        raise RecordingError(f"{base} is a truncated NetCDF4 file (its header says {fields[1]} bytes, it holds "
                             f"{len(data)}): copy or export it again")


_CHILD = "import sys; sys.path.insert(0, sys.argv[1]); from engine.loading import _netcdf4_child; _netcdf4_child(*sys.argv[2:])"
_PACKAGE_ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _netcdf4_in_child(data: bytes, base: str, max_samples: int, seconds: float):
    """:func:`_netcdf_table` of NetCDF4 bytes, read by a child process that is killed after
    ``seconds`` (a damaged HDF5 file can hold its reader for good). The child hands back JSON and
    float .npy files only; nothing it returns is unpickled."""
    with tempfile.TemporaryDirectory(prefix="lagspace-nc4-") as folder:
        with open(os.path.join(folder, "in.nc"), "wb") as fh:
            fh.write(data)
        try:
            subprocess.run([sys.executable, "-c", _CHILD, _PACKAGE_ROOT, folder, str(max_samples)], cwd=folder,
                           stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                           timeout=seconds, check=False)
        except subprocess.TimeoutExpired:  # run() has killed the child
            raise RecordingError(f"the NetCDF4 file {base} could not be read within {seconds:g} s; it may be damaged: "
                                 "re-export it as NetCDF3 or CSV") from None
        try:
            with open(os.path.join(folder, "out.json"), encoding="utf-8") as fh:
                out = json.load(fh)
        except (OSError, ValueError):
            out = {"error": "the reader stopped"}  # the child crashed before it wrote its answer
        if "sizes" in out:
            _check_netcdf_sizes(out["sizes"], base, max_samples)
        if "error" in out:
            raise RecordingError(f"{base} could not be read as NetCDF4 ({out['error']}): check the file is complete")

        def array(name):
            values = np.load(os.path.join(folder, name), allow_pickle=False)
            if values.dtype != np.float64 or values.ndim != 1:
                raise TypeError(f"{name} is not a 1-D float array")
            return values

        variables = [(str(name), array(f"v{i}.npy"), str(units), str(long_name), str(dim))
                     for i, (name, units, long_name, dim) in enumerate(out["variables"])]
        coords = {str(dim): (array(f"c{j}.npy") if numeric else None, str(units))
                  for j, (dim, units, numeric) in enumerate(out["coords"])}
        return variables, coords, [str(text) for text in out["other"]]


def _netcdf4_child(folder: str, max_samples: str) -> None:
    """The child process of :func:`_netcdf4_in_child`: read ``folder/in.nc``, write ``out.json``
    (and one .npy file per array) into ``folder``."""
    import h5py

    path = os.path.join(folder, "in.nc")
    try:  # compressed variables can inflate far beyond the file: look before reading
        with h5py.File(path, "r") as f:
            sizes = {k: v.shape[0] for k, v in f.items() if isinstance(v, h5py.Dataset) and len(v.shape or ()) == 1}
        try:
            _check_netcdf_sizes(sizes, "", int(max_samples))
        except RecordingError:
            out = {"sizes": sizes}
        else:
            with xr.open_dataset(path, engine="h5netcdf", decode_times=False) as ds:
                variables, coords, other = _netcdf_table(ds)
            for i, v in enumerate(variables):
                np.save(os.path.join(folder, f"v{i}.npy"), v[1])
            for j, (values, _) in enumerate(coords.values()):
                if values is not None:
                    np.save(os.path.join(folder, f"c{j}.npy"), values)
            out = {"variables": [[v[0], v[2], v[3], v[4]] for v in variables],
                   "coords": [[dim, units, values is not None] for dim, (values, units) in coords.items()],
                   "other": other}
    except Exception as exc:  # any failure is the file's: the parent says so in one line
        out = {"error": type(exc).__name__}
    with open(os.path.join(folder, "out.part"), "w", encoding="utf-8") as fh:
        json.dump(out, fh)
    os.replace(os.path.join(folder, "out.part"), os.path.join(folder, "out.json"))


def _check_netcdf_sizes(sizes: dict, base: str, max_samples: int) -> None:
    """Refuse NetCDF4 variables (and their coordinates) that would not fit the limits."""
    if not sizes:
        return
    name, largest = max(sizes.items(), key=lambda item: item[1])
    if largest > max_samples:
        raise RecordingError(f"{base}: variable {_quoted(name)} holds {largest} samples, more than the limit of "
                             f"{max_samples}: crop or decimate it, or raise max_samples")
    if sum(sizes.values()) > 5 * max_samples:
        raise RecordingError(f"{base}: its {len(sizes)} 1-D variables hold {sum(sizes.values())} samples in all, "
                             f"more than {5 * max_samples}: save the channel you want in a file of its own")


def _netcdf_time(coord, dim: str, base: str):
    """(time, unit) from a dimension's coordinate ``(values or None, units)``, if it has one."""
    if coord is None or coord[0] is None:
        return None, "sample"
    values, units = coord
    m = re.fullmatch(r"\s*(\w+)\s+since\s+.+", units)
    if m:
        factor, label = _time_factor(m.group(1))
        if label != "s":
            raise RecordingError(
                f"{base}: time in {m.group(1)!r} has no fixed length in seconds: store time in seconds, hours or days since a date"
            )
        return (values - values[0]) * factor if values.size else values, "s"
    factor, label = _time_factor(units or (dim if str(dim).lower() in _INDEX_NAMES else ""))
    return values * factor, label


def _check_npy_header(data: bytes, base: str) -> None:
    """Refuse Python objects, and a header that promises more data than the file holds
    (np.load would allocate all of it before reading)."""
    fh = io.BytesIO(data)
    try:
        version = npy_format.read_magic(fh)
        read = npy_format.read_array_header_1_0 if version == (1, 0) else npy_format.read_array_header_2_0
        shape, _, dtype = read(fh)
    except Exception as exc:  # numpy's header parser raises ValueError, SyntaxError, struct.error, ...
        raise RecordingError(f"{base} has a damaged .npy header ({' '.join(str(exc).split())[:200]}): "
                             "save the array again with np.save") from None
    if dtype.hasobject:
        raise RecordingError(
            f"{base} holds Python objects, and uploaded files are never unpickled: "
            "save a plain numeric array, e.g. np.save(path, values.astype(float))"
        )
    promised, held = math.prod(shape) * dtype.itemsize, len(data) - fh.tell()
    if promised > held:
        raise RecordingError(f"{base} promises an array of shape {shape} ({promised} bytes) but holds only "
                             f"{held} bytes of data: the file is truncated, save it again")


def _read_npy(data: bytes, base: str, time_column) -> _Contents:
    _check_npy_header(data, base)
    try:
        arr = np.load(io.BytesIO(data), allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        raise RecordingError(f"{base} could not be read as .npy ({' '.join(str(exc).split())[:200]}): "
                             "save the array again with np.save") from None
    if arr.dtype.names:
        cols = [(k, name, arr[name]) for k, name in enumerate(arr.dtype.names)]
    elif arr.ndim == 1:
        cols = [(0, "", arr)]
    elif arr.ndim == 2:
        arr = arr if arr.shape[0] >= arr.shape[1] else arr.T  # the longer axis is time
        cols = [(k, "", arr[:, k]) for k in range(arr.shape[1])]
    else:
        raise RecordingError(f"{base} holds a {arr.ndim}-D array of shape {arr.shape}: save a 1-D series or a 2-D array of columns")
    if any(c[2].ndim != 1 or c[2].dtype.kind not in "biuf" for c in cols):
        raise RecordingError(f"{base} holds {arr.dtype} data, not real numbers: save a numeric array")
    if len(cols) == 1:
        return _Contents("npy", [(0, _Series("signal", cols[0][2].astype(float)))], [])
    return _table([(k, h, "number", v.astype(float)) for k, h, v in cols], "npy", time_column, base)


def _read_wav(data: bytes, base: str) -> _Contents:
    from scipy.io import wavfile

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            rate, arr = wavfile.read(io.BytesIO(data))
    except Exception as exc:  # scipy's reader raises many types (struct.error, ValueError, ...) for damaged files
        raise RecordingError(f"{base} could not be read as .wav ({' '.join(str(exc).split())[:200]}): "
                             "check the file is complete, or export it again as PCM .wav") from None
    if rate <= 0 or arr.size == 0:
        raise RecordingError(f"{base} has no samples or a sample rate of {rate}: give a .wav with audio data")
    arr = arr.reshape(arr.shape[0], -1)
    series = [
        (k, _Series(f"channel_{k}", arr[:, k].astype(float), "1", f"channel {k} (raw counts)",
                    time_unit="s", interval=1.0 / rate))
        for k in range(arr.shape[1])
    ]
    return _Contents("wav", series, [])


__all__ = ["load_recording", "describe_source", "FORMATS", "FORMAT_NAMES"]
