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
from autograd.tracer import getval, isbox

from chiropt.autodiff import untraced
from chiropt.design import Design
from chiropt.farfield import power_fractions
from chiropt.solution import Solution
from chiropt.solve import solve
from chiropt.structure import Structure, build_structure

LMAX_CAP = 8


class TruncationWarning(UserWarning):
    """A model's own truncation target was not reached (results are estimates)."""


@dataclass
class ModelOutput:
    """What one forward run produced.

    structure, solution; fractions: R, T, A, A_dipoles (W, 2) and, from the multipole
    model, A_particles (chiropt.farfield.power_fractions); metrics: region metrics
    (or None); lmax: the multipole degree used (None for the Fourier solver);
    harmonics: the Fourier solver's harmonic count (None for the others);
    harmonics_change: with ``harmonics: auto``, the largest change of R, T and the region
    metrics at the last step of the count (None otherwise); harmonics_changes: that change
    per quantity (the error estimate beside each one).
    """

    structure: Structure
    solution: Solution
    fractions: dict
    metrics: dict | None
    lmax: int | None
    harmonics: int | None = None
    harmonics_change: float | None = None
    harmonics_changes: dict | None = None


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


def resolve_lmax(design: Design, structure: Structure, values=None, particles=None) -> int:
    """The multipole degree: the design's integer, or for ``auto`` the smallest lmax whose
    first omitted Mie order of every particle is below ``model.lmax_tolerance``.
    (Non-spherical particles always go through the multipole model, at lmax 1 with their
    full anisotropic dipole T-matrix.) ``particles``: the design's T-matrix sources, if
    already made (:func:`chiropt.multipole.tmatrix.design_particles`)."""
    if design.lmax != "auto":
        return int(design.lmax)
    from chiropt.multipole.tmatrix import choose_lmax, design_particles

    if particles is None:
        particles = design_particles(design, values)
    return choose_lmax(particles, structure.k, tol=design.lmax_tolerance, lmax_cap=LMAX_CAP)


#: groups of quantities that can be computed from plain values when no derivative is asked
#: of them (``run_model(..., plain=...)``): the far-field fractions R, T, A and the capacity
#: quantities of a region above the particles
PLAIN_GROUPS = ("far_field", "capacity")


def run_model(design: Design, values: dict[str, Any] | None = None, *, lmax: int | None = None,
              harmonics: int | None = None, area_grid: int = 0, warn: bool = False,
              maps: bool = False, plain: tuple[str, ...] = (),
              trim: bool = False) -> ModelOutput:
    """Solve ``design`` (with optional traced replacements ``values``).

    Parameters
    ----------
    design : Design
    values : dict, optional — replacements for named design quantities (may be traced)
    lmax : int, optional — force the multipole degree (validity checks)
    harmonics : int, optional — force the Fourier solver's harmonic count (validity checks)
    area_grid : int — grid for the handedness area fraction (0 skips it; not differentiable)
    warn : bool — let solver warnings (Rayleigh anomaly) through
    maps : bool — keep the orders that point values of the fields need
        (:func:`maps_tolerance`), not only those of the region averages
    plain : groups of :data:`PLAIN_GROUPS` computed from plain values: the same numbers
        with no derivative through them (a goal whose rows do not read them records no
        operations for them on the tape)
    trim : bool — the solution is used for the returned fractions and region metrics
        only: the multipole solution keeps only the orders they need (no point fields at
        other heights can be taken from it afterwards)

    Returns
    -------
    ModelOutput
    """
    unknown = set(plain) - set(PLAIN_GROUPS)
    if unknown:
        raise ValueError(f"plain groups must be among {PLAIN_GROUPS}; got {sorted(unknown)}")
    if design.solver == "fourier":
        return _run_fourier(design, values, harmonics=harmonics, area_grid=area_grid,
                            warn=warn, plain=plain)
    with warnings.catch_warnings():
        if not warn:
            warnings.simplefilter("ignore")
        st = build_structure(design, values)
        fixed = lmax if lmax is not None else (None if design.lmax == "auto"
                                                else int(design.lmax))
        particles = None   # T-matrix sources, made once for the degree and the solve
        if fixed != 1 or not all(st.spherical):
            from chiropt.multipole.tmatrix import design_particles

            particles = design_particles(design, values)
        degree = fixed if fixed is not None else resolve_lmax(design, st, values, particles)
        region = traced_region(design, values)
        tol = metrics_tolerance(design)
        if degree == 1 and all(st.spherical):
            sol = solve(st, warn=warn)
        else:
            from chiropt.multipole.solve import solve_multipole
            from chiropt.multipole.tmatrix import stack_tmatrices

            g_max = None
            if region is not None:
                from chiropt.fields import region_g_max, region_span

                g_max = region_g_max(st, region_span(st, region)[0],
                                     tol=maps_tolerance(design) if maps else tol)
            T = stack_tmatrices(particles, st.k, degree)
            sol = solve_multipole(st, T, degree, warn=warn, g_max=g_max,
                                  trim=trim and not maps)
        frac = _fractions(sol, plain)
        metrics = _region_metrics(sol, region, tol, area_grid, plain)
    return ModelOutput(structure=st, solution=sol, fractions=frac, metrics=metrics, lmax=degree)


