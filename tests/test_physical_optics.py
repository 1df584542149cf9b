"""Specular reflection ([surface] permittivity, rms_height_m): the physical-optics facet field
against brute-force integration, the mirror (image) power of a smooth sphere, roughness, a
tilted plane's perpendicular foot, and the coherent mode without random phases."""

import math
import warnings

import numpy as np
import pyproj
import pytest
from scenes import MARS_RADIUS_M, UTM, UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_geotiff, write_utm

from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track, simulate
from cluttersim import kernels
from cluttersim.physics.antenna import AntennaConfig
from cluttersim.physics.aperture import ProcessingConfig
from cluttersim.errors import ConfigError
from cluttersim.physics.physical_optics import (
    coherent_power_fraction,
    facet_integral,
    facet_integral_brute_force,
    mirror_power_w,
    normal_reflection_coefficient,
    subdivisions,
)
from cluttersim.physics.radar import RadarConfig

C = 299_792_458.0  # SI definition
LAMBDA_M = C / 20e6  # the default radar's 20 MHz
K = 2 * math.pi / LAMBDA_M
DT_S = 37.5e-9


def fresnel_radius_m(range_m):
    """First Fresnel-zone radius √(λR/2) (common practice; the project's convention)."""
    return math.sqrt(LAMBDA_M * range_m / 2)


# ----------------------------------------------------------------------------- the facet integral


def square_facet(h_m, side_m, offset_m=(0.0, 0.0), tilt_deg=0.0):
    """A square facet of side `side_m` on the plane z = 0 (tilted about y by `tilt_deg`), the antenna
    `h_m` above the origin."""
    t = math.radians(tilt_deg)
    ea = np.array([side_m * math.cos(t), 0.0, side_m * math.sin(t)])
    eb = np.array([0.0, side_m, 0.0])
    normal = np.cross(ea, eb)
    return np.array([0.0, 0.0, h_m]), np.array([*offset_m, 0.0]), normal / np.linalg.norm(normal), ea, eb


@pytest.mark.parametrize(
    "h_m, side_rf, offset_sides, tilt_deg, radius_m",
    [
        (3000.0, 0.25, (0, 0), 0.0, math.inf),  # small facet at nadir: linear phase alone (n = 1)
        (3000.0, 2.0, (0, 0), 0.0, math.inf),  # two Fresnel radii: the quadratic phase decides
        (3000.0, 2.0, (0.7, 0.3), 0.0, math.inf),  # off the specular point, partly inside the first zone
        (3000.0, 1.0, (-0.9, 0), -10.0, math.inf),  # a tilted facet near its specular direction
        (300e3, 2.0, (0, 0), 0.0, MARS_RADIUS_M),  # curved onto a Mars-sized sphere
    ],
)
def test_facet_field_agrees_with_brute_force_integration(h_m, side_rf, offset_sides, tilt_deg, radius_m):
    """Closed form per sub-facet (Gordon 1975 form for a parallelogram) against the midpoint rule
    on 1200² points with the exact range at each (phase step < 0.1 rad between points)."""
    side = side_rf * fresnel_radius_m(h_m)
    ant, c, n, ea, eb = square_facet(h_m, side, (offset_sides[0] * side, offset_sides[1] * side), tilt_deg)
    fast = facet_integral(ant, c, n, ea, eb, K, body_radius_m=radius_m)
    slow = facet_integral_brute_force(ant, c, n, ea, eb, K, points=1200, body_radius_m=radius_m)
    assert abs(fast) == pytest.approx(abs(slow), rel=0.02)  # 0.09 dB in power
    # the phase too (the sub-facets leave out a common ~0.1 rad mean Fresnel phase)
    assert abs(np.angle(fast / slow)) < 0.12


