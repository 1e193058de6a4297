"""Space-time separation plot and the Theiler window (Provenzale et al. 1992)."""

import numpy as np
import pytest

import systems
from engine.errors import LagspaceError
from engine.theiler import space_time_separation, suggest_theiler


def test_quantiles_match_brute_force():
    # Direct numpy computation of the same quantity on a small set.
    x = systems.ar1(600, 0.7, seed=3)
    st = space_time_separation(x, delay=2, dimension=3, max_separation=30, reference_points=10_000, seed=0)
    n = x.size - 4
    for s in (1, 7, 30):
        i = np.arange(n - 30)
        d = np.max([np.abs(x[i + k * 2 + s] - x[i + k * 2]) for k in range(3)], axis=0)
        assert st["space_time_quantile"].sel(separation=s).values == pytest.approx(np.quantile(d, [0.01, 0.1, 0.5]))


@pytest.mark.parametrize("phi", [0.9, 0.98])
def test_window_follows_correlation_time(phi):
    # AR(1): correlation time -1/ln(phi) samples (analytic); the window should be of that order.
    x = systems.ar1(20_000, phi, seed=1)
    w = suggest_theiler(space_time_separation(x, delay=1, dimension=3))["value"]
    tau_c = -1 / np.log(phi)
    assert 0.5 * tau_c <= w <= 3 * tau_c


def test_white_noise_needs_almost_no_window():
    # Independent samples: no temporal correlation to exclude (analytic).
    st = space_time_separation(systems.white_noise(5000), delay=1, dimension=3)
    assert suggest_theiler(st)["value"] <= 2


def test_autocorrelation_time_is_a_floor():
    st = space_time_separation(systems.white_noise(5000), delay=1, dimension=3)
    choice = suggest_theiler(st, autocorrelation_time=12)
    assert choice["value"] == 12 and "autocorrelation" in choice["reason"]


def test_bad_arguments():
    with pytest.raises(LagspaceError):
        space_time_separation(np.arange(10.0), delay=1, dimension=3)
    with pytest.raises(LagspaceError):
        space_time_separation(systems.white_noise(500), delay=1, dimension=2, quantiles=(0.5, 1.5))
