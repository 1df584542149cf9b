"""A run's report: one self-contained HTML page to point at echoes and see where they came from.

:func:`write_report` reads a finished run directory — a simulation
(``radargram.nc``, :data:`cluttersim.products.RUN_FILES`) or a comparison
(``comparison.nc`` and ``candidates.csv``, :data:`cluttersim.analysis.compare.COMPARE_FILES`,
with the simulated radargram it was compared with) — and writes one HTML file
that needs no network to open: images are PNG data URIs, the data behind the
pointer readout are compressed arrays in the page, and the CSS and JavaScript
(``cluttersim/report_page/``) are inlined.

The page shows the radargram views (power; side of the track; for a comparison
also the observed radargram and an observed/simulated overlay) with delay,
apparent-depth and trace axes, the track over shaded relief, the run's
parameters, the comparison's candidates and the model's cautions. Pointing at a
radargram reads out, for that trace and sample, the delay, the apparent depth,
the power and the dominant source (position, side, off-nadir distance) and
marks the source and the antenna on the map.

The pointing grid
-----------------
Each radargram is embedded on a grid of at most :data:`MAX_COLUMNS` ×
:data:`MAX_ROWS` cells: runs that are larger are cut into blocks of
``trace_step`` × ``sample_step`` samples and each block is represented by its
strongest sample (whose trace and sample the readout names). Image pixel
(column, row) is grid cell (column, row): the raster is drawn one pixel per
cell and stretched by the browser, so the pointer's cell is exact.

Per cell the page holds, each array compressed with DEFLATE (RFC 1950/1951)
after a byte shuffle, quantised as :class:`Quantiser` describes:

* power in dB, 0.01 dB steps (uint16);
* left and right shares of the power, steps of 1/250 (uint8);
* the dominant source as latitude/longitude offsets from the antenna (int16,
  steps of 1/8 DEM cell, coarser only if the largest offset needs it) and, for
  projected DEMs, as map pixel coordinates (int16, 1/8 pixel), so marks land on
  the relief image exactly (on geographic DEMs the page maps lon/lat linearly);
* the off-nadir distance: the geodesic distance on the body's ellipsoid from the
  antenna's nadir to the source (``pyproj.Geod.inv``; uint16, steps of 1/8 DEM
  cell or largest / 65534).

Side: the largest of the left share, the right share and the nadir-strip share
1 − left − right (:mod:`cluttersim.analysis.attribution`). Apparent depth below the
trace's own nadir surface: d = c (τ − τ_nadir) / (2 √ε′)
(:func:`cluttersim.physics.radar.apparent_depth_m`).
"""

from __future__ import annotations

import base64
import csv
import datetime as _dt
import html
import io
import json
import math
import zlib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import ClassVar

import numpy as np

from .constants import SPEED_OF_LIGHT_M_S
from .errors import ClutterSimError, ConfigError, DemError
from .io.outputs import atomic_paths, check_new
from . import palette
from .plots import hillshade_intensity, power_db

#: Default file name of the report (in the run directory).
REPORT_FILE = "report.html"
#: Largest number of traces embedded one per column (about a wide screen's pixels); longer runs are
#: shown in blocks of traces.
MAX_COLUMNS = 1500
#: Largest number of samples embedded one per row; longer windows are shown in blocks of samples.
MAX_ROWS = 1024
#: Displayed dynamic range of the radargram images, dB below their maximum, when not chosen from the
#: data (:func:`cluttersim.plots.auto_db_range`, the figures' default: the page and the PNGs agree).
DYNAMIC_RANGE_DB = None
#: Step of the embedded power values, dB.
POWER_STEP_DB = 0.01
#: Power more than this far below a grid's maximum is embedded as "below" (dB).
POWER_FLOOR_BELOW_MAX_DB = 600.0
#: Sub-pixel resolution of the embedded map positions (steps per map pixel).
MAP_SUBPIXELS = 8
#: Source positions and distances are embedded to this fraction of a DEM cell (or finer).
CELL_FRACTION = 1.0 / 8.0

# Colours of the page's images: those of every figure (cluttersim.palette), never a copy.
#: Side of the track, RGB 0-255: left orange, right sky blue, nadir strip grey (full brightness).
SIDE_RGB = {k: palette.rgb255(v) for k, v in palette.SIDES.items()}
#: Overlay of a comparison: observed echoes copper, simulated cyan; both together add up to near white.
OVERLAY_RGB = {"observed": palette.rgb255(palette.OVERLAY_OBSERVED), "simulated": palette.rgb255(palette.OVERLAY_SIMULATED)}
#: Colour of samples without data (NaN power).
NO_DATA_RGB = palette.rgb255(palette.NO_DATA)

_PAGE_FILES = ("page.html", "page.css", "page.js")


# --------------------------------------------------------------------------- quantisation