def _fractions(sol, plain):
    traced = isbox(sol.up_sp)
    return power_fractions(untraced(sol) if traced and "far_field" in plain else sol)


def _region_metrics(sol, region, tol, area_grid, plain=()):
    if region is None:
        return None
    from chiropt.metrics import region_metrics

    return region_metrics(sol, region, tol=tol, area_grid=area_grid,
                          plain_capacity="capacity" in plain)


#: Harmonic counts tried by ``harmonics: auto`` (whole shells are kept, so the counts
#: actually used differ a little by lattice).
HARMONIC_STEPS = (25, 49, 97, 197, 301, 441, 625, 841, 1201, 1601, 2000)


def _fourier_once(design, values, count, area_grid, warn, plain=()):
    from chiropt.fourier.solve import solve_fourier

    st = build_structure(design, values)
    region = traced_region(design, values)
    sol = solve_fourier(design, st, values, harmonics=count, factorization=design.factorization,
                        slices=design.slices, warn=warn,
                        interior=region is not None and region.inside_layer)
    frac = _fractions(sol, plain)
    metrics = _region_metrics(sol, region, metrics_tolerance(design), area_grid, plain)
    return ModelOutput(structure=st, solution=sol, fractions=frac, metrics=metrics, lmax=None,
                       harmonics=sol.harmonics)


def _run_fourier(design, values, *, harmonics, area_grid, warn, plain=()):
    """The Fourier modal solver at a fixed count, or ``auto``: the count is raised along
    :data:`HARMONIC_STEPS` (on plain values, up to ``model.harmonics_max``) until R, T and
    the region metrics change by less than ``model.harmonics_tolerance`` from one step to
    the next; the final solve is traced at the chosen count. When the cap is reached first,
    ``harmonics_change`` (the last change) says how far from converged the result is."""
    with warnings.catch_warnings():
        if not warn:
            warnings.simplefilter("ignore")
        count = harmonics if harmonics is not None else design.harmonics
        if count != "auto":
            return _fourier_once(design, values, int(count), area_grid, warn, plain)
        plain_values = None if values is None else {k: getval(v) for k, v in values.items()}
        previous, change, changes = None, None, None
        for step in [s for s in HARMONIC_STEPS if s <= design.harmonics_max]:
            out = _fourier_once(design, plain_values, step, 0, False)
            here = {k: onp.asarray(getval(v))
                    for k, v in quantities_of(out, capacity=False).items()}
            if previous is not None:
                changes = {k: float(onp.max(onp.abs(here[k] - previous[k]))) for k in here}
                change = max(changes.values())
                if change < design.harmonics_tolerance:
                    break
            previous = here
        chosen = out.harmonics
        traced = any(v is not getval(v) for v in (values or {}).values())
        if traced or area_grid or warn:
            out = _fourier_once(design, values, chosen, area_grid, warn, plain)
        out.harmonics_change = change
        out.harmonics_changes = changes
        if change is None or change >= design.harmonics_tolerance:
            warnings.warn(f"harmonics: auto stopped at model.harmonics_max = "
                          f"{design.harmonics_max} ({chosen} harmonics) before converging: the "
                          f"last step changed a quantity by "
                          f"{float('nan') if change is None else change:.3g} (model."
                          f"harmonics_tolerance {design.harmonics_tolerance:g}); raise "
                          "harmonics_max or read the results as estimates",
                          TruncationWarning, stacklevel=3)
        return out


