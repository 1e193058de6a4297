"""Kernels for delay estimation: joint histograms of a binned series with its lagged copy."""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True, parallel=True)
def lagged_mutual_information(bins, n_bins, lags):
    """Plug-in mutual information (nats) and the count-of-cells bias term per lag.

    ``bins`` holds the bin index (0 .. n_bins-1) of every sample. For each lag the
    pairs (bins[i], bins[i+lag]) fill an n_bins x n_bins histogram; returned are
    the plug-in estimate and (occupied joint cells - occupied rows - occupied
    columns + 1) / (2 n), the first-order bias of that estimate.
    """
    n_lags = lags.size
    info = np.empty(n_lags)
    bias = np.empty(n_lags)
    for k in numba.prange(n_lags):
        lag = lags[k]
        n = bins.size - lag
        joint = np.zeros((n_bins, n_bins), dtype=np.int64)
        for i in range(n):
            joint[bins[i], bins[i + lag]] += 1
        rows = np.zeros(n_bins, dtype=np.int64)
        cols = np.zeros(n_bins, dtype=np.int64)
        s_joint = 0.0
        cells = 0
        for a in range(n_bins):
            for b in range(n_bins):
                c = joint[a, b]
                if c > 0:
                    s_joint += c * np.log(c)
                    cells += 1
                    rows[a] += c
                    cols[b] += c
        s_margins = 0.0
        used = 0
        for a in range(n_bins):
            if rows[a] > 0:
                s_margins += rows[a] * np.log(rows[a])
                used += 1
            if cols[a] > 0:
                s_margins += cols[a] * np.log(cols[a])
                used += 1
        info[k] = (s_joint - s_margins) / n + np.log(n)
        bias[k] = (cells - used + 1) / (2.0 * n)
    return info, bias


def lagged_mutual_information_reference(bins, n_bins, lags):
    """Plain-numpy twin of :func:`lagged_mutual_information` (tests only)."""
    info, bias = [], []
    for lag in lags:
        n = bins.size - lag
        joint = np.bincount(bins[:n] * n_bins + bins[lag:], minlength=n_bins * n_bins).reshape(n_bins, n_bins)
        p = joint / n
        pr, pc = p.sum(axis=1), p.sum(axis=0)
        nz = joint > 0
        info.append(float(np.sum(p[nz] * np.log(p[nz] / np.outer(pr, pc)[nz]))))
        bias.append(((nz.sum() - (pr > 0).sum() - (pc > 0).sum() + 1) / (2.0 * n)))
    return np.array(info), np.array(bias)
