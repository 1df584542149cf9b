"""Speed-motivated kernels and variants against outside references (SciPy, the NumPy oracle)."""

import importlib

import numpy as np
import pytest
from scenes import MARS_RADIUS_M, write_geotiff
from scipy.ndimage import convolve1d

from cluttersim import (
    Body,
    SimulationConfig,
    SurfaceConfig,
    great_circle_track,
    kernels,
)
from cluttersim.io.dem import DemSource
from cluttersim.physics.radar import RadarConfig, pulse_power_kernel
from cluttersim.physics.reference import reference_binned_power
from cluttersim.simulate import binned_power, prepare_scene

simulate_module = importlib.import_module("cluttersim.simulate")  # the module (the package exports a function of that name)


@pytest.mark.parametrize("length", [1, 9, 87])
def test_convolve_rows_matches_scipy_convolve1d(length):
    """Reference: scipy.ndimage.convolve1d with mode="constant" (zero outside the row)."""
    rng = np.random.default_rng(length)
    rows = rng.random((5, 300))
    weights = rng.random(length)
    first = length // 2
    expected = convolve1d(rows, weights, axis=-1, mode="constant")[:, first : first + 250]
    out = np.empty((5, 250))
    kernels.convolve_rows(rows, weights, first, out)
    np.testing.assert_allclose(out, expected, rtol=1e-12, atol=1e-15)


def test_pulse_compression_matches_scipy_on_the_pulse_response():
    """_compress (compiled) against scipy.ndimage.convolve1d for the Hann-windowed pulse response."""
    _, weights = pulse_power_kernel(10e6, 37.5e-9, "hann")
    pad = len(weights) // 2
    binned = np.random.default_rng(3).random((4, 512 + 2 * pad))
    expected = convolve1d(binned, weights, axis=-1, mode="constant")[:, pad : pad + 512]
    np.testing.assert_allclose(simulate_module._compress(binned, weights, pad, 512), expected, rtol=1e-12, atol=1e-18)


@pytest.fixture(scope="module")
def small_scene(tmp_path_factory):
    """Seeded rough terrain on the Mars sphere (invented test scene), a few traces."""
    rng = np.random.default_rng(11)
    n = 96
    k = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n)))
    k[0, 0] = 1
    z = np.fft.ifft2((rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * k**-1.8).real
    z *= 150.0 / z.std()
    dem = write_geotiff(tmp_path_factory.mktemp("variants") / "rough.tif", z, -0.48, 0.48, 0.01)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -0.1, 0.0, 0.1, 0.0, 150e3, 3000.0)
    cfg = SimulationConfig(radar=RadarConfig(samples=256), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}))
    scene = prepare_scene(DemSource.open(dem), track, cfg)
    nbins = cfg.radar.samples + 2 * scene.pad
    bin0 = scene.start_s - (scene.pad + 0.5) * cfg.radar.sample_interval_s
    return scene, cfg, np.ascontiguousarray(scene.ant_m[scene.idx]), bin0, nbins


def test_centre_binned_variant_keeps_each_traces_total_power(small_scene, monkeypatch):
    """Benchmark-only centre binning moves power between bins but not in or out of the window's
    interior: per trace it sums to the NumPy reference's total (cluttersim.physics.reference, exact
    trapezoids) to the share that straddles the window's edges (within 1e-3; the trapezoids, whose
    corners are on a 1/32-sample grid, within 1e-4)."""
    scene, cfg, ant, bin0, nbins = small_scene
    monkeypatch.setattr(simulate_module, "DELAY_SPREADING", kernels.SPREAD_CENTRE)
    centre, _, n_centre = binned_power(scene, ant, bin0, nbins)
    monkeypatch.setattr(simulate_module, "DELAY_SPREADING", kernels.SPREAD_TRAPEZOID)
    spread, _, n_spread = binned_power(scene, ant, bin0, nbins)
    ref = reference_binned_power(scene.facets, ant[:2], bin0[:2], cfg.radar.sample_interval_s, nbins, cfg)
    assert n_centre == n_spread  # the same facets are evaluated
    np.testing.assert_allclose(centre[:2, 0].sum(axis=1), ref.sum(axis=1), rtol=1e-3)
    np.testing.assert_allclose(spread[:2, 0].sum(axis=1), ref.sum(axis=1), rtol=1e-4)
    # centre binning: every facet's power in one bin, so the profile is rougher than the trapezoids'
    assert np.abs(np.diff(centre[:, 0], axis=1)).sum() > np.abs(np.diff(spread[:, 0], axis=1)).sum()


