"""Pareto dominance and hypervolume of finite point sets.

Owns: the non-dominated filter and the exact hypervolume indicator for two and three
objectives, for objectives given with their senses (``"max"`` or ``"min"``).

Must not import: physics modules, store, report, cli.

Conventions
-----------
- ``F`` has one row per point and one column per objective, in the objectives' own units;
  ``senses[k]`` says whether objective ``k`` is maximized or minimized. Internally every
  column is turned into a minimization by a sign change.
- A point ``a`` dominates ``b`` when it is no worse in every objective and strictly better in
  at least one. Equal rows do not dominate each other: both are kept.
- Rows holding a NaN are never part of a front and add no hypervolume.
- The hypervolume is the measure of the region dominated by the set and bounded by the
  reference point; a point that does not strictly dominate the reference adds nothing.

These are plain numpy functions (no gradients flow through them).
"""

from __future__ import annotations

import bisect
from collections.abc import Sequence

import numpy as np

from chiropt.errors import InputError

__all__ = ["hypervolume", "non_dominated", "to_minimization"]

_SENSES = ("max", "min")


def to_minimization(F, senses: Sequence[str]) -> np.ndarray:
    """Objective values with every column turned into a minimization.

    Parameters
    ----------
    F : array_like, shape (N, M)
        Objective values [objective units].
    senses : sequence of str, length M
        ``"max"`` or ``"min"`` per objective (case-insensitive).

    Returns
    -------
    ndarray, shape (N, M)
        ``F`` with the maximized columns negated [objective units].
    """
    F = np.asarray(F, dtype=float)
    if F.ndim != 2:
        raise InputError("search.objectives", f"F must be a 2-D array (N, M); got shape {F.shape}")
    senses = [str(s).lower() for s in senses]
    if len(senses) != F.shape[1]:
        raise InputError(
            "search.senses",
            f"{len(senses)} senses given for {F.shape[1]} objectives; give one per column",
        )
    bad = [s for s in senses if s not in _SENSES]
    if bad:
        raise InputError("search.senses", f"unknown sense(s) {bad}; allowed: 'max', 'min'")
    sign = np.array([-1.0 if s == "max" else 1.0 for s in senses])
    return F * sign


def non_dominated(F, senses: Sequence[str], *, chunk: int = 512) -> np.ndarray:
    """Mask of the rows of ``F`` that no other row dominates.

    Parameters
    ----------
    F : array_like, shape (N, M)
        Objective values [objective units].
    senses : sequence of str, length M
        ``"max"`` or ``"min"`` per objective.
    chunk : int
        Rows compared at once (memory ``chunk * N * M``); results do not depend on it.

    Returns
    -------
    ndarray of bool, shape (N,)
        True for the non-dominated rows; rows with a NaN are False.

    Notes
    -----
    Pairwise comparison, O(N^2 M) work, vectorized in blocks of ``chunk`` rows; adequate for
    the few thousand evaluations of a run.
    """
    Z = to_minimization(F, senses)
    valid = ~np.any(np.isnan(Z), axis=1)
    Zv = Z[valid]
    n = Zv.shape[0]
    dominated = np.zeros(n, dtype=bool)
    for start in range(0, n, chunk):
        block = Zv[start : start + chunk]  # candidates b
        # le[a, b]: row a no worse than b everywhere; lt[a, b]: strictly better somewhere
        le = np.all(Zv[:, None, :] <= block[None, :, :], axis=2)
        lt = np.any(Zv[:, None, :] < block[None, :, :], axis=2)
        dominated[start : start + chunk] = np.any(le & lt, axis=0)
    mask = np.zeros(Z.shape[0], dtype=bool)
    mask[np.flatnonzero(valid)] = ~dominated
    return mask


