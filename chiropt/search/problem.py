"""The one hook between a model and the search drivers.

Owns: the ``Problem`` interface (bounds, counts, ``evaluate(x, need_grad)``), the
``Evaluation`` record it returns, their bi-/multi-objective counterparts ``VectorProblem`` and
``VectorEvaluation``, and ``FunctionProblem``, a Problem built from plain callables.

Must not import: physics modules, store, report, cli.

Conventions
-----------
- ``x`` is the design vector, a float64 array of shape (n,), inside ``[lower, upper]``.
- A ``Problem`` is a single objective to MINIMIZE (a maximized quantity enters with its sign
  changed by the caller) with ``m`` inequality constraints written ``g(x) <= 0``.
- Gradients: ``df`` has shape (n,), ``dg`` shape (m, n); both are ``None`` unless
  ``need_grad`` was True.
- ``status`` is ``"ok"`` or ``"failed"``; a failed evaluation carries a human-readable
  ``reason`` and its numbers are not used by the drivers (they substitute a penalty).
- ``metrics`` is a flat dict of JSON-serializable extras (numbers, strings, lists) kept with
  the evaluation in the store.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol, runtime_checkable

import numpy as np

from chiropt.errors import InputError

__all__ = [
    "Evaluation",
    "FunctionProblem",
    "Problem",
    "VectorEvaluation",
    "VectorProblem",
    "check_bounds",
]

STATUSES = ("ok", "failed")


def _as_jacobian(a, rows: int) -> np.ndarray:
    """A float array of shape (rows, n); a 1-D array is read as a single row."""
    a = np.asarray(a, dtype=float)
    if a.ndim == 1 and rows == 1:
        return a.reshape(1, -1)
    if a.ndim == 2 and a.shape[0] == rows:
        return a
    if a.size == 0 and rows == 0:
        return a.reshape(0, a.shape[-1] if a.ndim == 2 else 0)
    raise ValueError(f"Jacobian of shape {a.shape} does not have {rows} rows")


@dataclass(frozen=True)
class Evaluation:
    """Result of one scalar-objective evaluation.

    Attributes
    ----------
    f : float
        Objective to minimize [objective units].
    g : ndarray, shape (m,)
        Constraint values, feasible when ``g <= 0`` [constraint units].
    df, dg : ndarray or None
        Gradients of ``f`` (n,) and ``g`` (m, n) with respect to ``x``.
    status : str
        ``"ok"`` or ``"failed"``.
    reason : str
        Why the evaluation failed (empty when ok).
    metrics : dict
        JSON-serializable extras stored with the evaluation.
    """

    f: float
    g: np.ndarray = field(default_factory=lambda: np.zeros(0))
    df: np.ndarray | None = None
    dg: np.ndarray | None = None
    status: str = "ok"
    reason: str = ""
    metrics: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}; got {self.status!r}")
        object.__setattr__(self, "f", float(self.f))
        object.__setattr__(self, "g", np.asarray(self.g, dtype=float).reshape(-1))
        if self.df is not None:
            object.__setattr__(self, "df", np.asarray(self.df, dtype=float).reshape(-1))
        if self.dg is not None:
            object.__setattr__(self, "dg", _as_jacobian(self.dg, self.g.shape[0]))

    @classmethod
    def failed(cls, reason: str, n_constraints: int, metrics=None) -> Evaluation:
        """A failed evaluation (NaN values) with its reason."""
        return cls(
            f=float("nan"),
            g=np.full(n_constraints, np.nan),
            status="failed",
            reason=str(reason),
            metrics=dict(metrics or {}),
        )

    @property
    def ok(self) -> bool:
        """True when the evaluation succeeded and its numbers are finite."""
        return (
            self.status == "ok" and bool(np.isfinite(self.f)) and bool(np.all(np.isfinite(self.g)))
        )

    def violation(self) -> float:
        """Largest constraint violation ``max(0, max g)``; ``inf`` for a failed evaluation."""
        if not self.ok:
            return float("inf")
        return float(max(0.0, np.max(self.g))) if self.g.size else 0.0


@runtime_checkable
class Problem(Protocol):
    """A scalar objective with inequality constraints over a box (the one hook).

    Attributes
    ----------
    lower, upper : ndarray, shape (n,)
        Bounds of the design vector [design-variable units].
    n_constraints : int
        Number ``m`` of inequality constraints ``g <= 0``.
    n_objectives : int
        Always 1 for a ``Problem``.
    """

    lower: np.ndarray
    upper: np.ndarray
    n_constraints: int
    n_objectives: int

    def evaluate(self, x: np.ndarray, need_grad: bool) -> Evaluation:
        """Evaluate the objective and constraints at ``x`` (and their gradients)."""
        ...


@dataclass(frozen=True)
class VectorEvaluation:
    """Result of one evaluation of several objectives.

    Attributes
    ----------
    f : ndarray, shape (M,)
        Objective values in their own senses (see ``VectorProblem.senses``)
        [objective units].
    g : ndarray, shape (m,)
        Constraint values, feasible when ``g <= 0`` [constraint units].
    df, dg : ndarray or None
        Jacobians of ``f`` (M, n) and ``g`` (m, n).
    status, reason, metrics
        As in ``Evaluation``.
    """

    f: np.ndarray
    g: np.ndarray = field(default_factory=lambda: np.zeros(0))
    df: np.ndarray | None = None
    dg: np.ndarray | None = None
    status: str = "ok"
    reason: str = ""
    metrics: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}; got {self.status!r}")
        object.__setattr__(self, "f", np.asarray(self.f, dtype=float).reshape(-1))
        object.__setattr__(self, "g", np.asarray(self.g, dtype=float).reshape(-1))
        if self.df is not None:
            object.__setattr__(self, "df", _as_jacobian(self.df, self.f.shape[0]))
        if self.dg is not None:
            object.__setattr__(self, "dg", _as_jacobian(self.dg, self.g.shape[0]))


@runtime_checkable
class VectorProblem(Protocol):
    """Several objectives with senses, inequality constraints and a box.

    Attributes
    ----------
    lower, upper : ndarray, shape (n,)
        Bounds of the design vector [design-variable units].
    senses : tuple of str, length M
        ``"max"`` or ``"min"`` per objective.
    n_objectives : int
        ``M``.
    n_constraints : int
        ``m``.
    """

    lower: np.ndarray
    upper: np.ndarray
    senses: tuple[str, ...]
    n_objectives: int
    n_constraints: int

    def evaluate(self, x: np.ndarray, need_grad: bool) -> VectorEvaluation:
        """Evaluate all objectives and constraints at ``x``."""
        ...


def check_bounds(lower, upper, *, key: str = "search.bounds") -> tuple[np.ndarray, np.ndarray]:
    """Validate a box and return it as float arrays.

    Parameters
    ----------
    lower, upper : array_like, shape (n,)
        Bounds [design-variable units]; ``lower < upper`` elementwise, no NaN.

    Returns
    -------
    lower, upper : ndarray, shape (n,)
    """
    lo = np.atleast_1d(np.asarray(lower, dtype=float))
    hi = np.atleast_1d(np.asarray(upper, dtype=float))
    if lo.ndim != 1 or lo.shape != hi.shape or lo.size == 0:
        raise InputError(
            key, f"lower and upper must be 1-D of equal length; got {lo.shape} and {hi.shape}"
        )
    if np.any(np.isnan(lo)) or np.any(np.isnan(hi)):
        raise InputError(key, "bounds contain NaN")
    bad = np.flatnonzero(~(lo < hi))
    if bad.size:
        i = int(bad[0])
        raise InputError(
            key,
            f"lower[{i}] = {lo[i]} is not below upper[{i}] = {hi[i]}; "
            "did you swap the lower and upper bounds?",
        )
    return lo, hi


class FunctionProblem:
    """A ``Problem`` assembled from plain callables.

    Parameters
    ----------
    objective : callable
        ``objective(x) -> float``, the quantity to minimize.
    lower, upper : array_like, shape (n,)
        Bounds [design-variable units].
    gradient : callable, optional
        ``gradient(x) -> (n,)``; required by gradient algorithms.
    constraints : callable, optional
        ``constraints(x) -> (m,)`` with feasibility ``<= 0``.
    constraints_jacobian : callable, optional
        ``constraints_jacobian(x) -> (m, n)``.
    n_constraints : int
        ``m`` (0 without ``constraints``).

    Notes
    -----
    For a process executor the callables must be picklable (module-level functions or
    ``functools.partial`` of them).
    """

    n_objectives = 1

    def __init__(
        self,
        objective: Callable[[np.ndarray], float],
        lower,
        upper,
        *,
        gradient: Callable[[np.ndarray], np.ndarray] | None = None,
        constraints: Callable[[np.ndarray], Sequence[float]] | None = None,
        constraints_jacobian: Callable[[np.ndarray], np.ndarray] | None = None,
        n_constraints: int = 0,
    ):
        self.lower, self.upper = check_bounds(lower, upper)
        self.objective = objective
        self.gradient = gradient
        self.constraints = constraints
        self.constraints_jacobian = constraints_jacobian
        if (constraints is None) != (n_constraints == 0):
            raise InputError(
                "search.constraints", "give constraints together with n_constraints > 0"
            )
        self.n_constraints = int(n_constraints)

    def evaluate(self, x: np.ndarray, need_grad: bool) -> Evaluation:
        """Evaluate the callables at ``x``."""
        f = self.objective(x)
        g = self.constraints(x) if self.constraints is not None else np.zeros(0)
        df = dg = None
        if need_grad:
            if self.gradient is None:
                raise InputError("search.algorithm", "a gradient algorithm needs `gradient`")
            df = self.gradient(x)
            if self.n_constraints:
                if self.constraints_jacobian is None:
                    raise InputError(
                        "search.algorithm",
                        "a gradient algorithm with constraints needs `constraints_jacobian`",
                    )
                dg = self.constraints_jacobian(x)
            else:
                dg = np.zeros((0, x.shape[0]))
        return Evaluation(f=f, g=g, df=df, dg=dg)
