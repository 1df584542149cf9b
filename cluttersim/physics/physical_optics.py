"""Specular (coherent) reflection of the surface: the physical-optics field of planar facets.

A smooth surface reflects coherently. In the Kirchhoff (physical-optics) approximation,
with the antenna at A, a surface S of normal-incidence amplitude reflection
coefficient Γ and a point source of unit amplitude, the monostatic field scattered
back to A is ([1]_ §12-2, [2]_ §3; scalar form, R ≫ λ)

    U = (j k / 2π) Γ ∫_S cos θ e^{−j 2k R} / R² dS ,

k = 2π/λ, R the range to the surface point and θ the local incidence. The received
power is Pt G² λ² |U|² / (4π)². Over an infinite plane at height h the stationary
point of the phase gives U = Γ e^{−j2kh} / (2h): the image (mirror) power
Pt G² λ² ρ / ((4π)² (2h)²), ρ = |Γ|². Over a sphere of radius Rp the surface curves
away from the phase front and the same integral gives the spherical divergence
1 / (1 + h/Rp)² ([3]_; :func:`mirror_power_w`).

One DEM facet is a parallelogram centred at c with edge vectors e_a, e_b. With the
range linearised about a point of the facet, R ≈ R_c + û·p, the integral is the
closed form of a polygon aperture with a linear phase ([4]_; for a parallelogram the
edge sum reduces to a product of two sincs):

    ∫ e^{−j2kR} dS = A e^{−j2kR_c} sinc(k e_a·û) sinc(k e_b·û),  sinc(x) = sin x / x.

This is the Fourier transform of the facet's range distribution (a trapezoid, the
projection of the parallelogram on the line of sight) at the two-way wavenumber 2k,
which is how the kernel deposits it: as a trapezoid in delay multiplied by the
carrier e^{−j2kr}, integrated exactly over each delay cell
(:mod:`cluttersim.kernels.coherent`). Shared edges of neighbouring facets then
cancel in delay as well as in sum, as they do on a continuous surface.

The linear phase is not enough for facets comparable to or larger than the Fresnel
zone: the quadratic (Fresnel) term k |p⊥|² / R (p⊥ the offset across the line of
sight) reaches 2π at the corners of a facet two Fresnel-zone radii wide. Each facet
is therefore divided into n × n sub-parallelograms, n chosen so that the quadratic
phase neglected within a sub-facet stays below :data:`QUADRATIC_PHASE_TOL_RAD`
(:func:`subdivisions`); each sub-facet uses its own exact range, direction,
incidence and 1/R². Facets much smaller than the Fresnel zone (orbital sounders
over DEMs of ~100 m) have n = 1. ``tests/test_physical_optics.py`` checks the result
against a brute-force sum over 10⁶ points of the facet.

Roughness below the DEM cell: for Gaussian heights of standard deviation σh the
coherent (specular) part of the reflected power is multiplied by
χ = exp(−(4π σh cos θ / λ)²) ([1]_ §12-4, [5]_ ch. 5), :func:`coherent_power_fraction`;
the rest is scattered incoherently, which the diffuse σ0 law describes.

References
----------
.. [1] Ulaby, F. T., Moore, R. K. & Fung, A. K. (1982). *Microwave Remote Sensing:
       Active and Passive*, vol. II, Addison-Wesley, ch. 12 (Kirchhoff approximation,
       coherent scattering from a Gaussian-height surface).
.. [2] Ruck, G. T., Barrick, D. E., Stuart, W. D. & Krichbaum, C. K. (1970). *Radar
       Cross Section Handbook*, Plenum, ch. 2 (physical-optics integral).
.. [3] Brown, G. S. (1977). The average impulse response of a rough surface and its
       applications. IEEE Trans. Antennas Propag. 25(1), 67–74 (spherical-earth
       factor 1 + h/Rp; from memory).
.. [4] Gordon, W. B. (1975). Far-field approximations to the Kirchhoff–Helmholtz
       representations of scattered fields. IEEE Trans. Antennas Propag. 23(4),
       590–592 (closed form of the aperture integral over a planar polygon).
.. [5] Beckmann, P. & Spizzichino, A. (1963). *The Scattering of Electromagnetic
       Waves from Rough Surfaces*, Pergamon (coherent reflection exp(−g),
       g = (4π σh cos θ / λ)²).
"""

