"""Track planning (``cluttersim plan``): which track sees a target through the least clutter?

Given a target (a point, or a small polygon, on the DEM), the depth range where the
subsurface matters, the radar and the allowed geometry, candidate tracks through the
target are simulated and scored, coarse to fine::

    PlanConfig ──► candidates (heading × altitude × cross-track offset) ──► candidate_track
       level 1: every heading of the range at the coarse step, for each (altitude, offset)
       level n: around the best REFINE_BEST headings of each (altitude, offset), step / 3, until the fine step
    [PlanJob] ──► survey engines (engines.run_jobs: local processes or Dask) ──► plan_candidate:
       simulate() (source record) ──► depth_window_index_db ──► objective at the target's traces
    all results ──► ranked table (plan.csv), best track (best_track.csv), polar plot of the
                    objective vs heading, best and worst radargrams side by side

Objective. For each trace, the clutter index of :func:`cluttersim.analysis.clutter_index.clutter_index`
evaluated over the target's depth window only: samples between the nadir echo and the
apparent depth ``depth_min`` are left out (outside the nadir echo's main lobe), the window
ends at ``depth_max`` (apparent depths for the real permittivity ε′). The candidate's
objective is the largest index over the target's traces (those whose nadir lies within
``target_radius_m`` of the target point, or inside the target polygon): the worst case at
the target, lower is better. A candidate that has no trace on the target scores +inf.

Why the raw index and not the survey map's index relative to level ground: an echo from the
target competes with every surface echo arriving at its delay, the off-nadir returns of level
ground included, and both are scaled by the same nadir surface echo. Level ground's share
changes with the geometry (altitude, offset) that the search varies, so subtracting it would
rank an altitude where level ground alone already hides the target as well as one where
nothing does. The survey map subtracts it for another question (where does *topography* add
clutter); here it is only a reference (README, Planning). With ``PlanConfig.dem_error`` the
candidates are ranked instead by the probability, over DEM realisations
(:mod:`cluttersim.analysis.dem_error`, simulated on the target's traces only), that the objective reaches
``threshold_db`` (ties broken by the error-free objective).

What makes headings differ. A trace's ranges to the terrain do not depend on the direction
of travel, so with an isotropic antenna and raw (unprocessed) echoes the clutter at a single
trace is the same for every heading; the heading matters through the along-track processing
([processing] aperture: clutter ahead and behind is suppressed, clutter abeam is not), the
antenna pattern, and which traces cross an extended target. Altitude and, for airborne
lines, the cross-track offset change the ranges themselves.

Geometry. Orbital candidates fly at ``altitudes_m`` above the reference surface; airborne
ones at ``altitudes_m`` above the DEM's height at the target (a level line). A candidate is a
geodesic of length ``track_length_m`` centred abeam of the target (``offset_m`` to the right
of the direction of travel), traces every ``trace_spacing_m``. Headings are degrees clockwise
from north; a heading and its reverse give the same radargram in reverse trace order, so the
default range is 0–180°.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..config import SimulationConfig, default_config
from ..io.dem import DemSource
from ..errors import ConfigError, TrackError
from ..io.outputs import atomic_paths, check_new
from ..physics.radar import delay_after_surface_s
from ..track import Track, TrackOverDem

#: Products of a plan directory.
PLAN_FILES = {"table": "plan.csv", "best_track": "best_track.csv", "polar": "objective_polar.png",
              "best_worst": "best_worst.png"}  # fmt: skip
PLATFORMS = ("orbital", "airborne")
#: Headings refined at each level of the search, per (altitude, offset): the best few, so that a
#: second basin the coarse step barely sampled is not dropped at once.
REFINE_BEST = 2


@dataclass(frozen=True)
class PlanTarget:
    """Where the subsurface matters: a point (``lon_deg``, ``lat_deg``) with ``radius_m``, or a
    polygon (``polygon``: ((lon, lat), ...), at least 3 vertices; its vertex mean is the point)."""

    lon_deg: float
    lat_deg: float
    radius_m: float = 1000.0
    polygon: tuple[tuple[float, float], ...] | None = None

    def __post_init__(self):
        if not (math.isfinite(self.lon_deg) and -90 <= self.lat_deg <= 90):
            raise ConfigError(f"target lat = {self.lat_deg}, lon = {self.lon_deg}: expected degrees with -90 <= lat <= 90 "
                              "and a finite lon")
        if not (math.isfinite(self.radius_m) and self.radius_m > 0):
            raise ConfigError(f"target radius_m = {self.radius_m!r}: expected a positive distance in metres")
        if self.polygon is not None and len(self.polygon) < 3:
            raise ConfigError(f"target polygon: {len(self.polygon)} vertices, expected at least 3")

    @classmethod
    def from_polygon_csv(cls, path) -> "PlanTarget":
        """A polygon from a CSV with columns lon, lat (one vertex per row)."""
        path = Path(path)
        try:
            with path.open(newline="", encoding="utf-8") as fh:
                rows = list(csv.DictReader(fh))
        except OSError as exc:
            raise ConfigError(f"{path}: cannot read the target polygon ({exc})") from None
        verts = []
        for i, row in enumerate(rows, start=2):
            try:
                verts.append((float(row["lon"]), float(row["lat"])))
            except (KeyError, TypeError, ValueError):
                raise ConfigError(f"{path}: row {i}: expected numeric columns lon, lat") from None
        if len(verts) < 3:
            raise ConfigError(f"{path}: {len(verts)} vertices, expected at least 3 rows of lon, lat")
        lon, lat = np.mean(verts, axis=0)
        return cls(float(lon), float(lat), polygon=tuple(verts))

    def on_target(self, body, lon_deg, lat_deg) -> np.ndarray:
        """Which nadir points lie on the target (within the radius, or inside the polygon)."""
        lon_deg, lat_deg = np.asarray(lon_deg, float), np.asarray(lat_deg, float)
        if self.polygon is not None:
            from matplotlib.path import Path as MplPath

            verts = np.array(self.polygon)
            dlon = (lon_deg - verts[0, 0] + 180.0) % 360.0 - 180.0 + verts[0, 0]
            return MplPath(verts).contains_points(np.column_stack([dlon, lat_deg]))
        _, _, dist = body.geod().inv(np.full(lon_deg.shape, self.lon_deg), np.full(lat_deg.shape, self.lat_deg),
                                     lon_deg, lat_deg)  # fmt: skip
        return np.asarray(dist) <= self.radius_m + 1e-3  # 1 mm: traces exactly at the radius count on every heading


@dataclass(frozen=True)
class PlanConfig:
    """What to plan for and which geometry is allowed (the options of ``cluttersim plan``)."""

    target: PlanTarget
    depth_m: tuple[float, float]
    altitudes_m: tuple[float, ...]
    platform: str = "orbital"
    headings_deg: tuple[float, float] = (0.0, 180.0)
    offsets_m: tuple[float, ...] = (0.0,)
    coarse_step_deg: float = 15.0
    fine_step_deg: float = 1.0
    track_length_m: float = 40e3
    trace_spacing_m: float = 500.0
    permittivity: float = 3.15
    threshold_db: float = 0.0
    dem_error: object | None = None  # a DemErrorConfig: rank by P(objective ≥ threshold_db) under DEM error

    def __post_init__(self):
        d0, d1 = self.depth_m
        if not (math.isfinite(d0) and math.isfinite(d1) and 0 <= d0 < d1):
            raise ConfigError(f"depth {d0} {d1}: expected MIN MAX apparent depths in metres, 0 <= MIN < MAX")
        if self.platform not in PLATFORMS:
            raise ConfigError(f"platform {self.platform!r}: expected one of {', '.join(PLATFORMS)}")
        if not self.altitudes_m or not all(math.isfinite(a) and a > 0 for a in self.altitudes_m):
            raise ConfigError(f"altitudes {self.altitudes_m}: expected one or more positive altitudes in metres")
        if self.platform == "orbital" and any(o != 0 for o in self.offsets_m):
            raise ConfigError("offsets: cross-track offsets are for airborne lines (--platform airborne)")
        if not self.offsets_m or not all(math.isfinite(o) for o in self.offsets_m):
            raise ConfigError(f"offsets {self.offsets_m}: expected cross-track offsets in metres")
        h0, h1 = self.headings_deg
        if not (math.isfinite(h0) and math.isfinite(h1) and h0 <= h1 and h1 - h0 <= 360):
            raise ConfigError(f"headings {h0} {h1}: expected FROM TO in degrees, FROM <= TO, at most 360 apart")
        for name in ("coarse_step_deg", "fine_step_deg", "track_length_m", "trace_spacing_m"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise ConfigError(f"{name.replace('_', '-')} = {v!r}: expected a positive number")
        if self.fine_step_deg > self.coarse_step_deg:
            raise ConfigError(f"fine-step-deg {self.fine_step_deg} is larger than coarse-step-deg {self.coarse_step_deg}")
        if not (math.isfinite(self.permittivity) and self.permittivity >= 1):
            raise ConfigError(f"permittivity {self.permittivity}: expected a real relative permittivity >= 1")
        if self.track_length_m < self.trace_spacing_m:
            raise ConfigError("track-length-km: shorter than one trace spacing; expected a longer track")

    def headings(self, step: float) -> np.ndarray:
        """The headings of the range at ``step`` (a full turn does not repeat its start)."""
        h0, h1 = self.headings_deg
        n = int(math.floor((h1 - h0) / step + 1e-9))
        out = h0 + step * np.arange(n + 1)
        if h1 - h0 >= 180.0 - 1e-9 and (out[-1] - out[0]) % 180.0 < 1e-9 and out.size > 1:
            out = out[:-1]  # 0..180: 180 is 0 reversed
        return out


@dataclass(frozen=True)
class Candidate:
    """One candidate track's geometry."""

    heading_deg: float
    alt_m: float
    offset_m: float

    @property
    def id(self) -> str:
        return f"h{self.heading_deg:07.3f}_a{self.alt_m:.0f}_o{self.offset_m:+.0f}"


