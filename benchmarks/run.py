"""Throughput of the main job: evaluations per hour per core on the quickstart goal.

Run by hand: ``python benchmarks/run.py [GOAL.yaml]``. Prints figures; asserts nothing.

1. One gradient evaluation of the goal's problem (objectives + constraints + exact Jacobian),
   as the gradient algorithms call it: packed (one forward pass, one reverse pass per row,
   ``GoalProblem.evaluate``) against one ``value_and_gradient`` per scalar row.
2. The goal's first material run in this process (one core) into a temporary folder:
   evaluations per hour per core, store and report included.

Without the near-field metrics wired into ``compute_quantities`` (``chiropt.metrics``), the
quickstart's near-field goal cannot run; the benchmark then falls back to a far-field goal
of the same geometry and says so.
"""

from __future__ import annotations

import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import autograd.numpy as np
import numpy as onp

from chiropt.goals import GoalProblem, load_goal
from chiropt.goals.schema import goal_from_dict
from chiropt.run import run_goal
from chiropt.sensitivity import value_and_gradient

ROOT = Path(__file__).resolve().parent.parent

FAR_FIELD_GOAL = {
    "name": "bench-far",
    "design": {"lattice": {"kind": "square", "period_nm": 420},
               "particles": [{"radius_nm": 80, "material": "Si"}],
               "substrate": {"material": "SiO2"},
               "illumination": {"wavelength_nm": 700}},
    "variables": {"particles[0].radius_nm": {"min": 50, "max": 110},
                  "lattice.period_nm": {"min": 300, "max": 520}},
    "objectives": [{"maximize": "A", "at_nm": 700}, {"minimize": "R", "at_nm": 700}],
    "constraints": [{"metric": "T", "min": 0.2, "at_nm": 700},
                    {"fabrication": "min_gap_nm", "value": 40}],
    "search": {"starts": 2, "max_evals_per_start": 30, "front": {"points": 7}},
}


def _goal(path: str | None):
    path = path or str(ROOT / "configs" / "quickstart.yaml")
    goal = load_goal(path)[0]
    try:
        GoalProblem(goal).evaluate(onp.array([v.lower + v.upper for v in goal.variables]) / 2,
                                   False)
        return goal, path
    except ImportError:
        print("near-field metrics not available in compute_quantities: using a far-field goal "
              "of the same geometry")
        return goal_from_dict(FAR_FIELD_GOAL)[0], "far-field fallback"


def _median(fn, repeats=5):
    fn()
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return float(onp.median(ts))


def main(argv):
    goal, label = _goal(argv[1] if len(argv) > 1 else None)
    P = GoalProblem(goal)
    x = (P.lower + P.upper) / 2
    rows = P.n_objectives + P.n_constraints
    t_fwd = _median(lambda: P.evaluate(x, False))
    t_packed = _median(lambda: P.evaluate(x, True))

    def per_scalar():
        for r in range(rows):
            def obj(q, r=r):
                vals = P.values(np.array(x))
                p = dict(P._params)
                p.update(vals)
                allv = np.concatenate([P.objective_values(q), P.constraint_values(q, p)])
                return allv[r]
            value_and_gradient(P.eval_design, obj, P.paths,
                               values={k: v for k, v in P.values(x).items() if k in P.paths})

    t_scalar = _median(per_scalar, repeats=3)
    print(f"goal: {label}; {len(P.paths)} variables, {rows} rows (objectives + constraints), "
          f"{len(P.wavelengths_nm)} wavelengths")
    print(f"forward evaluation:                  {1e3 * t_fwd:8.1f} ms")
    print(f"packed value + Jacobian (used):      {1e3 * t_packed:8.1f} ms "
          f"({t_packed / t_fwd:.1f} x forward)")
    print(f"one value_and_gradient per row:      {1e3 * t_scalar:8.1f} ms "
          f"({t_scalar / t_packed:.1f} x packed)")
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        s = run_goal(replace(goal, located=None), out=tmp, workers=0, progress=False)
        wall = time.perf_counter() - t0
    print(f"run {goal.run_name} on 1 core: {s.n_evaluations} evaluations in {wall:.1f} s "
          f"(report included) -> {3600 * s.n_evaluations / wall:,.0f} evaluations per hour "
          "per core")


if __name__ == "__main__":
    main(sys.argv)
