"""Bi-objective fronts by scalarization: epsilon-constraint and weighted sums.

Owns: the scalarized problems built from a ``VectorProblem`` with two objectives, the
lexicographic anchors (the two single-objective optima), the normalization of the objectives
by the anchor ranges, the two sweeps and their ``FrontResult``.

Must not import: physics modules, store, report, cli. (The store hooks in through ``wrap``.)

Conventions
-----------
- Objectives keep their senses; internally ``z_k = +f_k`` (min) or ``-f_k`` (max), and the
  normalized objective is ``h_k = (z_k - z_k(A_k)) / (z_k(A_j) - z_k(A_k))`` where ``A_k`` is
  the anchor optimizing objective ``k`` and ``A_j`` the other one: ``h_k`` runs from 0 at its
  own optimum to 1 at the other anchor.
- Anchors are lexicographic: minimize ``z_k``, then minimize the other objective subject to
  ``z_k <= z_k* + anchor_tol (|z_k*| + 1)``, so an anchor is never weakly dominated; that
  second search accepts constraint violations only up to the same slack.
- Epsilon-constraint point ``i`` of ``points`` (anchors are points 0 and ``points - 1``):
  minimize ``h_1`` subject to the problem's constraints and ``h_2 <= 1 - i / (points - 1)``
  (objective 2 at least as good as the matching fraction of its range).
- Weighted-sum point ``i``: minimize ``w h_1 + (1 - w) h_2`` with ``w = 1 - i / (points - 1)``;
  it only reaches the convex parts of a front.
- Each sweep search starts from the linear interpolation between the anchor designs at the
  same fraction ``i / (points - 1)`` (a deterministic start, so sweeps run in parallel and
  resume by replay).
- Searches are labelled for ``wrap`` with stage ``stage`` and indices 0, 1 (anchor stage
  one), 2, 3 (anchor stage two), then 4, 5, ... (sweep points 1, 2, ...).

References
----------
.. [1] Y. Y. Haimes, L. S. Lasdon, D. A. Wismer, "On a bicriterion formulation of the problems
   of integrated system identification and system optimization", IEEE Trans. Syst. Man
   Cybern. SMC-1, 296 (1971) (epsilon-constraint method).
.. [2] G. Mavrotas, "Effective implementation of the epsilon-constraint method in
   multi-objective mathematical programming problems", Appl. Math. Comput. 213, 455 (2009)
   (lexicographic payoff table for the ranges).
.. [3] K. Miettinen, Nonlinear Multiobjective Optimization (Kluwer, 1999), Ch. 3
   (weighted sums and their limitation to convex fronts).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from chiropt.errors import InputError
from chiropt.search.driver import SearchResult, minimize
from chiropt.search.executor import Executor, SerialExecutor
from chiropt.search.pareto import non_dominated
from chiropt.problem import Evaluation, Problem, VectorProblem
from chiropt.search.problem import check_bounds

__all__ = ["FrontPoint", "FrontResult", "Scalarized", "anchor_second_stage",
           "epsilon_constraint", "weighted_sum"]


class Scalarized:
    """A scalar ``Problem`` made from a two-objective ``VectorProblem``.

    Parameters
    ----------
    problem : VectorProblem
        Two objectives with senses, ``m`` constraints.
    mode : str
        ``"single"`` (minimize ``h_k``), ``"bounded"`` (minimize ``h_k`` with
        ``h_j <= bound``), or ``"weighted"`` (minimize ``w h_1 + (1 - w) h_2``).
    k : int
        Objective minimized by ``"single"`` and ``"bounded"`` (0 or 1).
    value : float
        ``bound`` for ``"bounded"``, ``w`` for ``"weighted"`` [normalized units].
    ideal, scale : array_like, shape (2,)
        Normalization ``h = (z - ideal) / scale`` [objective units].

    Notes
    -----
    The evaluation's ``metrics`` carry the raw objective values under ``"objectives"``
    (NaN when failed) next to the vector problem's own metrics.
    """

    n_objectives = 1

    def __init__(self, problem: VectorProblem, mode: str, k: int, value: float, ideal, scale):
        if mode not in ("single", "bounded", "weighted"):
            raise ValueError(f"unknown scalarization {mode!r}")
        self.problem = problem
        self.mode = mode
        self.k = int(k)
        self.value = float(value)
        self.ideal = np.asarray(ideal, dtype=float)
        self.scale = np.asarray(scale, dtype=float)
        self.sign = np.array([-1.0 if s == "max" else 1.0 for s in problem.senses])
        self.lower, self.upper = problem.lower, problem.upper
        self.m_problem = int(problem.n_constraints)
        self.n_constraints = self.m_problem + (1 if mode == "bounded" else 0)

    def evaluate(self, x: np.ndarray, need_grad: bool) -> Evaluation:
        """Scalarized objective and constraints at ``x``."""
        ve = self.problem.evaluate(x, need_grad)
        metrics = {**dict(ve.metrics), "objectives": [float(v) for v in ve.f]}
        if ve.status != "ok":
            return Evaluation.failed(ve.reason, self.n_constraints, metrics)
        h = (self.sign * ve.f - self.ideal) / self.scale
        dh = None
        if need_grad:
            dh = (self.sign / self.scale)[:, None] * ve.df
        g, dg = ve.g, ve.dg
        if self.mode == "weighted":
            w = np.array([self.value, 1.0 - self.value])
            f = float(w @ h)
            df = None if dh is None else w @ dh
        else:
            f = float(h[self.k])
            df = None if dh is None else dh[self.k]
        if self.mode == "bounded":
            j = 1 - self.k
            g = np.concatenate([g, [h[j] - self.value]])
            if need_grad:
                dg_p = ve.dg if ve.dg is not None else np.zeros((0, x.shape[0]))
                dg = np.concatenate([dg_p, dh[j][None, :]], axis=0)
        if need_grad and dg is None:
            dg = np.zeros((self.n_constraints, x.shape[0]))
        return Evaluation(f=f, g=g, df=df, dg=dg, metrics=metrics)


@dataclass(frozen=True)
class FrontPoint:
    """The outcome of one scalarized search.

    Attributes
    ----------
    label : str
        ``"anchor-1"``, ``"anchor-2"``, ``"sweep-<i>"``.
    parameter : float
        Bound on ``h_2`` (epsilon-constraint) or weight ``w`` (weighted sum); NaN for
        anchors [normalized units].
    x : ndarray, shape (n,)
        Best design of the search [design-variable units].
    f : ndarray, shape (2,)
        Its objectives in their own units and senses [objective units].
    g : ndarray, shape (m,)
        Its constraints of the vector problem [constraint units].
    feasible : bool
        Whether it satisfies the problem's constraints (within the driver's tolerance).
    search : SearchResult
        The search itself.
    """

    label: str
    parameter: float
    x: np.ndarray
    f: np.ndarray
    g: np.ndarray
    feasible: bool
    search: SearchResult


@dataclass
class FrontResult:
    """A traced bi-objective front.

    Attributes
    ----------
    senses : tuple of str
        Senses of the two objectives.
    points : list of FrontPoint
        Anchors first (objective 1's, then objective 2's), then the sweep points in order.
    front : ndarray of bool, shape (len(points),)
        Feasible, non-dominated points among ``points``.
    ideal, nadir : ndarray, shape (2,)
        Best and worst value of each objective over the two anchors, in the objectives' own
        units and senses [objective units].
    evaluations : dict of ndarray
        Every evaluation of every search: ``x`` (N, n), ``f`` (N, 2) (NaN when failed),
        ``g`` (N, m), ``status`` (N,), ``feasible`` (N,), ``search`` (N,) (index into
        ``points``), and ``front`` (N,): the feasible non-dominated evaluations.
    degenerate : bool
        True when the anchors coincide in an objective (no trade-off): no sweep was run.
    """

    senses: tuple[str, ...]
    points: list[FrontPoint]
    front: np.ndarray
    ideal: np.ndarray
    nadir: np.ndarray
    evaluations: dict[str, np.ndarray] = field(default_factory=dict)
    degenerate: bool = False

    @property
    def front_x(self) -> np.ndarray:
        """Designs of the non-dominated points [design-variable units]."""
        return np.array([p.x for p, keep in zip(self.points, self.front, strict=True) if keep])

    @property
    def front_f(self) -> np.ndarray:
        """Objectives of the non-dominated points [objective units]."""
        return np.array([p.f for p, keep in zip(self.points, self.front, strict=True) if keep])


@dataclass(frozen=True)
class _FrontTask:
    scalarized: Scalarized
    x0: np.ndarray
    algorithm: str
    seed: int
    options: dict
    wrap: Callable[[Problem, str, int], Problem] | None
    stage: str
    index: int


def _run_front_task(task: _FrontTask) -> SearchResult:
    problem: Problem = task.scalarized
    if task.wrap is not None:
        problem = task.wrap(problem, task.stage, task.index)
    return minimize(problem, task.x0, task.algorithm, seed=task.seed, **task.options)


def _best_objectives(result: SearchResult) -> np.ndarray:
    if result.i_best < 0:
        return np.full(2, np.nan)
    return np.asarray(result.history[result.i_best].evaluation.metrics["objectives"], float)


def _trace(
    problem: VectorProblem,
    points: int,
    mode: str,
    *,
    algorithm: str,
    x0,
    seed: int,
    executor: Executor | None,
    wrap,
    stage: str,
    anchor_tol: float,
    options: dict[str, Any],
) -> FrontResult:
    senses = tuple(str(s).lower() for s in problem.senses)
    if len(senses) != 2 or int(problem.n_objectives) != 2:
        raise InputError("search.objectives", f"a front needs exactly 2 objectives; got {senses}")
    if any(s not in ("max", "min") for s in senses):
        raise InputError("search.senses", f"senses must be 'max' or 'min'; got {senses}")
    if not (isinstance(points, int | np.integer) and points >= 2):
        raise InputError("search.points", f"must be an integer >= 2 (anchors); got {points!r}")
    if "seed" in options:
        raise InputError("search.seed", "give the seed as the `seed` argument")
    lo, hi = check_bounds(problem.lower, problem.upper)
    x0 = (0.5 * (lo + hi)) if x0 is None else np.asarray(x0, dtype=float)
    ex = executor or SerialExecutor()
    m = int(problem.n_constraints)
    sign = np.array([-1.0 if s == "max" else 1.0 for s in senses])
    zero, one = np.zeros(2), np.ones(2)

    def task(scal, start, index, **override):
        opts = {**options, **override}
        return _FrontTask(scal, start, algorithm, seed + index, opts, wrap, stage, index)

    # anchors, stage one: each objective alone, raw (min-form) units
    first = ex.map(
        _run_front_task, [task(Scalarized(problem, "single", k, 0.0, zero, one), x0, k)
                          for k in (0, 1)],
    )  # fmt: skip
    # stage two: the other objective, with this one held at its optimum
    second_tasks = []
    for k in (0, 1):
        scal, tol = anchor_second_stage(problem, k, first[k], anchor_tol, options)
        second_tasks.append(task(scal, first[k].x_best, 2 + k, feasibility_tol=tol))
    second = ex.map(_run_front_task, second_tasks)
    anchors = [second[k] if second[k].feasible else first[k] for k in (0, 1)]
    fa = np.array([_best_objectives(r) for r in anchors])  # (anchor, objective), raw
    za = fa * sign
    ideal = np.array([za[0, 0], za[1, 1]])
    nadir = np.array([za[1, 0], za[0, 1]])
    scale = nadir - ideal
    degenerate = bool(np.any(~(scale > 1e-12 * (np.abs(ideal) + 1.0))))
    results: list[SearchResult] = list(anchors)
    labels = ["anchor-1", "anchor-2"]
    params = [np.nan, np.nan]
    if not degenerate and points > 2:
        xa, xb = anchors[0].x_best, anchors[1].x_best
        sweep = []
        for i in range(1, points - 1):
            t = i / (points - 1)
            value = 1.0 - t
            if mode == "epsilon":
                scal = Scalarized(problem, "bounded", 0, value, ideal, scale)
            else:
                scal = Scalarized(problem, "weighted", 0, value, ideal, scale)
            sweep.append(task(scal, xa + t * (xb - xa), 3 + i))
            labels.append(f"sweep-{i}")
            params.append(value)
        results.extend(ex.map(_run_front_task, sweep))
    front_points = []
    for label, param, r in zip(labels, params, results, strict=True):
        f = _best_objectives(r)
        g = r.g_best[:m]
        feasible = bool(r.i_best >= 0 and (m == 0 or np.max(g) <= _tol(options)))
        front_points.append(FrontPoint(label, float(param), r.x_best, f, g, feasible, r))
    F = np.array([p.f for p in front_points])
    F_feas = np.where(np.array([p.feasible for p in front_points])[:, None], F, np.nan)
    front = non_dominated(F_feas, senses)
    return FrontResult(
        senses=senses,
        points=front_points,
        front=front,
        ideal=ideal * sign,
        nadir=nadir * sign,
        evaluations=_all_evaluations(first + second + results[2:], senses, m, options),
        degenerate=degenerate,
    )


def anchor_second_stage(problem: VectorProblem, k: int, first: SearchResult,
                        anchor_tol: float, options) -> tuple[Scalarized, float]:
    """Stage two of the lexicographic anchor of objective ``k`` (see the module notes).

    Returns the scalarized problem (the other objective, with objective ``k`` held within
    ``anchor_tol (|z_k*| + 1)`` of the optimum ``first`` found) and the feasibility
    tolerance its search accepts (no more than that slack, so the anchor keeps its optimum).
    """
    sign = np.array([-1.0 if s == "max" else 1.0 for s in problem.senses])
    zk = float(sign[k] * _best_objectives(first)[k])
    if not np.isfinite(zk):
        raise InputError(
            "search.anchors",
            f"the search for the optimum of objective {k + 1} found no successful "
            f"evaluation ({first.n_failed} failed); check the model and the bounds",
        )
    slack = anchor_tol * (abs(zk) + 1.0)
    scal = Scalarized(problem, "bounded", 1 - k, zk + slack, np.zeros(2), np.ones(2))
    return scal, min(_tol(options), slack)


def _tol(options) -> float:
    return float(options.get("feasibility_tol", 1e-6))


def _all_evaluations(results, senses, m, options) -> dict[str, np.ndarray]:
    xs, fs, gs, status, search = [], [], [], [], []
    for j, r in enumerate(results):
        for t in r.history:
            ev = t.evaluation
            xs.append(t.x)
            fs.append(ev.metrics.get("objectives", [np.nan, np.nan]))
            gs.append(ev.g[:m])
            status.append(ev.status)
            search.append(j)
    if not xs:
        return {}
    F = np.asarray(fs, dtype=float)
    G = np.asarray(gs, dtype=float).reshape(len(xs), m)
    ok = np.array([s == "ok" for s in status]) & np.all(np.isfinite(F), axis=1)
    feasible = ok & (np.all(G <= _tol(options), axis=1) if m else True)
    front = non_dominated(np.where(feasible[:, None], F, np.nan), senses)
    return {
        "x": np.asarray(xs),
        "f": F,
        "g": G,
        "status": np.asarray(status, dtype=str),
        "feasible": feasible,
        "search": np.asarray(search, dtype=int),
        "front": front,
    }


def epsilon_constraint(
    problem: VectorProblem,
    points: int,
    *,
    algorithm: str = "SLSQP",
    x0=None,
    seed: int = 0,
    executor: Executor | None = None,
    wrap: Callable[[Problem, str, int], Problem] | None = None,
    stage: str = "front",
    anchor_tol: float = 1e-9,
    **options: Any,
) -> FrontResult:
    """Trace a bi-objective front by the epsilon-constraint method.

    Parameters
    ----------
    problem : VectorProblem
        Two objectives with senses and ``m`` constraints (picklable for process executors).
    points : int
        Number of front points including the two anchors (>= 2).
    algorithm : str
        Local algorithm that handles constraints (``"SLSQP"``, ``"MMA"``, ``"COBYLA"``...).
    x0 : array_like, shape (n,), optional
        Start of the anchor searches [design-variable units]; default the box centre.
    seed : int
        Seed; search ``i`` (see the module conventions) uses ``seed + i``.
    executor : Executor, optional
        Where the searches of one phase run in parallel (default: serially here).
    wrap : callable, optional
        ``wrap(problem, stage, index) -> Problem`` (the store's caching wrapper).
    stage : str
        Stage label passed to ``wrap``.
    anchor_tol : float
        Slack of the lexicographic anchor constraint (relative, see module docstring).
    **options
        Keyword options of ``chiropt.search.driver.minimize``.

    Returns
    -------
    FrontResult
    """
    return _trace(problem, points, "epsilon", algorithm=algorithm, x0=x0, seed=seed,
                  executor=executor, wrap=wrap, stage=stage, anchor_tol=anchor_tol,
                  options=options)  # fmt: skip


def weighted_sum(
    problem: VectorProblem,
    points: int,
    *,
    algorithm: str = "SLSQP",
    x0=None,
    seed: int = 0,
    executor: Executor | None = None,
    wrap: Callable[[Problem, str, int], Problem] | None = None,
    stage: str = "front",
    anchor_tol: float = 1e-9,
    **options: Any,
) -> FrontResult:
    """Trace the convex part of a bi-objective front by weighted sums.

    Parameters are those of ``epsilon_constraint``; sweep point ``i`` minimizes
    ``w h_1 + (1 - w) h_2`` with ``w = 1 - i / (points - 1)``.

    Returns
    -------
    FrontResult
    """
    return _trace(problem, points, "weighted", algorithm=algorithm, x0=x0, seed=seed,
                  executor=executor, wrap=wrap, stage=stage, anchor_tol=anchor_tol,
                  options=options)  # fmt: skip
