"""Recording checks: each finding is triggered by a crafted case and only by it.

Thresholds are facts of the trade ("common practice": delay coordinates need
evenly sampled, gap-free, long enough series); the correlation-dimension ceiling
is 2 log10 N (Eckmann & Ruelle, Physica D 56 (1992) 185).
"""

import itertools
import json
import math

import numpy as np
import pytest

from engine.checks import (attach_checks, check_recording, check_trend, compact_positions, raise_if_refused,
                           refusals, true_runs)
from engine.errors import RecordingError
from engine.recording import UNSTATED, make_recording

from systems import ar1, henon, lorenz, white_noise

N = 3000


def codes(findings, severity=None):
    return {f["code"] for f in findings if severity is None or f["severity"] == severity}


def test_clean_chaotic_recording_passes():
    rec = make_recording(lorenz(N), sampling_interval=0.01, time_unit="s")
    findings = check_recording(rec)
    assert not refusals(findings)
    assert codes(findings) == {"dimension_ceiling"}
    ceiling = next(f for f in findings if f["code"] == "dimension_ceiling")["details"]["ceiling"]
    assert ceiling == pytest.approx(2 * math.log10(N), abs=1e-3)  # Eckmann & Ruelle (1992)
    json.dumps(findings)  # JSON-able


def test_too_short():
    findings = check_recording(make_recording(henon(199)))
    assert "too_short" in codes(findings, "refuse")  # a few hundred samples at least: common practice
    fewer = check_recording(make_recording(henon(200)))
    assert "too_short" not in codes(fewer) and "few_samples" in codes(fewer, "warn")
    assert "few_samples" not in codes(check_recording(make_recording(henon(2000))))


def test_missing_values_listed_compactly():
    x = white_noise(N)
    x[[10, 11, 12, 50]] = np.nan
    x[70] = np.inf
    (f,) = [f for f in check_recording(make_recording(x)) if f["code"] == "not_finite"]
    assert f["severity"] == "refuse"
    assert "10-12, 50, 70" in f["message"]
    assert f["details"]["nan"] == 4 and f["details"]["infinite"] == 1 and f["details"]["longest_run"] == 3
    assert "fill" in f["fix"]
    x[0] = np.nan
    (f,) = [f for f in check_recording(make_recording(x)) if f["code"] == "not_finite"]
    assert f["details"]["at_edge"] and "crop" in f["fix"]


def test_constant():
    assert "constant" in codes(check_recording(make_recording(np.full(N, 2.5))), "refuse")


def test_uneven_sampling_jitter_and_gaps():
    rng = np.random.default_rng(1)
    x = ar1(N, 0.9)
    jittered = np.cumsum(0.01 * (1 + 0.05 * rng.uniform(-1, 1, N)))
    (f,) = [f for f in check_recording(make_recording(x, jittered, time_unit="s")) if f["code"] == "uneven_sampling"]
    assert f["severity"] == "refuse" and "even sampling is required" in f["message"]
    assert 0.04 < f["details"]["max_relative_deviation"] < 0.06  # steps drawn within +-5% of nominal
    # 0.5% jitter is inside the default 1% tolerance
    small = np.cumsum(0.01 * (1 + 0.005 * rng.uniform(-1, 1, N)))
    assert "uneven_sampling" not in codes(check_recording(make_recording(x, small, time_unit="s")))
    # one missing stretch: a step of 3 intervals
    t = np.arange(N, dtype=float)
    t[1000:] += 2
    (f,) = [f for f in check_recording(make_recording(x, t)) if f["code"] == "uneven_sampling"]
    assert f["details"]["gap_count"] == 1 and f["details"]["gaps"][0] == [999.0, 3.0]


def test_time_backwards_or_repeated():
    x = ar1(N, 0.5)
    t = np.arange(N, dtype=float)
    t[100] = t[99]
    t[2000] = 1500.0
    (f,) = [f for f in check_recording(make_recording(x, t)) if f["code"] == "time_not_increasing"]
    assert f["severity"] == "refuse"
    assert f["details"]["repeated"] == [[99, 100]] and [1999, 2000] in f["details"]["backwards"]


def test_quantisation():
    x = np.round(3 * np.sin(np.arange(N) * 0.05) + 0.3 * white_noise(N))  # about 9 levels
    (f,) = [f for f in check_recording(make_recording(x)) if f["code"] == "quantised"]
    assert f["severity"] == "warn" and f["details"]["distinct_values"] == len(set(x.tolist()))  # reference: set
    assert f["details"]["step"] == 1.0
    assert "quantised" not in codes(check_recording(make_recording(white_noise(N))))


