"""Executors: where independent searches run.

Owns: the small ``Executor`` interface the search drivers use (``map`` in order, ``submit``
returning a future), ``SerialExecutor`` (in-process) and ``ProcessExecutor`` (a pool of
spawned worker processes). Another engine plugs in by implementing the same two methods; the
drivers never look further (``chiropt.search.cluster.DaskExecutor`` does, for a Dask
cluster; its ``streams`` attribute tells the run that its workers lack the run folder).

Must not import: physics modules, store, report, cli.

Conventions
-----------
- ``map(fn, iterable)`` returns a list of results in the order of the inputs; the first
  exception raised by a task propagates.
- ``ProcessExecutor`` uses the ``spawn`` start method, so behaviour is the same on every
  platform: ``fn`` and every argument must be picklable (module-level functions, plain
  objects), and workers start with a fresh interpreter (no state shared with the parent).
- Each worker runs its linear algebra on one thread (``limit_blas_threads``): the pool
  already keeps every core busy, and a multithreaded BLAS under a full pool spends its
  time waiting for cores (measured on the quickstart goal with two busy cores: the value
  and Jacobian of one evaluation took 3x longer with OpenBLAS's default threads).
- Workers die with their parent: each worker asks the kernel for SIGKILL when its parent
  dies (Linux ``prctl(PR_SET_PDEATHSIG)``) and, on every platform, a watchdog thread exits
  the worker within ``WATCHDOG_S`` seconds once its parent pid is gone. Workers ignore
  SIGINT: the parent alone decides how an interrupted run stops (a Ctrl-C on a terminal
  reaches the whole process group).
"""

from __future__ import annotations

import ctypes
import gc
import multiprocessing
import os
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterable
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any, Protocol, runtime_checkable

from chiropt.errors import InputError

__all__ = ["Executor", "ProcessExecutor", "SerialExecutor", "freeze_loaded_objects",
           "limit_blas_threads", "prepare_worker", "reuse_freed_memory"]

WATCHDOG_S = 0.5
_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def _parent_alive(parent_pid: int) -> bool:
    # a re-parented orphan sees another ppid (init or a subreaper)
    return os.getppid() == parent_pid


def _watchdog(parent_pid: int) -> None:
    while True:
        time.sleep(WATCHDOG_S)
        if not _parent_alive(parent_pid):
            os._exit(1)


def limit_blas_threads(threads: int = 1):
    """Limit the BLAS/LAPACK (and OpenMP) thread pools of this process to ``threads``.

    Returns threadpoolctl's limiter (its effect lasts for the process; ``restore_original_
    limits()`` undoes it). numpy and scipy carry separate OpenBLAS libraries and a limit
    reaches only the libraries already loaded, so both are imported first.
    """
    import numpy  # noqa: F401
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_limits
    return threadpool_limits(limits=int(threads))


# glibc mallopt(3) parameters
_M_TRIM_THRESHOLD, _M_TOP_PAD, _M_MMAP_THRESHOLD = -1, -2, -3


