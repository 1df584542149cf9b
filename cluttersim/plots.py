"""Figures: radargrams (power, side of the track), comparisons with observed data and maps (track, echo sources).

Every ``plot_*`` function draws into the ``ax=`` you give it (e.g. from
``plt.subplots()`` in a notebook) and returns those axes, or makes its own
:class:`matplotlib.figure.Figure` with an explicit Agg canvas and returns it;
pyplot is never imported here, so this module changes no global matplotlib
state (backend, current figure). Saving is the caller's choice:
:func:`save_figure` (or the ``path`` argument) writes png, pdf or svg
atomically — to ``<name>.tmp`` next to the target, then :func:`os.replace`
onto it, so a reader never sees a half-written file. Colours come from
:mod:`cluttersim.palette`.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection
from matplotlib.colors import LightSource, ListedColormap, Normalize, to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.patheffects import withStroke

from . import palette
from .overlays import draw_noise_floor, draw_predicted_subsurface
from .radar import apparent_depth_m, delay_after_surface_s
from .radargram import thin_traces

#: Output resolution of every figure (dots per inch).
DPI = 120
#: Radargram figure size in inches (width, height).
RADARGRAM_FIGSIZE_IN = (10.0, 5.0)
#: Track map and source map figure size in inches (width, height).
TRACK_MAP_FIGSIZE_IN = (8.0, 7.0)
#: Size of the map of one echo's ground sources, in inches (width, height).
ECHO_SOURCES_FIGSIZE_IN = (7.0, 6.0)

#: Colormap of the radargram (perceptually uniform, dark = weak echo): :data:`cluttersim.palette.POWER_CMAP`.
RADARGRAM_CMAP = palette.POWER_CMAP
#: Colour of traces with no data (NaN power, e.g. nadir off the DEM).
NO_DATA_COLOUR = palette.NO_DATA
#: Colour of overlaid lines on the radargram (contrasts with magma).
OVERLAY_COLOUR = palette.OVERLAY_LINE

#: Terrain colours without the blue "sea" part of matplotlib's ``terrain``.
TERRAIN_CMAP = ListedColormap(colormaps["terrain"](np.linspace(0.25, 0.95, 256)), name="terrain_land")
#: Colour of the track line on every map.
TRACK_COLOUR = palette.TRACK
#: Colour of the first-return markers on the track map.
FIRST_RETURN_COLOUR = "#1d1d6b"
#: Colormap of the power overlaid on the source map.
SOURCE_MAP_CMAP = palette.GROUND_POWER_CMAP
#: Colour of the ranked ground cells on the echo-sources map.
ECHO_CELL_COLOUR = "#f0e442"
#: At most this many ranked cells are listed in the echo-sources legend.
_MAX_RANKS_LISTED = 10

# Side-of-track radargram: the palette's orange / sky blue / grey (cluttersim.palette, also the
# report's). No colour mixed from them is lighter than ~0.41 luminance, which keeps the light
# no-data colour unambiguous.
#: Colour of power from left of the direction of travel (at full brightness).
SIDE_LEFT_COLOUR = palette.SIDE_LEFT
#: Colour of power from right of the direction of travel (at full brightness).
SIDE_RIGHT_COLOUR = palette.SIDE_RIGHT
#: Colour of power from the nadir strip (at full brightness).
SIDE_NADIR_COLOUR = palette.SIDE_NADIR
#: Colour of samples without data (or with power but an unknown side).
SIDE_NO_DATA_COLOUR = palette.SIDE_NO_DATA
#: Exponent of the side view's brightness over its dB scale (< 1 lifts the weak echoes that a strong
#: mirror-like nadir echo would otherwise leave near black; 1 = linear in dB).
SIDE_BRIGHTNESS_GAMMA = 0.6
#: Hatching over traces without data, so they cannot be read as an echo colour.
SIDE_NO_DATA_HATCH_COLOUR = "#8c8c8c"
#: Colour of the nadir line on the side radargram (contrasts with all three sides).
SIDE_OVERLAY_COLOUR = "#ffffff"

_LEGEND_STYLE = {"fontsize": "small", "framealpha": 0.85}
_LABEL_BOX = {"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.7}


def power_db(power_w, floor_db: float | None = None) -> np.ndarray:
    """Power in decibels (10 log10 of watts, i.e. dBW).

    Parameters
    ----------
    power_w : array_like
        Power in watts.
    floor_db : float, optional
        Lowest value returned: zero or negative power, and power below it, map
        to ``floor_db``. Without a floor, zero and negative power give -inf.

    Returns
    -------
    ndarray of float64
        Same shape as ``power_w``; NaN stays NaN (no data).
    """
    p = np.asarray(power_w, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        db = np.where(p > 0, 10.0 * np.log10(np.where(p > 0, p, 1.0)), -np.inf)
    db[np.isnan(p)] = np.nan
    if floor_db is not None:
        db = np.where(np.isnan(db), np.nan, np.maximum(db, floor_db))
    return db


# --------------------------------------------------------------------- radargram


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
        trace, :func:`cluttersim.radargram.thin_traces`); the x axis counts the radargram's traces.
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
        in s (NaN allowed). See :mod:`cluttersim.radargram`.
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
        :func:`cluttersim.radar.apparent_depth_m` of the delay after the
        median nadir delay (see :func:`plot_side_radargram`).
    distance_axis : bool
        With a ``distance`` coordinate (or lat/lon), an along-track distance
        axis (km) on top, beside the trace index below.
    dpi, fmt
        For ``path``: resolution (default :data:`DPI`) and format (png, pdf, svg).

    If ``ds`` has ``noise_power`` its level is marked on the colour bar, and if
    it has ``predicted_subsurface_delay`` that delay is drawn as a line
    (:mod:`cluttersim.overlays`).

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
    """Draw each band of a multi-band radargram (``band`` dimension, :mod:`cluttersim.radargram`)
    as one panel of a column, each with its own colour scale (the bands' power levels differ by
    their radar constants), titled with its centre frequency and bandwidth.

    ``ax``: a sequence of one Axes per band (default: a new Figure). Returns the Figure, the
    given axes, or ``path`` (as :func:`plot_radargram`)."""
    from .radargram import band_names, select_band

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


# --------------------------------------------------------------------- elevation view

#: Colour of the nadir terrain profile on the elevation radargram.
TERRAIN_LINE_COLOUR = "#7a5a2f"


def elevation_layers(ds, permittivity: float = 3.15, height_step_m: float | None = None):
    """Resample a radargram onto height above the datum: ``(image_db (height, trace), top_m, step_m,
    surface_m (trace,))``.

    Each sample's height assumes the echo came from straight below the antenna:
    above the nadir surface h = alt − c τ / 2 (free space), below it
    h = h_s − c (τ − τ_n) / (2 √ε′) (the apparent depth of
    :func:`cluttersim.radar.apparent_depth_m`), with τ the absolute two-way
    delay, τ_n the nadir delay and h_s = alt − c τ_n / 2 the nadir surface
    height. Off-nadir clutter therefore appears at the height it would have
    if it were below the antenna — the way an analyst reads such a view.
    """
    from .constants import SPEED_OF_LIGHT_M_S as C

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


# --------------------------------------------------------------------- side radargram


def side_colours(power_w, left_fraction, right_fraction, dynamic_range_db: float | None = None, *,
                 db_limits=None) -> np.ndarray:  # fmt: skip
    """RGB image of a radargram coloured by the side of the track each echo comes from.

    Each sample's colour is the mix ``left·C_left + right·C_right +
    nadir·C_nadir`` of the palette's side colours (:mod:`cluttersim.palette`:
    :data:`SIDE_LEFT_COLOUR`, :data:`SIDE_RIGHT_COLOUR`,
    :data:`SIDE_NADIR_COLOUR`) with ``nadir = 1 − left − right``, multiplied by
    the brightness ``((P_dB − vmin) / (vmax − vmin))^γ`` clipped to [0, 1]
    (γ = :data:`SIDE_BRIGHTNESS_GAMMA`: weak echoes lifted, the key shows the mapping), where
    (vmin, vmax) is ``db_limits`` or (max − ``dynamic_range_db``, max) over
    the whole image (default range: :func:`auto_db_range`). The report's side
    view is made by this same function.

    Parameters
    ----------
    power_w : array_like (trace, sample)
        Echo power in W; NaN for no data.
    left_fraction, right_fraction : array_like (trace, sample)
        Shares of each sample's power from left and right of the direction of
        travel, in [0, 1]; NaN where unknown. Values are clipped to [0, 1] and,
        if their sum exceeds 1, scaled down to sum to 1.
    dynamic_range_db : float, optional
        Power range mapped to brightness 0 … 1, in dB below the maximum.
    db_limits : (float, float), optional
        Fixed (vmin_db, vmax_db) instead.

    Returns
    -------
    ndarray of float64, shape (sample, trace, 3)
        RGB in [0, 1], ready for ``imshow`` (delay down, trace across). Power
        at or below the bottom of the scale (and zero power) is black
        whatever its side; NaN power, and power above that floor whose side
        is unknown, get :data:`SIDE_NO_DATA_COLOUR`.
    """
    p = np.asarray(power_w, dtype=np.float64)
    left = np.asarray(left_fraction, dtype=np.float64)
    right = np.asarray(right_fraction, dtype=np.float64)
    if p.ndim != 2:
        raise ValueError(f"power_w must be 2-D (trace, sample), got shape {p.shape}")
    if left.shape != p.shape or right.shape != p.shape:
        raise ValueError(
            f"left_fraction {left.shape} and right_fraction {right.shape} must have the shape of power_w {p.shape}"
        )
    _check_range(dynamic_range_db, db_limits)
    db = power_db(p)
    if db_limits is not None:
        vmin_db, vmax_db = float(db_limits[0]), float(db_limits[1])
    else:
        vmin_db, vmax_db = _db_limits(db, dynamic_range_db)
    with np.errstate(invalid="ignore"):
        level = np.clip((db - vmin_db) / (vmax_db - vmin_db), 0.0, 1.0)  # -inf → 0, NaN stays
        brightness = level**SIDE_BRIGHTNESS_GAMMA
    known = np.isfinite(left) & np.isfinite(right)
    left = np.where(known, np.clip(left, 0.0, 1.0), 0.0)
    right = np.where(known, np.clip(right, 0.0, 1.0), 0.0)
    total = left + right
    scale = np.where(total > 1.0, 1.0 / np.where(total > 1.0, total, 1.0), 1.0)
    left, right = left * scale, right * scale
    nadir = 1.0 - left - right
    fractions = np.stack([left, right, nadir], axis=-1)  # (trace, sample, 3 sides)
    rgb = (fractions @ _side_palette()) * np.nan_to_num(brightness)[..., None]
    no_data = np.isnan(p) | (~known & (brightness > 0))
    rgb[no_data] = to_rgb(SIDE_NO_DATA_COLOUR)
    return rgb.transpose(1, 0, 2)


def plot_side_radargram(
    ds,
    path=None,
    *,
    ax=None,
    dynamic_range_db: float | None = None,
    db_limits=None,
    permittivity: float | None = 3.15,
    title: str | None = None,
    distance_axis: bool = True,
    dpi: float | None = None,
    fmt: str | None = None,
):
    """Draw a radargram coloured by the side of the track each echo comes from.

    Hue tells the side (see :func:`side_colours`): orange left of the direction
    of travel, sky blue right of it, grey the nadir strip, mixtures in
    proportion. Brightness tells the echo power over the scale shown; a key on
    the right maps brightness to dBW. Axes, frames (relative or absolute delay)
    and the nadir line are those of :func:`plot_radargram`.

    Parameters
    ----------
    ds : xarray.Dataset
        As for :func:`plot_radargram`, plus ``left_fraction`` and
        ``right_fraction`` (trace, sample) from the source record.
    path, ax, dynamic_range_db, db_limits, distance_axis, dpi, fmt
        As for :func:`plot_radargram`.
    permittivity : float or None
        Real relative permittivity ε′ ≥ 1 of the apparent-depth axis on the
        right (default 3.15, water ice); None for no depth axis. Depth zero is
        the median nadir delay over the traces, in the frame of the y axis; a
        note says so when the nadir line varies by more than one sample.
    title : str, optional

    Returns
    -------
    Figure, Axes or Path
        As for :func:`plot_radargram`.

    Raises
    ------
    ValueError
        If ``left_fraction`` or ``right_fraction`` is missing (the run was made
        without the source record), or as :func:`plot_radargram`.
    """
    for name in ("left_fraction", "right_fraction"):
        if name not in ds:
            raise ValueError(
                f"side radargram needs the variable {name!r} (trace, sample), which is written with "
                "the per-sample source record; this dataset has none"
            )
    _check_permittivity(permittivity)
    ds = thin_traces(ds)
    layers = radargram_layers(ds, dynamic_range_db, db_limits=db_limits)
    power_w = ds["power"].values
    left, right = (_trace_by_sample(ds[name]) for name in ("left_fraction", "right_fraction"))
    rgb = side_colours(power_w, left, right, db_limits=(layers.vmin_db, layers.vmax_db))

    if ax is None:
        fig = _new_figure(RADARGRAM_FIGSIZE_IN)
        ax, key = fig.subplots(1, 2, width_ratios=(1.0, 0.045))
        given = False
    else:
        fig, given = ax.figure, True
        key = ax.inset_axes((1.16 if permittivity is not None else 1.02, 0.0, 0.035, 1.0))
    ax.imshow(
        rgb,
        aspect="auto",
        interpolation="antialiased",
        interpolation_stage="rgba",
        origin="upper",
        extent=_radargram_extent(layers),
    )
    handles = [
        Patch(facecolor=SIDE_LEFT_COLOUR, edgecolor="none", label="left of track"),
        Patch(facecolor=SIDE_RIGHT_COLOUR, edgecolor="none", label="right of track"),
        Patch(facecolor=SIDE_NADIR_COLOUR, edgecolor="none", label="nadir strip"),
    ]
    line = _draw_nadir_line(ax, layers, SIDE_OVERLAY_COLOUR)
    if line is not None:  # white dashes with a dark edge: visible on black, grey and colour alike
        line.set_path_effects([withStroke(linewidth=2.0, foreground="0.2")])
        handles.append(line)
    no_data_traces = np.isnan(np.asarray(power_w, dtype=np.float64)).all(axis=1)
    if no_data_traces.any():
        hatch = {"edgecolor": SIDE_NO_DATA_HATCH_COLOUR, "hatch": "///"}
        for first, last in _runs(no_data_traces):
            ax.axvspan(first - 0.5, last + 0.5, facecolor="none", linewidth=0.0, **hatch)
        handles.append(Patch(facecolor=SIDE_NO_DATA_COLOUR, linewidth=0.5, label="no data", **hatch))
    _label_radargram(ax, layers, title)
    _add_depth_axis(ax, layers, permittivity)
    if distance_axis:
        add_distance_axis(ax, ds)
    _side_key(key, layers.vmin_db, layers.vmax_db)
    legend_title = (f"brightness: echo power, top {layers.vmax_db - layers.vmin_db:g} dB      "
                    "left/right relative to the direction of travel (trace 0 → last)")  # fmt: skip
    if given:
        ax.legend(handles=handles, loc="lower right", title=legend_title, title_fontsize="x-small", **_LEGEND_STYLE)
    else:
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles), title=legend_title,
                   title_fontsize="small", **_LEGEND_STYLE)  # fmt: skip
    return _finish(fig, ax, given, path, dpi, fmt)


def _side_palette() -> np.ndarray:
    """RGB rows (3, 3) of the left, right and nadir-strip colours (:func:`cluttersim.palette.side_rgb`)."""
    return palette.side_rgb()


def _side_key(key, vmin_db: float, vmax_db: float) -> None:
    """Fill ``key`` with three brightness ramps (left, nadir, right) against echo power in dBW."""
    brightness = np.linspace(0.0, 1.0, 256) ** SIDE_BRIGHTNESS_GAMMA
    left, right, nadir = _side_palette()
    ramps = brightness[:, None, None] * np.stack([left, nadir, right])[None, :, :]
    key.imshow(ramps, origin="lower", aspect="auto", interpolation="nearest", extent=(-0.5, 2.5, vmin_db, vmax_db))
    key.set_xticks([0, 1, 2], ["left", "nadir", "right"], rotation=90, fontsize="small")
    key.yaxis.tick_right()
    key.yaxis.set_label_position("right")
    key.set_ylabel("echo power (dBW)")


def _trace_by_sample(da) -> np.ndarray:
    """Values of a (trace, sample) DataArray in that dimension order."""
    if set(da.dims) == {"trace", "sample"}:
        da = da.transpose("trace", "sample")
    return np.asarray(da.values)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) indices of each run of True in a 1-D boolean array."""
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1))


