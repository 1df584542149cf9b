"""The diffuse (incoherent) power per delay bin: :func:`accumulate_power`, the hot kernel, and
its float32 per-facet terms.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from .common import _FAST, _JIT, SIDE_LEFT, SIDE_RIGHT, SPREAD_CENTRE
from .spreading import _deposit_kinks, integrate_row, integrate_two_rows, _keep_densest
from .tiling import hidden_from_antenna, _tile_reaches_window, tiles_in_range_order
from .weights import direction_weight, sigma0_apply32, sigma0_factor


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
