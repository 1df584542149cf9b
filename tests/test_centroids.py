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


def _centroids_with_three_passes(run, monkeypatch):
    """side_centroids with its unweighted pass run by the kernel, as before the run's own side power
    was used for it."""
    from cluttersim.analysis import sources

    with monkeypatch.context() as m:
        m.setattr(sources, "_recorded_side_power", lambda run: None)
        return side_centroids(run)


def test_centroids_from_the_recorded_side_power_equal_those_of_a_third_kernel_pass(tmp_path, monkeypatch):
    """The unweighted pass of the centroids is read from the run (power × left/right_fraction) when the
    recorded power is the diffuse clutter alone. Over a hill (uneven power along each ring) the centres
    agree with those of the kernel's own unweighted pass to float32 resolution: the only difference is
    the float32 storage of power and shares (relative 6e-8 each, common practice: IEEE 754 single
    precision), which moves a centre by ~1e-7 of its weight (~1e-7°, 1 cm) — below one step of the
    float32 output (~4e-6° at these latitudes); allowed: 2 steps. Where a side has no power both give NaN."""
    from cluttersim.analysis.sources import _recorded_side_power

    dem = dome_scene(tmp_path)
    track = utm_track(np.full(9, UTM_X0_M - 200.0), UTM_Y0_M + np.linspace(-300, 300, 9), ALT_M)
    config = SimulationConfig(radar=RadarConfig(samples=512, **AIRBORNE), surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.1}))
    simulate_to_dir(dem, track, config, tmp_path / "run")
    run = load_run(tmp_path / "run")
    assert _recorded_side_power(run) is not None  # the two-pass path is the one compared
    fast = side_centroids(run)
    slow = _centroids_with_three_passes(run, monkeypatch)
    for side in ("left", "right"):
        for name in ("lat", "lon"):
            a = getattr(fast, name)[side].astype(np.float64)
            b = getattr(slow, name)[side].astype(np.float64)
            both = np.isfinite(a) & np.isfinite(b)
            assert both.sum() > 1000, (side, name)
            assert (np.isfinite(a) != np.isfinite(b)).sum() <= 0.001 * both.sum(), (side, name)
            step = np.spacing(np.abs(b[both]).astype(np.float32)).astype(np.float64)
            assert np.all(np.abs(a[both] - b[both]) <= 2 * step), (side, name, np.max(np.abs(a[both] - b[both])))


def test_centroids_run_the_unweighted_pass_when_the_recorded_power_holds_more(tmp_path):
    """With specular reflection or receiver noise in the recorded power, its side shares are not those of
    the diffuse kernel pass: the centroids then run that pass themselves."""
    from cluttersim.physics.noise import NoiseConfig
    from cluttersim.analysis.sources import _recorded_side_power

    dem = dome_scene(tmp_path)
    track = utm_track(np.full(5, UTM_X0_M - 200.0), UTM_Y0_M + np.linspace(-100, 100, 5), ALT_M)
    base = SimulationConfig(radar=RadarConfig(samples=256, **AIRBORNE), surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.1}))
    specular = SimulationConfig(radar=base.radar, surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.1},
                                                                        permittivity=3.15, rms_height_m=0.3))  # fmt: skip
    noisy = SimulationConfig(radar=base.radar, surface=base.surface, noise=NoiseConfig(noise_figure_db=3.0, seed=1))
    for name, cfg in (("plain", base), ("specular", specular), ("noise", noisy)):
        simulate_to_dir(dem, track, cfg, tmp_path / name)
        recorded = _recorded_side_power(load_run(tmp_path / name))
        assert (recorded is not None) == (name == "plain"), name