from __future__ import annotations

import math

import numpy as np

from .subsurface import fresnel_amplitude_reflection

#: Largest quadratic (Fresnel) phase, rad, left out at the corners of a sub-facet
#: (:func:`subdivisions`). 0.3 rad keeps a facet of 2 Fresnel-zone radii within 0.05 dB of
#: the brute-force integral (tests/test_physical_optics.py).
QUADRATIC_PHASE_TOL_RAD = 0.3
#: Most subdivisions per facet edge (n ≤ this): a facet 25 Fresnel-zone radii wide is the
#: limit; beyond it the field of the facets nearest the specular point is approximate.
MAX_SUBDIVISIONS = 48


def normal_reflection_coefficient(permittivity: float) -> float:
    """Amplitude reflection coefficient Γ = (1 − √ε′)/(1 + √ε′) of vacuum over a
    half-space of real relative permittivity ε′ at normal incidence (Born & Wolf,
    *Principles of Optics*, §1.5); |Γ|² is the Fresnel reflectivity ρ."""
    return float(fresnel_amplitude_reflection(1.0, permittivity))


def coherent_power_fraction(rms_height_m, cos_inc, wavelength_m):
    """Coherent (specular) share of the reflected power over Gaussian heights of
    standard deviation σh: χ = exp(−(4π σh cos θ / λ)²) (Kirchhoff; [5]_, [1]_).

    At 20 MHz (λ = 15 m), at nadir, χ is −3 dB at σh = 0.99 m and −30 dB at σh = 3.1 m.
    """
    g = 4.0 * math.pi * np.asarray(rms_height_m, dtype=np.float64) * np.asarray(cos_inc) / wavelength_m
    return np.exp(-(g * g))


def mirror_power_w(transmit_power_w, gain_linear, wavelength_m, reflectivity, height_m, body_radius_m=math.inf):
    """Peak power of the specular echo of a smooth sphere (or plane), image method:
    P = Pt G² λ² ρ / ((4π)² (2h)² (1 + h/Rp)²) (Friis transmission to the image at 2h;
    convex-mirror divergence 1/(1 + h/Rp)², [3]_), watts."""
    h = np.asarray(height_m, dtype=np.float64)
    div = 1.0 + h / body_radius_m
    return transmit_power_w * gain_linear**2 * wavelength_m**2 * reflectivity / ((4.0 * math.pi) ** 2 * (2.0 * h) ** 2 * div**2)


def field_constant(transmit_power_w, gain_linear, wavelength_m, reflection_coefficient) -> complex:
    """The complex factor j k Γ √(Pt G² λ²) / (2π · 4π) that turns the integral ∫ cos θ e^{−j2kR}/R² dS
    (m⁻¹... dimensionless per metre) into the received field in √W (module docstring)."""
    k = 2.0 * math.pi / wavelength_m
    return 1j * k * reflection_coefficient * math.sqrt(transmit_power_w * gain_linear**2 * wavelength_m**2) / (
        2.0 * math.pi * 4.0 * math.pi
    )


def subdivisions(edge_a_m: float, edge_b_m: float, range_m: float, wavenumber_rad_m: float) -> int:
    """Subdivisions n per edge of a facet with edge lengths |e_a|, |e_b| at range R so that the
    quadratic phase k |p⊥|² / R neglected at a sub-facet's corners (|p⊥| ≤ (|e_a|+|e_b|)/(2n))
    is at most :data:`QUADRATIC_PHASE_TOL_RAD`; between 1 and :data:`MAX_SUBDIVISIONS`."""
    half = 0.5 * (edge_a_m + edge_b_m)
    n = math.ceil(half * math.sqrt(wavenumber_rad_m / (range_m * QUADRATIC_PHASE_TOL_RAD)))
    return min(max(n, 1), MAX_SUBDIVISIONS)


def _sinc(x: float) -> float:
    if abs(x) < 1e-4:
        return 1.0 - x * x / 6.0
    return math.sin(x) / x


