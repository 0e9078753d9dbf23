"""Layer eigenmodes, interface scattering matrices and the Redheffer star product.

Conventions (time dependence exp(-i omega t), lengths scaled by k0, h = Z0 H [V/m]):
in a z-invariant layer, with Kx, Ky the diagonal matrices of (k_par + G)/k0 and the
field vector e = (E_x harmonics, E_y harmonics), h likewise,

    d e/dz = i P h,   d h/dz = i Q e,
    P = [[Kx Ezi Ky, I - Kx Ezi Kx], [Ky Ezi Ky - I, -Ky Ezi Kx]],
    Q = [[-Kx Ky - eyx, Kx^2 - eyy], [exx - Ky^2, Ky Kx + exy]],

(Ezi = [[eps]]^-1), derived from the curl equations as in Moharam et al., J. Opt. Soc.
Am. A 12, 1068 (1995) and Liu & Fan, Comput. Phys. Commun. 183, 2233 (2012). Modes
e = W exp(+-i gamma z) with PQ W = W gamma^2 (Im gamma >= 0, gamma > 0 when real), and
h = +-V with V = Q W gamma^-1. In a uniform medium W = I and gamma = kz/k0 for both
polarization blocks.

Amplitudes in a layer: up-going ``a`` referenced at the layer's bottom, down-going ``b``
at its top, so every exponential inside the layer decays (the stable choice of
Li, J. Opt. Soc. Am. A 13, 1024 (1996)). A section's S-matrix maps the incoming waves
(up-going arriving from below, down-going arriving from above) to the outgoing ones
(down-going leaving below, up-going leaving above): blocks S11 (reflection from below),
S12 (down transmission), S21 (up transmission), S22 (reflection from above).
Sections combine with the Redheffer star product (Redheffer, J. Math. Phys. 41, 1 (1962);
Rumpf, Prog. Electromagn. Res. B 35, 241 (2011)); no transfer matrix is ever formed, so
thick and lossy layers stay stable.
Must not import: solve, multipole, fields, metrics, search, store, report, cli.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
from autograd.tracer import getval

from chiropt.fourier.eig import eig_modes
from chiropt.fourier.linalg import inv

GAMMA_FLOOR = 1e-10


@dataclass
class Modes:
    """Eigenmodes of one layer at W wavelengths.

    W : (W, 2M, 2M) or None (uniform: identity); V : (W, 2M, 2M) or, uniform,
    the four diagonals (W, 4, M) of its blocks; gamma : (W, 2M) normalized kz [-]
    """

    W: Any
    V: Any
    gamma: Any
    uniform: bool
    W_inv: Any = None
    V_inv: Any = None
    ezz_inv: Any = None


def _branch(g2):
    """gamma = sqrt(g2) with Im >= 0 (decaying up-going), floored away from 0."""
    g = np.sqrt(g2 + 0j)
    g = np.where(np.imag(getval(g)) < -1e-14 * np.abs(getval(g)), -g, g)
    small = np.abs(getval(g)) < GAMMA_FLOOR
    return np.where(small, GAMMA_FLOOR * 1j, g)


def uniform_modes(eps, Kx, Ky) -> Modes:
    """Modes of a homogeneous layer of permittivity ``eps`` (W,); Kx, Ky (W, M) [-]."""
    e = eps[:, None]
    kz = _branch(e - Kx ** 2 - Ky ** 2)  # (W, M)
    # Q blocks (diagonal): [[-KxKy, Kx^2 - e], [e - Ky^2, KxKy]]; V = Q / kz
    V = np.stack([-Kx * Ky / kz, (Kx ** 2 - e) / kz, (e - Ky ** 2) / kz, Kx * Ky / kz], axis=1)
    return Modes(W=None, V=V, gamma=np.concatenate([kz, kz], axis=1), uniform=True)


def _diag(v):
    """(W, M) -> (W, M, M) diagonal matrices."""
    return v[..., :, None] * np.eye(v.shape[-1])


def _block(a, b, c, d):
    return np.concatenate([np.concatenate([a, b], axis=-1), np.concatenate([c, d], axis=-1)],
                          axis=-2)


def uniform_V_dense(V):
    """The dense (W, 2M, 2M) V of uniform modes (diagonals (W, 4, M))."""
    return _block(_diag(V[:, 0]), _diag(V[:, 1]), _diag(V[:, 2]), _diag(V[:, 3]))


def patterned_modes(mats, Kx, Ky) -> Modes:
    """Modes of a patterned layer from its ``LayerMatrices`` (see permittivity)."""
    kx = Kx[..., :, None]          # row scaling = left multiplication by diag(Kx)
    ky = Ky[..., :, None]
    Ezi = mats.ezz_inv
    M = Kx.shape[-1]
    eye = np.eye(M)
    KxE, KyE = kx * Ezi, ky * Ezi
    P = _block(KxE * Ky[..., None, :], eye - KxE * Kx[..., None, :],
               KyE * Ky[..., None, :] - eye, -KyE * Kx[..., None, :])
    Q = _block(_diag(-Kx * Ky) - mats.eyx, _diag(Kx ** 2) - mats.eyy,
               mats.exx - _diag(Ky ** 2), _diag(Kx * Ky) + mats.exy)
    lam, W = eig_modes(np.matmul(P, Q))
    gamma = _branch(lam)
    V = np.matmul(Q, W) / gamma[..., None, :]
    return Modes(W=W, V=V, gamma=gamma, uniform=False, ezz_inv=Ezi)


def _inv_W(m: Modes):
    if m.uniform:
        return None
    if m.W_inv is None:
        m.W_inv = inv(m.W)
    return m.W_inv


def _inv_V(m: Modes):
    if not m.uniform:
        if m.V_inv is None:
            m.V_inv = inv(m.V)
        return m.V_inv
    a, b, c, d = m.V[:, 0], m.V[:, 1], m.V[:, 2], m.V[:, 3]
    det = a * d - b * c
    return _block(_diag(d / det), _diag(-b / det), _diag(-c / det), _diag(a / det))


def _dense(m: Modes, which: str):
    if which == "W":
        return m.W
    return uniform_V_dense(m.V) if m.uniform else m.V


def interface(below: Modes, above: Modes):
    """S-matrix (S11, S12, S21, S22) of the interface between two layers.

    With T1 = Wb^-1 Wa, T2 = Vb^-1 Va, Ap = T1 + T2, Am = T1 - T2 (continuity of e and h;
    e.g. Liu & Fan 2012, sec. 3.3): S21 = 2 Ap^-1, S22 = -Ap^-1 Am, S11 = Am Ap^-1,
    S12 = (Ap - Am Ap^-1 Am)/2.
    """
    Wb_inv = _inv_W(below)
    if above.uniform:
        Wa = None
    else:
        Wa = above.W
    if Wa is None and Wb_inv is None:
        n = below.gamma.shape[-1]
        T1 = np.eye(n)[None] * np.ones((below.gamma.shape[0], 1, 1))
    elif Wa is None:
        T1 = Wb_inv
    elif Wb_inv is None:
        T1 = Wa
    else:
        T1 = np.matmul(Wb_inv, Wa)
    T2 = np.matmul(_inv_V(below), _dense(above, "V"))
    Ap, Am = T1 + T2, T1 - T2
    Ai = inv(Ap)
    AmAi = np.matmul(Am, Ai)
    return AmAi, 0.5 * (Ap - np.matmul(AmAi, Am)), 2.0 * Ai, -np.matmul(Ai, Am)


def propagation(modes: Modes, thickness_k0):
    """S-matrix of a layer's interior: X = exp(i gamma d) on both transmissions (dense)."""
    X = _diag(np.exp(1j * modes.gamma * thickness_k0))
    zero = np.zeros_like(X)
    return zero, X, X, zero


