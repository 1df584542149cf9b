"""Facets tile by tile and what the per-trace kernels skip: building the tiled facets from the
ECEF grid, line-of-sight shadowing through the DEM, tile culling by bounding sphere and slab, the
tiles of a block of traces in range order, and the earliest range per trace.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from .common import _JIT


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
