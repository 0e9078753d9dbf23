"""Runs on a Dask cluster: the same evaluations as the local executor, nothing lost or
duplicated when a worker dies, resume after the run process is killed, no orphans.

These are behaviour checks of process and messaging mechanisms (dask.distributed workers,
signals, SQLite): # common practice, no source. The reference of every check is a run of
the same goal on the local executor, which the other tests check against physics.
"""

from __future__ import annotations

import json
import os
import re
import signal
import sqlite3
import sys
import textwrap
import time
from pathlib import Path

import numpy as onp
import pytest

from chiropt.cli import main
from chiropt.errors import InputError
from chiropt.goals import load_goal
from chiropt.goals.schema import ExecutorSettings, goal_from_dict, parse_executor_option
from chiropt.problem import Evaluation
from chiropt.run import run_goal
from chiropt.store import CachedProblem, EvaluationStore
from chiropt.store.stream import StreamReceiver, TaskStore

from test_processes import _alive, _count, _start, _worker_pids
from test_processes import _wait_for as processes_wait_for
from scenarios import DIPOLES, RADIUS_AND_PERIOD, SPHERE_ON_GLASS

ROOT = Path(__file__).resolve().parents[1]
TWO = ExecutorSettings(kind="dask", workers=2)

# one objective, derivative-free, a few seconds per search: long enough to act mid-task
SEARCHES = SPHERE_ON_GLASS + DIPOLES + RADIUS_AND_PERIOD + """\
objectives:
  - {maximize: g, at_nm: 700}
search: {algorithm: COBYLA, starts: 2, max_evals_per_start: 200, xtol_rel: 0, ftol_rel: 0}
seed: 3
"""


def _quickstart(tmp_path: Path) -> Path:
    """configs/quickstart.yaml with a small budget: one material, a fixed multipole order,
    4 explored geometries, 3 front points, 3 evaluations per search."""
    text = (ROOT / "configs" / "quickstart.yaml").read_text()
    for old, new in (("materials: [Si, Ag]", "materials: [Si]"),
                     ("model: {lmax: auto}", "model: {lmax: 2}"),
                     ("samples: 128", "samples: 4"), ("keep: 3, lmax: 3}", "keep: 3, lmax: 2}"),
                     ("points: 5}", "points: 3}"), ("starts: 2", "starts: 1"),
                     ("max_evals_per_start: 20", "max_evals_per_start: 3")):
        assert old in text, old
        text = text.replace(old, new)
    p = tmp_path / "quickstart.yaml"
    p.write_text(text)
    return p


def _write(folder: Path, text: str, name: str = "g.yaml") -> Path:
    p = folder / name
    p.write_text(textwrap.dedent(text))
    return p


def _rows(run_dir: Path) -> dict:
    """Every stored evaluation by its key (stage, search, sequence number)."""
    return {(r.stage, r.start, r.seq): r
            for r in EvaluationStore(run_dir / "evaluations.sqlite").records()}


def _per_search(db: Path, stage: str) -> dict[int, int]:
    try:
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1.0)
        try:
            rows = conn.execute("SELECT start, COUNT(*) FROM evaluations WHERE stage = ? "
                                "GROUP BY start", (stage,)).fetchall()
        finally:
            conn.close()
    except sqlite3.Error:
        return {}
    return {int(s): int(n) for s, n in rows}


def _metrics_close(a: dict, b: dict, tol: float = 1e-12) -> bool:
    if set(a) != set(b):
        return False
    for k in a:
        x, y = a[k], b[k]
        if isinstance(x, dict):
            if not (isinstance(y, dict) and _metrics_close(x, y, tol)):
                return False
        elif isinstance(x, str | bool) or x is None:
            if x != y:
                return False
        else:
            xa, ya = onp.asarray(x, float), onp.asarray(y, float)
            if xa.shape != ya.shape or not onp.allclose(xa, ya, rtol=tol, atol=tol,
                                                        equal_nan=True):
                return False
    return True


