"""Registry of the optimization algorithms, by trade name, mapped onto nlopt.

Owns: the name -> ``AlgorithmInfo`` table and the case-insensitive lookup with a helpful
error for unknown names.

Must not import: physics modules, store, report, cli.

Constraint handling (fixed here, used by ``chiropt.search.driver``)
-------------------------------------------------------------------
- ``"native"``: the nlopt algorithm takes the inequality constraints itself
  (MMA, SLSQP, COBYLA, ISRES).
- ``"auglag"``: local algorithms without native constraints (L-BFGS, BOBYQA, Subplex) run as
  the subsidiary of nlopt's augmented Lagrangian (``LD_AUGLAG`` / ``LN_AUGLAG``), which
  converges to a constrained local optimum.
- ``"penalty"``: global algorithms without native constraints (DIRECT-L, CRS2, ESCH) minimize
  the exact L1 penalty ``f + w * sum(max(g, 0))``. An augmented Lagrangian around a global
  subsidiary would spend the whole evaluation budget on its first sub-problem, since global
  methods stop on the budget only, so a penalty is the more predictable choice there.

Problems without constraints always run the bare algorithm.

References
----------
.. [1] S. G. Johnson, The NLopt nonlinear-optimization package,
   https://github.com/stevengj/nlopt (algorithm descriptions and citations in its docs).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import nlopt

from chiropt.errors import InputError

__all__ = ["ALGORITHMS", "AlgorithmInfo", "algorithm_names", "get_algorithm"]

FAMILIES = ("gradient", "derivative-free", "global")
CONSTRAINT_MODES = ("native", "auglag", "penalty")


@dataclass(frozen=True)
class AlgorithmInfo:
    """One algorithm of the registry.

    Attributes
    ----------
    name : str
        Trade name (the key users write).
    nlopt_code : int
        nlopt algorithm constant.
    family : str
        ``"gradient"``, ``"derivative-free"`` or ``"global"``.
    uses_gradient : bool
        Whether the objective and constraint gradients are requested.
    native_constraints : bool
        Whether nlopt takes nonlinear inequality constraints for it directly.
    constraint_mode : str
        ``"native"``, ``"auglag"`` or ``"penalty"`` (see the module docstring).
    stochastic : bool
        Whether the algorithm draws random numbers (seeded through ``nlopt.srand``).
    summary : str
        One line for listings.
    """

    name: str
    nlopt_code: int
    family: str
    uses_gradient: bool
    native_constraints: bool
    constraint_mode: str
    stochastic: bool
    summary: str

    @property
    def is_global(self) -> bool:
        """True for the global family (needs finite bounds, ignores the start point)."""
        return self.family == "global"


def _info(name, code, family, grad, native, stochastic, summary) -> AlgorithmInfo:
    if native:
        mode = "native"
    elif family == "global":
        mode = "penalty"
    else:
        mode = "auglag"
    return AlgorithmInfo(name, code, family, grad, native, mode, stochastic, summary)


ALGORITHMS: dict[str, AlgorithmInfo] = {
    a.name: a
    for a in (
        _info("MMA", nlopt.LD_MMA, "gradient", True, True, False,
              "method of moving asymptotes (Svanberg 2002)"),
        _info("SLSQP", nlopt.LD_SLSQP, "gradient", True, True, False,
              "sequential least-squares quadratic programming (Kraft 1988)"),
        _info("L-BFGS", nlopt.LD_LBFGS, "gradient", True, False, False,
              "limited-memory BFGS (Nocedal 1980; Liu & Nocedal 1989)"),
        _info("COBYLA", nlopt.LN_COBYLA, "derivative-free", False, True, False,
              "linear approximations in a trust region (Powell 1994)"),
        _info("BOBYQA", nlopt.LN_BOBYQA, "derivative-free", False, False, False,
              "bound-constrained quadratic models (Powell 2009)"),
        _info("Subplex", nlopt.LN_SBPLX, "derivative-free", False, False, False,
              "Nelder-Mead on subspaces (Rowan 1990)"),
        _info("DIRECT-L", nlopt.GN_DIRECT_L, "global", False, False, False,
              "locally biased dividing rectangles (Gablonsky & Kelley 2001)"),
        _info("CRS2", nlopt.GN_CRS2_LM, "global", False, False, True,
              "controlled random search with local mutation (Kaelo & Ali 2006)"),
        _info("ISRES", nlopt.GN_ISRES, "global", False, True, True,
              "improved stochastic ranking evolution strategy (Runarsson & Yao 2005)"),
        _info("ESCH", nlopt.GN_ESCH, "global", False, False, True,
              "evolutionary algorithm (da Silva Santos et al. 2010)"),
    )
}  # fmt: skip

_BY_LOWER = {k.lower(): v for k, v in ALGORITHMS.items()}


def algorithm_names() -> list[str]:
    """Trade names of all registered algorithms, in registry order."""
    return list(ALGORITHMS)


def get_algorithm(name: str | AlgorithmInfo) -> AlgorithmInfo:
    """Look an algorithm up by trade name (case-insensitive).

    Parameters
    ----------
    name : str or AlgorithmInfo
        Trade name such as ``"MMA"`` or ``"cobyla"``; an ``AlgorithmInfo`` passes through.

    Returns
    -------
    AlgorithmInfo

    Raises
    ------
    chiropt.errors.InputError
        Unknown name (key ``search.algorithm``); the message lists the valid names and the
        closest one.
    """
    if isinstance(name, AlgorithmInfo):
        return name
    key = str(name).strip().lower()
    if key in _BY_LOWER:
        return _BY_LOWER[key]
    close = difflib.get_close_matches(key, list(_BY_LOWER), n=1, cutoff=0.0)
    hint = f" Did you mean {_BY_LOWER[close[0]].name!r}?" if close else ""
    raise InputError(
        "search.algorithm",
        f"unknown algorithm {name!r}; valid names: {', '.join(ALGORITHMS)}.{hint}",
    )
