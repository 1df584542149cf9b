"""Along-track processing emulated as a weight on each facet (the ``[processing]`` table).

A sounder's processed radargram does not see the whole unfocused footprint
ahead of and behind the spacecraft:

* ``aperture = "none"`` — every facet counts fully (raw, unprocessed echoes);
* ``"unfocused"`` — unfocused (unphased) processing sums the pulses over an
  aperture of length L_u = √(λR) (the two-way path difference at its ends stays
  within λ/4; Curlander & McDonough, *Synthetic Aperture Radar*, 1991, §1.2, from
  memory) without phase correction. A point at along-track offset y then gets
  the power response of that sum normalised by the number of pulses,

      w(y) = |(1/L) ∫_{−L/2}^{L/2} exp(−i 2π (y − x)² / (λR)) dx|²,

  a Fresnel-integral expression (:func:`unfocused_response`) in u = y/√(λR)
  alone: 0.80 at u = 0, half of that at |u| = 0.24, sinc²(2u) far out;
* ``"focused"`` — a synthetic aperture of length L focuses along track to the
  resolution δ = λR/(2L) (Curlander & McDonough 1991, eq. 1.2.9 form); the
  processed response in power is sinc²(y/δ), sinc(x) = sin(πx)/(πx), so
  clutter ahead and behind is suppressed while cross-track clutter (y ≈ 0)
  stays.

R is the facet's range, λ the wavelength at the centre frequency. The weight
multiplies the facet's power in the kernel (with the antenna pattern).

The focused aperture can also be given by its processed Doppler bandwidth B_D
(``doppler_bandwidth_hz``): a point is seen over the along-track angles whose
Doppler shift spans B_D, hence δ = v_g/B_D (Curlander & McDonough 1991, §4.1;
cited from memory), with v_g the speed of the footprint over the ground:
v_g = v Rp/(Rp + h) for a platform at speed v and height h over a body of
radius Rp (the same angular rate; h the track's median altitude). v is
``platform_speed_m_s`` or, from the track's times, the median distance between
consecutive antenna positions over time.

Processing gains (``pulse_length_s``, ``prf_hz``): a chirp of length τ
compressed over bandwidth B gains τB in signal-to-noise ratio, and an
aperture summing N = PRF · T pulses coherently (T = L/v the time the platform
takes over the aperture L) gains N (Skolnik, *Introduction to Radar Systems*,
3rd ed., 2001, ch. 2 (integration of pulses) and §6.2 (pulse compression)).
cluttersim keeps the echo on its radar-equation scale (the responses above
are normalised per pulse) and divides the noise by the gains, so power over
noise is the output SNR (:func:`processing_gain`).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np
from scipy.special import fresnel

from ..errors import ConfigError

#: Aperture mode → kernel code.
APERTURES = {"none": 0, "unfocused": 1, "focused": 2}


def fresnel_zone_radius_m(wavelength_m, range_m):
    """Radius of the first Fresnel zone, √(λR/2), metres (common practice)."""
    return np.sqrt(0.5 * np.asarray(wavelength_m) * np.asarray(range_m))


def unfocused_aperture_m(wavelength_m, range_m):
    """Length of an unfocused aperture, L_u = √(λR), metres (see module)."""
    return np.sqrt(np.asarray(wavelength_m) * np.asarray(range_m))


def unfocused_response(u, aperture_over_fresnel: float = 1.0):
    """Power response of an unphased sum over an aperture L = a √(λR), per pulse, at along-track
    offset y = u √(λR):

        w(u) = [(C(s2) − C(s1))² + (S(s2) − S(s1))²] / (4a²),  s1,2 = ∓a − 2u,

    C and S the Fresnel integrals ∫0^s cos / sin(πt²/2) dt (scipy.special.fresnel): the
    integral of the module docstring with t = 2(x − y)/√(λR)."""
    a = float(aperture_over_fresnel)
    u = np.asarray(u, dtype=np.float64)
    s1, c1 = fresnel(-a - 2.0 * u)
    s2, c2 = fresnel(a - 2.0 * u)
    return ((c2 - c1) ** 2 + (s2 - s1) ** 2) / (4.0 * a * a)


#: The unfocused response is tabulated for the kernel on |u| = |y|/√(λR) in [0, UNFOCUSED_TABLE_MAX]
#: every 1/UNFOCUSED_TABLE_STEPS and linearly interpolated; beyond, its far-field form sinc²(2u).
UNFOCUSED_TABLE_MAX = 16.0
UNFOCUSED_TABLE_STEPS = 512


def unfocused_table() -> np.ndarray:
    """w(u) of :func:`unfocused_response` on the kernel's grid (see :data:`UNFOCUSED_TABLE_MAX`)."""
    u = np.arange(int(UNFOCUSED_TABLE_MAX * UNFOCUSED_TABLE_STEPS) + 1) / UNFOCUSED_TABLE_STEPS
    return unfocused_response(u)


def focused_resolution_m(wavelength_m, range_m, aperture_length_m):
    """Along-track resolution of a focused synthetic aperture, δ = λR/(2L), metres."""
    return np.asarray(wavelength_m) * np.asarray(range_m) / (2.0 * aperture_length_m)


def doppler_resolution_m(ground_speed_m_s, doppler_bandwidth_hz):
    """Along-track resolution of focusing over a Doppler bandwidth B_D, δ = v_g/B_D, metres
    (v_g: the footprint's speed, :func:`footprint_speed_m_s`)."""
    return np.asarray(ground_speed_m_s) / doppler_bandwidth_hz


