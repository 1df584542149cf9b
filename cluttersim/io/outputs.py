"""Safe output writing: refuse to overwrite, write to a temporary name, rename; lock, interrupts.

A product is never seen half-written: every file is written next to its final
path under a temporary name (``.NAME.partial-PID``) and moved into place with
:func:`os.replace`, which is atomic on POSIX file systems.

* **Interrupts.** SIGINT (and, from the command line, SIGTERM) raise
  ``KeyboardInterrupt`` through :func:`_on_signal`, which also counts them. A
  library's clean-up code can swallow that exception (h5py's does); the count
  tells :func:`atomic_paths` that the write was interrupted all the same, and it
  rolls the write back. While the temporary files are renamed into place the
  signals are held (:func:`hold_interrupts`) and raised right after, so an
  interrupt ends with the old products intact or the new ones complete.
* **Stale partials.** Temporary files of processes that no longer run (killed
  with SIGKILL, or a machine crash) are removed before a product is written.
* **Errors.** An ``OSError`` while writing (no space left, read-only file system,
  a name too long, a file where a directory should be) becomes one
  :class:`~cluttersim.errors.OutputError` naming the product and the reason, and
  no temporary file is left.
* **Locks.** :func:`lock_directory` takes an advisory lock (``flock``) on an output
  directory for the length of a run: a second run into the same directory stops
  (:class:`~cluttersim.errors.OutputLockedError`, exit 2) and names the owner's pid.
"""

from __future__ import annotations

import contextlib
import errno
import glob
import os
import re
import signal
import threading
from pathlib import Path

from ..errors import ClutterSimError, OutputError, OutputExistsError, OutputLockedError

#: Name of the lock file :func:`lock_directory` keeps in an output directory while a run writes.
LOCK_NAME = ".cluttersim-lock"
_PARTIAL = ".partial-"


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
    return path.with_name(f".{path.name}{_PARTIAL}{os.getpid()}")


# --------------------------------------------------------------------------- interrupts

_signals = {"count": 0, "held": 0, "pending": None, "last": None}
#: Final paths this process has put in place (for the interrupt message of the command line).
committed: list[Path] = []


def _on_signal(signum, frame):
    """SIGINT/SIGTERM handler: count the signal, and raise KeyboardInterrupt unless it is held."""
    _signals["count"] += 1
    _signals["last"] = signum
    if _signals["held"]:
        _signals["pending"] = signum
        return
    raise KeyboardInterrupt


def install_interrupt_handlers(sigterm: bool = True) -> None:
    """Route SIGINT (and SIGTERM) through :func:`_on_signal` for the whole process (the command line)."""
    signal.signal(signal.SIGINT, _on_signal)
    if sigterm:
        signal.signal(signal.SIGTERM, _on_signal)


def interrupt_count() -> int:
    """How many SIGINT/SIGTERM this process has received through :func:`_on_signal`."""
    return _signals["count"]


def last_signal() -> int | None:
    """The number of the last signal received through :func:`_on_signal` (None: none)."""
    return _signals["last"]


