"""One local or global search of a ``Problem`` through nlopt.

Owns: ``minimize`` (the single driver every search goes through), ``SearchResult`` and
``Trial`` (one evaluation with its design vector), and the rules for failed evaluations and
evaluation budgets.

Must not import: physics modules, store, report, cli.

Conventions
-----------
- Every call of ``problem.evaluate`` is one evaluation, numbered in call order; nlopt asking
  the objective and the constraints at the same ``x`` (bit for bit) costs one evaluation.
- A failed evaluation (status ``"failed"``, a raised ``chiropt.errors.ComputationError`` or
  ``numpy.linalg.LinAlgError``, or non-finite numbers) is kept in the history and shown to
  nlopt as ``f = failure_value``, ``g = failure_value`` and zero gradients, so the search
  goes on. Any other exception is a bug and propagates.
- The search is deterministic given the answers of the problem and ``seed``: the
  stochastic algorithms draw from nlopt's generator, seeded with ``nlopt.srand(seed)`` just
  before the run, and no stopping rule depends on the clock. The store relies on this to
  resume a run by replaying stored answers.
- The best point is chosen from the history, not from nlopt's return value: the lowest
  ``f`` among successful evaluations with ``max(g) <= feasibility_tol``, otherwise the least
  infeasible successful one.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import nlopt
import numpy as np

from chiropt.errors import ComputationError, InputError
from chiropt.search.algorithms import AlgorithmInfo, get_algorithm
from chiropt.problem import Evaluation, Problem
from chiropt.search.problem import check_bounds

__all__ = ["SearchResult", "Trial", "minimize"]

_NLOPT_MESSAGES = {
    1: "success",
    2: "stopval reached",
    3: "ftol_rel/ftol_abs reached",
    4: "xtol_rel/xtol_abs reached",
    5: "max_evals reached",
    6: "maxtime reached",
    -1: "nlopt failure",
    -2: "invalid arguments",
    -3: "out of memory",
    -4: "roundoff limited",
    -5: "forced stop",
}


@dataclass(frozen=True)
class Trial:
    """One evaluation with the design vector it was made at.

    Attributes
    ----------
    x : ndarray, shape (n,)
        Design vector [design-variable units].
    evaluation : Evaluation
        What the problem answered.
    """

    x: np.ndarray
    evaluation: Evaluation


@dataclass
class SearchResult:
    """Outcome of one ``minimize`` run.

    Attributes
    ----------
    algorithm : str
        Trade name of the algorithm.
    x0 : ndarray, shape (n,)
        Start point [design-variable units].
    x_best : ndarray, shape (n,)
        Best design found (see the module conventions) [design-variable units].
    f_best : float
        Its objective (NaN when no evaluation succeeded) [objective units].
    g_best : ndarray, shape (m,)
        Its constraints [constraint units].
    feasible : bool
        Whether ``x_best`` satisfies ``max(g) <= feasibility_tol`` with status ok.
    n_evals : int
        Number of evaluations (calls of ``problem.evaluate``).
    n_failed : int
        How many of them failed.
    nlopt_result : int
        nlopt return code (5 also when the driver's own budget stopped the run).
    message : str
        Text of the return code.
    history : list of Trial
        Every evaluation in call order.
    i_best : int
        Index of ``x_best`` in ``history`` (-1 when no evaluation succeeded).
    """

    algorithm: str
    x0: np.ndarray
    x_best: np.ndarray
    f_best: float
    g_best: np.ndarray
    feasible: bool
    n_evals: int
    n_failed: int
    nlopt_result: int
    message: str
    history: list[Trial] = field(default_factory=list)
    i_best: int = -1


# nlopt's own early stops (roundoff, generic failure); names differ between binding versions
_NLOPT_STOPS = tuple(
    c
    for c in (getattr(nlopt, "RoundoffLimited", None), getattr(nlopt, "runtime_error", None))
    if isinstance(c, type)
) + (RuntimeError,)


class _BudgetExhausted(Exception):
    """Raised inside an nlopt callback when the evaluation budget is spent."""


class _Tracker:
    """Calls the problem, keeps the history and shapes the answers for nlopt."""

    def __init__(self, problem: Problem, need_grad: bool, max_evals: int, failure_value: float):
        self.problem = problem
        self.need_grad = need_grad
        self.max_evals = max_evals
        self.failure_value = failure_value
        self.m = int(problem.n_constraints)
        self.history: list[Trial] = []
        self._last_key: bytes | None = None
        self._last: tuple | None = None
        self.stop: BaseException | None = None  # why the callbacks asked nlopt to stop

    def values(self, x: np.ndarray):
        """(f, g, df, dg) presented to nlopt at ``x``."""
        x = np.array(x, dtype=float)  # nlopt reuses its buffer
        key = x.tobytes()
        if key == self._last_key:
            return self._last
        if len(self.history) >= self.max_evals:
            raise _BudgetExhausted
        try:
            ev = self.problem.evaluate(x.copy(), self.need_grad)
        except (ComputationError, np.linalg.LinAlgError) as exc:
            ev = Evaluation.failed(f"{type(exc).__name__}: {exc}", self.m)
        ev = self._checked(ev, x.shape[0])
        self.history.append(Trial(x=x, evaluation=ev))
        n = x.shape[0]
        if ev.status == "ok":
            df = ev.df if ev.df is not None else np.zeros(n)
            dg = ev.dg if ev.dg is not None else np.zeros((self.m, n))
            out = (ev.f, ev.g, df, dg)
        else:
            big = self.failure_value
            out = (big, np.full(self.m, big), np.zeros(n), np.zeros((self.m, n)))
        self._last_key, self._last = key, out
        return out

    def _checked(self, ev: Evaluation, n: int) -> Evaluation:
        if not isinstance(ev, Evaluation):
            raise TypeError(f"Problem.evaluate must return an Evaluation; got {type(ev)}")
        if ev.status != "ok":
            return ev
        if ev.g.shape != (self.m,):
            raise ValueError(f"Problem.evaluate returned g of shape {ev.g.shape}; "
                             f"n_constraints = {self.m}")
        reason = ""
        if not (np.isfinite(ev.f) and np.all(np.isfinite(ev.g))):
            reason = "non-finite objective or constraint"
        elif self.need_grad:
            if ev.df is None or (self.m and ev.dg is None):
                raise ValueError("a gradient algorithm needs df (and dg) from Problem.evaluate")
            if ev.df.shape != (n,) or (self.m and ev.dg.shape != (self.m, n)):
                raise ValueError(f"gradient shapes {ev.df.shape}, "
                                 f"{None if ev.dg is None else ev.dg.shape} do not match n = {n}")
            if not (np.all(np.isfinite(ev.df)) and (ev.dg is None or np.all(np.isfinite(ev.dg)))):
                reason = "non-finite gradient"
        if reason:
            return Evaluation(f=ev.f, g=ev.g, df=ev.df, dg=ev.dg, status="failed",
                              reason=reason, metrics=ev.metrics)
        return ev


def _check_options(xtol_rel, ftol_rel, max_evals, failure_value, penalty_weight):
    if not (isinstance(max_evals, int | np.integer) and max_evals >= 1):
        raise InputError("search.max_evals", f"must be an integer >= 1; got {max_evals!r}")
    for key, val in (("search.xtol_rel", xtol_rel), ("search.ftol_rel", ftol_rel)):
        if not (np.isfinite(val) and val >= 0):
            raise InputError(key, f"must be a finite number >= 0; got {val!r}")
    if not (np.isfinite(failure_value) and failure_value > 0):
        raise InputError("search.failure_value", f"must be finite and > 0; got {failure_value!r}")
    if not (np.isfinite(penalty_weight) and penalty_weight > 0):
        raise InputError("search.penalty_weight", f"must be finite and > 0; got {penalty_weight!r}")


def minimize(
    problem: Problem,
    x0,
    algorithm: str | AlgorithmInfo,
    *,
    xtol_rel: float = 1e-8,
    ftol_rel: float = 1e-10,
    max_evals: int = 500,
    seed: int = 0,
    feasibility_tol: float = 1e-6,
    constraint_tol: float = 1e-10,
    failure_value: float = 1e6,
    penalty_weight: float = 1e3,
) -> SearchResult:
    """Minimize ``problem`` from ``x0`` with one registered algorithm.

    Parameters
    ----------
    problem : Problem
        The scalar objective and its constraints ``g <= 0``.
    x0 : array_like, shape (n,)
        Start point inside the bounds [design-variable units]; global algorithms other than
        CRS2 and ISRES ignore it.
    algorithm : str or AlgorithmInfo
        Trade name (see ``chiropt.search.algorithms``), case-insensitive.
    xtol_rel, ftol_rel : float
        nlopt relative stopping tolerances on ``x`` and ``f`` (0 disables).
    max_evals : int
        Evaluation budget (hard cap, counted as calls of ``problem.evaluate``).
    seed : int
        Seed of nlopt's random generator (stochastic algorithms).
    feasibility_tol : float
        Constraint slack accepted when choosing the best point [constraint units].
    constraint_tol : float
        Tolerance passed to nlopt with each constraint [constraint units].
    failure_value : float
        Objective and constraint value shown to nlopt for a failed evaluation.
    penalty_weight : float
        ``w`` of the L1 penalty used by global algorithms without native constraints.

    Returns
    -------
    SearchResult
    """
    info = get_algorithm(algorithm)
    _check_options(xtol_rel, ftol_rel, max_evals, failure_value, penalty_weight)
    lo, hi = check_bounds(problem.lower, problem.upper)
    n = lo.size
    x0 = np.asarray(x0, dtype=float).reshape(-1)
    if x0.shape != (n,):
        raise InputError("search.x0", f"start point has {x0.size} entries; the problem has {n}")
    outside = np.flatnonzero((x0 < lo) | (x0 > hi) | ~np.isfinite(x0))
    if outside.size:
        i = int(outside[0])
        raise InputError(
            "search.x0", f"x0[{i}] = {x0[i]} lies outside the bounds [{lo[i]}, {hi[i]}]"
        )
    if info.is_global and not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
        raise InputError("search.bounds", f"{info.name} is a global algorithm and needs finite "
                         "lower and upper bounds")
    m = int(problem.n_constraints)
    mode = info.constraint_mode if m else "none"
    tracker = _Tracker(problem, info.uses_gradient, int(max_evals), float(failure_value))
    w = float(penalty_weight)

    # Exceptions never travel through nlopt (some algorithms keep calling after one, with
    # the Python error still pending): the callbacks record them, ask nlopt to stop, and
    # answer with the failure value until it does; they are re-raised below.
    def objective(x, grad):
        if tracker.stop is not None:
            grad[:] = 0.0
            return float(failure_value)
        try:
            f, g, df, dg = tracker.values(x)
        except BaseException as exc:
            tracker.stop = exc
            opt.force_stop()
            grad[:] = 0.0
            return float(failure_value)
        if mode == "penalty":
            active = g > 0
            f = f + w * float(np.sum(g[active]))
            df = df + w * np.sum(dg[active], axis=0)
        if grad.size:
            grad[:] = df
        return float(f)

    def constraints(result, x, grad):
        if tracker.stop is None:
            try:
                _, g, _, dg = tracker.values(x)
                result[:] = g
                if grad.size:
                    grad[:] = dg
                return
            except BaseException as exc:
                tracker.stop = exc
                opt.force_stop()
        result[:] = float(failure_value)
        if grad.size:
            grad[:] = 0.0

    if mode == "auglag":
        opt = nlopt.opt(nlopt.LD_AUGLAG if info.uses_gradient else nlopt.LN_AUGLAG, n)
        sub = nlopt.opt(info.nlopt_code, n)
        sub.set_xtol_rel(xtol_rel)
        sub.set_ftol_rel(ftol_rel)
        opt.set_local_optimizer(sub)
    else:
        opt = nlopt.opt(info.nlopt_code, n)
    opt.set_lower_bounds(lo)
    opt.set_upper_bounds(hi)
    opt.set_min_objective(objective)
    if mode in ("native", "auglag"):
        opt.add_inequality_mconstraint(constraints, [constraint_tol] * m)
    opt.set_xtol_rel(xtol_rel)
    opt.set_ftol_rel(ftol_rel)
    opt.set_maxeval(int(max_evals))
    nlopt.srand(int(seed))
    try:
        opt.optimize(x0)
        code = int(opt.last_optimize_result())
    except (nlopt.ForcedStop, *_NLOPT_STOPS):  # our request, or nlopt's own early stop
        code = int(opt.last_optimize_result())
    if isinstance(tracker.stop, _BudgetExhausted):
        code = nlopt.MAXEVAL_REACHED
    elif tracker.stop is not None:  # raised by the problem: a bug or an interruption
        raise tracker.stop
    return _result(info, x0, tracker.history, code, feasibility_tol, m)


def _result(info, x0, history, code, feasibility_tol, m) -> SearchResult:
    best = None
    best_key = None
    i_best = -1
    for i, t in enumerate(history):
        ev = t.evaluation
        if not ev.ok:
            continue
        v = ev.violation()
        key = (0, ev.f) if v <= feasibility_tol else (1, v)
        if best_key is None or key < best_key:
            best, best_key, i_best = t, key, i
    n_failed = sum(t.evaluation.status != "ok" for t in history)
    if best is None:
        x_best, f_best, g_best, feasible = x0.copy(), float("nan"), np.full(m, np.nan), False
    else:
        x_best, f_best, g_best = best.x, best.evaluation.f, best.evaluation.g
        feasible = best_key[0] == 0
    return SearchResult(
        algorithm=info.name,
        x0=x0,
        x_best=x_best,
        f_best=f_best,
        g_best=g_best,
        feasible=bool(feasible),
        n_evals=len(history),
        n_failed=int(n_failed),
        nlopt_result=int(code),
        message=_NLOPT_MESSAGES.get(int(code), f"nlopt code {code}"),
        history=list(history),
        i_best=i_best,
    )