def phase(modes: Modes, thickness_k0):
    """The layer's transmission phases exp(i gamma d), (W, 2M)."""
    return np.exp(1j * modes.gamma * thickness_k0)


def star_phase(S, X):
    """S star (a layer interior with phases X (W, n)) without dense products:
    C11 = S11, C12 = S12 X, C21 = X S21, C22 = X S22 X."""
    S11, S12, S21, S22 = S
    return S11, S12 * X[:, None, :], X[:, :, None] * S21, X[:, :, None] * S22 * X[:, None, :]


def phase_star(X, S):
    """(A layer interior with phases X) star S: C11 = X S11 X, C12 = X S12, C21 = S21 X,
    C22 = S22."""
    S11, S12, S21, S22 = S
    return X[:, :, None] * S11 * X[:, None, :], X[:, :, None] * S12, S21 * X[:, None, :], S22


# -- sections of uniform layers: every harmonic on its own, 2 x 2 blocks (E_x, E_y) --------

def _local_V(m: Modes):
    """Uniform modes' V as per-harmonic 2 x 2 blocks (W, M, 2, 2)."""
    V = m.V
    return np.stack([np.stack([V[:, 0], V[:, 1]], axis=-1),
                     np.stack([V[:, 2], V[:, 3]], axis=-1)], axis=-2)