def target_height_m(src: DemSource, target: PlanTarget) -> float:
    """The DEM's height at the target point (bilinear)."""
    rows, cols = src.lonlat_to_rowcol(np.array([target.lon_deg]), np.array([target.lat_deg]))
    if not (-0.5 <= rows[0] <= src.height - 0.5 and -0.5 <= cols[0] <= src.width - 0.5):
        raise TrackError(f"target {target.lon_deg} {target.lat_deg}: not on the DEM {src.path.name}")
    window = src.read(src.window_around(rows, cols, pad=2))
    h = float(window.bilinear_m(np.array([target.lon_deg]), np.array([target.lat_deg]))[0])
    if not math.isfinite(h):
        raise TrackError(f"target {target.lon_deg} {target.lat_deg}: the DEM has no height there (nodata)")
    return h


def candidate_track(body, plan: PlanConfig, cand: Candidate, ground_m: float = 0.0) -> Track:
    """The candidate's track: a geodesic through the point ``offset_m`` right of the target, at
    ``heading_deg`` there; altitude ``alt_m`` (+ ``ground_m`` for airborne lines)."""
    geod = body.geod()
    t = plan.target
    lon_c, lat_c = t.lon_deg, t.lat_deg
    if cand.offset_m != 0:
        lon_c, lat_c, _ = geod.fwd(lon_c, lat_c, cand.heading_deg + 90.0, cand.offset_m)
    n_half = int(math.floor(0.5 * plan.track_length_m / plan.trace_spacing_m))
    s = plan.trace_spacing_m * np.arange(-n_half, n_half + 1)
    az = np.where(s < 0, cand.heading_deg + 180.0, cand.heading_deg)
    lon, lat, _ = geod.fwd(np.full(s.size, lon_c), np.full(s.size, lat_c), az, np.abs(s))
    alt = cand.alt_m + (ground_m if plan.platform == "airborne" else 0.0)
    return Track(np.asarray(lat), np.asarray(lon), np.full(s.size, alt), source=cand.id)


