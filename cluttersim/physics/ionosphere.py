"""A thin ionospheric layer between the antenna and the surface (the ``[ionosphere]`` TOML table).

A radio wave of frequency f crossing a plasma of electron density N has the
refractive index n ≈ 1 − 40.3 N / f² (SI, f ≫ plasma frequency; [1]_): its
phase path is shortened and its group path lengthened by 40.3 TEC / f²
metres, TEC = ∫N dl the total electron content along the path (el/m²). Over
the two-way path of a sounder's echo (the layer is crossed twice) the extra
group delay is

    Δt_g(f) = 2 · 40.3 · TEC / (c f²)

(6.72 µs for TEC = 10¹⁶ m⁻² at 20 MHz, [1]_). Across a band the delay changes
with frequency, so the range-compressed pulse is delayed, dispersed and its
peak lowered. The layer acts on the spectrum as the two-way transfer function

    H(f) = exp(+i 2π · 2 · 40.3 · TEC / (c f)) · exp(−2 κ(f)),

a phase advance of the carrier whose derivative, −(1/2π) dΦ/df = Δt_g(f), is
the group delay (signals written as ∫ S(f) e^(i2πft) df). κ is the one-way field
absorption in nepers of a plasma with electron collision frequency ν
(f ≫ ν; [1]_, [2]_):

    κ(f) = e² ν TEC / (2 ε0 m_e c (ω² + ν²)),  ω = 2πf,

applied twice for the two-way path (power factor exp(−4κ)).

The layer is thin (a phase screen: no ray bending, no Faraday rotation, no
scintillation) and uniform along the track; TEC is the vertical content, used
for the near-vertical path of a sounder (the slant factor of off-nadir clutter
is neglected).

References
----------
.. [1] Davies, K. (1990). *Ionospheric Radio*, Peter Peregrinus (IEE
       Electromagnetic Waves Series 31), ch. 1 and 7 (group delay
       40.3 TEC / (c f²), absorption of a collisional plasma; from memory).
.. [2] Budden, K. G. (1985). *The Propagation of Radio Waves*, Cambridge
       University Press, §3 (Appleton–Hartree refractive index with collisions).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.constants import electron_mass, elementary_charge, epsilon_0

from ..constants import SPEED_OF_LIGHT_M_S
from ..errors import ConfigError

#: The constant of the ionospheric refractive index n ≈ 1 − K N / f², K = e²/(8π² ε0 m_e) ≈ 40.3 m³ s⁻²
#: (Davies 1990); computed from CODATA constants (scipy.constants).
K_IONO = elementary_charge**2 / (8.0 * math.pi**2 * epsilon_0 * electron_mass)


def group_delay_two_way_s(tec_el_m2, frequency_hz):
    """Extra two-way group delay of a layer of total electron content TEC: 2 · 40.3 · TEC / (c f²) (s)."""
    f = np.asarray(frequency_hz, dtype=np.float64)
    return 2.0 * K_IONO * np.asarray(tec_el_m2, dtype=np.float64) / (SPEED_OF_LIGHT_M_S * f * f)


def phase_two_way_rad(tec_el_m2, frequency_hz):
    """Two-way phase advance of the carrier, 2π · 2 · 40.3 · TEC / (c f) (rad); its derivative
    (1/2π) dΦ/df = −Δt_g, i.e. the envelope is delayed by :func:`group_delay_two_way_s`."""
    f = np.asarray(frequency_hz, dtype=np.float64)
    return 2.0 * math.pi * 2.0 * K_IONO * np.asarray(tec_el_m2, dtype=np.float64) / (SPEED_OF_LIGHT_M_S * f)


def absorption_one_way_np(tec_el_m2, frequency_hz, collision_frequency_hz):
    """One-way field absorption κ = e² ν TEC / (2 ε0 m_e c (ω² + ν²)) in nepers (see module)."""
    omega = 2.0 * math.pi * np.asarray(frequency_hz, dtype=np.float64)
    nu = float(collision_frequency_hz)
    k = elementary_charge**2 / (2.0 * epsilon_0 * electron_mass * SPEED_OF_LIGHT_M_S)
    return k * nu * float(tec_el_m2) / (omega * omega + nu * nu)


def two_way_transfer(frequency_hz, config: "IonosphereConfig"):
    """H(f) = exp(iΦ(f)) exp(−2κ(f)): the layer's effect on the echo's spectrum at RF frequency f.

    With signals written as ∫ S(f) e^(i2πft) df, a delay τ multiplies S by e^(−i2πfτ); the
    phase advance Φ = :func:`phase_two_way_rad` has dΦ/df = −2π Δt_g, so H delays the envelope
    by Δt_g(f) at every f."""
    f = np.asarray(frequency_hz, dtype=np.float64)
    h = np.exp(1j * phase_two_way_rad(config.tec_el_m2, f))
    if config.collision_frequency_hz > 0:
        h = h * np.exp(-2.0 * absorption_one_way_np(config.tec_el_m2, f, config.collision_frequency_hz))
    return h


@dataclass(frozen=True)
class IonosphereConfig:
    """The ``[ionosphere]`` table: ``tec_el_m2`` (total electron content, electrons per m², ≥ 0)
    and optional ``collision_frequency_hz`` (electron collision frequency ν, s⁻¹, ≥ 0, default 0:
    no absorption)."""

    tec_el_m2: float = 0.0
    collision_frequency_hz: float = 0.0

    def __post_init__(self):
        for key in ("tec_el_m2", "collision_frequency_hz"):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
                raise ConfigError(f"[ionosphere] {key} = {value!r}: expected a number >= 0")
        if self.tec_el_m2 > 1e19:
            raise ConfigError(f"[ionosphere] tec_el_m2 = {self.tec_el_m2!r}: expected at most 1e19 electrons/m² "
                              "(1e15-1e18 is the usual range)")

    @property
    def active(self) -> bool:
        return self.tec_el_m2 > 0

    @classmethod
    def from_dict(cls, data) -> "IonosphereConfig":
        if not isinstance(data, dict):
            raise ConfigError("[ionosphere] must be a table")
        names = ("tec_el_m2", "collision_frequency_hz")
        for key, value in data.items():
            if key not in names:
                raise ConfigError(f"[ionosphere] unknown key {key!r}: expected one of {', '.join(names)}")
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(f"[ionosphere] {key} = {value!r}: expected a number")
        if "tec_el_m2" not in data:
            raise ConfigError("[ionosphere] missing key 'tec_el_m2'")
        return cls(**{k: float(v) for k, v in data.items()})

    def check_band(self, center_frequency_hz: float, bandwidth_hz: float) -> None:
        """The thin-layer formulas need f well above the plasma frequency; refuse a band whose
        dispersion exceeds 50 µs across it (a sign of a TEC given in TECU or a band too low)."""
        f_lo = center_frequency_hz - 0.5 * bandwidth_hz
        spread = float(group_delay_two_way_s(self.tec_el_m2, f_lo)
                       - group_delay_two_way_s(self.tec_el_m2, center_frequency_hz + 0.5 * bandwidth_hz))  # fmt: skip
        if spread > 50e-6:
            raise ConfigError(
                f"[ionosphere] tec_el_m2 = {self.tec_el_m2!r}: the group delay changes by {spread * 1e6:.0f} µs across "
                f"the band {f_lo / 1e6:.3g}-{(center_frequency_hz + 0.5 * bandwidth_hz) / 1e6:.3g} MHz; expected at "
                "most 50 µs (is the TEC in electrons/m²? 1 TECU = 1e16)"
            )

    def to_dict(self) -> dict:
        return asdict(self)


def disperse_radargram(ds, tec_el_m2: float, collision_frequency_hz: float = 0.0):
    """A simulated radargram as it would look through a layer of ``tec_el_m2`` (for ``compare``).

    The radargram's ``power`` was compressed with the undisturbed pulse; without the
    power per delay bin behind it, each trace is convolved with the dispersed pulse's
    power response |h_iono(kΔt)|² (:func:`cluttersim.physics.radar.pulse_power_kernel`) normalised
    to a sum of 1. A phase-only layer keeps ∫|h|², so a diffuse echo keeps its level and
    a point echo's peak drops by max|h_iono|² when the dispersion is much wider than the
    pulse (1/B); for a weak layer this smears the echo by one pulse width more than a
    simulation through the layer would (use ``[ionosphere]`` in the radar TOML then).
    The result carries ``ionosphere_tec_el_m2``.
    """
    import json

    from scipy.ndimage import convolve1d

    from ..config import SimulationConfig
    from .radar import pulse_power_kernel

    layer = IonosphereConfig(tec_el_m2=float(tec_el_m2), collision_frequency_hz=float(collision_frequency_hz))
    if not layer.active:
        return ds
    radar = SimulationConfig.from_dict(json.loads(ds.attrs["cluttersim_config"])).radar
    layer.check_band(radar.center_frequency_hz, radar.bandwidth_hz)
    _, weights = pulse_power_kernel(radar.bandwidth_hz, radar.sample_interval_s, radar.range_window,
                                    radar.center_frequency_hz, layer)  # fmt: skip
    _, plain = pulse_power_kernel(radar.bandwidth_hz, radar.sample_interval_s, radar.range_window)
    weights = weights / plain.sum()  # phase only: Σ weights = Σ plain; absorption lowers it
    out = ds.copy()
    power = np.nan_to_num(ds["power"].values.astype(np.float64))
    dispersed = convolve1d(power, weights, axis=-1, mode="constant")
    attrs = dict(ds["power"].attrs)
    out["power"] = (ds["power"].dims, np.where(np.isnan(ds["power"].values), np.nan, dispersed).astype(np.float32))
    out["power"].attrs = attrs
    out.attrs["ionosphere_tec_el_m2"] = layer.tec_el_m2
    return out
