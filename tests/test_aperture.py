"""Along-track processing emulation against the Fresnel-zone and focused-aperture formulas."""

import math

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.aperture import (
    ProcessingConfig,
    along_track_weight,
    doppler_resolution_m,
    focused_resolution_m,
    fresnel_zone_radius_m,
    unfocused_response,
)
from cluttersim.errors import ConfigError
from cluttersim.physics.radar import RadarConfig
from scenes import UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_utm

BUMP_EAST_M, BUMP_RADIUS_M, BUMP_CENTRE_Z_M = 700.0, 15.0, -5.0  # a 10 m spherical cap: nearly a point


def bump_scene(d, flat=False):
    """A level plain with one small spherical cap (radius 15 m) 700 m east of the scene centre."""
    east, north = utm_grid(400, 5.0)
    r2 = (east - UTM_X0_M - BUMP_EAST_M) ** 2 + (north - UTM_Y0_M) ** 2
    z = np.clip(np.sqrt(np.clip(BUMP_RADIUS_M**2 - r2, 0, None)) + BUMP_CENTRE_Z_M, 0, None)
    return write_utm(d / ("plain.tif" if flat else "bump.tif"), np.zeros_like(z) if flat else z, 5.0)


def test_fresnel_zone_radius_for_15_m_at_300_km_is_1_5_km():
    # √(λh/2): λ = 15 m, h = 300 km → 1.5 km (common practice)
    assert fresnel_zone_radius_m(15.0, 300e3) == pytest.approx(1500.0, rel=1e-12)


def test_focused_resolution_is_lambda_r_over_2l():
    # δ = λR/(2L) (common practice, e.g. Curlander & McDonough 1991): 15 m, 300 km, 3 km → 750 m
    assert focused_resolution_m(15.0, 300e3, 3000.0) == pytest.approx(750.0, rel=1e-12)


def test_doppler_resolution_is_speed_over_bandwidth():
    # δ = v/B_D (common practice for focused along-track processing; Curlander & McDonough 1991,
    # from memory): 3400 m/s over 4.25 Hz → 800 m; the same as δ = λR/(2L) with L = λR B_D/(2v)
    assert doppler_resolution_m(3400.0, 4.25) == pytest.approx(800.0, rel=1e-12)
    lam, r = 15.0, 300e3
    length = lam * r * 4.25 / (2 * 3400.0)
    assert focused_resolution_m(lam, r, length) == pytest.approx(800.0, rel=1e-12)


def test_processing_table_errors():
    with pytest.raises(ConfigError, match="needs exactly one of aperture_length_m > 0"):
        SimulationConfig.from_dict({"processing": {"aperture": "focused", "aperture_length_m": 5.0,
                                                   "doppler_bandwidth_hz": 2.0}})  # fmt: skip
    with pytest.raises(ConfigError, match=r"doppler_bandwidth_hz = -1: expected a number >= 0"):
        SimulationConfig.from_dict({"processing": {"doppler_bandwidth_hz": -1}})
    with pytest.raises(ConfigError, match="needs exactly one of aperture_length_m > 0"):
        SimulationConfig.from_dict({"processing": {"aperture": "focused"}})
    with pytest.raises(ConfigError, match=r"\[processing\] aperture = 'sar'"):
        SimulationConfig.from_dict({"processing": {"aperture": "sar"}})
    with pytest.raises(ConfigError, match=r"\[processing\] unknown key 'stacking'"):
        SimulationConfig.from_dict({"processing": {"stacking": 4}})


@pytest.fixture(scope="module")
def dome_runs(tmp_path_factory):
    """A small bump seen from a track passing it at 700 m, 1 km up."""
    d = tmp_path_factory.mktemp("ap")
    along = np.linspace(-200, 200, 81)
    track = utm_track(np.full(along.size, UTM_X0_M), UTM_Y0_M + along, 1000.0)
    radar = RadarConfig(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9, samples=256)
    runs = {}
    lam = 299_792_458.0 / 60e6
    dist = math.hypot(BUMP_EAST_M, 1000.0 - BUMP_CENTRE_Z_M)  # antenna to sphere centre when abeam
    # the Doppler form with the bandwidth that gives the 50 m aperture's resolution at the bump
    speed = 100.0
    b_d = speed / focused_resolution_m(lam, dist - BUMP_RADIUS_M, 50.0)
    for name, proc in (("none", {}), ("focused", {"aperture": "focused", "aperture_length_m": 50.0}),
                       ("unfocused", {"aperture": "unfocused"}),
                       ("doppler", {"aperture": "focused", "doppler_bandwidth_hz": b_d, "platform_speed_m_s": speed})):  # fmt: skip
        cfg = SimulationConfig(radar=radar, surface=SurfaceConfig("hagfors", {"C": 1000.0, "rho": 0.1}),
                               processing=ProcessingConfig(**proc))  # fmt: skip
        hill = simulate(bump_scene(d), track, cfg, sources=False)["power"].values.astype(float)
        flat = simulate(bump_scene(d, flat=True), track, cfg, sources=False)["power"].values.astype(float)
        runs[name] = (hill - flat).clip(0).sum(axis=1)  # the bump's own echo energy per trace
    k = 1 - BUMP_RADIUS_M / dist  # the bright point moves a little with the antenna: its offset is k·y
    return along, runs, lam, dist - BUMP_RADIUS_M, k


