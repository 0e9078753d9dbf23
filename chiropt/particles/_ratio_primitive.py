"""The downward recurrence of the Riccati-Bessel ratio functions as one autograd primitive.

Owns: :func:`ratio_g_stacked`, the values ``g_1..g_n_hi`` of
:func:`chiropt.particles._riccati.ratio_g` computed in plain numpy, with a hand-written
derivative, so that the reverse pass sees one node instead of two per recurrence step.
Must not import: anything of chiropt outside ``chiropt.particles``; never
store/report/cli.
"""

from __future__ import annotations

import autograd.numpy as anp
import numpy as onp
from autograd.extend import defvjp, primitive


def _recurrence(z_sq, n_hi: int, n_start: int, derivative: bool = True):
    """Values g_n and (with ``derivative``, else None) derivatives dg_n/d(z^2), each
    (n_hi, *shape), plain arrays."""
    g = -z_sq / (2.0 * n_start + 3.0)
    t = -1.0 / (2.0 * n_start + 3.0) * onp.ones_like(z_sq) if derivative else None
    vals = [None] * (n_hi + 1)
    ders = [None] * (n_hi + 1)
    if n_start <= n_hi:
        vals[n_start], ders[n_start] = g, t
    for n in range(n_start, 1, -1):
        den = 2.0 * n + 1.0 + g
        g = -z_sq / den
        if derivative:
            t = -(1.0 + g * t) / den
        if n - 1 <= n_hi:
            vals[n - 1], ders[n - 1] = g, t
    return onp.stack(vals[1:]), (onp.stack(ders[1:]) if derivative else None)


def ratio_g_plain(z_sq, n_hi: int, n_start: int):
    """The values of :func:`ratio_g_stacked` (n_hi, ...) from plain arrays, no derivative
    (the same recurrence and arithmetic)."""
    return _recurrence(onp.asarray(z_sq), n_hi, n_start, derivative=False)[0]


@primitive
def ratio_g_stacked(z_sq, n_hi: int, n_start: int):
    """Ratio functions ``g_n(z) = -z j_{n+1}(z)/j_n(z)``, n = 1..n_hi, stacked (n_hi, ...).

    Parameters
    ----------
    z_sq : array (real or complex) — square of the argument z^2 [1]
    n_hi : int — highest order returned [1]
    n_start : int — start order of the downward recurrence (>= n_hi) [1]

    Notes
    -----
    Same recurrence and arithmetic as :func:`chiropt.particles._riccati.ratio_g`,
    ``g_{n-1} = -z^2/(2n + 1 + g_n)`` seeded with ``g_N = -z^2/(2N + 3)``. Its
    derivative ``t_n = dg_n/d(z^2)`` follows by differentiating the recurrence,
    ``t_{n-1} = -(1 + g_{n-1} t_n)/(2n + 1 + g_n)``, ``t_N = -1/(2N + 3)``; each g_n is
    holomorphic in z^2, so the vector-Jacobian product is ``sum_n gbar_n t_n``.

    References
    ----------
    Bohren & Huffman, *Absorption and Scattering of Light by Small Particles* (1983),
    eq. 4.89 (downward recurrence); chain rule applied to the recurrence.
    """
    return _recurrence(z_sq, n_hi, n_start, derivative=False)[0]


def _vjp(ans, z_sq, n_hi, n_start):
    der = _recurrence(z_sq, n_hi, n_start)[1]
    return lambda g: anp.sum(g * der, axis=0)


defvjp(ratio_g_stacked, _vjp)
