"""The ``cluttersim`` command: one click group, one module per subcommand.

This layer only parses arguments, shows progress and turns the library's
errors into one-line messages and exit codes (1 = bad data, 2 = usage or an
existing output); ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import sys
import warnings

import click

from cluttersim import __version__
from cluttersim.errors import ClutterSimError


class _Group(click.Group):
    """A click group that reports library errors as one line."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except ClutterSimError as exc:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            click.echo(f"cluttersim: error: {exc}", err=True)
            ctx.exit(exc.exit_code)
        except KeyboardInterrupt:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            click.echo("cluttersim: interrupted; no output was written", err=True)
            ctx.exit(130)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    click.echo(f"cluttersim: warning: {message}", err=True)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="cluttersim")
@click.option("--debug", is_flag=True, help="Show full tracebacks instead of one-line errors.")
@click.pass_context
def cli(ctx, debug):
    """Simulate the surface-clutter echo of a radar sounder from a DEM and a track."""
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    if not debug:
        warnings.showwarning = _show_warning


def _register():
    from . import compare, demo, simulate, sources, track

    cli.add_command(simulate.simulate_cmd)
    cli.add_command(track.track_cmd)
    cli.add_command(demo.demo_cmd)
    cli.add_command(sources.sources_cmd)
    cli.add_command(compare.compare_cmd)

    from . import report

    cli.add_command(report.report_cmd)

    from . import survey

    cli.add_command(survey.survey_cmd)

    from . import template

    cli.add_command(template.template_cmd)


_register()


def main(argv=None):
    """Console entry point."""
    return cli.main(args=argv, prog_name="cluttersim", standalone_mode=True)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
