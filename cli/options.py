"""Options shared by several commands, defined once."""

from __future__ import annotations

import math

import click



def out_dir_option(default=None):
    return click.option(
        "--out",
        "out_dir",
        type=click.Path(file_okay=False),
        required=default is None,
        default=default,
        show_default=default is not None,
        help="Directory for the products (created if missing).",
    )


overwrite_option = click.option("--overwrite", is_flag=True, help="Replace existing products.")
quiet_option = click.option("--quiet", "-q", is_flag=True, help="No progress bar or summary.")
radar_option = click.option(
    "--radar",
    "radar_path",
    type=click.Path(dir_okay=False),
    default=None,
    help="Radar TOML ([radar] and [surface] tables); the built-in radar if omitted.",
)


def _parse_memory(ctx, param, value):
    if value is None or value == "auto":
        return "auto"
    from cluttersim.memory import parse_size

    try:
        return parse_size(value)
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from None


max_memory_option = click.option(
    "--max-memory",
    "max_memory",
    default="auto",
    show_default=True,
    callback=_parse_memory,
    metavar="SIZE",
    help="Refuse runs estimated to need more memory than this (e.g. 8GB, 500MB); auto: 80% of the available memory.",
)


def load_config(radar_path) -> "SimulationConfig":  # noqa: F821 - imported when called
    from cluttersim.config import SimulationConfig, default_config

    return SimulationConfig.from_toml(radar_path) if radar_path else default_config()

permittivity_option = click.option(
    "--permittivity",
    type=click.FloatRange(min=1.0),
    default=3.15,
    show_default=True,
    help="Real relative permittivity for apparent depths (3.15: water ice); depth = c·Δt / (2√ε′).",
)


def with_antenna(config, pattern=None, axis=None, beamwidths_deg=None):
    """The config with command-line overrides of its [antenna] table."""
    import dataclasses

    from cluttersim.physics.antenna import AntennaConfig

    changes = {}
    if pattern is not None:
        changes["pattern"] = pattern
    if axis is not None:
        changes["axis"] = axis
    if beamwidths_deg is not None:
        changes["beamwidth_along_deg"], changes["beamwidth_across_deg"] = beamwidths_deg
    if not changes:
        return config
    return dataclasses.replace(config, antenna=AntennaConfig(**{**config.antenna.to_dict(), **changes}))

band_option = click.option(
    "--band",
    default=None,
    metavar="NAME",
    help="Band of a multi-band run ([[band]] tables of the radar TOML) [default: the first].",
)


def height_datum_options(fn):
    """--track-height-datum and --dem-height-datum (vertical datums; cluttersim.io.datums)."""
    fn = click.option(
        "--dem-height-datum", default=None, metavar="DATUM",
        help="Declare the DEM heights' reference when its CRS has no vertical part: ellipsoid, geoid:EGM96, "
             "geoid:EGM2008, geoid:EPSG:CODE or geoid:GRID_FILE [default: the ellipsoid].",
    )(fn)  # fmt: skip
    return click.option(
        "--track-height-datum", default=None, metavar="DATUM",
        help="What the track altitudes are above: ellipsoid, geoid:EGM96, geoid:EGM2008, geoid:EPSG:CODE or "
             "geoid:GRID_FILE; they are moved into the DEM's vertical reference [default: already in it].",
    )(fn)  # fmt: skip


dem_height_unit_option = click.option(
    "--dem-height-unit", type=click.Choice(["m", "ft", "us-ft"]), default=None,
    help="Declare the unit of the DEM's values (ft: 0.3048 m, us-ft: 1200/3937 m) "
         "[default: its CRS's vertical unit, else metres].",
)  # fmt: skip


def dem_in_unit(dem, dem_height_unit, body_radius_m=None):
    """The DEM (a path or an open DemSource) as a DemSource whose values are read in the declared unit
    (``--dem-height-unit``); a usage error if the DEM already states its heights' scale or unit."""
    import dataclasses

    from cluttersim.io.datums import HEIGHT_UNITS_M
    from cluttersim.io.dem import DemSource

    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    if dem_height_unit is None:
        return src
    if src.height_scale_m != 1.0 or src.height_offset_m != 0.0:
        raise click.UsageError(f"--dem-height-unit: {src.path} already gives its heights' scale or unit "
                               "(band metadata or a vertical CRS); the option is for DEMs that give none")  # fmt: skip
    return dataclasses.replace(src, height_scale_m=HEIGHT_UNITS_M[dem_height_unit])


