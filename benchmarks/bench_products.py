"""What writing a run's products costs beside the simulation: the netCDF file, each figure and the
HTML report, on the small benchmark case (800 × 800 DEM, 200 traces × 1024 samples).

Run with ``python benchmarks/bench_products.py [--repeat N] [--profile STEP]``. Everything runs in
this one process: a first, untimed round compiles the kernels and warms the caches, then each of
``--repeat`` rounds simulates (with the source record, as ``cluttersim simulate`` does), writes the
run directory exactly as :func:`cluttersim.products.write_run` does, and writes the report
(:func:`cluttersim.report.write_report`). Each step is timed on its own by wrapping the library
function that does it (wall time and CPU time, ``process_time`` over all threads); printed: the
median and range of each over the rounds, and the load average (the machine may be shared: CPU
seconds depend much less on what else runs than wall seconds).

Steps: ``simulate``; ``netcdf`` (radargram.nc); ``db_limits`` (the figures' shared colour
scale); ``radargram``, ``sides``, ``elevation`` (each figure: drawing and saving);
``track_map_data`` (the DEM read for the map) and ``track_map``; ``save`` (the part of the figures'
time spent in ``savefig``: rendering and PNG encoding); ``products`` (netCDF and figures
together: ``write_run``); ``report`` (the whole page) and within it ``report_centroids`` (the side
centroids). ``--profile STEP`` runs cProfile over one more round of that step and prints the
functions with the most cumulative and own time.

The JSON in ``benchmarks/results/products-<time>.json`` records the CPU model, its vector
features and the load average. Timings are never asserted in tests.
"""

from __future__ import annotations

import argparse
import contextlib
import cProfile
import io
import os
import pstats
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _common import machine_info, print_machine, write_results  # noqa: E402
from bench_simulate import case_inputs  # noqa: E402

#: Steps in the order they are printed.
STEPS = ("simulate", "netcdf", "db_limits", "radargram", "sides", "elevation", "track_map_data", "track_map", "save",
         "products", "report", "report_centroids")  # fmt: skip


class Timer:
    """Wall and CPU seconds per step, summed within a round (a step can run more than once)."""

    def __init__(self):
        self.wall: dict[str, float] = {}
        self.cpu: dict[str, float] = {}
        self.profile: cProfile.Profile | None = None
        self.profile_step: str | None = None

    @contextlib.contextmanager
    def step(self, name: str):
        prof = self.profile if name == self.profile_step else None
        w0, c0 = time.perf_counter(), time.process_time()
        if prof is not None:
            prof.enable()
        try:
            yield
        finally:
            if prof is not None:
                prof.disable()
            self.wall[name] = self.wall.get(name, 0.0) + time.perf_counter() - w0
            self.cpu[name] = self.cpu.get(name, 0.0) + time.process_time() - c0

    def wrap(self, module, attr: str, name: str):
        """Replace ``module.attr`` by a timed call of it; returns an undo function."""
        inner = getattr(module, attr)

        def timed(*args, **kwargs):
            with self.step(name):
                return inner(*args, **kwargs)

        setattr(module, attr, timed)
        return lambda: setattr(module, attr, inner)


def _module(new: str, old: str):
    """Module ``new`` in the package's layout since 2026-12-03 (subpackages), else ``old`` (the flat
    layout before it), so that the same benchmark measures older commits too. Chosen by the files
    of the ``cluttersim`` imported (an editable install's finder may otherwise resolve ``new`` in
    another tree)."""
    import importlib

    import cluttersim

    sub = new.split(".")[1]
    layout_new = (Path(cluttersim.__file__).parent / sub / "__init__.py").exists()
    return importlib.import_module(new if layout_new else old)


def instrument(timer: Timer) -> list:
    """Time the library functions each product is made by (where their callers look them up)."""
    from cluttersim import plots, products
    from cluttersim.plots import style

    sources = _module("cluttersim.analysis.sources", "cluttersim.sources")

    return [
        timer.wrap(products, "write_netcdf_to", "netcdf"),
        timer.wrap(plots, "db_limits", "db_limits"),
        timer.wrap(plots, "plot_radargram", "radargram"),
        timer.wrap(plots, "plot_side_radargram", "sides"),
        timer.wrap(plots, "plot_elevation_radargram", "elevation"),
        timer.wrap(products, "track_map_data", "track_map_data"),
        timer.wrap(plots, "plot_track_map", "track_map"),
        timer.wrap(style, "save_figure", "save"),
        timer.wrap(sources, "side_centroids", "report_centroids"),
    ]


