"""The stack-reflected multipole coupling: its factors and their low-rank cotangents.

Owns: ``reflected_matrix_from_projections`` — the (W, N 2K, N 2K) matrix W = L^T R that
couples the particles of a cell through the waves the stack reflects, summed over the
diffraction orders and both channels (s, p); ``low_rank_cotangents`` — the cotangents
of the factors' inputs when the cotangent of W has the rank-two form u F^T of the coupled
solve (``chiropt.multipole.coupled``). Must not import: solve, fourier, farfield, fields,
metrics, search.

The sum (docs/theory.md §9, §10): with x = (order g, channel c),

    W[(i, a), (j, b)] = sum_x L[x, (i, a)] R[x, (j, b)],
    L = rc[g, i] r[g, c] recv[g, c, a],   R = ph[g, j] emit[g, c, b],

rc and ph the receiving and emitting phases of particles i, j, r the stack's reflection
coefficient, recv and emit the plane-wave channel vectors of the modes
(``chiropt.sphericalwaves.channel_modes``). For Wbar = sum_t u_t F_t^T (autograd's
convention, no conjugation): Lbar = (R F) u^T and Rbar = (L u) F^T, and the product rule on
L and R gives every input's cotangent from contractions two columns wide (t = the two
helicities): with F and u as (N, 2K) blocks per helicity,

    Q[g,c,j,t] = sum_b emit[g,c,b] F[j,b,t],   (R F)[g,c,t] = sum_j ph[g,j] Q[g,c,j,t],
    Y[g,c,n,t] = sum_a recv[g,c,a] u[n,a,t],   (L u)[g,c,t] = r[g,c] sum_n rc[g,n] Y[g,c,n,t],

    rc_bar[g,n]     = sum_(c,t) (R F)[g,c,t] r[g,c] Y[g,c,n,t]
    r_bar[g,c]      = sum_t (R F)[g,c,t] sum_n rc[g,n] Y[g,c,n,t]
    recv_bar[g,c,a] = r[g,c] sum_t (R F)[g,c,t] sum_n rc[g,n] u[n,a,t]
    ph_bar[g,j]     = sum_(c,t) (L u)[g,c,t] Q[g,c,j,t]
    emit_bar[g,c,b] = sum_t (L u)[g,c,t] sum_j ph[g,j] F[j,b,t].

Q, R F and sum_j ph F depend on the forward solution only and are made once; each reverse
pass costs a few products of the size of the channel vectors, where a dense Wbar cost two
matrix products 2K N wide over hundreds of orders. With one particle per cell (N = 1) rc
and ph are one number per order, so the cotangent of the projections P is
P_bar[g] = sum_(c,t) (rc r R F)[g,c,t] Ur[c,t] + (ph L u)[g,c,t] Ue[c,t] with rows Ur
(from u) and Ue (from F) that do not depend on the order: two products (G, 4) x (4, 2K)
per reverse pass instead of elementwise channel sums over every order.
"""

from __future__ import annotations

from functools import cache

import autograd.numpy as np
import numpy as onp

from chiropt.sphericalwaves import channel_tables, mode_table


