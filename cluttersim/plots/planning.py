"""Survey and planning figures: the region survey's clutter map (:func:`plot_survey_map`), the
DEM-error Monte Carlo (:func:`plot_dem_error`: median beside the 5–95 % band width), the planning
objective against heading (:func:`plot_objective_polar`) and the best and worst candidate tracks'
radargrams (:func:`plot_best_worst`)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.patches import Patch

from .. import palette
from .style import _figure_for, _finish, _LEGEND_STYLE, _new_figure, _note_below, power_db, RADARGRAM_CMAP, save_figure
from .radargram_views import db_limits, radargram_layers
from .maps import (
    _draw_relief, _frame_map, _grey_hillshade_rgba, _grid, _HILLSHADE_MID_GREY, _image_extent, _map_figsize, _map_x,
)

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


#: Colour map of the 5–95 % band width (dB).
BAND_CMAP = "cividis"

#: Colour of the target's traces and depth window on radargrams.
TARGET_COLOUR = "#3fd0ff"


def _image(ax, layers, vmin, vmax, cmap):
    ntr = layers.image_db.shape[1]
    return ax.imshow(layers.image_db, aspect="auto", cmap=cmap, vmin=vmin, vmax=vmax, interpolation="nearest",
                     extent=(-0.5, ntr - 0.5, layers.delay_bottom_us, layers.delay_top_us))  # fmt: skip


def plot_dem_error(ds, path, *, dynamic_range_db: float | None = 60.0, band_max_db: float = 10.0, dpi=None, fmt=None):
    """Median power (dBW) over DEM realisations and the 5–95 % band width 10 log10(q95/q05) (dB),
    saved to ``path`` (``dpi``, ``fmt``: :func:`cluttersim.plots.save_figure`; ``dynamic_range_db``
    None: chosen from the data)."""
    fig = _new_figure((12.0, 5.0))
    ax1, ax2 = fig.subplots(1, 2, sharey=True)
    med = radargram_layers(ds.assign(power=ds["power_q50"]), dynamic_range_db)
    im1 = _image(ax1, med, med.vmin_db, med.vmax_db, RADARGRAM_CMAP)
    fig.colorbar(im1, ax=ax1, label="median power (dBW)")
    with np.errstate(divide="ignore", invalid="ignore"):
        width = power_db(ds["power_q95"].values) - power_db(ds["power_q05"].values)
    width = np.where(np.isfinite(width), width, np.nan)
    width_layers = radargram_layers(ds, dynamic_range_db)
    strong = med.image_db.T > med.vmin_db  # hide the band where the echo is below the display floor
    shown = np.where(strong, width, np.nan).T
    ntr = shown.shape[1]
    im2 = ax2.imshow(shown, aspect="auto", cmap=BAND_CMAP, vmin=0.0, vmax=band_max_db, interpolation="nearest",
                     extent=(-0.5, ntr - 0.5, width_layers.delay_bottom_us, width_layers.delay_top_us))  # fmt: skip
    fig.colorbar(im2, ax=ax2, label="5–95 % band width (dB)", extend="max")
    for ax, layers in ((ax1, med), (ax2, width_layers)):
        if layers.nadir_us is not None:
            ax.plot(np.arange(ntr), layers.nadir_us, color="white", lw=0.8, ls="--", label="nadir surface")
        ax.set_xlabel("trace")
    ax1.set_ylabel(med.delay_label)
    n = ds.attrs.get("dem_error_realisations", "?")
    ax1.set_title(f"median over {n} DEM realisations")
    ax2.set_title(f"spread: RMS {ds.attrs.get('dem_error_rms_m', '?')} m, "
                  f"correlation {ds.attrs.get('dem_error_correlation_m', '?')} m")  # fmt: skip
    ax2.set_facecolor("#d8d8d8")
    return save_figure(fig, path, dpi=dpi, fmt=fmt)


def plot_objective_polar(headings_deg, objective, labels, path, *, objective_label: str, best=None, worst=None,
                         mirror: bool = True, dpi=None, fmt=None):  # fmt: skip
    """Objective against heading on a polar plot (clockwise from north), one curve per label.

    ``headings_deg`` and ``objective``: lists (per curve) of arrays. ``best``/``worst``:
    (heading, value) marked. ``mirror``: also draw each value at the reverse heading (h + 180°,
    the same ground track flown the other way), so the rose closes on itself. Saved to ``path``
    (``dpi``, ``fmt``: :func:`cluttersim.plots.save_figure`).
    """
    fig = _new_figure((7.0, 6.5))
    ax = fig.add_subplot(projection="polar")
    ax.set_theta_zero_location("N")
    ax.set_theta_direction(-1)
    finite = np.concatenate([np.asarray(v, float)[np.isfinite(v)] for v in objective] or [np.zeros(1)])
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    span = max(hi - lo, 1e-6)
    r0 = lo - 0.15 * span  # radial axis: objective, offset so the lowest value is not at the centre
    for h, v, label in zip(headings_deg, objective, labels):
        h, v = np.asarray(h, float) % 360.0, np.asarray(v, float)
        if mirror:
            h, v = np.concatenate([h, (h + 180.0) % 360.0]), np.concatenate([v, v])
            h, keep = np.unique(np.round(h, 6), return_index=True)
            v = v[keep]
        order = np.argsort(h)
        hh = np.radians(h[order])
        vv = v[order]
        ax.plot(np.append(hh, hh[:1] + 2 * math.pi), np.append(vv, vv[:1]) - r0, marker="o", ms=3, lw=1.2,
                label=label)  # fmt: skip
    for mark, colour, name in ((best, "#1a9850", "best"), (worst, "#d73027", "worst")):
        if mark is not None:
            ax.plot([math.radians(mark[0])], [mark[1] - r0], marker="*", ms=16, color=colour, ls="none",
                    label=f"{name}: {mark[0]:.1f}°, {mark[1]:.1f}")  # fmt: skip
    ticks = np.linspace(lo, hi, 4)
    ax.set_rticks(ticks - r0)
    ax.set_yticklabels([f"{t:.2g}" for t in ticks], fontsize="small")
    ax.set_rlabel_position(247.5)
    ax.set_rlim(0, hi - r0 + 0.05 * span)
    ax.set_title(f"{objective_label} vs heading\n(lower is better, nearer the centre"
                 + ("; a heading and its reverse are one track)" if mirror else ")"))
    ax.legend(loc="lower left", bbox_to_anchor=(-0.12, -0.12), fontsize="small", framealpha=0.85)
    return save_figure(fig, path, dpi=dpi, fmt=fmt)


def plot_best_worst(best_ds, worst_ds, path, *, best_title: str, worst_title: str, target_traces=(None, None),
                    depth_window_s=None, dynamic_range_db: float | None = 60.0, dpi=None, fmt=None):  # fmt: skip
    """Best and worst tracks' radargrams side by side on one colour scale. ``target_traces``: per panel a
    boolean mask of the target's traces; ``depth_window_s``: (after-nadir start, end) two-way delays;
    ``dynamic_range_db`` None: chosen from both (:func:`cluttersim.plots.db_limits`). Saved to ``path``
    (``dpi``, ``fmt``: :func:`cluttersim.plots.save_figure`)."""
    fig = _new_figure((13.0, 5.5))
    axes = fig.subplots(1, 2)
    if dynamic_range_db is None:
        lo, hi = db_limits(best_ds, worst_ds)
        dynamic_range_db = hi - lo
    layers = [radargram_layers(d, dynamic_range_db) for d in (best_ds, worst_ds)]
    vmax = max(lay.vmax_db for lay in layers)
    vmin = vmax - dynamic_range_db
    for ax, ds, lay, title, mask in zip(axes, (best_ds, worst_ds), layers, (best_title, worst_title), target_traces):
        image = np.maximum(np.where(np.isnan(lay.image_db), np.nan, lay.image_db), vmin)
        lay = type(lay)(image, vmin, vmax, lay.delay_top_us, lay.delay_bottom_us, lay.delay_label, lay.nadir_us)
        im = _image(ax, lay, vmin, vmax, RADARGRAM_CMAP)
        ntr = image.shape[1]
        if lay.nadir_us is not None:
            ax.plot(np.arange(ntr), lay.nadir_us, color="white", lw=0.7, ls="--", label="nadir surface")
            if depth_window_s is not None and mask is not None and np.any(mask):
                t = np.flatnonzero(mask)
                top = lay.nadir_us[t] + depth_window_s[0] * 1e6
                bottom = lay.nadir_us[t] + depth_window_s[1] * 1e6
                x = np.concatenate([[t[0] - 0.5], t, [t[-1] + 0.5]])
                ax.plot(np.concatenate([x, x[::-1], x[:1]]),
                        np.concatenate([top[[0]], top, top[[-1]], bottom[[-1]], bottom[::-1], bottom[[0]], top[[0]]]),
                        color=TARGET_COLOUR, lw=1.8, label="target's traces and depth window")  # fmt: skip
        ax.set_title(title)
        ax.set_xlabel("trace")
        ax.set_ylabel(lay.delay_label)
        ax.legend(loc="lower right", fontsize="small", framealpha=0.85)
    fig.colorbar(im, ax=list(axes), label="power (dBW)")
    return save_figure(fig, path, dpi=dpi, fmt=fmt)
