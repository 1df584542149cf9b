"""``cluttersim simulate``: a synthetic clutter radargram for one track."""

from __future__ import annotations

import click

from cluttersim.products import simulate_to_dir

from .options import load_config, out_dir_option, overwrite_option, quiet_option, radar_option


@click.command("simulate")
@click.option("--dem", "dem_path", required=True, type=click.Path(dir_okay=False), help="Elevation raster (GeoTIFF...).")
@click.option("--track", "track_path", required=True, type=click.Path(dir_okay=False), help="Track CSV: lat, lon, alt[, time].")
@radar_option
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) for a DEM without CRS.")
@out_dir_option()
@overwrite_option
@quiet_option
def simulate_cmd(dem_path, track_path, radar_path, body_radius_m, out_dir, overwrite, quiet):
    """Simulate the surface-clutter radargram of TRACK over DEM.

    Writes OUT/radargram.nc (netCDF4), OUT/radargram.png and OUT/track_map.png.

    \b
    Example:
      cluttersim simulate --dem site.tif --track pass.csv --radar radar.toml --out run1
    """
    config = load_config(radar_path)
    paths = simulate_to_dir(
        dem_path, track_path, config, out_dir, body_radius_m=body_radius_m, overwrite=overwrite, progress=not quiet
    )
    if not quiet:
        for p in paths.values():
            click.echo(f"wrote {p}")
