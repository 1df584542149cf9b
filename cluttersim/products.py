"""Run products on disk: the netCDF radargram and its figures, written atomically.

These are the library functions the command line calls; each works the same
from Python.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .physics.body import Body
from .constants import SPEED_OF_LIGHT_M_S
from .io.dem import DemSource, crs_linear_unit_m
from .io.outputs import atomic_paths, check_new, locked_output
from .io.radargram import band_names, select_band, thin_traces, write_netcdf_to
from .scene import _window_for_radius, ground_radius_m
from .simulate import simulate
from .track import Track, great_circle_track

#: File names of a simulation run directory.
RUN_FILES = {
    "radargram": "radargram.nc",
    "radargram_png": "radargram.png",
    "sides_png": "radargram_sides.png",
    "elevation_png": "radargram_elevation.png",
    "track_map": "track_map.png",
}



def figure_name(name: str, fmt: str = "png") -> str:
    """A product's file name with a figure's ``.png`` suffix turned into format ``fmt``'s (png, pdf,
    svg); other names unchanged. Every command names its figures so (``radargram.pdf``...)."""
    return name[: -len(".png")] + f".{fmt}" if name.endswith(".png") else name


def run_files(band_names=(), sources: bool = True, fmt: str = "png") -> dict[str, str]:
    """File names of a run directory: :data:`RUN_FILES`, or with several frequency bands one
    radargram figure, one side figure and one elevation figure per band (``radargram_<band>.png``...)
    beside the one netCDF file and the track map (first returns of the first band). ``fmt``
    (png, pdf, svg) sets the figures' suffix."""
    files = dict(RUN_FILES)
    if not sources:
        files.pop("sides_png")
    if band_names:
        for key in ("radargram_png", "sides_png", "elevation_png"):
            stem = files.pop(key, None)
            if stem is not None:
                for name in band_names:
                    files[f"{key}:{name}"] = stem.replace(".png", f"_{name}.png")
    return {k: figure_name(v, fmt) for k, v in files.items()}


@dataclass(frozen=True)
class FigureOptions:
    """How a run's figures are drawn and saved: resolution (dots per inch), format (png, pdf,
    svg) and the radargrams' dynamic range in dB (None: chosen from the data,
    :func:`cluttersim.plots.auto_db_range`; the power, side and elevation radargrams share it)."""

    dpi: float | None = None
    fmt: str = "png"
    db_range: float | None = None

    def __post_init__(self):
        from .errors import ConfigError
        from .plots import FIGURE_FORMATS

        if self.fmt not in FIGURE_FORMATS:
            raise ConfigError(f"figure format {self.fmt!r}: expected one of {', '.join(FIGURE_FORMATS)}")
        if self.dpi is not None and not (self.dpi > 0 and self.dpi <= 2400):
            raise ConfigError(f"dpi {self.dpi!r}: expected a resolution between 1 and 2400 dots per inch")
        if self.db_range is not None and not (self.db_range > 0):
            raise ConfigError(f"dB range {self.db_range!r}: expected a positive number of dB")


#: Largest side (pixels) of the relief image in the track map.
_MAP_CELLS = 900


@locked_output("out_dir")
def simulate_to_dir(
    dem, track, config, out_dir, *, body_radius_m=None, overwrite=False, progress=False, stats=None,
    sources=True, nadir_strip_m=None, first_return_db=-20.0, permittivity=3.15, max_memory_bytes="auto",
    figures: "FigureOptions | None" = None, segment_traces="auto", engine=None, summary: dict | None = None,
) -> dict[str, Path]:  # fmt: skip
    """Simulate and write the run's products (:data:`RUN_FILES`) into ``out_dir``.

    Existing products are refused before any work unless ``overwrite``; all
    are written under temporary names and renamed together at the end; with
    ``overwrite``, figures of the previous run that this one does not make (the
    side figure without the source record, other bands', other formats') are removed, with a warning.
    The directory is locked while the run lasts (:func:`~cluttersim.io.outputs.lock_directory`).
    ``permittivity`` sets the apparent-depth axis of the figures; ``max_memory_bytes``
    and ``segment_traces`` are passed to :func:`~cluttersim.simulate.simulate`.

    A track that needs segments (:func:`cluttersim.analysis.segments.plan_segments`), or any
    track with a Dask ``engine`` (:class:`cluttersim.analysis.engines.Engine`), is streamed:
    :func:`cluttersim.analysis.segments.run_segments_to_dir` writes each finished segment to
    ``OUT/segments/`` (resumed after an interruption) and joins them into
    ``radargram.nc`` without holding the whole radargram. ``summary``, if given, is
    filled with ``segments``, ``resumed`` and ``computed``.
    """
    out_dir = Path(out_dir)
    coherent = config is not None and config.processing.mode == "coherent"
    band_names = config.band_names if config is not None else []
    figures = figures or FigureOptions()
    paths = {k: out_dir / v for k, v in run_files(band_names, sources and not coherent, figures.fmt).items()}
    check_new(paths.values(), overwrite)
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    track = track if isinstance(track, Track) else Track.from_csv(track)
    from .analysis import segments
    from .config import default_config

    config = config if config is not None else default_config()
    config = dataclasses.replace(config, processing=config.processing.with_track_speed(track, src.body))
    streamed = engine is not None and engine.uses_dask
    stale = previous_run_files(out_dir) - {p.name for p in paths.values()} if overwrite else set()
    plan = segments.plan_segments(src, track, config, sources=sources, max_memory_bytes=max_memory_bytes,
                                  segment_traces=segment_traces if segment_traces is not None or not streamed else "auto")  # fmt: skip
    if len(plan) > 1 or streamed:
        run = segments.run_segments_to_dir(
            src, track, config, plan, out_dir, paths, body_radius_m=body_radius_m, overwrite=overwrite,
            progress=progress, sources=sources, nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
            max_memory_bytes=max_memory_bytes, permittivity=permittivity, engine=engine, figures=figures,
        )  # fmt: skip
        if stats is not None:
            stats.facet_evaluations = run.facet_evaluations
            stats.seconds_total = run.seconds
        if summary is not None:
            summary.update(segments=run.segments, resumed=run.resumed, computed=run.computed)
        remove_stale_products(out_dir, stale)
        return paths
    ds = simulate(src, track, config, body_radius_m=body_radius_m, progress=progress, stats=stats, sources=sources,
                  nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
                  max_memory_bytes=max_memory_bytes, segment_traces=None)  # fmt: skip
    if src.height_scale_m != 1.0:  # so that `sources` and `report` read the DEM's heights as simulated
        from .io.datums import HEIGHT_UNIT_ATTR

        ds.attrs[HEIGHT_UNIT_ATTR] = src.height_scale_m
    if summary is not None:
        summary.update(segments=1, resumed=0, computed=1)
    write_run(ds, src, paths, permittivity=permittivity, figures=figures)
    remove_stale_products(out_dir, stale)
    return paths