def test_off_specular_facets_cancel_along_their_shared_edges():
    """Far from the specular direction a facet's field is the sum of its edges' terms, small and
    approximate (within 0.5 % of the facet's specular field A cos θ/R²); on a tiled surface
    neighbours' shared edges cancel. A 6 × 6 tiling of facets one Fresnel radius wide, 2.5 to 8.5
    radii beside nadir, tilted 20° away: the sum of closed forms against brute force over the
    whole patch (1800² points)."""
    h = 3000.0
    side = fresnel_radius_m(h)
    tilt = math.radians(-20.0)
    along = np.array([math.cos(tilt), 0.0, math.sin(tilt)])  # the plane's direction of e_a
    total = 0.0j
    for i in range(6):
        for j in range(6):
            ant, _, n, ea, eb = square_facet(h, side, tilt_deg=-20.0)
            c = (2.5 + i) * side * along + np.array([0.0, (j - 2.5) * side, 0.0])
            single = facet_integral(ant, c, n, ea, eb, K)
            slow = facet_integral_brute_force(ant, c, n, ea, eb, K, points=300)
            assert abs(single - slow) < 0.005 * float(np.linalg.norm(np.cross(ea, eb))) / float((c - ant) @ (c - ant))
            total += single
    ant, _, n, ea, eb = square_facet(h, 6 * side, tilt_deg=-20.0)
    whole = facet_integral_brute_force(ant, 5 * side * along, n, ea, eb, K, points=1800)
    # the patch returns little (no specular point on it: −31 dB of one facet's A/R²); the 36 facets'
    # errors, each up to 0.5 % of A/R² alone, cancel to within the bound of one facet (measured 0.25 %;
    # 0.3 % of the patch's total with 16 subdivisions per facet: the closed forms converge to it)
    scale = side * side / (h * h + (5 * side) ** 2)
    assert abs(total - whole) < 0.005 * scale


def test_linear_phase_alone_fails_for_facets_larger_than_the_fresnel_zone():
    """Why the facets are subdivided: one closed form (n = 1) for a facet two Fresnel radii wide
    at nadir misses the quadratic phase (2π at its corners) and is off by more than 3 dB."""
    ant, c, n, ea, eb = square_facet(3000.0, 2 * fresnel_radius_m(3000.0))
    one = facet_integral(ant, c, n, ea, eb, K, n=1)
    slow = facet_integral_brute_force(ant, c, n, ea, eb, K, points=1200)
    assert 20 * math.log10(abs(one) / abs(slow)) > 3.0
    assert subdivisions(float(np.linalg.norm(ea)), float(np.linalg.norm(eb)), 3000.0, K) >= 6


@pytest.mark.parametrize("offset_sides, tilt_deg, side_rf", [((0, 0), 0.0, 2.0), ((4, 1), 0.0, 0.5), ((2, 0), 15.0, 1.0)])
def test_kernel_cells_sum_to_the_closed_form(offset_sides, tilt_deg, side_rf):
    """The kernel spreads a facet over delay cells (trapezoid × carrier, integrated exactly per
    cell); summed over the cells it is the closed-form field to rounding."""
    h = 3000.0
    side = side_rf * fresnel_radius_m(h)
    ant, c, n, ea, eb = square_facet(h, side, (offset_sides[0] * side, offset_sides[1] * side), tilt_deg)
    r = float(np.linalg.norm(c - ant))
    cells_per_sample, nb = 9, 400
    out = np.zeros((1, 1, nb * cells_per_sample), dtype=np.complex128)
    f32 = lambda v: np.asarray(v, np.float32).reshape(3, 1)  # noqa: E731
    kernels.accumulate_specular(
        ant[None, :], np.zeros((1, 3)), np.zeros(1), np.array([2 * (r - 2 * side) / C]), DT_S, cells_per_sample,
        c[None, :], np.array([3.0 * side]), np.array([[0.0, 0.0, 1.0, 1e30, -1e30, 1e30]]),  # slab: no bound
        np.array([0, 1]), f32([0, 0, 0]), f32(n), f32(ea), f32(eb),
        np.array([np.linalg.norm(np.cross(ea, eb))], np.float32), K, 1.0 + 0j, 0.0, 0.0, np.zeros((1, 3, 3)),
        np.zeros(8), np.zeros((1, 1), np.float32), np.zeros(1, np.int32), np.zeros((1, 2)), np.zeros(1), 0.0,
        float(side), out,
    )  # fmt: skip
    closed = facet_integral(ant, c.astype(np.float32).astype(float), n, ea, eb, K)
    assert abs(out.sum() - closed) < 1e-6 * abs(closed)


