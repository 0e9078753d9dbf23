"""From a resolved goal to the optimizer's hook: objectives, constraints and exact gradients.

Owns: ``GoalProblem`` (the ``VectorProblem`` of a goal: design vector -> objective values,
scaled constraints ``g <= 0`` and their exact Jacobians), the geometric fabrication limits,
the wavelength bookkeeping (every wavelength of a goal solved in one call) and the pre-run
feasibility checks (``check_goal``). Must not import: store, report, cli.

Conventions
-----------
- ``x`` holds the goal's variables in file order, in user units (nm, deg, index).
- Objectives keep their senses (``VectorProblem.senses``); a metric at a wavelength spec is
  the plain average of its spectrum over the spec's wavelengths.
- Constraint rows, in order: each metric constraint's lower bound then upper bound, then the
  fabrication rows. A metric bound ``v >= LOW`` is ``(LOW - v) / max(|LOW|, 1) <= 0``, an
  upper bound ``(v - HIGH) / max(|HIGH|, 1) <= 0``; a fabrication limit ``q >= V`` is
  ``(V - q) / V <= 0`` and ``q <= V`` is ``(q - V) / V <= 0``.
- One forward pass computes every objective and constraint; the Jacobian takes one reverse
  walk of the tape with the rows' cotangents stacked (``chiropt.stacked_reverse``): the
  bookkeeping of every small operation is paid once, and only the coarse primitives run once
  per row, instead of ``M + m`` full gradients.
- A robust objective or constraint (``robust:``, docs/robustness.md) is the statistic of
  its per-sample values over its own sample plan (``chiropt.robust``: fabrication errors,
  cone directions, band nodes), drawn once from the goal's seed and the term's position
  (common random numbers: the same errors for every design, so the function the optimizer
  sees is smooth); each sample solves the term's own wavelengths once per cone direction,
  all inside the same traced forward pass, so the Jacobian stays exact. The nominal
  quantities are solved as before and stored; ``objective_values(q)`` and
  ``_metric_rows(q)`` without robust samples give the nominal values (the exploration's
  screen and the ``(nominal)`` columns of front.csv).
- An evaluation fails (status ``"failed"``, with its reason, the search continues) when a
  wavelength sits on a Rayleigh anomaly (``solve.RAYLEIGH_WARN``), the solve is singular, a
  wavelength leaves a material's data range, or a number is not finite.
"""

from __future__ import annotations

import os
import time
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval
from scipy.stats import qmc

from chiropt.capacity import parse_ev_share_name
from chiropt.errors import ComputationError, InputError, MaterialRangeError
from chiropt.goals.schema import (
    WAVELENGTH_PATH,
    FabricationConstraint,
    Goal,
    WavelengthSpec,
)
from chiropt.problem import VectorEvaluation
from chiropt.robust.average import metric_value, sample_quantities, summarize
from chiropt.robust.sampling import SamplePlan, make_plan
from chiropt.sensitivity import compute_quantities, plain_groups
from chiropt.solution import RAYLEIGH_WARN
from chiropt.stacked_reverse import stacked_jacobian

__all__ = ["DeadlineReached", "GoalProblem", "check_goal", "metric_spectrum"]


class DeadlineReached(Exception):  # noqa: N818 - a stop signal, not an error
    """The run's wall-time budget is spent (raised before a fresh evaluation; never stored)."""


metric_spectrum = metric_value  # spectrum (W,) of a metric; helicity averages by name
ROBUST_SEED_STRIDE = 7919        # term k of a goal draws its errors from seed + k * stride


def _lattice_vectors(kind: str, p: dict):
    if kind in ("square", "hexagonal"):
        a = b = p["lattice.period_nm"]
        ang = np.pi / 2 if kind == "square" else np.pi / 3
    else:
        a, b = p["lattice.period_nm[0]"], p["lattice.period_nm[1]"]
        ang = np.pi / 2 if kind == "rectangular" else p["lattice.angle_deg"] * np.pi / 180.0
    return a, b, ang


