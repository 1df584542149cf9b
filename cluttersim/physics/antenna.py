"""Antenna gain patterns, applied on transmit and on receive (the ``[antenna]`` table).

The gain toward a direction is ``10^(antenna_gain_dbi/10) × pattern(direction)``
where ``pattern`` is

* ``"isotropic"`` — 1 everywhere (the default);
* ``"dipole"`` — the directivity of a half-wave dipole lying horizontally
  along-track or cross-track (``axis``):

  .. math:: D(\\psi) = D_0 \\left[\\frac{\\cos(\\tfrac{\\pi}{2}\\cos\\psi)}{\\sin\\psi}\\right]^2,
            \\quad D_0 = \\frac{4}{\\mathrm{Cin}(2\\pi)} \\approx 1.64\\ (2.15\\ \\mathrm{dBi})

  with ψ the angle from the dipole's axis (Balanis, *Antenna Theory: Analysis and
  Design*, 3rd ed., 2005, §4.6, eqs. 4-84 and 4-91);
* ``"gaussian"`` — a Gaussian beam looking at nadir with 3 dB full beamwidths
  ``beamwidth_along_deg`` and ``beamwidth_across_deg``, peak 1:
  exp(−4 ln 2 (θa²/Ba² + θc²/Bc²)), θa and θc the off-nadir angles in the
  along-track and cross-track planes (common practice for beam approximations).

Directions are expressed in each trace's frame: along-track (horizontal
direction of travel), right (horizontal, to the right of travel) and down.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.special import sici

from ..errors import ConfigError

#: Pattern name → kernel code.
PATTERNS = {"isotropic": 0, "dipole": 1, "gaussian": 2}
#: Dipole axis name → index of the axis in a trace's frame (along, right, down).
DIPOLE_AXES = {"along-track": 0, "cross-track": 1}


def half_wave_dipole_peak_directivity() -> float:
    """D0 = 4 / Cin(2π), Cin(x) = γ + ln x − Ci(x) (Balanis 2005, eq. 4-91): 1.641."""
    cin = np.euler_gamma + math.log(2 * math.pi) - sici(2 * math.pi)[1]
    return 4.0 / cin


DIPOLE_PEAK = half_wave_dipole_peak_directivity()


def dipole_directivity(cos_from_axis):
    """Half-wave dipole directivity at angle ψ from its axis, given cos ψ (Balanis eq. 4-84)."""
    c = np.asarray(cos_from_axis, dtype=np.float64)
    s2 = np.maximum(1.0 - c * c, 1e-300)
    return DIPOLE_PEAK * np.cos(0.5 * np.pi * c) ** 2 / s2


def gaussian_beam(theta_along_rad, theta_across_rad, beamwidth_along_rad, beamwidth_across_rad):
    """Relative gain exp(−4 ln 2 (θa²/Ba² + θc²/Bc²)) of a Gaussian beam; 1/2 at θ = B/2."""
    ta = np.asarray(theta_along_rad) / beamwidth_along_rad
    tc = np.asarray(theta_across_rad) / beamwidth_across_rad
    return np.exp(-4.0 * math.log(2.0) * (ta * ta + tc * tc))


@dataclass(frozen=True)
class AntennaConfig:
    """The ``[antenna]`` table (see module docstring)."""

    pattern: str = "isotropic"
    axis: str = "along-track"
    beamwidth_along_deg: float = 30.0
    beamwidth_across_deg: float = 30.0

    def __post_init__(self):
        if self.pattern not in PATTERNS:
            raise ConfigError(f"[antenna] pattern = {self.pattern!r}: expected one of {', '.join(PATTERNS)}")
        if self.axis not in DIPOLE_AXES:
            raise ConfigError(f"[antenna] axis = {self.axis!r}: expected one of {', '.join(DIPOLE_AXES)}")
        for key in ("beamwidth_along_deg", "beamwidth_across_deg"):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < 360:
                raise ConfigError(f"[antenna] {key} = {value!r}: expected an angle between 0 and 360 degrees")

    @classmethod
    def from_dict(cls, data) -> "AntennaConfig":
        if not isinstance(data, dict):
            raise ConfigError("[antenna] must be a table")
        names = [f for f in cls.__dataclass_fields__]
        for key, value in data.items():
            if key not in names:
                raise ConfigError(f"[antenna] unknown key {key!r}: expected one of {', '.join(names)}")
            if key in ("pattern", "axis") and not isinstance(value, str):
                raise ConfigError(f"[antenna] {key} = {value!r}: expected a string")
        return cls(**data)

    @property
    def code(self) -> int:
        return PATTERNS[self.pattern]

    def nadir_pattern_gain(self) -> float:
        """One-way pattern gain toward nadir (straight down): the dipole's peak directivity D0
        (its axis is horizontal, ψ = 90°), 1 for the isotropic and Gaussian patterns."""
        return DIPOLE_PEAK if self.pattern == "dipole" else 1.0

    def kernel_params(self) -> np.ndarray:
        """(pattern code, dipole axis index, along beamwidth rad, across beamwidth rad, dipole peak)."""
        return np.array(
            [
                float(self.code),
                float(DIPOLE_AXES[self.axis]),
                math.radians(self.beamwidth_along_deg),
                math.radians(self.beamwidth_across_deg),
                DIPOLE_PEAK,
            ]
        )

    def to_dict(self) -> dict:
        return asdict(self)


def trace_frames(right_unit, up_unit) -> np.ndarray:
    """Per-trace frames (n, 3, 3): rows along-track, right, down (unit vectors).

    along = up × right is the horizontal direction of travel when right = travel × up.
    """
    right = np.asarray(right_unit, dtype=np.float64)
    up = np.asarray(up_unit, dtype=np.float64)
    along = np.cross(up, right)
    return np.ascontiguousarray(np.stack([along, right, -up], axis=1))