# --------------------------------------------------------------------------- one candidate


@dataclass(frozen=True)
class PlanJob(TrackOverDem):
    """One candidate for a worker (:class:`cluttersim.track.TrackOverDem`: DEM path, track arrays,
    memory limit, threads, key) and the planner's own: the candidate's id, its traces on the
    target, the configuration and the objective's depth window."""

    track_id: str
    on_target: np.ndarray
    sim_config: SimulationConfig
    depth_m: tuple[float, float]
    permittivity: float
    threshold_db: float
    dem_error: object | None = None  # DemErrorConfig: also the probability under DEM error

    def track_name(self) -> str:
        return self.track_id


@dataclass
class CandidateResult:
    """A candidate's per-trace index over the depth window and its objective."""

    track_id: str
    index_db: np.ndarray
    on_target: np.ndarray
    objective_db: float
    warnings: list[str] = field(default_factory=list)
    seconds: float = 0.0
    probability: float = math.nan
    probability_se: float = math.nan


def depth_window_index_db(ds, depth_m, permittivity: float, threshold_db: float = 0.0) -> np.ndarray:
    """Per trace, :func:`cluttersim.analysis.clutter_index.clutter_index` over the apparent depths ``depth_m`` =
    (min, max) only: power between the nadir echo's main lobe and the minimum depth is left out."""
    return index_in_depth_window_db(
        ds["power"].values, ds["left_fraction"].values, ds["right_fraction"].values, ds["window_start"].values,
        ds["nadir_delay"].values, float(ds.attrs["radar_sample_interval_s"]), float(ds.attrs["radar_bandwidth_hz"]),
        depth_m, permittivity, threshold_db,
    )  # fmt: skip


