"""Long tracks in segments: bounded memory, whatever the track's length.

A track is cut into *segments* of consecutive pulses. Each segment is simulated by
:func:`cluttersim.simulate.simulate` on its own: its own DEM window (the ground its
traces' recording windows can reach, :func:`cluttersim.scene.read_track_window`),
its own facets, freed before the next segment. Everything a trace's result depends
on is that trace's own geometry and the facets within its reach, so a segmented run
equals the one-window run up to float32 rounding of the facets' positions, which are
stored relative to tiles laid out on each window (measured in
``tests/test_segments.py``: power within 2e-5 relative of the sample's peak; the window
starts, from float64 ranges, within 1e-12 s). What would otherwise tie traces together
is kept per trace:

* the recording window start ("auto") is each trace's own earliest echo;
* presum groups never straddle a segment: segment sizes are multiples of ``presum``;
* receiver noise is seeded per pulse by its index in the whole track
  (:func:`cluttersim.physics.noise.add_noise_by_pulse`);
* the platform speed of a Doppler-focused aperture comes from the whole track, and so
  does the height at which an aperture's integration gain (the noise level with
  ``prf_hz``) is taken: the track's median height above the nadir surface
  (:func:`track_gain_height_m`).

Segment size ("auto"): the whole track in one piece when its estimated memory
(:func:`cluttersim.memory.estimate_memory_bytes`) fits :data:`SEGMENT_BUDGET_BYTES`
(and the ``max_memory_bytes`` limit); otherwise, among sizes of
:data:`SEGMENT_UNIT` × 2^k pulses (× presum) that fit, the one that reads the fewest
DEM cells in total (plus :data:`SEGMENT_OVERHEAD_CELLS` per segment for its fixed
costs). If none fits, the track runs in one piece and its memory check refuses it
with the estimate. A diagonal track prefers short segments (a segment's window is its
bounding box); a track along a grid axis, long ones.

Coherent mode is not segmented (its random facet phases are keyed by the facet's
index in the window, and its noise is drawn from one generator): it runs in one piece.

:func:`simulate_in_segments` returns the whole radargram in memory;
:func:`run_segments_to_dir` (``cluttersim simulate`` when a track needs segments)
writes each finished segment to ``OUT/segments/`` at once, resumes from them, and
joins them into ``radargram.nc`` chunk by chunk, never holding the whole radargram.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import shutil
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..io.dem import DemSource
from ..errors import ClutterSimError, OutputExistsError, TrackError
from ..track import Track, TrackOverDem

#: Largest estimated memory of one segment chosen by "auto", bytes (a whole run's peak stays
#: under ~2 GB with the interpreter, the compiled kernels and the output of one segment).
SEGMENT_BUDGET_BYTES = 1_000_000_000
#: Output traces per unit of segment size (segments hold a multiple of this × presum pulses).
SEGMENT_UNIT = 256
#: The fixed cost of a segment (decimated reads, earliest ranges, a file) as DEM cells.
SEGMENT_OVERHEAD_CELLS = 250_000
#: Directory of the finished segments in a run directory.
SEGMENTS_DIR = "segments"
#: Nadir points whose heights estimate the terrain's height range for planning.
_PLAN_SAMPLES = 128


@dataclass(frozen=True)
class Segment:
    """Pulses ``start`` to ``stop`` (exclusive) of a track; ``cells``: its estimated DEM window."""

    index: int
    start: int
    stop: int
    cells: int = 0

    @property
    def pulses(self) -> int:
        return self.stop - self.start


def sub_track(track: Track, start: int, stop: int) -> Track:
    """Pulses ``start:stop`` of a track."""
    t = None if track.time_s is None else track.time_s[start:stop]
    return Track(track.lat_deg[start:stop], track.lon_deg[start:stop], track.alt_m[start:stop], t, source=track.source)


def _estimate(cells: int, pulses: int, config, sources: bool) -> int:
    import numba

    from .. import memory
    from ..signals import OVERSAMPLE, TRACES_PER_BLOCK

    bands = max(1, len(config.band_names))
    pad = 64  # a pulse's padding is a few samples; a generous bound
    est = memory.estimate_memory_bytes(cells, pulses * bands, config.radar.samples, sources=sources,
                                       threads=numba.get_num_threads(), pad_samples=pad,
                                       oversample=OVERSAMPLE, traces_per_block=TRACES_PER_BLOCK)  # fmt: skip
    return est.total_bytes


def _reach_m(src: DemSource, track: Track, config, on_dem) -> np.ndarray:
    """Each trace's ground reach (m) for planning, from the terrain heights at up to
    :data:`_PLAN_SAMPLES` nadir points (widened by half their span and 100 m: the terrain
    beside the track may reach further; each segment's own read finds its exact window)."""
    import rasterio

    from ..scene import _max_range_m, ground_radius_m

    idx = np.flatnonzero(on_dem)
    pick = idx[np.unique(np.linspace(0, idx.size - 1, min(_PLAN_SAMPLES, idx.size)).astype(int))]
    x, y = src.lonlat_to_xy(track.lon_deg[pick], track.lat_deg[pick])
    with rasterio.open(src.path) as ds:
        values = np.array([np.ma.filled(v.astype(float), np.nan)[0]
                           for v in ds.sample(zip(np.atleast_1d(x), np.atleast_1d(y)), masked=True)])  # fmt: skip
    values = values[np.isfinite(values)]
    lo, hi = (float(values.min()), float(values.max())) if values.size else (0.0, 0.0)
    margin = 0.5 * (hi - lo) + 100.0
    h_lo, h_hi = min(0.0, lo - margin), max(0.0, hi + margin)
    return ground_radius_m(src.body, track.alt_m, _max_range_m(track, config, h_lo, 64), h_lo, h_hi)


def _split(ntr: int, size: int) -> list[tuple[int, int]]:
    return [(a, min(a + size, ntr)) for a in range(0, ntr, size)]


def plan_segments(src: DemSource, track: Track, config, *, sources: bool = True, segment_traces="auto",
                  max_memory_bytes="auto", budget_bytes: int | None = None) -> list[Segment]:  # fmt: skip
    """Cut a track into segments (see the module docstring).

    ``segment_traces``: pulses per segment (rounded down to a multiple of presum), "auto",
    or None (one segment). Pulses left over after the last full presum group are dropped
    from the plan (presumming drops them too).
    """
    from .. import memory

    presum = config.processing.presum
    ntr = (len(track) // presum) * presum
    if segment_traces is None or config.processing.mode == "coherent" or ntr == 0:
        return [Segment(0, 0, len(track))]
    if segment_traces != "auto":
        if isinstance(segment_traces, bool) or not isinstance(segment_traces, (int, np.integer)) or segment_traces < 1:
            raise ClutterSimError(f"segment_traces = {segment_traces!r}: expected a whole number >= 1, 'auto' or None")
        size = max(presum, (int(segment_traces) // presum) * presum)
        if size >= ntr:
            return [Segment(0, 0, len(track))]
        return [Segment(i, a, b) for i, (a, b) in enumerate(_split(ntr, size))]
    unit = SEGMENT_UNIT * presum
    if ntr <= unit:
        return [Segment(0, 0, len(track))]
    budget = SEGMENT_BUDGET_BYTES if budget_bytes is None else budget_bytes
    limit = memory.default_limit_bytes() if max_memory_bytes == "auto" else max_memory_bytes
    if isinstance(limit, str):
        limit = memory.parse_size(limit)
    if limit is not None:
        budget = min(budget, int(limit))
    from ..scene import _window_for_radius

    rows, cols = src.lonlat_to_rowcol(track.lon_deg, track.lat_deg)
    on_dem = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
    if not on_dem.any():
        return [Segment(0, 0, len(track))]  # simulate() reports it
    reach = _reach_m(src, track, config, on_dem)

    def cells_of(a, b):
        on = on_dem[a:b]
        if not on.any():
            return 0
        w = _window_for_radius(src, sub_track(track, a, b), on, reach[a:b])
        return 0 if w is None else int(w.width * w.height)

    whole = cells_of(0, ntr)
    if _estimate(whole, ntr, config, sources) <= budget:
        return [Segment(0, 0, len(track), whole)]
    best = None
    size = unit
    while size < ntr:
        parts = _split(ntr, size)
        cells = [cells_of(a, b) for a, b in parts]
        fits = max(_estimate(c, b - a, config, sources) for c, (a, b) in zip(cells, parts)) <= budget
        cost = sum(cells) + SEGMENT_OVERHEAD_CELLS * len(parts)
        if fits and (best is None or cost < best[0]):
            best = (cost, parts, cells)
        if not fits and best is not None:
            break  # larger segments only need more
        size *= 2
    if best is None:  # not even the shortest segments fit: the whole run's memory check says so, with the numbers
        return [Segment(0, 0, len(track), whole)]
    _, parts, cells = best
    return [Segment(i, a, b, c) for i, ((a, b), c) in enumerate(zip(parts, cells))]


# --------------------------------------------------------------------------- one segment


@dataclass(frozen=True)
class SegmentJob(TrackOverDem):
    """One segment's work (:class:`cluttersim.track.TrackOverDem`: DEM path, the segment's arrays,
    memory limit, threads, resume key) and the segment's own: its place in the whole track, the
    track's name, the configuration and :func:`cluttersim.simulate.simulate`'s options."""

    index: int
    start: int
    stop: int
    track_source: str
    config: object
    sources: bool = True
    nadir_strip_m: float | None = None
    first_return_db: float = -20.0
    gain_height_m: float | None = None

    def track_name(self) -> str:
        return self.track_source


@dataclass
class SegmentResult:
    """A finished segment: its radargram (None when no trace is over the DEM), counters, warnings."""

    index: int
    dataset: object
    facet_evaluations: int = 0
    seconds: float = 0.0
    warnings: list[str] = field(default_factory=list)


def make_jobs(src: DemSource, track: Track, config, plan, *, body_radius_m=None, sources=True, nadir_strip_m=None,
              first_return_db=-20.0, max_memory_bytes="auto") -> list[SegmentJob]:  # fmt: skip
    """The jobs of a plan, each with its resume key (:func:`segment_key`)."""
    jobs = []
    gain_h = track_gain_height_m(src, track, config, plan)
    for seg in plan:
        t = sub_track(track, seg.start, seg.stop)
        job = SegmentJob(seg.index, seg.start, seg.stop, track.source, config, sources, nadir_strip_m, first_return_db,
                         gain_h, dem_path=str(src.path.resolve()), body_radius_m=body_radius_m, lat_deg=t.lat_deg,
                         lon_deg=t.lon_deg, alt_m=t.alt_m, time_s=t.time_s, max_memory_bytes=max_memory_bytes)  # fmt: skip
        jobs.append(dataclasses.replace(job, key=segment_key(src, job)))
    return jobs


def track_gain_height_m(src: DemSource, track: Track, config, plan) -> float | None:
    """The whole track's median height above the nadir surface when an aperture's integration
    gain needs it (``prf_hz`` > 0 with an aperture), else None: the nadir heights of each
    segment from a small read around its nadir points, bilinear as in
    :func:`cluttersim.scene.prepare_scene`."""
    proc = config.processing
    if not (proc.prf_hz > 0 and proc.aperture != "none"):
        return None
    heights = np.full(len(track), np.nan)
    for seg in plan:
        part = sub_track(track, seg.start, seg.stop)
        rows, cols = src.lonlat_to_rowcol(part.lon_deg, part.lat_deg)
        on = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
        if not on.any():
            continue
        window = src.window_around(rows[on], cols[on], pad=2)
        if window is None:
            continue
        heights[seg.start : seg.stop] = src.read(window).bilinear_m(part.lon_deg, part.lat_deg)
    return float(np.nanmedian(track.alt_m[: plan[-1].stop] - heights[: plan[-1].stop]))


def segment_key(src: DemSource, job: SegmentJob) -> str:
    """A digest of everything that shapes a segment's result: the DEM (its path and a digest of its
    content, :func:`cluttersim.analysis.survey.dem_digest`, as the survey keys its tracks), the
    configuration and options, the segment's place in the track and its positions."""
    from .survey import dem_digest

    h = hashlib.sha256()
    meta = {"dem": str(src.path.resolve()), "dem_content": dem_digest(src.path), "body_radius_m": job.body_radius_m,
            "config": job.config.to_dict(), "sources": job.sources, "nadir_strip_m": job.nadir_strip_m,
            "first_return_db": job.first_return_db, "start": job.start, "stop": job.stop,
            "gain_height_m": job.gain_height_m}  # fmt: skip
    h.update(json.dumps(meta, sort_keys=True, default=str).encode())
    for a in (job.lat_deg, job.lon_deg, job.alt_m) + (() if job.time_s is None else (job.time_s,)):
        h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
    return h.hexdigest()


def run_segment(job: SegmentJob, src: DemSource | None = None) -> SegmentResult:
    """Simulate one segment (in this process or a worker): its radargram with the trace
    coordinate numbered along the whole track."""
    from ..simulate import RunStats, simulate

    t0 = time.perf_counter()
    if job.numba_threads is not None:
        import numba

        numba.set_num_threads(max(1, min(job.numba_threads, numba.config.NUMBA_NUM_THREADS)))
    src = src if src is not None else DemSource.open(job.dem_path, job.body_radius_m)
    track = job.track()
    rows, cols = src.lonlat_to_rowcol(track.lon_deg, track.lat_deg)
    if not np.any((rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)):
        return SegmentResult(job.index, None, 0, time.perf_counter() - t0)
    stats = RunStats()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ds = simulate(src, track, job.config, body_radius_m=job.body_radius_m, stats=stats, sources=job.sources,
                      nadir_strip_m=job.nadir_strip_m, first_return_db=job.first_return_db,
                      max_memory_bytes=job.max_memory_bytes, segment_traces=None, first_pulse=job.start,
                      require_echo=False, gain_height_m=job.gain_height_m)  # fmt: skip
    presum = job.config.processing.presum
    first = job.start // presum
    ds = ds.assign_coords(trace=("trace", np.arange(first, first + ds.sizes["trace"]), ds["trace"].attrs))
    ds.attrs["facet_evaluations"] = stats.facet_evaluations
    texts = [str(w.message) for w in caught if issubclass(w.category, UserWarning)
             and "are not over the DEM" not in str(w.message)]  # fmt: skip
    return SegmentResult(job.index, ds, stats.facet_evaluations, time.perf_counter() - t0, list(dict.fromkeys(texts)))


def empty_segment(template, job: SegmentJob):
    """The radargram of a segment with no trace over the DEM, shaped like ``template``
    (another segment): NaN everywhere but the antenna positions (and times), on_dem 0."""
    import xarray as xr

    from ..presum import presum_track

    presum = job.config.processing.presum
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        track = presum_track(job.track(), presum)
    n = len(track)
    first = job.start // presum
    coords = {name: c for name, c in template.coords.items() if "trace" not in c.dims}
    coords["trace"] = ("trace", np.arange(first, first + n), template["trace"].attrs)
    positions = {"lat": track.lat_deg, "lon": track.lon_deg, "alt": track.alt_m, "time": track.time_s}
    for name, c in template.coords.items():  # lat, lon, alt, time, distance: coordinates on trace
        if name == "trace" or "trace" not in c.dims:
            continue
        values = positions.get(name)
        if values is None or c.dtype.kind != "f":
            values = np.full(n, 0 if c.dtype.kind in "iu" else np.nan, dtype=c.dtype)
        coords[name] = ("trace", np.asarray(values, dtype=c.dtype), c.attrs)
    data = {}
    for name, var in template.data_vars.items():
        if "trace" not in var.dims:
            data[name] = var
            continue
        shape = tuple(n if d == "trace" else template.sizes[d] for d in var.dims)
        fill = 0 if var.dtype.kind in "iu" else np.nan
        data[name] = (var.dims, np.full(shape, fill, dtype=var.dtype), var.attrs)
    ds = xr.Dataset(data, coords=coords, attrs={**template.attrs, "facet_evaluations": 0})
    for name, values in positions.items():
        if name in ds.data_vars and values is not None and ds[name].dtype.kind == "f":
            ds[name].values[...] = values
    return ds


def _whole_track_distance(ds):
    """The along-track ``distance`` coordinate counted from the whole track's first trace (each
    segment counts from its own)."""
    from ..io.radargram import with_trace_coordinates

    if "distance" not in ds.variables:
        return ds
    return with_trace_coordinates(ds.drop_vars("distance"))


# --------------------------------------------------------------------------- in memory


def simulate_in_segments(src: DemSource, track: Track, config, plan, *, body_radius_m=None, progress=False, stats=None,
                         sources=True, nadir_strip_m=None, first_return_db=-20.0, max_memory_bytes="auto"):  # fmt: skip
    """Simulate a track segment after segment and join the radargrams in memory (see
    :func:`run_segments_to_dir` for the streamed form)."""
    import xarray as xr
    from tqdm.auto import tqdm

    from ..simulate import RunStats

    t0 = time.perf_counter()
    stats = stats if stats is not None else RunStats()
    _warn_off_dem(src, track)
    _warn_dropped(track, config, plan)
    jobs = make_jobs(src, track, config, plan, body_radius_m=body_radius_m, sources=sources,
                     nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
                     max_memory_bytes=max_memory_bytes)  # fmt: skip
    results = {}
    seen = []
    with tqdm(total=plan[-1].stop, unit="trace", delay=1.0, disable=not progress, desc="simulating") as bar:
        for job in jobs:
            res = run_segment(job, src)
            results[job.index] = res
            _add_warnings(seen, res.warnings)
            bar.update(job.stop - job.start)
    datasets = _complete(results, jobs)
    ds = xr.concat(datasets, dim="trace", data_vars="minimal", coords="minimal", compat="override",
                   combine_attrs="override")  # fmt: skip
    ds = _whole_track_distance(ds)
    for w in seen:
        warnings.warn(w, stacklevel=3)
    stats.facet_evaluations = sum(r.facet_evaluations for r in results.values())
    stats.seconds_total = time.perf_counter() - t0
    _finish_attrs(ds, stats.facet_evaluations, plan)
    return ds


def _complete(results: dict, jobs) -> list:
    """Segment radargrams in order, with those off the DEM filled from one that is not."""
    template = next((r.dataset for r in results.values() if r.dataset is not None), None)
    if template is None:
        raise TrackError(f"{jobs[0].track_source}: no trace lies over the DEM; check lat/lon and the DEM's extent")
    return [results[j.index].dataset if results[j.index].dataset is not None else empty_segment(template, j)
            for j in jobs]  # fmt: skip


def _finish_attrs(ds, facet_evaluations: int, plan) -> None:
    ds.attrs["facet_evaluations"] = int(facet_evaluations)
    ds.attrs["segments"] = len(plan)
    ds.attrs["segment_pulses"] = int(max(s.pulses for s in plan))


def _add_warnings(seen: list[str], new) -> None:
    """Keep one of each warning: segments repeat the same one with their own numbers."""
    keys = {re.sub(r"\d[\d.,]*", "#", w) for w in seen}
    for w in new:
        key = re.sub(r"\d[\d.,]*", "#", w)
        if key not in keys:
            keys.add(key)
            seen.append(w)


def _warn_off_dem(src: DemSource, track: Track) -> None:
    rows, cols = src.lonlat_to_rowcol(track.lon_deg, track.lat_deg)
    on = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
    if not on.any():
        raise TrackError(f"{track.source}: no trace lies over the DEM {src.path.name}; check lat/lon and the DEM's extent")
    if not on.all():
        warnings.warn(f"{track.source}: {int((~on).sum())} of {len(track)} traces are not over the DEM; they are "
                      "filled with NaN", stacklevel=4)  # fmt: skip


def _warn_dropped(track: Track, config, plan) -> None:
    left = len(track) - plan[-1].stop
    if left:
        presum = config.processing.presum
        warnings.warn(f"{track.source}: {len(track)} pulses are not a multiple of presum = {presum}; the last {left} "
                      "are dropped", stacklevel=4)  # fmt: skip


# --------------------------------------------------------------------------- streamed to a run directory


@dataclass
class SegmentedRun:
    """What a segmented run to a directory did."""

    segments: int
    resumed: int
    computed: int
    facet_evaluations: int
    seconds: float
    warnings: list[str] = field(default_factory=list)


def segment_file_name(index: int) -> str:
    return f"{index:05d}.nc"


def read_segment_key(path: Path) -> str:
    """The key recorded in a finished segment's file."""
    import h5py

    try:
        with h5py.File(path, "r") as f:
            key = f.attrs.get("segment_key")
    except OSError as exc:
        raise ClutterSimError(f"{path}: not a readable segment file ({exc}); delete it to recompute the segment") from None
    if key is None:
        raise ClutterSimError(f"{path}: no segment_key attribute; expected a cluttersim segment file (delete it)")
    return key.decode() if isinstance(key, bytes) else str(key)


def run_segments_to_dir(src: DemSource, track: Track, config, plan, out_dir, paths: dict, *, body_radius_m=None,
                        overwrite=False, progress=False, sources=True, nadir_strip_m=None, first_return_db=-20.0,
                        max_memory_bytes="auto", permittivity=3.15, engine=None, on_segment=None,
                        figures=None) -> SegmentedRun:  # fmt: skip
    """Simulate a track in segments into a run directory, streaming.

    Each finished segment is written at once (atomically) to ``OUT/segments/NNNNN.nc``
    with a key of everything that shaped it (:func:`segment_key`: DEM path and size,
    configuration, options, positions). Run again after an interruption: segments
    with the same key are read back, not recomputed; one with another key stops the
    run (:class:`OutputExistsError`) unless ``overwrite``, which recomputes every
    segment. Once all are finished they are joined chunk by chunk into
    ``radargram.nc`` (never the whole radargram in memory), the figures are drawn
    from it (every k-th trace when there are more than the figure can show), and
    ``OUT/segments/`` is removed. ``figures``: how they are drawn and saved
    (:class:`cluttersim.products.FigureOptions`: dpi, png/pdf/svg, dB range; the names in
    ``paths`` carry the format's suffix, :func:`cluttersim.products.run_files`).

    ``engine``: None (this process) or a :class:`cluttersim.analysis.engines.Engine` with a Dask
    scheduler: the segments run as Dask tasks carrying paths and arrays; the results
    are the same bytes as in this process.
    """
    from tqdm.auto import tqdm

    from ..io.radargram import write_netcdf_to
    from ..io.outputs import hold_interrupts
    from .survey import _remove_stale_temporaries

    t0 = time.perf_counter()
    out_dir = Path(out_dir)
    seg_dir = out_dir / SEGMENTS_DIR
    _warn_off_dem(src, track)
    _warn_dropped(track, config, plan)
    jobs = make_jobs(src, track, config, plan, body_radius_m=body_radius_m, sources=sources,
                     nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
                     max_memory_bytes=max_memory_bytes)  # fmt: skip
    _remove_stale_temporaries(seg_dir)
    finished, todo = {}, []
    for job in jobs:
        path = seg_dir / segment_file_name(job.index)
        if path.exists() and not overwrite:
            if read_segment_key(path) != job.key:
                raise OutputExistsError(f"{path}: made by a run with other arguments (DEM, radar, options or track); "
                                        "pass --overwrite to recompute it, or choose another --out")  # fmt: skip
            finished[job.index] = path
        else:
            todo.append(job)
    resumed = len(finished)
    empty, evaluations, seen = [], 0, []
    with tqdm(total=plan[-1].stop, initial=sum(j.stop - j.start for j in jobs if j.index in finished), unit="trace",
              delay=1.0, disable=not progress, desc="simulating") as bar:  # fmt: skip

        def on_result(res: SegmentResult) -> None:
            nonlocal evaluations
            job = jobs[res.index]
            if res.dataset is None:
                empty.append(job)
            else:
                res.dataset.attrs["segment_key"] = job.key
                path = seg_dir / segment_file_name(job.index)
                with hold_interrupts():
                    seg_dir.mkdir(parents=True, exist_ok=True)
                    from ..io.outputs import atomic_paths

                    with atomic_paths([path]) as (tmp,):
                        write_netcdf_to(res.dataset, tmp)
                finished[job.index] = path
            evaluations += res.facet_evaluations
            _add_warnings(seen, res.warnings)
            bar.update(job.stop - job.start)
            if on_segment is not None:
                on_segment(res)

        if engine is None or not engine.uses_dask:
            for job in todo:
                on_result(run_segment(job, src))
        else:
            from .engines import run_jobs

            run_jobs(todo, engine, on_result, run_segment, _segment_task_name)
    for w in seen:
        warnings.warn(w, stacklevel=2)
    if not finished:
        raise TrackError(f"{track.source}: no trace lies over the DEM {src.path.name}; check lat/lon and the DEM's extent")
    computed = {j.index for j in todo}
    evaluations += sum(_segment_evaluations(path) for i, path in finished.items() if i not in computed)
    join_segments(src, jobs, finished, plan, paths, evaluations, permittivity=permittivity, figures=figures)
    shutil.rmtree(seg_dir, ignore_errors=True)
    return SegmentedRun(len(plan), resumed, len(todo), evaluations, time.perf_counter() - t0, seen)


def _segment_evaluations(path: Path) -> int:
    import h5py

    with h5py.File(path, "r") as f:
        return int(np.ravel(f.attrs.get("facet_evaluations", 0))[0])


#: Output traces per chunk when the segments are joined (and per HDF5 chunk of radargram.nc).
JOIN_CHUNK_TRACES = 256
#: Most traces drawn in a figure of a streamed run (every k-th trace beyond that).
PICTURE_TRACES = 4000


def join_segments(src: DemSource, jobs, finished: dict, plan, paths: dict, facet_evaluations: int, *,
                  permittivity: float = 3.15, figures=None) -> None:  # fmt: skip
    """Join the finished segments into ``paths['radargram']`` chunk by chunk and draw the
    figures from it (atomically, all products together; ``figures``:
    :class:`cluttersim.products.FigureOptions`)."""
    import xarray as xr

    from ..io.outputs import atomic_paths
    from ..products import write_figures
    from ..io.radargram import open_radargram_lazy

    opened = {i: xr.open_dataset(p, engine="h5netcdf", chunks={}) for i, p in finished.items()}
    try:
        template = next(iter(opened.values()))
        parts = []
        for job in jobs:
            if job.index in opened:
                parts.append(opened[job.index])
            else:
                parts.append(empty_segment(template.isel(trace=slice(0, 1)).load(), job).chunk({"trace": JOIN_CHUNK_TRACES}))
        ds = xr.concat(parts, dim="trace", data_vars="minimal", coords="minimal", compat="override",
                       combine_attrs="override")  # fmt: skip
        ds = _whole_track_distance(ds)
        ds.attrs.pop("segment_key", None)
        _finish_attrs(ds, facet_evaluations, plan)
        ds = ds.chunk({"trace": JOIN_CHUNK_TRACES})
        keys = list(paths)
        with atomic_paths([paths[k] for k in keys]) as temps:
            tmp = dict(zip(keys, temps))
            _write_streamed_netcdf(ds, tmp["radargram"])
            with open_radargram_lazy(tmp["radargram"]) as full:
                write_figures(full, src, {k: v for k, v in tmp.items() if k != "radargram"}, permittivity=permittivity,
                              max_traces=PICTURE_TRACES, figures=figures)  # fmt: skip
    finally:
        for d in opened.values():
            d.close()


def _write_streamed_netcdf(ds, path) -> None:
    """Write a dask-backed radargram chunk by chunk: the (trace, sample) arrays deflated with the
    shuffle filter in chunks of :data:`JOIN_CHUNK_TRACES` traces, as :func:`cluttersim.io.radargram.write_netcdf_to`."""
    import dask

    from ..io.radargram import _DEFLATE_LEVEL, _DEFLATED

    encoding = {}
    for name in _DEFLATED:
        if name in ds:
            shape = ds[name].shape
            encoding[name] = {"zlib": True, "complevel": _DEFLATE_LEVEL, "shuffle": True,
                              "chunksizes": (1,) * (len(shape) - 2) + (min(JOIN_CHUNK_TRACES, shape[-2]), shape[-1])}  # fmt: skip
    for name in ds.variables:
        ds[name].encoding.pop("chunksizes", None)
        ds[name].encoding.pop("preferred_chunks", None)
    with dask.config.set(scheduler="threads", num_workers=2):
        ds.to_netcdf(path, engine="h5netcdf", encoding=encoding, format="NETCDF4")


# --------------------------------------------------------------------------- Dask


def _segment_task_name(job: SegmentJob) -> str:
    return f"cluttersim-segment-{job.key[:16]}-{job.index}"