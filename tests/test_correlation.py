"""Correlation sums, D2, Takens' estimate and K2 against published and analytic values."""

import json
import threading

import numpy as np
import pytest
import xarray as xr
from scipy.integrate import quad

from engine.correlation import (correlation_dimension, correlation_entropy, correlation_sums,
                                takens_estimator)
from engine.errors import Cancelled, LagspaceError
from engine.recording import make_recording
from systems import henon, lorenz, sine, white_noise


def logistic(n, transient=100):
    """Logistic map x -> 4 x (1 - x)."""
    out, v = np.empty(n), 0.3
    for k in range(n + transient):
        v = 4.0 * v * (1.0 - v)
        if k >= transient:
            out[k - transient] = v
    return out


@pytest.fixture(scope="module")
def henon_sums():
    return correlation_sums(np.asarray(henon(10_000)), delay=1, max_dimension=10)


def test_uniform_noise_sums_match_the_analytic_law():
    # analytic: for iid uniform samples on [0, 1], P(|u - v| <= r) = 2r - r^2, and the max-norm
    # distance of m-vectors of independent coordinates gives C_m(r) = (2r - r^2)^m
    u = np.random.default_rng(5).uniform(size=4000)
    ds = correlation_sums(u, delay=1, max_dimension=3, theiler=3)
    r = ds["radius"].values
    for m in (1, 2, 3):
        c = ds["correlation_sum"].sel(dimension=m).values
        ok = ds["pair_count"].sel(dimension=m).values > 2000
        np.testing.assert_allclose(c[ok], (2 * r[ok] - r[ok] ** 2) ** m, rtol=0.06)


def test_lorenz_correlation_dimension():
    # source: Grassberger & Procaccia, Physica D 9 (1983) 189: D2 = 2.05 +- 0.01 (memory);
    # tolerance 0.15 for 20k samples and 5000 reference points; delay 16 at dt = 0.01 is the first
    # minimum of the mutual information (common practice, memory)
    x = np.asarray(lorenz(20_000))
    ds = correlation_sums(x, delay=16, max_dimension=10, theiler=100, reference_points=5000, seed=1)
    d2 = correlation_dimension(ds, embedding_dimension=4)
    assert d2["value"] == pytest.approx(2.05, abs=0.15)
    assert d2["saturates"] is True
    assert d2["uncertainty"] < 0.15
    # source: Takens, Dynamical Systems and Bifurcations, Springer (1985) 99: the ML estimate measures the same D2
    ml = takens_estimator(ds, 4, d2["scaling_range"][1])
    assert ml["value"] == pytest.approx(2.05, abs=0.15)


def test_henon_correlation_dimension(henon_sums):
    # source: Grassberger & Procaccia, PRL 50 (1983) 346: D2 = 1.21 +- 0.01 (memory); tolerance 0.05
    d2 = correlation_dimension(henon_sums, embedding_dimension=2)
    assert d2["value"] == pytest.approx(1.21, abs=0.05)
    assert abs(d2["value"] - 1.21) <= 0.05 + d2["uncertainty"]
    assert d2["saturates"] is True and d2["warnings"] == []
    ml = takens_estimator(henon_sums, 2, d2["scaling_range"][1])
    assert ml["value"] == pytest.approx(1.21, abs=0.05)


def test_henon_correlation_entropy(henon_sums):
    # source: Grassberger & Procaccia, Phys. Rev. A 28 (1983) 2591: Henon K2 = 0.325 +- 0.02 per
    # iteration (memory); tolerance 0.06 (K2(m) still falls slowly at m = 7..9)
    d2 = correlation_dimension(henon_sums, embedding_dimension=2)
    k2 = correlation_entropy(henon_sums, d2["scaling_range"], sampling_interval=1.0)
    assert k2["per_sample"] == pytest.approx(0.325, abs=0.06)


def test_periodic_orbit_has_dimension_one():
    # analytic: a periodic orbit is a closed curve, D2 = 1
    ds = correlation_sums(sine(4000, period=50.3), delay=12, max_dimension=6, theiler=20)
    d2 = correlation_dimension(ds, embedding_dimension=2)
    assert d2["value"] == pytest.approx(1.0, abs=0.05)
    assert d2["saturates"] is True


