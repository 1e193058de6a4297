"""Preparation steps: each is checked against an analytic result or a reference library
(scipy.signal.detrend, scipy.interpolate), and each records itself."""

import json

import numpy as np
import pytest
from scipy import interpolate
from scipy import signal as scipy_signal

from engine.errors import LagspaceError, RecordingError
from engine.preparation import crop, detrend, fill_gaps, prepare, resample, set_sampling_interval, standardise
from engine.recording import json_attr, make_recording, sampling_interval, signal, time_unit
from engine.settings import Settings

from systems import ar1, lorenz

N = 3000


def steps(rec):
    return [s["step"] for s in json_attr(rec, "preparation")]


def test_fill_gaps_on_a_ramp_is_exact():
    t = 0.5 * np.arange(N)
    ramp = 3.0 - 0.2 * t  # linear interpolation reproduces a straight line exactly (analytic)
    x = ramp.copy()
    x[[100, 101, 102, 500]] = np.nan
    x[700] = np.inf
    out = fill_gaps(make_recording(x, t), max_gap=3)
    np.testing.assert_allclose(signal(out), ramp, rtol=0, atol=1e-12)
    (step,) = json_attr(out, "preparation")
    assert step["step"] == "fill_gaps" and step["samples_filled"] == 5
    assert step["filled"] == [[100, 103], [500, 501], [700, 701]]
    assert "100-102" in step["message"]


def test_fill_gaps_refuses_long_gaps_and_leaves_edges():
    x = np.asarray(ar1(N, 0.9), dtype=float).copy()
    x[1000:1010] = np.nan
    with pytest.raises(RecordingError) as err:
        fill_gaps(make_recording(x), max_gap=3)
    assert "\n" not in str(err.value) and "1000-1009" in str(err.value)
    y = np.asarray(ar1(N, 0.9), dtype=float).copy()
    y[:4] = np.nan
    out = fill_gaps(make_recording(y), max_gap=3)
    assert np.isnan(signal(out)[:4]).all()
    assert json_attr(out, "preparation")[0]["left_at_edges"] == [[0, 4]]


def test_resample_matches_scipy_linear_interpolation():
    rng = np.random.default_rng(2)
    t = np.cumsum(0.01 * (1 + 0.2 * rng.uniform(-1, 1, N)))
    x = np.sin(t * 7.0)
    out = resample(make_recording(x, t, time_unit="s"))
    grid = out["time"].values
    np.testing.assert_allclose(np.diff(grid), np.median(np.diff(t)), rtol=1e-9)
    reference = interpolate.interp1d(t, x, kind="linear")(grid)  # reference: scipy.interpolate
    np.testing.assert_allclose(signal(out), reference, rtol=0, atol=1e-12)
    (step,) = json_attr(out, "preparation")
    assert step["step"] == "resample" and "interpolated" in step["warning"]
    assert sampling_interval(out) == pytest.approx(np.median(np.diff(t)))
    given = resample(make_recording(x, t, time_unit="s"), interval=0.02)
    assert sampling_interval(given) == 0.02
    with pytest.raises(RecordingError):
        resample(make_recording(x, t[::-1].copy()))


def test_crop_is_inclusive():
    rec = make_recording(np.arange(100.0), sampling_interval=0.5, time_unit="s")
    out = crop(rec, 10.0, 20.0)
    np.testing.assert_array_equal(out["time"].values, np.arange(10.0, 20.5, 0.5))
    assert json_attr(out, "preparation")[0]["samples_after"] == 21
    assert crop(rec, stop=1.0).sizes["time"] == 3
    for bad in [(60.0, 70.0), (5.0, 1.0), ("a", None)]:
        with pytest.raises(RecordingError) as err:
            crop(rec, *bad)
        assert "\n" not in str(err.value)


