"""The stack-reflected multipole interaction as one autograd primitive.

Owns: ``reflected_interaction`` — the (W, N 2K, N 2K) matrix that couples the particles
of a cell through the waves the stack reflects, summed over the diffraction orders and
both channels (s, p). Must not import: solve, fourier, farfield, fields, metrics, search.

The sum (docs/theory.md §9, §10): with x = (order g, channel c),

    W[(i, a), (j, b)] = sum_x L[x, (i, a)] R[x, (j, b)],
    L = rc[g, i] r[g, c] recv[g, c, a],   R = ph[g, j] emit[g, c, b],

rc and ph the receiving and emitting phases of particles i, j, r the stack's reflection
coefficient, recv and emit the plane-wave channel vectors of the modes
(``chiropt.sphericalwaves.channel_modes``). Taped operation by operation, the hundreds of
orders of a particle close to the stack made these products the costliest part of every
reverse pass; as one node, its vector-Jacobian product is two matrix products and five
contractions. For Y = L^T R and cotangent Ybar: Lbar = R Ybar^T, Rbar = L Ybar (autograd's
convention, no conjugation), then the product rule on L and R.
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.extend import defvjp_argnums, primitive


def _factors(rc, r, recv, ph, emit):
    W, G, N = onp.shape(rc)
    K2 = onp.shape(recv)[-1]
    L = (np.reshape(rc, (W, G, 1, N, 1)) * np.reshape(r, (W, G, 2, 1, 1))
         * np.reshape(recv, (W, G, 2, 1, K2)))
    R = np.reshape(ph, (W, G, 1, N, 1)) * np.reshape(emit, (W, G, 2, 1, K2))
    return np.reshape(L, (W, 2 * G, N * K2)), np.reshape(R, (W, 2 * G, N * K2))


@primitive
def reflected_interaction(rc, r, recv, ph, emit):
    """Stack-reflected coupling matrix (W, N 2K, N 2K) [-].

    Parameters
    ----------
    rc : (W, G, N) — phase with which particle i receives the reflected upward order
    r : (W, G, 2) — reflection coefficients of the stack for (s, p)
    recv : (W, G, 2, 2K) — reception vectors of the upward orders
    ph : (W, G, N) — phase with which particle j emits the downward order
    emit : (W, G, 2, 2K) — emission vectors of the downward orders

    References
    ----------
    Module docstring; docs/theory.md §9-§10.
    """
    L, R = _factors(rc, r, recv, ph, emit)
    return onp.matmul(onp.transpose(L, (0, 2, 1)), R)


def _vjp(argnums, ans, args, kwargs):
    rc, r, recv, ph, emit = args
    W, G, N = onp.shape(rc)
    K2 = onp.shape(recv)[-1]
    L, R = _factors(rc, r, recv, ph, emit)
    shape5 = (W, G, 2, N, K2)
    wanted = set(argnums)
    # products of the factors that do not depend on the cotangent, made once per forward
    # pass however many reverse passes follow
    r_recv = r[..., None] * recv if 0 in wanted else None          # (W, G, 2, 2K)
    rc_recv = (onp.einsum("wgn,wgca->wgcna", rc, recv) if 1 in wanted else None)
    rc_r = onp.einsum("wgn,wgc->wgcn", rc, r) if 2 in wanted else None

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        out = []
        Lbar = Rbar = None
        if wanted & {0, 1, 2}:
            Lbar = np.reshape(np.matmul(R, np.transpose(g, (0, 2, 1))), shape5)
        if wanted & {3, 4}:
            Rbar = np.reshape(np.matmul(L, g), shape5)
        for i in argnums:
            if i == 0:
                v = np.einsum("wgcna,wgca->wgn", Lbar, r_recv)
            elif i == 1:
                v = np.einsum("wgcna,wgcna->wgc", Lbar, rc_recv)
            elif i == 2:
                v = np.einsum("wgcna,wgcn->wgca", Lbar, rc_r)
            elif i == 3:
                v = np.einsum("wgcna,wgca->wgn", Rbar, emit)
            else:
                v = np.einsum("wgcna,wgn->wgca", Rbar, ph)
            out.append(v if onp.iscomplexobj(args[i]) else np.real(v))
        return tuple(out)

    return vjp


defvjp_argnums(reflected_interaction, _vjp)
