"""Nothing lost (interrupts, no overwrite), memory safety and determinism (invented scenes)."""

import re
import signal
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numba
import numpy as np
import pytest
from click.testing import CliRunner

from cli.main import cli
from cluttersim import Body, SimulationConfig, SurfaceConfig, great_circle_track, simulate
from cluttersim import memory
from cluttersim.io.dem import DemSource
from cluttersim.errors import MemoryLimitError
from cluttersim.physics.radar import RadarConfig
from cluttersim.simulate import prepare_scene
from scenes import MARS_RADIUS_M, write_geotiff

CLUTTERSIM = Path(sys.executable).parent / "cluttersim"


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture(scope="module")
def rough(tmp_path_factory):
    """Random rough terrain (σ = 30 m) on the Mars sphere, 600 × 600 cells of 0.01°, and a 3° pass."""
    d = tmp_path_factory.mktemp("rough")
    z = np.random.default_rng(0).normal(0.0, 30.0, (600, 600))
    dem = write_geotiff(d / "rough.tif", z, -3.0, 3.0, 0.01)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -1.5, 0.0, 1.5, 0.0, 100e3, 300.0)
    track.to_csv(d / "track.csv")
    return d, dem, track


def _config(samples=1024):
    return SimulationConfig(radar=RadarConfig(samples=samples), surface=SurfaceConfig("hagfors", {"C": 300.0, "rho": 0.1}))


# --------------------------------------------------------------------------- memory


def test_memory_estimate_matches_the_arrays_a_run_allocates(rough):
    """Facet bytes exactly (56 B per valid cell), the scene and the whole run within 20 % of the
    peak traced by tracemalloc (NumPy allocations; the compiled kernel's per-thread buffers
    are not traced and are left out of the comparison)."""
    _, dem, track = rough
    cfg = _config()
    src = DemSource.open(dem)
    simulate(src, track, cfg)  # compile and warm caches outside the measurement
    tracemalloc.start()
    scene = prepare_scene(src, track, cfg)
    _, scene_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    cells = scene.window.shape[0] * scene.window.shape[1]
    assert scene.facets.nbytes == cells * memory.BYTES_PER_FACET
    threads = numba.get_num_threads()
    est = memory.estimate_memory_bytes(cells, len(track), 1024, sources=True, threads=threads, pad_samples=scene.pad)
    assert abs(est.dem_bytes - scene_peak) < 0.2 * scene_peak
    pad = scene.pad
    del scene
    tracemalloc.start()
    simulate(src, track, cfg)
    _, run_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    untraced = threads * 4 * ((1024 + 2 * pad) * 32 + 2) * 8  # the kernel's per-thread blocks (Numba's allocator), ~1 MB
    assert abs(est.total_bytes - untraced - run_peak) < 0.2 * run_peak


def test_memory_limit_refuses_the_run_before_reading_with_the_estimate(rough, tmp_path):
    d, dem, _ = rough
    out = tmp_path / "run"
    res = run(["simulate", "--dem", dem, "--track", d / "track.csv", "--max-memory", "5MB", "--out", out, "-q"])
    assert res.exit_code == 1, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in res.output
    assert lines[0].startswith("cluttersim: error: this run needs about ")
    assert re.search(r"DEM window [0-9,]+ cells [0-9.]+ MB, radargram 593 traces x 2,048 samples", lines[0])
    assert "more than 5.0 MB, the limit given (--max-memory)" in lines[0]
    assert "coarser DEM" in lines[0] and "--no-sources" in lines[0]
    assert not out.exists() or not any(out.iterdir())
    # the library raises the same before any full-resolution read
    with pytest.raises(MemoryLimitError, match="this run needs about"):
        simulate(dem, d / "track.csv", max_memory_bytes=1_000_000)


@pytest.mark.parametrize("text, expected", [("8GB", 8e9), ("500MB", 5e8), ("1.5 GiB", 1.5 * 2**30), ("1000", 1000)])
def test_parse_size(text, expected):
    assert memory.parse_size(text) == int(expected)


def test_bad_max_memory_is_a_usage_error(rough, tmp_path):
    d, dem, _ = rough
    res = run(["simulate", "--dem", dem, "--track", d / "track.csv", "--max-memory", "lots", "--out", tmp_path / "o"])
    assert res.exit_code == 2
    assert "Invalid value for '--max-memory': 'lots': expected a size such as 8GB, 500MB or 2GiB" in res.output


def test_available_memory_is_read_from_meminfo(tmp_path):
    p = tmp_path / "meminfo"
    p.write_text("MemTotal:       32000000 kB\nMemFree:         1000000 kB\nMemAvailable:   24242944 kB\n")
    assert memory.available_memory_bytes(p) == 24242944 * 1024  # /proc/meminfo counts kB of 1024 B (proc(5))
    assert memory.available_memory_bytes(tmp_path / "missing") is None


# --------------------------------------------------------------------------- determinism


def test_power_is_bit_identical_across_runs_and_thread_counts(rough):
    """The kernel sums each trace in one thread in a fixed order: 1 or 2 threads, same bits."""
    _, dem, track = rough
    sub = type(track)(track.lat_deg[::5], track.lon_deg[::5], track.alt_m[::5], source="t")
    before = numba.get_num_threads()
    try:
        results = []
        for threads in (1, 2, 2, 1):
            numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
            ds = simulate(dem, sub, _config(512))
            results.append((ds["power"].values.copy(), ds["left_fraction"].values.copy(), ds["source_lat"].values.copy()))
    finally:
        numba.set_num_threads(before)
    for other in results[1:]:
        for a, b in zip(results[0], other):
            np.testing.assert_array_equal(a, b)
            assert a.tobytes() == b.tobytes()


