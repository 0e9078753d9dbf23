"""One geometry solved along a whole wavelength axis in one vectorized forward solve.

Owns: ``scan_wavelengths`` (objectives, scaled constraints and Rayleigh flags of a goal at
every point of a grid of the wavelength variable, for one geometry) and
``explore_grid`` (that grid). Must not import: search drivers, store, report, cli.

Conventions
-----------
- The goal's wavelengths (the union of its specs, ``GoalProblem.wavelengths_nm``, W of
  them) move with the wavelength variable by ``value - reference``; a scan at S values of
  the variable solves the S x W shifted wavelengths in one call of ``compute_quantities``
  (every quantity is a per-wavelength spectrum; the rows share the orders and lattice
  terms of the widest one, so a row agrees with its own solve to the model's truncation,
  not bit for bit: measured on the quickstart goal at a fixed lmax, 1e-9 to 1e-7 for the
  near-field metrics and up to 2e-6 for the capacity quantities).
- The scan is a screen: the points kept from it are evaluated again, one by one, with the
  goal's own model (``GoalProblem.evaluate``), and only those evaluations are stored.
- Without a wavelength variable the grid has one point (the design's own wavelengths).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as onp

from chiropt.errors import ComputationError, MaterialRangeError
from chiropt.goals.objectives import GoalProblem, _plain
from chiropt.goals.schema import WAVELENGTH_PATH
from chiropt.sensitivity import compute_quantities
from chiropt.solve import RAYLEIGH_WARN

__all__ = ["explore_grid", "scan_wavelengths"]


def explore_grid(problem: GoalProblem, points: int) -> onp.ndarray:
    """Values of the wavelength variable scanned per geometry [nm] (empty: no such variable).

    ``points`` equally spaced values from the variable's lower to its upper bound (one
    point: the middle).
    """
    if problem.shift_index is None:
        return onp.zeros(0)
    lo, hi = problem.lower[problem.shift_index], problem.upper[problem.shift_index]
    if points == 1:
        return onp.array([0.5 * (lo + hi)])
    return onp.linspace(lo, hi, points)


def scan_wavelengths(problem: GoalProblem, x, grid, lmax: int | None = None,
                     tolerance: float | None = None) -> dict:
    """Objectives and constraints of geometry ``x`` at every value of ``grid``.

    Parameters
    ----------
    problem : GoalProblem
    x : array_like (n,) — design vector [user units]; its wavelength entry is ignored
    grid : array_like (S,) — values of the wavelength variable [nm]; empty when the goal
        has none (then one point, ``x`` itself)
    lmax : int, optional — multipole order of the scan (default: the goal's model)
    tolerance : float, optional — the scan's ``model.tolerance`` (order cuts, the dipole
        model's lattice sums), used where it is looser than the model's (default: the model's)

    Returns
    -------
    dict: ``X`` (S, n) design vectors, ``F`` (S, M) objectives, ``G`` (S, m) scaled
    constraints (NaN rows where a wavelength sits on a Rayleigh anomaly or a number is not
    finite), ``ok`` (S,) bool; ``error`` (str) when the whole solve failed (then every row
    is NaN).
    """
    x = onp.asarray(x, float)
    grid = onp.asarray(grid, float)
    i = problem.shift_index
    X = onp.repeat(x[None], max(1, grid.size), axis=0)
    if i is not None and grid.size:
        X[:, i] = grid
    S, W = X.shape[0], problem.wavelengths_nm.size
    M, m = problem.n_objectives, problem.n_constraints
    out = {"X": X, "F": onp.full((S, M), onp.nan), "G": onp.full((S, m), onp.nan),
           "ok": onp.zeros(S, bool)}
    values = problem.values(X[0])
    if i is not None:
        values[WAVELENGTH_PATH] = onp.concatenate([problem.wavelengths_at(xs) for xs in X])
    design = problem.eval_design
    if lmax is not None:
        design = replace(design, lmax=int(lmax))
    if tolerance is not None and tolerance > design.tolerance:
        design = replace(design, tolerance=float(tolerance))
    try:
        q, ray = compute_quantities(design, values, with_flags=True, k_min=problem.k_min)
    except (ComputationError, onp.linalg.LinAlgError, MaterialRangeError, FloatingPointError,
            ZeroDivisionError) as exc:
        out["error"] = f"{type(exc).__name__}: {exc}"
        return out
    q = {k: onp.asarray(v, float).reshape(S, W) for k, v in _plain(q).items()}
    ray = onp.asarray(ray, float).reshape(S, W)
    p = dict(problem._params)
    p.update(values)
    fab = onp.asarray([float(r) for r in problem._fab_rows(p)], float)
    # every scan point's rows at once: the quantities are (S, W) arrays
    F = onp.asarray(problem.objective_values(q), float).reshape(M, S).T
    rows = [onp.broadcast_to(onp.asarray(v, float), (S,)) for v in problem._metric_rows(q)]
    G = onp.concatenate([onp.stack(rows, axis=1) if rows else onp.zeros((S, 0)),
                         onp.broadcast_to(fab, (S, fab.size))], axis=1)
    ok = onp.all(ray >= RAYLEIGH_WARN, axis=1) & onp.all(onp.isfinite(F), axis=1) \
        & onp.all(onp.isfinite(G), axis=1)
    out["F"][ok], out["G"][ok], out["ok"] = F[ok], G[ok], ok
    return out
