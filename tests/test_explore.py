"""The exploration stage: fronts against a brute-force grid, reproducibility, resume after
kill -9 during the exploration, a fixed hypervolume reference shared by materials.

The brute-force grid is the reference method (common practice, no source): every design of
a regular grid solved by the public forward model (``chiropt.response.evaluate``, all
grid wavelengths in one call), the feasible non-dominated set of all of them.
"""

from __future__ import annotations

import json
import signal
import textwrap
import time
from dataclasses import replace
from pathlib import Path

import numpy as onp
import pytest

from chiropt.design import design_from_dict
from chiropt.errors import InputError
from chiropt.goals import load_goal
from chiropt.response import evaluate
from chiropt.run import run_goal, run_goal_file, write_report
from chiropt.search.pareto import hypervolume, non_dominated
from chiropt.store import EvaluationStore

from test_processes import _count, _start, _wait_for, linux

GOAL = """\
name: small
design:
  lattice: {kind: square, period_nm: 420}
  particles:
    - {shape: sphere, radius_nm: 80, material: Si}
  substrate: {material: SiO2}
  illumination: {wavelength_nm: 700}
  region: {kind: plane, height_nm: 10}
  model: {lmax: 1}
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 500}
  illumination.wavelength_nm: {min: 620, max: 780}
objectives:
  - {maximize: g, at_nm: 700}
  - {maximize: docp, at_nm: 700}
constraints:
  - {metric: u, min: 0.3, at_nm: 700}
  - {fabrication: min_gap_nm, value: 40}
search:
  starts: 1
  max_evals_per_start: 25
  front: {points: 5, reference: {g: 0.5, docp: 0.5}}
  explore: {samples: 64, wavelength_points: 17, batch: 8}
seed: 2
"""
REF = [0.5, 0.5]
SENSES = ("max", "max")


def _write(folder: Path, text: str = GOAL, name: str = "small.yaml") -> Path:
    p = folder / name
    p.write_text(textwrap.dedent(text))
    return p


def _rows(run_dir: Path) -> dict:
    store = EvaluationStore(run_dir / "evaluations.sqlite")
    rows = {(r.stage, r.start, r.seq): (r.x.tolist(), r.evaluation.status,
                                        json.dumps(dict(r.evaluation.metrics), sort_keys=True))
            for r in store.records()}
    return {"evaluations": rows, "scans": store.scans()}


def _grid_front(radii, periods, wavelengths) -> onp.ndarray:
    """Feasible non-dominated (g, DOCP) of a brute-force grid (the goal's constraints:
    u >= 0.3, gap period - 2 r >= 40 nm for spheres of a square lattice)."""
    F = []
    for r in radii:
        for p in periods:
            if p - 2 * r < 40.0:
                continue
            design = design_from_dict({
                "lattice": {"kind": "square", "period_nm": float(p)},
                "particles": [{"shape": "sphere", "radius_nm": float(r), "material": "Si"}],
                "substrate": {"material": "SiO2"},
                "illumination": {"wavelength_nm": [float(w) for w in wavelengths]},
                "region": {"kind": "plane", "height_nm": 10}, "model": {"lmax": 1}})
            m = evaluate(design).metrics
            g = onp.asarray(m["g"], float)
            docp = 0.5 * (onp.asarray(m["docp"]["+1"]) + onp.asarray(m["docp"]["-1"]))
            u = onp.asarray(m["u"], float)
            ok = (u >= 0.3) & onp.isfinite(g) & onp.isfinite(docp)
            F += [[a, b] for a, b in zip(g[ok], docp[ok], strict=True)]
    F = onp.asarray(F, float)
    return F[non_dominated(F, SENSES)]


def _store_front(run_dir: Path) -> onp.ndarray:
    recs = EvaluationStore(run_dir / "evaluations.sqlite").records()
    F = onp.asarray([r.evaluation.metrics["objectives"] for r in recs
                     if r.evaluation.status == "ok" and "objectives" in r.evaluation.metrics
                     and all(v <= 1e-6 for v in r.evaluation.metrics["constraints"])], float)
    return F[non_dominated(F, SENSES)]


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("explore")
    (goal,) = load_goal(_write(tmp))
    return goal, run_goal(goal, out=tmp / "runs", workers=0, progress=False)


