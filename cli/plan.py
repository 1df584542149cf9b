"""``cluttersim plan``: the track that sees a target through the least clutter."""

from __future__ import annotations

import click

from cluttersim.analysis.plan import PlanConfig, PlanTarget, run_plan
from cluttersim.analysis.survey import Engine

from .options import (
    band_option, deprecated_pair, figure_options_with, load_config, make_figure_options, max_memory_option,
    out_dir_option, overwrite_option, permittivity_option, pick_coordinates, quiet_option, radar_option,
)  # fmt: skip


@click.command("plan")
@click.option("--dem", "dem_path", required=True, type=click.Path(dir_okay=False), help="Elevation raster (GeoTIFF...).")
@click.option("--target-lat", type=click.FloatRange(-90.0, 90.0), default=None,
              help="Target point: latitude, degrees north; its traces are those within --target-radius-m.")
@click.option("--target-lon", type=float, default=None, help="Target point: longitude, degrees east.")
@click.option("--target", nargs=2, type=float, default=None, metavar="LON LAT", hidden=True,
              callback=deprecated_pair("--target", ("--target-lat", "--target-lon"), "LON LAT"))
@click.option("--target-radius-m", type=float, default=1000.0, show_default=True,
              help="Traces whose nadir is this close to the target point are the target's traces, m.")
@click.option("--target-polygon", type=click.Path(dir_okay=False), default=None,
              help="Instead of --target-lat/--target-lon: a CSV of polygon vertices (columns lon, lat); its traces "
                   "are those inside.")
@click.option("--depth-m", nargs=2, type=float, required=True, metavar="MIN MAX",
              help="The target's apparent depth range, m (for --permittivity).")
@radar_option
@click.option("--platform", type=click.Choice(["orbital", "airborne"]), default="orbital", show_default=True,
              help="orbital: --alt-m above the reference surface; airborne: above the DEM at the target.")
@click.option("--alt-m", "alt_m", type=float, multiple=True, required=True,
              help="Allowed altitude, m (repeat the option for several).")
@click.option("--offset-m", "offset_m", type=float, multiple=True,
              help="Airborne: cross-track offset of the line from the target, m, right of the direction of travel "
                   "(repeat for several) [default: 0].")
@click.option("--headings-deg", nargs=2, type=float, default=(0.0, 180.0), show_default=True, metavar="FROM TO",
              help="Allowed headings, degrees clockwise from north (a heading and its reverse are equivalent).")
@click.option("--coarse-step-deg", type=float, default=15.0, show_default=True, help="First heading step of the search.")
@click.option("--fine-step-deg", type=float, default=1.0, show_default=True, help="Last heading step of the search.")
@click.option("--track-length-km", type=float, default=40.0, show_default=True, help="Length of each candidate track.")
@click.option("--trace-spacing-m", type=float, default=500.0, show_default=True, help="Distance between traces.")
@permittivity_option
@click.option("--dem-error", "dem_error", default=None, metavar="RMS_M,CORR_M",
              help="Rank by the probability under DEM error (RMS and correlation length, m) that the clutter index "
                   "at the target reaches --threshold-db (a Monte Carlo on the target's traces per candidate).")
@click.option("--realisations", type=click.IntRange(min=2), default=32, show_default=True,
              help="DEM realisations per candidate with --dem-error.")
