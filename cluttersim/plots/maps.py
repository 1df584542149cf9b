"""Maps over shaded relief: the track and its first returns (:func:`plot_track_map`), the ground
echoing into a depth window (:func:`plot_source_map`), the cells behind one echo
(:func:`plot_echo_sources`, labels placed without collisions by :func:`place_labels`), and the map
parts the survey map shares."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection
from matplotlib.colors import LightSource, Normalize
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.patheffects import withStroke

from .style import (
    ECHO_CELL_COLOUR, ECHO_SOURCES_FIGSIZE_IN, _figure_for, _finish, FIRST_RETURN_COLOUR, _LABEL_BOX, _LEGEND_STYLE,
    power_db, SOURCE_MAP_CMAP, TERRAIN_CMAP, TRACK_COLOUR, TRACK_MAP_FIGSIZE_IN,
)
from .radargram_views import _db_limits

#: At most this many ranked cells are listed in the echo-sources legend.
_MAX_RANKS_LISTED = 10


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
    _frame_map(ax, view, axis_labels, geographic, title)
    ax.legend(loc="best", **_LEGEND_STYLE)
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
    db = power_db(power)
    vmin_db, vmax_db = _db_limits(db, dynamic_range_db)
    with np.errstate(invalid="ignore"):
        shown = np.ma.masked_where(~(db >= vmin_db), db)  # NaN, −inf and weak cells transparent

    fig, ax, given = _grey_map(ax, _map_figsize(extent, geographic), elev, extent, track_x, track_y, geographic)
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
    _frame_map(ax, extent, axis_labels, geographic, title)
    handles, _ = ax.get_legend_handles_labels()
    handles.append(Patch(facecolor=_HILLSHADE_MID_GREY, edgecolor="0.4", linewidth=0.5,
                         label=f"grey only: no power, or > {dynamic_range_db:g} dB below the maximum"))  # fmt: skip
    ax.legend(handles=handles, loc="upper right", **_LEGEND_STYLE)
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
    elevation_m, extent, track_x, track_y
        As for :func:`plot_source_map`.
    antenna_xy : (float, float)
        The antenna's nadir point when it recorded the echo.
    cells_xy : array_like (N, 2)
        Ground cells in rank order (row 0 = strongest); rows with NaN skipped.
    shares : array_like (N,)
        Each cell's fraction of the echo's power (sum ≤ 1); marker area is
        proportional to it (with a minimum, so that small shares stay visible).
        The legend lists the first ten ranks with their shares.
    path, ax, dpi, fmt, title, axis_labels, geographic
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
    cell_x = _map_x(cells[:, 0], extent, geographic)
    cell_y = cells[:, 1]
    antenna_x = _map_x(antenna[:1], extent, geographic)[0]

    fig, ax, given = _grey_map(ax, ECHO_SOURCES_FIGSIZE_IN, elev, extent, track_x, track_y, geographic)
    ok = np.isfinite(cell_x) & np.isfinite(cell_y) & np.isfinite(share)
    area_pt2 = _share_marker_area_pt2(share)
    for rank in np.flatnonzero(ok)[::-1]:  # rank 1 drawn last, on top
        ax.scatter(cell_x[rank], cell_y[rank], s=area_pt2[rank], c=ECHO_CELL_COLOUR, edgecolors="black",
                   linewidths=0.8, zorder=5 + 1.0 / (rank + 1))  # fmt: skip
    ax.plot(antenna_x, antenna[1], ls="none", marker="*", ms=15, mfc="white", mec="black", mew=1.2, zorder=7,
            label="antenna nadir at this echo")  # fmt: skip
    _frame_map(ax, extent if view is None else view, axis_labels, geographic, title)
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


def _grey_map(ax, figsize_in, elev: np.ndarray, extent, track_x, track_y, geographic: bool):
    """Begin a map: the caller's ``ax`` or a new figure, the grey hillshade of ``elev`` filling
    ``extent`` and the track on it with a white halo (x wrapped as :func:`_map_x` does), for
    :func:`_frame_map` to frame once the map's own layers are drawn: ``(figure, axes, given)``."""
    fig, ax, given = _figure_for(ax, figsize_in)
    _draw_relief(ax, _grey_hillshade_rgba(elev), extent)
    _draw_track(ax, _map_x(track_x, extent, geographic), np.asarray(track_y, dtype=np.float64).ravel(), halo=True)
    return fig, ax, given


def _frame_map(ax, extent, axis_labels: tuple[str, str], geographic: bool, title: str | None = None) -> None:
    """Limits to ``extent``, true-shape aspect, axis labels and the title (if any)."""
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
    if title:
        ax.set_title(title)


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
