"""The hypervolume reference point of a goal: fixed, so that runs compare.

Owns: ``reference_point`` (the goal's ``search.front.reference`` or the default derived
from the objectives). Must not import: search drivers, store, report, cli.

Default (stated in docs/goals.md §4): each metric at its value without any structure to
gain from, the incident circularly polarized plane wave (docs/theory.md §12): ``g``,
``c``, ``u``, ``s0`` (and their per-helicity forms) = 1 (the normalization of those
metrics: a plane wave has g = 1); ``docp`` = 0 (no circular polarization left: the bare
wave's own +1 is the largest value at normal incidence, so it cannot bound a front);
``background`` = 0 (an achiral structure); ``g_00`` = 1 (the bare wave's whole g);
``R``, ``T``, ``A``, and the capacity metrics (``ev_share``, ``cd_capacity``,
``cd_efficiency``, ``g_ev`` ...: 0 for the bare wave) = 0 when maximized, 1 when
minimized. A weighted objective takes the same weighted sum of
these values. The point is the same for every material and every run of a goal.
"""

from __future__ import annotations

from chiropt.goals.schema import Goal, Objective

__all__ = ["neutral_value", "reference_point"]

_ONE = ("g", "c", "u", "s0", "s0+1", "s0-1", "g_00")
_ZERO = ("docp", "docp+1", "docp-1", "background")


def neutral_value(metric: str, sense: str) -> float:
    """The default reference value of one metric (see the module notes) [metric units]."""
    if metric in _ONE:
        return 1.0
    if metric in _ZERO:
        return 0.0
    return 0.0 if sense == "max" else 1.0  # R, T, A, capacity metrics, per-helicity forms


def _default(o: Objective) -> float:
    return sum(w / n * neutral_value(m, o.sense) for m, w, n in o.terms)


def reference_point(goal: Goal) -> tuple[list[float], str]:
    """(reference value per objective [objective units], where it comes from)."""
    given = goal.search.front_reference
    if given is not None:
        return [float(v) for _, v in given], "search.front.reference of the goal"
    return ([_default(o) for o in goal.objectives],
            "default: the incident plane wave's value of each metric (g, c, u, s0: 1; "
            "docp, background: 0; R, T, A: 0 maximized, 1 minimized)")