# --------------------------------------------------------------------- comparison with observed data

#: Size of the side-by-side comparison figure in inches (width, height).
COMPARISON_FIGSIZE_IN = (13.0, 5.2)
#: Colormap of the observed radargram under the simulated contours.
OVERLAY_BACKGROUND_CMAP = "gray"
#: Colours of the simulated-power contours at threshold, +10 and +20 dB above the noise floor
#: (Okabe & Ito's colour-blind-safe sky blue, yellow and vermillion; distinct on grey).
CONTOUR_COLOURS = ("#56b4e9", "#f0e442", "#d55e00")
#: Fill colour of candidate markers (Okabe & Ito's reddish purple).
CANDIDATE_COLOUR = "#cc79a7"
#: Diverging colormap of observed − predicted power (red: observed stronger).
DIFFERENCE_CMAP = palette.DIFFERENCE_CMAP
#: Half range of the difference colour scale, dB.
DIFFERENCE_RANGE_DB = 20.0


def _comparison_view(ds, name: str):
    """A radargram Dataset (power, delay, window_start, nadir_delay) of one array of a comparison Dataset."""
    import xarray as xr

    data = {"power": ds[name]}
    for var in ("window_start", "nadir_delay"):
        if var in ds:
            data[var] = ds[var]
    return xr.Dataset(data, coords={"delay": ds["delay"]})


