"""Figures: the simulated radargram and a shaded-relief map of the track.

Figures are built on :class:`matplotlib.figure.Figure` with an explicit Agg
canvas; pyplot is never imported, so using this module changes no global
matplotlib state (backend, current figure) of the calling program.

Every function writes its PNG atomically: to ``<name>.tmp`` next to the target,
then :func:`os.replace` onto it, so a reader never sees a half-written file.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import LightSource, ListedColormap, Normalize
from matplotlib.figure import Figure
from matplotlib.patches import Patch

#: Output resolution of every figure (dots per inch).
DPI = 120
#: Radargram figure size in inches (width, height).
RADARGRAM_FIGSIZE_IN = (10.0, 5.0)
#: Track map figure size in inches (width, height).
TRACK_MAP_FIGSIZE_IN = (8.0, 7.0)

#: Colormap of the radargram (perceptually uniform, dark = weak echo).
RADARGRAM_CMAP = "magma"
#: Colour of traces with no data (NaN power, e.g. nadir off the DEM).
NO_DATA_COLOUR = "#b8c4cc"
#: Colour of overlaid lines on the radargram (contrasts with magma).
OVERLAY_COLOUR = "#3fd0ff"

#: Terrain colours without the blue "sea" part of matplotlib's ``terrain``.
TERRAIN_CMAP = ListedColormap(colormaps["terrain"](np.linspace(0.25, 0.95, 256)), name="terrain_land")


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
    """

    image_db: np.ndarray
    vmin_db: float
    vmax_db: float
    delay_top_us: float
    delay_bottom_us: float
    delay_label: str
    nadir_us: np.ndarray | None


def radargram_layers(ds, dynamic_range_db: float = 60.0) -> RadargramLayers:
    """Convert a radargram Dataset into the arrays :func:`plot_radargram` draws.

    If ``window_start`` varies along the track the image is shown as recorded:
    delay after each trace's window start. If it is constant (or absent) the
    y axis is the absolute two-way delay (window start + relative delay).
    The nadir surface line is given in the same frame.
    """
    if "power" not in ds or tuple(ds["power"].dims) != ("trace", "sample"):
        raise ValueError("radargram dataset needs a 'power' variable with dims (trace, sample)")
    if "delay" not in ds.coords:
        raise ValueError("radargram dataset needs a 'delay' (sample) coordinate in seconds")
    if not dynamic_range_db > 0:
        raise ValueError(f"dynamic_range_db must be positive, got {dynamic_range_db!r}")
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

    db = power_db(power_w)
    positive = np.isfinite(db)
    vmax_db = float(db[positive].max()) if positive.any() else 0.0
    vmin_db = vmax_db - float(dynamic_range_db)
    image_db = power_db(power_w, floor_db=vmin_db).T
    return RadargramLayers(
        image_db=image_db,
        vmin_db=vmin_db,
        vmax_db=vmax_db,
        delay_top_us=(offset_s + delay_s[0] - 0.5 * step_s) * 1e6,
        delay_bottom_us=(offset_s + delay_s[-1] + 0.5 * step_s) * 1e6,
        delay_label=delay_label,
        nadir_us=nadir_us,
    )


