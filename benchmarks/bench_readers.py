"""Reading observed archive products: time to load echoes, track and timing (load_observed).

Writes one invented product per format in a temporary directory — 5000 traces ×
2048 samples of float32 (41 MB of echoes), with a per-trace geometry table — and
reads each `--repeat` times in this process (wall and CPU time; median and range).
The NumPy file with a track CSV, the route that needs no archive reader, is the
baseline. Results go to benchmarks/results/readers-<time>.json with the CPU model,
its vector features and the load average.

    python benchmarks/bench_readers.py [--repeat 5] [--traces 5000] [--samples 2048]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import machine_info, print_machine, vector_features, write_results  # noqa: E402

DT = 37.5e-9
START = 2.0e-3


def products(d: Path, n_tr: int, n_s: int) -> dict:
    """{name: (path, load_observed kwargs)} of the invented products."""
    rng = np.random.default_rng(0)
    power = rng.exponential(1.0, (n_tr, n_s)).astype(np.float32)
    lat = np.linspace(-10, 10, n_tr)
    lon = np.full(n_tr, 30.0)
    alt = np.full(n_tr, 300e3)
    out = {}
    # NumPy + CSV (no archive reader)
    np.save(d / "obs.npy", power)
    with open(d / "track.csv", "w") as fh:
        fh.write("lat,lon,alt\n" + "".join(f"{a:.9f},{b:.9f},{c:.3f}\n" for a, b, c in zip(lat, lon, alt)))
    out["npy + csv"] = (d / "obs.npy", dict(track=d / "track.csv", sample_interval_s=DT, window_start_s=START))
    # PDS3: IMAGE as drawn + ASCII geometry table
    power.T.astype("<f4").tofile(d / "RG.IMG")
    rows = "".join(f"{a:14.9f},{b:14.9f},{c / 1e3:12.6f}\r\n" for a, b, c in zip(lat, lon, alt))
    (d / "GEOM.TAB").write_text(rows, newline="")
    cols = "".join(
        f"  OBJECT = COLUMN\r\n    NAME = {n}\r\n    DATA_TYPE = ASCII_REAL\r\n    START_BYTE = {s}\r\n    BYTES = {b}\r\n"
        f"    UNIT = {u}\r\n  END_OBJECT = COLUMN\r\n"
        for n, s, b, u in (("LATITUDE", 1, 14, "DEGREE"), ("LONGITUDE", 16, 14, "DEGREE"), ("ALTITUDE", 31, 12, "KM"))
    )
    (d / "RG.LBL").write_text(
        f"PDS_VERSION_ID = PDS3\r\nRECORD_TYPE = UNDEFINED\r\n^IMAGE = \"RG.IMG\"\r\n^GEOMETRY_TABLE = \"GEOM.TAB\"\r\n"
        f"SAMPLE_INTERVAL = {DT} <S>\r\nWINDOW_START = {START} <S>\r\nOBJECT = IMAGE\r\n  LINES = {n_s}\r\n"
        f"  LINE_SAMPLES = {n_tr}\r\n  SAMPLE_TYPE = PC_REAL\r\n  SAMPLE_BITS = 32\r\nEND_OBJECT = IMAGE\r\n"
        f"OBJECT = GEOMETRY_TABLE\r\n  INTERCHANGE_FORMAT = ASCII\r\n  ROWS = {n_tr}\r\n  COLUMNS = 3\r\n  ROW_BYTES = 45\r\n"
        f"{cols}END_OBJECT = GEOMETRY_TABLE\r\nEND\r\n"
    )
    out["PDS3 image + ASCII table (pdr)"] = (d / "RG.LBL", {})
    # MATLAB v5 and v7.3
    from scipy.io import savemat

    variables = {"Data": power.T.astype(np.float64), "Time": START + np.arange(n_s) * DT, "Latitude": lat,
                 "Longitude": lon, "Elevation": alt}  # fmt: skip
    savemat(d / "e5.mat", variables)
    out["MATLAB v5 (scipy.io)"] = (d / "e5.mat", {})
    import h5py

    with h5py.File(d / "e73.mat", "w", userblock_size=512) as f:
        for k, v in variables.items():
            f.create_dataset(k, data=np.atleast_2d(v).T)  # column-major, as MATLAB stores it
    out["MATLAB v7.3 (h5py)"] = (d / "e73.mat", {})
    # SEG-Y
    try:
        import segyio

        spec = segyio.spec()
        spec.format, spec.samples, spec.tracecount = 5, np.arange(n_s), n_tr
        tf = segyio.TraceField
        with segyio.create(str(d / "line.sgy"), spec) as f:
            f.bin.update({segyio.BinField.Interval: 40, segyio.BinField.Samples: n_s})  # 40 ns (int16 field)
            for i in range(n_tr):
                f.header[i] = {tf.SourceX: int(lon[i] * 3600 * 100), tf.SourceY: int(lat[i] * 3600 * 100),
                               tf.SourceGroupScalar: -100, tf.CoordinateUnits: 2, tf.ReceiverGroupElevation: int(alt[i]),
                               tf.DelayRecordingTime: 2000}  # fmt: skip
            f.trace = power
        out["SEG-Y (segyio)"] = (d / "line.sgy", dict(fmt_fields=("sample_interval=Interval:ns", "window_start=DelayRecordingTime:us")))
    except ImportError:
        pass
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--traces", type=int, default=5000)
    ap.add_argument("--samples", type=int, default=2048)
    args = ap.parse_args(argv)
    from cluttersim.io.observed import ObservedFormat, load_observed

    machine = {**machine_info(), "cpu_vector_features": vector_features()}
    print_machine(machine)
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, (path, kw) in products(Path(tmp), args.traces, args.samples).items():
            fields = kw.pop("fmt_fields", ())
            walls, cpus = [], []
            for _ in range(args.repeat):
                w0, c0 = time.perf_counter(), time.process_time()
                obs = load_observed(path, fmt=ObservedFormat(fields=fields), **kw)
                walls.append(time.perf_counter() - w0)
                cpus.append(time.process_time() - c0)
            assert obs.power.shape == (args.traces, args.samples)
            results[name] = {"wall_s_median": statistics.median(walls), "wall_s_range": [min(walls), max(walls)],
                             "cpu_s_median": statistics.median(cpus), "bytes": path.stat().st_size}  # fmt: skip
            print(f"{name:34s} median {statistics.median(walls):6.2f} s wall ({min(walls):.2f}-{max(walls):.2f}), "
                  f"{statistics.median(cpus):6.2f} s CPU")  # fmt: skip
    out = write_results("readers", {"machine": machine, "traces": args.traces, "samples": args.samples,
                                    "repeat": args.repeat, "load_average_at_end": os.getloadavg(), "results": results})  # fmt: skip
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
