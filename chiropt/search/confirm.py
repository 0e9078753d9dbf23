"""Confirmation stage: re-solve front designs with a rigorous model, optionally polish.

Owns: the goal with its design's ``model`` replaced by ``search.confirm.model`` (for
example the Fourier solver at ``harmonics: auto`` behind a multipole or low-count search),
the confirmed objective and constraint values of given designs with that model's
truncation report (harmonic count and last change, or multipole order), and a short local
polish of the best candidates in the rigorous model (SLSQP from the front design,
maximizing one objective while keeping the other at least at its confirmed value and
every constraint).
Must not import: store, report, cli.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as onp
from scipy.optimize import minimize

from chiropt.design import design_from_dict
from chiropt.errors import InputError


@dataclass
class Confirmed:
    """One design re-solved by the confirmation model.

    f (M,), g (m,) as the goal's problem defines them; ``status`` 'ok' or 'failed';
    ``model`` a short text (e.g. '301 harmonics' or 'lmax = 5'); ``change`` the last
    change the model's own truncation check saw (NaN when it has none).
    """

    x: Any
    f: Any
    g: Any
    status: str
    model: str
    change: float


def confirm_goal(goal, model: dict):
    """The goal with its design's ``model:`` section replaced (validated, key-named)."""
    data = goal.design.to_dict()
    data["model"] = dict(model)
    try:
        design = design_from_dict(data, base_dir=goal.design.base_dir)
    except InputError as exc:
        key = "search.confirm." + exc.key if exc.key else "search.confirm"
        raise InputError(key, exc.message) from None
    return replace(goal, design=design)


def _model_text(output) -> tuple[str, float]:
    if output.harmonics is not None:
        change = output.harmonics_change
        return f"{output.harmonics} harmonics", float("nan") if change is None else change
    return f"lmax = {output.lmax}", float("nan")


def confirm_designs(goal, X, model: dict) -> list[Confirmed]:
    """Re-solve designs ``X`` (K, n) of ``goal`` with the confirmation ``model``.

    Returns a :class:`Confirmed` per design (failed solves keep NaN values and the
    reason as ``model``).
    """
    from chiropt.goals.objectives import GoalProblem
    from chiropt.model import run_model

    problem = GoalProblem(confirm_goal(goal, model))
    out = []
    for x in onp.atleast_2d(onp.asarray(X, float)):
        ev = problem.evaluate(x, False)
        if ev.status != "ok":
            nan_f = onp.full(problem.n_objectives, onp.nan)
            out.append(Confirmed(x, nan_f, onp.full(problem.n_constraints, onp.nan),
                                 "failed", ev.reason, onp.nan))
            continue
        text, change = _model_text(run_model(problem.design_at(x)))
        out.append(Confirmed(x, onp.asarray(ev.f, float), onp.asarray(ev.g, float), "ok",
                             text, change))
    return out


def polish(goal, model: dict, x0, objective: int, keep_at_least: float | None, *,
           max_evals: int = 15, start: Confirmed | None = None) -> Confirmed:
    """Short SLSQP polish of ``x0`` in the confirmation model.

    Maximizes (or minimizes, per its sense) objective ``objective`` within the variable
    bounds, subject to the goal's constraints and, for two objectives, the other one kept
    at least at ``keep_at_least`` in its own sense. Exact gradients of the model.
    ``start``: ``x0`` already confirmed with ``model`` (not solved again).
    """
    from chiropt.goals.objectives import GoalProblem

    problem = GoalProblem(confirm_goal(goal, model))
    sign = onp.array([1.0 if s == "max" else -1.0 for s in problem.senses])
    lo = onp.array([v.lower for v in goal.variables], float)
    hi = onp.array([v.upper for v in goal.variables], float)
    span = onp.where(hi > lo, hi - lo, 1.0)
    cache: dict = {}

    def at(z):
        key = z.tobytes()
        if key not in cache:
            cache.clear()
            cache[key] = problem.evaluate(lo + z * span, True)
        return cache[key]

    def fun(z):
        ev = at(z)
        return -sign[objective] * ev.f[objective], -sign[objective] * ev.df[objective] * span

    cons = []
    if problem.n_constraints:
        cons.append({"type": "ineq", "fun": lambda z: -at(z).g,
                     "jac": lambda z: -at(z).dg * span[None, :]})
    if keep_at_least is not None and problem.n_objectives == 2:
        other = 1 - objective
        cons.append({"type": "ineq",
                     "fun": lambda z: onp.atleast_1d(sign[other] * (at(z).f[other]
                                                                      - keep_at_least)),
                     "jac": lambda z: (sign[other] * at(z).df[other] * span)[None, :]})
    z0 = (onp.asarray(x0, float) - lo) / span
    res = minimize(fun, z0, jac=True, method="SLSQP", bounds=[(0.0, 1.0)] * len(z0),
                   constraints=cons, options={"maxiter": max_evals, "ftol": 1e-9})
    best = confirm_designs(goal, [lo + onp.clip(res.x, 0.0, 1.0) * span], model)[0]
    start = start if start is not None else confirm_designs(goal, [x0], model)[0]
    ok = best.status == "ok" and (not problem.n_constraints or onp.all(best.g <= 1e-9))
    better = ok and sign[objective] * best.f[objective] >= sign[objective] * start.f[objective]
    return best if better else start
