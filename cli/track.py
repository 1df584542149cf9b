"""``cluttersim track``: write a planned great-circle track CSV."""

from __future__ import annotations

import click


from .options import deprecated_pair, pick_coordinates


@click.command("track")
@click.option("--start-lat", type=float, default=None, help="First point: latitude, degrees north.")
@click.option("--start-lon", type=float, default=None, help="First point: longitude, degrees east (−180..180 or 0..360: "
              "the track's longitudes are written in the same convention).")
@click.option("--end-lat", type=float, default=None, help="Last point: latitude, degrees north.")
@click.option("--end-lon", type=float, default=None, help="Last point: longitude, degrees east.")
@click.option("--start", nargs=2, type=float, default=None, metavar="LAT LON", hidden=True,
              callback=deprecated_pair("--start", ("--start-lat", "--start-lon"), "LAT LON"))
@click.option("--end", nargs=2, type=float, default=None, metavar="LAT LON", hidden=True,
              callback=deprecated_pair("--end", ("--end-lat", "--end-lon"), "LAT LON"))
@click.option("--alt-m", type=float, required=True, help="Constant altitude above the reference surface, metres.")
@click.option("--spacing-m", type=float, required=True, help="Distance between traces along the ground, metres.")
@click.option("--speed-m-s", type=float, default=None, help="Ground speed; adds a time column (s).")
@click.option("--dem", "dem_path", type=click.Path(dir_okay=False), default=None, help="Take the body from this DEM's CRS.")
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) of the body (if no --dem).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False), help="Track CSV to write.")
@click.option("--overwrite", is_flag=True, help="Replace an existing file.")
def track_cmd(start_lat, start_lon, end_lat, end_lon, start, end, alt_m, spacing_m, speed_m_s, dem_path, body_radius_m,
              out_path, overwrite):  # fmt: skip
    """Write a planned track: a geodesic from the start to the end point at constant altitude.

    \b
    Example:
      cluttersim track --start-lat 10.5 --start-lon 41 --end-lat 13.5 --end-lon 41 \\
                       --alt-m 300000 --spacing-m 500 --dem site.tif --out pass.csv
    (--start LAT LON / --end LAT LON still work but are deprecated.)
    """
    if dem_path is None and body_radius_m is None:
        raise click.UsageError("give --dem (body from its CRS) or --body-radius-m")
    a = pick_coordinates(start, {"start_lat": start_lat, "start_lon": start_lon}, "--start", ("start_lat", "start_lon"))
    b = pick_coordinates(end, {"end_lat": end_lat, "end_lon": end_lon}, "--end", ("end_lat", "end_lon"))
    from cluttersim.products import planned_track_to_csv

    n = planned_track_to_csv(
        out_path, (a["start_lat"], a["start_lon"]), (b["end_lat"], b["end_lon"]), alt_m, spacing_m,
        speed_m_s=speed_m_s, dem_path=dem_path, body_radius_m=body_radius_m, overwrite=overwrite,
    )  # fmt: skip
    click.echo(f"wrote {out_path} ({n} traces)")
