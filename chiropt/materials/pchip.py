"""Shape-preserving cubic interpolation as an autograd primitive.

Owns: building a piecewise cubic Hermite interpolant (PCHIP) from tabulated
data, and ``ppoly_eval``, an autograd primitive that evaluates any scipy
piecewise polynomial and differentiates it with the polynomial's own
derivative (so gradients are exact for the interpolant, to any order).

Must not import: anything of chiropt (this is a leaf module).

References
----------
F. N. Fritsch and R. E. Carlson, "Monotone piecewise cubic interpolation",
SIAM J. Numer. Anal. 17, 238-246 (1980) -- the node-slope rule that keeps the
interpolant monotone on every interval where the data are monotone (used by
``scipy.interpolate.PchipInterpolator``). The derivative of the piecewise cubic
is the piecewise quadratic obtained by differentiating each interval's
polynomial, ``scipy.interpolate.PPoly.derivative``.
"""

from __future__ import annotations

import functools

import numpy as onp
from autograd.extend import defjvp, defvjp, primitive
from scipy.interpolate import PchipInterpolator, PPoly


def make_pchip(x, y) -> PPoly:
    """Build the PCHIP interpolant of samples ``y`` at strictly increasing ``x``.

    Parameters
    ----------
    x : array_like, shape (N,) -- strictly increasing abscissae [any unit], N >= 2
    y : array_like, shape (N,) -- ordinates [any unit]

    Returns
    -------
    scipy.interpolate.PPoly
        The interpolant (a ``PchipInterpolator``). Evaluation outside ``[x[0], x[-1]]``
        extrapolates the end polynomials; callers check ranges themselves.

    References
    ----------
    Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238 (1980), eqs. (3)-(5) and
    the monotonicity region of Sec. 4, as implemented by scipy.
    """
    return PchipInterpolator(onp.asarray(x, dtype=float), onp.asarray(y, dtype=float),
                             extrapolate=True)


@functools.lru_cache(maxsize=512)
def _derivative(poly: PPoly) -> PPoly:
    # PPoly hashes by identity, so this caches one derivative per interpolant.
    return poly.derivative()


@primitive
def ppoly_eval(x, poly: PPoly):
    """Evaluate the piecewise polynomial ``poly`` at ``x`` (differentiable in ``x``).

    Parameters
    ----------
    x : array_like -- evaluation points [unit of the interpolant's abscissa]
    poly : scipy.interpolate.PPoly -- the interpolant (not differentiated)

    Returns
    -------
    ndarray, same shape as ``x`` -- real values.

    Notes
    -----
    The vector-Jacobian product is ``g * poly'(x)`` with ``poly'`` from
    ``PPoly.derivative`` (itself evaluated through this primitive, so higher
    derivatives work too). At interval joints the one-sided derivatives of a
    PCHIP agree (the interpolant is C1), so the choice of side does not matter.

    References
    ----------
    Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238 (1980); scipy ``PPoly.derivative``.
    """
    return poly(onp.asarray(x, dtype=float))


defvjp(ppoly_eval, lambda ans, x, poly: lambda g: g * ppoly_eval(x, _derivative(poly)))
defjvp(ppoly_eval, lambda g, ans, x, poly: g * ppoly_eval(x, _derivative(poly)))
