"""Memory safety: estimate what a run will hold in memory and refuse runs that do not fit.

A run is stopped with a :class:`~cluttersim.errors.MemoryLimitError` that gives the
estimate and what to change, instead of being killed by the operating system half
way. The estimate is made once the DEM window is known and before it is read at
full resolution (see :func:`cluttersim.scene.read_track_window`).

Bytes per item (measured on this code, see ``tests/test_robustness.py``):

* DEM window, per cell: the elevations read (float32 read + float64 copy, 12 B), the
  hole-filled copy (8 B), the lon/lat grids (16 B), the temporary body-fixed
  grid (24 B), masks (2 B) and the facets themselves: position, normal and two
  edge vectors as 3 float32 each, area float32 and cell index int32 (56 B;
  :class:`cluttersim.facets.Facets`): :data:`BYTES_PER_DEM_CELL`.
* Radargram, per trace and sample: power float32 (4 B); with the source record,
  left/right fractions float32, dominant facet int32, source lat/lon float32 and
  their temporaries (:data:`BYTES_PER_SAMPLE_SOURCES`).
* Kernel buffers: per thread, a block of traces on the sub-bin grid (float64; three rows per
  trace with the source record);
  per chunk of traces, the binned power (float64, 3 rows with sources) and its
  convolution.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

from .errors import MemoryLimitError

#: Bytes held per DEM window cell while facets are built (see module docstring).
BYTES_PER_DEM_CELL = 12 + 8 + 16 + 24 + 2 + 56
#: Bytes of the facets alone per valid cell (positions, normals, edges: 4 × 3 float32; area; cell).
BYTES_PER_FACET = 4 * 3 * 4 + 4 + 4
#: Bytes per trace and sample of the radargram: power (float32).
BYTES_PER_SAMPLE = 4
#: Extra bytes per trace and sample with the source record (left, right, facet, lat, lon, temporaries).
BYTES_PER_SAMPLE_SOURCES = 4 + 4 + 4 + 4 + 4 + 12
#: Fraction of the available memory used when no limit is given.
DEFAULT_FRACTION = 0.8

_UNITS = {"": 1, "B": 1, "K": 1e3, "KB": 1e3, "M": 1e6, "MB": 1e6, "G": 1e9, "GB": 1e9, "T": 1e12, "TB": 1e12,
          "KIB": 2**10, "MIB": 2**20, "GIB": 2**30, "TIB": 2**40}  # fmt: skip


@dataclass(frozen=True)
class MemoryEstimate:
    """Estimated peak memory of a run, in bytes, by part."""

    dem_cells: int
    traces: int
    samples: int
    dem_bytes: int
    radargram_bytes: int
    kernel_bytes: int

    @property
    def total_bytes(self) -> int:
        return self.dem_bytes + self.radargram_bytes + self.kernel_bytes

    def describe(self) -> str:
        return (
            f"{format_bytes(self.total_bytes)}: DEM window {self.dem_cells:,} cells {format_bytes(self.dem_bytes)}, "
            f"radargram {self.traces:,} traces x {self.samples:,} samples {format_bytes(self.radargram_bytes)}, "
            f"kernel buffers {format_bytes(self.kernel_bytes)}"
        )


def estimate_memory_bytes(
    dem_cells: int, traces: int, samples: int, *, sources: bool = True, threads: int = 1, pad_samples: int = 0,
    oversample: int = 32, traces_per_block: int = 4, chunk_traces: int = 256,
) -> MemoryEstimate:  # fmt: skip
    """Estimate the peak memory (bytes) of simulating ``traces`` traces of ``samples`` samples
    over a DEM window of ``dem_cells`` cells (see the module docstring for the bytes per item)."""
    nbins = samples + 2 * pad_samples
    dem = int(dem_cells) * BYTES_PER_DEM_CELL
    per_sample = BYTES_PER_SAMPLE + (BYTES_PER_SAMPLE_SOURCES if sources else 0)
    radargram = int(traces) * int(samples) * per_sample
    rows = 3 if sources else 1
    chunk = min(int(traces), max(4 * traces_per_block * threads, min(chunk_traces, int(traces) // 50 or 1)))  # as simulate()
    # per thread: a block of traces, each with its delay rows (total; right and nadir strip with sources)
    kernel = threads * traces_per_block * rows * (nbins * oversample + 2) * 8 + chunk * nbins * (rows * 8 * 2 + 4)
    return MemoryEstimate(int(dem_cells), int(traces), int(samples), dem, radargram, kernel)


def parse_size(text) -> int:
    """Bytes of a size such as ``"8GB"``, ``"500 MB"``, ``"1.5GiB"`` or ``"1000000"`` (SI units are powers of 1000)."""
    m = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([A-Za-z]*)\s*", str(text))
    unit = m.group(2).upper() if m else None
    if m is None or unit not in _UNITS:
        raise ValueError(f"{text!r}: expected a size such as 8GB, 500MB or 2GiB")
    value = float(m.group(1)) * _UNITS[unit]
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"{text!r}: expected a positive size")
    return int(value)


def format_bytes(n: float) -> str:
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{int(n)} B"


def available_memory_bytes(meminfo: str | Path = "/proc/meminfo") -> int | None:
    """MemAvailable from ``/proc/meminfo`` in bytes, or None where it cannot be read (not Linux)."""
    try:
        text = Path(meminfo).read_text()
    except OSError:
        return None
    m = re.search(r"^MemAvailable:\s+(\d+)\s*kB", text, flags=re.MULTILINE)
    return int(m.group(1)) * 1024 if m else None


def default_limit_bytes() -> int | None:
    """:data:`DEFAULT_FRACTION` of the available memory, or None (no check) if unknown."""
    avail = available_memory_bytes()
    return None if avail is None else int(DEFAULT_FRACTION * avail)


def check_memory(estimate: MemoryEstimate, limit_bytes: int | None, *, given: bool) -> None:
    """Raise :class:`MemoryLimitError` if ``estimate`` exceeds ``limit_bytes`` (None: no limit)."""
    if limit_bytes is None or estimate.total_bytes <= limit_bytes:
        return
    what = "the limit given (--max-memory)" if given else f"{DEFAULT_FRACTION:.0%} of the available memory (--max-memory)"
    raise MemoryLimitError(
        f"this run needs about {estimate.describe()}; more than {format_bytes(limit_bytes)}, {what}. "
        "Use a coarser DEM, fewer samples or a later window, fewer traces (split the track), or --no-sources; "
        "or raise --max-memory"
    )


#: Bytes held per observed value while comparing: the stored value, its power (float64) and the
#: resampled copies on the simulated grid (observed and simulated, float64).
BYTES_PER_OBSERVED_VALUE = 8 + 8 + 8


def observed_shape(path, file_format: str | None, raw_shape=None, variable: str | None = None):
    """(rows, columns, bytes per stored value) of an observed array from its metadata alone (no
    values read), for the formats whose headers give it; None when it cannot be told."""
    from pathlib import Path as _P

    import numpy as np

    if hasattr(path, "power"):  # an ObservedRadargram already read (archive products): its own array
        return (*path.power.shape, path.power.itemsize)
    path = _P(path)
    suffix = path.suffix.lower()
    kind = file_format or {".npy": "npy", ".tif": "image", ".tiff": "image", ".png": "image", ".bin": "raw",
                           ".raw": "raw", ".dat": "raw", ".nc": "netcdf", ".nc4": "netcdf", ".h5": "netcdf",
                           ".hdf5": "netcdf", ".he5": "netcdf"}.get(suffix)  # fmt: skip
    try:
        if kind == "npy":
            with open(path, "rb") as fh:
                version = np.lib.format.read_magic(fh)
                read = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
                shape, _, dtype = read(fh)
            return (*shape, dtype.itemsize) if len(shape) == 2 else None
        if kind == "raw" and raw_shape is not None:
            return int(raw_shape[0]), int(raw_shape[1]), 8
        if kind == "image":
            import rasterio

            with rasterio.open(path) as src:
                return src.height, src.width, np.dtype(src.dtypes[0]).itemsize
        if kind == "netcdf":
            import h5py

            with h5py.File(path, "r") as f:
                sets = []
                f.visititems(lambda name, obj: sets.append((name, obj)) if isinstance(obj, h5py.Dataset) else None)
                two_d = [(n, d) for n, d in sets if d.ndim == 2 and (variable is None or n == variable.strip("/"))]
                if two_d:
                    n, d = max(two_d, key=lambda nd: nd[1].size)
                    return d.shape[0], d.shape[1], d.dtype.itemsize
    except Exception:  # an unreadable header is reported by the reader itself, with its own message
        return None
    return None


def check_observed_memory(path, limit, *, file_format=None, raw_shape=None, variable=None) -> None:
    """Refuse (MemoryLimitError) an observed array whose comparison would need more than ``limit``
    bytes ("auto": :func:`default_limit_bytes`; None: no check), from its header, before reading it."""
    given = limit != "auto"
    if not given:
        limit = default_limit_bytes()
    elif isinstance(limit, str):
        limit = parse_size(limit)
    shape = observed_shape(path, file_format, raw_shape, variable)
    if limit is None or shape is None:
        return
    rows, cols, item = shape
    need = rows * cols * (item + BYTES_PER_OBSERVED_VALUE)
    if need > limit:
        what = "the limit given (--max-memory)" if given else f"{DEFAULT_FRACTION:.0%} of the available memory (--max-memory)"
        raise MemoryLimitError(
            f"{path}: the observed array ({rows:,} x {cols:,} values) needs about {format_bytes(need)} to compare; more "
            f"than {format_bytes(limit)}, {what}. Cut it into shorter pieces along the track, or raise --max-memory"
        )
