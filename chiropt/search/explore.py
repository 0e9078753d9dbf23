"""Global exploration and the seeding of the local searches from it.

Owns: which points of a scanned axis are kept (``pick_along_axis``), the seeding plan of a
front or of single-objective starts from the explored designs (``seed_plan``), and the
label of a search in progress displays and plots (``search_key``).

Must not import: physics modules, store, report, cli.

Conventions (common practice, no source)
----------------------------------------
- Senses as in ``chiropt.search.pareto``; internally ``z = -f`` (max) or ``+f`` (min).
- A scan keeps its feasible non-dominated points (one objective: the best ones), at most
  ``keep``: the extreme of each objective first, then the ones farthest (in the scan's own
  normalized objectives) from those already kept. Without a feasible point the least
  violating one is kept, so the constraints are still seen there.
- Seeding (two objectives): anchor ``k`` is searched from the ``max(2, starts)``
  explored feasible designs best in objective ``k``, each from another geometry; the normalization
  ``h = (z - ideal) / scale`` uses the explored front's extremes; the ``points - 2``
  epsilon-constraint levels bound ``h_2`` at the values of explored front points spread
  evenly by arc length along the explored front (``_levels``), so they span the whole
  explored range of objective 2 and go where the front is; each level is searched from
  the ``starts`` explored designs best in objective 1 among those meeting the level.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from chiropt.search.pareto import non_dominated, to_minimization

__all__ = ["SeedPlan", "anchor_starts", "pick_along_axis", "search_key", "seed_plan"]


def search_key(stage: str, start: int) -> str:
    """Label of the search an evaluation belongs to (one per local search or scan)."""
    if stage.startswith("front-") or stage == "explore":
        return stage
    if ":" in stage:
        return stage
    if stage.endswith("-lex"):
        stage = stage[: -len("-lex")]
    return f"{stage}-{start}" if not stage.startswith("start") else f"start-{start}"


def _spread(Z: np.ndarray, order: list[int], keep: int) -> list[int]:
    """``keep`` rows of ``order``: each column's best first, then farthest-point."""
    if len(order) <= keep:
        return list(order)
    sub = Z[order]
    span = np.ptp(sub, axis=0)
    Zn = (sub - sub.min(axis=0)) / np.where(span > 0, span, 1.0)
    chosen: list[int] = []
    for k in range(Z.shape[1]):
        j = int(np.argmin(Zn[:, k]))
        if j not in chosen and len(chosen) < keep:
            chosen.append(j)
    while len(chosen) < keep:
        d = np.min(np.linalg.norm(Zn[:, None, :] - Zn[None, chosen, :], axis=2), axis=1)
        d[chosen] = -1.0
        chosen.append(int(np.argmax(d)))
    return [order[j] for j in chosen]


def pick_along_axis(F, G, ok, senses, keep: int, feasibility_tol: float = 1e-6) -> list[int]:
    """Indices of the scan points to keep (see the module conventions).

    Parameters
    ----------
    F : (S, M) objectives; G : (S, m) scaled constraints; ok : (S,) valid rows
    senses : 'max'/'min' per objective; keep : at most this many indices
    """
    F, G, ok = np.asarray(F, float), np.asarray(G, float), np.asarray(ok, bool)
    if not ok.any():
        return []
    viol = np.max(np.maximum(G, 0.0), axis=1) if G.shape[1] else np.zeros(len(F))
    feas = ok & (viol <= feasibility_tol)
    if not feas.any():
        return [int(np.flatnonzero(ok)[np.argmin(viol[ok])])]
    Z = to_minimization(F, senses)
    if F.shape[1] == 1:
        order = sorted(np.flatnonzero(feas), key=lambda s: Z[s, 0])
        return [int(s) for s in order[:keep]]
    mask = non_dominated(np.where(feas[:, None], F, np.nan), senses)
    order = sorted(np.flatnonzero(mask), key=lambda s: tuple(Z[s]))
    return [int(s) for s in _spread(Z, order, keep)]


@dataclass
class SeedPlan:
    """Start points of the local searches, drawn from the explored designs.

    ``anchors[k]``: start points (design vectors) of the searches for objective ``k``;
    ``levels``: (bound on h_2, start points) per epsilon-constraint level; ``ideal``,
    ``scale``: the normalization in min-form (``z``) units.
    """

    anchors: list[list[np.ndarray]] = field(default_factory=list)
    levels: list[tuple[float, list[np.ndarray]]] = field(default_factory=list)
    ideal: np.ndarray = field(default_factory=lambda: np.zeros(2))
    scale: np.ndarray = field(default_factory=lambda: np.ones(2))


def anchor_starts(starts: int) -> int:
    """Searches per anchor of a front: ``starts``, but at least 2 (an extreme found by a
    single search is easily a local one)."""
    return max(2, int(starts))


def _best_distinct(order, group, starts: int) -> list[int]:
    out, seen = [], set()
    for i in order:
        if group[i] in seen:
            continue
        seen.add(group[i])
        out.append(int(i))
        if len(out) == starts:
            break
    return out


def _levels(Hf: np.ndarray, points: int) -> list[float]:
    """Bounds on h_2 of the ``points - 2`` levels: the h_2 of the explored front points
    nearest to ``points - 2`` equally spaced arc lengths along that front (normalized
    objectives, sorted by h_1), duplicates dropped. They span the explored range of
    objective 2 and follow the front where it lies, also across gaps of a broken front."""
    if points <= 2 or len(Hf) < 2:
        return []
    Hs = Hf[np.argsort(Hf[:, 0])]
    arc = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(Hs, axis=0), axis=1))])
    out: list[float] = []
    for i in range(1, points - 1):
        j = int(np.argmin(np.abs(arc - arc[-1] * i / (points - 1))))
        b = float(Hs[j, 1])
        if 0.0 < b < 1.0 and all(abs(b - c) > 1e-9 for c in out):
            out.append(b)
    return out


def seed_plan(X, F, group, senses, starts: int, points: int) -> SeedPlan | None:
    """Seeding plan from the explored feasible designs (None when there are none).

    Parameters
    ----------
    X : (N, n) explored feasible designs; F : (N, M) their objectives
    group : (N,) geometry index of each (start points come from different geometries)
    senses : senses of the M objectives; starts : searches per anchor and per level
    points : front points including the anchors (two objectives)
    """
    X, F = np.asarray(X, float), np.asarray(F, float)
    if len(F) == 0:
        return None
    Z = to_minimization(F, senses)
    M = F.shape[1]
    plan = SeedPlan()
    for k in range(M):
        order = np.lexsort(tuple(Z[:, j] for j in reversed(range(M)) if j != k) + (Z[:, k],))
        n = anchor_starts(starts) if M == 2 else starts
        plan.anchors.append([X[i] for i in _best_distinct(order, group, n)])
    if M == 1:
        return plan
    front = non_dominated(F, senses)
    Zf = Z[front]
    ideal = Zf.min(axis=0)
    nadir = Zf.max(axis=0)
    span = nadir - ideal
    plan.ideal = ideal
    plan.scale = np.where(span > 1e-12 * (np.abs(ideal) + 1.0), span, np.abs(ideal) + 1.0)
    H = (Z - ideal) / plan.scale
    for bound in _levels(H[front], points):
        meets = np.flatnonzero(H[:, 1] <= bound + 1e-12)
        order = meets[np.lexsort((H[meets, 1], H[meets, 0]))]
        plan.levels.append((bound, [X[j] for j in _best_distinct(order, group, starts)]))
    return plan
