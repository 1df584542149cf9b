"""``cluttersim sources``: where on the ground the clutter of a run comes from."""

from __future__ import annotations

import click

from .options import (
    band_option, figure_options_with, make_figure_options, overwrite_option, permittivity_option, quiet_option,
)


@click.command("sources")
@click.argument("run_dir", type=click.Path(file_okay=False, exists=True))
@click.option("--depth-window", nargs=2, type=float, metavar="A B", help="Map the ground echoing at apparent depths A..B m.")
@click.option("--trace", type=int, help="Ask one echo: the trace index (0-based).")
@click.option("--delay-us", type=float, help="…its delay after the trace's window start, µs.")
@click.option("--depth-m", type=float, help="…or its apparent depth below the nadir surface, m.")
@click.option("--top", type=click.IntRange(1, 1000), default=10, show_default=True, help="Cells listed for one echo.")
@permittivity_option
@click.option("--dem", "dem_path", type=click.Path(dir_okay=False), help="The run's DEM, if it has moved.")
@band_option
@figure_options_with("Dynamic range of the source map, dB below its strongest cell [default: 50].")
@overwrite_option
@quiet_option
def sources_cmd(run_dir, depth_window, trace, delay_us, depth_m, top, permittivity, dem_path, band, dpi, figure_format,
                db_range, overwrite, quiet):  # fmt: skip
    """Find the ground behind a run's echoes.

    \b
    Map what echoes into an apparent-depth window, summed over the track
    (writes RUN_DIR/sources_<A>-<B>m_eps<ε>.tif and .png):
      cluttersim sources run1 --depth-window 50 300 --permittivity 3.15
    \b
    Rank the ground cells behind one sample (prints a table, writes
    RUN_DIR/echo_t<N>_<delay>us.png):
      cluttersim sources run1 --trace 120 --delay-us 14.2
      cluttersim sources run1 --trace 120 --depth-m 180
    """
    from cluttersim.analysis.sources import (
        ask_echo, depth_window_map, format_echo_answer, load_run, write_echo_answer, write_source_map,
    )  # fmt: skip

    if (depth_window is None) == (trace is None):
        raise click.UsageError("give either --depth-window A B, or --trace N with --delay-us or --depth-m")
    if trace is not None and (delay_us is None) == (depth_m is None):
        raise click.UsageError("with --trace, give exactly one of --delay-us or --depth-m")
    figures = make_figure_options(dpi, figure_format, db_range)
    run = load_run(run_dir, dem=dem_path, band=band)
    if depth_window is not None:
        smap = depth_window_map(run, depth_window[0], depth_window[1], permittivity, progress=not quiet)
        paths = write_source_map(run, smap, overwrite=overwrite, figures=figures)
        if not quiet:
            for p in paths.values():
                click.echo(f"wrote {p}")
        return
    answer = ask_echo(
        run, trace, delay_s=None if delay_us is None else delay_us * 1e-6, depth_m=depth_m, permittivity=permittivity, top=top
    )
    path = write_echo_answer(run, answer, overwrite=overwrite, figures=figures)
    click.echo(format_echo_answer(answer))
    if not quiet:
        click.echo(f"wrote {path}")
