"""Safe output writing: refuse to overwrite, write to a temporary name, rename.

A product is never seen half-written: every file is written next to its final
path under a temporary name and moved into place with :func:`os.replace`, which
is atomic on POSIX file systems.
"""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

from .errors import OutputExistsError


def check_new(paths, overwrite: bool) -> None:
    """Raise :class:`OutputExistsError` if any path exists and ``overwrite`` is false."""
    if overwrite:
        return
    for p in paths:
        if Path(p).exists():
            raise OutputExistsError(f"{p}: already exists; pass --overwrite to replace it")


def temporary_path(path) -> Path:
    """The temporary sibling a product is written to before it is renamed."""
    path = Path(path)
    return path.with_name(f".{path.name}.partial-{os.getpid()}")


@contextlib.contextmanager
def atomic_paths(paths):
    """Yield temporary paths for ``paths``; on success rename them all into place.

    If the body raises (including KeyboardInterrupt), the temporary files are
    removed and nothing at the final paths changes.
    """
    finals = [Path(p) for p in paths]
    temps = [temporary_path(p) for p in finals]
    for p in finals:
        p.parent.mkdir(parents=True, exist_ok=True)
    try:
        yield temps
        for t, f in zip(temps, finals):
            os.replace(t, f)
    finally:
        for t in temps:
            with contextlib.suppress(FileNotFoundError):
                t.unlink()
