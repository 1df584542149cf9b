"""Region survey: where will the subsurface be readable, and where will off-nadir clutter swamp it?

Many tracks over a region are simulated with the same physics as one run
(:func:`cluttersim.simulate.simulate`), each reduced, trace by trace, to a
clutter index, then gridded onto the ground::

    SurveyConfig ──► plan_tracks (parallel geodesics, or a CSV with track_id) ──► [SurveyTrack]
    [TrackJob] ──► engine (local processes, or Dask tasks) ──► survey_track per job:
                   simulate() ──► clutter_index() ──► TrackResult
              ──► DIR/tracks/<id>.nc as each finishes (atomic; skipped on restart)
    all TrackResults (sorted by track id) ──► grid_results ──► clutter_map.tif, clutter_map.png
                                          ──► survey.csv (one row per track)

Clutter index of one trace (the README writes these out). Let P_k be the power of
sample k, L_k and R_k the shares of it from left and right of the track
(the source record), so C_k = P_k (L_k + R_k) is the off-nadir clutter power
and P_k (1 − L_k − R_k) the power from the nadir strip. Let t_n be the nadir
surface delay and W the samples whose delays lie in the subsurface window
[t_n, t_n + 2 d_max √ε′ / c] (apparent depths 0..d_max in a medium of real
permittivity ε′, :func:`cluttersim.physics.radar.delay_after_surface_s`). The nadir
surface echo power P_s is the largest nadir-strip power within the compressed
pulse's main lobe (±⌈1/(B Δt)⌉ samples) of t_n. Then

* clutter index  I = 10 log10( max_{k∈W} C_k / P_s )  (dB);
* clutter fraction  F = Σ_{k∈W} P_k [C_k ≥ P_s 10^{T/10}] / Σ_{k∈W} P_k, the
  share of the window's echo power that lies in samples where clutter exceeds
  the threshold T dB relative to the nadir echo;
* a trace is clutter-prone when I ≥ T.

Engines (:mod:`cluttersim.analysis.engines`): the tracks are independent; each job carries the DEM's
path (never its pixels), the track and the configuration, and the worker reads only the DEM
window its track needs. Locally a ``ProcessPoolExecutor`` (spawn context) runs
them; with a scheduler they are Dask tasks (Dask is imported only then). Numba
sums every trace in one thread in a fixed order, so the results do not depend
on the engine or the thread count; the map is gridded with a per-cell maximum
over tracks sorted by id, so it does not depend on the completion order either.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import hashlib
import json
import math
import re
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .clutter_index import clutter_index, level_ground_index_db, swath_half_width_m
from ..config import SimulationConfig, default_config
from . import engines
from ..io.dem import DemSource, crs_linear_unit_m
from ..io.demcrs import vsi_path
from .engines import Engine, _dask
from ..errors import (
    ClutterSimError,
    ConfigError,
    DemError,
    OutputExistsError,
    TrackError,
)
from ..io.outputs import atomic_paths, check_new, hold_interrupts, locked_output
from ..physics.radar import POWER_CONVENTION, delay_after_surface_s, effective_pulse_duration_s
from ..track import Track, TrackOverDem, great_circle_track, read_track_table

#: File names of a survey directory (per-track results go to ``tracks/<id>.nc``).
SURVEY_FILES = {"csv": "survey.csv", "map_tif": "clutter_map.tif", "map_png": "clutter_map.png"}
TRACKS_DIR = "tracks"
#: Largest side (pixels) of the relief image under the map.
_RELIEF_CELLS = 900
#: Grid cells per region side when no grid resolution is given for CSV tracks.
_DEFAULT_GRID_CELLS = 100
#: Scheduler address forms accepted besides "local".


# --------------------------------------------------------------------------- configuration


@dataclass(frozen=True)
class SurveyConfig:
    """What to survey and how to reduce each trace (the options of ``cluttersim survey``).

    Attributes
    ----------
    region : (lon_min, lat_min, lon_max, lat_max)
        Degrees (east longitudes); must lie on the DEM; may not cross ±180°.
    spacing_km, heading_deg, alt_m, trace_spacing_m :
        Generated tracks: parallel geodesics ``spacing_km`` apart, heading
        ``heading_deg`` (clockwise from north) at the region's centre, at
        ``alt_m`` above the reference surface, one trace every ``trace_spacing_m``.
    tracks_path :
        Instead: a CSV with columns track_id, lat, lon, alt[, time].
    max_depth_m, permittivity :
        The subsurface window: apparent depths 0..max_depth_m for ε′.
    threshold_db :
        T: clutter ≥ T dB above what level ground gives (fraction F), and a
        trace with I ≥ T is clutter-prone (default 3 dB: twice level ground's).
    swath_km :
        Cross-track half-width (km) each trace's value covers on the map;
        default the ground its subsurface window reaches over level ground
        (:func:`swath_half_width_m`); 0: the nadir path only.
    grid_km :
        Map cell size (km; for geographic DEMs converted to degrees of latitude
        on the body's mean radius, longitude cells having the same size in
        degrees). Default: half the track spacing, or 1/100 of the region.
    """

    region: tuple[float, float, float, float]
    spacing_km: float | None = None
    heading_deg: float = 0.0
    alt_m: float | None = None
    trace_spacing_m: float = 500.0
    tracks_path: str | None = None
    max_depth_m: float = 500.0
    permittivity: float = 3.15
    threshold_db: float = 3.0
    grid_km: float | None = None
    swath_km: float | None = None

    def __post_init__(self):
        if len(self.region) != 4 or not all(math.isfinite(v) for v in self.region):
            raise ConfigError(f"region {self.region}: expected four numbers LON_MIN LAT_MIN LON_MAX LAT_MAX")
        lon0, lat0, lon1, lat1 = self.region
        if not (-90 <= lat0 < lat1 <= 90):
            raise ConfigError(f"region latitudes {lat0} {lat1}: expected -90 <= LAT_MIN < LAT_MAX <= 90")
        if not (lon0 < lon1 and lon1 - lon0 < 360):
            raise ConfigError(
                f"region longitudes {lon0} {lon1}: expected LON_MIN < LON_MAX, less than 360° apart "
                "(regions across ±180° are not supported: use longitudes past 180, e.g. 170 190)"
            )
        generated = self.spacing_km is not None or self.alt_m is not None
        if generated == (self.tracks_path is not None):
            raise ConfigError("tracks: give either --spacing-km, --heading-deg and --alt-m, or --tracks CSV")
        if generated:
            for name in ("spacing_km", "alt_m"):
                if getattr(self, name) is None:
                    raise ConfigError(f"generated tracks need {name.replace('_', '-')}: give --spacing-km and --alt-m")
            _positive("spacing_km", self.spacing_km)
            _positive("alt_m", self.alt_m)
            _positive("trace_spacing_m", self.trace_spacing_m)
            if not math.isfinite(self.heading_deg):
                raise ConfigError(f"heading_deg {self.heading_deg}: expected degrees clockwise from north")
        _positive("max_depth_m", self.max_depth_m)
        if not (math.isfinite(self.permittivity) and self.permittivity >= 1):
            raise ConfigError(f"permittivity {self.permittivity}: expected a real relative permittivity >= 1")
        if not math.isfinite(self.threshold_db):
            raise ConfigError(f"threshold_db {self.threshold_db}: expected a number of dB")
        if self.grid_km is not None:
            _positive("grid_km", self.grid_km)
        if self.swath_km is not None and not (math.isfinite(self.swath_km) and self.swath_km >= 0):
            raise ConfigError(f"swath_km {self.swath_km}: expected a cross-track half-width >= 0 km (0: nadir paths only)")

    @property
    def generated(self) -> bool:
        return self.tracks_path is None

    def window_s(self) -> float:
        """Length of the subsurface window after the nadir echo: Δt = 2 d_max √ε′ / c."""
        return float(delay_after_surface_s(self.max_depth_m, self.permittivity))

    def reduction(self) -> dict:
        """The settings that shape a track's result (part of its resume key)."""
        return {"max_depth_m": self.max_depth_m, "permittivity": self.permittivity, "threshold_db": self.threshold_db,
                "relative_to_level": True}


def _positive(name, value):
    if not (value is not None and math.isfinite(value) and value > 0):
        raise ConfigError(f"{name} = {value!r}: expected a positive number")


# --------------------------------------------------------------------------- tracks


@dataclass(frozen=True)
class SurveyTrack:
    """One track of a survey, with its id."""

    track_id: str
    track: Track


def region_inside(src: DemSource, region) -> None:
    """Raise :class:`DemError` unless the region's boundary lies on the DEM."""
    lon0, lat0, lon1, lat1 = region
    lon, lat = region_boundary(region)
    rows, cols = src.lonlat_to_rowcol(lon, lat)
    inside = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
    if src.is_geographic and not src.wraps_longitude:
        x, _ = src.lonlat_to_xy(np.array([lon0, lon1]), np.array([lat0, lat0]))
        inside &= x[1] > x[0]  # wrapped into the DEM's range, the region must not cross its west edge
    if not np.all(inside):
        west, north = src.transform.c, src.transform.f
        east, south = src.transform @ (src.width, src.height)
        raise DemError(
            f"{src.path}: region {lon0:g} {lat0:g} {lon1:g} {lat1:g} (lon/lat) is not inside the DEM, whose "
            f"extent is x {west:g}..{east:g}, y {south:g}..{north:g} in its CRS; expected a region on the DEM"
        )


def region_boundary(region, points_per_side: int = 65):
    """Lon/lat (degrees) of points around the region's boundary (its sides are parallels and meridians)."""
    lon0, lat0, lon1, lat1 = region
    t = np.linspace(0.0, 1.0, points_per_side)
    lon = np.concatenate([lon0 + (lon1 - lon0) * t, np.full(t.size, lon1), lon1 - (lon1 - lon0) * t, np.full(t.size, lon0)])
    lat = np.concatenate([np.full(t.size, lat0), lat0 + (lat1 - lat0) * t, np.full(t.size, lat1), lat1 - (lat1 - lat0) * t])
    return lon, lat


def in_region(lon_deg, lat_deg, region) -> np.ndarray:
    """True where points lie in the lon/lat box (longitudes compared modulo 360°)."""
    lon0, lat0, lon1, lat1 = region
    lat = np.asarray(lat_deg)
    return ((np.asarray(lon_deg) - lon0) % 360.0 <= lon1 - lon0) & (lat >= lat0) & (lat <= lat1)


def plan_tracks(src: DemSource, config: SurveyConfig) -> list[SurveyTrack]:
    """The survey's tracks: generated (:func:`generate_tracks`) or read (:func:`read_survey_tracks`),
    cut to the traces inside the region."""
    region_inside(src, config.region)
    if config.generated:
        return generate_tracks(src.body, config)
    return read_survey_tracks(config.tracks_path, config.region)


def generate_tracks(body, config: SurveyConfig) -> list[SurveyTrack]:
    """Parallel geodesic tracks covering the region.

    Through the region's centre C runs a geodesic at ``heading_deg``; the
    others cross the perpendicular geodesic through C every ``spacing_km``,
    perpendicular to it (locally parallel to the first, as neighbouring passes
    are). Each extends, from its crossing point, as far as the farthest corner
    of the region is from C, with one trace every ``trace_spacing_m``
    (:func:`cluttersim.track.great_circle_track`); only traces inside the
    region are kept and tracks with fewer than two are dropped. Ids
    ``track_01, track_02, ...`` count from the left of the heading to its right.
    """
    lon0, lat0, lon1, lat1 = config.region
    geod = body.geod()
    lon_c, lat_c = 0.5 * (lon0 + lon1), 0.5 * (lat0 + lat1)
    corners_lon = np.array([lon0, lon1, lon1, lon0, lon_c, lon_c, lon0, lon1])
    corners_lat = np.array([lat0, lat0, lat1, lat1, lat0, lat1, lat_c, lat_c])
    _, _, dist = geod.inv(np.full(8, lon_c), np.full(8, lat_c), corners_lon, corners_lat)
    spacing_m = 1e3 * config.spacing_km
    half_m = float(np.max(dist)) + config.trace_spacing_m
    k_max = int(math.ceil(half_m / spacing_m))
    if 2 * k_max + 1 > 10_000:
        raise ConfigError(f"spacing_km = {config.spacing_km}: gives {2 * k_max + 1} tracks, expected at most 10,000")
    heading = config.heading_deg
    tracks = []
    for k in range(-k_max, k_max + 1):
        if k == 0:
            lon_p, lat_p, az = lon_c, lat_c, heading
        else:
            side = heading + (90.0 if k > 0 else -90.0)
            lon_p, lat_p, back = geod.fwd(lon_c, lat_c, side, abs(k) * spacing_m)
            cross = back + 180.0 if k > 0 else back  # direction of increasing k at the crossing point
            az = cross - 90.0
        lon_s, lat_s, _ = geod.fwd(lon_p, lat_p, az + 180.0, half_m)
        lon_e, lat_e, _ = geod.fwd(lon_p, lat_p, az, half_m)
        line = great_circle_track(body, lat_s, lon_s, lat_e, lon_e, config.alt_m, config.trace_spacing_m)
        keep = in_region(line.lon_deg, line.lat_deg, config.region)
        if keep.sum() >= 2:
            tracks.append(Track(line.lat_deg[keep], line.lon_deg[keep], line.alt_m[keep], source="planned track"))
    if not tracks:
        raise ConfigError(
            f"trace_spacing_m = {config.trace_spacing_m}: no generated track has two traces in the region; "
            "expected a trace spacing smaller than the region"
        )
    width = max(2, len(str(len(tracks))))
    return [
        SurveyTrack(f"track_{i + 1:0{width}d}", dataclasses.replace(t, source=f"track_{i + 1:0{width}d}"))
        for i, t in enumerate(tracks)
    ]


def read_survey_tracks(path, region=None) -> list[SurveyTrack]:
    """Tracks from one CSV with a ``track_id`` column (plus lat, lon, alt[, time]).

    Rows are grouped by track_id in order of first appearance; within a track
    the rows keep their file order. With ``region``, traces outside it are
    dropped, and tracks left with fewer than two traces are skipped with a warning.
    """
    path = Path(path)
    names, rows = read_track_table(path, extra_columns=("track_id",))
    col = names.index("track_id")
    groups: dict[str, list[int]] = {}
    for r, row in enumerate(rows):
        tid = row[col].strip() if col < len(row) else ""
        if not tid:
            raise TrackError(f"{path}: row {r + 1} column 'track_id' is empty; expected a track name")
        groups.setdefault(tid, []).append(r)
    if not groups:
        raise TrackError(f"{path}: no data rows; expected one row per trace with a track_id")
    files: dict[str, str] = {}
    out = []
    skipped = []
    for tid, members in groups.items():
        name = track_file_name(tid)
        if name in files:
            raise TrackError(f"{path}: track_id {tid!r} and {files[name]!r} give the same file name {name}; rename one")
        files[name] = tid
        track = Track.from_rows(names, [rows[r] for r in members], source=f"{path} track_id {tid!r}",
                                row_numbers=[r + 1 for r in members])  # fmt: skip
        if region is not None:
            keep = in_region(track.lon_deg, track.lat_deg, region)
            if keep.sum() < 2:
                skipped.append(tid)
                continue
            if not keep.all():
                time_s = None if track.time_s is None else track.time_s[keep]
                track = Track(track.lat_deg[keep], track.lon_deg[keep], track.alt_m[keep], time_s, source=track.source)
        out.append(SurveyTrack(tid, track))
    if skipped:
        shown = ", ".join(skipped[:5]) + (", ..." if len(skipped) > 5 else "")
        warnings.warn(f"{path}: {len(skipped)} track(s) have fewer than two traces in the region and are skipped: {shown}",
                      stacklevel=2)  # fmt: skip
    if not out:
        raise TrackError(f"{path}: no track has two or more traces inside the region; expected tracks over the region")
    return out


def track_file_name(track_id: str) -> str:
    """The per-track result file name: the id with characters other than letters, digits,
    '.', '-' and '_' replaced by '_'."""
    return re.sub(r"[^A-Za-z0-9._-]", "_", track_id).lstrip(".") + ".nc"


# --------------------------------------------------------------------------- one track


@dataclass(frozen=True)
class TrackJob(TrackOverDem):
    """Everything a worker needs for one track (:class:`cluttersim.track.TrackOverDem`: DEM path,
    track arrays, memory limit, threads, resume key) and the survey's own: the track's id, the
    simulation's configuration and the reduction's parameters."""

    track_id: str
    sim_config: SimulationConfig
    survey: dict

    def track_name(self) -> str:
        return self.track_id


@dataclass
class TrackResult:
    """The clutter index of every trace of one track (see the module docstring)."""

    track_id: str
    lat_deg: np.ndarray
    lon_deg: np.ndarray
    index_db: np.ndarray
    fraction: np.ndarray
    depth_m: np.ndarray
    surface_power_w: np.ndarray
    truncated: int
    key: str
    warnings: list[str] = field(default_factory=list)
    seconds: float = 0.0  # the worker's time on this track (simulation and reduction)
    level_db: float = 0.0  # the level-ground index of this track's geometry, subtracted from index_db
    swath_m: float = 0.0  # cross-track half-width of the ground the subsurface window reaches (level ground)


def survey_track(job: TrackJob) -> TrackResult:
    """Simulate one track (:func:`cluttersim.simulate.simulate`) and reduce it to its clutter index.

    Runs in a worker: limits Numba's threads to ``job.numba_threads`` (results do not
    depend on it) and returns the warnings raised as text instead of printing them.
    """
    import numba

    from ..simulate import simulate

    t0 = time.perf_counter()
    if job.numba_threads is not None:
        numba.set_num_threads(max(1, min(job.numba_threads, numba.config.NUMBA_NUM_THREADS)))
    src = DemSource.open(job.dem_path, job.body_radius_m)
    cfg = job.sim_config
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ds = simulate(src, job.track(), cfg, body_radius_m=job.body_radius_m, sources=True,
                      max_memory_bytes=job.max_memory_bytes)  # fmt: skip
    radar = cfg.radar
    dt = radar.sample_interval_s
    survey = job.survey
    window_s = float(delay_after_surface_s(survey["max_depth_m"], survey["permittivity"]))
    mainlobe = radar.mainlobe_samples
    from ..constants import SPEED_OF_LIGHT_M_S

    h_nadir = np.asarray(ds["alt"].values, dtype=np.float64) - 0.5 * SPEED_OF_LIGHT_M_S * ds["nadir_delay"].values
    level_db = 0.0
    if survey.get("relative_to_level", True):
        level_db = level_ground_index_db(src, job.track(), h_nadir, cfg, survey)
        level_db = level_db if math.isfinite(level_db) else 0.0
    # the threshold applies to the index relative to level ground: T + level on the raw scale
    index_db, fraction, depth, surface, truncated = clutter_index(
        ds["power"].values, ds["left_fraction"].values, ds["right_fraction"].values, ds["window_start"].values,
        ds["nadir_delay"].values, dt, window_s, mainlobe, survey["threshold_db"] + level_db, survey["permittivity"],
    )  # fmt: skip
    clearance = np.asarray(ds["alt"].values, dtype=np.float64) - h_nadir
    return TrackResult(
        track_id=job.track_id, lat_deg=np.asarray(ds["lat"].values, dtype=np.float64),
        lon_deg=np.asarray(ds["lon"].values, dtype=np.float64), index_db=index_db - level_db, fraction=fraction,
        depth_m=depth, surface_power_w=surface, truncated=truncated, key=job.key,
        warnings=list(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, UserWarning))),
        seconds=time.perf_counter() - t0, level_db=float(level_db),
        swath_m=swath_half_width_m(src.body, clearance, survey["max_depth_m"], survey["permittivity"]),
    )  # fmt: skip


