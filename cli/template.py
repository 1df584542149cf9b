"""``cluttersim radar-template``: print a commented radar TOML to start from."""

from __future__ import annotations

import click

from cluttersim.template import radar_template


@click.command("radar-template")
@click.option("--orbital", "kind", flag_value="orbital", default=True, help="An orbital sounder (the built-in radar) [default].")
@click.option("--airborne", "kind", flag_value="airborne", help="An airborne sounder (higher frequency, shorter window).")
def template_cmd(kind):
    """Print a radar TOML with every key, its unit, default and meaning.

    \b
    Example:
      cluttersim radar-template --airborne > my_radar.toml
      cluttersim simulate --dem site.tif --track pass.csv --radar my_radar.toml --out run1
    """
    click.echo(radar_template(kind), nl=False)
