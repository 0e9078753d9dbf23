"""Throughput of the main job: cost of one evaluation and evaluations per hour per core.

Run by hand: ``python benchmarks/run.py [GOAL.yaml ...] [--no-run]``. Prints figures;
asserts nothing. Default goals: the quickstart goal and one overnight goal
(configs/overnight-valley.yaml).

For each goal, at the centre of its variable box (CPU time, best of several repeats,
prepared as a run's worker processes are: one BLAS thread, freed memory reused, loaded
modules frozen for the garbage collector):

1. forward evaluation (objectives and constraints, no derivatives);
2. packed value + exact Jacobian of every row, as the gradient algorithms call it (one
   forward pass with the tape, then the reverse walk for the physics rows), and its ratio
   to 1; both again at a new design each call (1e-7 apart), as a search calls them;
3. one geometry solved at 1, 5 and 21 wavelengths in one call, fitted as a fixed cost
   plus a cost per wavelength (goals with a wavelength variable);
4. the number of primitive operations on the tape of one evaluation (autograd nodes) and
   the number of physics rows (one stacked reverse walk since chiropt.stacked_reverse;
   one reverse pass each before);
5. with the first goal only (unless ``--no-run``): its first material run in this process
   on one core into a temporary folder, store and report included: evaluations per hour
   per core, and where that run's CPU time went (the exploration's scans, forward and
   gradient evaluations, the report, the rest).

The script runs against any checkout (``PYTHONPATH=/path/to/other/checkout``), so the
figures before and after a change come from the same script.
"""

from __future__ import annotations

import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import autograd.tracer as tracer
import numpy as onp
from autograd import make_vjp

from chiropt.goals import GoalProblem, load_goal
from chiropt.run import run_goal
from chiropt.search import executor

from timing import best_cpu_seconds

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_GOALS = [ROOT / "configs" / "quickstart.yaml", ROOT / "configs" / "overnight-valley.yaml"]


def _tape(P: GoalProblem, x) -> tuple[int, int]:
    """Primitive operations on the tape of the physics rows, and their number (the reverse
    passes of a packed evaluation)."""
    count = [0]
    new_box = tracer.new_box

    def counting(value, trace, node):
        count[0] += 1
        return new_box(value, trace, node)

    tracer.new_box = counting
    try:
        _, rows = make_vjp(lambda xv: P._physics_vector(xv, {}))(x)
    finally:
        tracer.new_box = new_box
    return count[0], int(onp.size(rows))


class _FreshDesigns:
    """Designs a relative 1e-7 apart around ``x``, one new design per call: as in a search,
    nothing memoised on a design's exact values (order tables, lattice points) is reused."""

    def __init__(self, x):
        self.x, self.i = onp.asarray(x, float), 0

    def __call__(self):
        self.i += 1
        return self.x * (1.0 + 1e-7 * self.i)


def _fixed_cost(P: GoalProblem, x) -> tuple[float | None, float | None]:
    """Forward cost of one geometry solved at S = 1, 5, 21 wavelengths in one call, fitted
    as fixed + per wavelength [s] (the fixed part: per-call work that does not grow with
    the arithmetic); (None, None) for goals without a wavelength variable."""
    from chiropt.goals.scan import scan_wavelengths

    if P.shift_index is None:
        return None, None
    lo, hi = P.lower[P.shift_index], P.upper[P.shift_index]
    mid, half = 0.5 * (lo + hi), 0.05 * (hi - lo)
    sizes = (1, 5, 21)
    times = [best_cpu_seconds(lambda S=S: scan_wavelengths(
        P, x, onp.linspace(mid - half, mid + half, S) if S > 1 else onp.array([mid])))
        for S in sizes]
    per_wl, fixed = onp.polyfit(sizes, times, 1)
    return float(fixed), float(per_wl)


