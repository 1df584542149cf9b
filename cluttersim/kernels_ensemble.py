"""Numba kernel of the DEM-error Monte Carlo: K realisations of the DEM in one pass over the facets.

A realisation k of the DEM is the nominal DEM plus an error field e_k (heights, m, on the DEM
window's cells). Raising a cell by e moves its centre by e û along the cell's local vertical û
(the geodetic normal: :func:`cluttersim.kernels.grid_to_ecef` adds h along it), so facet f of
realisation k is, exactly in position and to first order in the variation of û between
neighbouring cells (≈ e × cell size / body radius: millimetres) in its edges::

    P'   = P + e û
    e'_c = e_c + g_c û,   g_c = (e[i, j+1] − e[i, j−1]) / 2      (one-sided at the border)
    e'_r = e_r + g_r û,   g_r = (e[i+1, j] − e[i−1, j]) / 2
    N'   = s (e'_c × e'_r) = N + g_r A + g_c B,   A = s (e_c × û),  B = s (û × e_r)

with N = s (e_c × e_r) = area × outward normal (s = ±1 turns it away from the body) and
û·A = û·B = 0. For an antenna at offset −v from the facet (v = P − antenna):

    R'²       = R² + e (2 v·û + e)
    v'·N'     = v·N + g_r v·A + g_c v·B + e û·N
    |N'|²     = N·N + 2 g_r N·A + 2 g_c N·B + g_r² A·A + 2 g_r g_c A·B + g_c² B·B
    v'·e'_c   = v·e_c + g_c v·û + e û·e_c + e g_c       (and likewise for e'_r)

so everything that depends only on the nominal facet and the trace (v, its dot products, the
antenna weight, tile culling) is computed once per (facet, trace) and shared by the K
realisations; per realisation the kernel reads three differences of its error field and does a
handful of multiply-adds, two square roots, σ0 and the deposit. These are the same range,
incidence (cos θ = −v'·N' / (R' |N'|)), area |N'|, edge projections and trapezoidal delay
spreading as :func:`cluttersim.kernels.accumulate_power` applied to facets rebuilt from the
raised heights (:func:`cluttersim.kernels.build_tiled_facets`); the antenna pattern and
along-track weight are taken in the nominal direction (the direction moves by e/R rad).

Layout: the error fields are (ncell, K) float32, so the K values of one cell are contiguous and
the per-realisation loop vectorises over k; each realisation has its own delay row per trace (rows
interleaved sub-bin by sub-bin put every deposit of a facet on another cache line: 5× slower).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .constants import SPEED_OF_LIGHT_M_S
from .kernels import (
    _JIT,
    _deposit_kinks,
    _tile_reaches_window,
    direction_weight,
    integrate_row,
    sigma0_apply,
    tiles_in_range_order,
    trapezoid_kinks_float,
)


@numba.njit(**_JIT)
def row_layout(nb, oversample, dt_s, max_extent_m):
    """(margin, nrow): the sub-bins of margin on each side of a delay row and the row's length,
    wide enough for any facet of half-extent ``max_extent_m`` (as in
    :func:`cluttersim.kernels.accumulate_power`; capped so the margin stays an int for any input)."""
    nsub = nb * oversample
    inv_sub_m = oversample / (0.5 * SPEED_OF_LIGHT_M_S * dt_s)
    ext_sub = 2.0 * max_extent_m * inv_sub_m
    cap_sub = 4.0 * nsub + 64.0
    if not ext_sub < cap_sub:  # also for nan
        ext_sub = cap_sub
    margin = int(ext_sub) + 8
    return margin, nsub + 2 * margin + 2


@numba.njit(parallel=True, fastmath=True, **_JIT)
def accumulate_power_ensemble(ant, bin0_s, dt_s, oversample, traces_per_block, tile_centre, tile_radius, tile_slab,
                              tile_offsets, max_tile, max_extent_m, max_shift_m, rel, normal, e_col, e_row, area, up,
                              facet_cell, grid_ny, grid_nx, err, law_code, p0, p1, power_const, frames, antenna, scratch,
                              out):  # fmt: skip
    """Received power per delay bin of K DEM realisations at once (module docstring).

    Parameters as :func:`cluttersim.kernels.accumulate_power` (no source record, no shadowing),
    with the tiles' culling bounds ``tile_radius``/``tile_slab`` and ``max_extent_m`` already
    widened for the group's largest error, and:

    up : (3, nfacet) float32
        Each facet's local vertical û (geodetic normal of its cell).
    facet_cell : (nfacet,) int
        Flat cell index ``row * grid_nx + col`` of each facet in the window.
    err : (grid_ny * grid_nx, K) float32
        The K error fields, m (a column of zeros gives the nominal DEM).
    max_shift_m : float
        Largest |error| of the group: facets whose nominal delay lies further than this (plus
        their extent) outside a trace's window are skipped.
    scratch : (nworker, traces_per_block * K * nrow) float64
        Each worker's delay rows (:func:`row_layout` gives nrow); ``nworker`` workers share the
        blocks of traces. Allocated by NumPy, which asks the kernel for huge pages: the K rows of
        a trace are far apart and, on 4 kB pages, their deposits missed the TLB.
    out : (ntrace, K, nbins) float64
        Accumulated into.

    Returns the number of (facet, trace, realisation) evaluations that reached the window.

    References
    ----------
    Skolnik, M. I. (2001), *Introduction to Radar Systems*, 3rd ed., eq. 1.7 (the radar equation
    per facet, as in :func:`cluttersim.kernels.accumulate_power`).
    """
    half_c = 0.5 * SPEED_OF_LIGHT_M_S
    nt = ant.shape[0]
    nk = err.shape[1]
    nb = out.shape[2]
    nsub = nb * oversample
    inv_sub_m = oversample / (half_c * dt_s)
    margin, nrow = row_layout(nb, oversample, dt_s, max_extent_m)
    wmax = 0.5 * (margin - 8)
    marginf = 1.0 * margin
    nsubf = 1.0 * nsub
    shift_sub = max_shift_m * inv_sub_m
    weighted = antenna[0] != 0.0 or antenna[5] != 0.0
    hagfors = law_code == 3
    nblk = (nt + traces_per_block - 1) // traces_per_block
    nworker = scratch.shape[0]
    counts = np.zeros(nworker, dtype=np.int64)
    for w in numba.prange(nworker):
        fb = np.empty((3, nk))  # generic laws: cos θ, numerator and denominator of the power, per realisation
        bp = np.empty(nk)
        bn = np.zeros(nk, dtype=np.int32)
        ba = np.zeros(nk, dtype=np.int32)
        bb = np.zeros(nk, dtype=np.int32)
        n_eval = 0
        for blk in range(w, nblk, nworker):
            ta = blk * traces_per_block
            nbt = min(ta + traces_per_block, nt) - ta
            order = tiles_in_range_order(ant, bin0_s, nb, dt_s, ta, nbt, tile_centre, tile_radius, tile_slab)
            dd = scratch[w]  # per trace, K delay rows (second differences on the sub-bin grid)
            dd[: nbt * nk * nrow] = 0.0
            for q in range(order.shape[0]):
                m = order[q]
                rad = tile_radius[m]
                f0 = tile_offsets[m]
                n = tile_offsets[m + 1] - f0
                for tt in range(nbt):
                    t = ta + tt
                    cx, cy, cz, reaches = _tile_reaches_window(tile_centre, tile_slab, m, ant, t, rad, bin0_s, nb, dt_s)
                    if not reaches:
                        continue
                    x0 = bin0_s[t] * half_c * inv_sub_m
                    rowbase = np.uint64(tt * nk * nrow)
                    nrowu = np.uint64(nrow)
                    for i in range(n):
                        f = f0 + i
                        vx = cx + rel[0, f]
                        vy = cy + rel[1, f]
                        vz = cz + rel[2, f]
                        r2 = vx * vx + vy * vy + vz * vz
                        inv_r = 1.0 / math.sqrt(r2)
                        # the nominal extent on the line of sight, and a skip when no realisation can reach
                        ecx = 1.0 * e_col[0, f]
                        ecy = 1.0 * e_col[1, f]
                        ecz = 1.0 * e_col[2, f]
                        erx = 1.0 * e_row[0, f]
                        ery = 1.0 * e_row[1, f]
                        erz = 1.0 * e_row[2, f]
                        vec = vx * ecx + vy * ecy + vz * ecz
                        ver = vx * erx + vy * ery + vz * erz
                        x_nom = r2 * inv_r * inv_sub_m - x0
                        reach = 0.5 * (abs(vec) + abs(ver)) * inv_r * inv_sub_m + 3.0 * shift_sub + 2.0
                        if (x_nom + reach < 0.0) | (x_nom - reach > nsubf):
                            continue
                        ux = 1.0 * up[0, f]
                        uy = 1.0 * up[1, f]
                        uz = 1.0 * up[2, f]
                        # N = area × outward normal; A = s (e_c × û), B = s (û × e_r), s turning e_c × e_r outward
                        s_ar = 1.0 * area[f]
                        nx_ = s_ar * normal[0, f]
                        ny_ = s_ar * normal[1, f]
                        nz_ = s_ar * normal[2, f]
                        cxx = ecy * erz - ecz * ery
                        cxy = ecz * erx - ecx * erz
                        cxz = ecx * ery - ecy * erx
                        sgn = 1.0 if cxx * nx_ + cxy * ny_ + cxz * nz_ >= 0.0 else -1.0
                        ax = sgn * (ecy * uz - ecz * uy)
                        ay = sgn * (ecz * ux - ecx * uz)
                        az = sgn * (ecx * uy - ecy * ux)
                        bx = sgn * (uy * erz - uz * ery)
                        by = sgn * (uz * erx - ux * erz)
                        bz = sgn * (ux * ery - uy * erx)
                        vn = vx * nx_ + vy * ny_ + vz * nz_
                        va = vx * ax + vy * ay + vz * az
                        vb = vx * bx + vy * by + vz * bz
                        un = ux * nx_ + uy * ny_ + uz * nz_
                        vu = vx * ux + vy * uy + vz * uz
                        lu = vu * inv_r  # û along the line of sight: dR/de
                        curv = 0.5 * (1.0 - lu * lu) * inv_r  # ½ d²R/de²
                        uec = ux * ecx + uy * ecy + uz * ecz
                        uer = ux * erx + uy * ery + uz * erz
                        nn = nx_ * nx_ + ny_ * ny_ + nz_ * nz_
                        na2 = 2.0 * (nx_ * ax + ny_ * ay + nz_ * az)
                        nb2 = 2.0 * (nx_ * bx + ny_ * by + nz_ * bz)
                        aa = ax * ax + ay * ay + az * az
                        ab2 = 2.0 * (ax * bx + ay * by + az * bz)
                        bb_ = bx * bx + by * by + bz * bz
                        wdir = direction_weight(antenna, frames[t], vx, vy, vz, inv_r) if weighted else 1.0
                        pc = power_const * wdir
                        pc_h = 0.5 * p0 * p1 * pc
                        # the cell and its neighbours (central differences, one-sided at the border)
                        c = facet_cell[f]
                        ci = c // grid_nx
                        cj = c - ci * grid_nx
                        j0 = max(cj - 1, 0)
                        j1 = min(cj + 1, grid_nx - 1)
                        i0 = max(ci - 1, 0)
                        i1 = min(ci + 1, grid_ny - 1)
                        fc = 1.0 / max(j1 - j0, 1)
                        fr = 1.0 / max(i1 - i0, 1)
                        e_c = err[np.uint64(c)]  # rows of the (ncell, K) fields: contiguous loads over k
                        e_j0 = err[np.uint64(ci * grid_nx + j0)]
                        e_j1 = err[np.uint64(ci * grid_nx + j1)]
                        e_i0 = err[np.uint64(i0 * grid_nx + cj)]
                        e_i1 = err[np.uint64(i1 * grid_nx + cj)]
                        for k in range(nk):  # vectorised over the realisations
                            e = 1.0 * e_c[k]
                            gc = (1.0 * e_j1[k] - e_j0[k]) * fc
                            gr = (1.0 * e_i1[k] - e_i0[k]) * fr
                            dr = e * (lu + e * curv)  # R' − R to second order in e
                            ir = inv_r * (1.0 - dr * inv_r)  # 1/R' to first order in (R' − R)/R
                            q = nn + gr * (na2 + gr * aa) + gc * (nb2 + gc * bb_ + gr * ab2)  # |N'|²
                            dot = -(vn + gr * va + gc * vb + e * un)  # −v'·N' = R' |N'| cos θ'
                            wa = abs(vec + gc * vu + e * (uec + gc)) * ir * inv_sub_m
                            wb = abs(ver + gr * vu + e * (uer + gr)) * ir * inv_sub_m
                            wa = wa if wa < wmax else wmax
                            wb = wb if wb < wmax else wmax
                            x = x_nom + dr * inv_sub_m
                            half = 0.5 * (wa + wb)
                            ok = (dot > 0.0) & (x + half > 0.0) & (x - half < nsubf)
                            xc = x if x > -marginf else -marginf
                            xc = xc if xc < nsubf + marginf else nsubf + marginf
                            n1, a, b = trapezoid_kinks_float(xc, wa, wb)
                            bn[k] = np.int32(min(max(n1, -marginf), nsubf) + marginf)
                            ba[k] = np.int32(a)
                            bb[k] = np.int32(b)
                            ir2 = ir * ir
                            if hagfors:
                                # Q = |N'|², d = (cos θ')² Q: Hagfors' v = cos⁴θ + C sin²θ is (d² + C Q (Q − d))/Q²,
                                # so σ0 |N'| = (Cρ/2) |N'| v^(−3/2) = (Cρ/2) √(Q (Q²/(Q² v))³): one root, one division
                                d = dot * dot * ir2
                                w2 = d * d + p0 * q * (q - d)
                                inv = 1.0 / (w2 * (a * b))
                                tq = q * q * inv * (a * b)
                                bp[k] = pc_h * math.sqrt(q * tq * tq * tq) * ir2 * ir2 * (inv * w2) if ok else 0.0
                            else:
                                nnk = math.sqrt(q)
                                fb[0, k] = max(dot * ir / nnk, 1e-6)
                                fb[1, k] = pc * nnk if ok else 0.0
                                fb[2, k] = (a * b) / (ir2 * ir2)
                        if not hagfors:
                            sigma0_apply(law_code, fb[0], p0, p1, fb[1], fb[2], bp, nk)
                        for k in range(nk):  # the deposits, one row per realisation
                            p = bp[k]
                            n_eval += p != 0.0
                            _deposit_kinks(dd, rowbase + np.uint64(k) * nrowu + np.uint64(bn[k]), np.uint64(ba[k]),
                                           np.uint64(bb[k]), p)  # fmt: skip
            for tt in range(nbt):
                for k in range(nk):
                    r0 = (tt * nk + k) * nrow
                    integrate_row(dd[r0 : r0 + nrow], margin, oversample, out[ta + tt, k])
        counts[w] = n_eval
    return counts.sum()