def _gap(p: dict, kind: str, i: int, j: int, spheres: bool = True):
    """Surface-to-surface gap [nm] between particles i and j (i == j: its lattice images).

    Spheres: the 3-D gap with bottoms aligned. Otherwise (cylinders, spheroids standing on
    the same surface) the in-plane gap between the footprints.
    """
    shifts = [(a, b) for a in range(-2, 3) for b in range(-2, 3) if i != j or (a, b) != (0, 0)]
    si = onp.array([s[0] for s in shifts], float)
    sj = onp.array([s[1] for s in shifts], float)
    a, b, ang = _lattice_vectors(kind, p)
    ri, rj = p[f"particles[{i}].radius_nm"], p[f"particles[{j}].radius_nm"]
    dx = p[f"particles[{i}].position_nm[0]"] - p[f"particles[{j}].position_nm[0]"]
    dy = p[f"particles[{i}].position_nm[1]"] - p[f"particles[{j}].position_nm[1]"]
    x = dx + si * a + sj * b * np.cos(ang)
    y = dy + sj * b * np.sin(ang)
    dz2 = (ri - rj) ** 2 if spheres else 0.0  # spheres: bottoms aligned, centres differ
    d2 = x ** 2 + y ** 2 + dz2
    return np.sqrt(np.min(d2)) - ri - rj


class FabricationRow:
    """One scaled fabrication row: a geometric quantity [nm or -] against a limit.

    ``quantity`` is 'gap', 'diameter', 'core_diameter', 'shell' or 'aspect'; ``i``, ``j``
    the particles; ``lower`` True for ``quantity >= value``.
    """

    def __init__(self, key: str, what: str, quantity: str, value: float, lower: bool,
                 lattice_kind: str, i: int = 0, j: int = 0, spheres: bool = True):
        self.key, self.what, self.quantity_name = key, what, quantity
        self.value, self.lower, self.kind, self.i, self.j = float(value), lower, lattice_kind, i, j
        self.spheres = spheres

    def quantity(self, p: dict):
        """The geometric quantity at the design quantities ``p`` (may be traced)."""
        i, name = self.i, self.quantity_name
        if name == "gap":
            return _gap(p, self.kind, i, self.j, self.spheres)
        if name == "diameter":
            return 2 * p[f"particles[{i}].radius_nm"]
        if name == "core_diameter":
            return 2 * p[f"particles[{i}].core_radius_nm"]
        if name == "shell":
            return p[f"particles[{i}].radius_nm"] - p[f"particles[{i}].core_radius_nm"]
        if name == "height":
            return p[f"particles[{i}].height_nm"]
        if f"particles[{i}].height_nm" in p:  # cylinder, spheroid: height / diameter
            return p[f"particles[{i}].height_nm"] / (2 * p[f"particles[{i}].radius_nm"])
        return 1.0 + 0.0 * p["host_index"]  # a sphere: height / width = 1

    def __call__(self, p: dict):
        q = self.quantity(p)
        return (self.value - q) / self.value if self.lower else (q - self.value) / self.value


def fabrication_rows(goal: Goal) -> list[FabricationRow]:
    """The fabrication constraint rows of a goal, in constraint order."""
    design = goal.design
    kind = design.lattice.kind
    rows: list[FabricationRow] = []
    n_part = len(design.particles)
    spheres = all(part.shape == "sphere" for part in design.particles)
    for c in goal.fabrication_constraints:
        V = c.value
        if c.kind == "min_gap_nm":
            for i in range(n_part):
                for j in range(i, n_part):
                    what = (f"gap between particle {i} and its lattice images [nm]" if i == j
                            else f"gap between particles {i} and {j} [nm]")
                    rows.append(FabricationRow(c.key, what, "gap", V, True, kind, i, j,
                                               spheres))
        elif c.kind == "min_feature_nm":
            for i, part in enumerate(design.particles):
                rows.append(FabricationRow(c.key, f"diameter of particle {i} [nm]", "diameter",
                                           V, True, kind, i))
                if part.height_nm is not None:
                    rows.append(FabricationRow(c.key, f"height of particle {i} [nm]", "height",
                                               V, True, kind, i))
                if part.core_radius_nm is not None:
                    rows.append(FabricationRow(c.key, f"core diameter of particle {i} [nm]",
                                               "core_diameter", V, True, kind, i))
                    rows.append(FabricationRow(c.key, f"shell thickness of particle {i} [nm]",
                                               "shell", V, True, kind, i))
        else:
            for i, part in enumerate(design.particles):
                rows.append(FabricationRow(c.key, f"aspect ratio height/diameter of particle "
                                                  f"{i} ({part.shape})", "aspect", V, False,
                                           kind, i))
    return rows


