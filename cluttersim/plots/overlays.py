"""Optional overlays of the radargram figure: the noise floor and the predicted subsurface echo.

Drawn by :func:`cluttersim.plots.plot_radargram` when the Dataset has the
variables (``noise_power`` from the ``[noise]`` table, ``predicted_subsurface_delay``
from the ``[subsurface]`` table; see :mod:`cluttersim.physics.noise`, :mod:`cluttersim.physics.subsurface`).
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patheffects import Normal, withStroke

#: Colour of the noise-floor mark on the colour bar (white with a black edge: visible on any colour).
NOISE_FLOOR_COLOUR = "#ffffff"
#: Colour of the predicted subsurface echo line (distinct from the cyan nadir line on magma).
SUBSURFACE_COLOUR = "#9be564"

_STROKE = [withStroke(linewidth=2.6, foreground="black"), Normal()]


def noise_floor_db(ds) -> float | None:
    """10 log10 of the Dataset's ``noise_power`` (W → dBW), or None if absent or not positive."""
    if "noise_power" not in ds:
        return None
    p = float(np.asarray(ds["noise_power"].values))
    return 10.0 * math.log10(p) if p > 0 else None


def draw_noise_floor(colorbar, ds, vmin_db: float, vmax_db: float):
    """Mark the noise floor (dBW) on the colour bar; returns a legend handle, or None."""
    level = noise_floor_db(ds)
    if level is None:
        return None
    label = f"noise floor {level:.1f} dBW"
    if vmin_db <= level <= vmax_db:
        colorbar.ax.axhline(level, color=NOISE_FLOOR_COLOUR, lw=1.4, path_effects=_STROKE)
        label += " (colour bar)"
    else:
        label += " (below the colour scale)" if level < vmin_db else " (above the colour scale)"
    return Line2D([], [], color=NOISE_FLOOR_COLOUR, lw=1.4, path_effects=_STROKE, label=label)


def draw_predicted_subsurface(ax, ds, layers, colour: str = SUBSURFACE_COLOUR):
    """Line of ``predicted_subsurface_delay`` in the radargram's y frame; returns the Line2D, or None.

    The frame is :func:`cluttersim.plots.radargram_layers`'s: absolute delay if
    the window start is constant, else delay after each trace's window start.
    """
    if "predicted_subsurface_delay" not in ds:
        return None
    delay_s = np.asarray(ds["predicted_subsurface_delay"].values, dtype=np.float64)
    if not layers.delay_label.startswith("two-way delay"):
        delay_s = delay_s - np.asarray(ds["window_start"].values, dtype=np.float64)
    if not np.isfinite(delay_s).any():
        return None
    (line,) = ax.plot(
        np.arange(delay_s.size), delay_s * 1e6, color=colour, lw=0.9, ls=(0, (6, 2, 1, 2)), label="predicted subsurface echo"
    )
    ax.set_ylim(layers.delay_bottom_us, layers.delay_top_us)  # keep the image frame
    return line