def _same_store(a: Path, b: Path) -> None:
    """Same evaluations: same keys, same designs (bit for bit), metrics to 1e-12."""
    ra, rb = _rows(a), _rows(b)
    assert sorted(ra) == sorted(rb)
    for k in ra:
        ea, eb = ra[k].evaluation, rb[k].evaluation
        assert ra[k].x.tobytes() == rb[k].x.tobytes(), k
        assert ea.status == eb.status, k
        assert _metrics_close(ea.metrics, eb.metrics), k
    sa, sb = (EvaluationStore(p / "evaluations.sqlite").scans() for p in (a, b))
    assert sa == sb


def _descendants(pid: int) -> set[int]:
    """Every live process below ``pid`` (Linux /proc)."""
    children: dict[int, list[int]] = {}
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            ppid = int((d / "stat").read_text().rsplit(")", 1)[1].split()[1])
        except (OSError, IndexError, ValueError):
            continue
        children.setdefault(ppid, []).append(int(d.name))
    out, todo = set(), [pid]
    while todo:
        for c in children.get(todo.pop(), []):
            if c not in out:
                out.add(c)
                todo.append(c)
    return {p for p in out if _alive(p)}


def _wait_for(cond, timeout=120.0, proc=None):
    # the local pool's helper, with more time: a cluster starts slower
    processes_wait_for(cond, timeout=timeout, proc=proc)


def _kill_all(pids) -> None:
    for p in pids:
        try:
            os.kill(p, signal.SIGKILL)
        except OSError:
            pass


linux = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc")


# ---------------------------------------------------------------------------------------------
# the store's side: each streamed operation once (no cluster needed)
# ---------------------------------------------------------------------------------------------

class _Square:
    """f(x) = sum x^2 with one constraint; a ComputationError at x[0] < 0 (a failed row)."""

    lower = onp.array([-1.0, -1.0])
    upper = onp.array([1.0, 1.0])
    n_constraints = 1

    def evaluate(self, x, need_grad):
        from chiropt.errors import ComputationError

        if x[0] < 0:
            raise ComputationError("outside the model")
        return Evaluation(f=float(x @ x), g=onp.array([x[1] - 0.5]),
                          metrics={"objectives": [float(x @ x)], "note": "ok"})


def _points():
    return [onp.array([0.1 * k, 0.3 - 0.07 * k]) for k in range(5)] + [onp.array([-0.2, 0.1])]


def test_streamed_writes_land_once_and_equal_direct_writes(tmp_path):
    # a task that writes through a TaskStore, whose messages arrive twice, out of order and
    # again from a re-run of the task, leaves the store a direct writer would
    direct = EvaluationStore(tmp_path / "direct.sqlite")
    cp = CachedProblem(_Square(), direct.path, "start", 0)
    for x in _points():
        cp.evaluate(x, False)
    direct.put_scan(4, {"kept": [[0.1, 0.2]], "F": [None, [1.5]]})

    def task(sent):
        ts = TaskStore("t0", sink=sent.append, batch_s=0.0)  # one operation per message
        c = CachedProblem(_Square(), ts, "start", 0)
        for x in _points():
            c.evaluate(x, False)
        ts.put_scan(4, {"kept": [[0.1, 0.2]], "F": [None, [1.5]]})
        return ts

    first, rerun = [], []
    ts = task(first)
    task(rerun)  # a re-run of the task (its worker was lost) sends the same operations
    assert first == ts.ops and len(rerun) == len(first) == len(_points()) + 1
    streamed = EvaluationStore(tmp_path / "streamed.sqlite")
    rx = StreamReceiver(streamed)
    for m in [first[0], first[2], first[2], first[1], *first[3:5], *rerun]:
        rx.receive(m)  # out of order, twice, then the re-run's whole list
    rx.accept_all(ts.ops)  # and the complete list the task returned
    assert rx.puts == len(_points()) and rx.restarts == 1
    key = lambda r: (r.stage, r.start, r.seq, r.x.tobytes(), r.evaluation.status,  # noqa: E731
                     r.evaluation.reason, json.dumps(r.evaluation.metrics))
    assert [key(r) for r in streamed.records()] == [key(r) for r in direct.records()]
    assert streamed.scans() == direct.scans()