def test_white_noise_does_not_saturate():
    # Grassberger & Procaccia 1983 (Physica D 9): for noise the slopes grow with m, no D2
    ds = correlation_sums(white_noise(4000, seed=2), delay=1, max_dimension=8)
    d2 = correlation_dimension(ds, embedding_dimension=2)
    assert d2["value"] is None and d2["saturates"] is False and "agree" in d2["reason"]
    forced = correlation_dimension(ds, 2, scaling_range=[0.5, 2.0])  # a range the user drags
    assert forced["saturates"] is False
    per_m = [forced["per_dimension"][str(m)] for m in (1, 2, 3, 4)]
    assert all(b > a + 0.5 for a, b in zip(per_m, per_m[1:]))  # slope grows about one per dimension


def test_user_scaling_range_recomputes(henon_sums):
    # source: Grassberger & Procaccia PRL 1983 (memory): D2 = 1.21; a narrower dragged range gives
    # a value of its own, still near 1.21, and its ends are the radii inside it
    auto = correlation_dimension(henon_sums, 2)
    lo, hi = auto["scaling_range"]
    mid = np.sqrt(lo * hi)
    user = correlation_dimension(henon_sums, 2, scaling_range=(mid, hi))
    assert user["value"] != auto["value"] and user["value"] == pytest.approx(1.21, abs=0.08)
    assert mid <= user["scaling_range"][0] and user["scaling_range"][1] <= hi * (1 + 1e-9)
    r = henon_sums["radius"].values
    with pytest.raises(LagspaceError, match="fewer than 2 of the radii"):
        correlation_dimension(henon_sums, 2, scaling_range=(r[3] * 1.01, r[3] * 1.02))


def test_takens_estimate_of_uniform_square():
    # analytic: iid uniform pairs (u_i, u_i+1) fill the unit square with C(r) = (2r - r^2)^2, so
    # -1 / <ln(d / r_max)> = C(r_max) / integral_0^r_max C(r) dr / r (Takens 1985); tolerance 0.05
    u = np.random.default_rng(7).uniform(size=3000)
    ds = correlation_sums(u, delay=1, max_dimension=2, theiler=1)
    r = ds["radius"].values
    r_max = r[np.searchsorted(r, 0.05)]
    law = lambda s: (2 * s - s * s) ** 2  # noqa: E731
    expected = law(r_max) / quad(lambda s: law(s) / s, 0, r_max)[0]
    ml = takens_estimator(ds, 2, r_max)
    assert ml["r_max"] == pytest.approx(r_max)
    assert ml["value"] == pytest.approx(expected, abs=0.05)


@pytest.mark.parametrize("delay", [1, 2])
def test_logistic_map_entropy_is_ln2(delay):
    # analytic: the logistic map at 4 is conjugate to the tent map, whose uniform invariant measure
    # makes every Renyi entropy ln 2 per iteration; ln(C_m / C_m+1) spans `delay` iterations, so per
    # sample it must be ln 2 whatever the delay, and per time unit ln 2 / dt; tolerance 0.05
    ds = correlation_sums(logistic(6000), delay=delay, max_dimension=5)
    k2 = correlation_entropy(ds, [0.002, 0.02], sampling_interval=0.5)
    assert k2["per_sample"] == pytest.approx(np.log(2), abs=0.05)
    assert k2["per_time_unit"] == pytest.approx(k2["per_sample"] / 0.5)
    assert k2["value"] == k2["per_time_unit"]
    assert k2["settles"] is True and k2["warnings"] == []


def test_unsettled_entropy_is_flagged():
    # Grassberger & Procaccia, PRA 28 (1983) 2591: K2(m) approaches K2 from above as m grows; for the
    # Lorenz flow at tau = 0.16 time units, m = 2..4 span too little time, and K2(m) still falls
    ds = correlation_sums(np.asarray(lorenz(5000)), delay=16, max_dimension=5, theiler=100)
    k2 = correlation_entropy(ds, [1.0, 3.0], sampling_interval=0.01, embedding_dimension=2)
    per_m = [k2["per_dimension"][str(m)] for m in (2, 3, 4)]
    assert per_m[0] > per_m[-1]
    assert k2["settles"] is False and "upper bound" in k2["warnings"][0]