def test_side_rows_on_the_total_grid_add_up_with_the_nadir_strip(small_scene):
    """Left + right ≤ total in every bin, and equal to it when the nadir strip is empty (strip half-width 0:
    every facet is left or right of the track)."""
    scene, _, ant, bin0, nbins = small_scene
    right = np.tile([0.0, 0.0, 1.0], (len(ant), 1))
    split, _, _ = binned_power(scene, ant, bin0, nbins, right, np.zeros(len(ant)), sources=True)
    total = split[:, 0]
    np.testing.assert_allclose(split[:, 1] + split[:, 2], total, rtol=1e-9, atol=1e-12 * total.max())
    wide, _, _ = binned_power(scene, ant, bin0, nbins, right, np.full(len(ant), 3000.0), sources=True)
    assert np.all(wide[:, 1] + wide[:, 2] <= wide[:, 0] * (1 + 1e-9) + 1e-12 * total.max())
    assert (wide[:, 1] + wide[:, 2]).sum() < 0.99 * wide[:, 0].sum()  # the strip holds some of the power


@pytest.mark.parametrize("shape", [(600, 2048), (2, 300, 2048)])
def test_netcdf_chunks_compressed_in_parallel_read_back_exactly(tmp_path, shape):
    """Reference: the HDF5 library (through h5py and xarray) decoding the shuffle + deflate chunks
    written by write_netcdf_to: the same bits, NaNs included, and the same variables and attributes
    as xarray's own write; the last chunk of 256 traces is partial."""
    import h5py
    import xarray as xr

    from cluttersim.io.radargram import write_netcdf_to

    rng = np.random.default_rng(5)
    dims = ("band", "trace", "sample")[-len(shape) :]
    power = rng.lognormal(size=shape).astype(np.float32)
    power[..., :3, :7] = np.nan
    frac = rng.random(shape).astype(np.float32)
    ds = xr.Dataset(
        {"power": (dims, power, {"units": "W"}), "left_fraction": (dims, frac, {"units": "1"}),
         "window_start": ("trace", np.arange(shape[-2], dtype=np.float64), {"units": "s"})},
        attrs={"Conventions": "CF-1.10"},
    )  # fmt: skip
    write_netcdf_to(ds, tmp_path / "fast.nc")
    ds.to_netcdf(tmp_path / "plain.nc", engine="h5netcdf", format="NETCDF4")
    with xr.open_dataset(tmp_path / "fast.nc", engine="h5netcdf") as fast, xr.open_dataset(
        tmp_path / "plain.nc", engine="h5netcdf"
    ) as plain:  # fmt: skip
        for name in ("power", "left_fraction", "window_start"):
            assert fast[name].values.tobytes() == ds[name].values.tobytes()
            assert fast[name].attrs == plain[name].attrs and fast[name].dims == plain[name].dims
        assert fast.attrs == plain.attrs
    with h5py.File(tmp_path / "fast.nc") as f:
        assert f["power"].compression == "gzip" and f["power"].shuffle
        assert f["power"].chunks[-2:] == (256, 2048)


