"""How a run progressed: its evaluations split into searches, and the best found so far.

Owns: ``search_streams`` and ``progress``, shared by the convergence plot
(``report.front``) and the report page (``report.runs``). Plain numpy on stored records.
Must not import: cli.
"""

from __future__ import annotations

import numpy as onp

from chiropt.search.pareto import hypervolume, non_dominated

__all__ = ["progress", "search_streams"]


def search_streams(records) -> dict[str, list]:
    """Records by search (``search.explore.search_key``), in their order; rows superseded
    by a grown budget (stage with ``:``) lie on no search's path and are left out."""
    from chiropt.search.explore import search_key

    streams: dict[str, list] = {}
    for r in records:
        if ":" not in r.stage:
            streams.setdefault(search_key(r.stage, r.start), []).append(r)
    return dict(sorted(streams.items()))


def progress(records, senses, reference, tol: float) -> list[float]:
    """After each record: the hypervolume at ``reference`` of the feasible front so far (two
    objectives; 0 before the first feasible point) or the best feasible objective (one; NaN
    before). Feasible: status ok and every constraint ``<= tol``."""
    M = len(senses)
    sign = 1.0 if senses[0] == "max" else -1.0
    front = onp.zeros((0, M))
    best, out = onp.nan, []
    for r in records:
        ev = r.evaluation
        f = ev.metrics.get("objectives")
        g = onp.asarray(ev.metrics.get("constraints", []), float)
        if ev.status == "ok" and f is not None and bool(onp.all(g <= tol)):
            f = onp.asarray(f, float)
            if M == 1:
                best = f[0] if onp.isnan(best) or sign * f[0] > sign * best else best
            else:
                F = onp.vstack([front, f[None]])
                front = F[non_dominated(F, senses)]
        if M == 1:
            out.append(float(best))
        else:
            out.append(hypervolume(front, senses, reference)
                       if len(front) and reference is not None and len(reference) else 0.0)
    return out