def survey_sim_config(config: SimulationConfig, band: str | None = None) -> SimulationConfig:
    """The configuration a survey simulates with: [noise], [subsurface] and [ionosphere] dropped (the
    index compares surface clutter with the surface echo, both delayed alike by a layer, and its
    window is placed by the geometric nadir delay); one band of a multi-band radar (``band``,
    default the first); coherent mode refused; [processing] presum set to 1 (one pulse per trace)."""
    if config.processing.mode == "coherent":
        raise ConfigError("[processing] mode = 'coherent': the survey needs the incoherent mode's source record; "
                          "expected mode = 'incoherent'")  # fmt: skip
    if config.bands:
        config = config.for_band(band or config.band_names[0])
    elif band is not None:
        raise ConfigError(f"band {band!r} asked for, but the radar has a single band (no [[band]] tables)")
    ignored = [t for t in ("noise", "subsurface", "ionosphere") if getattr(config, t, None) is not None]
    if ignored:
        warnings.warn(
            f"survey: the radar's {' and '.join(f'[{t}]' for t in ignored)} table(s) are ignored: the clutter index "
            "compares surface clutter with the nadir surface echo, both noise-free ([noise] would only add a floor "
            "independent of the terrain; [ionosphere] delays and smears both alike), and a predicted interface echo "
            "([subsurface]) is not clutter; compare its power with the clutter of one track with `cluttersim simulate`",
            stacklevel=3,
        )
    if config.processing.presum > 1:
        warnings.warn(
            f"survey: [processing] presum = {config.processing.presum} is ignored: a survey simulates one pulse per "
            "trace, the traces --trace-spacing-m apart (give the spacing of the presummed traces)",
            stacklevel=3,
        )
        config = dataclasses.replace(config, processing=dataclasses.replace(config.processing, presum=1))
    return dataclasses.replace(config, noise=None, subsurface=None, ionosphere=None)


