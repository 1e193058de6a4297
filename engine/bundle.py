"""Bundles: one zip that holds an analysis and reproduces it.

Members (and nothing else): ``manifest.json`` (format version, software versions,
SHA-256 and size of every other member), ``recording.nc`` (the recording as
loaded), ``diagnostics.nc``, ``results.nc`` (NetCDF4), ``settings.json``,
``summary.json`` and ``report.html`` (self-contained).

Writing is atomic (a temporary file in the target folder, then ``os.replace``).
Reading never trusts the archive: member names must be exactly the known ones,
sizes are capped before anything is inflated, and every hash must match.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import platform
import re
import zipfile
from pathlib import Path

import xarray as xr

from . import __version__
from .errors import BundleError, LagspaceError
from .preparation import prepare
from .settings import Settings

FORMAT = "lagspace-bundle"
FORMAT_VERSION = 1
DATA_MEMBERS = ("recording.nc", "diagnostics.nc", "results.nc", "settings.json", "summary.json", "report.html")
OPTIONAL_MEMBERS = ("results.nc",)
MAX_INFLATED = 2_000_000_000  # bytes, all members together
MAX_RATIO = 200  # inflated / compressed, per member
MAX_VALUES = 50_000_000  # numbers in one NetCDF member, all variables together
AGAIN = "open the bundle as lagspace wrote it (download or write it again)"


def _software() -> dict:
    import numba
    import numpy
    import scipy

    return {"lagspace": __version__, "python": platform.python_version(), "numpy": numpy.__version__,
            "scipy": scipy.__version__, "xarray": xr.__version__, "numba": numba.__version__}


def _netcdf_bytes(ds: xr.Dataset) -> bytes:
    # Inside a dask.distributed worker xarray would take a cluster-wide lock named after
    # the in-memory target, which the scheduler does not know; the data are in memory,
    # so the local synchronous scheduler (and a plain thread lock) is the right one.
    import dask

    with dask.config.set(scheduler="synchronous"):
        return bytes(ds.to_netcdf(engine="h5netcdf"))


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def bundle_members(analysis) -> dict:
    """The bundle's members as ``{name: bytes}`` (without the manifest)."""
    from .report import report_html

    members = {
        "recording.nc": _netcdf_bytes(analysis.recording),
        "diagnostics.nc": _netcdf_bytes(analysis.diagnostics),
        "settings.json": analysis.settings.to_json().encode(),
        "summary.json": json.dumps(analysis.summary, indent=2, allow_nan=False).encode(),
        "report.html": report_html(analysis).encode(),
    }
    if analysis.results is not None:
        members["results.nc"] = _netcdf_bytes(analysis.results)
    return members


def bundle_bytes(analysis) -> bytes:
    """The whole bundle as bytes (what the dashboard offers for download)."""
    members = bundle_members(analysis)
    manifest = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "software": _software(),
        "seed": analysis.settings.seed,
        "members": {name: {"sha256": _sha256(data), "bytes": len(data)} for name, data in members.items()},
    }
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("manifest.json", json.dumps(manifest, indent=2))
        for name, data in members.items():
            zf.writestr(name, data)
    return buf.getvalue()


def write_bundle(analysis, path) -> Path:
    """Write the bundle of ``analysis`` to ``path`` atomically."""
    return write_bundle_bytes(bundle_bytes(analysis), path)


def write_bundle_bytes(data: bytes, path) -> Path:
    """Write bundle bytes to ``path`` atomically: either the whole zip appears, or nothing."""
    path = Path(path)
    if path.suffix.lower() != ".zip":
        raise LagspaceError(f"a bundle is a .zip file; got {path.name!r}, try {path.with_suffix('.zip').name!r}")
    folder = path.parent
    if not folder.is_dir():
        raise LagspaceError(f"folder {str(folder)!r} does not exist; create it or choose another place for the bundle")
    tmp = os.path.join(folder, f".lagspace-{os.urandom(8).hex()}.zip.part")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # the umask applies, as to any file the user writes
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def is_bundle(path) -> bool:
    """True when ``path`` is a zip whose members include a lagspace manifest."""
    try:
        with zipfile.ZipFile(path) as zf:
            return "manifest.json" in zf.namelist()
    except Exception:  # zipfile raises many types (BadZipFile, ValueError, UnicodeDecodeError...) for damaged zips
        return False


def _brief(exc: Exception) -> str:
    """An exception as one short line: its type and first words."""
    text = re.sub(r"<ZipInfo[^>]*>", "member", " ".join(str(exc).split()))
    return f"{type(exc).__name__}: {text[:120]}"


