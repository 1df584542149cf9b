"""The ``cluttersim`` command: one click group, one module per subcommand.

This layer only parses arguments, shows progress and turns the library's
errors into one-line messages and exit codes (1 = bad data or a product that
cannot be written, 2 = usage, an existing output or an output directory in use,
130 = interrupted by SIGINT or SIGTERM); ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import functools
import importlib
import sys
import warnings

import click

from cluttersim import __version__
from cluttersim.errors import ClutterSimError

from .options import require_finite_floats


#: Subcommand → (module of :mod:`cli`, command object): imported when the command is used, so
#: ``cluttersim --version`` and each command start without loading the others' libraries.
_COMMANDS = {
    "compare": ("compare", "compare_cmd"),
    "demo": ("demo", "demo_cmd"),
    "plan": ("plan", "plan_cmd"),
    "radar-template": ("template", "template_cmd"),
    "report": ("report", "report_cmd"),
    "simulate": ("simulate", "simulate_cmd"),
    "sources": ("sources", "sources_cmd"),
    "survey": ("survey", "survey_cmd"),
    "track": ("track", "track_cmd"),
}
#: Commands that run the compiled kernels (a first run with an empty cache compiles them).
_KERNEL_COMMANDS = ("compare", "demo", "plan", "simulate", "sources", "survey")


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
            require_finite_floats(self, only=name)
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
            click.echo(interrupt_message(), err=True)
            ctx.exit(130)
        except OSError as exc:  # an output the library did not wrap (a figure, a directory)
            if ctx.obj and ctx.obj.get("debug"):
                raise
            from cluttersim.io.outputs import describe_os_error

            click.echo(f"cluttersim: error: {describe_os_error(exc)}", err=True)
            ctx.exit(1)
        except MemoryError:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            click.echo("cluttersim: error: out of memory; lower --max-memory so that the run is refused before "
                       "it starts, or make it smaller (fewer traces, samples or DEM cells)", err=True)  # fmt: skip
            ctx.exit(1)


def interrupt_message() -> str:
    """The one line for an interrupt: whether any product was put in place before it."""
    from cluttersim.io import outputs

    if not outputs.committed:
        return "cluttersim: interrupted; no output was written"
    names = ", ".join(str(p) for p in outputs.committed[-3:])
    return f"cluttersim: interrupted; {len(outputs.committed)} product(s) written before it are complete ({names})"


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
    """Console entry point: SIGINT and SIGTERM both interrupt (exit 130), and an interrupt is never
    followed by exit 0, even where a library swallowed the KeyboardInterrupt."""
    from cluttersim.io import outputs

    outputs.install_interrupt_handlers()
    try:
        cli.main(args=argv, prog_name="cluttersim", standalone_mode=True)
        code = 0
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except KeyboardInterrupt:  # outside any command (argument parsing, start-up)
        click.echo(interrupt_message(), err=True)
        code = 130
    if code == 0 and outputs.interrupt_count():
        click.echo(interrupt_message(), err=True)
        code = 130
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