_DIGESTS: dict[tuple, str] = {}


def dem_digest(path) -> str:
    """BLAKE2b digest of every byte of the DEM file (and of a GDAL sidecar ``.aux.xml``, which can
    change its scale, offset or nodata), computed once per file state (path, size, modification
    time) in a process: about 1.3 CPU-seconds per GB plus reading it. Any edit of the pixels changes it,
    even at the same size; a copy of the same file keeps it."""
    path = Path(path)
    files = [path] + [p for p in (path.with_name(path.name + ".aux.xml"),) if p.exists()]
    state = tuple((str(p.resolve()), p.stat().st_size, p.stat().st_mtime_ns) for p in files)
    if state not in _DIGESTS:
        h = hashlib.blake2b(digest_size=20)
        for p in files:
            with open(p, "rb") as fh:
                for block in iter(lambda: fh.read(1 << 23), b""):
                    h.update(block)
        _DIGESTS[state] = h.hexdigest()
    return _DIGESTS[state]


def job_key(dem: DemSource, sim_config: SimulationConfig, config: SurveyConfig, track: Track,
            body_radius_m) -> str:  # fmt: skip
    """A digest of everything that shapes one track's result: the DEM (its path and a digest of its
    whole content, :func:`dem_digest`), the radar, the reduction settings and the track's positions."""
    h = hashlib.sha256()
    meta = {"dem": str(dem.path.resolve()), "dem_content": dem_digest(dem.path) if vsi_path(dem.path) is None else "virtual", "body_radius_m": body_radius_m,
            "config": sim_config.to_dict(), "survey": config.reduction()}  # fmt: skip
    h.update(json.dumps(meta, sort_keys=True, default=str).encode())
    for a in (track.lat_deg, track.lon_deg, track.alt_m):
        h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
    if track.time_s is not None:
        h.update(np.ascontiguousarray(track.time_s, dtype=np.float64).tobytes())
    return h.hexdigest()


