"""The lagspace benchmark: stage timings, speed-up against scipy, peak memory.

    python tests/perf/bench.py            # the full table (several minutes)
    python tests/perf/bench.py --quick    # smaller sizes, no N = 1e6
    python tests/perf/bench.py --only "box counting"

Every case runs in a fresh subprocess, so the peak memory (VmHWM) is that
case's alone; the numba kernels are warmed up there before the clock starts,
and cases under a second report the best of a few runs. Baselines run once,
in their own subprocess. Stages that report against N get a fitted growth
exponent (time ~ N^k). The data are the Lorenz x component (dt = 0.01).

To add a stage, write ``run(x, n) -> dict`` (``{"result": array or None}``)
and, optionally, a scipy ``baseline(x, n, ours)`` whose result must equal
it, and append a ``Stage`` to STAGES. Not part of the test suite (pytest does
not collect this file).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Optional

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent.parent), str(HERE.parent)]

DELAY, THEILER, MAX_DIM, REFERENCE_POINTS = 16, 100, 10, 5000
MIN_FIT_TIME = 0.01


# -- the stages --------------------------------------------------------------------
# run(x, n) and baseline(x, n, ours) return {"result": array or None, ...}; a
# baseline's "time" (if given) replaces the wall time of the whole call.

def _sums(x, reference_points):
    from engine.correlation import correlation_sums

    ds = correlation_sums(x, DELAY, MAX_DIM, theiler=THEILER, reference_points=reference_points, seed=0)
    return {"result": ds["pair_count"].values, "radii": ds["radius"].values}


def _ckdtree_sums(x, reference_points, ours):
    """cKDTree.count_neighbors(p=inf) once per m with the radii correlation_sums chose.

    Only the tree work is timed; the Theiler band (pairs with |i - j| <= w,
    which count_neighbors cannot leave out) is taken off afterwards, untimed.
    """
    from scipy.spatial import cKDTree

    radii, n = ours["radii"], x.size - (MAX_DIM - 1) * DELAY
    rows = None
    if reference_points is not None and reference_points < n:
        # the rule of correlation_sums: seeded choice without replacement, sorted
        rows = np.sort(np.random.default_rng(0).choice(n, size=reference_points, replace=False))
    counts, elapsed = [], 0.0
    for m in range(1, MAX_DIM + 1):
        v = np.stack([x[k * DELAY:k * DELAY + n] for k in range(m)], axis=1)
        start = time.perf_counter()
        tree = cKDTree(v)
        ordered = (tree if rows is None else cKDTree(v[rows])).count_neighbors(tree, radii, p=np.inf)
        elapsed += time.perf_counter() - start
        counts.append(ordered - _band(v, radii, rows))
    counts = np.array(counts)
    return {"result": counts // 2 if rows is None else counts, "time": elapsed}


def _band(v, radii, rows):
    """Ordered pairs with |i - j| <= THEILER (self-pairs included) closer than each radius."""
    n = v.shape[0]
    idx = np.arange(n) if rows is None else rows
    out = np.zeros(radii.size, dtype=np.int64)
    for g in range(-THEILER, THEILER + 1):
        j = idx + g
        ok = (j >= 0) & (j < n)
        d = np.sort(np.abs(v[j[ok]] - v[idx[ok]]).max(axis=1))
        out += np.searchsorted(d, radii, side="right")
    return out


def _boxes(x, n):
    from engine.boxcount import box_counts

    return {"result": box_counts(x, DELAY, 3)["box_count"].values}


def _analysis(x, n):
    """The default standard analysis; the time of each of its stages is read off its progress messages."""
    from engine.analysis import run_standard_analysis
    from engine.recording import make_recording

    marks = []
    run_standard_analysis(make_recording(x, sampling_interval=0.01, time_unit="s"),
                          progress=lambda f, message: marks.append((time.perf_counter(), message)))
    stages, current = {}, None
    for (t0, message), (t1, _) in zip(marks, marks[1:]):
        current = message if message in ANALYSIS_STAGES else current  # inner messages count to their stage
        if current:
            stages[current] = stages.get(current, 0.0) + t1 - t0
    return {"result": None, "stages": stages}


ANALYSIS_STAGES = ("autocorrelation", "mutual information", "false nearest neighbours", "Cao's E1 and E2",
                   "space-time separation", "correlation sums", "box counting", "divergence of neighbours",
                   "surrogate data test", "recurrence quantification")


def _neighbour_work(x, n):
    """False neighbours, Cao's E1/E2 (m = 1..10) and Rosenstein divergence (m = 2..4)."""
    from engine.dimension import cao, false_nearest_neighbours
    from engine.lyapunov import divergence_rosenstein

    false_nearest_neighbours(x, DELAY, MAX_DIM, theiler=THEILER)
    cao(x, DELAY, MAX_DIM, theiler=THEILER)
    divergence_rosenstein(x, DELAY, [2, 3, 4], THEILER, steps=300)
    return {"result": None}


