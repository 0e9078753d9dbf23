"""Robust objectives and constraints in goals, the robustness command and its export."""

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
from chiropt.errors import InputError
from chiropt.export import read_front_csv
from chiropt.goals import GoalProblem, check_goal, load_goal
from chiropt.run import run_goal
from chiropt.store import EvaluationStore
from test_processes import _count
from scenarios import RADIUS_AND_PERIOD, SPHERE_ON_GLASS

ROOT = Path(__file__).resolve().parents[1]

DESIGN = SPHERE_ON_GLASS + RADIUS_AND_PERIOD

GRADIENT_GOAL = DESIGN + """\
  illumination.wavelength_nm: {min: 650, max: 750}
objectives:
  - {maximize: g, at_nm: 700, robust: {sigma: {radius_nm: 2, period_nm: 3}, band_nm: 8,
     band_points: 3, samples: 3, statistic: p10}}
  - {maximize: docp, at_nm: 700}
constraints:
  - {metric: u, min: 0.3, at_nm: 700, robust: {sigma: {radius_nm: 2}, na: 0.1,
     polar_points: 1, azimuth_points: 2, samples: 2, statistic: worst}}
"""

RUN_GOAL = DESIGN + """\
objectives:
  - {maximize: g, at_nm: 700, robust: {sigma: {radius_nm: 3}, samples: 4, statistic: p10}}
constraints:
  - {metric: u, min: 0.5, at_nm: 700}
search:
  algorithm: SLSQP
  starts: 1
  max_evals_per_start: 6
  explore: {samples: 4, keep: 1}
seed: 3
"""


def _write(tmp_path, text, name="g.yaml") -> Path:
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return p


def test_robust_labels_and_resolved_form(tmp_path):
    (goal,) = load_goal(_write(tmp_path, GRADIENT_GOAL))
    problem = GoalProblem(goal)
    assert [o.label() for o in goal.objectives] == ["p10(g)@700nm", "docp@700nm"]
    assert problem.constraint_labels == ["worst(u)@700nm>=0.3"]
    robust = goal.to_dict()["objectives"][0]["robust"]
    assert robust["sigma"] == {"radius_nm": 2.0, "period_nm": 3.0} and robust["samples"] == 3


def test_robust_gradients_match_finite_differences(tmp_path):
    # the brief: exact gradients of robust objectives and constraints (fabrication errors,
    # band and cone together, a wavelength variable) against central differences
    # (common practice, no source)
    (goal,) = load_goal(_write(tmp_path, GRADIENT_GOAL))
    problem = GoalProblem(goal)
    x = onp.array([80.0, 410.0, 705.0])
    ev = problem.evaluate(x, True)
    assert ev.status == "ok", ev.reason
    h = 1e-4
    for i in range(x.size):
        e = onp.zeros(x.size)
        e[i] = h
        up, down = problem.evaluate(x + e, False), problem.evaluate(x - e, False)
        fd_f, fd_g = (up.f - down.f) / (2 * h), (up.g - down.g) / (2 * h)
        assert onp.allclose(ev.df[:, i], fd_f, rtol=1e-5, atol=1e-8), (i, ev.df[:, i], fd_f)
        assert onp.allclose(ev.dg[:, i], fd_g, rtol=1e-5, atol=1e-8), (i, ev.dg[:, i], fd_g)


def test_common_random_numbers_same_seed_same_samples(tmp_path):
    # the brief: every design of a run sees the same error samples; the seed fixes them
    (goal,) = load_goal(_write(tmp_path, GRADIENT_GOAL))
    a, b = GoalProblem(goal), GoalProblem(goal)
    for key, plan in a.robust_plans.items():
        assert onp.array_equal(plan.offsets, b.robust_plans[key].offsets)
    x = onp.array([80.0, 410.0, 705.0])
    assert onp.array_equal(a.evaluate(x, False).f, b.evaluate(x, False).f)
    (other,) = load_goal(_write(tmp_path, GRADIENT_GOAL + "seed: 9\n", "h.yaml"))
    c = GoalProblem(other)
    assert not onp.array_equal(a.robust_plans["objectives[0]"].offsets,
                               c.robust_plans["objectives[0]"].offsets)
    # the two robust terms draw different errors from one seed
    assert a.robust_plans["objectives[0]"].seed != a.robust_plans["constraints[0]"].seed


