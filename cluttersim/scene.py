"""The scene of a run: the DEM window around the track, its facets and each trace's recording window.

    Track + DemSource + SimulationConfig ──► read_track_window (only the ground the traces'
    windows can reach, at full resolution) ──► build_facets (tiled) ──► kernels.earliest_range
    ──► window starts and the kernels' delay margins ──► Scene

:func:`prepare_scene` is shared by :func:`cluttersim.simulate.simulate`, the echo-source
record (:mod:`cluttersim.analysis.sources`) and the DEM-error Monte Carlo
(:mod:`cluttersim.analysis.dem_error`), which reuses one scene across realisations.
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings
from dataclasses import dataclass

import numba
import numpy as np
from rasterio.windows import Window

from . import kernels, memory, presum
from .config import SimulationConfig
from .constants import SPEED_OF_LIGHT_M_S
from .errors import GeometryError, TrackError
from .facets import Facets, build_facets
from .io.dem import DemSource, DemWindow, warn_holes
from .physics.radar import (
    pulse_half_width_samples,
)
from .signals import OVERSAMPLE, TRACES_PER_BLOCK
from .track import Track
from .validate import check_far_field, check_power_bound

#: Largest decimated grid (cells per side) used to estimate the terrain's height range.
_PREVIEW_CELLS = 1024

#: Highest antenna accepted, in body radii above the reference surface (a sanity bound:
#: beyond it the whole visible disc echoes at nearly one delay).
MAX_ALT_BODY_RADII = 100


@dataclass
class RunStats:
    """Counters of one simulation, for progress reports and benchmarks."""

    facets: int = 0
    facet_evaluations: int = 0
    specular_evaluations: int = 0
    dem_window_shape: tuple[int, int] = (0, 0)
    seconds_facets: float = 0.0
    seconds_kernel: float = 0.0
    seconds_total: float = 0.0

#: Shadowing matters when the recording window reaches ground seen this low above the horizontal
#: (deg): the range at the window's end exceeds h / sin(angle), h the median height above the nadir
#: terrain (airborne and low passes over relief; an orbiter's window rarely reaches that far out)...
GRAZING_ELEVATION_DEG = 15.0

#: ...and the terrain read spans more than this fraction of h in height (relief that can hide ground).
GRAZING_RELIEF_FRACTION = 0.05


def warn_grazing_without_shadowing(scene: "Scene") -> None:
    """Warn when ``[processing] shadowing`` is off and the geometry is grazing over relief (see
    :data:`GRAZING_ELEVATION_DEG`, :data:`GRAZING_RELIEF_FRACTION`): there terrain hidden behind
    ridges would still echo (about 20 % too much energy 20 km off-track at 5 km up)."""
    if scene.config.processing.shadowing or scene.idx.size == 0:
        return
    h = float(np.nanmedian((scene.track.alt_m - scene.h_nadir_m)[scene.idx]))
    end_m = 0.5 * SPEED_OF_LIGHT_M_S * float(np.nanmedian(scene.start_s + scene.config.radar.window_length_s))
    elev = scene.window.elevation_m
    relief = float(np.nanmax(elev) - np.nanmin(elev)) if np.isfinite(elev).any() else 0.0
    if h > 0 and end_m > h / math.sin(math.radians(GRAZING_ELEVATION_DEG)) and relief > GRAZING_RELIEF_FRACTION * h:
        warnings.warn(
            f"{scene.track.source}: the window reaches ground {end_m / 1e3:.1f} km away from {h / 1e3:.2f} km up "
            f"(below {GRAZING_ELEVATION_DEG:g}° elevation) with [processing] shadowing off: terrain hidden behind "
            "ridges still echoes; set shadowing = true",
            stacklevel=3,
        )


@dataclass
class Scene:
    """Everything a track over a DEM needs before the per-facet kernels run.

    Arrays named ``*_s`` over the traces on the DEM (``idx``) hold their window
    start and earliest echo; ``ant_m`` holds every trace's antenna position
    relative to ``facets.origin_m``.
    """

    src: DemSource
    track: Track
    config: SimulationConfig
    window: DemWindow
    facets: Facets
    ant_m: np.ndarray
    on_dem: np.ndarray
    idx: np.ndarray
    h_nadir_m: np.ndarray
    nadir_delay_s: np.ndarray
    earliest_delay_s: np.ndarray
    start_s: np.ndarray
    pad: int
    pulse_weights: np.ndarray
    _shadow_heights: np.ndarray | None = None

    @property
    def shadow_heights_m(self) -> np.ndarray:
        """The DEM window's heights for the shadowing march (holes at the lowest height: they
        never block), float32, computed once."""
        if self._shadow_heights is None:
            elev = self.window.elevation_m
            self._shadow_heights = np.where(np.isfinite(elev), elev, np.nanmin(elev)).astype(np.float32)
        return self._shadow_heights


def prepare_scene(
    src: DemSource, track: Track, config: SimulationConfig, stats: RunStats | None = None, *,
    max_memory_bytes: int | str | None = "auto", sources: bool = True, range_margin_m: float = 0.0,
) -> Scene:  # fmt: skip
    """Read the DEM window a track needs, build its facets and each trace's recording window.

    ``range_margin_m`` widens the DEM window as if every window reached that much farther
    (the DEM-error Monte Carlo, :mod:`cluttersim.analysis.dem_error`, raises terrain by up to it).

    Raises :class:`TrackError` or :class:`GeometryError` for tracks off the DEM,
    below the terrain, or windows that cannot hold any surface echo, and
    :class:`~cluttersim.errors.MemoryLimitError` before the full-resolution read
    if the run would need more than ``max_memory_bytes`` (see :func:`simulate`).
    """
    stats = stats if stats is not None else RunStats()
    radar = config.radar
    body = src.body

    too_high = np.flatnonzero(track.alt_m > MAX_ALT_BODY_RADII * body.semi_major_m)
    if too_high.size:
        i = too_high[0]
        raise TrackError(
            f"{track.source}: row {i + 1} alt = {track.alt_m[i]:.6g} m: expected at most {MAX_ALT_BODY_RADII} body radii "
            f"({MAX_ALT_BODY_RADII * body.semi_major_m:.6g} m) above the reference surface"
        )
    rows, cols = src.lonlat_to_rowcol(track.lon_deg, track.lat_deg)
    on_dem = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
    if not on_dem.any():
        raise TrackError(f"{track.source}: no trace lies over the DEM {src.path.name}; {extents_text(src, track)}")
    if not on_dem.all():
        warnings.warn(
            f"{track.source}: {int((~on_dem).sum())} of {len(track)} traces are not over the DEM; they are filled with NaN",
            stacklevel=3,
        )

    # the widest compressed pulse (lowest bandwidth) sets the padding of every band
    band_configs = [cfg for _, cfg in config.per_band()]
    band_radars = [cfg.radar for cfg in band_configs]
    pad = max(pulse_half_width_samples(r.bandwidth_hz, r.sample_interval_s, r.range_window, r.center_frequency_hz,
                                       cfg.ionosphere) for r, cfg in zip(band_radars, band_configs))  # fmt: skip

    given = max_memory_bytes != "auto"
    limit = max_memory_bytes
    if not given:
        limit = memory.default_limit_bytes()
    elif isinstance(limit, str):
        limit = memory.parse_size(limit)

    def check(win):
        est = memory.estimate_memory_bytes(
            win.width * win.height, len(track) * len(band_radars), radar.samples, sources=sources,
            threads=numba.get_num_threads(),
            pad_samples=pad, oversample=OVERSAMPLE, traces_per_block=TRACES_PER_BLOCK,
        )  # fmt: skip
        memory.check_memory(est, limit, given=given)

    # the memory check comes before any preview of the DEM and before the pulse response is computed
    margin_samples = int(math.ceil(2.0 * range_margin_m / SPEED_OF_LIGHT_M_S / radar.sample_interval_s))
    window = read_track_window(src, track, on_dem, config, pad_samples=pad + margin_samples, before_full_read=check)
    band_pulses = [cfg.pulse_kernel() for cfg in band_configs]
    kernel_weights = band_pulses[0][1]
    warn_holes(window)
    t0 = time.perf_counter()
    facets = build_facets(window)
    stats.seconds_facets = time.perf_counter() - t0
    stats.facets = len(facets)
    stats.dem_window_shape = window.shape

    ant = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m) - facets.origin_m
    h_nadir = window.bilinear_m(track.lon_deg, track.lat_deg)
    below = np.flatnonzero(on_dem & (track.alt_m <= h_nadir))
    if below.size:
        i = below[0]
        raise TrackError(
            f"{track.source}: row {i + 1} alt = {track.alt_m[i]:.1f} m is at or below the terrain "
            f"({h_nadir[i]:.1f} m); expected the antenna above the surface{altitude_unit_hint(track.alt_m, h_nadir)}"
        )
    check_far_field(track, h_nadir, config)
    # before any power kernel: radar and surface numbers that could overflow the radargram are refused
    nearest_m = float(np.nanmin(track.alt_m[on_dem]) - np.nanmax(window.elevation_m))
    check_power_bound(config, nearest_m, float(np.sum(facets.area_m2, dtype=np.float64)),
                      max(float(np.sum(w)) for _, w in band_pulses))  # fmt: skip
    nadir_delay = 2.0 * (track.alt_m - h_nadir) / SPEED_OF_LIGHT_M_S

    idx = np.flatnonzero(on_dem)
    ant_on = np.ascontiguousarray(ant[idx])
    earliest_m = np.empty(idx.size)
    # the earliest echo is no farther than the ground below the antenna (plus a facet's size)
    bound = np.nan_to_num((track.alt_m - h_nadir)[idx], nan=np.inf) + 2.0 * facets.tile_extent_m.max() + 1.0
    kernels.earliest_range(
        ant_on, bound, facets.tile_centre_m, facets.tile_radius_m, facets.tile_slab, facets.tile_offsets,
        facets.rel_m, facets.normal, facets.e_col_m, facets.e_row_m, earliest_m,
    )  # fmt: skip
    earliest_delay = 2.0 * earliest_m / SPEED_OF_LIGHT_M_S
    dt = radar.sample_interval_s
    if radar.window_start_s == "auto":
        start = earliest_delay - radar.auto_margin_samples * dt
    else:
        start = np.full(idx.size, float(radar.window_start_s))
        end = start + radar.window_length_s
        if np.all(end < earliest_delay):
            raise GeometryError(
                f"[radar] window_start_s = {radar.window_start_s!r}: the window ends at {end[0] * 1e6:.3f} µs, before "
                f"the earliest surface echo ({earliest_delay.min() * 1e6:.3f} µs); expected a window that contains it"
            )
    start = presum.shared_window_starts(start, idx, len(track), config.processing.presum)

    return Scene(
        src=src, track=track, config=config, window=window, facets=facets, ant_m=ant, on_dem=on_dem, idx=idx,
        h_nadir_m=h_nadir, nadir_delay_s=nadir_delay, earliest_delay_s=earliest_delay, start_s=start,
        pad=pad, pulse_weights=kernel_weights,
    )  # fmt: skip


def extents_text(src: DemSource, track: Track) -> str:
    """The DEM's and the track's extents in degrees, for a message when they do not meet."""
    t = src.transform
    x0, y1 = t.c, t.f
    x1, y0 = t.c + t.a * src.width, t.f + t.e * src.height
    if src.is_geographic:
        dem_text = f"DEM lon {min(x0, x1):.4f}..{max(x0, x1):.4f}, lat {min(y0, y1):.4f}..{max(y0, y1):.4f}"
    else:
        xs = np.array([x0, x1, x0, x1])
        ys = np.array([y0, y0, y1, y1])
        lon, lat = src.xy_to_lonlat(xs, ys)
        dem_text = (f"DEM x {min(x0, x1):.0f}..{max(x0, x1):.0f}, y {min(y0, y1):.0f}..{max(y0, y1):.0f} "
                    f"(about lon {np.nanmin(lon):.4f}..{np.nanmax(lon):.4f}, lat {np.nanmin(lat):.4f}..{np.nanmax(lat):.4f})")  # fmt: skip
    lat, lon = track.lat_deg, track.lon_deg
    hint = ""
    if src.is_geographic and np.nanmin(lat) >= min(x0, x1) - 1 and np.nanmax(lat) <= max(x0, x1) + 1 \
            and np.nanmin(lon) >= min(y0, y1) - 1 and np.nanmax(lon) <= max(y0, y1) + 1:  # fmt: skip
        hint = "; lat and lon look swapped"
    return (f"{dem_text}; track lon {np.nanmin(lon):.4f}..{np.nanmax(lon):.4f}, "
            f"lat {np.nanmin(lat):.4f}..{np.nanmax(lat):.4f}{hint}")  # fmt: skip


def altitude_unit_hint(alt_m, h_nadir_m) -> str:
    """"; the altitudes look like kilometres" when every altitude × 1000 would clear the terrain
    while the altitudes themselves are below it (a track written in km), else ""."""
    alt = np.asarray(alt_m, dtype=np.float64)
    h = np.asarray(h_nadir_m, dtype=np.float64)
    ok = np.isfinite(alt) & np.isfinite(h)
    if ok.any() and np.all(alt[ok] * 1000.0 > h[ok]) and np.nanmax(np.abs(alt[ok])) < 5000.0:
        return (f"; the altitudes ({np.nanmin(alt[ok]):g}..{np.nanmax(alt[ok]):g}) look like kilometres: "
                "the alt column is in metres")  # fmt: skip
    return ""


def scene_for_band(scene: Scene, band_config: SimulationConfig) -> Scene:
    """The scene with one band's single-band configuration and compressed pulse (the DEM
    window, facets, recording windows and padding are shared by all bands)."""
    _, weights = band_config.pulse_kernel()
    if scene.config.processing.shadowing:
        scene.shadow_heights_m  # computed once, shared by the bands
    return dataclasses.replace(scene, config=band_config, pulse_weights=weights)


def ground_radius_m(body, alt_m, max_range_m, h_min_m: float, h_max_m: float) -> np.ndarray:
    """Largest ground distance (m) from nadir at which terrain can reach ``max_range_m``.

    On a sphere of radius Rp, a point at height h and central angle γ from the
    antenna (height H) is at range R² = (Rp+H)² + (Rp+h)² − 2(Rp+H)(Rp+h)cos γ
    (law of cosines). The bound uses the highest terrain (nearest possible)
    and is capped by the horizon over which a peak of height ``h_max_m`` can
    still be seen from above a surface at ``h_min_m``. A 2 % margin covers the
    ellipsoid's departure from the sphere.
    """
    rp = body.semi_major_m
    ra = rp + np.asarray(alt_m, dtype=np.float64)
    rh = rp + h_max_m
    cos_g = (ra**2 + rh**2 - np.asarray(max_range_m) ** 2) / (2.0 * ra * rh)
    g_range = np.arccos(np.clip(cos_g, -1.0, 1.0))
    rl = rp + h_min_m
    g_horizon = np.arccos(np.clip(rl / ra, -1.0, 1.0)) + np.arccos(np.clip(rl / rh, -1.0, 1.0))
    return 1.02 * rp * np.minimum(g_range, g_horizon)


def _max_range_m(track: Track, config: SimulationConfig, h_min_m: float, pad_samples: int) -> np.ndarray:
    """Upper bound of the range each trace's window can reach."""
    radar = config.radar
    extra = (pad_samples + 1) * radar.sample_interval_s
    if radar.window_start_s == "auto":
        # the earliest echo is never later than the nadir echo, which is at most alt - h_min away
        end_s = 2.0 * (track.alt_m - h_min_m) / SPEED_OF_LIGHT_M_S + radar.window_length_s + extra
    else:
        end_s = np.full(len(track), radar.window_start_s + radar.window_length_s + extra)
    return 0.5 * SPEED_OF_LIGHT_M_S * end_s


