"""Coherent mode: phase sums against the two-way phase 4πR/λ, and its mean against incoherent power."""

import math

import numpy as np
import pytest

from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track, simulate
from cluttersim import kernels
from cluttersim.physics.aperture import ProcessingConfig
from cluttersim.errors import ConfigError
from cluttersim.physics.radar import RadarConfig
from cluttersim.simulate import detect_coherent
from scenes import MARS_RADIUS_M, write_geotiff

C = 299_792_458.0  # SI definition


def two_facet_power(separation_m, radar, random_phase=False):
    """Power of two equal level facets straight below an antenna 300 km up, one `separation_m`
    further in range than the other, summed coherently (kernel level)."""
    k = 8
    rel = np.array([[0.0, 0.0], [0.0, 0.0], [0.0, -separation_m]], dtype=np.float32)
    normal = np.array([[0.0, 0.0], [0.0, 0.0], [1.0, 1.0]], dtype=np.float32)
    area = np.array([1.0, 1.0], dtype=np.float32)
    ant = np.array([[0.0, 0.0, 300e3]])
    nbins = 64
    bin0 = np.array([2 * 300e3 / C - 20 * radar.sample_interval_s])
    re = np.zeros((1, nbins * k + 2))
    im = np.zeros((1, nbins * k + 2))
    weighting = np.zeros(8)
    kernels.accumulate_complex(ant, bin0, radar.sample_interval_s, k, np.zeros((1, 3)), np.array([10.0]),
                               np.array([0, 2]), rel, normal, area, 0, 1.0, 0.0, 1.0, np.zeros((1, 3, 3)), weighting,
                               np.zeros((1, 1), np.float32), np.zeros(2, np.int32), np.zeros((1, 2)), np.zeros(1), 0.0,
                               4 * math.pi / radar.wavelength_m, random_phase, 0, re, im)  # fmt: skip
    return detect_coherent(re, im, radar, k, nbins)[0].max()


# 60 MHz (λ = 5 m) with 1 MHz bandwidth (150 m resolution): the envelopes of the two echoes
# coincide to < 1 %, so only their carrier phase 4πΔR/λ decides how they add.
RADAR = RadarConfig(center_frequency_hz=60e6, bandwidth_hz=1e6, sample_interval_s=250e-9, samples=64)


def test_two_equal_facets_a_quarter_wavelength_apart_cancel():
    single = two_facet_power(1e6, RADAR)  # the second facet far outside the window: one facet
    lam = RADAR.wavelength_m
    cancel = two_facet_power(lam / 4, RADAR)  # two-way phase difference 4π(λ/4)/λ = π
    add = two_facet_power(lam / 2, RADAR)  # 2π: in phase
    assert cancel < 1e-3 * single
    assert add == pytest.approx(4 * single, rel=0.02)  # |2a|² = 4|a|²


@pytest.fixture(scope="module")
def rough(tmp_path_factory):
    rng = np.random.default_rng(5)
    n = 120
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n)))
    kk[0, 0] = 1
    z = np.fft.ifft2((rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * kk**-1.8).real
    z *= 100.0 / z.std()
    dem = write_geotiff(tmp_path_factory.mktemp("coh") / "rough.tif", z, -0.6, 0.6, 0.01)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -0.1, 0.0, 0.1, 0.0, 200e3, 3000.0)
    return dem, track


def test_coherent_mean_power_over_seeds_matches_incoherent(rough):
    dem, track = rough
    radar = RadarConfig(samples=256)
    surface = SurfaceConfig("cosine", {"k": 0.02, "n": 1.5})
    inc = simulate(dem, track, SimulationConfig(radar=radar, surface=surface), sources=False)["power"].values
    seeds = 40
    acc = np.zeros_like(inc, dtype=np.float64)
    for seed in range(seeds):
        cfg = SimulationConfig(radar=radar, surface=surface, processing=ProcessingConfig(mode="coherent", seed=seed))
        acc += simulate(dem, track, cfg)["power"].values
    mean = acc / seeds
    strong = inc > 1e-2 * inc.max()
    # averaged over the strong samples of all traces: the same power (speckle of 40 looks
    # averages to ~1/√(40·samples)); a few percent for point vs extended facets
    assert mean[strong].sum() == pytest.approx(inc[strong].sum(), rel=0.05)


def test_coherent_mode_is_reproducible_from_its_seed(rough):
    dem, track = rough
    cfg = SimulationConfig(radar=RadarConfig(samples=128), processing=ProcessingConfig(mode="coherent", seed=3))
    a = simulate(dem, track, cfg)["power"].values
    b = simulate(dem, track, cfg)["power"].values
    c = simulate(dem, track, SimulationConfig(radar=cfg.radar, processing=ProcessingConfig(mode="coherent", seed=4)))
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c["power"].values)


def test_processing_mode_errors():
    with pytest.raises(ConfigError, match=r"\[processing\] mode = 'phased'"):
        SimulationConfig.from_dict({"processing": {"mode": "phased"}})
    with pytest.raises(ConfigError, match=r"\[processing\] seed = -1"):
        SimulationConfig.from_dict({"processing": {"mode": "coherent", "seed": -1}})