def index_in_depth_window_db(power_w, left_fraction, right_fraction, window_start_s, nadir_delay_s, dt_s: float,
                             bandwidth_hz: float, depth_m, permittivity: float, threshold_db: float = 0.0):  # fmt: skip
    """:func:`depth_window_index_db` on arrays (trace, sample)."""
    from .survey import clutter_index

    dt = dt_s
    mainlobe = max(1, int(math.ceil(1.0 / (bandwidth_hz * dt))))
    p = np.array(power_w, dtype=np.float64)
    start = np.asarray(window_start_s, dtype=np.float64)
    nadir = np.asarray(nadir_delay_s, dtype=np.float64)
    k = np.arange(p.shape[1])
    t = start[:, None] + k * dt
    k_nadir = np.rint((nadir - start) / dt)[:, None]
    skip_s = float(delay_after_surface_s(depth_m[0], permittivity))
    with np.errstate(invalid="ignore"):
        shallow = (t < nadir[:, None] + skip_s - 0.5 * dt) & (np.abs(k - k_nadir) > mainlobe)
    p[shallow] = 0.0
    window_s = float(delay_after_surface_s(depth_m[1], permittivity))
    index_db, *_ = clutter_index(p, left_fraction, right_fraction, start, nadir, dt, window_s, mainlobe, threshold_db,
                                 permittivity)  # fmt: skip
    return index_db


def clutter_probability(dem, track: Track, on_target, sim_config, error, depth_m, permittivity: float,
                        threshold_db: float, body_radius_m=None, max_memory_bytes="auto") -> tuple[float, float]:
    """The probability under DEM error that the objective reaches ``threshold_db``, and its binomial
    standard error: the share of realisations (:func:`cluttersim.analysis.dem_error.simulate_dem_error`, on the
    target's traces only) whose largest depth-window index over those traces is ≥ the threshold."""
    from .dem_error import simulate_dem_error

    on_target = np.asarray(on_target, bool)
    sub = Track(track.lat_deg[on_target], track.lon_deg[on_target], track.alt_m[on_target], source=track.source)
    ds = simulate_dem_error(dem, sub, sim_config, error, body_radius_m=body_radius_m, keep_realisations=True,
                            sides=True, max_memory_bytes=max_memory_bytes)  # fmt: skip
    dt = float(ds.attrs["radar_sample_interval_s"])
    bw = float(ds.attrs["radar_bandwidth_hz"])
    hits = []
    for k in range(error.realisations):
        index = index_in_depth_window_db(
            ds["power_realisations"].values[k], ds["left_fraction_realisations"].values[k],
            ds["right_fraction_realisations"].values[k], ds["window_start"].values,
            ds["nadir_delay_realisations"].values[k], dt, bw, depth_m, permittivity, threshold_db,
        )  # fmt: skip
        obj = objective_db(index, np.ones(index.size, bool))
        hits.append(obj >= threshold_db)
    p = float(np.mean(hits))
    return p, math.sqrt(p * (1.0 - p) / len(hits))


