"""The SQLite evaluation store: the source of truth of a run, and resume by replay.

Owns: the database schema (evaluations and run metadata), writing and reading evaluations,
listing them as arrays, and ``CachedProblem``, the wrapper that answers from the store when
it can and records every new evaluation.

Must not import: physics modules, search, report, cli. (It imports the ``Evaluation`` record
and the ``Problem`` interface from the neutral ``chiropt.problem``.)

Conventions
-----------
- One SQLite file per run folder. Each evaluation is keyed by ``(stage, start, seq)``: the
  stage label (``"multistart"``, ``"front"``, ...), the index of the search within the stage,
  and the evaluation's sequence number within that search (0, 1, 2, ...).
- Design vectors, constraints, gradients and metrics are stored as JSON; Python writes
  floats with their shortest round-trip text, so values read back are equal to the last bit.
  The objective is a REAL column (IEEE double, exact); NaN is stored as NULL.
- WAL journal and a busy timeout let several worker processes write to one file; each
  process keeps one connection per file (reopened after a fork).
- Resume: nlopt is deterministic given the same answers, so a re-run asks for the same
  ``x`` in the same order; ``CachedProblem`` replays the stored answers and evaluates only
  what is missing. A stored ``x`` that differs from the requested one means the run folder
  belongs to another goal or other settings: ``StoreMismatchError``. When the run's
  evaluation cap changed (a budget grown to extend a finished run), a search whose
  stored tail no longer matches is continued instead: its mismatching rows are kept under
  the stage ``superseded<n>:<stage>`` (still real evaluations of the same goal) and the
  search evaluates afresh from there.
- Exploration scans (one vectorized solve of a geometry along the wavelength axis) are
  kept in the table ``scans`` (geometry index -> the points kept and the scan's values),
  so a resumed run does not solve them again; the kept points are ordinary evaluations.
- ``close`` checkpoints the WAL into the database and closes, so a finished run leaves no
  ``-wal``/``-shm`` files (SQLite removes them when the last connection closes cleanly).
"""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np

from chiropt.errors import ComputationError, InputError
from chiropt.problem import Evaluation, Problem

__all__ = [
    "CachedProblem",
    "CachingWrap",
    "EvaluationStore",
    "StoreMismatchError",
    "StoredEvaluation",
    "close_all",
    "open_store",
    "record_from_values",
    "row_values",
]

SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS evaluations (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    stage TEXT NOT NULL,
    start INTEGER NOT NULL,
    seq INTEGER NOT NULL,
    x TEXT NOT NULL,
    objective REAL,
    objective_grad TEXT,
    constraints TEXT NOT NULL,
    constraints_grad TEXT,
    metrics TEXT NOT NULL,
    status TEXT NOT NULL,
    reason TEXT NOT NULL,
    wall_time_s REAL NOT NULL,
    created TEXT NOT NULL,
    UNIQUE (stage, start, seq)
);
CREATE TABLE IF NOT EXISTS scans (
    start INTEGER PRIMARY KEY,
    data TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS meta (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
"""

_COLUMNS = (
    "id, stage, start, seq, x, objective, objective_grad, constraints, constraints_grad, "
    "metrics, status, reason, wall_time_s, created"
)

_CONNECTIONS: dict[tuple[int, str], sqlite3.Connection] = {}


class StoreMismatchError(InputError):
    """The run folder holds evaluations of a different goal or different settings."""


def _connection(path: str, timeout_s: float) -> sqlite3.Connection:
    """The connection of this process to ``path`` (created on first use)."""
    key = (os.getpid(), os.path.abspath(path))
    conn = _CONNECTIONS.get(key)
    if conn is None:
        conn = sqlite3.connect(key[1], timeout=timeout_s, isolation_level=None)
        conn.execute(f"PRAGMA busy_timeout = {int(timeout_s * 1000)}")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise ComputationError(f"could not switch {path} to WAL mode (got {mode!r})")
        conn.execute("PRAGMA synchronous = NORMAL")
        conn.executescript(_SCHEMA)
        _CONNECTIONS[key] = conn
    return conn


def _default(obj):
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, np.floating | np.integer | np.bool_):
        return obj.item()
    raise TypeError(f"cannot store a value of type {type(obj).__name__} as JSON")


def _dumps(value) -> str:
    return json.dumps(value, default=_default, allow_nan=True, separators=(",", ":"))


def _array_json(a) -> str | None:
    return None if a is None else _dumps(np.asarray(a, dtype=float).tolist())


_INSERT = (f"INSERT INTO evaluations ({_COLUMNS.split(', ', 1)[1]}) "
           "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)")


def row_values(stage: str, start: int, seq: int, x, ev: Evaluation, *,
               wall_time_s: float = 0.0) -> tuple:
    """The column values of one evaluation row (every column but ``id``), as stored."""
    return (
        str(stage),
        int(start),
        int(seq),
        _array_json(np.asarray(x, dtype=float)),
        None if np.isnan(ev.f) else float(ev.f),
        _array_json(ev.df),
        _array_json(ev.g),
        _array_json(ev.dg),
        _dumps(dict(ev.metrics)),
        ev.status,
        ev.reason,
        float(wall_time_s),
        datetime.now(UTC).isoformat(timespec="microseconds"),
    )


def record_from_values(values, id_: int = 0) -> StoredEvaluation:
    """The record of a row given by its column values (``row_values``)."""
    return _row_to_record((id_, *values))


@dataclass(frozen=True)
class StoredEvaluation:
    """One row of the evaluation table.

    Attributes
    ----------
    id : int
        Row id (insertion order).
    stage : str
        Stage label.
    start : int
        Index of the search within the stage.
    seq : int
        Sequence number of the evaluation within the search.
    x : ndarray, shape (n,)
        Design vector [design-variable units].
    evaluation : Evaluation
        The stored answer, gradients included when they were computed.
    wall_time_s : float
        Time the evaluation took [s].
    created : str
        UTC time of the insertion, ISO 8601.
    """

    id: int
    stage: str
    start: int
    seq: int
    x: np.ndarray
    evaluation: Evaluation
    wall_time_s: float
    created: str


def _row_to_record(row) -> StoredEvaluation:
    (id_, stage, start, seq, x, f, df, g, dg, metrics, status, reason, wall, created) = row
    g_arr = np.asarray(json.loads(g), dtype=float)
    x_arr = np.asarray(json.loads(x), dtype=float)
    ev = Evaluation(
        f=float("nan") if f is None else f,
        g=g_arr,
        df=None if df is None else np.asarray(json.loads(df), dtype=float),
        dg=None if dg is None else np.reshape(json.loads(dg), (g_arr.size, x_arr.size)),
        status=status,
        reason=reason,
        metrics=json.loads(metrics),
    )
    return StoredEvaluation(
        id=int(id_),
        stage=stage,
        start=int(start),
        seq=int(seq),
        x=x_arr,
        evaluation=ev,
        wall_time_s=float(wall),
        created=created,
    )


class EvaluationStore:
    """Evaluations and metadata of one run, in one SQLite file.

    Parameters
    ----------
    path : str or os.PathLike
        Database file (created with its tables if missing).
    timeout_s : float
        How long a writer waits for a lock held by another process [s].
    """

    def __init__(self, path, *, timeout_s: float = 60.0):
        self.path = os.fspath(path)
        self.timeout_s = float(timeout_s)
        if self.get_meta("schema_version") is None:
            self._conn.execute(
                "INSERT OR IGNORE INTO meta (key, value) VALUES (?, ?)",
                ("schema_version", _dumps(SCHEMA_VERSION)),
            )

    @property
    def _conn(self) -> sqlite3.Connection:
        # looked up on every use: a closed connection (``close_all``) is reopened
        return _connection(self.path, self.timeout_s)

    # -- metadata ---------------------------------------------------------------------------
    def set_meta(self, key: str, value: Any) -> None:
        """Set a metadata value (JSON-serializable), replacing any previous one."""
        self._conn.execute(
            "INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)", (str(key), _dumps(value))
        )

    def get_meta(self, key: str, default: Any = None) -> Any:
        """A metadata value, or ``default`` when absent."""
        row = self._conn.execute("SELECT value FROM meta WHERE key = ?", (str(key),)).fetchone()
        return default if row is None else json.loads(row[0])

    def meta(self) -> dict[str, Any]:
        """All metadata as a dict."""
        rows = self._conn.execute("SELECT key, value FROM meta ORDER BY key").fetchall()
        return {k: json.loads(v) for k, v in rows}

    def ensure_meta(self, values: dict[str, Any]) -> None:
        """Record ``values`` on a fresh run; on a resumed run check they are unchanged.

        Raises
        ------
        StoreMismatchError
            A key already stored with a different value (e.g. another goal hash or seed).
        """
        for key, value in values.items():
            stored = self.get_meta(key)
            wanted = json.loads(_dumps(value))
            if stored is None:
                self.set_meta(key, value)
            elif stored != wanted:
                raise StoreMismatchError(
                    "run",
                    f"the store {self.path} was made with {key} = {stored!r}, not {wanted!r}; "
                    "it belongs to a different goal or settings: use a new run folder",
                )

    # -- evaluations ------------------------------------------------------------------------
    def put(
        self,
        stage: str,
        start: int,
        seq: int,
        x,
        evaluation: Evaluation,
        *,
        wall_time_s: float = 0.0,
    ) -> int:
        """Insert one evaluation; return its row id.

        Raises
        ------
        StoreMismatchError
            ``(stage, start, seq)`` is already stored (two writers on one search).
        """
        row = row_values(stage, start, seq, x, evaluation, wall_time_s=wall_time_s)
        try:
            cur = self._conn.execute(_INSERT, row)
        except sqlite3.IntegrityError as exc:
            raise StoreMismatchError(
                "run",
                f"evaluation {stage}/{start}/{seq} is already stored in {self.path}; two "
                "processes are running the same search",
            ) from exc
        return int(cur.lastrowid)

    def put_values(self, values) -> bool:
        """Insert a row given by its column values (``row_values``); idempotent.

        Returns False, storing nothing, when the row ``(stage, start, seq)`` is already
        stored at the same design vector (the same evaluation delivered twice).

        Raises
        ------
        StoreMismatchError
            The row is stored at another design vector.
        """
        stage, start, seq, x = values[:4]
        row = self._conn.execute(
            "SELECT x FROM evaluations WHERE stage = ? AND start = ? AND seq = ?",
            (str(stage), int(start), int(seq))).fetchone()
        if row is None:
            self._conn.execute(_INSERT, tuple(values))
            return True
        if np.asarray(json.loads(row[0]), float).tobytes() != \
                np.asarray(json.loads(x), float).tobytes():
            raise StoreMismatchError(
                "run", f"evaluation {stage}/{start}/{seq} arrived at x = {x}, but {self.path} "
                       f"holds it at x = {row[0]}: two runs write into this folder")
        return False

    def values(self, stage: str, start: int | None = None) -> list[tuple]:
        """Column values (``row_values`` order) of the rows of one stage (and search)."""
        where, args = "stage = ?", [str(stage)]
        if start is not None:
            where, args = where + " AND start = ?", args + [int(start)]
        cols = _COLUMNS.split(", ", 1)[1]
        return [tuple(r) for r in self._conn.execute(
            f"SELECT {cols} FROM evaluations WHERE {where} ORDER BY start, seq", args)]

    @contextlib.contextmanager
    def transaction(self):
        """Group the writes of a ``with`` block into one SQLite transaction (one commit for
        many rows; rolled back if the block raises)."""
        conn = self._conn
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield self
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")

    def get(self, stage: str, start: int, seq: int) -> StoredEvaluation | None:
        """The stored evaluation ``(stage, start, seq)``, or None."""
        row = self._conn.execute(
            f"SELECT {_COLUMNS} FROM evaluations WHERE stage = ? AND start = ? AND seq = ?",
            (str(stage), int(start), int(seq)),
        ).fetchone()
        return None if row is None else _row_to_record(row)

    def count(self, stage: str | None = None) -> int:
        """Number of stored evaluations (of one stage, or all)."""
        if stage is None:
            return int(self._conn.execute("SELECT COUNT(*) FROM evaluations").fetchone()[0])
        return int(
            self._conn.execute(
                "SELECT COUNT(*) FROM evaluations WHERE stage = ?", (str(stage),)
            ).fetchone()[0]
        )

    def records(self, stage: str | None = None, start: int | None = None) -> list[StoredEvaluation]:
        """Stored evaluations ordered by stage, start and sequence number."""
        where, args = [], []
        if stage is not None:
            where.append("stage = ?")
            args.append(str(stage))
        if start is not None:
            where.append("start = ?")
            args.append(int(start))
        clause = f" WHERE {' AND '.join(where)}" if where else ""
        rows = self._conn.execute(
            f"SELECT {_COLUMNS} FROM evaluations{clause} ORDER BY stage, start, seq", args
        ).fetchall()
        return [_row_to_record(r) for r in rows]

    def arrays(self, stage: str | None = None) -> dict[str, np.ndarray]:
        """All evaluations as arrays (ordered by stage, start, seq).

        Returns
        -------
        dict
            ``id``, ``start``, ``seq`` (int, (N,)); ``stage``, ``status``, ``reason``
            (str, (N,)); ``x`` (N, n); ``objective`` (N,); ``constraints`` (N, m_max),
            NaN-padded; ``wall_time_s`` (N,) [s]; ``created`` (str, (N,)). ``x`` is NaN-padded
            if the design vectors differ in length.
        """
        recs = self.records(stage)
        n = max((r.x.size for r in recs), default=0)
        m = max((r.evaluation.g.size for r in recs), default=0)
        X = np.full((len(recs), n), np.nan)
        G = np.full((len(recs), m), np.nan)
        for i, r in enumerate(recs):
            X[i, : r.x.size] = r.x
            G[i, : r.evaluation.g.size] = r.evaluation.g
        return {
            "id": np.array([r.id for r in recs], dtype=int),
            "stage": np.array([r.stage for r in recs], dtype=str),
            "start": np.array([r.start for r in recs], dtype=int),
            "seq": np.array([r.seq for r in recs], dtype=int),
            "x": X,
            "objective": np.array([r.evaluation.f for r in recs], dtype=float),
            "constraints": G,
            "status": np.array([r.evaluation.status for r in recs], dtype=str),
            "reason": np.array([r.evaluation.reason for r in recs], dtype=str),
            "wall_time_s": np.array([r.wall_time_s for r in recs], dtype=float),
            "created": np.array([r.created for r in recs], dtype=str),
        }

    # -- exploration scans --------------------------------------------------------------------
    def put_scan(self, start: int, data: dict) -> None:
        """Record the outcome of the exploration scan of geometry ``start`` (JSON data)."""
        self._conn.execute("INSERT OR REPLACE INTO scans (start, data) VALUES (?, ?)",
                           (int(start), _dumps(data)))

    def get_scan(self, start: int) -> dict | None:
        """The stored scan of geometry ``start``, or None."""
        row = self._conn.execute("SELECT data FROM scans WHERE start = ?",
                                 (int(start),)).fetchone()
        return None if row is None else json.loads(row[0])

    def scans(self) -> dict[int, dict]:
        """Every stored scan by geometry index."""
        rows = self._conn.execute("SELECT start, data FROM scans ORDER BY start").fetchall()
        return {int(k): json.loads(v) for k, v in rows}

    def supersede(self, stage: str, start: int, seq: int, tag: str) -> int:
        """Move rows ``seq, seq + 1, ...`` of search ``(stage, start)`` to ``tag:stage``.

        Returns the number of rows moved. Used when a grown budget changes a search's path.
        """
        new = f"{tag}:{stage}"
        while True:
            try:
                cur = self._conn.execute(
                    "UPDATE evaluations SET stage = ? WHERE stage = ? AND start = ? AND seq >= ?",
                    (new, str(stage), int(start), int(seq)))
                return int(cur.rowcount)
            except sqlite3.IntegrityError:  # that tag already holds such rows: a new tag
                new = f"{tag}.{time.time_ns()}:{stage}"

    def close(self) -> None:
        """Checkpoint the WAL and close this process's connection to the file."""
        _close(os.path.abspath(self.path))


def _close(abspath: str) -> None:
    conn = _CONNECTIONS.pop((os.getpid(), abspath), None)
    if conn is None:
        return
    try:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    except sqlite3.Error:
        pass  # another process holds the database: it checkpoints when it closes
    conn.close()


def open_store(where) -> EvaluationStore:
    """The store at a path, or ``where`` itself when it is a store object already."""
    return where if hasattr(where, "put_values") else EvaluationStore(where)


def close_all() -> None:
    """Close every connection of this process (a worker at the end of its task)."""
    for pid, path in list(_CONNECTIONS):
        if pid == os.getpid():
            _close(path)


class CachedProblem:
    """A ``Problem`` that replays stored evaluations and records new ones.

    Parameters
    ----------
    problem : Problem
        The problem evaluated when the store has no answer.
    path : str, os.PathLike or TaskStore
        Store file, or the task-side store of a worker without the run folder
        (``chiropt.store.stream``).
    stage : str
        Stage label of the search.
    start : int
        Index of the search within the stage.
    supersede_tag : str, optional
        Set when the run's evaluation cap changed: a stored row that does not match the
        requested ``x`` is moved, with the rest of this search, to ``tag:stage`` instead of
        raising ``StoreMismatchError``.

    Attributes
    ----------
    calls : int
        Evaluations of the underlying problem made by this wrapper.
    replayed : int
        Evaluations answered from the store.

    Notes
    -----
    Create one wrapper per search: the sequence number counts this wrapper's
    ``evaluate`` calls from 0. A ``ComputationError`` or ``LinAlgError`` raised by the
    underlying problem is stored as a failed evaluation (and not recomputed on resume); any
    other exception propagates without storing anything.
    """

    def __init__(self, problem: Problem, path, stage: str, start: int,
                 supersede_tag: str | None = None):
        self.problem = problem
        self.supersede_tag = supersede_tag
        # a path, or a task's own store (``chiropt.store.stream.TaskStore``)
        self.path = path if hasattr(path, "put_values") else os.fspath(path)
        self.stage = str(stage)
        self.start = int(start)
        self.lower = problem.lower
        self.upper = problem.upper
        self.n_constraints = problem.n_constraints
        self.n_objectives = getattr(problem, "n_objectives", 1)
        self.seq = 0
        self.calls = 0
        self.replayed = 0
        self._store: EvaluationStore | None = None
        self._pid: int | None = None

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_store"] = state["_pid"] = None  # connections do not cross processes
        return state

    @property
    def store(self) -> EvaluationStore:
        """The store (this process's connection)."""
        if not isinstance(self.path, str):
            return self.path
        if self._store is None or self._pid != os.getpid():
            self._store, self._pid = EvaluationStore(self.path), os.getpid()
        return self._store

    def evaluate(self, x: np.ndarray, need_grad: bool) -> Evaluation:
        """The stored answer for the next sequence number, else a fresh, stored, one."""
        x = np.asarray(x, dtype=float)
        store = self.store
        rec = store.get(self.stage, self.start, self.seq)
        if rec is not None:
            same = rec.x.shape == x.shape and rec.x.tobytes() == x.tobytes()
            if not same and self.supersede_tag is not None:
                store.supersede(self.stage, self.start, self.seq, self.supersede_tag)
                rec = None
        if rec is not None:
            if not same:
                raise StoreMismatchError(
                    "run",
                    f"evaluation {self.stage}/{self.start}/{self.seq} in {self.path} was made "
                    f"at x = {rec.x.tolist()}, not at the requested x = {x.tolist()}: the run "
                    "folder belongs to a different goal or settings; use a new run folder",
                )
            ev = rec.evaluation
            if need_grad and ev.status == "ok" and ev.df is None:
                raise StoreMismatchError(
                    "run",
                    f"evaluation {self.stage}/{self.start}/{self.seq} in {self.path} has no "
                    "gradient but a gradient is requested: the run used another algorithm; "
                    "use a new run folder",
                )
            self.seq += 1
            self.replayed += 1
            return ev
        t0 = time.perf_counter()
        try:
            ev = self.problem.evaluate(x, need_grad)
        except (ComputationError, np.linalg.LinAlgError) as exc:
            ev = Evaluation.failed(f"{type(exc).__name__}: {exc}", int(self.n_constraints))
        wall = time.perf_counter() - t0
        self.calls += 1
        store.put(self.stage, self.start, self.seq, x, ev, wall_time_s=wall)
        self.seq += 1
        return ev


@dataclass(frozen=True)
class CachingWrap:
    """Picklable ``wrap(problem, stage, start)`` hook for the search drivers.

    Parameters
    ----------
    path : str or TaskStore
        Store file (or a task-side store, see ``CachedProblem``).
    supersede_tag : str, optional
        Set when the run's evaluation cap changed: see ``CachedProblem``.
    """

    path: Any
    supersede_tag: str | None = None

    def __call__(self, problem: Problem, stage: str, start: int) -> CachedProblem:
        """Wrap ``problem`` for search ``start`` of ``stage``."""
        return CachedProblem(problem, self.path, stage, start, self.supersede_tag)