def previous_run_files(out_dir) -> set[str]:
    """Names of the files a run already in ``out_dir`` wrote (from its radargram.nc's bands)."""
    out_dir = Path(out_dir)
    nc = out_dir / RUN_FILES["radargram"]
    if not nc.exists():
        return set()
    bands = []
    try:
        import h5py

        with h5py.File(nc, "r") as f:
            if "band" in f:
                bands = [b.decode() if isinstance(b, bytes) else str(b) for b in f["band"][()]]
    except (OSError, ValueError, KeyError):
        pass
    from .plots import FIGURE_FORMATS

    return {name for fmt in FIGURE_FORMATS for name in run_files(bands, sources=True, fmt=fmt).values()} | set(
        RUN_FILES.values())


def remove_stale_products(out_dir, names) -> None:
    """Remove products of a previous run that the new one replaced without rewriting them, saying so."""
    import warnings

    removed = []
    for name in sorted(names):
        p = Path(out_dir) / name
        if p.exists():
            p.unlink()
            removed.append(name)
    if removed:
        warnings.warn(f"{out_dir}: removed {', '.join(removed)} of the previous run (not made by this one)", stacklevel=3)


def remove_figures_in_other_formats(paths, overwrite: bool) -> None:
    """Once a run with ``overwrite`` has written its products ``paths``: remove the figures an earlier
    run left beside them in another format (``clutter_map.png`` beside a new ``clutter_map.pdf``), which
    would pass for this run's, saying so (:func:`remove_stale_products`). Without ``overwrite``
    nothing is removed."""
    from .plots import FIGURE_FORMATS

    if not overwrite:
        return
    stale: dict[Path, set[str]] = {}
    for p in map(Path, paths):
        fmt = p.suffix[1:]
        if fmt in FIGURE_FORMATS:
            stale.setdefault(p.parent, set()).update(p.with_suffix(f".{f}").name for f in FIGURE_FORMATS if f != fmt)
    for out_dir, names in stale.items():
        remove_stale_products(out_dir, names)


def write_run(ds, src: DemSource, paths: dict[str, Path], permittivity: float = 3.15,
              figures: "FigureOptions | None" = None) -> None:  # fmt: skip
    """Write a radargram and its figures atomically to ``paths`` (keys of :func:`run_files`)."""
    keys = list(paths)
    with atomic_paths([paths[k] for k in keys]) as temps:
        tmp = dict(zip(keys, temps))
        write_netcdf_to(ds, tmp["radargram"])
        write_figures(ds, src, {k: v for k, v in tmp.items() if k != "radargram"}, permittivity=permittivity,
                      figures=figures)  # fmt: skip