@dataclass(frozen=True)
class Quantiser:
    """Linear quantisation: value = offset + step · code; ``missing`` marks NaN.

    Codes from ``lo`` to ``hi`` hold values; values outside the coded range are
    clipped to it (``lo`` also holds "below the range" for power in dB).
    """

    dtype: str
    offset: float
    step: float
    lo: int
    hi: int
    missing: int

    _LIMITS: ClassVar[dict] = {"<u1": (0, 250, 255), "<u2": (1, 65535, 0), "<i2": (-32767, 32767, -32768)}

    @classmethod
    def spanning(cls, values, dtype: str, *, step: float | None = None, symmetric: bool = False,
                 top: float | None = None, min_step: float = 1e-12) -> "Quantiser":  # fmt: skip
        """A quantiser for the finite ``values``: the given ``step`` (anchored so that ``top``
        or the largest value is exact), else the finest step, not below ``min_step``, that
        covers their range (``symmetric``: −max|v|..max|v| around 0)."""
        lo, hi, missing = cls._LIMITS[dtype]
        v = np.asarray(values, dtype=np.float64)
        finite = v[np.isfinite(v)]
        vmin = float(finite.min()) if finite.size else 0.0
        vmax = float(finite.max()) if finite.size else 0.0
        if symmetric:
            big = max(abs(vmin), abs(vmax))
            s = step or max(big / hi, min_step)
            return cls(dtype, 0.0, s, lo, hi, missing)
        if step is None:
            s = max((vmax - vmin) / (hi - lo), min_step)
            return cls(dtype, vmin - lo * s, s, lo, hi, missing)
        anchor = vmax if top is None else float(top)
        return cls(dtype, anchor - hi * step, float(step), lo, hi, missing)

    def encode(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            codes = np.rint((np.nan_to_num(v, nan=0.0, posinf=np.inf, neginf=-np.inf) - self.offset) / self.step)
        codes = np.clip(np.nan_to_num(codes, posinf=self.hi, neginf=self.lo), self.lo, self.hi)
        codes = np.where(np.isnan(v), self.missing, codes)
        return codes.astype(self.dtype)

    def decode(self, codes) -> np.ndarray:
        c = np.asarray(codes)
        return np.where(c == self.missing, np.nan, self.offset + self.step * c.astype(np.float64))

    def to_json(self) -> dict:
        return {"offset": self.offset, "step": self.step, "lo": self.lo, "hi": self.hi, "missing": self.missing}


def pack_array(codes: np.ndarray) -> str:
    """Base64 of the DEFLATE-compressed (zlib format) little-endian bytes of ``codes``, byte-shuffled:
    all first bytes of the items, then all second bytes (as HDF5's shuffle filter)."""
    a = np.ascontiguousarray(codes)
    raw = a.view(np.uint8).reshape(-1, a.dtype.itemsize).T.tobytes() if a.dtype.itemsize > 1 else a.tobytes()
    return base64.b64encode(zlib.compress(raw, 6)).decode("ascii")


def unpack_array(text: str, dtype: str, shape) -> np.ndarray:
    """Inverse of :func:`pack_array` (the page's JavaScript does the same)."""
    raw = np.frombuffer(zlib.decompress(base64.b64decode(text)), dtype=np.uint8)
    item = np.dtype(dtype).itemsize
    if item > 1:
        raw = raw.reshape(item, -1).T.copy()
    return raw.view(dtype).reshape(shape)


# --------------------------------------------------------------------------- grids


@dataclass(frozen=True)
class GridShape:
    """How a (trace, sample) array is embedded: blocks of ``trace_step`` × ``sample_step``."""

    ntrace: int
    nsample: int
    trace_step: int
    sample_step: int

    @classmethod
    def of(cls, ntrace: int, nsample: int, max_columns: int = MAX_COLUMNS, max_rows: int = MAX_ROWS,
           sample_step: int | None = None) -> "GridShape":  # fmt: skip
        ft = max(1, math.ceil(ntrace / max_columns))
        fs = sample_step or max(1, math.ceil(nsample / max_rows))
        return cls(ntrace, nsample, ft, fs)

    @property
    def columns(self) -> int:
        return math.ceil(self.ntrace / self.trace_step)

    @property
    def rows(self) -> int:
        return math.ceil(self.nsample / self.sample_step)

    @property
    def blocked(self) -> bool:
        return self.trace_step > 1 or self.sample_step > 1

    def to_json(self) -> dict:
        return {"ntrace": self.ntrace, "nsample": self.nsample, "trace_step": self.trace_step,
                "sample_step": self.sample_step, "columns": self.columns, "rows": self.rows}  # fmt: skip


def strongest_in_blocks(power, shape: GridShape) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per block of the grid, the trace and sample of its largest power (the block's first
    sample if none is finite), and the pick code ``dt · sample_step + ds`` within the block.

    Returns arrays of shape (columns, rows): trace index, sample index, pick (uint8).
    """
    ft, fs = shape.trace_step, shape.sample_step
    ncol, nrow = shape.columns, shape.rows
    p = np.asarray(power, dtype=np.float64)
    if not shape.blocked:
        t, s = np.meshgrid(np.arange(ncol), np.arange(nrow), indexing="ij")
        return t, s, np.zeros((ncol, nrow), dtype=np.uint8)
    padded = np.full((ncol * ft, nrow * fs), -np.inf)
    padded[: shape.ntrace, : shape.nsample] = np.where(np.isfinite(p), p, -np.inf)
    blocks = padded.reshape(ncol, ft, nrow, fs).transpose(0, 2, 1, 3).reshape(ncol, nrow, ft * fs)
    pick = blocks.argmax(axis=2)
    t = np.arange(ncol)[:, None] * ft + pick // fs
    s = np.arange(nrow)[None, :] * fs + pick % fs
    return np.minimum(t, shape.ntrace - 1), np.minimum(s, shape.nsample - 1), pick.astype(np.uint8)


# --------------------------------------------------------------------------- images


def _ramp(x, stops) -> np.ndarray:
    """RGB (…, 3) float of a piecewise-linear colour ramp at x in [0, 1]."""
    pos = np.array([s[0] for s in stops])
    cols = np.array([s[1] for s in stops], dtype=np.float64)
    x = np.clip(x, 0.0, 1.0)
    return np.stack([np.interp(x, pos, cols[:, i]) for i in range(3)], axis=-1)


def _level(db, vmax_db: float, range_db: float) -> np.ndarray:
    """0..1 brightness of dB values over [vmax − range, vmax] (−inf → 0, NaN stays NaN)."""
    return np.clip((np.asarray(db, dtype=np.float64) - (vmax_db - range_db)) / range_db, 0.0, 1.0)


def _finite_max(db) -> float:
    finite = np.asarray(db)[np.isfinite(db)]
    return float(finite.max()) if finite.size else 0.0


def power_image(db, vmax_db: float, range_db: float) -> np.ndarray:
    """uint8 RGB (rows = samples, columns = traces) of a (column, row) dB grid: the figures' power
    colour map (:data:`cluttersim.palette.POWER_CMAP`) over [vmax − range, vmax], as
    :func:`cluttersim.plots.plot_radargram` maps it."""
    from matplotlib import colormaps
    from matplotlib.colors import Normalize

    db = np.asarray(db, dtype=np.float64)
    cmap = colormaps[palette.POWER_CMAP]
    with np.errstate(invalid="ignore"):
        rgba = cmap(Normalize(vmin=vmax_db - range_db, vmax=vmax_db, clip=True)(np.nan_to_num(db, nan=-np.inf)))
    rgb = rgba[..., :3] * 255.0
    rgb[np.isnan(db)] = NO_DATA_RGB
    return np.rint(rgb).astype(np.uint8).transpose(1, 0, 2)


def side_image(db, left, right, vmax_db: float, range_db: float) -> np.ndarray:
    """uint8 RGB of the side view: :func:`cluttersim.plots.side_colours` (the side PNG's colours)
    of the (column, row) grid."""
    from .plots import side_colours

    db = np.asarray(db, dtype=np.float64)
    with np.errstate(over="ignore"):
        power = np.where(np.isnan(db), np.nan, 10.0 ** (db / 10.0))
    rgb = side_colours(power, left, right, db_limits=(vmax_db - range_db, vmax_db)) * 255.0
    return np.rint(np.clip(rgb, 0, 255)).astype(np.uint8)


def overlay_image(observed_db, simulated_db, vmax_db: float, range_db: float = 60.0) -> np.ndarray:
    """uint8 RGB of observed (copper) and simulated (cyan) power added: where both echo, near white."""
    a = np.nan_to_num(_level(observed_db, vmax_db, range_db))
    b = np.nan_to_num(_level(simulated_db, vmax_db, range_db))
    rgb = a[..., None] * np.array(OVERLAY_RGB["observed"]) + b[..., None] * np.array(OVERLAY_RGB["simulated"])
    rgb = rgb + 14.0
    rgb[np.isnan(np.asarray(observed_db, dtype=np.float64))] = NO_DATA_RGB
    return np.rint(np.clip(rgb, 0, 255)).astype(np.uint8).transpose(1, 0, 2)


def relief_image(elevation_m) -> np.ndarray:
    """uint8 RGB shaded relief: the figures' hillshade (:func:`cluttersim.plots.hillshade_intensity`)
    tinting heights from sage (low) to sand (high); holes in pale grey."""
    shade, filled, valid = hillshade_intensity(elevation_m)
    lo, hi = (float(filled[valid].min()), float(filled[valid].max())) if valid.any() else (0.0, 1.0)
    t = (filled - lo) / (hi - lo) if hi > lo else np.zeros_like(filled)
    tint = _ramp(t, ((0.0, (120, 140, 118)), (0.5, (190, 182, 150)), (1.0, (236, 226, 200))))
    rgb = tint * (0.35 + 0.75 * shade)[..., None]
    rgb[~valid] = (225, 225, 225)
    return np.rint(np.clip(rgb, 0, 255)).astype(np.uint8)


def png_data_uri(rgb: np.ndarray) -> str:
    """A PNG data URI of a uint8 RGB array (rows, columns, 3)."""
    from PIL import Image  # Pillow: a dependency of matplotlib

    buf = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(rgb), mode="RGB").save(buf, format="PNG", optimize=False, compress_level=6)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


# --------------------------------------------------------------------------- reading a run


@dataclass
class RunInputs:
    """What a report is made from: the simulated radargram, and for a comparison its dataset and candidates."""

    run_dir: Path
    kind: str  # "simulation" or "comparison"
    sim: object  # xarray.Dataset (the simulated radargram)
    sim_path: Path
    comparison: object | None = None  # xarray.Dataset of comparison.nc
    candidates: list | None = None


def run_kind(run_dir) -> str:
    """"comparison" if ``run_dir`` holds ``comparison.nc``, "simulation" if it holds ``radargram.nc``."""
    from .analysis.compare import COMPARE_FILES
    from .products import RUN_FILES

    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise ClutterSimError(f"{run_dir}: not a directory; expected a run directory of cluttersim simulate or compare")
    if (run_dir / COMPARE_FILES["comparison"]).exists():
        return "comparison"
    if (run_dir / RUN_FILES["radargram"]).exists():
        return "simulation"
    raise ClutterSimError(
        f"{run_dir}: neither {RUN_FILES['radargram']} nor {COMPARE_FILES['comparison']} found; "
        "expected a run directory of cluttersim simulate or compare"
    )


#: Variables a simulated radargram needs for the report (besides ``power``).
REQUIRED_VARIABLES = ("window_start", "lat", "lon", "alt", "nadir_delay", "on_dem")


def _open_sim(path, band):
    from .io.radargram import open_radargram

    ds = open_radargram(path, band=band)
    for name in REQUIRED_VARIABLES:
        if name not in ds:
            raise ClutterSimError(f"{path}: variable '{name}' missing; expected a radargram written by cluttersim")
    if "delay" not in ds.coords or ds.sizes["sample"] < 2:
        raise ClutterSimError(f"{path}: expected a 'delay' coordinate of at least 2 samples")
    return ds


def load_inputs(run_dir, *, sim=None, band=None) -> RunInputs:
    """Read a run directory for :func:`write_report` (see there for ``sim`` and ``band``)."""
    import xarray as xr

    from .analysis.compare import COMPARE_FILES
    from .products import RUN_FILES

    run_dir = Path(run_dir)
    kind = run_kind(run_dir)
    if kind == "simulation":
        path = Path(sim) if sim is not None else run_dir / RUN_FILES["radargram"]
        return RunInputs(run_dir, kind, _open_sim(path, band), path)
    cmp_path = run_dir / COMPARE_FILES["comparison"]
    try:
        with xr.open_dataset(cmp_path, engine="h5netcdf") as ds:
            comparison = ds.load()
    except (OSError, ValueError) as exc:
        raise ClutterSimError(f"{cmp_path}: not a readable netCDF comparison ({exc})") from None
    for name in ("observed_power", "simulated_power", "sim_trace", "window_start"):
        if name not in comparison:
            raise ClutterSimError(f"{cmp_path}: variable '{name}' missing; expected a comparison.nc of cluttersim compare")
    if sim is not None:
        sim_path = Path(sim)
    else:
        recorded = str(comparison.attrs.get("simulation", ""))
        tried = [run_dir / RUN_FILES["radargram"]] + ([Path(recorded), run_dir / recorded] if recorded else [])
        found = [p for p in tried if p.is_file()]
        if not found:
            raise ClutterSimError(
                f"{cmp_path}: the simulated radargram it was compared with ({recorded or 'radargram.nc'}) "
                "was not found; give it with --sim PATH"
            )
        sim_path = found[0]
    sim_ds = _open_sim(sim_path, band)
    if comparison.sizes["sample"] != sim_ds.sizes["sample"]:
        raise ClutterSimError(
            f"{sim_path}: has {sim_ds.sizes['sample']} samples per trace but {cmp_path} was made on "
            f"{comparison.sizes['sample']}; expected the simulated radargram of that comparison"
        )
    st = comparison["sim_trace"].values
    if st.size and int(st.max()) >= sim_ds.sizes["trace"]:
        raise ClutterSimError(
            f"{sim_path}: has {sim_ds.sizes['trace']} traces but {cmp_path} matches trace {int(st.max())}; "
            "expected the simulated radargram of that comparison"
        )
    check_same_simulation(comparison, sim_ds, cmp_path, sim_path)
    cand_path = run_dir / COMPARE_FILES["candidates"]
    candidates = _read_candidates(cand_path) if cand_path.exists() else []
    return RunInputs(run_dir, kind, sim_ds, sim_path, comparison, candidates)


def check_same_simulation(comparison, sim_ds, cmp_path, sim_path) -> None:
    """Refuse a simulated radargram other than the one a comparison was made with: each matched
    trace's window start and nadir delay, copied into comparison.nc, must be those of its
    simulated trace (to a thousandth of a sample)."""
    st = comparison["sim_trace"].values
    matched = np.flatnonzero(st >= 0)
    if not matched.size:
        return
    dt = float(sim_ds["delay"].values[1] - sim_ds["delay"].values[0]) if sim_ds.sizes["sample"] > 1 else 1e-9
    rows = st[matched].astype(np.int64)
    for name in ("window_start", "nadir_delay"):
        if name not in comparison or name not in sim_ds:
            continue
        a = comparison[name].values[matched]
        b = sim_ds[name].values[rows]
        both = np.isfinite(a) & np.isfinite(b)
        off = np.flatnonzero(both & (np.abs(a - b) > 1e-3 * dt))
        if off.size:
            i = off[0]
            raise ClutterSimError(
                f"{sim_path}: trace {rows[i]} has {name} {b[i] * 1e6:.6f} µs but {cmp_path} recorded {a[i] * 1e6:.6f} µs "
                "for it; expected the simulated radargram of that comparison"
            )


def _read_candidates(path) -> list[dict]:
    from .analysis.compare import CANDIDATE_COLUMNS

    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        missing = [c for c in CANDIDATE_COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise ClutterSimError(f"{path}: column '{missing[0]}' missing; expected the candidates.csv of cluttersim compare")
        rows = []
        for line, row in enumerate(reader, start=2):
            try:
                rows.append({k: (int(row[k]) if k in ("rank", "trace", "sample", "sim_trace")
                                 else float(row[k]) if row[k] != "" else math.nan)
                             for k in CANDIDATE_COLUMNS})  # fmt: skip
            except ValueError:
                raise ClutterSimError(f"{path}: row {line} has a value that is not a number") from None
    return rows


# --------------------------------------------------------------------------- embedded data


def _json_list(values, digits: int) -> list:
    """A JSON-safe list (NaN/inf → null) rounded to ``digits`` decimals."""
    out = []
    for v in np.asarray(values, dtype=np.float64).ravel():
        out.append(round(float(v), digits) if math.isfinite(v) else None)
    return out


class _Blobs:
    """Arrays packed for the page, by name, with their dtype and shape."""

    def __init__(self):
        self.items: dict[str, dict] = {}

    def add(self, name: str, codes: np.ndarray, quantiser: Quantiser | None = None) -> None:
        entry = {"dtype": codes.dtype.str, "length": int(codes.size), "data": pack_array(codes)}
        if quantiser is not None:
            entry["q"] = quantiser.to_json()
        self.items[name] = entry


def _delay_frame(window_start_s, dt_s):
    """(offset µs added to the sample delay on the axis, axis label, absolute): the absolute two-way
    delay when every trace has the same window start, else the delay after each trace's window start
    (as :func:`cluttersim.plots.radargram_layers`)."""
    ws = np.asarray(window_start_s, dtype=np.float64)
    finite = ws[np.isfinite(ws)]
    if finite.size and np.ptp(finite) <= 1e-3 * dt_s:
        return float(finite[0]) * 1e6, "two-way delay (µs)", True
    return 0.0, "delay after window start (µs)", False


def _sim_grid(ds, shape: GridShape, frame, src, blobs: _Blobs, prefix: str, centroids=None) -> dict:
    """Embed a simulated radargram's pointing grid; returns its JSON description (and images).

    The images use the colour scale of the run's figures (:func:`cluttersim.plots.db_limits`
    of the whole radargram); ``centroids`` (:class:`cluttersim.analysis.sources.SideCentroids`) adds
    each side's power-weighted source centre per cell."""
    from .plots import db_limits

    power = np.asarray(ds["power"].values, dtype=np.float64)
    ti, si, pick = strongest_in_blocks(power, shape)
    db = power_db(power[ti, si])
    vmin_full, vmax = db_limits(ds, dynamic_range_db=DYNAMIC_RANGE_DB)
    range_db = vmax - vmin_full
    q_power = Quantiser.spanning(db, "<u2", step=POWER_STEP_DB, top=vmax)
    floor = vmax - POWER_FLOOR_BELOW_MAX_DB
    blobs.add(f"{prefix}power_db", q_power.encode(np.where(db < floor, -np.inf, db)), q_power)
    if shape.blocked:
        blobs.add(f"{prefix}pick", pick)
    grid = {"shape": shape.to_json(), "vmax_db": vmax, "range_db": range_db, "power_floor_db": floor,
            "sources": False, "centroids": False}  # fmt: skip
    images = {"power": png_data_uri(power_image(db, vmax, range_db))}
    if "left_fraction" in ds and "right_fraction" in ds:
        left = np.asarray(ds["left_fraction"].values, dtype=np.float64)[ti, si]
        right = np.asarray(ds["right_fraction"].values, dtype=np.float64)[ti, si]
        q_share = Quantiser("<u1", 0.0, 1.0 / 250.0, 0, 250, 255)
        blobs.add(f"{prefix}left", q_share.encode(left), q_share)
        blobs.add(f"{prefix}right", q_share.encode(right), q_share)
        images["sides"] = png_data_uri(side_image(db, left, right, vmax, range_db))
        grid["sides"] = True
    if "source_lat" in ds and "source_lon" in ds:
        src_lat = np.asarray(ds["source_lat"].values, dtype=np.float64)[ti, si]
        src_lon = np.asarray(ds["source_lon"].values, dtype=np.float64)[ti, si]
        ant_lat = np.asarray(ds["lat"].values, dtype=np.float64)[ti]
        ant_lon = np.asarray(ds["lon"].values, dtype=np.float64)[ti]
        ok = np.isfinite(src_lat) & np.isfinite(src_lon) & np.isfinite(ant_lat) & np.isfinite(ant_lon)
        dlat = np.where(ok, src_lat - ant_lat, np.nan)
        dlon = np.where(ok, (src_lon - ant_lon + 180.0) % 360.0 - 180.0, np.nan)
        cell_m, cell_deg = _cell_size(src)
        coslat = max(math.cos(math.radians(float(np.nanmax(np.abs(ant_lat))) if np.isfinite(ant_lat).any() else 0.0)), 0.05)
        q_dlat = Quantiser.spanning(dlat, "<i2", symmetric=True, min_step=CELL_FRACTION * cell_deg)
        q_dlon = Quantiser.spanning(dlon, "<i2", symmetric=True, min_step=CELL_FRACTION * cell_deg / coslat)
        blobs.add(f"{prefix}src_dlat", q_dlat.encode(dlat), q_dlat)
        blobs.add(f"{prefix}src_dlon", q_dlon.encode(dlon), q_dlon)
        dist = np.full(src_lat.shape, np.nan)
        mx = np.full(src_lat.shape, np.nan)
        my = np.full(src_lat.shape, np.nan)
        if ok.any():
            _, _, d = src.body.geod().inv(ant_lon[ok], ant_lat[ok], src_lon[ok], src_lat[ok])
            dist[ok] = d
            if not src.is_geographic:
                mx[ok], my[ok] = frame.pixel(src_lon[ok], src_lat[ok])
        q_dist = Quantiser.spanning(np.append(dist, 0.0), "<u2", min_step=CELL_FRACTION * cell_m)
        blobs.add(f"{prefix}offnadir_m", q_dist.encode(dist), q_dist)
        if not src.is_geographic:
            q_map = Quantiser("<i2", 0.0, 1.0 / MAP_SUBPIXELS, -32767, 32767, -32768)
            blobs.add(f"{prefix}src_map_x", q_map.encode(mx), q_map)
            blobs.add(f"{prefix}src_map_y", q_map.encode(my), q_map)
        grid["sources"] = True
        grid["map_xy"] = not src.is_geographic
    if centroids is not None:
        ant_lat = np.asarray(ds["lat"].values, dtype=np.float64)[ti]
        ant_lon = np.asarray(ds["lon"].values, dtype=np.float64)[ti]
        cell_m, _ = _cell_size(src)
        q_map = Quantiser("<i2", 0.0, 1.0 / MAP_SUBPIXELS, -32767, 32767, -32768)
        for side in ("left", "right"):
            lat = np.asarray(centroids.lat[side], dtype=np.float64)[ti, si]
            lon = np.asarray(centroids.lon[side], dtype=np.float64)[ti, si]
            ok = np.isfinite(lat) & np.isfinite(lon) & np.isfinite(ant_lat) & np.isfinite(ant_lon)
            mx, my, dist = (np.full(lat.shape, np.nan) for _ in range(3))
            if ok.any():
                mx[ok], my[ok] = frame.pixel(lon[ok], lat[ok])
                _, _, dist[ok] = src.body.geod().inv(ant_lon[ok], ant_lat[ok], lon[ok], lat[ok])
            blobs.add(f"{prefix}c_{side}_x", q_map.encode(mx), q_map)
            blobs.add(f"{prefix}c_{side}_y", q_map.encode(my), q_map)
            q_dist = Quantiser.spanning(np.append(dist, 0.0), "<u2", min_step=CELL_FRACTION * cell_m)
            blobs.add(f"{prefix}c_{side}_m", q_dist.encode(dist), q_dist)
        grid["centroids"] = True
    return grid, images, db, vmax


def _traces_json(ds, frame, absolute: bool) -> dict:
    """Per-trace values for the page; ``nadir_axis_us`` is the nadir delay in the y axis's frame."""
    lat = np.asarray(ds["lat"].values, dtype=np.float64)
    lon = np.asarray(ds["lon"].values, dtype=np.float64)
    ws = np.asarray(ds["window_start"].values, dtype=np.float64)
    nadir = np.asarray(ds["nadir_delay"].values, dtype=np.float64) if "nadir_delay" in ds else np.full(lat.shape, np.nan)
    mx, my = frame.pixel(lon, lat)
    return {
        "lat": _json_list(lat, 6), "lon": _json_list(lon, 6),
        "window_start_us": _json_list(ws * 1e6, 6),
        "nadir_us": _json_list(nadir * 1e6, 6),
        "nadir_axis_us": _json_list(nadir * 1e6 - (0.0 if absolute else ws * 1e6), 5),
        "map_x": _json_list(mx, 2), "map_y": _json_list(my, 2),
    }  # fmt: skip


@dataclass(frozen=True)
class _MapPixels:
    """lon/lat → pixel of the relief image (columns east, rows south), through the run's MapFrame."""

    frame: object
    width: int
    height: int

    def pixel(self, lon_deg, lat_deg):
        x, y = self.frame.xy(lon_deg, lat_deg)
        west, east, south, north = self.frame.extent
        return ((np.asarray(x) - west) / (east - west) * self.width, (north - np.asarray(y)) / (north - south) * self.height)


def _cell_size(src) -> tuple[float, float]:
    """A DEM cell's size: (metres, degrees of arc on the body's mean radius), the finer of its two sides."""
    radius = src.body.mean_radius_m
    side = min(abs(src.transform.a), abs(src.transform.e))
    if src.is_geographic:
        return math.radians(side) * radius, side
    return side, math.degrees(side / radius)


# --------------------------------------------------------------------------- tables


def _format_value(value) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_format_value(v) for v in value)
    return str(value)


