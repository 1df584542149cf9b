"""Where independent jobs run (the survey's tracks, the planner's candidates, a long track's
segments): ``Engine`` (local processes, a Dask LocalCluster, a Dask scheduler's address or its
scheduler file) and :func:`run_jobs`.

Locally a ``ProcessPoolExecutor`` (spawn context) runs the jobs: its workers ignore SIGINT (the
parent stops the pool), die with their parent (PR_SET_PDEATHSIG and a parent-pid watchdog) and
share the cores among their Numba threads; with one worker, the jobs run in this process. With a
scheduler they are Dask tasks (``distributed`` is imported only then). Each job is small and
picklable (:class:`cluttersim.track.TrackOverDem`); each task a module-level function.
"""

from __future__ import annotations

import contextlib
import dataclasses
import logging
import os
import re
import signal
import sys
import time
from dataclasses import dataclass
from pathlib import Path

from ..errors import ClutterSimError, ConfigError

_SCHEDULER_RE = re.compile(r"^(tcp|tls|inproc|ucx)://[^\s/:]+(:\d{1,5})?$")


@dataclass(frozen=True)
class Engine:
    """Where tracks run: ``workers`` local processes, or a Dask ``scheduler``
    ("local" starts a ``LocalCluster`` of ``workers`` processes; "tcp://HOST:PORT"
    connects to a running one), or the Dask scheduler whose address is in
    ``scheduler_file`` (the JSON file ``dask scheduler --scheduler-file`` writes, the
    usual way batch systems hand the address to jobs)."""

    workers: int | None = None
    scheduler: str | None = None
    scheduler_file: str | None = None

    def __post_init__(self):
        if self.scheduler_file is not None:
            if self.scheduler is not None:
                raise ConfigError("give either --scheduler or --scheduler-file, not both")
            if self.workers is not None:
                raise ConfigError("workers: the Dask cluster of --scheduler-file has its own workers; give --workers "
                                  "only with --scheduler local or without a scheduler")  # fmt: skip
        if self.workers is not None and not (isinstance(self.workers, int) and self.workers >= 1):
            raise ConfigError(f"workers = {self.workers!r}: expected a whole number >= 1")
        if self.scheduler is not None and self.scheduler != "local" and not _SCHEDULER_RE.match(self.scheduler):
            raise ConfigError(
                f"scheduler {self.scheduler!r}: expected 'local' or an address such as tcp://HOST:PORT"
            )
        if self.scheduler not in (None, "local") and self.workers is not None:
            raise ConfigError("workers: the Dask cluster at the scheduler has its own workers; give --workers only "
                              "with --scheduler local or without --scheduler")  # fmt: skip

    @property
    def n_workers(self) -> int:
        return self.workers or (os.cpu_count() or 1)

    @property
    def uses_dask(self) -> bool:
        return self.scheduler is not None or self.scheduler_file is not None

    def describe(self) -> str:
        if self.scheduler_file is not None:
            return f"Dask cluster of {self.scheduler_file}"
        if self.scheduler is None:
            return f"{self.n_workers} local process{'es' if self.n_workers > 1 else ''}"
        if self.scheduler == "local":
            return f"Dask LocalCluster of {self.n_workers} worker{'s' if self.n_workers > 1 else ''}"
        return f"Dask cluster at {self.scheduler}"


# --------------------------------------------------------------------------- running jobs


def _worker_tqdm_lock() -> None:
    """Give tqdm a plain thread lock in a worker: by default its first bar creates a multiprocessing
    lock (a named semaphore) that a worker stopped by terminate() would leak, and Python's resource
    tracker would then print a warning after the interrupt message."""
    import threading

    from tqdm import tqdm

    tqdm.set_lock(threading.RLock())


def _die_with_parent(parent_pid: int) -> None:
    """End this worker when the process that started it ends, however it ends (SIGKILL included):
    the kernel's parent-death signal on Linux (prctl PR_SET_PDEATHSIG), and everywhere a thread
    that checks once a second whether the parent is still this process's parent."""
    import ctypes
    import threading

    if sys.platform.startswith("linux"):
        with contextlib.suppress(OSError, AttributeError):
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1 (linux/prctl.h)

    def watch():
        while True:
            if os.getppid() != parent_pid:
                os._exit(1)
            time.sleep(1.0)

    if os.getppid() != parent_pid:  # the parent ended before the signal was set up
        os._exit(1)
    threading.Thread(target=watch, name="cluttersim-parent-watch", daemon=True).start()


def _init_local_worker(threads: int, parent_pid: int | None = None) -> None:
    """Worker start-up: die with the parent, leave SIGINT and SIGTERM to it (it stops the pool) and
    limit Numba's threads."""
    if parent_pid is not None:
        _die_with_parent(parent_pid)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    _worker_tqdm_lock()
    import numba

    numba.set_num_threads(max(1, min(threads, numba.config.NUMBA_NUM_THREADS)))


def run_jobs(jobs, engine: Engine, on_result, task, task_name=None) -> None:
    """Run ``task(job)`` (a picklable module-level function) for every job on the engine, calling
    ``on_result`` with each result as it completes. Jobs need ``track_id``, ``key`` and
    ``numba_threads`` fields (as :class:`cluttersim.analysis.survey.TrackJob`); ``task_name(job)`` names
    each Dask task (default ``cluttersim-survey-<key>-<track_id>``)."""
    if not engine.uses_dask:
        _run_local(jobs, engine.n_workers, on_result, task)
    else:
        _run_dask(jobs, engine, on_result, task, task_name or _survey_task_name)


