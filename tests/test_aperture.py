"""Along-track processing emulation against the Fresnel-zone and focused-aperture formulas."""

import math

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.aperture import ProcessingConfig, focused_resolution_m, fresnel_zone_radius_m
from cluttersim.errors import ConfigError
from cluttersim.radar import RadarConfig
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


def test_processing_table_errors():
    with pytest.raises(ConfigError, match="needs aperture_length_m > 0"):
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
    for name, proc in (("none", {}), ("focused", {"aperture": "focused", "aperture_length_m": 50.0}),
                       ("unfocused", {"aperture": "unfocused"})):  # fmt: skip
        cfg = SimulationConfig(radar=radar, surface=SurfaceConfig("hagfors", {"C": 1000.0, "rho": 0.1}),
                               processing=ProcessingConfig(**proc))  # fmt: skip
        hill = simulate(bump_scene(d), track, cfg, sources=False)["power"].values.astype(float)
        flat = simulate(bump_scene(d, flat=True), track, cfg, sources=False)["power"].values.astype(float)
        runs[name] = (hill - flat).clip(0).sum(axis=1)  # the bump's own echo energy per trace
    lam = 299_792_458.0 / 60e6
    dist = math.hypot(BUMP_EAST_M, 1000.0 - BUMP_CENTRE_Z_M)  # antenna to sphere centre when abeam
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


def test_unfocused_processing_keeps_the_first_fresnel_zone(dome_runs):
    along, runs, lam, r0, k = dome_runs
    ratio = runs["unfocused"] / runs["none"]
    r_f = fresnel_zone_radius_m(lam, r0)  # 52.7 m at 1112 m
    inside = np.abs(along) < 0.7 * r_f / k
    outside = np.abs(along) > 1.5 * r_f / k
    assert np.all(ratio[inside] > 0.8)
    assert np.all(ratio[outside] < 0.05)
