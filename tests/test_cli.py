"""The command line: the JSON contract of `lagspace analyze`, and one-line errors with exit 2."""

import json
import os
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import systems

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_data"


def run(*args, cwd=None):
    """Run `lagspace ...` as a user would (through the module, so no PATH is needed)."""
    return subprocess.run([sys.executable, "-m", "engine.cli", *map(str, args)], capture_output=True,
                          text=True, cwd=cwd, timeout=600, env={**os.environ, "PYTHONPATH": str(REPO)})


@pytest.fixture(scope="module")
def lorenz_csv(tmp_path_factory):
    # Lorenz (1963) x at dt = 0.01 made with scipy.integrate.solve_ivp (tests/systems.py).
    path = tmp_path_factory.mktemp("cli") / "lorenz.csv"
    x = systems.lorenz(6000)
    t = 0.01 * np.arange(x.size)
    np.savetxt(path, np.column_stack([t, x]), delimiter=",", header="time_s,x", comments="")
    return path


def test_quick_json_contract(lorenz_csv):
    out = run("analyze", lorenz_csv, "--json", "--quick")
    assert out.returncode == 0, out.stderr
    s = json.loads(out.stdout)
    assert s["input"]["samples"] == 6000
    assert s["input"]["sampling_interval"] == pytest.approx(0.01)
    assert s["input"]["time_unit"] == "s"
    # Lorenz x at dt = 0.01: first minimum of mutual information about 16-17 samples (common practice, memory).
    assert 14 <= s["delay"]["samples"] <= 19
    assert s["delay"]["time"] == pytest.approx(0.01 * s["delay"]["samples"])
    # Lorenz: embedding dimension 3 works (Kennel et al. 1992; common practice).
    assert s["embedding_dimension"]["value"] == 3
    for key in ("method", "reason"):
        assert s["delay"][key] and s["embedding_dimension"][key]
    assert isinstance(s["warnings"], list)


def test_full_summary_and_bundle(tmp_path):
    # Hénon map (Hénon 1976), written as a plain one-column file with no header.
    path = tmp_path / "henon.txt"
    np.savetxt(path, systems.henon(4000))
    bundle = tmp_path / "out.zip"
    out = run("analyze", path, "--json", "--surrogates", "19", "--seed", "3", "--bundle", bundle)
    assert out.returncode == 0, out.stderr
    s = json.loads(out.stdout)
    for key in ("input", "delay", "embedding_dimension", "theiler_window", "correlation_dimension",
                "correlation_entropy", "capacity_dimension", "largest_lyapunov_exponent", "surrogate_test",
                "recurrence", "warnings", "verdict"):
        assert key in s
    assert s["surrogate_test"]["surrogates"] == 19 and s["seed"] == 3
    again = run("analyze", bundle, "--json")
    assert again.returncode == 0, again.stderr
    assert json.loads(again.stdout) == s


def test_demo_files_analyse():
    files = sorted(p for p in DEMO.iterdir() if p.suffix in (".nc", ".csv"))
    assert files, "demo_data/ holds no recordings"
    for path in files:
        out = run("analyze", path, "--json", "--quick")
        assert out.returncode == 0, f"{path.name}: {out.stderr}"
        assert json.loads(out.stdout)["input"]["samples"] > 1000


@pytest.mark.parametrize("content,name", [
    (b"", "empty.csv"),
    (b"time,value\n", "header_only.csv"),
    (b"hello,world\nfoo,bar\n", "words.csv"),
    (bytes(np.random.default_rng(0).integers(0, 256, 4000, dtype=np.uint8)), "random.nc"),
    ("\n".join(["1.0"] * 2000).encode(), "constant.csv"),
    (b"1\n2\n3\n", "short.csv"),
])
def test_bad_input_one_line_exit_2(tmp_path, content, name):
    path = tmp_path / name
    path.write_bytes(content)
    out = run("analyze", path, "--json")
    assert out.returncode == 2
    assert out.stdout == ""
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), out.stderr
    assert "Traceback" not in out.stderr


def test_pickled_npy_is_refused_not_loaded(tmp_path):
    path = tmp_path / "evil.npy"
    np.save(path, np.array([{"a": 1}, None], dtype=object), allow_pickle=True)
    marker = tmp_path / "ran"
    assert not marker.exists()
    out = run("analyze", path)
    assert out.returncode == 2 and out.stderr.startswith("error: ") and "Traceback" not in out.stderr
    assert len(out.stderr.strip().splitlines()) == 1
    assert pickle  # the file was written with pickle; lagspace must never unpickle it


@pytest.mark.parametrize("args", [
    ["analyze"],
    ["analyze", "missing-file.csv"],
    ["frobnicate"],
    ["analyze", "X", "--delay", "zero"],
])
def test_usage_errors(args):
    out = run(*args)
    assert out.returncode == 2
    assert len(out.stderr.strip().splitlines()) == 1 and out.stderr.startswith("error: ")


def test_bad_setting_value(lorenz_csv):
    out = run("analyze", lorenz_csv, "--delay", "0")
    assert out.returncode == 2 and "delay" in out.stderr and "Traceback" not in out.stderr


def test_max_gap_option_fills_longer_gaps(tmp_path):
    # a 5-sample gap is refused by --fill-gaps alone (default max gap 3) and filled with --max-gap 5
    x = systems.lorenz(3000, dt=0.01)
    rows = [f"{0.01 * i:.2f},{'' if 1000 <= i < 1005 else f'{v:.9g}'}" for i, v in enumerate(x)]
    path = tmp_path / "gap.csv"
    path.write_text("time_s,x_V\n" + "\n".join(rows) + "\n")
    refused = run("analyze", str(path), "--fill-gaps", "--quick", cwd=tmp_path)
    assert refused.returncode == 2 and "longer than 3 samples" in refused.stderr
    assert "set a max gap that long" in refused.stderr
    filled = run("analyze", str(path), "--max-gap", "5", "--quick", "--json", cwd=tmp_path)
    assert filled.returncode == 0, filled.stderr
    steps = [step["step"] for step in json.loads(filled.stdout)["input"]["preparation"]]
    assert "fill_gaps" in steps


def test_detrend_option_reaches_the_preparation(lorenz_csv):
    out = run("analyze", lorenz_csv, "--detrend", "linear", "--quick", "--json")
    assert out.returncode == 0, out.stderr
    steps = json.loads(out.stdout)["input"]["preparation"]
    assert {"step": "detrend", "kind": "linear"}.items() <= next(s for s in steps if s["step"] == "detrend").items()
    bad = run("analyze", lorenz_csv, "--detrend", "cubic")
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1 and "invalid choice" in bad.stderr