@contextlib.contextmanager
def _counting_sigint():
    """Count SIGINT while the block runs (library use: the command line installs the handler for
    good). Only the main thread can set handlers; elsewhere nothing changes."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.getsignal(signal.SIGINT)
    mine = previous is signal.default_int_handler
    if mine:
        signal.signal(signal.SIGINT, _on_signal)
    try:
        yield
    finally:
        if mine:
            signal.signal(signal.SIGINT, previous)


@contextlib.contextmanager
def hold_interrupts():
    """Hold SIGINT/SIGTERM while the block runs and raise KeyboardInterrupt once it is done (a
    KeyboardInterrupt raised inside a library's clean-up can be swallowed there)."""
    with _counting_sigint():
        _signals["held"] += 1
        try:
            yield
        finally:
            _signals["held"] -= 1
        if not _signals["held"] and _signals["pending"] is not None:
            _signals["pending"] = None
            raise KeyboardInterrupt


# --------------------------------------------------------------------------- stale partials


def pid_alive(pid: int) -> bool:
    """Whether a process with this pid exists (on this machine)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_stale_partials(paths) -> list[Path]:
    """Remove temporary files of ``paths`` (``.NAME.partial-PID``) left by processes that no longer
    run; returns those removed. Partials of running processes are left alone."""
    removed = []
    for p in map(Path, paths):
        if not p.parent.is_dir():
            continue
        for t in p.parent.glob(f".{glob.escape(p.name)}{_PARTIAL}*"):
            pid = t.name.rpartition(_PARTIAL)[2]
            if pid.isdigit() and int(pid) != os.getpid() and not pid_alive(int(pid)):
                with contextlib.suppress(FileNotFoundError, PermissionError):
                    t.unlink()
                    removed.append(t)
    return removed


# --------------------------------------------------------------------------- errors

_REASONS = {
    errno.ENOSPC: "no space left on the device",
    errno.EDQUOT: "disk quota exceeded",
    errno.EROFS: "read-only file system",
    errno.ENAMETOOLONG: "file name too long",
    errno.ENOTDIR: "a part of the path is a file, not a directory",
    errno.EACCES: "permission denied",
    errno.EPERM: "operation not permitted",
    errno.EISDIR: "is a directory",
    errno.EEXIST: "a file is in the way",
}


def os_error_code(exc: BaseException) -> int | None:
    """The errno of an OSError, also when a library only gives it in its message (HDF5's
    ``errno = 28``)."""
    code = getattr(exc, "errno", None)
    if isinstance(code, int):
        return code
    m = re.search(r"errno = (\d+)", str(exc))
    return int(m.group(1)) if m else None


def describe_os_error(exc: OSError, path=None) -> str:
    """One line for an OSError on an output: the path and the reason."""
    code = os_error_code(exc)
    where = path if path is not None else (getattr(exc, "filename", None) or "output")
    if code in (errno.ENOSPC, errno.EDQUOT):
        return f"{_REASONS[code]} while writing {where}"
    reason = _REASONS.get(code) or getattr(exc, "strerror", None) or str(exc).splitlines()[0]
    return f"{where}: cannot write ({reason})"


def output_error(exc: OSError, temps=(), finals=()) -> OutputError:
    """An :class:`OutputError` for ``exc``, naming the final product rather than its temporary name."""
    names = {str(t): f for t, f in zip(temps, finals)}
    filename = getattr(exc, "filename", None)
    path = names.get(str(filename), filename)
    if path is None:
        text = str(exc)
        path = next((f for t, f in names.items() if Path(t).name in text), None)
        if path is None and len(finals) == 1:
            path = finals[0]
        elif path is None and finals:  # a write() error does not say which file: name their directory
            parents = {Path(f).parent for f in finals}
            path = f"the products in {parents.pop()}" if len(parents) == 1 else ", ".join(map(str, finals))
    return OutputError(describe_os_error(exc, path))


def make_dirs(directory) -> list[Path]:
    """Create ``directory`` and missing parents; returns those created, deepest first. An OSError
    becomes an :class:`OutputError` naming the directory."""
    d = Path(directory)
    missing = []
    p = d
    while not p.exists() and p != p.parent:
        missing.append(p)
        p = p.parent
    try:
        d.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise OutputError(f"{d}: cannot create the directory (a file of that name exists)") from None
    except OSError as exc:
        raise OutputError(describe_os_error(exc, d)) from None
    return missing


def remove_if_empty(directories) -> None:
    """Remove the directories (deepest first) that are empty."""
    for p in directories:
        with contextlib.suppress(OSError):
            p.rmdir()


@contextlib.contextmanager
def atomic_paths(paths):
    """Yield temporary paths for ``paths``; on success rename them all into place.

    If the body raises (including KeyboardInterrupt), or an interrupt arrived
    while it ran and was swallowed by a library, the temporary files are removed
    and nothing at the final paths changes. OSErrors become one
    :class:`OutputError` naming the product. Directories created for the
    products are removed again if nothing was written into them.
    """
    finals = [Path(p) for p in paths]
    temps = [temporary_path(p) for p in finals]
    created: list[Path] = []
    for p in finals:
        created += make_dirs(p.parent)
    remove_stale_partials(finals)
    done = False
    try:
        with _counting_sigint():
            count = _signals["count"]
            try:
                yield temps
                if _signals["count"] != count:  # the KeyboardInterrupt was lost in a library's clean-up
                    raise KeyboardInterrupt
                with hold_interrupts():
                    for t, f in zip(temps, finals):
                        os.replace(t, f)
                    committed.extend(finals)
                    done = True
            except ClutterSimError:
                raise
            except OSError as exc:
                raise output_error(exc, temps, finals) from None
    finally:
        for t in temps:
            with contextlib.suppress(OSError):
                t.unlink()
        if not done:
            remove_if_empty(created)


# --------------------------------------------------------------------------- directory locks

_held_locks: dict[str, list] = {}


@contextlib.contextmanager
def lock_directory(directory):
    """Hold an advisory lock on an output directory while the block runs.

    The lock is ``flock`` on ``DIR/.cluttersim-lock``, which holds the owner's pid;
    the operating system releases it when the owner ends, however it ends. A
    second process stops with :class:`OutputLockedError` naming that pid. The
    lock is re-entrant within a process; the lock file is removed at the end, and
    the directory too if this call created it and it stayed empty. Where the file
    system has no locks (some network mounts), the run goes on unlocked.
    """
    import fcntl

    d = Path(directory)
    key = os.path.abspath(d)
    if key in _held_locks:
        _held_locks[key][1] += 1
        try:
            yield
        finally:
            _held_locks[key][1] -= 1
        return
    created = make_dirs(d)
    lock = d / LOCK_NAME
    fd = None
    try:
        while True:
            try:
                fd = os.open(lock, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as exc:
                raise OutputError(describe_os_error(exc, d)) from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                owner = os.pread(fd, 200, 0).decode(errors="replace").strip() or "another process"
                os.close(fd)
                fd = None
                raise OutputLockedError(
                    f"{d}: in use by another cluttersim run ({owner}); wait for it to end or choose another --out"
                ) from None
            except OSError:  # no locks on this file system
                break
            try:  # the file may have been removed by its previous owner between open and flock
                same = os.fstat(fd).st_ino == os.stat(lock).st_ino
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
            fd = None
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"pid {os.getpid()}\n".encode(), 0)
        _held_locks[key] = [fd, 1]
        try:
            yield
        finally:
            del _held_locks[key]
            with contextlib.suppress(OSError):
                lock.unlink()
    finally:
        if fd is not None:
            os.close(fd)
        remove_if_empty(created)


def locked_output(parameter: str = "out_dir"):
    """Decorator: run the function holding :func:`lock_directory` on its argument ``parameter``."""
    import functools
    import inspect

    def decorate(fn):
        signature = inspect.signature(fn)

        @functools.wraps(fn)
        def wrapper(*args, **kwargs):
            bound = signature.bind_partial(*args, **kwargs)
            bound.apply_defaults()
            with lock_directory(bound.arguments[parameter]):
                return fn(*args, **kwargs)

        return wrapper

    return decorate
