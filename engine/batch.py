"""``lagspace batch``: many recordings with the same settings, on dask.distributed.

One task per input (and per channel of a file that holds several). Workers return
the bundle as bytes and one table row; the client writes every bundle atomically
into ``--out`` and the table as ``summary.csv`` and ``summary.nc``. A failing input
fills its row with the error and does not stop the others.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

from .errors import LagspaceError

TABLE_COLUMNS = [
    "input", "variable", "status", "error", "samples", "sampling_interval", "time_unit", "delay",
    "embedding_dimension", "theiler_window", "correlation_dimension", "correlation_dimension_uncertainty",
    "correlation_dimension_saturates", "capacity_dimension", "lyapunov_per_time_unit", "lyapunov_uncertainty",
    "surrogate_p_value", "rejects_linear_null", "warnings", "verdict", "bundle",
]


def plan_tasks(inputs, variable=None) -> list:
    """``(path, variable)`` pairs: one per input, or one per channel of a file holding several
    (up to MAX_CHANNELS; a file with more is one task, whose row says how to pick a channel)."""
    from .bundle import is_bundle
    from .loading import MAX_CHANNELS, describe_source

    tasks = []
    for name in inputs:
        path = Path(name)
        if not path.is_file():
            raise LagspaceError(f"no such file: {name}; give paths of recordings or bundles")
        if variable is None and not is_bundle(path):
            try:
                info = describe_source(path)
            except LagspaceError:
                info = {}  # the task itself reports the problem in its row
            if 1 < len(info.get("variables", [])) <= MAX_CHANNELS:
                tasks += [(str(path), v) for v in info["variables"]]
                continue
        tasks.append((str(path), variable))
    return tasks


def table_row(path: str, variable, summary: dict | None, error: str | None = None, bundle: str = "") -> dict:
    """One row of the summary table (missing numbers are None)."""
    row = dict.fromkeys(TABLE_COLUMNS)
    row.update(input=Path(path).name, variable=variable or "", status="failed" if error else "ok",
               error=error or "", bundle=bundle, warnings="", verdict="")
    if summary:
        inp = summary["input"]
        d2 = summary.get("correlation_dimension") or {}
        lle = summary.get("largest_lyapunov_exponent") or {}
        test = summary.get("surrogate_test") or {}
        row.update(
            variable=inp["variable"], samples=inp["samples"], sampling_interval=inp["sampling_interval"],
            time_unit=inp["time_unit"], delay=summary["delay"]["samples"],
            embedding_dimension=summary["embedding_dimension"]["value"],
            theiler_window=(summary.get("theiler_window") or {}).get("samples"),
            correlation_dimension=d2.get("value"), correlation_dimension_uncertainty=d2.get("uncertainty"),
            correlation_dimension_saturates=d2.get("saturates"),
            capacity_dimension=(summary.get("capacity_dimension") or {}).get("value"),
            lyapunov_per_time_unit=lle.get("per_time_unit"), lyapunov_uncertainty=lle.get("uncertainty"),
            surrogate_p_value=test.get("p_value"), rejects_linear_null=test.get("rejects_linear_null"),
            warnings="; ".join(summary["warnings"]), verdict=summary["verdict"],
        )
    return row


def analyse_task(path: str, variable, overrides: dict):
    """Run on a worker: analyse one (path, variable); return (summary, bundle bytes, error)."""
    from .analysis import analyse_file
    from .bundle import bundle_bytes

    overrides = dict(overrides)
    if variable is not None:
        overrides["variable"] = variable
    try:
        result = analyse_file(Path(path), overrides)
        return result.summary, bundle_bytes(result), None
    except LagspaceError as exc:
        return None, None, str(exc)
    except Exception as exc:  # one bad input must never stop the batch
        return None, None, f"{type(exc).__name__}: {exc}"


def bundle_name(path: str, variable, taken: set) -> str:
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", Path(path).stem)
    if variable:
        stem += "_" + re.sub(r"[^A-Za-z0-9_.-]+", "_", str(variable))
    name, k = f"{stem}.zip", 2
    while name in taken:
        name, k = f"{stem}_{k}.zip", k + 1
    taken.add(name)
    return name


def write_table(rows: list, out: Path) -> None:
    """Write the rows as ``summary.csv`` and ``summary.nc`` (dimension ``row``)."""
    import pandas as pd
    import xarray as xr

    frame = pd.DataFrame(rows, columns=TABLE_COLUMNS)
    frame.to_csv(out / "summary.csv", index=False)
    ds = xr.Dataset.from_dataframe(frame.rename_axis("row"))
    for name in ds.data_vars:
        if ds[name].dtype == object:
            ds[name] = ds[name].astype(str)
    ds.to_netcdf(out / "summary.nc", engine="h5netcdf")


def run_batch(args) -> int:
    """Entry point of ``lagspace batch``; returns the exit status (1 when any input failed)."""
    from dask.distributed import Client, LocalCluster, as_completed

    from .bundle import write_bundle_bytes
    from .cli import settings_overrides
    from .settings import Settings

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    overrides = settings_overrides(args)
    Settings(**overrides)  # validate once, before any task starts
    tasks = plan_tasks(args.inputs, overrides.get("variable"))
    cluster = None
    if args.scheduler:
        client = Client(args.scheduler, timeout="20s")
    else:
        cluster = LocalCluster(n_workers=max(1, args.workers), threads_per_worker=1, processes=True,
                               dashboard_address=None)
        client = Client(cluster)
    rows, taken = [None] * len(tasks), set()
    try:
        futures = {client.submit(analyse_task, p, v, overrides, pure=False): k
                   for k, (p, v) in enumerate(tasks)}
        for done, future in enumerate(as_completed(futures), start=1):
            k = futures[future]
            path, variable = tasks[k]
            summary, data, error = future.result()
            name = ""
            if data is not None:
                name = bundle_name(path, summary["input"]["variable"] if summary else variable, taken)
                write_bundle_bytes(data, out / name)
            rows[k] = table_row(path, variable, summary, error, name)
            print(f"[{done}/{len(tasks)}] {Path(path).name}{' ' + variable if variable else ''}: "
                  f"{'failed: ' + error if error else 'ok'}", file=sys.stderr, flush=True)
    except KeyboardInterrupt:
        print("error: interrupted; finished bundles are kept, the table lists what was done", file=sys.stderr)
        for k, (p, v) in enumerate(tasks):
            rows[k] = rows[k] or table_row(p, v, None, "interrupted")
        write_table(rows, out)
        return 130
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    write_table(rows, out)
    failed = sum(r["status"] != "ok" for r in rows)
    print(f"{len(rows) - failed} of {len(rows)} analysed; table in {out / 'summary.csv'}", file=sys.stderr)
    return 1 if failed else 0
