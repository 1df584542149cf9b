"""Radar instrument: configuration and the pure physics of ranging.

Functions here are pure and carry their units in their names. The instrument
configuration :class:`RadarConfig` mirrors the ``[radar]`` table of the radar
TOML (see :mod:`cluttersim.config`).

References
----------
.. [1] Skolnik, M. I. (2001). *Introduction to Radar Systems*, 3rd ed.,
       McGraw-Hill. Radar equation (eq. 1.7), range resolution ΔR = c/(2B).
.. [2] Curlander, J. C. & McDonough, R. N. (1991). *Synthetic Aperture Radar:
       Systems and Signal Processing*, Wiley, ch. 3 (matched-filter response of a
       linear FM pulse: |sinc(Bt)|, and its weighting by Hann/Hamming windows).
.. [3] Harris, F. J. (1978). On the use of windows for harmonic analysis with
       the discrete Fourier transform. Proc. IEEE 66(1), 51–83 (window
       coefficients: Hann a0 = 0.5, Hamming a0 = 0.54).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from ..errors import ConfigError
from ..validate import MAX_TRANSMIT_POWER_W

#: Raised-cosine window coefficients a0 in w(f) = a0 + (1 − a0) cos(2πf/B), |f| ≤ B/2 ([3]_).
RANGE_WINDOWS = {"none": 1.0, "hann": 0.5, "hamming": 0.54}

#: Auto window: sample 0 lies this many samples before the earliest surface echo
#: (or a quarter of the window for very short windows).
AUTO_WINDOW_MARGIN_SAMPLES = 32


def wavelength_m(frequency_hz: float) -> float:
    """Free-space wavelength λ = c / f in metres."""
    return SPEED_OF_LIGHT_M_S / frequency_hz


def two_way_delay_s(range_m):
    """Two-way travel time t = 2R / c in seconds of a one-way range in metres."""
    return 2.0 * np.asarray(range_m, dtype=np.float64) / SPEED_OF_LIGHT_M_S


def range_from_delay_m(delay_s):
    """One-way range R = c t / 2 in metres of a two-way delay in seconds."""
    return 0.5 * SPEED_OF_LIGHT_M_S * np.asarray(delay_s, dtype=np.float64)


def range_resolution_m(bandwidth_hz: float) -> float:
    """Free-space range resolution of a compressed pulse, ΔR = c / (2B) in metres ([1]_)."""
    return SPEED_OF_LIGHT_M_S / (2.0 * bandwidth_hz)


def pulse_limited_radius_m(height_m, bandwidth_hz: float, body_radius_m: float = math.inf):
    """Radius of the pulse-limited footprint over a level surface, in metres.

    r = sqrt(2 h ΔR / (1 + h/Rp)), ΔR = c/(2B) the range resolution, h the height
    above the surface and Rp the body's radius (Chelton, Walsh & MacArthur 1989,
    J. Atmos. Oceanic Technol. 6(3), eq. 2, with cτ = 2ΔR): the ground radius
    within which echoes arrive less than one range cell after the nadir echo.
    """
    h = np.asarray(height_m, dtype=np.float64)
    return np.sqrt(2.0 * h * range_resolution_m(bandwidth_hz) / (1.0 + h / body_radius_m))


def apparent_depth_m(delay_after_surface_s, permittivity: float = 3.15):
    """Depth below the surface at which an echo delayed by Δt would lie in a medium
    of real relative permittivity ε′: d = c Δt / (2 √ε′) (common practice; ε′ = 3.15
    is water ice). With ε′ = 1 this is the extra free-space range c Δt / 2."""
    if not permittivity >= 1.0:
        raise ValueError(f"permittivity {permittivity!r}: expected a real relative permittivity >= 1")
    return SPEED_OF_LIGHT_M_S * np.asarray(delay_after_surface_s, dtype=np.float64) / (2.0 * math.sqrt(permittivity))


def delay_after_surface_s(depth_m, permittivity: float = 3.15):
    """Inverse of :func:`apparent_depth_m`: Δt = 2 d √ε′ / c in seconds."""
    if not permittivity >= 1.0:
        raise ValueError(f"permittivity {permittivity!r}: expected a real relative permittivity >= 1")
    return 2.0 * np.asarray(depth_m, dtype=np.float64) * math.sqrt(permittivity) / SPEED_OF_LIGHT_M_S


def radar_equation_power_w(transmit_power_w, gain_linear, wavelength_m_, sigma_m2, range_m):
    """Monostatic radar equation ([1]_): Pr = Pt G² λ² σ / ((4π)³ R⁴), in watts."""
    return transmit_power_w * gain_linear**2 * wavelength_m_**2 * sigma_m2 / ((4.0 * math.pi) ** 3 * np.asarray(range_m) ** 4)


def compressed_pulse_amplitude(t_s, bandwidth_hz: float, window: str = "hann"):
    """Amplitude response of a range-compressed pulse, normalised to 1 at t = 0.

    For spectral weighting w(f) = a0 + (1 − a0) cos(2πf/B) over |f| ≤ B/2 the
    inverse Fourier transform is, with x = Bt ([2]_):

        h(x) = a0 sinc(x) + (1 − a0)/2 [sinc(x − 1) + sinc(x + 1)]

    ("none": a0 = 1, the |sinc| response of an unweighted chirp).
    """
    a0 = RANGE_WINDOWS[window]
    x = bandwidth_hz * np.asarray(t_s, dtype=np.float64)
    return (a0 * np.sinc(x) + 0.5 * (1.0 - a0) * (np.sinc(x - 1.0) + np.sinc(x + 1.0))) / a0


#: The level convention of ``power`` in files written by this version (the ``power_convention``
#: attribute of radargram.nc; files without it use :data:`LEGACY_POWER_CONVENTION`).
POWER_CONVENTION = "compressed-peak"
#: Files written before the convention was named: power per delay sample, the facet power
#: spread over bins and convolved with a compressed-pulse kernel summing to 1.
LEGACY_POWER_CONVENTION = "energy-per-sample"
#: One-line description written beside :data:`POWER_CONVENTION`.
POWER_CONVENTION_TEXT = (
    "received power at the output of the range-compressed receiver referred to its input: a point target reads "
    "Pt G^2 lambda^2 sigma / ((4 pi)^3 R^4) at its peak sample, a diffuse surface Pt G^2 lambda^2 sigma0 A_tau / "
    "((4 pi)^3 R^4) with A_tau the ground area within range extent c tau_eff / 2, tau_eff = integral |h|^2 dt / "
    "max |h|^2 of the compressed pulse; whatever the sample interval"
)


def window_weights(f_over_b, window: str = "hann"):
    """Spectral weighting w(f) = a0 + (1 − a0) cos(2πf/B) at f/B in [−1/2, 1/2], 0 outside ([3]_)."""
    a0 = RANGE_WINDOWS[window]
    x = np.asarray(f_over_b, dtype=np.float64)
    return np.where(np.abs(x) <= 0.5, a0 + (1.0 - a0) * np.cos(2.0 * np.pi * x), 0.0)


def effective_pulse_duration_s(bandwidth_hz: float, window: str = "hann") -> float:
    """τ_eff = ∫|h(t)|² dt / max|h|² of the compressed pulse's amplitude response h, seconds.

    By Parseval, with h(t) = ∫ w(f) e^(i2πft) df and max|h| = h(0) = ∫ w df,
    τ_eff = ∫ w² df / (∫ w df)², evaluated here by quadrature of the window
    (Gauss–Legendre, exact for these cosines to rounding). It is 1/B
    unweighted and 1.5/B for Hann, 1.36/B for Hamming: the windows' equivalent
    noise bandwidths in bins (Harris 1978, Table 1) divided by B.
    """
    x, wq = np.polynomial.legendre.leggauss(64)
    f = 0.5 * x  # f/B on [-1/2, 1/2]
    w = window_weights(f, window)
    integral_w = 0.5 * np.sum(wq * w)  # ∫ w d(f/B)
    integral_w2 = 0.5 * np.sum(wq * w * w)
    return float(integral_w2 / integral_w**2) / bandwidth_hz


def noise_bandwidth_factor(window: str = "hann") -> float:
    """Equivalent noise bandwidth of the range window in units of B: B τ_eff (1 unweighted,
    1.5 Hann; Harris 1978, Table 1 "ENBW"). Receiver noise referred to the input on the
    scale of a point target's peak is k T B F times this (the window's processing loss)."""
    return effective_pulse_duration_s(1.0, window)


def pulse_amplitude_response(t_s, bandwidth_hz: float, window: str = "hann", center_frequency_hz: float | None = None,
                             ionosphere=None):  # fmt: skip
    """Complex amplitude response h(t) of the range-compressed pulse, normalised to max|h| = 1.

    Without an ionosphere this is :func:`compressed_pulse_amplitude` (real, peak 1 at t = 0).
    With ``ionosphere`` (:class:`cluttersim.physics.ionosphere.IonosphereConfig`) the pulse's spectrum
    is multiplied by the layer's two-way transfer function H(f) at RF frequency f = f_c + ν
    (:func:`cluttersim.physics.ionosphere.two_way_transfer`):

        h(t) = ∫ w(ν) H(f_c + ν) e^(i2πνt) dν / ∫ w(ν) dν,

    so the response is delayed, dispersed and its peak lowered (still normalised by the
    undisturbed peak). The integral is a midpoint sum over the band fine enough that its
    period in t exceeds four times the response's span.

    This is the function coherent contributions are convolved with: the complex field
    deposited per delay bin ⊛ h, detected as |·|², reads on the ``power`` scale.
    """
    t = np.asarray(t_s, dtype=np.float64)
    if ionosphere is None or not ionosphere.active:
        return compressed_pulse_amplitude(t, bandwidth_hz, window).astype(np.complex128)
    if center_frequency_hz is None:
        raise ValueError("pulse_amplitude_response: the ionosphere needs center_frequency_hz")
    from .ionosphere import two_way_transfer

    span = max(float(np.max(np.abs(t), initial=0.0)), 1.0 / bandwidth_hz)
    n = int(max(512, math.ceil(8.0 * bandwidth_hz * span)))
    nu = ((np.arange(n) + 0.5) / n - 0.5) * bandwidth_hz
    spec = window_weights(nu / bandwidth_hz, window) * two_way_transfer(center_frequency_hz + nu, ionosphere)
    norm = np.sum(window_weights(nu / bandwidth_hz, window))
    out = np.empty(t.shape, dtype=np.complex128)
    flat = t.ravel()
    res = out.reshape(-1)
    for a in range(0, flat.size, 4096):
        phase = np.exp(2j * np.pi * np.outer(flat[a : a + 4096], nu))
        res[a : a + 4096] = phase @ spec / norm
    return out


def _pulse_extent_s(bandwidth_hz: float, window: str = "hann", center_frequency_hz: float | None = None,
                    ionosphere=None) -> tuple[float, float]:  # fmt: skip
    """Delays (s) before and after the centre where :func:`pulse_power_kernel` truncates the response."""
    extent_s = (64.0 if window == "none" else 16.0) / bandwidth_hz
    lo_s, hi_s = -extent_s, extent_s
    if ionosphere is not None and ionosphere.active:
        from .ionosphere import group_delay_two_way_s

        f_lo = center_frequency_hz - 0.5 * bandwidth_hz
        f_hi = center_frequency_hz + 0.5 * bandwidth_hz
        d_lo, d_hi = group_delay_two_way_s(ionosphere.tec_el_m2, np.array([f_hi, f_lo]))
        lo_s, hi_s = d_lo - extent_s, d_hi + extent_s
    return float(lo_s), float(hi_s)


def pulse_half_width_samples(bandwidth_hz: float, sample_interval_s: float, window: str = "hann",
                             center_frequency_hz: float | None = None, ionosphere=None) -> int:  # fmt: skip
    """Samples on each side of the centre of :func:`pulse_power_kernel`'s response (known before
    the response is computed, for the memory check)."""
    lo_s, hi_s = _pulse_extent_s(bandwidth_hz, window, center_frequency_hz, ionosphere)
    return int(math.ceil(max(abs(lo_s), abs(hi_s)) / sample_interval_s))


def pulse_power_kernel(bandwidth_hz: float, sample_interval_s: float, window: str = "hann",
                       center_frequency_hz: float | None = None, ionosphere=None):  # fmt: skip
    """Compressed-pulse power response on the sample grid, peak-normalised.

    Returns ``(offsets, weights)``: integer sample offsets −H..H and
    |h(k Δt)|², h the amplitude response of :func:`pulse_amplitude_response`
    (peak 1 at offset 0 without an ionosphere). Convolved with the power per
    delay bin of the facets, it gives the ``power`` convention
    (:data:`POWER_CONVENTION`): a point target in one bin reads its radar-equation
    power at its peak sample, and since Δt ≤ 1/B (the band of |h|² is [−B, B])
    Poisson's summation formula makes Σ_k |h(kΔt + u)|² Δt = ∫|h|² dt = τ_eff
    exactly for any sub-sample shift u, so a diffuse surface of power density ρ
    per unit delay reads ρ τ_eff. The response is truncated where the window's
    sidelobes have decayed (±16/B for Hann and Hamming, ±64/B unweighted); an
    ionosphere widens it to cover its group delays across the band.
    """
    lo_s, hi_s = _pulse_extent_s(bandwidth_hz, window, center_frequency_hz, ionosphere)
    half = int(math.ceil(max(abs(lo_s), abs(hi_s)) / sample_interval_s))
    offsets = np.arange(-half, half + 1)
    t = offsets * sample_interval_s
    if ionosphere is not None and ionosphere.active:
        weights = np.zeros(offsets.size)
        inside = (t >= lo_s) & (t <= hi_s)
        weights[inside] = np.abs(pulse_amplitude_response(t[inside], bandwidth_hz, window, center_frequency_hz,
                                                          ionosphere)) ** 2  # fmt: skip
    else:
        weights = compressed_pulse_amplitude(t, bandwidth_hz, window) ** 2
    return offsets, weights


@dataclass(frozen=True)
class RadarConfig:
    """Instrument settings (the ``[radar]`` TOML table). Units are in the names.

    ``window_start_s`` is either a number — the absolute two-way delay of
    sample 0, the same for every trace — or ``"auto"``: per trace, sample 0 is
    placed :data:`AUTO_WINDOW_MARGIN_SAMPLES` samples (at most a quarter of the
    window) before the earliest surface echo.
    """

    center_frequency_hz: float = 20e6
    bandwidth_hz: float = 10e6
    sample_interval_s: float = 37.5e-9
    samples: int = 2048
    window_start_s: float | str = "auto"
    transmit_power_w: float = 10.0
    antenna_gain_dbi: float = 0.0
    range_window: str = "hann"

    def __post_init__(self):
        for key in ("center_frequency_hz", "bandwidth_hz", "sample_interval_s", "transmit_power_w"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value > 0):
                raise ConfigError(f"[radar] {key} = {value!r}: expected a positive number")
        if self.transmit_power_w > MAX_TRANSMIT_POWER_W:
            raise ConfigError(
                f"[radar] transmit_power_w = {self.transmit_power_w!r}: expected at most {MAX_TRANSMIT_POWER_W:g} W"
            )
        if self.samples < 2:
            raise ConfigError(f"[radar] samples = {self.samples!r}: expected an integer of at least 2")
        if self.samples > 1_000_000:
            raise ConfigError(f"[radar] samples = {self.samples!r}: expected at most 1,000,000 samples per trace")
        if self.sample_interval_s > 1.0 / self.bandwidth_hz:
            raise ConfigError(
                f"[radar] sample_interval_s = {self.sample_interval_s!r}: expected at most 1/bandwidth_hz "
                f"({1.0 / self.bandwidth_hz!r} s), or the compressed pulse falls between samples"
            )
        if self.bandwidth_hz > 2.0 * self.center_frequency_hz:
            raise ConfigError(
                f"[radar] bandwidth_hz = {self.bandwidth_hz!r}: expected at most twice center_frequency_hz "
                f"({self.center_frequency_hz!r})"
            )
        if isinstance(self.window_start_s, str):
            if self.window_start_s != "auto":
                raise ConfigError(f"[radar] window_start_s = {self.window_start_s!r}: expected \"auto\" or a delay in seconds")
        elif not (math.isfinite(self.window_start_s) and self.window_start_s >= 0):
            raise ConfigError(f"[radar] window_start_s = {self.window_start_s!r}: expected \"auto\" or a delay >= 0 s")
        if not math.isfinite(self.antenna_gain_dbi) or abs(self.antenna_gain_dbi) > 100:
            raise ConfigError(f"[radar] antenna_gain_dbi = {self.antenna_gain_dbi!r}: expected a gain between -100 and 100 dBi")
        if self.range_window not in RANGE_WINDOWS:
            raise ConfigError(
                f"[radar] range_window = {self.range_window!r}: expected one of {', '.join(sorted(RANGE_WINDOWS))}"
            )

    @property
    def wavelength_m(self) -> float:
        """Free-space wavelength at the centre frequency, metres."""
        return wavelength_m(self.center_frequency_hz)

    @property
    def gain_linear(self) -> float:
        """Antenna gain as a power ratio."""
        return 10.0 ** (self.antenna_gain_dbi / 10.0)

    @property
    def window_length_s(self) -> float:
        """Duration of the recording window, samples × sample interval."""
        return self.samples * self.sample_interval_s

    @property
    def auto_margin_samples(self) -> int:
        """Samples placed before the earliest surface echo in ``"auto"`` mode."""
        return min(AUTO_WINDOW_MARGIN_SAMPLES, self.samples // 4)

    @property
    def mainlobe_samples(self) -> int:
        """Samples spanned by the compressed pulse's main lobe, ⌈1 / (B dt)⌉ (at least 1): the
        delay resolution 1/B (common practice) on the sample grid."""
        return max(1, int(math.ceil(1.0 / (self.bandwidth_hz * self.sample_interval_s))))

    def radar_constant_w_m2(self) -> float:
        """Pt G² λ² / (4π)³, the factor multiplying σ0 A / R⁴ in the radar equation (W m²)."""
        return self.transmit_power_w * self.gain_linear**2 * self.wavelength_m**2 / (4.0 * math.pi) ** 3

    def to_dict(self) -> dict:
        return asdict(self)


#: Keys a ``[[band]]`` table may set; the others come from ``[radar]``.
BAND_KEYS = ("center_frequency_hz", "bandwidth_hz", "transmit_power_w", "antenna_gain_dbi", "range_window")


@dataclass(frozen=True)
class BandConfig:
    """One frequency band of a multi-band sounder (a ``[[band]]`` TOML table).

    A band has a ``name`` (letters, digits, ``-`` and ``_``: it appears in file
    names) and overrides some of the ``[radar]`` settings (:data:`BAND_KEYS`):
    at least its centre frequency and bandwidth. The recording window (sample
    interval, samples, window start) is shared by all bands, so every band's
    bandwidth must satisfy sample_interval_s ≤ 1/bandwidth_hz. Lower
    frequencies penetrate deeper; wider bandwidths resolve finer, ΔR = c/(2B)
    (common practice; Skolnik 2001).
    """

    name: str
    overrides: dict

    def __post_init__(self):
        if not isinstance(self.name, str) or not self.name or not all(ch.isalnum() or ch in "-_" for ch in self.name):
            raise ConfigError(f"[[band]] name = {self.name!r}: expected letters, digits, '-' or '_' (it names files)")
        for key in self.overrides:
            if key not in BAND_KEYS:
                raise ConfigError(f"[[band]] {self.name!r}: unknown key {key!r}: expected name, {', '.join(BAND_KEYS)}")
        for key in ("center_frequency_hz", "bandwidth_hz"):
            if key not in self.overrides:
                raise ConfigError(f"[[band]] {self.name!r}: missing {key}")

    def radar(self, base: RadarConfig) -> RadarConfig:
        """The ``[radar]`` settings with this band's overrides (validated as a ``[radar]`` table)."""
        try:
            return replace(base, **self.overrides)
        except ConfigError as exc:
            raise ConfigError(f"[[band]] {self.name!r}: {str(exc).removeprefix('[radar] ')}") from None

    def to_dict(self) -> dict:
        return {"name": self.name, **self.overrides}