# --------------------------------------------------------------------------- per-track files


def write_track_result(result: TrackResult, path) -> Path:
    """Write one track's result as a small netCDF file, atomically."""
    import xarray as xr

    path = Path(path)
    variables = {
        "lat": (result.lat_deg, "degrees_north", "nadir latitude"),
        "lon": (result.lon_deg, "degrees_east", "nadir longitude"),
        "clutter_index": (result.index_db, "dB", "strongest off-nadir clutter in the subsurface window / nadir echo, "
                                                 "relative to level ground in the same geometry"),
        "clutter_fraction": (result.fraction, "1", "power-weighted share of the window with clutter above the threshold"),
        "clutter_depth": (result.depth_m, "m", "apparent depth of the strongest clutter in the window"),
        "surface_power": (result.surface_power_w, "W", "nadir surface echo power"),
    }
    ds = xr.Dataset(
        {k: ("trace", np.asarray(v), {"units": u, "long_name": n}) for k, (v, u, n) in variables.items()},
        attrs={"Conventions": "CF-1.10", "track_id": result.track_id, "survey_key": result.key,
               "truncated_windows": result.truncated, "power_convention": POWER_CONVENTION,
               "level_ground_index_db": result.level_db, "swath_half_width_m": result.swath_m},
    )  # fmt: skip
    from ..io.radargram import save_netcdf

    with atomic_paths([path]) as (tmp,):
        save_netcdf(ds, tmp)
    return path


