"""Plane waves of the diffraction orders: wavevectors, polarization basis, helicity vectors.

Owns: the (p, s, k) basis of every order (docs/theory.md §5), the kz branch, the
circular (helicity) polarization vectors, and the z-directed power flux of a plane
wave. Pure array functions, autograd-differentiable.
Must not import: solve, fields, metrics, search, store, report, cli.

Conventions (docs/theory.md §1, §5): ``s = z x q_hat`` (``q_hat`` = the incidence azimuth
direction when q = 0), ``p± = s x k_hat±`` with ``k_hat± = (q, ±kz)/k``, so that
(p, s, k_hat) is right-handed; ``kz = sqrt(k^2 - |q|^2)`` with ``Im kz >= 0`` and
``kz > 0`` when real. A helicity-``h`` wave has the polarization ``(p + i h s)/sqrt(2)``:
``h = +1`` gives positive optical chirality (checked by a test).
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.extend import defvjp_argnums, primitive

from chiropt.autodiff import unbroadcast


def kz_branch(k, qq):
    """Normal wavenumber ``sqrt(k^2 - qq)`` with ``Im >= 0`` (``> 0`` real part when propagating).

    Parameters
    ----------
    k : array — wavenumber of the medium (real, or complex with Im >= 0) [1/m]
    qq : array — squared in-plane wavenumber |q|^2 [1/m^2], broadcast against k

    Notes
    -----
    The principal square root has ``Re >= 0``; its argument ``k^2 - qq`` has
    ``Im >= 0`` for passive media (``+0j`` for lossless ones), so the principal
    branch is the physical one (docs/theory.md §5).
    """
    arg = k ** 2 - qq + 0j
    return np.sqrt(arg)


def order_basis(q, kz, k, azimuth):
    """Unit vectors of plane waves with in-plane wavevectors ``q``.

    Parameters
    ----------
    q : (..., 2) in-plane wavevectors [1/m]
    kz : (...) normal wavenumbers from :func:`kz_branch` [1/m]
    k : (...) medium wavenumber [1/m] (broadcast against kz)
    azimuth : number, or array broadcast against ``q.shape[:-1]`` (e.g. (W, 1), one per
        wavelength row) — direction [rad] used for ``q_hat`` where ``q = 0``

    Returns
    -------
    s, p_up, p_down, k_up, k_down : (..., 3) complex vectors. ``k_up = (q, kz)/k``;
        p vectors are complex for evanescent waves; dot products with them are
        bilinear (no conjugation), docs/theory.md §5.

    Notes
    -----
    One autograd node (``_basis``) with a hand-written vector-Jacobian product: with
    ``Q = |q|``, ``q_hat = q/Q``, ``c = kz/k``: ``s = z x q_hat``,
    ``k_up/down = (q/k, +-c)``, ``p_up/down = (+-c q_hat, -Q/k)``; where ``q = 0``,
    ``q_hat = (cos, sin)(azimuth)`` and ``-Q/k`` is ``-(q_hat . q)/k``.
    """
    out = _basis(q, kz, k, azimuth)
    return out[0], out[1], out[2], out[3], out[4]


def _basis_parts(q, kz, k, azimuth):
    """Plain intermediates of :func:`order_basis` at full broadcast shape."""
    q = onp.asarray(q, dtype=float)
    kz = onp.asarray(kz)
    shape = onp.broadcast_shapes(q.shape[:-1], onp.shape(kz), onp.shape(k))
    q = onp.broadcast_to(q, shape + (2,))
    kb = onp.broadcast_to(onp.asarray(k) + 0j, shape)
    qq = onp.sum(q ** 2, axis=-1)
    nonzero = qq > 0
    Q = onp.sqrt(onp.where(nonzero, qq, 1.0))
    az = onp.asarray(azimuth, dtype=float)
    qhat = onp.where(nonzero[..., None], q / Q[..., None],
                     onp.stack([onp.cos(az), onp.sin(az)], axis=-1))
    c = onp.broadcast_to(kz, shape) / kb
    return q, kb, nonzero, Q, qhat, c, az


@primitive
def _basis(q, kz, k, azimuth):
    """(s, p_up, p_down, k_up, k_down) stacked, (5, ..., 3) (:func:`order_basis`)."""
    q, kb, _, _, qhat, c, _ = _basis_parts(q, kz, k, azimuth)
    out = onp.zeros((5,) + c.shape + (3,), dtype=complex)
    out[0, ..., 0], out[0, ..., 1] = -qhat[..., 1], qhat[..., 0]
    pz = -onp.sum(qhat * q, axis=-1) / kb
    out[1, ..., :2] = c[..., None] * qhat
    out[2, ..., :2] = -out[1, ..., :2]
    out[1, ..., 2] = out[2, ..., 2] = pz
    out[3, ..., :2] = out[4, ..., :2] = q / kb[..., None]
    out[3, ..., 2], out[4, ..., 2] = c, -c
    return out


def _basis_vjp(argnums, ans, args, kwargs):
    q0, kz0, k0, az0 = args
    q, kb, nonzero, Q, qhat, c, az = _basis_parts(q0, kz0, k0, az0)
    P = onp.sum(qhat * q, axis=-1)                  # |q| (or q_hat . q = 0 where q = 0)
    inv_k = 1.0 / kb
    radial = nonzero[..., None] / Q[..., None]      # d q_hat / d q = (I - q_hat q_hat^T)/Q
    turn = onp.where(nonzero, 0.0, 1.0)[..., None] * onp.stack([-onp.sin(az), onp.cos(az)],
                                                                axis=-1)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        gs, gpu, gpd, gku, gkd = g[0], g[1], g[2], g[3], g[4]
        gpxy = gpu[..., :2] - gpd[..., :2]
        gk_xy = gku[..., :2] + gkd[..., :2]
        qhat_bar = np.stack([gs[..., 1], -gs[..., 0]], axis=-1) + c[..., None] * gpxy
        c_bar = np.sum(qhat * gpxy, axis=-1) + gku[..., 2] - gkd[..., 2]
        gpz = gpu[..., 2] + gpd[..., 2]
        out = []
        for i in argnums:
            if i == 0:
                along = np.sum(qhat * qhat_bar, axis=-1)[..., None]
                v = (radial * (qhat_bar - qhat * along) + gk_xy * inv_k[..., None]
                     - (gpz * inv_k)[..., None] * qhat)
            elif i == 1:
                v = c_bar * inv_k
            elif i == 2:
                v = (-np.sum(q * gk_xy, axis=-1) * inv_k ** 2 - c_bar * c * inv_k
                     + gpz * P * inv_k ** 2)
            else:
                v = np.sum(qhat_bar * turn, axis=-1)
            # back to the argument's shape and type (axes it was broadcast along summed)
            out.append(unbroadcast(v, np.metadata(args[i])))
        return tuple(out)

    return vjp


defvjp_argnums(_basis, _basis_vjp)


_S_OF_QHAT = np.array([[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0]])
_XY_TO_3D = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
_Z_UNIT = np.array([0.0, 0.0, 1.0])

_LEVI_CIVITA = np.zeros((3, 3, 3))
for _i, _j, _k in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
    _LEVI_CIVITA[_i, _j, _k], _LEVI_CIVITA[_i, _k, _j] = 1.0, -1.0


def cross(a, b):
    """Cross product over the last axis (length 3), autograd-friendly.

    Operands are broadcast to a common shape first: autograd's VJP of ``np.cross``
    does not reduce broadcast axes.
    """
    shape = np.broadcast_shapes(np.shape(a), np.shape(b))
    if np.shape(a) != shape:
        a = a + np.zeros(shape)
    if np.shape(b) != shape:
        b = b + np.zeros(shape)
    return np.cross(a, b)


def cross_matrix(c):
    """Matrix ``[c x]`` of the cross product, shape (..., 3, 3): ``[c x] v = c x v``.

    ``[c x]_ij = eps_ikj c_k`` (Levi-Civita), one einsum so the reverse pass stays cheap.
    """
    return np.einsum("ikj,...k->...ij", _LEVI_CIVITA, c)


def helicity_vectors(s, p):
    """Circular polarization vectors ``(p + i h s)/sqrt(2)`` for h = +1, -1.

    Returns an array of shape (..., 2, 3), helicity order [+1, -1].
    """
    return np.stack([(p + 1j * s) / np.sqrt(2.0), (p - 1j * s) / np.sqrt(2.0)], axis=-2)


def z_flux(E, kvec_over_k0):
    """z component of the time-averaged Poynting vector, in units of 1/(2 Z0).

    Parameters
    ----------
    E : (..., 3) complex field amplitude [V/m]
    kvec_over_k0 : (..., 3) complex wavevector divided by the vacuum wavenumber
        (so that ``Z0 H = kvec/k0 x E``, Maxwell-Faraday for exp(-i omega t), mu = 1)

    Returns
    -------
    Re[(E x conj(Z0 H))_z] [V^2/m^2]; multiply by 1/(2 Z0) for W/m^2.

    References
    ----------
    Jackson, Classical Electrodynamics, 3rd ed., eq. (6.132) (complex Poynting vector).
    """
    H = cross(kvec_over_k0, E)
    return np.real(E[..., 0] * np.conj(H[..., 1]) - E[..., 1] * np.conj(H[..., 0]))
