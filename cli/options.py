"""Options shared by several commands, defined once."""

from __future__ import annotations

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

    from cluttersim.antenna import AntennaConfig

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
