"""The problem interface and its evaluation records, shared by models, search and store.

Owns: the ``Problem`` interface (bounds, counts, ``evaluate(x, need_grad)``), the
``Evaluation`` record it returns, and their bi-/multi-objective counterparts
``VectorProblem`` and ``VectorEvaluation``. The goal layer implements the interface, the
search drivers (chiropt.search) consume it and the store (chiropt.store) records and replays
its answers; none of them owns it.

Must not import: any other chiropt module.

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

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol, runtime_checkable

import numpy as np

__all__ = [
    "Evaluation",
    "Problem",
    "VectorEvaluation",
    "VectorProblem",
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