def test_nominal_and_robust_values_differ_and_the_nominal_is_kept(tmp_path):
    (goal,) = load_goal(_write(tmp_path, GRADIENT_GOAL))
    problem = GoalProblem(goal)
    x = onp.array([80.0, 410.0, 705.0])
    ev = problem.evaluate(x, False)
    q = {k: onp.asarray(v) for k, v in ev.metrics["quantities"].items()}
    nominal = onp.asarray(problem.objective_values(q), float)
    assert abs(nominal[1] - ev.f[1]) < 1e-12           # docp is not robust
    assert abs(nominal[0] - ev.f[0]) > 1e-5            # p10 of g is not g


@pytest.mark.parametrize("robust, key, words", [
    ("{na: 1.2}", "objectives[0].robust.na", ["allowed", "< 1", ":12"]),
    ("{statistic: best}", "objectives[0].robust.statistic", ["mean, p10, p90, worst"]),
    ("{sigma: {radius: 2}}", "objectives[0].robust.sigma.radius", ["unknown design quantity"]),
    ("{samples: 5000}", "objectives[0].robust.samples", ["[1, 4096]"]),
])
def test_bad_robust_goal_entry_names_key_line_and_range(tmp_path, robust, key, words):
    # the helper rules: InputError naming the YAML key, its line and the allowed range
    text = DESIGN + f"objectives:\n  - {{maximize: g, at_nm: 700, robust: {robust}}}\n"
    with pytest.raises(InputError) as exc:
        load_goal(_write(tmp_path, text))
    assert exc.value.key == key
    for w in words:
        assert w in exc.value.message, exc.value.message


def test_robust_band_beyond_the_material_data_is_caught_before_a_run(tmp_path):
    # the pre-run checks see the band's outer nodes (Gauss-Hermite reach ~2.9 sigma)
    text = DESIGN + "objectives:\n  - {maximize: g, at_nm: 700, robust: {band_nm: 600}}\n"
    (goal,) = load_goal(_write(tmp_path, text))
    with pytest.raises(InputError) as exc:
        check_goal(goal)
    assert exc.value.key == "objectives[0].robust.band_nm" and "data range" in exc.value.message


def test_cone_with_an_angle_variable_is_refused(tmp_path):
    text = DESIGN + ("  illumination.polar_deg: {min: 0, max: 10}\nobjectives:\n"
                     "  - {maximize: g, at_nm: 700, robust: {na: 0.1}}\n")
    with pytest.raises(InputError) as exc:
        load_goal(_write(tmp_path, text))
    assert exc.value.key == "objectives[0].robust.na" and "variable" in exc.value.message


def _rows(run_dir: Path) -> dict:
    recs = EvaluationStore(run_dir / "evaluations.sqlite").records()
    return {(r.stage, r.start, r.seq): (r.x.tolist(), r.evaluation.status,
                                        json.dumps(dict(r.evaluation.metrics), sort_keys=True))
            for r in recs}


@pytest.fixture(scope="module")
def robust_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("robust")
    (goal,) = load_goal(_write(tmp, RUN_GOAL, "rg.yaml"))
    return goal, run_goal(goal, out=tmp / "runs", workers=0, progress=False)


def test_robust_run_folder_records_samples_and_nominal_column(robust_run):
    goal, s = robust_run
    assert s.status == "complete"
    record = json.loads((s.run_dir / "robust_samples.json").read_text())
    plan = GoalProblem(goal).robust_plans["objectives[0]"]
    assert onp.array_equal(onp.array(record["objectives[0]"]["samples"]["offsets"]),
                           plan.offsets)
    _, rows = read_front_csv(s.run_dir / "front.csv")
    assert rows and {"p10(g)@700nm", "p10(g)@700nm (nominal)"} <= set(rows[0])
    for r in rows:
        assert float(r["p10(g)@700nm"]) < float(r["p10(g)@700nm (nominal)"])


def test_robust_run_resumes_after_kill(tmp_path, robust_run):
    # the brief: a robust goal run resumes after kill -9 like any other run, and with the
    # same seed ends with the very store of the uninterrupted run (so it is reproducible)
    _, reference = robust_run
    goal_file = _write(tmp_path, RUN_GOAL, "rg.yaml")
    out = tmp_path / "runs"
    db = out / "rg-Si" / "evaluations.sqlite"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "chiropt.cli", "run", str(goal_file),
                             "--out", str(out), "--workers", "0", "--quiet"], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    t0 = time.time()
    while _count(db) < 5 and proc.poll() is None and time.time() - t0 < 120:
        time.sleep(0.02)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert 0 < _count(db) < len(_rows(reference.run_dir))
    (goal,) = load_goal(goal_file)
    summary = run_goal(goal, out=out, workers=0, progress=False)
    assert summary.status == "complete"
    assert _rows(summary.run_dir) == _rows(reference.run_dir)


