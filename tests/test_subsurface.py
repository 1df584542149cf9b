"""Predicted subsurface echo: Fresnel coefficients, attenuation, delay and the [subsurface] table."""

import math

import numpy as np
import pytest

from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track, simulate
from cluttersim import plots
from cluttersim.errors import ConfigError
from cluttersim.physics.noise import NoiseConfig
from cluttersim.physics.radar import RadarConfig
from cluttersim.physics.subsurface import (
    DB_PER_NEPER, SubsurfaceConfig, attenuation_np_per_m, fresnel_amplitude_reflection, fresnel_power_reflectivity,
    predict_subsurface, specular_echo_power_w, surface_transmission_two_way, two_way_loss_db, two_way_loss_factor,
    wave_speed_m_s,
)  # fmt: skip
from scenes import MARS_RADIUS_M, flat_geographic

C = 299_792_458.0  # SI definition

# Normal-incidence Fresnel power reflectivity R = ((√ε1 − √ε2)/(√ε1 + √ε2))² (Born & Wolf, Principles of
# Optics, §1.5), evaluated by hand to 4 digits:
#: vacuum–ice, ε′ = 3.15 (ice permittivity: common practice in radioglaciology): (0.7748/2.7748)² = 0.0780
R_VACUUM_ICE = 0.0780
#: vacuum–basalt-like rock, ε′ = 8: (1.8284/3.8284)² = 0.2281
R_VACUUM_ROCK_8 = 0.2281
#: ice–rock, 3.15 / 8: (1.0536/4.6033)² = 0.0524
R_ICE_ROCK_8 = 0.0524
#: Radio-wave speed in ice, ε′ = 3.15: c/√3.15 = 168.9 m/µs (common practice in radioglaciology: ~168–169 m/µs).
V_ICE_M_PER_US = 168.9
#: Two-way loss, f = 20 MHz, ε′ = 3.15, tan δ = 1e-3, d = 100 m: α = π f √ε′ tanδ / c = 3.720e-4 Np/m
#: (low-loss approximation, Ulaby, Moore & Fung 1986 vol. III app. E; common practice),
#: two-way power loss 8.686 × 2αd = 0.646 dB (hand calculation).
LOSS_20MHZ_ICE_1E3_100M_DB = 0.646


def test_fresnel_power_reflectivity_at_tabulated_permittivities():
    assert fresnel_power_reflectivity(1.0, 3.15) == pytest.approx(R_VACUUM_ICE, abs=1e-4)
    assert fresnel_power_reflectivity(1.0, 8.0) == pytest.approx(R_VACUUM_ROCK_8, abs=1e-4)
    assert fresnel_power_reflectivity(3.15, 8.0) == pytest.approx(R_ICE_ROCK_8, abs=1e-4)


def test_fresnel_defining_properties():
    # reciprocity: r12 = −r21, R symmetric; energy: R + T_one_way = 1 lossless; no contrast → no echo
    assert fresnel_amplitude_reflection(1.0, 3.15) == pytest.approx(-fresnel_amplitude_reflection(3.15, 1.0))
    assert fresnel_amplitude_reflection(1.0, 3.15) < 0  # into a denser medium: phase reversal
    assert fresnel_power_reflectivity(2.0, 2.0) == 0.0
    assert surface_transmission_two_way(3.15) == pytest.approx((1 - R_VACUUM_ICE) ** 2, abs=2e-4)
    with pytest.raises(ValueError, match="permittivity_2 = 0.5"):
        fresnel_power_reflectivity(1.0, 0.5)


def test_wave_speed_in_ice():
    assert wave_speed_m_s(3.15) / 1e6 == pytest.approx(V_ICE_M_PER_US, abs=0.05)


def test_two_way_attenuation_low_loss():
    alpha = attenuation_np_per_m(20e6, 3.15, 1e-3)
    assert alpha == pytest.approx(3.720e-4, rel=1e-3)
    assert two_way_loss_db(20e6, 3.15, 1e-3, 100.0) == pytest.approx(LOSS_20MHZ_ICE_1E3_100M_DB, abs=1e-3)
    # the factor and the dB agree: L = exp(−4αd), dB = 10 log10(1/L)
    assert -10 * math.log10(two_way_loss_factor(20e6, 3.15, 1e-3, 100.0)) == pytest.approx(LOSS_20MHZ_ICE_1E3_100M_DB, abs=1e-3)
    assert DB_PER_NEPER == pytest.approx(8.686, abs=1e-3)
    assert two_way_loss_db(20e6, 3.15, 0.0, 100.0) == 0.0


