"""Lattices, diffraction orders and Ewald lattice sums.

Owns: ``Lattice`` (bravais.py), order selection and the kz branch (orders.py), the
Faddeeva primitive (faddeeva.py) and the quasi-periodic Green's dyadics (ewald.py).
Must not import: store, report, cli, search, particles, stack.
"""

from chiropt.lattice.bravais import Lattice
from chiropt.lattice.ewald import (
    lattice_green_derivatives,
    lattice_green_dyadics,
    splitting_parameter,
)
from chiropt.lattice.faddeeva import erfc_complex, wofz
from chiropt.lattice.orders import (
    kz_branch,
    order_indices,
    order_wavevectors,
    rayleigh_proximity,
)

__all__ = [
    "Lattice",
    "erfc_complex",
    "kz_branch",
    "lattice_green_derivatives",
    "lattice_green_dyadics",
    "order_indices",
    "order_wavevectors",
    "rayleigh_proximity",
    "splitting_parameter",
    "wofz",
]
