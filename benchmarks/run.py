"""Throughput of the main job: evaluations per hour per core on the quickstart goal.

Run by hand: ``python benchmarks/run.py [GOAL.yaml]``. Prints figures; asserts nothing.

1. One gradient evaluation of the goal's problem (objectives + constraints + exact Jacobian),
   as the gradient algorithms call it: packed (one forward pass, one reverse pass per row,
   ``GoalProblem.evaluate``) against one ``value_and_gradient`` per scalar row.
2. The goal's first material run in this process (one core) into a temporary folder:
   evaluations per hour per core, store and report included.
Linear algebra runs on one thread, as in the run's worker processes (figures per core).
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
from chiropt.run import run_goal
from chiropt.search.executor import limit_blas_threads, reuse_freed_memory
from chiropt.sensitivity import value_and_gradient

ROOT = Path(__file__).resolve().parent.parent

def _goal(path: str | None):
    path = path or str(ROOT / "configs" / "quickstart.yaml")
    return load_goal(path)[0], path


def _median(fn, repeats=5):
    fn()
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return float(onp.median(ts))


def main(argv):
    limit_blas_threads(1)
    reuse_freed_memory()
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
