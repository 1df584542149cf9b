"""Driving the command line from tests: the installed executable, the named region options, an
in-process invocation with every argument as text, and the one-line error check (used by
test_survey.py and test_hardening.py)."""

from __future__ import annotations

import sys
from pathlib import Path

from click.testing import CliRunner

#: The console script of this environment (for runs in a real process: signals, start-up).
CLUTTERSIM = Path(sys.executable).parent / "cluttersim"


def region_args(region) -> list[str]:
    """The named region options (--lat-min ...) of a (lon_min, lat_min, lon_max, lat_max) box, as strings."""
    lon0, lat0, lon1, lat1 = region
    return [str(v) for v in ("--lat-min", lat0, "--lat-max", lat1, "--lon-min", lon0, "--lon-max", lon1)]


def invoke(*args):
    """Run ``cluttersim ARGS...`` in this process (click's CliRunner); paths and numbers become text."""
    from cli.main import cli

    return CliRunner().invoke(cli, [str(a) for a in args])


def one_line(res, code: int) -> list[str]:
    """Check a command ended with ``code`` and no traceback; return its output's lines."""
    assert res.exit_code == code, res.output
    assert "Traceback" not in res.output
    return res.output.strip().splitlines()


def interrupt_when(args, ready, sig, err_path, *, too_soon: str, timeout_s: float = 120.0, poll_s: float = 0.05):
    """Start ``cluttersim ARGS`` in a real process (stderr into ``err_path``), wait until ``ready()``
    is true, send it ``sig`` and return (exit code, stderr text). Fails if it is never ready within
    ``timeout_s`` or ends before (``too_soon``: what to make bigger)."""
    import subprocess
    import time

    with open(err_path, "w") as err:
        proc = subprocess.Popen([str(CLUTTERSIM), *map(str, args)], stdout=subprocess.DEVNULL, stderr=err)
        try:
            deadline = time.monotonic() + timeout_s
            while not ready() and proc.poll() is None:
                assert time.monotonic() < deadline, f"not ready within {timeout_s:g} s"
                time.sleep(poll_s)
            assert proc.poll() is None, f"finished before it could be interrupted: make {too_soon} bigger"
            proc.send_signal(sig)
            rc = proc.wait(timeout=60)
        finally:
            if proc.poll() is None:
                proc.kill()
    return rc, Path(err_path).read_text()
