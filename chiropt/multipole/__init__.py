"""Multipole (T-matrix) lattice model beyond dipoles: general lmax (docs/theory.md §9).

Owns: VSWF translation tables (translation.py), Ewald lattice sums of scalar spherical
waves (latticesums.py), particle T-matrices (tmatrix.py) and the coupled multipole solve
with the per-order substrate (solve.py), whose result is a ``chiropt.solve.Solution``.
The vector spherical waves and their conventions are the shared kernel
``chiropt.sphericalwaves``.
Must not import: search, store, report, cli.
"""

from chiropt.multipole.latticesums import lattice_sums
from chiropt.multipole.solve import (
    MultipoleSolution,
    absorbed_power,
    solve_multipole,
)
from chiropt.multipole.tmatrix import (
    Sphere,
    TMatrixSource,
    choose_lmax,
    coreshell_tmatrix,
    design_particles,
    sphere_tmatrix,
    stack_tmatrices,
)
from chiropt.multipole.translation import translation_matrix, translation_table

__all__ = [
    "MultipoleSolution",
    "Sphere",
    "TMatrixSource",
    "absorbed_power",
    "choose_lmax",
    "coreshell_tmatrix",
    "design_particles",
    "lattice_sums",
    "solve_multipole",
    "sphere_tmatrix",
    "stack_tmatrices",
    "translation_matrix",
    "translation_table",
]