def _survey_task_name(job) -> str:
    return f"cluttersim-survey-{job.key[:16]}-{job.track_id}"


def _run_local(jobs, workers: int, on_result, task) -> None:
    """Run jobs in ``workers`` spawned processes (in this process when ``workers`` is 1)."""
    if workers == 1 or len(jobs) == 1:
        for job in jobs:
            on_result(task(job))
        return
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    threads = max(1, (os.cpu_count() or 1) // workers)
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                               initializer=_init_local_worker, initargs=(threads, os.getpid()))  # fmt: skip
    try:
        pending = {pool.submit(task, job) for job in jobs}
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                on_result(fut.result())  # a worker's error is raised here, as it was raised there
    except BrokenProcessPool:
        raise ClutterSimError("a survey worker process died (out of memory?); run again to resume") from None
    except BaseException:
        _stop_pool(pool)
        raise
    pool.shutdown(wait=True)


def _stop_pool(pool) -> None:
    """Cancel queued jobs and end the running workers now (3.11's pool has no terminate)."""
    procs = list((getattr(pool, "_processes", None) or {}).values())  # a private attribute, hence getattr
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        with contextlib.suppress(Exception):
            proc.terminate()
    for proc in procs:
        with contextlib.suppress(Exception):
            proc.join(timeout=5)
    with contextlib.suppress(Exception):
        pool.shutdown(wait=True)  # let the pool's manager thread release its queues and locks


def _dask_task(job, task):
    """The Dask task: ``task(job)`` with Numba's threads shared among the worker's threads."""
    _worker_tqdm_lock()
    if job.numba_threads is None:
        try:
            from distributed import get_worker

            nthreads = get_worker().state.nthreads
        except (ImportError, ValueError, AttributeError):
            nthreads = 1
        job = dataclasses.replace(job, numba_threads=max(1, (os.cpu_count() or 1) // max(1, nthreads)))
    return task(job)


def _engine_option(engine: Engine) -> str:
    return f"--scheduler-file {engine.scheduler_file}" if engine.scheduler_file else f"--scheduler {engine.scheduler}"


def _dask(engine: Engine):
    """The ``distributed`` module, or a ConfigError saying how to install it."""
    try:
        import distributed
    except ImportError:
        raise ConfigError(
            f"{_engine_option(engine)}: Dask is not installed; install it with pip install 'cluttersim[dask]'"
        ) from None
    return distributed


@contextlib.contextmanager
def dask_client(engine: Engine):
    """``(client, numba_threads)`` for an engine's Dask cluster: a LocalCluster of ``engine.workers``
    processes (``numba_threads``: cores / workers), the scheduler at ``engine.scheduler``, or the one
    named in ``engine.scheduler_file`` (``numba_threads`` None: each task divides its worker's
    cores). Closed (and a LocalCluster stopped) on exit."""
    distributed = _dask(engine)
    Client, LocalCluster = distributed.Client, distributed.LocalCluster
    cluster = None
    threads = None
    if engine.scheduler_file is not None and not Path(engine.scheduler_file).is_file():
        raise ConfigError(f"--scheduler-file {engine.scheduler_file}: file not found; expected the JSON file written "
                          "by dask scheduler --scheduler-file")  # fmt: skip
    try:
        if engine.scheduler == "local":
            n = engine.n_workers
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                                   silence_logs=logging.CRITICAL)  # errors reach the user as one line, below
            client = Client(cluster)
            threads = max(1, (os.cpu_count() or 1) // n)
        elif engine.scheduler_file is not None:
            client = Client(scheduler_file=engine.scheduler_file, timeout="20s")
        else:
            client = Client(engine.scheduler, timeout="20s")
    except (OSError, TimeoutError, ValueError, KeyError) as exc:
        if cluster is not None:
            cluster.close()
        raise ClutterSimError(f"{_engine_option(engine)}: cannot reach the Dask scheduler ({exc})") from None
    try:
        yield client, threads
    finally:
        with _quiet_dask_logs(), contextlib.suppress(Exception):
            client.close()
            if cluster is not None:
                cluster.close()


def _run_dask(jobs, engine: Engine, on_result, task, task_name) -> None:
    """Run ``task`` on each job as Dask tasks on a LocalCluster or the cluster behind
    ``engine.scheduler`` (or ``engine.scheduler_file``)."""
    as_completed = _dask(engine).as_completed
    with dask_client(engine) as (client, threads):
        if threads is not None:
            jobs = [dataclasses.replace(j, numba_threads=threads) for j in jobs]
        futures = []
        try:
            futures = [client.submit(_dask_task, job, task, key=task_name(job), pure=False) for job in jobs]
            for fut in as_completed(futures):
                on_result(fut.result())
        except BaseException:
            with _quiet_dask_logs(), contextlib.suppress(Exception):
                client.cancel(futures)
            raise


@contextlib.contextmanager
def _quiet_dask_logs():
    """Closing a LocalCluster logs a warning per worker it has to kill: not the user's concern."""
    loggers = [logging.getLogger(name) for name in ("distributed", "distributed.nanny", "distributed.worker",
                                                     "distributed.worker.state_machine")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.ERROR)
    try:
        yield
    finally:
        for lg, level in zip(loggers, levels):
            lg.setLevel(level)
