"""Long tracks in segments: equal to the one-window run, streamed to disk, resumed, on Dask (invented scenes)."""

import dataclasses

import numpy as np
import pytest
import xarray as xr

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.aperture import ProcessingConfig
from cluttersim.io.dem import DemSource
from cluttersim.errors import OutputExistsError
from cluttersim.physics.noise import NoiseConfig
from cluttersim.products import simulate_to_dir
from cluttersim.physics.radar import RadarConfig
from cluttersim.io.radargram import open_radargram
from cluttersim.analysis import segments
from cluttersim.analysis.segments import plan_segments
from scenes import UTM_X0_M, UTM_Y0_M, utm_track, write_utm

N_CELLS, RES_M = 240, 50.0  # 12 km square, 50 m cells
ALT_M = 2500.0
#: Largest difference between a segmented and a one-window run, relative to the trace's peak power: each
#: window lays its own tiles, and a facet's float32 offset from its tile centre (rounding ~1e-4 m at km
#: offsets) moves its delay trapezoid by ~1e-3 of a 1/32-sample sub-bin (measured: 2.2e-5).
SAME_RUN_RTOL = 1e-4


@pytest.fixture(scope="module")
def airborne(tmp_path_factory):
    """Rough terrain (σ 40 m, correlated over ~5 cells) on UTM, and a diagonal airborne line whose first
    and last traces lie off the DEM."""
    d = tmp_path_factory.mktemp("seg")
    rng = np.random.default_rng(11)
    n = N_CELLS
    k = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n)))
    k[0, 0] = 1
    z = np.fft.ifft2((rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * k**-1.6).real
    z *= 40.0 / z.std()
    dem = write_utm(d / "rough.tif", z + 300.0, RES_M)
    half = n * RES_M / 2
    s = np.linspace(-half - 3500.0, half - 3000.0, 72)  # the first 20 traces off the DEM's corner
    track = utm_track(UTM_X0_M + s, UTM_Y0_M + s, ALT_M + 300.0)
    return d, dem, track


def config(samples=200, **kw):
    return SimulationConfig(radar=RadarConfig(samples=samples), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}),
                            **kw)  # fmt: skip


