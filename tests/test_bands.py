"""Several frequency bands in one run ([[band]] tables → a ``band`` dimension)."""

import math

import numpy as np
import pytest
from click.testing import CliRunner

from cli.main import cli
from cluttersim import Body, SimulationConfig, great_circle_track, simulate
from cluttersim.errors import ClutterSimError, ConfigError
from cluttersim.physics.radar import effective_pulse_duration_s
from cluttersim.io.radargram import open_radargram, select_band, write_netcdf
from scenes import MARS_RADIUS_M, flat_geographic

C = 299_792_458.0  # SI definition

BANDS_TOML = """
[radar]
sample_interval_s = 12.5e-9
samples = 384
window_start_s = {start!r}

[surface]
law = "constant"
sigma0 = 0.01

[[band]]
name = "low"
center_frequency_hz = 10e6
bandwidth_hz = 5e6

[[band]]
name = "high"
center_frequency_hz = 40e6
bandwidth_hz = 20e6
"""

ALT_M = 300e3


def bands_config(tmp_path, start_s=2 * ALT_M / C - 64 * 12.5e-9):
    path = tmp_path / "bands.toml"
    path.write_text(BANDS_TOML.format(start=start_s))
    return path, SimulationConfig.from_toml(path)


@pytest.fixture(scope="module")
def flat_bands(tmp_path_factory):
    d = tmp_path_factory.mktemp("bands")
    toml, cfg = bands_config(d)
    body = Body.sphere(MARS_RADIUS_M)
    track = great_circle_track(body, -0.05, 0.0, 0.05, 0.0, ALT_M, 1500.0)
    dem = flat_geographic(d / "flat.tif", 0.01, 1.2)
    return d, toml, cfg, track, dem, simulate(dem, track, cfg)


def test_band_tables_are_parsed_and_round_trip(tmp_path):
    _, cfg = bands_config(tmp_path)
    assert cfg.band_names == ["low", "high"]
    high = cfg.for_band("high").radar
    assert (high.center_frequency_hz, high.bandwidth_hz, high.samples) == (40e6, 20e6, 384)
    assert SimulationConfig.from_dict(cfg.to_dict()) == cfg
    with pytest.raises(ConfigError, match="band 'middle': expected one of low, high"):
        cfg.for_band("middle")


@pytest.mark.parametrize(
    "bands, message",
    [
        ([{"name": "a b", "center_frequency_hz": 1e6, "bandwidth_hz": 1e6}], "name = 'a b': expected letters"),
        ([{"center_frequency_hz": 1e6, "bandwidth_hz": 1e6}], "number 1: missing name"),
        ([{"name": "x", "samples": 3}], "'x': unknown key 'samples'"),
        ([{"name": "x", "center_frequency_hz": 20e6}], "'x': missing bandwidth_hz"),
        ([{"name": "x", "center_frequency_hz": "a", "bandwidth_hz": 1e6}], "'x': center_frequency_hz = 'a': expected a number"),
        # the shared window samples every 37.5 ns: a 50 MHz band needs ≤ 20 ns
        ([{"name": "x", "center_frequency_hz": 40e6, "bandwidth_hz": 50e6}], "'x': sample_interval_s = 3.75e-08"),
        ([{"name": "x", "center_frequency_hz": 20e6, "bandwidth_hz": 5e6}] * 2, "'x' appears twice"),
        ({"name": "x"}, "must be an array of tables"),
    ],
)
def test_bad_band_tables_are_one_line_errors(bands, message):
    with pytest.raises(ConfigError, match=message.replace("(", r"\(")):
        SimulationConfig.from_dict({"band": bands})


