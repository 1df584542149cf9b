"""Compiled kernels of the coherent field: facets → complex echo on a delay grid.

:func:`accumulate_complex` sums every facet's field with a random phase per facet (the coherent
mode of the diffuse model); :func:`accumulate_specular` is the specular (physical-optics) field.

See :mod:`cluttersim.physics.physical_optics` for the physics. Here each front-facing facet
(or sub-facet, :func:`cluttersim.physics.physical_optics.subdivisions`) is deposited as its
range distribution — a trapezoid whose widths are the projections |e_a·û|, |e_b·û|
of its edges on the line of sight — times its complex amplitude and the carrier
e^{−j2kr}, integrated *exactly* over each cell of a fine delay grid. Summed over the
cells this is the closed form A sinc(k e_a·û) sinc(k e_b·û) e^{−j2kR} of the facet's
aperture integral; spread in delay it is the facet's echo for a band-limited pulse,
and the shared edge of two neighbouring facets lands on the same cells with
opposite signs, so a continuous surface shows no facet-edge artefacts.

How a trapezoid is written at constant cost: a trapezoid is a sum of four ramps
s·max(r − c, 0). The cell integral of a ramp times the carrier, demodulated by the
cell's own carrier e^{+j2k r_m} (r_m the cell's start), is a closed form in the
partial cell that holds c and a linear function of m in every later cell; so each
ramp is three complex second differences (:func:`_deposit_ramp`), a step two
(:func:`_deposit_step`), a point one (:func:`_deposit_point`). Two running sums
per trace give the demodulated cell integrals; multiplying by e^{−j2k r_m} gives
the complex echo per cell (:func:`accumulate_specular`). Narrow trapezoids
(widths below 1 % of a cell) become boxes or points, which changes their integral
by less than 1e-5.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..physics import physical_optics
from ..constants import SPEED_OF_LIGHT_M_S
from .common import _JIT, SIDE_LEFT, SIDE_NADIR, SIDE_RIGHT
from .tiling import _tile_reaches_window, hidden_from_antenna
from .weights import direction_weight, sigma0_by_code

_subdivisions = numba.njit(inline="always", **_JIT)(physical_optics.subdivisions)

#: Trapezoid widths below this fraction of a delay cell are treated as zero.
NARROW_CELL_FRACTION = 0.01


@numba.njit(inline="always", **_JIT)
def _p0(q, length):
    """∫_0^L e^{−jqu} du (series for small qL: no cancellation)."""
    x = q * length
    if abs(x) < 1e-3:
        return complex(length * (1.0 - x * x / 6.0), -0.5 * x * length)
    return (1.0 - complex(math.cos(x), -math.sin(x))) / complex(0.0, q)


@numba.njit(inline="always", **_JIT)
def _p1(q, length):
    """∫_0^L u e^{−jqu} du = [e^{−jqL}(1 + jqL) − 1] / q² (series for small qL)."""
    x = q * length
    l2 = length * length
    if abs(x) < 2e-2:
        return complex(l2 * (0.5 - x * x / 8.0), -l2 * x * (1.0 / 3.0 - x * x / 30.0))
    e = complex(math.cos(x), -math.sin(x))
    return (e * complex(1.0, x) - 1.0) / (q * q)


@numba.njit(inline="always", **_JIT)
def _deposit_ramp(dd, base, x, delta_m, q, s, p0d, p1d, ed):
    """s·max(r − c, 0)·e^{−jqr} cell-integrated, demodulated per cell, as second differences
    into ``dd`` (index ``base`` is cell 0); ``x`` = c in cells from the grid start. ``p0d``,
    ``p1d``: :func:`_p0`, :func:`_p1` of a whole cell; ``ed`` = e^{−jqδ}."""
    mc = math.floor(x)
    yc = (x - mc) * delta_m
    rest = delta_m - yc
    ey = complex(math.cos(q * yc), -math.sin(q * yc))
    xr = q * rest
    if abs(xr) < 2e-2:
        p1r = _p1(q, rest)
    else:  # e^{−jq·rest} = e^{−jqδ} e^{+jq·yc}: one sine and cosine per ramp
        p1r = (ed * ey.conjugate() * complex(1.0, xr) - 1.0) / (q * q)
    v0 = s * ey * p1r
    v1 = s * (rest * p0d + p1d)
    i = base + mc
    dd[i] += v0
    dd[i + 1] += v1 - 2.0 * v0
    dd[i + 2] += v0 - v1 + s * delta_m * p0d


@numba.njit(inline="always", **_JIT)
def _deposit_step(dd, base, x, delta_m, q, s):
    """s·H(r − c)·e^{−jqr} (H the unit step), as :func:`_deposit_ramp`."""
    mc = math.floor(x)
    yc = (x - mc) * delta_m
    u0 = s * complex(math.cos(q * yc), -math.sin(q * yc)) * _p0(q, delta_m - yc)
    u1 = s * _p0(q, delta_m)
    i = base + mc
    dd[i] += u0
    dd[i + 1] += u1 - 2.0 * u0
    dd[i + 2] += u0 - u1


@numba.njit(inline="always", **_JIT)
def _deposit_point(dd, base, x, delta_m, q, s):
    """s·δ(r − c)·e^{−jqr}: all of it in the cell holding c."""
    mc = math.floor(x)
    yc = (x - mc) * delta_m
    v = s * complex(math.cos(q * yc), -math.sin(q * yc))
    i = base + mc
    dd[i] += v
    dd[i + 1] -= 2.0 * v
    dd[i + 2] += v


@numba.njit(inline="always", **_JIT)
def deposit_trapezoid(dd, base, x, wa_cells, wb_cells, delta_m, q, amp, p0d, p1d, ed):
    """A unit-area trapezoid (the convolution of boxes of widths ``wa_cells``, ``wb_cells``,
    centred at ``x``, all in cells) times ``amp`` e^{−jqr}, into the second-difference row
    (``p0d``, ``p1d``, ``ed``: see :func:`_deposit_ramp`)."""
    wa = max(wa_cells, wb_cells)
    wb = min(wa_cells, wb_cells)
    if wa < NARROW_CELL_FRACTION:
        _deposit_point(dd, base, x, delta_m, q, amp)
    elif wb < NARROW_CELL_FRACTION:
        h = amp / (wa * delta_m)
        _deposit_step(dd, base, x - 0.5 * wa, delta_m, q, h)
        _deposit_step(dd, base, x + 0.5 * wa, delta_m, q, -h)
    else:
        s = amp / (wa * wb * delta_m * delta_m)
        hs = 0.5 * (wa + wb)
        hd = 0.5 * (wa - wb)
        _deposit_ramp(dd, base, x - hs, delta_m, q, s, p0d, p1d, ed)
        _deposit_ramp(dd, base, x - hd, delta_m, q, -s, p0d, p1d, ed)
        _deposit_ramp(dd, base, x + hd, delta_m, q, -s, p0d, p1d, ed)
        _deposit_ramp(dd, base, x + hs, delta_m, q, s, p0d, p1d, ed)


@numba.njit(parallel=True, **_JIT)
def accumulate_specular(ant, right_unit, strip_half_m, bin0_s, dt_s, cells_per_sample, tile_centre, tile_radius,
                        tile_slab, tile_offsets, rel, normal, e_col, e_row, area, wavenumber, amp_const, rms_height_m, inv_radius_m, frames,
                        weighting, shadow_heights, facet_cell, nadir_rc, ant_h, h_max, max_extent_m, out):  # fmt: skip
    """Complex specular echo per delay cell: ``out[t, m]`` += Σ over facets of the field
    (:mod:`cluttersim.physics.physical_optics`) falling in cell m of trace t.

    Cell m of trace t covers the two-way delays bin0_s[t] + [m, m+1) dt / ``cells_per_sample``.
    A facet (or sub-facet s of A_s = A/n²) at range R_s, direction û_s and incidence θ_s
    contributes ``amp_const`` · √χ · √w · cos θ_s A_s / R_s² spread as its range trapezoid
    times e^{−j2kR} (``wavenumber`` = k), with χ = exp(−(2k σh cos θ)²) the coherent share
    (:func:`cluttersim.physics.physical_optics.coherent_power_fraction`, σh = ``rms_height_m`` at the
    facet's centre incidence). Sub-facets follow the body's curvature (``inv_radius_m`` =
    1/Rp; 0 for flat facets): a DEM facet is the tangent plane at its cell, and over a facet
    as wide as the Fresnel zone the reference surface's own curvature decides how much of the
    first zone reflects in phase (the spherical divergence 1/(1 + h/Rp)²) and w the two-way antenna pattern and aperture weight
    (:func:`cluttersim.kernels.direction_weight`, a power weight: its square root scales the
    field). Facets seen from behind, hidden by terrain (when ``shadow_heights`` is the DEM
    window), or whose trapezoid misses the grid are skipped. Returns the number of
    (sub-)facet evaluations.

    ``out`` has shape (ntrace, nside, ncell). With ``nside == 3`` (the source record) each
    facet's field goes to the row of its side (:data:`cluttersim.kernels.SIDE_NADIR` when its
    cross-track offset (P − A)·``right_unit[t]`` is within ``strip_half_m[t]``, else
    ``SIDE_LEFT`` or ``SIDE_RIGHT``); the echo is the sum of the rows.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    nt = ant.shape[0]
    nside = out.shape[1]
    ngrid = out.shape[2]
    q = 2.0 * wavenumber
    cell_s = dt_s / cells_per_sample
    delta_m = half_c * cell_s
    inv_delta = 1.0 / delta_m
    shadowing = shadow_heights.shape[0] > 1
    grid_nx = shadow_heights.shape[1]
    margin = int(2.0 * max_extent_m * inv_delta) + 8
    p0d = _p0(q, delta_m)
    p1d = _p1(q, delta_m)
    ed = complex(math.cos(q * delta_m), -math.sin(q * delta_m))
    counts = np.zeros(nt, dtype=np.int64)
    for t in numba.prange(nt):
        r_lo = bin0_s[t] * half_c
        r_hi = r_lo + ngrid * delta_m
        nrow = ngrid + 2 * margin + 4
        dd = np.zeros(nside * nrow, dtype=np.complex128)
        n_eval = 0
        for m in range(tile_radius.shape[0]):
            rad = tile_radius[m]
            if rad < 0.0:
                continue
            # the tile's bounding sphere, then its slab, against the grid's range interval
            cx, cy, cz, reaches = _tile_reaches_window(tile_centre, tile_slab, m, ant, t, rad, bin0_s, ngrid, cell_s)
            if not reaches:
                continue
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = cx + rel[0, f]
                vy = cy + rel[1, f]
                vz = cz + rel[2, f]
                r = math.sqrt(vx * vx + vy * vy + vz * vz)
                ax, ay, az = e_col[0, f], e_col[1, f], e_col[2, f]
                bx, by, bz = e_row[0, f], e_row[1, f], e_row[2, f]
                la = math.sqrt(ax * ax + ay * ay + az * az)
                lb = math.sqrt(bx * bx + by * by + bz * bz)
                ext = 0.5 * (la + lb)
                if r + ext < r_lo or r - ext >= r_hi:
                    continue
                nx, ny, nz = normal[0, f], normal[1, f], normal[2, f]
                inv_r = 1.0 / r
                cos_inc = -(vx * nx + vy * ny + vz * nz) * inv_r
                if cos_inc <= 0.0:
                    continue
                g = q * rms_height_m * cos_inc
                rough = math.exp(-0.5 * g * g)  # √χ: the field's share
                if rough < 1e-9:
                    continue
                w = direction_weight(weighting, frames[t], vx, vy, vz, inv_r)
                if w <= 0.0:
                    continue
                if shadowing:
                    cell = facet_cell[f]
                    rr = cell // grid_nx
                    cc = cell - rr * grid_nx
                    if hidden_from_antenna(shadow_heights, float(rr), float(cc), shadow_heights[rr, cc], nadir_rc[t, 0],
                                           nadir_rc[t, 1], ant_h[t], h_max, nadir_rc[t, 2], nadir_rc[t, 3]):  # fmt: skip
                        continue
                amp_f = amp_const * (rough * math.sqrt(w))
                base = margin
                if nside == 3:
                    cross = vx * right_unit[t, 0] + vy * right_unit[t, 1] + vz * right_unit[t, 2]
                    side = SIDE_RIGHT if cross > strip_half_m[t] else (SIDE_LEFT if cross < -strip_half_m[t] else SIDE_NADIR)
                    base += side * nrow
                # the Fresnel phase of the range and of the body's curvature across the facet set n
                n = _subdivisions(la, lb, 1.0 / (inv_r + inv_radius_m), wavenumber)
                inv_n = 1.0 / n
                a_sub = area[f] * inv_n * inv_n
                for i in range(n):
                    si = (i + 0.5) * inv_n - 0.5
                    for j in range(n):
                        sj = (j + 0.5) * inv_n - 0.5
                        # offset in the facet's plane, bent onto the body's curvature: dropped by
                        # |o|²/2Rp along the normal, normal and edges tilted by o/Rp
                        ox = si * ax + sj * bx
                        oy = si * ay + sj * by
                        oz = si * az + sj * bz
                        sag = 0.5 * (ox * ox + oy * oy + oz * oz) * inv_radius_m
                        px = vx + ox - sag * nx
                        py = vy + oy - sag * ny
                        pz = vz + oz - sag * nz
                        rs = math.sqrt(px * px + py * py + pz * pz)
                        inv_rs = 1.0 / rs
                        ux = px * inv_rs
                        uy = py * inv_rs
                        uz = pz * inv_rs
                        mx = nx + ox * inv_radius_m
                        my = ny + oy * inv_radius_m
                        mz = nz + oz * inv_radius_m
                        cos_s = -(ux * mx + uy * my + uz * mz) / math.sqrt(mx * mx + my * my + mz * mz)
                        if cos_s <= 0.0:
                            continue
                        un = ux * nx + uy * ny + uz * nz
                        ta = (ox * ax + oy * ay + oz * az) * inv_radius_m  # tilt of each edge out of the plane
                        tb = (ox * bx + oy * by + oz * bz) * inv_radius_m
                        wa = abs(ax * ux + ay * uy + az * uz - ta * un) * inv_n * inv_delta
                        wb = abs(bx * ux + by * uy + bz * uz - tb * un) * inv_n * inv_delta
                        x = (rs - r_lo) * inv_delta
                        deposit_trapezoid(dd, base, x, wa, wb, delta_m, q, amp_f * (cos_s * a_sub * inv_rs * inv_rs),
                                          p0d, p1d, ed)
                        n_eval += 1
        # two running sums give the demodulated cell integrals; the carrier of each cell restores the phase
        for side in range(nside):
            row = side * nrow
            s1 = 0.0j
            s2 = 0.0j
            for i in range(margin):
                s1 += dd[row + i]
                s2 += s1
            for mm in range(ngrid):
                s1 += dd[row + margin + mm]
                s2 += s1
                ph = q * (r_lo + mm * delta_m)
                out[t, side, mm] += s2 * complex(math.cos(ph), -math.sin(ph))
        counts[t] = n_eval
    return counts.sum()