def read_track_result(path, radar=None) -> TrackResult:
    """Read a file written by :func:`write_track_result`.

    A file without ``power_convention`` predates the level convention
    (:data:`cluttersim.physics.radar.POWER_CONVENTION`): its clutter index and fraction are
    ratios of powers and read as they are; its ``surface_power`` is rescaled by
    τ_eff/Δt of ``radar`` (:func:`cluttersim.io.radargram.to_current_convention`) when
    the radar is given."""
    import xarray as xr

    path = Path(path)
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            ds = ds.load()
    except (OSError, ValueError) as exc:
        raise ClutterSimError(f"{path}: not a readable survey track file ({exc}); delete it to recompute the track") from None
    try:
        return TrackResult(
            track_id=str(ds.attrs["track_id"]), lat_deg=ds["lat"].values, lon_deg=ds["lon"].values,
            index_db=ds["clutter_index"].values, fraction=ds["clutter_fraction"].values,
            depth_m=ds["clutter_depth"].values, surface_power_w=ds["surface_power"].values * _legacy_factor(ds, radar),
            truncated=int(ds.attrs.get("truncated_windows", 0)), key=str(ds.attrs["survey_key"]),
            level_db=float(ds.attrs.get("level_ground_index_db", 0.0)), swath_m=float(ds.attrs.get("swath_half_width_m", 0.0)),
        )  # fmt: skip
    except KeyError as exc:
        raise ClutterSimError(f"{path}: {exc} missing; expected a survey track file (delete it to recompute)") from None


def _legacy_factor(ds, radar) -> float:
    """τ_eff/Δt for a track file written before the power convention (1 otherwise, or without a radar)."""
    if ds.attrs.get("power_convention") == POWER_CONVENTION or radar is None:
        return 1.0
    return effective_pulse_duration_s(radar.bandwidth_hz, radar.range_window) / radar.sample_interval_s


# --------------------------------------------------------------------------- engines


def run_jobs(jobs, engine: Engine, on_result, task=None) -> None:
    """Run ``task(job)`` (a picklable module-level function; default :func:`survey_track`) for
    every job on the engine (:func:`cluttersim.analysis.engines.run_jobs`), calling ``on_result`` with each
    result as it completes. Jobs need ``track_id``, ``key`` and ``numba_threads`` fields (as
    :class:`TrackJob`)."""
    engines.run_jobs(jobs, engine, on_result, task or survey_track)


# --------------------------------------------------------------------------- the survey


@dataclass
class SurveySummary:
    """What a survey did: product paths, tracks resumed and computed, time."""

    paths: dict[str, Path]
    tracks: int
    resumed: int
    computed: int
    seconds: float
    warnings: list[str] = field(default_factory=list)
    track_seconds: list[float] = field(default_factory=list)  # workers' time per computed track