def hypervolume(F, senses: Sequence[str], reference) -> float:
    """Exact hypervolume dominated by a point set, for two or three objectives.

    Parameters
    ----------
    F : array_like, shape (N, M), M in {1, 2, 3}
        Objective values [objective units].
    senses : sequence of str, length M
        ``"max"`` or ``"min"`` per objective.
    reference : array_like, shape (M,)
        Reference point, worse than the interesting points in every objective
        [objective units].

    Returns
    -------
    float
        Hypervolume [product of the objective units].

    Notes
    -----
    M = 2: sort by the first objective and add one rectangle per improving point,
    O(N log N). M = 3: dimension sweep over the third objective, keeping the 2-D front of the
    points seen so far in a sorted list and updating its area on each insertion
    (Fonseca, Paquete & López-Ibáñez 2006, Sec. III); O(N^2) in the worst case because of list
    deletions, O(N log N) comparisons.

    References
    ----------
    .. [1] C. M. Fonseca, L. Paquete, M. López-Ibáñez, "An improved dimension-sweep algorithm
       for the hypervolume indicator", IEEE CEC 2006, pp. 1157-1163.
    .. [2] L. While, P. Hingston, L. Barone, S. Huband, "A faster algorithm for calculating
       hypervolume", IEEE Trans. Evol. Comput. 10, 29 (2006).
    """
    Z = to_minimization(F, senses)
    M = Z.shape[1]
    r = to_minimization(np.asarray(reference, dtype=float).reshape(1, -1), senses)[0]
    if r.shape[0] != M or not np.all(np.isfinite(r)):
        raise InputError(
            "search.reference", f"reference must be {M} finite numbers; got {reference!r}"
        )
    if M > 3:
        raise InputError(
            "search.objectives", f"exact hypervolume is implemented for 1 to 3 objectives; got {M}"
        )
    keep = np.all(Z < r, axis=1)  # NaN compares False: dropped here
    Z = Z[keep]
    if Z.shape[0] == 0:
        return 0.0
    if M == 1:
        return float(r[0] - Z[:, 0].min())
    if M == 2:
        return _area_2d(Z, r)
    return _volume_3d(Z, r)


def _area_2d(Z: np.ndarray, r: np.ndarray) -> float:
    """Area dominated by 2-D points (minimization, all strictly inside the reference box)."""
    order = np.lexsort((Z[:, 1], Z[:, 0]))
    x, y = Z[order, 0], Z[order, 1]
    best_before = np.concatenate(([r[1]], np.minimum.accumulate(y)[:-1]))
    gain = np.clip(best_before - y, 0.0, None)  # height of the new horizontal band
    return float(np.sum((r[0] - x) * gain))


def _volume_3d(Z: np.ndarray, r: np.ndarray) -> float:
    """Volume dominated by 3-D points by a sweep along the third coordinate."""
    order = np.argsort(Z[:, 2], kind="stable")
    Z = Z[order]
    xs: list[float] = []  # 2-D front: x ascending, y strictly descending
    ys: list[float] = []
    area = 0.0
    volume = 0.0
    for i in range(Z.shape[0]):
        x, y, z = float(Z[i, 0]), float(Z[i, 1]), float(Z[i, 2])
        if i > 0:
            volume += area * (z - float(Z[i - 1, 2]))
        area += _insert_2d(xs, ys, x, y, float(r[0]), float(r[1]))
    volume += area * (float(r[2]) - float(Z[-1, 2]))
    return float(volume)


def _insert_2d(xs: list[float], ys: list[float], x: float, y: float, rx: float, ry: float):
    """Insert (x, y) into a sorted 2-D front; return the area it adds."""
    k = bisect.bisect_left(xs, x)  # xs[:k] < x <= xs[k:]
    if k > 0 and ys[k - 1] <= y:
        return 0.0  # weakly dominated by the predecessor
    if k < len(xs) and xs[k] == x and ys[k] <= y:
        return 0.0  # weakly dominated by a point with the same x
    height = ys[k - 1] if k > 0 else ry  # old boundary just right of x
    j = k
    left = x
    added = 0.0
    while j < len(xs) and ys[j] >= y:  # points the new one dominates
        added += (xs[j] - left) * (height - y)
        left, height = xs[j], ys[j]
        j += 1
    right = xs[j] if j < len(xs) else rx
    added += (right - left) * (height - y)
    del xs[k:j]
    del ys[k:j]
    xs.insert(k, x)
    ys.insert(k, y)
    return added
