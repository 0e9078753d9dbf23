"""The main job: a goal optimized into a run folder (``chiropt run GOAL.yaml``).

Owns: the orchestration of a run (pre-run checks, the local searches in parallel, budgets,
resume), the run folder layout, the progress display and the report regenerated from the
store. Must not import: cli.

Run folder ``<out>/<name>-<material>/``
---------------------------------------
- ``goal.resolved.yaml``: the goal with defaults and the concrete material.
- ``evaluations.sqlite``: every evaluation (design vector, all quantities at all wavelengths,
  objectives, constraints, status, reason, wall time). The source of truth: everything below
  is regenerated from it (``write_report``).
- ``front.csv``: the non-dominated feasible set (one objective: the best design of each
  search), hypervolume at the goal's fixed reference point (``chiropt.goals.reference``)
  and coverage figures in header lines; ``summary.json`` (the same figures as data);
  ``candidates/c<index>.yaml``: design files of up to
  ``front.points`` (one objective: 10) front points spread along the front, which
  ``chiropt evaluate`` reproduces; ``front.png``, ``convergence.png``; ``run.log``.
- ``robust_samples.json`` (goals with ``robust:`` terms): every robust term's error model
  and its samples (the same for every design of the run); front.csv then adds a
  ``LABEL (nominal)`` column beside each robust objective.

Searches
--------
- Exploration first (``search.explore``): scrambled-Sobol geometries in batches (tasks
  ``explore-b``), each scanned along a wavelength variable in one vectorized solve
  (``chiropt.goals.scan``; the scan kept in the store's ``scans`` table), its best points
  evaluated at the goal's model (stage ``explore``, search = geometry index).
- Then the local searches, seeded from the explored feasible designs
  (``chiropt.search.explore.seed_plan``). One objective: ``starts`` local searches from
  the best explored designs (stage ``start``, search k). Two objectives: lexicographic
  anchors (stages ``anchor1``/``anchor2`` then ``anchor1-lex``/``anchor2-lex``, search j)
  and epsilon-constraint (or weighted-sum) levels (stage ``level-i``, search j), all
  independent, so they run in parallel. Without a feasible explored design: Sobol starts,
  each tracing a whole front (stage ``front-k``). The reported front is the non-dominated
  set of every feasible evaluation of the run, explored ones included.
- Searches run through an ``Executor`` (a process pool by default; ``workers=0`` runs them
  in this process; the goal's ``executor`` or ``--executor``: a Dask cluster,
  ``chiropt.search.cluster``). Each search has a fixed evaluation cap,
  ``max_evals_per_start`` lowered to ``budget.evaluations / number of searches``, so
  results do not depend on timing, nor on the executor or its number of workers.
- On an executor whose workers lack the run folder (``streams``: Dask), each task carries
  the stored rows of its searches (``chiropt.store.stream.TaskStore``) and sends its writes
  back as messages and with its outcome; this process alone writes them into the store,
  each once (``StreamReceiver``), so a task run again after a lost worker stores nothing
  twice.
- Resume: the same command replays the stored evaluations (``CachedProblem``) and goes on.
  The wall-time budget counts per invocation; when it runs out, fresh evaluations stop
  (``DeadlineReached``, never stored) and the report is written from what is stored.
- Resume identity (``goal_identity``): everything that changes evaluations; not the
  ``description``, not the hypervolume reference and not the budgets
  (``max_evals_per_start``, ``budget.evaluations``, ``budget.wall_time``, the
  exploration's ``samples``/``share``/``batch``), which may grow to extend a finished run:
  a changed search plan (cap or number of explored geometries) continues the searches and
  keeps the rows off their new paths as superseded (see the store's ``supersede``).
- Feasible: status ok and every scaled constraint ``<= FEASIBILITY_TOL``.
- Front rows that coincide within ``merge_tolerance`` (every variable within
  ``max(xtol_rel |x|, MERGE_FRACTION (max - min))``) are merged into one row.

Processes (common practice, no source)
--------------------------------------
- Everything is validated (workers, goals of every material, the pre-run checks) before
  any run folder is created: a rejected run leaves no files.
- A run folder is locked (``fcntl.flock`` on ``.lock``, holding the pid and host) for the
  whole run; a second run on it is refused (``RunFolderBusy``). The kernel drops the lock
  of a dead process, so a stale lock is taken over.
- Workers die with the run (``search.executor``); one Ctrl-C stops every search of every
  material (status ``interrupted``, resumable); a search that raises is a failed search
  (status ``failed: ...``), and so is a store that changed under the report.
"""

from __future__ import annotations

import hashlib
import json
import os
import queue
import socket
import sqlite3
import sys
import threading
import time
from concurrent.futures import FIRST_COMPLETED, wait
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as onp
import yaml

from chiropt.errors import InputError
from chiropt.goals.objectives import DeadlineReached, GoalProblem, check_goal
from chiropt.goals.schema import WAVELENGTH_PATH, ExecutorSettings, Goal, load_goal
from chiropt.model import LMAX_CAP, validity
from chiropt.response import VALIDITY_TOLERANCE
from chiropt.search.driver import minimize
from chiropt.search.executor import ProcessExecutor, SerialExecutor
from chiropt.goals.reference import reference_point
from chiropt.goals.scan import explore_grid, scan_wavelengths
from chiropt.search.explore import anchor_starts, pick_along_axis, search_key, seed_plan
from chiropt.search.fronts import (Scalarized, anchor_second_stage, epsilon_constraint,
                                   weighted_sum)
from chiropt.search.multistart import sobol_starts, start_seed
from chiropt.search.pareto import hypervolume, non_dominated
from chiropt.sensitivity import solved_quantities
from chiropt.report.labels import objective_label, spec_label
from chiropt.store.evaluations import (CachedProblem, CachingWrap, EvaluationStore, close_all,
                                       open_store)
from chiropt.store.stream import StreamReceiver, snapshot

try:
    import fcntl
except ImportError:  # not a POSIX system: no folder lock
    fcntl = None

__all__ = ["FEASIBILITY_TOL", "RunSummary", "plan_searches", "run_goal", "run_goal_file",
           "write_report"]

FEASIBILITY_TOL = 1e-6
STORE_NAME = "evaluations.sqlite"
STOP_NAME = ".stop"
SUMMARY_NAME = "summary.json"
ROBUST_SAMPLES_NAME = "robust_samples.json"
LOCK_NAME = ".lock"
REPRODUCE_TOL = 1e-9
STREAM_POLL_S = 0.2  # how often streamed evaluations are written into the store [s]
MERGE_FRACTION = 1e-3


# ---------------------------------------------------------------------------------------------
# searches (module level: picklable for the process pool)
# ---------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class SearchTask:
    """One unit of work for an executor: a local search or a whole front trace."""

    goal: Goal
    store_path: Any  # the store file, or a TaskStore (chiropt.store.stream) on a cluster
    index: int
    x0: onp.ndarray
    seed: int
    max_evals: int
    deadline: float | None
    stop_file: str | None = None
    supersede_tag: str | None = None
    kind: str = "trace"  # "trace" (a whole front), "single", "anchor", "level"
    k: int = 0  # anchor: the objective; level: the level number (1, 2, ...)
    start: int = 0  # index of the search among those of its anchor or level
    bound: float = 0.0  # level: the bound on the normalized objective 2
    ideal: tuple[float, ...] = ()
    scale: tuple[float, ...] = ()

    @property
    def key(self) -> str:
        """Label of the task (progress, convergence plot)."""
        if self.kind == "trace":
            return f"front-{self.index}"
        if self.kind == "single":
            return f"start-{self.index}"
        if self.kind == "anchor":
            return search_key(f"anchor{self.k + 1}", self.start)
        return search_key(f"level-{self.k}", self.start)


@dataclass(frozen=True)
class ExploreTask:
    """A batch of exploration geometries: each scanned, its kept points evaluated."""

    goal: Goal
    store_path: Any  # as SearchTask.store_path
    index: int
    geometries: tuple[int, ...]
    X: onp.ndarray
    deadline: float | None
    stop_file: str | None = None

    @property
    def key(self) -> str:
        return f"explore-{self.index}"


@dataclass
class TaskOutcome:
    """What a task reports back (the store holds the rest)."""

    index: int
    status: str  # "done", "deadline", "error"
    message: str = ""
    ops: tuple = ()  # a TaskStore's writes, every one (chiropt.store.stream)


def _run_task(task: SearchTask | ExploreTask) -> TaskOutcome:
    try:
        out = _explore(task) if isinstance(task, ExploreTask) else _search(task)
    except Exception as exc:  # a search that dies is a failed search, never a silent one
        out = TaskOutcome(task.index, "error", f"{type(exc).__name__}: {exc}")
    finally:
        close_all()  # leaves no -wal/-shm behind once the last connection closes
    ops = getattr(task.store_path, "ops", None)
    if ops is not None:
        out.ops = tuple(ops)
    return out


