"""Delay vectors (Packard et al. 1980; Takens 1981).

References
----------
Packard, Crutchfield, Farmer & Shaw, Phys. Rev. Lett. 45 (1980) 712.
Takens, in Dynamical Systems and Turbulence (Rand & Young, eds.), Springer (1981) 366.
"""

from __future__ import annotations

import numpy as np

from .errors import LagspaceError


def embedded_length(n_samples: int, dimension: int, delay: int) -> int:
    """Number of delay vectors that a series of ``n_samples`` gives."""
    return n_samples - (dimension - 1) * delay


def check_embedding(n_samples: int, dimension: int, delay: int, minimum: int = 2) -> None:
    """Raise :class:`LagspaceError` unless (dimension, delay) fit ``n_samples``."""
    if int(delay) != delay or delay < 1:
        raise LagspaceError(f"delay must be a whole number of samples >= 1, got {delay!r}")
    if int(dimension) != dimension or dimension < 1:
        raise LagspaceError(f"embedding dimension must be a whole number >= 1, got {dimension!r}")
    n = embedded_length(n_samples, int(dimension), int(delay))
    if n < minimum:
        raise LagspaceError(
            f"{n_samples} samples give {max(n, 0)} delay vectors at dimension {dimension} and delay "
            f"{delay}; need at least {minimum}: use a smaller dimension or delay, or a longer recording"
        )


def delay_vectors(x, dimension: int, delay: int) -> np.ndarray:
    """Delay vectors ``[x[i], x[i+tau], ..., x[i+(m-1)tau]]`` as a zero-copy view.

    Parameters
    ----------
    x : 1-D array
    dimension : int, embedding dimension m >= 1
    delay : int, delay tau >= 1 in samples

    Returns
    -------
    ndarray of shape (N - (m-1) tau, m), a read-only view into ``x`` (no copy).
    """
    x = np.asarray(x)
    if x.ndim != 1:
        raise LagspaceError(f"delay vectors need a 1-D series, got shape {x.shape}")
    check_embedding(x.size, dimension, delay, minimum=1)
    dimension, delay = int(dimension), int(delay)
    n = embedded_length(x.size, dimension, delay)
    s = x.strides[0]
    return np.lib.stride_tricks.as_strided(x, shape=(n, dimension), strides=(s, s * delay), writeable=False)
