"""Fourier modal method (rigorous coupled-wave analysis) for periodic patterned layers.

A solver of its own beside the dipole and multipole solvers: the structure is a stack of
z-invariant layers (host above, patterned layers holding the particles' cross-sections,
uniform films, substrate), each layer's fields are expanded in the lattice's plane-wave
harmonics, layer eigenmodes are joined by scattering matrices (Redheffer star product).

Modules: ``harmonics`` (the truncated harmonic set), ``shapes`` (analytic Fourier
coefficients of inclusions and their normal-vector fields), ``permittivity`` (the
factorized permittivity matrices), ``eig`` (eigen-decomposition primitive with its
derivative rule), ``smatrix`` (layer modes, interfaces, Redheffer products), ``stack``
(the whole layered structure, amplitudes and interior fields).
Must not import: solve, multipole, fields, metrics, search, store, report, cli.
"""

from chiropt.fourier.stack import FourierLayer, FourierStack, solve_stack
from chiropt.fourier.shapes import Circle, Ellipse, Polygon, Rectangle, Ring

__all__ = ["Circle", "Ellipse", "FourierLayer", "FourierStack", "Polygon", "Rectangle", "Ring",
           "solve_stack"]
