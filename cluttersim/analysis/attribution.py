"""Echo-source attribution: which side of the track, which ground cell, first return.

The simulation kernel (:func:`cluttersim.kernels.accumulate_power`) sorts every
facet's power by side — within a nadir strip, left or right of the direction of
travel — and remembers, per delay bin, the facet with the largest power
density. This module prepares the per-trace geometry for that and turns the
kernel's raw record into the radargram's source variables.

Left and right: with v̂ the horizontal direction of travel and û the local
vertical, the right-hand unit vector is r̂ = v̂ × û (flying north, right is
east). A facet at position P seen from the antenna A lies on the right when
(P − A)·r̂ > w, on the left when it is < −w, and in the nadir strip otherwise;
w defaults to the pulse-limited footprint radius
(:func:`cluttersim.physics.radar.pulse_limited_radius_m`).
"""

from __future__ import annotations

import numpy as np

from ..physics.body import Body
from ..track import Track


def right_unit_vectors(body: Body, track: Track) -> np.ndarray:
    """Unit vectors (ntrace, 3), horizontal and to the right of the direction of travel.

    The direction of travel is the central difference of the antenna's body-fixed
    positions, made horizontal. A single-trace track is taken as flying north.
    """
    up = body.up_unit(track.lat_deg, track.lon_deg)
    if len(track) < 2:
        lat = np.radians(track.lat_deg)
        lon = np.radians(track.lon_deg)
        travel = np.stack([-np.sin(lat) * np.cos(lon), -np.sin(lat) * np.sin(lon), np.cos(lat)], axis=-1)
    else:
        pos = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m)
        travel = np.gradient(pos, axis=0)
    travel = travel - np.sum(travel * up, axis=-1, keepdims=True) * up
    travel = _fill_still_traces(travel, up, track)
    right = np.cross(travel, up)
    norm = np.linalg.norm(right, axis=-1, keepdims=True)
    return right / np.where(norm > 0, norm, 1.0)


def _fill_still_traces(travel, up, track):
    """Traces without a horizontal direction of travel of their own (repeated positions, a vertical
    climb) take the nearest moving trace's, made horizontal at their place; a track that never moves
    is taken as flying north. Either is said in a warning: left and right were undefined there
    (every echo counted in the nadir strip)."""
    import warnings

    speed = np.linalg.norm(travel, axis=-1)
    still = ~(speed > 1e-6)  # metres per trace: repeated positions give exactly 0
    if not still.any():
        return travel
    moving = np.flatnonzero(~still)
    first = int(np.flatnonzero(still)[0]) + 1
    if moving.size == 0:
        lat = np.radians(track.lat_deg)
        lon = np.radians(track.lon_deg)
        travel = np.stack([-np.sin(lat) * np.cos(lon), -np.sin(lat) * np.sin(lon), np.cos(lat)], axis=-1)
        warnings.warn(f"{track.source}: the antenna never moves horizontally; left and right are taken for a flight "
                      "to the north (west and east)", stacklevel=3)  # fmt: skip
        return travel
    idx = np.flatnonzero(still)
    k = np.clip(np.searchsorted(moving, idx), 0, moving.size - 1)
    km = np.clip(k - 1, 0, moving.size - 1)
    nearest = np.where(np.abs(moving[km] - idx) <= np.abs(moving[k] - idx), moving[km], moving[k])
    travel = travel.copy()
    t = travel[nearest]
    travel[idx] = t - np.sum(t * up[idx], axis=-1, keepdims=True) * up[idx]
    warnings.warn(f"{track.source}: {idx.size} trace(s) without a horizontal direction of travel of their own (repeated "
                  f"positions; the first at row {first}); left and right use the nearest moving trace's direction",
                  stacklevel=3)  # fmt: skip
    return travel


def side_fractions(left_w, right_w, total_w):
    """Left and right shares of each sample's power (float32; NaN where there is no power)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = total_w > 0
        left = np.where(ok, left_w / total_w, np.nan)
        right = np.where(ok, right_w / total_w, np.nan)
    return np.clip(left, 0, 1).astype(np.float32), np.clip(right, 0, 1).astype(np.float32)


def first_return(power_w, window_start_s, nadir_delay_s, dt_s, threshold_db: float, mainlobe_samples: int):
    """Per trace, the earliest echo whose power reaches ``threshold_db`` relative to the nadir echo.

    The nadir echo's power is the largest within ±``mainlobe_samples`` of the
    nadir delay. Returns ``(delay_s, sample)``: the absolute two-way delay at
    which the power first crosses the threshold (linear interpolation between
    samples) and the index of the first sample at or above it (−1 if none).
    """
    ntr, ns = power_w.shape
    delay = np.full(ntr, np.nan)
    sample = np.full(ntr, -1, dtype=np.int64)
    for t in range(ntr):
        p = power_w[t]
        if not np.isfinite(nadir_delay_s[t]) or not np.isfinite(p).all():
            continue
        k = int(round((nadir_delay_s[t] - window_start_s[t]) / dt_s))
        lo, hi = max(k - mainlobe_samples, 0), min(k + mainlobe_samples + 1, ns)
        if lo >= hi:
            continue
        level = p[lo:hi].max() * 10.0 ** (threshold_db / 10.0)
        above = np.flatnonzero(p >= level)
        if above.size == 0 or level <= 0:
            continue
        j = int(above[0])
        frac = 0.0
        if j > 0 and p[j] > p[j - 1]:
            frac = (level - p[j - 1]) / (p[j] - p[j - 1]) - 1.0
        delay[t] = window_start_s[t] + (j + frac) * dt_s
        sample[t] = j
    return delay, sample
