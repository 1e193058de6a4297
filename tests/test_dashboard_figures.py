"""Figure builders: display geometry against independent references, and every figure renders."""

import holoviews as hv
from bokeh.models import Plot
import numpy as np
import pytest
from scipy.spatial.distance import pdist
from scipy.spatial.transform import Rotation

import systems
from engine.recording import make_recording

from dashboard import figures


@pytest.fixture(scope="module")
def lorenz_rec():
    return make_recording(systems.lorenz(6000), sampling_interval=0.01, time_unit="s", name="x", units="V")


def test_envelope_keeps_every_bins_extremes():
    # Reference: per-bin minima and maxima by numpy reshape (the definition of a min/max envelope).
    x = systems.ar1(10_000, 0.9, seed=3)
    t = np.arange(x.size) * 0.5
    te, xe = figures.envelope(t, x, max_points=1000)
    assert xe.size <= 1000
    assert np.all(np.diff(te) > 0)
    assert np.isin(xe, x).all()
    bins = x.reshape(500, 20)
    assert set(bins.min(axis=1)) <= set(xe) and set(bins.max(axis=1)) <= set(xe)
    assert xe.min() == x.min() and xe.max() == x.max()


def test_envelope_handles_ragged_tail_and_short_series():
    x = systems.white_noise(1003, seed=1)
    te, xe = figures.envelope(np.arange(1003), x, max_points=100)
    assert xe.max() == x.max() and xe.min() == x.min() and xe.size <= 100
    t, y = figures.envelope(np.arange(50), x[:50], max_points=100)
    assert np.array_equal(y, x[:50])


@pytest.mark.parametrize("azimuth, elevation", [(0, 0), (30, 20), (-135, 70), (180, -90)])
def test_view_rotation_matches_scipy(azimuth, elevation):
    # Reference: scipy's extrinsic z-then-x rotation (turn about the vertical, then tilt).
    expected = Rotation.from_euler("zx", [azimuth, elevation], degrees=True).as_matrix()
    assert np.allclose(figures.view_rotation(azimuth, elevation), expected, atol=1e-12)


def test_projection_preserves_distances(lorenz_rec):
    # A rotation is an isometry: pairwise distances (scipy pdist) are unchanged.
    x = lorenz_rec["x"].values
    v = np.column_stack([x[:-32], x[16:-16], x[32:]])[:300]
    p = figures.project(v, 40.0, 25.0)
    assert np.allclose(pdist(v), pdist(p))
    assert np.allclose(p.mean(axis=0), 0.0, atol=1e-9)


def test_time_series_labels_and_extremes(lorenz_rec):
    curve = figures.time_series(lorenz_rec, max_points=2000)
    y = curve.dimension_values(1)
    assert y.size <= 2000
    assert y.max() == lorenz_rec["x"].values.max() and y.min() == lorenz_rec["x"].values.min()
    assert curve.kdims[0].label == "time (s)" and curve.vdims[0].label == "x (V)"


def test_delay_plot_is_the_lagged_pairs(lorenz_rec):
    # Reference: numpy slicing x[:-tau] against x[tau:].
    x = lorenz_rec["x"].values
    path = figures.delay_plot(lorenz_rec, 16, max_points=1000)
    data = path.split()[0].array()
    assert np.array_equal(data, np.column_stack([x[:-16], x[16:]])[:1000])


def _view_points(fig) -> np.ndarray:
    data = fig.renderers[0].data_source.data
    return np.column_stack([data["across"], data["up"], -np.asarray(data["nearness"])])


def test_rotated_view_keeps_shape(lorenz_rec):
    # Analytic: a rotation keeps every distance, so the shown cloud has the pair distances
    # (scipy pdist) of the delay vectors x(t), x(t+d), x(t+2d) it shows.
    fig = figures.rotated_view(lorenz_rec, 10, azimuth=50, elevation=-30, max_points=400)
    shown = _view_points(fig)
    x = lorenz_rec["x"].values
    v = np.column_stack([x[:-20], x[10:-10], x[20:]])
    v = v[figures.thin_indices(v.shape[0], 400)]
    assert shown.shape[0] <= 400
    assert np.allclose(pdist(shown), pdist(v))


