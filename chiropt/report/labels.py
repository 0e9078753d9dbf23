"""Truthful labels of a goal's metrics for columns, plots and candidate headers.

Owns: ``spec_label`` and ``objective_label``. When the wavelength is a design variable,
every metric spec moves with it (the objectives are read at the nominal wavelengths
shifted by ``x_wavelength - reference``), so a label such as ``g@700nm`` would be wrong
for most designs; the labels then name the wavelength relative to the design's own
(``g@design-wavelength``, ``g@design-wavelength+50nm``, ``u@design-wavelength-20..+20nm``)
and the per-row wavelength is the ``illumination.wavelength_nm`` column. Without a
wavelength variable they are the goal's own labels (``g@700nm``). Imports no plotting.
"""

from __future__ import annotations

__all__ = ["DESIGN_WAVELENGTH", "axis_where", "objective_label", "spec_label"]

DESIGN_WAVELENGTH = "design-wavelength"


def _moves(problem) -> bool:
    return getattr(problem, "shift_index", None) is not None


def spec_label(spec, problem) -> str:
    """Label of where a metric is read (``700nm``, or relative to the design's wavelength)."""
    if not _moves(problem) or spec.kind == "design":
        return spec.label()
    ref = problem.reference_nm
    if spec.kind == "at":
        off = spec.wavelengths_nm[0] - ref
        return DESIGN_WAVELENGTH + (f"{off:+g}nm" if off else "")
    a, b = spec.band_nm[0] - ref, spec.band_nm[1] - ref
    return f"{DESIGN_WAVELENGTH}{a:+g}..{b:+g}nm"


def objective_label(objective, problem) -> str:
    """Column-safe objective label with a truthful wavelength (see the module notes)."""
    own = objective.label()
    return own.rsplit("@", 1)[0] + "@" + spec_label(objective.spec, problem)


def axis_where(where: str) -> str:
    """Words for the part of a label after ``@`` (plot axes)."""
    if where.startswith(DESIGN_WAVELENGTH):
        rest = where[len(DESIGN_WAVELENGTH):]
        return "the design's wavelength" + (f" {rest}" if rest else "")
    return where
