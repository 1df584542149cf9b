"""Scaling benchmark of ``cluttersim survey``: a 20-track survey on 1 and 2 workers.

Run with ``make bench`` or ``python benchmarks/bench_survey.py [--repeat N] [--dask]``.

The scene is the seeded fractal terrain of ``bench_simulate.py`` (small case: 800 × 800
cells of 0.005° on a Mars-sized sphere); 20 north–south tracks, 4.7 km (0.08°) apart, one trace
every 500 m over 2.4° of latitude (285 traces each), 300 km up, 2048 samples. Each
configuration runs ``run_survey`` in a fresh process (worker spawn and Numba cache
loads included, as a command sees them; Python's own start-up excluded) into a new
directory, after one warm-up run that fills the on-disk Numba cache:

* 1 worker (in-process) with Numba on all cores (the default for ``--workers 1``);
* 1 worker with ``NUMBA_NUM_THREADS=1`` (the per-process baseline of the scaling figure);
* 2 worker processes, one Numba thread each (the default on 2 cores);
* with ``--dask``, a Dask LocalCluster of 2 workers.

Printed: wall time (median of ``--repeat`` runs), tracks per minute and the median time a
worker spends on one track; the scaling figure is the 2-worker rate over the 1-worker,
1-thread rate. The load average at the start is recorded: the machine may be shared. Results go to
``benchmarks/results/survey-<time>.json`` with the CPU model. Never asserted in tests.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _common import machine_info, print_machine, write_results  # noqa: E402
from bench_simulate import CACHE, CASES, MARS_RADIUS_M, synthetic_dem  # noqa: E402

TRACKS = 20
RADAR_TOML = """[radar]
samples = 2048
[surface]
law = "hagfors"
C = 400.0
rho = 0.08
"""


def inputs(workdir: Path):
    """DEM (cached), radar TOML and the 20-track CSV."""
    from cluttersim import Body, great_circle_track

    n, res, _, _ = CASES["small"]
    CACHE.mkdir(exist_ok=True)
    dem = CACHE / f"small_{n}_{res}.tif"
    if not dem.exists():
        synthetic_dem(dem, n, res)
    radar = workdir / "radar.toml"
    radar.write_text(RADAR_TOML)
    body = Body.sphere(MARS_RADIUS_M)
    lons = np.linspace(-0.76, 0.76, TRACKS)
    lines = ["track_id,lat,lon,alt"]
    for i, lon in enumerate(lons):
        t = great_circle_track(body, -1.2, float(lon), 1.2, float(lon), 300e3, 500.0)
        lines += [f"bench_{i + 1:02d},{la:.9f},{lo:.9f},{al:.1f}" for la, lo, al in zip(t.lat_deg, t.lon_deg, t.alt_m)]
    tracks = workdir / "tracks.csv"
    tracks.write_text("\n".join(lines) + "\n")
    return dem, radar, tracks


def worker(extra: list[str]) -> dict:
    """One survey in this (fresh) process, as the command runs it: wall time from the start of
    ``run_survey`` (worker spawn and cache loads included) and the workers' time per track."""
    from cluttersim.config import SimulationConfig
    from cluttersim.analysis.survey import Engine, SurveyConfig, run_survey

    workdir = Path(extra[0])
    workers = int(extra[1])
    scheduler = extra[2] if len(extra) > 2 else None
    dem, radar, tracks = workdir / "dem.tif", workdir / "radar.toml", workdir / "tracks.csv"
    config = SurveyConfig(region=(-0.8, -1.25, 0.8, 1.25), tracks_path=str(tracks), max_depth_m=500.0)
    out = Path(tempfile.mkdtemp(dir=workdir))
    t0 = time.perf_counter()
    summary = run_survey(dem, config, SimulationConfig.from_toml(radar), out,
                         engine=Engine(workers=workers, scheduler=scheduler))  # fmt: skip
    wall = time.perf_counter() - t0
    shutil.rmtree(out)
    return {"seconds": wall, "track_seconds": summary.track_seconds, "tracks": summary.computed}


def run_worker(extra: list[str], env: dict) -> dict:
    res = subprocess.run([sys.executable, __file__, "--worker", *extra], capture_output=True, text=True, env=env,
                         check=False)  # fmt: skip
    if res.returncode != 0:
        raise RuntimeError(f"survey {extra} failed:\n{res.stderr}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=1, help="runs per configuration (median reported)")
    ap.add_argument("--dask", action="store_true", help="also run on a Dask LocalCluster of 2 workers")
    ap.add_argument("--worker", nargs="+", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        print(json.dumps(worker(args.worker)))
        return 0
    machine = machine_info()
    print_machine(machine)
    base_env = dict(os.environ)
    one_thread = {**base_env, "NUMBA_NUM_THREADS": "1"}
    configs = [
        ("1 worker, Numba on all cores", ["1"], base_env),
        ("1 worker, 1 Numba thread", ["1"], one_thread),
        ("2 workers, 1 Numba thread each", ["2"], base_env),
    ]
    if args.dask:
        configs.append(("Dask LocalCluster, 2 workers", ["2", "local"], base_env))
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        dem, _, _ = inputs(tmp)
        (tmp / "dem.tif").symlink_to(dem)
        run_worker([str(tmp), "1"], base_env)  # warm-up: fills the Numba cache
        for name, extra, env in configs:
            runs = [run_worker([str(tmp), *extra], env) for _ in range(args.repeat)]
            wall = statistics.median(r["seconds"] for r in runs)
            per_track = statistics.median(s for r in runs for s in r["track_seconds"])
            results[name] = {"seconds": wall, "tracks_per_minute": 60.0 * TRACKS / wall,
                             "median_seconds_per_track_in_worker": per_track, "runs": runs}  # fmt: skip
            print(f"{name:32s} {wall:6.1f} s  {60.0 * TRACKS / wall:6.1f} tracks/min  "
                  f"(a worker spends {per_track:.2f} s per track)")  # fmt: skip
    base = results["1 worker, 1 Numba thread"]["tracks_per_minute"]
    two = results["2 workers, 1 Numba thread each"]["tracks_per_minute"]
    print(f"scaling, 2 workers over 1 worker (1 thread each): {two / base:.2f}x")
    out = write_results("survey", {"machine": machine, "tracks": TRACKS, "results": results, "scaling": two / base,
                                   "load_average_at_end": os.getloadavg()})  # fmt: skip
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
