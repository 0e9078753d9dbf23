"""SQLite evaluation store: exact round trips, metadata, resume by replay, several writers."""

import numpy as np
import pytest

from chiropt.errors import ComputationError
from chiropt.search.executor import ProcessExecutor, SerialExecutor
from chiropt.search.fronts import epsilon_constraint
from chiropt.search.multistart import multistart
from chiropt.problem import Evaluation, VectorEvaluation
from chiropt.store.evaluations import (
    CachedProblem,
    CachingWrap,
    EvaluationStore,
    StoreMismatchError,
)


class Killed(Exception):
    """Stands for the process being killed in the middle of a run."""


class Himmelblau:
    """Himmelblau's function with a circle constraint; counts its own evaluations.

    Fails (ComputationError) at about one point in seven, a deterministic function of x, so
    that failures are stored and replayed too.
    """

    lower = np.array([-5.0, -5.0])
    upper = np.array([5.0, 5.0])
    n_constraints = 1
    n_objectives = 1

    def __init__(self, kill_at=None):
        self.calls = 0
        self.kill_at = kill_at

    def evaluate(self, x, need_grad):
        self.calls += 1
        if self.kill_at is not None and self.calls == self.kill_at:
            raise Killed(f"killed at evaluation {self.calls}")
        if int(abs(x[0]) * 1e6) % 7 == 0:
            raise ComputationError("singular system")
        a, b = x[0] ** 2 + x[1] - 11, x[0] + x[1] ** 2 - 7
        f = a**2 + b**2
        g = np.array([x[0] ** 2 + x[1] ** 2 - 16])
        df = dg = None
        if need_grad:
            df = np.array([4 * a * x[0] + 2 * b, 2 * a + 4 * b * x[1]])
            dg = np.array([[2 * x[0], 2 * x[1]]])
        return Evaluation(f=f, g=g, df=df, dg=dg, metrics={"a": np.float64(a), "b": [b, 1]})


def rows(path):
    """Store contents without the timing columns."""
    out = []
    for r in EvaluationStore(path).records():
        ev = r.evaluation
        out.append((r.id, r.stage, r.start, r.seq, r.x.tobytes(), repr(ev.f), ev.g.tobytes(),
                    None if ev.df is None else ev.df.tobytes(),
                    None if ev.dg is None else ev.dg.tobytes(),
                    ev.status, ev.reason, dict(ev.metrics)))  # fmt: skip
    return out


def run(path, problem, algorithm, executor=None):
    return multistart(problem, algorithm, 3, seed=5, executor=executor, wrap=CachingWrap(path),
                      max_evals=60)  # fmt: skip


def test_round_trip_is_exact(tmp_path):
    # common practice, no source: JSON floats and SQLite REAL round-trip to the last bit
    store = EvaluationStore(tmp_path / "run.sqlite")
    rng = np.random.default_rng(0)
    x = rng.normal(size=4) * 10.0 ** rng.integers(-300, 300, 4)
    metrics = {"u": np.float32(1.5), "v": [1, 2]}
    ev = Evaluation(f=np.pi / 3, g=[1e-310, -np.inf], df=rng.normal(size=4),
                    dg=rng.normal(size=(2, 4)), metrics=metrics)  # fmt: skip
    store.put("multistart", 2, 0, x, ev, wall_time_s=0.25)
    failed = Evaluation.failed("diverged", 2)
    store.put("multistart", 2, 1, x, failed)
    r0, r1 = store.get("multistart", 2, 0), store.get("multistart", 2, 1)
    assert r0.x.tobytes() == x.tobytes()
    assert r0.evaluation.f == ev.f and r0.evaluation.g.tobytes() == ev.g.tobytes()
    assert r0.evaluation.df.tobytes() == ev.df.tobytes()
    assert r0.evaluation.dg.tobytes() == ev.dg.tobytes()
    assert r0.evaluation.metrics == {"u": 1.5, "v": [1, 2]} and r0.wall_time_s == 0.25
    assert np.isnan(r1.evaluation.f) and r1.evaluation.status == "failed"
    assert r1.evaluation.reason == "diverged" and r1.evaluation.df is None
    assert store.get("multistart", 2, 2) is None
    arr = store.arrays()
    assert arr["x"].shape == (2, 4) and arr["constraints"].shape == (2, 2)
    assert list(arr["status"]) == ["ok", "failed"] and list(arr["seq"]) == [0, 1]
    with pytest.raises(StoreMismatchError, match="already stored"):
        store.put("multistart", 2, 1, x, failed)


def test_metadata_and_mismatch(tmp_path):
    store = EvaluationStore(tmp_path / "run.sqlite")
    store.ensure_meta({"goal_hash": "abc", "seed": 3, "chiropt_version": "0.1.0"})
    store.ensure_meta({"goal_hash": "abc", "seed": 3})  # a resumed run: same values pass
    assert store.meta()["seed"] == 3 and store.get_meta("schema_version") == 1
    with pytest.raises(StoreMismatchError, match="different goal"):
        store.ensure_meta({"goal_hash": "xyz"})


