"""Compare a simulated clutter radargram with an observed one; list the echoes it leaves unexplained.

Steps (each a function below, units in the names):

1. :func:`match_traces` pairs each observed trace with the nearest simulated
   trace, in time when both tracks have it, else in position; pairs farther
   apart than a tolerance stay unmatched and are reported.
2. :func:`resample_bin_mean_power` puts each observed trace onto the delay grid
   of its simulated trace (both carry absolute window starts): the mean of the
   observed power's linear interpolant over each simulated sample.
3. :func:`estimate_delay_offset` cross-correlates the simulated surface echo
   with the observed trace (summed over traces, sub-sample peak) to find the
   observed data's timing offset, with its uncertainty; optionally a smooth
   per-trace offset.
4. :func:`noise_floor_db` and :func:`fit_gain_db` give the observed noise floor
   and the observed/simulated power scale on the surface echo.
5. :func:`find_candidates` lists the observed echoes (local maxima at least
   ``threshold_db`` above the noise floor) that the gain-matched simulation does
   not explain within a delay tolerance, with a score.

:func:`compare` runs them all; :func:`compare_to_dir` also reads the inputs,
simulates on the fly if asked, and writes the products atomically.

Sign convention: a positive offset means the observed echoes were recorded
*later* than the simulated ones; the aligned observed power at absolute delay t
is the recorded power at t + offset.

References
----------
.. [1] Knapp, C. H. & Carter, G. C. (1976). The generalized correlation method
       for estimation of time delay. IEEE Trans. Acoust. Speech Signal Process.
       24(4), 320–327 (delay = lag of the cross-correlation peak).
.. [2] Céspedes, I., Huang, Y., Ophir, J. & Spratt, S. (1995). Methods for
       estimation of subsample time delays of digitized echo signals.
       Ultrasonic Imaging 17(2), 142–171 (parabolic interpolation of the peak).
.. [3] Rousseeuw, P. J. & Croux, C. (1993). Alternatives to the median absolute
       deviation. J. Am. Stat. Assoc. 88(424), 1273–1283 (σ ≈ 1.4826 MAD).
.. [4] Goodman, J. W. (1976). Some fundamental properties of speckle. J. Opt.
       Soc. Am. 66(11), 1145–1150 (single-look power is exponentially
       distributed: P(X > x) = exp(−x/⟨X⟩)).
"""

from __future__ import annotations

import csv
import json
import math
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import xarray as xr
from scipy import fft as sfft
from scipy.ndimage import maximum_filter1d, median_filter, uniform_filter1d
from scipy.spatial import cKDTree
from tqdm.auto import tqdm

from .body import Body
from .errors import ConfigError, ObservedDataError
from .observed import ObservedRadargram
from .outputs import atomic_paths, check_new
from .radar import apparent_depth_m

#: σ of a normal distribution per median absolute deviation ([3]_).
MAD_TO_SIGMA = 1.4826
#: Least number of pre-surface samples for a trace's own noise estimate.
MIN_NOISE_SAMPLES = 8
#: Traces whose noise samples are pooled into one trace's noise floor (centred window).
NOISE_WINDOW_TRACES = 11
#: Fraction of the deepest samples used for the noise floor when no trace has samples before the surface.
DEEP_NOISE_FRACTION = 0.1
#: Up-sampling of the summed cross-correlation before its peak is interpolated.
CORRELATION_UPSAMPLING = 8

#: File names of a comparison directory.
COMPARE_FILES = {
    "comparison": "comparison.nc",
    "candidates": "candidates.csv",
    "side_by_side": "side_by_side.png",
    "overlay": "overlay.png",
    "difference": "difference.png",
}
#: Columns of ``candidates.csv``.
CANDIDATE_COLUMNS = (
    "rank", "trace", "sample", "delay_us", "two_way_delay_us", "lat", "lon", "depth_m",
    "snr_db", "excess_db", "unexplained_share", "continuity", "score", "sim_trace", "sim_delay_us",
)  # fmt: skip


