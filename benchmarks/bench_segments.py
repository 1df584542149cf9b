"""Long tracks in segments: peak memory and time against track length.

An airborne line runs diagonally across a generated 20,000 × 20,000-cell DEM of 50 m cells
(a projected grid on the Earth's WGS 84 ellipsoid, UTM zone 33N; invented terrain: a seeded
sum of plane waves from 400 m to 60 km long plus 3 m of white roughness, ~250 m rms). The
required case is 14,000 traces (every ~100 m along the whole diagonal, 3 km above the
ellipsoid, the built-in radar: 2048 samples). Lengths 1×, 2×, 4× = 3,500, 7,000 and 14,000
traces at the same spacing from the same start run ``cluttersim simulate`` (the command
line, streamed segments) in a fresh process each (``--samples`` shortens the window, hence
each trace's reach, for a cheaper run on a busy machine); recorded per run: wall and CPU time,
peak resident memory of the process (``ru_maxrss`` of the child), segments, facet
evaluations, load average, and the CPU's vector features.

    python benchmarks/bench_segments.py                 # 1x, 2x, 4x
    python benchmarks/bench_segments.py --lengths 4     # the required case alone
    python benchmarks/bench_segments.py --no-sources

Results: ``benchmarks/results/segments-<time>.json``. The DEM (1.6 GB) is generated once
into ``benchmarks/.cache/``.
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
CACHE = HERE / ".cache"
N = 20_000
RES_M = 50.0
UTM = "EPSG:32633"
X0, Y0 = 500_000.0 - N * RES_M / 2, 5_000_000.0 + N * RES_M / 2  # north-west corner
FULL_TRACES = 14_000
ALT_M = 3000.0


def cpu_features() -> dict:
    """CPU model, cores and vector extensions (as every benchmark records them: _common.py)."""
    sys.path.insert(0, str(HERE))
    from _common import cpu_model, cpu_vector_features

    return {"cpu": cpu_model(), "cores": os.cpu_count(), **cpu_vector_features()}


def generate_dem(path: Path, seed: int = 7) -> Path:
    """The invented terrain, written block by block (never whole in memory), tiled GeoTIFF."""
    import pyproj
    import rasterio
    from rasterio.crs import CRS as RioCRS
    from rasterio.transform import from_origin
    from rasterio.windows import Window

    rng = np.random.default_rng(seed)
    waves = 24
    wavelength = np.geomspace(400.0, 60_000.0, waves)
    amp = 250.0 * (wavelength / 60_000.0) ** 0.9
    amp *= 250.0 / np.sqrt(0.5 * np.sum(amp**2))
    theta = rng.uniform(0, np.pi, waves)
    phase = rng.uniform(0, 2 * np.pi, waves)
    kx = (2 * np.pi / wavelength * np.cos(theta)).astype(np.float32)
    ky = (2 * np.pi / wavelength * np.sin(theta)).astype(np.float32)
    x = (np.arange(N, dtype=np.float64) * RES_M).astype(np.float32)
    profile = dict(driver="GTiff", width=N, height=N, count=1, dtype="float32", tiled=True, blockxsize=512,
                   blockysize=512, BIGTIFF="YES", crs=RioCRS.from_wkt(pyproj.CRS(UTM).to_wkt()),
                   transform=from_origin(X0, Y0, RES_M, RES_M))  # fmt: skip
    tmp = path.with_suffix(".partial.tif")
    rows = 512
    with rasterio.open(tmp, "w", **profile) as ds:
        for r0 in range(0, N, rows):
            y = (np.arange(r0, min(r0 + rows, N), dtype=np.float64) * RES_M).astype(np.float32)
            z = np.full((y.size, N), 500.0, dtype=np.float32)
            for i in range(waves):
                # sin(kx x + ky y + φ) = sin(kx x + φ) cos(ky y) + cos(kx x + φ) sin(ky y): two outer products
                sx, cx = np.sin(kx[i] * x + phase[i]), np.cos(kx[i] * x + phase[i])
                z += amp[i] * (np.outer(np.cos(ky[i] * y), sx) + np.outer(np.sin(ky[i] * y), cx))
            z += rng.normal(0.0, 3.0, z.shape).astype(np.float32)
            ds.write(z, 1, window=Window(0, r0, N, y.size))
    os.replace(tmp, path)
    return path


def track_csv(path: Path, traces: int) -> Path:
    """``traces`` traces from near the north-west corner towards the south-east one, ~101 m apart."""
    import pyproj

    from cluttersim import Track

    inset = 10_000.0
    diag = np.hypot(N * RES_M - 2 * inset, N * RES_M - 2 * inset)
    s = np.arange(traces) * (diag / (FULL_TRACES - 1))
    e = X0 + inset + s / np.sqrt(2)
    n = Y0 - inset - s / np.sqrt(2)
    lon, lat = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True).transform(e, n)
    Track(np.asarray(lat), np.asarray(lon), np.full(traces, ALT_M), source=path.name).to_csv(path)
    return path


def run_one(dem: Path, traces: int, sources: bool, workdir: Path, samples: int) -> dict:
    track = track_csv(workdir / f"track_{traces}.csv", traces)
    out = workdir / f"run_{traces}"
    radar = workdir / "radar.toml"
    radar.write_text(f"[radar]\nsamples = {samples}\n")
    cmd = [str(Path(sys.executable).parent / "cluttersim"), "simulate", "--dem", str(dem), "--track", str(track),
           "--radar", str(radar), "--out", str(out), "--overwrite", "-q"] + ([] if sources else ["--no-sources"])  # fmt: skip
    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    err = proc.stderr.read()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed:\n{err}")
    import h5py

    with h5py.File(out / "radargram.nc", "r") as f:
        segments = int(np.ravel(f.attrs["segments"])[0]) if "segments" in f.attrs else 1
        evaluations = int(np.ravel(f.attrs["facet_evaluations"])[0])
    return {"traces": traces, "samples": samples, "sources": sources, "wall_s": wall, "cpu_s": usage.ru_utime + usage.ru_stime,
            "peak_rss_mb": usage.ru_maxrss / 1024, "segments": segments, "facet_evaluations": evaluations,
            "load_average": [load0, os.getloadavg()[0]], "radargram_mb": (out / "radargram.nc").stat().st_size / 1e6}  # fmt: skip


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--lengths", type=int, nargs="+", default=[1, 2, 4], help="multiples of 3,500 traces")
    parser.add_argument("--no-sources", action="store_true")
    parser.add_argument("--samples", type=int, default=2048,
                        help="samples per trace (the built-in radar: 2048; fewer: a shorter reach, a cheaper run)")
    args = parser.parse_args(argv)
    CACHE.mkdir(exist_ok=True)
    dem = CACHE / f"airborne_{N}_{RES_M:g}m.tif"
    if not dem.exists():
        t0 = time.perf_counter()
        print(f"generating {dem} ...", flush=True)
        generate_dem(dem)
        print(f"  {time.perf_counter() - t0:.0f} s", flush=True)
    results = []
    with tempfile.TemporaryDirectory(dir=CACHE) as tmp:
        for k in args.lengths:
            r = run_one(dem, FULL_TRACES // 4 * k, not args.no_sources, Path(tmp), args.samples)
            results.append(r)
            print(f"{r['traces']:>6} traces: {r['wall_s']:7.1f} s wall, {r['cpu_s']:7.1f} s CPU, peak RSS "
                  f"{r['peak_rss_mb']:6.0f} MB, {r['segments']} segments, {r['facet_evaluations'] / r['cpu_s'] / 1e6:.0f} M "
                  f"facet evaluations per CPU-second, load {r['load_average'][0]:.1f}-{r['load_average'][1]:.1f}",
                  flush=True)  # fmt: skip
    base = results[0]
    for r in results:
        r["cpu_s_per_trace_ms"] = 1e3 * r["cpu_s"] / r["traces"]
        r["cpu_ratio_to_first"] = r["cpu_s"] / base["cpu_s"]
    info = {**cpu_features(), "python": platform.python_version(), "date_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "dem": f"{N} x {N} cells of {RES_M:g} m", "alt_m": ALT_M, "runs": results}  # fmt: skip
    sys.path.insert(0, str(HERE))
    from _common import write_results

    out = write_results("segments", info, indent=1)
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
