"""The clutter index of a trace and its level-ground reference (used by :mod:`cluttersim.analysis.survey`
and :mod:`cluttersim.analysis.plan`; the definitions are in :mod:`cluttersim.analysis.survey`'s docstring).

* :func:`clutter_index`: per trace, the clutter index I, clutter fraction F, apparent depth of the
  strongest clutter and the nadir surface echo power, from a radargram with its source record;
* :func:`level_ground_index_db`: the index level ground gives in a track's geometry, simulated over
  a level scene held in memory (:class:`LevelGround`: the DEM's own grid, CRS and body, one constant
  height), so the survey reports every index relative to it;
* :func:`swath_half_width_m`: the cross-track reach of the subsurface window over level ground.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..config import SimulationConfig
from ..io.dem import DemSource, DemWindow
from ..physics.radar import apparent_depth_m, delay_after_surface_s
from ..track import Track


@dataclass(frozen=True)
class LevelGround(DemSource):
    """A level DEM in memory: the grid, CRS and body of a real DEM (``transform``, ``width``,
    ``height`` of the level patch) and one height everywhere, ``level_m``. :meth:`read` returns
    that height for any window, so :func:`cluttersim.simulate.simulate` runs over it as over a
    file, with no file written or read."""

    level_m: float = 0.0

    @classmethod
    def like(cls, src: DemSource, transform, width: int, height: int, level_m: float) -> "LevelGround":
        """A level patch on ``src``'s CRS and body (heights in metres on the horizontal CRS: no
        vertical datum, scale or offset)."""
        return cls(path=Path(f"level ground at {level_m:.6g} m beside {src.path.name}"), crs=src.crs, body=src.body,
                   transform=transform, width=int(width), height=int(height), nodata=None, level_m=float(level_m))  # fmt: skip

    def read(self, window, out_shape: tuple[int, int] | None = None) -> DemWindow:
        import rasterio.windows
        from affine import Affine

        shape = out_shape if out_shape is not None else (int(window.height), int(window.width))
        wt = rasterio.windows.transform(window, self.transform)
        if out_shape is not None:
            wt = wt @ Affine.scale(window.width / out_shape[1], window.height / out_shape[0])
        return DemWindow(source=self, window=window, transform=wt, elevation_m=np.full(shape, self.level_m))


def clutter_index(power_w, left_fraction, right_fraction, window_start_s, nadir_delay_s, sample_interval_s: float,
                  window_s: float, mainlobe_samples: int, threshold_db: float, permittivity: float = 3.15):  # fmt: skip
    """Per trace: clutter index I (dB), clutter fraction F, apparent depth of the strongest
    clutter (m) and the nadir surface echo power P_s (W), as defined in the module docstring.

    ``power_w``, ``left_fraction``, ``right_fraction``: (trace, sample); delays absolute
    two-way, s. Traces without a nadir echo give NaN. Also returns the number of traces
    whose subsurface window ran past the end of the recording window (truncated there).
    """
    p = np.asarray(power_w, dtype=np.float64)
    side = np.asarray(left_fraction, dtype=np.float64) + np.asarray(right_fraction, dtype=np.float64)
    ntr, ns = p.shape
    clutter = p * side
    strip = p * (1.0 - side)
    k = np.arange(ns)
    start = np.asarray(window_start_s, dtype=np.float64)[:, None]
    nadir = np.asarray(nadir_delay_s, dtype=np.float64)[:, None]
    t = start + k * sample_interval_s
    k_nadir = np.rint((nadir - start) / sample_interval_s)
    with np.errstate(invalid="ignore"):
        near = np.abs(k - k_nadir) <= mainlobe_samples
        in_win = (t >= nadir - 0.5 * sample_interval_s) & (t <= nadir + window_s + 0.5 * sample_interval_s)
        surface = np.max(np.where(near & np.isfinite(strip), strip, -np.inf), axis=1)
        c_win = np.where(in_win & np.isfinite(clutter), clutter, -np.inf)
        best = np.argmax(c_win, axis=1)
        c_max = c_win[np.arange(ntr), best]
        ok = np.isfinite(surface) & (surface > 0) & np.isfinite(c_max)
        index_db = np.full(ntr, np.nan)
        index_db[ok] = 10.0 * np.log10(np.maximum(c_max[ok], 1e-300) / surface[ok])
        above = clutter >= surface[:, None] * 10.0 ** (threshold_db / 10.0)
        p_win = np.where(in_win & np.isfinite(p), p, 0.0)
        total = p_win.sum(axis=1)
        fraction = np.full(ntr, np.nan)
        good = ok & (total > 0)
        fraction[good] = (p_win * above).sum(axis=1)[good] / total[good]
        depth = np.full(ntr, np.nan)
        depth[ok] = apparent_depth_m(t[ok, best[ok]] - nadir[ok, 0], permittivity)
    truncated = int(np.sum(ok & (nadir[:, 0] + window_s > start[:, 0] + (ns - 1) * sample_interval_s)))
    return index_db, fraction, depth, np.where(ok, surface, np.nan), truncated


@dataclass(frozen=True)
class LevelScene:
    """What :func:`level_ground_index_db` simulates: the reference traces, the level ground under
    them, the radar (its recording shortened to what the index reads) and the index's window."""

    traces: Track  # the median-clearance trace and its neighbours
    middle: int  # the median-clearance trace's row in ``traces``
    ground: LevelGround
    config: SimulationConfig
    window_s: float  # the subsurface window after the nadir echo, s


