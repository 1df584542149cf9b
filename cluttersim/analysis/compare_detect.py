"""Noise floor, power scale and the statistical test for echoes surface clutter does not explain.

Part of the comparison (:mod:`cluttersim.analysis.compare`). Everything here works on
the observed samples themselves (no resampling: averaging neighbouring
samples would change their statistics) with the simulated power evaluated at
their aligned delays.

The test. With o an observed power, N the trace's noise floor, g the fitted
gain, S the simulated power and Δ the model tolerance (dB), the predicted
mean power at that sample is

    μ = g · 10^(Δ/10) · max_{|δ| ≤ δt} S(t + δ) + N,

the strongest clutter within the delay tolerance δt (the alignment's and the
DEM's delay errors), raised by the model tolerance. Under the hypothesis "clutter
and noise only", an L-look speckled power is Gamma distributed,
L o/μ ~ Γ(L, 1) (single look: exponential; Goodman 1976 [1]_). Averaging the
ratio r = o/μ over K neighbouring traces at the same delay below the surface
(incoherent integration, Kay 1998 [2]_ ch. 5–7) gives
K L r̄ ~ Γ(K L, 1); as N is itself a mean of n noise samples, the ratio
r̄ = (Σ o/K) / N̂ of noise samples follows Fisher's F(2KL, 2nL) — the
cell-averaging CFAR detector ([2]_, [3]_). The p-value of a sample is the
F-distribution's upper tail at r̄ (the noise estimate's share of μ scales n),
and the sample is *unexplained* when p < ``pfa``: a false-alarm probability
per sample, whatever the noise level. The same test with μ = N says whether a
sample holds an echo at all (*detected*).

References
----------
.. [1] Goodman, J. W. (1976). Some fundamental properties of speckle. J. Opt.
       Soc. Am. 66(11), 1145–1150 (single-look power exponential; the mean of L
       independent looks Gamma distributed).
.. [2] Kay, S. M. (1998). Fundamentals of Statistical Signal Processing,
       Vol. II: Detection Theory. Prentice Hall (Neyman–Pearson tests,
       incoherent integration; ch. 7 the CFAR detector with an estimated
       noise level, F distributed).
.. [3] Finn, H. M. & Johnson, R. S. (1968). Adaptive detection mode with
       threshold control as a function of spatially sampled clutter-level
       estimates. RCA Review 29, 414–464 (cell-averaging CFAR).
.. [4] Rousseeuw, P. J. & Croux, C. (1993). Alternatives to the median absolute
       deviation. J. Am. Stat. Assoc. 88(424), 1273–1283 (σ ≈ 1.4826 MAD).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.ndimage import maximum_filter1d

from ..errors import ObservedDataError

#: σ of a normal distribution per median absolute deviation ([4]_).
MAD_TO_SIGMA = 1.4826
#: Least number of noise samples for a trace's noise floor.
MIN_NOISE_SAMPLES = 8
#: Traces whose noise samples are pooled into one trace's noise floor (centred window).
NOISE_WINDOW_TRACES = 21
#: Fraction of the deepest samples used for the noise floor when no trace has samples before the surface.
DEEP_NOISE_FRACTION = 0.1
#: Noise degrees of freedom beyond which the noise floor counts as known exactly (Gamma instead of F).
KNOWN_NOISE_DOF = 1e7


# --------------------------------------------------------------------------- noise floor


@dataclass(frozen=True)
class NoiseFloor:
    """Observed noise floor per matched trace.

    Attributes
    ----------
    power : ndarray (n,)
        Mean noise power N_i (observed units): the mean of the noise samples of
        the :data:`NOISE_WINDOW_TRACES` traces centred on trace i (the maximum-
        likelihood estimate for speckled noise, [1]_).
    n_samples : ndarray (n,)
        Noise samples pooled into each N_i (the noise estimate's degrees of freedom / 2L).
    spread_db : float
        Robust σ (1.4826 MAD) of the noise samples in dB about their trace's floor
        (5.57 dB for single-look exponential noise).
    source : str
        ``"before surface"`` or ``"deepest samples"``.
    """

    power: np.ndarray
    n_samples: np.ndarray
    spread_db: float
    source: str

    @property
    def db(self) -> np.ndarray:
        with np.errstate(divide="ignore"):
            return 10.0 * np.log10(self.power)


def noise_floor(observed, noise_mask, predicted=None) -> NoiseFloor:
    """Mean power of the noise samples, pooled over :data:`NOISE_WINDOW_TRACES` traces.

    With ``predicted`` (the gain-matched simulated power at each sample), its
    mean over the same samples is subtracted: what the simulation itself puts
    before the surface (pulse sidelobes) is not noise. Noise-free data then
    give a floor of 0 (see :func:`cluttersim.analysis.compare.input_warnings`).

    ``noise_mask`` (n, m) marks the samples the model says hold noise alone
    (before the surface echo). If no trace has :data:`MIN_NOISE_SAMPLES` of
    them, the deepest :data:`DEEP_NOISE_FRACTION` of each trace's samples are
    used instead (deep clutter or subsurface echoes then raise the floor).
    Traces whose window holds too few samples take their neighbours' floor.
    """
    obs = np.asarray(observed, dtype=np.float64)
    finite = np.isfinite(obs)
    mask = np.asarray(noise_mask, dtype=bool) & finite
    source = "before surface"
    if not (mask.sum(axis=1) >= MIN_NOISE_SAMPLES).any():
        source = "deepest samples"
        count = finite.sum(axis=1)
        deep = np.maximum(np.ceil(DEEP_NOISE_FRACTION * count), MIN_NOISE_SAMPLES).astype(int)
        rank_from_end = np.cumsum(finite[:, ::-1], axis=1)[:, ::-1]
        mask = finite & (rank_from_end <= deep[:, None])
    n = obs.shape[0]
    excess = obs if predicted is None else obs - np.nan_to_num(np.asarray(predicted, dtype=np.float64), nan=0.0)
    sums = np.where(mask, excess, 0.0).sum(axis=1)
    counts = mask.sum(axis=1).astype(np.float64)
    half = NOISE_WINDOW_TRACES // 2
    cs = np.concatenate([[0.0], np.cumsum(sums)])
    cc = np.concatenate([[0.0], np.cumsum(counts)])
    lo = np.clip(np.arange(n) - half, 0, n)
    hi = np.clip(np.arange(n) + half + 1, 0, n)
    pooled_n = cc[hi] - cc[lo]
    with np.errstate(invalid="ignore", divide="ignore"):
        floor = (cs[hi] - cs[lo]) / pooled_n
    good = pooled_n >= MIN_NOISE_SAMPLES
    if not good.any():
        raise ObservedDataError(
            f"cannot estimate the observed noise floor: fewer than {MIN_NOISE_SAMPLES} samples before the surface echo "
            "or in the deepest part of the traces"
        )
    idx = np.arange(n)
    floor = np.maximum(np.interp(idx, idx[good], floor[good]), 0.0)
    pooled_n = np.where(good, pooled_n, np.interp(idx, idx[good], pooled_n[good]))
    with np.errstate(divide="ignore", invalid="ignore"):
        dev = 10.0 * np.log10(np.where(mask, obs, np.nan) / floor[:, None])
    dev = dev[np.isfinite(dev)]
    spread = float(MAD_TO_SIGMA * np.median(np.abs(dev - np.median(dev)))) if dev.size else math.nan
    return NoiseFloor(power=floor, n_samples=pooled_n, spread_db=spread, source=source)


# --------------------------------------------------------------------------- gain


@dataclass(frozen=True)
class GainFit:
    """Observed/simulated power scale on the surface echo.

    Attributes
    ----------
    gain_db : float
        Median over traces of 10 log10 α_i, α_i the scale fitted by the
        alignment on the leading edge and peak of trace i.
    uncertainty_db : float
        Standard error of that median, 1.2533 · 1.4826 MAD / √N (the median's
        efficiency for normal scatter, [4]_).
    scatter_db : float
        Robust σ of the per-trace values (1.4826 MAD).
    per_trace_db : ndarray (n,)
        Per-trace values (NaN where unusable).
    n_traces : int
    """

    gain_db: float
    uncertainty_db: float
    scatter_db: float
    per_trace_db: np.ndarray
    n_traces: int


def gain_from_scales(scale) -> GainFit:
    """The gain (dB) as the median of the per-trace surface scales α_i (see :class:`GainFit`)."""
    a = np.asarray(scale, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        per = np.where(a > 0, 10.0 * np.log10(a), np.nan)
    vals = per[np.isfinite(per)]
    if vals.size == 0:
        raise ObservedDataError(
            "no matched trace has an observed surface echo that matches the simulated one (fitted scale ≤ 0); "
            "check the window start, sample interval and values (amplitude/power/db)"
        )
    gain = float(np.median(vals))
    scatter = float(MAD_TO_SIGMA * np.median(np.abs(vals - gain)))
    uncertainty = math.sqrt(math.pi / 2) * scatter / math.sqrt(vals.size) if vals.size >= 3 else math.nan
    return GainFit(gain_db=gain, uncertainty_db=uncertainty, scatter_db=scatter, per_trace_db=per, n_traces=int(vals.size))


# --------------------------------------------------------------------------- the test


def gamma_looks_sf(ratio, looks: float) -> np.ndarray:
    """P(X ≥ ratio·μ) for L-look power X of mean μ: the Gamma(L, μ/L) upper tail, Q(L, L·ratio) ([1]_).

    Single look (L = 1): exp(−ratio).
    """
    return special.gammaincc(looks, looks * np.asarray(ratio, dtype=np.float64))


def ratio_p_value(mean_ratio, terms, noise_dof_samples, looks: float) -> np.ndarray:
    """Upper-tail probability of the mean of ``terms`` ratios o/μ under "clutter and noise only".

    F(2·terms·L, 2·n·L) with n = ``noise_dof_samples`` (the noise floor's
    samples, scaled by (μ/N)² where clutter dominates μ); where n exceeds
    :data:`KNOWN_NOISE_DOF` the Gamma(terms·L) tail (noise known exactly).
    """
    r = np.asarray(mean_ratio, dtype=np.float64)
    k = np.asarray(terms, dtype=np.float64)
    nd = np.asarray(noise_dof_samples, dtype=np.float64)
    kl = np.maximum(k * looks, 1e-12)
    with np.errstate(invalid="ignore", over="ignore"):
        p_gamma = special.gammaincc(kl, kl * r)
        nd_c = np.clip(nd, 1.0, KNOWN_NOISE_DOF)
        p_f = special.fdtrc(2.0 * kl, 2.0 * nd_c * looks, r)
    return np.where(nd >= KNOWN_NOISE_DOF, p_gamma, p_f)


@dataclass(frozen=True)
class SampleVerdicts:
    """The unexplained-echo test's outcome per sample of a grid (see :class:`Detections`; the
    comparison carries it onto the simulated grid as :class:`cluttersim.analysis.compare.SimGridMasks`).

    Attributes
    ----------
    detected : ndarray of bool
        An echo above the noise (p_noise < pfa).
    unexplained : ndarray of bool
        More power than clutter and noise explain (p_value < pfa).
    candidate : ndarray of bool
        Unexplained and the strongest observed sample within ±one range cell.
    p_value : ndarray
        Upper-tail probability of the (integrated) observed power under μ (NaN: not tested).
    """

    detected: np.ndarray
    unexplained: np.ndarray
    candidate: np.ndarray
    p_value: np.ndarray

    @property
    def explained(self) -> np.ndarray:
        """Detected, and explained by clutter and noise."""
        return self.detected & ~self.unexplained


@dataclass(frozen=True)
class Detections(SampleVerdicts):
    """Per-sample outcome on the observed grid (matched traces × observed samples):
    :class:`SampleVerdicts` and what the test computed on the way.

    Attributes
    ----------
    predicted : ndarray
        μ: predicted mean power (clutter with tolerances, plus noise).
    p_noise : ndarray
        The upper-tail probability under noise alone (μ = N).
    clutter : ndarray
        g · max S within the delay tolerance (without the model tolerance), observed units.
    """

    predicted: np.ndarray
    p_noise: np.ndarray
    clutter: np.ndarray


def integrate_along_track(values, shifts_fn, half_traces: int) -> tuple[np.ndarray, np.ndarray]:
    """Sum of ``values`` over the 2h+1 traces centred on each trace, each neighbour read at a sample shift.

    ``shifts_fn(i, j)`` gives, for rows i (array) and their neighbour rows j,
    the integer sample shift k_j − k_i of the same delay below the surface.
    NaN values are skipped. Returns (sum, count), both (n, m).
    """
    v = np.asarray(values, dtype=np.float64)
    n, m = v.shape
    total = np.zeros((n, m))
    count = np.zeros((n, m))
    k = np.arange(m)[None, :]
    for d in range(-half_traces, half_traces + 1):
        i = np.arange(max(0, -d), min(n, n - d))
        if i.size == 0:
            continue
        j = i + d
        kk = k + shifts_fn(i, j)[:, None]
        inside = (kk >= 0) & (kk < m)
        vals = np.where(inside, np.take_along_axis(v[j], np.clip(kk, 0, m - 1), axis=1), np.nan)
        ok = np.isfinite(vals)
        total[i] += np.where(ok, vals, 0.0)
        count[i] += ok
    return total, count


def detect_unexplained(
    observed, clutter, noise: NoiseFloor, *, pfa: float, looks: float, model_tolerance_db: float,
    integration_traces: int = 1, shifts_fn=None, peak_half_width_samples: int = 1,
) -> Detections:  # fmt: skip
    """The statistical test of the module docstring, on the observed samples.

    Parameters
    ----------
    observed : ndarray (n, m)
        Observed power, its own grid (NaN: no data).
    clutter : ndarray (n, m)
        g · max S within the delay tolerance at each observed sample (NaN where
        the simulation does not reach: not tested).
    noise : NoiseFloor
    pfa : float
        False-alarm probability per sample.
    looks : float
        Number of independent looks averaged in each observed sample (1: single look).
    model_tolerance_db : float
        Δ: the clutter prediction may be this much too weak, dB.
    integration_traces : int
        K: traces averaged (odd; 1 = each trace alone).
    shifts_fn : callable, optional
        Sample shifts between neighbouring traces (see :func:`integrate_along_track`); default none.
    peak_half_width_samples : int
        Candidates are local maxima over ±this many samples.
    """
    p = np.asarray(observed, dtype=np.float64)
    c = np.asarray(clutter, dtype=np.float64)
    n_floor = np.asarray(noise.power, dtype=np.float64)[:, None]
    tol = 10.0 ** (model_tolerance_db / 10.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mu = tol * c + n_floor
        mu = np.where(mu > 0, mu, np.nan)
        ratio = p / mu
        ratio_noise = p / np.where(n_floor > 0, n_floor, np.nan)
        # the noise estimate's share of μ: its relative error shrinks by N/μ
        dof = noise.n_samples[:, None] * (mu / np.where(n_floor > 0, n_floor, np.nan)) ** 2
    half = max(0, int(integration_traces) // 2)
    shifts = shifts_fn or (lambda i, j: np.zeros(len(i), dtype=np.int64))
    if half:
        s_r, k_r = integrate_along_track(ratio, shifts, half)
        s_n, k_n = integrate_along_track(ratio_noise, shifts, half)
        s_d, _ = integrate_along_track(np.where(np.isfinite(ratio), dof, np.nan), shifts, half)
        # the K traces' noise floors are running means over overlapping windows of traces: their average pools
        # more noise samples than one floor does (effective size (Σw)²/Σw² of the combined trace weights)
        w = np.convolve(np.ones(NOISE_WINDOW_TRACES), np.ones(2 * half + 1))
        pooled = (w.sum() ** 2 / (w**2).sum()) / NOISE_WINDOW_TRACES
        with np.errstate(invalid="ignore", divide="ignore"):
            mean_r, mean_n, mean_dof = s_r / k_r, s_n / k_n, pooled * s_d / k_r
        dof_noise = pooled * noise.n_samples[:, None] * np.ones_like(mean_n)
    else:
        mean_r, mean_n, k_r, k_n, mean_dof = ratio, ratio_noise, np.isfinite(ratio) * 1.0, np.isfinite(ratio_noise) * 1.0, dof
        dof_noise = noise.n_samples[:, None] * np.ones_like(mean_n)
    p_value = np.where(np.isfinite(mean_r) & (k_r > 0), ratio_p_value(mean_r, k_r, mean_dof, looks), np.nan)
    p_noise = np.where(np.isfinite(mean_n) & (k_n > 0), ratio_p_value(mean_n, k_n, dof_noise, looks), np.nan)
    tested = np.isfinite(p) & np.isfinite(ratio)
    with np.errstate(invalid="ignore"):
        unexplained = tested & (p_value < pfa)
        detected = np.isfinite(p) & (p_noise < pfa)
        p_fill = np.where(np.isfinite(p), p, -np.inf)
        local_max = p_fill >= maximum_filter1d(p_fill, size=2 * peak_half_width_samples + 1, axis=1, mode="nearest")
    return Detections(predicted=mu, p_value=p_value, p_noise=p_noise, detected=detected | unexplained,
                      unexplained=unexplained, candidate=unexplained & local_max & (p_fill > -np.inf), clutter=c)  # fmt: skip


def clutter_within_tolerance(clutter, tolerance_samples: int) -> np.ndarray:
    """Largest value within ±``tolerance_samples`` along each row (NaN kept where the row has no value)."""
    c = np.asarray(clutter, dtype=np.float64)
    if tolerance_samples <= 0:
        return c
    filled = np.where(np.isfinite(c), c, -np.inf)
    out = maximum_filter1d(filled, size=2 * tolerance_samples + 1, axis=1, mode="nearest")
    return np.where(np.isfinite(c), np.maximum(out, 0.0), np.nan)


# --------------------------------------------------------------------------- candidates


def continuity_fraction(candidate, neighbours: int, delay_half_width_samples: int) -> np.ndarray:
    """For each sample, the share of the ``neighbours`` traces on each side that hold a candidate within ±half-width samples.

    Traces beyond the ends of the array are not counted (the share is over the
    neighbours that exist).
    """
    c = np.asarray(candidate, dtype=bool)
    n = c.shape[0]
    near = maximum_filter1d(c.astype(np.uint8), size=2 * delay_half_width_samples + 1, axis=1, mode="constant") > 0
    hits = np.zeros(c.shape, dtype=np.float64)
    count = np.zeros(n, dtype=np.float64)
    for d in range(1, neighbours + 1):
        if d >= n:
            break
        hits[d:] += near[:-d]
        hits[:-d] += near[d:]
        count[d:] += 1
        count[:-d] += 1
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count[:, None] > 0, hits / count[:, None], 0.0)


def candidate_score(unexplained_share, continuity):
    """Score in [0, 1]: u (1 + k) / 2, u the unexplained share of the echo's power, k its continuity.

    An isolated echo scores at most ½; one of which nothing is predicted and
    that continues on every neighbouring trace scores 1.
    """
    u = np.clip(np.asarray(unexplained_share, dtype=np.float64), 0.0, 1.0)
    k = np.clip(np.asarray(continuity, dtype=np.float64), 0.0, 1.0)
    return u * (1.0 + k) / 2.0


def parabolic_peak_offset(y_minus: float, y_0: float, y_plus: float) -> float:
    """Sub-sample position of a peak from three samples around it, in samples from the middle one.

    δ = ½ (y₋ − y₊) / (y₋ − 2 y₀ + y₊), the vertex of the parabola through the
    three points (Céspedes et al. 1995); 0 if they do not form a peak.
    """
    denom = y_minus - 2.0 * y_0 + y_plus
    if not denom < 0:
        return 0.0
    return float(np.clip(0.5 * (y_minus - y_plus) / denom, -0.5, 0.5))


def sub_sample_peaks(power, rows, cols) -> np.ndarray:
    """Sub-sample position (−½…½ samples) of local maxima at (rows, cols) from a parabola through three samples.

    0 where a neighbour is missing (window edge or NaN).
    """
    p = np.asarray(power, dtype=np.float64)
    out = np.zeros(len(rows))
    for i, (r, c) in enumerate(zip(rows, cols)):
        if 0 < c < p.shape[1] - 1 and np.isfinite(p[r, c - 1:c + 2]).all():
            out[i] = parabolic_peak_offset(p[r, c - 1], p[r, c], p[r, c + 1])
    return out