def parameter_sections(inputs: RunInputs, src) -> list[dict]:
    """The parameters table: sections of (key, value) rows from the run's attributes."""
    ds = inputs.sim
    from . import __version__

    sections = []
    run_rows = [("run directory", str(inputs.run_dir)), ("kind", inputs.kind),
                ("made with cluttersim", str(ds.attrs.get("cluttersim_version", "unknown"))),
                ("report by cluttersim", __version__)]  # fmt: skip
    if inputs.kind == "comparison":
        run_rows.append(("simulated radargram", str(inputs.sim_path)))
    sections.append({"title": "run", "rows": run_rows})
    try:
        config = json.loads(ds.attrs.get("cluttersim_config", "{}"))
    except ValueError:
        config = {}
    for table, values in config.items():
        if isinstance(values, dict):
            sections.append({"title": table, "rows": [(k, _format_value(v)) for k, v in values.items()]})
        elif isinstance(values, list):  # [[band]] tables
            for i, entry in enumerate(values):
                if isinstance(entry, dict):
                    sections.append({"title": f"{table} {i + 1}", "rows": [(k, _format_value(v)) for k, v in entry.items()]})
    body = src.body
    sections.append({"title": "DEM", "rows": [
        ("file", str(ds.attrs.get("dem_file", src.path.name))), ("path", str(src.path)),
        ("CRS", src.crs.name if src.crs is not None else "none (sphere given)"),
        ("grid", f"{src.width} × {src.height} cells"),
        ("body", f"{body.name}: semi-major {body.semi_major_m:,.0f} m, semi-minor {body.semi_minor_m:,.0f} m"),
    ]})  # fmt: skip
    lat, lon, alt = (np.asarray(ds[k].values, dtype=np.float64) for k in ("lat", "lon", "alt"))
    rows = [("traces", f"{lat.size}"),
            ("first trace", f"{lat[0]:.5f}° N, {lon[0]:.5f}° E"), ("last trace", f"{lat[-1]:.5f}° N, {lon[-1]:.5f}° E"),
            ("altitude", f"{np.nanmin(alt):,.1f} – {np.nanmax(alt):,.1f} m")]  # fmt: skip
    if lat.size > 1:
        _, _, step = body.geod().inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
        rows.append(("trace spacing (median)", f"{np.median(step):,.1f} m"))
    if "on_dem" in ds:
        rows.append(("traces with nadir on the DEM", f"{int(np.sum(ds['on_dem'].values))} of {lat.size}"))
    sections.append({"title": "track", "rows": rows})
    if inputs.kind == "comparison":
        a = inputs.comparison.attrs

        def us(key):
            v = a.get(key)
            return f"{float(v) * 1e6:+.5f} µs" if v is not None and math.isfinite(float(v)) else "n/a"

        sections.append({"title": "comparison", "rows": [
            ("observed file", str(a.get("observed_file", ""))), ("observed values", str(a.get("observed_values", ""))),
            ("matched by", f"{a.get('match_method', '')} (tolerance {float(a.get('match_tolerance_m', math.nan)):.1f} m)"),
            ("delay offset", f"{us('delay_offset_s')} ± {us('delay_offset_uncertainty_s').lstrip('+')}"),
            ("surface correlation", f"{float(a.get('surface_correlation', math.nan)):.3f}"),
            ("gain", f"{float(a.get('gain_db', math.nan)):+.2f} ± {float(a.get('gain_uncertainty_db', math.nan)):.2f} dB"),
            ("noise floor from", str(a.get("noise_floor_source", ""))),
            ("test", f"false-alarm probability {float(a.get('pfa', math.nan)):g} per sample, "
                     f"{float(a.get('looks', math.nan)):g} look(s), {a.get('integration_traces', '?')} trace(s) "
                     "integrated"),
            ("clutter tolerances", f"+{float(a.get('model_tolerance_db', math.nan)):g} dB, "
                                   f"±{float(a.get('delay_tolerance_s', math.nan)) * 1e6:.4f} µs"),
            ("candidates", f"{len(inputs.candidates or [])}"),
        ]})  # fmt: skip
    return sections