def test_specular_power_falls_as_range_squared_and_matches_friis_image():
    # image method: Friis (1946) between the antenna and its image at 2R, times Γ
    p = specular_echo_power_w(10.0, 1.0, 15.0, 1.0, 1000.0)
    assert p == pytest.approx(10.0 * 15.0**2 / ((4 * math.pi * 2000.0) ** 2), rel=1e-12)
    assert specular_echo_power_w(10.0, 1.0, 15.0, 1.0, 2000.0) == pytest.approx(p / 4, rel=1e-12)


def test_predict_subsurface_combines_the_factors():
    cfg = SubsurfaceConfig(depth_m=200.0, layer_permittivity=3.15, substrate_permittivity=8.0, loss_tangent=1e-4)
    radar = RadarConfig()
    h = 300e3
    delay, sub, surf = predict_subsurface(cfg, radar, np.array([2 * h / C, np.nan]))
    assert delay[0] == pytest.approx(2 * h / C + 2 * 200.0 * math.sqrt(3.15) / C, rel=1e-14)
    expected_ratio = (
        (1 - R_VACUUM_ICE) ** 2 * R_ICE_ROCK_8 * 10 ** (-two_way_loss_db(20e6, 3.15, 1e-4, 200.0) / 10) / R_VACUUM_ICE
        * (h / (h + 200.0 / math.sqrt(3.15))) ** 2
    )  # fmt: skip
    assert sub[0] / surf[0] == pytest.approx(expected_ratio, rel=5e-3)  # 4-digit R constants
    assert np.isnan(delay[1]) and np.isnan(sub[1]) and np.isnan(surf[1])


def test_subsurface_table_is_parsed_and_round_trips():
    table = {"depth_m": 200.0, "layer_permittivity": 3.15, "loss_tangent": 1e-4, "substrate_permittivity": 8.0}
    cfg = SimulationConfig.from_dict({"subsurface": table})
    assert cfg.subsurface == SubsurfaceConfig(200.0, 3.15, 8.0, 1e-4)
    assert cfg.to_dict()["subsurface"] == table
    assert SimulationConfig.from_dict({"subsurface": {**table, "depth_m": 50}}).subsurface.depth_m == 50.0


@pytest.mark.parametrize(
    "change, message",
    [
        ({"depth": 1.0}, "[subsurface] unknown key 'depth'"),
        ({"depth_m": None}, "[subsurface] missing key 'depth_m'"),
        ({"depth_m": -5.0}, "[subsurface] depth_m = -5.0: expected a positive depth in m"),
        ({"layer_permittivity": 0.5}, "[subsurface] layer_permittivity = 0.5: expected a real relative permittivity >= 1"),
        ({"substrate_permittivity": "rock"}, "[subsurface] substrate_permittivity = 'rock': expected a number"),
        ({"loss_tangent": 0.5}, "[subsurface] loss_tangent = 0.5: expected 0 to 0.1 (low-loss approximation)"),
    ],
)
def test_bad_subsurface_keys_are_one_line_errors(change, message):
    table = {"depth_m": 200.0, "layer_permittivity": 3.15, "substrate_permittivity": 8.0, **change}
    table = {k: v for k, v in table.items() if v is not None}
    with pytest.raises(ConfigError) as info:
        SimulationConfig.from_dict({"subsurface": table})
    assert message in str(info.value) and "\n" not in str(info.value)


@pytest.fixture(scope="module")
def flat_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("sub")
    body = Body.sphere(MARS_RADIUS_M)
    track = great_circle_track(body, -0.1, 0.0, 0.1, 0.0, 300e3, 2000.0)
    sub = SubsurfaceConfig(depth_m=200.0, layer_permittivity=3.15, substrate_permittivity=8.0, loss_tangent=1e-4)
    cfg = SimulationConfig(
        radar=RadarConfig(samples=256), surface=SurfaceConfig("constant", {"sigma0": 0.01}), subsurface=sub,
        noise=NoiseConfig(noise_temperature_k=1000.0),
    )  # fmt: skip
    ds = simulate(flat_geographic(d / "flat.tif", 0.01, 1.5), track, cfg)
    return cfg, ds