def write_figures(ds, src: DemSource, tmp: dict[str, Path], permittivity: float = 3.15,
                  max_traces: int | None = None, figures: "FigureOptions | None" = None) -> None:  # fmt: skip
    """Draw a run's figures to ``tmp`` (the figure keys of :func:`run_files`). With
    ``max_traces``, a longer radargram is drawn from every k-th trace (:func:`thin_traces`:
    a lazily opened one is read only there). The power, side and elevation radargrams of a
    band share one colour scale (:func:`cluttersim.plots.db_limits`)."""
    from . import plots

    figures = figures or FigureOptions()
    save = {"dpi": figures.dpi, "fmt": figures.fmt}
    names = band_names(ds)
    if max_traces is not None:
        ds = thin_traces(ds, max_traces)
    for name in names or [None]:
        one = select_band(ds, name)
        limits = plots.db_limits(one, dynamic_range_db=figures.db_range)
        suffix = "" if name is None else f":{name}"
        label = "" if name is None else f" — band {name} ({one.attrs['radar_center_frequency_hz'] / 1e6:g} MHz)"
        plots.plot_radargram(one, tmp["radargram_png" + suffix], title=f"simulated clutter — {src.path.name}{label}",
                             permittivity=permittivity, db_limits=limits, **save)  # fmt: skip
        if "sides_png" + suffix in tmp:
            plots.plot_side_radargram(one, tmp["sides_png" + suffix], permittivity=permittivity, db_limits=limits,
                                      title=f"which side of the track each echo comes from — {src.path.name}{label}",
                                      **save)  # fmt: skip
        if "elevation_png" + suffix in tmp:
            plots.plot_elevation_radargram(one, tmp["elevation_png" + suffix], permittivity=permittivity,
                                           db_limits=limits, title=f"in elevation — {src.path.name}{label}",
                                           **save)  # fmt: skip
    ds = select_band(ds)
    elevation, frame = track_map_data(src, ds)
    tx, ty = frame.xy(ds["lon"].values, ds["lat"].values)
    first = None
    if "first_return_lat" in ds:
        first = frame.xy(ds["first_return_lon"].values, ds["first_return_lat"].values)
    plots.plot_track_map(
        elevation, frame.extent, tx, ty, tmp["track_map"], first_return=first,
        title=f"track over {src.path.name}", axis_labels=frame.axis_labels, geographic=src.is_geographic, **save,
    )  # fmt: skip


def track_map_data(src: DemSource, ds):
    """Decimated DEM around a run's track for the track map: ``(elevation, MapFrame)``."""
    track = Track(ds["lat"].values, ds["lon"].values, ds["alt"].values, source="run")
    on_dem = ds["on_dem"].values.astype(bool)
    end_s = ds["window_start"].values + ds.sizes["sample"] * float(ds["delay"][1] - ds["delay"][0])
    h = track.alt_m - 0.5 * SPEED_OF_LIGHT_M_S * ds["nadir_delay"].values
    h_lo, h_hi = float(np.nanmin(h)), float(np.nanmax(h))
    radius = ground_radius_m(src.body, track.alt_m, 0.5 * SPEED_OF_LIGHT_M_S * np.nan_to_num(end_s), h_lo, h_hi)
    window = _window_for_radius(src, track, on_dem, radius)
    dw = src.read_decimated(window, _MAP_CELLS)
    return dw.elevation_m, MapFrame.of(src, dw.elevation_m, dw.transform)


@dataclass(frozen=True)
class MapFrame:
    """Coordinates of a map drawn on a block of the DEM grid: degrees for geographic DEMs,
    kilometres of the CRS for projected ones."""

    src: DemSource
    extent: tuple[float, float, float, float]
    west: float
    scale: float
    axis_labels: tuple[str, str]

    @classmethod
    def of(cls, src: DemSource, elevation_m, transform) -> "MapFrame":
        ny, nx = elevation_m.shape
        x0, y0 = transform.c, transform.f
        x1, y1 = x0 + transform.a * nx, y0 + transform.e * ny
        if src.is_geographic:
            return cls(src, (x0, x1, y1, y0), x0, 1.0, ("longitude (°E)", "latitude (°N)"))
        k = 1e-3 * crs_linear_unit_m(src.crs)  # km, whatever the CRS's unit
        return cls(src, (x0 * k, x1 * k, y1 * k, y0 * k), x0, k, ("easting (km)", "northing (km)"))

    def xy(self, lon_deg, lat_deg):
        """Map coordinates of geodetic points (longitudes wrapped onto the map, which may run
        past the DEM's edge at the antimeridian)."""
        x, y = self.src.lonlat_to_xy(lon_deg, lat_deg)
        if self.src.is_geographic:
            x = (np.asarray(x) - self.west) % 360.0 + self.west
        return np.asarray(x) * self.scale, np.asarray(y) * self.scale


def planned_track_to_csv(
    out_path, start, end, alt_m, spacing_m, *, speed_m_s=None, dem_path=None, body_radius_m=None, overwrite=False
) -> int:
    """Write a planned geodesic track CSV; the body comes from a DEM's CRS or a sphere radius.

    Returns the number of traces written.
    """
    out_path = Path(out_path)
    check_new([out_path], overwrite)
    if body_radius_m is not None:
        body = Body.sphere(body_radius_m)
    else:
        body = DemSource.open(dem_path).body
    track = great_circle_track(body, start[0], start[1], end[0], end[1], alt_m, spacing_m, speed_m_s=speed_m_s)
    with atomic_paths([out_path]) as (tmp,):
        track.to_csv(tmp)
    return len(track)
