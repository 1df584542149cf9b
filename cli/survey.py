"""``cluttersim survey``: a map of where clutter will swamp the subsurface over a region."""

from __future__ import annotations

from pathlib import Path

import click


from .options import (
    band_option,
    deprecated_pair,
    figure_options_with,
    make_figure_options,
    pick_coordinates,
    load_config,
    max_memory_option,
    out_dir_option,
    overwrite_option,
    permittivity_option,
    quiet_option,
    radar_option,
)


@click.command("survey")
@click.option("--dem", "dem_path", required=True, type=click.Path(dir_okay=False), help="Elevation raster (GeoTIFF...).")
@click.option("--lat-min", type=float, default=None, help="The region to survey: southern edge, degrees north.")
@click.option("--lat-max", type=float, default=None, help="The region: northern edge, degrees north.")
@click.option("--lon-min", type=float, default=None, help="The region: western edge, degrees east.")
@click.option("--lon-max", type=float, default=None, help="The region: eastern edge, degrees east (it must lie on the DEM).")
@click.option("--region", nargs=4, type=float, default=None, metavar="LON_MIN LAT_MIN LON_MAX LAT_MAX", hidden=True,
              callback=deprecated_pair("--region", ("--lat-min", "--lat-max", "--lon-min", "--lon-max"),
                                       "LON_MIN LAT_MIN LON_MAX LAT_MAX"))
@click.option("--spacing-km", type=float, default=None, help="Generated tracks: distance between neighbouring tracks, km.")
@click.option("--heading-deg", type=float, default=0.0, show_default=True,
              help="Generated tracks: heading at the region's centre, degrees clockwise from north.")
@click.option("--alt-m", type=float, default=None, help="Generated tracks: altitude above the reference surface, m.")
@click.option("--trace-spacing-m", type=float, default=500.0, show_default=True,
              help="Generated tracks: distance between traces along a track, m.")
@click.option("--tracks", "tracks_path", type=click.Path(dir_okay=False), default=None,
              help="Instead of generated tracks: one CSV with columns track_id, lat, lon, alt[, time].")
@radar_option
@click.option("--max-depth-m", type=float, default=500.0, show_default=True,
              help="The subsurface window reaches from the nadir surface echo to this apparent depth, m.")
@permittivity_option
@click.option("--threshold-db", type=float, default=3.0, show_default=True,
              help="Clutter at least this far above what level ground gives makes a trace clutter-prone, dB "
                   "(the index is relative to level ground in the same geometry: level ground reads 0 dB).")
@click.option("--swath-km", type=click.FloatRange(min=0.0), default=None,
              help="Cross-track half-width each trace covers on the map, km [default: the ground its subsurface "
                   "window reaches over level ground; 0: nadir paths only].")
@click.option("--grid-km", type=float, default=None,
              help="Map cell size, km [default: half the track spacing; with --tracks, 1/100 of the region].")
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) for a DEM without CRS.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (or LocalCluster workers) [default: one per core].")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Run tracks as Dask tasks: 'local' starts a LocalCluster, tcp://HOST:PORT uses a running one "
                   "(every worker must read the DEM at the same path). Needs pip install 'cluttersim[dask]'.")
@click.option("--scheduler-file", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Run tracks as Dask tasks on the scheduler whose address is in FILE (written by "
                   "dask scheduler --scheduler-file, as batch systems hand it to jobs).")
@band_option
@max_memory_option
@figure_options_with("Colour range of the clutter map, dB, a quarter of it below --threshold-db and the rest above "
                     "[default: 24, from 6 dB below the threshold to 18 dB above].")
@out_dir_option()
@overwrite_option
@quiet_option
@click.pass_context
def survey_cmd(ctx, dem_path, lat_min, lat_max, lon_min, lon_max, region, spacing_km, heading_deg, alt_m, trace_spacing_m,
               tracks_path, radar_path, max_depth_m, permittivity, threshold_db, swath_km, grid_km, body_radius_m, workers,
               scheduler, scheduler_file, band, max_memory, dpi, figure_format, db_range,
               out_dir, overwrite, quiet):  # fmt: skip
    """Survey a region: where will off-nadir clutter swamp the subsurface?

    Simulates many tracks over REGION of DEM (generated parallel tracks, or a CSV
    with a track_id column), reduces each trace to a clutter index (the strongest
    off-nadir clutter between the nadir echo and --max-depth-m, relative to the
    nadir echo; see the README) and writes into OUT: tracks/<id>.nc (one per track,
    as each finishes), survey.csv (one row per track), clutter_map.tif (index and
    fraction on the DEM's CRS) and clutter_map.png (--figure-format pdf or svg for a
    vector map). Run the same command again
    after an interruption: finished tracks are not recomputed.

    \b
    Example:
      cluttersim survey --dem site.tif --lat-min 10.5 --lat-max 13.5 --lon-min 40 --lon-max 42 \\
          --spacing-km 5 --heading-deg 10 --alt-m 300000 --out survey1
    (--region LON_MIN LAT_MIN LON_MAX LAT_MAX still works but is deprecated.)
    """
    from cluttersim.analysis.survey import TRACKS_DIR, Engine, SurveyConfig, run_survey

    box = pick_coordinates(region, {"lat_min": lat_min, "lat_max": lat_max, "lon_min": lon_min, "lon_max": lon_max},
                           "--region", ("lon_min", "lat_min", "lon_max", "lat_max"))  # fmt: skip
    config = SurveyConfig(
        region=(box["lon_min"], box["lat_min"], box["lon_max"], box["lat_max"]), spacing_km=spacing_km, heading_deg=heading_deg, alt_m=alt_m,
        trace_spacing_m=trace_spacing_m, tracks_path=tracks_path, max_depth_m=max_depth_m, permittivity=permittivity,
        threshold_db=threshold_db, grid_km=grid_km, swath_km=swath_km,
    )  # fmt: skip
    engine = Engine(workers=workers, scheduler=scheduler, scheduler_file=scheduler_file)
    sim_config = load_config(radar_path)
    try:
        summary = run_survey(
            dem_path, config, sim_config, out_dir, engine=engine, body_radius_m=body_radius_m, overwrite=overwrite,
            progress=not quiet, max_memory_bytes=max_memory, band=band,
            figures=make_figure_options(dpi, figure_format, db_range),
        )  # fmt: skip
    except KeyboardInterrupt:
        if ctx.obj and ctx.obj.get("debug"):
            raise
        track_dir = Path(out_dir) / TRACKS_DIR
        kept = len(list(track_dir.glob("*.nc"))) if track_dir.is_dir() else 0
        click.echo(f"cluttersim: interrupted; {kept} finished track(s) are kept in {track_dir}, no map was written; "
                   "run the same command again to resume", err=True)  # fmt: skip
        ctx.exit(130)
    if not quiet:
        if summary.resumed:
            click.echo(f"resumed: {summary.resumed} of {summary.tracks} tracks were already finished")
        click.echo(f"{summary.computed} tracks simulated on {engine.describe()} in {summary.seconds:.1f} s")
        for p in summary.paths.values():
            click.echo(f"wrote {p}")
