"""Presumming: N consecutive pulses summed into one output trace (``[processing] presum``).

Sounders often add up several consecutive echoes on board or in ground
processing before anything else, to reduce the data rate and raise the
signal-to-noise ratio. The track given to cluttersim then lists the *pulses*;
with ``presum = N`` each run of N consecutive pulses becomes one output trace:

* incoherent presumming averages the detected power, P = (1/N) Σ |s_i|². It
  keeps the mean power of echo and noise and reduces their fluctuation: for
  independent single-look (exponential) powers the ratio of standard deviation
  to mean falls from 1 to 1/√N (sum of N exponentials is a gamma law of shape N;
  common practice, e.g. Goodman 1976);
* coherent presumming averages the complex echoes before detection,
  P = |(1/N) Σ s_i|². An echo that keeps its phase from pulse to pulse (nadir
  echo of level ground) keeps its power while uncorrelated receiver noise falls
  to P_n/N: the coherent integration gain of N (common practice, e.g. Richards,
  *Fundamentals of Radar Signal Processing*, 2005, §1.5 — cited from memory).
  Clutter ahead of or behind the antenna, whose phase turns from pulse to
  pulse, is suppressed like an unfocused synthetic aperture of length N·d.

Every pulse of a run shares one recording window (on board the window start
is held while the pulses are summed): with an automatic window start the
group's earliest start is used for all of its pulses. Pulses left over at the
end of the track (fewer than N) are dropped. The output trace's position is
the mean of its pulses' positions (latitude, unwrapped longitude, altitude).
"""

from __future__ import annotations

import warnings

import numpy as np

from .track import Track


def n_output_traces(n_pulses: int, presum: int) -> int:
    """Number of complete runs of ``presum`` pulses in ``n_pulses``."""
    return n_pulses // presum


def group_mean(values, presum: int) -> np.ndarray:
    """Mean over each run of ``presum`` consecutive rows (leftover rows dropped).

    Works for power (incoherent presumming) and complex echoes (coherent
    presumming). A NaN anywhere in a run makes its output NaN.
    """
    values = np.asarray(values)
    n = n_output_traces(values.shape[0], presum) * presum
    return values[:n].reshape(-1, presum, *values.shape[1:]).mean(axis=1)


def shared_window_starts(start_s, idx, n_pulses: int, presum: int) -> np.ndarray:
    """Per-pulse window starts with every pulse of a run given the run's earliest start.

    ``start_s`` is the start of the pulses ``idx`` (indices into the track).
    """
    start_s = np.asarray(start_s, dtype=np.float64)
    if presum == 1:
        return start_s
    group = np.asarray(idx) // presum
    earliest = np.full(n_pulses // presum + 1, np.inf)
    np.minimum.at(earliest, group, start_s)
    return earliest[group]


def presum_track(track: Track, presum: int) -> Track:
    """The output traces' positions (and times): means over each run of pulses."""
    if presum == 1:
        return track
    n_out = n_output_traces(len(track), presum)
    if n_out * presum < len(track):
        warnings.warn(
            f"{track.source}: {len(track)} pulses are not a multiple of presum = {presum}; "
            f"the last {len(track) - n_out * presum} are dropped",
            stacklevel=3,
        )
    lon = np.unwrap(np.asarray(track.lon_deg, dtype=np.float64), period=360.0)
    lon_out = (group_mean(lon, presum) + 180.0) % 360.0 - 180.0
    time_out = None if track.time_s is None else group_mean(track.time_s, presum)
    return Track(group_mean(track.lat_deg, presum), lon_out, group_mean(track.alt_m, presum), time_out,
                 source=track.source)  # fmt: skip


def presum_sides(left, right, power, presum: int) -> tuple[np.ndarray, np.ndarray]:
    """Side fractions of presummed traces: power-weighted means of the pulses' fractions,
    f = Σ f_i P_i / Σ P_i (so they stay the share of the summed power)."""
    p = np.nan_to_num(np.asarray(power, dtype=np.float64))
    total = group_mean(p, presum)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = [np.where(total > 0, group_mean(np.nan_to_num(f) * p, presum) / total, np.nan).astype(np.float32)
               for f in (left, right)]  # fmt: skip
    return out[0], out[1]


def presum_dominant(facet, power, presum: int) -> np.ndarray:
    """Dominant facet of each presummed sample: that of the pulse with the most power there."""
    n = n_output_traces(facet.shape[0], presum) * presum
    p = np.nan_to_num(np.asarray(power[:n], dtype=np.float64), nan=-1.0).reshape(-1, presum, power.shape[1])
    pick = p.argmax(axis=1)
    f = facet[:n].reshape(-1, presum, facet.shape[1])
    return np.take_along_axis(f, pick[:, None, :], axis=1)[:, 0, :]
