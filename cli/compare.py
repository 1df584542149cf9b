"""``cluttersim compare``: an observed radargram against the simulated clutter of its track."""

from __future__ import annotations

import click

from cluttersim.analysis.compare import CompareSettings, compare_many, compare_to_dir, format_summary
from cluttersim.io.observed import AXIS_ORDERS, BYTE_ORDERS, FORMAT_SUFFIXES, RAW_DTYPES, VALUE_KINDS, ObservedFormat, file_format_of
from cluttersim.io.readers import ARCHIVE_SUFFIXES

from .options import (
    band_option, dem_height_unit_option, dem_in_unit, figure_options_with, height_datum_options, load_config,
    make_figure_options, max_memory_option, out_dir_option, overwrite_option, permittivity_option, quiet_option,
    radar_option, track_for_dem,
)

_POSITIVE = click.FloatRange(min=0.0, min_open=True)


def _replaced(what: str):
    """Callback of an option that no longer exists: stop with what replaced it."""

    def callback(ctx, param, value):
        if value is not None:
            raise click.UsageError(f"{param.opts[0]} was replaced: {what}")
        return value

    return callback


def _odd(ctx, param, value):
    if value % 2 != 1:
        raise click.BadParameter(f"{value} is even; expected an odd number of traces (centred on each trace)")
    return value


@click.command("compare")
@click.option("--observed", "observed_path", type=click.Path(dir_okay=False),
              help="Observed radargram: .nc/.h5, .npy, .tif/.png image, raw binary (.bin/.raw/.dat), "
                   "or a product with its own track: PDS3 .lbl, PDS4 .xml, MATLAB .mat, SEG-Y .sgy/.segy.")
@click.option("--observed-track", "track_path", type=click.Path(dir_okay=False),
              help="Track CSV of the observed traces (lat, lon, alt[, time]), one row per trace "
                   "[archive products: their own].")
@click.option("--list", "list_path", type=click.Path(dir_okay=False),
              help="…or a CSV listing many comparisons, one per row (columns: observed, observed_track, "
                   "sample_interval_s, sim or dem, window_start_s or window_start_column[, name, radar, values]).")
@click.option("--sim", "sim_path", type=click.Path(dir_okay=False), help="Simulated RUN_DIR/radargram.nc to compare with.")
@click.option("--dem", "dem_path", type=click.Path(dir_okay=False), help="…or simulate the observed track over this DEM now.")
@radar_option
@click.option("--body-radius-m", type=float, default=None, help="Sphere radius (m) for a DEM without CRS (with --dem).")
@click.option("--sample-interval-s", type=_POSITIVE, default=None,
              help="Observed sample interval, s [archive products: their own].")
@click.option("--window-start-s", type=click.FloatRange(min=0.0), default=None,
              help="Absolute two-way delay of observed sample 0, s (all traces).")
@click.option("--window-start-column", default=None, help="…or the track CSV column with each trace's window start, s.")
@click.option("--values", type=click.Choice(VALUE_KINDS), default="power", show_default=True,
              help="What the observed numbers are: amplitude (power = |a|²), power, or db (10 log10 power).")
@click.option("--format", "file_format", type=click.Choice(list(FORMAT_SUFFIXES)), default=None,
              help="Observed file format [default: from the suffix].")
@click.option("--variable", default=None, help="netCDF/HDF5 variable (group/name) [default: the only 2-D one].")
@click.option("--axis-order", type=click.Choice(AXIS_ORDERS), default=None,
              help="Stored axis order [default: netCDF dims 'trace'/'sample', samples-traces for images, else traces-samples].")
@click.option("--raw-dtype", type=click.Choice(RAW_DTYPES), default=None, help="Raw binary element type.")
@click.option("--raw-shape", nargs=2, type=click.IntRange(min=1), default=None, metavar="TRACES SAMPLES",
              help="Raw binary size in traces and samples.")
@click.option("--byte-order", type=click.Choice(list(BYTE_ORDERS)), default="little", show_default=True,
              help="Raw binary byte order.")