class GoalProblem:
    """The ``VectorProblem`` of a goal (see the module conventions).

    Parameters
    ----------
    goal : Goal
    deadline : float, optional
        Epoch time [s] after which a fresh evaluation raises :class:`DeadlineReached`.
    stop_file : str, optional
        When this file exists, a fresh evaluation raises :class:`DeadlineReached` (how an
        interrupted run stops its worker processes promptly).

    Attributes
    ----------
    lower, upper : ndarray (n,) — variable bounds [user units]
    senses : tuple of 'max'/'min'; n_objectives; n_constraints
    wavelengths_nm : ndarray (W,) — nominal union of every wavelength the goal uses [nm]
    constraint_labels : list of str — one per constraint row
    """

    def __init__(self, goal: Goal, *, deadline: float | None = None,
                 stop_file: str | None = None):
        self.goal = goal
        self.deadline = deadline
        self.stop_file = stop_file
        self.paths = [v.path for v in goal.variables]
        self.lower = onp.array([v.lower for v in goal.variables], float)
        self.upper = onp.array([v.upper for v in goal.variables], float)
        self.senses = tuple(o.sense for o in goal.objectives)
        self.n_objectives = len(goal.objectives)
        specs: list[WavelengthSpec] = [o.spec for o in goal.objectives]
        specs += [c.spec for c in goal.metric_constraints]
        union = sorted({w for s in specs for w in s.wavelengths_nm})
        self.wavelengths_nm = onp.array(union, float)
        pos = {w: k for k, w in enumerate(union)}
        self._index = {id(s): onp.array([pos[w] for w in s.wavelengths_nm]) for s in specs}
        self._specs = specs  # keep the ids alive
        self.eval_design = goal.design.with_wavelengths(union)
        names = [m for o in goal.objectives for m in o.metrics]
        names += [c.metric for c in goal.metric_constraints]
        #: thresholds of the goal's ev_share_k metrics (quantities ev_share_k<k>)
        self.k_min = tuple(sorted({k for k in map(parse_ev_share_name, names) if k is not None}))
        #: quantity groups the rows do not read: computed without derivatives
        self.plain_groups = plain_groups(names)
        self.model_note = ""
        if self.eval_design.solver == "fourier" and self.eval_design.harmonics == "auto":
            # one convergence scan at the base design fixes the count for the whole search
            # (a count that moved between evaluations would make the objective jump)
            from dataclasses import replace as _replace

            from chiropt.model import run_model

            out = run_model(self.eval_design)
            self.eval_design = _replace(self.eval_design, harmonics=int(out.harmonics))
            self.model_note = (f"harmonics: auto chose {out.harmonics} at the base design "
                               f"(last change {out.harmonics_change or float('nan'):.2g}); "
                               "the search uses it")
        self.reference_nm = float(goal.design.illumination.wavelength_nm[0])
        self.shift_index = (self.paths.index(WAVELENGTH_PATH) if WAVELENGTH_PATH in self.paths
                            else None)
        self._params = goal.design.parameters()
        self._fab = fabrication_rows(goal)
        labels = []
        for c in goal.metric_constraints:
            if c.lower is not None:
                labels.append(f"{c.label()}>={c.lower:g}")
            if c.upper is not None:
                labels.append(f"{c.label()}<={c.upper:g}")
        labels += [f"{_fab_of(goal, r.key).kind}: {r.what}" for r in self._fab]
        self.constraint_labels = labels
        self.n_constraints = len(labels)
        self.robust_plans: dict[str, SamplePlan] = {}   # by the term's key path
        items = list(goal.objectives) + list(goal.metric_constraints)
        for k, item in enumerate(items):
            if item.robust is not None:
                design = self.eval_design.with_wavelengths(item.spec.wavelengths_nm)
                self.robust_plans[item.key] = make_plan(
                    item.robust, design, goal.seed + (k + 1) * ROBUST_SEED_STRIDE)

    def _terms(self) -> dict[str, Any]:
        """Objectives and metric constraints by key path (``objectives[0]``, ...)."""
        return {i.key: i for i in list(self.goal.objectives) + list(self.goal.metric_constraints)}

    def robust_record(self) -> dict[str, Any]:
        """Every robust term's error model and samples (``robust_samples.json``)."""
        items = self._terms()
        return {key: {"label": items[key].label(), "error_model": items[key].robust.describe(),
                      "wavelengths_nm": list(items[key].spec.wavelengths_nm),
                      "samples": plan.to_dict()}
                for key, plan in self.robust_plans.items()}

    def _robust_samples(self, x) -> dict[str, list]:
        """Per-sample quantity sets of every robust term at ``x`` (may be traced)."""
        out = {}
        items = self._terms()
        for key, plan in self.robust_plans.items():
            spec = items[key].spec
            vals = self.values(x)
            wl = onp.asarray(spec.wavelengths_nm, float)
            if self.shift_index is not None:
                vals[WAVELENGTH_PATH] = wl + (x[self.shift_index] - self.reference_nm)
            else:
                vals.pop(WAVELENGTH_PATH, None)
            design = self.eval_design.with_wavelengths(wl)
            out[key] = sample_quantities(design, vals, plan)
        return out

    # -- design vector -> named values -------------------------------------------------------
    def values(self, x) -> dict[str, Any]:
        """Named design quantities for ``x`` (may be traced), links and the wavelength shift."""
        vals: dict[str, Any] = {}
        for i, path in enumerate(self.paths):
            if path == WAVELENGTH_PATH:
                vals[path] = self.wavelengths_nm + (x[i] - self.reference_nm)
            else:
                vals[path] = x[i]
        for target, source in self.goal.links:
            vals[target] = vals.get(source, self._params[source])
        return vals

    def wavelengths_at(self, x) -> onp.ndarray:
        """The actual wavelengths [nm] solved at ``x`` (nominal ones, shifted)."""
        if self.shift_index is None:
            return self.wavelengths_nm.copy()
        return self.wavelengths_nm + (float(x[self.shift_index]) - self.reference_nm)

    def parameters_at(self, x) -> dict[str, Any]:
        """All design quantities at ``x`` (plain floats; the wavelength as an array)."""
        p = dict(self._params)
        p.update({k: (onp.asarray(getval(v), float) if onp.ndim(getval(v)) else float(getval(v)))
                  for k, v in self.values(onp.asarray(x, float)).items()})
        return p

    def design_at(self, x):
        """A fresh, validated Design with the values of ``x`` written in (for candidates).

        Its wavelengths are the ones solved at ``x``; ``compute_quantities`` of it gives the
        same numbers as the search saw.
        """
        from chiropt.goals.schema import design_with

        assign = {k: v for k, v in self.parameters_at(x).items()
                  if k in self.values(onp.asarray(x, float)) and k != WAVELENGTH_PATH}
        assign[WAVELENGTH_PATH] = self.wavelengths_at(x).tolist()
        return design_with(self.eval_design, assign)

    # -- the functions -----------------------------------------------------------------------
    def _spec_value(self, q: dict, name: str, spec: WavelengthSpec):
        return np.mean(metric_spectrum(q, name)[..., self._index[id(spec)]], axis=-1)

    def objective_values(self, q: dict, robust: dict | None = None):
        """Objective values (M,) from the quantities [metric units] (quantity arrays
        (..., W) without ``robust`` give (M, ...): one row per objective); a robust objective
        takes its statistic over ``robust[key]`` (its per-sample quantity sets over its own
        wavelengths) when given, else its nominal value from ``q``."""
        out = []
        for o in self.goal.objectives:
            if robust is not None and o.key in robust:
                per = np.stack([sum(w / n * np.mean(metric_value(qs, m)) for m, w, n in o.terms)
                                for qs in robust[o.key]])
                out.append(summarize(per, o.robust.statistic, o.sense))
            else:
                out.append(sum(w / n * self._spec_value(q, m, o.spec) for m, w, n in o.terms))
        return np.stack(out)

    def _metric_rows(self, q: dict, robust: dict | None = None) -> list:
        rows = []
        for c in self.goal.metric_constraints:
            if robust is not None and c.key in robust:
                per = np.stack([np.mean(metric_value(qs, c.metric)) for qs in robust[c.key]])
                lo_v = summarize(per, c.robust.statistic, "max")
                hi_v = summarize(per, c.robust.statistic, "min")
            else:
                lo_v = hi_v = self._spec_value(q, c.metric, c.spec)
            if c.lower is not None:
                rows.append((c.lower - lo_v) / max(abs(c.lower), 1.0))
            if c.upper is not None:
                rows.append((hi_v - c.upper) / max(abs(c.upper), 1.0))
        return rows

    def _fab_rows(self, p: dict) -> list:
        return [row(p) + 0.0 * p["host_index"] for row in self._fab]

    def constraint_values(self, q: dict, p: dict):
        """Scaled constraint rows (m,), feasible when <= 0."""
        rows = self._metric_rows(q) + self._fab_rows(p)
        return np.stack(rows) if rows else np.zeros(0)

    def _physics_vector(self, x, keep: dict):
        q, ray = compute_quantities(self.eval_design, self.values(x), with_flags=True,
                                    k_min=self.k_min, plain=self.plain_groups)
        keep["q"], keep["ray"] = q, ray
        robust = self._robust_samples(x) if self.robust_plans else None
        return np.stack([*self.objective_values(q, robust), *self._metric_rows(q, robust)])

    def _fab_vector(self, x):
        p = dict(self._params)
        p.update(self.values(x))
        rows = self._fab_rows(p)
        return np.stack(rows) if rows else np.zeros(0)

    @staticmethod
    def _jacobian(fun, x):
        """Value and Jacobian: one forward pass, one reverse walk with the rows stacked.

        Derivatives at a Rayleigh anomaly are not finite (kz = 0); numpy's warnings about
        them are silenced here because ``evaluate`` reports such a point as failed."""
        with onp.errstate(invalid="ignore", divide="ignore"):
            out, J = stacked_jacobian(fun, x)
        return out, J.reshape(out.size, onp.size(x))

    def quantities(self, x) -> dict[str, list[float]]:
        """Spectra of every quantity at ``x`` (plain lists over ``wavelengths_at(x)``)."""
        return _plain(compute_quantities(self.eval_design, self.values(onp.asarray(x, float)),
                                         k_min=self.k_min))

    def check_stop(self) -> None:
        """Raise :class:`DeadlineReached` when the wall time is spent or the run stops."""
        if self.deadline is not None and time.time() > self.deadline:
            raise DeadlineReached("the wall-time budget is spent")
        if self.stop_file is not None and os.path.exists(self.stop_file):
            raise DeadlineReached("the run was interrupted")

    def evaluate(self, x, need_grad: bool) -> VectorEvaluation:
        """Objectives, constraints and (with ``need_grad``) their exact Jacobians at ``x``."""
        self.check_stop()
        x = onp.asarray(x, float)
        M, m = self.n_objectives, self.n_constraints
        keep: dict = {}
        try:
            # physics rows and the cheap geometric rows are differentiated separately, so
            # the reverse walk through the solver carries only the physics rows
            if need_grad:
                out_p, J_p = self._jacobian(lambda xv: self._physics_vector(xv, keep), x)
                out_f, J_f = (self._jacobian(self._fab_vector, x) if self._fab
                              else (onp.zeros(0), onp.zeros((0, x.size))))
                out, J = onp.concatenate([out_p, out_f]), onp.vstack([J_p, J_f])
            else:
                out = onp.concatenate([onp.asarray(self._physics_vector(x, keep), float),
                                       onp.asarray(self._fab_vector(x), float)])
                J = None
        except (ComputationError, onp.linalg.LinAlgError, MaterialRangeError,
                FloatingPointError, ZeroDivisionError) as exc:
            return VectorEvaluation(f=onp.full(M, onp.nan), g=onp.full(m, onp.nan),
                                    status="failed", reason=f"{type(exc).__name__}: {exc}",
                                    metrics={"wavelength_nm": self.wavelengths_at(x).tolist()})
        q = _plain(keep["q"])
        ray = onp.asarray(keep["ray"], float)
        metrics = {"wavelength_nm": self.wavelengths_at(x).tolist(), "quantities": q,
                   "objectives": out[:M].tolist(), "constraints": out[M:].tolist()}
        reason = ""
        if onp.any(ray < RAYLEIGH_WARN):
            k = int(onp.argmin(ray))
            reason = (f"Rayleigh anomaly: a diffraction order grazes at "
                      f"{self.wavelengths_at(x)[k]:.6g} nm (derivatives not meaningful)")
        elif not onp.all(onp.isfinite(out)) or (J is not None and not onp.all(onp.isfinite(J))):
            reason = "non-finite objective, constraint or gradient"
        if reason:
            return VectorEvaluation(f=onp.full(M, onp.nan), g=onp.full(m, onp.nan),
                                    status="failed", reason=reason, metrics=metrics)
        return VectorEvaluation(f=out[:M], g=out[M:],
                                df=None if J is None else J[:M],
                                dg=None if J is None else J[M:], metrics=metrics)