@click.option("--dem-error-seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Seed of the DEM error fields (the same fields for every candidate).")
@click.option("--threshold-db", type=float, default=0.0, show_default=True,
              help="With --dem-error: the clutter index level whose probability is ranked, dB.")
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) for a DEM without CRS.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (or LocalCluster workers) [default: one per core].")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Run candidates as Dask tasks: 'local' or tcp://HOST:PORT (needs pip install 'cluttersim[dask]').")
@band_option
@max_memory_option
@figure_options_with("Dynamic range of the best/worst radargram figure, dB below the strongest echo [default: 60].")
@out_dir_option()
@overwrite_option
@quiet_option
def plan_cmd(dem_path, target_lat, target_lon, target, target_radius_m, target_polygon, depth_m, radar_path, platform,
             alt_m, offset_m, headings_deg, coarse_step_deg, fine_step_deg, track_length_km, trace_spacing_m, permittivity, dem_error,
             realisations, dem_error_seed, threshold_db, body_radius_m, workers, scheduler, band, max_memory, dpi,
             figure_format, db_range, out_dir, overwrite, quiet):  # fmt: skip
    """Find the track over a target whose radargram has the least clutter in the target's depth window.

    Candidate tracks through the target (headings, altitudes and, for airborne lines,
    cross-track offsets) are simulated on local processes or Dask, coarse to fine in
    heading, and scored by the clutter index over the depth window at the target's
    traces (the worst trace; lower is better). Writes into OUT: plan.csv (ranked
    candidates), best_track.csv (ready for cluttersim simulate), objective_polar.png and
    best_worst.png (the best and worst radargrams side by side; --figure-format pdf or svg
    for vector figures). See the README's Planning.

    \b
    Example:
      cluttersim plan --dem site.tif --target-lat 41.0 --target-lon 11.95 --depth-m 50 300 \\
          --alt-m 300000 --radar radar.toml --out plan1
    (--target LON LAT still works but is deprecated.)
    """
    from cluttersim.analysis.dem_error import DemErrorConfig
    from cluttersim.errors import ConfigError

    error = None
    if dem_error is not None:
        error = DemErrorConfig.parse_option(dem_error, realisations=realisations, seed=dem_error_seed)

    point_given = target is not None or target_lat is not None or target_lon is not None
    if point_given == (target_polygon is not None):
        raise click.UsageError("give either --target-lat and --target-lon, or --target-polygon CSV")
    if target_polygon is not None:
        tgt = PlanTarget.from_polygon_csv(target_polygon)
    else:
        point = pick_coordinates(target, {"target_lat": target_lat, "target_lon": target_lon}, "--target",
                                 ("target_lon", "target_lat"))  # fmt: skip
        tgt = PlanTarget(point["target_lon"], point["target_lat"], radius_m=target_radius_m)
    try:
        plan = PlanConfig(target=tgt, depth_m=tuple(depth_m), altitudes_m=tuple(alt_m), platform=platform,
                          headings_deg=tuple(headings_deg), offsets_m=tuple(offset_m) or (0.0,),
                          coarse_step_deg=coarse_step_deg, fine_step_deg=fine_step_deg,
                          track_length_m=track_length_km * 1e3, trace_spacing_m=trace_spacing_m,
                          permittivity=permittivity, threshold_db=threshold_db, dem_error=error)  # fmt: skip
    except ConfigError as exc:
        raise ConfigError(f"plan: {exc}") from None
    config = load_config(radar_path)
    if band is not None or config.bands:
        config = config.for_band(band or config.band_names[0])
    engine = Engine(workers=workers, scheduler=scheduler)
    result = run_plan(dem_path, plan, config, out_dir, engine=engine, body_radius_m=body_radius_m,
                      overwrite=overwrite, progress=not quiet, max_memory_bytes=max_memory,
                      figures=make_figure_options(dpi, figure_format, db_range))  # fmt: skip
    if not quiet:
        b, w = result.best, result.worst
        click.echo(f"{result.evaluations} candidate tracks scored on {engine.describe()} in {result.seconds:.1f} s")
        click.echo(f"best: heading {b.candidate.heading_deg:.1f}°, alt {b.candidate.alt_m:g} m, offset "
                   f"{b.candidate.offset_m:g} m: clutter index {b.objective_db:.1f} dB; worst: heading "
                   f"{w.candidate.heading_deg:.1f}° ({w.objective_db:.1f} dB)")  # fmt: skip
        if error is not None:
            click.echo(f"probability that the index reaches {threshold_db:g} dB under DEM error: best "
                       f"{b.probability:.2f} ± {b.probability_se:.2f}, worst {w.probability:.2f} ± {w.probability_se:.2f}")
        for p in result.paths.values():
            click.echo(f"wrote {p}")