def _ckdtree_one_pass(x, n, ours):
    """One cKDTree.count_neighbors pass at m = 4 with 16 radii (the yardstick for the whole analysis)."""
    from scipy.spatial import cKDTree

    m, k = 4, x.size - 3 * DELAY
    v = np.stack([x[j * DELAY:j * DELAY + k] for j in range(m)], axis=1)
    radii = np.geomspace(0.01, 0.25, 16) * np.ptp(x)
    start = time.perf_counter()
    cKDTree(v).count_neighbors(cKDTree(v), radii, p=np.inf)
    return {"result": None, "time": time.perf_counter() - start}


@dataclass
class Stage:
    name: str
    run: Callable
    sizes: list
    quick_sizes: list
    baseline: Optional[Callable] = None
    fit_growth: bool = False


STAGES = [
    Stage("correlation sums m=1..10, all pairs", lambda x, n: _sums(x, None), [50_000], [10_000],
          baseline=lambda x, n, ours: _ckdtree_sums(x, None, ours)),
    Stage(f"correlation sums m=1..10, {REFERENCE_POINTS} ref. points",
          lambda x, n: _sums(x, REFERENCE_POINTS), [50_000], [10_000],
          baseline=lambda x, n, ours: _ckdtree_sums(x, REFERENCE_POINTS, ours)),
    Stage(f"correlation sums, {REFERENCE_POINTS} ref. points, vs N", lambda x, n: _sums(x, REFERENCE_POINTS),
          [1_000, 10_000, 100_000, 1_000_000], [1_000, 10_000, 100_000], fit_growth=True),
    Stage("box counting m=3, 16 sizes, vs N", _boxes,
          [1_000, 10_000, 100_000, 1_000_000], [1_000, 10_000, 100_000], fit_growth=True),
    Stage("nearest neighbours: FNN + Cao m=1..10, divergence", _neighbour_work, [50_000], [10_000],
          fit_growth=False),
    Stage("standard analysis vs one cKDTree pass (m=4, 16 r)", _analysis, [50_000], [10_000],
          baseline=_ckdtree_one_pass),
    Stage("standard analysis, vs N", _analysis, [1_000, 10_000, 100_000, 1_000_000], [1_000, 10_000],
          fit_growth=True),
]


# -- running a case in a child process ------------------------------------------------

def _lorenz(n, cache: Path) -> Path:
    """Lorenz x (dt = 0.01) of n samples, made once and kept for the children."""
    path = cache / f"lorenz_{n}.npy"
    if not path.exists():
        from systems import lorenz

        np.save(path, np.asarray(lorenz(n)))
    return path


