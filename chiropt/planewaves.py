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
    azimuth : scalar — direction [rad] used for ``q_hat`` where ``q = 0``

    Returns
    -------
    s, p_up, p_down, k_up, k_down : (..., 3) complex vectors. ``k_up = (q, kz)/k``;
        p vectors are complex for evanescent waves; dot products with them are
        bilinear (no conjugation), docs/theory.md §5.
    """
    qq = np.sum(q ** 2, axis=-1)
    nonzero = (qq > 0)[..., None]
    safe = np.expand_dims(np.sqrt(np.where(nonzero[..., 0], qq, 1.0)), -1)
    # np.where operands broadcast to full shape: autograd's where-VJP does not reduce
    # broadcast axes
    default = np.ones(np.shape(q)) * np.array([np.cos(azimuth), np.sin(azimuth)])
    qhat = np.where(nonzero * np.ones(np.shape(q), bool), q / safe, default)
    s = np.matmul(qhat, _S_OF_QHAT) + 0j  # z x q_hat
    k = np.expand_dims(k + 0j * kz, -1)
    # written out instead of cross products (fewer array operations):
    # p± = s x k_hat± = (±(kz/k) q_hat, -(q_hat . q)/k)
    qk = np.matmul(q, _XY_TO_3D) / k
    c = np.expand_dims(kz, -1) / k
    zk = c * _Z_UNIT
    k_up = qk + zk
    k_down = qk - zk
    pxy = np.matmul(qhat, _XY_TO_3D) * c  # ((kz/k) q_hat, 0)
    pz = -np.expand_dims(np.sum(qhat * q, axis=-1), -1) / k * _Z_UNIT
    p_up = pxy + pz
    p_down = pz - pxy
    return s, p_up, p_down, k_up, k_down


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
