"""Particles: multipole response (T-matrix) of single scatterers.

Owns: Mie coefficients of spheres and coated spheres and the dipole
polarizabilities derived from them (:mod:`chiropt.particles.mie`).
Must not import: store, report, cli, search, goals.
"""

from chiropt.particles.mie import (
    MieEfficiencies,
    coreshell_mie_coefficients,
    dipole_polarizabilities,
    mie_coefficients,
    mie_efficiencies,
    wiscombe_n_max,
)

__all__ = [
    "MieEfficiencies",
    "coreshell_mie_coefficients",
    "dipole_polarizabilities",
    "mie_coefficients",
    "mie_efficiencies",
    "wiscombe_n_max",
]