def _float64_discretisation(scene, cfg, ant, bin0, nbins, right=None, strip=None):
    """The kernel's discretisation written again in float64 NumPy, facet by facet: radar-equation
    power (Hagfors' law, scattering.sigma0_hagfors), trapezoid corners on the 1/32-sample grid
    (kernels.trapezoid_kinks), the four slope changes, twice summed and added per bin; with ``right``,
    each facet's side row and per bin the facet of largest power density whose centre is there."""
    from cluttersim.constants import SPEED_OF_LIGHT_M_S
    from cluttersim.physics.scattering import sigma0_hagfors

    f = scene.facets
    ov = simulate_module.OVERSAMPLE
    pos = f.positions_m(np.arange(f.rel_m.shape[1]))
    normal, e_col, e_row = (a.T.astype(np.float64) for a in (f.normal, f.e_col_m, f.e_row_m))
    area = f.area_m2.astype(np.float64)
    c_half = 0.5 * SPEED_OF_LIGHT_M_S
    inv_sub_m = ov / (c_half * cfg.radar.sample_interval_s)
    nsub = nbins * ov
    p0, p1 = cfg.surface.kernel_params()
    rows = 3 if right is not None else 1
    out = np.zeros((len(ant), rows, nbins))
    best = np.full((len(ant), nbins), -1)
    margin = 4 * nsub
    for t in range(len(ant)):
        v = pos - ant[t]
        r = np.sqrt((v * v).sum(axis=1))
        u = v / r[:, None]
        cos_inc = -(u * normal).sum(axis=1)
        wa = np.abs((u * e_col).sum(axis=1)) * inv_sub_m
        wb = np.abs((u * e_row).sum(axis=1)) * inv_sub_m
        x = r * inv_sub_m - bin0[t] * c_half * inv_sub_m
        ok = (cos_inc > 0) & (x + 0.5 * (wa + wb) > 0) & (x - 0.5 * (wa + wb) < nsub)
        a = np.maximum(1.0, np.floor(np.maximum(wa, wb) + 0.5))
        b = np.maximum(1.0, np.floor(np.minimum(wa, wb) + 0.5))
        n1 = np.floor(x - 0.5 * (a + b) + 1.0)
        p = cfg.radar.radar_constant_w_m2() * sigma0_hagfors(np.maximum(cos_inc, 1e-6), p0, p1) * area / r**4
        w = np.where(ok, p / (a * b), 0.0)
        side = np.zeros(len(r), dtype=int)
        if right is not None:
            cross = v @ right[t]
            side = np.where(cross > strip[t], 1, np.where(cross < -strip[t], 0, 2))
        for s in range(rows):
            dd = np.zeros(nsub + 2 * margin + 2)
            sel = ok & (side == s)
            k = (n1[sel] + margin).astype(np.int64)
            for offset, sign in ((0, 1.0), (b[sel], -1.0), (a[sel], -1.0), (a[sel] + b[sel], 1.0)):
                np.add.at(dd, k + np.asarray(offset, dtype=np.int64), sign * w[sel])
            sub = np.cumsum(np.cumsum(dd))[margin : margin + nsub]
            out[t, s] = np.maximum(sub.reshape(nbins, ov).sum(axis=1), 0.0)
        if right is not None:
            centre = n1 + 0.5 * (a + b - 1.0)
            kbin = np.floor((np.trunc(centre) + 0.5) / ov).astype(np.int64)
            density = w * b * np.minimum(a, ov)
            inside = ok & (kbin >= 0) & (kbin < nbins)
            for i in np.flatnonzero(inside)[np.argsort(density[inside], kind="stable")]:
                best[t, kbin[i]] = i  # the densest facet of each bin is written last
    return out, best


def test_float32_terms_keep_the_float64_discretisation(small_scene):
    """The kernel computes the range, hence each facet's delay and corners, in float64 and the rest
    of each facet's terms (direction, cos θ, sin²θ, widths, σ0, power) in float32. Against the same
    discretisation written in float64 NumPy: total power per trace to 1e-6, every bin to 1e-4 of its
    trace's peak (a corner can move by one 1/32-sample sub-bin where a facet's position or width is
    within ~1e-6 sub-bin of a rounding edge), the side rows likewise and the densest facet of 99.9 %
    of the bins (side thresholds to a few mm)."""
    scene, cfg, ant, bin0, nbins = small_scene
    ant, bin0 = ant[:3], bin0[:3]
    fast, _, _ = binned_power(scene, ant, bin0, nbins)
    ref, _ = _float64_discretisation(scene, cfg, ant, bin0, nbins)
    np.testing.assert_allclose(fast[:, 0].sum(axis=1), ref[:, 0].sum(axis=1), rtol=1e-6)
    assert np.abs(fast[:, 0] - ref[:, 0]).max(axis=1).max() <= 1e-4 * ref[:, 0].max()
    median = np.median(np.abs(fast[:, 0] - ref[:, 0])[ref[:, 0] > 1e-3 * ref[:, 0].max()] / ref[:, 0][ref[:, 0] > 1e-3 * ref[:, 0].max()])
    assert median < 1e-6  # float32 roundings, no bias
    right = np.tile([0.0, 0.0, 1.0], (len(ant), 1))
    strip = np.full(len(ant), 1500.0)
    split, best, _ = binned_power(scene, ant, bin0, nbins, right, strip, sources=True)
    ref3, best_ref = _float64_discretisation(scene, cfg, ant, bin0, nbins, right, strip)
    for s, row in ((0, 1), (1, 2)):  # kernel rows 1, 2: left, right; the oracle's 0, 1
        assert np.abs(split[:, row] - ref3[:, s]).max() <= 1e-4 * ref[:, 0].max()
    filled = best_ref >= 0
    assert np.mean(best[filled] == best_ref[filled]) >= 0.999
