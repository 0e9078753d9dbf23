"""Exact derivatives of every reported quantity with respect to named design quantities.

Owns: the differentiable map (design, values of named quantities) -> spectra of every
reported quantity, its reverse-mode gradient for scalar objectives (what the gradient
optimizers call) and its per-wavelength sensitivities (``evaluate --grad``).
Must not import: search, store, report, cli.

Names: design quantities are the key paths of ``Design.parameters()``
(``particles[0].radius_nm``, ``lattice.period_nm``, ``gap_nm``, ``layers[0].thickness_nm``,
``illumination.polar_deg``, ``illumination.wavelength_nm`` (shifts every wavelength),
``region.height_nm``, ``particles[0].material.n`` ...), in user units (nm, deg).
Quantities: ``R+1``, ``R-1``, ``T+1``, ``T-1``, ``A+1``, ``A-1`` and, with a region,
``u``, ``c``, ``g``, ``background``, ``docp+1``, ``docp-1``, ``s0+1``, ``s0-1`` and, for
a region above the particles, the capacity quantities (``CAPACITY``: ``ev_share``,
``cd_capacity``, ``cd_efficiency``, ``docp_efficiency+1`` ..., docs/theory.md §18).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any
from collections.abc import Callable

import autograd.numpy as np
import numpy as onp
from autograd import value_and_grad as _value_and_grad
from autograd.differential_operators import make_jvp_reversemode
from autograd.tracer import getval

import chiropt.autodiff  # noqa: F401  (registers the fast indexing rule)
from chiropt.design import Design
from chiropt.errors import InputError
from chiropt.model import CAPACITY_QUANTITIES, metrics_tolerance, quantities_of, run_model

__all__ = ["compute_quantities", "metrics_tolerance", "plain_groups", "quantity_names",
           "spectrum_sensitivities", "value_and_gradient", "Sensitivity"]
from chiropt.solution import RAYLEIGH_WARN

FAR_FIELD = ("R+1", "R-1", "T+1", "T-1", "A+1", "A-1")
NEAR_FIELD = ("u", "c", "g", "background", "docp+1", "docp-1", "s0+1", "s0-1")
CAPACITY = CAPACITY_QUANTITIES


def quantity_names(design: Design) -> tuple[str, ...]:
    """Names of the quantities reported for ``design`` (near-field ones need a region; the
    capacity ones a region above the particles)."""
    if design.region is None:
        return FAR_FIELD
    return FAR_FIELD + NEAR_FIELD + (() if design.region.inside_layer else CAPACITY)


def plain_groups(metrics) -> tuple[str, ...]:
    """The groups of ``chiropt.model.PLAIN_GROUPS`` that none of the metric names
    ``metrics`` reads (each name is a quantity, or a quantity of both helicities averaged:
    ``docp`` reads ``docp+1`` and ``docp-1``): what a goal's rows need no derivative of."""
    def base(name):
        return name[:-2] if name.endswith(("+1", "-1")) else name

    names = {base(m) for m in metrics}
    out = []
    far = {base(n) for n in FAR_FIELD} | {"A_particles", "A_dipoles"}
    if not names & far:
        out.append("far_field")
    if not (names & {base(n) for n in CAPACITY} or any(n.startswith("ev_share") for n in names)):
        out.append("capacity")
    return tuple(out)


def solved_quantities(design: Design, values: dict[str, Any] | None = None,
                      *, k_min: tuple[float, ...] = (), plain: tuple[str, ...] = ()):
    """The model output (its solution keeping only the orders the quantities need) and the
    quantities of :func:`compute_quantities` from it: ``(output, quantities)``, for callers
    that also check the output (``chiropt.model.validity``)."""
    output = run_model(design, values, plain=tuple(plain), trim=True)
    return output, quantities_of(output, k_min=tuple(k_min))