def reflected_matrix_from_projections(rc, r, P, ph, lmax: int, fold: int = 1):
    """W (W, N 2K, N 2K) from the projections P (W, G, 2, K) of the upward orders, plain.

    ``fold`` = n > 1: the orders are one representative per orbit of a rotation by
    2 pi / n that leaves every order's weight unchanged (normal incidence, one particle
    per cell; ``chiropt.lattice.symmetry``), each weighted by its orbit's size in ``ph``.
    The projections of the rotated order are e^(i m alpha) times the representative's
    (rotation of the spherical harmonics and of s, p), so the orbit sum of the mode pair
    (a, b) is n [m_a = m_b mod n] times the representative's: the full sum is that of the
    representatives with the entries m_a != m_b (mod n) set to zero (:func:`fold_classes`).

    The sum W = L^T R of the module docstring with recv the reception vectors of P and
    emit the downward emission vectors (``chiropt.sphericalwaves.channel_modes``), without
    making them: each block of W between an electric (N) or magnetic (M) mode of particle
    i and one of particle j is a weighted Gram matrix sum_g w P[g, c1]^T P[g, c2] of the
    two-number projections times the channel factors, so one product of weighted copies of
    P (K wide per channel) serves all four blocks.
    """
    perm, _, a0r, a1r, br = channel_tables(True, lmax, False)   # reception, upward
    _, _, a0e, a1e, be = channel_tables(False, lmax, True)      # emission, downward
    W, G, N = onp.shape(rc)
    K = onp.shape(P)[-1]
    if N == 1:
        Gm = _one_particle_gram(rc, r, P, ph)
    else:
        # A[w, g, (c, i, c1, j)] = rc[g, i] r[g, c] P[g, c1, j];  B[w, g, (i', c2, j')]
        weight = onp.einsum("wgi,wgc->wgci", rc, r).reshape(W, G, 2 * N, 1)
        A = (weight * P.reshape(W, G, 1, 2 * K)).reshape(W, G, 4 * N * K)
        B = (ph[:, :, :, None, None] * P[:, :, None, :, :]).reshape(W, G, 2 * N * K)
        Gm = onp.matmul(onp.transpose(A, (0, 2, 1)), B).reshape(W, 2, N, 2, K, N, 2, K)
    # the reception's gather m -> -m, applied to the small product's rows
    Gm = Gm[:, :, :, :, perm]
    out = onp.empty((W, N, K, 2, N, K, 2), dtype=complex)
    # [c, i, c1, j, i', c2, j'] blocks: NN, NM, MN, MM (docstring)
    out[:, :, :, 0, :, :, 0] = (a0r[:, None, None] * a0e * Gm[:, 0, :, 1, :, :, 1]
                                + a1r[:, None, None] * a1e * Gm[:, 1, :, 0, :, :, 0])
    out[:, :, :, 0, :, :, 1] = (a0r[:, None, None] * be[0] * Gm[:, 0, :, 1, :, :, 0]
                                + a1r[:, None, None] * be[1] * Gm[:, 1, :, 0, :, :, 1])
    out[:, :, :, 1, :, :, 0] = (br[0][:, None, None] * a0e * Gm[:, 0, :, 0, :, :, 1]
                                + br[1][:, None, None] * a1e * Gm[:, 1, :, 1, :, :, 0])
    out[:, :, :, 1, :, :, 1] = (br[0][:, None, None] * be[0] * Gm[:, 0, :, 0, :, :, 0]
                                + br[1][:, None, None] * be[1] * Gm[:, 1, :, 1, :, :, 1])
    out = out.reshape(W, N * 2 * K, N * 2 * K)
    if fold > 1:
        out *= _fold_pairs(lmax, N, fold)
    return out


@cache
def _fold_pairs(lmax: int, N: int, fold: int) -> onp.ndarray:
    """(N 2K, N 2K) bool: the mode pairs of one class of :func:`fold_classes`."""
    chi = fold_classes(lmax, N, fold)
    out = onp.any(chi[:, :, None] & chi[:, None, :], axis=0)
    out.setflags(write=False)
    return out


@cache
def fold_classes(lmax: int, N: int, fold: int) -> onp.ndarray:
    """(fold, N 2K) bool: chi[c, a] = (m_a = c mod fold) over the modes a = (particle, l,
    m, N/M) of a cell (``chiropt.sphericalwaves.mode_table``); the coupling between modes
    of different classes vanishes under the rotation (:func:`reflected_matrix_from_
    projections`), so the mask is sum_c chi[c, a] chi[c, b] = chi^T chi."""
    _, _, ms = mode_table(lmax)
    m = onp.tile(ms, N)
    out = onp.stack([onp.mod(m, fold) == c for c in range(fold)])
    out.setflags(write=False)
    return out


def split_columns(X, chi):
    """(W, M, T) -> (W, M, T n): the columns of X restricted to each class of ``chi`` (n, M),
    class-major; autograd operations (linear in X). With both factors of a product u F^T
    split, mask * (u F^T) = split(u) split(F)^T for the mask chi^T chi."""
    W, M, T = onp.shape(X)
    return np.reshape(np.transpose(X[:, None, :, :] * chi[None, :, :, None], (0, 2, 1, 3)),
                      (W, M, T * chi.shape[0]))


