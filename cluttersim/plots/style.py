"""Shared styling and saving of every figure: sizes, resolution, colours (from
:mod:`cluttersim.palette`), :func:`power_db`, new Agg figures (no pyplot) and :func:`save_figure`
(png, pdf or svg, written atomically: ``<name>.tmp`` next to the target, then :func:`os.replace`
onto it, so a reader never sees a half-written file)."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure

from .. import palette

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


def _note_below(ax, text: str) -> None:
    """Small grey note under the x-axis label, right-aligned (constrained layout makes room)."""
    ax.annotate(text, xy=(1.0, 0.0), xycoords="axes fraction", xytext=(0.0, -36.0), textcoords="offset points",
                ha="right", va="top", fontsize="x-small", color="0.3")  # fmt: skip


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
        if fmt == "png":
            _write_png(fig, tmp, dpi)
        else:
            fig.savefig(tmp, format=fmt, dpi=dpi)
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return path


#: zlib level of the PNG figures: 4 encodes them about twice as fast as level 6 (PIL's and
#: matplotlib's default; the encoding was a fifth to a half of a figure's cost) for 2–8 % more bytes.
PNG_COMPRESS_LEVEL = 4


def _write_png(fig: Figure, path, dpi: float) -> None:
    """Render ``fig`` at ``dpi`` once and write it as a PNG.

    The file is that of ``fig.savefig(path, dpi=dpi)`` but for its compression: the same Agg
    draw (constrained layout included) at the same resolution, RGBA, the resolution (pHYs) and
    the Software text of matplotlib's own PNGs; without savefig's extra layout-only draw, and
    encoded at :data:`PNG_COMPRESS_LEVEL`. The figure's own face colour is drawn (matplotlib's
    ``savefig.facecolor``/``savefig.transparent`` rc settings are not consulted).
    """
    import matplotlib
    from PIL import Image, PngImagePlugin

    canvas = fig.canvas
    old_dpi = fig.dpi
    try:
        fig.dpi = dpi
        canvas.draw()
        rgba = np.asarray(canvas.buffer_rgba())
        info = PngImagePlugin.PngInfo()
        info.add_text("Software", f"Matplotlib version{matplotlib.__version__}, https://matplotlib.org/")
        Image.fromarray(np.ascontiguousarray(rgba)).save(path, format="png", compress_level=PNG_COMPRESS_LEVEL,
                                                         dpi=(dpi, dpi), pnginfo=info)  # fmt: skip
    finally:
        fig.dpi = old_dpi


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
