"""Front of a run against a brute-force grid front of the same goal (run by hand).

Usage: python benchmarks/front_vs_grid.py GOAL.yaml [RUN_DIR ...] [--material Si]
       [--points R,P,W] [--lmax N] [--cache grid.npz]

The grid: every geometry variable on R (then P) equally spaced values, the wavelength
variable scanned on W values in one vectorized solve per geometry (chiropt.goals.scan),
at the goal's model unless --lmax is given. Prints the grid front's best objectives and
hypervolume (the goal's fixed reference point), then the same figures for each run folder
(from its evaluation store, every feasible evaluation), and the ratio.
"""

from __future__ import annotations

import argparse
import itertools
import sys
import time
from pathlib import Path

import numpy as onp

from chiropt.goals import GoalProblem, load_goal
from chiropt.goals.reference import reference_point
from chiropt.goals.scan import explore_grid, scan_wavelengths
from chiropt.goals.schema import WAVELENGTH_PATH
from chiropt.search.pareto import hypervolume, non_dominated
from chiropt.store import EvaluationStore


def grid_front(goal, points, lmax=None):
    problem = GoalProblem(goal)
    geo = [i for i, v in enumerate(goal.variables) if v.path != WAVELENGTH_PATH]
    axes = [onp.linspace(problem.lower[i], problem.upper[i], n)
            for i, n in zip(geo, points[:len(geo)], strict=True)]
    grid = explore_grid(problem, points[len(geo)] if problem.shift_index is not None else 1)
    Fs = []
    x = 0.5 * (problem.lower + problem.upper)
    for combo in itertools.product(*axes):
        x[geo] = combo
        out = scan_wavelengths(problem, x, grid, lmax)
        feas = out["ok"] & onp.all(out["G"] <= 1e-6, axis=1)
        Fs.append(out["F"][feas])
    F = onp.concatenate(Fs)
    return F[non_dominated(F, problem.senses)], sum(len(f) for f in Fs)


def run_front(run_dir, senses):
    recs = EvaluationStore(Path(run_dir) / "evaluations.sqlite").records()
    F = [r.evaluation.metrics["objectives"] for r in recs if r.evaluation.status == "ok"
         and "objectives" in r.evaluation.metrics
         and all(v <= 1e-6 for v in r.evaluation.metrics.get("constraints", []))]
    F = onp.asarray(F, float).reshape(-1, len(senses))
    return F[non_dominated(F, senses)], len(recs)


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("goal")
    ap.add_argument("runs", nargs="*")
    ap.add_argument("--material", default=None)
    ap.add_argument("--points", default="33,33,41")
    ap.add_argument("--lmax", type=int, default=None)
    ap.add_argument("--cache", default=None, help="npz file keeping the grid front")
    a = ap.parse_args(argv)
    goals = load_goal(a.goal)
    goal = next(g for g in goals if a.material in (None, g.material))
    senses = tuple(o.sense for o in goal.objectives)
    ref, _ = reference_point(goal)
    t0 = time.time()
    if a.cache and Path(a.cache).exists():
        data = onp.load(a.cache)
        Fg, n_feas = data["F"], int(data["n"])
    else:
        Fg, n_feas = grid_front(goal, [int(p) for p in a.points.split(",")], a.lmax)
        if a.cache:
            onp.savez(a.cache, F=Fg, n=n_feas)
    hv_g = hypervolume(Fg, senses, ref)
    print(f"grid {a.points} ({goal.run_name}, lmax {a.lmax or goal.design.lmax}): "
          f"{n_feas} feasible points, {time.time() - t0:.0f} s; best "
          + ", ".join(f"{Fg[:, k].max() if s == 'max' else Fg[:, k].min():.4f}"
                      for k, s in enumerate(senses))
          + f"; hypervolume {hv_g:.5f} (reference {ref})")
    g_best = Fg[onp.argmax(Fg[:, 0])]
    print(f"grid design of best objective 1: objectives {g_best.round(4).tolist()}")
    for run in a.runs:
        F, n = run_front(run, senses)
        hv = hypervolume(F, senses, ref)
        print(f"run {run}: {n} evaluations; best "
              + ", ".join(f"{F[:, k].max() if s == 'max' else F[:, k].min():.4f}"
                          for k, s in enumerate(senses))
              + f"; hypervolume {hv:.5f}"
              + (f" = {hv / hv_g:.3f} x grid" if hv_g > 0 else
                 " (the grid front has none above the reference point)"))


if __name__ == "__main__":
    sys.exit(main())