def cautions(inputs: RunInputs, sim_shape: GridShape, permittivity: float, quant_notes: list[str]) -> list[str]:
    """The model's cautions for this run: the general limits and those of its settings."""
    ds = inputs.sim
    out = [
        "Simulated clutter is a model, not ground truth: results that inform decisions (landing sites, "
        "resource or ice assessments) need independent validation.",
        "A missing simulated echo does not prove a subsurface origin: DEM errors and gaps, topography the DEM "
        "does not resolve, scattering the model leaves out, or a wrong radar configuration or track can all "
        "leave surface echoes unexplained.",
        "The source shown for a sample is the single facet contributing most power; many facets often share an "
        "echo, so read the left/right shares, not only the position.",
        "Left and right are exact for the simulated geometry; a real single antenna cannot tell them apart.",
        "Single-bounce surface scattering with one scattering law for the whole DEM: no subsurface, volume or "
        "multiple scattering, no ionosphere.",
        f"Apparent depth d = c·(τ − τ_nadir)/(2√ε′) with ε′ = {permittivity:g}, below the pointed trace's own nadir "
        "surface; the depth axis beside the radargram counts from the median nadir delay.",
    ]
    try:
        cfg = json.loads(ds.attrs.get("cluttersim_config", "{}"))
    except ValueError:
        cfg = {}
    proc = cfg.get("processing", {})
    surface = cfg.get("surface", {})
    if "permittivity" in surface:
        out.append("Specular reflection is physical optics over planar DEM facets, weakened only by rms_height_m "
                   f"({surface.get('rms_height_m', 0)} m): glints from slopes facing the antenna are those of smooth "
                   "facets. Where the specular echo dominates a sample, the source shown is still the densest "
                   "diffuse facet; the left/right shares include the specular power.")  # fmt: skip
    elif proc.get("mode") != "coherent" or proc.get("random_phase", True):
        out.append("No specular reflection ([surface] permittivity not set): over smooth ground the nadir echo "
                   "is weaker than a smooth surface returns (15-20 dB at HF).")  # fmt: skip
    if not proc.get("shadowing", False):
        out.append("Shadowing was off: terrain hidden behind ridges still echoes if it faces the antenna.")
    if proc.get("aperture", "none") == "none":
        out.append("Raw echoes: no along-track processing was emulated, so clutter ahead of and behind the "
                   "antenna is as strong as in unfocused data.")  # fmt: skip
    if proc.get("mode") == "coherent" or "source_lat" not in ds:
        out.append("This run has no source record (coherent mode or --no-sources): the readout gives no source.")
    if "on_dem" in ds:
        off = int(ds.sizes["trace"] - np.sum(ds["on_dem"].values))
        if off:
            out.append(f"{off} trace(s) have their nadir off the DEM and hold no simulated echo.")
    if sim_shape.blocked:
        out.append(f"This run is shown in blocks of {sim_shape.trace_step} trace(s) × {sim_shape.sample_step} "
                   "sample(s); each block shows, and the readout names, its strongest sample.")  # fmt: skip
    out.extend(quant_notes)
    if inputs.kind == "comparison":
        a = inputs.comparison.attrs
        for line in str(a.get("warnings", "")).splitlines():
            out.append(line[:1].upper() + line[1:] + ".")
        out.append("Power in the observed and overlay views is in the observed data's own unit (dB of it); "
                   "the simulated power there is scaled by the fitted gain.")  # fmt: skip
    return out


