"""Problems built for the search drivers: bound checks and ``FunctionProblem``.

Owns: ``check_bounds`` (validation of a box) and ``FunctionProblem``, a ``Problem`` built
from plain callables. The interface itself (``Problem``, ``Evaluation`` and their vector
counterparts) is :mod:`chiropt.problem`, shared with the store and the goal layer.

Must not import: physics modules, store, report, cli.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from chiropt.errors import InputError
from chiropt.problem import Evaluation

__all__ = [
    "FunctionProblem",
    "check_bounds",
]


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