def plot_radargram(ds, path, *, dynamic_range_db: float = 60.0, title: str | None = None) -> Path:
    """Draw a radargram (echo power in dB, trace vs delay) to a PNG file.

    Parameters
    ----------
    ds : xarray.Dataset
        Dims ``trace``, ``sample``; ``power`` (trace, sample) in W, NaN for no
        data; coordinate ``delay`` (sample) in s after the window start;
        ``window_start`` and ``nadir_delay`` (trace) absolute two-way delays
        in s (NaN allowed). See :mod:`cluttersim.radargram`.
    path : str or Path
        Output PNG; its directory must exist.
    dynamic_range_db : float
        Colour scale spans [max − dynamic_range_db, max] dBW; weaker echoes
        and zero power are drawn at the bottom of the scale.
    title : str, optional

    Returns
    -------
    Path
        ``path``.
    """
    layers = radargram_layers(ds, dynamic_range_db)
    nsample, ntrace = layers.image_db.shape

    fig = Figure(figsize=RADARGRAM_FIGSIZE_IN, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
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
        extent=(-0.5, ntrace - 0.5, layers.delay_bottom_us, layers.delay_top_us),
    )
    handles = []
    if layers.nadir_us is not None:
        (line,) = ax.plot(np.arange(ntrace), layers.nadir_us, color=OVERLAY_COLOUR, lw=0.8, ls=(0, (4, 3)),
                          label="nadir surface")
        handles.append(line)
        ax.set_ylim(layers.delay_bottom_us, layers.delay_top_us)  # keep the image frame
    if np.isnan(layers.image_db).all(axis=0).any():
        handles.append(Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data"))
    if handles:
        ax.legend(handles=handles, loc="lower right", fontsize="small", framealpha=0.8)
    ax.set_xlabel("trace")
    ax.set_ylabel(layers.delay_label)
    if title:
        ax.set_title(title)
    fig.colorbar(image, ax=ax, label="echo power (dBW)", pad=0.01)
    return _save_atomic(fig, path)


# --------------------------------------------------------------------- track map


def plot_track_map(
    elevation_m,
    extent,
    lon_deg,
    lat_deg,
    path,
    *,
    title: str | None = None,
    axis_labels: tuple[str, str] | None = None,
    geographic: bool | None = None,
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
        Output PNG; its directory must exist.
    title : str, optional
    axis_labels : (str, str), optional
        x and y axis labels; default "longitude (°E)", "latitude (°N)".
    geographic : bool, optional
        True: coordinates are lon/lat degrees (aspect 1/cos(mean latitude),
        track longitudes wrapped). False: projected coordinates in one unit
        (e.g. km), drawn with equal aspect and no wrapping. By default,
        geographic unless ``axis_labels`` are given and the x label does not
        mention longitude or degrees.

    Returns
    -------
    Path
        ``path``.

    Notes
    -----
    The hillshade's vertical exaggeration is chosen from the data so relief is
    visible on flat and rugged DEMs alike; the shading is therefore not to scale.
    """
    elev = np.asarray(elevation_m, dtype=np.float64)
    if elev.ndim != 2:
        raise ValueError(f"elevation_m must be 2-D, got shape {elev.shape}")
    west, east, south, north = (float(v) for v in extent)
    lon = np.asarray(lon_deg, dtype=np.float64).ravel()
    lat = np.asarray(lat_deg, dtype=np.float64).ravel()
    if axis_labels is None:
        axis_labels = ("longitude (°E)", "latitude (°N)")
    if geographic is None:
        geographic = any(word in axis_labels[0].lower() for word in ("longitude", "°", "deg"))
    if geographic:
        centre_lon = 0.5 * (west + east)
        lon = (lon - centre_lon + 180.0) % 360.0 - 180.0 + centre_lon

    rgb, norm = _shaded_relief_rgba(elev)

    fig = Figure(figsize=TRACK_MAP_FIGSIZE_IN, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.imshow(rgb, extent=(west, east, south, north), origin="upper", interpolation="antialiased")
    ax.plot(lon, lat, color="#c0142c", lw=1.6, label="track")
    start = np.flatnonzero(np.isfinite(lon) & np.isfinite(lat))
    if start.size:
        i = start[0]
        ax.plot(lon[i], lat[i], "o", ms=8, mfc="white", mec="#c0142c", mew=2, label="start", zorder=3)
        ax.annotate("start", (lon[i], lat[i]), xytext=(6, 6), textcoords="offset points", fontsize="small",
                    color="black", bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.7))
    ax.set_xlim(west, east)
    ax.set_ylim(south, north)
    if geographic:  # one degree of longitude is cos(latitude) of one of latitude
        mean_lat = 0.5 * (south + north)
        ax.set_aspect(1.0 / max(np.cos(np.deg2rad(mean_lat)), 1e-3))
    else:
        ax.set_aspect("equal")
    ax.set_xlabel(axis_labels[0])
    ax.set_ylabel(axis_labels[1])
    ax.legend(loc="upper right", fontsize="small", framealpha=0.85)
    if title:
        ax.set_title(title)
    fig.colorbar(ScalarMappable(norm=norm, cmap=TERRAIN_CMAP), ax=ax, label="elevation (m)", shrink=0.8)
    return _save_atomic(fig, path)


def _shaded_relief_rgba(elev: np.ndarray) -> tuple[np.ndarray, Normalize]:
    """Hillshaded terrain colours as RGBA (ny, nx, 4), transparent in holes, and the colour norm."""
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
    light = LightSource(azdeg=315.0, altdeg=40.0)  # lit from the north-west
    rgba = light.shade(filled, cmap=TERRAIN_CMAP, norm=norm, blend_mode="soft", vert_exag=vert_exag)
    rgba[..., 3] = np.where(valid, 1.0, 0.0)
    return rgba, norm


# --------------------------------------------------------------------- output


def _save_atomic(fig: Figure, path) -> Path:
    """Save ``fig`` as PNG at :data:`DPI` to ``path`` via a ``.tmp`` sibling and rename."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    try:
        fig.savefig(tmp, format="png", dpi=DPI)
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return path
