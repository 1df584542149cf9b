"""Speed benchmark of cluttersim on fixed, seeded synthetic cases.

Run with ``make bench`` (small and medium cases, the NumPy reference and the
compile-time check) or ``python benchmarks/bench_simulate.py --case large``.

Each case runs in its own process, so its peak memory is its own. Printed per
case: end-to-end wall time (DEM read to netCDF written; median of the warm
runs), kernel, facet-building and netCDF-writing times, facet evaluations per
second in total, per thread and per CPU-second of the kernel (``process_time``
over its threads: on a shared machine the wall time depends on what else
runs, this much less), the load average, peak resident memory, with the source
record on and off, and with the benchmark-only centre-binned kernel variant
(``simulate.DELAY_SPREADING``: each facet's power in the bin of its centre, a
bound on what the delay spreading costs). Then:

* the NumPy reference (:mod:`cluttersim.physics.reference`, no culling, no
  compilation) against the compiled kernel on the same small scene: time per
  trace and their ratio;
* kernel start-up: the first call of the kernels in a fresh process with an
  empty numba cache (compilation) and with the warm on-disk cache.

Results go to ``benchmarks/results/<time>.json`` with the CPU model and core
count. Timings are never asserted in tests.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _common import cpu_model, cpu_vector_features, vector_features, write_results  # noqa: E402,F401

CACHE = HERE / ".cache"
MARS_SPHERE = "IAU_2015:49900"
MARS_RADIUS_M = 3_396_190.0

#: name → (DEM cells per side, cell size in degrees, traces, samples)
CASES = {
    "small": (800, 0.005, 200, 1024),
    "medium": (4000, 0.0025, 2000, 2048),
    "large": (8000, 0.00125, 4000, 2048),
}


def synthetic_dem(path: Path, n: int, res_deg: float, seed: int = 42) -> Path:
    """Seeded fractal terrain (spectral synthesis, amplitude ∝ k^-1.8, 300 m rms) centred on (0, 0)."""
    import pyproj
    import rasterio
    from rasterio.crs import CRS as RioCRS
    from rasterio.transform import from_origin

    rng = np.random.default_rng(seed)
    kx = np.fft.rfftfreq(n)[None, :]
    ky = np.fft.fftfreq(n)[:, None]
    k = np.hypot(kx, ky)
    k[0, 0] = 1.0
    spectrum = (rng.normal(size=k.shape) + 1j * rng.normal(size=k.shape)) * k**-1.8
    spectrum[0, 0] = 0
    z = np.fft.irfft2(spectrum, s=(n, n))
    z *= 300.0 / z.std()
    half = n * res_deg / 2
    profile = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", tiled=True, blockxsize=256, blockysize=256,
                   crs=RioCRS.from_wkt(pyproj.CRS(MARS_SPHERE).to_wkt()), transform=from_origin(-half, half, res_deg, res_deg))  # fmt: skip
    tmp = path.with_suffix(".partial.tif")
    with rasterio.open(tmp, "w", **profile) as ds:
        ds.write(z.astype(np.float32), 1)
    os.replace(tmp, path)
    return path


def case_inputs(name: str, shadowing: bool = False, coherent: bool = False, specular: bool = False):
    from cluttersim import Body, SimulationConfig, great_circle_track
    from cluttersim.physics.aperture import ProcessingConfig
    from cluttersim.config import SurfaceConfig
    from cluttersim.physics.radar import RadarConfig

    n, res, ntraces, samples = CASES[name]
    CACHE.mkdir(exist_ok=True)
    dem = CACHE / f"{name}_{n}_{res}.tif"
    if not dem.exists():
        synthetic_dem(dem, n, res)
    body = Body.sphere(MARS_RADIUS_M)
    half = n * res / 2
    length_m = np.radians(1.6 * half) * MARS_RADIUS_M
    track = great_circle_track(body, -0.8 * half, 0.0, 0.8 * half, 0.0, 300e3, length_m / (ntraces - 1) * 0.9999)
    surface = SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08}, **({"permittivity": 3.15, "rms_height_m": 0.3} if specular else {}))
    cfg = SimulationConfig(radar=RadarConfig(samples=samples), surface=surface,
                           processing=ProcessingConfig(shadowing=shadowing, mode="coherent" if coherent else "incoherent"))  # fmt: skip
    return dem, track, cfg


def _busy_cores() -> float:
    """Load average over the last minute (other users of the machine included)."""
    try:
        return os.getloadavg()[0]
    except OSError:
        return float("nan")


def worker_case(name: str, sources: bool, repeat: int, shadowing: bool = False, coherent: bool = False,
                spreading: str = "trapezoid", specular: bool = False) -> dict:  # fmt: skip
    """One case in this process: a first run (kernel compile or cache load) and ``repeat`` warm runs.

    Besides wall times, the CPU time of the process and of the kernel calls is
    recorded (``time.process_time``, all threads): on a shared machine the wall
    time of a 2-thread kernel depends on what else runs, its CPU time much less.
    ``spreading="centre"`` runs the benchmark-only centre-binned kernel variant
    (``simulate.DELAY_SPREADING``). ``specular``: the surface also reflects specularly
    (``[surface] permittivity``; the physical-optics kernel, timed on its own).
    """
    import importlib

    import numba

    from cluttersim import kernels
    from cluttersim.io.radargram import write_netcdf_to
    from cluttersim.simulate import RunStats, simulate

    if spreading == "centre":  # the module (the package's `simulate` is the function)
        importlib.import_module("cluttersim.simulate").DELAY_SPREADING = kernels.SPREAD_CENTRE
    compiled = kernels.accumulate_power
    kernel_cpu = [0.0]

    def timed_kernel(*args):
        c0 = time.process_time()
        try:
            return compiled(*args)
        finally:
            kernel_cpu[0] += time.process_time() - c0

    kernels.accumulate_power = timed_kernel
    compiled_spec = kernels.accumulate_specular
    specular_cpu = [0.0]

    def timed_specular(*args):
        c0 = time.process_time()
        try:
            return compiled_spec(*args)
        finally:
            specular_cpu[0] += time.process_time() - c0

    kernels.accumulate_specular = timed_specular
    dem, track, cfg = case_inputs(name, shadowing, coherent, specular)
    runs = []
    write_s = []
    load = []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(repeat + 1):
            st = RunStats()
            kernel_cpu[0] = 0.0
            specular_cpu[0] = 0.0
            load.append(_busy_cores())
            t0 = time.perf_counter()
            c0 = time.process_time()
            ds = simulate(dem, track, cfg, stats=st, sources=sources)
            t1 = time.perf_counter()
            write_netcdf_to(ds, Path(tmp) / f"r{i}.nc")
            write_s.append(time.perf_counter() - t1)
            runs.append((time.perf_counter() - t0, st, time.process_time() - c0, kernel_cpu[0], specular_cpu[0]))
    kernels.accumulate_power = compiled
    kernels.accumulate_specular = compiled_spec
    warm = runs[1:]
    kernel = statistics.median(r[1].seconds_kernel for r in warm)
    kernel_cpu_s = statistics.median(r[3] for r in warm)
    evals = warm[0][1].facet_evaluations
    spec_evals = warm[0][1].specular_evaluations
    spec_cpu_s = statistics.median(r[4] for r in warm)
    threads = numba.get_num_threads()
    return {
        "case": name,
        "sources": sources,
        "shadowing": shadowing,
        "coherent": coherent,
        "specular": specular,
        "spreading": spreading,
        "traces": len(track),
        "samples": cfg.radar.samples,
        "dem_cells": CASES[name][0] ** 2,
        "dem_window": list(warm[0][1].dem_window_shape),
        "facets": warm[0][1].facets,
        "facet_evaluations": evals,
        "first_run_s": runs[0][0],
        "median_wall_s": statistics.median(r[0] for r in warm),
        "median_cpu_s": statistics.median(r[2] for r in warm),
        "median_facets_s": statistics.median(r[1].seconds_facets for r in warm),
        "median_kernel_s": kernel,
        "median_kernel_cpu_s": kernel_cpu_s,
        "median_write_s": statistics.median(write_s[1:]),
        "facet_evals_per_s": evals / kernel,
        "facet_evals_per_s_per_core": evals / kernel / threads,
        "facet_evals_per_cpu_s": evals / kernel_cpu_s if kernel_cpu_s > 0 else float("nan"),
        "specular_evaluations": spec_evals,
        "median_specular_cpu_s": spec_cpu_s,
        "specular_evals_per_cpu_s": spec_evals / spec_cpu_s if spec_cpu_s > 0 else float("nan"),
        "threads": threads,
        "load_average": load,
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "repeats": repeat,
    }


def worker_reference() -> dict:
    """Kernel vs NumPy reference per trace on the medium case's scene (a few traces of it)."""
    from cluttersim.io.dem import DemSource
    from cluttersim.physics.reference import reference_binned_power
    from cluttersim.simulate import binned_power, prepare_scene

    dem, track, cfg = case_inputs("medium")
    scene = prepare_scene(DemSource.open(dem), track, cfg)
    dt = cfg.radar.sample_interval_s
    nbins = cfg.radar.samples + 2 * scene.pad
    bin0 = scene.start_s - (scene.pad + 0.5) * dt
    ant = scene.ant_m[scene.idx]
    mid = len(ant) // 2
    block = slice(mid - 32, mid + 32)
    binned_power(scene, ant[:4], bin0[:4], nbins)  # load the kernels
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        fast, _, evals = binned_power(scene, ant[block], bin0[block], nbins)
        times.append(time.perf_counter() - t0)
    t_fast = statistics.median(times) / 64
    few = slice(mid, mid + 2)
    t0 = time.perf_counter()
    ref = reference_binned_power(scene.facets, ant[few], bin0[few], dt, nbins, cfg)
    t_ref = (time.perf_counter() - t0) / 2
    agree = float(np.max(np.abs(fast[32:34, 0].sum(axis=1) / ref.sum(axis=1) - 1)))
    return {
        "scene": "medium case, traces in the middle of the track",
        "facets": len(scene.facets),
        "kernel_s_per_trace": t_fast,
        "numpy_reference_s_per_trace": t_ref,
        "speedup": t_ref / t_fast,
        "reference_facet_evals_per_s": len(scene.facets) / t_ref,
        "kernel_facet_evals_per_s": evals / statistics.median(times),
        "max_rel_diff_total_power_per_trace": agree,
    }


