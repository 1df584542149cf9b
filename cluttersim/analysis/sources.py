"""Clutter sources on the ground: what echoes into a depth window, and what made one echo.

Both questions are answered from a finished run directory: the DEM window,
facets and recording windows are rebuilt exactly as the simulation built them
(:func:`cluttersim.simulate.prepare_scene`) and a compiled kernel
(:func:`cluttersim.kernels.facet_power_in_windows`) sums each facet's power
into the delay window asked for. Delay windows refer to a facet's own delay
extent; the compressed pulse's spreading is not applied here.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import xarray as xr
from tqdm.auto import tqdm

from .. import kernels
from ..physics.antenna import trace_frames
from .attribution import right_unit_vectors
from ..config import SimulationConfig
from ..io.datums import with_recorded_height_unit
from ..io.dem import DemSource
from ..errors import ClutterSimError, ConfigError
from ..physics.radar import apparent_depth_m, delay_after_surface_s
from ..products import MapFrame
from ..io.radargram import open_radargram
from ..simulate import Scene, prepare_scene, scene_for_band, shadow_inputs
from ..track import Track


@dataclass
class Run:
    """A finished simulation: its radargram and the rebuilt scene."""

    run_dir: Path
    ds: xr.Dataset
    scene: Scene

    @property
    def config(self) -> SimulationConfig:
        return self.scene.config


def load_run(run_dir, dem=None, band: str | None = None) -> Run:
    """Open ``RUN_DIR/radargram.nc`` and rebuild its scene from the DEM it was made from.

    ``dem`` overrides the DEM path recorded in the run (e.g. after moving files);
    ``band`` picks one band of a multi-band run (default: the first).
    """
    run_dir = Path(run_dir)
    ds = open_radargram(run_dir / "radargram.nc", band=band)
    try:
        config = SimulationConfig.from_dict(json.loads(ds.attrs["cluttersim_config"]))
        # the scene (DEM window, padding) of a multi-band run is that of all its bands
        scene_config = SimulationConfig.from_dict(json.loads(ds.attrs.get("cluttersim_config_all", ds.attrs["cluttersim_config"])))
        dem_path = dem or ds.attrs["dem_path"]
    except KeyError as exc:
        raise ClutterSimError(f"{run_dir}/radargram.nc: attribute {exc} missing; expected a cluttersim run") from None
    radius = ds.attrs.get("body_radius_given_m")
    src = DemSource.open(dem_path, body_radius_m=float(radius) if radius is not None else None)
    src = with_recorded_height_unit(src, ds.attrs)
    time_s = ds["time"].values if "time" in ds else None
    track = Track(ds["lat"].values, ds["lon"].values, ds["alt"].values, time_s, source=f"{run_dir}/radargram.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the run already reported holes and traces off the DEM
        presummed = config.processing.presum > 1
        if presummed:
            # the recorded traces are the presummed ones: the scene is rebuilt at their positions
            # (each run of pulses' mean position) with their recorded windows
            config = replace(config, processing=replace(config.processing, presum=1))
            scene_config = replace(scene_config, processing=config.processing)
        scene = scene_for_band(prepare_scene(src, track, scene_config), config)
    recorded = ds["window_start"].values[scene.idx]
    if presummed:
        scene.start_s = recorded
    elif not np.allclose(recorded, scene.start_s, rtol=0, atol=1e-3 * config.radar.sample_interval_s):
        raise ClutterSimError(f"{src.path}: the DEM no longer gives the run's recording windows; was it changed?")
    return Run(run_dir=run_dir, ds=ds, scene=scene)


def _frames(scene: Scene, traces) -> np.ndarray:
    """Along/right/down frames of some traces (for antenna patterns)."""
    track, body = scene.track, scene.src.body
    return trace_frames(right_unit_vectors(body, track)[traces], body.up_unit(track.lat_deg, track.lon_deg)[traces])


def _kernel_power(scene: Scene, traces, lo_s, hi_s) -> np.ndarray:
    """Per-facet power (W) into [lo_s, hi_s) summed over ``traces`` (indices into the track)."""
    f = scene.facets
    surface = scene.config.surface
    p0, p1 = surface.kernel_params()
    out = np.zeros(len(f))
    kernels.facet_power_in_windows(
        np.ascontiguousarray(scene.ant_m[traces]), np.asarray(lo_s, dtype=np.float64), np.asarray(hi_s, dtype=np.float64),
        scene.config.radar.sample_interval_s, f.tile_centre_m, f.tile_radius_m, f.tile_extent_m, f.tile_offsets,
        f.rel_m, f.normal, f.e_col_m, f.e_row_m, f.area_m2, surface.law_code, p0, p1,
        scene.config.radar.radar_constant_w_m2(), _frames(scene, traces), scene.config.kernel_weighting(),
        *shadow_inputs(scene, traces), out,
    )  # fmt: skip
    return out


# --------------------------------------------------------------------------- side centroids


@dataclass
class SideCentroids:
    """Power-weighted centroid of the ground each side of the track sends into each sample.

    ``lat[side]``, ``lon[side]`` (trace, sample), degrees, for ``side`` in
    ("left", "right"): Σ P_f φ_f / Σ P_f over the facets f of that side, with
    P_f the facet's power after the pulse compression (the same side split
    and pulse response as the source record); NaN where the side sends no
    power. Longitudes are in the convention of the track's.
    """

    lat: dict
    lon: dict


def side_centroids(run: Run, *, progress: bool = False) -> SideCentroids:
    """Where each side's echo comes from, on average: :class:`SideCentroids` of a finished run.

    The strongest single facet (``source_lat``/``source_lon`` of the run) can
    sit far from where most of a side's power comes from; the centroid says
    where that is. It is computed exactly, without approximation, by running
    the simulation's kernel three times over the run's scene — with each
    facet's power weighted by 1, by its latitude and by its longitude (offset
    to stay positive): power is linear in the facet area the kernel is given,
    and so are the delay spreading and the pulse compression, so the ratio of
    the weighted to the unweighted side rows is the centroid per sample.

    Costs about three runs of ``simulate`` with the source record; not for
    coherent-mode runs (no sides).
    """
    from ..simulate import _compress, binned_power

    scene = run.scene
    cfg = scene.config
    if cfg.processing.mode == "coherent":
        raise ClutterSimError(f"{run.run_dir}: a coherent-mode run has no source record; no side centroids")
    ds = run.ds
    radar = cfg.radar
    f = scene.facets
    lon_f, lat_f = scene.window.lonlat_of_cells(f.cell)
    lat0 = float(np.min(lat_f))
    lon_ref = float(np.median(lon_f))
    lon_off = (np.asarray(lon_f) - lon_ref + 180.0) % 360.0 - 180.0
    lon0 = float(lon_off.min())
    weights = {"one": None, "lat": np.asarray(lat_f) - lat0 + 1.0, "lon": lon_off - lon0 + 1.0}
    scenes = {k: scene if w is None else replace(scene, facets=replace(f, area_m2=(f.area_m2 * w).astype(f.area_m2.dtype)))
              for k, w in weights.items()}  # fmt: skip
    idx, pad = scene.idx, scene.pad
    dt = radar.sample_interval_s
    samples = radar.samples
    nbins = samples + 2 * pad
    bin0 = scene.start_s - (pad + 0.5) * dt
    track, body = scene.track, scene.src.body
    right_unit = right_unit_vectors(body, track)[idx]
    frames = trace_frames(right_unit, body.up_unit(track.lat_deg, track.lon_deg)[idx])
    strip = np.asarray(ds["nadir_strip_half_width"].values, dtype=np.float64)[idx]
    ntr = len(track)
    out_lat = {s: np.full((ntr, samples), np.nan, dtype=np.float32) for s in ("left", "right")}
    out_lon = {s: np.full((ntr, samples), np.nan, dtype=np.float32) for s in ("left", "right")}
    ant = np.ascontiguousarray(scene.ant_m[idx])
    sides = {"left": kernels.SIDE_LEFT, "right": kernels.SIDE_RIGHT}
    east_positive = bool(np.any(np.asarray(track.lon_deg) > 180.0))
    chunk = 64
    with tqdm(total=idx.size, unit="trace", delay=1.0, disable=not progress, desc="side centroids") as bar:
        for a in range(0, idx.size, chunk):
            b = min(a + chunk, idx.size)
            rows = idx[a:b]
            comp = {}
            for k, sc in scenes.items():
                binned, _, _ = binned_power(sc, ant[a:b], bin0[a:b], nbins, right_unit[a:b], strip[a:b], True,
                                            frames[a:b], rows)  # fmt: skip
                comp[k] = {s: _compress(binned[:, row], scene.pulse_weights, pad, samples) for s, row in sides.items()}
            for s in sides:
                p = comp["one"][s]
                with np.errstate(invalid="ignore", divide="ignore"):
                    ok = p > 1e-30 * max(float(np.max(p, initial=0.0)), 1e-300)
                    lat = np.where(ok, comp["lat"][s] / np.where(ok, p, 1.0) - 1.0 + lat0, np.nan)
                    lon = np.where(ok, comp["lon"][s] / np.where(ok, p, 1.0) - 1.0 + lon0 + lon_ref, np.nan)
                lon = lon % 360.0 if east_positive else (lon + 180.0) % 360.0 - 180.0
                out_lat[s][rows] = lat
                out_lon[s][rows] = lon
            bar.update(b - a)
    return SideCentroids(lat=out_lat, lon=out_lon)


# --------------------------------------------------------------------------- depth-window map


@dataclass
class SourceMap:
    """Power (W) each DEM cell sends into an apparent-depth window, summed over the track.

    ``power_w`` has the shape of the DEM window read for the run (NaN in
    holes); ``transform`` and ``crs`` are that window's.
    """

    power_w: np.ndarray
    elevation_m: np.ndarray
    transform: object
    crs: object
    depth_min_m: float
    depth_max_m: float
    permittivity: float


def depth_window_map(run: Run, depth_min_m: float, depth_max_m: float, permittivity: float = 3.15,
                     progress: bool = False) -> SourceMap:  # fmt: skip
    """Map the terrain that echoes into apparent depths [min, max) below the nadir surface.

    For each trace the delay window is nadir_delay + 2 d √ε′ / c for d in the
    depth range (the depth convention of :func:`cluttersim.physics.radar.apparent_depth_m`):
    the ground that would masquerade as subsurface at those depths.
    """
    _check_depths(depth_min_m, depth_max_m, permittivity)
    scene = run.scene
    nadir = scene.nadir_delay_s
    traces = scene.idx[np.isfinite(nadir[scene.idx])]
    lo = nadir[traces] + delay_after_surface_s(depth_min_m, permittivity)
    hi = nadir[traces] + delay_after_surface_s(depth_max_m, permittivity)
    per_facet = np.zeros(len(scene.facets))
    step = max(1, len(traces) // 20)
    with tqdm(total=len(traces), unit="trace", delay=1.0, disable=not progress, desc="mapping sources") as bar:
        for a in range(0, len(traces), step):
            b = min(a + step, len(traces))
            per_facet += _kernel_power(scene, traces[a:b], lo[a:b], hi[a:b])
            bar.update(b - a)
    window = scene.window
    grid = np.full(window.shape[0] * window.shape[1], np.nan)
    grid[scene.facets.cell] = per_facet
    return SourceMap(
        power_w=grid.reshape(window.shape).astype(np.float32),
        elevation_m=window.elevation_m,
        transform=window.transform,
        crs=scene.src.crs,
        depth_min_m=float(depth_min_m),
        depth_max_m=float(depth_max_m),
        permittivity=float(permittivity),
    )


def _check_depths(depth_min_m, depth_max_m, permittivity):
    if not (np.isfinite(depth_min_m) and np.isfinite(depth_max_m) and 0 <= depth_min_m < depth_max_m):
        raise ConfigError(f"depth window {depth_min_m} {depth_max_m} m: expected 0 <= A < B")
    if not (np.isfinite(permittivity) and permittivity >= 1):
        raise ConfigError(f"permittivity {permittivity}: expected a real relative permittivity >= 1")


# --------------------------------------------------------------------------- one echo


@dataclass(frozen=True)
class EchoSource:
    """One ground cell behind an echo, ranked by its share of the echo's power."""

    rank: int
    lat_deg: float
    lon_deg: float
    side: str
    cross_track_m: float
    offnadir_m: float
    share: float
    power_w: float


