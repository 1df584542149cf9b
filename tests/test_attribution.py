"""Echo-source attribution against analytic geometry."""

import math

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.radar import RadarConfig, apparent_depth_m, delay_after_surface_s, pulse_limited_radius_m
from scenes import UTM_X0_M, UTM_Y0_M, to_utm, utm_grid, utm_track, write_utm

C = 299_792_458.0  # SI definition
AIRBORNE = dict(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9)


def config(law="hagfors", samples=512, **params):
    params = params or {"C": 100.0, "rho": 0.1}
    return SimulationConfig(radar=RadarConfig(samples=samples, **AIRBORNE), surface=SurfaceConfig(law, params))


def test_apparent_depth_is_c_dt_over_2_root_eps():
    # d = c Δt / (2√ε′) (common practice); 1 µs in ice of ε′ = 3.15 → 84.45 m
    assert apparent_depth_m(1e-6, 3.15) == pytest.approx(C * 1e-6 / (2 * math.sqrt(3.15)), rel=1e-12)
    assert apparent_depth_m(1e-6, 3.15) == pytest.approx(84.45, abs=0.01)
    assert delay_after_surface_s(apparent_depth_m(3e-6, 5.0), 5.0) == pytest.approx(3e-6, rel=1e-12)


def test_pulse_limited_radius():
    # Chelton et al. (1989): r = sqrt(2 h ΔR / (1 + h/R)); flat limit sqrt(2 h ΔR): 300 km, 15 m → 3.0 km
    assert pulse_limited_radius_m(300e3, C / 30.0) == pytest.approx(3000.0, rel=1e-12)
    assert pulse_limited_radius_m(300e3, 10e6, 3_389_500.0) == pytest.approx(math.sqrt(2 * 300e3 * C / 20e6 / (1 + 300e3 / 3_389_500.0)))


def test_first_return_over_a_tilted_plane_is_the_perpendicular_foot(tmp_path):
    """A plane rising 15° to the east under an antenna 2 km above it: the nearest point of
    the plane is the foot of the perpendicular, H cosθ sinθ = 483 m up-slope, at range
    H cosθ (plane geometry)."""
    res, n, h, theta = 20.0, 400, 2000.0, math.radians(15.0)
    east, _ = utm_grid(n, res)
    z = math.tan(theta) * (east - UTM_X0_M)
    dem = write_utm(tmp_path / "tilted.tif", z, res)
    track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-40.0, 0.0, 40.0]), h)
    ds = simulate(dem, track, config(), first_return_db=-10.0)
    foot_east = UTM_X0_M + h * math.cos(theta) * math.sin(theta)
    distance = h * math.cos(theta)
    fx, fy = to_utm(ds["first_return_lon"].values, ds["first_return_lat"].values)
    np.testing.assert_allclose(fx, foot_east, atol=2 * res)
    np.testing.assert_allclose(fy, UTM_Y0_M + np.array([-40.0, 0.0, 40.0]), atol=2 * res)
    # the geometric first echo is the foot itself (to a tenth of a sample)
    np.testing.assert_allclose(ds["earliest_echo_delay"].values, 2 * distance / C, atol=1e-9)
    # the threshold crossing lies on the leading edge of the foot's compressed echo:
    # no later than the foot, no earlier than the Hann response's first null (2/B)
    fr = ds["first_return_delay"].values
    assert np.all(fr <= 2 * distance / C + 1e-9) and np.all(fr >= 2 * distance / C - 2 / 20e6)
    np.testing.assert_allclose(ds["first_return_offnadir"].values, h * math.cos(theta) * math.sin(theta), atol=2 * res)
    assert np.all(ds["first_return_delay"].values < ds["nadir_delay"].values)


def test_flat_plane_echo_comes_from_where_sqrt_h2_x2_minus_h_is_its_depth(tmp_path):
    """Over a level plane an off-nadir point at ground distance x appears at apparent
    free-space depth √(h² + x²) − h (flat-surface geometry, common practice)."""
    res, n, h = 20.0, 300, 2000.0
    dem = write_utm(tmp_path / "flat.tif", np.zeros((n, n)), res)
    track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.array([-20.0, 0.0, 20.0]), h)
    ds = simulate(dem, track, config("constant", sigma0=0.01))
    t, dt = 1, 10e-9
    sx, sy = to_utm(ds["source_lon"][t].values, ds["source_lat"][t].values)
    x = np.hypot(sx - UTM_X0_M, sy - UTM_Y0_M)
    for depth in (50.0, 100.0, 200.0, 400.0):
        k = int(round((ds["nadir_delay"][t].item() + 2 * depth / C - ds["window_start"][t].item()) / dt))
        d_sample = apparent_depth_m(ds["window_start"][t].item() + k * dt - ds["nadir_delay"][t].item(), 1.0)
        x_expected = math.sqrt((h + d_sample) ** 2 - h**2)
        # the dominant facet's centre lies within half its own range extent of the sample
        tol = 0.5 * res * x_expected / (h + d_sample) + C * dt / 2
        assert np.hypot(h, x[k]) - h == pytest.approx(d_sample, abs=tol)


def block_scene(tmp_path, res=20.0, n=200, h=1000.0, offset=800.0):
    """A flat plain with one raised block whose west face is a ramp facing an antenna
    flying north at `offset` m west of it (invented test scene)."""
    east, north = utm_grid(n, res)
    slope = math.atan(offset / h)  # the ramp faces the antenna squarely
    x = east - (UTM_X0_M + offset)
    y = north - UTM_Y0_M
    inside_y = np.abs(y) <= 60.0
    z = np.where(inside_y & (x >= -60) & (x <= 60), np.clip((x + 60) * math.tan(slope), 0, 80.0), 0.0)
    return write_utm(tmp_path / "block.tif", z, res), slope


