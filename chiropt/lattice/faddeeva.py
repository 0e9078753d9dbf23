"""Faddeeva function w(z) as an autograd primitive, and a complex erfc built on it.

Owns: ``wofz`` (differentiable wrapper of ``scipy.special.wofz``) and ``erfc_complex``.
Must not import: any other chiropt module (this is a leaf kernel).

Derivative convention: autograd treats a holomorphic primitive ``f`` by the VJP
``g -> g * f'(z)`` with no conjugation (see ``autograd/numpy/numpy_vjps.py``, e.g.
``np.exp``: ``lambda g: ans * g``). For a real input the VJP returns the real part,
as autograd's ``unbroadcast`` does for real targets.
"""

from __future__ import annotations

import autograd.numpy as np
import scipy.special
from autograd.extend import defjvp, defvjp, primitive

_TWO_OVER_SQRT_PI = 2.0 / np.sqrt(np.pi)


@primitive
def wofz(z):
    """Faddeeva function w(z) = exp(-z^2) erfc(-i z), differentiable by autograd.

    Parameters
    ----------
    z : complex array — argument [dimensionless]

    Returns
    -------
    complex array — w(z), same shape as ``z``.

    Notes
    -----
    The derivative is w'(z) = -2 z w(z) + 2 i / sqrt(pi). For Im z < 0 the function
    grows like 2 exp(-z^2); callers must keep the argument where that cannot overflow.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions (1964), eq. 7.1.3 (definition)
    and 7.1.20 (derivative); DLMF 7.2.3 and 7.10.2.
    """
    return scipy.special.wofz(z)


def wofz_derivative(w, z):
    """w'(z) = -2 z w(z) + 2i/sqrt(pi) from w = w(z) (Abramowitz & Stegun 1964, 7.1.20)."""
    return -2.0 * z * w + 1j * _TWO_OVER_SQRT_PI


def _wofz_vjp(ans, z):
    deriv = wofz_derivative(ans, z)
    if np.iscomplexobj(z):
        return lambda g: g * deriv
    return lambda g: np.real(g * deriv)


defvjp(wofz, _wofz_vjp)
defjvp(wofz, lambda g, ans, z: g * wofz_derivative(ans, z))


def erfc_complex(z):
    """Complementary error function of a complex argument, differentiable by autograd.

    Parameters
    ----------
    z : complex array — argument [dimensionless]

    Returns
    -------
    complex array — erfc(z) = exp(-z^2) w(i z).

    Notes
    -----
    Evaluated through the Faddeeva function; for Re z > 0 this is accurate where a
    direct series would cancel. For Re z << 0 the product exp(-z^2) w(iz) involves a
    large w; use erfc(z) = 2 - erfc(-z) there if needed.

    References
    ----------
    Abramowitz & Stegun (1964), eq. 7.1.3; DLMF 7.2.3.
    """
    return np.exp(-z * z) * wofz(1j * z)
