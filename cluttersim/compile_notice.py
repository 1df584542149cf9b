"""Say so when the compiled kernels are not cached yet, and show the compilation's progress.

Numba compiles :mod:`cluttersim.kernels` on first use and keeps the machine code in its
on-disk cache (``cache=True``): an index file (``kernels.<function>-<line>.py311.nbi``) per
compiled function, in ``__pycache__`` beside ``kernels.py`` or under ``NUMBA_CACHE_DIR``.
Numba uses an index only if it records the SHA-256 digest of ``kernels.py`` as it is now
(numba.core.caching: the index pickles the digest's 32 bytes as they are), so the cache
counts as empty when no index holds that digest. Nothing here imports Numba.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import threading
from pathlib import Path

#: The first line shown when the kernels are compiled.
MESSAGE = "cluttersim: compiling the kernels once, about a minute (later runs load them from the cache)"


def _kernels_source() -> Path:
    return Path(__file__).with_name("kernels.py")


def cache_index_files() -> list[Path]:
    """The kernels' cache index files that Numba would use (holding ``kernels.py``'s digest)."""
    source = _kernels_source()
    try:
        digest = hashlib.sha256(source.read_bytes()).digest()
    except OSError:
        return []
    user_dir = os.environ.get("NUMBA_CACHE_DIR")
    if user_dir:
        candidates = [p for p in Path(user_dir).rglob("kernels.*.nbi") if "cluttersim" in str(p.parent)]
    else:
        candidates = list((source.parent / "__pycache__").glob("kernels.*.nbi"))
    fresh = []
    for p in candidates:
        with contextlib.suppress(OSError):
            if digest in p.read_bytes():
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
