"""Divergence of neighbours and the largest Lyapunov exponent."""

import threading

import numpy as np
import pytest
import xarray as xr

import systems
from engine.errors import Cancelled, LagspaceError
from engine.kernels.divergence import kantz_kernel, kantz_reference, rosenstein_kernel, rosenstein_reference
from engine.kernels.neighbours import nearest_neighbours, neighbours_within
from engine.lyapunov import divergence_kantz, divergence_rosenstein, fit_divergence, largest_lyapunov


@pytest.fixture(scope="module")
def lorenz():
    # N = 10 000 at dt = 0.01, delay 16 (common practice), Theiler window 100 samples (one orbit)
    x = np.array(systems.lorenz(10_000))
    args = dict(delay=16, dimensions=[2, 3, 4], theiler=100, steps=480)
    return xr.merge([divergence_rosenstein(x, **args), divergence_kantz(x, **args)])


@pytest.fixture(scope="module")
def henon():
    x = np.array(systems.henon(5000))
    args = dict(delay=1, dimensions=[1, 2, 3], theiler=0, steps=30)
    return xr.merge([divergence_rosenstein(x, **args), divergence_kantz(x, **args)])


def test_kernels_match_their_references():
    x = np.array(systems.lorenz(1500, dt=0.02))
    partner, _ = nearest_neighbours(x, 3, 4, 10, n_vectors=1400, exclude_zero=True)
    total, number = rosenstein_kernel(x, 3, 4, partner, 60, float(x.std()))
    ref_total, ref_number = rosenstein_reference(x, 3, 4, partner, 60)
    np.testing.assert_array_equal(number, ref_number)
    np.testing.assert_allclose(total, ref_total, rtol=1e-11)  # logs of products vs sums of logs
    points = np.arange(0, 1400, 9)
    indptr, indices = neighbours_within(x, 3, 4, 10, 1.5, points, n_vectors=1400)
    np.testing.assert_allclose(kantz_kernel(x, 3, 4, points, indptr, indices, 60),
                               kantz_reference(x, 3, 4, points, indptr, indices, 60), rtol=1e-12)


def test_lorenz_exponent(lorenz):
    # largest exponent of Lorenz (sigma 10, rho 28, beta 8/3): 0.9056 per time unit
    # (Sprott 2003, memory); tolerance +-15 % for both methods at this N
    est = largest_lyapunov(lorenz, 3, sampling_interval=0.01, time_unit="s")
    assert est["method"] == "Rosenstein" and est["kantz"]["method"] == "Kantz"
    for e in (est, est["kantz"]):
        assert e["per_time_unit"] == pytest.approx(0.9056, rel=0.15), e["reason"]
        assert e["per_sample"] == pytest.approx(e["per_time_unit"] * 0.01)
        assert 0 < e["uncertainty"] < 0.2 * e["per_time_unit"]
        assert e["lyapunov_time"] == pytest.approx(1 / e["per_time_unit"])
        assert e["units"]["per_time_unit"] == "1/s" and e["units"]["per_sample"] == "1/sample"
        assert e["fit_range_time"] == pytest.approx([v * 0.01 for v in e["fit_range"]])
        assert e["dimensions_used"] == [2, 3, 4]
        first, last = e["fit_range"]  # steps are whole numbers, and the reason says them as such
        assert isinstance(first, int) and isinstance(last, int) and f"steps {first} to {last} " in e["reason"]
    assert "comparison" in est


def test_henon_exponent(henon):
    # Hénon map (a 1.4, b 0.3): 0.419 per iteration (Sprott 2003, memory); tolerance +-10 %
    est = largest_lyapunov(henon, 2, sampling_interval=1.0, time_unit="iteration")
    for e in (est, est["kantz"]):
        assert e["per_time_unit"] == pytest.approx(0.419, rel=0.10), e["reason"]
        assert e["units"]["per_time_unit"] == "1/iteration"


def test_periodic_orbit_gives_zero():
    # a periodic orbit has largest exponent 0 (analytic): over one period of 50.3 samples the
    # separation changes by less than 5 %, and the estimate says so
    x = systems.sine(4000, 50.3)
    args = dict(delay=12, dimensions=[1, 2, 3], theiler=50, steps=300)
    est = largest_lyapunov(xr.merge([divergence_rosenstein(x, **args), divergence_kantz(x, **args)]), 2)
    for e in (est, est["kantz"]):
        assert abs(e["per_sample"]) * 50.3 < 0.05
        assert e["growth_over_range"] < np.log(2) and e["lyapunov_time"] is None
        assert any("consistent with zero" in w for w in e["warnings"])


def test_white_noise_has_no_exponent():
    ds = divergence_rosenstein(systems.white_noise(3000, seed=2), 1, [3], 0, 20)
    est = largest_lyapunov(ds, 3)
    assert est["value"] is None and est["per_time_unit"] is None
    assert "saturates" in est["reason"]


def test_user_fit_range_is_a_least_squares_line(lorenz):
    # the refit is the ordinary least-squares slope over the chosen steps (reference: numpy.polyfit)
    est = fit_divergence(lorenz, 3, (99.5, 300.0), sampling_interval=0.01, time_unit="s")
    y = lorenz["divergence"].sel(dimension=3, step=slice(100, 300))
    assert est["per_sample"] == pytest.approx(np.polyfit(y["step"], y, 1)[0], rel=1e-10)
    assert est["fit_range"] == [100, 300]  # the whole steps inside the range asked for
    assert "set by the user" in est["reason"] and "steps 100 to 300 " in est["reason"]
    with pytest.raises(LagspaceError):
        fit_divergence(lorenz, 3, (300, 100))


def test_dataset_labels(lorenz):
    assert lorenz["divergence"].dims == ("dimension", "step")
    assert list(lorenz["step"].values[:3]) == [0, 1, 2]
    for name in lorenz.variables:
        assert "units" in lorenz[name].attrs and "long_name" in lorenz[name].attrs
    assert (lorenz["kantz_radius"] > 0).all()


def test_progress_and_cancel():
    x = np.array(systems.henon(800))
    seen = []
    divergence_rosenstein(x, 1, [1, 2], 0, 10, progress=lambda f, msg: seen.append(f))
    assert seen and seen[-1] == 1.0 and seen == sorted(seen)
    stop = threading.Event()
    stop.set()
    with pytest.raises(Cancelled):
        divergence_rosenstein(x, 1, [1, 2], 0, 10, cancel=stop)


def test_bad_arguments_are_refused():
    x = systems.white_noise(300)
    with pytest.raises(LagspaceError):
        divergence_rosenstein(x, 1, [0], 0, 10)
    with pytest.raises(LagspaceError):
        divergence_rosenstein(x, 1, [3], 200, 10)  # Theiler window leaves no neighbours
    with pytest.raises(LagspaceError):
        divergence_kantz(x, 1, [2], 0, 10, radius=-1.0)
    with pytest.raises(LagspaceError):
        largest_lyapunov(xr.Dataset(), 3)