def test_turning_a_view_in_place_equals_drawing_it_anew(lorenz_rec):
    fig = figures.rotated_view(lorenz_rec, 10, azimuth=30, elevation=20, max_points=400)
    frame = (fig.x_range.start, fig.x_range.end)
    figures.turn_view(fig, lorenz_rec, 10, azimuth=75, elevation=-40, max_points=400)
    fresh = figures.rotated_view(lorenz_rec, 10, azimuth=75, elevation=-40, max_points=400)
    assert np.allclose(_view_points(fig), _view_points(fresh))
    assert fig.title.text == fresh.title.text == "delay 10: turn 75°, tilt -40° (darker = nearer)"
    assert (fresh.x_range.start, fresh.x_range.end) == pytest.approx(frame)  # the frame stays put


def test_delay_multiples_one_panel_per_delay(lorenz_rec):
    plots = figures.delay_multiples(lorenz_rec, [2, 8, 16, 64])
    assert [el.opts.get().kwargs["title"] for el in plots] == ["delay 2", "delay 8", "delay 16", "delay 64"]


def _drawn_on_canvas(fig) -> bool:
    """Rendered, and every plot in it draws on a 2-D canvas: HoloViews' WebGL default draws nothing
    where no GPU is (seen in headless Chromium: axes without curves)."""
    plots = [m for m in hv.render(fig).references() if isinstance(m, Plot)]
    return bool(plots) and all(p.output_backend == "canvas" for p in plots)


def test_recording_figures_render(lorenz_rec):
    for fig in (figures.time_series(lorenz_rec), figures.delay_plot(lorenz_rec, 16),
                *figures.delay_multiples(lorenz_rec, [4, 16]),
                figures.spectrum(None, {"time": 0.7, "strength": 0.3}, unit="s")):
        assert _drawn_on_canvas(fig)
    # Scrolling the page must not zoom a plot the pointer passes over (wheel zoom stays opt-in).
    for fig in (figures.time_series(lorenz_rec), figures.delay_plot(lorenz_rec, 16)):
        assert hv.render(fig).toolbar.active_scroll is None
    assert figures.rotated_view(lorenz_rec, 16).toolbar.tools == []  # nothing to zoom with at all


def test_recurrence_image_is_the_symmetric_recurrence_matrix():
    # Reference: the dense matrix from scipy.spatial.distance.cdist (max norm, as the engine uses)
    # at the engine's radius, outside the Theiler band; at full resolution each pixel is one pair.
    from scipy.spatial.distance import cdist

    from engine.recording import json_attr
    from engine.recurrence import recurrence_quantification

    x = np.asarray(systems.henon(400))
    ds = recurrence_quantification(x, delay=1, dimension=2, rate=0.05, max_points=200, theiler=1)
    radius = json_attr(ds, "recurrence")["radius"]
    v = np.column_stack([x[:200], x[1:201]])
    offset = np.abs(np.subtract.outer(np.arange(200), np.arange(200)))
    expected = (cdist(v, v, "chebyshev") <= radius) & (offset > 1)
    img = figures.recurrence_plot(ds, pixels=400)
    values = img.dimension_values(2, flat=False)                    # rows as stored, with their y centres
    ys, xs = img.dimension_values(1, expanded=False), img.dimension_values(0, expanded=False)
    shown = values[np.argsort(ys)][:, np.argsort(xs)]                # row i = vector i, column j = vector j
    assert img[12.5, 40.5] == shown[40, 12]                          # spot check through holoviews indexing
    assert np.array_equal(shown > 0, expected)
    assert hv.render(img) is not None
    title = figures.recurrence_plot(ds, units="V").opts.get().kwargs["title"]
    assert f"radius {radius:.3g} V," in title  # the radius is in the signal's units (maximum norm)


def test_surrogate_histogram_counts_every_surrogate_and_marks_the_data():
    from engine.recording import json_attr
    from engine.surrogates import surrogate_test

    x = np.asarray(systems.henon(1000))
    ds = surrogate_test(x, kind="ft", statistic="time_asymmetry", count=19, seed=1, delay=1, dimension=2,
                        sided="one")
    summary = {"surrogate_test": json_attr(ds, "surrogate_test")}
    overlay = figures.surrogate_histogram(ds, summary)
    hist, line = overlay.get(0), overlay.get(1)
    assert hist.dimension_values(1).sum() == 19
    assert line.data == summary["surrogate_test"]["data_statistic"]
    assert hv.render(overlay) is not None