def task_searches(task: SearchTask | ExploreTask) -> list[tuple[str, int | None]]:
    """The ``(stage, start)`` searches whose stored rows a task replays (None: all)."""
    if isinstance(task, ExploreTask):
        return [("explore", g) for g in task.geometries]
    if task.kind == "single":
        return [("start", task.index)]
    if task.kind == "anchor":
        stage = f"anchor{task.k + 1}"
        return [(stage, task.start), (f"{stage}-lex", task.start)]
    if task.kind == "level":
        return [(f"level-{task.k}", task.start)]
    return [(f"front-{task.index}", None)]


def _search(task: SearchTask) -> TaskOutcome:
    goal = task.goal
    problem = GoalProblem(goal, deadline=task.deadline, stop_file=task.stop_file)
    wrap = CachingWrap(task.store_path, task.supersede_tag)
    s = goal.search
    options = dict(max_evals=task.max_evals, xtol_rel=s.xtol_rel, ftol_rel=s.ftol_rel,
                   feasibility_tol=FEASIBILITY_TOL)
    M = problem.n_objectives
    try:
        if M == 1:
            scal = Scalarized(problem, "single", 0, 0.0, [0.0], [1.0])
            minimize(wrap(scal, "start", task.index), task.x0, s.algorithm, seed=task.seed,
                     **options)
        elif task.kind == "anchor":
            stage = f"anchor{task.k + 1}"
            scal = Scalarized(problem, "single", task.k, 0.0, onp.zeros(2), onp.ones(2))
            first = minimize(wrap(scal, stage, task.start), task.x0, s.algorithm,
                             seed=task.seed, **options)
            scal, tol = anchor_second_stage(problem, task.k, first, ANCHOR_TOL, options)
            minimize(wrap(scal, f"{stage}-lex", task.start), first.x_best, s.algorithm,
                     seed=task.seed + 1, **{**options, "feasibility_tol": tol})
        elif task.kind == "level":
            kind = "bounded" if s.front_method == "epsilon-constraint" else "weighted"
            scal = Scalarized(problem, kind, 0, task.bound, task.ideal, task.scale)
            minimize(wrap(scal, f"level-{task.k}", task.start), task.x0, s.algorithm,
                     seed=task.seed, **options)
        else:
            trace = epsilon_constraint if s.front_method == "epsilon-constraint" else weighted_sum
            trace(problem, s.front_points, algorithm=s.algorithm, x0=task.x0, seed=task.seed,
                  wrap=wrap, stage=f"front-{task.index}", **options)
    except DeadlineReached as exc:
        return TaskOutcome(task.index, "deadline", str(exc))
    except InputError as exc:  # e.g. a front whose anchor search found nothing
        return TaskOutcome(task.index, "error", str(exc))
    return TaskOutcome(task.index, "done")


def _explore(task: ExploreTask) -> TaskOutcome:
    """Scan each geometry along the wavelength axis (one solve), store the kept points.

    A geometry's scan is stored (``EvaluationStore.put_scan``) before its kept points are
    evaluated (stage ``explore``, search = geometry index), so a killed run resumes
    without solving it again and replays what was evaluated.
    """
    goal = task.goal
    e = goal.search.explore
    problem = GoalProblem(goal, deadline=task.deadline, stop_file=task.stop_file)
    M = problem.n_objectives
    scal = Scalarized(problem, "single", 0, 0.0, onp.zeros(M), onp.ones(M))
    store = open_store(task.store_path)
    grid = explore_grid(problem, e.wavelength_points)
    try:
        for g, x in zip(task.geometries, task.X, strict=True):
            scan = store.get_scan(g)
            if scan is None:
                problem.check_stop()
                out = scan_wavelengths(problem, x, grid, e.lmax, e.tolerance)
                picks = pick_along_axis(out["F"], out["G"], out["ok"], problem.senses, e.keep,
                                        FEASIBILITY_TOL)
                viol = onp.max(onp.maximum(out["G"], 0.0), axis=1) if out["G"].shape[1] \
                    else onp.zeros(len(out["F"]))
                feas = out["ok"] & (viol <= FEASIBILITY_TOL)
                scan = {"kept": [out["X"][i].tolist() for i in picks],
                        "F": [f.tolist() if ok else None for f, ok in zip(out["F"], feas,
                                                                          strict=True)],
                        "error": out.get("error", "")}
                store.put_scan(g, scan)
            cached = CachedProblem(scal, task.store_path, "explore", g)
            for xk in scan["kept"]:
                cached.evaluate(onp.asarray(xk, float), False)
    except DeadlineReached as exc:
        return TaskOutcome(task.index, "deadline", str(exc))
    return TaskOutcome(task.index, "done")


ANCHOR_TOL = 1e-9
EXPLORE_MIN = 8


