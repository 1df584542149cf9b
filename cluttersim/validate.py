"""Checks shared by the readers and configs: finite numbers, plausible heights, track geometry.

Each function raises the project's own error (the caller's class) with one line
naming the value and what was expected, or returns the cleaned value.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import TrackError

#: Largest |height| (m) above or below the reference surface accepted in a DEM of an Earth- or
#: Mars-sized body. The highest and lowest points of the terrestrial planets lie within it (Mars:
#: Olympus Mons about +21.9 km and Hellas about −8.2 km on the areoid; Earth: +8.8 km, −11.0 km; from
#: memory, common knowledge), so a cell beyond it is a nodata value that lost its tag (−3.4e38,
#: −99999, 1e20), not terrain.
MAX_ABS_HEIGHT_M = 30_000.0
#: For small bodies the bound is this many mean radii if that is less (an irregular asteroid's
#: surface lies within a radius or so of its mean sphere).
MAX_ABS_HEIGHT_RADII = 1.5
#: Largest transmitted power accepted, W (the most powerful radar transmitters are in the
#: megawatt range: common practice; 1 GW leaves room for any sounder).
MAX_TRANSMIT_POWER_W = 1e9
#: Longitudes accepted in tracks, degrees (either −180..180 or 0..360 conventions, and a track
#: continuing past either end; beyond a full turn it is a typing or unit error).
MAX_ABS_LONGITUDE_DEG = 360.0
#: Largest angle (degrees of arc at the body's centre) between consecutive traces: a quarter of a
#: great circle. No sounder's trace spacing comes near it; a jump this large is a wrong sign or
#: convention in one row.
MAX_TRACE_STEP_DEG = 90.0


def height_limit_m(mean_radius_m: float) -> float:
    """The largest plausible |height| (m) on a body of this mean radius: :data:`MAX_ABS_HEIGHT_M`,
    or :data:`MAX_ABS_HEIGHT_RADII` mean radii for a body small enough."""
    return float(min(MAX_ABS_HEIGHT_M, MAX_ABS_HEIGHT_RADII * mean_radius_m))


def is_finite_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def check_longitudes(lon_deg, source: str) -> None:
    """Refuse longitudes beyond ±:data:`MAX_ABS_LONGITUDE_DEG` (TrackError naming the first row)."""
    lon = np.asarray(lon_deg, dtype=np.float64)
    bad = np.flatnonzero(np.abs(lon) > MAX_ABS_LONGITUDE_DEG)
    if bad.size:
        raise TrackError(
            f"{source}: column 'lon' row {bad[0] + 1} = {lon[bad[0]]:g}: expected -360..360 degrees "
            "(east-positive, -180..180 or 0..360)"
        )


def central_angle_deg(lat1, lon1, lat2, lon2):
    """Angle at the centre of a sphere between points (degrees), by the haversine formula
    (Sinnott 1984, Sky & Telescope 68:159), accurate at small angles."""
    p1, p2 = np.radians(lat1), np.radians(lat2)
    dlat, dlon = p2 - p1, np.radians(np.asarray(lon2) - np.asarray(lon1))
    a = np.sin(dlat / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dlon / 2) ** 2
    return np.degrees(2 * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0))))


def check_trace_steps(lat_deg, lon_deg, source: str) -> None:
    """Refuse consecutive traces more than :data:`MAX_TRACE_STEP_DEG` apart (TrackError). Traces at
    the same position are allowed (a hovering platform); :func:`cluttersim.attribution.right_unit_vectors`
    gives them the direction of travel of the nearest moving trace, with a warning."""
    lat = np.asarray(lat_deg, dtype=np.float64)
    lon = np.asarray(lon_deg, dtype=np.float64)
    if lat.size < 2:
        return
    step = central_angle_deg(lat[:-1], lon[:-1], lat[1:], lon[1:])
    far = np.flatnonzero(step > MAX_TRACE_STEP_DEG)
    if far.size:
        i = far[0]
        raise TrackError(
            f"{source}: rows {i + 1} and {i + 2} are {step[i]:.1f}° of arc apart (lat/lon {lat[i]:g}, {lon[i]:g} then "
            f"{lat[i + 1]:g}, {lon[i + 1]:g}): expected consecutive traces within {MAX_TRACE_STEP_DEG:g}° (a wrong sign or "
            "longitude convention in one row?)"
        )


def check_run_arguments(*, first_return_db: float, nadir_strip_m) -> None:
    """The numeric arguments of :func:`cluttersim.simulate.simulate` (ConfigError)."""
    from .errors import ConfigError

    if not is_finite_number(first_return_db):
        raise ConfigError(f"first_return_db = {first_return_db!r}: expected a finite number of dB")
    if nadir_strip_m is not None and np.ndim(nadir_strip_m) == 0:
        if not (is_finite_number(float(nadir_strip_m)) and nadir_strip_m >= 0):
            raise ConfigError(f"nadir_strip_m = {nadir_strip_m!r}: expected a finite half-width >= 0 m")


def check_far_field(track, h_nadir_m, config) -> None:
    """Refuse antennas less than one wavelength (of any band) above the terrain below them: the
    radar equation holds in the far field only (range much larger than the wavelength; nearer,
    it would return more power than was sent)."""
    from .errors import GeometryError

    lam = max(cfg.radar.wavelength_m for _, cfg in config.per_band())
    height = np.asarray(track.alt_m) - np.asarray(h_nadir_m)
    near = np.flatnonzero(np.isfinite(height) & (height < lam))
    if near.size:
        i = near[0]
        raise GeometryError(
            f"{track.source}: row {i + 1}: the antenna is {height[i]:.6g} m above the terrain, less than one wavelength "
            f"({lam:.6g} m); expected the radar in the far field (a higher antenna or a higher center_frequency_hz)"
        )


def check_power_finite(power_w) -> None:
    """Refuse a radargram whose power overflowed (float32 holds up to 3.4e38 W): values that large
    come from radar, surface or noise numbers far outside any instrument's (ConfigError)."""
    from .errors import ConfigError

    with np.errstate(invalid="ignore"):
        overflow = np.isinf(power_w)
    if overflow.any():
        raise ConfigError(
            f"{int(overflow.sum())} simulated samples overflow (power beyond 3.4e38 W): expected radar numbers of a real "
            "instrument; check transmit_power_w, antenna_gain_dbi, the [surface] law's parameters and [noise]"
        )


def check_noise_power(config) -> None:
    """Refuse a [noise] table whose mean noise power k T B F exceeds the largest transmitter
    (:data:`MAX_TRANSMIT_POWER_W`): a receiver's noise is some 1e-13 W (ConfigError, before any work)."""
    from .errors import ConfigError

    for name, cfg in config.per_band():
        if cfg.noise is None:
            continue
        p = cfg.noise.noise_power_w(cfg.radar.bandwidth_hz, cfg.radar.center_frequency_hz)
        if not (math.isfinite(p) and p <= MAX_TRANSMIT_POWER_W):
            where = f" (band {name})" if name else ""
            raise ConfigError(
                f"[noise] gives a noise power of {p:.3g} W{where}: expected at most {MAX_TRANSMIT_POWER_W:g} W "
                "(k T B F: check noise_temperature_k and the noise figure)"
            )