@dataclass
class EchoAnswer:
    """The ranked cells behind the sample ``sample`` of trace ``trace``."""

    trace: int
    sample: int
    delay_s: float
    depth_m: float
    permittivity: float
    antenna_lat_deg: float
    antenna_lon_deg: float
    total_power_w: float
    cells: list[EchoSource]


def ask_echo(run: Run, trace: int, *, delay_s: float | None = None, depth_m: float | None = None,
             permittivity: float = 3.15, top: int = 10) -> EchoAnswer:  # fmt: skip
    """Rank the ground cells that echo into one sample of one trace.

    The sample is given either by ``delay_s`` after the trace's window start
    (the radargram's ``delay`` coordinate) or by ``depth_m``, an apparent depth
    below the nadir surface. Cells are ranked by the power they send into that
    sample's delay interval, widened to the compressed pulse's half-power
    resolution (1/B) when samples are finer.
    """
    ds, scene = run.ds, run.scene
    radar = scene.config.radar
    ntrace = ds.sizes["trace"]
    if not 0 <= trace < ntrace:
        raise ConfigError(f"trace {trace}: expected 0..{ntrace - 1}")
    if not scene.on_dem[trace]:
        raise ConfigError(f"trace {trace}: its nadir is not on the DEM (no simulated echo)")
    if (delay_s is None) == (depth_m is None):
        raise ConfigError("give exactly one of a delay or a depth")
    if not (np.isfinite(permittivity) and permittivity >= 1):
        raise ConfigError(f"permittivity {permittivity}: expected a real relative permittivity >= 1")
    start = float(ds["window_start"][trace])
    nadir = float(ds["nadir_delay"][trace])
    dt = radar.sample_interval_s
    if depth_m is not None:
        if not np.isfinite(nadir):
            raise ConfigError(f"trace {trace}: no nadir surface (DEM hole), give a delay instead of a depth")
        delay_s = nadir + float(delay_after_surface_s(depth_m, permittivity)) - start
    sample = int(round(delay_s / dt))
    if not 0 <= sample < radar.samples:
        raise ConfigError(f"delay {delay_s * 1e6:.3f} µs: expected 0..{radar.samples * dt * 1e6:.3f} µs after the window start")
    centre = start + sample * dt
    half = max(0.5 * dt, 0.5 / radar.bandwidth_hz)
    per_facet = _kernel_power(scene, np.array([trace]), [centre - half], [centre + half])
    total = float(per_facet.sum())
    order = np.argsort(per_facet)[::-1][:top]
    order = order[per_facet[order] > 0]
    lon, lat = scene.window.lonlat_of_cells(scene.facets.cell[order])
    right = right_unit_vectors(scene.src.body, scene.track)[trace]
    cross = (scene.facets.positions_m(order) - scene.ant_m[trace]) @ right
    strip = float(ds["nadir_strip_half_width"][trace]) if "nadir_strip_half_width" in ds else 0.0
    track = scene.track
    if order.size:
        _, _, dist = scene.src.body.geod().inv(
            np.full(order.size, track.lon_deg[trace]), np.full(order.size, track.lat_deg[trace]), lon, lat
        )
    else:
        dist = np.array([])
    ranked = [
        EchoSource(
            rank=i + 1,
            lat_deg=float(lat[i]),
            lon_deg=float(lon[i]),
            side="nadir strip" if abs(cross[i]) <= strip else ("right" if cross[i] > 0 else "left"),
            cross_track_m=float(cross[i]),
            offnadir_m=float(dist[i]),
            share=float(per_facet[order[i]] / total) if total > 0 else 0.0,
            power_w=float(per_facet[order[i]]),
        )
        for i in range(order.size)
    ]
    depth = float(apparent_depth_m(centre - nadir, permittivity)) if np.isfinite(nadir) else np.nan
    return EchoAnswer(
        trace=trace, sample=sample, delay_s=sample * dt, depth_m=depth, permittivity=permittivity,
        antenna_lat_deg=float(track.lat_deg[trace]), antenna_lon_deg=float(track.lon_deg[trace]),
        total_power_w=total, cells=ranked,
    )  # fmt: skip


