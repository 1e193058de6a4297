"""The whole standard analysis against published invariants: what a user reads in the summary.

Each check names its source; "(memory)" marks a value recalled, not looked up.
"""

import numpy as np
import pytest

import systems
from engine.analysis import refit, run_standard_analysis
from engine.errors import LagspaceError
from engine.recording import make_recording
from engine.settings import Settings


def covers(estimate, published, key="value", slack=0.0):
    """True when published lies within value +- (2 x uncertainty + slack)."""
    value, unc = estimate[key], estimate["uncertainty"]
    return value is not None and abs(value - published) <= 2 * unc + slack


@pytest.fixture(scope="module")
def lorenz():
    # Lorenz (1963), dt = 0.01, scipy.integrate.solve_ivp (tests/systems.py).
    rec = make_recording(systems.lorenz(20_000), sampling_interval=0.01, time_unit="s", source="lorenz")
    return run_standard_analysis(rec, Settings(surrogates=19, seed=1))


@pytest.fixture(scope="module")
def henon():
    # Hénon (1976) map, a = 1.4, b = 0.3.
    rec = make_recording(systems.henon(10_000), source="henon")
    return run_standard_analysis(rec, Settings(surrogates=19, seed=1))


def test_lorenz_summary(lorenz):
    s = lorenz.summary
    assert 14 <= s["delay"]["samples"] <= 19  # about 16-17 samples (common practice, memory)
    assert s["embedding_dimension"]["value"] == 3  # 3 works (Kennel et al. 1992; common practice)
    d2 = s["correlation_dimension"]
    assert d2["saturates"] and covers(d2, 2.05)  # Grassberger & Procaccia, Physica D 9 (1983) 189 (memory)
    lle = s["largest_lyapunov_exponent"]
    assert covers(lle, 0.9056, key="per_time_unit")  # Sprott 2003, App. A (memory)
    assert lle["lyapunov_time"] == pytest.approx(1 / lle["per_time_unit"])
    assert s["surrogate_test"]["rejects_linear_null"] is True  # deterministic chaos is not linear noise
    assert "chaos" in s["verdict"] and "not proof" in s["verdict"]


def test_henon_summary(henon):
    s = henon.summary
    assert s["delay"]["samples"] == 1  # maps: delay 1 (common practice)
    assert s["embedding_dimension"]["value"] == 2  # Hénon embeds in 2 (common practice)
    assert covers(s["correlation_dimension"], 1.21)  # Grassberger & Procaccia, PRL 50 (1983) 346 (memory)
    assert covers(s["largest_lyapunov_exponent"], 0.419, key="per_sample")  # Sprott 2003 (memory)
    assert s["surrogate_test"]["rejects_linear_null"] is True
    cap = s["capacity_dimension"]
    # Russell, Hanson & Ott, PRL 45 (1980) 1175 (memory): 1.26; box counting on 10^4 points is coarse.
    assert cap["value"] is None or abs(cap["value"] - 1.26) <= 2 * cap["uncertainty"] + 0.1


def test_periodic_orbit():
    # A limit cycle: D2 = 1 and largest exponent 0 (analytic).
    x = systems.sine(8000, period=50.3, noise=0.001, seed=2)
    s = run_standard_analysis(make_recording(x), Settings(surrogates=19)).summary
    d2, lle = s["correlation_dimension"], s["largest_lyapunov_exponent"]
    assert d2["value"] == pytest.approx(1.0, abs=0.1)
    assert lle["per_sample"] is None or abs(lle["per_sample"]) * 50.3 < 0.25
    assert "chaos" not in s["verdict"].split(";")[-1] or "does not support" in s["verdict"]


def test_linear_noise_keeps_the_null():
    # Gaussian AR(1) is exactly the null hypothesis of the surrogate test (Theiler et al. 1992).
    s = run_standard_analysis(make_recording(systems.ar1(5000, 0.8, seed=3)), Settings(surrogates=19)).summary
    assert s["surrogate_test"]["rejects_linear_null"] is False
    assert "does not support" in s["verdict"] or "cannot be told apart" in s["verdict"]


def test_refit_moves_only_what_depends_on_the_range(henon):
    d2 = henon.summary["correlation_dimension"]
    lo, hi = d2["scaling_range"]
    moved = refit(henon, scaling_range=(lo, np.sqrt(lo * hi)))
    assert moved.summary["correlation_dimension"]["scaling_range"][1] <= hi
    assert moved.summary["largest_lyapunov_exponent"] == henon.summary["largest_lyapunov_exponent"]
    assert moved.summary["delay"] == henon.summary["delay"]
    fit = henon.summary["largest_lyapunov_exponent"]["fit_range"]
    again = refit(henon, divergence_range=(fit[0], fit[0] + (fit[1] - fit[0]) / 2))
    assert again.summary["largest_lyapunov_exponent"]["fit_range"][1] < fit[1]
    assert again.summary["correlation_dimension"] == d2


def test_radii_and_box_sizes_carry_the_signal_units():
    # Radii, box edges and distances between delay vectors are lengths in the signal's space:
    # kelvin for a temperature, standard deviations once the series is standardised (common practice).
    x = 20.0 + 3.0 * systems.henon(2000)
    rec = make_recording(x, units="K", source="henon")
    runs = {flag: run_standard_analysis(rec, Settings(surrogates=0, max_dimension=5, standardise=flag))
            for flag in (False, True)}
    for flag, units in ((False, "K"), (True, "standard deviations")):
        a = runs[flag]
        for name in ("radius", "box_size", "space_time_quantile"):
            assert a.results[name].attrs["units"] == units, name
        assert a.summary["input"]["units"] == units
        assert a.summary["correlation_dimension"]["reason"].endswith(f" {units}")
    # Analytic: dividing a series by its standard deviation divides every length by it.
    ratio = runs[False].results["radius"].values / runs[True].results["radius"].values
    assert ratio == pytest.approx(np.full(ratio.size, x.std()), rel=1e-9)


@pytest.mark.parametrize("changes", [dict(scaling_range=(1.0, 0.5)), dict(scaling_range=(0.0, 1.0)),
                                     dict(scaling_range=(0.1, float("nan"))), dict(scaling_range="0.1,1"),
                                     dict(divergence_range=(2.5, 10)), dict(divergence_range=(10, 10)),
                                     dict(divergence_range=(-1, 10)), dict(divergence_range=(1, 2, 3))])
def test_bad_fit_ranges_are_one_line_errors(changes):
    with pytest.raises(LagspaceError) as err:
        Settings(**changes)
    assert "\n" not in str(err.value) and next(iter(changes)) in str(err.value)


def test_fit_ranges_round_trip_through_json_as_tuples():
    s = Settings(scaling_range=[0.1, 2], divergence_range=[3.0, 40])
    assert s.scaling_range == (0.1, 2.0) and s.divergence_range == (3, 40)
    assert Settings.from_json(s.to_json()) == s