def comparison_layers(ds, dynamic_range_db: float = 60.0) -> tuple[RadargramLayers, RadargramLayers]:
    """Observed and simulated layers of a comparison Dataset on one colour scale.

    The scale tops at the strongest sample of either array; its floor is 5 dB
    below the median observed noise floor (``noise_floor``), but at most
    ``dynamic_range_db`` below the top, so the noise shows as a dim texture.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`cluttersim.compare.compare` (``observed_power``,
        ``simulated_power`` (trace, sample), ``delay``, ``window_start``,
        ``nadir_delay``, ``noise_floor``).
    dynamic_range_db : float
        Largest range of the colour scale, dB.

    Returns
    -------
    (RadargramLayers, RadargramLayers)
        Observed, simulated; same ``vmin_db``/``vmax_db`` and delay frame.
    """
    obs = radargram_layers(_comparison_view(ds, "observed_power"), dynamic_range_db)
    sim = radargram_layers(_comparison_view(ds, "simulated_power"), dynamic_range_db)
    vmax_db = max(obs.vmax_db, sim.vmax_db)
    vmin_db = vmax_db - float(dynamic_range_db)
    if "noise_floor" in ds:
        noise_db = power_db(ds["noise_floor"].values)
        noise_db = noise_db[np.isfinite(noise_db)]
        if noise_db.size:
            vmin_db = max(vmin_db, float(np.median(noise_db)) - 5.0)
    vmin_db = min(vmin_db, vmax_db - 1.0)

    def rescaled(layers, name):
        image = power_db(_trace_by_sample(ds[name]), floor_db=vmin_db).T
        return replace(layers, image_db=image, vmin_db=vmin_db, vmax_db=vmax_db)

    return rescaled(obs, "observed_power"), rescaled(sim, "simulated_power")


def _sample_centres_us(layers: RadargramLayers) -> np.ndarray:
    """y coordinate (µs, the layers' frame) of each sample's centre."""
    nsample = layers.image_db.shape[0]
    step_us = (layers.delay_bottom_us - layers.delay_top_us) / nsample
    return layers.delay_top_us + (np.arange(nsample) + 0.5) * step_us


def _draw_candidates(ax, layers: RadargramLayers, candidates, *, colour: str = CANDIDATE_COLOUR,
                     label: str = "unexplained echo (candidate), size ∝ score"):  # fmt: skip
    """Candidate markers (open circles, area ∝ score) at their trace and sample; returns a legend handle or None."""
    if not candidates:
        return None
    centres = _sample_centres_us(layers)
    x = np.array([c["trace"] for c in candidates], dtype=np.float64)
    y = centres[np.array([c["grid_sample"] for c in candidates], dtype=np.int64)]
    score = np.array([c["score"] for c in candidates], dtype=np.float64)
    ax.scatter(x, y, s=8.0 + 40.0 * score, facecolors="none", edgecolors=colour, linewidths=1.1, zorder=4)
    ax.set_ylim(layers.delay_bottom_us, layers.delay_top_us)
    return Line2D([], [], ls="none", marker="o", mfc="none", mec=colour, mew=1.1, ms=6,
                  label=label)  # fmt: skip