# --------------------------------------------------------------------------- nothing lost


def test_sigint_during_simulate_leaves_no_partial_product(tmp_path):
    """SIGINT to a running `cluttersim simulate` (once its progress bar shows it is computing):
    exit 130, one clear line, no radargram.nc and no .partial-* file."""
    z = np.random.default_rng(1).normal(0.0, 30.0, (1800, 800))
    dem = write_geotiff(tmp_path / "big.tif", z, -0.8, 1.8, 0.002)
    great_circle_track(Body.sphere(MARS_RADIUS_M), -1.0, 0.0, 1.0, 0.0, 100e3, 30.0).to_csv(tmp_path / "track.csv")
    out = tmp_path / "run"
    err = open(tmp_path / "stderr.txt", "w")
    proc = subprocess.Popen([str(CLUTTERSIM), "simulate", "--dem", str(dem), "--track", str(tmp_path / "track.csv"),
                             "--out", str(out)], stdout=subprocess.DEVNULL, stderr=err)  # fmt: skip
    try:
        deadline = time.monotonic() + 90
        while "simulating" not in (tmp_path / "stderr.txt").read_text() and proc.poll() is None:
            assert time.monotonic() < deadline, "the simulation never started"
            time.sleep(0.1)
        assert proc.poll() is None, "finished before it could be interrupted: make the scene bigger"
        time.sleep(0.3)
        proc.send_signal(signal.SIGINT)
        rc = proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
        err.close()
    text = (tmp_path / "stderr.txt").read_text()
    assert rc == 130, text
    assert "cluttersim: interrupted; no output was written" in text
    assert "Traceback" not in text
    assert not (out / "radargram.nc").exists()
    leftovers = [p.name for p in out.rglob("*")] if out.exists() else []
    assert not [n for n in leftovers if ".partial-" in n], leftovers
    assert leftovers == []


def test_track_command_never_overwrites_without_the_flag(tmp_path):
    out = tmp_path / "t.csv"
    args = ["track", "--start-lat", 0, "--start-lon", 0, "--end-lat", 0.1, "--end-lon", 0, "--alt-m", 1000, "--spacing-m", 1000,
            "--body-radius-m", MARS_RADIUS_M, "--out", out]  # fmt: skip
    assert run(args).exit_code == 0
    out.write_text("precious\n")
    res = run(args)
    assert res.exit_code == 2
    assert res.output.strip() == f"cluttersim: error: {out}: already exists; pass --overwrite to replace it"
    assert out.read_text() == "precious\n"
    assert run(args + ["--overwrite"]).exit_code == 0 and out.read_text().startswith("lat,lon,alt")


def test_sources_and_compare_never_overwrite_without_the_flag(rough, tmp_path):
    """An existing product keeps its bytes; the refusal comes before any work (exit 2)."""
    d, dem, track = rough
    sub = tmp_path / "short.csv"
    sub.write_text("\n".join((d / "track.csv").read_text().splitlines()[:21]) + "\n")
    run_dir = tmp_path / "run"
    assert run(["simulate", "--dem", dem, "--track", sub, "--out", run_dir, "-q"]).exit_code == 0
    nc = run_dir / "radargram.nc"
    before = nc.read_bytes()
    res = run(["simulate", "--dem", dem, "--track", sub, "--out", run_dir, "-q"])
    assert res.exit_code == 2 and nc.read_bytes() == before
    assert run(["sources", run_dir, "--depth-window", 100, 600, "-q"]).exit_code == 0
    tif = next(run_dir.glob("sources_*.tif"))
    tif.write_bytes(b"precious")
    res = run(["sources", run_dir, "--depth-window", 100, 600, "-q"])
    assert res.exit_code == 2 and "already exists; pass --overwrite" in res.output
    assert tif.read_bytes() == b"precious"
    # compare: an observed array of the simulated power itself
    import xarray as xr

    with xr.open_dataset(nc, engine="h5netcdf") as ds:
        np.save(tmp_path / "obs.npy", ds["power"].values)
        start = float(ds["window_start"].values[0])
    cmp_dir = tmp_path / "cmp"
    cmp_dir.mkdir()
    (cmp_dir / "candidates.csv").write_text("precious\n")
    res = run(["compare", "--observed", tmp_path / "obs.npy", "--observed-track", sub, "--sim", nc,
               "--sample-interval-s", 37.5e-9, "--window-start-s", repr(start), "--out", cmp_dir, "-q"])  # fmt: skip
    assert res.exit_code == 2 and "candidates.csv: already exists; pass --overwrite" in res.output
    assert (cmp_dir / "candidates.csv").read_text() == "precious\n"
    assert sorted(p.name for p in cmp_dir.iterdir()) == ["candidates.csv"]


def test_coherent_presummed_noisy_run_is_bit_identical_across_thread_counts(rough):
    """Coherent mode draws its complex receiver noise chunk by chunk from one seeded generator:
    chunk sizes follow the thread count, the draws do not."""
    import dataclasses

    from cluttersim.physics.aperture import ProcessingConfig
    from cluttersim.physics.noise import NoiseConfig

    _, dem, track = rough
    sub = type(track)(track.lat_deg[::3], track.lon_deg[::3], track.alt_m[::3], source="t")
    cfg = dataclasses.replace(_config(256), processing=ProcessingConfig(mode="coherent", presum=2, presum_mode="coherent"),
                              noise=NoiseConfig(noise_temperature_k=300.0, seed=7))  # fmt: skip
    before = numba.get_num_threads()
    try:
        results = []
        for threads in (1, 2):
            numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
            results.append(simulate(dem, sub, cfg)["power"].values.copy())
    finally:
        numba.set_num_threads(before)
    assert results[0].tobytes() == results[1].tobytes()
