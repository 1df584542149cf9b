"""Compiled kernels (numba). Arrays in, arrays out; no I/O, no Python objects.

Everything that runs per facet or per grid cell lives here. Orchestration
(windowing, culling set-up, progress, chunking) is in :mod:`cluttersim.simulate`
and :mod:`cluttersim.facets`. All kernels are compiled with ``cache=True`` so a
second run loads them from disk instead of recompiling.

Conventions
-----------
* Positions are body-fixed Cartesian metres relative to a local origin (the
  centre of the DEM window), in float64; directions and areas are float32.
* Delay bins: bin ``k`` of a trace covers two-way delays
  ``[bin0_s + k dt, bin0_s + (k + 1) dt)``.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from . import scattering
from .constants import SPEED_OF_LIGHT_M_S

_JIT = dict(cache=True, nogil=True)

_sigma0_constant = numba.njit(**_JIT)(scattering.sigma0_constant)
_sigma0_lambert = numba.njit(**_JIT)(scattering.sigma0_lambert)
_sigma0_cosine = numba.njit(**_JIT)(scattering.sigma0_cosine)
_sigma0_hagfors = numba.njit(**_JIT)(scattering.sigma0_hagfors)
_sigma0_gaussian = numba.njit(**_JIT)(scattering.sigma0_gaussian)


@numba.njit(inline="always", **_JIT)
def sigma0_by_code(code, cos_inc, p0, p1):
    """σ0 of the law with numeric ``code`` (see :data:`cluttersim.scattering.LAWS`)."""
    if code == 3:
        return _sigma0_hagfors(cos_inc, p0, p1)
    if code == 0:
        return _sigma0_constant(cos_inc, p0)
    if code == 1:
        return _sigma0_lambert(cos_inc, p0)
    if code == 2:
        return _sigma0_cosine(cos_inc, p0, p1)
    return _sigma0_gaussian(cos_inc, p0, p1)


# --------------------------------------------------------------------------- geodesy


@numba.njit(**_JIT)
def geodetic_to_ecef(lat_deg, lon_deg, h_m, a_m, e2):
    """Geodetic → body-fixed Cartesian (see :meth:`cluttersim.body.Body.geodetic_to_ecef_m`)."""
    lat = math.radians(lat_deg)
    lon = math.radians(lon_deg)
    s = math.sin(lat)
    c = math.cos(lat)
    n = a_m / math.sqrt(1.0 - e2 * s * s)
    return (n + h_m) * c * math.cos(lon), (n + h_m) * c * math.sin(lon), (n * (1.0 - e2) + h_m) * s


@numba.njit(parallel=True, **_JIT)
def geodetic_to_ecef_array(lat_deg, lon_deg, h_m, a_m, e2, out):
    """Vectorised :func:`geodetic_to_ecef` over 1-D arrays into ``out`` (n, 3)."""
    for i in numba.prange(lat_deg.shape[0]):
        x, y, z = geodetic_to_ecef(lat_deg[i], lon_deg[i], h_m[i], a_m, e2)
        out[i, 0] = x
        out[i, 1] = y
        out[i, 2] = z


# --------------------------------------------------------------------------- facets


@numba.njit(parallel=True, **_JIT)
def grid_to_ecef(lat_deg, lon_deg, h_m, a_m, e2, origin, out):
    """Cell-centre positions (ny, nx, 3) relative to ``origin`` from 2-D geodetic grids."""
    ny, nx = h_m.shape
    for i in numba.prange(ny):
        for j in range(nx):
            x, y, z = geodetic_to_ecef(lat_deg[i, j], lon_deg[i, j], h_m[i, j], a_m, e2)
            out[i, j, 0] = x - origin[0]
            out[i, j, 1] = y - origin[1]
            out[i, j, 2] = z - origin[2]


@numba.njit(parallel=True, **_JIT)
def build_tiled_facets(
    grid, valid, up, tile, tile_offsets, pos, normal, e_col, e_row, area, cell, tile_centre, tile_radius, tile_extent
):
    """Facet geometry from a grid of cell-centre positions, written tile by tile.

    For cell (i, j) the edge vectors are the central differences
    ``e_col = (P[i, j+1] − P[i, j−1]) / 2`` and ``e_row = (P[i+1, j] − P[i−1, j]) / 2``
    (one-sided at the window border). The facet is the parallelogram they span:
    true area ``|e_col × e_row|`` on the curved, sloping surface, and unit normal
    along ``e_col × e_row`` turned to point away from the body (``up``).
    Valid cells of tile ``t`` go to rows ``tile_offsets[t]:tile_offsets[t+1]``.
    Each tile also gets a bounding sphere (centre, radius) and the largest facet
    half-extent, used to cull whole tiles per trace.
    """
    ny, nx = valid.shape
    nty = (ny + tile - 1) // tile
    ntx = (nx + tile - 1) // tile
    for t in numba.prange(nty * ntx):
        ti = t // ntx
        tj = t % ntx
        k = tile_offsets[t]
        cx = 0.0
        cy = 0.0
        cz = 0.0
        ext = 0.0
        for i in range(ti * tile, min((ti + 1) * tile, ny)):
            i0 = max(i - 1, 0)
            i1 = min(i + 1, ny - 1)
            for j in range(tj * tile, min((tj + 1) * tile, nx)):
                if not valid[i, j]:
                    continue
                j0 = max(j - 1, 0)
                j1 = min(j + 1, nx - 1)
                fc = 1.0 / (j1 - j0)
                fr = 1.0 / (i1 - i0)
                ax = (grid[i, j1, 0] - grid[i, j0, 0]) * fc
                ay = (grid[i, j1, 1] - grid[i, j0, 1]) * fc
                az = (grid[i, j1, 2] - grid[i, j0, 2]) * fc
                bx = (grid[i1, j, 0] - grid[i0, j, 0]) * fr
                by = (grid[i1, j, 1] - grid[i0, j, 1]) * fr
                bz = (grid[i1, j, 2] - grid[i0, j, 2]) * fr
                nxv = ay * bz - az * by
                nyv = az * bx - ax * bz
                nzv = ax * by - ay * bx
                nn = math.sqrt(nxv * nxv + nyv * nyv + nzv * nzv)
                if nxv * up[i, j, 0] + nyv * up[i, j, 1] + nzv * up[i, j, 2] < 0.0:
                    nxv = -nxv
                    nyv = -nyv
                    nzv = -nzv
                for d in range(3):
                    pos[k, d] = grid[i, j, d]
                e_col[k, 0] = ax
                e_col[k, 1] = ay
                e_col[k, 2] = az
                e_row[k, 0] = bx
                e_row[k, 1] = by
                e_row[k, 2] = bz
                if nn > 0.0:
                    normal[k, 0] = nxv / nn
                    normal[k, 1] = nyv / nn
                    normal[k, 2] = nzv / nn
                else:
                    normal[k, 0] = up[i, j, 0]
                    normal[k, 1] = up[i, j, 1]
                    normal[k, 2] = up[i, j, 2]
                area[k] = nn
                cell[k] = i * nx + j
                half = 0.5 * (math.sqrt(ax * ax + ay * ay + az * az) + math.sqrt(bx * bx + by * by + bz * bz))
                ext = max(ext, half)
                cx += grid[i, j, 0]
                cy += grid[i, j, 1]
                cz += grid[i, j, 2]
                k += 1
        n = k - tile_offsets[t]
        if n == 0:
            tile_radius[t] = -1.0
            continue
        cx /= n
        cy /= n
        cz /= n
        r2 = 0.0
        for m in range(tile_offsets[t], k):
            dx = pos[m, 0] - cx
            dy = pos[m, 1] - cy
            dz = pos[m, 2] - cz
            r2 = max(r2, dx * dx + dy * dy + dz * dz)
        tile_centre[t, 0] = cx
        tile_centre[t, 1] = cy
        tile_centre[t, 2] = cz
        tile_radius[t] = math.sqrt(r2) + ext
        tile_extent[t] = ext


# --------------------------------------------------------------------------- delay spreading


@numba.njit(inline="always", **_JIT)
def _ramp2(t):
    return t * t if t > 0.0 else 0.0


@numba.njit(inline="always", **_JIT)
def trapezoid_cdf(z, wa, wb):
    """CDF at offset ``z`` of the sum of two centred uniform variables of widths wa ≥ wb.

    This is the distribution of range over a parallelogram facet whose edges
    project onto the line of sight as ``wa`` and ``wb``: a trapezoid, the
    convolution of two boxes. Closed form:
    F(z) = [G(z + (a+b)/2) − G(z + (a−b)/2) − G(z − (a−b)/2) + G(z − (a+b)/2)] / (2ab),
    G(t) = max(t, 0)². A box of width wa when wb ≪ wa.
    """
    if wb < 1e-4 * wa:
        f = (z + 0.5 * wa) / wa
        return min(max(f, 0.0), 1.0)
    s = 0.5 * (wa + wb)
    d = 0.5 * (wa - wb)
    f = (_ramp2(z + s) - _ramp2(z + d) - _ramp2(z - d) + _ramp2(z - s)) / (2.0 * wa * wb)
    return min(max(f, 0.0), 1.0)


@numba.njit(inline="always", **_JIT)
def spread_into_bins(row, x, wa, wb, p):
    """Add power ``p`` to ``row`` spread over bins by the trapezoid centred at bin coordinate ``x``.

    Bin ``k`` spans [k, k+1) in bin units; ``wa``, ``wb`` are the two projected
    widths in bins. Each bin receives the fraction of the facet's delay
    distribution that falls inside it, so total power is conserved.
    """
    if wa < wb:
        wa, wb = wb, wa
    nb = row.shape[0]
    half = 0.5 * (wa + wb)
    k0 = int(math.floor(x - half))
    k1 = int(math.floor(x + half))
    if k1 < 0 or k0 >= nb:
        return
    if k0 == k1 or wa < 1e-9:
        k = int(math.floor(x))
        if 0 <= k < nb:
            row[k] += p
        return
    ks = max(k0, 0)
    ke = min(k1, nb - 1)
    prev = 0.0 if ks == k0 else trapezoid_cdf(ks - x, wa, wb)
    for k in range(ks, ke + 1):
        f = 1.0 if k == k1 else trapezoid_cdf(k + 1 - x, wa, wb)
        row[k] += p * (f - prev)
        prev = f


#: Facets whose delay extent (wa + wb) exceeds this many bins are spread through the
#: second-difference accumulator (constant cost) instead of bin by bin.
WIDE_FACET_BINS = 3.0
#: Smallest projected width (bins) used for a wide facet's narrow side; keeps the
#: accumulator's weights bounded (a 0.1-bin box is far below the pulse width).
_MIN_NARROW_BINS = 0.1


@numba.njit(inline="always", **_JIT)
def _add_corner(dd, c, w):
    """Add w·[G(k+1−c) − G(k−c)], G(t) = max(t, 0)², for every bin k, as second differences.

    For k = floor(c) the term is (1 − f)², beyond it 2(k − c) + 1 (f = c − floor c):
    three impulses in ``dd``; a corner before bin 0 leaves only its linear part.
    """
    nb = dd.shape[0]
    m = int(math.floor(c))
    if m >= nb:
        return
    if m < 0:
        dd[0] += w * (1.0 - 2.0 * c)
        if nb > 1:
            dd[1] += w * (1.0 + 2.0 * c)
        return
    f = c - m
    dd[m] += w * (1.0 - f) * (1.0 - f)
    if m + 1 < nb:
        dd[m + 1] += w * (1.0 + 2.0 * f - 2.0 * f * f)
    if m + 2 < nb:
        dd[m + 2] += w * f * f


@numba.njit(inline="always", **_JIT)
def spread_wide(dd, x, wa, wb, p):
    """Accumulate a wide facet's trapezoid (see :func:`trapezoid_cdf`) into second differences ``dd``.

    Bin k receives p [F(k+1) − F(k)] with F the trapezoid's CDF, a sum of four
    shifted G(t) = max(t, 0)² terms, each of which is three impulses in the
    second difference: cost independent of the facet's width. Two running sums
    (:func:`integrate_second_differences`) turn ``dd`` into power per bin.
    """
    if wa < wb:
        wa, wb = wb, wa
    wb = max(wb, _MIN_NARROW_BINS)
    s = 0.5 * (wa + wb)
    if x + s < 0.0 or x - s >= dd.shape[0]:
        return
    d = 0.5 * (wa - wb)
    w = p / (2.0 * wa * wb)
    _add_corner(dd, x - s, w)
    _add_corner(dd, x - d, -w)
    _add_corner(dd, x + d, -w)
    _add_corner(dd, x + s, w)


@numba.njit(**_JIT)
def integrate_second_differences(dd, row):
    """row[k] += max(0, Σ_{j≤k} Σ_{i≤j} dd[i]) (two running sums; tiny negative round-off clipped)."""
    s1 = 0.0
    s2 = 0.0
    for k in range(row.shape[0]):
        s1 += dd[k]
        s2 += s1
        if s2 > 0.0:
            row[k] += s2


# --------------------------------------------------------------------------- per-trace kernels


@numba.njit(parallel=True, **_JIT)
def earliest_range(ant, tile_centre, tile_radius, tile_offsets, pos, normal, e_col, e_row, out):
    """Per trace, the smallest range (m) from the antenna to any front-facing facet's near edge.

    Tiles are visited in order of their lower range bound and the search stops
    once that bound exceeds the best range found.
    """
    ntile = tile_radius.shape[0]
    for t in numba.prange(ant.shape[0]):
        ax = ant[t, 0]
        ay = ant[t, 1]
        az = ant[t, 2]
        lb = np.empty(ntile)
        for m in range(ntile):
            if tile_radius[m] < 0.0:
                lb[m] = np.inf
            else:
                dx = tile_centre[m, 0] - ax
                dy = tile_centre[m, 1] - ay
                dz = tile_centre[m, 2] - az
                lb[m] = math.sqrt(dx * dx + dy * dy + dz * dz) - tile_radius[m]
        order = np.argsort(lb)
        best = np.inf
        for q in range(ntile):
            m = order[q]
            if lb[m] >= best:
                break
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = pos[f, 0] - ax
                vy = pos[f, 1] - ay
                vz = pos[f, 2] - az
                r = math.sqrt(vx * vx + vy * vy + vz * vz)
                ux = vx / r
                uy = vy / r
                uz = vz / r
                if ux * normal[f, 0] + uy * normal[f, 1] + uz * normal[f, 2] >= 0.0:
                    continue
                span = abs(ux * e_col[f, 0] + uy * e_col[f, 1] + uz * e_col[f, 2]) + abs(
                    ux * e_row[f, 0] + uy * e_row[f, 1] + uz * e_row[f, 2]
                )
                near = r - 0.5 * span
                if near < best:
                    best = near
        out[t] = best


#: Side codes of the source record: within the nadir strip, left or right of the track.
SIDE_NADIR, SIDE_LEFT, SIDE_RIGHT = 0, 1, 2


@numba.njit(parallel=True, **_JIT)
def accumulate_power(
    ant,
    right_unit,
    strip_half_m,
    bin0_s,
    dt_s,
    tile_centre,
    tile_radius,
    tile_extent,
    tile_offsets,
    pos,
    normal,
    e_col,
    e_row,
    area,
    law_code,
    p0,
    p1,
    power_const,
    out,
    best_facet,
):
    """Received power per delay bin from every facet, one trace per thread.

    For each facet at range R with local incidence θ (cos θ = −û·n̂) the radar
    equation (e.g. Skolnik, *Introduction to Radar Systems*, 3rd ed., eq. 1.7)

        P = Pt G² λ² σ0(θ) A / ((4π)³ R⁴) = power_const · σ0(θ) A / R⁴

    is spread over the delay bins its range extent covers
    (:func:`spread_into_bins` for narrow facets, :func:`spread_wide` for wide ones).
    Facets seen from behind contribute nothing. Tiles whose bounding sphere
    cannot reach the window are skipped whole.

    ``out`` has shape (ntrace, nside, nbins) and is accumulated into. With
    ``nside == 3`` each facet's power goes to the row of its side
    (:data:`SIDE_NADIR` when its cross-track offset ``(P − A)·right_unit[t]`` is
    within ``strip_half_m[t]``, else :data:`SIDE_LEFT` / :data:`SIDE_RIGHT`), and
    ``best_facet`` (ntrace, nbins) receives, per bin, the facet with the largest
    power density there (−1 where none). With ``nside == 1`` neither is
    tracked and ``best_facet`` may be empty. Returns the number of facet
    evaluations.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    nside = out.shape[1]
    nb = out.shape[2]
    attribute = nside == 3
    ntile = tile_radius.shape[0]
    inv_bin_m = 1.0 / (half_c * dt_s)
    counts = np.zeros(ant.shape[0], dtype=np.int64)
    for t in numba.prange(ant.shape[0]):
        ax = ant[t, 0]
        ay = ant[t, 1]
        az = ant[t, 2]
        cx = right_unit[t, 0]
        cy = right_unit[t, 1]
        cz = right_unit[t, 2]
        strip = strip_half_m[t]
        r_lo = bin0_s[t] * half_c
        r_hi = (bin0_s[t] + nb * dt_s) * half_c
        dd = np.zeros((nside, nb))
        best_val = np.zeros(nb if attribute else 0)
        n_eval = 0
        for m in range(ntile):
            rad = tile_radius[m]
            if rad < 0.0:
                continue
            dx = tile_centre[m, 0] - ax
            dy = tile_centre[m, 1] - ay
            dz = tile_centre[m, 2] - az
            d = math.sqrt(dx * dx + dy * dy + dz * dz)
            if d - rad > r_hi or d + rad < r_lo:
                continue
            ext = tile_extent[m]
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = pos[f, 0] - ax
                vy = pos[f, 1] - ay
                vz = pos[f, 2] - az
                r2 = vx * vx + vy * vy + vz * vz
                r = math.sqrt(r2)
                if r - ext > r_hi or r + ext < r_lo:
                    continue
                n_eval += 1
                inv_r = 1.0 / r
                ux = vx * inv_r
                uy = vy * inv_r
                uz = vz * inv_r
                cos_inc = -(ux * normal[f, 0] + uy * normal[f, 1] + uz * normal[f, 2])
                if cos_inc <= 0.0:
                    continue
                s0 = sigma0_by_code(law_code, cos_inc, p0, p1)
                p = power_const * s0 * area[f] / (r2 * r2)
                wa = abs(ux * e_col[f, 0] + uy * e_col[f, 1] + uz * e_col[f, 2]) * inv_bin_m
                wb = abs(ux * e_row[f, 0] + uy * e_row[f, 1] + uz * e_row[f, 2]) * inv_bin_m
                x = (r * inv_bin_m) - bin0_s[t] / dt_s
                side = 0
                if attribute:
                    cross = vx * cx + vy * cy + vz * cz
                    if cross > strip:
                        side = SIDE_RIGHT
                    elif cross < -strip:
                        side = SIDE_LEFT
                    _track_best(best_val, best_facet[t], x, wa, wb, p, f)
                if wa + wb > WIDE_FACET_BINS:
                    spread_wide(dd[side], x, wa, wb, p)
                else:
                    spread_into_bins(out[t, side], x, wa, wb, p)
        for q in range(nside):
            integrate_second_differences(dd[q], out[t, q])
        counts[t] = n_eval
    return counts.sum()