def _window_for_radius(src: DemSource, track: Track, on_dem, radius_m: np.ndarray):
    """DEM window holding every point within ``radius_m`` of the track's on-DEM traces.

    Rings of 72 points at the radius around (a subsample of) the traces are
    mapped to DEM rows and columns; the window is their bounding box plus 2
    pixels. For geographic DEMs the ring longitudes are taken relative to their
    trace (so a ring across the DEM's west or east edge extends past that edge
    instead of wrapping to the other side), and:

    * a ring that encloses a pole covers every longitude: the window then spans
      the DEM's full width and reaches the pole's row;
    * on a DEM that spans 360° of longitude (:attr:`DemSource.wraps_longitude`),
      the window may run past the grid's west or east edge (e.g. across the
      antimeridian of a −180..180 DEM): :meth:`DemSource.read` joins the two
      pieces into one block. If it would be wider than the DEM, it is the full width.

    Projected DEMs (polar stereographic, equirectangular...) are plain x/y grids:
    the box of the rings' projected points. A projected grid that itself wraps
    around the body (a global equirectangular DEM) is not joined across its edge.
    """
    body = src.body
    if np.max(radius_m) > 0.5 * math.pi * body.semi_minor_m:
        return src.window_around([0, src.height - 1], [0, src.width - 1], pad=0)
    idx = np.flatnonzero(on_dem)
    step = max(1, idx.size // 400)
    lat_on = track.lat_deg[idx]
    pos = np.unique(np.concatenate([np.arange(0, idx.size, step), [idx.size - 1, np.argmax(lat_on), np.argmin(lat_on)]]))
    keep = idx[pos]
    az = np.linspace(0.0, 360.0, 72, endpoint=False)
    geod = body.geod()
    lon0 = np.repeat(track.lon_deg[keep], az.size)
    lat0 = np.repeat(track.lat_deg[keep], az.size)
    lon, lat, _ = geod.fwd(lon0, lat0, np.tile(az, keep.size), np.repeat(radius_m[keep], az.size))
    if not src.is_geographic:
        rows, cols = src.lonlat_to_rowcol(np.concatenate([lon, track.lon_deg[idx]]), np.concatenate([lat, lat_on]))
        return src.window_around(rows, cols, pad=2)

    # geographic: longitudes continuous along the track, rings relative to their trace
    x_on, _ = src.lonlat_to_xy(track.lon_deg[idx], lat_on)
    if src.wraps_longitude:
        x_on = np.unwrap(x_on, period=360.0)
    dlon = (lon - lon0 + 180.0) % 360.0 - 180.0
    x = np.concatenate([np.repeat(x_on[pos], az.size) + dlon, x_on])
    y = np.concatenate([lat, lat_on])
    r_keep = radius_m[keep]
    n = keep.size
    _, _, to_north = geod.inv(track.lon_deg[keep], track.lat_deg[keep], track.lon_deg[keep], np.full(n, 90.0))
    _, _, to_south = geod.inv(track.lon_deg[keep], track.lat_deg[keep], track.lon_deg[keep], np.full(n, -90.0))
    pole = False
    for pole_lat, dist in ((90.0, to_north), (-90.0, to_south)):
        if np.any(dist < r_keep):
            x, y, pole = np.append(x, x_on[0]), np.append(y, pole_lat), True
    col, row = ~src.transform @ (x, np.clip(y, -90.0, 90.0))
    rows, cols = np.asarray(row) - 0.5, np.asarray(col) - 0.5
    if pole:
        cols = np.append(cols, [0.0, src.width - 1.0])
    if not src.wraps_longitude:
        return src.window_around(rows, cols, pad=2)
    pad = 2
    c_lo = int(math.floor(np.nanmin(cols))) - pad
    c_hi = int(math.ceil(np.nanmax(cols))) + pad + 1
    r0 = max(int(math.floor(np.nanmin(rows))) - pad, 0)
    r1 = min(int(math.ceil(np.nanmax(rows))) + pad + 1, src.height)
    if r1 <= r0:
        return None
    if c_hi - c_lo >= src.width:
        return Window(0, r0, src.width, r1 - r0)
    shift = (c_lo // src.width) * src.width  # put the west edge on the grid; the east may run past it
    return Window(c_lo - shift, r0, c_hi - c_lo, r1 - r0)


def read_track_window(
    src: DemSource, track: Track, on_dem, config: SimulationConfig, pad_samples: int = 0, before_full_read=None
) -> DemWindow:
    """Read the part of the DEM whose echoes can fall inside any trace's window.

    The needed ground radius depends on the terrain's height range, which is
    not known before reading: it is estimated on decimated reads until stable,
    then the full-resolution window is read (and widened if its true height
    range asks for more). ``before_full_read(window)``, if given, is called
    before every full-resolution read (the memory check).
    """
    h_lo = h_hi = 0.0
    window = None
    for _ in range(8):
        radius = ground_radius_m(src.body, track.alt_m, _max_range_m(track, config, h_lo, pad_samples), h_lo, h_hi)
        new = _window_for_radius(src, track, on_dem, radius)
        if new is None:
            raise TrackError(f"{track.source}: the track's footprint does not overlap the DEM {src.path.name}")
        if window is not None and new == window:
            break
        window = new
        if before_full_read is not None:  # the window only grows: refuse at once one that is already too big
            before_full_read(window)
        shape = (min(window.height, _PREVIEW_CELLS), min(window.width, _PREVIEW_CELLS))
        preview = src.read(window, out_shape=shape).elevation_m
        if np.isnan(preview).all():
            continue
        lo, hi = float(np.nanmin(preview)), float(np.nanmax(preview))
        margin = 0.05 * (hi - lo)
        h_lo, h_hi = min(h_lo, lo - margin), max(h_hi, hi + margin)
    for _ in range(4):
        if before_full_read is not None:
            before_full_read(window)
        full = src.read(window)
        if np.isnan(full.elevation_m).all():
            return full  # build_facets reports the all-nodata window
        lo, hi = float(np.nanmin(full.elevation_m)), float(np.nanmax(full.elevation_m))
        if lo >= h_lo and hi <= h_hi:
            return full
        h_lo, h_hi = min(h_lo, lo), max(h_hi, hi)
        radius = ground_radius_m(src.body, track.alt_m, _max_range_m(track, config, h_lo, pad_samples), h_lo, h_hi)
        new = _window_for_radius(src, track, on_dem, radius)
        if new == window:
            return full
        window = new
    if before_full_read is not None:
        before_full_read(window)
    return src.read(window)
