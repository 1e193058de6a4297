"""The ``lagspace`` command line: ``serve``, ``analyze`` and ``batch``.

Bad input or usage exits with status 2 and one ``error: ...`` line on stderr,
never a traceback. ``serve`` and ``batch`` import the dashboard and dask only
when they are used, so ``analyze`` stays light.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import warnings
from pathlib import Path

from .errors import LagspaceError
from .settings import DETREND_KINDS, Settings


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose usage errors are one line and exit 2."""

    def error(self, message):  # noqa: D401 - argparse API
        raise _UsageError(message)


class _UsageError(Exception):
    pass


def _analysis_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--variable", help="which variable/column to analyse (name or 0-based index)")
    p.add_argument("--sampling-interval", type=float, metavar="DT",
                   help="time between samples, when the file does not say")
    p.add_argument("--delay", type=int, metavar="N", help="use this delay in samples instead of estimating it")
    p.add_argument("--dimension", type=int, metavar="M", help="use this embedding dimension instead of estimating it")
    p.add_argument("--theiler", type=int, metavar="W", help="Theiler window in samples (default: estimated)")
    p.add_argument("--surrogates", type=int, metavar="K", help="number of surrogates (default 39; 0 skips the test)")
    p.add_argument("--seed", type=int, metavar="S", help="seed for every random choice (default 0)")
    p.add_argument("--resample", action="store_true", help="resample unevenly sampled data onto a uniform grid")
    p.add_argument("--fill-gaps", action="store_true", help="interpolate short runs of missing values")
    p.add_argument("--detrend", choices=DETREND_KINDS, metavar="KIND",
                   help="remove nothing, the mean (default) or a straight-line trend: none, mean or linear")
    p.add_argument("--max-gap", type=int, metavar="N",
                   help=f"longest run of missing samples --fill-gaps may interpolate (default {Settings.max_gap}; "
                        "implies --fill-gaps)")


def _parser() -> _Parser:
    p = _Parser(prog="lagspace", description="Delay-coordinate embedding of one measured channel.")
    sub = p.add_subparsers(dest="command", parser_class=_Parser)
    sub.required = True

    s = sub.add_parser("serve", help="start the dashboard in the browser")
    s.add_argument("--address", default="127.0.0.1", help="address to bind (default 127.0.0.1, this machine only)")
    s.add_argument("--port", type=int, default=5006)
    s.add_argument("--password-file", metavar="F", help="file holding the password that protects the dashboard")
    s.add_argument("--allow-unprotected", action="store_true",
                   help="accept the risk of serving a non-local address without a password")
    s.add_argument("--demo", action="store_true", help="open with a demo recording loaded")
    s.add_argument("--show", action="store_true", help="open a browser tab")
    s.add_argument("--max-upload-mb", type=float, default=200, metavar="MB",
                   help="largest file a user may upload, in megabytes (default 200)")
    s.add_argument("--max-samples", type=int, default=10_000_000, metavar="N",
                   help="most samples one recording may hold (default 10000000)")

    a = sub.add_parser("analyze", help="analyse one recording and print the summary")
    a.add_argument("input", metavar="INPUT", help="CSV/TSV/TXT, NetCDF, .npy, .wav, or a lagspace bundle (.zip)")
    _analysis_options(a)
    a.add_argument("--json", action="store_true", help="print the summary as one JSON object")
    a.add_argument("--bundle", metavar="OUT.zip", help="also write the bundle (data, results, report) here")
    a.add_argument("--quick", action="store_true",
                   help="only estimate delay and embedding dimension (skip the invariants)")

    b = sub.add_parser("batch", help="analyse many recordings on a dask cluster")
    b.add_argument("inputs", nargs="+", metavar="INPUT")
    b.add_argument("--out", required=True, metavar="DIR", help="folder for the bundles and the summary table")
    b.add_argument("--scheduler", metavar="ADDRESS", help="address of a running dask scheduler (default: start a local one)")
    b.add_argument("--workers", type=int, default=2, metavar="N", help="workers of the local cluster (default 2)")
    _analysis_options(b)
    return p


def settings_overrides(args) -> dict:
    """The settings that command-line options set explicitly, as ``{name: value}``."""
    changes = {}
    for name in ("variable", "sampling_interval", "delay", "dimension", "theiler", "surrogates", "seed", "max_gap",
                 "detrend"):
        value = getattr(args, name, None)
        if value is not None:
            changes[name] = value
    for flag in ("resample", "fill_gaps"):
        if getattr(args, flag, False):
            changes[flag] = True
    if "max_gap" in changes:
        changes["fill_gaps"] = True
    return changes


def _analyze(args) -> int:
    from . import analysis

    path = Path(args.input)
    if not path.is_file():
        raise LagspaceError(f"no such file: {args.input}; give the path of a recording or a bundle")
    result = analysis.analyse_file(path, settings_overrides(args), quick=args.quick)
    if args.bundle:
        from .bundle import write_bundle

        write_bundle(result, args.bundle)
    if args.json:
        print(json.dumps(result.summary, indent=2, allow_nan=False))
    else:
        from .summary import format_text

        print(format_text(result.summary))
    return 0


def _serve(args) -> int:
    from dashboard.server import serve

    serve(address=args.address, port=args.port, demo=args.demo, show=args.show,
          password_file=args.password_file, allow_unprotected=args.allow_unprotected,
          max_upload_mb=args.max_upload_mb, max_samples=args.max_samples)
    return 0


def _batch(args) -> int:
    from .batch import run_batch

    return run_batch(args)


def main(argv=None) -> int:
    parser = _parser()
    try:
        args = parser.parse_args(argv)
        if args.command == "serve":
            return _serve(args)
        return _warnings_after({"analyze": _analyze, "batch": _batch}[args.command], args)
    except BrokenPipeError:  # the reader went away (`lagspace analyze f | head`): nothing more to say
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())  # as the signal module's docs advise
        return 1
    except _UsageError as exc:
        print(f"error: {_one_line(exc)}; see `lagspace {_command(argv)}--help`", file=sys.stderr)
    except LagspaceError as exc:
        print(f"error: {_one_line(exc)}", file=sys.stderr)
    except (OSError, MemoryError) as exc:
        print(f"error: {type(exc).__name__}: {_one_line(exc)}", file=sys.stderr)
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    return 2


def _warnings_after(handler, args) -> int:
    """Run ``handler``; warnings raised on the way are printed after a success, one line each,
    and dropped after an error, whose single ``error:`` line is all that bad input gets."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        code = handler(args)
    for text in dict.fromkeys(_one_line(f"{w.category.__name__}: {w.message}") for w in caught):
        print(f"warning: {text}", file=sys.stderr)
    return code


def _one_line(exc) -> str:
    """The message on one line, whatever line breaks a file name or header smuggled into it."""
    return " ".join(str(exc).split())


def _command(argv) -> str:
    argv = sys.argv[1:] if argv is None else argv
    return f"{argv[0]} " if argv and argv[0] in ("serve", "analyze", "batch") else ""


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