def test_reflection_and_roughness_by_hand():
    # ε′ = 3.15 (water ice): Γ = (1 − √3.15)/(1 + √3.15) = −0.2793, ρ = 0.0780 (Born & Wolf §1.5)
    assert normal_reflection_coefficient(3.15) == pytest.approx(-0.27930, abs=1e-4)
    # Kirchhoff coherent share exp(−(4π σh cos θ/λ)²) (Ulaby, Moore & Fung vol. II ch. 12):
    # −3 dB at nadir when 4πσh/λ = √ln 2, i.e. σh = 0.99 m at 20 MHz (the "1 m")
    assert 10 * math.log10(coherent_power_fraction(0.99, 1.0, LAMBDA_M)) == pytest.approx(-3.0, abs=0.02)
    assert coherent_power_fraction(LAMBDA_M / 2, 1.0, LAMBDA_M) == pytest.approx(math.exp(-4 * math.pi**2))
    # mirror: Pt G² λ² ρ / ((4π)² (2h)²) by hand for 10 W, isotropic, λ = 15 m, ρ = 1, h = 1 km
    assert mirror_power_w(10.0, 1.0, 15.0, 1.0, 1000.0) == pytest.approx(10 * 225 / ((4 * math.pi) ** 2 * 4e6))


def test_surface_keys_are_checked():
    with pytest.raises(ConfigError, match=r"\[surface\] permittivity = 0.5: expected a real relative permittivity"):
        SimulationConfig.from_dict({"surface": {"permittivity": 0.5}})
    with pytest.raises(ConfigError, match=r"\[surface\] rms_height_m = -1: expected a height >= 0"):
        SimulationConfig.from_dict({"surface": {"permittivity": 3.0, "rms_height_m": -1}})
    with pytest.raises(ConfigError, match=r"rms_height_m weights the specular reflection: expected \[surface\] permittivity"):
        SimulationConfig.from_dict({"surface": {"rms_height_m": 0.1}})
    with pytest.raises(ConfigError, match=r"random_phase = false treats every facet as a smooth reflector"):
        SimulationConfig.from_dict({"surface": {"law": "cosine"}, "processing": {"mode": "coherent", "random_phase": False}})
    cfg = SimulationConfig.from_dict({"surface": {"law": "hagfors", "permittivity": 3.15, "rms_height_m": 0.2}})
    assert cfg.surface.to_dict()["permittivity"] == 3.15 and SimulationConfig.from_dict(cfg.to_dict()) == cfg


# ----------------------------------------------------------------------------- whole simulations


def flat_sphere_run(tmp_path, alt_m, cell_over_rf, *, permittivity=3.15, rms_height_m=None, mode="incoherent",
                    random_phase=True, law=("constant", {"sigma0": 1e-12}), sample_interval_s=DT_S, antenna=None,
                    shadowing=False):  # fmt: skip
    """Peak power (dB) over the mirror power of a smooth flat Mars-sized sphere, per trace."""
    samples = 96
    radar = RadarConfig(samples=samples, sample_interval_s=sample_interval_s,
                        window_start_s=2 * alt_m / C - 32 * sample_interval_s)  # the nadir echo on sample 32
    cell_m = cell_over_rf * fresnel_radius_m(alt_m)
    res_deg = math.degrees(cell_m / MARS_RADIUS_M)
    reach_m = 1.3 * math.sqrt(alt_m * samples * sample_interval_s * C) + 2 * cell_m  # ground the window sees
    n = int(2 * reach_m / cell_m) + 2
    dem = write_geotiff(tmp_path / f"flat_{alt_m:.0f}_{cell_over_rf}.tif", np.zeros((n, n)), -n * res_deg / 2,
                        n * res_deg / 2, res_deg)  # fmt: skip
    # two traces a fifth of a cell apart: the nadir falls at different places within its facet
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -0.1 * res_deg, 0.0, 0.1 * res_deg, 0.0, alt_m, cell_m / 5)
    surface = SurfaceConfig(law[0], law[1], permittivity=permittivity, rms_height_m=rms_height_m)
    cfg = SimulationConfig(radar=radar, surface=surface, antenna=antenna or AntennaConfig(),
                           processing=ProcessingConfig(mode=mode, random_phase=random_phase, shadowing=shadowing))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # hole-free; nothing to warn about but the DEM's edge
        ds = simulate(dem, track, cfg, sources=mode == "incoherent")
    rho = normal_reflection_coefficient(permittivity if permittivity else 3.15) ** 2
    ref = mirror_power_w(radar.transmit_power_w, radar.gain_linear, radar.wavelength_m, rho, alt_m, MARS_RADIUS_M)
    power = ds["power"].values.astype(float)
    return 10 * np.log10(power.max(axis=1) / ref), power.argmax(axis=1), ds