def _fab_of(goal: Goal, key: str) -> FabricationConstraint:
    return next(c for c in goal.fabrication_constraints if c.key == key)


def _plain(q: dict) -> dict[str, list[float]]:
    return {k: onp.real(onp.asarray(getval(v))).astype(float).tolist() for k, v in q.items()}


# ---------------------------------------------------------------------------------------------
# pre-run checks
# ---------------------------------------------------------------------------------------------

def _samples(lower, upper, seed: int) -> onp.ndarray:
    n = lower.size
    pts = []
    if n <= 10:  # every corner: the geometric limits are monotone in each quantity
        corners = onp.array(onp.meshgrid(*[[0.0, 1.0]] * n, indexing="ij")).reshape(n, -1).T
        pts.append(corners)
    pts.append(qmc.Sobol(d=n, scramble=True, seed=onp.random.default_rng(seed)).random_base2(8))
    u = onp.concatenate(pts)
    return lower + (upper - lower) * u


def check_goal(goal: Goal) -> dict[str, Any]:
    """Catch an impossible goal before a run starts; return the base design's quantities.

    Checks: every wavelength the goal can ask for (with the wavelength variable at its
    bounds) lies in every material's data range; each fabrication limit can be met somewhere
    within the variable bounds (all corners of the box and 256 Sobol points are tried; the
    geometric quantities are monotone in each variable), and all of them at once; the base
    design evaluates at the union of the goal's wavelengths.

    Raises
    ------
    InputError
        Naming the key path and line of the goal file, with the best value the bounds allow.
    """
    from chiropt.materials import get_material

    problem = GoalProblem(goal)
    design = goal.design
    # 1. material data ranges
    shift = (0.0, 0.0)
    if problem.shift_index is not None:
        v = goal.variables[problem.shift_index]
        shift = (v.lower - problem.reference_nm, v.upper - problem.reference_nm)
    mats = []
    for i, part in enumerate(design.particles):
        mats.append((f"design.particles[{i}].material", part.material))
        if part.core_material is not None:
            mats.append((f"design.particles[{i}].core_material", part.core_material))
    if design.substrate is not None:
        mats.append(("design.substrate.material", design.substrate))
        mats += [(f"design.layers[{i}].material", la.material)
                 for i, la in enumerate(design.layers)]
    ranges = []
    for key, spec in mats:
        mat = get_material(spec, key=key, base_dir=design.base_dir)
        ranges.append((key, mat, tuple(mat.wavelength_range_nm)))
    items = [(o.key, o.spec, o.robust) for o in goal.objectives]
    items += [(c.key, c.spec, c.robust) for c in goal.metric_constraints]
    for key, spec, robust in items:
        # a robust band reaches beyond the term's own wavelengths by its outer nodes
        pad = (float(onp.max(onp.abs(problem.robust_plans[key].band_offsets_nm)))
               if robust is not None else 0.0)
        lo = min(spec.wavelengths_nm) + shift[0] - pad
        hi = max(spec.wavelengths_nm) + shift[1] + pad
        skey = {"at": f"{key}.at_nm", "band": f"{key}.band_nm"}.get(spec.kind,
                                                                     "design.illumination")
        if pad > 0 and all(a * (1 - 1e-6) <= lo + pad and hi - pad <= b * (1 + 1e-6)
                           for _, _, (a, b) in ranges):
            skey = f"{key}.robust.band_nm"   # only the robust band leaves the data
        for mkey, mat, (a, b) in ranges:
            if lo < a * (1 - 1e-6) or hi > b * (1 + 1e-6):
                moved = (" (the wavelength variable moves it by "
                         f"{shift[0]:+g} to {shift[1]:+g} nm)") if problem.shift_index is not None \
                    else ""
                raise goal.error(skey, f"wavelengths {lo:g}-{hi:g} nm{moved} leave the data "
                                       f"range {a:g}-{b:g} nm of {mat.label()} ({mkey}); "
                                       "narrow the band or the wavelength bounds, or choose a "
                                       "material entry that covers them")
    # 2. fabrication limits
    rows = problem._fab
    if rows:
        X = _samples(problem.lower, problem.upper, goal.seed)
        G = onp.array([[float(row(problem.parameters_at(x))) for row in rows] for x in X])
        for r, row in enumerate(rows):
            key, what = row.key, row.what
            best = int(onp.argmin(G[:, r]))
            if G[best, r] > 1e-9:
                c = _fab_of(goal, key)
                p = problem.parameters_at(X[best])
                at = ", ".join(f"{path} = {p[path]:g}" for path in problem.paths
                               if path != WAVELENGTH_PATH)
                word = "largest" if row.lower else "smallest"
                raise goal.error(f"{key}.value", f"{c.kind} = {c.value:g} cannot be met: the "
                                                 f"{word} {what} the variable bounds allow is "
                                                 f"{float(row.quantity(p)):.4g} (at {at}); "
                                                 "relax the limit or widen the bounds")
        if not onp.any(onp.all(G <= 1e-9, axis=1)):
            keys = sorted({row.key for row in rows})
            raise goal.error(keys[0], f"the fabrication limits {', '.join(keys)} cannot all "
                                      "hold at once within the variable bounds (tried every "
                                      "corner and 256 Sobol points); relax one of them")
    # 3. the base design at every wavelength of the goal
    try:
        q = compute_quantities(problem.eval_design, k_min=problem.k_min)
    except MaterialRangeError as exc:
        raise goal.error(_wavelength_key(goal, getattr(exc, "range_nm", None)),
                         exc.message) from None
    except InputError:
        raise
    except (ComputationError, onp.linalg.LinAlgError) as exc:
        return {"error": f"{type(exc).__name__}: {exc}"}
    return {"wavelength_nm": problem.wavelengths_nm.tolist(), "quantities": _plain(q)}


def _wavelength_key(goal, range_nm) -> str:
    """Key path of the first goal wavelength (``at_nm``/``band_nm``) outside ``range_nm``."""
    if range_nm is not None:
        lo, hi = range_nm
        for group in ("objectives", "constraints"):
            for i, item in enumerate(getattr(goal, group)):
                wl = getattr(item, "wavelengths_nm", None)
                if wl and any(not lo <= w <= hi for w in wl):
                    word = "band_nm" if getattr(item, "band_nm", None) else "at_nm"
                    return f"{group}[{i}].{word}"
    return "design.illumination.wavelength_nm"