# --------------------------------------------------------------------------- the page


def _page_file(name: str) -> str:
    return resources.files("cluttersim").joinpath("report_page", name).read_text(encoding="utf-8")


def build_report_html(inputs: RunInputs, src, *, permittivity: float = 3.15, max_columns: int = MAX_COLUMNS,
                      max_rows: int = MAX_ROWS, centroids=None) -> str:  # fmt: skip
    """The report page of a run as one HTML string (see the module docstring); ``centroids``
    (:func:`cluttersim.analysis.sources.side_centroids` of the simulated run) marks each side's centre."""
    from .products import track_map_data
    from .physics.radar import apparent_depth_m

    apparent_depth_m(0.0, permittivity)  # validates ε′ (ConfigError)
    ds = inputs.sim
    dt_s = float(ds["delay"].values[1] - ds["delay"].values[0])
    elevation, frame = track_map_data(src, ds)
    relief = relief_image(elevation)
    pixels = _MapPixels(frame, relief.shape[1], relief.shape[0])
    blobs = _Blobs()

    sim_shape = GridShape.of(ds.sizes["trace"], ds.sizes["sample"], max_columns, max_rows)
    sim_grid, sim_images, _, _ = _sim_grid(ds, sim_shape, pixels, src, blobs, "sim.", centroids)
    offset_us, delay_label, absolute = _delay_frame(ds["window_start"].values, dt_s)
    sim_grid.update({"traces": _traces_json(ds, pixels, absolute), "axis_offset_us": offset_us,
                     "delay_label": delay_label})  # fmt: skip
    grids = {"sim": sim_grid}
    views = [{"id": "power", "grid": "sim", "label": "simulated power" if inputs.kind == "comparison" else "power",
              "image": sim_images["power"], "legend": "power"}]  # fmt: skip
    if "sides" in sim_images:
        views.append({"id": "sides", "grid": "sim", "label": "side of track", "image": sim_images["sides"], "legend": "sides"})
    candidates = []
    if inputs.kind == "comparison":
        cmp = inputs.comparison
        obs = np.asarray(cmp["observed_power"].values, dtype=np.float64)
        simx = np.asarray(cmp["simulated_power"].values, dtype=np.float64)
        obs_shape = GridShape.of(cmp.sizes["trace"], cmp.sizes["sample"], max_columns, max_rows,
                                 sample_step=sim_shape.sample_step)  # fmt: skip
        ti, si, pick = strongest_in_blocks(obs, obs_shape)
        obs_db, simx_db = power_db(obs[ti, si]), power_db(simx[ti, si])
        from .plots import comparison_layers

        obs_layers, _ = comparison_layers(cmp)  # the comparison figures' colour scale
        vmax = max(_finite_max(obs_db), _finite_max(simx_db))
        obs_range = vmax - obs_layers.vmin_db
        q = Quantiser.spanning(obs_db, "<u2", step=POWER_STEP_DB, top=vmax)
        floor = vmax - POWER_FLOOR_BELOW_MAX_DB
        blobs.add("obs.power_db", q.encode(np.where(obs_db < floor, -np.inf, obs_db)), q)
        blobs.add("obs.sim_db", q.encode(np.where(simx_db < floor, -np.inf, simx_db)), q)
        flags = np.zeros(ti.shape, dtype=np.uint8)
        for bit, name in ((1, "detected"), (2, "explained")):
            if name in cmp:
                flags |= (np.asarray(cmp[name].values)[ti, si] > 0).astype(np.uint8) * bit
        blobs.add("obs.flags", flags)
        if obs_shape.blocked:
            blobs.add("obs.pick", pick)
        obs_offset_us, obs_label, obs_absolute = _delay_frame(cmp["window_start"].values, dt_s)
        obs_traces = _traces_json(cmp, pixels, obs_absolute)
        obs_traces["sim_trace"] = [int(v) for v in np.asarray(cmp["sim_trace"].values)]
        grids["obs"] = {"shape": obs_shape.to_json(), "vmax_db": vmax, "range_db": obs_range, "power_floor_db": floor,
                        "sources": False,
                        "traces": obs_traces, "axis_offset_us": obs_offset_us, "delay_label": obs_label}  # fmt: skip
        views = [
            {"id": "observed", "grid": "obs", "label": "observed", "image": png_data_uri(power_image(obs_db, vmax, obs_range)),
             "legend": "power"},
            {"id": "overlay", "grid": "obs", "label": "overlay", "image": png_data_uri(overlay_image(obs_db, simx_db, vmax, obs_range)),
             "legend": "overlay"},
        ] + views  # fmt: skip
        ws = np.asarray(cmp["window_start"].values, dtype=np.float64)
        for c in inputs.candidates or []:
            t = c["trace"]
            k = (c["two_way_delay_us"] * 1e-6 - ws[t]) / dt_s if 0 <= t < ws.size and math.isfinite(ws[t]) else math.nan
            candidates.append({**c, "grid_sample": int(round(k)) if math.isfinite(k) else None})
    steps = blobs.items
    notes = [f"Embedded for the readout: power to {POWER_STEP_DB:g} dB, side shares to 0.4 %"]
    if "sim.src_dlat" in steps:
        lat_step = steps["sim.src_dlat"]["q"]["step"]
        dist_step = steps["sim.offnadir_m"]["q"]["step"]
        notes[0] += (f", source positions to {lat_step:.2g}° (about {lat_step * math.pi / 180 * src.body.semi_major_m:.2g} m) "
                     f"and off-nadir distances to {dist_step:.2g} m")  # fmt: skip
    notes[0] += "."
    west, east, south, north = frame.extent
    mid_lat = 0.5 * (south + north)
    meta = {
        "kind": inputs.kind,
        "title": f"{inputs.run_dir.resolve().name}",
        "generated_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "permittivity": float(permittivity),
        "c_m_s": SPEED_OF_LIGHT_M_S,
        "dt_us": dt_s * 1e6,
        "power_unit": "dBW",
        "grids": grids,
        "views": views,
        "map": {
            "image": png_data_uri(relief), "width": int(relief.shape[1]), "height": int(relief.shape[0]),
            "extent": [west, east, south, north], "axis_labels": list(frame.axis_labels),
            "geographic": bool(src.is_geographic),
            "aspect": float(math.cos(math.radians(mid_lat))) if src.is_geographic else 1.0,
            "elevation_m": [float(np.nanmin(elevation)), float(np.nanmax(elevation))] if np.isfinite(elevation).any() else None,
        },
        "colours": palette.report_colours(),
        "params": parameter_sections(inputs, src),
        "candidates": candidates,
        "cautions": cautions(inputs, sim_shape, permittivity, notes),
    }
    meta_json = json.dumps(meta, ensure_ascii=False, allow_nan=False).replace("</", "<\\/")
    blob_json = json.dumps(blobs.items, allow_nan=False)
    page = _page_file("page.html")
    title = f"cluttersim report — {html.escape(meta['title'])}"
    replacements = {
        "<!--CS:TITLE-->": title,
        "/*CS:STYLE*/": palette.css_variables() + _page_file("page.css"),
        "/*CS:SCRIPT*/": _page_file("page.js").replace("</script", "<\\/script"),
        "<!--CS:META-->": meta_json,
        "<!--CS:BLOBS-->": blob_json,
    }
    for key, value in replacements.items():
        if key not in page:  # pragma: no cover - the packaged template is fixed
            raise RuntimeError(f"report template lacks {key}")
        page = page.replace(key, value, 1)
    return page