@pytest.mark.parametrize("alt_m", [3000.0, 300e3])
@pytest.mark.parametrize("cell_over_rf", [0.25, 2.0])
def test_smooth_flat_sphere_gives_the_mirror_power(tmp_path, alt_m, cell_over_rf):
    """Peak = Pt G² λ² ρ / ((4π)² (2h)² (1 + h/Rp)²) (image method with the convex mirror's
    divergence; Friis 1946, Brown 1977) within 0.5 dB, for cells of ¼ and 2 Fresnel radii:
    +0.07 dB measured, the band-limited pulse's own next-order term; the same for both."""
    db, peak, ds = flat_sphere_run(tmp_path, alt_m, cell_over_rf)
    assert np.all(np.abs(db) < 0.5), db
    assert np.all(peak == 32)  # at the nadir delay 2h/c
    # the source record: a mirror echo from the nadir strip, neither left nor right
    sides = ds["left_fraction"].values[:, 32] + ds["right_fraction"].values[:, 32]
    assert np.all(sides < 0.05), sides


def test_mirror_power_does_not_depend_on_the_sample_interval(tmp_path):
    a, _, _ = flat_sphere_run(tmp_path, 300e3, 0.5, sample_interval_s=DT_S)
    b, _, _ = flat_sphere_run(tmp_path, 300e3, 0.5, sample_interval_s=12.5e-9)
    assert np.all(np.abs(a - b) < 0.05), (a, b)


def test_dipole_gain_and_shadowing_act_on_the_specular_field(tmp_path):
    """A horizontal half-wave dipole multiplies the nadir mirror echo by its peak directivity squared,
    D0² = 1.641² (+4.30 dB; Balanis, *Antenna Theory*, §4.6); shadowing hides nothing on a smooth
    sphere (the same power, bit for bit)."""
    base, _, plain = flat_sphere_run(tmp_path, 300e3, 0.5)
    dipole, _, _ = flat_sphere_run(tmp_path, 300e3, 0.5, antenna=AntennaConfig(pattern="dipole", axis="cross-track"))
    np.testing.assert_allclose(dipole - base, 20 * math.log10(1.641), atol=0.02)
    _, _, shadowed = flat_sphere_run(tmp_path, 300e3, 0.5, shadowing=True)
    np.testing.assert_array_equal(shadowed["power"].values, plain["power"].values)


def test_roughness_of_half_a_wavelength_removes_the_specular_echo(tmp_path):
    """σh = λ/2: exp(−(2π)²) = −171 dB (Kirchhoff coherent term); the peak is then the diffuse
    law's, here negligible: < −30 dB of the mirror."""
    db, _, _ = flat_sphere_run(tmp_path, 300e3, 0.25, rms_height_m=LAMBDA_M / 2)
    assert np.all(db < -30.0), db


def test_without_permittivity_runs_are_unchanged(tmp_path):
    """No [surface] permittivity: no specular term. A run whose specular term is switched off by its
    roughness (σh = 1 km: every facet skipped, the term is exactly 0) is bit for bit the run without
    the key, power and source record; with σh = 0 the mirror echo stands out."""
    hagfors = ("hagfors", {"C": 400.0, "rho": 0.08})
    _, _, with_spec = flat_sphere_run(tmp_path, 300e3, 0.5, law=hagfors)
    _, _, off = flat_sphere_run(tmp_path, 300e3, 0.5, law=hagfors, rms_height_m=1000.0)
    _, _, without = flat_sphere_run(tmp_path, 300e3, 0.5, permittivity=None, law=hagfors)
    for name in ("power", "left_fraction", "right_fraction", "source_lat"):
        np.testing.assert_array_equal(off[name].values, without[name].values)
    assert "surface_permittivity" not in without.attrs and without.attrs["surface_law"] == "hagfors"
    assert with_spec.attrs["surface_permittivity"] == 3.15
    assert with_spec["power"].values.max() > 3 * without["power"].values.max()


