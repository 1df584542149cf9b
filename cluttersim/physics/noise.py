"""Receiver noise: the noise floor of a radargram (the ``[noise]`` TOML table).

The thermal noise power in a receiver of bandwidth B is ([1]_, [2]_)

    P_n = k T B F

with k the Boltzmann constant, T a noise temperature and F the noise factor.
Given a noise temperature T (of the whole system), F = 1; given a noise figure
NF in dB, F = 10^(NF/10) referred to the standard reference temperature
T0 = 290 K ([2]_).

An external (sky) noise temperature T_ext (``sky_temperature_k``: a number,
or ``"galactic"``) replaces the 290 K that a noise figure assumes at the
antenna: P_n = k B (T_ext + T0 (F − 1)), or k B (T_ext + T) with a receiver
noise temperature ([4]_). ``"galactic"`` is ITU-R P.372's median galactic
noise figure F_am = 52 − 23 log10(f / 1 MHz) dB above k T0 b ([4]_), i.e.
T_ext = T0 · 10^(F_am/10): about 47,000 K at 20 MHz. The straight line is a
fit to the median galactic curve between about 2 and 100 MHz (used above the
ionosphere, so without its low-frequency cut-off); outside that range a
warning is given (below 2 MHz the galactic spectrum flattens and is absorbed).

cluttersim's ``power`` is the compressed receiver output referred to its input
(:data:`cluttersim.physics.radar.POWER_CONVENTION`); on that scale the noise per sample
is P_n times the range window's equivalent noise bandwidth B τ_eff (1 for no
window, 1.5 for Hann: its processing loss, [5]_), divided by the processing
gains switched on in ``[processing]`` (:mod:`cluttersim.physics.aperture`): the echo
stays at its radar-equation level and the noise drops, so power / noise is the
output signal-to-noise ratio (Skolnik 2001, ch. 2).

Single-look power of circular complex Gaussian noise is exponentially
distributed with mean P_n ([3]_; common practice); the noise added to each
sample is drawn independently (samples spaced closer than 1/B are in reality
partly correlated; this is not modelled).

References
----------
.. [1] Nyquist, H. (1928). Thermal agitation of electric charge in conductors.
       Phys. Rev. 32(1), 110–113 (available noise power kTB).
.. [2] IEEE Std 161 / Friis, H. T. (1944). Noise figures of radio receivers.
       Proc. IRE 32(7), 419–422 (noise factor F referred to T0 = 290 K).
.. [3] Goodman, J. W. (1976). Some fundamental properties of speckle.
       J. Opt. Soc. Am. 66(11), 1145–1150 (exponential intensity statistics).
.. [4] ITU-R Recommendation P.372 (Radio noise), Table 1 and Fig. 2: median
       galactic noise F_am = c − d log f, c = 52, d = 23 (f in MHz); system
       noise factor f = f_a + f_r − 1 (coefficients from memory).
.. [5] Harris, F. J. (1978). On the use of windows for harmonic analysis with
       the discrete Fourier transform. Proc. IEEE 66(1), 51–83, Table 1
       (equivalent noise bandwidth: Hann 1.50 bins).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ..constants import BOLTZMANN_J_K
from ..errors import ConfigError

#: Standard reference temperature of a noise figure, K (IEEE; Friis 1944).
REFERENCE_TEMPERATURE_K = 290.0


def noise_power_w(bandwidth_hz: float, temperature_k: float | None = None, noise_figure_db: float | None = None) -> float:
    """Thermal noise power P_n = k T B F in watts ([1]_, [2]_ of the module).

    Parameters
    ----------
    bandwidth_hz : float
        Receiver (chirp) bandwidth B, Hz.
    temperature_k : float, optional
        System noise temperature T, K (then F = 1).
    noise_figure_db : float, optional
        Noise figure NF, dB: F = 10^(NF/10) and T = 290 K.

    Exactly one of ``temperature_k`` and ``noise_figure_db`` must be given.

    Examples
    --------
    >>> round(noise_power_w(10e6, temperature_k=290.0) * 1e14, 3)  # kTB at 290 K, 10 MHz
    4.004
    """
    if (temperature_k is None) == (noise_figure_db is None):
        raise ValueError("noise_power_w: expected exactly one of temperature_k and noise_figure_db")
    if not (math.isfinite(bandwidth_hz) and bandwidth_hz > 0):
        raise ValueError(f"bandwidth_hz = {bandwidth_hz!r}: expected a positive number")
    if temperature_k is not None:
        if not (math.isfinite(temperature_k) and temperature_k > 0):
            raise ValueError(f"temperature_k = {temperature_k!r}: expected a positive temperature in K")
        return BOLTZMANN_J_K * temperature_k * bandwidth_hz
    if not math.isfinite(noise_figure_db):
        raise ValueError(f"noise_figure_db = {noise_figure_db!r}: expected a finite number of dB")
    return BOLTZMANN_J_K * REFERENCE_TEMPERATURE_K * bandwidth_hz * 10.0 ** (noise_figure_db / 10.0)


#: ITU-R P.372 median galactic noise F_am = c − d log10(f/MHz) dB (Table 1; from memory).
GALACTIC_C_DB, GALACTIC_D_DB = 52.0, 23.0
#: Frequencies (Hz) over which the straight-line galactic fit is used without a warning.
GALACTIC_VALID_HZ = (2e6, 100e6)


def galactic_noise_figure_db(frequency_hz) -> np.ndarray:
    """Median galactic external noise figure F_am = 52 − 23 log10(f / 1 MHz) dB above k T0 b
    (ITU-R P.372, [4]_ of the module); 22.1 dB at 20 MHz."""
    return GALACTIC_C_DB - GALACTIC_D_DB * np.log10(np.asarray(frequency_hz, dtype=np.float64) / 1e6)


def galactic_temperature_k(frequency_hz, *, warn: bool = True) -> float:
    """External noise temperature T0 · 10^(F_am/10) of the median galactic background (K); warns
    outside :data:`GALACTIC_VALID_HZ`."""
    f = float(frequency_hz)
    lo, hi = GALACTIC_VALID_HZ
    if warn and not lo <= f <= hi:
        warnings.warn(
            f"[noise] sky_temperature_k = 'galactic' at {f / 1e6:.4g} MHz: ITU-R P.372's galactic line is used between "
            f"{lo / 1e6:g} and {hi / 1e6:g} MHz; extrapolated here",
            stacklevel=3,
        )
    return REFERENCE_TEMPERATURE_K * 10.0 ** (float(galactic_noise_figure_db(f)) / 10.0)


def add_noise(power_w, noise_power_w_: float, rng: np.random.Generator) -> np.ndarray:
    """Echo power plus single-look noise power drawn from an exponential law of mean P_n.

    P'(i) = P(i) + P_n · E(i),  E(i) ~ Exp(1) independent per sample ([3]_ of the
    module). NaN samples stay NaN. Returns a new array of ``power_w``'s float dtype
    (float32 in, float32 out); ``power_w`` is not modified.
    """
    power = np.asarray(power_w)
    dtype = power.dtype if power.dtype in (np.float32, np.float64) else np.dtype(np.float64)
    noise = rng.standard_exponential(size=power.shape, dtype=dtype)
    noise *= dtype.type(noise_power_w_)
    return power.astype(dtype, copy=False) + noise


def add_complex_noise(signal, noise_power_w_: float, rng: np.random.Generator) -> np.ndarray:
    """Complex echoes plus circular complex Gaussian noise of mean power P_n (coherent mode).

    n = √(P_n/2) (g₁ + i g₂), g₁, g₂ ~ N(0, 1) independent, so E|n|² = P_n and
    |n|² is exponential with mean P_n, as in :func:`add_noise` ([3]_ of the module).
    Added before detection, the noise interferes with the echo and averages down
    when echoes are summed coherently. NaN samples stay NaN.
    """
    signal = np.asarray(signal)
    g = rng.standard_normal(size=(*signal.shape, 2))
    g *= math.sqrt(0.5 * noise_power_w_)
    return signal + (g[..., 0] + 1j * g[..., 1])


@dataclass(frozen=True)
class NoiseConfig:
    """The ``[noise]`` table: a noise temperature *or* a noise figure, and a seed.

    ``noise_temperature_k`` T (K, F = 1) or ``noise_figure_db`` NF (dB, T = 290 K);
    ``seed`` (integer ≥ 0, default 0) seeds the noise so a run is reproducible.
    """

    noise_temperature_k: float | None = None
    noise_figure_db: float | None = None
    seed: int = 0
    sky_temperature_k: float | str | None = None

    def __post_init__(self):
        if (self.noise_temperature_k is None) == (self.noise_figure_db is None):
            raise ConfigError("[noise] expected exactly one of noise_temperature_k and noise_figure_db")
        t = self.noise_temperature_k
        if t is not None and not (math.isfinite(t) and t > 0):
            raise ConfigError(f"[noise] noise_temperature_k = {t!r}: expected a positive temperature in K")
        nf = self.noise_figure_db
        if nf is not None and not (math.isfinite(nf) and 0.0 <= nf <= 100.0):
            raise ConfigError(f"[noise] noise_figure_db = {nf!r}: expected a noise figure between 0 and 100 dB")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0:
            raise ConfigError(f"[noise] seed = {self.seed!r}: expected an integer >= 0")
        sky = self.sky_temperature_k
        if sky is not None and sky != "galactic" and (
            isinstance(sky, (bool, str)) or not isinstance(sky, (int, float)) or not (math.isfinite(sky) and sky >= 0)
        ):
            raise ConfigError(f"[noise] sky_temperature_k = {sky!r}: expected a temperature >= 0 K or \"galactic\"")

    @classmethod
    def from_dict(cls, data) -> "NoiseConfig":
        """Build from the parsed ``[noise]`` table, rejecting unknown keys by name."""
        if not isinstance(data, dict):
            raise ConfigError("[noise] must be a table")
        names = ("noise_temperature_k", "noise_figure_db", "seed", "sky_temperature_k")
        kwargs = {}
        for key, value in data.items():
            if key not in names:
                raise ConfigError(f"[noise] unknown key {key!r}: expected one of {', '.join(names)}")
            if key == "seed":
                if isinstance(value, float) and value.is_integer():
                    value = int(value)
            elif key == "sky_temperature_k" and isinstance(value, str):
                if value != "galactic":
                    raise ConfigError(f"[noise] sky_temperature_k = {value!r}: expected a number of K or \"galactic\"")
            elif isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(f"[noise] {key} = {value!r}: expected a number")
            else:
                value = float(value)
            kwargs[key] = value
        return cls(**kwargs)

    def sky_k(self, center_frequency_hz: float | None = None) -> float | None:
        """The external noise temperature (K) at the centre frequency, or None without one."""
        if self.sky_temperature_k is None:
            return None
        if self.sky_temperature_k == "galactic":
            if center_frequency_hz is None:
                raise ValueError("NoiseConfig.sky_k: 'galactic' needs the centre frequency")
            return galactic_temperature_k(center_frequency_hz)
        return float(self.sky_temperature_k)

    def noise_power_w(self, bandwidth_hz: float, center_frequency_hz: float | None = None) -> float:
        """Input noise power in the bandwidth (W): k T B F without a sky temperature
        (:func:`noise_power_w`), k B (T_ext + T0 (F − 1)) or k B (T_ext + T) with one."""
        sky = self.sky_k(center_frequency_hz)
        if sky is None:
            return noise_power_w(bandwidth_hz, self.noise_temperature_k, self.noise_figure_db)
        if self.noise_temperature_k is not None:
            receiver_k = self.noise_temperature_k
        else:
            receiver_k = REFERENCE_TEMPERATURE_K * (10.0 ** (self.noise_figure_db / 10.0) - 1.0)
        if sky + receiver_k <= 0:
            raise ConfigError("[noise] sky_temperature_k = 0 with a 0 dB noise figure: the system has no noise")
        return BOLTZMANN_J_K * (sky + receiver_k) * bandwidth_hz

    def rng(self) -> np.random.Generator:
        """A fresh generator seeded with ``seed`` (NumPy PCG64)."""
        return np.random.default_rng(self.seed)

    def to_dict(self) -> dict:
        return {k: v for k, v in (("noise_temperature_k", self.noise_temperature_k),
                                  ("noise_figure_db", self.noise_figure_db), ("seed", self.seed),
                                  ("sky_temperature_k", self.sky_temperature_k)) if v is not None}


def add_noise_by_pulse(power_w, noise_power_w_: float, seed_words: tuple[int, ...], first_pulse: int = 0) -> np.ndarray:
    """:func:`add_noise` with one generator per row (pulse), seeded by ``seed_words`` and the
    row's index in the whole track (``first_pulse`` + row).

    Each pulse's noise is then fixed by its place in the track alone, whatever part of the
    track a run computes: a track simulated in segments (:mod:`cluttersim.analysis.segments`), on any
    number of workers, gets the noise of the same track simulated in one piece.
    """
    power = np.asarray(power_w)
    dtype = power.dtype if power.dtype in (np.float32, np.float64) else np.dtype(np.float64)
    out = power.astype(dtype, copy=True)
    scale = dtype.type(noise_power_w_)
    for row in range(out.shape[0]):
        rng = np.random.default_rng([*seed_words, first_pulse + row])
        noise = rng.standard_exponential(size=out.shape[1:], dtype=dtype)
        noise *= scale
        out[row] += noise
    return out
