"""The side-coloured radargram: each sample's colour mixes the side palette by the shares of its power
from left and right of the track and the nadir strip (:func:`side_colours`), its brightness the power."""

from __future__ import annotations

import numpy as np
from matplotlib.colors import to_rgb
from matplotlib.patches import Patch
from matplotlib.patheffects import withStroke

from .. import palette
from ..io.radargram import thin_traces
from .style import (
    _finish, _LEGEND_STYLE, _new_figure, power_db, RADARGRAM_FIGSIZE_IN, SIDE_LEFT_COLOUR, SIDE_NADIR_COLOUR,
    SIDE_NO_DATA_COLOUR, SIDE_RIGHT_COLOUR,
)
from .radargram_views import (
    _add_depth_axis, add_distance_axis, _check_permittivity, _check_range, _db_limits, _draw_nadir_line,
    _label_radargram, _radargram_extent, radargram_layers, _trace_by_sample,
)

#: Exponent of the side view's brightness over its dB scale (< 1 lifts the weak echoes that a strong
#: mirror-like nadir echo would otherwise leave near black; 1 = linear in dB).
SIDE_BRIGHTNESS_GAMMA = 0.6

#: Hatching over traces without data, so they cannot be read as an echo colour.
SIDE_NO_DATA_HATCH_COLOUR = "#8c8c8c"

#: Colour of the nadir line on the side radargram (contrasts with all three sides).
SIDE_OVERLAY_COLOUR = "#ffffff"


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


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) indices of each run of True in a 1-D boolean array."""
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1))