def level_scene(src: DemSource, track: Track, h_nadir_m, config: SimulationConfig, survey: dict) -> LevelScene | None:
    """The level-ground scene of a track's geometry (see :func:`level_ground_index_db`); None if no
    trace is above its nadir terrain."""
    from affine import Affine

    from ..constants import SPEED_OF_LIGHT_M_S
    from ..scene import ground_radius_m

    clearance = np.asarray(track.alt_m, dtype=np.float64) - np.asarray(h_nadir_m, dtype=np.float64)
    ok = np.flatnonzero(np.isfinite(clearance) & (clearance > 0))
    if ok.size == 0:
        return None
    i = int(ok[np.argsort(clearance[ok])[ok.size // 2]])
    rows = sorted({max(0, i - 1), i, min(len(track) - 1, i + 1)})
    h0 = float(h_nadir_m[i])
    radar = config.radar
    window_s = float(delay_after_surface_s(survey["max_depth_m"], survey["permittivity"]))
    if radar.window_start_s == "auto":  # only the subsurface window matters: a shorter recording is enough
        need = radar.auto_margin_samples + int(math.ceil(window_s / radar.sample_interval_s)) + 4 * radar.mainlobe_samples + 8
        samples = int(min(radar.samples, max(need, 64)))
        config = dataclasses.replace(config, radar=dataclasses.replace(radar, samples=samples))
        radar = config.radar
    max_range = clearance[i] + 0.5 * SPEED_OF_LIGHT_M_S * (radar.samples * radar.sample_interval_s + 2e-6)
    if radar.window_start_s != "auto":
        max_range = 0.5 * SPEED_OF_LIGHT_M_S * (float(radar.window_start_s) + radar.window_length_s)
    radius = float(ground_radius_m(src.body, np.array([track.alt_m[i]]), np.array([max_range]), h0, h0)[0])
    cell_x, cell_y = abs(src.transform.a), abs(src.transform.e)
    x, y = src.lonlat_to_xy(np.array([track.lon_deg[i]]), np.array([track.lat_deg[i]]))
    x, y = float(np.asarray(x)[0]), float(np.asarray(y)[0])
    if src.is_geographic:
        deg = math.degrees(1.0 / src.body.mean_radius_m)
        half_x = radius * deg / max(math.cos(math.radians(track.lat_deg[i])), 0.05) + 3 * cell_x
        half_y = radius * deg + 3 * cell_y
    else:
        half_x, half_y = radius + 3 * cell_x, radius + 3 * cell_y
    nx = int(min(6000, 2 * math.ceil(half_x / cell_x) + 1))
    ny = int(min(6000, 2 * math.ceil(half_y / cell_y) + 1))
    # on the DEM's own grid lines, so the facets fall across the nadir strip's edge as the real ones do
    t = src.transform
    west = t.c + math.floor((x - 0.5 * nx * cell_x - t.c) / cell_x) * cell_x
    north = t.f - math.floor((t.f - (y + 0.5 * ny * cell_y)) / cell_y) * cell_y
    traces = Track(track.lat_deg[rows], track.lon_deg[rows], track.alt_m[rows],
                   None if track.time_s is None else track.time_s[rows], source=f"{track.source} (level-ground reference)")  # fmt: skip
    # the height as a float32 DEM holds it (the reference was a float32 GeoTIFF: the same values)
    ground = LevelGround.like(src, Affine(cell_x, 0.0, west, 0.0, -cell_y, north), nx, ny, float(np.float32(h0)))
    return LevelScene(traces, rows.index(i), ground, config, window_s)


def level_index_db(ds, scene: LevelScene, permittivity: float) -> float:
    """:func:`clutter_index` (threshold 0 dB) of a radargram of ``scene`` at its middle trace, dB."""
    radar = scene.config.radar
    index_db, *_ = clutter_index(
        ds["power"].values, ds["left_fraction"].values, ds["right_fraction"].values, ds["window_start"].values,
        ds["nadir_delay"].values, radar.sample_interval_s, scene.window_s, radar.mainlobe_samples, 0.0, permittivity,
    )  # fmt: skip
    return float(index_db[scene.middle])


def level_ground_index_db(src: DemSource, track: Track, h_nadir_m, config: SimulationConfig, survey: dict) -> float:
    """The clutter index (raw, dB) that level ground gives in a track's geometry: computed, not tuned.

    The trace with the median height above its nadir terrain and its two
    neighbours are simulated over level ground
    (:func:`level_scene`: :class:`LevelGround`, in memory) — a constant height
    equal to that trace's nadir terrain, on the DEM's own CRS and cell size and
    grid lines (so facets are those of the real DEM) — with the same radar, and
    :func:`clutter_index` is taken at the middle trace. The neighbours give that
    trace its direction of travel (the central difference, as over the real DEM),
    which orients the nadir strip the index is measured against, and the platform
    speed from the track's times when the aperture needs it; the middle trace alone
    would be taken as flying north (0.5 to 0.65 dB off on east-going tracks).
    Level ground just outside
    the nadir strip (the pulse-limited footprint) echoes right after the nadir
    echo, so this floor is a few dB below 0 for most sounders (about −2.5 dB for
    the built-in radar 100 km up); the survey reports every index relative to it,
    so level ground reads 0 dB. Returns NaN if no trace has a nadir echo.
    """
    from ..simulate import simulate

    scene = level_scene(src, track, h_nadir_m, config, survey)
    if scene is None:
        return float("nan")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = simulate(scene.ground, scene.traces, scene.config, sources=True, max_memory_bytes=None, segment_traces=None)
    return level_index_db(ds, scene, survey["permittivity"])


def swath_half_width_m(body, clearance_m, max_depth_m: float, permittivity: float) -> float:
    """Cross-track distance from nadir of the level ground whose echo arrives at the bottom of the
    subsurface window: the ground the window reaches, ρ = √(2 h Δr / (1 + h/R)) with
    Δr = d_max √ε′ the extra range (flat-ground approximation of the law of cosines on a sphere of
    radius R, valid for Δr ≪ h), for the median clearance h of the track."""
    h = float(np.nanmedian(np.asarray(clearance_m, dtype=np.float64)))
    if not (math.isfinite(h) and h > 0):
        return 0.0
    dr = max_depth_m * math.sqrt(permittivity)
    return math.sqrt(2.0 * h * dr / (1.0 + h / body.mean_radius_m))
