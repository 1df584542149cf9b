"""Comparison figures: observed and simulated side by side on one scale, simulated clutter contours
over the observed radargram, and observed minus predicted, with the candidates marked."""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .. import palette
from .style import (
    _figure_for, _finish, _LEGEND_STYLE, _new_figure, NO_DATA_COLOUR, OVERLAY_COLOUR, power_db, RADARGRAM_CMAP,
    RADARGRAM_FIGSIZE_IN,
)
from .radargram_views import (
    _add_depth_axis, _check_permittivity, _draw_nadir_line, _label_radargram, _radargram_extent, radargram_layers,
    RadargramLayers, _trace_by_sample,
)

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
        From :func:`cluttersim.analysis.compare.compare` (``observed_power``,
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


def _no_data_handles(image_db) -> list:
    """The legend entry of the no-data colour, in a list, if the image has NaN (no data) cells; else []."""
    if np.isnan(image_db).any():
        return [Patch(facecolor=NO_DATA_COLOUR, edgecolor="none", label="no data / unmatched trace")]
    return []


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
        :func:`plot_radargram`; here ``ax`` is a pair of Axes (left, right).
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
    for panel, layers, panel_title in ((left, obs, titles[0]), (right, sim, titles[1])):
        image = panel.imshow(layers.image_db, cmap=cmap, vmin=layers.vmin_db, vmax=layers.vmax_db, aspect="auto",
                             interpolation="antialiased", interpolation_stage="rgba", origin="upper",
                             extent=_radargram_extent(layers))  # fmt: skip
        _draw_nadir_line(panel, layers, OVERLAY_COLOUR)
        _label_radargram(panel, layers, panel_title)
    right.set_ylabel("")
    _add_depth_axis(right, sim, permittivity)
    handles = []
    if obs.nadir_us is not None:
        handles.append(Line2D([], [], color=OVERLAY_COLOUR, lw=0.8, ls=(0, (4, 3)), label="simulated nadir surface"))
    handles += _no_data_handles(obs.image_db)
    if handles:
        left.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(image, ax=[left, right], label="echo power (dB, observed units)", pad=0.01)
    if title:
        fig.suptitle(title)
    return _finish(fig, ax, given, path, dpi, fmt)


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
    candidates : sequence of dict
        Ranked candidates from :func:`cluttersim.analysis.compare.compare` (keys
        ``trace``, ``grid_sample``, ``score``), drawn as open circles.
    threshold_db
        As above.
    path, ax, dpi, fmt, dynamic_range_db, permittivity, title
        As for :func:`plot_comparison_side_by_side`.

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
    handles += _no_data_handles(obs.image_db)
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
    candidates : sequence of dict
        As for :func:`plot_comparison_overlay`.
    range_db : float
        The colour scale spans ±``range_db`` dB.
    path, ax, dpi, fmt, permittivity, title
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
    handles += _no_data_handles(diff)
    _label_radargram(ax, layers, title or "observed − predicted (gain-matched simulation + noise floor)")
    _add_depth_axis(ax, layers, permittivity)
    if handles:
        ax.legend(handles=handles, loc="lower right", **_LEGEND_STYLE)
    fig.colorbar(image, ax=ax, label="observed − predicted (dB): red = more observed than predicted", pad=0.01,
                 extend="both")  # fmt: skip
    return _finish(fig, ax, given, path, dpi, fmt)


#: Size of the many-track candidates map, inches (width, height).
CANDIDATE_MAP_FIGSIZE_IN = (8.0, 6.5)


def plot_candidate_map(results, path=None, *, ax=None, title: str | None = None, dpi: float | None = None,
                       fmt: str | None = None):  # fmt: skip
    """Every track's antenna path and its candidates (colour: score) on a lon/lat map.

    ``results``: (name, :class:`cluttersim.analysis.compare.Comparison`) pairs, as
    :func:`cluttersim.analysis.compare.compare_many` returns them. ``path``, ``ax``, ``dpi``, ``fmt``: see
    :func:`plot_radargram`. Returns the new Figure, the given ``ax``, or ``path`` if one was given.
    """
    fig, ax, given = _figure_for(ax, CANDIDATE_MAP_FIGSIZE_IN)
    cmap = colormaps["viridis"]
    sc = None
    for name, r in results:
        ds = r.dataset
        lon = np.asarray(ds["lon"].values)
        lat = np.asarray(ds["lat"].values)
        ax.plot(lon, lat, lw=0.8, color="0.55")
        ax.annotate(name, (lon[0], lat[0]), fontsize="small", color="0.3")
        if r.candidates:
            sc = ax.scatter([c["lon"] for c in r.candidates], [c["lat"] for c in r.candidates],
                            c=[c["score"] for c in r.candidates], cmap=cmap, vmin=0.0, vmax=1.0, s=14,
                            edgecolors="k", linewidths=0.3, zorder=3)  # fmt: skip
    ax.set_xlabel("longitude (°)")
    ax.set_ylabel("latitude (°)")
    lats = np.concatenate([np.asarray(r.dataset["lat"].values) for _, r in results])
    lons = np.concatenate([np.asarray(r.dataset["lon"].values) for _, r in results])
    coslat = max(math.cos(math.radians(float(np.nanmean(lats)))), 0.05)
    half = 0.55 * max(float(np.nanmax(lats) - np.nanmin(lats)), float(np.nanmax(lons) - np.nanmin(lons)) * coslat, 1e-3)
    mid_lat, mid_lon = 0.5 * (np.nanmax(lats) + np.nanmin(lats)), 0.5 * (np.nanmax(lons) + np.nanmin(lons))
    ax.set_ylim(mid_lat - half, mid_lat + half)
    ax.set_xlim(mid_lon - half / coslat, mid_lon + half / coslat)
    ax.set_aspect(1.0 / coslat)
    ax.ticklabel_format(useOffset=False)
    n_cand = sum(len(r.candidates) for _, r in results)
    ax.set_title(title or f"{len(results)} track(s), {n_cand} unexplained echoes at the antenna's nadir", fontsize="medium")
    if sc is not None:
        fig.colorbar(sc, ax=ax, label="candidate score", pad=0.01)
    ax.legend(handles=[Line2D([], [], color="0.55", lw=0.8, label="observed track")], loc="best", **_LEGEND_STYLE)
    return _finish(fig, ax, given, path, dpi, fmt)