@click.option("--raw-offset-bytes", type=click.IntRange(min=0), default=0, show_default=True,
              help="Raw binary header bytes to skip.")
# archive products (PDS3/PDS4, MATLAB, SEG-Y): where each field is read from
@click.option("--map", "field_map", multiple=True, metavar="FIELD=NAME[:UNIT]",
              help="Read FIELD (data, lat, lon, alt, radius, time, sample_interval, window_start, window_shift, "
                   "fast_time) from the column, keyword, variable or header field NAME; repeatable.")
@click.option("--geometry", "geometry_path", type=click.Path(dir_okay=False), default=None,
              help="PDS: a second product (label) whose table holds the geometry and timing.")
@height_datum_options
@dem_height_unit_option
@click.option("--match-tolerance-m", type=_POSITIVE, default=None,
              help="Largest distance to the matched simulated trace, m [default: the simulated trace spacing].")
@click.option("--max-offset-us", type=_POSITIVE, default=None,
              help="Largest timing offset searched, µs [default: half the simulated window].")
@click.option("--per-trace-offset", is_flag=True, help="Also fit a smooth per-trace timing offset.")
@click.option("--offset-window-traces", type=click.IntRange(min=1), default=51, show_default=True,
              help="Smoothing length of the per-trace offset, traces.")
@click.option("--delay-tolerance-us", type=_POSITIVE, default=None,
              help="Simulated power this close in delay can explain an echo, µs "
                   "[default: one range cell 1/B plus 3 × the offset's uncertainty].")
@click.option("--pfa", type=click.FloatRange(0.0, 1.0, min_open=True, max_open=True), default=1e-6,
              show_default=True, help="False-alarm probability per observed sample of the unexplained-echo test.")
@click.option("--looks", type=click.FloatRange(min=0.0, min_open=True), default=1.0, show_default=True,
              help="Independent looks averaged in each observed sample (1: single look, exponential power).")
@click.option("--model-tolerance-db", type=click.FloatRange(min=0.0), default=3.0, show_default=True,
              help="The simulated clutter may be this much too weak (DEM, scattering law), dB.")
@click.option("--integration-traces", type=click.IntRange(min=1), default=15, show_default=True, callback=_odd,
              help="Neighbouring traces averaged by the test, at the same depth below the surface (odd; 1: none).")
@click.option("--threshold-db", type=float, default=None, hidden=True,
              callback=_replaced("echoes are now tested against the predicted clutter and noise at a false-alarm "
                                 "probability; use --pfa (and --looks)"))
@click.option("--explained-within-db", type=float, default=None, hidden=True,
              callback=_replaced("the simulated clutter's uncertainty is now a tolerance on its power; use "
                                 "--model-tolerance-db"))
@click.option("--continuity-traces", type=click.IntRange(1, 100), default=2, show_default=True,
              help="Neighbouring traces on each side checked for a candidate's continuity.")
@permittivity_option
@band_option
@max_memory_option
@click.option("--tec-el-m2", type=click.FloatRange(min=0.0, max=1e19), default=None,
              help="Ionospheric total electron content (el/m², 1e16 = 1 TECU) applied to the simulation before "
                   "comparing: it delays and disperses the echoes as the observed ones were.")
@click.option("--top", type=click.IntRange(0, 1000), default=5, show_default=True, help="Candidates listed in the summary.")
@figure_options_with("Largest dynamic range of the side-by-side and overlay figures' shared power scale, dB below "
                     "the strongest echo [default: 60; the scale stops 5 dB below the observed noise floor]; "
                     "the difference figure keeps its ±20 dB.")
