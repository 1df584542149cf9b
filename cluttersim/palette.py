"""The visual language of every picture cluttersim makes: one colour per meaning, defined once.

The PNG/PDF/SVG figures (:mod:`cluttersim.plots`), the HTML report
(:mod:`cluttersim.report`, whose CSS and JavaScript receive these values from
Python, never a copy) and the README all take their colours from here, so a
colour means the same thing everywhere.

Side of the track
-----------------
Left of the direction of travel is **orange**, right is **sky blue**, the
nadir strip is **grey** — Okabe & Ito's colour-blind-safe orange (#E69F00) and
sky blue (#56B4E9) (Okabe & Ito 2008, *Color Universal Design*). They differ
along the blue–yellow direction that the common red–green deficiencies keep,
and all three have about the same relative luminance (~0.41), so in a mixed
image brightness shows echo power alone.

One colour map per quantity
---------------------------
Echo power (radargram, report power view): ``magma`` (perceptually uniform,
dark = weak). Terrain height: :data:`TERRAIN_CMAP`. Power on the ground
(source maps): ``viridis``. Signed differences (observed − predicted, clutter
index around its threshold): diverging maps centred on zero.

References
----------
Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures
and presentations that are friendly to colorblind people. J*FLY.
"""

from __future__ import annotations

import numpy as np

#: Colour of echo power from left of the direction of travel (hex, full brightness).
SIDE_LEFT = "#e69f00"
#: Colour of echo power from right of the direction of travel.
SIDE_RIGHT = "#56b4e9"
#: Colour of echo power from the nadir strip.
SIDE_NADIR = "#ababab"
#: Colour of samples without data in side views.
SIDE_NO_DATA = "#e4e4e4"
#: The three sides in the order (left, right, nadir strip).
SIDES = {"left": SIDE_LEFT, "right": SIDE_RIGHT, "nadir": SIDE_NADIR}
#: Words for the sides, as every legend and readout names them.
SIDE_WORDS = {"left": "left of track", "right": "right of track", "nadir": "nadir strip"}

#: Colour map of echo power (radargrams, in figures and in the report).
POWER_CMAP = "magma"
#: Colour of samples and traces with no data on a power image.
NO_DATA = "#b8c4cc"
#: Colour map of power per ground cell (source maps).
GROUND_POWER_CMAP = "viridis"
#: Diverging colour map of observed − predicted power (red: observed stronger).
DIFFERENCE_CMAP = "RdBu_r"
#: Diverging colour map of the survey's clutter index around its threshold (purple readable, orange prone).
SURVEY_CMAP = "PuOr_r"
#: Overlay of a comparison in the report: observed copper, simulated cyan (added: near white where both echo).
OVERLAY_OBSERVED = "#eb7d3c"
OVERLAY_SIMULATED = "#28aaeb"
#: Track line on every map.
TRACK = "#c0142c"
#: Lines drawn over a power radargram (nadir surface).
OVERLAY_LINE = "#3fd0ff"

#: Share of the power one side must hold before a readout names that side alone.
SIDE_MAJORITY = 0.6


def rgb255(colour) -> tuple[int, int, int]:
    """A colour (hex or matplotlib name) as an (r, g, b) tuple of 0–255 integers."""
    from matplotlib.colors import to_rgb

    return tuple(int(round(255 * c)) for c in to_rgb(colour))


def side_rgb() -> np.ndarray:
    """Rows (3, 3) of float RGB in [0, 1]: left, right, nadir strip."""
    from matplotlib.colors import to_rgb

    return np.array([to_rgb(SIDES[k]) for k in ("left", "right", "nadir")])


def text_shade(colour, factor: float = 0.62) -> str:
    """A darker shade of ``colour`` (hex) for text on a light background (same hue)."""
    r, g, b = rgb255(colour)
    return "#{:02x}{:02x}{:02x}".format(*(int(round(v * factor)) for v in (r, g, b)))


def power_lut(n: int = 256) -> np.ndarray:
    """uint8 (n, 3) RGB table of :data:`POWER_CMAP` from weak (row 0) to strong (row n − 1)."""
    from matplotlib import colormaps

    return np.rint(colormaps[POWER_CMAP](np.linspace(0.0, 1.0, n))[:, :3] * 255.0).astype(np.uint8)


def power_stops(n: int = 11) -> list:
    """``[[position, [r, g, b]], ...]`` stops of :data:`POWER_CMAP` for a CSS gradient."""
    lut = power_lut(256)
    return [[round(p, 4), [int(v) for v in lut[int(round(p * 255))]]] for p in np.linspace(0.0, 1.0, n)]


def side_shares_text(left: float, right: float) -> tuple[str | None, str]:
    """The side word a readout may print and the shares: ``(side or None, "left 46 % · ...")``.

    A side is named only when it holds at least :data:`SIDE_MAJORITY` of the
    power; otherwise the echo is mixed and only the shares are given.
    """
    nadir = max(0.0, 1.0 - left - right)
    shares = {"left": left, "right": right, "nadir": nadir}
    text = " · ".join(f"{SIDE_WORDS[k].split(' of')[0]} {100 * v:.0f} %" for k, v in shares.items())
    best = max(shares, key=shares.get)
    return (best if shares[best] >= SIDE_MAJORITY else None), text


def css_variables() -> str:
    """The palette as CSS custom properties (``:root { --side-left: ...; }``), for the report page."""
    props = {
        "--side-left": SIDE_LEFT, "--side-right": SIDE_RIGHT, "--side-nadir": SIDE_NADIR,
        "--side-left-text": text_shade(SIDE_LEFT), "--side-right-text": text_shade(SIDE_RIGHT, 0.55),
        "--side-nadir-text": text_shade(SIDE_NADIR, 0.5), "--track": TRACK, "--nadir-line": OVERLAY_LINE,
        "--no-data": NO_DATA,
    }  # fmt: skip
    return ":root {\n" + "".join(f"  {k}: {v};\n" for k, v in props.items()) + "}\n"


def report_colours() -> dict:
    """The palette as the report's JavaScript reads it (RGB 0–255 and CSS stops)."""
    return {
        "side": {k: list(rgb255(v)) for k, v in SIDES.items()},
        "side_words": SIDE_WORDS,
        "side_majority": SIDE_MAJORITY,
        "overlay": {"observed": list(rgb255(OVERLAY_OBSERVED)), "simulated": list(rgb255(OVERLAY_SIMULATED))},
        "power_ramp": power_stops(),
        "power_cmap": POWER_CMAP,
    }