def test_eckmann_ruelle_warning():
    # source: Eckmann & Ruelle, Physica D 56 (1992) 185: D2 above 2 log10 N cannot be measured
    # from N points; here 2000 pairs (N^2 / 2, so 2 log10 N = log10 4000 = 3.6) and C = r^4
    r = np.geomspace(0.5, 1.0, 8)
    counts = np.round(2000 * r[None, :] ** 4).astype(np.int64)
    ds = xr.Dataset({"pair_count": (("dimension", "radius"), counts),
                     "correlation_sum": (("dimension", "radius"), counts / 2000),
                     "local_slope": (("dimension", "radius"), np.full((1, 8), 4.0))},
                    coords={"dimension": [1], "radius": r}, attrs={"delay": 1})
    d2 = correlation_dimension(ds, 1)
    assert d2["value"] == pytest.approx(4.0)
    assert d2["credible_limit"] == pytest.approx(np.log10(4000))
    assert len(d2["warnings"]) == 1 and "Eckmann" in d2["warnings"][0]


def test_no_scaling_range_gives_null_estimates_with_reasons():
    ds = correlation_sums(white_noise(2000, seed=4), delay=1, max_dimension=6)
    assert takens_estimator(ds, 2, None)["value"] is None
    k2 = correlation_entropy(ds, None, 1.0)
    assert k2["value"] is None and k2["reason"]
    json.dumps([takens_estimator(ds, 2, None), k2, correlation_dimension(ds, 2)], allow_nan=False)


def test_dataset_shape_units_and_seed():
    rec = make_recording(np.asarray(henon(2000)), name="voltage", units="V")
    ds = correlation_sums(rec, delay=1, max_dimension=4, reference_points=300, seed=3)
    assert ds["pair_count"].dims == ("dimension", "radius")
    assert list(ds["dimension"].values) == [1, 2, 3, 4]
    for name in list(ds.data_vars) + list(ds.coords):
        assert ds[name].attrs["units"] and ds[name].attrs["long_name"]
    assert ds["radius"].attrs["units"] == "V"
    assert np.all(np.diff(ds["pair_count"].values, axis=1) >= 0)  # cumulative in r
    assert np.all(np.diff(ds["pair_count"].values, axis=0) <= 0)  # d_m grows with m
    again = correlation_sums(rec, delay=1, max_dimension=4, reference_points=300, seed=3)
    other = correlation_sums(rec, delay=1, max_dimension=4, reference_points=300, seed=4)
    np.testing.assert_array_equal(ds["pair_count"], again["pair_count"])
    assert not np.array_equal(ds["pair_count"], other["pair_count"])


def test_progress_and_cancel():
    seen = []
    correlation_sums(np.asarray(henon(15_000)), 1, 4, progress=lambda f, msg: seen.append(f))
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen) and len(seen) > 5
    flag = threading.Event()
    flag.set()
    with pytest.raises(Cancelled):
        correlation_sums(np.asarray(henon(3000)), 1, 4, cancel=flag)


@pytest.mark.parametrize("kwargs,match", [
    ({"delay": 0}, "delay"),
    ({"delay": 1.5}, "delay"),
    ({"max_dimension": 0}, "max_dimension"),
    ({"theiler": -1}, "theiler"),
    ({"theiler": 5000}, "need at least"),
    ({"n_radii": 2}, "n_radii"),
    ({"reference_points": 0}, "reference_points"),
    ({"seed": True}, "seed"),
])
def test_bad_arguments_say_what_would_work(kwargs, match):
    args = {"x": np.asarray(henon(1000)), "delay": 1} | kwargs
    with pytest.raises(LagspaceError, match=match):
        correlation_sums(**args)


def test_bad_series():
    with pytest.raises(LagspaceError, match="constant"):
        correlation_sums(np.ones(500), 1)
    with pytest.raises(LagspaceError, match="NaN"):
        correlation_sums(np.r_[np.asarray(henon(500)), np.nan], 1)
    with pytest.raises(LagspaceError, match="embedding_dimension"):
        correlation_dimension(correlation_sums(np.asarray(henon(500)), 1, 3), 4)