@dataclass(frozen=True)
class CompareSettings:
    """Tolerances and thresholds of a comparison (units in the names).

    Attributes
    ----------
    match_tolerance_m : float or None
        Largest ground distance between an observed trace and its simulated
        partner; None: the median spacing of the simulated traces.
    max_offset_s : float or None
        Largest timing offset searched, either sign; None: half the simulated window.
    per_trace_offset : bool
        Also fit a smooth per-trace offset around the global one.
    offset_window_traces : int
        Smoothing length (traces) of the per-trace offset: running median then
        running mean over this many traces.
    delay_tolerance_s : float or None
        An observed echo is explained by simulated power within this delay;
        None: 2/B (two range cells of the simulated radar's bandwidth B).
    threshold_db : float
        Detection threshold above the noise floor, dB.
    explained_within_db : float
        Simulated power within this many dB of the observed explains it.
    permittivity : float
        Real relative permittivity ε′ for apparent depths.
    continuity_traces : int
        Neighbours on each side examined for the continuity of a candidate.
    """

    match_tolerance_m: float | None = None
    max_offset_s: float | None = None
    per_trace_offset: bool = False
    offset_window_traces: int = 51
    delay_tolerance_s: float | None = None
    threshold_db: float = 15.0
    explained_within_db: float = 6.0
    permittivity: float = 3.15
    continuity_traces: int = 2

    def __post_init__(self):
        for name in ("match_tolerance_m", "max_offset_s", "delay_tolerance_s"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                raise ConfigError(f"{name} = {value!r}: expected a positive number")
        for name in ("threshold_db", "explained_within_db"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise ConfigError(f"{name} = {value!r}: expected a number of dB >= 0")
        if not self.permittivity >= 1.0:
            raise ConfigError(f"permittivity = {self.permittivity!r}: expected a real relative permittivity >= 1")
        if not (isinstance(self.offset_window_traces, int) and self.offset_window_traces >= 1):
            raise ConfigError(f"offset_window_traces = {self.offset_window_traces!r}: expected an integer >= 1")
        if not (isinstance(self.continuity_traces, int) and self.continuity_traces >= 1):
            raise ConfigError(f"continuity_traces = {self.continuity_traces!r}: expected an integer >= 1")


# --------------------------------------------------------------------------- 1. trace matching


@dataclass(frozen=True)
class TraceMatch:
    """Pairs of observed and simulated traces.

    Attributes
    ----------
    sim_index : ndarray (n_observed,) of int
        Simulated trace paired with each observed trace; −1 where unmatched.
    distance_m : ndarray (n_observed,)
        Ground (geodesic) distance to the nearest usable simulated trace by the
        matching criterion; NaN if there is none.
    method : str
        ``"time"`` or ``"position"``.
    tolerance_m : float
        Largest distance accepted.
    """

    sim_index: np.ndarray
    distance_m: np.ndarray
    method: str
    tolerance_m: float

    @property
    def matched(self) -> np.ndarray:
        return self.sim_index >= 0

    @property
    def unmatched_traces(self) -> np.ndarray:
        return np.flatnonzero(~self.matched)


def match_traces(track, sim_ds: xr.Dataset, body: Body, tolerance_m: float | None = None) -> TraceMatch:
    """Pair each observed trace with a simulated one.

    By time (nearest simulated time) when the observed track and the simulated
    radargram both have times, else by nearest ground position (chord distance
    between points on the reference surface, a k-d tree). Either way the pair's
    geodesic ground distance (pyproj) must not exceed ``tolerance_m``;
    simulated traces without data (nadir off the DEM) are never partners.

    Parameters
    ----------
    track : Track
        Observed trace positions (and times).
    sim_ds : xarray.Dataset
        Simulated radargram (``lat``, ``lon``, ``window_start``, ``power``, ``time``).
    body : Body
        Reference ellipsoid of both tracks.
    tolerance_m : float, optional
        Largest accepted distance; default the median geodesic spacing of the
        usable simulated traces (at least 1 m).

    Returns
    -------
    TraceMatch
    """
    sim_lat = np.asarray(sim_ds["lat"].values, dtype=np.float64)
    sim_lon = np.asarray(sim_ds["lon"].values, dtype=np.float64)
    usable = np.isfinite(sim_ds["window_start"].values) & np.isfinite(sim_ds["power"].values).any(axis=1)
    cand = np.flatnonzero(usable)
    n = len(track)
    if cand.size == 0:
        raise ObservedDataError("the simulated radargram has no trace with data (every nadir is off the DEM)")
    geod = body.geod()
    if tolerance_m is None:
        if cand.size > 1:
            _, _, step = geod.inv(sim_lon[cand[:-1]], sim_lat[cand[:-1]], sim_lon[cand[1:]], sim_lat[cand[1:]])
            tolerance_m = max(float(np.median(step)), 1.0)
        else:
            tolerance_m = 1.0
    if track.time_s is not None and "time" in sim_ds:
        method = "time"
        sim_t = np.asarray(sim_ds["time"].values, dtype=np.float64)[cand]
        pos = np.clip(np.searchsorted(sim_t, track.time_s), 1, max(cand.size - 1, 1))
        if cand.size == 1:
            nearest = np.zeros(n, dtype=np.int64)
        else:
            left_closer = np.abs(track.time_s - sim_t[pos - 1]) <= np.abs(sim_t[pos] - track.time_s)
            nearest = np.where(left_closer, pos - 1, pos)
    else:
        method = "position"
        sim_xyz = body.geodetic_to_ecef_m(sim_lat[cand], sim_lon[cand], 0.0)
        obs_xyz = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, 0.0)
        _, nearest = cKDTree(sim_xyz).query(obs_xyz)
    partner = cand[nearest]
    _, _, dist = geod.inv(track.lon_deg, track.lat_deg, sim_lon[partner], sim_lat[partner])
    dist = np.abs(np.asarray(dist, dtype=np.float64))
    sim_index = np.where(dist <= tolerance_m, partner, -1)
    return TraceMatch(sim_index=sim_index, distance_m=dist, method=method, tolerance_m=float(tolerance_m))


# --------------------------------------------------------------------------- 2. resampling


def resample_bin_mean_power(power, start_s, interval_s: float, edges_s) -> np.ndarray:
    """Mean of each row's piecewise-linear power over given delay bins.

    Row ``i`` holds samples at delays ``start_s[i] + l·interval_s``; each
    sample covers ±half an interval, so the interpolant runs linearly between
    samples and is constant over the outer half intervals. The result for bin
    [e_k, e_{k+1}) is (1/(e_{k+1} − e_k)) ∫ P(t) dt, evaluated exactly from the
    cumulative integral (trapezoids between samples, a quadratic within one).
    For equal grids and no shift this is (P_{l−1} + 6 P_l + P_{l+1}) / 8.

    Parameters
    ----------
    power : array_like (n, m)
        Power per sample; NaN = no data.
    start_s : array_like (n,)
        Delay of each row's sample 0, s.
    interval_s : float
        Sample interval of the rows, s.
    edges_s : array_like (n, K + 1)
        Increasing bin edges per row, s.

    Returns
    -------
    ndarray (n, K)
        NaN where a bin reaches outside the row's samples or touches a NaN sample.
    """
    p = np.asarray(power, dtype=np.float64)
    n, m = p.shape
    edges = np.asarray(edges_s, dtype=np.float64)
    x = (edges - np.asarray(start_s, dtype=np.float64)[:, None]) / float(interval_s)  # sample coordinate
    finite = np.isfinite(p)
    p0 = np.where(finite, p, 0.0)
    # knots at −½, 0, 1, …, m−1, m−½ with the edge values repeated
    xk = np.concatenate([[-0.5], np.arange(m, dtype=np.float64), [m - 0.5]])
    pk = np.concatenate([p0[:, :1], p0, p0[:, -1:]], axis=1)
    hk = np.diff(xk)
    fk = np.concatenate([np.zeros((n, 1)), np.cumsum(0.5 * hk * (pk[:, :-1] + pk[:, 1:]), axis=1)], axis=1)
    xc = np.clip(x, xk[0], xk[-1])
    seg = np.clip(np.searchsorted(xk, xc, side="right") - 1, 0, xk.size - 2)
    f = (xc - xk[seg]) / hk[seg]
    pl = np.take_along_axis(pk, seg, axis=1)
    pr = np.take_along_axis(pk, seg + 1, axis=1)
    cum = np.take_along_axis(fk, seg, axis=1) + hk[seg] * (pl * f + 0.5 * (pr - pl) * f * f)
    width = np.diff(x, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.diff(cum, axis=1) / width
    lo, hi = x[:, :-1], x[:, 1:]
    nan_before = np.concatenate([np.zeros((n, 1), dtype=np.int64), np.cumsum(~finite, axis=1)], axis=1)
    a = np.clip(np.floor(lo).astype(np.int64), 0, m - 1)
    b = np.clip(np.ceil(hi).astype(np.int64), 0, m - 1)
    touches_nan = np.take_along_axis(nan_before, b + 1, axis=1) - np.take_along_axis(nan_before, a, axis=1) > 0
    outside = (lo < -0.5 - 1e-9) | (hi > m - 0.5 + 1e-9) | ~(width > 0)
    mean[touches_nan | outside] = np.nan
    return mean


def resample_in_chunks(power, start_s, interval_s: float, edges_s, chunk_traces: int = 256) -> np.ndarray:
    """:func:`resample_bin_mean_power` a block of traces at a time (bounded temporary memory)."""
    edges = np.asarray(edges_s)
    out = np.empty((edges.shape[0], edges.shape[1] - 1))
    for a in range(0, edges.shape[0], chunk_traces):
        b = min(a + chunk_traces, edges.shape[0])
        out[a:b] = resample_bin_mean_power(power[a:b], start_s[a:b], interval_s, edges[a:b])
    return out


def grid_edges_s(window_start_s, interval_s: float, first: int, stop: int, offset_s=0.0) -> np.ndarray:
    """Edges (n, stop − first + 1) of samples first … stop−1 of grids starting at ``window_start_s``, shifted by ``offset_s``."""
    k = np.arange(first, stop + 1, dtype=np.float64) - 0.5
    ws = np.asarray(window_start_s, dtype=np.float64)[:, None]
    return ws + k[None, :] * float(interval_s) + np.broadcast_to(np.asarray(offset_s, dtype=np.float64), ws.shape[:1])[:, None]


# --------------------------------------------------------------------------- surface windows


def surface_window_samples(sim_ds: xr.Dataset, rows, margin_samples: int) -> tuple[np.ndarray, np.ndarray]:
    """First and last sample (inclusive) of the simulated surface echo of traces ``rows``.

    The window runs from the earliest surface echo to the nadir echo (whichever
    comes first to whichever comes last), widened by ``margin_samples`` on both
    sides and clipped to the recording window. Traces whose surface lies
    outside their window get first > last.
    """
    rows = np.asarray(rows)
    dt = sample_interval_of(sim_ds)
    nsample = sim_ds.sizes["sample"]
    ws = sim_ds["window_start"].values[rows]
    nadir = sim_ds["nadir_delay"].values[rows]
    earliest = sim_ds["earliest_echo_delay"].values[rows] if "earliest_echo_delay" in sim_ds else nadir
    earliest = np.where(np.isfinite(earliest), earliest, nadir)
    lo = np.fmin(earliest, nadir)
    hi = np.fmax(earliest, nadir)
    peak = np.nanargmax(np.nan_to_num(sim_ds["power"].values[rows], nan=-1.0), axis=1)
    first = np.where(np.isfinite(lo), np.floor((lo - ws) / dt), peak).astype(np.int64) - margin_samples
    last = np.where(np.isfinite(hi), np.ceil((hi - ws) / dt), peak).astype(np.int64) + margin_samples
    return np.clip(first, 0, nsample), np.clip(last, -1, nsample - 1)


def sample_interval_of(ds: xr.Dataset) -> float:
    """Sample interval (s) of a radargram Dataset from its ``delay`` coordinate."""
    delay = np.asarray(ds["delay"].values, dtype=np.float64)
    if delay.size < 2:
        raise ObservedDataError("the simulated radargram needs at least two samples per trace")
    return float(delay[1] - delay[0])


def bandwidth_of(ds: xr.Dataset) -> float | None:
    """The simulated radar's bandwidth (Hz) from the radargram's attributes, if recorded."""
    if "radar_bandwidth_hz" in ds.attrs:
        return float(ds.attrs["radar_bandwidth_hz"])
    try:
        return float(json.loads(ds.attrs["cluttersim_config"])["radar"]["bandwidth_hz"])
    except (KeyError, ValueError, TypeError):
        return None


# --------------------------------------------------------------------------- 3. delay offset


@dataclass(frozen=True)
class DelayOffset:
    """Timing offset of the observed data (observed later than simulated is positive).

    Attributes
    ----------
    global_samples, global_uncertainty_samples : float
        Offset of the summed cross-correlation's peak and its standard error, in
        samples of the simulated grid.
    per_trace_samples : ndarray (n_matched,)
        Offset applied to each matched trace (the global one unless a smooth
        per-trace offset was fitted), samples.
    per_trace_uncertainty_samples : float
        Standard error of one smoothed per-trace offset (NaN without them).
    trace_estimates_samples : ndarray (n_matched,)
        Each trace's own peak (NaN where unusable): the scatter behind the uncertainty.
    scatter_samples : float
        Robust σ (1.4826 MAD) of the trace estimates about the global offset.
    correlation : float
        Peak of the summed, per-trace normalised cross-correlation over the
        number of traces used: 1 when the observed traces hold the simulated
        surface echo's shape and nothing else; clutter, noise and other echoes
        in the observed trace lower it.
    n_traces : int
        Traces with a usable surface echo in both radargrams.
    interval_s : float
        The simulated sample interval (to convert to seconds).
    at_search_edge : bool
        The peak lies at the edge of the searched lags (raise the maximum offset).
    """

    global_samples: float
    global_uncertainty_samples: float
    per_trace_samples: np.ndarray
    per_trace_uncertainty_samples: float
    trace_estimates_samples: np.ndarray
    scatter_samples: float
    correlation: float
    n_traces: int
    interval_s: float
    at_search_edge: bool = False

    @property
    def global_s(self) -> float:
        return self.global_samples * self.interval_s

    @property
    def global_uncertainty_s(self) -> float:
        return self.global_uncertainty_samples * self.interval_s


def parabolic_peak_offset(y_minus: float, y_0: float, y_plus: float) -> float:
    """Sub-sample position of a peak from three samples around it, in samples from the middle one.

    δ = ½ (y₋ − y₊) / (y₋ − 2 y₀ + y₊), the vertex of the parabola through the
    three points ([2]_); 0 if they do not form a peak. |δ| ≤ ½ for a true peak.
    """
    denom = y_minus - 2.0 * y_0 + y_plus
    if not denom < 0:
        return 0.0
    return float(np.clip(0.5 * (y_minus - y_plus) / denom, -0.5, 0.5))


def estimate_delay_offset(
    observed_ext,
    sim_power,
    surface_first,
    surface_last,
    pad_samples: int,
    max_lag_samples: int,
    interval_s: float,
    *,
    per_trace: bool = False,
    window_traces: int = 51,
    progress: bool = False,
) -> DelayOffset:
    """Estimate the observed timing offset by cross-correlating surface echoes ([1]_).

    For each trace pair, the template s is the simulated power inside the
    surface window (zero elsewhere) and o the observed power on the simulated
    grid extended by ``pad_samples`` on both sides, minus the trace's median
    and clipped at zero (NaN → 0). With C_i(ℓ) = Σ_k s_k o_{k+ℓ} / (‖s‖ ‖o‖),
    the global offset is the peak of Σ_i C_i over |ℓ| ≤ ``max_lag_samples``,
    computed with FFTs, band-limited up-sampled ×:data:`CORRELATION_UPSAMPLING`
    (zero-padded cross-spectrum) and refined by a parabola through the highest
    three values ([2]_). Each trace's own peak (integer lags within the surface
    half-width of the global one, parabolic refinement) gives the scatter; the
    global uncertainty is 1.4826 MAD / √N of those about the global offset ([3]_),
    a statistical error that does not include model errors (DEM, scattering law).

    With ``per_trace``, the trace estimates (gaps filled linearly) are smoothed
    by a running median then a running mean over ``window_traces`` traces; the
    uncertainty of one smoothed value is the robust scatter of the residuals
    over √window_traces.

    Parameters
    ----------
    observed_ext : ndarray (n, Ns + 2 pad)
        Observed power on the extended simulated grid (no offset applied).
    sim_power : ndarray (n, Ns)
        Simulated power of the partner traces.
    surface_first, surface_last : ndarray (n,)
        Surface window (inclusive sample indices on the simulated grid).
    pad_samples, max_lag_samples : int
        Extension of the observed grid and largest |lag| searched (≤ pad).
    interval_s : float
        Simulated sample interval, s.

    Returns
    -------
    DelayOffset
    """
    obs = np.asarray(observed_ext, dtype=np.float64)
    sim = np.asarray(sim_power, dtype=np.float64)
    n, ns = sim.shape
    n_ext = obs.shape[1]
    nfft = sfft.next_fast_len(n_ext + max_lag_samples + 1, real=True)
    k = np.arange(ns)
    half = max(int(np.max(surface_last - surface_first + 1, initial=2)) // 2, 2)
    chunk = 256

    def cross_spectra(a: int, b: int) -> tuple[np.ndarray, np.ndarray]:
        """Normalised cross-spectra conj(S)·O / (‖s‖ ‖o‖) of traces a…b−1, and which traces have both signals."""
        inside = (k[None, :] >= surface_first[a:b, None]) & (k[None, :] <= surface_last[a:b, None])
        s_ext = np.zeros((b - a, n_ext))
        s_ext[:, pad_samples:pad_samples + ns] = np.where(inside & np.isfinite(sim[a:b]), sim[a:b], 0.0)
        o = obs[a:b]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN traces
            med = np.nanmedian(o, axis=1)
        o = np.clip(np.nan_to_num(o - med[:, None], nan=0.0), 0.0, None)
        norm = np.linalg.norm(s_ext, axis=1) * np.linalg.norm(o, axis=1)
        ok = norm > 0
        spec = np.conj(sfft.rfft(s_ext, nfft, axis=1)) * sfft.rfft(o, nfft, axis=1)
        spec[ok] /= norm[ok, None]
        spec[~ok] = 0.0
        return spec, ok

    cross_sum = np.zeros(nfft // 2 + 1, dtype=np.complex128)
    used = np.zeros(n, dtype=bool)
    with tqdm(total=2 * n, unit="trace", delay=1.0, disable=not progress, desc="aligning") as bar:
        for a in range(0, n, chunk):
            b = min(a + chunk, n)
            spec, used[a:b] = cross_spectra(a, b)
            cross_sum += spec.sum(axis=0)
            bar.update(b - a)
        n_used = int(used.sum())
        if n_used == 0:
            raise ObservedDataError(
                "no matched trace has both a simulated surface echo and observed data around it; "
                "check the observed window start and sample interval"
            )
        up = CORRELATION_UPSAMPLING
        cc_up = sfft.irfft(cross_sum, nfft * up) * up
        lags_up = np.arange(-max_lag_samples * up, max_lag_samples * up + 1)
        values = cc_up[lags_up % (nfft * up)]
        i = int(np.argmax(values))
        at_edge = i == 0 or i == values.size - 1
        delta = 0.0 if at_edge else parabolic_peak_offset(values[i - 1], values[i], values[i + 1])
        global_lag = (lags_up[i] + delta) / up
        correlation = float(values[i] / n_used)

        # each trace's own peak, near the global one
        lags = np.arange(int(round(global_lag)) - half, int(round(global_lag)) + half + 1)
        per_trace_lag = np.full(n, np.nan)
        for a in range(0, n, chunk):
            b = min(a + chunk, n)
            spec, ok = cross_spectra(a, b)
            vals = sfft.irfft(spec, nfft, axis=1)[:, lags % nfft]
            j = np.argmax(vals, axis=1)
            for r, jj, v in zip(range(a, b), j, vals):
                if ok[r - a] and 0 < jj < lags.size - 1 and v[jj] > 0:
                    per_trace_lag[r] = lags[jj] + parabolic_peak_offset(v[jj - 1], v[jj], v[jj + 1])
            bar.update(b - a)
    est = per_trace_lag[np.isfinite(per_trace_lag)]
    scatter = float(MAD_TO_SIGMA * np.median(np.abs(est - global_lag))) if est.size else math.nan
    uncertainty = scatter / math.sqrt(est.size) if est.size >= 3 else math.nan

    applied = np.full(n, global_lag)
    per_trace_sigma = math.nan
    if per_trace and est.size >= 3:
        smooth = smooth_offsets_samples(per_trace_lag, window_traces)
        applied = smooth
        resid = per_trace_lag - smooth
        resid = resid[np.isfinite(resid)]
        per_trace_sigma = float(MAD_TO_SIGMA * np.median(np.abs(resid - np.median(resid)))) / math.sqrt(
            min(window_traces, est.size)
        )
    return DelayOffset(
        global_samples=float(global_lag), global_uncertainty_samples=float(uncertainty), per_trace_samples=applied,
        per_trace_uncertainty_samples=per_trace_sigma, trace_estimates_samples=per_trace_lag,
        scatter_samples=scatter, correlation=correlation, n_traces=n_used, interval_s=float(interval_s),
        at_search_edge=bool(at_edge),
    )  # fmt: skip


def smooth_offsets_samples(estimates, window_traces: int) -> np.ndarray:
    """Smooth per-trace offsets: fill NaN linearly, running median, then running mean (both ``window_traces`` long)."""
    est = np.asarray(estimates, dtype=np.float64)
    good = np.isfinite(est)
    idx = np.arange(est.size)
    filled = np.interp(idx, idx[good], est[good])
    w = max(1, min(int(window_traces), est.size))
    return uniform_filter1d(median_filter(filled, size=w, mode="nearest"), size=w, mode="nearest")


# --------------------------------------------------------------------------- 4. noise floor and gain


@dataclass(frozen=True)
class NoiseFloor:
    """Observed noise floor per matched trace.

    Attributes
    ----------
    power : ndarray (n_matched,)
        Noise floor N_i (observed power units): median power of the noise
        samples of the :data:`NOISE_WINDOW_TRACES` traces centred on trace i.
    spread_db : float
        Robust σ (1.4826 MAD) of the noise samples in dB about their trace's floor.
    source : str
        ``"before surface"`` or ``"deepest samples"``.
    """

    power: np.ndarray
    spread_db: float
    source: str

    @property
    def db(self) -> np.ndarray:
        return 10.0 * np.log10(self.power)


def noise_floor_db(observed_ext, surface_first, pad_samples: int, margin_samples: int) -> NoiseFloor:
    """Estimate the observed noise floor from samples recorded before any surface echo.

    Noise samples of trace i: the aligned observed samples (extended grid)
    more than ``margin_samples`` before its simulated surface window. The floor
    N_i is the median power of the noise samples of the
    :data:`NOISE_WINDOW_TRACES` traces centred on trace i (pooled, so a few
    samples per trace suffice); with fewer than :data:`MIN_NOISE_SAMPLES` in
    that window, N_i is interpolated from its neighbours. If no trace has
    :data:`MIN_NOISE_SAMPLES` noise samples of its own, the deepest
    :data:`DEEP_NOISE_FRACTION` of each trace's samples are used instead (this
    can overestimate the floor where deep clutter or subsurface echoes
    remain). Zero medians (quantised data) are raised to the smallest positive
    observed power.
    """
    obs = np.asarray(observed_ext, dtype=np.float64)
    n, m = obs.shape
    col = np.arange(m)[None, :]
    noise_mask = (col < (np.asarray(surface_first)[:, None] + pad_samples - margin_samples)) & np.isfinite(obs)
    source = "before surface"
    if not (noise_mask.sum(axis=1) >= MIN_NOISE_SAMPLES).any():
        source = "deepest samples"
        finite = np.isfinite(obs)
        count = finite.sum(axis=1)
        deep = np.maximum(np.ceil(DEEP_NOISE_FRACTION * count), MIN_NOISE_SAMPLES).astype(int)
        rank_from_end = np.cumsum(finite[:, ::-1], axis=1)[:, ::-1]  # finite samples at or after each one
        noise_mask = finite & (rank_from_end <= deep[:, None])
    half = NOISE_WINDOW_TRACES // 2
    floor = np.full(n, np.nan)
    for i in range(n):
        lo, hi = max(0, i - half), min(n, i + half + 1)
        values = obs[lo:hi][noise_mask[lo:hi]]
        if values.size >= MIN_NOISE_SAMPLES:
            floor[i] = np.median(values)
    good = np.isfinite(floor)
    if not good.any():
        raise ObservedDataError(
            f"cannot estimate the observed noise floor: fewer than {MIN_NOISE_SAMPLES} samples before the surface echo "
            "or in the deepest part of the traces"
        )
    smallest = float(np.min(obs[obs > 0])) if (obs > 0).any() else 1e-300
    floor = np.where(good & ~(floor > 0), smallest, floor)
    idx = np.arange(n)
    floor = np.interp(idx, idx[good], floor[good])
    masked = np.where(noise_mask, obs, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        dev = 10.0 * np.log10(masked / floor[:, None])
    dev = dev[np.isfinite(dev)]
    spread = float(MAD_TO_SIGMA * np.median(np.abs(dev - np.median(dev)))) if dev.size else math.nan
    return NoiseFloor(power=floor, spread_db=spread, source=source)


@dataclass(frozen=True)
class GainFit:
    """Observed/simulated power scale on the surface echo.

    Attributes
    ----------
    gain_db : float
        Median over traces of 10 log10(E_obs / E_sim).
    uncertainty_db : float
        1.4826 MAD / √N of the per-trace values ([3]_).
    scatter_db : float
        Robust σ of the per-trace values (1.4826 MAD).
    per_trace_db : ndarray (n_matched,)
        Per-trace values (NaN where unusable).
    n_traces : int
    """

    gain_db: float
    uncertainty_db: float
    scatter_db: float
    per_trace_db: np.ndarray
    n_traces: int


def fit_gain_db(observed, sim_power, surface_first, surface_last, noise_power) -> GainFit:
    """Fit the power scale of the observed data relative to the simulation, in dB.

    Per trace, over the simulated surface window,
    E_obs = Σ max(P_obs − N, 0) (observed power above its noise floor N) and
    E_sim = Σ P_sim; g_i = 10 log10(E_obs / E_sim). The gain is the median of
    g_i over traces whose window holds observed data throughout and where both
    sums are positive, so a few traces with other echoes do not bias it.
    """
    obs = np.asarray(observed, dtype=np.float64)
    sim = np.asarray(sim_power, dtype=np.float64)
    k = np.arange(sim.shape[1])[None, :]
    inside = (k >= np.asarray(surface_first)[:, None]) & (k <= np.asarray(surface_last)[:, None])
    complete = ~(inside & ~np.isfinite(obs)).any(axis=1) & inside.any(axis=1)
    e_obs = np.where(inside, np.clip(obs - np.asarray(noise_power)[:, None], 0.0, None), 0.0)
    e_obs = np.nansum(e_obs, axis=1)
    e_sim = np.nansum(np.where(inside, sim, 0.0), axis=1)
    ok = complete & (e_obs > 0) & (e_sim > 0)
    per = np.full(obs.shape[0], np.nan)
    per[ok] = 10.0 * np.log10(e_obs[ok] / e_sim[ok])
    vals = per[ok]
    if vals.size == 0:
        raise ObservedDataError(
            "no matched trace has an observed surface echo above the noise floor inside the simulated surface window; "
            "check the window start, sample interval and values (amplitude/power/db)"
        )
    gain = float(np.median(vals))
    scatter = float(MAD_TO_SIGMA * np.median(np.abs(vals - gain)))
    uncertainty = scatter / math.sqrt(vals.size) if vals.size >= 3 else math.nan
    return GainFit(gain_db=gain, uncertainty_db=uncertainty, scatter_db=scatter, per_trace_db=per, n_traces=int(vals.size))


# --------------------------------------------------------------------------- 5. candidates


@dataclass(frozen=True)
class Detections:
    """Per-sample outcome of the comparison on the simulated grid (matched traces × samples).

    ``detected``: observed power ≥ noise floor + threshold. ``explained``:
    detected and accounted for by the gain-matched simulation. ``candidate``:
    detected, not explained, and a local maximum along delay. ``sim_near_power``:
    the strongest gain-matched simulated power within the delay tolerance.
    """

    detected: np.ndarray
    explained: np.ndarray
    candidate: np.ndarray
    sim_near_power: np.ndarray


def detect_unexplained(
    observed, sim_matched, noise_power, *, threshold_db: float, explained_within_db: float,
    tolerance_samples: int, peak_half_width_samples: int,
) -> Detections:  # fmt: skip
    """Classify each observed sample (aligned, on the simulated grid) as noise, explained or candidate.

    With P the observed power, N the trace's noise floor, S the largest
    gain-matched simulated power within ±``tolerance_samples``, T the
    threshold and X ``explained_within_db`` (all in dB where marked):

    * detected:   10 log10(P/N) ≥ T
    * explained:  detected and (10 log10(P/S) ≤ X  or  10 log10(S/N) ≥ T)
      — the simulation predicts this much power here, or predicts a
      detectable echo here at all
    * candidate:  detected, not explained, and P is the largest observed power
      within ±``peak_half_width_samples`` samples of its trace.
    """
    p = np.asarray(observed, dtype=np.float64)
    s = np.nan_to_num(np.asarray(sim_matched, dtype=np.float64), nan=0.0)
    n = np.asarray(noise_power, dtype=np.float64)[:, None]
    thr = 10.0 ** (threshold_db / 10.0)
    within = 10.0 ** (-explained_within_db / 10.0)
    s_near = maximum_filter1d(s, size=2 * tolerance_samples + 1, axis=1, mode="nearest")
    with np.errstate(invalid="ignore"):
        detected = p >= n * thr
        explained = detected & ((s_near >= p * within) | (s_near >= n * thr))
        p_fill = np.where(np.isfinite(p), p, -np.inf)
        local_max = p_fill >= maximum_filter1d(p_fill, size=2 * peak_half_width_samples + 1, axis=1, mode="nearest")
    candidate = detected & ~explained & local_max
    return Detections(detected=detected, explained=explained, candidate=candidate, sim_near_power=s_near)


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


def sub_sample_peaks(power, rows, cols) -> np.ndarray:
    """Sub-sample position (−½…½ samples) of local maxima at (rows, cols) from a parabola through three samples ([2]_).

    0 where a neighbour is missing (window edge or NaN).
    """
    p = np.asarray(power, dtype=np.float64)
    out = np.zeros(len(rows))
    for i, (r, c) in enumerate(zip(rows, cols)):
        if 0 < c < p.shape[1] - 1 and np.isfinite(p[r, c - 1:c + 2]).all():
            out[i] = parabolic_peak_offset(p[r, c - 1], p[r, c], p[r, c + 1])
    return out


# --------------------------------------------------------------------------- the whole comparison


@dataclass
class Comparison:
    """Everything a comparison found; ``dataset`` is what ``comparison.nc`` holds."""

    dataset: xr.Dataset
    match: TraceMatch
    offset: DelayOffset
    gain: GainFit
    noise: NoiseFloor
    candidates: list[dict]
    settings: CompareSettings
    observed_source: str
    sim_source: str
    coverage: float = math.nan
    notes: list[str] = field(default_factory=list)


def body_of(sim_ds: xr.Dataset) -> Body:
    """The reference body recorded in a simulated radargram's attributes."""
    try:
        return Body(
            name=str(sim_ds.attrs.get("body_name", "body")),
            semi_major_m=float(sim_ds.attrs["body_semi_major_m"]),
            semi_minor_m=float(sim_ds.attrs["body_semi_minor_m"]),
        )
    except KeyError as exc:
        raise ObservedDataError(f"the simulated radargram lacks the attribute {exc}; expected a cluttersim radargram") from None


def compare(observed: ObservedRadargram, sim_ds: xr.Dataset, settings: CompareSettings | None = None, *,
            progress: bool = False, sim_source: str = "simulation") -> Comparison:  # fmt: skip
    """Align an observed radargram with a simulated one, fit the gain and list unexplained echoes.

    Parameters
    ----------
    observed : ObservedRadargram
        From :func:`cluttersim.observed.load_observed`.
    sim_ds : xarray.Dataset
        A cluttersim radargram over (about) the same track.
    settings : CompareSettings, optional
    progress : bool
        Progress bar for long alignments.
    sim_source : str
        Name of the simulation for messages and attributes.

    Returns
    -------
    Comparison
        The matched traces, offset, gain, noise floor, ranked candidates and the
        ``comparison.nc`` dataset (observed trace × simulated sample).
    """
    settings = settings or CompareSettings()
    body = body_of(sim_ds)
    match = match_traces(observed.track, sim_ds, body, settings.match_tolerance_m)
    rows_obs = np.flatnonzero(match.matched)
    if rows_obs.size == 0:
        nearest = float(np.nanmin(match.distance_m))
        hint = " (do the two tracks count time from the same epoch?)" if match.method == "time" else ""
        raise ObservedDataError(
            f"{observed.source}: no observed trace has a simulated trace within {match.tolerance_m:.1f} m "
            f"(matched by {match.method}; the closest pair is {nearest:.1f} m apart){hint}"
        )
    rows_sim = match.sim_index[rows_obs]
    dt = sample_interval_of(sim_ds)
    ns = sim_ds.sizes["sample"]
    bandwidth = bandwidth_of(sim_ds)
    cell = 1.0 / (bandwidth * dt) if bandwidth else 2.0  # samples per range cell (1/B)
    margin = int(math.ceil(2.0 * cell))
    peak_half = max(1, int(round(cell)))
    tol_s = settings.delay_tolerance_s if settings.delay_tolerance_s is not None else 2.0 * cell * dt
    tol_samples = max(0, int(math.ceil(tol_s / dt - 1e-9)))
    max_off_s = settings.max_offset_s if settings.max_offset_s is not None else 0.5 * ns * dt
    max_lag = max(1, int(math.ceil(max_off_s / dt)))
    pad = max_lag + margin

    sim_ws = sim_ds["window_start"].values[rows_sim]
    sim_power = np.asarray(sim_ds["power"].values[rows_sim], dtype=np.float64)
    first, last = surface_window_samples(sim_ds, rows_sim, margin)
    obs_power = observed.power[rows_obs]
    obs_ws = observed.window_start_s[rows_obs]
    dt_obs = observed.sample_interval_s

    unaligned = resample_in_chunks(obs_power, obs_ws, dt_obs, grid_edges_s(sim_ws, dt, -pad, ns + pad))
    overlap = np.isfinite(unaligned).any(axis=1)
    if not overlap.any():
        obs_lo, obs_hi = np.min(obs_ws), np.max(obs_ws + observed.n_samples * dt_obs)
        sim_lo, sim_hi = np.min(sim_ws), np.max(sim_ws + ns * dt)
        raise ObservedDataError(
            f"{observed.source}: the observed windows ({obs_lo * 1e6:.3f}–{obs_hi * 1e6:.3f} µs) do not reach the "
            f"simulated ones ({sim_lo * 1e6:.3f}–{sim_hi * 1e6:.3f} µs) within the largest offset searched "
            f"({max_off_s * 1e6:.3f} µs); check the window start and sample interval"
        )
    offset = estimate_delay_offset(
        unaligned, sim_power, first, last, pad, max_lag, dt, per_trace=settings.per_trace_offset,
        window_traces=settings.offset_window_traces, progress=progress,
    )  # fmt: skip
    offset_s = offset.per_trace_samples * dt
    aligned_ext = resample_in_chunks(obs_power, obs_ws, dt_obs, grid_edges_s(sim_ws, dt, -pad, ns + pad, offset_s))
    aligned = aligned_ext[:, pad:pad + ns]
    noise = noise_floor_db(aligned_ext, first, pad, margin)
    gain = fit_gain_db(aligned, sim_power, first, last, noise.power)
    sim_matched = sim_power * 10.0 ** (gain.gain_db / 10.0)
    det = detect_unexplained(
        aligned, sim_matched, noise.power, threshold_db=settings.threshold_db,
        explained_within_db=settings.explained_within_db, tolerance_samples=tol_samples, peak_half_width_samples=peak_half,
    )  # fmt: skip
    cont = continuity_fraction(det.candidate, settings.continuity_traces, peak_half)

    nadir = sim_ds["nadir_delay"].values[rows_sim]
    with np.errstate(invalid="ignore", divide="ignore"):
        unexplained_share = 1.0 - (det.sim_near_power + noise.power[:, None]) / aligned
    ti, ki = np.nonzero(det.candidate)
    abs_delay = sim_ws[ti] + (ki + sub_sample_peaks(aligned, ti, ki)) * dt
    recorded_delay = abs_delay + offset_s[ti] - obs_ws[ti]
    snr = 10.0 * np.log10(aligned[ti, ki] / noise.power[ti])
    excess = 10.0 * np.log10(aligned[ti, ki] / np.maximum(det.sim_near_power[ti, ki], noise.power[ti]))
    share = np.clip(unexplained_share[ti, ki], 0.0, 1.0)
    score = candidate_score(share, cont[ti, ki])
    depth = apparent_depth_m(abs_delay - nadir[ti], settings.permittivity)
    order = np.lexsort((-snr, -score))
    trace_idx = rows_obs[ti]
    candidates = []
    for rank, c in enumerate(order, start=1):
        candidates.append({
            "rank": rank, "trace": int(trace_idx[c]), "sample": int(round(recorded_delay[c] / dt_obs)),
            "delay_us": recorded_delay[c] * 1e6, "two_way_delay_us": abs_delay[c] * 1e6,
            "lat": float(observed.track.lat_deg[trace_idx[c]]), "lon": float(observed.track.lon_deg[trace_idx[c]]),
            "depth_m": float(depth[c]), "snr_db": float(snr[c]), "excess_db": float(excess[c]),
            "unexplained_share": float(share[c]), "continuity": float(cont[ti[c], ki[c]]), "score": float(score[c]),
            "sim_trace": int(rows_sim[ti[c]]), "sim_delay_us": (abs_delay[c] - sim_ws[ti[c]]) * 1e6,
            "grid_sample": int(ki[c]),
        })  # fmt: skip

    finite_obs = np.isfinite(observed.power[rows_obs]).sum()
    covered = np.isfinite(aligned).sum()
    coverage = float(covered * dt / (finite_obs * dt_obs)) if finite_obs else math.nan
    notes = []
    if offset.at_search_edge:
        notes.append(
            f"the offset lies at the edge of the search range (±{max_off_s * 1e6:.3f} µs); raise the maximum offset"
        )
    if offset.correlation < 0.3:
        notes.append(f"weak surface correlation ({offset.correlation:.2f}): the offset may be unreliable")
    if noise.source != "before surface":
        notes.append("noise floor from the deepest samples (no samples before the surface echo)")
    ds = comparison_dataset(
        observed, sim_ds, match, rows_obs, rows_sim, aligned, sim_matched, det, noise, offset, gain, settings,
        tol_s=tol_samples * dt, sim_source=sim_source,
    )  # fmt: skip
    return Comparison(
        dataset=ds, match=match, offset=offset, gain=gain, noise=noise, candidates=candidates, settings=settings,
        observed_source=observed.source, sim_source=sim_source, coverage=coverage, notes=notes,
    )  # fmt: skip


def comparison_dataset(observed, sim_ds, match, rows_obs, rows_sim, aligned, sim_matched, det, noise, offset, gain,
                       settings, *, tol_s, sim_source) -> xr.Dataset:  # fmt: skip
    """The ``comparison.nc`` Dataset: every observed trace × the simulated samples (NaN where unmatched)."""
    n = observed.n_traces
    ns = sim_ds.sizes["sample"]
    dt = sample_interval_of(sim_ds)

    def per_sample(values, fill=np.nan, dtype=np.float32):
        out = np.full((n, ns), fill, dtype=dtype)
        out[rows_obs] = values
        return out

    def per_trace(values, fill=np.nan, dtype=np.float64):
        out = np.full(n, fill, dtype=dtype)
        out[rows_obs] = values
        return out

    offset_s = offset.per_trace_samples * dt
    data = {
        "observed_power": (("trace", "sample"), per_sample(aligned), {
            "units": "observed power unit", "long_name": "observed power, aligned (offset removed) and resampled "
            "onto the simulated delay grid of the matched trace (mean over each sample)"}),
        "simulated_power": (("trace", "sample"), per_sample(sim_matched), {
            "units": "observed power unit", "long_name": "simulated power times the fitted gain"}),
        "detected": (("trace", "sample"), per_sample(det.detected, 0, np.int8), {
            "units": "1", "long_name": "1 where the observed power is at least threshold_db above the noise floor"}),
        "explained": (("trace", "sample"), per_sample(det.explained, 0, np.int8), {
            "units": "1", "long_name": "1 where a detected observed echo is explained by the gain-matched simulation"}),
        "window_start": ("trace", per_trace(sim_ds["window_start"].values[rows_sim]), {
            "units": "s", "long_name": "absolute two-way delay of sample 0 (the matched simulated trace's grid)"}),
        "nadir_delay": ("trace", per_trace(sim_ds["nadir_delay"].values[rows_sim]), {
            "units": "s", "long_name": "two-way delay to the DEM surface below the matched simulated trace"}),
        "observed_window_start": ("trace", observed.window_start_s, {
            "units": "s", "long_name": "absolute two-way delay of the observed sample 0, as recorded"}),
        "delay_offset": ("trace", per_trace(offset_s), {
            "units": "s", "long_name": "timing offset removed from the observed trace (observed later: positive)"}),
        "noise_floor": ("trace", per_trace(noise.power), {
            "units": "observed power unit", "long_name": "observed noise floor (median of pooled noise samples)"}),
        "gain_per_trace": ("trace", per_trace(gain.per_trace_db), {
            "units": "dB", "long_name": "10 log10 of observed over simulated surface-echo energy, per trace"}),
        "sim_trace": ("trace", match.sim_index.astype(np.int32), {
            "units": "1", "long_name": "index of the matched simulated trace (-1: none within match_tolerance_m)"}),
        "match_distance": ("trace", match.distance_m, {
            "units": "m", "long_name": "ground distance to the nearest usable simulated trace"}),
        "lat": ("trace", observed.track.lat_deg, {"units": "degrees_north", "long_name": "antenna latitude"}),
        "lon": ("trace", observed.track.lon_deg, {"units": "degrees_east", "long_name": "antenna longitude"}),
        "alt": ("trace", observed.track.alt_m, {"units": "m", "long_name": "antenna height"}),
    }  # fmt: skip
    if observed.track.time_s is not None:
        data["time"] = ("trace", observed.track.time_s, {"units": "s", "long_name": "trace time"})
    coords = {
        "trace": ("trace", np.arange(n), {"long_name": "observed trace index"}),
        "delay": ("sample", np.arange(ns) * dt, {"units": "s", "long_name": "delay after the trace's window start"}),
    }
    attrs = {
        "Conventions": "CF-1.10",
        "title": "cluttersim comparison of an observed radargram with a simulated one",
        "observed_file": observed.source,
        "observed_values": observed.values,
        "observed_sample_interval_s": observed.sample_interval_s,
        "simulation": sim_source,
        "match_method": match.method,
        "match_tolerance_m": match.tolerance_m,
        "delay_offset_s": offset.global_s,
        "delay_offset_uncertainty_s": _nan_safe(offset.global_uncertainty_s),
        "delay_offset_samples": offset.global_samples,
        "per_trace_offset": int(settings.per_trace_offset),
        "surface_correlation": offset.correlation,
        "gain_db": gain.gain_db,
        "gain_uncertainty_db": _nan_safe(gain.uncertainty_db),
        "noise_floor_source": noise.source,
        "threshold_db": settings.threshold_db,
        "explained_within_db": settings.explained_within_db,
        "delay_tolerance_s": tol_s,
        "permittivity": settings.permittivity,
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _nan_safe(value: float) -> float:
    return float(value) if math.isfinite(value) else float("nan")


# --------------------------------------------------------------------------- products


def compare_to_dir(
    observed_path, observed_track, sample_interval_s: float, out_dir, *, sim=None, dem=None, config=None,
    body_radius_m=None, window_start_s=None, window_start_column=None, fmt=None, settings=None,
    overwrite: bool = False, progress: bool = False, band=None, max_memory_bytes="auto", tec_el_m2=None,
) -> tuple[Comparison, dict[str, Path]]:  # fmt: skip
    """Read an observed radargram, compare it with a simulation and write the products into ``out_dir``.

    Give either ``sim`` (path of a simulated ``radargram.nc``) or ``dem`` (and
    optionally ``config``): the observed track is then simulated on the fly,
    on the observed sampling (sample interval and number of samples; the
    radar's window start, "auto" by default), and the simulation is written
    too, as ``out_dir/radargram.nc`` (usable by ``cluttersim sources``).
    ``band`` names the band of a multi-band radar (default: the first);
    ``max_memory_bytes`` bounds the on-the-fly simulation
    (:func:`~cluttersim.simulate.simulate`). ``tec_el_m2`` puts an ionospheric layer of
    that total electron content between the simulation and the observation: the on-the-fly
    simulation runs through it (``[ionosphere]``), a given ``sim`` is dispersed by
    :func:`cluttersim.ionosphere.disperse_radargram`.

    Products (:data:`COMPARE_FILES`): ``comparison.nc``, ``candidates.csv``,
    ``side_by_side.png``, ``overlay.png``, ``difference.png``. Existing ones
    are refused before any work unless ``overwrite``; all are written under
    temporary names and renamed together at the end.

    Returns
    -------
    (Comparison, dict of Path)
    """
    from .observed import load_observed
    from .radargram import open_radargram

    if (sim is None) == (dem is None):
        raise ObservedDataError("give either a simulated radargram or a DEM to simulate from, not both")
    out_dir = Path(out_dir)
    paths = {k: out_dir / v for k, v in COMPARE_FILES.items()}
    if dem is not None:
        paths["simulation"] = out_dir / "radargram.nc"
    check_new(paths.values(), overwrite)
    observed = load_observed(observed_path, observed_track, sample_interval_s, window_start_s=window_start_s,
                             window_start_column=window_start_column, fmt=fmt)  # fmt: skip
    if sim is not None:
        sim_ds = open_radargram(sim, band=band)
        sim_source = str(sim)
        if tec_el_m2:
            from .ionosphere import disperse_radargram

            sim_ds = disperse_radargram(sim_ds, tec_el_m2)
            sim_source += f" through TEC {tec_el_m2:.3g} el/m²"
    else:
        from .config import default_config
        from .simulate import simulate

        config = config or default_config()
        if config.bands:
            config = config.for_band(band or config.band_names[0])
        elif band is not None:
            raise ConfigError(f"band {band!r} asked for, but the radar has a single band (no [[band]] tables)")
        config = replace(config, radar=replace(config.radar, sample_interval_s=observed.sample_interval_s,
                                               samples=max(observed.n_samples, 2)))  # fmt: skip
        if tec_el_m2:
            from .ionosphere import IonosphereConfig

            config = replace(config, ionosphere=IonosphereConfig(tec_el_m2=float(tec_el_m2)))
        sim_ds = simulate(dem, observed.track, config, body_radius_m=body_radius_m, progress=progress,
                          max_memory_bytes=max_memory_bytes)  # fmt: skip
        sim_source = f"simulated on the fly from {Path(dem).name}"
    result = compare(observed, sim_ds, settings, progress=progress, sim_source=sim_source)
    write_comparison(result, paths, sim_ds=sim_ds if dem is not None else None)
    return result, paths


def write_comparison(result: Comparison, paths: dict[str, Path], sim_ds=None) -> None:
    """Write a comparison's products atomically to ``paths`` (keys of :data:`COMPARE_FILES`, and ``simulation``)."""
    from . import plots
    from .radargram import write_netcdf_to

    keys = list(paths)
    with atomic_paths([paths[k] for k in keys]) as temps:
        tmp = dict(zip(keys, temps))
        result.dataset.to_netcdf(
            tmp["comparison"], engine="h5netcdf", format="NETCDF4",
            encoding={v: {"zlib": True, "complevel": 4, "shuffle": True}
                      for v in ("observed_power", "simulated_power", "detected", "explained")},
        )  # fmt: skip
        write_candidates_csv(result.candidates, tmp["candidates"])
        if "simulation" in tmp:
            write_netcdf_to(sim_ds, tmp["simulation"])
        ds = result.dataset
        perm = result.settings.permittivity
        cand = result.candidates
        plots.plot_comparison_side_by_side(ds, tmp["side_by_side"], permittivity=perm)
        plots.plot_comparison_overlay(ds, tmp["overlay"], candidates=cand, permittivity=perm)
        plots.plot_comparison_difference(ds, tmp["difference"], candidates=cand, permittivity=perm)


def write_candidates_csv(candidates: list[dict], path) -> None:
    """Write the ranked candidates (columns :data:`CANDIDATE_COLUMNS`) to a CSV file."""
    formats = {
        "delay_us": "{:.4f}", "two_way_delay_us": "{:.4f}", "lat": "{:.6f}", "lon": "{:.6f}", "depth_m": "{:.2f}",
        "snr_db": "{:.2f}", "excess_db": "{:.2f}", "unexplained_share": "{:.3f}", "continuity": "{:.2f}",
        "score": "{:.3f}", "sim_delay_us": "{:.4f}",
    }  # fmt: skip
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(CANDIDATE_COLUMNS)
        for c in candidates:
            writer.writerow([formats.get(k, "{}").format(c[k]) for k in CANDIDATE_COLUMNS])


def format_summary(result: Comparison, top: int = 5) -> str:
    """A short text summary: matching, offset ± uncertainty, gain, noise, candidates and the top few."""
    m, o, g = result.match, result.offset, result.gain
    n = m.sim_index.size
    matched = int(m.matched.sum())
    lines = [
        f"traces: {matched} of {n} observed traces matched by {m.method} "
        f"(median distance {np.median(m.distance_m[m.matched]):.1f} m, tolerance {m.tolerance_m:.1f} m)",
    ]
    if matched < n:
        lines.append(f"  unmatched (no simulated trace within {m.tolerance_m:.1f} m): traces {_ranges(m.unmatched_traces)}")
    unc = f"{o.global_uncertainty_samples:.3f}" if math.isfinite(o.global_uncertainty_samples) else "n/a"
    unc_us = f"{o.global_uncertainty_s * 1e6:.5f}" if math.isfinite(o.global_uncertainty_s) else "n/a"
    lines.append(
        f"delay offset: {o.global_samples:+.3f} ± {unc} samples (of {o.interval_s * 1e9:g} ns) = "
        f"{o.global_s * 1e6:+.5f} ± {unc_us} µs "
        f"(observed later than simulated if positive; {o.n_traces} traces, surface correlation {o.correlation:.2f})"
    )
    if result.settings.per_trace_offset:
        lo, hi = np.min(o.per_trace_samples), np.max(o.per_trace_samples)
        lines.append(
            f"  per-trace offset: {lo:+.2f} … {hi:+.2f} samples, ± {o.per_trace_uncertainty_samples:.2f} samples each"
        )
    gunc = f"{g.uncertainty_db:.2f}" if math.isfinite(g.uncertainty_db) else "n/a"
    lines.append(
        f"gain: {g.gain_db:+.2f} ± {gunc} dB (observed/simulated power on the surface echo of {g.n_traces} traces, "
        f"trace-to-trace scatter {g.scatter_db:.2f} dB)"
    )
    if math.isfinite(result.coverage):
        lines.append(
            f"compared: the simulated windows cover {min(result.coverage, 1.0):.0%} of the matched observed samples"
        )
    lines.append(
        f"noise floor: median {np.median(result.noise.db):.2f} dB (observed units, {result.noise.source}); "
        f"threshold {result.settings.threshold_db:g} dB above it"
    )
    cands = result.candidates
    strong = sum(c["score"] >= 0.5 for c in cands)
    lines.append(f"candidates: {len(cands)} unexplained echoes, {strong} with score >= 0.5")
    if cands:
        lines.append(f"  {'rank':>4} {'trace':>6} {'sample':>6} {'delay_us':>9} {'depth_m':>8} {'lat':>11} {'lon':>11} "
                     f"{'snr_db':>6} {'score':>5}")  # fmt: skip
        for c in cands[:top]:
            lines.append(
                f"  {c['rank']:>4} {c['trace']:>6} {c['sample']:>6} {c['delay_us']:>9.3f} {c['depth_m']:>8.1f} "
                f"{c['lat']:>11.5f} {c['lon']:>11.5f} {c['snr_db']:>6.1f} {c['score']:>5.2f}"
            )
    for note in result.notes:
        lines.append(f"note: {note}")
    return "\n".join(lines)


def _ranges(indices) -> str:
    """'0-3, 7, 9-10' for [0, 1, 2, 3, 7, 9, 10] (at most 8 runs listed)."""
    idx = np.asarray(indices)
    if idx.size == 0:
        return "none"
    breaks = np.flatnonzero(np.diff(idx) != 1)
    starts = np.concatenate([[idx[0]], idx[breaks + 1]])
    ends = np.concatenate([idx[breaks], [idx[-1]]])
    parts = [f"{a}" if a == b else f"{a}-{b}" for a, b in zip(starts, ends)]
    return ", ".join(parts[:8]) + (f", … ({len(parts) - 8} more runs)" if len(parts) > 8 else "")