def test_depth_window_map_lights_only_the_block(tmp_path):
    from cluttersim.analysis.sources import depth_window_map, load_run
    from cluttersim.products import simulate_to_dir

    dem, _ = block_scene(tmp_path)
    track = utm_track(np.full(21, UTM_X0_M), UTM_Y0_M + np.linspace(-400, 400, 21), 1000.0)
    cfg = config(C=1000.0, rho=0.1)
    simulate_to_dir(dem, track, cfg, tmp_path / "run")
    run = load_run(tmp_path / "run")
    # the ramp (≈ 800 m east, ~40 m up) sits ~ √(960² + 800²) − 1000 ≈ 250 m further than nadir
    smap = depth_window_map(run, 150.0, 350.0, permittivity=1.0)
    p = np.nan_to_num(smap.power_w)
    bright = p > 1e-2 * p.max()
    ny, nx = p.shape
    cols, rows = np.meshgrid(np.arange(nx) + 0.5, np.arange(ny) + 0.5)
    east, north = smap.transform @ (cols, rows)
    assert bright.any()
    assert np.all(np.abs(east[bright] - (UTM_X0_M + 800)) <= 80)
    assert np.all(np.abs(north[bright] - UTM_Y0_M) <= 80)
    i = np.unravel_index(np.argmax(p), p.shape)
    assert abs(east[i] - (UTM_X0_M + 800)) <= 60 and abs(north[i] - UTM_Y0_M) <= 60


DOME_EAST_M, DOME_RADIUS_M, DOME_CENTRE_Z_M = 700.0, 150.0, -50.0  # a spherical cap 100 m tall


def dome_scene(tmp_path, res=10.0, n=300, flat=False):
    """A level plain with one spherical-cap hill east of the scene centre (invented scene).

    The cap is part of a sphere of radius 150 m centred 50 m below the plain, so the
    point of it nearest to any antenna above is on the line to the sphere's centre:
    range = |A − c| − Rs (analytic), and the echo traces the hyperbola of a point.
    """
    east, north = utm_grid(n, res)
    r2 = (east - UTM_X0_M - DOME_EAST_M) ** 2 + (north - UTM_Y0_M) ** 2
    z = np.sqrt(np.clip(DOME_RADIUS_M**2 - r2, 0, None)) + DOME_CENTRE_Z_M
    z = np.zeros_like(z) if flat else np.clip(z, 0, None)
    return write_utm(tmp_path / ("plain.tif" if flat else "dome.tif"), z, res)


def dome_range_m(alt_m, along_m):
    return math.sqrt(DOME_EAST_M**2 + along_m**2 + (alt_m - DOME_CENTRE_Z_M) ** 2) - DOME_RADIUS_M


@pytest.mark.parametrize("northbound", [True, False])
def test_point_like_hill_traces_a_hyperbola_and_is_named_with_its_side(tmp_path, northbound):
    from cluttersim.products import simulate_to_dir
    from cluttersim.analysis.sources import ask_echo, load_run

    dem = dome_scene(tmp_path)
    north = UTM_Y0_M + np.linspace(-500, 500, 41)
    if not northbound:
        north = north[::-1]
    track = utm_track(np.full(41, UTM_X0_M), north, 1000.0)
    cfg = config(C=1000.0, rho=0.1)
    simulate_to_dir(dem, track, cfg, tmp_path / "run")
    run = load_run(tmp_path / "run")
    ds = run.ds
    dt = 10e-9
    # the hill's own echo: the radargram minus that of the same plain without the hill
    plain = simulate(dome_scene(tmp_path, flat=True), track, cfg)
    np.testing.assert_allclose(plain["window_start"], ds["window_start"])
    delays = []
    for t in range(41):
        excess = ds["power"][t].values - plain["power"][t].values
        delays.append(ds["window_start"][t].item() + np.argmax(excess) * dt)
    r = np.array(delays) * C / 2
    y = north - UTM_Y0_M  # along-track distance from abreast of the hill
    apex = int(np.argmin(np.abs(y)))
    # the dome echoes from its point nearest the antenna (flat map geometry; Earth curvature
    # over 1 km changes the range by < 0.1 m): R(y) = √(x² + y² + (h − zc)²) − Rs
    expected = np.array([dome_range_m(1000.0, yt) for yt in y])
    np.testing.assert_allclose(r, expected, atol=3.0)  # two range bins of 1.5 m
    assert r[0] - r[apex] > 20.0 and r[-1] - r[apex] > 20.0  # a hyperbola, apex abreast of the hill

    answer = ask_echo(run, apex, delay_s=delays[apex] - ds["window_start"][apex].item())
    top = answer.cells[0]
    hx, hy = to_utm(top.lon_deg, top.lat_deg)
    assert np.hypot(hx - (UTM_X0_M + DOME_EAST_M), hy - UTM_Y0_M) <= 150  # on the dome (base radius 141 m)
    assert top.side == ("right" if northbound else "left")
    assert answer.cells[0].share > 0.02
    k = int(round((delays[apex] - ds["window_start"][apex].item()) / dt))
    side_share = ds["right_fraction" if northbound else "left_fraction"][apex, k].item()
    assert side_share > 0.75  # the plain's ring at this range adds some power from both sides
