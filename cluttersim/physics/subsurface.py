"""Predicted echo of a hypothesised subsurface interface (the ``[subsurface]`` TOML table).

A flat, specular interface at depth d below the DEM surface, parallel to it,
under a layer of real relative permittivity ε′ and loss tangent tan δ, above a
substrate of permittivity ε_s. At normal incidence, per trace, with h the
antenna's height above the nadir surface:

* delay: t = t_nadir + 2 d √ε′ / c (:func:`subsurface_delay_s`);
* power reflectivity of a boundary, R = r², r = (√ε1 − √ε2)/(√ε1 + √ε2) ([1]_);
* two-way power transmission through the (lossless) surface,
  T = (1 − R_surface)² with R_surface the vacuum–layer reflectivity ([1]_);
* one-way field attenuation of a low-loss dielectric, α = π f √ε′ tan δ / c
  (Np/m; tan δ ≪ 1) ([2]_; common practice). Power decays as exp(−2αz), so over
  the two-way path 2d the power factor is L = exp(−4 α d), i.e. 8.686 · 2αd dB;
* specular echo of a flat mirror seen from range R (image method: the mirror
  images the antenna at 2R, Friis transmission between the two):
  P = Pt G² λ² Γ / ((4π)² (2R)²) ([3]_, [4]_). For the interface, R is the
  image range R_eff = h + d/√ε′ (refraction at the surface focuses the beam;
  paraxial approximation, common practice in radar sounding, [4]_ from memory)
  and Γ = T · R_interface · L. For the surface itself Γ = R_surface, R = h.
* spherical divergence: a convex spherical mirror of radius Rp images the
  antenna closer and smaller, dividing the flat-mirror power by (1 + R/Rp)²
  ([5]_): 0.74 dB for Mars at 300 km, 1.4 dB for the Moon. The interface uses
  its image range R_eff (paraxial; the interface's radius Rp − d ≈ Rp);
* the antenna's pattern gain toward nadir multiplies G (a horizontal half-wave
  dipole's peak directivity, 1.64, :meth:`cluttersim.physics.antenna.AntennaConfig.nadir_pattern_gain`).

The predicted powers are the peak powers of specular echoes with no
processing gain, on cluttersim's ``power`` scale
(:data:`cluttersim.physics.radar.POWER_CONVENTION`: a point-like specular echo reads
its received power at its peak sample); a rough interface or surface returns
less. The ratio subsurface/surface is the robust number.

References
----------
.. [1] Born, M. & Wolf, E. (1999). *Principles of Optics*, 7th ed., Cambridge
       University Press, §1.5 (Fresnel formulae at normal incidence).
.. [2] Ulaby, F. T., Moore, R. K. & Fung, A. K. (1986). *Microwave Remote
       Sensing*, vol. III, Artech House, appendix E (low-loss dielectric,
       α ≈ (π √ε′ / λ0) tan δ).
.. [3] Friis, H. T. (1946). A note on a simple transmission formula. Proc. IRE
       34(5), 254–256.
.. [4] Bogorodsky, V. V., Bentley, C. R. & Gudmandsen, P. E. (1985).
       *Radioglaciology*, Reidel, ch. 4 (radar equation of a specular layer
       with geometric term (2(h + d/√ε′))²; cited from memory).
.. [5] Geometric optics of a convex spherical mirror (focal length Rp/2): the
       reflected wave diverges from an image whose distance makes the echo
       (1 + R/Rp)² weaker than a flat mirror's (common practice; the same
       curvature factor (1 + h/Rp) appears in Brown, G. S. (1977), IEEE Trans.
       Antennas Propag. 25(1), 67–74; from memory).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from ..errors import ConfigError
from .radar import delay_after_surface_s

#: dB per neper of power ratio: 10 log10(e²) = 20 log10(e) ≈ 8.686.
DB_PER_NEPER = 20.0 / math.log(10.0)

#: Largest loss tangent accepted: α ≈ π f √ε′ tan δ / c needs tan δ ≪ 1.
MAX_LOSS_TANGENT = 0.1


def _check_permittivity(value, name: str = "permittivity"):
    arr = np.asarray(value, dtype=np.float64)
    if not np.all(arr >= 1.0):
        raise ValueError(f"{name} = {value!r}: expected a real relative permittivity >= 1")
    return arr


def wave_speed_m_s(permittivity):
    """Wave speed v = c / √ε′ (m/s) in a low-loss medium of real relative permittivity ε′."""
    return SPEED_OF_LIGHT_M_S / np.sqrt(_check_permittivity(permittivity))


def fresnel_amplitude_reflection(permittivity_1, permittivity_2):
    """Normal-incidence amplitude reflection coefficient r12 = (√ε1 − √ε2) / (√ε1 + √ε2) ([1]_)."""
    n1 = np.sqrt(_check_permittivity(permittivity_1, "permittivity_1"))
    n2 = np.sqrt(_check_permittivity(permittivity_2, "permittivity_2"))
    return (n1 - n2) / (n1 + n2)


def fresnel_power_reflectivity(permittivity_1, permittivity_2):
    """Normal-incidence power reflectivity R = r12² (dimensionless, [1]_)."""
    return fresnel_amplitude_reflection(permittivity_1, permittivity_2) ** 2


def surface_transmission_two_way(layer_permittivity):
    """Power transmitted down through a lossless vacuum–layer boundary and back up:
    T = (1 − R)², R = ((1 − √ε′)/(1 + √ε′))² (normal incidence, [1]_)."""
    return (1.0 - fresnel_power_reflectivity(1.0, layer_permittivity)) ** 2


def attenuation_np_per_m(frequency_hz, permittivity, loss_tangent):
    """One-way field attenuation α = π f √ε′ tan δ / c in Np/m (low-loss, tan δ ≪ 1; [2]_)."""
    eps = _check_permittivity(permittivity)
    tan_d = np.asarray(loss_tangent, dtype=np.float64)
    if not np.all(tan_d >= 0):
        raise ValueError(f"loss_tangent = {loss_tangent!r}: expected a value >= 0")
    return math.pi * np.asarray(frequency_hz, dtype=np.float64) * np.sqrt(eps) * tan_d / SPEED_OF_LIGHT_M_S


def two_way_loss_factor(frequency_hz, permittivity, loss_tangent, depth_m):
    """Two-way power attenuation factor L = exp(−4 α d) (≤ 1) down to depth d (m) and back."""
    return np.exp(-4.0 * attenuation_np_per_m(frequency_hz, permittivity, loss_tangent) * np.asarray(depth_m, dtype=np.float64))


def two_way_loss_db(frequency_hz, permittivity, loss_tangent, depth_m):
    """Two-way attenuation in dB (positive): 10 log10(1/L) = 8.686 · 2 α d."""
    alpha = attenuation_np_per_m(frequency_hz, permittivity, loss_tangent)
    return DB_PER_NEPER * 2.0 * alpha * np.asarray(depth_m, dtype=np.float64)


def subsurface_delay_s(nadir_delay_s, depth_m, permittivity):
    """Absolute two-way delay of the interface echo, t = t_nadir + 2 d √ε′ / c (s)."""
    return np.asarray(nadir_delay_s, dtype=np.float64) + delay_after_surface_s(depth_m, float(permittivity))


def specular_echo_power_w(transmit_power_w, gain_linear, wavelength_m, reflectivity, range_m,
                          body_radius_m: float = math.inf):  # fmt: skip
    """Echo power of a specular reflector at normal incidence, in watts.

    Pr = Pt G² λ² Γ / ((4π)² (2R)² (1 + R/Rp)²): Friis transmission ([3]_) between
    the antenna and its mirror image at distance 2R, times the reflector's power
    reflectivity (or path factor) Γ, and the divergence of a spherical mirror of
    radius Rp ([5]_; 1 for a flat one, Rp = inf). R is the (image) range in metres.
    """
    r = np.asarray(range_m, dtype=np.float64)
    divergence = (1.0 + r / body_radius_m) ** 2
    return (transmit_power_w * gain_linear**2 * wavelength_m**2 * np.asarray(reflectivity)
            / ((4.0 * math.pi) ** 2 * (2.0 * r) ** 2 * divergence))  # fmt: skip


@dataclass(frozen=True)
class SubsurfaceConfig:
    """The ``[subsurface]`` table: a hypothesised interface parallel to the DEM surface.

    ``depth_m`` d (> 0), ``layer_permittivity`` ε′ (≥ 1) and ``loss_tangent`` tan δ
    (0 to 0.1, default 0) of the layer above it, ``substrate_permittivity`` ε_s (≥ 1)
    below it.
    """

    depth_m: float
    layer_permittivity: float
    substrate_permittivity: float
    loss_tangent: float = 0.0

    def __post_init__(self):
        if not (math.isfinite(self.depth_m) and self.depth_m > 0):
            raise ConfigError(f"[subsurface] depth_m = {self.depth_m!r}: expected a positive depth in m")
        for key in ("layer_permittivity", "substrate_permittivity"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value >= 1.0):
                raise ConfigError(f"[subsurface] {key} = {value!r}: expected a real relative permittivity >= 1")
        if not (0.0 <= self.loss_tangent <= MAX_LOSS_TANGENT):
            raise ConfigError(
                f"[subsurface] loss_tangent = {self.loss_tangent!r}: expected 0 to {MAX_LOSS_TANGENT} (low-loss approximation)"
            )

    @classmethod
    def from_dict(cls, data) -> "SubsurfaceConfig":
        """Build from the parsed ``[subsurface]`` table, rejecting unknown or missing keys by name."""
        if not isinstance(data, dict):
            raise ConfigError("[subsurface] must be a table")
        names = ("depth_m", "layer_permittivity", "loss_tangent", "substrate_permittivity")
        for key, value in data.items():
            if key not in names:
                raise ConfigError(f"[subsurface] unknown key {key!r}: expected one of {', '.join(names)}")
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(f"[subsurface] {key} = {value!r}: expected a number")
        for key in ("depth_m", "layer_permittivity", "substrate_permittivity"):
            if key not in data:
                raise ConfigError(f"[subsurface] missing key {key!r}")
        return cls(**{k: float(v) for k, v in data.items()})

    def to_dict(self) -> dict:
        return asdict(self)


def predict_subsurface(config: SubsurfaceConfig, radar, nadir_delay_s, body_radius_m: float = math.inf,
                       nadir_pattern_gain: float = 1.0):  # fmt: skip
    """Per-trace predicted interface echo and, for comparison, the surface's specular echo.

    Parameters
    ----------
    config : SubsurfaceConfig
    radar : RadarConfig
        Transmit power, gain, wavelength and centre frequency.
    nadir_delay_s : array_like (trace,)
        Two-way delay to the nadir surface (NaN allowed); h = c t_nadir / 2.
    body_radius_m : float
        Radius Rp of the body for the spherical divergence (inf: flat).
    nadir_pattern_gain : float
        One-way antenna pattern gain toward nadir (multiplies the radar's gain).

    Returns
    -------
    delay_s, subsurface_power_w, surface_power_w : ndarray (trace,)
        t_nadir + 2 d √ε′ / c; Pt G² λ² T R_int L / ((4π)² (2R_eff)² (1 + R_eff/Rp)²),
        R_eff = h + d/√ε′; Pt G² λ² R_surf / ((4π)² (2h)² (1 + h/Rp)²), G including the
        pattern toward nadir. NaN where the nadir delay is NaN.
    """
    eps, d = config.layer_permittivity, config.depth_m
    h = 0.5 * SPEED_OF_LIGHT_M_S * np.asarray(nadir_delay_s, dtype=np.float64)
    gamma_sub = (
        surface_transmission_two_way(eps)
        * fresnel_power_reflectivity(eps, config.substrate_permittivity)
        * two_way_loss_factor(radar.center_frequency_hz, eps, config.loss_tangent, d)
    )
    args = (radar.transmit_power_w, radar.gain_linear * nadir_pattern_gain, radar.wavelength_m)
    sub = specular_echo_power_w(*args, gamma_sub, h + d / math.sqrt(eps), body_radius_m)
    surf = specular_echo_power_w(*args, fresnel_power_reflectivity(1.0, eps), h, body_radius_m)
    return subsurface_delay_s(nadir_delay_s, d, eps), sub, surf


def subsurface_variables(config: SubsurfaceConfig, radar, nadir_delay_s, body_radius_m: float = math.inf,
                         nadir_pattern_gain: float = 1.0) -> dict:  # fmt: skip
    """Radargram variables of :func:`predict_subsurface` (``name: (dims, values, units, long_name)``)."""
    delay, sub, surf = predict_subsurface(config, radar, nadir_delay_s, body_radius_m, nadir_pattern_gain)
    return {
        "predicted_subsurface_delay": ("trace", delay, "s", "absolute two-way delay of the hypothesised interface echo"),
        "predicted_subsurface_power": ("trace", sub, "W", "predicted specular echo power of the hypothesised interface"),
        "predicted_surface_power": ("trace", surf, "W", "predicted specular echo power of a flat nadir surface"),
    }