def explore_size(goal: Goal) -> int:
    """Number of geometries the exploration samples (``search.explore``)."""
    e = goal.search.explore
    n_geom = sum(v.path != WAVELENGTH_PATH for v in goal.variables)
    if e.samples is not None:
        n = e.samples
    else:
        n_local, _ = _local_count(goal)
        total = goal.budget.evaluations or n_local * goal.search.max_evals_per_start
        n = max(EXPLORE_MIN, int(e.share * total) // e.keep) if e.share > 0 else 0
    return min(n, 1) if n_geom == 0 else n


def explore_points(goal: Goal, problem: GoalProblem) -> onp.ndarray:
    """The sampled geometries (N, n): scrambled Sobol over the geometry variables, the
    wavelength variable (scanned, not sampled) at its middle."""
    n = explore_size(goal)
    geo = [i for i, v in enumerate(goal.variables) if v.path != WAVELENGTH_PATH]
    X = onp.repeat((0.5 * (problem.lower + problem.upper))[None], n, axis=0)
    if n and geo:
        X[:, geo] = sobol_starts(problem.lower[geo], problem.upper[geo], n,
                                 seed=start_seed(goal.seed, EXPLORE_SEED))
    return X


EXPLORE_SEED = 2**20  # the stream of the exploration sample (starts use 0, 1, ...)


def _local_count(goal: Goal) -> tuple[int, int]:
    """(local searches of a seeded run, searches per start of an unseeded one)."""
    s = goal.search
    if len(goal.objectives) == 1:
        return s.starts, 1
    levels = max(0, s.front_points - 2)
    return 4 * anchor_starts(s.starts) + levels * s.starts, 4 + levels


def plan_searches(goal: Goal) -> tuple[int, int]:
    """(number of local searches, evaluation cap of each) for a goal.

    With ``budget.evaluations``, the exploration's share (``explore_size * keep``) is taken
    first and the rest split evenly over the local searches.
    """
    s = goal.search
    n, _ = _local_count(goal)
    cap = s.max_evals_per_start
    if goal.budget.evaluations is not None:
        left = goal.budget.evaluations - explore_size(goal) * s.explore.keep
        cap = max(1, min(cap, left // n))
    return n, cap


def local_tasks(goal: Goal, store: EvaluationStore, common: dict) -> tuple[list[SearchTask], str]:
    """The local searches, seeded from the stored explored designs; (tasks, how seeded).

    Falls back to scrambled-Sobol starts (and, with two objectives, one whole front per
    start) when the exploration found no feasible design.
    """
    problem = GoalProblem(goal)
    s = goal.search
    M = problem.n_objectives
    n_explore = explore_size(goal)  # rows of a larger earlier exploration stay unused here
    recs = [r for r in store.records("explore") if r.start < n_explore
            and r.evaluation.status == "ok"
            and "objectives" in r.evaluation.metrics
            and all(v <= FEASIBILITY_TOL for v in r.evaluation.metrics.get("constraints", []))]
    X = onp.array([r.x for r in recs], float).reshape(len(recs), len(goal.variables))
    F = onp.array([r.evaluation.metrics["objectives"] for r in recs], float).reshape(-1, M)
    plan = seed_plan(X, F, onp.array([r.start for r in recs]), problem.senses, s.starts,
                     s.front_points)
    seeds = stage_starts(goal)
    given = (f"; {len(seeds)} from {goal.search.starts_from}" if len(seeds) else "")
    if plan is None:
        starts = _with_seeds(sobol_starts(problem.lower, problem.upper, s.starts,
                                          seed=goal.seed), seeds)
        kind = "single" if M == 1 else "trace"
        return ([SearchTask(x0=starts[k], index=k, seed=start_seed(goal.seed, k), kind=kind,
                            **common) for k in range(s.starts)],
                "no feasible explored design: scrambled-Sobol starts" + given)
    plan.anchors = [_with_seeds(a, seeds) for a in plan.anchors]
    tasks: list[SearchTask] = []
    if M == 1:
        for j, x0 in enumerate(plan.anchors[0]):
            tasks.append(SearchTask(x0=x0, index=j, seed=start_seed(goal.seed, j),
                                    kind="single", **common))
        return tasks, f"{len(tasks)} starts from the best explored designs" + given
    for k in (0, 1):
        for j, x0 in enumerate(plan.anchors[k]):
            tasks.append(SearchTask(x0=x0, index=len(tasks), seed=start_seed(
                goal.seed, len(tasks)), kind="anchor", k=k, start=j, **common))
    ideal, scale = tuple(float(v) for v in plan.ideal), tuple(float(v) for v in plan.scale)
    for i, (bound, x0s) in enumerate(plan.levels, start=1):
        for j, x0 in enumerate(x0s):
            value = bound if s.front_method == "epsilon-constraint" else bound
            tasks.append(SearchTask(x0=x0, index=len(tasks), seed=start_seed(
                goal.seed, len(tasks)), kind="level", k=i, start=j, bound=value, ideal=ideal,
                scale=scale, **common))
    return tasks, (f"anchors and {len(plan.levels)} levels seeded from {len(recs)} explored "
                   "feasible designs" + given)


def stage_starts(goal: Goal) -> onp.ndarray:
    """Start points (S, n) from ``search.starts_from`` (an earlier run's front.csv), in file
    order, at most ``search.starts``, clipped to the variable bounds; (0, n) without it.

    Raises
    ------
    InputError (``search.starts_from``) when the file is missing, has no usable row, or
    lacks a column of this goal's variables.
    """
    from chiropt.export.candidates import read_front_csv

    paths = [v.path for v in goal.variables]
    text = goal.search.starts_from
    if text is None:
        return onp.zeros((0, len(paths)))
    path = Path(text.replace("{material}", goal.material))
    key = "search.starts_from"
    if not path.is_file():
        raise goal.error(key, f"{path} not found: run the earlier stage first (its run "
                              "folder holds front.csv)")
    _, rows = read_front_csv(path)
    missing = [p for p in paths if not rows or p not in rows[0]]
    if missing:
        raise goal.error(key, f"{path} has no column {missing[0]!r} (this goal's variables: "
                              f"{', '.join(paths)}); the stages must search the same variables")
    lower = onp.array([v.lower for v in goal.variables])
    upper = onp.array([v.upper for v in goal.variables])
    X = [[float(r[p]) for p in paths] for r in rows if all(r[p] not in ("", None) for p in paths)]
    if not X:
        raise goal.error(key, f"{path} holds no front row with every variable")
    return onp.clip(onp.array(X, float), lower, upper)[: goal.search.starts]


def _with_seeds(starts, seeds: onp.ndarray):
    """``starts`` (a list or array of start points) with the first ones replaced by ``seeds``."""
    out = [onp.asarray(x, float) for x in starts]
    for j, x in enumerate(seeds[: len(out)]):
        out[j] = onp.asarray(x, float)
    return onp.array(out) if isinstance(starts, onp.ndarray) else out


def goal_identity(goal: Goal) -> str:
    """Hash of what decides a run's evaluations: not its description, not its budgets."""
    d = goal.to_dict()
    for key in ("description", "budget", "executor"):
        d.pop(key, None)
    d["search"] = {k: v for k, v in d["search"].items() if k != "max_evals_per_start"}
    # not evaluations either: the hypervolume reference, how geometries are batched, and
    # the exploration's size (it may grow like a budget: the store's search plan)
    d["search"]["front"].pop("reference", None)
    d["search"].pop("confirm", None)   # re-solves the front after the fact: no evaluation
    d["search"]["explore"] = {k: v for k, v in d["search"]["explore"].items()
                              if k not in ("batch", "samples", "share")}
    text = json.dumps(d, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def merge_tolerance(goal: Goal, x: onp.ndarray) -> onp.ndarray:
    """Per-variable distance under which two designs count as one [user units]."""
    width = onp.array([v.upper - v.lower for v in goal.variables], float)
    return onp.maximum(goal.search.xtol_rel * onp.abs(x), MERGE_FRACTION * width)


def merge_coinciding(goal: Goal, X: onp.ndarray, order) -> list[int]:
    """Indices of ``order`` kept after dropping designs that coincide with an earlier one."""
    kept: list[int] = []
    for i in order:
        if not any(onp.all(onp.abs(X[i] - X[j]) <= merge_tolerance(goal, X[j])) for j in kept):
            kept.append(i)
    return kept


def front_indices(goal: Goal, X: onp.ndarray, F: onp.ndarray, pool: onp.ndarray) -> list[int]:
    """Two objectives: the merged non-dominated rows of ``F`` within ``pool``, best first."""
    senses = tuple(o.sense for o in goal.objectives)
    if len(F) == 0:
        return []
    sign = onp.array([1.0 if s == "max" else -1.0 for s in senses])
    mask = non_dominated(onp.where(pool[:, None], F, onp.nan), senses)
    order = sorted(onp.flatnonzero(mask), key=lambda i: -sign[0] * F[i, 0])
    return merge_coinciding(goal, X, order)


class RunFolderBusy(InputError):
    """Another live process runs the same run folder."""


class RunLock:
    """Exclusive OS lock of a run folder (see the module notes); ``release`` frees it."""

    def __init__(self, run_dir: Path):
        self.path = run_dir / LOCK_NAME
        self.fd: int | None = None
        self.previous = ""
        if fcntl is None:
            return
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            holder = os.pread(fd, 200, 0).decode(errors="replace").strip() or "unknown"
            os.close(fd)
            raise RunFolderBusy("run", f"{run_dir} is being run by another process ({holder}); "
                                       "wait for it to finish or stop it first") from None
        self.previous = os.pread(fd, 200, 0).decode(errors="replace").strip()
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"pid {os.getpid()} on {socket.gethostname()}\n".encode(), 0)
        self.fd = fd

    def release(self) -> None:
        if self.fd is not None:
            os.ftruncate(self.fd, 0)
            fcntl.flock(self.fd, fcntl.LOCK_UN)
            os.close(self.fd)
            self.fd = None


# ---------------------------------------------------------------------------------------------
# progress
# ---------------------------------------------------------------------------------------------

class Progress:
    """Reads new rows of the store and reports evaluations, best values, front, ETA.

    ``emit`` receives one line of text (``None``: silent); ``bar`` is a tqdm bar on a
    terminal (or None). Reads with its own read-only connection, so it never competes with
    the writers. The front is the one the report will write (``front_indices``); the ETA
    is the remaining evaluations of the unfinished searches (their caps, or the mean use
    of the finished searches once some have finished) at the measured rate of this run.
    """

    def __init__(self, store_path: str, goal: Goal, tasks: list[str], task_cap,
                 deadline: float | None, emit=None, bar=None):
        self.path, self.goal, self.deadline, self.emit, self.bar = (
            store_path, goal, deadline, emit, bar)
        self.tasks = list(tasks)
        # the evaluation cap of each task (one number: the same for all)
        self.caps = (dict(task_cap) if isinstance(task_cap, dict)
                     else {k: int(task_cap) for k in tasks})
        self.finished: set[str] = set()
        self.senses = tuple(o.sense for o in goal.objectives)
        self.problem = GoalProblem(goal)
        self.reference = reference_point(goal)[0]
        self.batch = goal.search.explore.batch
        self.last_id = 0
        self.count = 0
        self.failed = 0
        self.per_task: dict[str, int] = {}
        self.X = onp.zeros((0, len(goal.variables)))
        self.F = onp.zeros((0, len(self.senses)))
        self.front: list[int] = []
        self.worst = None
        self.t0 = time.time()
        self.n0: int | None = None
        self.n_workers: int | None = None  # set by the run: workers of the executor now
        self.in_flight: int | None = None  # tasks submitted and not finished

    @property
    def total(self) -> int:
        return sum(self.caps.values())

    def add_task(self, key: str, cap: int) -> None:
        """A task planned once the exploration is done."""
        if key not in self.caps:
            self.tasks.append(key)
        self.caps[key] = int(cap)

    def task_key(self, stage: str, start: int) -> str:
        if stage == "explore":
            return f"explore-{start // self.batch}"
        return search_key(stage, start)

    def poll(self) -> None:
        try:
            conn = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, timeout=5.0)
            try:
                rows = conn.execute("SELECT id, stage, start, x, metrics, status FROM "
                                    "evaluations WHERE id > ? ORDER BY id",
                                    (self.last_id,)).fetchall()
            finally:
                conn.close()
        except sqlite3.Error:
            return
        X, F = [], []
        for id_, stage, start, x, metrics, status in rows:
            self.last_id = max(self.last_id, id_)
            self.count += 1
            key = self.task_key(stage, start)
            self.per_task[key] = self.per_task.get(key, 0) + 1
            if status != "ok":
                self.failed += 1
                continue
            m = json.loads(metrics)
            f, g = m.get("objectives"), m.get("constraints", [])
            if f is not None and all(v <= FEASIBILITY_TOL for v in g):
                X.append(json.loads(x))
                F.append(f)
        if self.n0 is None:
            self.n0 = self.count
        if F:
            self.X = onp.concatenate([self.X, onp.asarray(X, float)])
            self.F = onp.concatenate([self.F, onp.asarray(F, float)])
            sign = onp.array([1.0 if s == "max" else -1.0 for s in self.senses])
            self.worst = onp.min(self.F * sign, axis=0) * sign
            if len(self.senses) == 2:
                # the same rule as the report, over every feasible evaluation so far
                self.front = front_indices(self.goal, self.X, self.F,
                                           onp.ones(len(self.F), bool))
            else:
                self.front = [int(onp.argmax(sign[0] * self.F[:, 0]))]

    def remaining(self) -> tuple[int, bool]:
        """(evaluations left, estimated from finished searches?)"""
        done = [k for k in self.finished if not k.startswith("explore")]
        used = [self.per_task.get(k, 0) / max(1, self.caps.get(k, 1)) for k in done]
        est = bool(used)
        share = min(1.0, sum(used) / len(used)) if est else 1.0
        left = sum(max(0, int(round(share * self.caps[k])) - self.per_task.get(k, 0))
                   for k in self.tasks if k not in self.finished)
        return left, est

    def eta(self) -> str:
        el = time.time() - self.t0
        fresh = self.count - (self.n0 or 0)
        if fresh <= 0 or el <= 0:
            return ""
        left_n, est = self.remaining()
        left = left_n * el / fresh
        capped = self.deadline is not None and left > self.deadline - time.time()
        if capped:
            left = max(0.0, self.deadline - time.time())
        word = "ETA ~" if est and not capped else "ETA <= "
        return f"{word}{_duration(left)}"

    def rate(self) -> float:
        """Fresh evaluations per second of this invocation (replayed rows not counted)."""
        el = time.time() - self.t0
        fresh = self.count - (self.n0 or 0)
        return fresh / el if el > 0 else 0.0

    def pool(self) -> str:
        """Workers, tasks in flight and evaluations per second ('' before the run sets them)."""
        if self.n_workers is None:
            return ""
        return (f"{self.n_workers} workers, {self.in_flight or 0} tasks in flight, "
                f"{self.rate():.3g} evaluations/s")

    def status(self) -> str:
        best = ""
        if self.front:
            parts = []
            for k, o in enumerate(self.goal.objectives):
                col = self.F[self.front, k]
                v = col.max() if o.sense == "max" else col.min()
                parts.append(f"{objective_label(o, self.problem)} {v:.4g}")
            best = "best " + ", ".join(parts)
            if len(self.senses) == 2:
                hv = hypervolume(self.F[self.front], self.senses, self.reference)
                best += f"; front {len(self.front)}, HV {hv:.4g}"
        return best

    def line(self) -> str:
        best, eta, pool = self.status(), self.eta(), self.pool()
        return (f"{self.count} evaluations ({self.failed} failed) of <= {self.total}"
                + (f"; {pool}" if pool else "") + (f"; {best}" if best else "")
                + (f", {eta}" if eta else ""))

    def report(self) -> None:
        self.poll()
        if self.bar is not None:
            self.bar.total = max(self.count, self.count + self.remaining()[0])
            self.bar.n = self.count
            self.bar.set_postfix_str(", ".join(
                t for t in (f"{self.failed} failed", self.pool(), self.status(), self.eta())
                if t),
                refresh=False)
            self.bar.refresh()
        elif self.emit is not None:
            self.emit(self.line())


def _duration(s: float) -> str:
    s = int(round(s))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}h{m:02d}m" if h else (f"{m}m{sec:02d}s" if m else f"{sec}s")


class _Log:
    """run.log writer that can echo to stderr (above a live progress bar, if any)."""

    def __init__(self, path: Path, echo: bool):
        self.path, self.echo = path, echo
        self.bar = None

    def __call__(self, text: str, echo: bool = True) -> None:
        stamp = time.strftime("%Y-%m-%d %H:%M:%S")
        with self.path.open("a") as fh:
            for line in text.splitlines() or [""]:
                fh.write(f"{stamp}  {line}\n")
        if self.echo and echo:
            if self.bar is not None:
                self.bar.write(text, file=sys.stderr)
            else:
                print(text, file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------------------------

@dataclass
class RunSummary:
    """Outcome of one run (one material).

    ``front`` holds the rows of front.csv as dicts; ``reproduce_max_dev`` the largest
    relative deviation of re-evaluated front quantities from the stored ones.
    """

    run_dir: Path
    goal: Goal
    status: str
    n_evaluations: int = 0
    n_failed: int = 0
    n_feasible: int = 0
    hypervolume: float = float("nan")
    reference: list[float] = field(default_factory=list)
    front: list[dict] = field(default_factory=list)
    candidates: list[Path] = field(default_factory=list)
    reproduce_max_dev: float = 0.0
    front_objectives: onp.ndarray | None = None
    reference_source: str = ""
    coverage: dict = field(default_factory=dict)
    nondominated: onp.ndarray | None = None  # every feasible non-dominated evaluation

    def to_json(self) -> dict:
        """The run's figures as plain data (``summary.json``)."""
        labels = [objective_label(o, GoalProblem(self.goal)) for o in self.goal.objectives]
        hv = self.hypervolume
        return {"run": self.goal.run_name, "status": self.status,
                "evaluations": self.n_evaluations, "failed": self.n_failed,
                "feasible": self.n_feasible, "objectives": labels,
                "hypervolume": None if hv != hv else float(hv),
                "reference": dict(zip(labels, self.reference, strict=True)),
                "reference_source": self.reference_source,
                "front_points": len(self.front), "coverage": self.coverage}


def _workers(workers) -> int:
    n = (os.cpu_count() or 1) if workers is None else workers
    if not isinstance(n, int) or isinstance(n, bool) or n < 0:
        raise InputError("--workers", f"got {workers}, allowed an integer >= 0")
    return n


def validate_run(goal: Goal, workers: int | None = None,
                 executor: ExecutorSettings | None = None) -> dict[str, Any]:
    """Every check of a run that needs no run folder; return the base design's quantities."""
    _workers(workers)
    stage_starts(goal)
    settings = executor or goal.executor
    _executor_workers(settings, workers)
    if settings.kind == "dask":
        from chiropt.search.cluster import require_distributed

        require_distributed("--executor" if executor is not None else "executor")
    return check_goal(goal)


def _executor_workers(settings: ExecutorSettings, workers: int | None) -> int:
    """Worker processes of a local pool or a local Dask cluster (0: this process)."""
    if settings.kind == "local":
        return _workers(workers)
    n = workers if workers is not None else (settings.workers or os.cpu_count() or 1)
    if settings.address is None and n < 1:
        raise InputError("--workers", f"got {n}, allowed an integer >= 1 with a local Dask "
                                      "cluster")
    return n


def make_executor(settings: ExecutorSettings, workers: int | None = None):
    """The executor of a run (``executor`` of the goal, or ``--executor``); close it after."""
    n = _executor_workers(settings, workers)
    if settings.kind == "local":
        return SerialExecutor() if n == 0 else ProcessExecutor(n)
    from chiropt.search.cluster import DaskExecutor

    if settings.address is not None:
        return DaskExecutor(settings.address, key="executor.dask.address")
    return DaskExecutor(workers=n, threads_per_worker=settings.threads_per_worker,
                        key="executor.dask")


def run_goal(goal: Goal, *, out: str | Path = "runs", workers: int | None = None,
             progress: bool = True, interval_s: float = 2.0,
             base: dict[str, Any] | None = None, executor=None) -> RunSummary:
    """Run one goal (one material) into ``out/<run_name>/``, resuming what is stored.

    Parameters
    ----------
    goal : Goal
    out : folder that holds run folders
    workers : worker processes (default: the number of cores); 0 runs in this process
    progress : print progress to stderr (always written to run.log)
    interval_s : seconds between progress updates [s]
    base : result of ``validate_run`` when the caller already ran it
    executor : ``ExecutorSettings`` (default: the goal's ``executor``)

    Raises
    ------
    InputError
        Before anything is written (invalid settings, pre-run checks); ``RunFolderBusy``
        when another process runs the same folder.
    """
    if base is None:
        base = validate_run(goal, workers, executor)
    # made before the run folder: a scheduler that does not answer leaves no files
    pool = make_executor(executor or goal.executor, workers)
    lock = store = None
    try:
        run_dir = Path(out) / goal.run_name
        run_dir.mkdir(parents=True, exist_ok=True)
        lock = RunLock(run_dir)
        store = EvaluationStore(run_dir / STORE_NAME)
        return _run_locked(goal, run_dir, store, lock, base, pool, progress, interval_s)
    finally:
        try:
            pool.close()  # closed before the report already, unless the run never started
        except KeyboardInterrupt:
            pool.terminate() if hasattr(pool, "terminate") else None
        finally:
            if store is not None:
                store.close()
            close_all()
            if lock is not None:
                lock.release()


def _run_locked(goal, run_dir, store, lock, base, executor, progress, interval_s):
    tty = progress and sys.stderr.isatty()
    log = _Log(run_dir / "run.log", echo=progress)
    store_path = store.path
    identity = goal_identity(goal)
    if store.get_meta("identity") is None and store.get_meta("goal_hash") is not None:
        store.set_meta("identity", identity)  # a store of an older chiropt: replay checks it
    store.ensure_meta({"identity": identity, "seed": goal.seed})
    problem = GoalProblem(goal)
    olabels = [objective_label(o, problem) for o in goal.objectives]
    store.set_meta("layout", {"variables": problem.paths, "objectives": olabels,
                              "senses": list(problem.senses),
                              "constraints": problem.constraint_labels,
                              "wavelength_nm": problem.wavelengths_nm.tolist()})
    resolved = goal.to_dict()
    (run_dir / "goal.resolved.yaml").write_text(
        f"# resolved goal of run {goal.run_name} (source: {goal.source or 'inline'})\n"
        + yaml.safe_dump(resolved, sort_keys=False))
    if problem.robust_plans:  # the common random numbers of the robust terms, for the record
        (run_dir / ROBUST_SAMPLES_NAME).write_text(json.dumps(problem.robust_record()) + "\n")
    n_search, cap = plan_searches(goal)
    X_explore = explore_points(goal, problem)
    resumed = store.count()
    if lock.previous:
        log(f"note: took over the lock of a process that is gone ({lock.previous})")
    old_caps = list(store.get_meta("earlier_caps", []))
    plan_now = {"cap": cap, "explore": len(X_explore)}
    stored_plan = store.get_meta("search_plan")
    stored_cap = store.get_meta("evaluation_cap")
    if stored_plan is None and stored_cap is not None:
        stored_plan = {"cap": stored_cap, "explore": len(X_explore)}
    if stored_plan is not None and stored_plan != plan_now:
        old_caps.append(stored_plan.get("cap"))
        store.set_meta("earlier_caps", old_caps)
        log(f"note: the search plan changed (evaluation cap of each search {stored_plan['cap']}"
            f" -> {cap}, explored geometries {stored_plan['explore']} -> {len(X_explore)}): "
            "searches are continued (rows that no longer lie on a search's path are kept "
            "as superseded evaluations)")
    store.set_meta("evaluation_cap", cap)
    store.set_meta("search_plan", plan_now)
    tag = f"superseded{len(old_caps)}" if old_caps else None
    log(f"run {goal.run_name}: {len(goal.variables)} variables, {len(goal.objectives)} "
        f"objective(s), {problem.n_constraints} constraint rows, {len(problem.wavelengths_nm)} "
        f"wavelengths; exploration of {len(X_explore)} geometries"
        + (f" x {goal.search.explore.wavelength_points} wavelengths"
           if problem.shift_index is not None else "")
        + f"; {goal.search.algorithm}, {goal.search.starts} starts, {n_search} "
        f"searches of <= {cap} evaluations" + (f"; resuming ({resumed} stored)" if resumed
                                                else ""))
    if goal.search.algorithm == "DIRECT-L" and goal.search.starts > 1:
        log("note: DIRECT-L is deterministic and ignores start points: every start repeats "
            "the same search; use starts: 1")
    if "error" in base:
        log(f"note: the base design itself fails to evaluate: {base['error']}")
    deadline = (time.time() + goal.budget.wall_time_s) if goal.budget.wall_time_s else None
    task_goal = replace(goal, located=None)
    stop_file = run_dir / STOP_NAME
    stop_file.unlink(missing_ok=True)
    B = goal.search.explore.batch
    explore_tasks = [ExploreTask(task_goal, store_path, b, tuple(range(i, min(i + B, len(
        X_explore)))), X_explore[i:i + B], deadline, str(stop_file))
        for b, i in enumerate(range(0, len(X_explore), B))]
    common = dict(goal=task_goal, store_path=store_path, max_evals=cap, deadline=deadline,
                  stop_file=str(stop_file), supersede_tag=tag)
    bar = None
    if tty:
        from tqdm import tqdm

        bar = tqdm(total=len(X_explore) * goal.search.explore.keep + n_search * cap,
                   file=sys.stderr, unit="eval", dynamic_ncols=True, desc=goal.run_name,
                   leave=True)
        log.bar = bar
    caps = {t.key: len(t.geometries) * goal.search.explore.keep for t in explore_tasks}
    prog = Progress(store_path, goal, list(caps), caps, deadline,
                    emit=log if progress else None, bar=bar)
    prog.poll()
    status = "complete"
    outcomes: dict[str, TaskOutcome] = {}
    tasks: list = list(explore_tasks)
    stream = None
    if getattr(executor, "streams", False):  # workers without the run folder
        stream = _Stream(executor, store)
    if hasattr(executor, "describe"):
        log(executor.describe())
        if executor.workers == 0:
            log("note: no worker has joined the scheduler yet; the tasks wait for workers")
        for line in executor.version_mismatches():
            log(f"WARNING: {line}: install the same chiropt and material data on every "
                "worker, or the same seed may not give the same evaluations")
    try:
        status = _execute(executor, explore_tasks, outcomes, prog, log, progress, tty,
                          interval_s, stream)
        stopped = any(o.status != "done" for o in outcomes.values())
        if status == "complete" and not stopped:
            local, how = local_tasks(goal, store, common)
            log(f"exploration done: {len(X_explore)} geometries, "
                f"{store.count('explore')} evaluations; local searches: {how}")
            for t in local:
                prog.add_task(t.key, cap * (2 if t.kind == "anchor" else 1))
            tasks += local
            status = _execute(executor, local, outcomes, prog, log, progress, tty, interval_s,
                              stream)
    except KeyboardInterrupt:
        status = "interrupted"
        stop_file.touch()  # workers stop at their next fresh evaluation
        log("interrupted: the store keeps every finished evaluation; run the same command "
            "to resume")
    finally:
        try:
            executor.close()
        except KeyboardInterrupt:  # a second Ctrl-C: stop the workers now
            if hasattr(executor, "terminate"):
                executor.terminate()
            status = "interrupted"
        if stream is not None:
            stream.drain()  # what arrived before the executor closed
        stop_file.unlink(missing_ok=True)
        if bar is not None:
            bar.close()
            log.bar = None
    if stream is not None:
        n = stream.receiver.restarts
        log(f"streamed from the workers: {stream.receiver.puts} evaluations stored"
            + (f"; {n} {'task' if n == 1 else 'tasks'} ran again from its start (a worker "
               "was lost), the writes repeated were applied once" if n else ""))
    errors = [o for o in outcomes.values() if o.status == "error"]
    for key, o in outcomes.items():
        if o.status == "error":
            log(f"{key} failed: {o.message}")
    if status == "complete":
        if errors:
            kinds = {t.key: isinstance(t, ExploreTask) for t in tasks}
            bad = [k for k, o in outcomes.items() if o.status == "error"]
            n_x = sum(kinds[k] for k in bad)
            n_all_x = sum(kinds.values())
            what = [f"{len(bad) - n_x} of {len(tasks) - n_all_x} searches"] if n_x < len(bad) \
                else []
            what += [f"{n_x} of {n_all_x} exploration batches"] if n_x else []
            status = (f"failed: {' and '.join(what)} failed (first: {bad[0]}: "
                      f"{outcomes[bad[0]].message[:200]})")
        elif any(o.status == "deadline" for o in outcomes.values()):
            status = "stopped: wall-time budget spent (run the same command to continue)"
        elif len(outcomes) < len(tasks):
            status = f"failed: {len(tasks) - len(outcomes)} searches did not report back"
    store.set_meta("status", status)
    summary = write_report(run_dir, goal, store=store, status=status, log=log)
    after = store.count()
    if after != summary.n_evaluations:  # never report a front the store contradicts
        summary.status = status = (f"failed: the store changed while the report was written "
                                   f"({summary.n_evaluations} -> {after} evaluations): another "
                                   "process writes into this run folder")
        store.set_meta("status", status)
    log(f"{status}: {summary.n_evaluations} evaluations ({summary.n_failed} failed, "
        f"{summary.n_feasible} feasible); front of {len(summary.front)} "
        f"{'point' if len(summary.front) == 1 else 'points'}"
        + (f", hypervolume {summary.hypervolume:.6g}" if len(goal.objectives) == 2 else "")
        + f"; re-evaluated front reproduces the store to {summary.reproduce_max_dev:.2e}")
    return summary


class _Stream:
    """The run's side of a cluster whose workers lack the run folder: each task carries the
    stored rows it replays (``chiropt.store.stream.TaskStore``), and its writes come back
    as messages (``DaskExecutor.subscribe``) and with its outcome; this process alone
    writes them into the store, each once."""

    def __init__(self, executor, store: EvaluationStore):
        import functools
        import uuid

        from chiropt.search.cluster import emit

        self.store = store
        self.receiver = StreamReceiver(store)
        self.inbox: queue.SimpleQueue = queue.SimpleQueue()
        self.run_id = uuid.uuid4().hex[:12]
        topic = f"chiropt-{self.run_id}"
        self.sink = functools.partial(emit, topic)
        executor.subscribe(topic, self.inbox.put)

    def ship(self, task):
        """The task with its own store: its stored rows and scans, and the sink."""
        token = f"{self.run_id}-{task.key}"
        geometries = task.geometries if isinstance(task, ExploreTask) else ()
        return replace(task, store_path=snapshot(self.store, token, task_searches(task),
                                                 geometries, self.sink))

    def drain(self) -> None:
        """Apply the messages that arrived."""
        while True:
            try:
                msg = self.inbox.get_nowait()
            except queue.Empty:
                return
            self.receiver.receive(msg)

    def finish(self, outcome: TaskOutcome) -> TaskOutcome:
        """Apply a finished task's complete list of writes; the outcome without it."""
        self.drain()
        self.receiver.accept_all(outcome.ops)
        return replace(outcome, ops=())


def _execute(executor, tasks, outcomes: dict, prog: Progress, log, progress: bool, tty: bool,
             interval_s: float, stream: _Stream | None = None) -> str:
    """Run ``tasks`` on ``executor``, recording each outcome under its key; the status."""
    stop_reports = threading.Event()
    reporter = None
    # in this process (workers 0) the searches run inside submit: report from a thread
    if isinstance(executor, SerialExecutor) and progress:
        reporter = threading.Thread(target=_report_every, daemon=True, args=(
            prog, stop_reports, interval_s if tty else 10 * interval_s), name="chiropt-progress")
        reporter.start()
    try:
        futures = {executor.submit(_run_task, stream.ship(t) if stream else t): t
                   for t in tasks}
    finally:
        stop_reports.set()
        if reporter is not None:
            reporter.join()
    if hasattr(executor, "pids") and executor.pids() and not getattr(executor, "_logged", 0):
        log(f"workers: pid {', '.join(map(str, executor.pids()))} (parent {os.getpid()})")
        executor._logged = 1
    last = logged = time.time()
    pending = set(futures)
    prog.n_workers = executor.workers
    while pending:
        done, pending = wait(pending, timeout=min(interval_s, STREAM_POLL_S) if stream
                             else interval_s, return_when=FIRST_COMPLETED)
        if stream is not None:
            stream.drain()
        for f in done:
            t = futures[f]
            try:
                outcomes[t.key] = f.result()
                if stream is not None:
                    outcomes[t.key] = stream.finish(outcomes[t.key])
            except Exception as exc:  # a worker process that died (BrokenProcessPool), a
                # task whose workers kept dying (KilledWorker)
                outcomes[t.key] = TaskOutcome(t.index, "error", f"{type(exc).__name__}: {exc}")
            prog.finished.add(t.key)
        prog.in_flight = len(pending)
        if time.time() - last >= (interval_s if tty else 10 * interval_s) or not pending:
            prog.n_workers = executor.workers
            prog.report()
            last = time.time()
            if tty and (last - logged >= 10 * interval_s or not pending):
                log(prog.line(), echo=False)  # run.log keeps the progress lines too
                logged = last
    return "complete"


def _report_every(prog: Progress, stop: threading.Event, period_s: float) -> None:
    while not stop.wait(period_s):
        prog.report()


def run_goal_file(path: str | Path, *, out: str | Path | None = None, workers: int | None = None,
                  progress: bool = True,
                  executor: ExecutorSettings | None = None) -> list[RunSummary]:
    """Run every material of a goal file; with several, also write ``<name>-compare.png``.

    ``out`` defaults to ``runs/`` of the current folder. Every material is validated before
    the first run folder is made; an interrupted material ends the whole run (the
    summaries so far are returned, the last with status ``interrupted``). ``executor``
    overrides the goal file's ``executor`` (``chiropt run --executor``).
    """
    goals = load_goal(path)
    _workers(workers)
    bases = [validate_run(g, workers, executor) for g in goals]
    root = Path(out) if out is not None else Path.cwd() / "runs"
    summaries = []
    for g, base in zip(goals, bases, strict=True):
        summaries.append(run_goal(g, out=root, workers=workers, progress=progress, base=base,
                                  executor=executor))
        if summaries[-1].status == "interrupted":
            return summaries
    if len(summaries) > 1:
        from chiropt.report.front import plot_comparison

        ref = write_comparison(summaries, root / f"{goals[0].name}-compare.json")
        plot_comparison(summaries, root / f"{goals[0].name}-compare.png", reference=ref)
    return summaries


def write_comparison(summaries: list[RunSummary], path: Path) -> list[float]:
    """The runs of several materials at one reference point (the first goal's); returns it.

    Every material of a goal file has the same objectives, so the default reference (and
    a ``search.front.reference``) is the same for all; each hypervolume is recomputed at
    that one point all the same.
    """
    goal = summaries[0].goal
    ref, source = reference_point(goal)
    labels = [objective_label(o, GoalProblem(goal)) for o in goal.objectives]
    senses = tuple(o.sense for o in goal.objectives)
    runs = {}
    for s in summaries:
        F = next((a for a in (s.nondominated, s.front_objectives) if a is not None),
                 onp.zeros((0, len(ref))))
        hv = hypervolume(F, senses, ref) if len(F) and len(ref) == 2 else None
        best = [None if not len(F) else float(F[:, k].max() if sense == "max"
                                              else F[:, k].min())
                for k, sense in enumerate(senses)]
        runs[s.goal.run_name] = {"material": s.goal.material, "status": s.status,
                                 "evaluations": s.n_evaluations, "hypervolume": hv,
                                 "best": dict(zip(labels, best, strict=True))}
    data = {"goal": goal.name, "reference": dict(zip(labels, ref, strict=True)),
            "reference_source": source, "runs": runs}
    path.write_text(json.dumps(data, indent=1) + "\n")
    return list(ref)


# ---------------------------------------------------------------------------------------------
# report: everything regenerated from the store
# ---------------------------------------------------------------------------------------------

def _spec_metric(problem: GoalProblem, quantities: dict, name: str, spec) -> float:
    if name not in quantities and name + "+1" not in quantities:
        return float("nan")  # a store written before the quantity existed
    return float(problem._spec_value({k: onp.asarray(v) for k, v in quantities.items()},
                                     name, spec))


def _capacity_verdict(problem: GoalProblem, quantities: dict) -> list[str]:
    """The candidate's limit line (docs/theory.md §18), at the first objective's spec."""
    from chiropt.capacity import verdict

    if "cd_capacity" not in quantities:
        return []
    spec = problem.goal.objectives[0].spec
    v = {m: _spec_metric(problem, quantities, m, spec)
         for m in ("ev_share", "cd_efficiency", "g", "g_ev")}
    return [f"where the CD comes from ({spec_label(spec, problem)}): "
            + verdict(v["ev_share"], None, v["cd_efficiency"], v["g"], v["g_ev"])]


def _columns(problem: GoalProblem) -> list[tuple[str, str, Any]]:
    """Extra metric columns (label, metric, spec): objective metrics, then u, g, docp."""
    goal = problem.goal
    cols: list[tuple[str, str, Any]] = []
    seen = set()
    for o in goal.objectives:
        if o.weighted:
            for m, _, _ in o.terms:
                lab = f"{m}@{spec_label(o.spec, problem)}"
                if lab not in seen:
                    cols.append((lab, m, o.spec))
                    seen.add(lab)
    spec = goal.objectives[0].spec
    region = goal.design.region
    names = ("u", "g", "docp+1", "docp-1") if region is not None else ("R", "T", "A")
    if region is not None and not region.inside_layer:
        names += CAPACITY_COLUMNS
    own = {objective_label(o, problem) for o in goal.objectives}
    own |= {objective_label(replace(o, robust=None), problem) for o in goal.objectives}
    for m in names:
        lab = f"{m}@{spec_label(spec, problem)}"
        if lab not in seen and lab not in own:
            cols.append((lab, m, spec))
            seen.add(lab)
    return cols


#: where the CD comes from, in front.csv beside u, g, DOCP (docs/theory.md §18)
CAPACITY_COLUMNS = ("g_ev", "ev_share", "cd_capacity", "cd_efficiency")

REACH_FRACTION = 1e-3  # an extreme counts as reached within this share of the front's span


def coverage(goal: Goal, uniq, X, F, feas, chosen, scans: dict) -> dict:
    """How well the front covers what the run saw (module notes of ``write_report``).

    ``largest_gap``: largest distance between neighbours along the front, each objective
    divided by the front's span; ``explored_beyond``: stored explored feasible designs that
    no front row weakly dominates and that do not coincide with a front row (merge
    tolerance): zero when the front holds every stored evaluation;
    ``scan_beyond``: the same for the scanned points (at the scan's model, beyond the front by
    more than ten times the scan's ``tolerance`` of the span: a screen's values are only
    that accurate); ``extremes``:
    per objective the best front value and the searches that reached it (within
    ``REACH_FRACTION`` of the span); ``warnings``: extremes reached by a single search.
    """
    senses = tuple(o.sense for o in goal.objectives)
    problem = GoalProblem(goal)
    out: dict[str, Any] = {"largest_gap": 0.0, "largest_gap_between": [], "explored_beyond": 0,
                           "scan_beyond": 0, "extremes": [], "warnings": []}
    if not chosen or not feas.any():
        return out
    sign = onp.array([-1.0 if s == "max" else 1.0 for s in senses])
    Zf = F[chosen] * sign
    span = onp.ptp(Zf, axis=0)
    scale = onp.where(span > 0, span, onp.abs(Zf).max(axis=0) + 1.0)
    tol = 1e-9 * scale

    def beyond(Z, tol=tol) -> onp.ndarray:
        Z = onp.asarray(Z, float).reshape(-1, len(senses))
        if len(Z) == 0:
            return onp.zeros(0, bool)
        return ~onp.all(Zf[None, :, :] <= Z[:, None, :] + tol, axis=2).any(axis=1)

    explored = [i for i, r in enumerate(uniq) if r.stage == "explore" and feas[i]]
    out["explored_beyond"] = sum(
        1 for i, b in zip(explored, beyond(F[explored] * sign), strict=True)
        if b and merge_coinciding(goal, X, [*chosen, i])[-1] == i)
    scanned = [f for sc in scans.values() for f in sc.get("F", []) if f is not None]
    if scanned:
        scan_tol = max(1e-9, 10.0 * goal.search.explore.tolerance) * scale
        out["scan_beyond"] = int(beyond(onp.asarray(scanned, float) * sign, scan_tol).sum())
    if len(senses) == 2 and len(chosen) > 1:
        order = onp.argsort(Zf[:, 0])
        Zn = Zf[order] / scale
        d = onp.linalg.norm(onp.diff(Zn, axis=0), axis=1)
        j = int(onp.argmax(d))
        out["largest_gap"] = float(d[j])
        out["largest_gap_between"] = [(Zf[order[j]] * sign).tolist(),
                                      (Zf[order[j + 1]] * sign).tolist()]
    Z = F * sign
    for k, o in enumerate(goal.objectives):
        best = float(Zf[:, k].min())
        reach = sorted({search_key(uniq[i].stage, uniq[i].start) for i in range(len(uniq))
                        if feas[i] and Z[i, k] <= best + REACH_FRACTION * scale[k]})
        label = objective_label(o, problem)
        out["extremes"].append({"objective": label, "best": best * sign[k], "searches": reach})
        if len(reach) == 1:
            out["warnings"].append(f"the best {label} of the front ({best * sign[k]:.4g}) was "
                                   f"reached by a single search ({reach[0]}); more starts or "
                                   "a larger exploration may find a better one")
    return out


def _higher_lmax_problem(goal: Goal):
    """The goal's problem with one more multipole order (None for ``lmax: auto``)."""
    lmax = goal.design.lmax
    if lmax == "auto" or lmax >= LMAX_CAP:
        return None
    return GoalProblem(replace(goal, design=replace(goal.design, lmax=lmax + 1)))


CONFIRM_NAME = "confirmed.json"


def _confirm_front(run_dir: Path, goal: Goal, X, log):
    """Front designs re-solved by ``search.confirm.model``, cached in ``confirmed.json``
    (keyed by the design vector and the model section, so a resumed or regenerated report
    solves each design once and a changed model never reuses old values)."""
    from chiropt.search.confirm import Confirmed, confirm_designs

    path = run_dir / CONFIRM_NAME
    model_key = json.dumps(goal.search.confirm_model, sort_keys=True)
    cache = {}
    if path.is_file():
        try:
            cache = json.loads(path.read_text())
        except ValueError:
            cache = {}
    cache = cache if cache.get("model") == model_key else {"model": model_key, "designs": {}}
    todo = [x for x in X if onp.asarray(x, float).tobytes().hex() not in cache["designs"]]
    if todo:
        log(f"confirming {len(todo)} front design(s) with model {goal.search.confirm_model}")
        for c in confirm_designs(goal, todo, goal.search.confirm_model):
            cache["designs"][onp.asarray(c.x, float).tobytes().hex()] = {
                "f": [float(v) for v in c.f], "g": [float(v) for v in c.g],
                "status": c.status, "model": c.model, "change": float(c.change)}
        path.write_text(json.dumps(cache, indent=1) + "\n")
    out = []
    for x in X:
        e = cache["designs"][onp.asarray(x, float).tobytes().hex()]
        out.append(Confirmed(onp.asarray(x, float), onp.asarray(e["f"], float),
                             onp.asarray(e["g"], float), e["status"], e["model"], e["change"]))
    return out


def _polish_front(run_dir: Path, goal: Goal, problem, X, confirmed, olabels, log):
    """Polish the best confirmed front design of each objective in the confirmation model;
    write ``confirmed.csv`` and ``candidates/polished-<objective>.yaml``."""
    from chiropt.export import write_candidate, write_front_csv
    from chiropt.search.confirm import confirm_goal, polish

    sign = onp.array([1.0 if s == "max" else -1.0 for s in problem.senses])
    ok = [k for k, c in enumerate(confirmed)
          if c.status == "ok" and onp.all(c.g <= FEASIBILITY_TOL)]
    if not ok:
        log("WARNING: no confirmed front design is feasible in the confirmation model; "
            "nothing polished")
        return
    cols = ["objective"] + problem.paths + [f"{lab} (confirmed)" for lab in olabels]
    rows = []
    rproblem = GoalProblem(confirm_goal(goal, goal.search.confirm_model))
    for m, lab in enumerate(olabels):
        k = max(ok, key=lambda j, m=m: sign[m] * confirmed[j].f[m])
        keep = float(confirmed[k].f[1 - m])
        res = polish(goal, goal.search.confirm_model, X[k], m, keep,
                     max_evals=goal.search.confirm_polish, start=confirmed[k])
        log(f"polished best {lab}: {float(confirmed[k].f[m]):.6g} -> {float(res.f[m]):.6g} "
            f"({res.model})")
        rows.append([lab, *[float(v) for v in res.x], *[float(v) for v in res.f]])
        data = rproblem.design_at(res.x).to_dict()
        data["name"] = f"{goal.run_name}-polished-{m}"
        write_candidate(run_dir / "candidates" / f"polished-{m}.yaml", data,
                        comments=[f"front design best in {lab}, polished in the confirmation "
                                  f"model ({res.model})"] +
                        [f"{lb} = {float(v)!r}" for lb, v in zip(olabels, res.f, strict=True)])
    write_front_csv(run_dir / "confirmed.csv", cols, rows,
                    header=[f"best front designs of run {goal.run_name} polished with model "
                            f"{goal.search.confirm_model}"])


def write_report(run_dir: str | Path, goal: Goal, *, store: EvaluationStore | None = None,
                 status: str = "", log=None) -> RunSummary:
    """Regenerate front.csv, candidates/, plots from the store of a run folder."""
    from chiropt.export import write_candidate, write_front_csv
    from chiropt.report.front import plot_convergence, plot_front

    run_dir = Path(run_dir)
    store = store or EvaluationStore(run_dir / STORE_NAME)
    log = log or (lambda s: None)
    problem = GoalProblem(goal)
    recs = store.records()
    M = problem.n_objectives
    senses = problem.senses
    n = len(recs)
    ok = [r for r in recs if r.evaluation.status == "ok" and "objectives" in r.evaluation.metrics]
    summary = RunSummary(run_dir=run_dir, goal=goal, status=status, n_evaluations=n,
                         n_failed=sum(r.evaluation.status != "ok" for r in recs))
    # unique designs, first occurrence
    seen: dict[bytes, Any] = {}
    for r in ok:
        seen.setdefault(r.x.tobytes(), r)
    uniq = list(seen.values())
    F = onp.array([r.evaluation.metrics["objectives"] for r in uniq], float).reshape(-1, M)
    G = [onp.asarray(r.evaluation.metrics.get("constraints", []), float) for r in uniq]
    feas = onp.array([bool(onp.all(g <= FEASIBILITY_TOL)) for g in G], bool)
    summary.n_feasible = int(feas.sum())
    pool = feas if feas.any() else onp.ones(len(uniq), bool)
    sign = onp.array([1.0 if s == "max" else -1.0 for s in senses])
    X = onp.array([r.x for r in uniq], float).reshape(len(uniq), len(goal.variables))
    if len(uniq) == 0:
        chosen: list[int] = []
    elif M == 2:
        chosen = front_indices(goal, X, F, pool)
    else:  # best design of each search (superseded rows belong to no current search)
        best: dict[tuple, int] = {}
        for i, r in enumerate(uniq):
            if not pool[i] or ":" in r.stage:
                continue
            key = (r.stage, 0 if r.stage == "explore" else r.start)  # exploration: one
            if key not in best or sign[0] * F[i, 0] > sign[0] * F[best[key], 0]:
                best[key] = i
        chosen = merge_coinciding(goal, X, sorted(set(best.values()),
                                                   key=lambda i: -sign[0] * F[i, 0]))
    ref, ref_source = reference_point(goal)
    summary.reference, summary.reference_source = [float(v) for v in ref], ref_source
    if M == 2:  # every feasible non-dominated evaluation (merging only shortens the table)
        nd = non_dominated(onp.where(pool[:, None], F, onp.nan), senses) if chosen else []
        summary.hypervolume = (hypervolume(F[nd], senses, ref)
                               if chosen and feas.any() else 0.0)
        summary.nondominated = F[nd] if chosen and feas.any() else onp.zeros((0, M))
    summary.coverage = coverage(goal, uniq, X, F, feas, chosen, store.scans())
    # table
    extra = _columns(problem)
    olabels = [objective_label(o, problem) for o in goal.objectives]
    robust_objectives = [o for o in goal.objectives if o.robust is not None]
    nominal_labels = [f"{objective_label(o, problem)} (nominal)" for o in robust_objectives]
    hi_problem, hi_labels = _higher_lmax_problem(goal), [f"{lab} (lmax+1)" for lab in olabels]
    columns = (["index"] + problem.paths + olabels + nominal_labels + [c[0] for c in extra]
               + ["feasible", "max_violation", "stage", "search", "seq"]
               + (hi_labels if hi_problem is not None else [])
               + ["lmax", "lmax_change", "model_check"])
    worst_change = 0.0
    rows, front_rows = [], []
    max_dev = 0.0
    for idx, i in enumerate(chosen):
        r = uniq[i]
        q = r.evaluation.metrics["quantities"]
        vals = [_spec_metric(problem, q, m, spec) for _, m, spec in extra]
        viol = float(max(0.0, onp.max(G[i]))) if G[i].size else 0.0
        nominal = [float(v) for o, v in zip(goal.objectives, problem.objective_values(
            {k: onp.asarray(v) for k, v in q.items()}), strict=True) if o.robust is not None]
        row = [idx, *[float(v) for v in r.x], *[float(v) for v in F[i]], *nominal, *vals,
               bool(feas[i]), viol, r.stage, r.start, r.seq]
        # validity: the same design with one more multipole order (both values kept)
        if hi_problem is not None:
            row += [float(v) for v in hi_problem.evaluate(r.x, False).f]
        # one fresh solve from a newly built design serves the re-evaluation below and the
        # validity check's base values
        design = problem.design_at(r.x)
        output, fresh = solved_quantities(design, k_min=problem.k_min)
        check = validity(design, output)
        worst_change = max(worst_change, check["worst"])
        row += [check["lmax"] if check["lmax"] is not None else check.get("label"),
                check["worst"],
                "passed" if check["worst"] <= VALIDITY_TOLERANCE else "failed"]
        rows.append(row)
        front_rows.append(dict(zip(columns, row, strict=True)))
        # fresh re-evaluation from a newly built design (``fresh`` above)
        for k, v in q.items():
            a = onp.real(onp.asarray(fresh[k], float))
            b = onp.asarray(v, float)
            dev = float(onp.max(onp.abs(a - b) / onp.maximum(1.0, onp.abs(b))))
            max_dev = max(max_dev, dev)
    summary.reproduce_max_dev = max_dev
    if worst_change > VALIDITY_TOLERANCE:
        if goal.design.solver == "fourier":
            log(f"WARNING: the next harmonic count changes a front design's reported "
                f"quantities by up to {worst_change:.3g} (> {VALIDITY_TOLERANCE:g}); consider "
                "more model.harmonics, or search.confirm (column 'lmax_change' of front.csv "
                "holds the change)")
        else:
            log(f"WARNING: one more multipole order changes a front design's reported "
                f"quantities by up to {worst_change:.3g} (> {VALIDITY_TOLERANCE:g}); consider "
                "model: {lmax: auto} (columns 'lmax_change' and '(lmax+1)' of front.csv)")
    confirmed = None
    if goal.search.confirm_model is not None and chosen:
        confirmed = _confirm_front(run_dir, goal, [uniq[i].x for i in chosen], log)
        columns += ([f"{lab} (confirmed)" for lab in olabels]
                    + ["confirm_feasible", "confirm_model", "confirm_change"])
        for row, front_row, c in zip(rows, front_rows, confirmed, strict=True):
            extra_vals = ([float(v) for v in c.f]
                          + [bool(c.status == "ok" and onp.all(c.g <= FEASIBILITY_TOL)),
                             c.model, float(c.change)])
            row += extra_vals
            front_row.update(zip(columns[-len(extra_vals):], extra_vals, strict=True))
        if goal.search.confirm_polish and M == 2:
            try:
                _polish_front(run_dir, goal, problem, [uniq[i].x for i in chosen], confirmed,
                              olabels, log)
            except Exception as exc:  # the polish must never lose a run's results
                log(f"WARNING: polishing failed: {type(exc).__name__}: {exc}")
    if max_dev > REPRODUCE_TOL:
        log(f"WARNING: re-evaluated front quantities differ from the store by {max_dev:.3e} "
            f"(> {REPRODUCE_TOL:g})")
    header = [f"front of run {goal.run_name}: {len(chosen)} designs "
              + ("(non-dominated, feasible)" if M == 2 else "(best of each search, best first)")
              + ("" if feas.any() else " -- NO FEASIBLE DESIGN: rows are the least bad, "
                 "feasible = false"),
              f"evaluations: {n} ({summary.n_failed} failed, {summary.n_feasible} feasible "
              f"unique designs); status: {status or 'report regenerated'}",
              "objectives: " + ", ".join(f"{'maximize' if s == 'max' else 'minimize'} {lab}"
                                         for s, lab in zip(senses, olabels, strict=True))]
    if M == 2:
        header.append(f"hypervolume = {float(summary.hypervolume)!r} (reference point "
                      f"{dict(zip(olabels, summary.reference, strict=True))}; {ref_source})")
        cov = summary.coverage
        header.append(f"coverage: largest gap along the front {cov['largest_gap']:.4g} "
                      "(objectives divided by the front's span); explored designs beyond the "
                      "front: "
                      f"{cov['explored_beyond']} stored, {cov['scan_beyond']} scanned")
    for w in summary.coverage.get("warnings", []):
        log(f"WARNING: {w}")
    header.append("model_check: 'failed' when one more multipole order changes a reported "
                  f"quantity of the design by more than {VALIDITY_TOLERANCE:g} (lmax_change)")
    header.append("variables in user units (nm, deg); metric columns are averages over each "
                  "spec's wavelengths; max_violation in scaled constraint units; designs that "
                  f"coincide within max(xtol_rel |x|, {MERGE_FRACTION:g} x bound width) in every "
                  "variable are one row")
    if problem.shift_index is not None:
        header.append(f"the wavelength is a variable: metrics are read at the design's own "
                      f"wavelength (column {WAVELENGTH_PATH}) or at the offsets in their "
                      f"labels ('design-wavelength+50nm'); nominal reference "
                      f"{problem.reference_nm:g} nm")
    write_front_csv(run_dir / "front.csv", columns, rows, header=header)
    summary.front = front_rows
    summary.front_objectives = F[chosen] if chosen else onp.zeros((0, M))
    (run_dir / SUMMARY_NAME).write_text(json.dumps(summary.to_json(), indent=1) + "\n")
    # candidates: spread along the front
    cand_dir = run_dir / "candidates"
    cand_dir.mkdir(exist_ok=True)
    for old in cand_dir.glob("c*.yaml"):
        old.unlink()
    k = goal.search.front_points if M == 2 else 10
    picks = sorted({int(round(t)) for t in onp.linspace(0, len(chosen) - 1, min(k, len(chosen)))}
                   ) if chosen else []
    for j in picks:
        i = chosen[j]
        r = uniq[i]
        design = problem.design_at(r.x)
        data = design.to_dict()
        data["name"] = f"{goal.run_name}-c{j:03d}"
        lines = [f"candidate {j} of run {goal.run_name} (front.csv index {j}); "
                 f"{'feasible' if feas[i] else 'INFEASIBLE'}"]
        lines += [f"{lab} = {float(F[i, m])!r}" for m, lab in enumerate(olabels)]
        lines += [f"{p} = {float(v)!r}" + (" (operating wavelength)" if p == WAVELENGTH_PATH
                                            else "")
                  for p, v in zip(problem.paths, r.x, strict=True)]
        lines.append("wavelengths solved: " + ", ".join(
            f"{w:g}" for w in problem.wavelengths_at(r.x)) + " nm (the ones the goal reads); "
            "`chiropt evaluate` on this file reproduces the stored values")
        lines += _capacity_verdict(problem, r.evaluation.metrics["quantities"])
        summary.candidates.append(write_candidate(cand_dir / f"c{j:03d}.yaml", data,
                                                  comments=lines))
    # plots
    try:
        plot_front(run_dir / "front.png", problem, uniq, F, feas, chosen, picks,
                   confirmed=None if confirmed is None else onp.array([c.f for c in confirmed]))
        plot_convergence(run_dir / "convergence.png", problem, recs, reference=ref)
    except Exception as exc:  # a plot must never lose a run's results
        log(f"WARNING: plotting failed: {type(exc).__name__}: {exc}")
    return summary