def test_batched_messages_and_the_returned_list_complete_each_other(tmp_path):
    sent = []
    ts = TaskStore("t1", sink=sent.append, batch_s=3600.0)
    c = CachedProblem(_Square(), ts, "start", 0)
    for x in _points():
        c.evaluate(x, False)
    assert len(sent) == 1  # the first operation went at once, the others wait for a message
    rx = StreamReceiver(EvaluationStore(tmp_path / "s.sqlite"))
    for m in sent:
        rx.receive(m)
    assert rx.puts == 1
    rx.accept_all(ts.ops)  # the task's outcome brings the rest
    assert rx.puts == len(_points()) and rx.restarts == 0
    ts2 = TaskStore("t2", sink=sent.append, batch_s=0.0)
    ts2.put_values(ts.rows[("start", 0, 0)])
    ts2.put_values(ts.rows[("start", 0, 1)])
    rx.receive("\n".join(sent[-2:]))  # two operations in one message
    assert rx.applied["t2"] == 2


def test_a_conflicting_streamed_row_is_refused(tmp_path):
    store = EvaluationStore(tmp_path / "s.sqlite")
    a, b = TaskStore("a"), TaskStore("b")
    CachedProblem(_Square(), a, "start", 0).evaluate(onp.array([0.1, 0.2]), False)
    CachedProblem(_Square(), b, "start", 0).evaluate(onp.array([0.3, 0.2]), False)
    rx = StreamReceiver(store)
    rx.accept_all(a.ops)
    with pytest.raises(InputError, match="two runs write"):
        rx.accept_all(b.ops)


# ---------------------------------------------------------------------------------------------
# settings
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("raw, key", [
    ("remote", "executor"),
    ({"dask": {"adress": "tcp://h:8786"}}, "executor.dask.adress"),
    ({"dask": {"address": "not an address"}}, "executor.dask.address"),
    ({"dask": {"address": "tcp://h:8786", "local_cluster": {}}}, "executor.dask"),
    ({"dask": {"local_cluster": {"workers": 0}}}, "executor.dask.local_cluster.workers"),
    ({"dask": {"local_cluster": {"threads_per_worker": 1.5}}},
     "executor.dask.local_cluster.threads_per_worker"),
], ids=["kind", "unknown-key", "address", "both", "workers", "threads"])
def test_bad_executor_settings_name_the_key(tmp_path, raw, key):
    import yaml

    data = yaml.safe_load(SEARCHES)
    data["executor"] = raw
    with pytest.raises(InputError) as err:
        goal_from_dict(data, base_dir=tmp_path)
    assert err.value.key == key


def test_executor_settings_round_trip_and_leave_the_identity_alone(tmp_path):
    import yaml

    from chiropt.run import goal_identity

    data = yaml.safe_load(SEARCHES)
    (local,) = goal_from_dict(data, base_dir=tmp_path)
    for raw in ({"dask": {"address": "tcp://10.0.0.5:8786"}},
                {"dask": {"local_cluster": {"workers": 3, "threads_per_worker": 2}}}):
        (goal,) = goal_from_dict({**data, "executor": raw}, base_dir=tmp_path)
        assert goal.executor.to_dict() == raw
        assert goal.to_dict()["executor"] == raw  # the resolved goal keeps it
        (again,) = goal_from_dict({**data, "executor": goal.to_dict()["executor"]},
                                  base_dir=tmp_path)
        assert again.executor == goal.executor
        assert goal_identity(goal) == goal_identity(local)  # resumable on any executor
    assert parse_executor_option("tcp://h:8786").address == "tcp://h:8786"
    assert parse_executor_option("dask") == ExecutorSettings(kind="dask")
    with pytest.raises(InputError) as err:
        parse_executor_option("cluster")
    assert err.value.key == "--executor"