def _one_particle_gram(rc, r, P, ph):
    """The weighted Gram blocks Gm (W, c, 1, c1, K, 1, c2, K) = sum_g w[g, c] P[g, c1]^T
    P[g, c2] of one particle per cell, w = rc r ph (one phase per order and particle).

    The blocks of one channel c are symmetric in (c1, c2) up to transposition, so three
    products per channel (c1 = 0 with both c2, c1 = c2 = 1) give all four: 6 K x K blocks
    instead of 8.
    """
    W, G, _, K = onp.shape(P)
    w = (rc[:, :, 0] * ph[:, :, 0])[:, :, None] * r                   # (W, G, 2)
    both = onp.reshape(P, (W, G, 2 * K))
    Gm = onp.empty((W, 2, 1, 2, K, 1, 2, K), dtype=complex)
    for c in (0, 1):
        wc = w[:, :, c, None]
        top = onp.matmul(onp.swapaxes(wc * P[:, :, 0], 1, 2), both)     # (W, K, 2K)
        Gm[:, c, 0, 0, :, 0, 0] = top[:, :, :K]
        Gm[:, c, 0, 0, :, 0, 1] = top[:, :, K:]
        Gm[:, c, 0, 1, :, 0, 0] = onp.swapaxes(top[:, :, K:], 1, 2)
        Gm[:, c, 0, 1, :, 0, 1] = onp.matmul(onp.swapaxes(wc * P[:, :, 1], 1, 2),
                                             P[:, :, 1])
    return Gm


def _channel_terms(a0, a1, b):
    """The four terms (c', c, h, factor (K,)) of the channel map of
    ``chiropt.sphericalwaves.channel_tables``: out[c', k] = sum of factor[k] x[c, h, k],
    h = 0 (N) or 1 (M) of the input's channel c: out[0] = b_0 x[0, M] + a_1 x[1, N],
    out[1] = b_1 x[1, M] + a_0 x[0, N]."""
    return ((0, 0, 1, b[0]), (0, 1, 0, a1), (1, 1, 1, b[1]), (1, 0, 0, a0))


def _channel_blocks(terms):
    """The terms of :func:`_channel_terms` as tables over (input channel c, output channel
    c'): the N/M index h (2, 2) and the factor (2, 2, K) with out[c'] = sum over c of
    factor[c, c'] x[c, h[c, c']] (each pair (c, c') has exactly one term)."""
    h = onp.zeros((2, 2), dtype=int)
    coef = [[None, None], [None, None]]
    for c_out, c_in, hh, factor in terms:
        h[c_in, c_out], coef[c_in][c_out] = hh, onp.asarray(factor)
    return h, onp.array(coef)


