"""Along-track processing emulated as a weight on each facet (the ``[processing]`` table).

A sounder's processed radargram does not see the whole unfocused footprint
ahead of and behind the spacecraft:

* ``aperture = "none"`` — every facet counts fully (raw, unprocessed echoes);
* ``"unfocused"`` — unfocused (Doppler-filtered) processing keeps the first
  Fresnel zone: facets whose along-track offset y from the antenna satisfies
  |y| ≤ r_F = √(λR/2) count, the others not (common practice; e.g. Curlander
  & McDonough, *Synthetic Aperture Radar*, 1991, §1.2);
* ``"focused"`` — a synthetic aperture of length L focuses along track to the
  resolution δ = λR/(2L) (Curlander & McDonough 1991, eq. 1.2.9 form); the
  processed response in power is sinc²(y/δ), sinc(x) = sin(πx)/(πx), so
  clutter ahead and behind is suppressed while cross-track clutter (y ≈ 0)
  stays.

R is the facet's range, λ the wavelength at the centre frequency. The weight
multiplies the facet's power in the kernel (with the antenna pattern).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from .errors import ConfigError

#: Aperture mode → kernel code.
APERTURES = {"none": 0, "unfocused": 1, "focused": 2}


def fresnel_zone_radius_m(wavelength_m, range_m):
    """Radius of the first Fresnel zone, √(λR/2), metres (common practice)."""
    return np.sqrt(0.5 * np.asarray(wavelength_m) * np.asarray(range_m))


def focused_resolution_m(wavelength_m, range_m, aperture_length_m):
    """Along-track resolution of a focused synthetic aperture, δ = λR/(2L), metres."""
    return np.asarray(wavelength_m) * np.asarray(range_m) / (2.0 * aperture_length_m)


def along_track_weight(along_m, range_m, wavelength_m, aperture: str, aperture_length_m: float = 0.0):
    """Power weight of a facet at along-track offset ``along_m`` and range ``range_m`` (see module)."""
    y = np.asarray(along_m, dtype=np.float64)
    if aperture == "none":
        return np.ones_like(y)
    if aperture == "unfocused":
        return (np.abs(y) <= fresnel_zone_radius_m(wavelength_m, range_m)).astype(np.float64)
    return np.sinc(y / focused_resolution_m(wavelength_m, range_m, aperture_length_m)) ** 2


@dataclass(frozen=True)
class ProcessingConfig:
    """The ``[processing]`` table: ``aperture`` and, when focused, ``aperture_length_m``;
    ``shadowing`` turns on line-of-sight shadowing (:func:`cluttersim.kernels.hidden_from_antenna`);
    ``mode = "coherent"`` sums facet echoes with their phase
    (:func:`cluttersim.kernels.accumulate_complex`), with a random phase per facet
    (``random_phase``, reproducible from ``seed``).

    ``presum = N`` sums each run of N consecutive pulses of the track into one
    output trace (:mod:`cluttersim.presum`): ``presum_mode = "incoherent"``
    averages their detected power (either mode), ``"coherent"`` averages their
    complex echoes before detection (coherent mode only: it needs the phase).
    """

    aperture: str = "none"
    aperture_length_m: float = 0.0
    shadowing: bool = False
    mode: str = "incoherent"
    random_phase: bool = True
    seed: int = 0
    presum: int = 1
    presum_mode: str = "incoherent"

    def __post_init__(self):
        if self.aperture not in APERTURES:
            raise ConfigError(f"[processing] aperture = {self.aperture!r}: expected one of {', '.join(APERTURES)}")
        length = self.aperture_length_m
        if isinstance(length, bool) or not isinstance(length, (int, float)) or not math.isfinite(length) or length < 0:
            raise ConfigError(f"[processing] aperture_length_m = {length!r}: expected a length >= 0 in metres")
        if self.mode not in ("incoherent", "coherent"):
            raise ConfigError(f"[processing] mode = {self.mode!r}: expected \"incoherent\" or \"coherent\"")
        if not isinstance(self.random_phase, bool):
            raise ConfigError(f"[processing] random_phase = {self.random_phase!r}: expected true or false")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed < 2**63:
            raise ConfigError(f"[processing] seed = {self.seed!r}: expected an integer >= 0")
        if not isinstance(self.shadowing, bool):
            raise ConfigError(f"[processing] shadowing = {self.shadowing!r}: expected true or false")
        if isinstance(self.presum, bool) or not isinstance(self.presum, int) or not 1 <= self.presum <= 100_000:
            raise ConfigError(f"[processing] presum = {self.presum!r}: expected an integer number of pulses >= 1")
        if self.presum_mode not in ("incoherent", "coherent"):
            raise ConfigError(f"[processing] presum_mode = {self.presum_mode!r}: expected \"incoherent\" or \"coherent\"")
        if self.presum_mode == "coherent" and self.presum > 1 and self.mode != "coherent":
            raise ConfigError(
                "[processing] presum_mode = 'coherent' sums complex echoes: expected mode = 'coherent' "
                "(the incoherent mode has no phase)"
            )
        if self.aperture == "focused" and not length > 0:
            raise ConfigError("[processing] aperture = 'focused' needs aperture_length_m > 0 (the processed aperture)")

    @classmethod
    def from_dict(cls, data) -> "ProcessingConfig":
        if not isinstance(data, dict):
            raise ConfigError("[processing] must be a table")
        names = list(cls.__dataclass_fields__)
        for key, value in data.items():
            if key not in names:
                raise ConfigError(f"[processing] unknown key {key!r}: expected one of {', '.join(names)}")
            if key in ("aperture", "mode", "presum_mode") and not isinstance(value, str):
                raise ConfigError(f"[processing] {key} = {value!r}: expected a string")
        return cls(**data)

    def kernel_params(self, wavelength_m: float) -> np.ndarray:
        """(aperture code, aperture length m, wavelength m)."""
        return np.array([float(APERTURES[self.aperture]), float(self.aperture_length_m), float(wavelength_m)])

    def to_dict(self) -> dict:
        return asdict(self)