def write_report(run_dir, out_path=None, *, permittivity: float = 3.15, overwrite: bool = False, dem=None, sim=None,
                 band=None, max_columns: int = MAX_COLUMNS, max_rows: int = MAX_ROWS, centroids: bool = True,
                 progress: bool = False) -> Path:  # fmt: skip
    """Write the report page of a run directory; returns its path.

    Parameters
    ----------
    run_dir : path
        A directory written by ``cluttersim simulate`` (``radargram.nc``) or
        ``cluttersim compare`` (``comparison.nc``); the kind is detected.
    out_path : path, optional
        The HTML file (default ``run_dir/report.html``); refused if it exists
        unless ``overwrite``; written atomically.
    permittivity : float
        Real relative permittivity ε′ ≥ 1 of the apparent depths.
    dem : path, optional
        The run's DEM if it has moved (the map's shaded relief is read from it).
    sim : path, optional
        The simulated radargram, if not the run's own (for a comparison: the
        one it was compared with, when it has moved).
    band : optional
        Passed to :func:`cluttersim.io.radargram.open_radargram` when given.
    max_columns, max_rows : int
        Size of the embedded pointing grid before samples are grouped in blocks.
    centroids : bool
        Mark each side's power-weighted source centre on the map
        (:func:`cluttersim.analysis.sources.side_centroids`: rebuilds the run's scene from
        its DEM and runs the kernel three more times).
    progress : bool
        Show a progress bar while the centroids are computed.
    """
    from .io.datums import with_recorded_height_unit
    from .io.dem import DemSource

    if not (isinstance(permittivity, (int, float)) and math.isfinite(permittivity) and permittivity >= 1):
        raise ConfigError(f"permittivity {permittivity}: expected a real relative permittivity >= 1")
    run_dir = Path(run_dir)
    out_path = Path(out_path) if out_path is not None else run_dir / REPORT_FILE
    check_new([out_path], overwrite)
    inputs = load_inputs(run_dir, sim=sim, band=band)
    ds = inputs.sim
    dem_path = dem or ds.attrs.get("dem_path")
    if not dem_path:
        raise ClutterSimError(f"{inputs.sim_path}: attribute 'dem_path' missing; give the run's DEM with --dem")
    radius = ds.attrs.get("body_radius_given_m")
    try:
        src = DemSource.open(dem_path, body_radius_m=float(radius) if radius is not None else None)
        src = with_recorded_height_unit(src, ds.attrs)
    except DemError as exc:
        hint = "" if dem else " (the DEM recorded in the run; give its new place with --dem)"
        raise DemError(f"{exc}{hint}") from None
    cents = None
    if centroids and "left_fraction" in ds and "nadir_strip_half_width" in ds:
        from .analysis.sources import load_run, side_centroids

        try:
            cents = side_centroids(load_run(inputs.sim_path.parent, dem=dem_path, band=band), progress=progress)
        except ClutterSimError as exc:
            import warnings

            warnings.warn(f"{inputs.sim_path}: side centroids left out of the report ({exc})", stacklevel=2)
    page = build_report_html(inputs, src, permittivity=float(permittivity), max_columns=max_columns, max_rows=max_rows,
                             centroids=cents)  # fmt: skip
    with atomic_paths([out_path]) as (tmp,):
        tmp.write_text(page, encoding="utf-8")
    return out_path
