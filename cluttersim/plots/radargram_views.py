"""Radargram views: power in dB against trace and delay (:func:`plot_radargram`), one panel per
band, and in elevation (height above the datum, the terrain drawn); the dB range chosen from the
data (:func:`auto_db_range`) or shared (:func:`db_limits`); the depth and along-track distance axes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from matplotlib import colormaps
from matplotlib.patches import Patch
from matplotlib.patheffects import withStroke

from .overlays import draw_noise_floor, draw_predicted_subsurface
from ..physics.radar import apparent_depth_m, delay_after_surface_s
from ..io.radargram import thin_traces
from .style import (
    _figure_for, _finish, _LEGEND_STYLE, _new_figure, NO_DATA_COLOUR, _note_below, OVERLAY_COLOUR, power_db,
    RADARGRAM_CMAP, RADARGRAM_FIGSIZE_IN, save_figure,
)

@dataclass(frozen=True)
class RadargramLayers:
    """What :func:`plot_radargram` draws, in display units (µs, dB).

    Attributes
    ----------
    image_db : ndarray (sample, trace)
        Echo power in dBW, floored at ``vmin_db``; NaN where there is no data.
    vmin_db, vmax_db : float
        Colour scale limits.
    delay_top_us, delay_bottom_us : float
        Delay at the top edge of the first sample and bottom edge of the last.
    delay_label : str
        y-axis label.
    nadir_us : ndarray (trace,) or None
        Nadir surface delay on the y axis, NaN where unknown; None if not drawn.
    trace_step : int
        Traces of the radargram per column (a long radargram is drawn from every k-th
        trace, :func:`cluttersim.io.radargram.thin_traces`); the x axis counts the radargram's traces.
    """

    image_db: np.ndarray
    vmin_db: float
    vmax_db: float
    delay_top_us: float
    delay_bottom_us: float
    delay_label: str
    nadir_us: np.ndarray | None
    trace_step: int = 1


#: Bounds of the data-driven dynamic range (dB) chosen by :func:`auto_db_range`.
AUTO_DB_RANGE_BOUNDS = (20.0, 80.0)

#: Percentile of the echoing samples' power (dB) that :func:`auto_db_range` puts near the bottom of the scale ...
AUTO_DB_RANGE_PERCENTILE = 10.0

#: ... this far above it (dB), so that the bulk of the samples shows as a dim texture, not black.
AUTO_DB_RANGE_MARGIN_DB = 10.0


def auto_db_range(power_or_db, *, is_db: bool = False) -> float:
    """A dynamic range (dB) chosen from the data so that the clutter shows.

    The scale runs from the strongest sample down to
    :data:`AUTO_DB_RANGE_MARGIN_DB` below the :data:`AUTO_DB_RANGE_PERCENTILE`-th
    percentile of the samples that hold any echo (power > 0: before the first
    surface echo a simulation holds exact zeros, which are left out), rounded
    up to 5 dB and kept within :data:`AUTO_DB_RANGE_BOUNDS`. The bulk of the
    samples (with receiver noise: the noise floor) then shows as a dim
    texture under the brighter clutter hyperbolas, instead of a fixed 60 dB
    that washes the hyperbolas out when the clutter spans less.

    Parameters
    ----------
    power_or_db : array_like
        Power in W (or in dB with ``is_db``); NaN ignored.

    Returns
    -------
    float
        The dynamic range in dB.
    """
    db = np.asarray(power_or_db, dtype=np.float64) if is_db else power_db(power_or_db)
    finite = db[np.isfinite(db)]
    lo, hi = AUTO_DB_RANGE_BOUNDS
    if finite.size == 0:
        return 60.0
    span = float(finite.max() - np.percentile(finite, AUTO_DB_RANGE_PERCENTILE)) + AUTO_DB_RANGE_MARGIN_DB
    return float(np.clip(5.0 * np.ceil(span / 5.0), lo, hi))


def db_limits(*datasets, dynamic_range_db: float | None = None, variable: str = "power") -> tuple[float, float]:
    """One colour scale ``(vmin_db, vmax_db)`` for radargrams that are meant to be compared.

    ``vmax_db`` is the strongest sample of all of them; the range is
    ``dynamic_range_db`` or, by default, :func:`auto_db_range` of all their samples together.
    Pass the result as ``db_limits=`` to :func:`plot_radargram`, :func:`plot_side_radargram`...
    """
    dbs = [power_db(np.asarray(ds[variable].values, dtype=np.float64)).ravel() for ds in datasets]
    allv = np.concatenate(dbs) if dbs else np.array([])
    finite = allv[np.isfinite(allv)]
    vmax = float(finite.max()) if finite.size else 0.0
    rng = float(dynamic_range_db) if dynamic_range_db is not None else auto_db_range(allv, is_db=True)
    if not rng > 0:
        raise ValueError(f"dynamic_range_db must be positive, got {dynamic_range_db!r}")
    return vmax - rng, vmax


def _db_limits(db: np.ndarray, dynamic_range_db: float | None) -> tuple[float, float]:
    """Display range (max − range, max) of finite dB values; max is 0 if there are none; the range
    is :func:`auto_db_range` of the values when ``dynamic_range_db`` is None."""
    finite = np.isfinite(db)
    vmax_db = float(db[finite].max()) if finite.any() else 0.0
    if dynamic_range_db is None:
        dynamic_range_db = auto_db_range(db, is_db=True)
    return vmax_db - float(dynamic_range_db), vmax_db


def _check_range(dynamic_range_db, limits) -> None:
    if dynamic_range_db is not None and not dynamic_range_db > 0:
        raise ValueError(f"dynamic_range_db must be positive, got {dynamic_range_db!r}")
    if limits is not None and not (len(limits) == 2 and float(limits[1]) > float(limits[0])):
        raise ValueError(f"db_limits must be (vmin_db, vmax_db) with vmin_db < vmax_db, got {limits!r}")


def radargram_layers(ds, dynamic_range_db: float | None = None, *, db_limits=None) -> RadargramLayers:
    """Convert a radargram Dataset into the arrays :func:`plot_radargram` draws.

    If ``window_start`` varies along the track the image is shown as recorded:
    delay after each trace's window start. If it is constant (or absent) the
    y axis is the absolute two-way delay (window start + relative delay).
    The nadir surface line is given in the same frame. The colour scale is
    ``db_limits`` if given, else [max − ``dynamic_range_db``, max] (default
    range: :func:`auto_db_range`).
    """
    if "power" not in ds or tuple(ds["power"].dims) != ("trace", "sample"):
        raise ValueError("radargram dataset needs a 'power' variable with dims (trace, sample)")
    if "delay" not in ds.coords:
        raise ValueError("radargram dataset needs a 'delay' (sample) coordinate in seconds")
    _check_range(dynamic_range_db, db_limits)
    ds = thin_traces(ds)
    power_w = np.asarray(ds["power"].values, dtype=np.float64)
    nsample = power_w.shape[1]
    delay_s = np.asarray(ds["delay"].values, dtype=np.float64)
    step_s = float(delay_s[1] - delay_s[0]) if nsample > 1 else 1e-9

    window_start_s = np.asarray(ds["window_start"].values, dtype=np.float64) if "window_start" in ds else None
    finite_ws = window_start_s[np.isfinite(window_start_s)] if window_start_s is not None else np.array([])
    constant_window = finite_ws.size > 0 and np.ptp(finite_ws) <= 1e-3 * abs(step_s)
    if constant_window:
        offset_s = float(finite_ws[0])
        delay_label = "two-way delay (µs)"
    else:
        offset_s = 0.0
        delay_label = "delay after window start (µs)"

    nadir_us = None
    if "nadir_delay" in ds and window_start_s is not None:
        nadir_s = np.asarray(ds["nadir_delay"].values, dtype=np.float64)
        nadir_us = (nadir_s if constant_window else nadir_s - window_start_s) * 1e6
        if not np.isfinite(nadir_us).any():
            nadir_us = None

    if db_limits is not None:
        vmin_db, vmax_db = float(db_limits[0]), float(db_limits[1])
    else:
        vmin_db, vmax_db = _db_limits(power_db(power_w), dynamic_range_db)
    image_db = np.minimum(power_db(power_w, floor_db=vmin_db), vmax_db).T
    return RadargramLayers(
        image_db=image_db,
        vmin_db=vmin_db,
        vmax_db=vmax_db,
        delay_top_us=(offset_s + delay_s[0] - 0.5 * step_s) * 1e6,
        delay_bottom_us=(offset_s + delay_s[-1] + 0.5 * step_s) * 1e6,
        delay_label=delay_label,
        nadir_us=nadir_us,
        trace_step=int(ds.attrs.get("picture_trace_step", 1)),
    )


def plot_radargram(
    ds,
    path=None,
    *,
    ax=None,
    dynamic_range_db: float | None = None,
    db_limits=None,
    title: str | None = None,
    permittivity: float | None = None,
    distance_axis: bool = True,
    dpi: float | None = None,
    fmt: str | None = None,
):
    """Draw a radargram (echo power in dB, trace vs delay).

    Parameters
    ----------
    ds : xarray.Dataset
        Dims ``trace``, ``sample``; ``power`` (trace, sample) in W, NaN for no
        data; coordinate ``delay`` (sample) in s after the window start;
        ``window_start`` and ``nadir_delay`` (trace) absolute two-way delays
        in s (NaN allowed). See :mod:`cluttersim.io.radargram`.
    path : str or Path, optional
        Save the figure there (atomically; format from ``fmt`` or the suffix)
        and return the path. Without it nothing is written.
    ax : matplotlib.axes.Axes, optional
        Draw into these axes (e.g. from ``plt.subplots()``); by default a new
        :class:`~matplotlib.figure.Figure` (no pyplot) is made.
    dynamic_range_db : float, optional
        Colour scale spans [max − dynamic_range_db, max] dBW; default chosen
        from the data (:func:`auto_db_range`). Weaker echoes and zero power
        are drawn at the bottom of the scale.
    db_limits : (float, float), optional
        Fixed colour scale (vmin_db, vmax_db), e.g. from :func:`db_limits`, to
        draw figures meant to be compared on one scale.
    title : str, optional
    permittivity : float, optional
        Real relative permittivity ε′ ≥ 1. If given, a second y axis on the
        right shows the apparent depth below the nadir surface,
        :func:`cluttersim.physics.radar.apparent_depth_m` of the delay after the
        median nadir delay (see :func:`plot_side_radargram`).
    distance_axis : bool
        With a ``distance`` coordinate (or lat/lon), an along-track distance
        axis (km) on top, beside the trace index below.
    dpi, fmt
        For ``path``: resolution (default :data:`DPI`) and format (png, pdf, svg).

    If ``ds`` has ``noise_power`` its level is marked on the colour bar, and if
    it has ``predicted_subsurface_delay`` that delay is drawn as a line
    (:mod:`cluttersim.plots.overlays`).

    Returns
    -------
    Figure, Axes or Path
        The new Figure; the given ``ax``; or ``path`` if one was given.

    Examples
    --------
    >>> import cluttersim, cluttersim.plots as plots
    >>> ds = cluttersim.examples.tiny_radargram()
    >>> fig = plots.plot_radargram(ds, permittivity=3.15)
    >>> fig.axes[0].get_xlabel()
    'trace'
    """
    _check_permittivity(permittivity)
    fig, ax, given = _figure_for(ax, RADARGRAM_FIGSIZE_IN)
    _draw_radargram_panel(fig, ax, ds, dynamic_range_db, title, permittivity, db_limits, distance_axis)
    return _finish(fig, ax, given, path, dpi, fmt)


def plot_band_radargrams(ds, path=None, *, ax=None, dynamic_range_db: float | None = None, title: str | None = None,
                         permittivity: float | None = None, distance_axis: bool = True, dpi=None, fmt=None):  # fmt: skip
    """Draw each band of a multi-band radargram (``band`` dimension, :mod:`cluttersim.io.radargram`)
    as one panel of a column, each with its own colour scale (the bands' power levels differ by
    their radar constants), titled with its centre frequency and bandwidth.

    ``ax``: a sequence of one Axes per band (default: a new Figure). Returns the Figure, the
    given axes, or ``path`` (as :func:`plot_radargram`)."""
    from ..io.radargram import band_names, select_band

    _check_permittivity(permittivity)
    names = band_names(ds)
    if not names:
        raise ValueError("plot_band_radargrams: the radargram has no band dimension")
    if ax is None:
        fig = _new_figure((RADARGRAM_FIGSIZE_IN[0], 0.8 * RADARGRAM_FIGSIZE_IN[1] * len(names)))
        axes, given = [fig.add_subplot(len(names), 1, i + 1) for i in range(len(names))], False
    else:
        axes, given = list(np.ravel(ax)), True
        if len(axes) != len(names):
            raise ValueError(f"plot_band_radargrams: ax needs one Axes per band ({len(names)}), got {len(axes)}")
        fig = axes[0].figure
    for i, name in enumerate(names):
        one = select_band(ds, name)
        f_mhz, b_mhz = one.attrs["radar_center_frequency_hz"] / 1e6, one.attrs["radar_bandwidth_hz"] / 1e6
        label = f"band {name}: {f_mhz:g} MHz, bandwidth {b_mhz:g} MHz (resolution {150 / b_mhz:g} m)"
        _draw_radargram_panel(fig, axes[i], one, dynamic_range_db,
                              label if title is None else f"{title}\n{label}" if i == 0 else label, permittivity,
                              None, distance_axis and i == 0)  # fmt: skip
    if path is not None:
        return save_figure(fig, path, dpi=dpi, fmt=fmt)
    return ax if given else fig


def _draw_radargram_panel(fig, ax, ds, dynamic_range_db, title, permittivity, db_limits=None,
                          distance_axis=True) -> None:  # fmt: skip
    """One radargram with its colour bar, nadir line, overlays and axes (see :func:`plot_radargram`)."""
    layers = radargram_layers(ds, dynamic_range_db, db_limits=db_limits)
    cmap = colormaps[RADARGRAM_CMAP].with_extremes(bad=NO_DATA_COLOUR)
    image = ax.imshow(
        layers.image_db,
        cmap=cmap,
        vmin=layers.vmin_db,
        vmax=layers.vmax_db,
        aspect="auto",
        interpolation="antialiased",  # average, not skip, samples when there are more than pixels
        interpolation_stage="rgba",
        origin="upper",
        extent=_radargram_extent(layers),
    )
    handles = []
    line = _draw_nadir_line(ax, layers, OVERLAY_COLOUR)
    if line is not None:
        handles.append(line)
    handles += [h for h in (draw_predicted_subsurface(ax, ds, layers),) if h is not None]
    if np.isnan(layers.image_db).all(axis=0).any():
        handles.append(Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data"))
    colorbar = fig.colorbar(image, ax=ax, label=f"echo power (dBW; {layers.vmax_db - layers.vmin_db:g} dB shown)",
                            pad=0.01)  # fmt: skip
    handles += [h for h in (draw_noise_floor(colorbar, ds, layers.vmin_db, layers.vmax_db),) if h is not None]
    if handles:
        ax.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    _label_radargram(ax, layers, title)
    _add_depth_axis(ax, layers, permittivity)
    if distance_axis:
        add_distance_axis(ax, ds)


def along_track_km(ds) -> np.ndarray | None:
    """Along-track distance of each trace in km: the ``distance`` coordinate (m), or None."""
    if "distance" in ds.variables:
        d = np.asarray(ds["distance"].values, dtype=np.float64)
        return d / 1e3 if d.size and np.isfinite(d).all() else None
    return None


def add_distance_axis(ax, ds):
    """An along-track distance axis (km) on top of a trace axis (traces centred on integers);
    returns it, or None when ``ds`` has no ``distance`` or it does not increase along the track."""
    km = along_track_km(ds)
    if km is None or km.size < 2 or not np.all(np.diff(km) > 0):
        return None
    trace = np.arange(km.size, dtype=np.float64)

    def forward(t):
        t = np.asarray(t, dtype=np.float64)
        slope0, slope1 = km[1] - km[0], km[-1] - km[-2]
        return np.where(t < 0, km[0] + t * slope0, np.where(t > trace[-1], km[-1] + (t - trace[-1]) * slope1,
                                                           np.interp(t, trace, km)))  # fmt: skip

    def inverse(d):
        d = np.asarray(d, dtype=np.float64)
        slope0, slope1 = km[1] - km[0], km[-1] - km[-2]
        return np.where(d < km[0], (d - km[0]) / slope0, np.where(d > km[-1], trace[-1] + (d - km[-1]) / slope1,
                                                                  np.interp(d, km, trace)))  # fmt: skip

    top = ax.secondary_xaxis("top", functions=(forward, inverse))
    top.set_xlabel("along-track distance (km)")
    return top


#: Colour of the nadir terrain profile on the elevation radargram.
TERRAIN_LINE_COLOUR = "#7a5a2f"


def elevation_layers(ds, permittivity: float = 3.15, height_step_m: float | None = None):
    """Resample a radargram onto height above the datum: ``(image_db (height, trace), top_m, step_m,
    surface_m (trace,))``.

    Each sample's height assumes the echo came from straight below the antenna:
    above the nadir surface h = alt − c τ / 2 (free space), below it
    h = h_s − c (τ − τ_n) / (2 √ε′) (the apparent depth of
    :func:`cluttersim.physics.radar.apparent_depth_m`), with τ the absolute two-way
    delay, τ_n the nadir delay and h_s = alt − c τ_n / 2 the nadir surface
    height. Off-nadir clutter therefore appears at the height it would have
    if it were below the antenna — the way an analyst reads such a view.
    """
    from ..constants import SPEED_OF_LIGHT_M_S as C

    eps = float(permittivity)
    apparent_depth_m(0.0, eps)
    power = np.asarray(_trace_by_sample(ds["power"]), dtype=np.float64)
    ntrace, nsample = power.shape
    delay = np.asarray(ds["delay"].values, dtype=np.float64)
    ws = np.asarray(ds["window_start"].values, dtype=np.float64)
    alt = np.asarray(ds["alt"].values, dtype=np.float64)
    nadir = np.asarray(ds["nadir_delay"].values, dtype=np.float64)
    tau = ws[:, None] + delay[None, :]
    surface = alt - 0.5 * C * nadir
    above = alt[:, None] - 0.5 * C * tau
    below = surface[:, None] - C * (tau - nadir[:, None]) / (2.0 * np.sqrt(eps))
    height = np.where(tau <= nadir[:, None], above, below)  # (trace, sample), decreasing along sample
    dt = float(delay[1] - delay[0]) if nsample > 1 else 1e-8
    step = float(height_step_m) if height_step_m else C * dt / (2.0 * np.sqrt(eps))
    finite = np.isfinite(height)
    if not finite.any():
        raise ValueError("elevation view: no trace has a nadir delay (all traces off the DEM?)")
    top, bottom = float(np.nanmax(height)), float(np.nanmin(height))
    nrow = int(min(4096, max(2, np.ceil((top - bottom) / step) + 1)))
    step = (top - bottom) / (nrow - 1) if nrow > 1 else step
    rows_h = top - np.arange(nrow) * step
    image = np.full((nrow, ntrace), np.nan)
    for t in range(ntrace):
        h = height[t]
        if not np.isfinite(h).all():
            continue
        # h decreases with sample index: interpolate power (linear, W) on the reversed (increasing) arrays
        image[:, t] = np.interp(rows_h, h[::-1], power[t, ::-1], left=np.nan, right=np.nan)
    return power_db(image), top, step, surface


def plot_elevation_radargram(ds, path=None, *, ax=None, permittivity: float = 3.15, dynamic_range_db=None,
                             db_limits=None, title: str | None = None, distance_axis: bool = True, dpi=None,
                             fmt=None):  # fmt: skip
    """Draw a radargram in elevation: height above the datum (m) against trace, the nadir surface
    drawn as terrain.

    The airborne-style view of the same data as :func:`plot_radargram`: each
    sample is placed at the height it would have if it came from straight below
    the antenna (free-space range above the surface, apparent depth with ε′ =
    ``permittivity`` below it; :func:`elevation_layers`), so the surface echo
    follows the terrain profile and a real subsurface interface would sit at
    its depth below it, while off-nadir clutter shows as echoes hanging below
    (or, on steep slopes, above) the terrain line.

    Parameters and returns as for :func:`plot_radargram` (``ds`` also needs
    ``alt``, ``window_start`` and ``nadir_delay``).
    """
    _check_range(dynamic_range_db, db_limits)
    image, top, step, surface = elevation_layers(ds, permittivity)
    finite = np.isfinite(image)
    if db_limits is not None:
        vmin, vmax = float(db_limits[0]), float(db_limits[1])
    else:
        vmin, vmax = _db_limits(power_db(np.asarray(ds["power"].values, dtype=np.float64)), dynamic_range_db)
    shown = np.where(finite, np.clip(image, vmin, vmax), np.nan)
    ntrace = image.shape[1]
    bottom = top - step * (image.shape[0] - 1)
    fig, ax, given = _figure_for(ax, RADARGRAM_FIGSIZE_IN)
    im = ax.imshow(shown, cmap=colormaps[RADARGRAM_CMAP].with_extremes(bad="white"), vmin=vmin, vmax=vmax,
                   aspect="auto", interpolation="antialiased", interpolation_stage="rgba", origin="upper",
                   extent=(-0.5, ntrace - 0.5, bottom - 0.5 * step, top + 0.5 * step))  # fmt: skip
    x = np.arange(ntrace)
    (terrain,) = ax.plot(x, surface, color=TERRAIN_LINE_COLOUR, lw=1.6, label="nadir terrain (DEM)",
                         path_effects=[withStroke(linewidth=3.0, foreground="white")])  # fmt: skip
    ax.set_ylim(bottom - 0.5 * step, top + 0.5 * step)
    ax.set_xlabel("trace")
    ax.set_ylabel("height above the datum (m)")
    ax.legend(handles=[terrain], loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(im, ax=ax, label=f"echo power (dBW; {vmax - vmin:g} dB shown)", pad=0.01)
    _note_below(ax, f"each echo placed below the antenna: free space above the terrain, ε′ = {float(permittivity):g} "
                    "below it; white: outside the recording window")  # fmt: skip
    if title:
        ax.set_title(title)
    if distance_axis:
        add_distance_axis(ax, ds)
    return _finish(fig, ax, given, path, dpi, fmt)


def _trace_by_sample(da) -> np.ndarray:
    """Values of a (trace, sample) DataArray in that dimension order."""
    if set(da.dims) == {"trace", "sample"}:
        da = da.transpose("trace", "sample")
    return np.asarray(da.values)


def _radargram_extent(layers: RadargramLayers) -> tuple[float, float, float, float]:
    """imshow extent: traces centred on integers, delay increasing downwards."""
    ntrace, step = layers.image_db.shape[1], layers.trace_step
    return (-0.5 * step, (ntrace - 0.5) * step, layers.delay_bottom_us, layers.delay_top_us)


def _draw_nadir_line(ax, layers: RadargramLayers, colour: str):
    """Dashed nadir-surface line (the Line2D), or None if there is no nadir delay."""
    if layers.nadir_us is None:
        return None
    ntrace = layers.image_db.shape[1]
    (line,) = ax.plot(np.arange(ntrace) * layers.trace_step, layers.nadir_us, color=colour, lw=0.8, ls=(0, (4, 3)), label="nadir surface")
    ax.set_ylim(layers.delay_bottom_us, layers.delay_top_us)  # keep the image frame
    return line


def _label_radargram(ax, layers: RadargramLayers, title: str | None) -> None:
    ax.set_xlabel("trace")
    ax.set_ylabel(layers.delay_label)
    if title:
        ax.set_title(title)


def _check_permittivity(permittivity) -> None:
    """Raise ValueError unless ``permittivity`` is None or a real relative permittivity ≥ 1."""
    if permittivity is not None:
        apparent_depth_m(0.0, float(permittivity))  # validates (ε′ ≥ 1, not NaN)


def nadir_reference_us(layers: RadargramLayers) -> tuple[float, float] | None:
    """Zero of the apparent-depth axis: the median nadir delay on the y axis, and its spread.

    Parameters
    ----------
    layers : RadargramLayers
        From :func:`radargram_layers`; its ``nadir_us`` is in the frame of the
        y axis (absolute, or relative to each trace's window start).

    Returns
    -------
    (float, float) or None
        Median over traces and peak-to-peak range of the finite nadir delays,
        in µs; None if no trace has a nadir delay.
    """
    if layers.nadir_us is None:
        return None
    nadir_us = layers.nadir_us[np.isfinite(layers.nadir_us)]
    if nadir_us.size == 0:
        return None
    return float(np.median(nadir_us)), float(np.ptp(nadir_us))


def depth_axis_functions(surface_us: float, permittivity: float):
    """Forward and inverse maps between the delay axis (µs) and apparent depth (m).

    depth_m = :func:`~cluttersim.physics.radar.apparent_depth_m` ((delay_us −
    surface_us) · 1e-6 s, ε′), and its inverse through
    :func:`~cluttersim.physics.radar.delay_after_surface_s`; for
    ``Axes.secondary_yaxis(functions=...)``.

    Parameters
    ----------
    surface_us : float
        Delay of depth zero on the delay axis, in µs.
    permittivity : float
        Real relative permittivity ε′ ≥ 1.

    Returns
    -------
    (callable, callable)
        ``delay_us → depth_m`` and ``depth_m → delay_us``, both on arrays.
    """
    eps = float(permittivity)
    apparent_depth_m(0.0, eps)  # validates ε′

    def depth_m(delay_us):
        return apparent_depth_m((np.asarray(delay_us, dtype=np.float64) - surface_us) * 1e-6, eps)

    def delay_us(depth):
        return delay_after_surface_s(depth, eps) * 1e6 + surface_us

    return depth_m, delay_us


def _add_depth_axis(ax, layers: RadargramLayers, permittivity: float | None):
    """Right-hand apparent-depth axis below the median nadir surface; returns it (None if not drawn).

    Without a nadir delay there is no surface to measure from: a note
    replaces the axis. If the nadir line spans more than one sample, a note
    says that depth zero is the median nadir delay.
    """
    if permittivity is None:
        return None
    reference = nadir_reference_us(layers)
    if reference is None:
        _note_below(ax, "no nadir surface delay: depth axis omitted")
        return None
    surface_us, spread_us = reference
    depth_axis = ax.secondary_yaxis("right", functions=depth_axis_functions(surface_us, permittivity))
    depth_axis.set_ylabel(f"apparent depth below nadir surface (m, ε′ = {float(permittivity):g})")
    sample_us = (layers.delay_bottom_us - layers.delay_top_us) / layers.image_db.shape[0]
    if spread_us > sample_us:
        _note_below(
            ax,
            f"depth 0 m: median nadir delay ({surface_us:.2f} µs); "
            f"the nadir line spans {spread_us:.2f} µs along the track",
        )
    return depth_axis