def reuse_freed_memory() -> bool:
    """Keep freed large arrays in this process's heap for reuse (glibc; elsewhere a no-op).

    By default glibc serves every allocation above 128 KiB with a fresh mmap and returns
    it on free, so each large temporary of an evaluation (order tables of hundreds of
    orders, channel vectors) is page-faulted and zeroed again, every time. With
    allocations up to 32 MiB taken from the heap and up to 512 MiB of free heap kept,
    the same memory is reused from one evaluation to the next (measured: 10-20% of the
    CPU time of a quickstart evaluation, benchmarks/run.py). The peak memory of the
    process is unchanged; its resident size stays near that peak. Returns whether the
    settings took effect.

    References
    ----------
    mallopt(3), Linux man-pages (M_MMAP_THRESHOLD, M_TRIM_THRESHOLD, M_TOP_PAD).
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL("libc.so.6")
        return bool(libc.mallopt(_M_MMAP_THRESHOLD, 32 << 20)
                    and libc.mallopt(_M_TRIM_THRESHOLD, 512 << 20)
                    and libc.mallopt(_M_TOP_PAD, 16 << 20))
    except (OSError, AttributeError):
        return False


def freeze_loaded_objects() -> None:
    """Load the evaluation's modules, then move every object alive now out of the cyclic
    garbage collector's reach (``gc.freeze``).

    Modules, functions and constants live as long as the process; without this every
    full collection walks all of them again (about 70k objects: measured 4 ms per
    quickstart evaluation, an eighth of its gradient evaluation). Objects made later are
    collected as usual.

    References
    ----------
    Python documentation, ``gc.freeze`` (the standard library's garbage collector).
    """
    import chiropt.goals  # noqa: F401  (the goal problem, the model, the solvers)
    import chiropt.model  # noqa: F401

    gc.collect()
    gc.freeze()


def prepare_worker() -> None:
    """What every process that evaluates designs sets up first: one BLAS thread, freed
    memory reused, the loaded modules frozen for the garbage collector."""
    limit_blas_threads(1)
    reuse_freed_memory()
    freeze_loaded_objects()


def _worker_init(parent_pid: int) -> None:
    """Pool initializer: :func:`prepare_worker`, die with the parent, leave SIGINT to the
    parent."""
    prepare_worker()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        try:  # common practice, no source: prctl(2), PR_SET_PDEATHSIG
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):
            pass  # the watchdog below still works
    if not _parent_alive(parent_pid):  # the parent died before prctl took effect
        os._exit(1)
    threading.Thread(target=_watchdog, args=(parent_pid,), daemon=True,
                     name="chiropt-parent-watchdog").start()


@runtime_checkable
class Executor(Protocol):
    """What the search drivers need from an execution engine."""

    workers: int

    def map(self, fn: Callable[[Any], Any], iterable: Iterable[Any]) -> list[Any]:
        """Apply ``fn`` to each item; results in input order."""
        ...

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Future:
        """Schedule ``fn(*args, **kwargs)``; return a future."""
        ...


class SerialExecutor:
    """Run every task in the calling process, one after another."""

    workers = 1

    def map(self, fn, iterable):
        """Apply ``fn`` to each item in turn."""
        return [fn(item) for item in iterable]

    def submit(self, fn, /, *args, **kwargs) -> Future:
        """Run ``fn`` now; return a completed future holding its result or exception."""
        fut: Future = Future()
        try:
            fut.set_result(fn(*args, **kwargs))
        except Exception as exc:  # handed to the caller through the future
            fut.set_exception(exc)
        return fut

    def close(self) -> None:
        """Nothing to release."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class ProcessExecutor:
    """Run tasks in a pool of spawned worker processes.

    Parameters
    ----------
    workers : int
        Number of worker processes (>= 1).

    Notes
    -----
    The pool starts on first use and is reused until ``close`` (or the end of a ``with``
    block). Workers pay the import time of the task's modules once.
    """

    def __init__(self, workers: int):
        if not (isinstance(workers, int) and workers >= 1):
            raise InputError("search.workers", f"must be an integer >= 1; got {workers!r}")
        self.workers = workers
        self._pool: ProcessPoolExecutor | None = None

    def _get_pool(self) -> ProcessPoolExecutor:
        if self._pool is None:
            self._pool = ProcessPoolExecutor(
                max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"),
                initializer=_worker_init, initargs=(os.getpid(),),
            )
        return self._pool

    def map(self, fn, iterable):
        """Apply ``fn`` to each item in the workers; results in input order."""
        futures = [self._get_pool().submit(fn, item) for item in iterable]
        return [f.result() for f in futures]

    def submit(self, fn, /, *args, **kwargs) -> Future:
        """Schedule ``fn(*args, **kwargs)`` in a worker."""
        return self._get_pool().submit(fn, *args, **kwargs)

    def close(self) -> None:
        """Shut the pool down, waiting for running tasks."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def pids(self) -> list[int]:
        """Process ids of the live workers (empty before the pool starts)."""
        procs = getattr(self._pool, "_processes", None) or {}
        return sorted(int(p) for p in procs)

    def terminate(self) -> None:
        """Stop the workers now (SIGTERM), without waiting for their tasks."""
        if self._pool is None:
            return
        procs = list((getattr(self._pool, "_processes", None) or {}).values())
        for p in procs:
            p.terminate()
        for p in procs:
            p.join(5.0)
        self._pool.shutdown(wait=False, cancel_futures=True)
        self._pool = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