def test_dask_without_the_extra_is_one_line_naming_it(tmp_path, monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed fails
    goal_file = _write(tmp_path, SEARCHES)
    out = tmp_path / "runs"
    assert main(["run", str(goal_file), "--out", str(out), "--executor", "dask",
                 "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "chiropt[cluster]" in err[0], err
    assert not out.exists()


# ---------------------------------------------------------------------------------------------
# on a cluster
# ---------------------------------------------------------------------------------------------

distributed = pytest.importorskip("distributed")


def test_quickstart_on_two_dask_workers_equals_the_local_executor(tmp_path):
    (goal,) = load_goal(_quickstart(tmp_path))
    local = run_goal(goal, out=tmp_path / "local", workers=2, progress=False)
    dask = run_goal(goal, out=tmp_path / "dask", executor=TWO, progress=True)
    assert local.status == dask.status == "complete"
    assert local.n_evaluations == dask.n_evaluations > 20
    _same_store(local.run_dir, dask.run_dir)
    assert onp.array_equal(local.front_objectives, dask.front_objectives)
    log = (dask.run_dir / "run.log").read_text()
    assert "executor: dask scheduler tcp://" in log and "2 workers" in log
    # progress: workers, tasks in flight, evaluations per second, ETA
    assert re.search(r"; 2 workers, \d+ tasks in flight, [0-9.e+]+ evaluations/s; .*ETA", log)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The searches goal, uninterrupted, on the local executor in this process."""
    tmp = tmp_path_factory.mktemp("reference")
    (goal,) = load_goal(_write(tmp, SEARCHES))
    s = run_goal(goal, out=tmp / "runs", workers=0, progress=False)
    assert s.status == "complete"
    return s


@linux
def test_a_killed_worker_loses_and_duplicates_nothing(tmp_path, reference):
    goal_file = _write(tmp_path, SEARCHES)
    out = tmp_path / "runs"
    run_dir = out / "g-Si"
    db = run_dir / "evaluations.sqlite"
    proc = _start(goal_file, out, "--executor", "dask", "--workers", "2")
    spawned: set[int] = set()
    try:
        # both local searches under way (one on each worker), several rows streamed each
        _wait_for(lambda: len(_worker_pids(run_dir)) == 2 and len(
            [n for n in _per_search(db, "start").values() if n >= 5]) == 2, proc=proc)
        spawned = _descendants(proc.pid)
        victim = _worker_pids(run_dir)[0]
        os.kill(victim, signal.SIGKILL)
        _, err = proc.communicate(timeout=300)
        spawned |= {victim}
        assert proc.returncode == 0, err
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    _same_store(reference.run_dir, run_dir)  # every evaluation, once
    assert _count(db) == reference.n_evaluations
    log = (run_dir / "run.log").read_text()
    # the lost task ran again from its start: its repeated writes were recognized
    assert "1 task ran again" in log or "2 tasks ran again" in log, log
    time.sleep(0.5)
    survivors = [p for p in spawned if _alive(p)]
    _kill_all(survivors)
    assert not survivors, "a dask process outlived its run"


@linux
def test_resume_after_kill_9_of_the_run_with_a_local_cluster(tmp_path, reference):
    goal_file = _write(tmp_path, SEARCHES)
    out = tmp_path / "runs"
    run_dir = out / "g-Si"
    db = run_dir / "evaluations.sqlite"
    proc = _start(goal_file, out, "--executor", "dask", "--workers", "2")
    spawned: set[int] = set()
    try:
        _wait_for(lambda: len(_worker_pids(run_dir)) == 2 and sum(
            _per_search(db, "start").values()) >= 20, proc=proc)
        spawned = _descendants(proc.pid)
        assert set(_worker_pids(run_dir)) <= spawned
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        t0 = time.time()
        while any(_alive(p) for p in spawned) and time.time() - t0 < 20.0:
            time.sleep(0.1)
        survivors = [p for p in spawned if _alive(p)]
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        _kill_all(_descendants(proc.pid) | spawned)
    assert not survivors, "dask processes outlived the killed run"
    killed_at = _count(db)
    assert 0 < killed_at < reference.n_evaluations
    (goal,) = load_goal(goal_file)
    s = run_goal(goal, out=out, executor=TWO, progress=False)
    assert s.status == "complete"
    assert onp.array_equal(s.front_objectives, reference.front_objectives)
    assert [r["index"] for r in s.front] == [r["index"] for r in reference.front]
    _same_store(reference.run_dir, run_dir)