def test_detrend_matches_scipy():
    x = np.asarray(lorenz(N)) + 0.05 * np.arange(N) + 4.0
    rec = make_recording(x)
    # reference: scipy.signal.detrend, types "linear" and "constant"
    np.testing.assert_allclose(signal(detrend(rec, "linear")), scipy_signal.detrend(x, type="linear"), atol=1e-9)
    np.testing.assert_allclose(signal(detrend(rec, "mean")), scipy_signal.detrend(x, type="constant"), atol=1e-12)
    assert detrend(rec, "none") is rec
    assert json_attr(detrend(rec, "linear"), "preparation")[0]["removed"]["slope"] == pytest.approx(
        np.polyfit(np.arange(N), x, 1)[0])
    with pytest.raises(RecordingError):
        detrend(rec, "quadratic")


def test_standardise():
    x = 5.0 + 3.0 * np.asarray(ar1(N, 0.7))
    out = standardise(make_recording(x, units="K"))
    z = signal(out)
    assert z.mean() == pytest.approx(0.0, abs=1e-12) and z.std() == pytest.approx(1.0)  # analytic
    assert out[list(out.data_vars)[0]].attrs["units"] == "1"
    assert json_attr(out, "preparation")[0]["original_units"] == "K"
    with pytest.raises(RecordingError):
        standardise(make_recording(np.ones(N)))


def test_set_sampling_interval():
    out = set_sampling_interval(make_recording(np.asarray(ar1(N, 0.5))), 0.004)
    assert time_unit(out) == "s" and sampling_interval(out) == 0.004
    np.testing.assert_allclose(out["time"].values, 0.004 * np.arange(N))
    assert steps(out) == ["set_sampling_interval"]


def test_prepare_order_and_uniform_time():
    rng = np.random.default_rng(3)
    t = np.cumsum(0.01 * (1 + 0.1 * rng.uniform(-1, 1, N)))
    x = np.asarray(lorenz(N)) + 2.0 * t
    x[[400, 401]] = np.nan
    rec = make_recording(x, t, time_unit="s")
    settings = Settings(fill_gaps=True, resample=True, crop_start=1.0, crop_stop=25.0, detrend="linear",
                        standardise=True)
    out = prepare(rec, settings)
    assert steps(out) == ["fill_gaps", "resample", "crop", "detrend", "standardise"]
    d = np.diff(out["time"].values)
    np.testing.assert_allclose(d, d[0], rtol=1e-9)  # even sampling, common practice
    assert out["time"].values[0] >= 1.0 and out["time"].values[-1] <= 25.0
    assert not [f for f in json.loads(out.attrs["checks"]) if f["severity"] == "refuse"]
    assert np.isfinite(signal(out)).all()


def test_prepare_refuses_unfit_data_in_one_line():
    rng = np.random.default_rng(4)
    t = np.cumsum(0.01 * (1 + 0.1 * rng.uniform(-1, 1, N)))
    with pytest.raises(LagspaceError) as err:
        prepare(make_recording(np.asarray(lorenz(N)), t, time_unit="s"), Settings())
    assert "even sampling" in str(err.value) and "\n" not in str(err.value)
    x = np.asarray(lorenz(N)).copy()
    x[5] = np.nan
    with pytest.raises(LagspaceError) as err:
        prepare(make_recording(x), Settings())
    assert "fill" in str(err.value)


def test_prepare_snaps_small_jitter_and_applies_interval():
    t = np.round(np.arange(N) / 3.0, 3)  # times printed to 3 decimals: jitter 0.1% of the step
    out = prepare(make_recording(np.asarray(lorenz(N)), t, time_unit="s"), Settings(detrend="none"))
    d = np.diff(out["time"].values)
    np.testing.assert_allclose(d, d[0], rtol=1e-12)
    assert "regularise_time" in steps(out)
    again = prepare(make_recording(np.asarray(lorenz(N))), Settings(sampling_interval=0.01))
    assert steps(again) == ["set_sampling_interval", "detrend"]
    assert sampling_interval(again) == 0.01 and time_unit(again) == "s"
