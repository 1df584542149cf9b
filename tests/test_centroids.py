"""Each side's power-weighted source centre (sources.side_centroids) against the geometry of a level plane."""

from __future__ import annotations

import math

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig
from cluttersim.products import simulate_to_dir
from cluttersim.physics.radar import RadarConfig
from cluttersim.analysis.sources import load_run, side_centroids
from scenes import UTM_X0_M, UTM_Y0_M, to_utm, utm_track
from test_attribution import AIRBORNE, C, dome_scene

ALT_M = 1000.0


def test_side_centres_over_a_level_plane_are_the_centres_of_the_ring_outside_the_strip(tmp_path):
    """Over a level plane, the echo at range h + Δr comes from a ring of ground radius ρ = √((h + Δr)² − h²)
    (flat geometry, common practice). With an isotropic antenna and a constant σ0 every point of the ring
    returns the same power, so each side's centre is the centroid of its arc outside the nadir strip
    |y| < w: at cross-track distance 2 ρ cos φ0 / (π − 2 φ0), φ0 = asin(w/ρ), and no along-track offset
    (integral of ρ sin φ over φ0 < φ < π − φ0, a standard centroid of a circular arc)."""
    dem = dome_scene(tmp_path, flat=True)  # 3 km × 3 km level plain of 10 m cells
    track = utm_track(np.full(9, UTM_X0_M), UTM_Y0_M + np.linspace(-80, 80, 9), ALT_M)
    config = SimulationConfig(radar=RadarConfig(samples=512, **AIRBORNE), surface=SurfaceConfig("constant", {"sigma0": 0.01}))
    simulate_to_dir(dem, track, config, tmp_path / "run")
    run = load_run(tmp_path / "run")
    cents = side_centroids(run)
    ds = run.ds
    t = 4
    w = float(ds["nadir_strip_half_width"][t])
    dt = float(ds["delay"][1])
    for extra_m in (150.0, 300.0, 500.0):
        k = int(round((float(ds["nadir_delay"][t]) + 2 * extra_m / C - float(ds["window_start"][t])) / dt))
        r = 0.5 * C * (float(ds["window_start"][t]) + k * dt)
        rho = math.sqrt(r**2 - ALT_M**2)
        phi0 = math.asin(w / rho)
        expected = 2 * rho * math.cos(phi0) / (math.pi - 2 * phi0)
        for side, sign in (("right", 1.0), ("left", -1.0)):  # northbound: right is east
            x, y = to_utm(cents.lon[side][t, k], cents.lat[side][t, k])
            assert sign * (x - UTM_X0_M) == pytest.approx(expected, rel=0.03, abs=10.0), (side, extra_m)
            assert abs(y - float(to_utm(ds["lon"][t], ds["lat"][t])[1])) < 15.0  # no along-track offset
    # traces off the DEM have no centre
    assert cents.lat["left"].shape == ds["power"].shape
