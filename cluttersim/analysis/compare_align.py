"""Delay alignment of an observed radargram with a simulated one, from the surface echo alone.

Part of the comparison (:mod:`cluttersim.analysis.compare`). The observed data are
modelled, sample by sample on their own grid, as a shifted, scaled copy of the
simulated surface echo on a noise floor,

    o_k ≈ α_i · S_i(t_k − τ) + β_i,

where S_i is the simulated power of trace i evaluated between its samples by
cubic convolution (:func:`cluttersim.analysis.compare_grid.cubic_convolution`), τ the
timing offset (observed later than simulated: positive), α_i the trace's power
scale and β_i its noise level. Only the leading edge and the peak of the
surface echo enter, with a quiet lead-in before them where the model predicts
noise alone: echoes after the surface (the clutter tail, subsurface
reflectors) cannot pull the estimate, and an echo later than the surface
cannot be taken for it because the surface would then sit in the lead-in.

Two stages:

1. :func:`coarse_lag_cost` — every whole-sample lag within ±``max_lag``: the
   least-squares misfit of the model (α, β free per trace) over a long
   lead-in (as long as the search range) plus the leading edge and peak,
   computed with FFTs; the summed, normalised misfit's minimum gives τ₀.
2. :func:`fine_costs` — a grid of 0.05 sample around τ₀: the least-squares
   misfit Σ w_k (o_k − α S − β)², w a raised-cosine taper at both ends of the
   fit window so the cost is smooth in τ, divided by the window's total sum of
   squares about its mean (the unexplained fraction 1 − r²: a window moved
   onto weaker samples does not win by their smaller variance). Its minimum
   summed over traces,
   refined by a parabola through its three lowest grid values ([4]_), is the
   offset. Ordinary (unweighted) least squares: its estimating equation has
   zero mean whenever the model's mean is right, whatever the noise and
   speckle statistics (Goodman 1976 [1]_), so it is unbiased for speckled and
   for noise-only fluctuations alike; weighting by the speckle variance
   (α S + β)² (McCullagh & Nelder 1989 [2]_) was tried and biased the offset
   by 0.2 sample at 20 dB surface SNR on unspeckled echoes.

Its uncertainty is the delete-a-group jackknife over contiguous blocks of
traces ([3]_): it measures what the data say (noise, speckle, trace-to-trace
model mismatch), not errors common to all traces (a DEM shifted in height).
With ``per_trace``, each trace's offset is the minimum of the cost summed
over the ``window_traces`` traces centred on it, its uncertainty the
delete-one jackknife over those traces.

References
----------
.. [1] Goodman, J. W. (1976). Some fundamental properties of speckle. J. Opt.
       Soc. Am. 66(11), 1145–1150 (single-look power is exponential: its
       variance is its mean squared).
.. [2] McCullagh, P. & Nelder, J. A. (1989). Generalized Linear Models, 2nd
       ed., Chapman & Hall, ch. 9 (quasi-likelihood weights; not used, see above).
.. [3] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
       Chapman & Hall, ch. 11 (the jackknife estimate of standard error,
       delete-d / grouped form).
.. [4] Céspedes, I., Huang, Y., Ophir, J. & Spratt, S. (1995). Methods for
       estimation of subsample time delays of digitized echo signals.
       Ultrasonic Imaging 17(2), 142–171 (parabolic interpolation of an
       extremum).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import fft as sfft
from scipy.ndimage import median_filter
from tqdm.auto import tqdm

from .compare_grid import cubic_convolution
from ..errors import ObservedDataError

#: σ of a normal distribution per median absolute deviation (Rousseeuw & Croux 1993).
MAD_TO_SIGMA = 1.4826
#: The fine stage's cost per trace: "unexplained_fraction" (RSS / total sum of squares about the mean, 1 − r²) or
#: "rss" (the residual sum of squares itself).
FINE_COST = "unexplained_fraction"
#: Dynamic range of the coarse search's decibel values (below each trace's peak), dB.
LOG_RANGE_DB = 30.0
#: Step of the fine grid of offsets, samples of the simulated grid.
FINE_STEP_SAMPLES = 0.05
#: Half width of the fine grid about the coarse offset, samples.
FINE_HALF_WIDTH_SAMPLES = 1.5
#: Most groups of the jackknife of the global offset.
JACKKNIFE_GROUPS = 20
#: The surface echo's leading edge starts where the simulated power first exceeds this fraction of its peak.
LEADING_EDGE_FRACTION = 1e-3


@dataclass(frozen=True)
class FitWindows:
    """The part of each simulated trace the alignment fits (simulated sample coordinates).

    Attributes
    ----------
    lead_start : ndarray (n,)
        Start of the quiet lead-in (the model there: noise alone).
    edge_start : ndarray (n,)
        First sample of the leading edge.
    peak : ndarray (n,) of int
        Sample of the surface echo's peak.
    end : ndarray (n,)
        End of the window: the peak plus one range cell.
    taper : float
        Width of the raised-cosine ends, samples.
    usable : ndarray (n,) of bool
        Traces with a simulated surface echo.
    """

    lead_start: np.ndarray
    edge_start: np.ndarray
    peak: np.ndarray
    end: np.ndarray
    taper: float
    usable: np.ndarray


def fit_windows(sim_power, surface_first, surface_last, cell_samples: float, lead_samples: float) -> FitWindows:
    """Leading edge and peak of each simulated surface echo, and the window fitted around them.

    The peak is the strongest simulated sample inside the surface window
    [``surface_first``, ``surface_last``]; the leading edge starts at the
    first sample before it whose power exceeds :data:`LEADING_EDGE_FRACTION`
    of the peak. The window runs from ``lead_samples`` before the leading edge
    (noise only in the model) to one range cell (``cell_samples``) after the
    peak; its ends are tapered over max(2, one cell) samples.
    """
    sim = np.nan_to_num(np.asarray(sim_power, dtype=np.float64), nan=0.0)
    n, ns = sim.shape
    k = np.arange(ns)[None, :]
    first = np.asarray(surface_first)[:, None]
    last = np.asarray(surface_last)[:, None]
    inside = (k >= first) & (k <= last)
    masked = np.where(inside, sim, -1.0)
    peak = np.argmax(masked, axis=1)
    peak_power = masked[np.arange(n), peak]
    usable = peak_power > 0
    above = (sim >= LEADING_EDGE_FRACTION * np.maximum(peak_power, 0.0)[:, None]) & (k <= peak[:, None])
    edge = np.where(above.any(axis=1), np.argmax(above, axis=1), peak).astype(np.float64)
    taper = max(2.0, float(cell_samples))
    lead = float(lead_samples) + taper
    return FitWindows(lead_start=edge - lead, edge_start=edge, peak=peak, end=peak + float(cell_samples) + taper,
                      taper=taper, usable=usable)  # fmt: skip


def taper_weight(x, lo, hi, width: float) -> np.ndarray:
    """Window weight at positions x: 0 outside [lo, hi], raised-cosine ramps of ``width`` at both ends, 1 between."""
    x = np.asarray(x, dtype=np.float64)
    a = np.clip((x - lo) / width, 0.0, 1.0)
    b = np.clip((hi - x) / width, 0.0, 1.0)
    return (0.5 - 0.5 * np.cos(np.pi * a)) * (0.5 - 0.5 * np.cos(np.pi * b))


# --------------------------------------------------------------------------- stage 1: whole-sample lags


def coarse_lag_cost(obs_ext, pad_left: int, sim_power, lo, hi, max_lag: int, edge=None) -> np.ndarray:
    """Unexplained fraction of the observed window by the simulated one, per trace and whole lag.

    For trace i and lag ℓ, with m_k the simulated power (0 before its first
    sample) for k in [lo_i, hi_i] and o the observed power on the simulated
    grid (index ``pad_left`` + k, NaN replaced by the trace's median), both in
    decibels and clipped :data:`LOG_RANGE_DB` below their peak (the observed
    also at its 20th percentile, about the noise), the misfit
    of o_{k+ℓ} ≈ a m_k + b (a ≥ 0, b free) is

        RSS(ℓ) = V_o(ℓ) − C(ℓ)² / V_m   (C > 0),   V_o(ℓ) otherwise,

    V_o, V_m the centred sums of squares and C the centred cross-product over
    the window, all from FFT correlations, and the cost is the unexplained
    fraction RSS/V_o = 1 − r² (r the window's Pearson correlation; 1 where the
    observed window holds no variation): a window of noise alone is not
    explained however small its variance, and every trace weighs alike.
    Lags at which the observed data do not cover the echo part of the window
    (from ``edge`` on; default the whole window) get NaN: the misfit of missing
    data says nothing.

    Returns
    -------
    ndarray (n, 2 max_lag + 1)
        1 − r² for lags −max_lag … max_lag (NaN: the echo part not covered by data).
    """
    obs = np.asarray(obs_ext, dtype=np.float64)
    sim = np.nan_to_num(np.asarray(sim_power, dtype=np.float64), nan=0.0)
    n, ns = sim.shape
    lo = np.floor(np.asarray(lo)).astype(np.int64)
    hi = np.ceil(np.asarray(hi)).astype(np.int64)
    length = hi - lo + 1
    edge = lo if edge is None else np.clip(np.floor(np.asarray(edge)).astype(np.int64), lo, hi)
    lmax = int(length.max())
    nlag = 2 * max_lag + 1
    seg_len = lmax + nlag - 1
    nfft = sfft.next_fast_len(seg_len + lmax, real=True)
    out = np.full((n, nlag), np.nan)
    chunk = max(1, int(4e6 // max(nfft, 1)))
    for a in range(0, n, chunk):
        b = min(a + chunk, n)
        rows = np.arange(a, b)
        j = np.arange(lmax)[None, :]
        in_win = j < length[rows, None]
        ks = lo[rows, None] + j
        tmpl = np.where(in_win & (ks >= 0) & (ks < ns), np.take_along_axis(sim[rows], np.clip(ks, 0, ns - 1), axis=1), 0.0)
        tmpl = np.where(in_win, tmpl, 0.0)
        ind = in_win.astype(np.float64)
        cols = pad_left + lo[rows, None] - max_lag + np.arange(seg_len)[None, :]
        valid_col = (cols >= 0) & (cols < obs.shape[1])
        seg = np.where(valid_col, np.take_along_axis(obs[rows], np.clip(cols, 0, obs.shape[1] - 1), axis=1), np.nan)
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN traces
            med = np.nanmedian(obs[rows], axis=1)
        med = np.where(np.isfinite(med), med, 0.0)
        has = np.isfinite(seg).any(axis=1)
        observed_here = np.isfinite(seg).astype(np.float64)
        seg = np.where(np.isfinite(seg), seg, med[:, None])
        # in decibels, clipped LOG_RANGE_DB below each peak: speckle becomes an additive scatter of ~5.6 dB, while
        # an echo where the model has none (a surface echo in the lead-in of a later reflector) costs tens of dB
        t_peak = tmpl.max(axis=1, keepdims=True)
        o_floor = np.maximum(np.nanpercentile(np.where(seg > 0, seg, np.nan), 20, axis=1, keepdims=True),
                             seg.max(axis=1, keepdims=True) * 10 ** (-LOG_RANGE_DB / 10))  # fmt: skip
        o_floor = np.where(np.isfinite(o_floor) & (o_floor > 0), o_floor, 1e-300)
        # the template is clipped at the same level below its peak as the observed (identical data stay identical)
        relative = np.clip(o_floor / np.maximum(seg.max(axis=1, keepdims=True), 1e-300), 10 ** (-LOG_RANGE_DB / 10), 1.0)
        tmpl = np.where(in_win, 10 * np.log10(np.maximum(tmpl, np.maximum(t_peak, 1e-300) * relative)), 0.0)
        seg = 10 * np.log10(np.maximum(seg, o_floor))
        echo_part = (in_win & (j >= (edge[rows] - lo[rows])[:, None])).astype(np.float64)

        def corr(t, s):
            spec = np.conj(sfft.rfft(t, nfft, axis=1)) * sfft.rfft(s, nfft, axis=1)
            return sfft.irfft(spec, nfft, axis=1)[:, :nlag]

        nw = length[rows].astype(np.float64)[:, None]
        s_m = tmpl.sum(axis=1)[:, None]
        s_mm = (tmpl * tmpl).sum(axis=1)[:, None]
        s_o = corr(ind, seg)
        s_oo = corr(ind, seg * seg)
        s_mo = corr(tmpl, seg)
        v_m = s_mm - s_m * s_m / nw
        v_o = np.maximum(s_oo - s_o * s_o / nw, 0.0)
        c = s_mo - s_m * s_o / nw
        with np.errstate(divide="ignore", invalid="ignore"):
            r2 = np.where((c > 0) & (v_m > 0) & (v_o > 0), c * c / (v_m * v_o), 0.0)
            cost = 1.0 - np.clip(r2, 0.0, 1.0)
        cost[~has] = np.nan
        covered = corr(echo_part, observed_here)
        cost[covered < echo_part.sum(axis=1)[:, None] - 0.5] = np.nan
        out[a:b] = cost
    return out


# --------------------------------------------------------------------------- stage 2: fine grid, least squares


@dataclass
class _FineProblem:
    """Observed samples around each trace's fit window, and the model's coordinates for them."""

    obs: np.ndarray  # (n, W) observed power, NaN = none
    x0: np.ndarray  # (n, W) simulated sample coordinate of each observed sample before the shift
    sim: np.ndarray  # (n, ns) simulated power
    windows: FitWindows
    zero_before: bool  # the simulated power is 0 before its first sample


def _fine_problem(obs_power, obs_x0, obs_step: float, sim_power, windows: FitWindows, tau_lo, tau_hi, zero_before):
    """Gather the observed samples whose shifted coordinate can fall in the fit window for τ in [tau_lo, tau_hi]."""
    obs = np.asarray(obs_power, dtype=np.float64)
    n, m = obs.shape
    tau_lo = np.broadcast_to(np.asarray(tau_lo, dtype=np.float64), (n,))
    tau_hi = np.broadcast_to(np.asarray(tau_hi, dtype=np.float64), (n,))
    # x_k = x0_i + k step − τ ∈ [lead_start, end]  →  k ∈ [(lead_start + τ_lo − x0)/step, (end + τ_hi − x0)/step]
    k_lo = np.floor((windows.lead_start + tau_lo - obs_x0) / obs_step).astype(np.int64) - 1
    k_hi = np.ceil((windows.end + tau_hi - obs_x0) / obs_step).astype(np.int64) + 1
    width = int(np.max(k_hi - k_lo + 1))
    k = k_lo[:, None] + np.arange(width)[None, :]
    inside = (k >= 0) & (k < m) & (k <= k_hi[:, None])
    o = np.where(inside, np.take_along_axis(obs, np.clip(k, 0, m - 1), axis=1), np.nan)
    return _FineProblem(obs=o, x0=obs_x0[:, None] + k * obs_step, sim=np.asarray(sim_power, dtype=np.float64),
                        windows=windows, zero_before=zero_before)  # fmt: skip


def _model(problem: _FineProblem, rows, tau, with_echo: bool = False):
    """Simulated power and taper weight at the observed samples of ``rows`` for offsets ``tau`` (g,) or (r, g).

    Returns two arrays (r, g, W), and with ``with_echo`` a third: the samples from the leading edge on.
    """
    x0 = problem.x0[rows]
    tau = np.asarray(tau, dtype=np.float64)
    tau = np.broadcast_to(tau, (len(rows), tau.shape[-1]))
    x = x0[:, None, :] - tau[:, :, None]
    r, g, w = x.shape
    sim = np.nan_to_num(problem.sim[rows], nan=0.0)
    model = cubic_convolution(sim, x.reshape(r, g * w), before=0.0 if problem.zero_before else np.nan).reshape(r, g, w)
    win = problem.windows
    weight = taper_weight(x, win.lead_start[rows, None, None], win.end[rows, None, None], win.taper)
    if with_echo:
        return model, weight, x >= win.edge_start[rows, None, None]
    return model, weight


def fine_costs(problem: _FineProblem, rows, tau, variance=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Misfit of o ≈ α S(t − τ) + β per trace and offset, with α ≥ 0 and β fitted in closed form.

    Cost = Σ_k c_k (o_k − α m_k − β)², c_k = w_k / V_k (the taper over an
    optional variance per sample; V = 1 if ``variance`` is None). Returns (cost, α, β), each (r, g).
    """
    model, weight, echo = _model(problem, rows, tau, with_echo=True)
    o = problem.obs[rows][:, None, :]
    v = 1.0 if variance is None else variance[:, None, :]
    good = np.isfinite(o) & np.isfinite(model)
    c = np.where(good, weight / v, 0.0)
    o = np.where(good, o, 0.0)
    m = np.where(good, model, 0.0)
    s = c.sum(axis=2)
    sm = (c * m).sum(axis=2)
    smm = (c * m * m).sum(axis=2)
    so = (c * o).sum(axis=2)
    smo = (c * m * o).sum(axis=2)
    soo = (c * o * o).sum(axis=2)
    with np.errstate(divide="ignore", invalid="ignore"):
        det = s * smm - sm * sm
        alpha = (s * smo - sm * so) / det
        beta = (smm * so - sm * smo) / det
        negative = ~(alpha > 0)
        alpha = np.where(negative, 0.0, alpha)
        beta = np.where(negative, so / s, beta)
        cost = soo - 2 * alpha * smo - 2 * beta * so + alpha * alpha * smm + 2 * alpha * beta * sm + beta * beta * s
    # an echo the observed data do not cover says nothing: NaN, never a perfect fit of nothing (missing samples
    # of the lead-in, where the model is noise alone, only drop out)
    echo_weight = np.where(echo, weight, 0.0)
    covered = np.where(good, echo_weight, 0.0).sum(axis=2) >= 0.95 * echo_weight.sum(axis=2)
    if FINE_COST == "unexplained_fraction":
        with np.errstate(divide="ignore", invalid="ignore"):
            tss = soo - so * so / s
            cost = np.where(tss > 0, np.maximum(cost, 0.0) / tss, 1.0)  # nothing to explain: nothing explained
    return np.where(covered, np.maximum(cost, 0.0), np.nan), alpha, beta


def parabolic_minimum(cost, grid) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of each row of ``cost`` over ``grid`` (uniform), refined by the parabola through the lowest three ([4]_).

    Returns (position, at_edge): position in grid units; at_edge where the
    lowest value is the first or last of the row (no refinement).
    """
    cost = np.asarray(cost, dtype=np.float64)
    grid = np.asarray(grid, dtype=np.float64)
    step = grid[1] - grid[0]
    filled = np.where(np.isfinite(cost), cost, np.inf)
    i = np.argmin(filled, axis=-1)
    g = cost.shape[-1]
    at_edge = (i == 0) | (i == g - 1)
    ic = np.clip(i, 1, g - 2)
    y0 = np.take_along_axis(filled, (ic - 1)[..., None], axis=-1)[..., 0]
    y1 = np.take_along_axis(filled, ic[..., None], axis=-1)[..., 0]
    y2 = np.take_along_axis(filled, (ic + 1)[..., None], axis=-1)[..., 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = y0 - 2 * y1 + y2
        delta = np.where(denom > 0, np.clip(0.5 * (y0 - y2) / denom, -0.5, 0.5), 0.0)
    delta = np.where(at_edge | ~np.isfinite(delta), 0.0, delta)
    return grid[i] + np.where(at_edge, 0.0, (ic - i) + delta) * step, at_edge


def jackknife_minimum(cost_rows, grid, groups) -> tuple[float, float]:
    """Minimum of the summed cost and its delete-a-group jackknife standard error ([3]_).

    ``cost_rows`` (r, g): one row per trace; ``groups`` (r,) group label per row.
    σ² = (G − 1)/G Σ_g (τ₍g₎ − τ̄)², τ₍g₎ the minimum without group g.
    """
    finite = np.where(np.isfinite(cost_rows), cost_rows, 0.0)
    blocked = ~np.isfinite(cost_rows).all(axis=0) & np.isinf(cost_rows).any(axis=0)  # outside the search
    total = np.where(blocked, np.inf, finite.sum(axis=0))
    tau, _ = parabolic_minimum(total, grid)
    labels = np.unique(groups)
    if labels.size < 2:
        return float(tau), math.nan
    partial = np.stack([np.where(blocked, np.inf, total - finite[groups == lab].sum(axis=0)) for lab in labels])
    tau_g, _ = parabolic_minimum(partial, grid)
    g = labels.size
    return float(tau), float(math.sqrt((g - 1) / g * np.sum((tau_g - tau_g.mean()) ** 2)))


# --------------------------------------------------------------------------- the estimate


@dataclass(frozen=True)
class DelayOffset:
    """Timing offset of the observed data (observed later than simulated is positive).

    Attributes
    ----------
    global_samples, global_uncertainty_samples : float
        Offset of all traces together and its jackknife standard error, in
        samples of the simulated grid.
    per_trace_samples : ndarray (n,)
        Offset applied to each matched trace (the global one unless per-trace
        offsets were asked for), samples.
    per_trace_uncertainty_samples : ndarray (n,)
        Standard error of each applied offset, samples.
    trace_estimates_samples : ndarray (n,)
        Each trace's own best offset (its cost alone; NaN where unusable).
    scatter_samples : float
        Robust σ (1.4826 MAD) of the trace estimates about the global offset.
    correlation : float
        Median over traces of the correlation between the observed samples and
        the fitted, shifted simulated surface echo over the fit window
        (1: same shape; noise, speckle and a different echo lower it).
    surface_scale : ndarray (n,)
        Fitted α per trace: observed over simulated power on the leading edge and peak (NaN where unusable).
    n_traces : int
        Traces with a usable surface echo in both radargrams.
    interval_s : float
        The simulated sample interval (to convert to seconds).
    at_search_edge : bool
        The coarse search ended at the edge of the searched lags.
    per_trace : bool
        Whether per-trace offsets were fitted.
    """

    global_samples: float
    global_uncertainty_samples: float
    per_trace_samples: np.ndarray
    per_trace_uncertainty_samples: np.ndarray
    trace_estimates_samples: np.ndarray
    scatter_samples: float
    correlation: float
    surface_scale: np.ndarray
    n_traces: int
    interval_s: float
    at_search_edge: bool = False
    per_trace: bool = False

    @property
    def global_s(self) -> float:
        return self.global_samples * self.interval_s

    @property
    def global_uncertainty_s(self) -> float:
        return self.global_uncertainty_samples * self.interval_s


def _costs_on_grid(problem, rows, grid, variance_of_row=None, chunk_cells: float = 3e6):
    """fine_costs over all ``rows`` in chunks; grid (g,) shared. Returns cost, α, β (r, g)."""
    w = problem.obs.shape[1]
    chunk = max(1, int(chunk_cells // max(1, len(grid) * w)))
    out = [np.empty((len(rows), len(grid))) for _ in range(3)]
    for a in range(0, len(rows), chunk):
        b = min(a + chunk, len(rows))
        v = None if variance_of_row is None else variance_of_row[a:b]
        res = fine_costs(problem, rows[a:b], grid, v)
        for o, r in zip(out, res):
            o[a:b] = r
    return out


def _correlation(problem, rows, tau) -> np.ndarray:
    """Weighted (taper) Pearson correlation of observed and shifted simulated power over the fit window, per row."""
    model, weight = _model(problem, rows, np.asarray(tau, dtype=np.float64)[:, None])
    model, weight = model[:, 0, :], weight[:, 0, :]
    o = problem.obs[rows]
    good = np.isfinite(o) & np.isfinite(model) & (weight > 0)
    wgt = np.where(good, weight, 0.0)
    o = np.where(good, o, 0.0)
    m = np.where(good, model, 0.0)
    s = wgt.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        mo, mm = (wgt * o).sum(axis=1) / s, (wgt * m).sum(axis=1) / s
        cov = (wgt * (o - mo[:, None]) * (m - mm[:, None])).sum(axis=1)
        vo = (wgt * (o - mo[:, None]) ** 2).sum(axis=1)
        vm = (wgt * (m - mm[:, None]) ** 2).sum(axis=1)
        return cov / np.sqrt(vo * vm)


def estimate_delay_offset(
    obs_power, obs_x0, obs_step: float, obs_ext, pad_left: int, sim_power, windows: FitWindows, max_lag: int,
    interval_s: float, *, zero_before: bool = True, per_trace: bool = False, window_traces: int = 51,
    progress: bool = False,
) -> DelayOffset:  # fmt: skip
    """Estimate the observed timing offset from the leading edge and peak of the surface echo (module docstring).

    Parameters
    ----------
    obs_power : ndarray (n, m)
        Observed power on its own grid, one row per matched trace.
    obs_x0 : ndarray (n,)
        Position of each observed sample 0 on its simulated partner's grid, in
        simulated samples: (observed window start − simulated window start) / Δt.
    obs_step : float
        Observed sample interval over the simulated one.
    obs_ext : ndarray (n, E)
        Observed power bin-averaged onto the simulated grid, extended by
        ``pad_left`` samples before it (for the coarse search).
    sim_power : ndarray (n, ns)
        Simulated power of the partner traces.
    windows : FitWindows
        From :func:`fit_windows`; ``lead_start`` should reach ``max_lag`` samples
        before the leading edge for the coarse search to reject later echoes.
    max_lag : int
        Largest |offset| searched, simulated samples.
    interval_s : float
        Simulated sample interval, s.
    zero_before : bool
        The simulated power is zero before its first sample (its window starts
        before the earliest echo).
    per_trace, window_traces
        Fit an offset per trace over the ``window_traces`` traces centred on it.

    Returns
    -------
    DelayOffset
    """
    obs = np.asarray(obs_power, dtype=np.float64)
    sim = np.asarray(sim_power, dtype=np.float64)
    n = obs.shape[0]
    obs_x0 = np.asarray(obs_x0, dtype=np.float64)
    has_obs = np.isfinite(obs).any(axis=1)
    used = windows.usable & has_obs
    rows = np.flatnonzero(used)
    if rows.size == 0:
        raise ObservedDataError(
            "no matched trace has both a simulated surface echo and observed data around it; "
            "check the observed window start and sample interval"
        )
    with tqdm(total=3, unit="stage", delay=1.0, disable=not progress, desc="aligning") as bar:
        # stage 1: whole lags, long lead-in (the window's lead_start)
        coarse = coarse_lag_cost(obs_ext[rows], pad_left, sim[rows], windows.lead_start[rows],
                                 windows.end[rows], max_lag, edge=windows.edge_start[rows])  # fmt: skip
        lags = np.arange(-max_lag, max_lag + 1)
        n_ok = np.isfinite(coarse).sum(axis=0)
        if not n_ok.any():
            raise ObservedDataError("no matched trace has observed data around its simulated surface echo at any "
                                    "offset searched; check the window start, sample interval and --max-offset-us")
        with np.errstate(invalid="ignore", divide="ignore"):
            total = np.where(n_ok >= 0.5 * n_ok.max(), np.nansum(coarse, axis=0) / n_ok, np.inf)
        lag0 = int(lags[int(np.argmin(total))])
        at_edge = abs(lag0) >= max_lag
        bar.update()

        # stage 2: fine grid about lag0, least squares
        fine_windows = FitWindows(lead_start=windows.edge_start - 2.0 * windows.taper, edge_start=windows.edge_start,
                                  peak=windows.peak, end=windows.end, taper=windows.taper, usable=windows.usable)  # fmt: skip
        centre = float(lag0)
        tau_hat = centre
        for _ in range(4):  # re-centre the grid if the minimum lands on its edge
            grid = centre + np.arange(-FINE_HALF_WIDTH_SAMPLES, FINE_HALF_WIDTH_SAMPLES + 1e-9, FINE_STEP_SAMPLES)
            problem = _fine_problem(obs[rows], obs_x0[rows], obs_step, sim[rows], fine_windows, grid[0], grid[-1],
                                    zero_before)  # fmt: skip
            local = np.arange(rows.size)
            cost, alpha, beta = _costs_on_grid(problem, local, grid)
            covered = np.isfinite(cost).all(axis=1)  # the same traces at every offset tried
            if not covered.any():
                raise ObservedDataError("no matched trace has observed data over its whole simulated surface echo "
                                        "near the offset found; check the observed window start and length")
            tau_hat, edge = parabolic_minimum(cost[covered].sum(axis=0), grid)
            if not edge:
                break
            centre = float(tau_hat)
        bar.update()
        groups = np.minimum((np.arange(rows.size) * min(JACKKNIFE_GROUPS, rows.size)) // rows.size,
                            JACKKNIFE_GROUPS - 1)  # fmt: skip
        tau_hat, sigma = jackknife_minimum(cost[covered], grid, groups[covered])
        if rows.size < 3:
            sigma = math.nan
        own, _ = parabolic_minimum(cost, grid)
        j = int(np.argmin(np.abs(grid - tau_hat)))
        scale = np.full(n, np.nan)
        scale[rows] = np.where(alpha[:, j] > 0, alpha[:, j], np.nan)
        corr = _correlation(problem, local, np.full(local.size, tau_hat))
        estimates = np.full(n, np.nan)
        estimates[rows] = own
        applied = np.full(n, tau_hat)
        applied_sigma = np.full(n, sigma)
        if per_trace:
            applied, applied_sigma, scale_pt, corr = _per_trace(
                obs[rows], obs_x0[rows], obs_step, sim[rows], fine_windows, coarse, lags, window_traces, zero_before,
            )  # fmt: skip
            full, full_sigma = np.full(n, np.nan), np.full(n, np.nan)
            full[rows], full_sigma[rows] = applied, applied_sigma
            applied, applied_sigma = _fill(full), _fill(full_sigma)
            scale[rows] = scale_pt
        else:
            applied[~used] = tau_hat
        bar.update()
    resid = own - tau_hat
    resid = resid[np.isfinite(resid)]
    scatter = float(MAD_TO_SIGMA * np.median(np.abs(resid))) if resid.size else math.nan
    return DelayOffset(
        global_samples=float(tau_hat), global_uncertainty_samples=float(sigma), per_trace_samples=applied,
        per_trace_uncertainty_samples=applied_sigma, trace_estimates_samples=estimates, scatter_samples=scatter,
        correlation=float(np.nanmedian(corr)) if np.isfinite(corr).any() else math.nan, surface_scale=scale,
        n_traces=int(rows.size), interval_s=float(interval_s), at_search_edge=bool(at_edge), per_trace=per_trace,
    )  # fmt: skip


def _fill(values) -> np.ndarray:
    """Fill NaN by linear interpolation over the index (ends held)."""
    v = np.asarray(values, dtype=np.float64)
    good = np.isfinite(v)
    if good.all() or not good.any():
        return v
    idx = np.arange(v.size)
    return np.interp(idx, idx[good], v[good])


def _per_trace(obs, obs_x0, obs_step, sim, windows, coarse, lags, window_traces, zero_before):
    """Offset of each trace from the cost summed over the ``window_traces`` traces centred on it.

    Whole-lag start: the coarse misfit summed over the same window of traces.
    Fine: a common grid spanning all traces' starts ± the fine half width,
    least squares as for the global offset; the uncertainty of each trace's
    offset is the delete-one jackknife over the traces of its window.
    """
    n = obs.shape[0]
    half = max(0, int(window_traces) // 2)
    filled = np.where(np.isfinite(coarse), coarse, 1.0)  # not covered: nothing explained
    csum = np.concatenate([np.zeros((1, filled.shape[1])), np.cumsum(filled, axis=0)])
    lo = np.clip(np.arange(n) - half, 0, n)
    hi = np.clip(np.arange(n) + half + 1, 0, n)
    start = lags[np.argmin(csum[hi] - csum[lo], axis=1)].astype(np.float64)
    # a few windows can lock onto another echo (a strong off-nadir ridge): the starts are smoothed robustly
    start = median_filter(start, size=min(n, max(3 * (2 * half + 1), 11)), mode="nearest")
    grid = np.arange(start.min() - FINE_HALF_WIDTH_SAMPLES - 0.5, start.max() + FINE_HALF_WIDTH_SAMPLES + 0.5 + 1e-9,
                     FINE_STEP_SAMPLES)  # fmt: skip
    problem = _fine_problem(obs, obs_x0, obs_step, sim, windows, grid[0], grid[-1], zero_before)
    rows = np.arange(n)
    cost, alpha, beta = _costs_on_grid(problem, rows, grid)
    # each window searches ±FINE_HALF_WIDTH about its own start only: far from the surface echo a window of
    # noise alone fits as well as the echo does, so the grid's far ends must not compete
    half_points = int(round(FINE_HALF_WIDTH_SAMPLES / FINE_STEP_SAMPLES))
    centre = np.clip(np.rint((start - grid[0]) / FINE_STEP_SAMPLES).astype(np.int64), half_points,
                     grid.size - 1 - half_points)  # fmt: skip
    tau = np.full(n, np.nan)
    sigma = np.full(n, np.nan)
    for final in (False, False, True):  # re-centre each window's search on what the previous pass found
        for i in range(n):
            sel = slice(centre[i] - half_points, centre[i] + half_points + 1)
            block = cost[lo[i]:hi[i], sel]
            block = block[np.isfinite(block).all(axis=1)]  # traces the observed data cover throughout
            if block.shape[0] == 0:
                tau[i] = np.nan
                continue
            if final and block.shape[0] >= 3:
                tau[i], sigma[i] = jackknife_minimum(block, grid[sel], np.arange(block.shape[0]))
            else:
                tau[i] = parabolic_minimum(block.sum(axis=0), grid[sel])[0]
        ok = np.isfinite(tau)
        centre = np.where(ok, np.clip(np.rint((np.nan_to_num(tau) - grid[0]) / FINE_STEP_SAMPLES).astype(np.int64),
                                      half_points, grid.size - 1 - half_points), centre)  # fmt: skip
    j = np.clip(np.rint((np.nan_to_num(tau) - grid[0]) / FINE_STEP_SAMPLES).astype(np.int64), 0, grid.size - 1)
    scale = np.where(np.isfinite(tau) & (alpha[rows, j] > 0), alpha[rows, j], np.nan)
    return tau, sigma, scale, _correlation(problem, rows, np.nan_to_num(tau))