def worker_startup() -> dict:
    """Time of the first kernel calls in this process (compile or cache load)."""
    t0 = time.perf_counter()
    import cluttersim.kernels  # noqa: F401
    from cluttersim import Body, SimulationConfig, Track
    from cluttersim.config import SurfaceConfig
    from cluttersim.physics.radar import RadarConfig
    from cluttersim.simulate import simulate

    t_import = time.perf_counter() - t0
    CACHE.mkdir(exist_ok=True)
    dem = CACHE / "startup_60_0.01.tif"
    if not dem.exists():
        synthetic_dem(dem, 60, 0.01)
    track = Track(np.array([-0.05, 0.0, 0.05]), np.zeros(3), np.full(3, 200e3))
    cfg = SimulationConfig(radar=RadarConfig(samples=128), surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08}))
    t0 = time.perf_counter()
    simulate(dem, track, cfg)
    return {"import_s": t_import, "first_simulate_s": time.perf_counter() - t0, "body": Body.sphere(1.0).name}


def run_worker(args: list[str], env=None) -> dict:
    out = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True, env=env, check=False)
    if out.returncode != 0:
        raise RuntimeError(f"benchmark worker {args} failed:\n{out.stderr}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def avx2_code_env(cache_dir: Path) -> dict:
    """Environment that makes Numba generate AVX2 code on an AVX-512 host (the host's features with
    every AVX-512 extension switched off, its own compile cache): what an AVX2-only CPU runs,
    executed by this one (a proxy: the instruction mix is that of AVX2, the timing this core's)."""
    import llvmlite.binding as ll

    feats = ll.get_host_cpu_features()
    off = lambda k: k.startswith(("avx512", "avx10", "amx")) or k in ("evex512",)  # noqa: E731
    text = ",".join(("-" if off(k) or not v else "+") + k for k, v in feats.items())
    return {**os.environ, "NUMBA_CPU_NAME": "znver3" if "znver" in ll.get_host_cpu_name() else "haswell",
            "NUMBA_CPU_FEATURES": text, "NUMBA_CACHE_DIR": str(cache_dir)}  # fmt: skip


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", choices=list(CASES), action="append", help="case(s) to run (default: small, medium)")
    ap.add_argument("--repeat", type=int, default=3, help="warm runs per case (median reported)")
    ap.add_argument("--worker", help=argparse.SUPPRESS)
    ap.add_argument("--sources", type=int, default=1, help=argparse.SUPPRESS)
    ap.add_argument("--shadowing", type=int, default=0, help=argparse.SUPPRESS)
    ap.add_argument("--coherent", type=int, default=0, help=argparse.SUPPRESS)
    ap.add_argument("--spreading", default="trapezoid", help=argparse.SUPPRESS)
    ap.add_argument("--code", choices=["host", "avx2"], default="host",
                    help="avx2: compile the kernels for AVX2 on an AVX-512 host (Numba's target features; own cache)")
    ap.add_argument("--variants", choices=["all", "spreading"], default="all",
                    help="spreading: only range spreading with and without the source record")
    ap.add_argument("--specular", type=int, default=0, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        if args.worker == "reference":
            result = worker_reference()
        elif args.worker == "startup":
            result = worker_startup()
        else:
            result = worker_case(args.worker, bool(args.sources), args.repeat, bool(args.shadowing), bool(args.coherent),
                                 args.spreading, bool(args.specular))  # fmt: skip
        print(json.dumps(result))
        return 0

    machine = {"cpu": cpu_model(), "cores": os.cpu_count(), "python": sys.version.split()[0], "platform": platform.platform(),
               "vector_features": vector_features(), **cpu_vector_features(), "code": args.code}  # fmt: skip
    env = avx2_code_env(CACHE / "numba-avx2") if args.code == "avx2" else None
    print(f"machine: {machine['cpu']}, {machine['cores']} cores, {machine['cpu_class']} "
          f"({' '.join(machine['vector_flags'])}); kernels compiled for: {args.code}")  # fmt: skip
    report = {"machine": machine, "cases": [], "time": time.strftime("%Y-%m-%dT%H:%M:%S")}
    for name in args.case or ["small", "medium"]:
        # sources, shadowing, coherent, spreading, specular
        variants = [(0, 0, 0, "trapezoid", 0), (1, 0, 0, "trapezoid", 0), (0, 0, 0, "centre", 0)]
        if name == "small" and args.variants == "all":
            variants += [(0, 1, 0, "trapezoid", 0), (0, 0, 1, "trapezoid", 0), (0, 0, 0, "trapezoid", 1)]
        if args.variants == "spreading":
            variants = variants[:2]
        for sources, shadowing, coherent, spreading, specular in variants:
            r = run_worker(["--worker", name, "--sources", str(sources), "--shadowing", str(shadowing),
                            "--coherent", str(coherent), "--spreading", spreading, "--specular", str(specular),
                            "--repeat", str(args.repeat)], env=env)  # fmt: skip
            report["cases"].append(r)
            print(
                f"{name:>7} sources={'on ' if sources else 'off'}{' shadowing' if shadowing else ''}"
                f"{' coherent' if coherent else ''}{' centre-binned (benchmark only)' if spreading == 'centre' else ''}"
                f"{' specular' if specular else ''}: "
                f"{r['traces']} traces x {r['samples']} samples, "
                f"window {r['dem_window'][0]}x{r['dem_window'][1]} cells | wall {r['median_wall_s']:.2f} s "
                f"(kernel {r['median_kernel_s']:.2f} s, facets {r['median_facets_s']:.2f} s, netCDF {r['median_write_s']:.2f} s; "
                f"first run {r['first_run_s']:.2f} s) | "
                f"{r['facet_evals_per_s'] / 1e6:.0f} M facet-evals/s ({r['facet_evals_per_s_per_core'] / 1e6:.0f} M/s per thread; "
                f"{r['facet_evals_per_cpu_s'] / 1e6:.0f} M per CPU-second) | "
                f"CPU {r['median_cpu_s']:.1f} s | load avg {max(r['load_average']):.1f} | peak {r['peak_rss_mb']:.0f} MB"
                + (f" | specular kernel: {r['specular_evaluations'] / 1e6:.0f} M (sub-)facet evaluations, "
                   f"{r['median_specular_cpu_s']:.1f} CPU-s, {r['specular_evals_per_cpu_s'] / 1e6:.1f} M per CPU-second"
                   if specular else "")
            )
    if args.variants == "spreading":  # the kernel alone: no reference, no start-up
        _write_report(report)
        return 0
    ref = run_worker(["--worker", "reference"])
    report["reference"] = ref
    print(
        f"NumPy reference: {ref['numpy_reference_s_per_trace'] * 1e3:.1f} ms/trace "
        f"({ref['reference_facet_evals_per_s'] / 1e6:.1f} M facet-evals/s, all {ref['facets']} facets) vs kernel "
        f"{ref['kernel_s_per_trace'] * 1e3:.3f} ms/trace: {ref['speedup']:.0f}x faster per trace; "
        f"total power per trace agrees to {ref['max_rel_diff_total_power_per_trace']:.1e}"
    )
    with tempfile.TemporaryDirectory() as cold:
        cold_run = run_worker(["--worker", "startup"], env={**os.environ, "NUMBA_CACHE_DIR": cold})
    warm_run = run_worker(["--worker", "startup"])
    report["startup"] = {"cold_cache": cold_run, "warm_cache": warm_run}
    print(
        f"kernel start-up: first simulate {cold_run['first_simulate_s']:.1f} s with an empty numba cache (compilation), "
        f"{warm_run['first_simulate_s']:.2f} s with the cache on disk"
    )
    _write_report(report)
    return 0


def _write_report(report: dict) -> None:
    print(f"wrote {write_results('simulate', report)}")


if __name__ == "__main__":
    sys.exit(main())