def _peak_mb():
    """Peak resident memory of this process in MB (VmHWM: ru_maxrss would count the parent's at fork)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _child(stage_index, which, n, data, ours_path, out):
    stage = STAGES[stage_index]
    x = np.load(data)
    if which == "run":
        stage.run(x[:3000], 3000)  # load the compiled kernels before the clock starts
        func = stage.run
    else:
        ours = dict(np.load(ours_path))
        func = lambda x, n: stage.baseline(x, n, ours)  # noqa: E731
    runs = []
    while not runs or (which == "run" and sum(runs) < 1.0 and len(runs) < 5):  # short: best of a few
        start = time.perf_counter()
        got = func(x, n)
        runs.append(got.get("time", time.perf_counter() - start))
    np.savez(out, **{k: v for k, v in got.items() if isinstance(v, np.ndarray)})
    print(json.dumps({"time": min(runs), "peak_mb": _peak_mb(), "stages": got.get("stages", {})}))


def _spawn(stage_index, which, n, data, ours_path, out):
    cmd = [sys.executable, __file__, "--child", str(stage_index), which, str(n), str(data), str(ours_path), str(out)]
    done = subprocess.run(cmd, capture_output=True, text=True)
    if done.returncode != 0:
        return {"error": (done.stderr.strip().splitlines() or ["failed"])[-1]}
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller sizes, no N = 1e6")
    parser.add_argument("--only", default="", help="run only stages whose name contains this text")
    parser.add_argument("--child", nargs=6, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        i, which, n, data, ours_path, out = args.child
        return _child(int(i), which, int(n), data, ours_path, out)

    header = f"{'stage':<48} {'N':>9} {'time s':>9} {'scipy s':>9} {'ratio':>8} {'peak MB':>8}  note"
    print(header + "\n" + "-" * len(header))
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for i, stage in enumerate(STAGES):
            if args.only and args.only not in stage.name:
                continue
            times, per_stage = [], {}
            for n in (stage.quick_sizes if args.quick else stage.sizes):
                data = _lorenz(n, tmp)
                ours_path, base_path = tmp / "ours.npz", tmp / "base.npz"
                ours = _spawn(i, "run", n, data, ours_path, ours_path)
                if "error" in ours:
                    print(f"{stage.name:<48} {n:>9} {'':>9} {'':>9} {'':>8} {'':>8}  error: {ours['error']}")
                    continue
                times.append((n, ours["time"]))
                base_t, ratio, note = "", "", ""
                if stage.baseline is not None:
                    base = _spawn(i, "baseline", n, data, ours_path, base_path)
                    if "error" in base:
                        note = f"baseline error: {base['error']}"
                    else:
                        mine, theirs = np.load(ours_path), np.load(base_path)
                        base_t, ratio = f"{base['time']:.2f}", f"{base['time'] / ours['time']:.1f}x"
                        note = f"scipy peak {base['peak_mb']:.0f} MB"
                        if "result" in mine and "result" in theirs:
                            same = np.array_equal(mine["result"], theirs["result"])
                            note = ("identical counts" if same else "COUNTS DIFFER") + "; " + note
                print(f"{stage.name:<48} {n:>9} {ours['time']:>9.2f} {base_t:>9} {ratio:>8} "
                      f"{ours['peak_mb']:>8.0f}  {note}", flush=True)
                for name, seconds in ours.get("stages", {}).items():
                    per_stage.setdefault(name, []).append((n, seconds))
                    print(f"{'  ' + name:<48} {n:>9} {seconds:>9.2f}")
            if stage.fit_growth:
                _print_growth(stage.name, times)
                for name, pairs in per_stage.items():
                    _print_growth("  " + name, pairs)


def _print_growth(name, times):
    """Fitted exponent k of time ~ N^k over the cases that took at least MIN_FIT_TIME."""
    timed = [(n, t) for n, t in times if t >= MIN_FIT_TIME]
    if len(timed) >= 2:
        n, t = np.log(np.array(timed)).T
        print(f"{name:<48} growth exponent: time ~ N^{np.polyfit(n, t, 1)[0]:.2f} "
              f"(fitted over N = {', '.join(f'{v:.0e}' for v, _ in timed)}; times under "
              f"{MIN_FIT_TIME} s are mostly overhead)")


if __name__ == "__main__":
    main()