# --------------------------------------------------------------------------- products


def _depth_tag(a: float, b: float, permittivity: float) -> str:
    return f"{a:g}-{b:g}m_eps{permittivity:g}"


def _band_tag(run: Run) -> str:
    """``_<band>`` for one band of a multi-band run (file names), else empty."""
    return f"_{run.ds.attrs['band']}" if "band" in run.ds.attrs else ""


def write_source_map(run: Run, smap: SourceMap, *, overwrite: bool = False, figures=None) -> dict[str, Path]:
    """Write the depth-window map as ``sources_<A>-<B>m_eps<ε>.tif`` (GeoTIFF, W per cell,
    the run's DEM-window grid and CRS) and a ``.png`` beside it in the run directory
    (``figures``: :class:`cluttersim.products.FigureOptions` — dpi, png/pdf/svg, dB range)."""
    import rasterio
    from rasterio.crs import CRS as RioCRS

    from .. import plots
    from ..io.outputs import atomic_paths, check_new

    from ..products import FigureOptions

    figures = figures or FigureOptions()
    stem = f"sources_{_depth_tag(smap.depth_min_m, smap.depth_max_m, smap.permittivity)}{_band_tag(run)}"
    paths = {"tif": run.run_dir / f"{stem}.tif", "png": run.run_dir / f"{stem}.{figures.fmt}"}
    check_new(paths.values(), overwrite)
    ny, nx = smap.power_w.shape
    profile = dict(driver="GTiff", width=nx, height=ny, count=1, dtype="float32", transform=smap.transform,
                   nodata=np.nan, compress="deflate")  # fmt: skip
    if smap.crs is not None:
        profile["crs"] = RioCRS.from_wkt(smap.crs.to_wkt())
    frame = MapFrame.of(run.scene.src, smap.elevation_m, smap.transform)
    tx, ty = frame.xy(run.scene.track.lon_deg, run.scene.track.lat_deg)
    with atomic_paths([paths["tif"], paths["png"]]) as (tif, png):
        with rasterio.open(tif, "w", **profile) as dst:
            dst.write(smap.power_w, 1)
            dst.update_tags(
                units="W", quantity="echo power into the apparent-depth window, summed over the track",
                depth_min_m=smap.depth_min_m, depth_max_m=smap.depth_max_m, permittivity=smap.permittivity,
            )  # fmt: skip
        plots.plot_source_map(
            smap.power_w, smap.elevation_m, frame.extent, tx, ty, png, axis_labels=frame.axis_labels,
            geographic=run.scene.src.is_geographic,
            title=f"ground echoing at apparent depths {smap.depth_min_m:g}–{smap.depth_max_m:g} m (ε′ = {smap.permittivity:g})",
            dpi=figures.dpi, fmt=figures.fmt, **({"dynamic_range_db": figures.db_range} if figures.db_range else {}),
        )  # fmt: skip
    return paths


