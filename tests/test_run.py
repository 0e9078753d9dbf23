"""The main job: a tiny real run, its folder, reproduction, resume after a kill."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as onp
import pytest

from chiropt.cli import main
from chiropt.design import load_design
from chiropt.export import read_front_csv
from chiropt.goals import GoalProblem, load_goal
from chiropt.run import FEASIBILITY_TOL, run_goal, run_goal_file
from chiropt.sensitivity import compute_quantities
from chiropt.store import EvaluationStore, StoreMismatchError
from test_processes import _count
from scenarios import SPHERE_ON_GLASS


DESIGN = SPHERE_ON_GLASS

OBJ = "  - {maximize: g, at_nm: 700}\n  - {maximize: docp, at_nm: 700}\n"
CON = "  - {metric: u, min: 0.5, at_nm: 700}\n"

TINY = (DESIGN + """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
""" + OBJ + "constraints:\n" + CON + """\
  - {fabrication: min_gap_nm, value: 40}
search:
  algorithm: SLSQP
  starts: 2
  max_evals_per_start: 8
  front: {method: epsilon-constraint, points: 3}
seed: 5
""")


def _write(tmp_path, text=TINY, name="tiny.yaml") -> Path:
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return p


def _store_rows(run_dir: Path) -> dict:
    recs = EvaluationStore(run_dir / "evaluations.sqlite").records()
    return {(r.stage, r.start, r.seq): (r.x.tolist(), r.evaluation.status,
                                        json.dumps(dict(r.evaluation.metrics), sort_keys=True))
            for r in recs}


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("tiny")
    (goal,) = load_goal(_write(tmp))
    summary = run_goal(goal, out=tmp / "runs", workers=0, progress=False)
    return goal, summary


def test_run_folder_layout(tiny_run):
    goal, s = tiny_run
    assert s.status == "complete" and s.run_dir.name == "tiny-Si"
    for name in ("goal.resolved.yaml", "evaluations.sqlite", "front.csv", "front.png",
                 "convergence.png", "run.log"):
        assert (s.run_dir / name).exists(), name
    header, rows = read_front_csv(s.run_dir / "front.csv")
    assert any(h.startswith("hypervolume = ") for h in header)
    assert len(rows) == len(s.front) >= 2 and s.candidates
    assert set(problem_paths(goal)) <= set(rows[0])
    # the resolved goal is itself a valid goal file
    (again,) = load_goal(s.run_dir / "goal.resolved.yaml")
    assert again.to_dict()["variables"] == goal.to_dict()["variables"]


def problem_paths(goal):
    return [v.path for v in goal.variables]


def test_front_reevaluated_reproduces_the_store(tiny_run):
    # front points re-evaluated reproduce stored metrics to 1e-9 (docs/getting-started.md §4)
    goal, s = tiny_run
    assert s.reproduce_max_dev <= 1e-9
    P = GoalProblem(goal)
    store = {tuple(r.x): r for r in EvaluationStore(s.run_dir / "evaluations.sqlite").records()}
    for row in s.front:
        x = onp.array([row[p] for p in P.paths])
        stored = store[tuple(x)].evaluation.metrics["quantities"]
        fresh = compute_quantities(P.design_at(x))
        for k, v in stored.items():
            assert onp.allclose(fresh[k], v, rtol=1e-9, atol=1e-12), k


def test_every_reported_design_satisfies_the_constraints(tiny_run):
    goal, s = tiny_run
    P = GoalProblem(goal)
    for row in s.front:
        assert row["feasible"] is True
        ev = P.evaluate(onp.array([row[p] for p in P.paths]), False)
        assert ev.status == "ok" and onp.all(ev.g <= FEASIBILITY_TOL)
        # and directly from the definitions: gap = period - 2 r (square lattice, one sphere)
        assert row["lattice.period_nm"] - 2 * row["particles[0].radius_nm"] >= 40 - 1e-4


def test_front_is_non_dominated(tiny_run):
    goal, s = tiny_run
    F = s.front_objectives * onp.array([1 if o.sense == "max" else -1 for o in goal.objectives])
    for a in F:  # Pareto dominance by definition (maximization form)
        assert not onp.any(onp.all(F >= a, axis=1) & onp.any(F > a, axis=1))


def test_candidate_files_evaluate_to_the_stored_values(tiny_run, capsys):
    goal, s = tiny_run
    P = GoalProblem(goal)
    store = {tuple(r.x): r for r in EvaluationStore(s.run_dir / "evaluations.sqlite").records()}
    for path in s.candidates:
        j = int(path.stem[1:])
        row = s.front[j]
        x = tuple(float(row[p]) for p in P.paths)
        stored = store[x].evaluation.metrics["quantities"]
        q = compute_quantities(load_design(path))
        for k, v in stored.items():
            assert onp.allclose(q[k], v, rtol=1e-9, atol=1e-12), (path.name, k)
    # and through the command line, as a user would
    path = s.candidates[0]
    assert main(["evaluate", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    row = s.front[int(path.stem[1:])]
    stored = store[tuple(float(row[p]) for p in P.paths)].evaluation.metrics["quantities"]
    assert onp.allclose(out["R"]["+1"], stored["R+1"], rtol=1e-9, atol=1e-12)


def test_another_goal_in_the_same_folder_is_refused(tiny_run):
    goal, s = tiny_run
    from dataclasses import replace

    with pytest.raises(StoreMismatchError):
        run_goal(replace(goal, seed=goal.seed + 1), out=s.run_dir.parent, workers=0,
                 progress=False)


def test_resume_after_kill_gives_the_uninterrupted_store(tmp_path, tiny_run):
    # kill -9 at any moment: the same command resumes, losing nothing (docs/getting-started.md §4)
    _, reference = tiny_run
    goal_file = _write(tmp_path)
    out = tmp_path / "runs"
    db = out / "tiny-Si" / "evaluations.sqlite"
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parent.parent))
    proc = subprocess.Popen([sys.executable, "-m", "chiropt.cli", "run", str(goal_file),
                             "--out", str(out), "--workers", "0", "--quiet"], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    t0 = time.time()
    while _count(db) < 25 and proc.poll() is None and time.time() - t0 < 60:
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    killed_at = _count(db)
    assert 0 < killed_at < len(_store_rows(reference.run_dir))
    (goal,) = load_goal(goal_file)
    summary = run_goal(goal, out=out, workers=0, progress=False)
    assert summary.status == "complete"
    assert _store_rows(summary.run_dir) == _store_rows(reference.run_dir)


def test_wall_time_budget_stops_cleanly_and_resumes(tmp_path, tiny_run):
    _, reference = tiny_run
    (goal,) = load_goal(_write(tmp_path, TINY + "budget: {wall_time: 1s}\n"))
    from dataclasses import replace

    from chiropt.goals.schema import Budget

    short = replace(goal, budget=Budget(wall_time_s=1e-3, wall_time_text="0.001s"))
    s1 = run_goal(short, out=tmp_path / "runs", workers=0, progress=False)
    assert s1.status.startswith("stopped") and (s1.run_dir / "front.csv").exists()
    s2 = run_goal(goal.__class__(**{**goal.__dict__, "budget": Budget()}),
                  out=tmp_path / "runs", workers=0, progress=False)
    assert s2.status == "complete"
    assert _store_rows(s2.run_dir) == _store_rows(reference.run_dir)


def test_several_materials_and_comparison_plot(tmp_path):
    text = TINY.replace("seed: 5\n", "seed: 5\nmaterials: [Si, TiO2]\n").replace(
        "starts: 2", "starts: 1").replace("max_evals_per_start: 8", "max_evals_per_start: 4")
    summaries = run_goal_file(_write(tmp_path, text, "cmp.yaml"), out=tmp_path / "runs",
                              workers=0, progress=False)
    assert [s.run_dir.name for s in summaries] == ["cmp-Si", "cmp-TiO2"]
    assert (tmp_path / "runs" / "cmp-compare.png").exists()


def test_cli_goal_explain_and_bad_goal(tmp_path, capsys):
    assert main(["goal", "--explain"]) == 0
    assert "variables" in capsys.readouterr().out
    bad = _write(tmp_path, TINY.replace("seed: 5", "sead: 5"), "bad.yaml")
    assert main(["run", str(bad), "--out", str(tmp_path), "--workers", "0", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "did you mean 'seed'" in err and "bad.yaml:" in err