def _folded_channels(X, receive: bool, lmax: int, down: bool):
    """M (W, 2K, 2T) with channel_modes(P) @ X = P (W, G, 2K) @ M, for mode columns X
    (W, 2K, T): the channel map (``chiropt.sphericalwaves.channel_tables``) moved onto the
    columns, so the channel vectors of every order need not be made. Autograd operations
    on X (linear in it).

    With the terms of :func:`_channel_terms` as blocks over (vector channel c, projection
    channel c'): M[(c', perm k), (c, t)] = factor[c, c'][k] X[(k, h[c, c']), t].
    """
    perm, inv, a0, a1, b = channel_tables(receive, lmax, down)
    h, coef = _channel_blocks(_channel_terms(a0, a1, b))             # [c, c'], [c, c', k]
    W, K2, T = onp.shape(X)
    X4 = np.reshape(X, (W, K2 // 2, 2, T))
    M = X4[:, :, h] * onp.transpose(coef, (2, 0, 1))[None, :, :, :, None]   # (W, k, c, c', T)
    M = np.transpose(M, (0, 3, 1, 2, 4))                             # (W, c', k, c, T)
    if receive:
        M = M[:, :, inv]
    return np.reshape(M, (W, K2, 2 * T))


def low_rank_cotangents(args, argnums, F, lmax: int | None = None, P=None):
    """Cotangents of (rc, r, recv, ph, emit) for a cotangent u F^T of W (module docstring).

    Parameters
    ----------
    args : (rc (W, G, N), r (W, G, 2), recv (W, G, 2, 2K), ph (W, G, N), emit (W, G, 2, 2K));
        with one particle per cell recv and emit may be None when ``P`` is given and
        positions 2 and 4 are not wanted (the channel maps are then applied to the mode
        columns: :func:`_folded_channels`)
    argnums : positions (0-4) of the wanted arguments; 5 for the cotangent of the
        projections P (W, G, 2, K) when recv and emit are the reception vectors of the
        upward and the emission vectors of the downward orders made from P
        (``chiropt.sphericalwaves.channel_modes``): the transposed channel maps applied to
        the factored recv_bar = (r R F) Z and emit_bar = (L u) (ph F), K wide per
        (channel, N or M) instead of 2K
    F : (W, N 2K, T) — the right factor (the outgoing coefficients, one column per
        helicity; more columns when a symmetry splits them, ``reflected_matrix_from_
        projections``'s ``fold``), fixed by the forward pass
    lmax : the multipole degree (needed for position 5 and with ``P``)
    P : (W, G, 2, K), optional — the projections recv and emit are made from

    Returns
    -------
    ``contract(u) -> tuple`` over ``argnums``, u (W, N 2K, T); linear in u with autograd
    operations (reverse mode applied twice works).
    """
    rc, r, recv, ph, emit = args
    W, G, N = onp.shape(rc)
    wanted = set(argnums)
    folded = recv is None
    if folded and (N != 1 or P is None or wanted & {2, 4}):
        raise ValueError("recv and emit may be left out only with one particle per cell, "
                         "the projections P given and their cotangents not wanted")
    K2 = 2 * onp.shape(P)[-1] if folded else onp.shape(recv)[-1]
    # (W, 2K, 2N) columns (j, t) of F; products over the 2K modes as matrix products
    T = onp.shape(F)[-1]
    F_cols = onp.reshape(onp.transpose(onp.reshape(F, (W, N, K2, T)), (0, 2, 1, 3)),
                         (W, K2, T * N))
    if folded:
        P2 = onp.reshape(P, (W, G, K2))
        Q = onp.reshape(onp.matmul(P2, _folded_channels(F_cols, False, lmax, True)),
                        (W, G, 2, N, T))
    else:
        Q = onp.reshape(onp.matmul(onp.reshape(emit, (W, 2 * G, K2)), F_cols),
                        (W, G, 2, N, T))
    RF = onp.sum(ph[:, :, None, :, None] * Q, axis=3)                 # (W, G, 2, T)
    phF = onp.transpose(onp.reshape(onp.matmul(ph, onp.reshape(F, (W, N, T * K2))),
                                    (W, G, K2, T)), (0, 1, 3, 2))     # (W, G, t, 2K)
    RF_r = RF * r[..., None]
    recv2 = None if folded else onp.reshape(recv, (W, 2 * G, K2))
    if 5 in wanted:
        # P_bar = the transposed channel maps applied to r (R F) Z (reception, gathered
        # back m -> -m; Z = rc u) and to (L u) (ph F) (emission): per order, a product of
        # two-by-two blocks with the (N, M) x mode columns, then the channel factors
        _, inv_r, a0r, a1r, br = channel_tables(True, lmax, False)
        _, _, a0e, a1e, be = channel_tables(False, lmax, True)
        K = K2 // 2
        recv_terms = [(c_out, c_in, h, coef[inv_r])
                      for c_out, c_in, h, coef in _channel_terms(a0r, a1r, br)]
        emit_terms = _channel_terms(a0e, a1e, be)
        if N > 1:
            phF_hk = onp.reshape(onp.transpose(onp.reshape(phF, (W, G, T, K, 2)),
                                               (0, 1, 2, 4, 3)), (W, G, T, 2 * K))  # [g, t, (h k)]
        else:
            # one particle per cell: rc and ph are one number per order, so the channel
            # sums below collapse to P_bar[g] = sum_(c, t) (rc r RF)[g, c, t] Ur[c, t] +
            # (ph L u)[g, c, t] Ue[c, t], with rows Ur (from u) and Ue (from F) that do not
            # depend on the order: two products (G, 4) x (4, 2K) per wavelength
            h_r, coef_r = _channel_blocks(recv_terms)
            h_e, coef_e = _channel_blocks(emit_terms)
            F_hk = onp.transpose(onp.reshape(F, (W, K, 2, T)), (0, 3, 2, 1))    # [t, h, k]
            Ue = onp.reshape(onp.transpose(F_hk[:, :, h_e, :], (0, 2, 1, 3, 4)) * coef_e[:, None],
                             (W, 2 * T, 2 * K))                            # [(c t), (c' k)]
            A_r = onp.reshape(rc[:, :, 0, None, None] * RF_r, (W, G, 2 * T))    # [g, (c t)]

    def channel_sums(terms, X):
        """out[c'] = sum over the terms of c' of factor * X[c, h], X (W, G, 2, 2, K)."""
        return np.stack([sum(coef * X[:, :, c_in, h]
                             for c_out, c_in, h, coef in terms if c_out == c)
                         for c in (0, 1)], axis=2)

    def contract(u):
        u4 = np.reshape(u, (W, N, K2, T))
        u_cols = np.reshape(np.transpose(u4, (0, 2, 1, 3)), (W, K2, T * N))
        if folded:
            Y = np.reshape(np.matmul(P2, _folded_channels(u_cols, True, lmax, False)),
                           (W, G, 2, N, T))                            # [g, c, n, t]
        else:
            Y = np.reshape(np.matmul(recv2, u_cols), (W, G, 2, N, T))
        S = np.sum(rc[:, :, None, :, None] * Y, axis=3)                # (W, G, 2, T)
        Lu = r[..., None] * S
        Z = None
        if 2 in wanted:
            Z = np.reshape(np.matmul(rc, np.reshape(np.transpose(u4, (0, 1, 3, 2)),
                                                    (W, N, T * K2))), (W, G, T, K2))
        out = []
        for i in argnums:
            if i == 0:
                v = np.sum(RF_r[:, :, :, None, :] * Y, axis=(2, 4))
            elif i == 1:
                v = np.sum(RF * S, axis=-1)
            elif i == 2:
                v = r[..., None] * np.matmul(RF, Z)                    # [c, t] @ [t, a]
            elif i == 3:
                v = np.sum(Lu[:, :, :, None, :] * Q, axis=(2, 4))
            elif i == 4:
                v = np.matmul(Lu, phF)                                 # [c, t] @ [t, b]
            else:
                # Z with the modes gathered m -> -m and the N/M index ahead of them
                ug = np.transpose(np.reshape(u4, (W, N, K, 2, T))[:, :, inv_r], (0, 1, 4, 3, 2))
                if N == 1:                                                 # [t, h, k]
                    Ur = np.reshape(np.transpose(ug[:, 0][:, :, h_r, :], (0, 2, 1, 3, 4))
                                    * coef_r[:, None], (W, 2 * T, 2 * K))  # [(c t), (c' k)]
                    A_e = np.reshape(ph[:, :, 0, None, None] * Lu, (W, G, 2 * T))
                    v = np.reshape(np.matmul(A_r, Ur) + np.matmul(A_e, Ue), (W, G, 2, K))
                    out.append(v)
                    continue
                ug = np.reshape(ug, (W, N, 2 * T * K))
                Zg = np.matmul(rc, ug)                                     # [g, (t h k)]
                X = np.matmul(RF_r, np.reshape(Zg, (W, G, T, 2 * K)))      # [g, c, (h k)]
                Yp = np.matmul(Lu, phF_hk)
                v = (channel_sums(recv_terms, np.reshape(X, (W, G, 2, 2, K)))
                     + channel_sums(emit_terms, np.reshape(Yp, (W, G, 2, 2, K))))
            out.append(v if i == 5 or onp.iscomplexobj(args[i]) else np.real(v))
        return tuple(out)

    return contract if wanted else None
