"""The compiled kernel against the plain NumPy reference of the same physics."""

import numpy as np
import pytest
from scenes import MARS_RADIUS_M, write_geotiff
from scipy.ndimage import convolve1d

from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track
from cluttersim.io.dem import DemSource
from cluttersim.physics.radar import RadarConfig
from cluttersim.physics.reference import reference_binned_power, spread_exact
from cluttersim.simulate import binned_power, prepare_scene


def test_spread_exact_box_and_trapezoid_by_hand():
    # A box 2 bins wide centred at 1.5 covers bins [0.5, 2.5): shares 1/4, 1/2, 1/4.
    np.testing.assert_allclose(spread_exact(np.array([1.5]), np.array([2.0]), np.array([0.0]), np.array([1.0]), 4),
                               [0.25, 0.5, 0.25, 0.0], atol=1e-12)  # fmt: skip
    # Trapezoid with widths 2 and 1 centred at 2.0: density rises over [0.5, 1.5], flat over [1.5, 2.5],
    # falls over [2.5, 3.5] with plateau 1/2 → bin shares 1/16, 7/16, 7/16, 1/16 (integrated by hand).
    np.testing.assert_allclose(spread_exact(np.array([2.0]), np.array([2.0]), np.array([1.0]), np.array([1.0]), 4),
                               [1 / 16, 7 / 16, 7 / 16, 1 / 16], atol=1e-12)  # fmt: skip
    # a facet straddling the window start keeps only its inside part: box [−0.5, 1.5) → 0.25 lost... kept 0.75
    np.testing.assert_allclose(spread_exact(np.array([0.5]), np.array([2.0]), np.array([0.0]), np.array([1.0]), 3).sum(), 0.75)


@pytest.fixture(scope="module")
def rough_scene(tmp_path_factory):
    """Seeded rough terrain on the Mars sphere (invented test scene)."""
    rng = np.random.default_rng(7)
    n = 160
    k = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n)))
    k[0, 0] = 1
    z = np.fft.ifft2((rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * k**-1.8).real
    z *= 200.0 / z.std()
    dem = write_geotiff(tmp_path_factory.mktemp("rough") / "rough.tif", z, -0.8, 0.8, 0.01)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -0.3, 0.0, 0.3, 0.0, 200e3, 6000.0)
    return DemSource.open(dem), track


@pytest.mark.parametrize(
    "law, params, samples",
    [
        ("hagfors", {"C": 300.0, "rho": 0.1}, 512),  # the window cuts the echo; little power at its end
        ("cosine", {"k": 0.02, "n": 1.5}, 2048),  # diffuse: a window that holds the whole DEM's echo
    ],
)
def test_kernel_agrees_with_numpy_reference(rough_scene, law, params, samples):
    src, track = rough_scene
    cfg = SimulationConfig(radar=RadarConfig(samples=samples), surface=SurfaceConfig(law, params))
    scene = prepare_scene(src, track, cfg)
    dt = cfg.radar.sample_interval_s
    nbins = cfg.radar.samples + 2 * scene.pad
    bin0 = scene.start_s - (scene.pad + 0.5) * dt
    ant = scene.ant_m[scene.idx]
    fast, _, _ = binned_power(scene, ant, bin0, nbins)
    ref = reference_binned_power(scene.facets, ant, bin0, dt, nbins, cfg)
    # total power per trace: the same facets, powers and window → 1e-5 relative (issue target)
    np.testing.assert_allclose(fast[:, 0].sum(axis=1), ref.sum(axis=1), rtol=1e-5)
    # sample by sample after the pulse: the kernel places facet corners on a 1/32-sample grid
    w = scene.pulse_weights

    a = convolve1d(fast[:, 0], w, axis=1)
    b = convolve1d(ref, w, axis=1)
    strong = b > 1e-3 * b.max()
    np.testing.assert_allclose(a[strong], b[strong], rtol=0.05)
    assert np.median(np.abs(a[strong] / b[strong] - 1)) < 2e-3
    # no delay bias from the sub-bin grid: the power-weighted mean delay per trace matches the exact
    # trapezoids' to a few thousandths of a sample (corners half a sub-bin early would be −1/64)
    j = np.arange(nbins)
    bias = np.median(fast[:, 0] @ j / fast[:, 0].sum(axis=1) - ref @ j / ref.sum(axis=1))
    assert abs(bias) < 3e-3