@pytest.fixture(scope="module")
def henon_analysis():
    from engine.analysis import run_standard_analysis
    from engine.settings import Settings

    rec = make_recording(systems.henon(2000), name="x")
    return run_standard_analysis(rec, Settings(surrogates=19, max_dimension=5, recurrence_max_points=500))


def _spans(overlay):
    return [el for el in overlay if isinstance(el, hv.VSpan)]


def test_result_figures_draw_the_engines_ranges(henon_analysis):
    res, summary = henon_analysis.results, henon_analysis.summary
    slopes = figures.local_slopes(res, summary)
    rng = summary["correlation_dimension"]["scaling_range"]
    if rng:
        assert [tuple(s.data) for s in _spans(slopes)] == [tuple(rng)]
    curves = [el for el in slopes if isinstance(el, hv.Curve)]
    assert len(curves) == int(np.isfinite(res["local_slope"].values).any(axis=1).sum())
    chosen = summary["embedding_dimension"]["value"]
    assert [c.label for c in curves if c.opts.get().kwargs["color"] == figures.style.CLAY] == [f"m = {chosen}"]
    fit = summary["largest_lyapunov_exponent"]["fit_range"]
    div = figures.divergence(res, summary)
    assert [tuple(s.data) for s in _spans(div)] == ([tuple(fit)] if fit else [])
    assert figures.selectable(slopes) is curves[0]


def test_result_figures_render(henon_analysis):
    res, summary = henon_analysis.results, henon_analysis.summary
    diag = henon_analysis.diagnostics
    for fig in (figures.local_slopes(res, summary), figures.correlation_sums(res, summary),
                figures.divergence(res, summary), figures.box_counting(res, summary),
                figures.surrogate_histogram(res, summary), figures.recurrence_plot(res),
                figures.space_time(res, summary["theiler_window"]["samples"]),
                *figures.delay_curves(diag), *figures.dimension_curves(diag)):
        assert _drawn_on_canvas(fig)


def test_missing_results_give_a_note_not_an_error():
    for fig in (figures.local_slopes(None, {}), figures.divergence(None, {}), figures.box_counting(None, {}),
                figures.surrogate_histogram(None, {}), figures.recurrence_plot(None), figures.space_time(None, 3)):
        assert isinstance(fig, hv.Text)


def test_spectrum_marks_the_dominant_period_in_time_units():
    # Analytic: a 2 Hz sine sampled every 0.01 s has its power peak at 2 Hz, i.e. period 0.5 s.
    from engine.delay import power_spectrum

    t = np.arange(4000) * 0.01
    spec = power_spectrum(np.sin(2 * np.pi * 2.0 * t), sampling_interval=0.01)
    fig = figures.spectrum(spec, {"time": 0.5, "strength": 0.99}, unit="s")
    curve, mark = fig.get(0), fig.get(1)
    assert fig.opts.get().kwargs["title"].endswith("dominant period 0.5 s")
    assert mark.data == pytest.approx(2.0)
    f, p = curve.dimension_values(0), curve.dimension_values(1)
    assert f[np.argmax(p)] == pytest.approx(2.0, abs=0.05)
    assert hv.render(fig) is not None


def test_results_table_rounds_values_to_their_uncertainty(henon_analysis):
    """GUM (JCGM 100:2008) 7.2.6: uncertainty to two significant digits, value to the same place."""
    from dashboard.pages.invariants import result_rows, results_table_html

    summary = dict(henon_analysis.summary)
    summary["correlation_dimension"] = dict(summary["correlation_dimension"], value=1.2168, uncertainty=0.0234)
    summary["largest_lyapunov_exponent"] = dict(summary["largest_lyapunov_exponent"],
                                                per_time_unit=0.41872, uncertainty=0.0139)
    rows = {q: (v, unit) for q, v, unit, _ in result_rows(summary)}
    assert rows["Correlation dimension D2"] == ("1.217 ± 0.023", "(no unit)")
    assert rows["Largest Lyapunov exponent"] == ("0.419 ± 0.014", "per sample")
    assert "<th>Value ± uncertainty</th>" in results_table_html(summary)
