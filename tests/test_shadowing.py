"""Line-of-sight shadowing: a wall between the track and a plateau hides the plateau."""

import math

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.aperture import ProcessingConfig
from cluttersim.errors import ConfigError
from cluttersim.kernels import hidden_from_antenna
from cluttersim.physics.radar import RadarConfig
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


def test_the_line_of_sight_follows_the_body_curvature():
    """Antenna 5 km up over column 0 of a grid of 100 m cells on a Mars-sized sphere, a facet at
    0 m 20 km away, a ridge half-way: the exact chord between them (3-D, on the sphere) passes the
    ridge at 2483.4 m; the march's sagitta model, 2500 − 10 km × 10 km / (2 Rp) = 2485.3 m (common
    practice), removes 89 % of the flat approximation's error (2500 m). A 2488 m ridge hides the
    facet; the flat approximation did not see it."""
    rp = 3_396_190.0
    # exact: chord from the facet (angle 20 km / Rp, radius Rp) to the antenna (angle 0, Rp + 5 km),
    # its height above the sphere where it crosses the radial line at 10 km
    a = np.array([0.0, rp + 5000.0])
    th = 20e3 / rp
    f = np.array([rp * math.sin(th), rp * math.cos(th)])
    phi = 10e3 / rp
    d = np.array([math.sin(phi), math.cos(phi)])
    # solve f + s (a − f) = t d
    s_, t_ = np.linalg.solve(np.column_stack([a - f, -d]), -f)
    exact_m = t_ - rp
    assert exact_m == pytest.approx(2500.0 - 10e3 * 10e3 / (2 * rp), abs=2.0)
    h = np.zeros((3, 260), dtype=np.float32)
    h[:, 100] = 2488.0
    sag = 100.0**2 / (2 * rp)
    assert hidden_from_antenna(h, 1.0, 200.0, 0.0, 1.0, 0.0, 5000.0, 2488.0, sag, sag)
    assert not hidden_from_antenna(h, 1.0, 200.0, 0.0, 1.0, 0.0, 5000.0, 2488.0)  # flat: seen
    h[:, 100] = 2478.0  # below the exact chord: seen either way
    assert not hidden_from_antenna(h, 1.0, 200.0, 0.0, 1.0, 0.0, 5000.0, 2478.0, sag, sag)


def test_grazing_geometry_without_shadowing_warns(tmp_path):
    """The rule: shadowing off, the window reaching ground below 15° elevation (range at its end
    > h / sin 15°) and relief over 5 % of h: 200 m up with a 10 µs window (1.5 km of range) over the
    400 m wall warns; over the plain without the wall it does not (nothing to hide behind)."""
    import warnings

    with pytest.warns(UserWarning, match="shadowing off"):
        run(tmp_path, False, plateau=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        run(tmp_path, False, plateau=False, wall=False)
    assert not [w for w in caught if "shadowing off" in str(w.message)]


def test_the_coherent_mode_is_shadowed_too(tmp_path):
    """The coherent kernel calls the same march (with the flat line of sight there): the plateau
    behind the wall is hidden in its echoes as well."""
    def coherent(plateau, shadowing=True):
        cfg = SimulationConfig(
            radar=RadarConfig(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9, samples=1024),
            surface=SurfaceConfig("cosine", {"k": 0.05, "n": 1.0}),
            processing=ProcessingConfig(shadowing=shadowing, mode="coherent", seed=4),
        )
        track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-20.0, 0.0, 20.0]), ALT_M)
        return simulate(scene(tmp_path, True, plateau), track, cfg, sources=False)["power"].values.astype(float)

    assert np.allclose(coherent(True), coherent(False), rtol=1e-6, atol=0)
    assert not np.allclose(coherent(True, False), coherent(False, False), rtol=1e-3, atol=0)  # it echoes unshadowed
