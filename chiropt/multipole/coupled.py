"""The coupled multipole system of one cell, solved as one autograd primitive.

Owns: ``coupled_solve`` — the outgoing coefficients f and the exciting coefficients e of
the particles of a cell from their T-matrices, the lattice coupling, the stack-reflected
coupling (optional) and the background exciting field, for both incident helicities.
Must not import: solve, fourier, farfield, fields, metrics, search.

The system (docs/theory.md §9, §10), per wavelength, with W = W_lat + W_refl and
W_refl = L^T R (``chiropt.multipole.reflected``):

    (I - T W) f = T b,        e = b + W f,

for the two helicities as two right-hand sides. Vector-Jacobian product (bilinear pairing,
autograd's convention, no conjugation): with the cotangents fbar, ebar of f and e,

    lam = (I - T W)^-T (fbar + W^T ebar),     u = ebar + T^T lam,
    Tbar = lam e^T,   bbar = u,   Wbar = u f^T,

so the cotangent of the coupling is of rank two (the two helicities) per wavelength, and
the stack-reflected part passes it on in that form
(``chiropt.multipole.reflected.low_rank_cotangents``): contractions two columns wide
instead of the 2K N of a dense Wbar, which made the reflected coupling the costliest part
of every reverse pass (one per objective and constraint row).

References
----------
Giles, "Collected matrix derivative results for forward and reverse mode algorithmic
differentiation", in Advances in Automatic Differentiation, Springer (2008), §2.2-2.3
(reverse-mode rules of the inverse, the solve and the matrix product).
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.extend import defvjp_argnums, primitive

from chiropt.autodiff import ForwardStash
from chiropt.multipole.reflected import (
    fold_classes,
    low_rank_cotangents,
    reflected_matrix_from_projections,
    split_columns,
)
from chiropt.sphericalwaves import channel_modes

_STASH = ForwardStash()


def coupled_solve(Tb, W_lat, b, reflected=None):
    """Outgoing and exciting coefficients of the particles of a cell.

    Parameters
    ----------
    Tb : (W, M, M) — block-diagonal T-matrix of the cell, M = N 2K [-]
    W_lat : (W, M, M) — lattice coupling (translation of the lattice-summed outgoing waves
        into regular waves at every particle) [-]
    b : (W, 2, M) — exciting coefficients of the background field, helicities [+1, -1] [V/m]
    reflected : tuple (rc, r, P, ph, lmax[, fold]) or None — the stack-reflected coupling
        (``chiropt.multipole.reflected``): receiving phases rc (W, G, N), reflection
        coefficients r (W, G, 2), projections P (W, G, 2, K) of the upward orders
        (``chiropt.sphericalwaves.order_projections``), emitting phases ph (W, G, N), lmax,
        and the rotation order ``fold`` of orders given one per orbit (default 1: every
        order; ``reflected_matrix_from_projections``)

    Returns
    -------
    (f, e) : (W, 2, M) each — outgoing and exciting coefficients [V/m].

    References
    ----------
    Module docstring; docs/theory.md §9.
    """
    refl = tuple(reflected) if reflected is not None else (None,) * 5
    args = (Tb, W_lat, b) + refl + ((1,) if len(refl) == 5 else ())
    out = _coupled(*args)
    return out[0], out[1]


def _forward(Tb, W_lat, b, rc, r, P, ph, lmax, fold=1):
    Wmat = onp.asarray(W_lat)
    if rc is not None:
        Wmat = Wmat + reflected_matrix_from_projections(rc, r, P, ph, lmax, fold)
    M = Wmat.shape[-1]
    A = onp.eye(M)[None] - onp.matmul(Tb, Wmat)
    bT = onp.transpose(b, (0, 2, 1))                                   # (W, M, 2)
    F = onp.linalg.solve(A, onp.matmul(Tb, bT))                       # (W, M, 2)
    E = bT + onp.matmul(Wmat, F)
    return onp.stack([onp.transpose(F, (0, 2, 1)), onp.transpose(E, (0, 2, 1))]), \
        (Wmat, A, F, E)


@primitive
def _coupled(Tb, W_lat, b, rc, r, P, ph, lmax, fold=1):
    """[f, e] stacked, (2, W, 2, M) (:func:`coupled_solve`)."""
    out, parts = _forward(Tb, W_lat, b, rc, r, P, ph, lmax, fold)
    _STASH.put(out, None, parts)
    return out


def _coupled_vjp(argnums, ans, args, kwargs):
    parts = _STASH.take(ans, None)
    if parts is None:
        parts = _forward(*args)[1]
    Wmat, A, F, E = parts
    Tb = args[0]
    At = onp.transpose(A, (0, 2, 1))
    Wt = onp.transpose(Wmat, (0, 2, 1))
    Tt = onp.transpose(Tb, (0, 2, 1))
    Ft = onp.transpose(F, (0, 2, 1))
    refl, contract = _reflected_cotangents(args, argnums, F)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        gf, ge = np.transpose(g[0], (0, 2, 1)), np.transpose(g[1], (0, 2, 1))   # (W, M, 2)
        lam = np.linalg.solve(At, gf + np.matmul(Wt, ge))
        u = ge + np.matmul(Tt, lam)
        out = {}
        if 0 in argnums:
            out[0] = np.matmul(lam, np.transpose(E, (0, 2, 1)))
        if 1 in argnums:
            out[1] = np.matmul(u, Ft)
        if 2 in argnums:
            out[2] = np.transpose(u, (0, 2, 1))
        if refl:
            out.update(contract(u))
        return tuple(out[i] if onp.iscomplexobj(args[i]) else np.real(out[i])
                     for i in argnums)

    return vjp


def _reflected_cotangents(args, argnums, F):
    """The wanted reflected inputs (rc 3, r 4, P 5, ph 6) and ``contract(u) -> {pos: bar}``.

    The low-rank contractions work on the channel vectors (reception of the upward and
    emission of the downward orders, made here from P, once per forward pass); the
    cotangent of P comes through the transposed channel maps in factored form.
    """
    rc, r, P, ph, lmax = args[3:8]
    fold = args[8] if len(args) > 8 else 1
    wanted = [i for i in argnums if 3 <= i <= 6]
    if not wanted:
        return [], None
    # orders one per orbit of a rotation: the cotangent of the unmasked sum is
    # mask * (u F^T) = split(u) split(F)^T, of rank 2 fold (reflected.split_columns)
    chi = fold_classes(lmax, onp.shape(rc)[-1], fold) if fold > 1 else None
    if chi is not None:
        F = split_columns(F, chi)
    inner = {3: 0, 4: 1, 5: 5, 6: 3}          # positions of low_rank_cotangents (5: P)
    if onp.shape(rc)[-1] == 1:   # one particle per cell: the channel maps act on columns
        low = low_rank_cotangents((rc, r, None, ph, None), [inner[i] for i in wanted], F,
                                  lmax, P=P)
    else:
        recv = channel_modes(P, "receive", lmax)
        emit = channel_modes(P, "emit", lmax, down=True)
        low = low_rank_cotangents((rc, r, recv, ph, emit), [inner[i] for i in wanted], F,
                                  lmax)

    def contract(u):
        return dict(zip(wanted, low(u if chi is None else split_columns(u, chi)),
                        strict=True))

    return wanted, contract


defvjp_argnums(_coupled, _coupled_vjp)
