"""Substrate and thin-film stacks: per-order Fresnel and multilayer coefficients.

Owns: the normal wavenumber branch, single-interface Fresnel coefficients,
multilayer reflection/transmission for every diffraction order (from the host or
the substrate side) and plane-wave flux factors. See :mod:`chiropt.stack.fresnel`
for the conventions.

Must not import: chiropt modules other than ``chiropt.errors`` (never
store/report/cli).
"""

from chiropt.stack.fresnel import (
    flux_factor,
    interface_coefficients,
    normal_wavenumber,
    power_flux_ratio,
    refractive_index,
)
from chiropt.stack.multilayer import StackCoefficients, stack_coefficients

__all__ = [
    "StackCoefficients",
    "flux_factor",
    "interface_coefficients",
    "normal_wavenumber",
    "power_flux_ratio",
    "refractive_index",
    "stack_coefficients",
]
