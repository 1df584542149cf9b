"""Receiver noise floor: k T B F, the [noise] table and the noise added to a simulated radargram."""

import math

import numpy as np
import pytest

from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track, simulate
from cluttersim.errors import ConfigError
from cluttersim.physics.noise import BOLTZMANN_J_K, NoiseConfig, add_noise, noise_power_w
from cluttersim.physics.radar import RadarConfig
from scenes import MARS_RADIUS_M, flat_geographic

C = 299_792_458.0  # SI definition

#: k T0 B for T0 = 290 K, B = 10 MHz: 1.380649e-23 × 290 × 1e7 = 4.0039e-14 W (k exact, CODATA 2018 / SI 2019).
KTB_290K_10MHZ_W = 4.00388e-14
#: The same in dBW: −174 dBm/Hz (kT at 290 K, common practice) + 70 dB(10 MHz) − 30 = −134 dBW; exactly −133.976 dBW.
KTB_290K_10MHZ_DBW = -133.976


def test_boltzmann_constant_is_the_exact_si_value():
    assert BOLTZMANN_J_K == 1.380649e-23  # SI 2019 definition of the kelvin (CODATA 2018)


def test_ktb_at_290k_over_10mhz():
    p = noise_power_w(10e6, temperature_k=290.0)
    assert p == pytest.approx(KTB_290K_10MHZ_W, rel=1e-5)
    assert 10 * math.log10(p) == pytest.approx(KTB_290K_10MHZ_DBW, abs=1e-3)
    assert 10 * math.log10(p / 10e6) + 30 == pytest.approx(-174.0, abs=0.03)  # kT0 = −174 dBm/Hz, common practice


def test_noise_figure_0db_is_the_290k_reference_and_3db_doubles_it():
    ref = noise_power_w(10e6, temperature_k=290.0)
    assert noise_power_w(10e6, noise_figure_db=0.0) == pytest.approx(ref, rel=1e-12)
    # F = 10^(3/10) = 1.9953: "3 dB doubles" to 0.24 %
    assert noise_power_w(10e6, noise_figure_db=3.0) / ref == pytest.approx(2.0, rel=2.5e-3)
    assert noise_power_w(10e6, noise_figure_db=3.0) / ref == pytest.approx(10**0.3, rel=1e-12)


def test_noise_power_needs_exactly_one_of_temperature_and_figure():
    with pytest.raises(ValueError, match="exactly one"):
        noise_power_w(10e6)
    with pytest.raises(ValueError, match="exactly one"):
        noise_power_w(10e6, temperature_k=290.0, noise_figure_db=3.0)
    with pytest.raises(ValueError, match="temperature_k = -1.0"):
        noise_power_w(10e6, temperature_k=-1.0)


def test_add_noise_mean_is_noise_power_and_nan_stays_nan():
    power = np.zeros((200, 1000), dtype=np.float32)
    power[3] = np.nan
    out = add_noise(power, 2e-14, np.random.default_rng(5))
    assert out.dtype == np.float32 and np.isnan(out[3]).all() and not np.isnan(np.delete(out, 3, 0)).any()
    assert np.all(np.delete(out, 3, 0) >= 0)
    # exponential law: mean P_n, std P_n (Goodman 1976); 199 000 samples → σ(mean) = 0.22 %
    assert np.nanmean(out) == pytest.approx(2e-14, rel=0.01)
    assert np.nanstd(out) == pytest.approx(2e-14, rel=0.02)
    assert np.all(power[~np.isnan(power)] == 0)  # input untouched


def test_noise_table_is_parsed_and_round_trips():
    cfg = SimulationConfig.from_dict({"noise": {"noise_figure_db": 3.0, "seed": 7}})
    assert cfg.noise == NoiseConfig(noise_figure_db=3.0, seed=7)
    assert cfg.to_dict()["noise"] == {"noise_figure_db": 3.0, "seed": 7}
    assert SimulationConfig.from_dict({"noise": {"noise_temperature_k": 500}}).noise.noise_temperature_k == 500.0
    assert SimulationConfig.from_dict({}).noise is None and "noise" not in SimulationConfig.from_dict({}).to_dict()


