"""Box counts and the capacity dimension against published and analytic values."""

import json
import threading

import numpy as np
import pytest

from engine.boxcount import box_counts, capacity_dimension
from engine.errors import Cancelled, LagspaceError
from engine.kernels.boxes import box_indices, occupied_boxes, occupied_boxes_reference
from systems import henon, lorenz, sine, white_noise


@pytest.mark.parametrize("dimension,delay,n_boxes", [(1, 1, 50), (2, 1, 300), (3, 4, 40), (6, 2, 8)])
def test_hash_count_equals_numpy_unique_rows(dimension, delay, n_boxes):
    # source: numpy.unique(rows, axis=0), the distinct delay vectors of the grid indices
    x = np.asarray(lorenz(4000))
    q = box_indices(x, x.min(), np.ptp(x), n_boxes)
    assert occupied_boxes(q, dimension, delay) == occupied_boxes_reference(q, dimension, delay)


def test_grid_indices_tile_the_range():
    # analytic: n boxes of edge extent / n cover [min, max] with indices 0..n-1, the maximum included
    x = np.linspace(-2.0, 3.0, 101)
    q = box_indices(x, -2.0, 5.0, 10)
    assert q.min() == 0 and q.max() == 9
    np.testing.assert_array_equal(np.bincount(q), [10] * 9 + [11])


def test_henon_capacity_dimension():
    # source: Russell, Hanson & Ott, PRL 45 (1980) 1175: Henon D0 = 1.26 (memory); tolerance 0.06
    ds = box_counts(np.asarray(henon(100_000)), delay=1, dimension=2)
    d0 = capacity_dimension(ds)
    assert d0["value"] == pytest.approx(1.26, abs=0.06)
    assert json.loads(ds.attrs["capacity_dimension"]) == d0
    lo, hi = d0["fit_range"]
    counts = ds["box_count"].sel(box_size=slice(hi, lo)).values
    assert counts.max() <= 0.05 * ds.attrs["n_vectors"]  # the saturated end is left out


def test_uniform_square_has_dimension_two():
    # analytic: iid uniform pairs (u_i, u_i+1) fill the unit square, D0 = 2; tolerance 0.05
    d0 = capacity_dimension(box_counts(np.random.default_rng(0).uniform(size=100_000), 1, 2))
    assert d0["value"] == pytest.approx(2.0, abs=0.05)


@pytest.mark.parametrize("series", [np.linspace(0.0, 1.0, 20_000), sine(20_000, period=397.3)],
                         ids=["line segment", "closed curve"])
def test_curves_have_dimension_one(series):
    # analytic: a line segment and a closed curve (periodic orbit) have D0 = 1; tolerance 0.05
    d0 = capacity_dimension(box_counts(series, delay=40, dimension=2))
    assert d0["value"] == pytest.approx(1.0, abs=0.05)


def test_too_little_data_gives_no_value():
    # Gaussian noise in 4 dimensions fills space: 5000 points never show a linear range
    d0 = capacity_dimension(box_counts(white_noise(5000, seed=1), 1, 4))
    assert d0["value"] is None and "more data" in d0["reason"]


def test_dataset_shape_and_progress():
    seen = []
    ds = box_counts(np.asarray(henon(5000)), 1, 2, n_sizes=12, progress=lambda f, m: seen.append(f))
    assert ds["box_count"].dims == ("box_size",) and ds.sizes["box_size"] <= 12
    assert np.all(np.diff(ds["box_size"].values) < 0) and np.all(np.diff(ds["box_count"].values) >= 0)
    for name in list(ds.data_vars) + list(ds.coords):
        assert ds[name].attrs["units"] and ds[name].attrs["long_name"]
    assert seen[-1] == 1.0 and seen == sorted(seen)
    flag = threading.Event()
    flag.set()
    with pytest.raises(Cancelled):
        box_counts(np.asarray(henon(5000)), 1, 2, cancel=flag)


def test_bad_arguments():
    with pytest.raises(LagspaceError, match="dimension"):
        box_counts(np.asarray(henon(500)), 1, 0)
    with pytest.raises(LagspaceError, match="n_sizes"):
        box_counts(np.asarray(henon(500)), 1, 2, n_sizes=1)
    with pytest.raises(LagspaceError, match="box_counts"):
        capacity_dimension({"box_count": 1})