def plot_comparison_side_by_side(
    ds, path=None, *, ax=None, dpi=None, fmt=None, dynamic_range_db: float = 60.0, permittivity: float | None = 3.15,
    title: str | None = None,
) -> Path:
    """Observed (aligned) and gain-matched simulated radargrams side by side, same delay axis and colour scale.

    Parameters
    ----------
    ds : xarray.Dataset
        A comparison Dataset (see :func:`comparison_layers`); attributes
        ``delay_offset_samples`` and ``gain_db`` go into the panel titles.
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    dynamic_range_db : float
        Largest range of the shared colour scale, dB.
    permittivity : float or None
        ε′ of the apparent-depth axis on the right panel; None for none.
    title : str, optional

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    _check_permittivity(permittivity)
    obs, sim = comparison_layers(ds, dynamic_range_db)
    if ax is None:
        fig = _new_figure(COMPARISON_FIGSIZE_IN)
        left, right = fig.subplots(1, 2, sharex=True, sharey=True)
        given = False
    else:
        left, right = np.ravel(ax)
        fig, given = left.figure, True
    cmap = colormaps[RADARGRAM_CMAP].with_extremes(bad=NO_DATA_COLOUR)
    offset = ds.attrs.get("delay_offset_samples")
    gain = ds.attrs.get("gain_db")
    titles = (
        "observed" + (f", aligned (offset {offset:+.2f} samples removed)" if offset is not None else ""),
        "simulated clutter" + (f" × gain ({gain:+.1f} dB)" if gain is not None else ""),
    )
    for ax, layers, panel_title in ((left, obs, titles[0]), (right, sim, titles[1])):
        image = ax.imshow(layers.image_db, cmap=cmap, vmin=layers.vmin_db, vmax=layers.vmax_db, aspect="auto",
                          interpolation="antialiased", interpolation_stage="rgba", origin="upper",
                          extent=_radargram_extent(layers))  # fmt: skip
        _draw_nadir_line(ax, layers, OVERLAY_COLOUR)
        _label_radargram(ax, layers, panel_title)
    right.set_ylabel("")
    _add_depth_axis(right, sim, permittivity)
    handles = []
    if obs.nadir_us is not None:
        handles.append(Line2D([], [], color=OVERLAY_COLOUR, lw=0.8, ls=(0, (4, 3)), label="simulated nadir surface"))
    if np.isnan(obs.image_db).any():
        handles.append(Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data / unmatched trace"))
    if handles:
        left.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(image, ax=[left, right], label="echo power (dB, observed units)", pad=0.01)
    if title:
        fig.suptitle(title)
    if path is not None:
        return save_figure(fig, path, dpi=dpi, fmt=fmt)
    return ax if given else fig


def plot_comparison_overlay(
    ds, path=None, *, ax=None, dpi=None, fmt=None, candidates=(), threshold_db: float | None = None,
    dynamic_range_db: float = 60.0,
    permittivity: float | None = 3.15, title: str | None = None,
) -> Path:  # fmt: skip
    """Contours of the gain-matched simulated clutter over the observed radargram (grey), with candidates.

    Contours are drawn at T, T + 10 and T + 20 dB above the median noise floor
    (T = ``threshold_db``, default the Dataset's ``threshold_db`` attribute):
    the innermost line encloses where the simulation predicts a detectable
    echo, so observed echoes outside every contour are what clutter does not
    explain.

    Parameters
    ----------
    ds : xarray.Dataset
        A comparison Dataset (see :func:`comparison_layers`).
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    candidates : sequence of dict
        Ranked candidates from :func:`cluttersim.compare.compare` (keys
        ``trace``, ``grid_sample``, ``score``), drawn as open circles.
    threshold_db, dynamic_range_db, permittivity, title
        As above and for :func:`plot_comparison_side_by_side`.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    _check_permittivity(permittivity)
    obs, sim = comparison_layers(ds, dynamic_range_db)
    if threshold_db is None:
        threshold_db = float(ds.attrs.get("threshold_db", 15.0))
    noise_db = power_db(ds["noise_floor"].values) if "noise_floor" in ds else np.array([obs.vmin_db])
    noise_db = noise_db[np.isfinite(noise_db)]
    noise_ref = float(np.median(noise_db)) if noise_db.size else obs.vmin_db
    fig, ax, given = _figure_for(ax, RADARGRAM_FIGSIZE_IN)
    image = ax.imshow(obs.image_db, cmap=colormaps[OVERLAY_BACKGROUND_CMAP].with_extremes(bad=NO_DATA_COLOUR),
                      vmin=obs.vmin_db, vmax=obs.vmax_db, aspect="auto", interpolation="antialiased",
                      interpolation_stage="rgba", origin="upper", extent=_radargram_extent(obs))  # fmt: skip
    levels = [noise_ref + threshold_db + step for step in (0.0, 10.0, 20.0)]
    sim_db = power_db(_trace_by_sample(ds["simulated_power"])).T
    ntrace = sim_db.shape[1]
    handles = []
    with np.errstate(invalid="ignore"):
        z = np.where(np.isfinite(sim_db), sim_db, obs.vmin_db - 100.0)
    z = np.ma.masked_where(np.isnan(sim_db), z)
    if np.ma.count(z) and float(z.max()) >= levels[0]:
        ax.contour(np.arange(ntrace), _sample_centres_us(sim), z, levels=levels, colors=CONTOUR_COLOURS,
                   linewidths=(0.8, 1.1, 1.4))  # fmt: skip
    for colour, step, lw in zip(CONTOUR_COLOURS, (0, 10, 20), (0.8, 1.1, 1.4)):
        handles.append(Line2D([], [], color=colour, lw=lw, label=f"simulated: noise + {threshold_db + step:.1f} dB"))
    ax.set_ylim(obs.delay_bottom_us, obs.delay_top_us)
    marker = _draw_candidates(ax, obs, list(candidates))
    if marker is not None:
        handles.append(marker)
    if np.isnan(obs.image_db).any():
        handles.append(Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data / unmatched trace"))
    _label_radargram(ax, obs, title or "simulated clutter contours over the observed radargram")
    _add_depth_axis(ax, obs, permittivity)
    ax.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(image, ax=ax, label="observed echo power (dB, observed units)", pad=0.01)
    return _finish(fig, ax, given, path, dpi, fmt)


def comparison_difference_db(ds) -> np.ndarray:
    """Observed minus predicted power in dB, (sample, trace) for display.

    D = 10 log10(P_obs) − 10 log10(P_sim + N): the predicted power is the
    gain-matched simulation plus the trace's noise floor N, so D ≈ 0 in pure
    noise and where clutter explains the echo, D > 0 where the observed data
    hold more than predicted, D < 0 where predicted clutter is missing.
    """
    p_obs = np.asarray(_trace_by_sample(ds["observed_power"]), dtype=np.float64)
    p_sim = np.nan_to_num(np.asarray(_trace_by_sample(ds["simulated_power"]), dtype=np.float64), nan=0.0)
    noise = np.asarray(ds["noise_floor"].values, dtype=np.float64)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        d = power_db(p_obs) - power_db(p_sim + noise)
    return np.where(np.isfinite(d), d, np.nan).T


def plot_comparison_difference(
    ds, path=None, *, ax=None, dpi=None, fmt=None, candidates=(), range_db: float = DIFFERENCE_RANGE_DB,
    permittivity: float | None = 3.15,
    title: str | None = None,
) -> Path:  # fmt: skip
    """Map of observed minus predicted power (:func:`comparison_difference_db`), with candidates.

    Parameters
    ----------
    ds : xarray.Dataset
        A comparison Dataset (needs ``noise_floor``).
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    candidates : sequence of dict
        As for :func:`plot_comparison_overlay`.
    range_db : float
        The colour scale spans ±``range_db`` dB.
    permittivity, title
        As for :func:`plot_comparison_side_by_side`.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    _check_permittivity(permittivity)
    if not range_db > 0:
        raise ValueError(f"range_db must be positive, got {range_db!r}")
    layers = radargram_layers(_comparison_view(ds, "observed_power"))
    diff = comparison_difference_db(ds)
    fig, ax, given = _figure_for(ax, RADARGRAM_FIGSIZE_IN)
    image = ax.imshow(diff, cmap=colormaps[DIFFERENCE_CMAP].with_extremes(bad=NO_DATA_COLOUR), vmin=-range_db,
                      vmax=range_db, aspect="auto", interpolation="antialiased", interpolation_stage="rgba",
                      origin="upper", extent=_radargram_extent(layers))  # fmt: skip
    handles = []
    line = _draw_nadir_line(ax, layers, "0.15")
    if line is not None:
        line.set_label("simulated nadir surface")
        handles.append(line)
    marker = _draw_candidates(ax, layers, list(candidates), colour="black")
    if marker is not None:
        handles.append(marker)
    if np.isnan(diff).any():
        handles.append(Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data / unmatched trace"))
    _label_radargram(ax, layers, title or "observed − predicted (gain-matched simulation + noise floor)")
    _add_depth_axis(ax, layers, permittivity)
    if handles:
        ax.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(image, ax=ax, label="observed − predicted (dB): red = more observed than predicted", pad=0.01,
                 extend="both")  # fmt: skip
    return _finish(fig, ax, given, path, dpi, fmt)


# --------------------------------------------------------------------- radargram parts


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

    depth_m = :func:`~cluttersim.radar.apparent_depth_m` ((delay_us −
    surface_us) · 1e-6 s, ε′), and its inverse through
    :func:`~cluttersim.radar.delay_after_surface_s`; for
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


def _note_below(ax, text: str) -> None:
    """Small grey note under the x-axis label, right-aligned (constrained layout makes room)."""
    ax.annotate(text, xy=(1.0, 0.0), xycoords="axes fraction", xytext=(0.0, -36.0), textcoords="offset points",
                ha="right", va="top", fontsize="x-small", color="0.3")  # fmt: skip


# --------------------------------------------------------------------- track map


def plot_track_map(
    elevation_m,
    extent,
    lon_deg,
    lat_deg,
    path=None,
    *,
    ax=None,
    dpi: float | None = None,
    fmt: str | None = None,
    title: str | None = None,
    axis_labels: tuple[str, str] | None = None,
    geographic: bool | None = None,
    first_return=None,
    view=None,
) -> Path:
    """Draw a shaded-relief map of a DEM with the track on top, to a PNG file.

    Parameters
    ----------
    elevation_m : array_like (ny, nx)
        Heights in metres on a regular grid, row 0 at the north (top) edge;
        NaN cells (holes) are left blank.
    extent : tuple of float
        (west, east, south, north) outer edges of the grid, in degrees (or in
        the projected unit, see ``geographic``).
    lon_deg, lat_deg : array_like
        Track positions in the same coordinates (NaN breaks the line). In
        degrees, longitudes are wrapped to within 180° of the map centre.
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    title : str, optional
    axis_labels : (str, str), optional
        x and y axis labels; default "longitude (°E)", "latitude (°N)".
    geographic : bool, optional
        True: coordinates are lon/lat degrees (aspect 1/cos(mean latitude),
        track longitudes wrapped). False: projected coordinates in one unit
        (e.g. km), drawn with equal aspect and no wrapping. By default,
        geographic unless ``axis_labels`` are given and the x label does not
        mention longitude or degrees.
    first_return : (array_like, array_like), optional
        ``(x, y)`` of each trace's first-return source, in the coordinates of
        the track and one per track point. Drawn as small markers, each joined
        by a thin faint line to the track point of the same index, so
        off-nadir first returns stand out. Points with a NaN (in the first
        return or its track point) are skipped.

    view : (float, float, float, float), optional
        (west, east, south, north) of the area shown; default the track and its
        first returns with a margin (:func:`track_view`), within ``extent``.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.

    Notes
    -----
    The hillshade's vertical exaggeration is chosen from the data so relief is
    visible on flat and rugged DEMs alike; the shading is therefore not to scale.
    """
    elev = _grid(elevation_m, "elevation_m")
    axis_labels, geographic = _map_axes(axis_labels, geographic)
    lon = _map_x(lon_deg, extent, geographic)
    lat = np.asarray(lat_deg, dtype=np.float64).ravel()
    if first_return is not None:
        if len(first_return) != 2:
            raise ValueError("first_return must be a pair (x, y) of arrays")
        fr_x = _map_x(first_return[0], extent, geographic)
        fr_y = np.asarray(first_return[1], dtype=np.float64).ravel()
        if not fr_x.size == fr_y.size == lon.size:
            raise ValueError(
                f"first_return needs one (x, y) per track point ({lon.size}), got {fr_x.size} x and {fr_y.size} y"
            )

    if view is None:
        pts_x, pts_y = (lon, lat) if first_return is None else (np.r_[lon, fr_x], np.r_[lat, fr_y])
        view = track_view(extent, pts_x, pts_y, geographic)
    rgb, norm = _shaded_relief_rgba(elev)
    fig, ax, given = _figure_for(ax, _map_figsize(extent if view is None else view, geographic))
    _draw_relief(ax, rgb, extent)
    _draw_track(ax, lon, lat)
    if first_return is not None:
        _draw_first_returns(ax, lon, lat, fr_x, fr_y)
    _frame_map(ax, view, axis_labels, geographic)
    ax.legend(loc="best", **_LEGEND_STYLE)
    if title:
        ax.set_title(title)
    fig.colorbar(ScalarMappable(norm=norm, cmap=TERRAIN_CMAP), ax=ax, label="elevation (m)", shrink=0.8)
    return _finish(fig, ax, given, path, dpi, fmt)


def track_view(extent, x, y, geographic: bool = True, margin: float = 0.15):
    """The map area to show around a track: the box of its points with ``margin`` of its size on
    each side (the box at least as wide and tall as the extent's smaller side, so a straight track
    keeps the terrain beside it),
    clipped to ``extent``; ``extent`` itself if no point is finite."""
    west, east, south, north = _image_extent(extent)
    x, y = np.asarray(x, float), np.asarray(y, float)
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return (west, east, south, north)
    x0, x1, y0, y1 = x[ok].min(), x[ok].max(), y[ok].min(), y[ok].max()
    stretch = 1.0 / max(np.cos(np.deg2rad(0.5 * (south + north))), 1e-3) if geographic else 1.0
    least = min(abs(east - west) / stretch, abs(north - south))
    px = max(margin * (x1 - x0), 0.5 * (least * stretch - (x1 - x0)))
    py = max(margin * (y1 - y0), 0.5 * (least - (y1 - y0)))
    lo_x, hi_x = min(west, east), max(west, east)
    return (max(lo_x, x0 - px), min(hi_x, x1 + px), max(south, y0 - py), min(north, y1 + py))


def _draw_first_returns(ax, track_x, track_y, x, y) -> None:
    """First-return markers under the track line, each tied to its track point by a faint line."""
    ok = np.isfinite(track_x) & np.isfinite(track_y) & np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return
    ties = np.stack([np.column_stack([track_x[ok], track_y[ok]]), np.column_stack([x[ok], y[ok]])], axis=1)
    ax.add_collection(LineCollection(ties, colors=FIRST_RETURN_COLOUR, linewidths=0.5, alpha=0.3, zorder=1.8))
    # Below the track line (zorder 2): returns from nadir hide under it, off-nadir ones stand out.
    ax.plot(x[ok], y[ok], ls="none", marker="o", ms=2.5, mew=0, color=FIRST_RETURN_COLOUR, label="first return",
            zorder=1.9)  # fmt: skip


# --------------------------------------------------------------------- source maps


def plot_source_map(
    power_w,
    elevation_m,
    extent,
    track_x,
    track_y,
    path=None,
    *,
    ax=None,
    dpi: float | None = None,
    fmt: str | None = None,
    title: str | None = None,
    axis_labels: tuple[str, str] = ("longitude (°E)", "latitude (°N)"),
    geographic: bool = True,
    label: str = "power into the depth window (dBW, summed over the track)",
    dynamic_range_db: float = 50.0,
) -> Path:
    """Map where on the ground the echo power comes from, over a grey hillshade, to a PNG.

    Parameters
    ----------
    power_w : array_like (ny, nx)
        Power in W per ground cell (e.g. summed over the track), on the grid of
        ``elevation_m``. Cells with zero, negative or NaN power, or more than
        ``dynamic_range_db`` below the strongest cell, are not coloured.
    elevation_m : array_like (ny, nx)
        Heights in metres, row 0 at the north (top) edge; NaN holes left blank.
    extent : tuple of float
        (west, east, south, north) outer edges of the grid.
    track_x, track_y : array_like
        Track positions in the same coordinates (NaN breaks the line).
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    title : str, optional
    axis_labels : (str, str)
        x and y axis labels.
    geographic : bool
        As for :func:`plot_track_map`: True for lon/lat degrees (aspect
        1/cos(mean latitude), longitudes wrapped), False for projected
        coordinates (equal aspect).
    label : str
        Colour-bar label.
    dynamic_range_db : float
        Colour scale spans [max − dynamic_range_db, max] dBW.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    power = _grid(power_w, "power_w")
    elev = _grid(elevation_m, "elevation_m")
    if power.shape != elev.shape:
        raise ValueError(f"power_w {power.shape} and elevation_m {elev.shape} must have the same shape")
    if not dynamic_range_db > 0:
        raise ValueError(f"dynamic_range_db must be positive, got {dynamic_range_db!r}")
    tx = _map_x(track_x, extent, geographic)
    ty = np.asarray(track_y, dtype=np.float64).ravel()
    db = power_db(power)
    vmin_db, vmax_db = _db_limits(db, dynamic_range_db)
    with np.errstate(invalid="ignore"):
        shown = np.ma.masked_where(~(db >= vmin_db), db)  # NaN, −inf and weak cells transparent

    fig, ax, given = _figure_for(ax, _map_figsize(extent, geographic))
    _draw_relief(ax, _grey_hillshade_rgba(elev), extent)
    image = ax.imshow(
        shown,
        cmap=colormaps[SOURCE_MAP_CMAP].with_extremes(bad=(0.0, 0.0, 0.0, 0.0)),
        norm=Normalize(vmin=vmin_db, vmax=vmax_db),
        extent=_image_extent(extent),
        origin="upper",
        interpolation="antialiased",
        interpolation_stage="rgba",
        alpha=0.85,  # a hint of the relief shows through
    )
    _draw_track(ax, tx, ty, halo=True)
    _frame_map(ax, extent, axis_labels, geographic)
    handles, _ = ax.get_legend_handles_labels()
    handles.append(Patch(facecolor=_HILLSHADE_MID_GREY, edgecolor="0.4", linewidth=0.5,
                         label=f"grey only: no power, or > {dynamic_range_db:g} dB below the maximum"))  # fmt: skip
    ax.legend(handles=handles, loc="upper right", **_LEGEND_STYLE)
    if title:
        ax.set_title(title)
    fig.colorbar(image, ax=ax, label=label, shrink=0.8)
    return _finish(fig, ax, given, path, dpi, fmt)


def plot_echo_sources(
    elevation_m,
    extent,
    track_x,
    track_y,
    antenna_xy,
    cells_xy,
    shares,
    path=None,
    *,
    ax=None,
    dpi: float | None = None,
    fmt: str | None = None,
    title: str | None = None,
    axis_labels: tuple[str, str] = ("longitude (°E)", "latitude (°N)"),
    geographic: bool = True,
    view=None,
) -> Path:
    """Map the ground cells that make up one echo, ranked by their share of its power, to a PNG.

    Parameters
    ----------
    elevation_m : array_like (ny, nx)
        Heights in metres, row 0 at the north (top) edge; drawn as a grey hillshade.
    extent : tuple of float
        (west, east, south, north) outer edges of the grid.
    track_x, track_y : array_like
        Track positions in the same coordinates (NaN breaks the line).
    antenna_xy : (float, float)
        The antenna's nadir point when it recorded the echo.
    cells_xy : array_like (N, 2)
        Ground cells in rank order (row 0 = strongest); rows with NaN skipped.
    shares : array_like (N,)
        Each cell's fraction of the echo's power (sum ≤ 1); marker area is
        proportional to it (with a minimum, so that small shares stay visible).
        The legend lists the first ten ranks with their shares.
    path : str or Path
        Optional: save the figure there (format from the suffix: png, pdf, svg) and return the path;
        without it the Figure (or the given ``ax``) is returned. ``ax``, ``dpi``, ``fmt``: see
        :func:`plot_radargram`.
    title : str, optional
    axis_labels : (str, str)
        x and y axis labels.
    geographic : bool
        As for :func:`plot_source_map`.
    view : (float, float, float, float), optional
        (west, east, south, north) of the area shown, e.g. a box around the
        antenna nadir and the cells; default the whole ``extent``.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    elev = _grid(elevation_m, "elevation_m")
    cells = np.asarray(cells_xy, dtype=np.float64)
    if cells.size == 0:
        cells = np.empty((0, 2))
    if cells.ndim != 2 or cells.shape[1] != 2:
        raise ValueError(f"cells_xy must be an (N, 2) array, got shape {cells.shape}")
    share = np.asarray(shares, dtype=np.float64).ravel()
    if share.size != cells.shape[0]:
        raise ValueError(f"shares needs one value per cell ({cells.shape[0]}), got {share.size}")
    antenna = np.asarray(antenna_xy, dtype=np.float64).ravel()
    if antenna.size != 2:
        raise ValueError(f"antenna_xy must be one (x, y) point, got {antenna.size} values")
    tx = _map_x(track_x, extent, geographic)
    ty = np.asarray(track_y, dtype=np.float64).ravel()
    cell_x = _map_x(cells[:, 0], extent, geographic)
    cell_y = cells[:, 1]
    antenna_x = _map_x(antenna[:1], extent, geographic)[0]

    fig, ax, given = _figure_for(ax, ECHO_SOURCES_FIGSIZE_IN)
    _draw_relief(ax, _grey_hillshade_rgba(elev), extent)
    _draw_track(ax, tx, ty, halo=True)
    ok = np.isfinite(cell_x) & np.isfinite(cell_y) & np.isfinite(share)
    area_pt2 = _share_marker_area_pt2(share)
    for rank in np.flatnonzero(ok)[::-1]:  # rank 1 drawn last, on top
        ax.scatter(cell_x[rank], cell_y[rank], s=area_pt2[rank], c=ECHO_CELL_COLOUR, edgecolors="black",
                   linewidths=0.8, zorder=5 + 1.0 / (rank + 1))  # fmt: skip
    ax.plot(antenna_x, antenna[1], ls="none", marker="*", ms=15, mfc="white", mec="black", mew=1.2, zorder=7,
            label="antenna nadir at this echo")  # fmt: skip
    _frame_map(ax, extent if view is None else view, axis_labels, geographic)
    features = ax.legend(loc="upper right", **_LEGEND_STYLE)
    ranked = np.flatnonzero(ok)
    if ranked.size:
        listed = ranked[:_MAX_RANKS_LISTED]
        handles = [
            Line2D(
                [], [], ls="none", marker="o", ms=np.sqrt(area_pt2[rank]), mfc=ECHO_CELL_COLOUR, mec="black",
                mew=0.8, label=f"{rank + 1}:  {100.0 * share[rank]:.1f} %",
            )
            for rank in listed
        ]  # fmt: skip
        lines = ["ground cells, by rank", "(1 = strongest):", "share of echo power,", "marker area ∝ share"]
        if ranked.size > listed.size:
            lines.append(f"({ranked.size - listed.size} more not listed)")
        lines.append(f"all {ranked.size}: {100.0 * share[ranked].sum():.1f} %")
        ax.add_artist(features)  # keep the first legend when adding the second
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0,
                  title="\n".join(lines), title_fontsize="small", labelspacing=1.0, borderpad=0.8,
                  **_LEGEND_STYLE)  # fmt: skip
    if title:
        ax.set_title(title)
    # labels last: the legends and title above settle the layout that their positions depend on
    place_labels(ax, cell_x[ok], cell_y[ok], [str(r + 1) for r in np.flatnonzero(ok)],
                 marker_radius_pt=np.sqrt(area_pt2[ok] / np.pi))  # fmt: skip
    return _finish(fig, ax, given, path, dpi, fmt)


#: Offsets (points) tried, in order, for a label beside its marker.
_LABEL_OFFSETS_PT = ((1, 1), (1, -1), (-1, 1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1))


def place_labels(ax, x, y, texts, *, marker_radius_pt=0.0, fontsize="small") -> list:
    """Label points without overlaps: each label (in order: the first is the most important) goes
    to the first of eight places around its point whose box overlaps no label placed before it
    and no other marker's centre; a label that fits nowhere is left out (the legend still lists it).

    Returns the annotation artists drawn (one per placed label)."""
    fig = ax.figure
    renderer = fig.canvas.get_renderer() if hasattr(fig.canvas, "get_renderer") else None
    if renderer is None:
        FigureCanvasAgg(fig)
        renderer = fig.canvas.get_renderer()
    fig.canvas.draw()  # fix the layout so that data → pixel positions are final
    xy = ax.transData.transform(np.column_stack([np.asarray(x, float), np.asarray(y, float)]))
    scale = fig.dpi / 72.0
    radius = np.broadcast_to(np.asarray(marker_radius_pt, dtype=float), (len(xy),)) * scale
    taken, drawn = [], []

    def overlaps(a, b):
        return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]

    for i, text in enumerate(texts):
        px, py = xy[i]
        probe = ax.text(0.5, 0.5, text, transform=ax.transAxes, fontsize=fontsize, fontweight="bold")
        box = probe.get_window_extent(renderer)
        pad = 2 * 0.2 * probe.get_fontsize() * scale  # the label box's padding (_LABEL_BOX: pad=0.2 em)
        probe.remove()
        w, h = box.width + pad, box.height + pad
        gap = radius[i] + 2.0 * scale
        for dx, dy in _LABEL_OFFSETS_PT:
            cx, cy = px + dx * (gap + 0.5 * w), py + dy * (gap + 0.5 * h)
            rect = (cx - 0.5 * w, cy - 0.5 * h, cx + 0.5 * w, cy + 0.5 * h)
            if any(overlaps(rect, t) for t in taken):
                continue
            if any(overlaps(rect, (qx - 2, qy - 2, qx + 2, qy + 2)) for j, (qx, qy) in enumerate(xy) if j != i):
                continue  # no label over another cell's centre
            taken.append(rect)
            drawn.append(ax.annotate(text, (x[i], y[i]), xytext=((cx - px) / scale, (cy - py) / scale),
                                     textcoords="offset points", ha="center", va="center", fontsize=fontsize,
                                     fontweight="bold", bbox=_LABEL_BOX, zorder=6))  # fmt: skip
            drawn[-1].set_in_layout(False)  # the layout must not move the points after the labels are placed
            break
    return drawn


def _share_marker_area_pt2(share: np.ndarray) -> np.ndarray:
    """Marker area in points² for a share of echo power in [0, 1]: 600 pt² × share, at least 12 pt²."""
    return np.maximum(600.0 * np.clip(np.nan_to_num(share), 0.0, 1.0), 12.0)


# --------------------------------------------------------------------- survey map

#: Diverging colour map of the survey map, centred on the clutter-prone threshold
#: (colour-blind safe: purple readable, orange clutter-prone).
SURVEY_MAP_CMAP = palette.SURVEY_CMAP
SURVEY_TRACK_COLOUR = "#333333"


def plot_survey_map(
    index_db,
    extent,
    elevation_m,
    relief_extent,
    tracks_xy,
    path=None,
    *,
    ax=None,
    dpi: float | None = None,
    fmt: str | None = None,
    threshold_db: float = 0.0,
    title: str | None = None,
    axis_labels: tuple[str, str] = ("longitude (°E)", "latitude (°N)"),
    geographic: bool = True,
    label: str = "strongest off-nadir clutter in the subsurface window relative to the nadir surface echo (dB)",
    below_db: float = 6.0,
    above_db: float = 18.0,
    swaths: bool | None = None,
) -> Path:
    """Map a gridded clutter index over a grey hillshade, to a PNG.

    Parameters
    ----------
    index_db : array_like (ny, nx)
        Clutter index per map cell (dB); NaN where no track passed (left grey).
    extent : tuple of float
        (west, east, south, north) of the index grid, in map coordinates.
    elevation_m : array_like
        Heights for the relief, row 0 north; ``relief_extent`` its edges.
    tracks_xy : sequence of (x, y)
        Each track's nadir points in map coordinates, drawn as thin lines.
    threshold_db : float
        The clutter-prone threshold: the colour scale is centred on it and the
        colour bar says in words which side is which.
    below_db, above_db : float
        The colour scale spans [threshold − below_db, threshold + above_db] (fixed, so that
        maps of different surveys compare); values beyond take the end colours.
    swaths : bool, optional
        Say under the map that cells hold the nearest trace's value within its swath.

    Returns
    -------
    Figure, Axes or Path
        The new Figure, the given ``ax``, or ``path`` if one was given.
    """
    from matplotlib.colors import TwoSlopeNorm

    index = _grid(index_db, "index_db")
    elev = _grid(elevation_m, "elevation_m")
    if not (below_db > 0 and above_db > 0):
        raise ValueError(f"below_db and above_db must be positive, got {below_db!r}, {above_db!r}")
    vmin, vmax = threshold_db - below_db, threshold_db + above_db
    fig, ax, given = _figure_for(ax, _map_figsize(extent, geographic, min_width_in=6.5))
    _draw_relief(ax, _grey_hillshade_rgba(elev), relief_extent)
    image = ax.imshow(
        np.ma.masked_invalid(index),
        cmap=colormaps[SURVEY_MAP_CMAP].with_extremes(bad=(0.0, 0.0, 0.0, 0.0)),
        norm=TwoSlopeNorm(vcenter=threshold_db, vmin=vmin, vmax=vmax),
        extent=_image_extent(extent),
        origin="upper",
        interpolation="nearest",
        alpha=0.9,
    )
    for i, (x, y) in enumerate(tracks_xy):
        ax.plot(_map_x(x, extent, geographic), np.asarray(y, dtype=np.float64).ravel(), color=SURVEY_TRACK_COLOUR,
                lw=0.5, alpha=0.6, label="tracks (nadir)" if i == 0 else None)  # fmt: skip
    if swaths:
        _note_below(ax, "each cell: the nearest trace's value, within the swath its subsurface window reaches")
    _frame_map(ax, extent, axis_labels, geographic)
    handles, _ = ax.get_legend_handles_labels()
    handles.append(Patch(facecolor=_HILLSHADE_MID_GREY, edgecolor="0.4", linewidth=0.5, label="grey only: no track (swath) reaches"))
    ax.legend(handles=handles, loc="upper right", **_LEGEND_STYLE)
    if title:
        ax.set_title(title)
    bar = fig.colorbar(image, ax=ax, label=label, shrink=0.8, extend="both")
    bar.ax.axhline(threshold_db, color="black", lw=1.0)
    bar.ax.text(0.5, 1.06, "clutter-prone", transform=bar.ax.transAxes, ha="center", va="bottom", fontsize="small")
    bar.ax.text(0.5, -0.06, "subsurface\nreadable", transform=bar.ax.transAxes, ha="center", va="top", fontsize="small")
    return _finish(fig, ax, given, path, dpi, fmt)


# --------------------------------------------------------------------- map parts


def _map_figsize(extent, geographic: bool, height_in: float = TRACK_MAP_FIGSIZE_IN[1], extra_in: float = 2.8,
                 min_width_in: float = 4.5) -> tuple[float, float]:  # fmt: skip
    """A figure size whose width follows the map's true shape (as :func:`_frame_map` draws it), plus
    ``extra_in`` for the colour bar and labels: a tall, narrow map (an airborne track's) gets a narrow
    figure instead of blank margins."""
    west, east, south, north = _image_extent(extent)
    stretch = 1.0 / max(np.cos(np.deg2rad(0.5 * (south + north))), 1e-3) if geographic else 1.0
    shape = abs(east - west) / max(abs(north - south) * stretch, 1e-12)
    if shape > 1.6:  # wide map: keep the width, lower the height
        width = TRACK_MAP_FIGSIZE_IN[0] + 2.0
        return width, float(np.clip((width - extra_in) / (0.8 * shape), 3.0, height_in))
    return float(np.clip(0.8 * height_in * shape + extra_in, min_width_in, 14.0)), height_in


def _grid(values, name: str) -> np.ndarray:
    """A 2-D float64 array, or ValueError naming the argument."""
    grid = np.asarray(values, dtype=np.float64)
    if grid.ndim != 2:
        raise ValueError(f"{name} must be 2-D, got shape {grid.shape}")
    return grid


def _map_axes(axis_labels, geographic) -> tuple[tuple[str, str], bool]:
    """Default axis labels (degrees) and, unless given, geographic iff the x label speaks of longitude/degrees."""
    if axis_labels is None:
        axis_labels = ("longitude (°E)", "latitude (°N)")
    if geographic is None:
        geographic = any(word in axis_labels[0].lower() for word in ("longitude", "°", "deg"))
    return tuple(axis_labels), bool(geographic)


def _map_x(x, extent, geographic: bool) -> np.ndarray:
    """x coordinates as a flat float array; in degrees, wrapped to within 180° of the map centre."""
    x = np.asarray(x, dtype=np.float64).ravel()
    if geographic:
        centre = 0.5 * (float(extent[0]) + float(extent[1]))
        x = (x - centre + 180.0) % 360.0 - 180.0 + centre
    return x


def _image_extent(extent) -> tuple[float, float, float, float]:
    west, east, south, north = (float(v) for v in extent)
    return (west, east, south, north)


def _draw_relief(ax, rgba: np.ndarray, extent) -> None:
    """A north-up relief image (row 0 at the top) filling ``extent``."""
    ax.imshow(rgba, extent=_image_extent(extent), origin="upper", interpolation="antialiased")


def _draw_track(ax, x: np.ndarray, y: np.ndarray, *, halo: bool = False) -> None:
    """The track line (label "track") and a labelled marker at its first valid point."""
    effects = [withStroke(linewidth=3.4, foreground="white")] if halo else None
    ax.plot(x, y, color=TRACK_COLOUR, lw=1.6, label="track", path_effects=effects)
    start = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if start.size:
        i = start[0]
        ax.plot(x[i], y[i], "o", ms=8, mfc="white", mec=TRACK_COLOUR, mew=2, label="start", zorder=3)
        ax.annotate("start", (x[i], y[i]), xytext=(6, 6), textcoords="offset points", fontsize="small",
                    color="black", bbox=_LABEL_BOX)  # fmt: skip


def _frame_map(ax, extent, axis_labels: tuple[str, str], geographic: bool) -> None:
    """Limits to ``extent``, true-shape aspect and axis labels."""
    west, east, south, north = _image_extent(extent)
    ax.set_xlim(west, east)
    ax.set_ylim(south, north)
    if geographic:  # one degree of longitude is cos(latitude) of one of latitude
        mean_lat = 0.5 * (south + north)
        ax.set_aspect(1.0 / max(np.cos(np.deg2rad(mean_lat)), 1e-3))
    else:
        ax.set_aspect("equal")
    ax.set_xlabel(axis_labels[0])
    ax.set_ylabel(axis_labels[1])


def _relief_inputs(elev: np.ndarray) -> tuple[np.ndarray, np.ndarray, Normalize, float]:
    """Hole-filled heights, validity mask, height norm and hillshade vertical exaggeration."""
    valid = np.isfinite(elev)
    if valid.any():
        lo, hi = float(elev[valid].min()), float(elev[valid].max())
        if hi <= lo:
            lo, hi = lo - 1.0, hi + 1.0
        filled = np.where(valid, elev, float(np.mean(elev[valid])))
    else:
        lo, hi = 0.0, 1.0
        filled = np.zeros_like(elev)
    norm = Normalize(vmin=float(lo), vmax=float(hi))
    # Exaggerate so the median per-pixel slope becomes ~0.2 (11°) in the shader.
    gy, gx = np.gradient(filled) if min(filled.shape) > 1 else (np.zeros_like(filled),) * 2
    step = np.hypot(gx, gy)[valid]
    typical_step = float(np.median(step)) if step.size else 0.0
    if typical_step <= 0 and step.size:
        typical_step = float(step.max())
    vert_exag = 0.2 / typical_step if typical_step > 0 else 1.0
    return filled, valid, norm, vert_exag


#: Light from the north-west, 40° above the horizon, for every hillshade.
_LIGHT = LightSource(azdeg=315.0, altdeg=40.0)
#: Grey levels of the greyscale hillshade (shadow, full light): light enough for overlays.
_HILLSHADE_GREY_RANGE = (0.38, 0.95)
_HILLSHADE_MID_GREY = str(round(0.5 * sum(_HILLSHADE_GREY_RANGE), 3))


def _shaded_relief_rgba(elev: np.ndarray) -> tuple[np.ndarray, Normalize]:
    """Hillshaded terrain colours as RGBA (ny, nx, 4), transparent in holes, and the colour norm."""
    filled, valid, norm, vert_exag = _relief_inputs(elev)
    rgba = _LIGHT.shade(filled, cmap=TERRAIN_CMAP, norm=norm, blend_mode="soft", vert_exag=vert_exag)
    rgba[..., 3] = np.where(valid, 1.0, 0.0)
    return rgba, norm


def hillshade_intensity(elev) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hillshade of heights (row 0 north) in [0, 1] with the figures' light and exaggeration rule,
    and the hole-filled heights and validity mask it was made from: ``(intensity, filled, valid)``."""
    filled, valid, _, vert_exag = _relief_inputs(np.asarray(elev, dtype=np.float64))
    intensity = _LIGHT.hillshade(filled, vert_exag=vert_exag) if filled.size else filled
    return intensity, filled, valid


def _grey_hillshade_rgba(elev: np.ndarray) -> np.ndarray:
    """Greyscale hillshade as RGBA (ny, nx, 4), transparent in holes (same light and exaggeration rule)."""
    intensity, _, valid = hillshade_intensity(elev)
    dark, light = _HILLSHADE_GREY_RANGE
    grey = dark + (light - dark) * intensity
    return np.stack([grey, grey, grey, np.where(valid, 1.0, 0.0)], axis=-1)


# --------------------------------------------------------------------- output


def _new_figure(figsize_in: tuple[float, float]) -> Figure:
    """A constrained-layout Figure at :data:`DPI` with its own Agg canvas (no pyplot)."""
    fig = Figure(figsize=figsize_in, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


#: Figure formats :func:`save_figure` writes (matplotlib's names).
FIGURE_FORMATS = ("png", "pdf", "svg")


def save_figure(fig: Figure, path, *, dpi: float | None = None, fmt: str | None = None) -> Path:
    """Save ``fig`` atomically (a ``.tmp`` sibling renamed onto ``path``) and return ``path``.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or Path
    dpi : float, optional
        Dots per inch (default :data:`DPI`); for pdf/svg it sets the resolution of the raster
        images inside them.
    fmt : {"png", "pdf", "svg"}, optional
        Default: the suffix of ``path`` if it is one of these, else png.
    """
    path = Path(path)
    if fmt is None:
        suffix = path.suffix.lower().lstrip(".")
        fmt = suffix if suffix in FIGURE_FORMATS else "png"
    if fmt not in FIGURE_FORMATS:
        raise ValueError(f"figure format {fmt!r}: expected one of {', '.join(FIGURE_FORMATS)}")
    dpi = DPI if dpi is None else float(dpi)
    if not dpi > 0:
        raise ValueError(f"dpi {dpi!r}: expected a positive number")
    if fig.canvas is None or not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    tmp = path.with_name(path.name + ".tmp")
    try:
        fig.savefig(tmp, format=fmt, dpi=dpi)
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return path


def _save_atomic(fig: Figure, path) -> Path:
    """Save as PNG at :data:`DPI` (see :func:`save_figure`)."""
    return save_figure(fig, path, fmt="png")


def _figure_for(ax, figsize_in):
    """``(figure, axes, given)``: the caller's axes, or a new Figure's single axes."""
    if ax is None:
        fig = _new_figure(figsize_in)
        return fig, fig.add_subplot(), False
    return ax.figure, ax, True


def _finish(fig, ax, given: bool, path, dpi=None, fmt=None):
    """Save to ``path`` if given (returns the Path), else return the caller's axes or the new Figure."""
    if path is not None:
        return save_figure(fig, path, dpi=dpi, fmt=fmt)
    return ax if given else fig