def assert_same_run(a: xr.Dataset, b: xr.Dataset):
    """Segmented vs one-window: per-trace geometry to float64 rounding, (trace, sample) arrays to float32
    rounding of the facets (positions stored relative to tiles laid out on each window)."""
    assert a.sizes == b.sizes and sorted(a.data_vars) == sorted(b.data_vars)
    for name in ("window_start", "nadir_delay", "earliest_echo_delay"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(a["on_dem"].values, b["on_dem"].values)
    for name in ("lat", "lon", "alt"):
        np.testing.assert_array_equal(a[name].values, b[name].values)
    pa, pb = a["power"].values.astype(np.float64), b["power"].values.astype(np.float64)
    np.testing.assert_array_equal(np.isnan(pa), np.isnan(pb))
    on = np.isfinite(pa).all(axis=-1)
    pa, pb = pa[on], pb[on]
    peak = pa.max(axis=-1, keepdims=True)
    assert np.max(np.abs(pa - pb) / peak) < SAME_RUN_RTOL
    if "left_fraction" in a:
        for name in ("left_fraction", "right_fraction"):
            diff = np.abs(a[name].values[on] - b[name].values[on])
            strong = pa > 1e-3 * peak  # fractions of samples with power; weak ones are ratios of rounding
            assert np.nanmax(np.where(strong, diff, 0.0)) < 1e-3
        same = np.isclose(a["source_lat"].values[on], b["source_lat"].values[on], rtol=0, atol=1e-9)
        assert np.mean(same[pa > 1e-3 * peak]) > 0.99  # the dominant facet: ties may break differently


def test_segments_equal_the_one_window_run(airborne):
    _, dem, track = airborne
    cfg = config()
    one = simulate(dem, track, cfg, segment_traces=None)
    with pytest.warns(UserWarning, match="are not over the DEM"):
        seg = simulate(dem, track, cfg, segment_traces=16)
    assert seg.attrs["segments"] == 5 and seg.attrs["segment_pulses"] == 16
    assert np.isnan(seg["power"].values[:5]).all() and np.isfinite(seg["power"].values[20:]).all()
    assert_same_run(one, seg)
    np.testing.assert_array_equal(seg["trace"].values, np.arange(len(track)))
    # trace coordinates, including those of the segment off the DEM, and the along-track distance
    # counted from the whole track's first trace (pyproj's geodesic, via the one-window run)
    for name in ("lat", "lon", "alt", "distance"):
        assert name in seg.coords
        np.testing.assert_allclose(seg[name].values, one[name].values, rtol=0, atol=1e-6)


def test_segments_equal_the_one_window_run_with_presum_and_noise(airborne):
    _, dem, track = airborne
    # a loud receiver (10⁹ K: P_n ≈ 1e-7 W over ≈ 1e-9 W of clutter): the noise must match draw for draw
    cfg = config(processing=ProcessingConfig(presum=3), noise=NoiseConfig(noise_temperature_k=1e9, seed=5))
    one = simulate(dem, track, cfg, segment_traces=None, sources=False)
    seg = simulate(dem, track, cfg, segment_traces=14, sources=False)  # rounded down to 12 = 4 output traces
    assert seg.attrs["segment_pulses"] == 12 and seg.sizes["trace"] == len(track) // 3
    assert_same_run(one, seg)
    # the noise of each pulse is fixed by its place in the track: the weak samples (noise alone) agree exactly
    pn = float(one["noise_power"])
    clutter = simulate(dem, track, dataclasses.replace(cfg, noise=None), segment_traces=None, sources=False)
    quiet = clutter["power"].values < 1e-6 * pn
    assert quiet.sum() > 300
    np.testing.assert_allclose(one["power"].values[quiet], seg["power"].values[quiet], rtol=1e-6)
    other_seed = simulate(dem, track, dataclasses.replace(cfg, noise=NoiseConfig(noise_temperature_k=1e9, seed=6)),
                          segment_traces=None, sources=False)  # fmt: skip
    assert not np.allclose(other_seed["power"].values[quiet], one["power"].values[quiet], rtol=1e-3)


def test_segments_keep_the_whole_tracks_aperture_gain(airborne):
    """With prf_hz and an unfocused aperture the noise level depends on the integration gain at the
    track's median height: a segment takes its whole track's, so the noise floor is the same."""
    _, dem, track = airborne
    cfg = config(processing=ProcessingConfig(aperture="unfocused", prf_hz=1000.0, platform_speed_m_s=80.0),
                 noise=NoiseConfig(noise_temperature_k=1e9, seed=1))  # fmt: skip
    one = simulate(dem, track, cfg, segment_traces=None, sources=False)
    seg = simulate(dem, track, cfg, segment_traces=16, sources=False)
    assert float(seg["noise_power"]) == float(one["noise_power"])
    assert_same_run(one, seg)


def test_plan_auto_keeps_short_tracks_whole_and_cuts_long_ones(airborne):
    _, dem, track = airborne
    src = DemSource.open(dem)
    cfg = config()
    assert len(plan_segments(src, track, cfg)) == 1
    long = type(track)(np.repeat(track.lat_deg, 8), np.repeat(track.lon_deg, 8), np.repeat(track.alt_m, 8),
                       source="long")  # fmt: skip
    whole = plan_segments(src, long, cfg)
    assert len(whole) == 1
    # too small for the whole track, enough for 256 pulses even if their window were the whole DEM
    budget = int(segments._estimate(whole[0].cells, 300, cfg, True))
    plan = plan_segments(src, long, cfg, budget_bytes=budget)
    assert len(plan) > 1
    assert plan[0].start == 0 and plan[-1].stop == len(long)
    assert all(a.stop == b.start for a, b in zip(plan, plan[1:]))
    assert all(s.pulses % segments.SEGMENT_UNIT == 0 for s in plan[:-1])
    est = [segments._estimate(s.cells, s.pulses, cfg, True) for s in plan]
    assert max(est) <= budget
    # a coherent run is never cut (its facet phases are keyed by the window)
    coh = dataclasses.replace(cfg, processing=ProcessingConfig(mode="coherent"))
    assert len(plan_segments(src, long, coh, budget_bytes=budget)) == 1


def test_streamed_run_resumes_and_equals_the_in_memory_run(airborne, tmp_path):
    _, dem, track = airborne
    cfg = config()
    ref = simulate(dem, track, cfg, segment_traces=None)
    out = tmp_path / "run"
    done = []

    def stop_after_two(res):
        done.append(res.index)
        if len(done) == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt), pytest.warns(UserWarning):
        segments_run(dem, track, cfg, out, on_segment=stop_after_two)
    kept = sorted(p.name for p in (out / "segments").iterdir())
    assert kept == ["00001.nc"]  # segment 0 lies off the DEM: nothing to keep
    assert not (out / "radargram.nc").exists()
    summary = {}
    with pytest.warns(UserWarning):
        simulate_to_dir(dem, track, cfg, out, segment_traces=16, summary=summary)
    assert summary == {"segments": 5, "resumed": 1, "computed": 4}
    assert not (out / "segments").exists()
    with open_radargram(out / "radargram.nc", lazy=True) as ds:
        assert ds["power"].chunks is not None  # dask-backed
        assert_same_run(ref, ds.load())
        assert ds.attrs["facet_evaluations"] == ref.attrs["facet_evaluations"]


