"""Observed radargrams with a known answer, made from a simulation by independent means.

* the timing shift: SciPy's cubic spline (not the comparison's cubic convolution)
  moves the simulated echoes to a known fractional delay on the observed grid;
* the reflector: the Hann-weighted compressed pulse written out below
  (Curlander & McDonough 1991, ch. 3; Harris 1978 window coefficients);
* noise: exponential single-look power (Goodman 1976); speckled clutter: the
  clutter's complex amplitude circular Gaussian, a steady reflector added
  coherently — the Rician power of a constant plus a Gaussian phasor
  (Goodman 1976).

Three scenes, simulated once per test session: a small synthetic hill
(airborne), a section of the demo pass (orbital, the demo DEM) and matplotlib's
Jacksboro fault DEM (USGS 3-arc-second elevations) written to a GeoTIFF with a
CRS.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy.interpolate import CubicSpline

from cluttersim.analysis.compare_grid import bandwidth_of
from cluttersim.io.observed import ObservedRadargram

C = 299_792_458.0  # m/s, SI definition
ICE = 3.15  # ε′ of water ice (common practice)
GAIN_DB = 23.0  # invented calibration difference, observed / simulated
LEAD_SAMPLES = 45  # observed samples recorded before the earliest simulated window
EXTRA_SAMPLES = 90  # observed samples beyond the simulated window's length


def hann_pulse_power(t_s, bandwidth_hz):
    """|h|² of the Hann-weighted compressed pulse, h(x) = sinc(x) + ½[sinc(x−1) + sinc(x+1)], x = Bt, 1 at t = 0."""
    x = bandwidth_hz * np.asarray(t_s)
    return (np.sinc(x) + 0.5 * (np.sinc(x - 1) + np.sinc(x + 1))) ** 2


def surface_peak(sim) -> float:
    """Median over traces of each trace's strongest simulated sample: "the surface echo"."""
    return float(np.median(np.nanmax(np.nan_to_num(sim["power"].values), axis=1)))


def shifted_power(sim, shift_samples, start_s, n_samples):
    """The simulated power seen on a grid starting at ``start_s``, ``shift_samples`` later than simulated (cubic spline)."""
    p = np.nan_to_num(sim["power"].values.astype(np.float64))
    ws = sim["window_start"].values
    dt = float(sim["delay"].values[1] - sim["delay"].values[0])
    shift = np.broadcast_to(np.asarray(shift_samples, dtype=np.float64), (p.shape[0],))
    start_s = np.broadcast_to(np.asarray(start_s, dtype=np.float64), (p.shape[0],))
    recorded = start_s[:, None] + np.arange(n_samples)[None, :] * dt
    out = np.zeros((p.shape[0], n_samples))
    k = np.arange(p.shape[1])
    for i in range(p.shape[0]):
        true_delay = recorded[i] - shift[i] * dt
        spline = CubicSpline(ws[i] + k * dt, p[i])
        inside = (true_delay >= ws[i]) & (true_delay <= ws[i] + k[-1] * dt)
        out[i, inside] = np.clip(spline(true_delay[inside]), 0, None)
    return out, recorded


@dataclasses.dataclass
class Truth:
    """An invented observation and what it holds."""

    observed: ObservedRadargram
    shift_samples: np.ndarray
    noise_mean: float  # before the gain
    reflector_delay_s: np.ndarray | None  # absolute, true (simulated) frame; NaN where none
    reflector_power: np.ndarray | None


