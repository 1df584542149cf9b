"""Benchmark of the simulation kernel on fixed, seeded synthetic cases.

Run with ``make bench`` (or ``python benchmarks/bench_simulate.py [--case small|medium] [--repeat N]``).
Prints, per case: the first run (numba compile or cache load included), the
median of the following runs, facet evaluations per second (total and per
core) and the DEM window. Results are also written as JSON to
``benchmarks/results/`` with the CPU model and core count, so runs on
different machines can be compared. Timings are never asserted in tests.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyproj
import rasterio
from rasterio.crs import CRS as RioCRS
from rasterio.transform import from_origin

from cluttersim import Body, SimulationConfig, great_circle_track
from cluttersim.config import SurfaceConfig
from cluttersim.radar import RadarConfig
from cluttersim.simulate import RunStats, simulate

MARS_SPHERE = "IAU_2015:49900"

#: name → (DEM cells per side, cell size in degrees, traces, samples)
CASES = {
    "small": (800, 0.005, 200, 1024),
    "medium": (4000, 0.0025, 2000, 2048),
}


def synthetic_dem(path: Path, n: int, res_deg: float, seed: int = 42) -> Path:
    """Seeded fractal terrain (spectral synthesis, amplitude ∝ k^-1.8, 300 m rms), centred on (0, 0)."""
    rng = np.random.default_rng(seed)
    kx = np.fft.fftfreq(n)[None, :]
    ky = np.fft.fftfreq(n)[:, None]
    k = np.hypot(kx, ky)
    k[0, 0] = 1.0
    spectrum = (rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * k**-1.8
    spectrum[0, 0] = 0
    z = np.fft.ifft2(spectrum).real
    z *= 300.0 / z.std()
    half = n * res_deg / 2
    profile = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", tiled=True, blockxsize=256, blockysize=256,
                   crs=RioCRS.from_wkt(pyproj.CRS(MARS_SPHERE).to_wkt()), transform=from_origin(-half, half, res_deg, res_deg))  # fmt: skip
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(z.astype(np.float32), 1)
    return path


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def run_case(name: str, repeat: int, workdir: Path) -> dict:
    n, res, ntraces, samples = CASES[name]
    dem = synthetic_dem(workdir / f"{name}.tif", n, res)
    body = Body.sphere(3_396_190.0)
    half = n * res / 2
    length_m = np.radians(1.6 * half) * body.semi_major_m
    track = great_circle_track(body, -0.8 * half, 0.0, 0.8 * half, 0.0, 300e3, length_m / (ntraces - 1) * 0.9999)
    cfg = SimulationConfig(radar=RadarConfig(samples=samples), surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08}))
    first = RunStats()
    t0 = time.perf_counter()
    simulate(dem, track, cfg, stats=first)
    first_s = time.perf_counter() - t0
    runs = []
    for _ in range(repeat):
        st = RunStats()
        simulate(dem, track, cfg, stats=st)
        runs.append(st)
    wall = statistics.median(r.seconds_total for r in runs)
    kernel = statistics.median(r.seconds_kernel for r in runs)
    evals = runs[0].facet_evaluations
    cores = os.cpu_count() or 1
    return {
        "case": name,
        "dem_cells": n * n,
        "traces": len(track),
        "samples": samples,
        "dem_window": list(runs[0].dem_window_shape),
        "facets": runs[0].facets,
        "facet_evaluations": evals,
        "first_run_s": first_s,
        "compile_or_cache_load_s": first_s - wall,
        "median_wall_s": wall,
        "median_facets_s": statistics.median(r.seconds_facets for r in runs),
        "median_kernel_s": kernel,
        "facet_evals_per_s": evals / kernel,
        "facet_evals_per_s_per_core": evals / kernel / cores,
        "repeats": repeat,
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", choices=list(CASES), action="append", help="case(s) to run (default: small)")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs after the first (median reported)")
    args = ap.parse_args(argv)
    cases = args.case or ["small"]
    machine = {"cpu": cpu_model(), "cores": os.cpu_count(), "python": sys.version.split()[0], "platform": platform.platform()}
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        for name in cases:
            r = run_case(name, args.repeat, Path(tmp))
            results.append(r)
            print(
                f"{name:>7}: {r['traces']} traces x {r['samples']} samples over {r['dem_window'][0]}x{r['dem_window'][1]} cells | "
                f"first run {r['first_run_s']:.2f} s (compile/cache {r['compile_or_cache_load_s']:.2f} s) | "
                f"median wall {r['median_wall_s']:.2f} s (facets {r['median_facets_s']:.2f} s, kernel {r['median_kernel_s']:.2f} s) | "
                f"{r['facet_evals_per_s'] / 1e6:.0f} M facet-evals/s ({r['facet_evals_per_s_per_core'] / 1e6:.0f} M/s/core)"
            )
    out = Path(__file__).parent / "results" / f"simulate-{time.strftime('%Y%m%dT%H%M%S')}.json"
    out.write_text(json.dumps({"machine": machine, "results": results}, indent=2))
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
