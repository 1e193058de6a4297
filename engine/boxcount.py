"""Box counting and the capacity (box-counting) dimension of the reconstructed set.

N(eps) is the number of boxes of edge eps of a grid that hold at least one
delay vector; the capacity dimension D0 is the slope of ln N(eps) against
ln(1/eps) over the range where that slope is constant.

References
----------
Russell, Hanson & Ott, Phys. Rev. Lett. 45 (1980) 1175.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from .arguments import as_series, whole_number
from .correlation import unit_suffix
from .recording import series_units
from .embedding import check_embedding, embedded_length
from .errors import LagspaceError
from .kernels.boxes import box_indices, occupied_boxes
from .progress import Stage
from .scaling import local_slopes, widest_flat_range

#: sizes whose count exceeds this fraction of the number of vectors are saturated
SATURATION_FRACTION = 0.05
#: boxes larger than this fraction of the extent see the shape, not the dimension
LARGEST_USEFUL_FRACTION = 0.125
#: a linear range: all local slopes within this fraction of their mean
LINEAR_TOLERANCE = 0.1


def box_counts(x, delay, dimension, n_sizes=16, progress=None, cancel=None) -> xr.Dataset:
    """Occupied boxes N(eps) of the delay vectors for geometric box sizes.

    Parameters
    ----------
    x : 1-D array or Recording
    delay, dimension : int, the embedding
    n_sizes : int, number of box sizes: extent / n for about geometric whole
        numbers n from 2 to the number of vectors (repeats dropped)
    progress, cancel : see :mod:`engine.progress`

    Returns
    -------
    xr.Dataset with ``box_count(box_size)`` and ``box_count_slope(box_size)``;
    the capacity dimension is stored in ``attrs["capacity_dimension"]``
    (JSON, see :func:`capacity_dimension`).

    References
    ----------
    Russell, Hanson & Ott, Phys. Rev. Lett. 45 (1980) 1175.
    """
    values, units = as_series(x), series_units(x)
    delay = whole_number("delay", delay, 1)
    dimension = whole_number("dimension", dimension, 1, 30)
    n_sizes = whole_number("n_sizes", n_sizes, 4, 200)
    check_embedding(values.size, dimension, delay, minimum=16)
    n_vectors = embedded_length(values.size, dimension, delay)
    origin = float(values.min())
    extent = float(values.max()) - origin
    # whole numbers of boxes per axis, so the grid fits the data's range exactly
    per_axis = np.unique(np.round(np.geomspace(2, n_vectors, n_sizes)).astype(np.int64))
    sizes = extent / per_axis
    stage = Stage(progress, cancel)
    counts = np.empty(per_axis.size, dtype=np.int64)
    for k, n_boxes in enumerate(per_axis):
        stage("counting boxes", k / per_axis.size)
        counts[k] = occupied_boxes(box_indices(values, origin, extent, n_boxes), dimension, delay)
    stage("counting boxes done", 1.0)
    slope = local_slopes(np.log(counts), -np.log(sizes), half_width=1)
    ds = xr.Dataset(
        {
            "box_count": ("box_size", counts, {"units": "1", "long_name": "occupied boxes N(eps)"}),
            "box_count_slope": ("box_size", slope,
                            {"units": "1", "long_name": "local slope d ln N / d ln(1/eps)"}),
        },
        coords={"box_size": ("box_size", sizes, {"units": units, "long_name": "box edge eps"})},
        attrs={"delay": delay, "dimension": dimension, "n_samples": int(values.size),
               "n_vectors": int(n_vectors), "origin": origin, "extent": extent},
    )
    ds.attrs["capacity_dimension"] = json.dumps(capacity_dimension(ds))
    return ds


def capacity_dimension(bc_ds) -> dict:
    """Capacity dimension D0: least-squares slope of ln N(eps) on ln(1/eps) over a linear range.

    Sizes above 1/8 of the extent and sizes where N(eps) exceeds 5 % of the
    number of vectors (the count saturates at that number) are left out;
    within the rest the range is the widest one (at least a factor 4 in eps)
    where the local slopes lie within 10 % of their mean.

    Returns
    -------
    dict with ``value``, ``uncertainty`` (the larger of the fit's standard
    error and the spread of the local slopes in the range), ``fit_range``
    ([eps_small, eps_large]), ``method``, ``reason``.

    References
    ----------
    Russell, Hanson & Ott, Phys. Rev. Lett. 45 (1980) 1175.
    """
    if not isinstance(bc_ds, xr.Dataset) or "box_count" not in bc_ds or \
            not {"extent", "n_vectors"} <= set(bc_ds.attrs):
        raise LagspaceError("expected the dataset returned by box_counts "
                            "(with box_count and the attributes extent and n_vectors)")
    sizes = bc_ds["box_size"].values
    counts = bc_ds["box_count"].values
    slope = bc_ds["box_count_slope"].values
    out = {"value": None, "uncertainty": None, "fit_range": None,
           "method": "box counting: slope of ln N(eps) on ln(1/eps)"}
    usable = (sizes <= LARGEST_USEFUL_FRACTION * bc_ds.attrs["extent"]) & \
             (counts <= SATURATION_FRACTION * bc_ds.attrs["n_vectors"])
    found = widest_flat_range(np.where(usable, slope, np.nan), -np.log(sizes), LINEAR_TOLERANCE,
                              min_points=3, min_span=np.log(4.0))
    if found is None:
        out["reason"] = (f"no range of box sizes (factor >= 4) below {LARGEST_USEFUL_FRACTION:g} of the extent "
                         f"and with fewer than {SATURATION_FRACTION:.0%} of the vectors' count where the "
                         f"local slopes agree within {LINEAR_TOLERANCE:.0%}: use more data")
        return out
    a, b = found
    u, y = -np.log(sizes[a:b + 1]), np.log(counts[a:b + 1])
    if b - a >= 3:
        (value, _), cov = np.polyfit(u, y, 1, cov=True)
        stderr = float(np.sqrt(cov[0, 0]))
    else:
        value, stderr = np.polyfit(u, y, 1)[0], 0.0
    out.update(value=float(value), uncertainty=max(stderr, float(slope[a:b + 1].std())),
               fit_range=[float(sizes[b]), float(sizes[a])],
               reason=f"linear over eps = {sizes[b]:.4g}..{sizes[a]:.4g}{unit_suffix(bc_ds, 'box_size')} "
                      f"({counts[a]}..{counts[b]} boxes)")
    return out
