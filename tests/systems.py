"""Reference systems for tests, made with general-purpose libraries only.

Flows are integrated with ``scipy.integrate.solve_ivp`` (tight tolerances);
maps are iterated directly. Parameters are the standard ones of the papers
cited in ../shared/REFERENCES.md. These series are test inputs, not demo data.
"""

from __future__ import annotations

import functools

import numpy as np
from scipy.integrate import solve_ivp


def _lorenz_rhs(t, s, sigma=10.0, rho=28.0, beta=8.0 / 3.0):
    x, y, z = s
    return [sigma * (y - x), x * (rho - z) - y, x * y - beta * z]


@functools.lru_cache(maxsize=8)
def lorenz(n: int = 10_000, dt: float = 0.01, transient: float = 50.0, component: int = 0) -> np.ndarray:
    """Lorenz (1963) system, sigma=10, rho=28, beta=8/3, sampled every ``dt``.

    Returns the chosen component after discarding ``transient`` time units.
    """
    t_eval = transient + dt * np.arange(n)
    sol = solve_ivp(_lorenz_rhs, (0.0, t_eval[-1]), [1.0, 1.0, 1.0], t_eval=t_eval,
                    method="DOP853", rtol=1e-10, atol=1e-12)
    out = sol.y[component].copy()
    out.setflags(write=False)
    return out


@functools.lru_cache(maxsize=8)
def henon(n: int = 10_000, a: float = 1.4, b: float = 0.3, transient: int = 1000) -> np.ndarray:
    """Hénon (1976) map x_{k+1} = 1 - a x_k^2 + y_k, y_{k+1} = b x_k; returns x."""
    x, y = 0.1, 0.1
    out = np.empty(n)
    for k in range(n + transient):
        x, y = 1.0 - a * x * x + y, b * x
        if k >= transient:
            out[k - transient] = x
    out.setflags(write=False)
    return out


def ar1(n: int, phi: float, seed: int = 0) -> np.ndarray:
    """Gaussian AR(1) process x_k = phi x_{k-1} + e_k, started from its stationary law."""
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1 - phi * phi)
    for k in range(1, n):
        x[k] = phi * x[k - 1] + e[k]
    return x


def white_noise(n: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal(n)


def sine(n: int, period: float, noise: float = 0.0, seed: int = 0) -> np.ndarray:
    """A sine of ``period`` samples, optionally with Gaussian noise of std ``noise``."""
    k = np.arange(n)
    return np.sin(2 * np.pi * k / period) + noise * np.random.default_rng(seed).standard_normal(n)
