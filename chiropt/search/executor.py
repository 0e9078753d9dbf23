"""Executors: where independent searches run.

Owns: the small ``Executor`` interface the search drivers use (``map`` in order, ``submit``
returning a future), ``SerialExecutor`` (in-process) and ``ProcessExecutor`` (a pool of
spawned worker processes). Another engine (a cluster queue) plugs in by implementing the same
two methods; the drivers never look further.

Must not import: physics modules, store, report, cli.

Conventions
-----------
- ``map(fn, iterable)`` returns a list of results in the order of the inputs; the first
  exception raised by a task propagates.
- ``ProcessExecutor`` uses the ``spawn`` start method, so behaviour is the same on every
  platform: ``fn`` and every argument must be picklable (module-level functions, plain
  objects), and workers start with a fresh interpreter (no state shared with the parent).
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Iterable
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any, Protocol, runtime_checkable

from chiropt.errors import InputError

__all__ = ["Executor", "ProcessExecutor", "SerialExecutor"]


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
                max_workers=self.workers, mp_context=multiprocessing.get_context("spawn")
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

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
