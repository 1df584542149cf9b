"""``cluttersim demo``: run the invented demo scenario end to end."""

from __future__ import annotations

import click


from .options import figure_options, make_figure_options, out_dir_option, overwrite_option, quiet_option


@click.command("demo")
@figure_options
@out_dir_option(default="demo_output")
@overwrite_option
@quiet_option
def demo_cmd(dpi, figure_format, db_range, out_dir, overwrite, quiet):
    """Simulate an orbital pass over the invented demo site and write its products
    (--figure-format pdf or svg for vector figures)."""
    from cluttersim.demo import DEMO_ALT_M, run_demo

    figures = make_figure_options(dpi, figure_format, db_range)
    paths, stats = run_demo(out_dir, overwrite=overwrite, progress=not quiet, figures=figures)
    if quiet:
        return
    ext = figure_format
    click.echo(
        f"simulated {stats.dem_window_shape[0]}x{stats.dem_window_shape[1]} DEM cells ({stats.facets:,} facets), "
        f"{stats.facet_evaluations:,} facet evaluations in {stats.seconds_total:.1f} s\n"
        f"products in {paths['radargram'].parent}/:\n"
        f"  radargram.nc   netCDF radargram (power in W at the compressed receiver output, trace x sample)\n"
        f"  radargram.{ext}  what to look at first: the bright nadir surface echo near the top, and the\n"
        f"                 fainter curved echoes arriving later - off-nadir clutter from the craters and\n"
        f"                 the mesa beside the track, which a single antenna records as if it were subsurface\n"
        f"  radargram_sides.{ext}  the same radargram coloured by side: orange echoes come from left of the\n"
        f"                 track (west: the craters), sky blue from the right (east: the mesa) - the same\n"
        f"                 colours as in report.html\n"
        f"  radargram_elevation.{ext}  the same radargram in elevation: height above the datum, the terrain\n"
        f"                 below the track drawn as a line; clutter hangs below it like false layers\n"
        f"  radargram_focused.{ext}  the same pass as focused data would show it, with the same dB range:\n"
        f"                 the long tails of the hyperbolas (clutter ahead of and behind the spacecraft) are gone\n"
        f"  radargram_bands.{ext}  the pass in a low band (9 MHz, 3 MHz wide: 50 m resolution) and a high band\n"
        f"                 (25 MHz, 20 MHz wide: 7.5 m): the wide band separates echoes the narrow one smears\n"
        f"  radargram_sky_ionosphere.{ext}  the pass with galactic sky noise, processing gains and an ionosphere:\n"
        f"                 echoes arrive later and smeared, over a marked noise floor\n"
        f"  track_map.{ext}  the pass ({DEMO_ALT_M / 1e3:.0f} km up) over shaded relief, with its first returns\n"
        f"  report.html    one page to point at echoes: for any trace and delay it reads out the depth, power,\n"
        f"                 side and ground source, and marks the source on the track map; open it in a browser:\n"
        f"                 {paths['report']}\n"
        f"  demo_track.csv the track; re-run it with: cluttersim simulate --dem dem_examples/demo_site.tif "
        f"--track {paths['track']} --out my_run\n"
        f"next: which ground echoes 1-3 km of apparent ice depth below the surface?\n"
        f"  cluttersim sources {paths['radargram'].parent} --depth-window 1000 3000"
    )