@numba.njit(inline="always", **_JIT)
def _track_best(best_val, best_row, x, wa, wb, p, f):
    """Make facet ``f`` the source of the bins it covers where its power density
    p / max(wa, wb, 1) (power per bin at the trapezoid's plateau) is the largest so far."""
    nb = best_val.shape[0]
    half = 0.5 * (wa + wb)
    k0 = max(int(math.floor(x - half)), 0)
    k1 = min(int(math.floor(x + half)), nb - 1)
    density = p / max(wa, wb, 1.0)
    for k in range(k0, k1 + 1):
        if density > best_val[k]:
            best_val[k] = density
            best_row[k] = f


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
def facet_power_in_windows(
    ant, lo_s, hi_s, dt_s, tile_centre, tile_radius, tile_extent, tile_offsets,
    pos, normal, e_col, e_row, area, law_code, p0, p1, power_const, out,
):  # fmt: skip
    """Power each facet sends into a delay window, summed over traces.

    For trace t the window is the two-way delays [lo_s[t], hi_s[t]); a facet
    contributes its radar-equation power (as in :func:`accumulate_power`) times
    the share of its delay extent inside the window. Parallel over tiles, so
    each facet's sum ``out[f]`` (accumulated into) belongs to one thread.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    inv_bin_m = 1.0 / (half_c * dt_s)
    for m in numba.prange(tile_radius.shape[0]):
        rad = tile_radius[m]
        if rad < 0.0:
            continue
        ext = tile_extent[m]
        for t in range(ant.shape[0]):
            ax = ant[t, 0]
            ay = ant[t, 1]
            az = ant[t, 2]
            r_lo = lo_s[t] * half_c
            r_hi = hi_s[t] * half_c
            dx = tile_centre[m, 0] - ax
            dy = tile_centre[m, 1] - ay
            dz = tile_centre[m, 2] - az
            d = math.sqrt(dx * dx + dy * dy + dz * dz)
            if d - rad > r_hi or d + rad < r_lo:
                continue
            lo = lo_s[t] / dt_s
            hi = hi_s[t] / dt_s
            for f in range(tile_offsets[m], tile_offsets[m + 1]):
                vx = pos[f, 0] - ax
                vy = pos[f, 1] - ay
                vz = pos[f, 2] - az
                r2 = vx * vx + vy * vy + vz * vz
                r = math.sqrt(r2)
                if r - ext > r_hi or r + ext < r_lo:
                    continue
                inv_r = 1.0 / r
                ux = vx * inv_r
                uy = vy * inv_r
                uz = vz * inv_r
                cos_inc = -(ux * normal[f, 0] + uy * normal[f, 1] + uz * normal[f, 2])
                if cos_inc <= 0.0:
                    continue
                wa = abs(ux * e_col[f, 0] + uy * e_col[f, 1] + uz * e_col[f, 2]) * inv_bin_m
                wb = abs(ux * e_row[f, 0] + uy * e_row[f, 1] + uz * e_row[f, 2]) * inv_bin_m
                share = _window_fraction(r * inv_bin_m, wa, wb, lo, hi)
                if share <= 0.0:
                    continue
                s0 = sigma0_by_code(law_code, cos_inc, p0, p1)
                out[f] += share * power_const * s0 * area[f] / (r2 * r2)
