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
#: Largest σ0 (linear) a [surface] law may reach at any incidence. Natural surfaces stay below
#: some +30 to +40 dB even at normal incidence on the smoothest ground (from memory; a rough
#: figure, common practice); 60 dB leaves a wide margin.
MAX_SIGMA0 = 1e6
#: Largest power per sample (W) the radar equation may bound a run by before it runs: a tenth of
#: float32's largest value (3.4e38), for the antenna pattern's two-way peak (a dipole's D0² ≈ 2.7)
#: and the aperture's weights, which the bound leaves out.
MAX_POWER_BOUND_W = 3.4e37
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
    the same position are allowed (a hovering platform); :func:`cluttersim.analysis.attribution.right_unit_vectors`
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


def check_sigma0_peak(law: str, params: dict) -> None:
    """Refuse a [surface] law whose largest σ0 over incidence (:func:`cluttersim.physics.scattering.sigma0_peak`)
    exceeds :data:`MAX_SIGMA0`, naming the key(s) that set it (ConfigError, when the config is read)."""
    from .errors import ConfigError
    from .physics.scattering import LAWS, sigma0_peak

    peak, incidence_deg = sigma0_peak(law, params)
    if math.isfinite(peak) and peak <= MAX_SIGMA0:
        return
    keys = LAWS[law].params
    if law in ("constant", "lambert", "cosine"):
        given = f"{keys[0]} = {params[keys[0]]!r}"
    else:
        given = ", ".join(f"{k} = {params[k]!r}" for k in keys) + f" give σ0 = {peak:.3g} at {incidence_deg:.3g}° incidence,"
    raise ConfigError(
        f"[surface] {given} (law {law!r}): expected a backscatter coefficient of at most {MAX_SIGMA0:g} "
        f"({10 * math.log10(MAX_SIGMA0):.0f} dB)"
    )


def check_power_bound(config, nearest_m: float, area_m2: float, pulse_sum: float) -> None:
    """Refuse, before the power kernel runs, radar and surface numbers that could overflow a float32
    radargram (ConfigError naming the keys).

    The bound: every facet's echo is Pt G² λ² σ0 A / ((4π)³ R⁴) (the radar equation), so no sample
    exceeds Pt G² λ² σ0_max ΣA / ((4π)³ R_min⁴) times the pulse response's sum (``pulse_sum``);
    ``nearest_m`` is a lower bound of R_min (the antenna's height above the window's highest cell,
    at least one wavelength), ``area_m2`` the facets' total area. It must stay below
    :data:`MAX_POWER_BOUND_W`.
    """
    from .errors import ConfigError
    from .physics.scattering import sigma0_peak

    sigma0_max, _ = sigma0_peak(config.surface.law, config.surface.params)
    worst = None
    for name, cfg in config.per_band():
        radar = cfg.radar
        r = max(float(nearest_m) if math.isfinite(nearest_m) else 0.0, radar.wavelength_m)
        bound = radar.radar_constant_w_m2() * sigma0_max * float(area_m2) * float(pulse_sum) / r**4
        if worst is None or not bound <= worst[0]:
            worst = (bound, name, radar, r)
    bound, name, radar, r = worst
    if math.isfinite(bound) and bound <= MAX_POWER_BOUND_W:
        return
    where = f" (band {name})" if name else ""
    raise ConfigError(
        f"[radar] transmit_power_w = {radar.transmit_power_w:g}, antenna_gain_dbi = {radar.antenna_gain_dbi:g}, "
        f"center_frequency_hz = {radar.center_frequency_hz:g}{where} with [surface] σ0 up to {sigma0_max:.3g} allow "
        f"{bound:.3g} W per sample from ground {r:.3g} m away: expected at most {MAX_POWER_BOUND_W:g} W "
        "(a float32 radargram's range); check those keys"
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