def observe(sim, track, *, shift_samples=0.0, snr_db=30.0, seed=0, speckle=False, reflector=None,
            gain_db=GAIN_DB, bandwidth_hz=None) -> Truth:  # fmt: skip
    """An invented observed radargram of ``sim``'s track.

    Recorded on window starts at least :data:`LEAD_SAMPLES` before the
    simulated ones (on a 100-sample grid), echoes ``shift_samples`` later than simulated,
    noise ``snr_db`` below the surface echo (:func:`surface_peak`), power
    scaled by ``gain_db``. ``reflector(sim, noise_mean) → (delay_s, power)``
    per trace (true frame) adds a steady echo of the compressed-pulse shape.
    """
    rng = np.random.default_rng(seed)
    dt = float(sim["delay"].values[1] - sim["delay"].values[0])
    n = sim.sizes["sample"] + LEAD_SAMPLES + EXTRA_SAMPLES
    # each trace's window starts LEAD_SAMPLES before its simulated one, rounded to 100 samples (a coarse tracker)
    start = np.round((sim["window_start"].values - LEAD_SAMPLES * dt) / (100 * dt)) * 100 * dt
    start = np.minimum(start, sim["window_start"].values - LEAD_SAMPLES * dt)
    clutter, recorded = shifted_power(sim, shift_samples, start, n)
    noise_mean = surface_peak(sim) * 10 ** (-snr_db / 10)
    shift = np.broadcast_to(np.asarray(shift_samples, dtype=np.float64), (clutter.shape[0],)).copy()
    refl = np.zeros_like(clutter)
    r_delay = r_power = None
    if reflector is not None:
        b = bandwidth_hz or bandwidth_of(sim)
        r_delay, r_power = reflector(sim, noise_mean)
        true_delay = recorded - shift[:, None] * dt
        refl = np.where(np.isfinite(r_delay)[:, None],
                        np.nan_to_num(r_power)[:, None] * hann_pulse_power(true_delay - np.nan_to_num(r_delay)[:, None], b),
                        0.0)  # fmt: skip
    if speckle:
        # clutter and noise: one circular Gaussian phasor of power S + N; the reflector a steady phasor
        sigma2 = clutter + noise_mean
        z = np.sqrt(refl) + np.sqrt(sigma2 / 2) * (rng.standard_normal(clutter.shape) + 1j * rng.standard_normal(clutter.shape))
        power = np.abs(z) ** 2
    else:
        power = clutter + refl + rng.exponential(noise_mean, clutter.shape)
    obs = ObservedRadargram(power=power * 10 ** (gain_db / 10), sample_interval_s=dt,
                            window_start_s=start, track=track, source="invented")  # fmt: skip
    return Truth(observed=obs, shift_samples=shift, noise_mean=noise_mean, reflector_delay_s=r_delay, reflector_power=r_power)


def identical(sim, track) -> ObservedRadargram:
    """The simulation itself as observed data (its own window starts)."""
    dt = float(sim["delay"].values[1] - sim["delay"].values[0])
    return ObservedRadargram(power=np.nan_to_num(sim["power"].values.astype(np.float64)), sample_interval_s=dt,
                             window_start_s=sim["window_start"].values.astype(np.float64), track=track, source="same")  # fmt: skip


def local_clutter(sim, delay_s, half_width_samples: int) -> np.ndarray:
    """Largest simulated power within ± half-width samples of ``delay_s`` per trace (NaN outside the window)."""
    p = np.nan_to_num(sim["power"].values.astype(np.float64))
    ws = sim["window_start"].values
    dt = float(sim["delay"].values[1] - sim["delay"].values[0])
    k = np.rint((np.asarray(delay_s) - ws) / dt).astype(int)
    out = np.full(p.shape[0], np.nan)
    for i in range(p.shape[0]):
        lo, hi = max(0, k[i] - half_width_samples), min(p.shape[1], k[i] + half_width_samples + 1)
        if lo < hi:
            out[i] = p[i, lo:hi].max()
    return out


def layer(depth_m, *, above_clutter_db=None, above_surface_db=None, above_noise_db=20.0, half_width_samples=None):
    """A reflector at ``depth_m`` below the nadir surface (ε′ = 3.15): Δt = 2 d √ε′ / c (common practice).

    Its power: ``above_surface_db`` over the surface echo, or the larger of
    ``above_clutter_db`` over the local simulated clutter (± half-width
    samples, default one range cell + 1) and ``above_noise_db`` over the noise
    mean; with ``above_noise_db`` None, ``above_clutter_db`` over clutter plus noise.
    """

    def make(sim, noise_mean):
        delay = sim["nadir_delay"].values + 2 * depth_m * math.sqrt(ICE) / C
        if above_surface_db is not None:
            power = np.full(delay.shape, surface_peak(sim) * 10 ** (above_surface_db / 10))
        else:
            dt = float(sim["delay"].values[1] - sim["delay"].values[0])
            hw = half_width_samples or int(math.ceil(1.0 / (bandwidth_of(sim) * dt))) + 1
            clutter = np.nan_to_num(local_clutter(sim, delay, hw))
            if above_noise_db is None:  # over the predicted mean itself: clutter plus noise
                power = (clutter + noise_mean) * 10 ** (above_clutter_db / 10)
            else:
                power = np.maximum(clutter * 10 ** (above_clutter_db / 10), noise_mean * 10 ** (above_noise_db / 10))
        return delay, power

    return make