def footprint_speed_m_s(platform_speed_m_s, height_m, body_radius_m):
    """Speed of the nadir footprint over the surface, v_g = v Rp / (Rp + h) (same angular rate)."""
    return np.asarray(platform_speed_m_s) * body_radius_m / (body_radius_m + np.asarray(height_m))


def along_track_weight(along_m, range_m, wavelength_m, aperture: str, aperture_length_m: float = 0.0,
                       resolution_m: float | None = None):  # fmt: skip
    """Power weight of a facet at along-track offset ``along_m`` and range ``range_m`` (see module);
    ``resolution_m``: a focused resolution δ fixed at every range (the Doppler-bandwidth form)."""
    y = np.asarray(along_m, dtype=np.float64)
    if aperture == "none":
        return np.ones_like(y)
    if aperture == "unfocused":
        return unfocused_response(y / np.sqrt(np.asarray(wavelength_m) * np.asarray(range_m)))
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
    footprint_speed_m_s: float = 0.0
    pulse_length_s: float = 0.0
    prf_hz: float = 0.0

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
        for key in ("doppler_bandwidth_hz", "platform_speed_m_s", "footprint_speed_m_s", "pulse_length_s", "prf_hz"):
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

    @property
    def needs_speed(self) -> bool:
        """Whether the platform speed is needed: the Doppler form, or an aperture's integration gain."""
        return self.doppler_focused or (self.prf_hz > 0 and self.aperture != "none")

    def with_track_speed(self, track, body) -> "ProcessingConfig":
        """This table with ``platform_speed_m_s`` taken from the track's times when it is needed
        (:attr:`needs_speed`) and not given (the median of |Δ position| / Δt between consecutive
        antenna positions, body-fixed), and ``footprint_speed_m_s`` = v Rp/(Rp + h) unless given
        (h the track's median altitude, Rp the body's mean radius)."""
        if not self.needs_speed:
            return self
        out = self
        if self.platform_speed_m_s <= 0:
            if track.time_s is None or len(track) < 2:
                what = "doppler_bandwidth_hz" if self.doppler_focused else "prf_hz (the aperture's integration gain)"
                raise ConfigError(
                    f"[processing] {what} needs the platform speed: give platform_speed_m_s, or a track "
                    f"with a time column and at least two traces ({track.source} has none)"
                )
            xyz = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m)
            speed = np.linalg.norm(np.diff(xyz, axis=0), axis=1) / np.diff(track.time_s)
            out = replace(out, platform_speed_m_s=float(np.median(speed)))
        if out.footprint_speed_m_s <= 0:
            h = float(np.median(track.alt_m))
            v_g = float(footprint_speed_m_s(out.platform_speed_m_s, h, body.mean_radius_m))
            out = replace(out, footprint_speed_m_s=v_g)
        return out

    def integration_gain(self, wavelength_m: float, height_m: float) -> float:
        """Pulses summed coherently by the along-track aperture at range ``height_m`` (nadir):
        N = PRF · L / v, with L the aperture length (focused: ``aperture_length_m``, or λ h B_D /
        (2 v_g) for the Doppler form; unfocused: √(λh)); 1 without ``prf_hz`` or aperture."""
        if self.prf_hz <= 0 or self.aperture == "none":
            return 1.0
        v = self.platform_speed_m_s
        if not v > 0:
            raise ValueError("integration_gain: the platform speed is not known yet (ProcessingConfig.with_track_speed)")
        if self.aperture == "unfocused":
            length = float(unfocused_aperture_m(wavelength_m, height_m))
        elif self.doppler_focused:
            length = wavelength_m * height_m * self.doppler_bandwidth_hz / (2.0 * self.footprint_speed_m_s)
        else:
            length = self.aperture_length_m
        return max(1.0, self.prf_hz * length / v)

    def range_compression_gain(self, bandwidth_hz: float) -> float:
        """τ B of a chirp of length ``pulse_length_s`` (1 without it; Skolnik 2001, §6.2)."""
        return max(1.0, self.pulse_length_s * bandwidth_hz) if self.pulse_length_s > 0 else 1.0

    def kernel_params(self, wavelength_m: float) -> np.ndarray:
        """(aperture code, parameter, wavelength m[, table]): code 2 the aperture length; the
        Doppler form is code 3 with the fixed resolution δ = v_g/B_D; code 1 (unfocused) has the
        table step 1/:data:`UNFOCUSED_TABLE_STEPS` and then the response table
        (:func:`unfocused_table`) after the wavelength."""
        if self.doppler_focused:
            v_g = self.footprint_speed_m_s if self.footprint_speed_m_s > 0 else self.platform_speed_m_s
            if not v_g > 0:
                raise ValueError("kernel_params: the platform speed is not known yet (ProcessingConfig.with_track_speed)")
            delta = float(doppler_resolution_m(v_g, self.doppler_bandwidth_hz))
            return np.array([3.0, delta, float(wavelength_m)])
        if self.aperture == "unfocused":
            return np.concatenate([[1.0, float(UNFOCUSED_TABLE_STEPS), float(wavelength_m)], unfocused_table()])
        return np.array([float(APERTURES[self.aperture]), float(self.aperture_length_m), float(wavelength_m)])

    def to_dict(self) -> dict:
        return asdict(self)
