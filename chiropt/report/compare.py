"""Fronts of several runs side by side: one reference point, hypervolumes, dominance.

Owns: the refusal of runs whose objectives differ (``same_objectives``), the common
reference point, each run's hypervolume at it, the pairwise coverage of the fronts and the
table of which run holds the combined front where. Plain numpy on objective values; the
HTML page and ``chiropt compare`` both show these figures. Must not import: cli.

Definitions
-----------
- Common reference: the runs' own reference points (``chiropt.goals.reference``) when they
  agree; otherwise, per objective, the worst of them, so that the point bounds every run's
  region (common practice, no source).
- Coverage ``C(A, B)``: the share of B's front points weakly dominated by some point of A
  (Zitzler & Thiele 1999, IEEE Trans. Evol. Comput. 3, 257, eq. 7). ``C(A, B) = 1`` and
  ``C(B, A) = 0``: A's front lies wholly beyond B's.
- Where each run dominates: the non-dominated set of the union of the fronts, sorted by the
  first objective and cut into stretches of consecutive points of one run; each stretch is
  a row (run, objective ranges, number of points, its share of the combined hypervolume
  added by the stretch's points exclusively).
"""

from __future__ import annotations

from typing import Any

import numpy as onp

from chiropt.errors import InputError
from chiropt.search.pareto import hypervolume, non_dominated, to_minimization

__all__ = ["common_reference", "compare_fronts", "coverage", "dominance_stretches",
           "same_objectives"]


def same_objectives(names, labels, senses) -> None:
    """Refuse (``InputError`` in one line) runs whose objectives or senses differ.

    ``names``: run names; ``labels``/``senses``: per run, the objective labels and senses.
    """
    first = (list(labels[0]), list(senses[0]))
    for name, lab, sen in zip(names[1:], labels[1:], senses[1:], strict=True):
        if (list(lab), list(sen)) != first:
            def words(ls, ss):
                return ", ".join(f"{s}imize {x}" for x, s in zip(ls, ss, strict=True))
            raise InputError("RUN_DIR", f"runs {names[0]} and {name} have different "
                                        f"objectives ({words(*first)} vs {words(lab, sen)}): "
                                        "fronts compare only for the same objectives")


def common_reference(references, senses) -> tuple[list[float], str]:
    """(one reference point for every run, how it was chosen); see the module notes."""
    R = onp.asarray(references, float)
    if onp.all(R == R[0]):
        return [float(v) for v in R[0]], "the runs' common reference point"
    Z = to_minimization(R, senses)
    worst = Z.max(axis=0) * onp.where(onp.array(senses) == "max", -1.0, 1.0)
    return [float(v) for v in worst], ("the runs' reference points differ: per objective "
                                       "the worst of them")


def _weakly_dominates(Za, Zb) -> onp.ndarray:
    """(len(Zb),) True where some row of Za is no worse than the row of Zb everywhere."""
    if len(Za) == 0 or len(Zb) == 0:
        return onp.zeros(len(Zb), bool)
    return onp.all(Za[:, None, :] <= Zb[None, :, :], axis=2).any(axis=0)


def coverage(fronts, senses) -> onp.ndarray:
    """Matrix ``C[a, b]`` of the module notes (NaN where front b is empty)."""
    Z = [to_minimization(onp.asarray(F, float).reshape(-1, len(senses)), senses)
         for F in fronts]
    C = onp.full((len(Z), len(Z)), onp.nan)
    for a, Za in enumerate(Z):
        for b, Zb in enumerate(Z):
            if len(Zb):
                C[a, b] = float(onp.mean(_weakly_dominates(Za, Zb)))
    return C


def dominance_stretches(fronts, senses, reference) -> list[dict[str, Any]]:
    """Rows of the module notes' table, in the order of the first objective (best first)."""
    M = len(senses)
    pts = [onp.asarray(F, float).reshape(-1, M) for F in fronts]
    owner = onp.concatenate([onp.full(len(F), k) for k, F in enumerate(pts)]) if pts else []
    U = onp.vstack(pts) if pts else onp.zeros((0, M))
    if len(U) == 0:
        return []
    keep = non_dominated(U, senses)
    U, owner = U[keep], onp.asarray(owner)[keep]
    sign0 = 1.0 if senses[0] == "max" else -1.0
    order = onp.argsort(-sign0 * U[:, 0], kind="stable")
    U, owner = U[order], owner[order]
    total = hypervolume(U, senses, reference) if M == 2 else float("nan")
    rows: list[dict[str, Any]] = []
    start = 0
    for i in range(1, len(U) + 1):
        if i == len(U) or owner[i] != owner[start]:
            part = U[start:i]
            rest = onp.vstack([U[:start], U[i:]])
            gain = (total - (hypervolume(rest, senses, reference) if len(rest) else 0.0)
                    if M == 2 else float("nan"))
            rows.append({"run": int(owner[start]), "points": i - start,
                         "ranges": [[float(part[:, k].min()), float(part[:, k].max())]
                                    for k in range(M)],
                         "exclusive_hypervolume": float(gain),
                         "share": float(gain / total) if M == 2 and total > 0 else None})
            start = i
    return rows


def compare_fronts(names, fronts, references, senses) -> dict[str, Any]:
    """Every comparison figure of several runs with the same objectives.

    Returns a dict: ``reference``, ``reference_source``, ``hypervolume`` (per run, at the
    common reference; None with one objective), ``coverage`` (matrix, list of lists),
    ``stretches`` (``dominance_stretches``), ``names``.
    """
    ref, source = common_reference(references, senses)
    M = len(senses)
    hv = [hypervolume(onp.asarray(F, float).reshape(-1, M), senses, ref)
          if M == 2 and len(F) else (0.0 if M == 2 else None) for F in fronts]
    C = coverage(fronts, senses)
    return {"names": list(names), "reference": ref, "reference_source": source,
            "hypervolume": hv,
            "coverage": [[None if onp.isnan(v) else float(v) for v in row] for row in C],
            "stretches": dominance_stretches(fronts, senses, ref)}
