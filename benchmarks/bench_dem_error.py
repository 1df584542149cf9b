"""Benchmark of the DEM-error Monte Carlo: N realisations on one prepared scene against N runs.

The case is bench_simulate's "small" case (800² fractal DEM, 200 traces, 1024 samples, 300 km)
unless ``--case`` says otherwise. Measured in one process after a warm-up run (numba compiled):

* one ordinary run, ``simulate()`` with its default source record, and one without it
  (wall and CPU time; the median of ``--repeat``);
* ``simulate_dem_error`` with ``--realisations`` N (one error-free pass included), wall and CPU
  time, split into scene preparation, error fields, facet rebuilding and kernel;
* one run with its products written (``simulate_to_dir``: radargram.nc and the PNGs, as the
  CLI's ``simulate`` does), and the Monte Carlo with its own (``write_dem_error``);
* the saving: N × (one run) / (the Monte Carlo), in wall and in CPU time, against runs with the
  source record (the CLI's default) and without it (the Monte Carlo's kernel has none), and with
  products written on both sides;
* with ``--cli``, also what a user pays on the command line: ``cluttersim simulate`` run as a
  process (interpreter start, imports, cached kernels loaded, DEM read, simulation, radargram.nc
  and figures) ``--repeat`` times, against one ``cluttersim simulate --dem-error … --realisations
  N`` (which also writes the error-free run's products): N × (one run) / (the Monte Carlo run),
  wall and CPU time of the child processes.

Results go to ``benchmarks/results/dem_error-<time>.json`` with the CPU model, its vector
features and the load average (the machine may be shared: compare CPU-time ratios).
Timings are never asserted in tests.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def timed(fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w0, time.process_time() - c0


def main(argv=None) -> int:
    from _common import cpu_model, vector_features, write_results
    from bench_simulate import case_inputs

    import tempfile

    from cluttersim.analysis.dem_error import DemErrorConfig, ErrorStats, dem_error_paths, simulate_dem_error, write_dem_error
    from cluttersim.products import simulate_to_dir
    from cluttersim.simulate import simulate

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", default="small")
    ap.add_argument("--realisations", type=int, default=32)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cli", action="store_true", help="also time the command line: N processes against one --dem-error run")
    args = ap.parse_args(argv)
    dem, track, cfg = case_inputs(args.case)
    error = DemErrorConfig(rms_m=20.0, correlation_m=2000.0, realisations=args.realisations)
    load0 = os.getloadavg()[0]
    simulate(dem, track, cfg, sources=False, max_memory_bytes=None)  # warm-up: compile or load the kernels
    simulate_dem_error(dem, track, cfg, DemErrorConfig(20.0, 2000.0, realisations=2), max_memory_bytes=None)
    runs = {"sources": [], "no_sources": [], "products": []}
    tmp = Path(tempfile.mkdtemp(prefix="bench-dem-error-"))
    for _ in range(args.repeat):
        for key, sources in (("sources", True), ("no_sources", False)):
            _, wall, cpu = timed(lambda s=sources: simulate(dem, track, cfg, sources=s, max_memory_bytes=None))
            runs[key].append((wall, cpu))
        _, wall, cpu = timed(lambda: simulate_to_dir(dem, track, cfg, tmp / "run", overwrite=True, max_memory_bytes=None))
        runs["products"].append((wall, cpu))
    stats = ErrorStats()
    ds, mc_wall, mc_cpu = timed(lambda: simulate_dem_error(dem, track, cfg, error, max_memory_bytes=None, stats=stats))
    paths = dem_error_paths(tmp / "mc")
    paths["dem_error"].parent.mkdir(exist_ok=True)
    _, write_wall, write_cpu = timed(lambda: write_dem_error(ds, paths))
    shutil.rmtree(tmp, ignore_errors=True)
    load1 = os.getloadavg()[0]
    n = args.realisations
    run_wall = statistics.median(w for w, _ in runs["sources"])
    run_cpu = statistics.median(c for _, c in runs["sources"])
    result = {
        "case": args.case, "realisations": n, "cpu": cpu_model(), "cpu_vector_features": vector_features(),
        "cores": os.cpu_count(), "load_average": [load0, load1],
        "run_wall_s": runs["sources"], "run_no_sources_wall_s": runs["no_sources"],
        "run_median_wall_s": run_wall, "run_median_cpu_s": run_cpu,
        "run_no_sources_median_wall_s": statistics.median(w for w, _ in runs["no_sources"]),
        "run_no_sources_median_cpu_s": statistics.median(c for _, c in runs["no_sources"]),
        "monte_carlo_wall_s": mc_wall, "monte_carlo_cpu_s": mc_cpu,
        "monte_carlo_parts_s": {"scene": stats.seconds_scene, "fields": stats.seconds_fields,
                                "facets": stats.seconds_facets, "kernel": stats.seconds_kernel},
        "per_realisation_wall_s": mc_wall / (n + 1),
        "saving_wall": n * run_wall / mc_wall, "saving_cpu": n * run_cpu / mc_cpu,
        "saving_cpu_no_sources": n * statistics.median(c for _, c in runs["no_sources"]) / mc_cpu,
        "run_products_wall_s": runs["products"], "monte_carlo_write_wall_cpu_s": [write_wall, write_cpu],
        "saving_cpu_products": n * statistics.median(c for _, c in runs["products"]) / (mc_cpu + write_cpu),
    }  # fmt: skip
    if args.cli:
        result["cli"] = cli_saving(dem, track, cfg, error, args.repeat)
    out = write_results("dem_error", result, indent=1)
    print(json.dumps(result, indent=1))
    print(f"{n} realisations: {mc_wall:.1f} s wall ({mc_cpu:.1f} s CPU); one run {run_wall:.2f} s "
          f"({run_cpu:.2f} s CPU): N runs / Monte Carlo = {result['saving_wall']:.2f} (wall), "
          f"{result['saving_cpu']:.2f} (CPU; {result['saving_cpu_no_sources']:.2f} against runs without the source "
          f"record; {result['saving_cpu_products']:.2f} with products written); wrote {out}")  # fmt: skip
    if args.cli:
        c = result["cli"]
        print(f"command line: one run {c['run_median_wall_s']:.2f} s wall ({c['run_median_cpu_s']:.2f} s CPU), "
              f"--dem-error run {c['monte_carlo_wall_s']:.1f} s ({c['monte_carlo_cpu_s']:.1f} s CPU): "
              f"N runs / Monte Carlo = {c['saving_wall']:.2f} (wall), {c['saving_cpu']:.2f} (CPU)")  # fmt: skip
    return 0


def _child_run(cmd) -> tuple[float, float]:
    """Wall and CPU time (user + system of the finished child) of one command."""
    import resource
    import subprocess

    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    w0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - w0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)


def cli_saving(dem, track, cfg, error, repeat: int) -> dict:
    """N command-line runs against one command-line Monte Carlo (module docstring)."""
    import tempfile

    exe = str(Path(sys.executable).with_name("cluttersim"))
    tmp = Path(tempfile.mkdtemp(prefix="bench-dem-error-cli-"))
    track.to_csv(tmp / "track.csv")
    law = cfg.surface.params
    (tmp / "radar.toml").write_text(
        f"[radar]\nsamples = {cfg.radar.samples}\n\n[surface]\nlaw = \"{cfg.surface.law}\"\n"
        + "".join(f"{k} = {float(v)!r}\n" for k, v in law.items()),
        encoding="utf-8",
    )
    base = [exe, "simulate", "--dem", str(dem), "--track", str(tmp / "track.csv"), "--radar", str(tmp / "radar.toml"),
            "--quiet", "--overwrite"]  # fmt: skip
    _child_run(base + ["--out", str(tmp / "warm")])  # the kernels' cache is current
    runs = [_child_run(base + ["--out", str(tmp / "run")]) for _ in range(repeat)]
    mc = _child_run(base + ["--out", str(tmp / "mc"), "--dem-error", f"{error.rms_m},{error.correlation_m}",
                            "--realisations", str(error.realisations)])  # fmt: skip
    shutil.rmtree(tmp, ignore_errors=True)
    n = error.realisations
    run_wall = statistics.median(w for w, _ in runs)
    run_cpu = statistics.median(c for _, c in runs)
    return {
        "run_wall_cpu_s": runs, "run_median_wall_s": run_wall, "run_median_cpu_s": run_cpu,
        "monte_carlo_wall_s": mc[0], "monte_carlo_cpu_s": mc[1],
        "saving_wall": n * run_wall / mc[0], "saving_cpu": n * run_cpu / mc[1],
    }  # fmt: skip


if __name__ == "__main__":
    sys.exit(main())
