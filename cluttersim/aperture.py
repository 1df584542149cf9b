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

The focused aperture can also be given by its processed Doppler bandwidth B_D
(``doppler_bandwidth_hz``): a point is seen over the along-track angles whose
Doppler shift 2v sin(θ)/λ spans B_D, an aperture L = λR B_D/(2v), hence
δ = v/B_D at every range (Curlander & McDonough 1991, §4.1; cited from memory).
v is the platform speed (``platform_speed_m_s``, or from the track's times:
distance between consecutive antenna positions over time, median); for an
orbiter the exact value for surface points is slightly lower (the footprint
moves at v·Rp/(Rp+h)): a flat-geometry approximation (4 % at 300 km on Mars).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

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


def doppler_resolution_m(platform_speed_m_s, doppler_bandwidth_hz):
    """Along-track resolution of focusing over a Doppler bandwidth B_D, δ = v/B_D, metres."""
    return np.asarray(platform_speed_m_s) / doppler_bandwidth_hz


def along_track_weight(along_m, range_m, wavelength_m, aperture: str, aperture_length_m: float = 0.0,
                       resolution_m: float | None = None):  # fmt: skip
    """Power weight of a facet at along-track offset ``along_m`` and range ``range_m`` (see module);
    ``resolution_m``: a focused resolution δ fixed at every range (the Doppler-bandwidth form)."""
    y = np.asarray(along_m, dtype=np.float64)
    if aperture == "none":
        return np.ones_like(y)
    if aperture == "unfocused":
        return (np.abs(y) <= fresnel_zone_radius_m(wavelength_m, range_m)).astype(np.float64)
    if resolution_m is not None:
        return np.sinc(y / resolution_m) ** 2
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
    doppler_bandwidth_hz: float = 0.0
    platform_speed_m_s: float = 0.0

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
        for key in ("doppler_bandwidth_hz", "platform_speed_m_s"):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
                raise ConfigError(f"[processing] {key} = {value!r}: expected a number >= 0")
        if self.aperture == "focused" and (length > 0) == (self.doppler_bandwidth_hz > 0):
            raise ConfigError(
                "[processing] aperture = 'focused' needs exactly one of aperture_length_m > 0 (the processed aperture) "
                "and doppler_bandwidth_hz > 0 (the processed Doppler bandwidth)"
            )

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

    @property
    def doppler_focused(self) -> bool:
        """Focused by a Doppler bandwidth (δ = v/B_D) rather than an aperture length."""
        return self.aperture == "focused" and self.doppler_bandwidth_hz > 0

    def with_track_speed(self, track, body) -> "ProcessingConfig":
        """This table with ``platform_speed_m_s`` taken from the track's times when the Doppler
        form needs it and it is not given: the median of |Δ position| / Δt between consecutive
        antenna positions (body-fixed)."""
        if not self.doppler_focused or self.platform_speed_m_s > 0:
            return self
        if track.time_s is None or len(track) < 2:
            raise ConfigError(
                f"[processing] doppler_bandwidth_hz needs the platform speed: give platform_speed_m_s, or a track "
                f"with a time column and at least two traces ({track.source} has none)"
            )
        xyz = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m)
        speed = np.linalg.norm(np.diff(xyz, axis=0), axis=1) / np.diff(track.time_s)
        return replace(self, platform_speed_m_s=float(np.median(speed)))

    def kernel_params(self, wavelength_m: float) -> np.ndarray:
        """(aperture code, aperture length m, wavelength m); the Doppler form is code 3 with the
        fixed resolution δ = v/B_D in place of the length."""
        if self.doppler_focused:
            if not self.platform_speed_m_s > 0:
                raise ValueError("kernel_params: the platform speed is not known yet (ProcessingConfig.with_track_speed)")
            delta = float(doppler_resolution_m(self.platform_speed_m_s, self.doppler_bandwidth_hz))
            return np.array([3.0, delta, float(wavelength_m)])
        return np.array([float(APERTURES[self.aperture]), float(self.aperture_length_m), float(wavelength_m)])

    def to_dict(self) -> dict:
        return asdict(self)
