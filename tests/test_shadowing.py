"""Line-of-sight shadowing: a wall between the track and a plateau hides the plateau."""

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.aperture import ProcessingConfig
from cluttersim.errors import ConfigError
from cluttersim.kernels import hidden_from_antenna
from cluttersim.radar import RadarConfig
from scenes import UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_utm

ALT_M = 200.0


def scene(d, wall=True, plateau=True):
    """A plain, a 400 m wall 300 m east of a north-bound track flying 200 m up, and a 100 m
    plateau 800–1200 m east (invented test scene). From the antenna the line of sight to the
    plateau's top passes x = 300 m at 200 − 0.1·300 = 170 m: under the wall's top (geometry)."""
    east, north = utm_grid(300, 10.0)
    x = east - UTM_X0_M
    z = np.zeros_like(x)
    if wall:
        z = np.where((x >= 290) & (x <= 310), 400.0, z)
    if plateau:
        z = np.where((x >= 800) & (x <= 1200) & (np.abs(north - UTM_Y0_M) < 600), 100.0, z)
    return write_utm(d / f"w{int(wall)}p{int(plateau)}.tif", z, 10.0)


def run(d, shadowing, plateau=True, wall=True):
    cfg = SimulationConfig(
        radar=RadarConfig(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9, samples=1024),
        surface=SurfaceConfig("cosine", {"k": 0.05, "n": 1.0}),
        processing=ProcessingConfig(shadowing=shadowing),
    )
    track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-20.0, 0.0, 20.0]), ALT_M)
    return simulate(scene(d, wall, plateau), track, cfg, sources=False)["power"].values.astype(float)


def test_a_wall_hides_the_plateau_and_the_off_switch_brings_it_back(tmp_path):
    with_plateau_off = run(tmp_path, False)
    without_plateau_off = run(tmp_path, False, plateau=False)
    echo_off = (with_plateau_off - without_plateau_off).clip(0).sum()
    assert echo_off > 0  # without shadowing the plateau echoes over the wall
    with_plateau_on = run(tmp_path, True)
    without_plateau_on = run(tmp_path, True, plateau=False)
    echo_on = (with_plateau_on - without_plateau_on).clip(0).sum()
    assert echo_on < 1e-3 * echo_off  # hidden behind the wall
    # the wall itself still echoes with shadowing on: it faces the antenna unobstructed
    no_wall = run(tmp_path, True, plateau=False, wall=False)
    assert (without_plateau_on - no_wall).clip(0).sum() > 0


def test_hidden_from_antenna_on_a_ridge_profile():
    # terrain 0 m with a 50 m ridge at column 10; antenna 100 m up over column 0
    h = np.zeros((3, 40), dtype=np.float32)
    h[:, 10] = 50.0
    # a point at column 30 (0 m): the ray at column 10 is 100·(20/30) = 66.7 m high: visible
    assert not hidden_from_antenna(h, 1.0, 30.0, 0.0, 1.0, 0.0, 100.0, 50.0)
    # antenna 60 m up: the ray at column 10 is 60·(20/30) = 40 m < 50 m: hidden
    assert hidden_from_antenna(h, 1.0, 30.0, 0.0, 1.0, 0.0, 60.0, 50.0)
    # a point in front of the ridge is never hidden by it
    assert not hidden_from_antenna(h, 1.0, 5.0, 0.0, 1.0, 0.0, 60.0, 50.0)


def test_shadowing_key_must_be_boolean():
    with pytest.raises(ConfigError, match=r"\[processing\] shadowing = 'yes'"):
        SimulationConfig.from_dict({"processing": {"shadowing": "yes"}})