def per_evaluation(path: Path) -> None:
    goal = load_goal(str(path))[0]
    P = GoalProblem(goal)
    x = (P.lower + P.upper) / 2
    t_fwd = best_cpu_seconds(lambda: P.evaluate(x, False))
    t_jac = best_cpu_seconds(lambda: P.evaluate(x, True))
    fresh = _FreshDesigns(x)
    f_fwd = best_cpu_seconds(lambda: P.evaluate(fresh(), False))
    f_jac = best_cpu_seconds(lambda: P.evaluate(fresh(), True))
    nodes, passes = _tape(P, x)
    fixed, per_wl = _fixed_cost(P, x)
    print(f"goal {path.name}: {len(P.paths)} variables, {P.n_objectives} objectives, "
          f"{P.n_constraints} constraints, {len(P.wavelengths_nm)} wavelength(s), "
          f"design at the box centre {onp.round(x, 3).tolist()}")
    print(f"  forward evaluation:              {1e3 * t_fwd:8.1f} ms")
    print(f"  value + Jacobian (packed):       {1e3 * t_jac:8.1f} ms "
          f"({t_jac / t_fwd:.1f} x forward)")
    print(f"  at a new design each call:       {1e3 * f_fwd:8.1f} ms forward, "
          f"{1e3 * f_jac:.1f} ms value + Jacobian ({f_jac / f_fwd:.1f} x)")
    if fixed is not None:
        print(f"  one geometry over S wavelengths (the goal's model): {1e3 * fixed:.1f} ms "
              f"fixed + {1e3 * per_wl:.2f} ms per wavelength")
    print(f"  tape: {nodes} primitive operations, {passes} physics rows")
    print(f"  per core, gradient evaluations only: {3600 / t_jac:,.0f} per hour")


class _StageClock:
    """CPU seconds and calls of a few functions of a run in this process (patched in turn,
    restored on exit); nested calls are counted once, in the outermost."""

    def __init__(self, targets: dict[str, tuple[object, str, object]]):
        self.targets, self.seconds, self.calls, self._saved = targets, {}, {}, []

    def __enter__(self):
        depth = [0]
        for label, (owner, name, split) in self.targets.items():
            original = getattr(owner, name)
            self._saved.append((owner, name, original))

            def timed(*args, _f=original, _label=label, _split=split, **kwargs):
                key = _split(args, kwargs) if _split else _label
                if depth[0]:
                    return _f(*args, **kwargs)
                depth[0] += 1
                c0 = time.process_time()
                try:
                    return _f(*args, **kwargs)
                finally:
                    depth[0] -= 1
                    self.seconds[key] = self.seconds.get(key, 0.0) + time.process_time() - c0
                    self.calls[key] = self.calls.get(key, 0) + 1

            setattr(owner, name, timed)
        return self

    def __exit__(self, *exc):
        for owner, name, original in reversed(self._saved):
            setattr(owner, name, original)


def whole_run(path: Path) -> None:
    import chiropt.run as run_module

    goal = load_goal(str(path))[0]   # the first material's goal

    def kind(args, kwargs):
        grad = args[2] if len(args) > 2 else kwargs.get("need_grad")
        return "value + Jacobian evaluations" if grad else "forward evaluations"

    targets = {"exploration scans": (run_module, "scan_wavelengths", None),
               "evaluations": (GoalProblem, "evaluate", kind),
               "report": (run_module, "write_report", None)}
    with tempfile.TemporaryDirectory() as tmp, _StageClock(targets) as clock:
        t0, c0 = time.perf_counter(), time.process_time()
        s = run_goal(replace(goal, located=None), out=tmp, workers=0, progress=False)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    print(f"run {goal.run_name} on 1 core: {s.n_evaluations} "
          f"evaluations in {wall:.1f} s wall, {cpu:.1f} s CPU (explore, searches, store, "
          f"report) -> {3600 * s.n_evaluations / cpu:,.0f} evaluations per hour per core")
    for key, sec in clock.seconds.items():
        n = clock.calls[key]
        print(f"  {key:30s} {n:5d} x {1e3 * sec / n:7.1f} ms = {sec:5.2f} s "
              f"({100 * sec / cpu:4.1f}% of the run)")
    rest = cpu - sum(clock.seconds.values())
    print(f"  {'the rest (store, searches, setup)':30s}                     {rest:5.2f} s "
          f"({100 * rest / cpu:4.1f}% of the run)")
    steady = cpu - clock.seconds.get("report", 0.0)
    print(f"  without the report (written once per run): "
          f"{3600 * s.n_evaluations / steady:,.0f} evaluations per hour per core")


def main(argv: list[str]) -> None:
    if hasattr(executor, "prepare_worker"):   # as a run's worker processes are
        executor.prepare_worker()
    else:                                      # an older checkout
        executor.limit_blas_threads(1)
    goals = [Path(a) for a in argv[1:] if not a.startswith("--")] or DEFAULT_GOALS
    for path in goals:
        per_evaluation(path)
    if "--no-run" not in argv:
        whole_run(goals[0])


if __name__ == "__main__":
    main(sys.argv)