def test_each_band_follows_the_radar_equation_with_its_own_wavelength(flat_bands):
    """Level sphere, constant σ0: power per sample after the leading edge is
    Pt G² λ² σ0 2π Rp R ΔR / ((Rp+h)(4π)³R⁴) (Skolnik 2001 eq. 1.7; Brown 1977): with the
    same window the bands differ by (λ_low/λ_high)² (B_high/B_low) = (40/10)² × 4 = 64 there
    (ΔR = c τ_eff/2 ∝ 1/B since the power convention; 16 before it)."""
    *_, cfg, track, _, ds = flat_bands
    assert ds["power"].dims == ("band", "trace", "sample")
    dt = 12.5e-9
    for name in ("low", "high"):
        radar = cfg.for_band(name).radar
        lam = C / radar.center_frequency_hz
        p = ds["power"].sel(band=name).values[len(track) // 2]
        delay = ds["window_start"].values[len(track) // 2] + np.arange(p.size) * dt
        r = C * delay / 2
        # ΔR = c τ_eff / 2, the compressed pulse's range extent (power convention, README "Output";
        # it was the sample's c Δt / 2 before: power per sample)
        tau_eff = effective_pulse_duration_s(radar.bandwidth_hz, radar.range_window)
        expected = (radar.transmit_power_w * lam**2 * 0.01 * 2 * math.pi * MARS_RADIUS_M * r * C * tau_eff / 2
                    / ((MARS_RADIUS_M + ALT_M) * (4 * math.pi) ** 3 * r**4))  # fmt: skip
        after = slice(64 + 40, 64 + 200)  # well past the widest leading edge (low band: 1/B = 16 samples)
        np.testing.assert_allclose(p[after], expected[after], rtol=0.03)
    ratio = ds["power"].sel(band="low").values[:, after] / ds["power"].sel(band="high").values[:, after]
    low, high = cfg.for_band("low").radar, cfg.for_band("high").radar
    assert np.median(ratio) == pytest.approx(16.0 * high.bandwidth_hz / low.bandwidth_hz, rel=0.01)


def _rise_samples(p):
    """10 %–90 % rise of a leading edge, samples (linear interpolation)."""
    plateau = np.median(p[100:140])
    x = np.arange(p.size)
    first = np.argmax(p > 0.9 * plateau)
    t10 = np.interp(0.1 * plateau, p[:first + 1], x[:first + 1])
    t90 = np.interp(0.9 * plateau, p[:first + 1], x[:first + 1])
    return t90 - t10


def test_leading_edge_sharpens_with_bandwidth(flat_bands):
    """Range resolution c/(2B) (common practice: 5 MHz → 30 m, 20 MHz → 7.5 m): the flat
    surface's leading edge rises four times faster in the 20 MHz band than in the 5 MHz one."""
    *_, track, _, ds = flat_bands
    mid = len(track) // 2
    low = _rise_samples(ds["power"].sel(band="low").values[mid])
    high = _rise_samples(ds["power"].sel(band="high").values[mid])
    assert low / high == pytest.approx(4.0, rel=0.15)


def test_a_band_equals_a_single_band_run_of_that_radar(flat_bands):
    *_, cfg, track, dem, ds = flat_bands
    alone = simulate(dem, track, cfg.for_band("high"))
    one = select_band(ds, "high")
    # the multi-band run reads a slightly larger DEM window (the low band's longer pulse needs more
    # padding); cells on the smaller window's border get one-sided slopes: 5e-5 at the window's end
    np.testing.assert_allclose(one["power"].values, alone["power"].values, rtol=1e-4)
    np.testing.assert_allclose(one["left_fraction"].values, alone["left_fraction"].values, rtol=1e-4, atol=1e-6)
    np.testing.assert_array_equal(one["window_start"].values, alone["window_start"].values)
    assert one.attrs["radar_center_frequency_hz"] == 40e6 and one.attrs["band"] == "high"


def test_file_round_trip_and_band_choice(flat_bands, tmp_path):
    *_, ds = flat_bands
    path = write_netcdf(ds, tmp_path / "r.nc")
    first = open_radargram(path)
    assert first.attrs["band"] == "low" and first["power"].dims == ("trace", "sample")
    high = open_radargram(path, band="high")
    np.testing.assert_array_equal(high["power"].values, ds["power"].sel(band="high").values)
    with pytest.raises(ClutterSimError, match="band 'mid': expected one of low, high"):
        open_radargram(path, band="mid")


def test_cli_writes_one_figure_per_band_and_sources_picks_a_band(flat_bands, tmp_path):
    d, toml, _, track, dem, _ = flat_bands
    csv = tmp_path / "t.csv"
    track.to_csv(csv)
    out = tmp_path / "run"
    r = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(csv), "--radar", str(toml),
                                 "--out", str(out), "-q"])  # fmt: skip
    assert r.exit_code == 0, r.output
    names = sorted(p.name for p in out.iterdir())
    assert names == ["radargram.nc", "radargram_elevation_high.png", "radargram_elevation_low.png", "radargram_high.png",
                     "radargram_low.png", "radargram_sides_high.png", "radargram_sides_low.png", "track_map.png"]  # fmt: skip
    r = CliRunner().invoke(cli, ["sources", str(out), "--trace", "3", "--depth-m", "30", "--band", "high", "-q"])
    assert r.exit_code == 0, r.output
    assert [p.name for p in out.glob("echo_t3_*")] == [next(out.glob("echo_t3_*")).name]
    assert next(out.glob("echo_t3_*")).name.endswith("us_high.png")
    r = CliRunner().invoke(cli, ["sources", str(out), "--trace", "3", "--depth-m", "30", "--band", "mid"])
    assert r.exit_code == 1 and "band 'mid': expected one of low, high" in r.output
    r = CliRunner().invoke(cli, ["report", str(out), "--band", "high", "--out", str(tmp_path / "high.html"), "-q"])
    assert r.exit_code == 0, r.output
    assert "40 MHz" in (tmp_path / "high.html").read_text() or "40000000" in (tmp_path / "high.html").read_text()


def test_band_figure_has_one_panel_per_band(flat_bands, tmp_path):
    from PIL import Image

    from cluttersim.plots import plot_band_radargrams, plot_radargram

    *_, ds = flat_bands
    path = plot_band_radargrams(ds, tmp_path / "bands.png", permittivity=3.15)
    single = plot_radargram(select_band(ds, "low"), tmp_path / "one.png")
    w2, h2 = Image.open(path).size
    w1, h1 = Image.open(single).size
    assert w2 == w1 and h2 == pytest.approx(1.6 * h1, rel=0.02)  # two panels at 0.8 of the single height
    with pytest.raises(ValueError, match="no band dimension"):
        plot_band_radargrams(select_band(ds, "low"), tmp_path / "x.png")


def test_each_band_predicts_its_own_interface_echo(flat_bands):
    """With [subsurface], each band's predicted interface echo is that of its own radar (the
    two-way attenuation α ≈ π f √ε′ tanδ / c grows with frequency, common practice), the same as a
    single-band run of that band."""
    import dataclasses

    from cluttersim.physics.subsurface import SubsurfaceConfig

    *_, cfg, track, dem, _ = flat_bands
    lossy = dataclasses.replace(cfg, subsurface=SubsurfaceConfig(depth_m=50.0, layer_permittivity=3.15,
                                                                    substrate_permittivity=8.0, loss_tangent=0.01))
    ds = simulate(dem, track, lossy, sources=False)
    for name in ("low", "high"):
        alone = simulate(dem, track, lossy.for_band(name), sources=False)
        np.testing.assert_allclose(ds["predicted_subsurface_power"].sel(band=name).values,
                                   alone["predicted_subsurface_power"].values, rtol=1e-12)  # fmt: skip
    low, high = (ds["predicted_subsurface_power"].sel(band=b).values[0] for b in ("low", "high"))
    assert low != high
