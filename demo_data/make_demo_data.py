"""Make the demo recordings: invented scenarios, small files, deterministic.

Run ``python demo_data/make_demo_data.py``; it rewrites, beside itself:

- ``thermosyphon_thermocouple.nc`` (NetCDF4): temperature at the side of a
  natural-convection loop heated below and cooled above, in kelvin. Made from the
  three-mode loop model, which is the Lorenz (1963) system with b = 1
  (Ehrhard & Müller 1990), in its chaotic regime.
- ``magnetoelastic_beam_strain.csv``: strain at the root of a steel cantilever
  between two magnets, shaken sideways; a forced two-well Duffing oscillator in
  the chaotic regime (Moon & Holmes 1979; Guckenheimer & Holmes 1983).
- ``pump_vibration.csv``: accelerometer on a centrifugal pump bearing housing:
  shaft rate, its harmonic and the vane-pass tone in broadband noise
  (periodic plus noise, one column, no time column).

The numbers are simulated, not measured; sensor noise is Gaussian with fixed seeds.

References
----------
Lorenz, J. Atmos. Sci. 20 (1963) 130.
Ehrhard & Müller, J. Fluid Mech. 217 (1990) 487.
Moon & Holmes, J. Sound Vib. 65 (1979) 275.
Guckenheimer & Holmes, Nonlinear Oscillations, Dynamical Systems, and Bifurcations of Vector Fields, Springer (1983).
"""

from __future__ import annotations

import pathlib

import numpy as np
import xarray as xr
from scipy.integrate import solve_ivp

HERE = pathlib.Path(__file__).resolve().parent


def _integrate(rhs, y0, model_dt, n, transient):
    t_eval = transient + model_dt * np.arange(n)
    sol = solve_ivp(rhs, (0.0, t_eval[-1]), y0, t_eval=t_eval, method="DOP853", rtol=1e-9, atol=1e-9)
    return sol.y


def thermosyphon(n=20_000, dt=0.1, seconds_per_model_unit=5.0, seed=1) -> xr.Dataset:
    """Loop model x' = p (y - x), y' = r x - y - x z, z' = x y - z with p = 10, r = 28."""

    def rhs(t, s, p=10.0, r=28.0):
        x, y, z = s
        return [p * (y - x), r * x - y - x * z, x * y - z]

    y = _integrate(rhs, [1.0, 0.0, 0.0], dt / seconds_per_model_unit, n, transient=100.0)[1]
    rng = np.random.default_rng(seed)
    kelvin = 310.0 + 0.4 * y + 0.02 * rng.standard_normal(n)
    return xr.Dataset(
        {"temperature": ("time", kelvin.astype(np.float32), {
            "units": "K", "long_name": "loop wall temperature at the 3 o'clock thermocouple"})},
        coords={"time": ("time", dt * np.arange(n), {"units": "s", "long_name": "time since logging started"})},
        attrs={
            "title": "Thermosyphon loop, side thermocouple",
            "description": "Invented scenario: a water-filled torus heated over its lower half and cooled over its "
                           "upper half; flow reverses irregularly. Simulated with the three-mode loop model "
                           "(Lorenz system with b = 1, p = 10, r = 28), 0.02 K sensor noise.",
            "sampling_interval_s": dt,
        },
    )


def beam(n=12_000, rate=250.0, forcing_hz=5.0, seed=2) -> tuple[np.ndarray, np.ndarray]:
    """Forced two-well Duffing oscillator x'' + d x' - x + x^3 = g cos(w t), d = 0.25, g = 0.3, w = 1."""

    def rhs(t, s, d=0.25, g=0.3, w=1.0):
        x, v = s
        return [v, -d * v + x - x ** 3 + g * np.cos(w * t)]

    model_unit = 1.0 / (2 * np.pi * forcing_hz)  # seconds per model time unit (w = 1)
    x = _integrate(rhs, [1.0, 0.0], 1.0 / rate / model_unit, n, transient=2 * np.pi * 200)[0]
    rng = np.random.default_rng(seed)
    return np.arange(n) / rate, 150.0 * x + 0.5 * rng.standard_normal(n)


def pump(n=8192, rate=1000.0, shaft_hz=24.75, vanes=6, seed=3) -> np.ndarray:
    """Shaft tone, its second harmonic, vane-pass tone, and AR(1) broadband noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    w = 2 * np.pi * shaft_hz
    tones = 0.8 * np.sin(w * t) + 0.3 * np.sin(2 * w * t + 0.7) + 0.5 * np.sin(vanes * w * t + 1.9)
    noise = np.empty(n)
    noise[0] = 0.0
    e = 0.3 * rng.standard_normal(n)
    for k in range(1, n):
        noise[k] = 0.6 * noise[k - 1] + e[k]
    return tones + noise


def main(out: pathlib.Path = HERE) -> list[pathlib.Path]:
    paths = [out / "thermosyphon_thermocouple.nc", out / "magnetoelastic_beam_strain.csv", out / "pump_vibration.csv"]
    ds = thermosyphon()
    ds.to_netcdf(paths[0], engine="h5netcdf",
                 encoding={"temperature": {"zlib": True, "complevel": 4}, "time": {"zlib": True, "complevel": 4}})
    t, strain = beam()
    header = ("# Invented scenario: strain gauge at the root of a steel cantilever buckled between two magnets,\n"
              "# shaken sideways at 5 Hz (simulated two-well Duffing oscillator, chaotic regime; 0.5 ue gauge noise).\n"
              "time_s,strain_ue")
    np.savetxt(paths[1], np.column_stack([t, strain]), fmt=["%.3f", "%.2f"], delimiter=",", header=header,
               comments="")
    header = ("# Invented scenario: accelerometer on a centrifugal pump bearing housing, 1485 rpm, 6 vanes.\n"
              "# Sampled at 1000 Hz (no time column: the sampling interval is 0.001 s).\n"
              "acceleration (m s-2)")
    np.savetxt(paths[2], pump(), fmt="%.4f", header=header, comments="")
    return paths


if __name__ == "__main__":
    for path in main():
        print(f"{path.name}: {path.stat().st_size / 1e3:.0f} kB")