def segments_run(dem, track, cfg, out, **kw):
    src = DemSource.open(dem)
    plan = plan_segments(src, track, cfg, segment_traces=16)
    paths = {k: out / v for k, v in segments_run_files().items()}
    return segments.run_segments_to_dir(src, track, cfg, plan, out, paths, **kw)


def segments_run_files():
    from cluttersim.products import run_files

    return run_files()


def test_resume_refuses_segments_of_other_arguments_unless_overwrite(airborne, tmp_path):
    _, dem, track = airborne
    out = tmp_path / "run"

    def stop(res):
        if res.dataset is not None:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt), pytest.warns(UserWarning):
        segments_run(dem, track, config(), out, on_segment=stop)
    other = config(samples=220)
    with pytest.raises(OutputExistsError, match=r"00001\.nc: made by a run with other arguments"), pytest.warns(UserWarning):
        simulate_to_dir(dem, track, other, out, segment_traces=16)
    summary = {}
    with pytest.warns(UserWarning):
        simulate_to_dir(dem, track, other, out, segment_traces=16, overwrite=True, summary=summary)
    assert summary["resumed"] == 0 and summary["computed"] == 5
    with open_radargram(out / "radargram.nc") as ds:
        assert ds.sizes["sample"] == 220


def test_lazy_radargram_slices_and_plots_without_loading(tmp_path):
    """A 100,000 × 2,048 radargram (written chunk by chunk, never whole in memory) opened lazily:
    a slice reads its chunks only, and the figure draws every k-th trace."""
    import dask.array as da

    from cluttersim import plots
    from cluttersim.io.radargram import PICTURE_TRACES

    ntr, ns = 100_000, 2048
    power = da.random.RandomState(3).exponential(1e-12, size=(ntr, ns), chunks=(2048, ns)).astype(np.float32)
    ds = xr.Dataset({"power": (("trace", "sample"), power, {"units": "W"}),
                     "window_start": ("trace", np.full(ntr, 1e-3)), "nadir_delay": ("trace", np.full(ntr, 1.00001e-3))},
                    coords={"delay": ("sample", np.arange(ns) * 37.5e-9)})  # fmt: skip
    path = tmp_path / "long.nc"
    ds.to_netcdf(path, engine="h5netcdf", encoding={"power": {"chunksizes": (256, ns), "zlib": True, "complevel": 1}})
    lazy = open_radargram(path)  # large: lazy by default
    try:
        assert isinstance(lazy["power"].data, da.Array)
        part = lazy["power"][50_000:50_010, 100:200].values
        np.testing.assert_array_equal(part, power[50_000:50_010, 100:200].compute())
        png = plots.plot_radargram(lazy, tmp_path / "long.png")
        assert png.stat().st_size > 10_000
        layers = plots.radargram_layers(lazy, 60.0)
        assert layers.image_db.shape[1] <= PICTURE_TRACES and layers.trace_step == 25
    finally:
        lazy.close()


@pytest.fixture
def scheduler_file(tmp_path):
    """A real LocalCluster (2 worker processes) whose scheduler writes its address to a file, as a batch
    system's job would find it."""
    distributed = pytest.importorskip("distributed")
    import logging

    path = tmp_path / "scheduler.json"
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                       silence_logs=logging.CRITICAL, scheduler_kwargs={"scheduler_file": str(path)})  # fmt: skip
    try:
        yield path
    finally:
        cluster.close()


