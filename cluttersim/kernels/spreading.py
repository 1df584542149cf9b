"""A facet's power spread over delay: the trapezoid of its range extent, laid on the delay bins
through its four slope changes (kinks) and two running sums per row.
"""

from __future__ import annotations

import math

import numba

from .common import _JIT


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
