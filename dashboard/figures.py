"""Figure builders: pure functions from engine datasets to HoloViews objects (one Bokeh figure).

Nothing here computes a result: every number drawn comes from a Recording,
Diagnostics or Results dataset or from a Summary. The only arithmetic is display
geometry — thinning long series for the screen (a min/max envelope keeps every
peak visible) and turning a 3-D delay view for the screen.
"""

from __future__ import annotations

import json
import textwrap

import holoviews as hv
import numpy as np
import xarray as xr
from bokeh.models import ColumnDataSource, LinearColorMapper
from bokeh.palettes import interp_palette
from bokeh.plotting import figure as bokeh_figure

from engine.embedding import delay_vectors
from engine.recording import UNSTATED, duration_text, signal, time_unit, variable_name

from . import style

hv.extension("bokeh", logo=False)
# Canvas, not WebGL (HoloViews' default since 1.22): without a GPU (remote desktops, virtual machines,
# headless Chromium) WebGL glyphs silently fail to draw and a figure shows only its axes.
hv.renderer("bokeh").webgl = False

MAX_LINE_POINTS = 4000
MAX_CLOUD_POINTS = 5000


# -- display geometry ---------------------------------------------------------------------------------
def envelope(t, x, max_points: int = MAX_LINE_POINTS):
    """Thin (t, x) to at most ``max_points`` points keeping each bin's minimum and maximum.

    Display only: a line through the result has the same peaks and troughs as the
    full series at screen resolution. Series already short enough come back as they are.
    """
    t, x = np.asarray(t), np.asarray(x)
    n = x.size
    if n <= max_points:
        return t, x
    bins = max(1, max_points // 2)
    size = -(-n // bins)                      # ceiling division
    pad = bins * size - n
    xp = np.concatenate([x, np.full(pad, np.nan)]).reshape(bins, size)
    filled = ~np.all(np.isnan(xp), axis=1)
    lo = np.where(filled, np.nanargmin(np.where(np.isnan(xp), np.inf, xp), axis=1), 0)
    hi = np.where(filled, np.nanargmax(np.where(np.isnan(xp), -np.inf, xp), axis=1), 0)
    start = np.arange(bins) * size
    idx = np.sort(np.stack([start + lo, start + hi], axis=1), axis=1).ravel()
    idx = np.unique(idx[idx < n])
    return t[idx], x[idx]


def thin_indices(n: int, max_points: int = MAX_CLOUD_POINTS) -> np.ndarray:
    """Evenly spaced indices, at most ``max_points`` of ``n`` (for point clouds on screen)."""
    step = max(1, -(-n // max_points))
    return np.arange(0, n, step)


def view_rotation(azimuth: float, elevation: float) -> np.ndarray:
    """The 3x3 rotation that turns a cloud by ``azimuth`` about the vertical axis, then tilts
    it by ``elevation`` towards the viewer (degrees). Rows 0 and 1 are the screen axes."""
    a, e = np.radians(azimuth), np.radians(elevation)
    turn = np.array([[np.cos(a), -np.sin(a), 0.0], [np.sin(a), np.cos(a), 0.0], [0.0, 0.0, 1.0]])
    tilt = np.array([[1.0, 0.0, 0.0], [0.0, np.cos(e), -np.sin(e)], [0.0, np.sin(e), np.cos(e)]])
    return tilt @ turn


def project(points: np.ndarray, azimuth: float, elevation: float) -> np.ndarray:
    """Screen coordinates (columns: across, up, depth) of centred 3-D points."""
    centred = points - points.mean(axis=0)
    return centred @ view_rotation(azimuth, elevation).T


# -- labels -------------------------------------------------------------------------------------------
def _unitless(units: str | None) -> bool:
    return units in (None, "", "1")


def _with_units(label: str, units: str | None) -> str:
    """"radius (K)"; a dimensionless or unknown unit adds nothing."""
    return label if _unitless(units) else f"{label} ({units})"


def _signal_label(rec: xr.Dataset) -> str:
    name = variable_name(rec)
    return _with_units(name, rec[name].attrs.get("units"))


def _var_label(ds: xr.Dataset, var: str) -> str:
    attrs = ds[var].attrs
    return _with_units(attrs.get("long_name", var.replace("_", " ")), attrs.get("units"))


def _attr(ds, key, default=None):
    if ds is None or key not in ds.attrs:
        return default
    value = ds.attrs[key]
    return json.loads(value) if isinstance(value, str) else value


def _fmt(value, digits: int = 3) -> str:
    return "n/a" if value is None else f"{value:.{digits}g}"


def _note(text: str) -> hv.Text:
    """A placeholder panel that says why there is nothing to draw."""
    text = "\n".join(textwrap.fill(line, 60) for line in str(text).splitlines())
    return hv.Text(0.5, 0.5, text).opts(xaxis=None, yaxis=None, toolbar=None, responsive=True, height=200,
                                        color=style.SLATE, show_frame=False)


# -- recording ----------------------------------------------------------------------------------------
TIME_LABELS = {"sample": "sample number", UNSTATED: "time (unit not given)"}


def time_series(rec: xr.Dataset, max_points: int = MAX_LINE_POINTS) -> hv.Curve:
    """The recording against time, thinned to a min/max envelope for long series."""
    t, x = envelope(rec["time"].values, signal(rec), max_points)
    n = rec.sizes["time"]
    title = f"{variable_name(rec)}: {n:,} samples" + ("" if n <= max_points else ", envelope drawn")
    unit = time_unit(rec)
    return hv.Curve((t, x), kdims=[hv.Dimension("time", label=TIME_LABELS.get(unit, f"time ({unit})"))],
                    vdims=[hv.Dimension("value", label=_signal_label(rec))]).opts(
        color=style.INK, line_width=1, title=title, tools=["hover", "xwheel_zoom", "xbox_select"],
        active_tools=["xbox_select"], **style.PLOT)


def spectrum(spec: xr.Dataset | None, dominant: dict | None = None, unit: str = "sample"):
    """Power spectral density (PSD, log-log) with the dominant period marked at frequency 1 / period."""
    if spec is None or "power" not in spec:
        if dominant and dominant.get("time"):
            return _note(f"dominant period {duration_text(dominant['time'], unit)}\n"
                         f"({100 * (dominant.get('strength') or 0):.0f} % of the power in its peak)")
        return _note(dominant.get("reason", "no dominant period") if dominant else "no spectrum yet")
    freq_dim = spec["power"].dims[0]
    f = spec[freq_dim].values
    p = spec["power"].values
    keep = (f > 0) & (p > 0)
    freq_unit = spec[freq_dim].attrs.get("units", "1/sample")
    curve = hv.Curve((f[keep], p[keep]), kdims=[hv.Dimension("frequency", label=f"frequency ({freq_unit})")],
                     vdims=[hv.Dimension("power", label=_with_units("PSD", spec["power"].attrs.get("units")))]).opts(
        color=style.INK, line_width=1, logx=True, logy=True, tools=["hover"], **style.PLOT)
    title = "power spectrum"
    marks = []
    if dominant and dominant.get("time"):
        marks.append(hv.VLine(1.0 / dominant["time"]).opts(color=style.CLAY, line_dash="dashed", line_width=2))
        title += f" — dominant period {duration_text(dominant['time'], unit)}"
    return hv.Overlay([curve, *marks]).opts(title=title)


# -- delay and dimension ------------------------------------------------------------------------------
def _lag_curve(diag: xr.Dataset, var: str, colour: str, marked: int | None, title: str):
    curve = hv.Curve((diag["lag"].values, diag[var].values),
                     kdims=[hv.Dimension("lag", label="lag (samples)")],
                     vdims=[hv.Dimension(var, label=_var_label(diag, var))]).opts(
        color=colour, line_width=2, tools=["hover"], **style.PLOT)
    parts = [curve]
    if marked is not None:
        parts.append(hv.VLine(marked).opts(color=style.CLAY, line_dash="dashed", line_width=2))
    return hv.Overlay(parts).opts(title=title)


def delay_curves(diag: xr.Dataset) -> list:
    """Mutual information and autocorrelation against lag, the chosen delay marked: two
    figures, each for a pane of its own (a Layout drawn in a hidden tab loses its axes)."""
    delay = _attr(diag, "delay", {})
    tau = delay.get("samples")
    mark = (f"chosen delay {tau} samples = {_fmt(delay.get('time'))} {delay.get('time_unit', '')}".rstrip()
            if tau is not None else "no delay chosen")
    mi = _lag_curve(diag, "mutual_information", style.INK, tau, f"mutual information — {mark}")
    ac = _lag_curve(diag, "autocorrelation", style.SAGE, tau, "autocorrelation")
    zero = hv.HLine(0).opts(color=style.SLATE, line_width=1)
    return [mi, (ac * zero).opts(title="autocorrelation")]


def dimension_curves(diag: xr.Dataset) -> list:
    """False-nearest-neighbour fraction and Cao's E1, E2 against dimension, the chosen one
    marked: two figures, each for a pane of its own."""
    dim = _attr(diag, "embedding_dimension", {}).get("value")
    d = diag["dimension"].values
    kd = hv.Dimension("dimension", label="embedding dimension")
    mark = [hv.VLine(dim).opts(color=style.CLAY, line_dash="dashed", line_width=2)] if dim is not None else []
    fnn = hv.Curve((d, diag["false_nearest_fraction"].values), kdims=[kd],
                   vdims=[hv.Dimension("fnn", label=_var_label(diag, "false_nearest_fraction"))]).opts(
        color=style.INK, line_width=2, tools=["hover"], **style.PLOT)
    fnn = hv.Overlay([fnn, hv.Scatter(fnn.data).opts(color=style.INK, size=6), *mark]).opts(
        title=f"false neighbours — chosen dimension {dim}", ylabel="fraction of false neighbours")
    cao = [hv.Curve((diag["dimension"].values, diag[v].values), kdims=[kd],
                    vdims=[hv.Dimension("cao", label="Cao's E1 and E2")], label=label).opts(
        color=colour, line_width=2, tools=["hover"], **style.PLOT)
        for v, label, colour in (("cao_e1", "E1", style.INK), ("cao_e2", "E2", style.SAGE)) if v in diag]
    one = hv.HLine(1.0).opts(color=style.SLATE, line_width=1, line_dash="dotted")
    cao = hv.Overlay([*cao, one, *mark]).opts(title="Cao's E1 (levels off) and E2 (≈ 1 for noise)",
                                              legend_position="bottom_right")
    return [fnn, cao]


def _pair_axes(rec: xr.Dataset, delay: int):
    label = _signal_label(rec)
    return (hv.Dimension("x_t", label=f"{label} at t"),
            hv.Dimension("x_tau", label=f"at t + {delay} samples"))


def delay_plot(rec: xr.Dataset, delay: int, max_points: int = MAX_CLOUD_POINTS) -> hv.Path:
    """The 2-D delay plot x(t + delay) against x(t), as a line through the first ``max_points`` vectors."""
    v = delay_vectors(signal(rec), 2, int(delay))
    shown = "" if v.shape[0] <= max_points else f" (first {max_points:,} of {v.shape[0]:,} points)"
    kx, ky = _pair_axes(rec, delay)
    return hv.Path([v[:max_points]], kdims=[kx, ky]).opts(
        color=style.INK, line_width=0.8, alpha=0.9, responsive=True, height=360,
        title=f"delay plot, delay {delay} samples{shown}", show_grid=True, hooks=style.WHEEL_OFF, toolbar="right")


def _view_points(rec: xr.Dataset, delay: int, azimuth: float, elevation: float, max_points: int):
    """(columns across / up / nearness, frame half-width, title) of the 3-D view at one angle."""
    v = delay_vectors(signal(rec), 3, int(delay))
    p = project(np.asarray(v[thin_indices(v.shape[0], max_points)]), azimuth, elevation)
    reach = float(np.sqrt((p ** 2).sum(axis=1)).max()) * 1.05 or 1.0   # the same at every angle
    columns = {"across": p[:, 0], "up": p[:, 1], "nearness": -p[:, 2]}
    return columns, reach, f"delay {delay}: turn {azimuth:.0f}°, tilt {elevation:.0f}° (darker = nearer)"


def rotated_view(rec: xr.Dataset, delay: int, azimuth: float = 30.0, elevation: float = 20.0,
                 max_points: int = MAX_CLOUD_POINTS) -> bokeh_figure:
    """A turnable 3-D delay view (x(t), x(t+d), x(t+2d)) of evenly thinned vectors, shown by
    orthographic projection; colour shows depth (darker = nearer).

    A plain Bokeh figure rather than HoloViews, so that :func:`turn_view` can turn it by
    replacing its points: a HoloViews update makes Bokeh re-walk the whole page's models."""
    columns, reach, title = _view_points(rec, delay, azimuth, elevation, max_points)
    fig = bokeh_figure(title=title, x_range=(-reach, reach), y_range=(-reach, reach), tools="",
                       toolbar_location=None, aspect_ratio=1, sizing_mode="stretch_width",
                       min_width=200, min_border=4)
    fig.axis.visible = False
    fig.grid.visible = False
    depth = LinearColorMapper(palette=interp_palette(("#dbe6ec", style.INK), 64), low=-reach, high=reach)
    fig.scatter("across", "up", source=ColumnDataSource(columns), size=2.5, alpha=0.8, line_color=None,
                fill_color={"field": "nearness", "transform": depth})
    return fig


def turn_view(fig: bokeh_figure, rec: xr.Dataset, delay: int, azimuth: float, elevation: float,
              max_points: int = MAX_CLOUD_POINTS) -> None:
    """Turn a view made by :func:`rotated_view` of the same recording and delay to a new angle."""
    columns, _, title = _view_points(rec, delay, azimuth, elevation, max_points)
    fig.renderers[0].data_source.data = columns
    fig.title.text = title


def delay_multiples(rec: xr.Dataset, delays, max_points: int = 2000) -> list:
    """Small delay plots, one per delay, to set side by side and see the cloud unfold and then
    smear; a list (a pane each), not an hv.Layout, which loses its plots when drawn hidden."""
    x = signal(rec)
    plots = []
    for d in delays:
        if x.size - int(d) < 2:
            continue
        v = delay_vectors(x, 2, int(d))[:max_points]
        plots.append(hv.Path([v]).opts(color=style.INK, line_width=0.7, alpha=0.9, xaxis=None, yaxis=None,
                                       responsive=True, min_width=110, height=170, title=f"delay {d}",
                                       toolbar=None))
    return plots


# -- invariants ---------------------------------------------------------------------------------------
def _coord_label(ds: xr.Dataset, dim: str, fallback: str) -> hv.Dimension:
    attrs = ds[dim].attrs if dim in ds.coords else {}
    return hv.Dimension(dim, label=_with_units(attrs.get("long_name", fallback), attrs.get("units")))


def _per_dimension(ds: xr.Dataset, var: str, xdim: str, chosen: int | None, label: hv.Dimension,
                   **opts) -> list[hv.Curve]:
    """One curve of ``var`` against ``xdim`` per embedding dimension (the chosen one thicker)."""
    dims = ds["dimension"].values
    curves = []
    for i, m in enumerate(dims):
        y = ds[var].sel(dimension=m).values
        ok = np.isfinite(y)
        if not ok.any():
            continue
        thick = chosen is not None and int(m) == int(chosen)
        curves.append(hv.Curve((ds[xdim].values[ok], y[ok]), kdims=[label],
                               vdims=[hv.Dimension(var, label=_var_label(ds, var))], label=f"m = {int(m)}").opts(
            **{"tools": ["hover"], **opts, "color": style.CLAY if thick else style.dimension_colour(i, len(dims)),
               "line_width": 3 if thick else 1.5}))
    return curves


def selectable(fig):
    """The element of a figure that a range selection stream attaches to (its first curve)."""
    for el in (fig.traverse(lambda e: e, [hv.Curve]) if fig is not None else []):
        return el
    return None


def local_slopes(results: xr.Dataset, summary: dict):
    """Local slopes d log C / d log r against radius per dimension, the scaling range shaded and
    the correlation dimension drawn across it. Select a range of radii to refit."""
    if results is None or "local_slope" not in results:
        return _note("no local slopes")
    d2 = summary.get("correlation_dimension") or {}
    m = (summary.get("embedding_dimension") or {}).get("value")
    radius = _coord_label(results, "radius", "radius")
    curves = _per_dimension(results, "local_slope", "radius", m, radius, logx=True,
                            tools=["hover", "xbox_select"], **style.PLOT)
    parts = list(curves)
    rng = d2.get("scaling_range")
    if rng:
        parts.insert(0, hv.VSpan(*rng).opts(color=style.SAND, alpha=0.5))
    if d2.get("value") is not None:
        parts.append(hv.HLine(d2["value"]).opts(color=style.CLAY, line_dash="dashed", line_width=1.5))
    title = f"D2 = {_pm(d2)}" if d2.get("value") is not None else "no correlation dimension (see the table)"
    return hv.Overlay(parts).opts(title=title, legend_position="right", show_legend=True, xlabel=radius.label,
                                  ylabel="local slope d ln C / d ln r", active_tools=["xbox_select"])


def correlation_sums(results: xr.Dataset, summary: dict):
    """Correlation sums C(r) against radius on log-log axes, one curve per dimension."""
    if results is None or "correlation_sum" not in results:
        return _note("no correlation sums")
    m = (summary.get("embedding_dimension") or {}).get("value")
    radius = _coord_label(results, "radius", "radius")
    masked = results["correlation_sum"].where(results["correlation_sum"] > 0)
    curves = _per_dimension(results.assign(correlation_sum=masked), "correlation_sum", "radius", m, radius,
                            logx=True, logy=True, **style.PLOT)
    parts = list(curves)
    rng = (summary.get("correlation_dimension") or {}).get("scaling_range")
    if rng:
        parts.insert(0, hv.VSpan(*rng).opts(color=style.SAND, alpha=0.5))
    return hv.Overlay(parts).opts(title="correlation sums C(r)", legend_position="right", xlabel=radius.label,
                                  ylabel="correlation sum C(r)")


def divergence(results: xr.Dataset, summary: dict):
    """Mean log divergence of neighbours against steps, the fit range shaded. Select a range of
    steps to refit the largest Lyapunov exponent."""
    if results is None or "divergence" not in results:
        return _note("no divergence curves")
    lle = summary.get("largest_lyapunov_exponent") or {}
    m = (summary.get("embedding_dimension") or {}).get("value")
    step = _coord_label(results, "step", "steps ahead (samples)")
    parts = _per_dimension(results, "divergence", "step", m, step, tools=["hover", "xbox_select"], **style.PLOT)
    fit = lle.get("fit_range")
    if fit:
        parts.insert(0, hv.VSpan(*fit).opts(color=style.SAND, alpha=0.5))
    unit = (summary.get("input") or {}).get("time_unit", "sample")
    title = (f"largest exponent {_pm(lle, 'per_time_unit')} per {unit}" if lle.get("per_time_unit") is not None
             else "no exponent (see the table)")
    return hv.Overlay(parts).opts(title=title, legend_position="right", xlabel=step.label,
                                  ylabel="mean ln distance of neighbours", active_tools=["xbox_select"])


def box_counting(results: xr.Dataset, summary: dict):
    """Occupied boxes against box size on log-log axes, the fit range shaded."""
    if results is None or "box_count" not in results:
        return _note("no box counts")
    cap = summary.get("capacity_dimension") or {}
    size = _coord_label(results, "box_size", "box size")
    counts = results["box_count"]
    ok = np.isfinite(counts.values) & (counts.values > 0)
    curve = hv.Curve((results["box_size"].values[ok], counts.values[ok]), kdims=[size],
                     vdims=[hv.Dimension("box_count", label=_var_label(results, "box_count"))]).opts(
        color=style.INK, line_width=2, logx=True, logy=True, tools=["hover"], **style.PLOT)
    parts = [curve, hv.Scatter(curve.data, kdims=[size], vdims=["box_count"]).opts(color=style.INK, size=5)]
    fit = cap.get("fit_range")
    if fit:
        parts.insert(0, hv.VSpan(*fit).opts(color=style.SAND, alpha=0.5))
    title = f"capacity dimension {_pm(cap)}" if cap.get("value") is not None else "no capacity dimension (see the table)"
    return hv.Overlay(parts).opts(title=title, xlabel=size.label, ylabel="occupied boxes N(eps)")


def surrogate_histogram(results: xr.Dataset, summary: dict):
    """Histogram of the surrogates' statistic with the data's value marked."""
    test = summary.get("surrogate_test") or {}
    if results is None or "surrogate_statistic" not in results:
        return _note(test.get("reason") or "no surrogate test")
    values = results["surrogate_statistic"].values
    values = values[np.isfinite(values)]
    counts, edges = np.histogram(values, bins=max(5, min(20, values.size // 2)))
    label = _var_label(results, "surrogate_statistic")
    hist = hv.Histogram((edges, counts), kdims=[hv.Dimension("statistic", label=label)],
                        vdims=[hv.Dimension("count", label="surrogates")]).opts(
        color=style.DIMENSION_RAMP[2], line_color="white", tools=["hover"], **style.PLOT)
    parts = [hist]
    data = test.get("data_statistic")
    lo, hi = float(edges[0]), float(edges[-1])
    if data is not None:
        parts.append(hv.VLine(data).opts(color=style.CLAY, line_width=3))
        lo, hi = min(lo, data), max(hi, data)
    pad = 0.05 * (hi - lo or 1.0)
    title = f"{values.size} surrogates (bars), the data (line): p = {_fmt(test.get('p_value'), 2)}"
    return hv.Overlay(parts).opts(title=title, xlim=(lo - pad, hi + pad), xlabel=label, ylabel="surrogates")


def recurrence_plot(results: xr.Dataset, pixels: int = 400, units: str = ""):
    """The recurrence plot as an image of the density of recurrent pairs (mirrored about the
    diagonal), binned to at most ``pixels`` per side for the screen; ``units``: the signal's, for
    the radius in the title."""
    if results is None or "recurrence_row" not in results:
        return _note("no recurrence plot")
    facts = _attr(results, "recurrence", {}) or {}
    n = int(facts.get("points_used") or (int(results["recurrence_column"].max()) + 1))
    rows, cols = results["recurrence_row"].values, results["recurrence_column"].values
    side = min(pixels, n)
    edges = np.linspace(0, n, side + 1)
    grid, _, _ = np.histogram2d(np.concatenate([rows, cols]), np.concatenate([cols, rows]), bins=[edges, edges])
    cell = (n / side) ** 2
    img = hv.Image(np.flipud(grid / cell), bounds=(0, 0, n, n),
                   kdims=[hv.Dimension("j", label="delay vector j"), hv.Dimension("i", label="delay vector i")],
                   vdims=[hv.Dimension("density", label="fraction recurrent")])
    rate = facts.get("recurrence_rate")
    return img.opts(cmap=["#ffffff", style.INK], responsive=True, aspect=1, colorbar=False,
                    tools=["hover"], hooks=style.WHEEL_OFF, toolbar="right",
                    title=f"{n:,} vectors, radius {_fmt(facts.get('radius'))}{'' if _unitless(units) else ' ' + units}, "
                          f"rate {_fmt(rate, 2)}")


def space_time(results: xr.Dataset, theiler: int | None):
    """Space-time separation: distance quantiles against time separation, Theiler window marked."""
    if results is None or "space_time_quantile" not in results:
        return _note("no space-time separation plot")
    sep = _coord_label(results, "separation", "time separation (samples)")
    parts = []
    qs = results["quantile"].values
    for i, q in enumerate(qs):
        y = results["space_time_quantile"].sel(quantile=q).values
        parts.append(hv.Curve((results["separation"].values, y), kdims=[sep],
                              vdims=[hv.Dimension("d", label=_var_label(results, "space_time_quantile"))],
                              label=f"{100 * q:g}%").opts(color=style.dimension_colour(i, len(qs)), line_width=1.5,
                                                          tools=["hover"], **style.PLOT))
    if theiler is not None:
        parts.append(hv.VLine(theiler).opts(color=style.CLAY, line_dash="dashed", line_width=2))
    return hv.Overlay(parts).opts(title=f"distance quantiles; Theiler window {theiler} samples (dashed)",
                                  legend_position="right", xlabel=sep.label,
                                  ylabel="distance between delay vectors")


def _pm(est: dict, key: str = "value") -> str:
    value, unc = est.get(key), est.get("uncertainty")
    return _fmt(value) + ("" if unc is None else f" ± {_fmt(unc, 2)}")