def test_predicted_delay_on_flat_scene_is_nadir_plus_two_d_root_eps_over_c(flat_run):
    cfg, ds = flat_run
    nadir = ds["nadir_delay"].values
    np.testing.assert_allclose(ds["nadir_delay"].values, 2 * 300e3 / C, rtol=1e-9)  # flat DEM at 0 m, alt 300 km
    np.testing.assert_allclose(ds["predicted_subsurface_delay"].values - nadir, 2 * 200.0 * math.sqrt(3.15) / C, rtol=1e-9)
    assert ds["predicted_subsurface_delay"].attrs["units"] == "s"
    assert ds["predicted_subsurface_power"].attrs["units"] == "W"
    ratio = ds["predicted_subsurface_power"].values / ds["predicted_surface_power"].values
    assert np.all(ratio > 0) and np.all(ratio < 1)
    assert ds.attrs["subsurface_depth_m"] == 200.0


def test_radargram_figure_shows_subsurface_line_and_noise_floor(flat_run):
    _, ds = flat_run
    fig = plots.plot_radargram(ds)  # no path: the Figure is returned, nothing is written
    texts = [t.get_text() for ax in fig.axes if ax.get_legend() for t in ax.get_legend().get_texts()]
    assert "predicted subsurface echo" in texts
    assert any(t.startswith("noise floor") for t in texts)
    line = next(ln for ax in fig.axes for ln in ax.get_lines() if ln.get_label() == "predicted subsurface echo")
    expected_s = ds["predicted_subsurface_delay"].values
    if not plots.radargram_layers(ds).delay_label.startswith("two-way delay"):  # the y axis is relative to window start
        expected_s = expected_s - ds["window_start"].values
    np.testing.assert_allclose(line.get_ydata(), expected_s * 1e6, rtol=1e-12)


def test_cli_run_with_noise_and_subsurface_tables_round_trips(tmp_path):
    from click.testing import CliRunner

    from cli.main import cli
    from cluttersim.analysis.sources import load_run
    from scenes import write_geotiff

    dem = write_geotiff(tmp_path / "dem.tif", np.zeros((100, 100)), -0.5, 0.5, 0.01)
    track = tmp_path / "track.csv"
    track.write_text("lat,lon,alt\n" + "\n".join(f"{lat:.3f},0.0,250000" for lat in np.linspace(-0.1, 0.1, 5)) + "\n")
    radar = tmp_path / "radar.toml"
    radar.write_text(
        '[radar]\nsamples = 256\n[surface]\nlaw = "constant"\n'
        "[noise]\nnoise_temperature_k = 500.0\nseed = 3\n"
        "[subsurface]\ndepth_m = 100.0\nlayer_permittivity = 3.15\nsubstrate_permittivity = 8.0\n"
    )
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(track), "--radar", str(radar),
                                   "--out", str(tmp_path / "run"), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    run = load_run(tmp_path / "run")
    ds = run.ds
    assert ds["noise_power"].item() == pytest.approx(1.380649e-23 * 500.0 * 10e6, rel=1e-12)  # k T B, B default 10 MHz
    assert ds["predicted_subsurface_delay"].dims == ("trace",)
    assert run.scene.config.noise == NoiseConfig(noise_temperature_k=500.0, seed=3)
    assert run.scene.config.subsurface == SubsurfaceConfig(100.0, 3.15, 8.0)
    bad = tmp_path / "bad.toml"
    bad.write_text("[subsurface]\ndepth_m = 100.0\nlayer_permittivity = 3.15\nsubstrate_permitivity = 8.0\n")
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(track), "--radar", str(bad),
                                   "--out", str(tmp_path / "run2"), "-q"])  # fmt: skip
    assert res.exit_code != 0
    assert "[subsurface] unknown key 'substrate_permitivity'" in res.output and len(res.output.strip().splitlines()) == 1
