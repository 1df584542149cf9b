"""Per-facet power weights: the backscatter laws σ0(θ) by numeric code and the antenna
pattern's two-way gain and direction weight.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..physics import scattering
from .common import _JIT


_sigma0_constant = numba.njit(inline="always", **_JIT)(scattering.sigma0_constant)
_sigma0_lambert = numba.njit(inline="always", **_JIT)(scattering.sigma0_lambert)
_sigma0_cosine = numba.njit(inline="always", **_JIT)(scattering.sigma0_cosine)
_sigma0_hagfors = numba.njit(inline="always", **_JIT)(scattering.sigma0_hagfors)
_sigma0_gaussian = numba.njit(inline="always", **_JIT)(scattering.sigma0_gaussian)


@numba.njit(inline="always", **_JIT)
def sigma0_by_code(code, cos_inc, p0, p1):
    """σ0 of the law with numeric ``code`` (see :data:`cluttersim.physics.scattering.LAWS`), one value."""
    if code == 3:
        return _sigma0_hagfors(cos_inc, p0, p1)
    if code == 0:
        return _sigma0_constant(cos_inc, p0)
    if code == 1:
        return _sigma0_lambert(cos_inc, p0)
    if code == 2:
        return _sigma0_cosine(cos_inc, p0, p1)
    return _sigma0_gaussian(cos_inc, p0, p1)


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
    Hagfors' law is :func:`cluttersim.physics.scattering.sigma0_hagfors` written with float32 constants and
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
def pattern_gain_two_way(params, frame, ux, uy, uz):
    """Two-way antenna pattern G(û)² toward unit direction û, in a trace's frame (rows: along-track,
    right, down). ``params`` = (code, dipole axis row, along beamwidth rad, across beamwidth rad,
    dipole peak directivity); see :mod:`cluttersim.physics.antenna` for the formulas."""
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
    per unit u), wavelength, then for code 1 the unfocused response table; :mod:`cluttersim.physics.aperture`)."""
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