def _read_members(source, max_inflated: int) -> dict:
    try:
        zf = zipfile.ZipFile(io.BytesIO(source) if isinstance(source, (bytes, bytearray)) else source)
    except Exception as exc:  # zipfile raises many types for damaged archives
        raise BundleError(f"not a readable zip file ({_brief(exc)}); open a bundle downloaded from lagspace") from None
    with zf:
        infos = zf.infolist()
        allowed = set(DATA_MEMBERS) | {"manifest.json"}
        for info in infos:
            if info.filename not in allowed:
                raise BundleError(f"bundle member {info.filename!r} is not one lagspace writes (a bundle holds "
                                  f"only {', '.join(sorted(allowed))}): {AGAIN}")
        if len({i.filename for i in infos}) != len(infos):
            raise BundleError("bundle lists a member twice; open a bundle downloaded from lagspace")
        total = sum(i.file_size for i in infos)
        if total > max_inflated:
            raise BundleError(f"bundle would inflate to {total / 1e6:.0f} MB, over the limit of "
                              f"{max_inflated / 1e6:.0f} MB; open a smaller bundle or raise the limit")
        for info in infos:
            if info.file_size > MAX_RATIO * max(info.compress_size, 1) + 1_000_000:
                raise BundleError(f"bundle member {info.filename!r} inflates {info.file_size / max(info.compress_size, 1):.0f}"
                                  f" times its size, which no lagspace bundle does; it may be a zip bomb: {AGAIN}")
        out = {}
        for info in infos:
            try:
                with zf.open(info) as fh:
                    data = fh.read(info.file_size + 1)
            except Exception as exc:  # BadZipFile, zlib.error, NotImplementedError (method), RuntimeError (encrypted)...
                raise BundleError(f"bundle member {info.filename!r} cannot be read ({_brief(exc)}): {AGAIN}") from None
            if len(data) != info.file_size:
                raise BundleError(f"bundle member {info.filename!r} does not have the size its header says: {AGAIN}")
            out[info.filename] = data
    return out


def read_bundle(source, *, max_inflated: int = MAX_INFLATED):
    """Read a bundle (path or bytes) back into an :class:`engine.analysis.Analysis`.

    Raises :class:`BundleError` for anything malformed, tampered with or unsafe.
    """
    from .summary import summarise

    members = _read_members(source, max_inflated)
    if "manifest.json" not in members:
        raise BundleError("bundle has no manifest.json; open a bundle downloaded from lagspace")
    try:
        manifest = json.loads(members["manifest.json"])
    except (json.JSONDecodeError, UnicodeDecodeError, RecursionError):  # RecursionError: nested too deep
        raise BundleError(f"bundle manifest is not valid JSON: {AGAIN}") from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise BundleError(f"bundle manifest does not describe a lagspace bundle: {AGAIN}")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise BundleError(f"bundle format version {manifest.get('format_version')!r} is not supported "
                          f"(this lagspace reads version {FORMAT_VERSION}): open it with the lagspace that wrote it")
    listed = manifest.get("members")
    if not isinstance(listed, dict):
        raise BundleError(f"bundle manifest lists no members: {AGAIN}")
    required = set(DATA_MEMBERS) - set(OPTIONAL_MEMBERS)
    missing = sorted((required | set(listed)) - set(members))
    if missing:
        raise BundleError(f"bundle lacks {', '.join(map(repr, missing))}: {AGAIN}")
    for name in members:
        if name == "manifest.json":
            continue
        entry = listed.get(name)
        if not isinstance(entry, dict) or entry.get("sha256") != _sha256(members[name]):
            raise BundleError(f"bundle member {name} does not match its SHA-256 in the manifest, so the bundle "
                              f"was changed or damaged: {AGAIN}")
    try:
        settings = Settings.from_json(members["settings.json"].decode())
    except (LagspaceError, UnicodeDecodeError, RecursionError) as exc:
        raise BundleError(f"bundle settings cannot be read ({' '.join(str(exc).split())[:300]}): {AGAIN}") from None
    recording = _open_netcdf(members["recording.nc"], "recording.nc")
    diagnostics = _open_netcdf(members["diagnostics.nc"], "diagnostics.nc")
    results = _open_netcdf(members["results.nc"], "results.nc") if "results.nc" in members else None
    try:
        prepared = prepare(recording, settings)
        summary = summarise(prepared, diagnostics, results, settings)
    except (LagspaceError, KeyError, TypeError, ValueError, AttributeError, IndexError, ArithmeticError,
            RecursionError) as exc:  # what forged JSON attributes (a list for a dict, 1e400...) raise
        raise BundleError(f"bundle contents are inconsistent ({_brief(exc)}): {AGAIN}") from None
    from .analysis import Analysis  # the whole chain: imported only once the archive is found sound

    return Analysis(recording, settings, prepared, diagnostics, results, summary)


def _open_netcdf(data: bytes, name: str) -> xr.Dataset:
    import h5py

    try:
        # h5py first: it sizes the variables before anything is read (compressed data can inflate
        # far beyond the member), and it refuses damaged files without the noise h5netcdf leaves on stderr
        with h5py.File(io.BytesIO(data), "r") as f:
            values = sum(v.size for v in f.values() if isinstance(v, h5py.Dataset))
        if values <= MAX_VALUES:
            with xr.open_dataset(io.BytesIO(data), engine="h5netcdf") as ds:
                return ds.load()
    except Exception as exc:  # h5py raises many types for damaged files
        raise BundleError(f"bundle member {name} is not readable NetCDF ({type(exc).__name__}): {AGAIN}") from None
    raise BundleError(f"bundle member {name} holds {values} numbers, more than the limit of {MAX_VALUES} "
                      f"(a lagspace bundle holds far fewer): {AGAIN}")
