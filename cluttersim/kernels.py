"""Compiled kernels (numba). Arrays in, arrays out; no I/O, no Python objects.

Everything that runs per facet or per grid cell lives here. Orchestration
(windowing, culling set-up, progress, chunking) is in :mod:`cluttersim.simulate`
and :mod:`cluttersim.facets`. All kernels are compiled with ``cache=True`` so a
second run loads them from disk instead of recompiling.

Conventions
-----------
* Facets are stored tile by tile as structure-of-arrays, shape (3, nfacet):
  positions in float32 metres relative to their tile's centre (the tile
  centres are float64, relative to a local origin at the DEM window's centre),
  unit normals and edge vectors in float32. A range is therefore computed as
  |(tile centre − antenna) + offset| in float64 without losing precision.
* Delay bins: bin ``k`` of a trace covers two-way delays
  ``[bin0_s + k dt, bin0_s + (k + 1) dt)``.
* ``error_model="numpy"`` (no Python zero-division checks) and a small set of
  fast-math flags let LLVM vectorise the per-facet loops; results are still
  deterministic (same inputs, same bits, whatever the thread count: every
  output element is summed by one thread in a fixed order).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from . import scattering
from .constants import SPEED_OF_LIGHT_M_S

_JIT = dict(cache=True, nogil=True, error_model="numpy")
#: Fast-math in the hot loops (vectorisation of reductions, fused multiply-add,
#: reciprocals). Ranges stay float64; tests check delays to a fraction of a sample.
_FAST = True

_sigma0_constant = numba.njit(inline="always", **_JIT)(scattering.sigma0_constant)
_sigma0_lambert = numba.njit(inline="always", **_JIT)(scattering.sigma0_lambert)
_sigma0_cosine = numba.njit(inline="always", **_JIT)(scattering.sigma0_cosine)
_sigma0_hagfors = numba.njit(inline="always", **_JIT)(scattering.sigma0_hagfors)
_sigma0_gaussian = numba.njit(inline="always", **_JIT)(scattering.sigma0_gaussian)


@numba.njit(inline="always", **_JIT)
def sigma0_by_code(code, cos_inc, p0, p1):
    """σ0 of the law with numeric ``code`` (see :data:`cluttersim.scattering.LAWS`), one value."""
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


@numba.njit(inline="always", **_JIT)
def sigma0_factor(code, p0, p1):
    """The constant factor of a σ0 law that :func:`sigma0_apply32` leaves out (applied in float64
    with the radar equation's constants, so that no float32 buffer holds it): 0.5 C ρ for Hagfors'
    law, σ0 itself for the constant law, 1 for the others."""
    if code == 3:
        return 0.5 * p0 * p1
    if code == 0:
        return p0
    return 1.0


@numba.njit(inline="always", **_JIT)
def sigma0_apply32(code, cos_inc, sin2, p0, p1, q, out, n):
    """out[i] = q[i] σ0(cos_inc[i]) / :func:`sigma0_factor` for i < n, float32 buffers: Hagfors' law
    and the constant law in float32 (8 lanes on AVX2), the other laws in float64 per element.
    Hagfors' law is :func:`cluttersim.scattering.sigma0_hagfors` written with float32 constants and
    with sin²θ given (``sin2``, from a cross product): 1 − cos²θ in float32 loses sin²θ near nadir,
    where σ0 ∝ (cos⁴θ + C sin²θ)^(−3/2) changes fastest (C = 400: 6e-5 relative per 1e-7 of
    sin²θ). (cos⁴θ + C sin²θ) ≥ min(1, C/2), so the float32 quotient stays in range for any C
    above ~1e-20."""
    if code == 3:
        c = np.float32(p0)
        for i in range(n):
            cos2 = cos_inc[i] * cos_inc[i]
            v = cos2 * cos2 + c * sin2[i]
            out[i] = q[i] / (v * np.sqrt(v))
    elif code == 0:
        for i in range(n):
            out[i] = q[i]
    elif code == 1:
        for i in range(n):
            out[i] = q[i] * _sigma0_lambert(np.float64(cos_inc[i]), p0)
    elif code == 2:
        for i in range(n):
            out[i] = q[i] * _sigma0_cosine(np.float64(cos_inc[i]), p0, p1)
    else:
        for i in range(n):
            out[i] = q[i] * _sigma0_gaussian(np.float64(cos_inc[i]), p0, p1)


@numba.njit(inline="always", **_JIT)
def _facet_terms32(ux, uy, uz, inv_d, rel, xw, xf, normal, e_col, e_row, area, f, k_sub, wmax, spread, nsub, margin):
    """Pass 2 of :func:`accumulate_power` for facet ``f``, in float32: from its offset from the
    antenna v = c + rel[:, f] over the tile centre's distance d (``ux, uy, uz`` = c/d, ``inv_d`` = 1/d;
    |v|/d ≈ 1 to within the tile's size over d, so float32 keeps its direction and range to ~1e-7
    relative) and its position on the sub-bin grid (from the float64 range) as a whole number
    ``xw`` and fraction ``xf`` (both clamped into the row's margins): cos θ (at least 1e-6), sin²θ,
    q = A [front-facing and reaching the window] / ((r/d)⁴ a b), the first corner (clamped to
    [−margin, nsub]) and the widths a ≥ b of :func:`trapezoid_kinks` (times ``spread``: 0 puts all
    of the power in the sub-bin of the centre). Whole numbers below 2²⁴ are exact in float32, so the
    corners are those of the float64 position to within its last float32 rounding (~1e-7 sub-bin)."""
    half = np.float32(0.5)
    one = np.float32(1.0)
    zero = np.float32(0.0)
    vx = ux + rel[0, f] * inv_d
    vy = uy + rel[1, f] * inv_d
    vz = uz + rel[2, f] * inv_d
    r2n = vx * vx + vy * vy + vz * vz  # (r / d)²
    inv_r = one / np.sqrt(r2n)  # d / r
    nx = normal[0, f]
    ny = normal[1, f]
    nz = normal[2, f]
    cos_inc = -(vx * nx + vy * ny + vz * nz) * inv_r
    sx = vy * nz - vz * ny  # v × n: sin²θ to float32 precision at every angle
    sy = vz * nx - vx * nz
    sz = vx * ny - vy * nx
    sin2 = (sx * sx + sy * sy + sz * sz) * (inv_r * inv_r)
    wa = abs(vx * e_col[0, f] + vy * e_col[1, f] + vz * e_col[2, f]) * (inv_r * k_sub)
    wb = abs(vx * e_row[0, f] + vy * e_row[1, f] + vz * e_row[2, f]) * (inv_r * k_sub)
    wa = wa if wa < wmax else wmax  # nan too: the kinks stay inside the row whatever the input
    wb = wb if wb < wmax else wmax
    x = xw + xf
    h = half * (wa + wb)
    ok = (cos_inc > zero) & (x + h > zero) & (x - h < nsub)
    a = max(one, np.floor(max(wa, wb) * spread + half))
    b = max(one, np.floor(min(wa, wb) * spread + half))
    n1 = xw + np.floor(xf - half * (a + b) + one)
    n1 = min(max(n1, -margin), nsub)
    q = area[f] / (r2n * r2n * (a * b)) if ok else zero
    return max(cos_inc, np.float32(1e-6)), sin2, q, n1, a, b


@numba.njit(inline="always", **_JIT)
def pattern_gain_two_way(params, frame, ux, uy, uz):
    """Two-way antenna pattern G(û)² toward unit direction û, in a trace's frame (rows: along-track,
    right, down). ``params`` = (code, dipole axis row, along beamwidth rad, across beamwidth rad,
    dipole peak directivity); see :mod:`cluttersim.antenna` for the formulas."""
    code = params[0]
    if code == 1.0:
        ax = int(params[1])
        c = ux * frame[ax, 0] + uy * frame[ax, 1] + uz * frame[ax, 2]
        s2 = max(1.0 - c * c, 1e-300)
        g = params[4] * math.cos(0.5 * math.pi * c) ** 2 / s2
        return g * g
    if code == 2.0:
        pa = ux * frame[0, 0] + uy * frame[0, 1] + uz * frame[0, 2]
        pc = ux * frame[1, 0] + uy * frame[1, 1] + uz * frame[1, 2]
        pd = ux * frame[2, 0] + uy * frame[2, 1] + uz * frame[2, 2]
        ta = math.atan2(pa, pd) / params[2]
        tc = math.atan2(pc, pd) / params[3]
        g = math.exp(-4.0 * math.log(2.0) * (ta * ta + tc * tc))
        return g * g
    return 1.0


@numba.njit(inline="always", **_JIT)
def direction_weight(params, frame, vx, vy, vz, inv_r):
    """Weight of a facet at offset v from the antenna: the two-way antenna pattern
    (:func:`pattern_gain_two_way`, params[0:5]) times the along-track processing weight
    (params[5:8] = aperture code, aperture length (code 3: the resolution δ; code 1: table steps
    per unit u), wavelength, then for code 1 the unfocused response table; :mod:`cluttersim.aperture`)."""
    ux = vx * inv_r
    uy = vy * inv_r
    uz = vz * inv_r
    w = pattern_gain_two_way(params, frame, ux, uy, uz)
    code = params[5]
    if code != 0.0:
        y = vx * frame[0, 0] + vy * frame[0, 1] + vz * frame[0, 2]  # along-track offset, m
        r = 1.0 / inv_r
        if code == 1.0:  # unfocused: the tabulated response of an unphased sum in u = |y|/√(λR)
            u = abs(y) / math.sqrt(params[7] * r)
            x = u * params[6]
            n_tab = params.shape[0] - 8
            if x < n_tab - 1:
                k = int(x)
                f = x - k
                w *= (1.0 - f) * params[8 + k] + f * params[9 + k]
            else:  # far field: sinc²(2u)
                sx = math.sin(2.0 * math.pi * u) / (2.0 * math.pi * u)
                w *= sx * sx
        else:
            if code == 2.0:
                x = math.pi * y * 2.0 * params[6] / (params[7] * r)  # π y / δ, δ = λR/(2L)
            else:
                x = math.pi * y / params[6]  # code 3: δ = v/B_D, the same at every range
            if x != 0.0:
                sx = math.sin(x) / x
                w *= sx * sx
    return w


@numba.njit(inline="always", **_JIT)
def _bilinear(heights, r, c):
    ny, nx = heights.shape
    r = min(max(r, 0.0), ny - 1.0)
    c = min(max(c, 0.0), nx - 1.0)
    r0 = min(int(r), ny - 2) if ny > 1 else 0
    c0 = min(int(c), nx - 2) if nx > 1 else 0
    fr = r - r0
    fc = c - c0
    r1 = min(r0 + 1, ny - 1)
    c1 = min(c0 + 1, nx - 1)
    return ((1 - fr) * ((1 - fc) * heights[r0, c0] + fc * heights[r0, c1])
            + fr * ((1 - fc) * heights[r1, c0] + fc * heights[r1, c1]))  # fmt: skip


@numba.njit(**_JIT)
def hidden_from_antenna(heights, row, col, h_facet, row_a, col_a, h_ant, h_max, sag_row=0.0, sag_col=0.0):
    """True when terrain hides a facet from the antenna (line-of-sight shadowing).

    Marches one cell at a time along the ground path, in the DEM grid, from the
    facet's cell (row, col; height ``h_facet``) toward the antenna's nadir
    (row_a, col_a; antenna height ``h_ant``), comparing the bilinear terrain
    height with the height of the line of sight; stops as soon as the line
    rises above the highest terrain (``h_max``). Heights are above the
    reference surface. The line of sight is the straight chord between the
    two points, whose height above the curved body at ground distance x from
    the facet (out of D) is the linear interpolation lowered by the sagitta
    x (D − x) / (2 Rp) (second order in D/Rp; common practice, e.g. the
    earth-curvature correction of line-of-sight profiles). ``sag_row`` and
    ``sag_col`` are Δy²/(2Rp) and Δx²/(2Rp) for the grid's row and column
    spacings Δy, Δx (m), so D²/(2Rp) = dr² sag_row + dc² sag_col; 0 for the
    flat approximation.
    """
    dr = row_a - row
    dc = col_a - col
    dist = math.sqrt(dr * dr + dc * dc)
    if dist < 1.0:
        return False
    sag = dr * dr * sag_row + dc * dc * sag_col  # D² / (2 Rp)
    k = 1.0
    while k < dist:
        frac = k / dist
        h_ray = h_facet + (h_ant - h_facet) * frac - sag * frac * (1.0 - frac)
        # above every peak and climbing (the curved ray's slope grows along the march): visible
        if h_ray > h_max and (h_ant - h_facet) >= sag * (1.0 - 2.0 * frac):
            return False
        if _bilinear(heights, row + dr * frac, col + dc * frac) > h_ray:
            return True
        k += 1.0
    return False


# --------------------------------------------------------------------------- facets


@numba.njit(parallel=True, **_JIT)
def grid_to_ecef(cos_lat, sin_lat, cos_lon, sin_lon, h_m, a_m, e2, origin, out):
    """Cell-centre positions (ny, nx, 3) relative to ``origin`` from the cosines and sines of the
    cells' geodetic latitude and longitude (2-D, or broadcast views of 1-D ones for a geographic
    grid) and their heights: X = (N + h) cos φ cos λ, Y = (N + h) cos φ sin λ,
    Z = (N (1 − e²) + h) sin φ, N = a / √(1 − e² sin²φ) (as :func:`geodetic_to_ecef`)."""
    ny, nx = h_m.shape
    for i in numba.prange(ny):
        for j in range(nx):
            s = sin_lat[i, j]
            c = cos_lat[i, j]
            n = a_m / math.sqrt(1.0 - e2 * s * s)
            h = h_m[i, j]
            out[i, j, 0] = (n + h) * c * cos_lon[i, j] - origin[0]
            out[i, j, 1] = (n + h) * c * sin_lon[i, j] - origin[1]
            out[i, j, 2] = (n * (1.0 - e2) + h) * s - origin[2]


@numba.njit(parallel=True, **_JIT)
def build_tiled_facets(grid, valid, cos_lat, sin_lat, cos_lon, sin_lon, tile, tile_offsets, rel, normal, e_col, e_row,
                       area, cell, tile_centre, tile_radius, tile_extent, origin, tile_slab):  # fmt: skip
    """Facet geometry from a grid of cell-centre positions, written tile by tile.

    For cell (i, j) the edge vectors are the central differences
    ``e_col = (P[i, j+1] − P[i, j−1]) / 2`` and ``e_row = (P[i+1, j] − P[i−1, j]) / 2``
    (one-sided at the window border). The facet is the parallelogram they span:
    true area ``|e_col × e_row|`` on the curved, sloping surface, and unit normal
    along ``e_col × e_row`` turned to point away from the body (the local
    vertical (cos φ cos λ, cos φ sin λ, sin φ) from the cells' geodetic latitude φ and
    longitude λ, given as cosines and sines as in :func:`grid_to_ecef`). Valid cells of tile ``t`` go to
    columns ``tile_offsets[t]:tile_offsets[t+1]`` of the (3, nfacet) arrays,
    positions relative to the tile's centre (the mean of its cells). Each tile
    also gets a bounding-sphere radius and the largest facet half-extent, used
    to cull whole tiles per trace, and a slab: ``tile_slab[t] = (ux, uy, uz,
    horizontal radius, lowest, highest)`` — the facets' spread across and along
    the geocentric direction u of the tile centre, a tighter bound near nadir
    (:func:`slab_min_range`).
    """
    ny, nx = valid.shape
    nty = (ny + tile - 1) // tile
    ntx = (nx + tile - 1) // tile
    for t in numba.prange(nty * ntx):
        ti = t // ntx
        tj = t % ntx
        i_lo, i_hi = ti * tile, min((ti + 1) * tile, ny)
        j_lo, j_hi = tj * tile, min((tj + 1) * tile, nx)
        n = tile_offsets[t + 1] - tile_offsets[t]
        if n == 0:
            tile_radius[t] = -1.0
            continue
        cx = 0.0
        cy = 0.0
        cz = 0.0
        for i in range(i_lo, i_hi):
            for j in range(j_lo, j_hi):
                if valid[i, j]:
                    cx += grid[i, j, 0]
                    cy += grid[i, j, 1]
                    cz += grid[i, j, 2]
        cx /= n
        cy /= n
        cz /= n
        k = tile_offsets[t]
        r2max = 0.0
        ext = 0.0
        for i in range(i_lo, i_hi):
            i0 = max(i - 1, 0)
            i1 = min(i + 1, ny - 1)
            for j in range(j_lo, j_hi):
                if not valid[i, j]:
                    continue
                j0 = max(j - 1, 0)
                j1 = min(j + 1, nx - 1)
                fc = 1.0 / max(j1 - j0, 1)
                fr = 1.0 / max(i1 - i0, 1)
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
                ux = cos_lat[i, j] * cos_lon[i, j]
                uy = cos_lat[i, j] * sin_lon[i, j]
                uz = sin_lat[i, j]
                if nn > 0.0:
                    sgn = 1.0 if nxv * ux + nyv * uy + nzv * uz >= 0.0 else -1.0
                    normal[0, k] = sgn * nxv / nn
                    normal[1, k] = sgn * nyv / nn
                    normal[2, k] = sgn * nzv / nn
                else:
                    normal[0, k] = ux
                    normal[1, k] = uy
                    normal[2, k] = uz
                dx = grid[i, j, 0] - cx
                dy = grid[i, j, 1] - cy
                dz = grid[i, j, 2] - cz
                rel[0, k] = dx
                rel[1, k] = dy
                rel[2, k] = dz
                e_col[0, k] = ax
                e_col[1, k] = ay
                e_col[2, k] = az
                e_row[0, k] = bx
                e_row[1, k] = by
                e_row[2, k] = bz
                area[k] = nn
                cell[k] = i * nx + j
                r2max = max(r2max, dx * dx + dy * dy + dz * dz)
                ext = max(ext, 0.5 * (math.sqrt(ax * ax + ay * ay + az * az) + math.sqrt(bx * bx + by * by + bz * bz)))
                k += 1
        tile_centre[t, 0] = cx
        tile_centre[t, 1] = cy
        tile_centre[t, 2] = cz
        tile_radius[t] = math.sqrt(r2max) + ext
        tile_extent[t] = ext
        gx = origin[0] + cx
        gy = origin[1] + cy
        gz = origin[2] + cz
        gn = math.sqrt(gx * gx + gy * gy + gz * gz)
        ux = gx / gn
        uy = gy / gn
        uz = gz / gn
        hmax = 0.0
        zlo = np.inf
        zhi = -np.inf
        for q in range(tile_offsets[t], k):
            z = rel[0, q] * ux + rel[1, q] * uy + rel[2, q] * uz
            hx = rel[0, q] - z * ux
            hy = rel[1, q] - z * uy
            hz = rel[2, q] - z * uz
            hmax = max(hmax, math.sqrt(hx * hx + hy * hy + hz * hz))
            zlo = min(zlo, z)
            zhi = max(zhi, z)
        tile_slab[t, 0] = ux
        tile_slab[t, 1] = uy
        tile_slab[t, 2] = uz
        tile_slab[t, 3] = hmax + ext
        tile_slab[t, 4] = zlo - ext
        tile_slab[t, 5] = zhi + ext


@numba.njit(inline="always", **_JIT)
def slab_min_range(cx, cy, cz, slab):
    """Lower bound of the distance from a point to a tile's facets: the tile centre is at
    (cx, cy, cz) from the point; ``slab`` = (u, horizontal radius, lowest, highest) along u."""
    z = -(cx * slab[0] + cy * slab[1] + cz * slab[2])  # the point's height above the centre along u
    hx = -cx - z * slab[0]
    hy = -cy - z * slab[1]
    hz = -cz - z * slab[2]
    dh = max(math.sqrt(hx * hx + hy * hy + hz * hz) - slab[3], 0.0)
    dz = max(z - slab[5], slab[4] - z, 0.0)
    return math.sqrt(dh * dh + dz * dz)


# --------------------------------------------------------------------------- facet delay distribution


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


#: Delay spreading of :func:`accumulate_power`: the trapezoid of each facet's range extent (the
#: model), or the whole power in the bin of the facet's centre delay (a benchmark-only variant that
#: bounds the cost of the spreading; not the model: a facet spans several samples off nadir).
SPREAD_TRAPEZOID, SPREAD_CENTRE = 0, 1


@numba.njit(inline="always", **_JIT)
def trapezoid_kinks(x, wa, wb):
    """Corners of a facet's trapezoidal delay distribution on the sub-bin grid.

    The facet's range extent projects its two edges onto the line of sight
    (widths ``wa``, ``wb``, centre ``x``, all in sub-bins): a trapezoid, the
    convolution of two boxes. Its widths are rounded to whole sub-bins (at
    least one), A ≥ B, and its first corner to ``n1 = floor(x − (A+B)/2 + 1)``;
    power p is then written as four slope changes, +w at n1, −w at n1+B and
    n1+A, +w at n1+A+B with w = p / (A B), into a second-difference row
    (:func:`integrate_row`): constant cost whatever the facet's width, and
    exactly p once integrated. Once integrated the power fills sub-bins n1 to
    n1+A+B−2, the discrete convolution of the two boxes, centred at position
    n1 + (A+B)/2 − 1/2 (sub-bin j covers [j, j+1)), which the floor places at x
    on average (``+ 1``, not ``+ 1/2``: that put every facet half a sub-bin
    early). With A = B = 1 all of p goes to sub-bin floor(x). Returns (n1, A, B).
    """
    a = max(1, int(max(wa, wb) + 0.5))
    b = max(1, int(min(wa, wb) + 0.5))
    return math.floor(x - 0.5 * (a + b) + 1.0), a, b


@numba.njit(**_JIT)
def integrate_row(row, start, oversample, out_row):
    """out_row[k] += Σ over the ``oversample`` sub-bins of bin k of the twice-summed second-difference
    ``row``, whose sub-bin 0 is at index ``start`` (kinks before it, in the margin, are summed in
    first; kinks past the last bin are never read). Not fast-math: the same bits wherever it is
    called (the total with and without the source record)."""
    s1 = 0.0
    s2 = 0.0
    for j in range(start):
        s1 += row[j]
        s2 += s1
    for k in range(out_row.shape[0]):
        acc = 0.0
        for j in range(start + k * oversample, start + (k + 1) * oversample):
            s1 += row[j]
            s2 += s1
            acc += s2
        if acc > 0.0:
            out_row[k] += acc


@numba.njit(inline="always", **_JIT)
def _deposit_kinks(dd, k, a, b, w):
    """A trapezoid's four slope changes into a second-difference row: +w at k and k + a + b,
    −w at k + a and k + b (sub-bins; :func:`trapezoid_kinks`)."""
    dd[k] += w
    dd[k + b] -= w
    dd[k + a] -= w
    dd[k + a + b] += w


@numba.njit(inline="always", **_JIT)
def _keep_densest(best_val, best_idx, k, density, f):
    """Bin ``k`` keeps facet ``f`` if its power density is the largest it has seen (an update that is
    rarely taken once a bin has seen a few facets, so the branch is predictable)."""
    if density > best_val[k]:
        best_val[k] = density
        best_idx[k] = f


@numba.njit(inline="always", **_JIT)
def _tile_reaches_window(tile_centre, tile_slab, m, ant, t, rad, bin0_s, nb, dt_s):
    """Offset (x, y, z) of tile ``m``'s centre from antenna ``t``, and whether the tile can reach
    the range interval of that trace's window of ``nb`` bins.

    Two conservative bounds on the range of the tile's facets (their extents included): its
    bounding sphere (radius ``rad``), then its slab (``tile_slab[m]``: a cylinder about the
    geocentric vertical u of the tile centre, of horizontal radius ρ and vertical extent
    [z_lo, z_hi]). For an antenna at offset −d from the centre, the cylinder's points lie at
    vertical distances |d·u + z|, z ∈ [z_lo, z_hi], and horizontal distances within ρ of
    |d − (d·u)u|; the range bounds combine the extremes of both. Far from nadir the cylinder
    is several times tighter than the sphere (a line of sight at grazing angle α sees the
    tile's ρ as about ρ sin α of range), so fewer tiles are evaluated for nothing.
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    cx = tile_centre[m, 0] - ant[t, 0]
    cy = tile_centre[m, 1] - ant[t, 1]
    cz = tile_centre[m, 2] - ant[t, 2]
    d2 = cx * cx + cy * cy + cz * cz
    d = math.sqrt(d2)
    r_lo = bin0_s[t] * half_c
    r_hi = r_lo + nb * dt_s * half_c
    if (d - rad > r_hi) | (d + rad < r_lo):
        return cx, cy, cz, False
    dz = cx * tile_slab[m, 0] + cy * tile_slab[m, 1] + cz * tile_slab[m, 2]
    h = math.sqrt(max(d2 - dz * dz, 0.0))
    rho = tile_slab[m, 3]
    z_lo = dz + tile_slab[m, 4]
    z_hi = dz + tile_slab[m, 5]
    v_max = max(abs(z_lo), abs(z_hi))
    v_min = 0.0 if (z_lo <= 0.0) & (z_hi >= 0.0) else min(abs(z_lo), abs(z_hi))
    h_min = max(h - rho, 0.0)
    h_max = h + rho
    near = math.sqrt(v_min * v_min + h_min * h_min)
    far = math.sqrt(v_max * v_max + h_max * h_max)
    return cx, cy, cz, (near <= r_hi) & (far >= r_lo)


@numba.njit(**_JIT)
def tiles_in_range_order(ant, bin0_s, nb, dt_s, ta, nbt, tile_centre, tile_radius, tile_slab):
    """Tiles whose bounding sphere reaches the window of at least one of traces ta..ta+nbt−1,
    sorted by distance from the block's middle trace: the kernel then sweeps each trace's delay
    row from near to far, so the part of the row being written stays in cache."""
    ntile = tile_radius.shape[0]
    key = np.empty(ntile)
    cand = np.empty(ntile, dtype=np.int64)
    nc = 0
    tm = ta + nbt // 2
    for m in range(ntile):
        rad = tile_radius[m]
        if rad < 0.0:
            continue
        seen = False
        for t in range(ta, ta + nbt):
            seen |= _tile_reaches_window(tile_centre, tile_slab, m, ant, t, rad, bin0_s, nb, dt_s)[3]
        if seen:
            cx = tile_centre[m, 0] - ant[tm, 0]
            cy = tile_centre[m, 1] - ant[tm, 1]
            cz = tile_centre[m, 2] - ant[tm, 2]
            key[nc] = cx * cx + cy * cy + cz * cz
            cand[nc] = m
            nc += 1
    return cand[np.argsort(key[:nc], kind="mergesort")]


# --------------------------------------------------------------------------- per-trace kernels


@numba.njit(parallel=True, **_JIT)
def earliest_range(ant, bound, tile_centre, tile_radius, tile_slab, tile_offsets, rel, normal, e_col, e_row, out):
    """Per trace, the smallest range (m) from the antenna to any front-facing facet's near edge.

    ``bound[t]`` is any range known to be at least the answer (e.g. a little
    more than the range to the ground below the antenna; inf if unknown):
    tiles whose slab (:func:`slab_min_range`) lies entirely beyond the best
    range found so far are skipped, so only the tiles near the closest ground
    are read.
    """
    for t in numba.prange(ant.shape[0]):
        out[t] = _earliest_one(ant[t], bound[t], tile_centre, tile_radius, tile_slab, tile_offsets, rel, normal, e_col, e_row)
        if out[t] >= bound[t]:  # the bound was too tight (steep ground under the antenna): search everything
            out[t] = _earliest_one(ant[t], np.inf, tile_centre, tile_radius, tile_slab, tile_offsets, rel, normal, e_col,
                                   e_row)  # fmt: skip


@numba.njit(fastmath={"nnan", "nsz"}, **_JIT)
def _earliest_one(a, best, tile_centre, tile_radius, tile_slab, tile_offsets, rel, normal, e_col, e_row):
    ntile = tile_radius.shape[0]
    tile_min = np.empty(ntile)  # every tile's slab bound first, in one loop that vectorises
    for m in range(ntile):
        tile_min[m] = slab_min_range(tile_centre[m, 0] - a[0], tile_centre[m, 1] - a[1], tile_centre[m, 2] - a[2],
                                 tile_slab[m])  # fmt: skip
    cand = np.empty(ntile, dtype=np.int64)
    nc = 0
    for m in range(ntile):
        if tile_radius[m] >= 0.0 and tile_min[m] < best:
            cand[nc] = m
            nc += 1
    cand = cand[:nc][np.argsort(tile_min[cand[:nc]], kind="mergesort")]
    found = np.inf
    for q in range(nc):  # nearest tiles first: once a tile's bound is beyond the best found, so are the rest
        m = cand[q]
        if tile_min[m] >= found:
            break
        cx = tile_centre[m, 0] - a[0]
        cy = tile_centre[m, 1] - a[1]
        cz = tile_centre[m, 2] - a[2]
        f0 = np.uint64(tile_offsets[m])
        tile_found = found
        for i in range(tile_offsets[m + 1] - tile_offsets[m]):  # branch-free: a min-reduction that vectorises
            f = f0 + np.uint64(i)
            vx = cx + rel[0, f]
            vy = cy + rel[1, f]
            vz = cz + rel[2, f]
            r = math.sqrt(vx * vx + vy * vy + vz * vz)
            front = vx * normal[0, f] + vy * normal[1, f] + vz * normal[2, f] < 0.0
            span = abs(vx * e_col[0, f] + vy * e_col[1, f] + vz * e_col[2, f]) + abs(
                vx * e_row[0, f] + vy * e_row[1, f] + vz * e_row[2, f]
            )
            near = r - 0.5 * span / r
            tile_found = min(tile_found, near if front else found)
        found = tile_found
    return found


#: Side codes of the source record: within the nadir strip, left or right of the track.
SIDE_NADIR, SIDE_LEFT, SIDE_RIGHT = 0, 1, 2


@numba.njit(inline="always", **_JIT)
def integrate_two_rows(dd, r0, r1, start, oversample, out0, out1):
    """:func:`integrate_row` of the second-difference rows at ``dd[r0:]`` and ``dd[r1:]`` together
    (two independent running sums per sub-bin) into ``out0`` and ``out1``."""
    a1 = 0.0
    a2 = 0.0
    b1 = 0.0
    b2 = 0.0
    for j in range(start):
        a1 += dd[r0 + j]
        a2 += a1
        b1 += dd[r1 + j]
        b2 += b1
    for k in range(out0.shape[0]):
        acc_a = 0.0
        acc_b = 0.0
        for j in range(start + k * oversample, start + (k + 1) * oversample):
            a1 += dd[r0 + j]
            a2 += a1
            acc_a += a2
            b1 += dd[r1 + j]
            b2 += b1
            acc_b += b2
        if acc_a > 0.0:
            out0[k] += acc_a
        if acc_b > 0.0:
            out1[k] += acc_b


@numba.njit(parallel=True, fastmath=_FAST, **_JIT)
def accumulate_power(ant, right_unit, strip_half_m, bin0_s, dt_s, oversample, traces_per_block,
                     tile_centre, tile_radius, tile_slab, tile_offsets, max_tile, max_extent_m, rel, normal, e_col, e_row, area,
                     law_code, p0, p1, power_const, frames, antenna, shadow_heights, facet_cell, nadir_rc, ant_h,
                     h_max, spreading, out, best_facet):  # fmt: skip
    """Received power per delay bin from every facet, for blocks of traces.

    For each facet at range R with local incidence θ (cos θ = −û·n̂) the radar
    equation (e.g. Skolnik, *Introduction to Radar Systems*, 3rd ed., eq. 1.7)

        P = Pt G² λ² σ0(θ) A / ((4π)³ R⁴) = power_const · σ0(θ) A / R⁴

    (times the two-way antenna pattern and the along-track processing weight,
    :func:`direction_weight`, with ``frames[t]`` the trace's along/right/down
    frame and ``antenna`` their parameters; zero when terrain hides the facet
    and ``shadow_heights`` is the DEM window, :func:`hidden_from_antenna`) is
    spread over the delay its range extent covers (:func:`trapezoid_kinks` on a
    grid of ``oversample`` sub-bins per bin; with ``spreading`` =
    :data:`SPREAD_CENTRE`, a benchmark-only variant, all of it goes to the bin of
    the facet's centre delay). Facets seen from behind contribute nothing.
    Tiles that cannot reach a trace's window (bounding sphere, then slab:
    :func:`_tile_reaches_window`) are skipped whole.
    ``max_extent_m`` bounds every facet's half-extent (|e_col| + |e_row|)/2: it
    sizes the margins of the delay rows so that no deposit needs a bounds test.

    Work is split into blocks of ``traces_per_block`` consecutive traces, one
    block per thread; within a block each tile's facets are read once and used
    for every trace of the block while they sit in cache, tiles in order of
    range (:func:`tiles_in_range_order`). Per (tile, trace) vectorised passes
    fill small buffers, then a branch-free scalar pass adds the four slope
    changes per facet:

    1. float64 (4 lanes on AVX2): the range and the facet's position on the
       sub-bin grid, stored as a whole number and a fraction in float32 — the
       delay keeps float64 precision (the fraction to ~1e-7 sub-bin);
    2. float32 (8 lanes; :func:`_facet_terms32`): direction and range relative
       to the tile centre's distance d (|v|/d ≈ 1, so float32 keeps ~1e-7),
       cos θ, sin²θ (from a cross product: 1 − cos²θ would lose it near
       nadir), the widths, corners (whole numbers below 2²⁴: exact) and
       q = area / ((r/d)⁴ a b) with a, b the rounded widths; then σ0 without its
       constant factor (:func:`sigma0_apply32`) and, with the source record, the
       side row (rel · right against thresholds computed per tile in float64: to
       a few mm), centre bin and density weight;
    3. scalar: p = (power_const · factor / d⁴) · q · σ0 / factor in float64
       (:func:`sigma0_factor`) into the rows.

    Integers stay in float32/int32 lanes: AVX2 has packed float → int32
    conversion but none to or from int64, which it scalarised. Against the same
    discretisation in float64 (tests/test_kernel_variants.py): totals per trace
    to ~1e-7, bins to 1e-4 of the peak (a corner within ~1e-6 sub-bin of a
    rounding edge may move by one sub-bin), the median bin to ~3e-8.

    ``out`` has shape (ntrace, nside, nbins) and is accumulated into; row 0 is
    the total power. With ``nside == 3`` (the source record) a facet is in the
    nadir strip (:data:`SIDE_NADIR`) when its cross-track offset
    ``(P − A)·right_unit[t]`` is within ``strip_half_m[t]``, else left or right;
    rows :data:`SIDE_LEFT` and :data:`SIDE_RIGHT` of ``out`` receive the power
    of each side on the same sub-bin grid as the total: each facet is written
    once, to the delay row of its side, and the total is the sum of the three
    rows once integrated (equal to the total without the source record to
    rounding). ``best_facet`` (ntrace, nbins) receives,
    per bin, the facet centred in that bin with the largest power density
    (−1 where none). Returns the number of facet evaluations (front-facing
    facets whose delay reaches the window).
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    nt = ant.shape[0]
    shadowing = shadow_heights.shape[0] > 1
    grid_nx = shadow_heights.shape[1]
    nside = out.shape[1]
    nb = out.shape[2]
    attribute = nside == 3
    nrows = 3 if attribute else 1  # delay rows per trace
    centre = spreading == SPREAD_CENTRE
    ov = 1 if centre else oversample  # sub-bins per bin of the rows
    spread_on = 0.0 if centre else 1.0
    ovf = 1.0 * ov
    inv_ov = 1.0 / ov
    nsub = nb * ov
    inv_sub_m = ov / (half_c * dt_s)
    # a facet reaching the window has every corner within 2 half-extents (+ rounding) of it; the
    # margin is capped (a facet wider than 4 windows is clipped to that width) so that it is an int
    # for any input, and every facet's widths are clipped to it below: no index leaves the rows
    ext_sub = 2.0 * max_extent_m * inv_sub_m
    cap_sub = 4.0 * nsub + 64.0
    if not ext_sub < cap_sub:  # also for nan
        ext_sub = cap_sub
    margin = int(ext_sub) + 8
    wmax = 0.5 * (margin - 8)
    nrow = nsub + 2 * margin + 2
    if nrow >= 1 << 24:
        raise ValueError("accumulate_power: more than 2**24 sub-bins per delay row (samples x oversample)")
    power_law = power_const * sigma0_factor(law_code, p0, p1)  # float64: no float32 buffer holds it
    # float32 constants of pass 2 (a float64 operand would make it float64, 4 lanes on AVX2)
    wmax32 = np.float32(wmax)
    spread32 = np.float32(spread_on)
    nsub32 = np.float32(nsub)
    margin32 = np.float32(margin)
    ovf32 = np.float32(ovf)
    inv_ov32 = np.float32(inv_ov)
    nb32 = np.float32(nb)
    half32 = np.float32(0.5)
    one32 = np.float32(1.0)
    zero32 = np.float32(0.0)
    nblk = (nt + traces_per_block - 1) // traces_per_block
    counts = np.zeros(nblk, dtype=np.int64)
    for blk in numba.prange(nblk):
        ta = blk * traces_per_block
        nbt = min(ta + traces_per_block, nt) - ta
        order = tiles_in_range_order(ant, bin0_s, nb, dt_s, ta, nbt, tile_centre, tile_radius, tile_slab)
        dd = np.zeros(nbt * nrows * nrow)  # second differences on the sub-bin grid, rows by trace (and side)
        best_val = np.zeros((nbt, nb + 1 if attribute else 0))  # per bin, + 1 discarded bin
        best_idx = np.full((nbt, nb + 1 if attribute else 0), -1, dtype=np.int64)
        # pass 1 (float64, the range): per facet its position on the sub-bin grid, clamped into the row's
        # margins, as a whole number and a fraction (float32; read by pass 2)
        gp = np.empty(max_tile, dtype=np.float32)
        gq = np.empty(max_tile, dtype=np.float32)
        # pass 2 (float32): cos θ, power / (σ0 · scale), the corners (first + margin, widths), centre bin,
        # side row and density weight; then p / scale with σ0 (sigma0_apply32)
        bc = np.empty(max_tile, dtype=np.float32)
        bw = np.empty(max_tile, dtype=np.float32)
        bq = np.empty(max_tile, dtype=np.float32)
        bp = np.empty(max_tile, dtype=np.float32)
        bn = np.zeros(max_tile, dtype=np.int32)
        ba = np.zeros(max_tile, dtype=np.int32)
        bb = np.zeros(max_tile, dtype=np.int32)
        bd = np.zeros(max_tile, dtype=np.float32)
        bk = np.zeros(max_tile, dtype=np.int32)
        marginf = 1.0 * margin
        hi_f = 1.0 * (nsub + margin)
        n_eval = 0
        for q in range(order.shape[0]):
            m = order[q]
            rad = tile_radius[m]
            f0 = tile_offsets[m]
            n = tile_offsets[m + 1] - f0
            f0u = np.uint64(f0)
            for tt in range(nbt):
                t = ta + tt
                cx, cy, cz, reaches = _tile_reaches_window(tile_centre, tile_slab, m, ant, t, rad, bin0_s, nb, dt_s)
                if not reaches:
                    continue
                x0 = bin0_s[t] * half_c * inv_sub_m
                rowbase = np.uint64(tt * nrows * nrow)  # the trace's first row; bn counts from it
                inv_d = 1.0 / math.sqrt(cx * cx + cy * cy + cz * cz)
                inv_d2 = inv_d * inv_d
                scale = power_law * inv_d2 * inv_d2  # p = scale · q · σ0 / factor, q = area [ok] / ((r/d)⁴ a b)
                for i in range(n):
                    f = f0u + np.uint64(i)  # unsigned: no negative-index wraparound, so LLVM vectorises
                    vx = cx + rel[0, f]
                    vy = cy + rel[1, f]
                    vz = cz + rel[2, f]
                    r2 = vx * vx + vy * vy + vz * vz
                    x = math.sqrt(r2) * inv_sub_m - x0
                    # clamped into the row's margins: only facets outside the window (p = 0) move
                    # (written so that a nan position lands on the margin too)
                    xc = x if x > -marginf else -marginf
                    xc = xc if xc < hi_f else hi_f
                    xw = np.floor(xc)
                    gp[i] = np.float32(xw)  # a whole number below 2²⁴: exact in float32
                    gq[i] = np.float32(xc - xw)
                k_sub = np.float32(inv_sub_m)
                ux = np.float32(cx * inv_d)
                uy = np.float32(cy * inv_d)
                uz = np.float32(cz * inv_d)
                inv_d32 = np.float32(inv_d)
                for i in range(n):  # vectorised (8 lanes on AVX2): the facet terms
                    f = f0u + np.uint64(i)
                    cs, s2, qq, n1, a, b = _facet_terms32(ux, uy, uz, inv_d32, rel, gp[i], gq[i], normal, e_col, e_row,
                                                          area, f, k_sub, wmax32, spread32, nsub32, margin32)  # fmt: skip
                    bc[i] = cs
                    bw[i] = s2
                    bq[i] = qq
                    bn[i] = np.int32(n1 + margin32)
                    ba[i] = np.int32(a)
                    bb[i] = np.int32(b)
                if attribute:
                    # side thresholds on rel · right (float32, within mm): cross = (c + rel) · right
                    rx = right_unit[t, 0]
                    ry = right_unit[t, 1]
                    rz = right_unit[t, 2]
                    c_cross = cx * rx + cy * ry + cz * rz
                    s_hi = np.float32(strip_half_m[t] - c_cross)
                    s_lo = np.float32(-strip_half_m[t] - c_cross)
                    rx32 = np.float32(rx)
                    ry32 = np.float32(ry)
                    rz32 = np.float32(rz)
                    nrow32 = np.int32(nrow)
                    for i in range(n):  # vectorised (8 lanes on AVX2): side, centre bin and density weight
                        f = f0u + np.uint64(i)
                        cross = rel[0, f] * rx32 + rel[1, f] * ry32 + rel[2, f] * rz32
                        # the row of the facet's side (left 0, right 1, nadir strip 2), added to its corner
                        side = nrow32 if cross > s_hi else (np.int32(0) if cross < s_lo else np.int32(2) * nrow32)
                        nm = bn[i]
                        bn[i] = nm + side
                        # the facet's centre from its trapezoid (first corner + (A+B)/2 − 1/2 sub-bins:
                        # within half a sub-bin of its centre delay, :func:`trapezoid_kinks`); its bin,
                        # floor(j / ov) for the sub-bin j = int(x) (int() truncates toward 0), written
                        # (j + 1/2) / ov so that it needs no division; nb when outside (whole and half
                        # numbers below 2²⁴: exact in float32)
                        a = np.float32(ba[i])
                        b = np.float32(bb[i])
                        xk = (np.float32(nm) - margin32) + half32 * (a + b - one32)
                        k = np.floor((np.trunc(xk) + half32) * inv_ov32)
                        bk[i] = np.int32(k) if (k >= zero32) & (k < nb32) else np.int32(nb)
                        # density: power per sample of delay extent, p / max(A / ov, 1) with the extent A
                        # (the wider width, rounded); p / (A B) is deposited, so the weight is A B / max(A / ov, 1)
                        bd[i] = b * min(a, ovf32)
                sigma0_apply32(law_code, bc, bw, p0, p1, bq, bp, n)
                if antenna[0] != 0.0 or antenna[5] != 0.0:  # an antenna pattern or along-track processing
                    for i in range(n):
                        f = f0u + np.uint64(i)
                        vx = cx + rel[0, f]
                        vy = cy + rel[1, f]
                        vz = cz + rel[2, f]
                        inv_r = 1.0 / math.sqrt(vx * vx + vy * vy + vz * vz)
                        bp[i] *= direction_weight(antenna, frames[t], vx, vy, vz, inv_r)
                if shadowing:
                    for i in range(n):
                        if bp[i] > 0.0:
                            cell = facet_cell[f0 + i]
                            rr = cell // grid_nx
                            cc = cell - rr * grid_nx
                            if hidden_from_antenna(shadow_heights, float(rr), float(cc), shadow_heights[rr, cc],
                                                   nadir_rc[t, 0], nadir_rc[t, 1], ant_h[t], h_max,
                                                   nadir_rc[t, 2], nadir_rc[t, 3]):  # fmt: skip
                                bp[i] = 0.0
                n_tile = 0
                for i in range(n):  # vectorised: the evaluations (facets with power)
                    n_tile += bp[i] != zero32
                n_eval += n_tile
                if attribute:
                    bv = best_val[tt]
                    bf = best_idx[tt]
                    # one scalar pass: the deposit into the facet's side row and the densest facet per bin
                    if centre:
                        for i in range(n):
                            p = scale * bp[i]
                            dd[rowbase + np.uint64(bn[i])] += p
                            _keep_densest(bv, bf, np.uint64(bk[i]), p * bd[i], f0 + i)
                    else:
                        for i in range(n):
                            p = scale * bp[i]
                            _deposit_kinks(dd, rowbase + np.uint64(bn[i]), np.uint64(ba[i]), np.uint64(bb[i]), p)
                            _keep_densest(bv, bf, np.uint64(bk[i]), p * bd[i], f0 + i)
                elif centre:
                    for i in range(n):
                        dd[rowbase + np.uint64(bn[i])] += scale * bp[i]
                else:
                    for i in range(n):
                        _deposit_kinks(dd, rowbase + np.uint64(bn[i]), np.uint64(ba[i]), np.uint64(bb[i]), scale * bp[i])
        side_bins = np.zeros((3, nb if attribute else 0))  # left, right, nadir strip of one trace
        for tt in range(nbt):
            t = ta + tt
            r0 = tt * nrows * nrow
            if not attribute:
                if centre:
                    for k in range(nb):
                        v = dd[r0 + margin + k]
                        if v > 0.0:
                            out[t, 0, k] += v
                else:
                    integrate_row(dd[r0 : r0 + nrow], margin, oversample, out[t, 0])
            else:
                side_bins[:] = 0.0
                if centre:
                    for j in range(3):
                        for k in range(nb):
                            side_bins[j, k] = max(dd[r0 + j * nrow + margin + k], 0.0)
                else:
                    integrate_row(dd[r0 : r0 + nrow], margin, oversample, side_bins[0])
                    integrate_two_rows(dd, r0 + nrow, r0 + 2 * nrow, margin, oversample, side_bins[1], side_bins[2])
                for k in range(nb):
                    out[t, 0, k] += side_bins[0, k] + side_bins[1, k] + side_bins[2, k]
                    out[t, SIDE_LEFT, k] += side_bins[0, k]
                    out[t, SIDE_RIGHT, k] += side_bins[1, k]
            if attribute:
                for k in range(nb):
                    if best_idx[tt, k] >= 0:
                        best_facet[t, k] = best_idx[tt, k]
        counts[blk] = n_eval
    return counts.sum()


@numba.njit(fastmath=_FAST, **_JIT)
def convolve_rows(binned, weights, first, out):
    """Discrete convolution of each row with ``weights`` (odd length 2h+1, centred), zero outside
    the row, cropped: out[t, s] = Σ_k weights[k] · binned[t, first + s + h − k] (the same as
    ``scipy.ndimage.convolve1d(binned, weights, mode="constant")[:, first:first + nsamples]``,
    about 4× faster). Serial: a chunk of traces takes about a millisecond, less than waking threads."""
    n = weights.shape[0]
    h = n // 2
    nb = binned.shape[1]
    ns = out.shape[1]
    for t in range(binned.shape[0]):
        row = out[t]
        row[:] = 0.0
        for k in range(n - 1, -1, -1):  # one shifted, scaled copy of the row per weight (vectorises)
            wk = weights[k]
            lo = first + h - k  # binned index of output sample 0 for this weight
            s0 = max(0, -lo)
            s1 = min(ns, nb - lo)
            src = binned[t, lo + s0 : lo + s1]
            dst = row[s0:s1]
            for i in range(s1 - s0):
                j = np.uint64(i)  # unsigned: no negative-index wraparound, so LLVM vectorises
                dst[j] += wk * src[j]


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


# --------------------------------------------------------------------------- coherent mode


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
