"""Confirmation stage: front designs re-solved by a rigorous model, cached, polished.

References: the confirmed values must equal an independent evaluation of the same design
with the confirmation model (the Fourier solver, itself checked in test_fourier.py), and
a polished design must not be worse than its start (common practice, no source).
"""

from __future__ import annotations

import csv
import json
import textwrap
from pathlib import Path

import pytest

from chiropt.design import load_design
from chiropt.errors import InputError
from chiropt.goals import load_goal
from chiropt.model import quantities_of, run_model
from chiropt.run import run_goal_file, write_report

GOAL = """
name: confirm-small
design:
  lattice: {kind: square, period_nm: 450}
  particles:
    - {shape: cylinder, radius_nm: 70, height_nm: 100, material: {n: 3.6}}
  substrate: {material: {n: 1.45}}
  gap_nm: 50
  region: {kind: plane, height_nm: 50}
  illumination: {wavelength_nm: 800}
  model: {lmax: 2}
variables:
  particles[0].radius_nm: {min: 50, max: 80}
  lattice.period_nm: {min: 400, max: 500}
objectives:
  - {maximize: g, at_nm: 800}
  - {maximize: docp, at_nm: 800}
search:
  algorithm: SLSQP
  starts: 1
  max_evals_per_start: 4
  front: {method: epsilon-constraint, points: 3}
  explore: {samples: 6}
  confirm: {model: {solver: fourier, harmonics: 25}, polish: 2}
budget: {evaluations: 30}
seed: 5
"""


def _front(run_dir: Path):
    lines = [ln for ln in (run_dir / "front.csv").read_text().splitlines()
             if not ln.startswith("#")]
    return list(csv.DictReader(lines))


@pytest.fixture(scope="module")
def confirmed_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("confirm")
    goal_file = folder / "goal.yaml"
    goal_file.write_text(textwrap.dedent(GOAL))
    summary = run_goal_file(goal_file, out=folder / "runs", progress=False)[0]
    return goal_file, summary.run_dir


def test_front_holds_values_confirmed_by_the_rigorous_model(confirmed_run):
    goal_file, run_dir = confirmed_run
    rows = _front(run_dir)
    assert rows and "g@800nm (confirmed)" in rows[0]
    cand = sorted((run_dir / "candidates").glob("c*.yaml"))[0]
    design = load_design(cand)
    index = int(cand.stem[1:])
    row = next(r for r in rows if int(r["index"]) == index)
    data = design.to_dict()
    data["model"] = {"solver": "fourier", "harmonics": 25}
    from chiropt.design import design_from_dict

    q = quantities_of(run_model(design_from_dict(data, base_dir=design.base_dir)))
    assert abs(float(row["g@800nm (confirmed)"]) - float(q["g"][0])) < 1e-10
    assert row["confirm_model"].endswith("harmonics")


def test_confirmations_are_cached_and_keyed_by_the_model(confirmed_run):
    goal_file, run_dir = confirmed_run
    cache = json.loads((run_dir / "confirmed.json").read_text())
    n = len(cache["designs"])
    goal = load_goal(goal_file)[0]
    write_report(run_dir, goal)   # regenerated: nothing new to solve
    assert json.loads((run_dir / "confirmed.json").read_text()) == cache
    from dataclasses import replace

    other = replace(goal, search=replace(goal.search, confirm_model={"solver": "fourier",
                                                                     "harmonics": 9},
                                         confirm_polish=0))
    write_report(run_dir, other)
    fresh = json.loads((run_dir / "confirmed.json").read_text())
    assert fresh["model"] != cache["model"] and len(fresh["designs"]) == n
    assert fresh["designs"] != cache["designs"]
    write_report(run_dir, goal)   # back to the goal's own model for the other tests


def test_polished_designs_are_no_worse_than_their_start(confirmed_run):
    _, run_dir = confirmed_run
    rows = _front(run_dir)
    lines = [ln for ln in (run_dir / "confirmed.csv").read_text().splitlines()
             if not ln.startswith("#")]
    polished = {r["objective"]: r for r in csv.DictReader(lines)}
    for label in ("g@800nm", "docp@800nm"):
        best = max(float(r[f"{label} (confirmed)"]) for r in rows
                   if r["confirm_feasible"] == "true")
        assert float(polished[label][f"{label} (confirmed)"]) >= best - 1e-12
    assert (run_dir / "candidates" / "polished-0.yaml").is_file()


def test_confirm_section_is_validated(tmp_path):
    bad = GOAL.replace("confirm: {model: {solver: fourier, harmonics: 25}, polish: 2}",
                       "confirm: {polish: 2}")
    p = tmp_path / "bad.yaml"
    p.write_text(textwrap.dedent(bad))
    with pytest.raises(InputError) as err:
        load_goal(p)
    assert err.value.key == "search.confirm.model"
