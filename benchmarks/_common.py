"""What every benchmark records beside its figures: the machine (CPU model, its vector extensions
and class, cores, Python, platform), the load average (the machine may be shared) and the JSON
result file in ``benchmarks/results/``. Imported by each ``bench_*.py`` (run as scripts from any
directory: this directory is first on ``sys.path``)."""

from __future__ import annotations

import json
import os
import platform
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"


def _cpuinfo_field(name: str) -> str | None:
    """The first ``name : value`` line of /proc/cpuinfo (None where there is none)."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith(name) and ":" in line:
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return None


def cpu_model() -> str:
    return _cpuinfo_field("model name") or platform.processor() or "unknown"


def vector_features() -> list[str]:
    """The CPU's SIMD flags that matter for the vectorised kernels (avx*, fma*, sse4*; from
    /proc/cpuinfo, empty elsewhere)."""
    flags = (_cpuinfo_field("flags") or "").split()
    return sorted(f for f in set(flags) if f.startswith(("avx", "fma", "sse4")))


def cpu_vector_features() -> dict:
    """The CPU's vector extensions (:func:`vector_features`) and its class for the README's tables:
    "AVX-512" (avx512f), "AVX2" or "other"."""
    flags = vector_features()
    cls = "AVX-512" if "avx512f" in flags else ("AVX2" if "avx2" in flags else "other")
    return {"vector_flags": flags, "cpu_class": cls}


def machine_info() -> dict:
    """CPU model, cores, vector extensions and class, Python, platform and the load average now
    (``load_average_at_start``: 1, 5 and 15 minutes)."""
    return {"cpu": cpu_model(), "cores": os.cpu_count(), "python": sys.version.split()[0],
            "platform": platform.platform(), "load_average_at_start": os.getloadavg(), **cpu_vector_features()}  # fmt: skip


def print_machine(machine: dict) -> None:
    print(f"machine: {machine['cpu']}, {machine['cores']} cores, {machine['cpu_class']}; load average "
          f"{os.getloadavg()[0]:.2f} (others share it)")  # fmt: skip


def write_results(name: str, data: dict, indent: int = 2) -> Path:
    """Write ``data`` to ``benchmarks/results/<name>-<UTC time>.json``; returns the path."""
    RESULTS.mkdir(exist_ok=True)
    out = RESULTS / f"{name}-{time.strftime('%Y%m%dT%H%M%S', time.gmtime())}.json"
    out.write_text(json.dumps(data, indent=indent))
    return out