@pytest.mark.parametrize("cell_over_rf", [0.25, 2.0])
def test_coherent_mode_without_random_phase_gives_the_mirror_power(tmp_path, cell_over_rf):
    """[processing] mode = "coherent", random_phase = false: every facet is a smooth reflector with
    its physical-optics field, so the flat sphere's nadir peak is the mirror power whatever the
    cell size (it moved by 6 dB with point scatterers). ρ from the Hagfors law's rho."""
    law = ("hagfors", {"C": 400.0, "rho": normal_reflection_coefficient(3.15) ** 2})
    db, peak, _ = flat_sphere_run(tmp_path, 300e3, cell_over_rf, permittivity=None, mode="coherent",
                                  random_phase=False, law=law)  # fmt: skip
    assert np.all(np.abs(db) < 0.5), db
    assert np.all(peak == 32)


def test_tilted_plane_reflects_from_its_perpendicular_foot(tmp_path):
    """A smooth plane tilted 10° (UTM scene on the WGS 84 ellipsoid), the antenna 2 km above it:
    the specular echo comes from the foot of the perpendicular, at 2 R_min / c (geometry; R_min
    the smallest antenna–surface distance, from pyproj's ECEF positions of the DEM posts), not
    from nadir (5.4 samples later), with the flat-mirror power for range R_min, and the source
    record puts it on the side of the track where the foot lies (east of a northbound track:
    right)."""
    res, n, slope = 10.0, 500, math.tan(math.radians(10.0))
    east, north = utm_grid(n, res)
    z = 500.0 + slope * (east - UTM_X0_M)
    dem = write_utm(tmp_path / "tilted.tif", z, res)
    alt = 2500.0  # 2 km above the plane at the scene centre
    track = utm_track([UTM_X0_M, UTM_X0_M], [UTM_Y0_M - 5.0, UTM_Y0_M + 5.0], alt)
    surface = SurfaceConfig("constant", {"sigma0": 1e-12}, permittivity=3.15)
    cfg = SimulationConfig(radar=RadarConfig(samples=128), surface=surface)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = simulate(dem, track, cfg)
    # R_min from the ECEF positions of the posts (WGS 84, pyproj)
    to_geo = pyproj.Transformer.from_crs(UTM, "EPSG:4979", always_xy=True)
    to_ecef = pyproj.Transformer.from_crs("EPSG:4979", "EPSG:4978", always_xy=True)
    lon, lat = to_geo.transform(east.ravel(), north.ravel())[:2]
    px, py, pz = to_ecef.transform(lon, lat, z.ravel())
    power = ds["power"].values.astype(float)
    for t in range(2):
        ax, ay, az = to_ecef.transform(ds["lon"].values[t], ds["lat"].values[t], alt)
        r = np.sqrt((px - ax) ** 2 + (py - ay) ** 2 + (pz - az) ** 2)
        r_min = r.min()
        k = int(power[t].argmax())
        y0, y1, y2 = np.log(power[t, k - 1 : k + 2])
        sub = k + 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)  # parabola through the log-peak
        delay = ds["window_start"].values[t] + sub * cfg.radar.sample_interval_s
        assert delay == pytest.approx(2 * r_min / C, abs=0.1 * cfg.radar.sample_interval_s)
        assert ds["nadir_delay"].values[t] - delay > 5 * cfg.radar.sample_interval_s
        mirror = mirror_power_w(10.0, 1.0, LAMBDA_M, normal_reflection_coefficient(3.15) ** 2, r_min)
        assert 10 * math.log10(power[t, k] / mirror) == pytest.approx(0.0, abs=0.5)
        assert ds["right_fraction"].values[t, k] > 0.95
