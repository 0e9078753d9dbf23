"""One forward model: Design (+ traced values) -> solution, power fractions, region metrics.

Owns: the choice of solver (electric+magnetic dipoles for ``lmax = 1``, the multipole
lattice model for ``lmax >= 2`` or ``auto``), the orders the near-field region needs, and
the validity check (change of every reported quantity with one more multipole order).
Both ``chiropt.response.evaluate`` and ``chiropt.sensitivity`` call :func:`run_model`, so
the optimizer, the CLI and the store see exactly the same numbers.
Must not import: search, store, report, cli.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as onp
from autograd.tracer import getval

from chiropt.design import Design
from chiropt.farfield import power_fractions
from chiropt.solution import Solution
from chiropt.solve import solve
from chiropt.structure import Structure, build_structure

LMAX_CAP = 8


@dataclass
class ModelOutput:
    """What one forward run produced.

    structure, solution; fractions: R, T, A, A_dipoles (W, 2) and, from the multipole
    model, A_particles (chiropt.farfield.power_fractions); metrics: region metrics
    (or None); lmax: the multipole degree used.
    """

    structure: Structure
    solution: Solution
    fractions: dict
    metrics: dict | None
    lmax: int


def metrics_tolerance(design: Design) -> float:
    """Order-truncation target of the region averages (u, c, g, background, s0, DOCP): the
    share of the region's intensity left in the omitted orders, the design's tolerance but
    no tighter than 1e-6. Measured: the averages then agree with fully converged ones to
    ~1e-8 relative (a Si sphere array, plane 20 nm above, with and without glass,
    lmax 1-4), because the omitted share decays geometrically with the order."""
    return max(design.tolerance, 1e-6)


def maps_tolerance(design: Design) -> float:
    """Order-truncation target of fields at points (maps, ``--fields``, area fraction).

    A point value converges like the omitted amplitudes, not their squares, so the share
    target is the square of :func:`metrics_tolerance`: measured, |E|^2 at every grid point
    then agrees with the converged field to ~6e-7 relative (5e-4 at the averages' target).
    """
    return metrics_tolerance(design) ** 2


def traced_region(design: Design, values: dict[str, Any] | None):
    """The design's region with region.* quantities replaced by (possibly traced) values."""
    from dataclasses import replace

    region = design.region
    if region is None or not values:
        return region
    changes = {key: values[f"region.{key}"] for key in ("height_nm", "from_nm", "thickness_nm")
               if f"region.{key}" in values}
    return replace(region, **changes) if changes else region


def resolve_lmax(design: Design, structure: Structure, values=None) -> int:
    """The multipole degree: the design's integer, or for ``auto`` the smallest lmax whose
    first omitted Mie order of every particle is below ``model.lmax_tolerance``.
    (Non-spherical particles always go through the multipole model, at lmax 1 with their
    full anisotropic dipole T-matrix.)"""
    if design.lmax != "auto":
        return int(design.lmax)
    from chiropt.multipole.tmatrix import choose_lmax, design_particles

    return choose_lmax(design_particles(design, values), structure.k,
                       tol=design.lmax_tolerance, lmax_cap=LMAX_CAP)


def run_model(design: Design, values: dict[str, Any] | None = None, *, lmax: int | None = None,
              area_grid: int = 0, warn: bool = False, maps: bool = False) -> ModelOutput:
    """Solve ``design`` (with optional traced replacements ``values``).

    Parameters
    ----------
    design : Design
    values : dict, optional — replacements for named design quantities (may be traced)
    lmax : int, optional — force the multipole degree (validity checks)
    area_grid : int — grid for the handedness area fraction (0 skips it; not differentiable)
    warn : bool — let solver warnings (Rayleigh anomaly) through
    maps : bool — keep the orders that point values of the fields need
        (:func:`maps_tolerance`), not only those of the region averages

    Returns
    -------
    ModelOutput
    """
    with warnings.catch_warnings():
        if not warn:
            warnings.simplefilter("ignore")
        st = build_structure(design, values)
        degree = lmax if lmax is not None else resolve_lmax(design, st, values)
        region = traced_region(design, values)
        tol = metrics_tolerance(design)
        if degree == 1 and all(st.spherical):
            sol = solve(st, warn=warn)
        else:
            from chiropt.multipole.solve import solve_multipole
            from chiropt.multipole.tmatrix import design_particles, stack_tmatrices

            g_max = None
            if region is not None:
                from chiropt.fields import region_g_max, region_span

                g_max = region_g_max(st, region_span(st, region)[0],
                                     tol=maps_tolerance(design) if maps else tol)
            T = stack_tmatrices(design_particles(design, values), st.k, degree)
            sol = solve_multipole(st, T, degree, warn=warn, g_max=g_max)
        frac = power_fractions(sol)
        metrics = None
        if region is not None:
            from chiropt.metrics import region_metrics

            metrics = region_metrics(sol, region, tol=tol, area_grid=area_grid)
    return ModelOutput(structure=st, solution=sol, fractions=frac, metrics=metrics, lmax=degree)


def quantities_of(output: ModelOutput) -> dict[str, Any]:
    """Spectra (W,) by name: R+1, R-1, T+1, T-1, A+1, A-1 and, with a region, u, c, g,
    background, docp+1, docp-1, s0+1, s0-1."""
    out: dict[str, Any] = {}
    for name in ("R", "T", "A"):
        out[name + "+1"] = output.fractions[name][:, 0]
        out[name + "-1"] = output.fractions[name][:, 1]
    m = output.metrics
    if m is not None:
        for key in ("u", "c", "g", "background"):
            out[key] = m[key]
        for key in ("docp", "s0"):
            out[key + "+1"] = m[key]["+1"]
            out[key + "-1"] = m[key]["-1"]
    return out


def validity(design: Design, output: ModelOutput | None = None) -> dict[str, Any]:
    """Change of every reported quantity when one more multipole order is included.

    Returns
    -------
    dict: ``lmax`` (used), ``lmax_check`` (= lmax + 1), ``change`` {quantity: max over
    wavelengths of |q(lmax+1) - q(lmax)|}, ``worst`` (largest change) [-].
    """
    if output is None:
        output = run_model(design)
    here = quantities_of(output)
    upper = quantities_of(run_model(design, lmax=min(output.lmax + 1, LMAX_CAP)))
    change = {k: float(onp.max(onp.abs(onp.asarray(getval(upper[k]))
                                       - onp.asarray(getval(here[k]))))) for k in here}
    return {"lmax": output.lmax, "lmax_check": min(output.lmax + 1, LMAX_CAP),
            "change": change, "worst": max(change.values())}