@locked_output("out_dir")
def run_survey(
    dem, config: SurveyConfig, sim_config: SimulationConfig | None = None, out_dir=".", *, engine: Engine | None = None,
    body_radius_m: float | None = None, overwrite: bool = False, progress: bool = False,
    max_memory_bytes: int | str | None = "auto", on_track=None, band: str | None = None, figures=None,
) -> SurveySummary:  # fmt: skip
    """Survey a region: simulate every track, write each as it finishes, then the map and table.

    Parameters
    ----------
    dem : path or DemSource
        The DEM; with a Dask scheduler, its path must be readable by every worker.
    config : SurveyConfig
    sim_config : SimulationConfig, optional
        The radar (default: the built-in one); [noise], [subsurface] and [ionosphere] are ignored.
    out_dir : path
        Gets ``tracks/<id>.nc`` (one per track, as each finishes) and :data:`SURVEY_FILES`.
        Tracks already there from an interrupted run with the same arguments are not
        recomputed; with other arguments they are refused, unless ``overwrite``.
    engine : Engine, optional
        Local processes (default: one per core) or Dask.
    on_track : callable, optional
        Called with each TrackResult after its file is written (progress hooks, tests).
    band : str, optional
        The band surveyed with a multi-band radar (``[[band]]`` tables; default the first).
    figures : cluttersim.products.FigureOptions, optional
        The map's resolution, format (png, pdf, svg: ``clutter_map.<fmt>``) and colour range
        (``db_range``: dB spanned around the threshold, :func:`survey_map_range_db`).

    Returns
    -------
    SurveySummary
    """
    from ..products import remove_figures_in_other_formats

    t0 = time.perf_counter()
    engine = engine if engine is not None else Engine()
    sim_config = survey_sim_config(sim_config if sim_config is not None else default_config(), band)
    out_dir = Path(out_dir)
    paths = survey_files(out_dir, figures.fmt if figures is not None else "png")
    check_new(paths.values(), overwrite)
    if engine.uses_dask:
        _dask(engine)  # before any work: say at once if Dask is missing
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    _check_window_fits(sim_config, config)
    planned = plan_tracks(src, config)
    grid = SurveyGrid.for_region(src, config)
    track_dir = out_dir / TRACKS_DIR
    jobs, done = [], {}
    for st in planned:
        key = job_key(src, sim_config, config, st.track, body_radius_m)
        path = track_dir / track_file_name(st.track_id)
        if path.exists() and not overwrite:
            previous = read_track_result(path, sim_config.radar)
            if previous.key != key:
                raise OutputExistsError(
                    f"{path}: made by a survey with other arguments (DEM, radar, window or track); pass --overwrite "
                    "to recompute it, or choose another --out"
                )
            done[st.track_id] = previous
            continue
        t = st.track
        jobs.append(TrackJob(st.track_id, sim_config, config.reduction(), dem_path=str(src.path.resolve()),
                             body_radius_m=body_radius_m, lat_deg=t.lat_deg, lon_deg=t.lon_deg, alt_m=t.alt_m,
                             time_s=t.time_s, max_memory_bytes=max_memory_bytes, key=key))  # fmt: skip
    _remove_stale_temporaries(track_dir)
    resumed = len(done)
    seen_warnings: list[str] = []

    from tqdm.auto import tqdm

    with tqdm(total=len(planned), initial=resumed, unit="track", desc="surveying", disable=not progress) as bar:

        def on_result(result: TrackResult) -> None:
            with hold_interrupts():
                write_track_result(result, track_dir / track_file_name(result.track_id))
            done[result.track_id] = result
            for w in result.warnings:
                if w not in seen_warnings:
                    seen_warnings.append(w)
            bar.update(1)
            if on_track is not None:
                on_track(result)

        if jobs:  # tracks/ is made by the first track written (atomic_paths): nothing if none finishes
            run_jobs(jobs, engine, on_result)
    for w in seen_warnings:
        warnings.warn(f"survey: {w}", stacklevel=2)
    results = [done[st.track_id] for st in sorted(planned, key=lambda s: s.track_id)]
    truncated = sum(r.truncated for r in results)
    if truncated:
        warnings.warn(
            f"survey: the subsurface window (--max-depth-m {config.max_depth_m:g}) ran past the end of the recording "
            f"window in {truncated} traces; they are evaluated to the window's end (raise [radar] samples)",
            stacklevel=2,
        )
    write_survey_products(src, config, grid, results, paths, figures=figures)
    remove_figures_in_other_formats(paths.values(), overwrite)
    return SurveySummary(paths=paths, tracks=len(planned), resumed=resumed, computed=len(jobs),
                         seconds=time.perf_counter() - t0, warnings=seen_warnings,
                         track_seconds=[done[j.track_id].seconds for j in jobs])  # fmt: skip


def _check_window_fits(sim_config: SimulationConfig, config: SurveyConfig) -> None:
    radar = sim_config.radar
    need = int(math.ceil(config.window_s() / radar.sample_interval_s)) + 1
    room = radar.samples - (radar.auto_margin_samples if radar.window_start_s == "auto" else 0)
    if need > room:
        raise ConfigError(
            f"--max-depth-m {config.max_depth_m:g} (ε′ = {config.permittivity:g}) spans {need} samples after the nadir "
            f"echo, but [radar] samples = {radar.samples} leaves {room}; expected a shallower depth or more samples"
        )


def _remove_stale_temporaries(track_dir: Path) -> None:
    """Remove temporary track files left by a run that was killed (not merely interrupted)."""
    if track_dir.is_dir():
        for p in track_dir.glob(".*.nc.partial-*"):
            with contextlib.suppress(FileNotFoundError):
                p.unlink()


# --------------------------------------------------------------------------- gridding and products


@dataclass(frozen=True)
class SurveyGrid:
    """The map grid: north-up cells of ``res`` CRS units (degrees or metres) over the region."""

    transform: object
    width: int
    height: int

    @classmethod
    def for_region(cls, src: DemSource, config: SurveyConfig) -> SurveyGrid:
        from affine import Affine

        lon0, lat0, lon1, lat1 = config.region
        x, y = src.lonlat_to_xy(*region_boundary(config.region))
        if src.is_geographic:
            x = np.unwrap(np.asarray(x), period=360.0)
        x0, x1, y0, y1 = float(np.min(x)), float(np.max(x)), float(np.min(y)), float(np.max(y))
        grid_km = config.grid_km
        if grid_km is None:
            if config.generated:
                grid_km = 0.5 * config.spacing_km
            else:
                _, _, diag = src.body.geod().inv(lon0, lat0, lon1, lat1)
                grid_km = diag / math.sqrt(2.0) / _DEFAULT_GRID_CELLS / 1e3
        res = 1e3 * grid_km
        if src.is_geographic:
            res = math.degrees(res / src.body.mean_radius_m)
        else:
            res /= crs_linear_unit_m(src.crs)  # the grid is in the CRS's unit (feet, US survey feet...)
        width = max(1, int(math.ceil((x1 - x0) / res - 1e-9)))
        height = max(1, int(math.ceil((y1 - y0) / res - 1e-9)))
        if width * height > 25_000_000:
            raise ConfigError(f"grid_km = {grid_km:g}: gives a {width} x {height} map; expected at most 25 million cells")
        return cls(Affine(res, 0.0, x0, 0.0, -res, y1), width, height)