def one_round(dem, track, cfg, out: Path, timer: Timer) -> None:
    """Simulate, write the run directory and its report into ``out`` (emptied first)."""
    from cluttersim.products import RUN_FILES, run_files, write_run

    DemSource = _module("cluttersim.io.dem", "cluttersim.dem").DemSource
    from cluttersim.report import write_report
    from cluttersim.simulate import simulate

    for p in out.glob("*"):
        p.unlink()
    src = DemSource.open(dem)
    with timer.step("simulate"):
        ds = simulate(src, track, cfg, sources=True)
    paths = {k: out / v for k, v in run_files().items()}
    assert set(paths) >= set(RUN_FILES)
    with timer.step("products"):
        write_run(ds, src, paths, permittivity=3.15)
    with timer.step("report"):
        write_report(out, permittivity=3.15)


def _summary(values: list[float]) -> dict:
    return {"median": statistics.median(values), "min": min(values), "max": max(values), "all": values}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", default="small", help="case of bench_simulate.py (default small)")
    ap.add_argument("--repeat", type=int, default=3, help="timed rounds after the warm-up (median reported)")
    ap.add_argument("--profile", choices=STEPS, help="cProfile one more round of this step and print the top functions")
    ap.add_argument("--profile-lines", type=int, default=25, help="functions listed per profile table")
    ap.add_argument("--label", default="", help="free text stored with the result (e.g. the commit measured)")
    args = ap.parse_args(argv)
    import cluttersim

    machine = machine_info()
    print_machine(machine)
    print(f"cluttersim from {Path(cluttersim.__file__).parent}; case {args.case}, {args.repeat} timed rounds")
    dem, track, cfg = case_inputs(args.case)
    rounds: list[Timer] = []
    load = []
    profile_text = None
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        for i in range(args.repeat + 1 + (1 if args.profile else 0)):
            timer = Timer()
            profiling = args.profile and i == args.repeat + 1
            if profiling:
                timer.profile, timer.profile_step = cProfile.Profile(), args.profile
            undo = instrument(timer)
            try:
                load.append(os.getloadavg()[0])
                one_round(dem, track, cfg, out, timer)
            finally:
                for u in reversed(undo):
                    u()
            if profiling:
                buf = io.StringIO()
                stats = pstats.Stats(timer.profile, stream=buf).strip_dirs()
                stats.sort_stats("cumulative").print_stats(args.profile_lines)
                stats.sort_stats("tottime").print_stats(args.profile_lines)
                profile_text = buf.getvalue()
            elif i > 0:
                rounds.append(timer)
    results = {}
    print(f"{'step':>16} | {'CPU s (median, range)':>24} | {'wall s (median, range)':>24}")
    for name in STEPS:
        cpus = [r.cpu.get(name, 0.0) for r in rounds]
        walls = [r.wall.get(name, 0.0) for r in rounds]
        results[name] = {"cpu_s": _summary(cpus), "wall_s": _summary(walls)}
        print(f"{name:>16} | {statistics.median(cpus):8.3f} ({min(cpus):.3f}–{max(cpus):.3f}) | "
              f"{statistics.median(walls):8.3f} ({min(walls):.3f}–{max(walls):.3f})")  # fmt: skip
    sim = results["simulate"]["cpu_s"]["median"]
    prod = results["products"]["cpu_s"]["median"]
    rep = results["report"]["cpu_s"]["median"]
    print(f"products / simulate: {prod / sim:.2f} (CPU); report / simulate: {rep / sim:.2f} (CPU); "
          f"load average during the rounds {min(load):.2f}–{max(load):.2f}")  # fmt: skip
    if profile_text:
        print(profile_text)
    report = {"time": time.strftime("%Y-%m-%dT%H:%M:%S"), "machine": machine, "case": args.case,
              "repeat": args.repeat, "label": args.label, "package": str(Path(cluttersim.__file__).parent),
              "load_average": load, "steps": results, "profile_step": args.profile, "profile": profile_text}  # fmt: skip
    print(f"wrote {write_results('products', report)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