def compute_quantities(design: Design, values: dict[str, Any] | None = None,
                       *, with_flags: bool = False, k_min: tuple[float, ...] = (),
                       plain: tuple[str, ...] = ()):
    """Spectra (W,) of every reported quantity; differentiable in ``values``.

    Parameters
    ----------
    design : Design
    values : dict, optional — replacements for named design quantities (may be traced)
    with_flags : bool — also return the (W,) Rayleigh proximity (plain floats)
    k_min : thresholds of the ``ev_share_k<k>`` quantities to add [-]
    plain : groups of quantities computed from plain values, without derivatives
        (``chiropt.model.PLAIN_GROUPS``: ``far_field``, ``capacity``)

    Returns
    -------
    dict name -> (W,) array [, rayleigh (W,)]
    """
    # only the quantities leave this function: the solution keeps only the orders they need
    output, out = solved_quantities(design, values, k_min=k_min, plain=plain)
    sol = output.solution
    if with_flags:
        return out, onp.asarray(getval(sol.rayleigh))
    return out


def _check_paths(design: Design, paths) -> dict[str, Any]:
    params = design.parameters()
    for path in paths:
        if path not in params:
            raise InputError("--grad", f"unknown design quantity '{path}'; this design has: "
                                       f"{', '.join(params)}")
    return params


@dataclass
class Sensitivity:
    """Value and gradient of a scalar objective.

    value : float; gradient : dict path -> float (or array for array-valued paths);
    flagged : True when a wavelength sits on a Rayleigh anomaly (derivatives there are
    not meaningful); reasons : messages.
    """

    value: float
    gradient: dict[str, Any]
    flagged: bool = False
    reasons: list[str] = field(default_factory=list)


def value_and_gradient(design: Design, objective: Callable[[dict], Any], paths,
                       values: dict[str, Any] | None = None) -> Sensitivity:
    """Value and exact reverse-mode gradient of ``objective(quantities)``.

    Parameters
    ----------
    design : Design
    objective : callable taking the dict of quantity spectra (see module docstring) and
        returning a real scalar, written with ``autograd.numpy`` (e.g.
        ``lambda q: np.mean(q["g"])`` for a band average)
    paths : names of the design quantities to differentiate with respect to
    values : current values of (some of) the named quantities, default: the design's

    Returns
    -------
    Sensitivity (gradient in objective units per user unit of each path: per nm, per deg)
    """
    params = _check_paths(design, paths)
    base = {p: (values or {}).get(p, params[p]) for p in paths}
    fixed = {k: v for k, v in (values or {}).items() if k not in base}
    flags: list = []

    def f(x):
        vals = dict(fixed)
        vals.update(x)
        q, ray = compute_quantities(design, vals, with_flags=True)
        flags.append(ray)
        return objective(q)

    value, grad = _value_and_grad(f)(base)
    ray = flags[-1]
    flagged = bool(onp.any(ray < RAYLEIGH_WARN))
    reasons = (["a diffraction order grazes (Rayleigh anomaly): derivatives are not "
                "meaningful there"] if flagged else [])
    grad = {k: (float(v) if onp.ndim(v) == 0 else onp.asarray(v)) for k, v in grad.items()}
    return Sensitivity(value=float(value), gradient=grad, flagged=flagged, reasons=reasons)


def spectrum_sensitivities(design: Design, paths) -> dict[str, dict[str, onp.ndarray]]:
    """Per-wavelength derivatives d(quantity)/d(path) of every reported spectrum.

    Uses one Jacobian-vector product per path (reverse mode applied twice), so the cost
    does not grow with the number of wavelengths. An array-valued path
    (``illumination.wavelength_nm``) is perturbed at every wavelength at once, which gives
    each wavelength's own derivative because wavelengths are independent.

    Returns
    -------
    dict quantity -> {path: (W,) array}, in quantity units per user unit of the path.
    """
    params = _check_paths(design, paths)
    names = quantity_names(design)
    out: dict[str, dict[str, onp.ndarray]] = {n: {} for n in names}
    for path in paths:
        x0 = onp.asarray(params[path], float)

        def packed(x, path=path):
            q = compute_quantities(design, {path: x})
            return np.stack([np.real(q[n]) for n in names])

        jvp = make_jvp_reversemode(packed)(x0)
        col = onp.asarray(jvp(onp.ones_like(x0)))
        for i, n in enumerate(names):
            out[n][path] = col[i]
    return out
