"""`lagspace batch` on a real dask LocalCluster and on a scheduler started as a separate process."""

import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import systems
from engine.bundle import read_bundle

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(REPO)}
FAST = ["--surrogates", "19", "--seed", "5"]


def lagspace(*args, timeout=600):
    return subprocess.run([sys.executable, "-m", "engine.cli", *map(str, args)], capture_output=True,
                          text=True, env=ENV, timeout=timeout)


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("batch_in")
    # Hénon map x (Hénon 1976) and a noisy sine: small, fast inputs.
    np.savetxt(folder / "henon.csv", systems.henon(2500))
    np.savetxt(folder / "wave.csv", systems.sine(2500, period=37.3, noise=0.05, seed=1))
    (folder / "broken.csv").write_text("no,numbers\nhere,at all\n")
    # One NetCDF file with two variables fans out into two tasks.
    xr.Dataset({"a": ("time", systems.henon(2500, a=1.4)), "b": ("time", systems.henon(2500, a=1.3))},
               coords={"time": np.arange(2500.0)}).to_netcdf(folder / "two.nc", engine="h5netcdf")
    return folder


def _check(out_dir: Path, inputs: Path):
    table = pd.read_csv(out_dir / "summary.csv")
    assert len(table) == 5  # henon, wave, broken, two.nc:a, two.nc:b
    broken = table[table["input"] == "broken.csv"].iloc[0]
    assert broken["status"] == "failed" and isinstance(broken["error"], str) and broken["error"]
    ok = table[table["status"] == "ok"]
    assert set(ok["input"]) == {"henon.csv", "wave.csv", "two.nc"}
    assert set(table[table["input"] == "two.nc"]["variable"]) == {"a", "b"}
    nc = xr.open_dataset(out_dir / "summary.nc", engine="h5netcdf")
    assert nc.sizes["row"] == 5
    # Same numbers as `lagspace analyze` on the same input and seed.
    single = lagspace("analyze", inputs / "henon.csv", "--json", *FAST)
    assert single.returncode == 0, single.stderr
    bundle = out_dir / ok[ok["input"] == "henon.csv"].iloc[0]["bundle"]
    assert read_bundle(bundle).summary == json.loads(single.stdout)


def test_local_cluster(inputs, tmp_path):
    out = lagspace("batch", *sorted(inputs.iterdir()), "--out", tmp_path, "--workers", "2", *FAST)
    assert out.returncode == 1, out.stderr  # one input fails on purpose
    assert "broken.csv: failed" in out.stderr
    _check(tmp_path, inputs)


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_separate_scheduler(inputs, tmp_path):
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs = [subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
                               "--port", str(port), "--dashboard-address", ":0"], env=ENV,
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)]
    try:
        time.sleep(3)
        procs.append(subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker", address,
                                       "--nthreads", "1", "--nworkers", "1", "--dashboard-address", ":0"],
                                      env=ENV, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        time.sleep(3)
        out = lagspace("batch", *sorted(inputs.iterdir()), "--out", tmp_path, "--scheduler", address, *FAST)
        assert out.returncode == 1, out.stderr
        _check(tmp_path, inputs)
    finally:
        for p in reversed(procs):
            p.terminate()
            p.wait(timeout=30)


def test_files_with_several_channels_fan_out_one_task_per_channel(tmp_path):
    from scipy.io import wavfile

    from engine.batch import plan_tasks
    from engine.loading import MAX_CHANNELS

    x = systems.henon(600)
    wavfile.write(tmp_path / "pair.wav", 1000, np.c_[x, -x].astype(np.float32))  # scipy writes the channels
    wavfile.write(tmp_path / "crowd.wav", 1000, np.tile(x[:100, None], MAX_CHANNELS + 1).astype(np.float32))
    (tmp_path / "two.csv").write_text("time_s,a,b\n" + "".join(f"{0.1 * i:.1f},{v:.6f},{2 * v:.6f}\n"
                                                                for i, v in enumerate(x)))
    np.savetxt(tmp_path / "one.csv", x)
    tasks = plan_tasks([tmp_path / n for n in ("pair.wav", "two.csv", "one.csv", "crowd.wav")])
    assert tasks == [(str(tmp_path / "pair.wav"), "channel_0"), (str(tmp_path / "pair.wav"), "channel_1"),
                     (str(tmp_path / "two.csv"), "a"), (str(tmp_path / "two.csv"), "b"),
                     (str(tmp_path / "one.csv"), None), (str(tmp_path / "crowd.wav"), None)]
    assert plan_tasks([tmp_path / "pair.wav"], variable="channel_1") == [(str(tmp_path / "pair.wav"), "channel_1")]