@out_dir_option()
@overwrite_option
@quiet_option
def compare_cmd(observed_path, track_path, sim_path, dem_path, radar_path, body_radius_m, sample_interval_s,
                window_start_s, window_start_column, values, file_format, variable, axis_order, raw_dtype, raw_shape,
                byte_order, raw_offset_bytes, field_map, geometry_path, track_height_datum, dem_height_datum,
                dem_height_unit, match_tolerance_m, max_offset_us, per_trace_offset, offset_window_traces,
                delay_tolerance_us, pfa, looks, model_tolerance_db, integration_traces, threshold_db,
                explained_within_db, continuity_traces, permittivity, band, max_memory, tec_el_m2, top, dpi,
                figure_format, db_range, out_dir, overwrite, quiet, list_path):  # fmt: skip
    """Compare an observed radargram with the simulated clutter of its track.

    Aligns the observed data in delay (fitting the simulated surface echo's
    leading edge and peak), fits the power scale, and tests every observed
    sample against the predicted clutter and noise under speckle statistics:
    the improbable ones (p < --pfa) are the candidates. Writes
    OUT/comparison.nc, OUT/candidates.csv, OUT/candidates.geojson,
    OUT/side_by_side.png, OUT/overlay.png and OUT/difference.png (--figure-format
    pdf or svg for vector figures; and, with --dem, the simulation as
    OUT/radargram.nc); prints a summary. With --list,
    one such folder per row (OUT/NAME/) and a combined OUT/candidates.csv,
    OUT/candidates.geojson and OUT/candidates_map.png.

    \b
    Examples:
      cluttersim compare --observed obs.npy --observed-track obs_track.csv \\
          --sample-interval-s 37.5e-9 --window-start-s 2.0e-3 --values amplitude \\
          --sim run1/radargram.nc --out cmp1
      cluttersim compare --observed obs.bin --raw-dtype float32 --raw-shape 2000 1024 \\
          --byte-order big --observed-track obs_track.csv --sample-interval-s 37.5e-9 \\
          --window-start-column window_start --values db --dem site.tif --out cmp2
      cluttersim compare --observed RG_0001.LBL --map radius=SC_RADIUS:km \\
          --dem site.tif --out cmp3
      cluttersim compare --list passes.csv --out survey_cmp
    """
    settings = CompareSettings(
        match_tolerance_m=match_tolerance_m, max_offset_s=None if max_offset_us is None else max_offset_us * 1e-6,
        per_trace_offset=per_trace_offset, offset_window_traces=offset_window_traces,
        delay_tolerance_s=None if delay_tolerance_us is None else delay_tolerance_us * 1e-6, pfa=pfa, looks=looks,
        model_tolerance_db=model_tolerance_db, integration_traces=integration_traces, permittivity=permittivity,
        continuity_traces=continuity_traces,
    )  # fmt: skip
    figures = make_figure_options(dpi, figure_format, db_range)
    if list_path is not None:
        single = {"--observed": observed_path, "--observed-track": track_path, "--sim": sim_path, "--dem": dem_path,
                  "--radar": radar_path, "--sample-interval-s": sample_interval_s, "--window-start-s": window_start_s,
                  "--window-start-column": window_start_column, "--dem-height-unit": dem_height_unit}  # fmt: skip
        given = [k for k, v in single.items() if v is not None]
        if given:
            raise click.UsageError(f"with --list each row names its inputs; drop {', '.join(given)}")

        def report(name, result):
            if not quiet:
                click.echo(f"== {name}")
                click.echo(format_summary(result, top=top))

        results, paths = compare_many(list_path, out_dir, settings=settings, overwrite=overwrite, progress=not quiet,
                                      max_memory_bytes=max_memory, on_result=report, tec_el_m2=tec_el_m2,
                                      figures=figures)  # fmt: skip
        if not quiet:
            total = sum(len(r.candidates) for _, r in results)
            click.echo(f"all tracks: {len(results)} compared, {total} candidates")
            for p in paths.values():
                click.echo(f"wrote {p}")
        return
    if observed_path is None:
        raise click.UsageError("missing option --observed (or give --list)")
    if (sim_path is None) == (dem_path is None):
        raise click.UsageError("give either --sim RUN_DIR/radargram.nc or --dem DEM (to simulate the observed track)")
    if (radar_path is not None or body_radius_m is not None or dem_height_unit is not None) and dem_path is None:
        raise click.UsageError("--radar, --body-radius-m and --dem-height-unit apply with --dem only (a --sim "
                               "radargram carries its own)")  # fmt: skip
    dem = dem_path
    if dem_height_unit is not None:  # the DEM's values read in the declared unit
        dem = dem_in_unit(dem_path, dem_height_unit, body_radius_m)
    fmt = ObservedFormat(file_format=file_format, values=values, variable=variable, axis_order=axis_order,
                         raw_dtype=raw_dtype, raw_shape=tuple(raw_shape) if raw_shape else None,
                         byte_order=byte_order, raw_offset_bytes=raw_offset_bytes, fields=tuple(field_map),
                         geometry=geometry_path)  # fmt: skip
    archive = file_format_of(observed_path, fmt) in ARCHIVE_SUFFIXES
    observed = observed_path
    if window_start_s is not None and window_start_column is not None:
        raise click.UsageError("give exactly one of --window-start-s or --window-start-column, not both")
    if not archive:
        if window_start_s is None and window_start_column is None:
            raise click.UsageError("give exactly one of --window-start-s or --window-start-column")
        for opt, value in (("--observed-track", track_path), ("--sample-interval-s", sample_interval_s)):
            if value is None:  # this file carries no track or timing
                raise click.UsageError(f"missing option {opt} (or give --list)")
        if field_map or geometry_path:
            raise click.UsageError("--map and --geometry apply to PDS3/PDS4, MATLAB and SEG-Y products only")
    else:  # read here: the reader may need the body (radii), and says where each field came from
        from cluttersim.io.observed import body_for_observed, load_observed

        observed = load_observed(observed_path, track_path, sample_interval_s, window_start_s=window_start_s,
                                 window_start_column=window_start_column, fmt=fmt,
                                 body=body_for_observed(sim_path, dem_path, body_radius_m))  # fmt: skip
        if not quiet:
            click.echo(f"read {observed.source}: {observed.n_traces} traces × {observed.n_samples} samples")
            click.echo("".join(f"  {note}\n" for note in observed.notes), nl=False)
    raw_given = raw_dtype is not None or raw_shape is not None or raw_offset_bytes
    is_raw = file_format_of(observed_path, fmt) == "raw"
    if raw_given and not is_raw:
        raise click.UsageError("--raw-dtype, --raw-shape and --raw-offset-bytes apply to raw binary files only")
    if is_raw and (raw_dtype is None or raw_shape is None):
        raise click.UsageError("a raw binary observed file needs --raw-dtype and --raw-shape TRACES SAMPLES")
    if track_height_datum is not None or dem_height_datum is not None:  # the track into the DEM's heights' datum
        if dem_path is None:
            raise click.UsageError("--track-height-datum and --dem-height-datum apply with --dem")
        from dataclasses import replace

        from cluttersim.io.dem import DemSource
        from cluttersim.io.observed import load_observed

        observed = load_observed(observed, track_path, sample_interval_s, window_start_s=window_start_s,
                                 window_start_column=window_start_column, fmt=fmt)  # fmt: skip
        src = dem if isinstance(dem, DemSource) else DemSource.open(dem_path, body_radius_m)
        observed = replace(observed, track=track_for_dem(observed.track, src, track_height_datum, dem_height_datum, quiet))
    result, paths = compare_to_dir(
        observed, track_path, sample_interval_s, out_dir, sim=sim_path, dem=dem,
        config=load_config(radar_path) if dem_path else None, body_radius_m=body_radius_m,
        window_start_s=window_start_s, window_start_column=window_start_column, fmt=fmt, settings=settings,
        overwrite=overwrite, progress=not quiet, band=band, max_memory_bytes=max_memory, tec_el_m2=tec_el_m2,
        figures=figures,
    )  # fmt: skip
    if not quiet:
        click.echo(format_summary(result, top=top))
        for p in paths.values():
            click.echo(f"wrote {p}")