def _lmm(a, b):
    return np.einsum("wmij,wmjk->wmik", a, b)


def _linv(a):
    det = a[..., 0, 0] * a[..., 1, 1] - a[..., 0, 1] * a[..., 1, 0]
    return np.stack([np.stack([a[..., 1, 1], -a[..., 0, 1]], axis=-1),
                     np.stack([-a[..., 1, 0], a[..., 0, 0]], axis=-1)], axis=-2) / det[
        ..., None, None]


def local_interface(below: Modes, above: Modes):
    """:func:`interface` of two uniform layers, as per-harmonic 2 x 2 blocks."""
    T2 = _lmm(_linv(_local_V(below)), _local_V(above))
    eye = np.eye(2)
    Ap, Am = eye + T2, eye - T2
    Ai = _linv(Ap)
    AmAi = _lmm(Am, Ai)
    return AmAi, 0.5 * (Ap - _lmm(AmAi, Am)), 2.0 * Ai, -_lmm(Ai, Am)


def local_star_phase(S, x):
    """:func:`star_phase` for per-harmonic blocks; x (W, M) the phase of both components."""
    S11, S12, S21, S22 = S
    xx = x[..., None, None]
    return S11, S12 * xx, xx * S21, xx * S22 * xx


def local_star(A, B):
    """:func:`star` for per-harmonic 2 x 2 blocks."""
    A11, A12, A21, A22 = A
    B11, B12, B21, B22 = B
    eye = np.eye(2)
    D = _linv(eye - _lmm(A22, B11))
    F = _linv(eye - _lmm(B11, A22))
    DA21 = _lmm(D, A21)
    return (A11 + _lmm(_lmm(A12, B11), DA21), _lmm(_lmm(A12, F), B12), _lmm(B21, DA21),
            B22 + _lmm(_lmm(B21, _lmm(D, A22)), B12))


def local_to_dense(S):
    """Per-harmonic blocks (W, M, 2, 2) -> dense (W, 2M, 2M) S-matrix blocks."""
    return tuple(_block(_diag(b[..., 0, 0]), _diag(b[..., 0, 1]), _diag(b[..., 1, 0]),
                        _diag(b[..., 1, 1])) for b in S)


def star(A, B):
    """Redheffer star product: section A below, B above (Rumpf 2011, eq. 8 in our block
    naming). Returns the S-matrix of the combined section."""
    A11, A12, A21, A22 = A
    B11, B12, B21, B22 = B
    n = A11.shape[-1]
    eye = np.eye(n)
    D = inv(eye - np.matmul(A22, B11))        # (I - A22 B11)^-1
    DA22 = np.matmul(D, A22)
    DA21 = np.matmul(D, A21)
    A12B11 = np.matmul(A12, B11)
    C11 = A11 + np.matmul(A12B11, DA21)
    # (I - B11 A22)^-1 = I + B11 D A22 (push-through identity): A12 F = A12 + A12B11 D A22
    C12 = np.matmul(A12 + np.matmul(A12B11, DA22), B12)
    C21 = np.matmul(B21, DA21)
    C22 = B22 + np.matmul(np.matmul(B21, DA22), B12)
    return C11, C12, C21, C22
