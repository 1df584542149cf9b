"""``cluttersim track``: write a planned great-circle track CSV."""

from __future__ import annotations

import click



@click.command("track")
@click.option("--start", nargs=2, type=float, required=True, metavar="LAT LON", help="First point, degrees.")
@click.option("--end", nargs=2, type=float, required=True, metavar="LAT LON", help="Last point, degrees.")
@click.option("--alt-m", type=float, required=True, help="Constant altitude above the reference surface, metres.")
@click.option("--spacing-m", type=float, required=True, help="Distance between traces along the ground, metres.")
@click.option("--speed-m-s", type=float, default=None, help="Ground speed; adds a time column (s).")
@click.option("--dem", "dem_path", type=click.Path(dir_okay=False), default=None, help="Take the body from this DEM's CRS.")
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) of the body (if no --dem).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False), help="Track CSV to write.")
@click.option("--overwrite", is_flag=True, help="Replace an existing file.")
def track_cmd(start, end, alt_m, spacing_m, speed_m_s, dem_path, body_radius_m, out_path, overwrite):
    """Write a planned track: a geodesic from START to END at constant altitude.

    \b
    Example:
      cluttersim track --start 10.5 41 --end 13.5 41 --alt-m 300000 --spacing-m 500 \\
                       --dem site.tif --out pass.csv
    """
    if dem_path is None and body_radius_m is None:
        raise click.UsageError("give --dem (body from its CRS) or --body-radius-m")
    from cluttersim.products import planned_track_to_csv

    n = planned_track_to_csv(
        out_path, start, end, alt_m, spacing_m, speed_m_s=speed_m_s, dem_path=dem_path, body_radius_m=body_radius_m,
        overwrite=overwrite,
    )  # fmt: skip
    click.echo(f"wrote {out_path} ({n} traces)")