def facet_integral(ant, centre, normal, e_a, e_b, wavenumber_rad_m: float, n: int = 0,
                   body_radius_m: float = math.inf) -> complex:
    """∫_facet cos θ e^{−j2kR} / R² dS over a planar parallelogram (centre, edges e_a, e_b; vectors
    in metres, any common frame; ``normal`` its unit outward normal), the antenna at ``ant``.

    Sum over n × n sub-parallelograms (n = 0: :func:`subdivisions`) of the closed form with the
    range linearised about each sub-facet's centre ([4]_): A_s cos θ_s / R_s² e^{−j2kR_s}
    sinc(k e_a·û_s / n) sinc(k e_b·û_s / n). Facets seen from behind give 0. This is the CW value;
    the kernel spreads the same field over delay (:mod:`cluttersim.kernels.coherent`).

    With ``body_radius_m`` the facet is bent onto the body's curvature (a DEM facet is the
    tangent plane at its cell): a sub-facet at in-plane offset o drops by |o|²/(2Rp) along the
    normal, its normal and edges tilted by o/Rp. Over a facet as wide as the Fresnel zone this
    is what gives the sphere's divergence (1 + h/Rp)⁻² instead of a flat mirror's power.
    """
    ant = np.asarray(ant, dtype=np.float64)
    c = np.asarray(centre, dtype=np.float64)
    nrm = np.asarray(normal, dtype=np.float64)
    ea = np.asarray(e_a, dtype=np.float64)
    eb = np.asarray(e_b, dtype=np.float64)
    k = wavenumber_rad_m
    area = float(np.linalg.norm(np.cross(ea, eb)))
    inv_rp = 1.0 / body_radius_m
    if n <= 0:
        r_eff = 1.0 / (1.0 / float(np.linalg.norm(c - ant)) + inv_rp)
        n = subdivisions(float(np.linalg.norm(ea)), float(np.linalg.norm(eb)), r_eff, k)
    total = 0.0j
    for i in range(n):
        for j in range(n):
            o = ((i + 0.5) / n - 0.5) * ea + ((j + 0.5) / n - 0.5) * eb
            p = c + o - 0.5 * float(o @ o) * inv_rp * nrm
            v = p - ant
            r = float(np.linalg.norm(v))
            u = v / r
            m = nrm + o * inv_rp
            cos_inc = -float(u @ m) / float(np.linalg.norm(m))
            if cos_inc <= 0.0:
                continue
            un = float(u @ nrm)
            wa = float(ea @ u) - float(o @ ea) * inv_rp * un
            wb = float(eb @ u) - float(o @ eb) * inv_rp * un
            shape = _sinc(k * wa / n) * _sinc(k * wb / n)
            total += area / (n * n) * cos_inc / (r * r) * shape * np.exp(-2j * k * r)
    return complex(total)


def facet_integral_brute_force(ant, centre, normal, e_a, e_b, wavenumber_rad_m: float, points: int = 1000,
                               body_radius_m: float = math.inf) -> complex:
    """The same integral as :func:`facet_integral` by the midpoint rule on points × points
    sub-cells with the exact range at each (a reference for tests; cost points²); with
    ``body_radius_m`` over the facet bent onto the sphere of that radius (exact sphere of
    centre ``centre − Rp·normal``, points projected radially onto it, area element
    to first order)."""
    ant = np.asarray(ant, dtype=np.float64)
    c = np.asarray(centre, dtype=np.float64)
    nrm = np.asarray(normal, dtype=np.float64)
    ea = np.asarray(e_a, dtype=np.float64)
    eb = np.asarray(e_b, dtype=np.float64)
    area = float(np.linalg.norm(np.cross(ea, eb)))
    s = (np.arange(points) + 0.5) / points - 0.5
    total = 0.0j
    for si in s:  # one row at a time: points² values never held at once
        p = c[None, :] + si * ea[None, :] + s[:, None] * eb[None, :]
        m = np.broadcast_to(nrm, p.shape)
        if math.isfinite(body_radius_m):
            centre_body = c - body_radius_m * nrm
            d = p - centre_body
            m = d / np.linalg.norm(d, axis=1)[:, None]
            p = centre_body + body_radius_m * m
        v = p - ant[None, :]
        r = np.sqrt(np.einsum("ij,ij->i", v, v))
        cos_inc = np.maximum(-np.einsum("ij,ij->i", v, m) / r, 0.0)
        total += np.sum(cos_inc / r**2 * np.exp(-2j * wavenumber_rad_m * r))
    return complex(total * area / points**2)