def grid_results(src: DemSource, grid: SurveyGrid, results, swath_km: float | None = None):
    """Grid per-trace index and fraction onto the map: (index_db, fraction), each (height, width), NaN
    where no track's swath reaches.

    Each map cell takes the values of the nearest trace (geodesic distance on the
    body's mean sphere, from the cell's centre to the trace's nadir) if it lies
    within that trace's swath: ``swath_km`` or, by default, each track's
    :attr:`TrackResult.swath_m` (the ground its subsurface window reaches), so the
    map shows the footprint of every track, not a hairline. The nearest trace does
    not depend on the order of the tracks. With ``swath_km = 0`` the nadir paths
    alone are drawn (:func:`grid_paths`).
    """
    if swath_km == 0 or not results:
        return grid_paths(src, grid, results)
    from scipy.spatial import cKDTree

    radius = src.body.mean_radius_m

    def unit(lon, lat):
        lon, lat = np.radians(lon), np.radians(lat)
        return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)

    pts, idx_v, frac_v, reach = [], [], [], []
    for res in results:
        ok = np.isfinite(res.index_db) & np.isfinite(res.lat_deg) & np.isfinite(res.lon_deg)
        if not ok.any():
            continue
        pts.append(unit(res.lon_deg[ok], res.lat_deg[ok]))
        idx_v.append(res.index_db[ok])
        frac_v.append(np.nan_to_num(res.fraction[ok]))
        half = 1e3 * swath_km if swath_km is not None else (res.swath_m or 0.0)
        reach.append(np.full(int(ok.sum()), max(half, 0.0)))
    if not pts:
        return grid_paths(src, grid, results)
    pts, idx_v, frac_v, reach = (np.concatenate(a) for a in (pts, idx_v, frac_v, reach))
    cols, rows = np.meshgrid(np.arange(grid.width) + 0.5, np.arange(grid.height) + 0.5)
    x, y = grid.transform * (cols.ravel(), rows.ravel())
    lon, lat = src.xy_to_lonlat(np.asarray(x), np.asarray(y)) if not src.is_geographic else (np.asarray(x), np.asarray(y))
    dist, near = cKDTree(pts).query(unit(np.asarray(lon), np.asarray(lat)), k=1)
    ground = 2.0 * radius * np.arcsin(np.clip(dist / 2.0, 0.0, 1.0))  # chord → arc on the mean sphere
    inside = np.isfinite(dist) & (ground <= np.maximum(reach[np.minimum(near, reach.size - 1)], 0.5 * _cell_m(src, grid)))
    index = np.full(grid.height * grid.width, np.nan)
    frac = np.full(grid.height * grid.width, np.nan)
    index[inside] = idx_v[near[inside]]
    frac[inside] = frac_v[near[inside]]
    paths_i, paths_f = grid_paths(src, grid, results)  # the nadir path itself always shows
    index, frac = index.reshape(grid.height, grid.width), frac.reshape(grid.height, grid.width)
    on_path = np.isfinite(paths_i) & ~np.isfinite(index)
    index[on_path], frac[on_path] = paths_i[on_path], paths_f[on_path]
    return index, frac


def _cell_m(src: DemSource, grid: SurveyGrid) -> float:
    """A map cell's side in metres."""
    res = abs(grid.transform.a)
    return math.radians(res) * src.body.mean_radius_m if src.is_geographic else res


