"""Stores for workers that cannot reach the run folder: rows shipped out, new rows streamed in.

Owns: ``TaskStore`` (the stand-in a task carries to a worker on another machine: it answers
from the rows of its own searches, copied from the run's store when the task was made, and
sends every write back as a message) and ``StreamReceiver`` (the run process's side: it
applies those messages to the one SQLite store, each exactly once).

Must not import: physics modules, search, report, cli.

Conventions (common practice, no source)
----------------------------------------
- A write is an *operation*: ``put`` (one evaluation row, as its column values), ``scan``
  (an exploration scan) or ``supersede`` (the rows moved aside when a budget changed a
  search's path). A task numbers its operations 0, 1, 2, ... in the order it makes them.
- Operations are JSON text (``{"token", "i", "op", ...}``), so any transport that carries
  strings carries them, and floats arrive bit for bit (shortest round-trip decimal text).
  A message is one or more operations, one per line: an operation made less than
  ``batch_s`` after the last message waits for the next one (evaluations of 10 ms travel
  some twenty to a message; slow ones one by one, as they are made).
- The task also keeps every operation it made (``ops``) and returns them with its outcome:
  streamed messages are for progress and for what survives a killed run process; the
  returned list is complete. ``StreamReceiver`` applies operation ``i`` of a task only when
  it applied ``0 .. i-1`` before, so a message delivered twice, a late message, and the
  operations of a re-run task (a worker lost mid-task: the task starts again from the
  same shipped rows, makes the same operations) are all applied once. A ``put`` whose row
  is already stored at the same design vector (the idempotency key ``(stage, start,
  seq)`` plus ``x``) is skipped as well.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from chiropt.store.evaluations import (EvaluationStore, StoredEvaluation, _dumps,
                                       record_from_values, row_values)

__all__ = ["StreamReceiver", "TaskStore", "snapshot"]


@dataclass
class TaskStore:
    """The store of one task on a worker without the run folder (see the module notes).

    Parameters
    ----------
    token : str
        Identifies the task's operations (unique within a run invocation).
    rows : dict
        ``(stage, start, seq) -> column values`` of the stored rows the task may replay.
    scan_data : dict
        ``geometry index -> scan data`` of the stored exploration scans it may replay.
    sink : callable, optional
        ``sink(message: str)`` sends operations to the run process (``None``: keep only).
    batch_s : float
        Operations made within this time of the last message wait for the next one [s].
    """

    token: str
    rows: dict = field(default_factory=dict)
    scan_data: dict = field(default_factory=dict)
    sink: Callable[[str], None] | None = None
    ops: list = field(default_factory=list)
    batch_s: float = 0.2
    _pending: list = field(default_factory=list, repr=False)
    _sent_at: float = field(default=float("-inf"), repr=False)

    def __str__(self) -> str:
        return f"the run's store (task {self.token})"

    def _send(self, op: dict) -> None:
        msg = json.dumps({"token": self.token, "i": len(self.ops), **op},
                         separators=(",", ":"))
        self.ops.append(msg)
        if self.sink is None:
            return
        self._pending.append(msg)
        now = time.monotonic()
        if now - self._sent_at >= self.batch_s:
            self.sink("\n".join(self._pending))
            self._pending.clear()
            self._sent_at = now

    # the part of ``EvaluationStore`` that ``CachedProblem`` and the exploration use
    def get(self, stage: str, start: int, seq: int) -> StoredEvaluation | None:
        values = self.rows.get((str(stage), int(start), int(seq)))
        return None if values is None else record_from_values(values)

    def put(self, stage, start, seq, x, evaluation, *, wall_time_s: float = 0.0) -> int:
        values = row_values(stage, start, seq, x, evaluation, wall_time_s=wall_time_s)
        self.put_values(values)
        return 0

    def put_values(self, values) -> bool:
        key = (str(values[0]), int(values[1]), int(values[2]))
        self.rows[key] = tuple(values)
        self._send({"op": "put", "row": list(values)})
        return True

    def supersede(self, stage: str, start: int, seq: int, tag: str) -> int:
        moved = [k for k in self.rows if k[0] == stage and k[1] == start and k[2] >= seq]
        for k in moved:
            del self.rows[k]  # superseded rows are never replayed
        self._send({"op": "supersede", "stage": stage, "start": int(start), "seq": int(seq),
                    "tag": tag})
        return len(moved)

    def get_scan(self, start: int) -> dict | None:
        data = self.scan_data.get(int(start))
        return None if data is None else json.loads(data)

    def put_scan(self, start: int, data: dict) -> None:
        text = _dumps(data)
        self.scan_data[int(start)] = text
        self._send({"op": "scan", "start": int(start), "data": text})

    def close(self) -> None:
        """Nothing to release."""


def snapshot(store: EvaluationStore, token: str, searches, geometries=(),
             sink: Callable[[str], None] | None = None) -> TaskStore:
    """A ``TaskStore`` holding the rows of ``searches`` and the scans of ``geometries``.

    ``searches``: ``(stage, start)`` pairs, ``start`` None for every search of the stage.
    """
    rows = {}
    for stage, start in searches:
        for values in store.values(stage, start):
            rows[(values[0], int(values[1]), int(values[2]))] = values
    scans = store.scans()
    data = {int(g): _dumps(scans[g]) for g in geometries if g in scans}
    return TaskStore(token=token, rows=rows, scan_data=data, sink=sink)


class StreamReceiver:
    """Applies the operations of tasks to the run's store, each once (module notes)."""

    def __init__(self, store: EvaluationStore):
        self.store = store
        self.applied: dict[str, int] = {}
        self.puts = 0  # rows written by this receiver
        self.restarts = 0  # streams that began again at operation 0: re-run tasks
        self._streamed: set[str] = set()

    def receive(self, message: str) -> None:
        """Apply the operations of one streamed message (one per line), in one commit."""
        with self.store.transaction():
            for line in message.split("\n"):
                self.accept(line)

    def accept(self, message: str, streamed: bool = True) -> None:
        """Apply one operation if it is the next one of its task.

        ``streamed``: the message came as it was made (not in a task's returned list);
        such a stream starting again at operation 0 is a task run again.
        """
        op: dict[str, Any] = json.loads(message)
        token, i = op["token"], int(op["i"])
        if streamed:
            if i == 0 and token in self._streamed:
                self.restarts += 1
            self._streamed.add(token)
        done = self.applied.get(token, 0)
        if i != done:
            return  # seen before, or a gap that the task's returned list fills
        kind = op["op"]
        if kind == "put":
            self.puts += self.store.put_values(op["row"])
        elif kind == "scan":
            self.store.put_scan(op["start"], json.loads(op["data"]))
        elif kind == "supersede":
            self.store.supersede(op["stage"], op["start"], op["seq"], op["tag"])
        else:
            raise ValueError(f"unknown store operation {kind!r}")
        self.applied[token] = done + 1

    def accept_all(self, messages) -> None:
        """Apply a task's complete list of operations (its returned ``ops``), in one commit."""
        with self.store.transaction():
            for m in messages:
                self.accept(m, streamed=False)