@pytest.mark.parametrize(
    "table, message",
    [
        ({"noise_figure_db": 3.0, "temp": 1}, "[noise] unknown key 'temp'"),
        ({}, "[noise] expected exactly one of noise_temperature_k and noise_figure_db"),
        ({"noise_figure_db": 3.0, "noise_temperature_k": 290.0}, "[noise] expected exactly one"),
        ({"noise_temperature_k": 0.0}, "[noise] noise_temperature_k = 0.0: expected a positive temperature"),
        ({"noise_temperature_k": "hot"}, "[noise] noise_temperature_k = 'hot': expected a number"),
        ({"noise_figure_db": -1.0}, "[noise] noise_figure_db = -1.0: expected a noise figure between 0 and 100 dB"),
        ({"noise_figure_db": 3.0, "seed": -2}, "[noise] seed = -2: expected an integer >= 0"),
        ({"noise_figure_db": 3.0, "seed": 1.5}, "[noise] seed = 1.5: expected an integer >= 0"),
    ],
)
def test_bad_noise_keys_are_one_line_errors(table, message):
    with pytest.raises(ConfigError) as info:
        SimulationConfig.from_dict({"noise": table})
    assert message in str(info.value) and "\n" not in str(info.value)


def test_noise_table_error_names_the_file(tmp_path):
    p = tmp_path / "radar.toml"
    p.write_text("[noise]\nnoise_figure = 3.0\n")
    with pytest.raises(ConfigError, match=r"radar.toml: \[noise\] unknown key 'noise_figure'"):
        SimulationConfig.from_toml(p)


SAMPLES = 1100
ECHO_SAMPLE = 1050  # the surface echo; samples < 1000 hold no clutter (the pulse reaches ±16/B = 43 samples)


def noisy_config(seed=1, **noise):
    dt = 37.5e-9
    radar = RadarConfig(samples=SAMPLES, window_start_s=2 * 300e3 / C - ECHO_SAMPLE * dt)
    noise = noise or {"noise_temperature_k": 290.0}
    return SimulationConfig(
        radar=radar, surface=SurfaceConfig("constant", {"sigma0": 0.01}), noise=NoiseConfig(seed=seed, **noise)
    )


@pytest.fixture(scope="module")
def noise_scene(tmp_path_factory):
    d = tmp_path_factory.mktemp("noise")
    body = Body.sphere(MARS_RADIUS_M)
    track = great_circle_track(body, -0.1, 0.0, 0.1, 0.0, 300e3, 186.0)
    assert len(track) >= 64
    dem = flat_geographic(d / "flat.tif", 0.01, 1.5)
    return dem, track


def test_noise_only_region_mean_is_ktbf(noise_scene):
    dem, track = noise_scene
    cfg = noisy_config(noise_figure_db=3.0)
    ds = simulate(dem, track, cfg, sources=False)
    expected = noise_power_w(10e6, noise_figure_db=3.0)
    assert ds["noise_power"].item() == pytest.approx(expected, rel=1e-12)
    assert ds["noise_power"].attrs["units"] == "W" and ds["noise_power"].dims == ()
    region = ds["power"].values[:64, :1000].astype(np.float64)
    # 64 000 exponential samples: σ(mean)/mean = 1/√64000 = 0.4 %; tolerance 1 % (2.5 σ)
    assert region.mean() == pytest.approx(expected, rel=0.01)
    clean = simulate(dem, track, SimulationConfig(radar=cfg.radar, surface=cfg.surface), sources=False)
    assert np.all(clean["power"].values[:, :1000] == 0)  # the region really is noise only
    assert "noise_power" not in clean
    assert ds.attrs["noise_noise_figure_db"] == 3.0 and ds.attrs["noise_seed"] == 1


def test_same_seed_same_noise_other_seed_other_noise(noise_scene):
    dem, track = noise_scene
    a = simulate(dem, track, noisy_config(seed=1), sources=False)["power"].values
    b = simulate(dem, track, noisy_config(seed=1), sources=False)["power"].values
    c = simulate(dem, track, noisy_config(seed=2), sources=False)["power"].values
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_source_fractions_are_those_of_the_clutter_alone(noise_scene):
    dem, track = noise_scene
    cfg = noisy_config()
    noisy = simulate(dem, track, cfg)
    clean = simulate(dem, track, SimulationConfig(radar=cfg.radar, surface=cfg.surface))
    for name in ("left_fraction", "right_fraction", "first_return_delay"):
        np.testing.assert_array_equal(noisy[name].values, clean[name].values)