def objective_db(index_db, on_target) -> float:
    """The candidate's objective: the largest index over the target's traces (+inf when none has one)."""
    values = np.asarray(index_db)[np.asarray(on_target, bool)]
    values = values[np.isfinite(values)]
    return float(values.max()) if values.size else math.inf


def plan_candidate(job: PlanJob) -> CandidateResult:
    """Simulate one candidate (:func:`cluttersim.simulate.simulate`, source record on) and score it."""
    import numba

    from ..simulate import simulate

    t0 = time.perf_counter()
    if job.numba_threads is not None:
        numba.set_num_threads(max(1, min(job.numba_threads, numba.config.NUMBA_NUM_THREADS)))
    src = DemSource.open(job.dem_path, job.body_radius_m)
    track = Track(job.lat_deg, job.lon_deg, job.alt_m, source=job.track_id)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ds = simulate(src, track, job.sim_config, body_radius_m=job.body_radius_m, sources=True,
                      max_memory_bytes=job.max_memory_bytes)  # fmt: skip
    index = depth_window_index_db(ds, job.depth_m, job.permittivity, job.threshold_db)
    prob = (math.nan, math.nan)
    if job.dem_error is not None and np.any(job.on_target & np.isfinite(index)):
        with warnings.catch_warnings(record=True) as caught_mc:
            warnings.simplefilter("always")
            prob = clutter_probability(src, track, job.on_target, job.sim_config, job.dem_error, job.depth_m,
                                       job.permittivity, job.threshold_db, job.body_radius_m, job.max_memory_bytes)  # fmt: skip
        caught = list(caught) + list(caught_mc)
    return CandidateResult(
        track_id=job.track_id, index_db=index, on_target=job.on_target, objective_db=objective_db(index, job.on_target),
        warnings=list(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, UserWarning))),
        seconds=time.perf_counter() - t0, probability=prob[0], probability_se=prob[1],
    )  # fmt: skip


# --------------------------------------------------------------------------- the search


@dataclass
class PlanRow:
    """A scored candidate."""

    candidate: Candidate
    objective_db: float
    mean_index_db: float
    target_traces: int
    step_deg: float
    probability: float = math.nan  # P(objective ≥ threshold) under DEM error (with PlanConfig.dem_error)
    probability_se: float = math.nan


@dataclass
class PlanResult:
    """All scored candidates (best first) and the paths written."""

    rows: list[PlanRow]
    paths: dict[str, Path]
    seconds: float
    evaluations: int

    @property
    def best(self) -> PlanRow:
        return self.rows[0]

    @property
    def worst(self) -> PlanRow:
        finite = [r for r in self.rows if math.isfinite(r.objective_db)]
        return (finite or self.rows)[-1]


def _rank_key(row: PlanRow):
    c = row.candidate
    prob = row.probability if math.isfinite(row.probability) else (math.inf if not math.isfinite(row.objective_db) else 0.0)
    return (prob, row.objective_db, c.heading_deg, c.alt_m, c.offset_m)