def test_focused_aperture_suppresses_clutter_ahead_and_behind(dome_runs):
    along, runs, lam, r0, k = dome_runs
    ratio = runs["focused"] / runs["none"]
    delta = focused_resolution_m(lam, r0, 50.0)  # 55.6 m at 1112 m
    abeam = np.argmin(np.abs(along))
    assert ratio[abeam] > 0.9  # cross-track clutter stays
    # the response follows sinc²(k y / δ): half power at k y = 0.443 δ, first null at δ
    predicted = np.sinc(k * along / delta) ** 2
    main = np.abs(along) < 1.2 * delta / k
    np.testing.assert_allclose(ratio[main], predicted[main], atol=0.1)
    far = np.abs(along) > 2.2 * delta / k
    assert np.all(ratio[far] < 0.06)


def test_unfocused_processing_follows_the_unphased_sum(dome_runs):
    """The unfocused aperture is the response of an unphased sum of the pulses over L = √(λR)
    (it was a hard window |y| ≤ √(λR/2) before, about twice as wide): the bump's echo follows
    aperture.unfocused_response(k y / √(λR)), 0.80 abeam, which test_unfocused_response_is_the_sum
    checks against a direct sum of the pulses' phases."""
    along, runs, lam, r0, k = dome_runs
    ratio = runs["unfocused"] / runs["none"]
    predicted = unfocused_response(k * along / np.sqrt(lam * r0))
    np.testing.assert_allclose(ratio, predicted, atol=0.05)
    assert ratio[np.argmin(np.abs(along))] == pytest.approx(0.80, abs=0.03)


@pytest.mark.parametrize("y_over_root", [0.0, 0.15, 0.3, 0.6, 1.0, 2.5])
def test_unfocused_response_is_the_sum_of_the_pulses_phases(y_over_root):
    """Direct numerical sum of N pulses' two-way phases exp(−i 4π R_j/λ) over the aperture
    L = √(λR), R_j = √(R² + (y − x_j)²) exact, normalised by N: |mean|² against the Fresnel-integral
    form (30 m wavelength, 10 km range, 2001 pulses)."""
    lam, r = 30.0, 10e3
    length = math.sqrt(lam * r)
    x = np.linspace(-length / 2, length / 2, 2001)
    y = y_over_root * math.sqrt(lam * r)
    rj = np.sqrt(r * r + (y - x) ** 2)
    direct = abs(np.mean(np.exp(-4j * math.pi * rj / lam))) ** 2
    assert unfocused_response(y_over_root) == pytest.approx(direct, abs=2e-3)
    # and the kernel's weight function agrees
    assert along_track_weight(y, r, lam, "unfocused") == pytest.approx(direct, abs=2e-3)


def test_doppler_form_uses_the_footprint_speed():
    """δ = v_g/B_D with v_g = v Rp/(Rp + h): at 300 km over Mars v_g = 0.9188 v, so δ is 8.8 %
    smaller than with the platform speed (the issue's figure; Rp from the IAU 2015 report)."""
    from cluttersim import Body, great_circle_track

    body = Body.sphere(3_396_190.0)
    track = great_circle_track(body, 0.0, 0.0, 1.0, 0.0, 300e3, 500.0)
    proc = ProcessingConfig(aperture="focused", doppler_bandwidth_hz=4.0, platform_speed_m_s=3500.0)
    proc = proc.with_track_speed(track, body)
    assert proc.footprint_speed_m_s == pytest.approx(3500.0 * 3_396_190.0 / 3_696_190.0, rel=1e-9)
    assert proc.kernel_params(15.0)[1] == pytest.approx(proc.footprint_speed_m_s / 4.0)
    assert 3500.0 / proc.footprint_speed_m_s == pytest.approx(1.088, abs=0.001)


def test_doppler_bandwidth_form_matches_the_equivalent_aperture(dome_runs):
    along, runs, *_ = dome_runs
    # same δ at the bump's range: the two forms weight its echo alike (they differ only in how δ
    # varies with range, which over the bump's few metres of range is nothing)
    np.testing.assert_allclose(runs["doppler"] / runs["none"], runs["focused"] / runs["none"], atol=0.01)


def test_platform_speed_comes_from_the_track_times():
    from cluttersim import Body

    body = Body.sphere(3_396_190.0)
    from cluttersim import great_circle_track

    # 3400 m/s over the ground at 300 km up: the antenna moves 3400 (R + h)/R m/s (same angular rate)
    track = great_circle_track(body, 0.0, 0.0, 1.0, 0.0, 300e3, 500.0, speed_m_s=3400.0)
    proc = ProcessingConfig(aperture="focused", doppler_bandwidth_hz=4.0).with_track_speed(track, body)
    assert proc.platform_speed_m_s == pytest.approx(3400.0 * (3_396_190.0 + 300e3) / 3_396_190.0, rel=1e-6)
    untimed = great_circle_track(body, 0.0, 0.0, 1.0, 0.0, 300e3, 500.0)
    with pytest.raises(ConfigError, match="doppler_bandwidth_hz needs the platform speed"):
        ProcessingConfig(aperture="focused", doppler_bandwidth_hz=4.0).with_track_speed(untimed, body)
