"""Say so when the compiled kernels are not cached yet, and show the compilation's progress.

Numba compiles the modules of :mod:`cluttersim.kernels` on first use and keeps the machine code
in its on-disk cache (``cache=True``): an index file (``<module>.<function>-<line>.py311.nbi``,
e.g. ``diffuse.accumulate_power-15.py311.nbi``) per compiled function, in ``__pycache__`` beside
the module (``cluttersim/kernels/``) or under ``NUMBA_CACHE_DIR``. Numba uses an index only if
it records the SHA-256 digest of its module's file as it is now (numba.core.caching: the index
pickles the digest's 32 bytes as they are). An index is fresh when it holds the digest of the
module its name starts with; the cache counts as empty when no index is fresh (as before the
kernels were split into modules, when one file's digest decided). Nothing here imports Numba.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import threading
from pathlib import Path

#: The first line shown when the kernels are compiled.
MESSAGE = "cluttersim: compiling the kernels once, about a minute (later runs load them from the cache)"


def _kernels_dir() -> Path:
    return Path(__file__).with_name("kernels")


def kernel_sources() -> list[Path]:
    """The kernel modules (``cluttersim/kernels/*.py``), each with its own cache index files."""
    return sorted(p for p in _kernels_dir().glob("*.py") if p.name != "__init__.py")


def _index_files() -> list[Path]:
    user_dir = os.environ.get("NUMBA_CACHE_DIR")
    if user_dir:
        parent = _kernels_dir().parts[-2:]  # ("cluttersim", "kernels"), under the cache dir's mirror
        return [p for p in Path(user_dir).rglob("*.nbi") if p.parent.parts[-2:] == parent]
    return list((_kernels_dir() / "__pycache__").glob("*.nbi"))


def cache_index_files() -> list[Path]:
    """The kernels' cache index files that Numba would use (each holding its own module's digest)."""
    digests = {}
    for source in kernel_sources():
        with contextlib.suppress(OSError):
            digests[source.stem] = hashlib.sha256(source.read_bytes()).digest()
    fresh = []
    for p in _index_files():
        digest = digests.get(p.name.split(".", 1)[0])
        with contextlib.suppress(OSError):
            if digest is not None and digest in p.read_bytes():
                fresh.append(p)
    return fresh


@contextlib.contextmanager
def compile_notice(echo, poll_s: float = 0.5):
    """While the body runs: if no kernel is cached, ``echo`` :data:`MESSAGE` at once and show
    a progress line (kernels compiled, time) on standard error until the body ends."""
    if cache_index_files():
        yield
        return
    echo(MESSAGE)
    from tqdm.auto import tqdm

    stop = threading.Event()

    def watch():
        with tqdm(unit=" kernels", desc="compiling", delay=0.0, leave=False) as bar:
            while not stop.wait(poll_s):
                n = len(cache_index_files())
                if n > bar.n:
                    bar.update(n - bar.n)
                bar.refresh()

    thread = threading.Thread(target=watch, name="compile-notice", daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join(timeout=2.0)
