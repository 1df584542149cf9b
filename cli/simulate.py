"""``cluttersim simulate``: a synthetic clutter radargram for one track."""

from __future__ import annotations

import dataclasses

import click

from .options import (
    dem_height_unit_option, dem_in_unit, figure_options, height_datum_options, load_config, make_figure_options,
    max_memory_option, track_for_dem, with_antenna, out_dir_option, overwrite_option, permittivity_option,
    quiet_option, radar_option,
)  # fmt: skip


@click.command("simulate")
@click.option("--dem", "dem_path", required=True, type=click.Path(dir_okay=False), help="Elevation raster (GeoTIFF...).")
@click.option("--track", "track_path", required=True, type=click.Path(dir_okay=False), help="Track CSV: lat, lon, alt[, time].")
@radar_option
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) for a DEM without CRS.")
@click.option("--no-sources", is_flag=True, help="Skip the per-sample source record (less memory, faster).")
@click.option("--nadir-strip-m", type=click.FloatRange(min=0.0), default=None,
              help="Cross-track half-width of the nadir strip, m [default: pulse-limited footprint radius].")
@click.option("--first-return-db", type=float, default=-20.0, show_default=True,
              help="First return: earliest echo at this level relative to the nadir echo, dB.")
@click.option("--antenna-pattern", type=click.Choice(["isotropic", "dipole", "gaussian"]), default=None,
              help="Override [antenna] pattern of the radar TOML.")
@click.option("--antenna-axis", type=click.Choice(["along-track", "cross-track"]), default=None,
              help="Override [antenna] axis (dipole).")
@click.option("--beamwidth-deg", nargs=2, type=float, default=None, metavar="ALONG ACROSS",
              help="Override the Gaussian beam's 3 dB beamwidths, degrees.")
@click.option("--shadowing/--no-shadowing", default=None,
              help="Line-of-sight shadowing by the terrain (overrides [processing] shadowing).")
@height_datum_options
@dem_height_unit_option
@click.option("--dem-error", "dem_error", default=None, metavar="RMS_M,CORR_M",
              help="DEM-error Monte Carlo: RMS height error and its correlation length, m (overrides the radar "
                   "TOML's [dem_error] rms_m and correlation_m); adds dem_error.nc and dem_error.png.")
@click.option("--realisations", type=click.IntRange(min=2), default=None,
              help="DEM realisations of the Monte Carlo [default: [dem_error] realisations, else 32].")
@click.option("--dem-error-seed", type=click.IntRange(min=0), default=None,
              help="Seed of the DEM error fields [default: [dem_error] seed, else 0].")
@permittivity_option
@max_memory_option
@figure_options
@click.option("--segment-traces", default="auto", show_default=True, metavar="N|auto",
              help="Pulses per segment: a long track is simulated in segments, each with its own DEM window, "
                   "written to OUT/segments/ as it finishes (resumed after an interruption); auto: one piece "
                   "when the track fits in about 1 GB.")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Run the segments as Dask tasks: 'local' starts a LocalCluster (--workers processes), "
                   "tcp://HOST:PORT uses a running one (every worker must read the DEM at the same path).")
