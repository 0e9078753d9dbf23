"""The diffraction orders a cell's multipoles radiate, as one autograd primitive.

Owns: ``radiated_orders`` — the (s, p) components of the upward and downward plane waves
of every order radiated by the particles' outgoing coefficients f, both helicities.
Must not import: solve, fourier, farfield, fields, metrics, search.

With the projections P = [X.s, X.p] of the upward orders
(``chiropt.sphericalwaves.order_projections``; the downward ones are P times the z-parity
of ``down_parity``) and the emission identities of ``chiropt.sphericalwaves.channel_modes``
(W_M . (s, p) = (X.s, X.p), W_N . (s, p) = i (X.p, -X.s)), a lattice of outgoing waves with
coefficients f radiates into order g, direction d, channel c:

    a[d, g, c] = sum_n ph_d[g, n] sum_(c', j) P_d[g, c', j] C[c', j, c](f_n),
    C[s, j, s] = C[p, j, p] = fM_j,   C[p, j, s] = i fN_j,   C[s, j, p] = -i fN_j,

fN_j, fM_j = (-i)^l f of the electric and magnetic mode j of particle n, ph_d the emission
phase factors (``chiropt.solution.emission_phases``). Bilinear in (P, f) and linear in
ph_d: one matrix product forward, three in the vector-Jacobian product.

References
----------
docs/theory.md §9 (plane-wave expansion of a lattice of outgoing multipoles);
``chiropt.sphericalwaves`` module docstring.
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.extend import defvjp_argnums, primitive

from chiropt.autodiff import ForwardStash
from chiropt.sphericalwaves import down_parity, mode_table

_STASH = ForwardStash()


def radiated_orders(f, P, ph_up, ph_dn, lmax: int):
    """Upward and downward order components radiated by the cell.

    Parameters
    ----------
    f : (W, 2, N 2K) — outgoing coefficients, helicities [+1, -1] [V/m]
    P : (W, G, 2, K) — projections of the upward orders [-]
    ph_up, ph_dn : (W, G, N) — emission factors of the upward / downward waves [-]
    lmax : int

    Returns
    -------
    (up, down) : (W, 2, G, 2) each — components on (s, p) (p_up, p_down) at z_top [V/m].

    References
    ----------
    Module docstring.
    """
    out = _radiated(f, P, ph_up, ph_dn, int(lmax))
    return out[0], out[1]


def _coefficients(f, lmax):
    """C (W, 2K, 4N): rows (c', j), columns (t, n, c) (module docstring)."""
    W, T, M = onp.shape(f)
    K = lmax * (lmax + 2)
    N = M // (2 * K)
    e_l = _degree_phase(lmax)
    f5 = onp.reshape(f, (W, T, N, K, 2))
    fN, fM = f5[..., 0] * e_l, f5[..., 1] * e_l                       # (W, t, N, K)
    C = onp.empty((W, 2, K, T, N, 2), dtype=complex)
    C[:, 0, :, :, :, 0] = onp.transpose(fM, (0, 3, 1, 2))
    C[:, 1, :, :, :, 1] = C[:, 0, :, :, :, 0]
    C[:, 1, :, :, :, 0] = 1j * onp.transpose(fN, (0, 3, 1, 2))
    C[:, 0, :, :, :, 1] = -C[:, 1, :, :, :, 0]
    return onp.reshape(C, (W, 2 * K, 4 * N))


def _degree_phase(lmax: int):
    """(-i)^l over the K (l, m) modes."""
    _, ls, _ = mode_table(lmax)
    return (-1j) ** ls[0::2]


def _both_directions(P, lmax):
    """(W, 2G, 2K): the upward projections, then the downward ones (times the z-parity)."""
    W, G = onp.shape(P)[:2]
    both = onp.concatenate([P, P * down_parity(lmax)], axis=1)
    return onp.reshape(both, (W, 2 * G, -1))


@primitive
def _radiated(f, P, ph_up, ph_dn, lmax):
    """[up, down] (2, W, 2, G, 2) (:func:`radiated_orders`)."""
    W, G, N = onp.shape(ph_up)
    C = _coefficients(f, lmax)
    Pd = _both_directions(P, lmax)
    Y = onp.reshape(onp.matmul(Pd, C), (W, 2, G, 2, N, 2))           # [w, d, g, t, n, c]
    ph = onp.stack([ph_up, ph_dn], axis=1)                            # (W, d, G, N)
    out = onp.sum(Y * ph[:, :, :, None, :, None], axis=4)            # (W, d, G, t, c)
    out = onp.transpose(out, (1, 0, 3, 2, 4))
    _STASH.put(out, None, (C, Pd, Y))
    return out


def _radiated_vjp(argnums, ans, args, kwargs):
    f, P, ph_up, ph_dn, lmax = args
    W, G, N = onp.shape(ph_up)
    K = lmax * (lmax + 2)
    parts = _STASH.take(ans, None)
    if parts is None:
        C = _coefficients(f, lmax)
        Pd = _both_directions(P, lmax)
        parts = (C, Pd, onp.reshape(onp.matmul(Pd, C), (W, 2, G, 2, N, 2)))
    C, Pd, Y = parts
    ph = onp.stack([ph_up, ph_dn], axis=1)[:, :, :, None, :, None]   # (W, d, G, 1, N, 1)
    Ct = onp.transpose(C, (0, 2, 1))
    Pdt = onp.transpose(Pd, (0, 2, 1))
    par = down_parity(lmax)
    e_l = _degree_phase(lmax)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        gw = np.transpose(g, (1, 0, 3, 2, 4))[:, :, :, :, None, :]    # (W, d, G, t, 1, c)
        Ybar = gw * ph                                                 # (W, d, G, t, N, c)
        Ybar2 = np.reshape(Ybar, (W, 2 * G, 4 * N))
        out = []
        for i in argnums:
            if i == 0:
                Cb = np.reshape(np.matmul(Pdt, Ybar2), (W, 2, K, 2, N, 2))  # (c', j, t, n, c)
                fMb = Cb[:, 0, :, :, :, 0] + Cb[:, 1, :, :, :, 1]
                fNb = 1j * Cb[:, 1, :, :, :, 0] - 1j * Cb[:, 0, :, :, :, 1]
                both = np.stack([np.transpose(fNb, (0, 2, 3, 1)) * e_l,
                                 np.transpose(fMb, (0, 2, 3, 1)) * e_l], axis=-1)
                v = np.reshape(both, (W, 2, N * 2 * K))
            elif i == 1:
                Pb = np.reshape(np.matmul(Ybar2, Ct), (W, 2, G, 2, K))
                v = Pb[:, 0] + Pb[:, 1] * par
            else:
                d = i - 2
                v = np.sum(gw[:, d] * Y[:, d], axis=(2, 4))             # (W, G, N)
            out.append(v if onp.iscomplexobj(args[i]) else np.real(v))
        return tuple(out)

    return vjp


defvjp_argnums(_radiated, _radiated_vjp)
