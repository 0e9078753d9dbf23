"""Multi-start search: many local searches from quasi-random start points.

Owns: scaled scrambled-Sobol start points, the per-start seeds, and ``multistart``, which runs
one ``minimize`` per start through an executor and picks the best result.

Must not import: physics modules, store, report, cli. (The store hooks in through ``wrap``,
a picklable callable supplied by the caller.)

Conventions
-----------
- Start ``k`` of a run with seed ``s`` always gets the same point and the same nlopt seed,
  whatever the executor and the number of workers, so a run is reproducible and resumable.
- ``wrap(problem, stage, k)`` (optional) returns the ``Problem`` actually searched for start
  ``k``; the store uses it to record and replay the evaluations of each start.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.stats import qmc

from chiropt.errors import InputError
from chiropt.search.driver import SearchResult, minimize
from chiropt.search.executor import Executor, SerialExecutor
from chiropt.problem import Problem
from chiropt.search.problem import check_bounds

__all__ = ["MultistartResult", "multistart", "pick_best", "sobol_starts", "start_seed"]


def sobol_starts(lower, upper, n_starts: int, *, seed: int) -> np.ndarray:
    """Scrambled Sobol points scaled to a box.

    Parameters
    ----------
    lower, upper : array_like, shape (n,)
        Finite bounds [design-variable units].
    n_starts : int
        Number of points (>= 1). The first ``n_starts`` points of a base-2 block are taken,
        so the first points do not change when ``n_starts`` grows.
    seed : int
        Seed of the Owen scrambling.

    Returns
    -------
    ndarray, shape (n_starts, n)
        Start points inside the box [design-variable units].

    References
    ----------
    .. [1] I. M. Sobol', USSR Comput. Math. Math. Phys. 7, 86 (1967).
    .. [2] A. B. Owen, "Scrambling Sobol' and Niederreiter-Xing points", J. Complexity 14,
       466 (1998); implementation ``scipy.stats.qmc.Sobol``.
    """
    lo, hi = check_bounds(lower, upper)
    if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
        raise InputError("search.bounds", "Sobol start points need finite lower and upper bounds")
    if not (isinstance(n_starts, int | np.integer) and n_starts >= 1):
        raise InputError("search.starts", f"must be an integer >= 1; got {n_starts!r}")
    m = int(np.ceil(np.log2(n_starts))) if n_starts > 1 else 0
    sampler = qmc.Sobol(d=lo.size, scramble=True, seed=np.random.default_rng(seed))
    u = sampler.random_base2(m)[:n_starts]
    return lo + (hi - lo) * u


def start_seed(seed: int, k: int) -> int:
    """nlopt seed of start ``k`` of a run seeded with ``seed`` (a 31-bit integer)."""
    state = np.random.SeedSequence([int(seed), int(k)]).generate_state(1, dtype=np.uint32)
    return int(state[0] >> 1)


@dataclass(frozen=True)
class _StartTask:
    problem: Problem
    algorithm: str
    x0: np.ndarray
    seed: int
    options: dict
    wrap: Callable[[Problem, str, int], Problem] | None
    stage: str
    index: int


def _run_start(task: _StartTask) -> SearchResult:
    problem = task.problem
    if task.wrap is not None:
        problem = task.wrap(problem, task.stage, task.index)
    return minimize(problem, task.x0, task.algorithm, seed=task.seed, **task.options)


def pick_best(results: list[SearchResult], feasibility_tol: float = 1e-6) -> int:
    """Index of the best result: lowest ``f_best`` among feasible ones, else least violation.

    Returns -1 when no result has a successful evaluation.
    """
    best, best_key = -1, None
    for i, r in enumerate(results):
        if not np.isfinite(r.f_best):
            continue
        v = float(max(0.0, np.max(r.g_best))) if r.g_best.size else 0.0
        key = (0, r.f_best) if (r.feasible or v <= feasibility_tol) else (1, v)
        if best_key is None or key < best_key:
            best, best_key = i, key
    return best


@dataclass
class MultistartResult:
    """All local searches of a multi-start run.

    Attributes
    ----------
    starts : ndarray, shape (K, n)
        Start points [design-variable units].
    results : list of SearchResult
        One per start, in start order.
    best : int
        Index of the best result (-1 if none succeeded).
    """

    starts: np.ndarray
    results: list[SearchResult] = field(default_factory=list)
    best: int = -1

    @property
    def x_best(self) -> np.ndarray:
        """Best design over all starts [design-variable units]."""
        return self.results[self.best].x_best

    @property
    def f_best(self) -> float:
        """Its objective [objective units]."""
        return self.results[self.best].f_best if self.best >= 0 else float("nan")

    @property
    def feasible(self) -> bool:
        """Whether the best design is feasible."""
        return self.best >= 0 and self.results[self.best].feasible

    @property
    def n_evals(self) -> int:
        """Evaluations over all starts."""
        return sum(r.n_evals for r in self.results)


def multistart(
    problem: Problem,
    algorithm: str,
    starts: int | Any,
    seed: int,
    executor: Executor | None = None,
    *,
    wrap: Callable[[Problem, str, int], Problem] | None = None,
    stage: str = "multistart",
    **options: Any,
) -> MultistartResult:
    """One local search per start point, run through an executor.

    Parameters
    ----------
    problem : Problem
        Scalar objective (picklable when the executor uses processes).
    algorithm : str
        Trade name of the algorithm.
    starts : int or array_like, shape (K, n)
        Number of scrambled-Sobol start points, or the start points themselves
        [design-variable units].
    seed : int
        Seed of the start points and of each start's nlopt generator.
    executor : Executor, optional
        Where the searches run (default: in this process, one after another).
    wrap : callable, optional
        ``wrap(problem, stage, k) -> Problem`` applied in the worker for start ``k``
        (e.g. the store's caching wrapper).
    stage : str
        Label passed to ``wrap``.
    **options
        Keyword options of ``chiropt.search.driver.minimize`` (``max_evals``,
        ``xtol_rel``, ...); ``seed`` is set per start.

    Returns
    -------
    MultistartResult
    """
    if "seed" in options:
        raise InputError("search.seed", "give the seed as the `seed` argument of multistart")
    lo, hi = check_bounds(problem.lower, problem.upper)
    if isinstance(starts, int | np.integer):
        X0 = sobol_starts(lo, hi, int(starts), seed=seed)
    else:
        X0 = np.atleast_2d(np.asarray(starts, dtype=float))
        if X0.shape[1] != lo.size or X0.shape[0] == 0:
            raise InputError(
                "search.starts", f"start points must have shape (K, {lo.size}); got {X0.shape}"
            )
    tasks = [
        _StartTask(problem, algorithm, X0[k], start_seed(seed, k), dict(options), wrap, stage, k)
        for k in range(X0.shape[0])
    ]
    results = (executor or SerialExecutor()).map(_run_start, tasks)
    tol = options.get("feasibility_tol", 1e-6)
    return MultistartResult(starts=X0, results=list(results), best=pick_best(results, tol))