def test_clipping():
    x = np.asarray(lorenz(N)) + 0.01 * white_noise(N, seed=4)
    clipped = np.clip(x, -30, 12.0)  # a recorder saturating at +12
    (f,) = [f for f in check_recording(make_recording(clipped)) if f["code"] == "clipped"]
    assert f["severity"] == "warn" and "at_max" in f["details"] and "at_min" not in f["details"]
    lengths = [len(list(g)) for at_top, g in itertools.groupby(clipped == 12.0) if at_top]  # reference: itertools
    expected = sum(n for n in lengths if n >= 5)
    assert f["details"]["at_max"]["samples"] == expected > 0
    assert "clipped" not in codes(check_recording(make_recording(x)))


def test_unknown_time_unit_is_noted():
    rec = make_recording(lorenz(N), np.arange(N) * 0.01, time_unit=UNSTATED)
    assert "time_unit_unknown" in codes(check_recording(rec), "note")


def test_helpers_and_raise():
    runs = true_runs(np.array([1, 1, 0, 1, 0, 0, 1, 1, 1], bool))
    np.testing.assert_array_equal(runs, [[0, 2], [3, 4], [6, 9]])
    assert compact_positions(runs) == "0-1, 3, 6-8"
    assert compact_positions(runs, limit=1) == "0-1 and 2 more"
    bad = make_recording(np.full(10, np.nan))
    findings = check_recording(bad)
    with pytest.raises(RecordingError) as err:
        raise_if_refused(findings)
    msg = str(err.value)
    assert "\n" not in msg and refusals(findings)[0]["fix"] in msg and "more problems" in msg
    raise_if_refused(check_recording(make_recording(lorenz(N))))  # nothing to refuse
    stored = json.loads(attach_checks(bad).attrs["checks"])
    assert stored == json.loads(json.dumps(findings))


@pytest.mark.parametrize("kw", [{"min_samples": 0}, {"gap_factor": 1.0}, {"jitter_tolerance": 2},
                                {"quantisation_levels": 1}, {"clip_run": True}])
def test_bad_arguments(kw):
    with pytest.raises(RecordingError) as err:
        check_recording(make_recording(lorenz(N)), **kw)
    assert "\n" not in str(err.value)


def test_trend_share_is_the_squared_correlation_with_time():
    # analytic: a pure ramp is all trend (R^2 = 1); a cosine symmetric about the record's middle is
    # uncorrelated with time (odd times even integrates to 0), so R^2 = 0 however large it is
    t = np.arange(N, dtype=float)
    ramp = check_trend(make_recording(0.5 * t + 3.0, sampling_interval=1.0, time_unit="s"))
    assert codes(ramp) == {"trend"} and ramp[0]["details"]["trend_share"] == pytest.approx(1.0, abs=1e-9)
    even = np.cos(2 * np.pi * 7 * (t - t.mean()) / N)
    assert check_trend(make_recording(even, sampling_interval=1.0, time_unit="s")) == []
    assert check_trend(make_recording(even + 0.1 * t, sampling_interval=1.0, time_unit="s"))  # var 7.5e4 vs 0.5


@pytest.mark.parametrize("x", [lorenz(N), white_noise(N), ar1(N, 0.9)], ids=["lorenz", "noise", "ar1"])
def test_stationary_signals_have_no_trend_warning(x):
    assert check_trend(make_recording(x, sampling_interval=0.01, time_unit="s")) == []


def test_co2_trend_is_flagged_and_cleared_by_a_linear_detrend():
    # Open data shipped in statsmodels: weekly Mauna Loa CO2 1958-2001, a record known for its steady rise
    # (about 316 to 370 ppm, from memory) under a yearly cycle of a few ppm
    from statsmodels.datasets import co2

    from engine.preparation import prepare
    from engine.settings import Settings

    data = co2.load_pandas().data["co2"].interpolate().to_numpy()
    rec = make_recording(data, sampling_interval=7 * 86400.0, time_unit="s", units="ppm")
    flagged = json.loads(prepare(rec, Settings()).attrs["checks"])
    assert "trend" in codes(flagged) and "linear detrend" in next(f for f in flagged if f["code"] == "trend")["fix"]
    assert "trend" not in codes(json.loads(prepare(rec, Settings(detrend="linear")).attrs["checks"]))
