"""Antenna patterns against the half-wave dipole formula and a hill hidden in a null."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.antenna import DIPOLE_PEAK, AntennaConfig, dipole_directivity, gaussian_beam, trace_frames
from cluttersim.errors import ConfigError
from cluttersim.kernels import pattern_gain_two_way
from cluttersim.physics.radar import RadarConfig
from scenes import UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_utm

# Balanis, Antenna Theory (2005), §4.6: half-wave dipole directivity D0 = 1.643 = 2.15 dBi
BALANIS_DIPOLE_D0 = 1.643
BALANIS_DIPOLE_DBI = 2.15


def test_dipole_peak_directivity_is_2_15_dbi():
    assert DIPOLE_PEAK == pytest.approx(BALANIS_DIPOLE_D0, abs=3e-3)
    assert 10 * math.log10(DIPOLE_PEAK) == pytest.approx(BALANIS_DIPOLE_DBI, abs=0.01)


@pytest.mark.parametrize("psi_deg", [90.0, 60.0, 45.0, 30.0, 10.0])
def test_dipole_pattern_matches_the_formula_at_tabulated_angles(psi_deg):
    # D(ψ) = D0 [cos(π/2 cos ψ) / sin ψ]² (Balanis eq. 4-84), written out independently here
    psi = math.radians(psi_deg)
    expected = DIPOLE_PEAK * (math.cos(math.pi / 2 * math.cos(psi)) / math.sin(psi)) ** 2
    assert float(dipole_directivity(math.cos(psi))) == pytest.approx(expected, rel=1e-12)
    if psi_deg == 60.0:  # by hand: (cos 45° / sin 60°)² = 2/3
        assert float(dipole_directivity(0.5)) == pytest.approx(DIPOLE_PEAK * 2 / 3, rel=1e-12)


def test_dipole_directivity_averages_to_one_over_the_sphere():
    # a directivity pattern integrates to 4π over all directions (definition of directivity)
    val, _ = quad(lambda psi: float(dipole_directivity(math.cos(psi))) * 2 * math.pi * math.sin(psi), 0, math.pi)
    assert val == pytest.approx(4 * math.pi, rel=1e-6)


def test_gaussian_beam_is_half_power_at_half_the_beamwidth():
    b = math.radians(20.0)
    assert float(gaussian_beam(b / 2, 0.0, b, b)) == pytest.approx(0.5, rel=1e-12)
    assert float(gaussian_beam(0.0, b / 2, 1.0, b)) == pytest.approx(0.5, rel=1e-12)


@pytest.mark.parametrize("pattern, axis", [("dipole", "along-track"), ("dipole", "cross-track"), ("gaussian", "along-track")])
def test_kernel_pattern_is_the_library_pattern_squared(pattern, axis):
    ant = AntennaConfig(pattern=pattern, axis=axis, beamwidth_along_deg=12.0, beamwidth_across_deg=30.0)
    rng = np.random.default_rng(3)
    up = np.array([0.0, 0.0, 1.0])
    frame = trace_frames(np.array([[0.0, -1.0, 0.0]]), up[None, :])[0]  # flying +x, right = −y
    for _ in range(50):
        u = rng.normal(size=3)
        u[2] = -abs(u[2])  # looking down
        u /= np.linalg.norm(u)
        if pattern == "dipole":
            one_way = float(dipole_directivity(u @ frame[0 if axis == "along-track" else 1]))
        else:
            one_way = float(gaussian_beam(math.atan2(u @ frame[0], u @ frame[2]), math.atan2(u @ frame[1], u @ frame[2]),
                                          math.radians(12.0), math.radians(30.0)))  # fmt: skip
        assert pattern_gain_two_way(ant.kernel_params(), frame, *u) == pytest.approx(one_way**2, rel=1e-9)


def test_bad_antenna_keys_are_config_errors():
    with pytest.raises(ConfigError, match=r"\[antenna\] pattern = 'horn'"):
        SimulationConfig.from_dict({"antenna": {"pattern": "horn"}})
    with pytest.raises(ConfigError, match=r"\[antenna\] unknown key 'gain'"):
        SimulationConfig.from_dict({"antenna": {"gain": 3}})
    with pytest.raises(ConfigError, match=r"\[antenna\] beamwidth_along_deg = -5"):
        SimulationConfig.from_dict({"antenna": {"pattern": "gaussian", "beamwidth_along_deg": -5}})


def _hill_scene(tmp_path, with_hill):
    """A plain with a hill 5 km east of a north-bound track flying 300 m up (invented test scene)."""
    east, north = utm_grid(500, 20.0)
    r2 = (east - UTM_X0_M - 5000.0) ** 2 + (north - UTM_Y0_M) ** 2
    z = 280.0 * np.exp(-r2 / (2 * 150.0**2)) if with_hill else np.zeros_like(east)
    return write_utm(tmp_path / f"hill{int(with_hill)}.tif", z, 20.0)


def test_a_dipole_null_pointed_at_a_hill_removes_its_echo(tmp_path):
    """A cross-track dipole points a null (its axis) at a hill near the horizon to the side;
    an along-track dipole sees the same hill broadside at its peak (Balanis eq. 4-84)."""
    track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-20.0, 0.0, 20.0]), 300.0)
    radar = RadarConfig(center_frequency_hz=10e6, bandwidth_hz=5e6, sample_interval_s=50e-9, samples=1024)
    excess = {}
    for axis in ("along-track", "cross-track"):
        cfg = SimulationConfig(radar=radar, surface=SurfaceConfig("constant", {"sigma0": 0.01}),
                               antenna=AntennaConfig(pattern="dipole", axis=axis))  # fmt: skip
        hill = simulate(_hill_scene(tmp_path, True), track, cfg, sources=False)["power"].values
        flat = simulate(_hill_scene(tmp_path, False), track, cfg, sources=False)["power"].values
        excess[axis] = np.abs(hill - flat).max(axis=1)
    assert np.all(excess["along-track"] > 0)
    # the null removes the hill's echo: the hill lies 0.2° from the axis, (π ψ / 4)² ≈ 1e-5 one way,
    # ~ 100 dB down two-way; what is left is float32 rounding of the plain's echo (> 40 dB down)
    assert np.all(excess["cross-track"] < 1e-4 * excess["along-track"])
    plain_level = np.abs(simulate(_hill_scene(tmp_path, False), track, cfg, sources=False)["power"].values).max(axis=1)
    assert np.all(excess["cross-track"] <= 4 * np.spacing(plain_level.astype(np.float32)))


def test_simulate_command_takes_the_antenna_from_toml_and_options(tmp_path):
    import xarray as xr
    from click.testing import CliRunner

    from cli.main import cli

    dem = _hill_scene(tmp_path, True)
    track = tmp_path / "t.csv"
    utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-20.0, 0.0, 20.0]), 300.0).to_csv(track)
    radar = tmp_path / "r.toml"
    radar.write_text('[radar]\nbandwidth_hz = 5e6\ncenter_frequency_hz = 10e6\nsample_interval_s = 50e-9\nsamples = 256\n'
                     '[antenna]\npattern = "dipole"\naxis = "along-track"\n')  # fmt: skip
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(track), "--radar", str(radar),
                                   "--out", str(tmp_path / "a"), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(track), "--radar", str(radar),
                                   "--antenna-pattern", "isotropic", "--out", str(tmp_path / "b"), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    with xr.open_dataset(tmp_path / "a" / "radargram.nc") as a, xr.open_dataset(tmp_path / "b" / "radargram.nc") as b:
        assert a.attrs["antenna_pattern"] == "dipole" and b.attrs["antenna_pattern"] == "isotropic"
        # at nadir the dipole's two-way gain is D0² = 2.69 (4.3 dB) over isotropic; the strongest
        # sample also holds ground up to ~24° off nadir (pulse-limited footprint at 300 m, 30 m cells
        # of range), where the gain is lower
        ratio = float(a["power"].max() / b["power"].max())
        assert 0.9 * DIPOLE_PEAK**2 < ratio <= DIPOLE_PEAK**2
