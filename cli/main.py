"""The ``cluttersim`` command: one click group, one module per subcommand.

This layer only parses arguments, shows progress and turns the library's
errors into one-line messages and exit codes (1 = bad data, 2 = usage or an
existing output); ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import functools
import importlib
import sys
import warnings

import click

from cluttersim import __version__
from cluttersim.errors import ClutterSimError


#: Subcommand → (module of :mod:`cli`, command object): imported when the command is used, so
#: ``cluttersim --version`` and each command start without loading the others' libraries.
_COMMANDS = {
    "compare": ("compare", "compare_cmd"),
    "demo": ("demo", "demo_cmd"),
    "report": ("report", "report_cmd"),
    "simulate": ("simulate", "simulate_cmd"),
    "sources": ("sources", "sources_cmd"),
    "survey": ("survey", "survey_cmd"),
    "track": ("track", "track_cmd"),
}
#: Commands that run the compiled kernels (a first run with an empty cache compiles them).
_KERNEL_COMMANDS = ("compare", "demo", "simulate", "sources", "survey")


class _Group(click.Group):
    """A click group that loads its subcommands on first use and reports library errors as one line."""

    def list_commands(self, ctx):
        return sorted(set(super().list_commands(ctx)) | set(_COMMANDS))

    def get_command(self, ctx, name):
        if name in _COMMANDS and name not in self.commands:
            module, attr = _COMMANDS[name]
            cmd = getattr(importlib.import_module(f"{__package__}.{module}"), attr)
            if name in _KERNEL_COMMANDS:
                cmd.callback = _with_compile_notice(cmd.callback)
            self.add_command(cmd, name)
        return super().get_command(ctx, name)

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


def _with_compile_notice(callback):
    """The command's callback, saying so when the compiled kernels are not in the cache yet."""

    @functools.wraps(callback)
    def run(*args, **kwargs):
        from cluttersim.compile_notice import compile_notice

        with compile_notice(lambda text: click.echo(text, err=True)):
            return callback(*args, **kwargs)

    return run


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


def main(argv=None):
    """Console entry point."""
    return cli.main(args=argv, prog_name="cluttersim", standalone_mode=True)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
