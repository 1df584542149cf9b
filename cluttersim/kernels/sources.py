"""Where the echo comes from: the dominant facet per output sample, the DEM cell (longitude,
latitude) of a facet, and each facet's power in delay windows.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from .common import _JIT
from .spreading import trapezoid_cdf
from .tiling import hidden_from_antenna
from .weights import direction_weight, sigma0_by_code


@numba.njit(parallel=True, **_JIT)
def dominant_source(binned, best_facet, weights, first, nsamples, out):
    """Per output sample, the facet of the binned sample that contributes most to it after
    convolution with the pulse ``weights`` (centred): argmax_j binned[j] · w[k − j].

    ``binned`` (ntrace, nbins) is total power before convolution; output sample
    ``s`` is bin ``first + s``. ``out`` (ntrace, nsamples) gets facet indices (−1: none).
    """
    half = weights.shape[0] // 2
    nb = binned.shape[1]
    for t in numba.prange(binned.shape[0]):
        for s in range(nsamples):
            k = first + s
            best = 0.0
            src = -1
            for j in range(max(k - half, 0), min(k + half + 1, nb)):
                v = binned[t, j] * weights[half + k - j]
                if v > best and best_facet[t, j] >= 0:
                    best = v
                    src = best_facet[t, j]
            out[t, s] = src


@numba.njit(parallel=True, **_JIT)
def cell_lonlat_of_facets(facet, facet_cell, nx, lon_of_col, lat_of_row, out_lon, out_lat):
    """Per sample, the longitude and latitude of the centre of facet ``facet[t, s]``'s cell in a
    geographic grid (NaN where the index is −1): cell = row · nx + col, read from the grid's
    per-column longitudes and per-row latitudes, written into ``out_lon``/``out_lat``."""
    for t in numba.prange(facet.shape[0]):
        for s in range(facet.shape[1]):
            f = facet[t, s]
            if f < 0:
                out_lon[t, s] = np.nan
                out_lat[t, s] = np.nan
            else:
                c = facet_cell[f]
                r = c // nx
                out_lon[t, s] = lon_of_col[c - r * nx]
                out_lat[t, s] = lat_of_row[r]


@numba.njit(inline="always", **_JIT)
def _window_fraction(x, wa, wb, lo, hi):
    """Share of a facet's trapezoidal delay distribution (centre x, widths wa, wb; bin
    units) that falls in [lo, hi)."""
    if wa < wb:
        wa, wb = wb, wa
    if wa < 1e-9:
        return 1.0 if lo <= x < hi else 0.0
    return trapezoid_cdf(hi - x, wa, wb) - trapezoid_cdf(lo - x, wa, wb)


@numba.njit(parallel=True, **_JIT)
def facet_power_in_windows(ant, lo_s, hi_s, dt_s, tile_centre, tile_radius, tile_extent, tile_offsets,
                           rel, normal, e_col, e_row, area, law_code, p0, p1, power_const, frames, antenna,
                           shadow_heights, facet_cell, nadir_rc, ant_h, h_max, out):  # fmt: skip
    """Power each facet sends into a delay window, summed over traces.

    For trace t the window is the two-way delays [lo_s[t], hi_s[t]); a facet
    contributes its radar-equation power (as in :func:`accumulate_power`) times
    the share of its exact trapezoidal delay distribution inside the window.
    Parallel over tiles, so each facet's sum ``out[f]`` (accumulated into)
    belongs to one thread.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    inv_bin_m = 1.0 / (half_c * dt_s)
    for m in numba.prange(tile_radius.shape[0]):
        rad = tile_radius[m]
        if rad < 0.0:
            continue
        ext = tile_extent[m]
        for t in range(ant.shape[0]):
            r_lo = lo_s[t] * half_c
            r_hi = hi_s[t] * half_c
            cx = tile_centre[m, 0] - ant[t, 0]
            cy = tile_centre[m, 1] - ant[t, 1]
            cz = tile_centre[m, 2] - ant[t, 2]
            d = math.sqrt(cx * cx + cy * cy + cz * cz)
            if d - rad > r_hi or d + rad < r_lo:
                continue
            lo = lo_s[t] / dt_s
            hi = hi_s[t] / dt_s
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = cx + rel[0, f]
                vy = cy + rel[1, f]
                vz = cz + rel[2, f]
                r2 = vx * vx + vy * vy + vz * vz
                r = math.sqrt(r2)
                if r - ext > r_hi or r + ext < r_lo:
                    continue
                cos_inc = -(vx * normal[0, f] + vy * normal[1, f] + vz * normal[2, f]) / r
                if cos_inc <= 0.0:
                    continue
                wa = abs(vx * e_col[0, f] + vy * e_col[1, f] + vz * e_col[2, f]) / r * inv_bin_m
                wb = abs(vx * e_row[0, f] + vy * e_row[1, f] + vz * e_row[2, f]) / r * inv_bin_m
                share = _window_fraction(r * inv_bin_m, wa, wb, lo, hi)
                if share <= 0.0:
                    continue
                if shadow_heights.shape[0] > 1:
                    cell = facet_cell[f]
                    rr = cell // shadow_heights.shape[1]
                    cc = cell - rr * shadow_heights.shape[1]
                    if hidden_from_antenna(shadow_heights, float(rr), float(cc), shadow_heights[rr, cc],
                                           nadir_rc[t, 0], nadir_rc[t, 1], ant_h[t], h_max,
                                           nadir_rc[t, 2], nadir_rc[t, 3]):  # fmt: skip
                        continue
                s0 = sigma0_by_code(law_code, cos_inc, p0, p1)
                g2 = direction_weight(antenna, frames[t], vx, vy, vz, 1.0 / r)
                out[f] += share * power_const * g2 * s0 * area[f] / (r2 * r2)