def write_echo_answer(run: Run, answer: EchoAnswer, *, overwrite: bool = False, figures=None) -> Path:
    """Write a small map of the cells behind one echo as ``echo_t<N>_<delay>us.png`` in the run directory
    (``figures``: dpi and format, :class:`cluttersim.products.FigureOptions`)."""
    from .. import plots
    from ..io.outputs import atomic_paths, check_new
    from ..products import FigureOptions

    figures = figures or FigureOptions()
    path = run.run_dir / f"echo_t{answer.trace}_{answer.delay_s * 1e6:.3f}us{_band_tag(run)}.{figures.fmt}"
    check_new([path], overwrite)
    src = run.scene.src
    window = run.scene.window
    frame = MapFrame.of(src, window.elevation_m, window.transform)
    tx, ty = frame.xy(run.scene.track.lon_deg, run.scene.track.lat_deg)
    ax, ay = frame.xy(answer.antenna_lon_deg, answer.antenna_lat_deg)
    cells_xy = np.column_stack(frame.xy([c.lon_deg for c in answer.cells], [c.lat_deg for c in answer.cells]))
    pts = np.vstack([cells_xy.reshape(-1, 2), [[float(ax), float(ay)]]])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    pad = max(0.3 * float(np.max(hi - lo)), 10 * abs(window.transform.a) * frame.scale)
    view = (lo[0] - pad, hi[0] + pad, lo[1] - pad, hi[1] + pad)
    with atomic_paths([path]) as (tmp,):
        plots.plot_echo_sources(
            window.elevation_m, frame.extent, tx, ty, (float(ax), float(ay)), cells_xy.reshape(-1, 2),
            [c.share for c in answer.cells], tmp, axis_labels=frame.axis_labels, geographic=src.is_geographic, view=view,
            title=f"trace {answer.trace}, {answer.delay_s * 1e6:.3f} µs after window start", dpi=figures.dpi,
            fmt=figures.fmt,
        )  # fmt: skip
    return path


def format_echo_answer(answer: EchoAnswer) -> str:
    """A plain-text table of the ranked cells behind one echo."""
    lines = [
        f"trace {answer.trace}, sample {answer.sample}: {answer.delay_s * 1e6:.3f} µs after the window start, "
        f"apparent depth {answer.depth_m:.1f} m below the nadir surface (ε′ = {answer.permittivity:g})",
        f"antenna over lat {answer.antenna_lat_deg:.5f}, lon {answer.antenna_lon_deg:.5f}; "
        f"power in this sample from the ground: {10 * np.log10(answer.total_power_w) if answer.total_power_w > 0 else -np.inf:.1f} dBW",
        f"{'rank':>4} {'lat':>10} {'lon':>11} {'side':>12} {'cross-track m':>14} {'off-nadir m':>12} {'share':>7}",
    ]
    for c in answer.cells:
        lines.append(
            f"{c.rank:>4} {c.lat_deg:>10.5f} {c.lon_deg:>11.5f} {c.side:>12} {c.cross_track_m:>14.0f} "
            f"{c.offnadir_m:>12.0f} {100 * c.share:>6.1f}%"
        )
    if not answer.cells:
        lines.append("   (no ground cell echoes into this sample)")
    return "\n".join(lines)
