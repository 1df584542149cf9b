"""``cluttersim report``: one self-contained HTML page of a run, to point at echoes and see their sources."""

from __future__ import annotations

import click

from cluttersim.report import REPORT_FILE, write_report

from .options import band_option, overwrite_option, permittivity_option, quiet_option


@click.command("report")
@click.argument("run_dir", type=click.Path(file_okay=False, exists=True))
@click.option("--out", "out_path", type=click.Path(dir_okay=False), default=None,
              help=f"The HTML file to write (default: RUN_DIR/{REPORT_FILE}).")
@permittivity_option
@click.option("--dem", "dem_path", type=click.Path(dir_okay=False), help="The run's DEM, if it has moved (for the map).")
@click.option("--sim", "sim_path", type=click.Path(dir_okay=False),
              help="The simulated radargram.nc of a comparison, if it has moved.")
@click.option("--no-centroids", is_flag=True,
              help="Do not mark each side's power-weighted source centre on the map (saves three kernel runs).")
@band_option
@overwrite_option
@quiet_option
def report_cmd(run_dir, out_path, permittivity, dem_path, sim_path, no_centroids, band, overwrite, quiet):
    """Write a run's report: one HTML file that opens from disk without a network.

    \b
    RUN_DIR is a directory of `cluttersim simulate` (radargram.nc) or of
    `cluttersim compare` (comparison.nc); pointing at the radargram reads
    out the delay, apparent depth, power and the dominant source of the echo
    and marks it on the track map:
      cluttersim report run1
      cluttersim report cmp1 --out cmp1.html --permittivity 3.15
    """
    path = write_report(run_dir, out_path, permittivity=permittivity, overwrite=overwrite, dem=dem_path, sim=sim_path,
                        band=band, centroids=not no_centroids, progress=not quiet)  # fmt: skip
    if not quiet:
        click.echo(f"wrote {path}")