def test_front_reaches_the_brute_force_grid(small_run):
    goal, s = small_run
    assert s.status == "complete"
    grid = _grid_front(onp.linspace(50, 110, 13), onp.linspace(300, 500, 11),
                       onp.linspace(620, 780, 17))
    hv_grid = hypervolume(grid, SENSES, REF)
    assert hv_grid > 0
    assert s.reference == REF
    assert s.hypervolume >= 0.98 * hv_grid, (s.hypervolume, hv_grid)
    front = s.front_objectives
    for k in range(2):
        assert front[:, k].max() >= grid[:, k].max() - 0.02, (k, front[:, k].max(),
                                                              grid[:, k].max())


def test_front_holds_every_stored_feasible_evaluation(small_run):
    # the report's front is the non-dominated set of all stored feasible evaluations,
    # explored ones included: nothing stored lies beyond it
    _, s = small_run
    stored = _store_front(s.run_dir)
    assert hypervolume(stored, SENSES, REF) == pytest.approx(s.hypervolume, rel=1e-12)
    assert s.coverage["explored_beyond"] == 0
    summary = json.loads((s.run_dir / "summary.json").read_text())
    assert summary["coverage"]["explored_beyond"] == 0
    assert summary["reference"] == {"g@design-wavelength": 0.5, "docp@design-wavelength": 0.5}
    # the exploration stored its kept points as evaluations at their own wavelengths
    recs = EvaluationStore(s.run_dir / "evaluations.sqlite").records("explore")
    assert recs and len({r.start for r in recs}) == 64
    assert len({r.x[2] for r in recs}) > 1


def test_same_seed_same_store(tmp_path):
    text = GOAL.replace("samples: 64", "samples: 12").replace("max_evals_per_start: 25",
                                                             "max_evals_per_start: 4")
    (goal,) = load_goal(_write(tmp_path, text))
    one = run_goal(goal, out=tmp_path / "one", workers=0, progress=False)
    two = run_goal(goal, out=tmp_path / "two", workers=2, progress=False)
    assert one.status == two.status == "complete"
    assert _rows(one.run_dir) == _rows(two.run_dir)
    (other,) = load_goal(_write(tmp_path, text.replace("seed: 2", "seed: 3")))
    three = run_goal(other, out=tmp_path / "three", workers=0, progress=False)
    assert _rows(three.run_dir)["scans"] != _rows(one.run_dir)["scans"]  # the seed matters


def test_hypervolume_ignores_unrelated_evaluations(small_run, tmp_path):
    # a fixed reference: a dominated extra evaluation leaves the hypervolume unchanged
    # (with the run's worst value as reference it would move it)
    goal, s = small_run
    import shutil

    run_dir = tmp_path / "copy"
    shutil.copytree(s.run_dir, run_dir)
    store = EvaluationStore(run_dir / "evaluations.sqlite")
    rec = store.records("explore")[0]
    ev = rec.evaluation
    worse = dict(ev.metrics, objectives=[0.01, -0.9], constraints=[-1.0, -1.0])
    store.put("extra", 0, 0, rec.x + 1.0, replace(ev, metrics=worse))
    again = write_report(run_dir, goal, store=store)
    assert again.n_evaluations == s.n_evaluations + 1
    assert again.hypervolume == s.hypervolume


def test_materials_share_the_reference_point(tmp_path):
    text = GOAL.replace("seed: 2\n", "seed: 2\nmaterials: [Si, TiO2]\n").replace(
        "  front: {points: 5, reference: {g: 0.5, docp: 0.5}}\n", "  front: {points: 3}\n"
    ).replace("samples: 64", "samples: 8").replace("max_evals_per_start: 25",
                                                  "max_evals_per_start: 3")
    summaries = run_goal_file(_write(tmp_path, text), out=tmp_path / "runs", workers=0,
                              progress=False)
    assert [s.status for s in summaries] == ["complete", "complete"]
    # the default: the incident plane wave's g = 1 and no circular polarization, DOCP = 0
    # (docs/theory.md §12: a plane wave has g = 1)
    assert summaries[0].reference == summaries[1].reference == [1.0, 0.0]
    compare = json.loads((tmp_path / "runs" / "small-compare.json").read_text())
    assert list(compare["reference"].values()) == [1.0, 0.0]
    for s in summaries:
        assert s.hypervolume > 0
        assert compare["runs"][s.goal.run_name]["hypervolume"] == s.hypervolume
        assert hypervolume(_store_front(s.run_dir), SENSES, [1.0, 0.0]) == pytest.approx(
            s.hypervolume, rel=1e-12)