def grid_paths(src: DemSource, grid: SurveyGrid, results) -> tuple[np.ndarray, np.ndarray]:
    """Grid per-trace index and fraction along the tracks' nadir paths only: (index_db, fraction),
    NaN where no track passed.

    Each track's nadir path is drawn cell by cell (consecutive traces joined by a
    straight line in the grid, each half taking its nearer trace's values; a
    step longer than three times the track's median step is left as a gap); a
    cell holds the largest value of the traces drawn over it, which does not
    depend on the order of the tracks.
    """
    index = np.full((grid.height, grid.width), -np.inf)
    frac = np.full((grid.height, grid.width), -np.inf)
    inv = ~grid.transform
    for res in results:
        x, y = src.lonlat_to_xy(res.lon_deg, res.lat_deg)
        if src.is_geographic:
            west = grid.transform.c
            x = (np.asarray(x) - west) % 360.0 + west
        col, row = inv @ (np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        col, row = np.asarray(col), np.asarray(row)
        ok = np.isfinite(res.index_db) & np.isfinite(col) & np.isfinite(row)
        pts_c, pts_r, val_i, val_f = [col[ok]], [row[ok]], [res.index_db[ok]], [np.nan_to_num(res.fraction[ok])]
        steps = np.hypot(np.diff(col), np.diff(row))
        both = ok[:-1] & ok[1:]
        if both.any():  # points every quarter cell along each joined step
            seg = np.flatnonzero(both & (steps <= 3.0 * float(np.median(steps[both]))))
            n = np.ceil(steps[seg] / 0.25).astype(np.int64)
            counts = np.maximum(n - 1, 0)
            i = np.repeat(seg, counts)
            first = np.repeat(np.cumsum(counts) - counts, counts)
            s = (np.arange(i.size) - first + 1) / np.repeat(n, counts)
            near = np.where(s < 0.5, i, i + 1)
            pts_c.append(col[i] + s * (col[i + 1] - col[i]))
            pts_r.append(row[i] + s * (row[i + 1] - row[i]))
            val_i.append(res.index_db[near])
            val_f.append(np.nan_to_num(res.fraction[near]))
        c = np.floor(np.concatenate(pts_c)).astype(np.int64)
        r = np.floor(np.concatenate(pts_r)).astype(np.int64)
        vi, vf = np.concatenate(val_i), np.concatenate(val_f)
        inside = (c >= 0) & (c < grid.width) & (r >= 0) & (r < grid.height)
        np.maximum.at(index, (r[inside], c[inside]), vi[inside])
        np.maximum.at(frac, (r[inside], c[inside]), vf[inside])
    index[~np.isfinite(index)] = np.nan
    frac[~np.isfinite(frac)] = np.nan
    return index, frac


def track_length_km(body, lat_deg, lon_deg) -> float:
    """Geodesic length (km) along consecutive nadir points."""
    if len(lat_deg) < 2:
        return 0.0
    _, _, d = body.geod().inv(lon_deg[:-1], lat_deg[:-1], lon_deg[1:], lat_deg[1:])
    return float(np.sum(d)) / 1e3


def track_rows(body, results, threshold_db: float) -> list[dict]:
    """The rows of survey.csv: one per track."""
    rows = []
    for r in results:
        valid = np.isfinite(r.index_db)
        idx = r.index_db[valid]
        rows.append({
            "track_id": r.track_id,
            "traces": int(len(r.index_db)),
            "length_km": round(track_length_km(body, r.lat_deg, r.lon_deg), 3),
            "clutter_prone_fraction": round(float(np.mean(idx >= threshold_db)), 4) if idx.size else "",
            "median_index_db": round(float(np.median(idx)), 2) if idx.size else "",
            "max_index_db": round(float(np.max(idx)), 2) if idx.size else "",
            "median_clutter_fraction": round(float(np.nanmedian(r.fraction[valid])), 4) if idx.size else "",
            "level_ground_db": round(float(r.level_db), 2),
            "swath_half_width_km": round(float(r.swath_m) / 1e3, 3),
        })  # fmt: skip
    return rows


def survey_files(out_dir, fmt: str = "png") -> dict[str, Path]:
    """Paths of a survey's products (:data:`SURVEY_FILES`), the map figure in format ``fmt``."""
    from ..products import figure_name

    return {k: Path(out_dir) / figure_name(v, fmt) for k, v in SURVEY_FILES.items()}


#: The survey map's colour scale by default: this many dB below the threshold and above it.
SURVEY_MAP_BELOW_DB, SURVEY_MAP_ABOVE_DB = 6.0, 18.0


def survey_map_range_db(db_range: float | None) -> tuple[float, float]:
    """(below, above) the threshold spanned by the survey map's colours: the default
    (:data:`SURVEY_MAP_BELOW_DB`, :data:`SURVEY_MAP_ABOVE_DB`), or a total of ``db_range`` dB
    split in the same proportion (a quarter below the threshold)."""
    if db_range is None:
        return SURVEY_MAP_BELOW_DB, SURVEY_MAP_ABOVE_DB
    share = SURVEY_MAP_BELOW_DB / (SURVEY_MAP_BELOW_DB + SURVEY_MAP_ABOVE_DB)
    return share * db_range, (1.0 - share) * db_range


def write_survey_products(src: DemSource, config: SurveyConfig, grid: SurveyGrid, results, paths,
                          figures=None) -> None:  # fmt: skip
    """survey.csv, clutter_map.tif (band 1 index dB, band 2 fraction; DEM's CRS, NaN nodata) and
    clutter_map.png (or .pdf/.svg: ``figures``, :class:`cluttersim.products.FigureOptions`),
    written together atomically."""
    import rasterio
    from rasterio.crs import CRS as RioCRS

    from .. import plots
    from ..products import FigureOptions, MapFrame

    figures = figures or FigureOptions()
    below_db, above_db = survey_map_range_db(figures.db_range)
    index, frac = grid_results(src, grid, results, config.swath_km)
    rows = track_rows(src.body, results, config.threshold_db)
    profile = dict(driver="GTiff", width=grid.width, height=grid.height, count=2, dtype="float32",
                   transform=grid.transform, nodata=np.nan, compress="deflate")  # fmt: skip
    if src.crs is not None:
        profile["crs"] = RioCRS.from_wkt(src.crs.to_wkt())
    elevation, relief_transform = _relief(src, grid)
    relief = MapFrame.of(src, elevation, relief_transform)
    frame = MapFrame.of(src, index, grid.transform)
    lines = [relief.xy(r.lon_deg, r.lat_deg) for r in results]
    depth = f"0–{config.max_depth_m:g} m (ε′ = {config.permittivity:g})"
    keys = ["csv", "map_tif", "map_png"]
    with atomic_paths([paths[k] for k in keys]) as (tmp_csv, tmp_tif, tmp_png):
        with open(tmp_csv, "w", newline="", encoding="utf-8") as fh:
            writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
            writer.writeheader()
            writer.writerows(rows)
        with rasterio.open(tmp_tif, "w", **profile) as dst:
            dst.write(index.astype(np.float32), 1)
            dst.write(frac.astype(np.float32), 2)
            dst.set_band_description(1, "clutter_index_db")
            dst.set_band_description(2, "clutter_fraction")
            dst.update_tags(
                quantity="clutter index: strongest off-nadir clutter in the subsurface window over the nadir echo, "
                "relative to level ground in the same geometry (dB; level ground reads 0); band 2: power-weighted "
                "share of the window with clutter above the threshold",
                max_depth_m=config.max_depth_m, permittivity=config.permittivity, threshold_db=config.threshold_db,
                tracks=len(results),
            )  # fmt: skip
        plots.plot_survey_map(
            index, frame.extent, elevation, relief.extent, lines, tmp_png, threshold_db=config.threshold_db,
            axis_labels=frame.axis_labels, geographic=src.is_geographic,
            title=f"clutter over the subsurface window {depth}\n{src.path.name}",
            label=f"strongest off-nadir clutter at apparent depths {depth}\nrelative to level ground (dB; level "
                  "ground: 0)",
            swaths=None if config.swath_km == 0 else True, below_db=below_db, above_db=above_db, dpi=figures.dpi,
            fmt=figures.fmt,
        )  # fmt: skip


def _relief(src: DemSource, grid: SurveyGrid):
    """Decimated DEM heights covering the map grid, and their transform."""
    t = grid.transform
    xs = np.array([t.c, t.c + t.a * grid.width])
    ys = np.array([t.f, t.f + t.e * grid.height])
    col, row = ~src.transform @ (xs, ys)
    window = src.window_around(np.asarray(row) - 0.5, np.asarray(col) - 0.5, pad=1)
    dw = src.read_decimated(window, _RELIEF_CELLS)
    return dw.elevation_m, dw.transform
