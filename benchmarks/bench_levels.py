"""What the level features cost: the ionosphere's dispersed pulse, the unfocused response table and
the curved shadowing march, on the small benchmark case (800 × 800 DEM, 200 traces × 1024 samples).

Run with ``python benchmarks/bench_levels.py [--repeat N]`` (part of ``make bench``). Each variant
runs warm in this one process (a first, untimed run compiles and fills the caches); printed per
variant: the median end-to-end wall time, CPU time (``process_time``, all threads), the pulse
convolution's share, and the ratio to the plain run. The JSON in ``benchmarks/results/levels-*.json``
records the CPU model, its vector features and the load average. Timings are never asserted in tests.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _common import cpu_model, vector_features, write_results  # noqa: E402
from bench_simulate import case_inputs  # noqa: E402


def main(argv=None) -> int:
    from cluttersim import simulate
    from cluttersim.physics.aperture import ProcessingConfig
    from cluttersim.physics.ionosphere import IonosphereConfig
    from cluttersim.simulate import RunStats

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--only", action="append", help="run only the variants whose name starts with this")
    args = ap.parse_args(argv)
    dem, track, base = case_inputs("small")
    variants = {
        "plain": base,
        "ionosphere 2e15": dataclasses.replace(base, ionosphere=IonosphereConfig(tec_el_m2=2e15)),
        "ionosphere 1e16": dataclasses.replace(base, ionosphere=IonosphereConfig(tec_el_m2=1e16)),
        "focused aperture (for scale)": dataclasses.replace(
            base, processing=ProcessingConfig(aperture="focused", aperture_length_m=3000.0)),
        "unfocused aperture": dataclasses.replace(base, processing=ProcessingConfig(aperture="unfocused")),
        "shadowing (curved march)": dataclasses.replace(base, processing=ProcessingConfig(shadowing=True)),
    }
    if args.only:
        variants = {k: v for k, v in variants.items() if k == "plain" or any(k.startswith(o) for o in args.only)}
    results = {}
    for name, cfg in variants.items():
        simulate(dem, track, cfg, sources=False)  # compile / warm
        walls, cpus, kernels = [], [], []
        for _ in range(args.repeat):
            stats = RunStats()
            w0, c0 = time.perf_counter(), time.process_time()
            simulate(dem, track, cfg, sources=False, stats=stats)
            walls.append(time.perf_counter() - w0)
            cpus.append(time.process_time() - c0)
            kernels.append(stats.seconds_kernel)
        results[name] = {"wall_s": statistics.median(walls), "cpu_s": statistics.median(cpus),
                         "kernel_and_convolution_s": statistics.median(kernels), "walls": walls, "cpus": cpus}
    plain = results["plain"]
    for name, r in results.items():
        r["cpu_ratio"] = r["cpu_s"] / plain["cpu_s"]
        print(f"{name:>26}: wall {r['wall_s']:.2f} s, CPU {r['cpu_s']:.2f} s ({r['cpu_ratio']:.2f}× plain), "
              f"kernel+convolution {r['kernel_and_convolution_s']:.2f} s")
    report = {"time": time.strftime("%Y-%m-%dT%H:%M:%S"), "cpu": cpu_model(), "cpu_flags": vector_features(),
              "cores": os.cpu_count(), "load_average": os.getloadavg(), "case": "small", "repeat": args.repeat,
              "results": results}  # fmt: skip
    out = write_results("levels", report)
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