def test_replay_refuses_another_design_vector(tmp_path):
    path = tmp_path / "run.sqlite"
    CachedProblem(Himmelblau(), path, "s", 0).evaluate(np.array([0.5, 0.5]), False)
    with pytest.raises(StoreMismatchError, match="different goal"):
        CachedProblem(Himmelblau(), path, "s", 0).evaluate(np.array([0.5, 0.5000001]), False)


@pytest.mark.parametrize("algorithm", ["SLSQP", "MMA", "COBYLA", "CRS2"])
@pytest.mark.parametrize("kill_at", [1, 17, 50])
def test_resume_after_kill_reproduces_the_uninterrupted_run(tmp_path, algorithm, kill_at):
    # common practice, no source: deterministic replay must lose nothing and redo nothing
    whole = Himmelblau()
    ref = run(tmp_path / "whole.sqlite", whole, algorithm)
    assert whole.calls > kill_at  # the kill lands inside the run

    path = tmp_path / "killed.sqlite"
    with pytest.raises(Killed):
        run(path, Himmelblau(kill_at=kill_at), algorithm)
    stored = EvaluationStore(path).count()
    assert stored == kill_at - 1

    again = Himmelblau()
    res = run(path, again, algorithm)
    assert again.calls == whole.calls - stored  # only the missing evaluations
    assert rows(path) == rows(tmp_path / "whole.sqlite")
    assert res.x_best.tobytes() == ref.x_best.tobytes() and res.n_evals == ref.n_evals
    assert EvaluationStore(path).count() == ref.n_evals
    assert any(s == "failed" for s in EvaluationStore(path).arrays()["status"])


def test_replay_of_a_complete_run_evaluates_nothing(tmp_path):
    path = tmp_path / "run.sqlite"
    first = run(path, Himmelblau(), "SLSQP")
    again = Himmelblau()
    second = run(path, again, "SLSQP")
    assert again.calls == 0
    assert second.f_best == first.f_best


def test_several_worker_processes_write_one_store(tmp_path):
    # common practice, no source: WAL + busy timeout, no lost or duplicated rows
    path = str(tmp_path / "run.sqlite")
    EvaluationStore(path).ensure_meta({"seed": 5})
    with ProcessExecutor(2) as ex:
        res = multistart(Himmelblau(), "COBYLA", 6, seed=5, executor=ex, wrap=CachingWrap(path),
                         max_evals=80)  # fmt: skip
    serial_path = str(tmp_path / "serial.sqlite")
    multistart(Himmelblau(), "COBYLA", 6, seed=5, executor=SerialExecutor(),
               wrap=CachingWrap(serial_path), max_evals=80)  # fmt: skip
    store = EvaluationStore(path)
    assert store.count() == res.n_evals
    arr = store.arrays()
    for k in range(6):
        seqs = np.sort(arr["seq"][arr["start"] == k])
        np.testing.assert_array_equal(seqs, np.arange(res.results[k].n_evals))
    # same evaluations as the serial run, whatever the interleaving of the writers
    strip = lambda rs: sorted(r[1:] for r in rs)  # drop the row id (insertion order)
    assert strip(rows(path)) == strip(rows(serial_path))


class Schaffer:
    """Schaffer 1985: f1 = x^2, f2 = (x - 2)^2."""

    lower, upper = np.array([-5.0]), np.array([5.0])
    senses = ("min", "min")
    n_objectives = 2
    n_constraints = 0

    def __init__(self, kill_at=None):
        self.calls = 0
        self.kill_at = kill_at

    def evaluate(self, x, need_grad):
        self.calls += 1
        if self.calls == self.kill_at:
            raise Killed("killed")
        df = np.array([[2 * x[0]], [2 * (x[0] - 2)]]) if need_grad else None
        return VectorEvaluation(f=[x[0] ** 2, (x[0] - 2) ** 2], df=df,
                                dg=np.zeros((0, 1)) if need_grad else None)  # fmt: skip


def test_front_resumes_by_replay(tmp_path):
    whole = Schaffer()
    ref = epsilon_constraint(whole, 6, x0=[4.0], wrap=CachingWrap(str(tmp_path / "a.sqlite")))
    path = str(tmp_path / "b.sqlite")
    with pytest.raises(Killed):
        epsilon_constraint(Schaffer(kill_at=whole.calls // 2), 6, x0=[4.0], wrap=CachingWrap(path))
    again = Schaffer()
    res = epsilon_constraint(again, 6, x0=[4.0], wrap=CachingWrap(path))
    assert again.calls == whole.calls - (whole.calls // 2 - 1)
    np.testing.assert_array_equal(res.front_f, ref.front_f)
    assert rows(path) == rows(tmp_path / "a.sqlite")