def test_explore_settings_are_validated(tmp_path):
    for bad, key in (("samples: -1", "search.explore.samples"),
                     ("samples: 8, keep: 0", "search.explore.keep"),
                     ("samples: 8, share: 2", "search.explore.share"),
                     ("samples: 8, tolerance: 0.5", "search.explore.tolerance"),
                     ("samples: 8, colour: 3", "search.explore")):
        text = GOAL.replace("samples: 64, wavelength_points: 17, batch: 8", bad)
        with pytest.raises(InputError) as exc:
            load_goal(_write(tmp_path, text))
        assert exc.value.key.startswith(key), (bad, exc.value.key)
    text = GOAL.replace("reference: {g: 0.5, docp: 0.5}", "reference: {g: 0.5}")
    with pytest.raises(InputError) as exc:
        load_goal(_write(tmp_path, text))
    assert exc.value.key == "search.front.reference"


def test_the_scan_tolerance_loosens_the_screen_only(tmp_path):
    """The scan's own accuracy target (search.explore.tolerance) changes the screened values
    by about that much and no more, and the stored evaluations keep the model's tolerance.
    Reference: the same scan at the model's tolerance 1e-8 (common practice, no source)."""
    from chiropt.goals import GoalProblem
    from chiropt.goals.scan import scan_wavelengths

    (goal,) = load_goal(_write(tmp_path))
    assert goal.search.explore.tolerance == 1e-5     # the documented default
    problem = GoalProblem(goal)
    x = (problem.lower + problem.upper) / 2
    grid = onp.linspace(620.0, 780.0, 9)
    exact = scan_wavelengths(problem, x, grid, 2)
    loose = scan_wavelengths(problem, x, grid, 2, 1e-3)
    tight = scan_wavelengths(problem, x, grid, 2, 1e-12)   # never tighter than the model
    assert exact["ok"].all() and loose["ok"].all()
    onp.testing.assert_array_equal(tight["F"], exact["F"])
    change = onp.max(onp.abs(loose["F"] - exact["F"]) / onp.maximum(onp.abs(exact["F"]), 1e-3))
    assert 0 < change < 1e-2, change
    assert problem.eval_design.tolerance == 1e-8


@linux
def test_kill_during_exploration_then_resume_gives_the_same_front(small_run, tmp_path):
    goal, reference = small_run
    goal_file = _write(tmp_path)
    out = tmp_path / "runs"
    db = out / "small-Si" / "evaluations.sqlite"
    proc = _start(goal_file, out, "--workers", "1")
    _wait_for(lambda: _count(db, "scans") >= 2, proc=proc)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    time.sleep(0.5)  # the worker dies with its parent
    killed = _count(db, "scans")
    assert 2 <= killed < 64  # caught during the exploration
    s = run_goal(goal, out=out, workers=0, progress=False)
    assert s.status == "complete"
    assert _rows(s.run_dir) == _rows(reference.run_dir)
    assert onp.array_equal(s.front_objectives, reference.front_objectives)


def test_a_new_reference_point_resumes_the_same_store(small_run, tmp_path):
    # the reference decides no evaluation: the same run folder replays with another one,
    # evaluates nothing new, and reports the hypervolume at the new point
    import shutil

    goal, s = small_run
    shutil.copytree(s.run_dir, tmp_path / "runs" / s.run_dir.name)
    (other,) = load_goal(_write(tmp_path, GOAL.replace("reference: {g: 0.5, docp: 0.5}",
                                                       "reference: {g: 1.0, docp: 0.8}")))
    again = run_goal(other, out=tmp_path / "runs", workers=0, progress=False)
    assert again.status == "complete" and again.n_evaluations == s.n_evaluations
    assert again.reference == [1.0, 0.8]
    assert again.hypervolume == pytest.approx(
        hypervolume(_store_front(s.run_dir), SENSES, [1.0, 0.8]), rel=1e-12)
    assert again.hypervolume < s.hypervolume