def test_robustness_command_on_a_run_folder_ranks_its_candidates(robust_run, tmp_path,
                                                                    capsys):
    _, s = robust_run
    out = tmp_path / "rob"
    code = main(["robustness", str(s.run_dir), "--samples", "16", "--out", str(out)])
    assert code == 0
    _, = [p for p in out.glob("ranking.csv")]
    lines = (out / "ranking.csv").read_text().splitlines()
    assert lines[0].startswith("rank,candidate,metric,robust")
    n = len(list((s.run_dir / "candidates").glob("c*.yaml")))
    assert len(lines) == 1 + n
    for stem in (p.stem for p in (s.run_dir / "candidates").glob("c*.yaml")):
        for ext in (".csv", ".md", ".json", ".png"):
            assert (out / f"{stem}-robustness{ext}").exists()
    # the goal's own error model is used when the command line gives none
    data = json.loads((out / "c000-robustness.json").read_text())
    assert data["error_model"]["sigma"] == {"radius_nm": 3.0}
    assert "yield" in capsys.readouterr().out


def test_export_carries_a_robust_runs_error_model(robust_run, tmp_path):
    # the brief: the full-wave set-up gets the error model, so it can sample the same errors
    _, s = robust_run
    setup = tmp_path / "c000.json"
    assert main(["export", str(s.run_dir / "candidates" / "c000.yaml"), "--setup", str(setup),
                 "--robustness", str(s.run_dir / "robust_samples.json")]) == 0
    terms = json.loads(setup.read_text())["robustness"]["goal_terms"]
    record = json.loads((s.run_dir / "robust_samples.json").read_text())
    assert terms == record and terms["objectives[0]"]["error_model"]["samples"] == 4


def test_robustness_command_on_a_design_and_its_export(tmp_path, capsys):
    design = ROOT / "configs" / "near-field-design.yaml"
    code = main(["robustness", str(design), "--sigma", "radius_nm=2", "--na", "0.1",
                 "--band-nm", "5", "--samples", "8", "--out", str(tmp_path),
                 "--require", "u>=0.5,A<=2"])
    assert code == 0, capsys.readouterr().err
    rjson = tmp_path / "near-field-design-robustness.json"
    data = json.loads(rjson.read_text())
    # the yield is the share of samples meeting every requirement: here each one's own
    # probability, since A <= 2 always holds (common practice, no source)
    (pu, pa) = [c["probability"] for c in data["constraints"]]
    assert pa == 1.0 and data["yield"] == pu
    u = onp.array(data["samples"]["u"])
    assert pu == float(onp.mean(u >= 0.5))
    assert set(data["metrics"]) == {"g", "docp", "u", "A"}  # A: named by --require
    for m in data["metrics"].values():
        assert {"nominal", "first_order", "monte_carlo", "cone", "band"} <= set(m)
    setup = tmp_path / "setup.json"
    assert main(["export", str(design), "--setup", str(setup), "--robustness", str(rjson)]) == 0
    section = json.loads(setup.read_text())["robustness"]
    assert section["error_model"]["errors"][0]["paths"] == ["particles[0].radius_nm"]
    assert len(section["samples"]["offsets"]) == 8
    assert section["figures"]["g"]["nominal"] == data["metrics"]["g"]["nominal"]


@pytest.mark.parametrize("argv, option", [
    (["--na", "5"], "--na"),
    (["--sigma", "radius_nm=-1"], "--sigma radius_nm"),
    (["--sigma", "radius=1"], "--sigma radius"),
    (["--samples", "0"], "--samples"),
    (["--band-nm", "-3"], "--band-nm"),
    (["--require", "gg>=1"], "--require"),
    (["--require", "u=1"], "--require"),
])
def test_robustness_command_rejects_bad_options(argv, option, capsys):
    # docs/cli.md §7: invalid input exits 2 with one line naming the option
    design = str(ROOT / "configs" / "near-field-design.yaml")
    assert main(["robustness", design, *argv]) == 2
    err = capsys.readouterr().err
    assert option in err and ("allowed" in err or "unknown" in err), err
