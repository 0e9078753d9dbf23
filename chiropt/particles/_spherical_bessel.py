"""Spherical Bessel functions of real or complex argument as autograd primitives.

Owns: :func:`spherical_bessel`, the values ``j_n(z)`` or ``y_n(z)`` of
``scipy.special.spherical_jn`` / ``spherical_yn`` (which autograd cannot differentiate),
with a hand-written vector-Jacobian product in the argument ``z``.
Must not import: anything of chiropt; never store/report/cli.
"""

from __future__ import annotations

import autograd.numpy as anp
import numpy as onp
import scipy.special as sps
from autograd.extend import defvjp, primitive

_FUNCS = {"j": sps.spherical_jn, "y": sps.spherical_yn}


@primitive
def spherical_bessel(z, n, kind: str, derivative: bool = False):
    """Spherical Bessel function ``j_n(z)`` (kind "j") or ``y_n(z)`` (kind "y"), or its
    derivative ``z_n'(z)`` (``derivative=True``).

    Parameters
    ----------
    z : array (real or complex) — argument [-]; broadcast against ``n``
    n : int array — orders >= 0 (not differentiated) [-]
    kind : str — "j" (regular) or "y" (irregular)
    derivative : bool — return ``z_n'(z)`` instead of ``z_n(z)``

    Returns
    -------
    array of the broadcast shape of ``z`` and ``n`` (complex if ``z`` is); the values of
    ``scipy.special.spherical_jn`` / ``spherical_yn`` (with ``derivative``).

    Notes
    -----
    Differentiable in ``z`` by autograd (to any order). The derivative of ``z_n`` is
    ``z_n'(z) = z_{n-1}(z) - (n + 1)/z z_n(z)`` for n >= 1 and ``z_0' = -z_1`` (the
    formula scipy evaluates for ``derivative=True``); that of ``z_n'`` follows from
    the spherical Bessel equation, ``z_n'' = -(2/z) z_n' - (1 - n(n+1)/z^2) z_n``.
    Both functions are holomorphic, so the vector-Jacobian product is ``g f'(z)``
    (autograd's convention for holomorphic primitives), projected onto the reals when
    ``z`` is real.

    References
    ----------
    DLMF 10.51.2 (z_n' = z_{n-1} - (n+1)/z z_n), 10.51.3 (z_0' = -z_1) and 10.47.1
    (z^2 w'' + 2 z w' + (z^2 - n(n+1)) w = 0).
    """
    return _FUNCS[kind](n, z, derivative=derivative)


def spherical_bessel_derivative(z, n, kind: str):
    """``d z_n / dz`` by DLMF 10.51.2-3, written out from :func:`spherical_bessel` values
    (an independent path to the same quantity, used by the tests).

    Parameters
    ----------
    z : array (real or complex) — argument [-]
    n : int array — orders >= 0 [-]
    kind : str — "j" or "y"

    References
    ----------
    DLMF 10.51.2, 10.51.3.
    """
    n = onp.asarray(n)
    low = spherical_bessel(z, onp.maximum(n - 1, 0), kind)
    one = spherical_bessel(z, onp.maximum(n, 1), kind)
    same = spherical_bessel(z, n, kind)
    return anp.where(n == 0, -one, low - (n + 1) * same / z)


def _sum_to(a, shape):
    """Sum the broadcast axes of ``a`` so that it takes ``shape``."""
    while anp.ndim(a) > len(shape):
        a = anp.sum(a, axis=0)
    for ax, size in enumerate(shape):
        if size == 1 and anp.shape(a)[ax] != 1:
            a = anp.sum(a, axis=ax, keepdims=True)
    return a


def _vjp(ans, z, n, kind, derivative=False):
    shape = onp.shape(z)
    real = not onp.iscomplexobj(z)
    n = onp.asarray(n)

    def vjp(g):
        if derivative:                      # DLMF 10.47.1
            d1 = spherical_bessel(z, n, kind, True)
            d0 = spherical_bessel(z, n, kind)
            slope = -2.0 / z * d1 - (1.0 - n * (n + 1.0) / z ** 2) * d0
        else:                               # DLMF 10.51.2-3
            slope = spherical_bessel(z, n, kind, True)
        out = _sum_to(g * slope, shape)
        return anp.real(out) if real else out

    return vjp


defvjp(spherical_bessel, _vjp)