def test_dask_runs_are_bit_identical_to_the_local_segmented_run(airborne, tmp_path, scheduler_file):
    """Segments as Dask tasks on a LocalCluster started by the command (--scheduler local) and on one
    found through --scheduler-file: the same bytes as segments run in this process."""
    from click.testing import CliRunner

    from cli.main import cli

    _, dem, track = airborne
    (tmp_path / "t.csv").write_text("")
    track.to_csv(tmp_path / "t.csv")
    radar = tmp_path / "radar.toml"
    radar.write_text('[radar]\nsamples = 200\n[surface]\nlaw = "hagfors"\nC = 300.0\nrho = 0.1\n'
                     "[noise]\nnoise_temperature_k = 1e9\nseed = 2\n")  # fmt: skip
    base = ["simulate", "--dem", str(dem), "--track", str(tmp_path / "t.csv"), "--radar", str(radar),
            "--segment-traces", "16", "-q"]  # fmt: skip
    outs = {}
    for name, extra in (("local", []), ("dask", ["--scheduler", "local", "--workers", "2"]),
                        ("file", ["--scheduler-file", str(scheduler_file)])):  # fmt: skip
        res = CliRunner().invoke(cli, base + extra + ["--out", str(tmp_path / name)])
        assert res.exit_code == 0, res.output
        outs[name] = tmp_path / name / "radargram.nc"
    with open_radargram(outs["local"], lazy=False) as a:
        for name in ("dask", "file"):
            with open_radargram(outs[name], lazy=False) as b:
                assert sorted(a.data_vars) == sorted(b.data_vars)
                for var in a.data_vars:
                    assert a[var].values.tobytes() == b[var].values.tobytes(), (name, var)
    res = CliRunner().invoke(cli, base + ["--scheduler-file", str(tmp_path / "none.json"), "--out", str(tmp_path / "x")])
    assert res.exit_code == 1 and "none.json: file not found" in res.output, res.output


def test_streamed_run_writes_its_figures_in_the_chosen_format(airborne, tmp_path):
    """A segmented run's figures follow the figure options as a one-piece run's do: --figure-format pdf
    writes PDF bytes (not PNG bytes under a .pdf name), the library call svg, and --dpi sets the PNG size."""
    from click.testing import CliRunner

    from cli.main import cli
    from cluttersim.products import FigureOptions, run_files
    from figure_files import assert_all_in_format, png_size

    d, dem, track = airborne
    track.to_csv(tmp_path / "track.csv")
    radar = tmp_path / "radar.toml"
    radar.write_text('[radar]\nsamples = 200\n[surface]\nlaw = "hagfors"\nC = 300.0\nrho = 0.1\n')
    figures = [k for k in run_files() if k != "radargram"]
    for fmt, extra in (("pdf", ["--figure-format", "pdf"]), ("png", ["--dpi", "40"])):
        out = tmp_path / fmt
        res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(tmp_path / "track.csv"),
                                       "--radar", str(radar), "--segment-traces", "16", "--out", str(out), "-q",
                                       *extra])  # fmt: skip
        assert res.exit_code == 0, res.output
        assert not (out / "segments").exists()  # streamed, then joined
        assert_all_in_format([out / run_files(fmt=fmt)[k] for k in figures], fmt)
    assert png_size(tmp_path / "png" / "radargram.png") == (400, 200)  # 10 × 5 in at 40 dpi
    # re-run over the PNG run with --overwrite in PDF: the PNG figures go, as after a one-piece run
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(tmp_path / "track.csv"), "--radar",
                                   str(radar), "--segment-traces", "16", "--out", str(tmp_path / "png"), "-q",
                                   "--figure-format", "pdf", "--overwrite"])  # fmt: skip
    assert res.exit_code == 0, res.output
    assert_all_in_format([tmp_path / "png" / run_files(fmt="pdf")[k] for k in figures], "pdf")
    assert not list((tmp_path / "png").glob("*.png")) and "of the previous run" in res.output
    out = tmp_path / "lib"
    paths = {k: out / v for k, v in run_files(fmt="svg").items()}
    src = DemSource.open(dem)
    with pytest.warns(UserWarning):
        segments.run_segments_to_dir(src, track, config(), plan_segments(src, track, config(), segment_traces=16), out,
                                     paths, figures=FigureOptions(fmt="svg"))  # fmt: skip
    assert_all_in_format([paths[k] for k in figures], "svg")