def search(dem, plan: PlanConfig, sim_config: SimulationConfig | None = None, *, engine=None,
           body_radius_m: float | None = None, progress: bool = False, max_memory_bytes="auto",
           headings_only: np.ndarray | None = None) -> list[PlanRow]:  # fmt: skip
    """Score candidates coarse to fine (module docstring) and return them best first.

    ``headings_only``: score exactly these headings (for every altitude and offset), no
    refinement (a brute-force sweep).
    """
    from tqdm.auto import tqdm

    from .survey import Engine, run_jobs, survey_sim_config

    engine = engine if engine is not None else Engine()
    sim_config = survey_sim_config(sim_config if sim_config is not None else default_config())
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    body = src.body
    ground = target_height_m(src, plan.target)
    scored: dict[Candidate, PlanRow] = {}
    warned: list[str] = []

    def evaluate(cands, step, bar):
        jobs = []
        for c in cands:
            if c in scored:
                continue
            tr = candidate_track(body, plan, c, ground)
            mask = plan.target.on_target(body, tr.lon_deg, tr.lat_deg)
            key = hashlib.sha256(json.dumps([c.id, str(src.path.resolve())]).encode()).hexdigest()
            jobs.append(PlanJob(c.id, mask, sim_config, tuple(plan.depth_m), plan.permittivity, plan.threshold_db,
                                plan.dem_error, dem_path=str(src.path.resolve()), body_radius_m=body_radius_m,
                                lat_deg=tr.lat_deg, lon_deg=tr.lon_deg, alt_m=tr.alt_m,
                                max_memory_bytes=max_memory_bytes, key=key))  # fmt: skip
        by_id = {c.id: c for c in cands}
        bar.total = (bar.total or 0) + len(jobs)
        bar.refresh()

        def on_result(res: CandidateResult):
            c = by_id[res.track_id]
            vals = res.index_db[res.on_target & np.isfinite(res.index_db)]
            scored[c] = PlanRow(c, res.objective_db, float(vals.mean()) if vals.size else math.nan,
                                int(res.on_target.sum()), step, res.probability, res.probability_se)  # fmt: skip
            for w in res.warnings:
                if w not in warned:
                    warned.append(w)
            bar.update(1)

        if jobs:
            run_jobs(jobs, engine, on_result, task=plan_candidate)

    combos = [(a, o) for a in plan.altitudes_m for o in plan.offsets_m]
    with tqdm(total=0, unit="track", desc="planning", disable=not progress) as bar:
        if headings_only is not None:
            evaluate([Candidate(float(h), a, o) for a, o in combos for h in headings_only], 0.0, bar)
        else:
            step = plan.coarse_step_deg
            evaluate([Candidate(round(float(h), 6), a, o) for a, o in combos for h in plan.headings(step)], step, bar)
            while step > plan.fine_step_deg + 1e-9:
                new = max(plan.fine_step_deg, step / 3.0)
                cands = []
                for a, o in combos:
                    rows = sorted((r for c, r in scored.items() if (c.alt_m, c.offset_m) == (a, o)), key=_rank_key)
                    n = int(round(step / new))
                    for row in rows[:REFINE_BEST]:
                        for j in range(-n, n + 1):
                            h = round(row.candidate.heading_deg + j * new, 6)
                            if plan.headings_deg[0] - 1e-9 <= h <= plan.headings_deg[1] + 1e-9:
                                cands.append(Candidate(h, a, o))
                cands = list(dict.fromkeys(cands))
                evaluate(cands, new, bar)
                step = new
    for w in warned:
        warnings.warn(f"plan: {w}", stacklevel=2)
    rows = sorted(scored.values(), key=_rank_key)
    if not any(math.isfinite(r.objective_db) for r in rows):
        raise TrackError("plan: no candidate track has a trace on the target with a nadir echo; check the target, "
                         "--target-radius-m and the offsets")  # fmt: skip
    return rows


def run_plan(dem, plan: PlanConfig, sim_config: SimulationConfig | None = None, out_dir=".", *, engine=None,
             body_radius_m: float | None = None, overwrite: bool = False, progress: bool = False,
             max_memory_bytes="auto", figures=None) -> PlanResult:  # fmt: skip
    """Search (:func:`search`) and write the products (:data:`PLAN_FILES`) into ``out_dir``; ``figures``
    (:class:`cluttersim.products.FigureOptions`): the figures' resolution, format (png, pdf, svg: the
    suffix follows) and the best/worst radargrams' dynamic range (default 60 dB)."""
    from ..simulate import simulate
    from .survey import survey_sim_config

    t0 = time.perf_counter()
    out_dir = Path(out_dir)
    from ..products import figure_name, remove_figures_in_other_formats

    fmt = figures.fmt if figures is not None else "png"
    paths = {k: out_dir / figure_name(v, fmt) for k, v in PLAN_FILES.items()}
    check_new(paths.values(), overwrite)
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    rows = search(src, plan, sim_config, engine=engine, body_radius_m=body_radius_m, progress=progress,
                  max_memory_bytes=max_memory_bytes)  # fmt: skip
    result = PlanResult(rows=rows, paths=paths, seconds=0.0, evaluations=len(rows))
    cfg = survey_sim_config(sim_config if sim_config is not None else default_config())
    ground = target_height_m(src, plan.target)
    tracks = {name: candidate_track(src.body, plan, row.candidate, ground)
              for name, row in (("best", result.best), ("worst", result.worst))}  # fmt: skip
    datasets = {name: simulate(src, tr, cfg, body_radius_m=body_radius_m, sources=False,
                               max_memory_bytes=max_memory_bytes) for name, tr in tracks.items()}  # fmt: skip
    write_plan_products(src, plan, result, tracks, datasets, figures=figures)
    remove_figures_in_other_formats(paths.values(), overwrite)
    result.seconds = time.perf_counter() - t0
    return result