def track_for_dem(track, dem_source, track_height_datum, dem_height_datum, quiet):
    """The track in the DEM's vertical reference (prints what was done unless quiet)."""
    from cluttersim.io.datums import parse_height_datum, track_in_dem_datum

    if track_height_datum is None:
        if dem_height_datum is not None:
            raise click.UsageError("--dem-height-datum needs --track-height-datum (the track's own reference)")
        return track
    track, note = track_in_dem_datum(track, dem_source, parse_height_datum(track_height_datum),
                                     parse_height_datum(dem_height_datum))  # fmt: skip
    if note and not quiet:
        click.echo(note)
    return track


#: What --db-range means for the radargram figures (its help by default).
RADARGRAM_DB_RANGE_HELP = ("Dynamic range of the radargram figures, dB below the strongest echo "
                           "[default: chosen from the data so that the clutter shows].")


def figure_options_with(db_range_help: str = RADARGRAM_DB_RANGE_HELP):
    """--dpi, --figure-format and --db-range, with what --db-range means for this command's figures.
    Every command that writes figures takes these three (:func:`make_figure_options` turns them into
    a :class:`cluttersim.products.FigureOptions`)."""

    def decorate(fn):
        fn = click.option("--db-range", "db_range", type=click.FloatRange(min=0.0, min_open=True), default=None,
                          metavar="DB", help=db_range_help)(fn)  # fmt: skip
        fn = click.option("--figure-format", "figure_format", type=click.Choice(["png", "pdf", "svg"]), default="png",
                          show_default=True, help="Format of the figures (pdf and svg are vector graphics).")(fn)  # fmt: skip
        return click.option("--dpi", type=click.FloatRange(min=10, max=2400), default=None,
                            help="Resolution of the figures, dots per inch (for pdf and svg: of the images inside "
                                 "them) [default: 120].")(fn)  # fmt: skip

    return decorate


#: --dpi, --figure-format and --db-range (the radargram figures' dynamic range).
figure_options = figure_options_with()


def make_figure_options(dpi, figure_format, db_range):
    from cluttersim.products import FigureOptions

    return FigureOptions(dpi=dpi, fmt=figure_format, db_range=db_range)


def deprecated_pair(old: str, new: tuple[str, ...], order: str):
    """A callback for an old coordinate option (e.g. ``--start LAT LON``): still accepted, with a
    deprecation message naming the new options."""

    def callback(ctx, param, value):
        if value is not None and value != ():
            click.echo(f"cluttersim: warning: {old} {order} is deprecated and will be removed in the next release; "
                       f"use {' '.join(new)}", err=True)  # fmt: skip
        return value

    return callback


def pick_coordinates(old_value, named: dict, old_name: str, order: tuple[str, ...]):
    """The coordinates from the named options (``--start-lat`` ...) or the deprecated combined one;
    a usage error when both or neither are given, or when only some of the named ones are."""
    given = {k: v for k, v in named.items() if v is not None}
    if old_value and given:
        raise click.UsageError(f"give either {old_name} or {', '.join('--' + k.replace('_', '-') for k in named)}, not both")
    if old_value:
        return dict(zip(order, old_value))
    missing = [k for k, v in named.items() if v is None]
    if missing:
        raise click.UsageError(f"missing {', '.join('--' + k.replace('_', '-') for k in missing)}")
    return named


# --------------------------------------------------------------------------- finite numbers


def _check_finite(value, param, ctx, fail):
    if isinstance(value, float) and not math.isfinite(value):
        fail(f"{value!r}: expected a finite number", param, ctx)
    return value


class FiniteFloat(click.types.FloatParamType):
    """click's FLOAT without nan and ±inf."""

    def convert(self, value, param, ctx):
        return _check_finite(super().convert(value, param, ctx), param, ctx, self.fail)


class FiniteFloatRange(click.FloatRange):
    """click's FloatRange without nan (which passes its bounds) and ±inf."""

    def convert(self, value, param, ctx):
        _check_finite(click.FLOAT.convert(value, param, ctx), param, ctx, self.fail)
        return super().convert(value, param, ctx)


def finite_type(t):
    """The finite counterpart of a click parameter type (float types only; others unchanged)."""
    if isinstance(t, click.FloatRange) and not isinstance(t, FiniteFloatRange):
        return FiniteFloatRange(t.min, t.max, min_open=t.min_open, max_open=t.max_open, clamp=t.clamp)
    if type(t) is click.types.FloatParamType:
        return FiniteFloat()
    if isinstance(t, click.Tuple):
        t.types = [finite_type(x) for x in t.types]
    return t


def require_finite_floats(group: click.Group, only: str | None = None) -> None:
    """Make every float option and argument of every command (or of the command ``only``, as it
    is loaded) refuse nan and inf (a usage error, exit 2), so that no command needs to remember it."""
    for name, command in group.commands.items():
        if only is not None and name != only:
            continue
        if isinstance(command, click.Group):
            require_finite_floats(command)
        for param in command.params:
            param.type = finite_type(param.type)