def test_sources_rows_split_the_total(rough_scene):
    src, track = rough_scene
    cfg = SimulationConfig(radar=RadarConfig(samples=512), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}))
    scene = prepare_scene(src, track, cfg)
    nbins = cfg.radar.samples + 2 * scene.pad
    bin0 = scene.start_s - (scene.pad + 0.5) * cfg.radar.sample_interval_s
    ant = scene.ant_m[scene.idx]
    plain, _, n1 = binned_power(scene, ant, bin0, nbins)
    right = np.tile([0.0, 0.0, 1.0], (len(ant), 1))  # any unit vector: only the split changes
    split, best, n3 = binned_power(scene, ant, bin0, nbins, right, np.full(len(ant), 2000.0), sources=True)
    assert n1 == n3
    # the total is the sum of the three side rows, each integrated on its own: the same deposits, so
    # equal to rounding (a row summed twice over ~20,000 sub-bins carries rounding of up to about
    # 1e-12 of the trace's peak)
    np.testing.assert_allclose(split[:, 0], plain[:, 0], rtol=1e-9, atol=0)
    assert np.abs(split[:, 0] - plain[:, 0]).max() < 1e-10 * plain[:, 0].max()
    sides = split[:, 1].sum(axis=1) + split[:, 2].sum(axis=1)
    assert np.all(sides <= split[:, 0].sum(axis=1) * (1 + 1e-9))
    assert (best >= 0).any()


@pytest.mark.parametrize("antenna", [{"pattern": "dipole", "axis": "cross-track"},
                                     {"pattern": "gaussian", "beamwidth_along_deg": 3.0, "beamwidth_across_deg": 8.0}])  # fmt: skip
def test_kernel_agrees_with_numpy_reference_with_antenna_pattern(rough_scene, antenna):
    from cluttersim.physics.antenna import AntennaConfig

    src, track = rough_scene
    cfg = SimulationConfig(radar=RadarConfig(samples=512), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}),
                           antenna=AntennaConfig(**antenna))  # fmt: skip
    ref, plain = _kernel_matches_reference_with_frames(src, track, cfg)
    from cluttersim.physics.antenna import DIPOLE_PEAK

    peak = DIPOLE_PEAK if antenna["pattern"] == "dipole" else 1.0
    assert 0 < ref.sum() < peak**2 * plain.sum()  # below the peak gain everywhere off the peak


@pytest.mark.parametrize("processing", [{"aperture": "focused", "aperture_length_m": 3000.0},
                                        {"aperture": "focused", "doppler_bandwidth_hz": 4.0, "platform_speed_m_s": 3500.0},
                                        {"aperture": "unfocused"}])  # fmt: skip
def test_kernel_agrees_with_numpy_reference_with_along_track_processing(rough_scene, processing):
    from cluttersim.physics.aperture import ProcessingConfig

    src, track = rough_scene
    cfg = SimulationConfig(radar=RadarConfig(samples=512), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}),
                           processing=ProcessingConfig(**processing))  # fmt: skip
    ref, plain = _kernel_matches_reference_with_frames(src, track, cfg)
    assert 0 < ref.sum() < 0.9 * plain.sum()  # the processing removes clutter ahead and behind


def _kernel_matches_reference_with_frames(src, track, cfg):
    """Kernel and NumPy reference on the scene with the traces' frames (antenna patterns and
    along-track processing need them): total power per trace to 1e-5. Returns the reference's
    binned power and that of the same radar without pattern or processing."""
    from cluttersim.physics.antenna import trace_frames
    from cluttersim.analysis.attribution import right_unit_vectors

    scene = prepare_scene(src, track, cfg)
    dt = cfg.radar.sample_interval_s
    nbins = cfg.radar.samples + 2 * scene.pad
    bin0 = scene.start_s - (scene.pad + 0.5) * dt
    ant = scene.ant_m[scene.idx]
    body = src.body
    frames = trace_frames(right_unit_vectors(body, track)[scene.idx], body.up_unit(track.lat_deg, track.lon_deg)[scene.idx])
    fast, _, _ = binned_power(scene, ant, bin0, nbins, frames=frames)
    ref = reference_binned_power(scene.facets, ant, bin0, dt, nbins, cfg, frames=frames)
    np.testing.assert_allclose(fast[:, 0].sum(axis=1), ref.sum(axis=1), rtol=1e-5)
    plain = reference_binned_power(scene.facets, ant, bin0, dt, nbins, SimulationConfig(radar=cfg.radar, surface=cfg.surface))
    return ref, plain
