"""Comparison grids: pairing observed with simulated traces, resampling in delay, surface windows.

Part of the comparison (:mod:`cluttersim.analysis.compare`): :func:`match_traces` pairs
each observed trace with the nearest simulated trace (in time when both tracks
have it, else in position); :func:`resample_bin_mean_power` averages a power
trace over the bins of another delay grid (for display and ``comparison.nc``);
:func:`cubic_convolution` evaluates a sampled trace at arbitrary delays (the
model of an observed sample, used by the alignment and the detector);
:func:`surface_window_samples` finds the simulated surface echo.

References
----------
.. [1] Keys, R. G. (1981). Cubic convolution interpolation for digital image
       processing. IEEE Trans. Acoust. Speech Signal Process. 29(6), 1153–1160
       (the kernel with a = −1/2, third-order accurate).
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import xarray as xr
from scipy.spatial import cKDTree

from ..physics.body import Body
from ..errors import ObservedDataError

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



def cubic_convolution(values, x, *, before=np.nan, after=np.nan) -> np.ndarray:
    """Evaluate sampled rows at fractional sample positions by cubic convolution ([1]_).

    Row ``i`` of ``values`` holds samples at positions 0, 1, …, m−1; the
    result at position x is Σ_j W(x − j) v_j with Keys' kernel (a = −½)
    W(s) = 1.5|s|³ − 2.5|s|² + 1 for |s| ≤ 1, −0.5|s|³ + 2.5|s|² − 4|s| + 2 for
    1 < |s| < 2 (exact at the samples, third-order accurate between them).
    Samples beyond the ends are the end samples repeated.

    Parameters
    ----------
    values : array_like (n, m)
        Sampled rows (NaN propagates to the positions it touches).
    x : array_like (n, q)
        Positions per row, in samples.
    before, after : float
        Value for positions below −½ / above m − ½ (default NaN).

    Returns
    -------
    ndarray (n, q)
    """
    v = np.asarray(values, dtype=np.float64)
    x = np.asarray(x, dtype=np.float64)
    m = v.shape[1]
    j0 = np.floor(x)
    f = x - j0
    j0 = j0.astype(np.int64)
    out = np.zeros(x.shape)
    for tap, s in ((-1, 1.0 + f), (0, f), (1, 1.0 - f), (2, 2.0 - f)):
        s = np.abs(s)
        w = np.where(s <= 1.0, (1.5 * s - 2.5) * s * s + 1.0, ((-0.5 * s + 2.5) * s - 4.0) * s + 2.0)
        out += w * np.take_along_axis(v, np.clip(j0 + tap, 0, m - 1), axis=1)
    out = np.where(x < -0.5, before, out)
    return np.where(x > m - 0.5, after, out)


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