def quantities_of(output: ModelOutput, *, capacity: bool = True,
                  k_min: tuple[float, ...] = ()) -> dict[str, Any]:
    """Spectra (W,) by name: R+1, R-1, T+1, T-1, A+1, A-1 and, with a region, u, c, g,
    background, docp+1, docp-1, s0+1, s0-1; with ``capacity`` (regions above the particles
    only, where the averages are order sums) also ``CAPACITY_QUANTITIES`` and
    ``ev_share_k<k>`` for each threshold in ``k_min`` (:mod:`chiropt.capacity`).
    The model's own checks (harmonic convergence, validity) compare the quantities without
    the capacity ones: ratios such as ``cd_efficiency`` are ill-conditioned where the
    capacity is tiny and would decide them."""
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
        if capacity and "cd_capacity" in m:
            out.update(capacity_quantities(m, k_min))
    return out


#: the capacity quantities of a region above the particles (docs/theory.md §18)
CAPACITY_QUANTITIES = ("ev_share", "ev_share+1", "ev_share-1", "cd_capacity",
                       "cd_efficiency", "docp_efficiency+1", "docp_efficiency-1", "g_00",
                       "g_prop", "g_ev")


def capacity_quantities(metrics: dict, k_min: tuple[float, ...] = ()) -> dict[str, Any]:
    """The capacity quantities (W,) by name from region metrics (see ``quantities_of``)."""
    from chiropt.capacity import ev_share_above, ev_share_name

    out: dict[str, Any] = {}
    for key in ("ev_share", "cd_capacity", "cd_efficiency", "g_00", "g_prop", "g_ev"):
        out[key] = metrics[key]
    for h in ("+1", "-1"):
        out["ev_share" + h] = metrics["ev_share_h"][h]
        out["docp_efficiency" + h] = metrics["docp_efficiency"][h]
    for k in k_min:
        out[ev_share_name(k)] = ev_share_above(metrics, k)
    return out


def validity(design: Design, output: ModelOutput | None = None) -> dict[str, Any]:
    """Change of every reported quantity with a finer model: one more multipole order, or
    for the Fourier solver the next harmonic count of :data:`HARMONIC_STEPS`.

    Returns
    -------
    dict: ``lmax`` (used; None for the Fourier solver), ``lmax_check`` (= lmax + 1),
    ``harmonics`` / ``harmonics_check`` (Fourier solver), ``label`` / ``label_check``
    (e.g. "lmax = 2" / "lmax = 3"), ``change`` {quantity: max over wavelengths of
    |q(finer) - q(used)|}, ``worst`` (largest change) [-].
    """
    # only the fractions and region metrics are compared: the solves keep only the orders
    # those need (``trim``, the same numbers)
    if output is None:
        output = run_model(design, trim=True)
    here = quantities_of(output, capacity=False)
    if design.solver == "fourier":
        finer = next((s for s in HARMONIC_STEPS if s > 1.3 * output.harmonics),
                     HARMONIC_STEPS[-1])
        upper_out = run_model(design, harmonics=finer, trim=True)
        info = {"lmax": None, "lmax_check": None, "harmonics": output.harmonics,
                "harmonics_check": upper_out.harmonics,
                "label": f"{output.harmonics} harmonics",
                "label_check": f"{upper_out.harmonics} harmonics"}
        if any(p.shape in ("sphere", "spheroid") for p in design.particles):
            # staircased bodies: the slicing error is the change with twice the slices
            from dataclasses import replace

            finer = replace(design, slices=2 * design.slices)
            sliced = quantities_of(run_model(finer, harmonics=output.harmonics, trim=True),
                                   capacity=False)
            info["slices"], info["slices_check"] = design.slices, 2 * design.slices
            info["slicing_change"] = max(
                float(onp.max(onp.abs(onp.asarray(getval(sliced[k]))
                                      - onp.asarray(getval(here[k]))))) for k in here)
            info["label_check"] += f" (and {2 * design.slices} slices)"
    else:
        check = min(output.lmax + 1, LMAX_CAP)
        upper_out = run_model(design, lmax=check, trim=True)
        info = {"lmax": output.lmax, "lmax_check": check, "label": f"lmax = {output.lmax}",
                "label_check": f"lmax = {check}"}
    upper = quantities_of(upper_out, capacity=False)
    change = {k: float(onp.max(onp.abs(onp.asarray(getval(upper[k]))
                                       - onp.asarray(getval(here[k]))))) for k in here}
    worst = max(max(change.values()), info.get("slicing_change", 0.0))
    return dict(info, change=change, worst=worst)