@click.option("--scheduler-file", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Run the segments on the Dask scheduler whose address is in FILE (dask scheduler --scheduler-file).")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Worker processes of --scheduler local [default: one per core].")
@out_dir_option()
@overwrite_option
@quiet_option
@click.pass_context
def simulate_cmd(ctx, dem_path, track_path, radar_path, body_radius_m, no_sources, nadir_strip_m, first_return_db,
                 antenna_pattern, antenna_axis, beamwidth_deg, shadowing, track_height_datum, dem_height_datum, dem_height_unit,
                 dem_error, realisations, dem_error_seed, permittivity, max_memory, dpi, figure_format, db_range,
                 segment_traces, scheduler, scheduler_file, workers, out_dir, overwrite, quiet):  # fmt: skip
    """Simulate the surface-clutter radargram of TRACK over DEM.

    Writes OUT/radargram.nc (netCDF4), OUT/radargram.png (power, with an apparent-depth
    axis for --permittivity), OUT/radargram_sides.png (which side of the track each echo
    comes from), OUT/radargram_elevation.png (height above the datum, the terrain drawn)
    and OUT/track_map.png (track and first returns over shaded relief); --figure-format
    pdf or svg for vector figures.
    Optional [noise] and [subsurface] tables in the radar TOML add receiver and sky noise and
    the predicted echo of a hypothesised interface; [ionosphere] delays and disperses the
    echoes through a layer of given TEC; [[band]] tables simulate several frequency bands in
    one run (a band dimension in radargram.nc, one figure per band); [processing] presum = N
    sums N pulses of the track into each trace, pulse_length_s and prf_hz state the processing
    gains (see the README). power is the compressed receiver output referred to its input: a
    point target reads its radar-equation power at its peak sample, whatever the sample interval.

    With --dem-error (or a [dem_error] table) the track is also simulated over N
    realisations of the DEM plus a correlated Gaussian error field: OUT/dem_error.nc holds
    the mean and the 5/50/95 % quantiles of the power per sample, OUT/dem_error.png the
    median and the width of the 5–95 % band.

    \b
    Example:
      cluttersim simulate --dem site.tif --track pass.csv --radar radar.toml --out run1
    """
    from pathlib import Path

    if not quiet:  # at once: the libraries below take seconds to load on a busy machine
        click.echo(f"simulating {track_path} over {dem_path} into {out_dir}/", err=True)
    from cluttersim.products import simulate_to_dir
    from cluttersim.analysis.dem_error import dem_error_paths, simulate_dem_error, write_dem_error
    from cluttersim.io.outputs import check_new
    from cluttersim.analysis.segments import SEGMENTS_DIR
    from cluttersim.analysis.survey import Engine

    if segment_traces != "auto":
        try:
            segment_traces = int(segment_traces)
            if segment_traces < 1:
                raise ValueError
        except ValueError:
            raise click.BadParameter(f"{segment_traces!r}: expected a whole number >= 1 or auto",
                                     param_hint="--segment-traces") from None  # fmt: skip
    if workers is not None and scheduler != "local":
        raise click.BadParameter("--workers is for --scheduler local", param_hint="--workers")
    engine = None
    if scheduler is not None or scheduler_file is not None:
        engine = Engine(workers=workers, scheduler=scheduler, scheduler_file=scheduler_file)
    config = with_antenna(load_config(radar_path), antenna_pattern, antenna_axis, beamwidth_deg)
    if shadowing is not None:
        config = dataclasses.replace(config, processing=dataclasses.replace(config.processing, shadowing=shadowing))
    if track_height_datum is not None or dem_height_datum is not None or dem_height_unit is not None:
        from cluttersim.track import Track

        dem_path = dem_in_unit(dem_path, dem_height_unit, body_radius_m)
        track_path = track_for_dem(Track.from_csv(track_path), dem_path, track_height_datum, dem_height_datum, quiet)
    error = _dem_error_config(radar_path, dem_error, realisations, dem_error_seed)
    figures = make_figure_options(dpi, figure_format, db_range)
    error_paths = dem_error_paths(out_dir, figures.fmt) if error is not None else {}
    check_new(error_paths.values(), overwrite)  # before any work
    summary = {}
    try:
        paths = simulate_to_dir(
            dem_path, track_path, config, out_dir, body_radius_m=body_radius_m, overwrite=overwrite,
            progress=not quiet, sources=not no_sources, nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
            permittivity=permittivity, max_memory_bytes=max_memory, segment_traces=segment_traces, engine=engine,
            summary=summary, figures=figures,
        )  # fmt: skip
    except KeyboardInterrupt:
        seg_dir = Path(out_dir) / SEGMENTS_DIR
        kept = len(list(seg_dir.glob("*.nc"))) if seg_dir.is_dir() else 0
        if (ctx.obj and ctx.obj.get("debug")) or not kept:
            raise
        click.echo(f"cluttersim: interrupted; {kept} finished segment(s) are kept in {seg_dir}, no radargram was "
                   "written; run the same command again to resume", err=True)  # fmt: skip
        ctx.exit(130)
    if error is not None:
        ds = simulate_dem_error(dem_path, track_path, config, error, body_radius_m=body_radius_m, progress=not quiet,
                                keep_realisations=True,
                                max_memory_bytes=max_memory)  # fmt: skip
        write_dem_error(ds, error_paths, figures=figures)
        paths.update(error_paths)
    if not quiet:
        if summary.get("resumed"):
            click.echo(f"resumed: {summary['resumed']} of {summary['segments']} segments were already finished")
        elif summary.get("segments", 1) > 1:
            click.echo(f"simulated in {summary['segments']} segments")
        for p in paths.values():
            click.echo(f"wrote {p}")


def _dem_error_config(radar_path, option, realisations, seed):
    """The DEM-error settings: the radar TOML's [dem_error] table, overridden by the options."""
    from cluttersim.analysis.dem_error import DemErrorConfig
    from cluttersim.errors import ConfigError

    table = DemErrorConfig.from_toml(radar_path) if radar_path else None
    if option is None and table is None:
        if realisations is not None or seed is not None:
            raise ConfigError("--realisations and --dem-error-seed need --dem-error RMS_M,CORR_M or a [dem_error] table")
        return None
    error = table if option is None else DemErrorConfig.parse_option(option, **({} if table is None else {
        k: v for k, v in table.to_dict().items() if k not in ("rms_m", "correlation_m")}))  # fmt: skip
    changes = {k: v for k, v in (("realisations", realisations), ("seed", seed)) if v is not None}
    return dataclasses.replace(error, **changes) if changes else error