def write_plan_products(src, plan: PlanConfig, result: PlanResult, tracks: dict, datasets: dict,
                        figures=None) -> None:  # fmt: skip
    """plan.csv (ranked), best_track.csv, objective_polar.png, best_worst.png — atomically (``figures``:
    :class:`cluttersim.products.FigureOptions`)."""
    from ..plots.planning import plot_best_worst, plot_objective_polar
    from ..products import FigureOptions

    figures = figures or FigureOptions()
    save = {"dpi": figures.dpi, "fmt": figures.fmt}

    paths = result.paths
    keys = list(PLAN_FILES)
    with atomic_paths([paths[k] for k in keys]) as temps:
        tmp = dict(zip(keys, temps))
        with open(tmp["table"], "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            prob = plan.dem_error is not None
            w.writerow(["rank", "track_id", "heading_deg", "alt_m", "offset_m", "objective_db", "mean_index_db",
                        "target_traces", "search_step_deg"]
                       + (["clutter_probability", "clutter_probability_se"] if prob else []))  # fmt: skip
            for i, r in enumerate(result.rows, start=1):
                c = r.candidate
                w.writerow([i, c.id, f"{c.heading_deg:.3f}", f"{c.alt_m:.1f}", f"{c.offset_m:.1f}",
                            f"{r.objective_db:.3f}", f"{r.mean_index_db:.3f}", r.target_traces, f"{r.step_deg:g}"]
                           + ([f"{r.probability:.4f}", f"{r.probability_se:.4f}"] if prob else []))  # fmt: skip
        tracks["best"].to_csv(tmp["best_track"])
        combos = sorted({(r.candidate.alt_m, r.candidate.offset_m) for r in result.rows})
        hs, vs, labels = [], [], []
        for a, o in combos:
            rows = [r for r in result.rows if (r.candidate.alt_m, r.candidate.offset_m) == (a, o)
                    and math.isfinite(r.objective_db)]  # fmt: skip
            hs.append(np.array([r.candidate.heading_deg for r in rows]))
            vs.append(np.array([r.probability if plan.dem_error is not None else r.objective_db for r in rows]))
            label = f"{a / 1e3:g} km" + (" above ground" if plan.platform == "airborne" else "")
            labels.append(label + (f", offset {o:+g} m" if plan.platform == "airborne" else ""))
        b, wst = result.best, result.worst
        if plan.dem_error is None:
            label, value = "clutter index at the target (dB)", (lambda r: r.objective_db)
        else:
            label, value = f"P(index ≥ {plan.threshold_db:g} dB) under DEM error", (lambda r: r.probability)
        plot_objective_polar(hs, vs, labels, tmp["polar"], objective_label=label,
                             best=(b.candidate.heading_deg, value(b)),
                             worst=(wst.candidate.heading_deg, value(wst)),
                             mirror=plan.headings_deg[1] - plan.headings_deg[0] <= 180.0, **save)  # fmt: skip
        masks = [plan.target.on_target(src.body, tracks[n].lon_deg, tracks[n].lat_deg) for n in ("best", "worst")]
        window = tuple(float(delay_after_surface_s(d, plan.permittivity)) for d in plan.depth_m)

        def title(name, row):
            c = row.candidate
            extra = f", P = {row.probability:.2f}" if math.isfinite(row.probability) else ""
            return f"{name}: heading {c.heading_deg:.1f}°, {c.alt_m / 1e3:g} km — index {row.objective_db:.1f} dB{extra}"

        plot_best_worst(datasets["best"], datasets["worst"], tmp["best_worst"], best_title=title("best", b),
                        worst_title=title("worst", wst), target_traces=masks, depth_window_s=window, **save,
                        **({"dynamic_range_db": figures.db_range} if figures.db_range is not None else {}))  # fmt: skip
