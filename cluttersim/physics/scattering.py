"""Backscatter laws: radar cross-section per unit area σ0 as a function of incidence.

Each law is a pure function of ``cos_inc`` (the cosine of the local incidence
angle between the facet normal and the line of sight to the antenna) and its
parameters; it returns σ0 in m²/m² (linear, not dB). The same functions are
compiled by numba for the simulation kernel (see :mod:`cluttersim.kernels`), so
what is tested here is exactly what the simulator evaluates. Arguments may be
floats or NumPy arrays. Facets seen from behind (``cos_inc <= 0``) never reach
these functions: the kernel skips them.

The registry :data:`LAWS` maps the law name used in the radar TOML to its
numeric code in the kernel and its parameter names, in order.

References
----------
.. [1] Hagfors, T. (1964). Backscattering from an undulating surface with
       applications to radar returns from the Moon. J. Geophys. Res. 69(18),
       3779–3784. doi:10.1029/JZ069i018p03779
.. [2] Ulaby, F. T., Moore, R. K. & Fung, A. K. (1982). *Microwave Remote
       Sensing: Active and Passive*, Vol. II, ch. 12 (geometric-optics / Kirchhoff
       stationary-phase backscatter from a Gaussian-slope surface).
.. [3] Evans, J. V. & Hagfors, T. (eds.) (1968). *Radar Astronomy*, McGraw-Hill
       (cosine-power and Lambert laws for diffuse scattering, ch. 5).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .subsurface import fresnel_power_reflectivity


def sigma0_constant(cos_inc, sigma0):
    """σ0(θ) = σ0, independent of incidence (useful for tests and calibration)."""
    return sigma0 + 0.0 * cos_inc


def sigma0_lambert(cos_inc, k):
    """Lambert's law for backscatter, σ0(θ) = k cos²θ ([3]_)."""
    return k * cos_inc * cos_inc


def sigma0_cosine(cos_inc, k, n):
    """Cosine-power law, σ0(θ) = k cosⁿθ ([3]_); n = 2 is Lambert's law."""
    return k * cos_inc**n


def sigma0_hagfors(cos_inc, c, rho):
    """Hagfors' law ([1]_).

    .. math:: \\sigma_0(\\theta) = \\frac{C\\rho}{2}\\,(\\cos^4\\theta + C\\sin^2\\theta)^{-3/2}

    ``c`` is Hagfors' roughness parameter C (dimensionless; the rms slope is
    about C^(-1/2) rad) and ``rho`` the normal-incidence Fresnel power
    reflectivity ρ. Normalised so that a sphere of radius a has total cross
    section ρπa² in the large-C limit.
    """
    cos2 = cos_inc * cos_inc
    sin2 = 1.0 - cos2
    v = cos2 * cos2 + c * sin2
    return 0.5 * c * rho / (v * np.sqrt(v))


def sigma0_gaussian(cos_inc, rms_slope_deg, rho):
    """Geometric-optics backscatter from a surface with Gaussian slopes ([2]_).

    .. math:: \\sigma_0(\\theta) = \\frac{\\rho}{2 s^2 \\cos^4\\theta}
              \\exp\\left(-\\frac{\\tan^2\\theta}{2 s^2}\\right),\\quad s = \\tan(\\text{rms slope})

    ``rms_slope_deg`` is the rms surface slope angle in degrees, ``rho`` the
    normal-incidence Fresnel power reflectivity.
    """
    s = np.tan(np.radians(rms_slope_deg))
    cos2 = cos_inc * cos_inc
    tan2 = (1.0 - cos2) / cos2
    return rho / (2.0 * s * s * cos2 * cos2) * np.exp(-tan2 / (2.0 * s * s))


@dataclass(frozen=True)
class LawSpec:
    """How a law is named in the TOML, coded in the kernel and parametrised."""

    code: int
    function: object
    params: tuple[str, ...]
    defaults: tuple[float, ...]


#: Law name → specification. Parameter names are the TOML keys under [surface].
LAWS: dict[str, LawSpec] = {
    "constant": LawSpec(0, sigma0_constant, ("sigma0",), (0.01,)),
    "lambert": LawSpec(1, sigma0_lambert, ("k",), (0.01,)),
    "cosine": LawSpec(2, sigma0_cosine, ("k", "n"), (0.01, 2.0)),
    "hagfors": LawSpec(3, sigma0_hagfors, ("C", "rho"), (400.0, 0.08)),
    "gaussian": LawSpec(4, sigma0_gaussian, ("rms_slope_deg", "rho"), (3.0, 0.08)),
}


def sigma0_peak(law: str, params: dict) -> tuple[float, float]:
    """The largest σ0 a law gives over incidences 0–90° and the incidence (degrees) where it does.

    From each law's formula: the constant law everywhere; Lambert and cosine-power (n ≥ 0) at
    normal incidence, k. Hagfors: with s = sin²θ, v = (1 − s)² + C s is smallest at s = 0 when
    C ≥ 2 (σ0 = Cρ/2) and at s = 1 − C/2 otherwise, v = C − C²/4, so σ0 = (Cρ/2) v^(−3/2).
    Gaussian slopes: with u = 1/cos²θ, σ0 = ρ/(2 s²) u² exp(−(u − 1)/(2 s²)) is largest at
    u = 4 s² when 4 s² > 1 (σ0 = 8 ρ s² exp(−2 + 1/(2 s²))), else at normal incidence (ρ/(2 s²)).
    """
    spec = LAWS[law]
    p = [float(params.get(name, default)) for name, default in zip(spec.params, spec.defaults)]
    if law == "constant":
        return p[0], 0.0
    if law in ("lambert", "cosine"):
        return p[0], 0.0
    if law == "hagfors":
        c, rho = p
        if c >= 2.0:
            return 0.5 * c * rho, 0.0
        v = c - 0.25 * c * c
        return 0.5 * c * rho / v**1.5, math.degrees(math.asin(math.sqrt(1.0 - 0.5 * c)))
    if law == "gaussian":
        s = math.tan(math.radians(p[0]))
        rho = p[1]
        if 4.0 * s * s <= 1.0:
            return rho / (2.0 * s * s), 0.0
        return 8.0 * rho * s * s * math.exp(-2.0 + 1.0 / (2.0 * s * s)), math.degrees(math.acos(1.0 / (2.0 * s)))
    raise KeyError(law)


def sigma0(law: str, incidence_deg, **params):
    """Evaluate a law by name at incidence angles in degrees (convenience wrapper)."""
    spec = LAWS[law]
    cos_inc = np.cos(np.radians(np.asarray(incidence_deg, dtype=np.float64)))
    args = [params.get(name, default) for name, default in zip(spec.params, spec.defaults)]
    return spec.function(cos_inc, *args)


def fresnel_reflectivity_normal(permittivity: float) -> float:
    """Normal-incidence Fresnel power reflectivity ρ = ((1 − √ε)/(1 + √ε))² of a
    half-space of real relative permittivity ε (e.g. Born & Wolf, *Principles of
    Optics*, §1.5.3): :func:`cluttersim.physics.subsurface.fresnel_power_reflectivity` from vacuum."""
    return float(fresnel_power_reflectivity(1.0, permittivity))