@numba.njit(inline="always", **_JIT)
def facet_uniform(f, seed):
    """A uniform number in [0, 1) fixed by facet index and seed (splitmix64 hash; Steele,
    Lea & Flood 2014, OOPSLA): the same facet keeps its random phase on every trace."""
    z = np.uint64(f) * np.uint64(0x9E3779B97F4A7C15) + np.uint64(seed) * np.uint64(0xD1B54A32D192ED03)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    z = z ^ (z >> np.uint64(31))
    return float(z >> np.uint64(11)) * (1.0 / 9007199254740992.0)


@numba.njit(parallel=True, **_JIT)
def accumulate_complex(ant, bin0_s, dt_s, oversample, tile_centre, tile_radius, tile_offsets, rel, normal, area,
                       law_code, p0, p1, power_const, frames, weighting, shadow_heights, facet_cell, nadir_rc, ant_h,
                       h_max, wavenumber, random_phase, seed, out_re, out_im):  # fmt: skip
    """Coherent sum of facet echoes as complex impulses on a grid of ``oversample`` points per sample.

    Each front-facing facet is a point scatterer at its centre: amplitude √P
    with P the radar-equation power of :func:`accumulate_power` (σ0, area, R⁻⁴,
    antenna pattern and aperture weight, shadowing) and two-way phase
    −(4π/λ) R (``wavenumber`` = 4π/λ), plus, if ``random_phase``, a uniform phase
    fixed per facet (:func:`facet_uniform`) for sub-facet roughness. The
    impulse at delay grid position x is shared linearly between the two
    nearest grid points; range compression (convolution with the pulse
    response) is done by the caller. Grid point j of trace t is the delay
    bin0_s[t] + j dt / oversample. Returns the number of facet evaluations.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    nt = ant.shape[0]
    ngrid = out_re.shape[1]
    shadowing = shadow_heights.shape[0] > 1
    grid_nx = shadow_heights.shape[1]
    inv_grid_m = oversample / (half_c * dt_s)
    counts = np.zeros(nt, dtype=np.int64)
    for t in numba.prange(nt):
        r_lo = bin0_s[t] * half_c
        r_hi = r_lo + ngrid / inv_grid_m
        x0 = r_lo * inv_grid_m
        n_eval = 0
        for m in range(tile_radius.shape[0]):
            rad = tile_radius[m]
            if rad < 0.0:
                continue
            cx = tile_centre[m, 0] - ant[t, 0]
            cy = tile_centre[m, 1] - ant[t, 1]
            cz = tile_centre[m, 2] - ant[t, 2]
            d = math.sqrt(cx * cx + cy * cy + cz * cz)
            if d - rad > r_hi or d + rad < r_lo:
                continue
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = cx + rel[0, f]
                vy = cy + rel[1, f]
                vz = cz + rel[2, f]
                r2 = vx * vx + vy * vy + vz * vz
                r = math.sqrt(r2)
                x = r * inv_grid_m - x0
                if not (x >= 0.0 and x < ngrid - 1):  # nan too
                    continue
                inv_r = 1.0 / r
                cos_inc = -(vx * normal[0, f] + vy * normal[1, f] + vz * normal[2, f]) * inv_r
                if cos_inc <= 0.0:
                    continue
                p = power_const * sigma0_by_code(law_code, cos_inc, p0, p1) * area[f] / (r2 * r2)
                p *= direction_weight(weighting, frames[t], vx, vy, vz, inv_r)
                if shadowing and p > 0.0:
                    cell = facet_cell[f]
                    rr = cell // grid_nx
                    cc = cell - rr * grid_nx
                    if hidden_from_antenna(shadow_heights, float(rr), float(cc), shadow_heights[rr, cc],
                                           nadir_rc[t, 0], nadir_rc[t, 1], ant_h[t], h_max,
                                           nadir_rc[t, 2], nadir_rc[t, 3]):  # fmt: skip
                        continue
                if p <= 0.0:
                    continue
                n_eval += 1
                phase = -wavenumber * r
                if random_phase:
                    phase += 2.0 * math.pi * facet_uniform(f, seed)
                amp = math.sqrt(p)
                j = int(x)
                w1 = x - j
                re = amp * math.cos(phase)
                im = amp * math.sin(phase)
                out_re[t, j] += (1.0 - w1) * re
                out_im[t, j] += (1.0 - w1) * im
                out_re[t, j + 1] += w1 * re
                out_im[t, j + 1] += w1 * im
        counts[t] = n_eval
    return counts.sum()
