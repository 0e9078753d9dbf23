"""Fixtures shared by several test modules."""

from __future__ import annotations

import textwrap

import pytest

REPORT_GOAL = """\
name: {name}
design:
  lattice: {{kind: square, period_nm: 420}}
  particles:
    - {{radius_nm: 75, material: Si}}
  substrate: {{material: SiO2}}
  gap_nm: 10
  illumination: {{wavelength_nm: 700}}
  region: {{kind: plane, height_nm: 10}}
materials: [{material}]
variables:
{variables}
objectives:
  - {{maximize: g, at_nm: 700}}
  - {{maximize: {second}, at_nm: 700}}
constraints:
  - {{fabrication: min_gap_nm, value: 40}}
search:
  algorithm: SLSQP
  starts: 1
  max_evals_per_start: 4
  front: {{method: epsilon-constraint, points: 3, reference: {{g: 0.5, {second}: 0.0}}}}
  explore: {{samples: 6}}
seed: 3
"""

RADIUS_PERIOD = ("  particles[0].radius_nm: {min: 50, max: 110}\n"
                 "  lattice.period_nm: {min: 300, max: 520}")
RADIUS_GAP = ("  particles[0].radius_nm: {min: 50, max: 110}\n"
              "  gap_nm: {min: 5, max: 60}")


@pytest.fixture(scope="session")
def report_runs(tmp_path_factory):
    """Three small dipole-model runs (a few seconds each): ``si`` and ``tio2`` share their
    objectives but differ in variables and material; ``other`` has another objective."""
    from chiropt.goals import load_goal
    from chiropt.run import run_goal

    tmp = tmp_path_factory.mktemp("report-runs")
    specs = {"si": ("rep", "Si", RADIUS_PERIOD, "docp"),
             "tio2": ("rep", "TiO2", RADIUS_GAP, "docp"),
             "other": ("rep-u", "Si", RADIUS_PERIOD, "u")}
    out = {}
    for key, (name, material, variables, second) in specs.items():
        path = tmp / f"{key}.yaml"
        path.write_text(textwrap.dedent(REPORT_GOAL.format(
            name=name, material=material, variables=variables, second=second)))
        (goal,) = load_goal(path)
        out[key] = run_goal(goal, out=tmp / "runs", workers=0, progress=False).run_dir
    return out
