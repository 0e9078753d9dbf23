"""Fourier (Toeplitz) matrices of a patterned layer's permittivity, with factorization.

Owns: [[eps]] and [[1/eps]] of a layer from its inclusions' analytic coefficients, the
normal-vector field's coefficient matrices, and the in-plane permittivity operator the
eigenproblem uses. Must not import: solve, multipole, fields, metrics, search, store,
report, cli.

Factorization rules (which product of Fourier series is taken as which matrix):

- ``'normal'`` (default): the normal-vector formulation. With n(r) the unit normal
  field of the inclusions, D_parallel = eps E_parallel (Laurent's rule, [[eps]]) for the
  field tangential to the boundaries and D_n = [[1/eps]]^-1 E_n (the inverse rule) for
  the normal component (Li, J. Opt. Soc. Am. A 13, 1870 (1996); Popov & Neviere,
  J. Opt. Soc. Am. A 18, 2886 (2001); Schuster et al., J. Opt. Soc. Am. A 24, 2880
  (2007)), written as the congruence

      eps = P_t^1/2 [[eps]] P_t^1/2 + P_n^1/2 [[1/eps]]^-1 P_n^1/2,
      P_n = [[n n^T]] (block Toeplitz, 2M x 2M), P_t = I - P_n

  (see :func:`normal_projector_roots`): Hermitian for lossless layers (energy conserved
  at every truncation), passive for lossy ones (absorption >= 0, also for metals),
  invariant under G -> -G with transposition (reciprocity), and a mirror-symmetric
  normal field keeps the mirror symmetry that maps one helicity onto the other. (The
  product form [[eps]] - (Delta [[n n]] + [[n n]] Delta)/2 of Goetz et al., Opt. Express
  16, 17295 (2008), shares the first three properties but gave negative absorption for
  silver disks in our tests.)
- ``'laurent'``: eps_ab = [[eps]] delta_ab (Moharam et al., J. Opt. Soc. Am. A 12, 1068
  (1995)); converges slowly for high-index contrast, kept for comparison.

The z component always uses [[eps]] (E_z is tangential to the vertical side walls), and
the eigenproblem needs its inverse [[eps]]^-1.
The normal field is sampled on a grid of ``NORMAL_GRID``^2 points of the cell and its
products' coefficients found by a discrete Fourier sum; this field only chooses the
factorization (any field with the right boundary normals converges to the same limit), so
it is not differentiated.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.fourier.linalg import inv

NORMAL_GRID = 256
#: projector roots by the content of the normal-field matrices they come from (so a
#: changed geometry never reuses another's; plain values, not differentiated)
_ROOTS: dict = {}
FACTORIZATIONS = ("normal", "laurent")


@dataclass
class LayerMatrices:
    """In-plane permittivity operator of one patterned layer, each (W, M, M) [-].

    exx, exy, eyx, eyy : the factorized in-plane tensor; ezz_inv : [[eps]]^-1
    """

    exx: Any
    exy: Any
    eyx: Any
    eyy: Any
    ezz_inv: Any


def _toeplitz(values, inverse):
    """(..., D) coefficients at index differences -> (..., M, M) Toeplitz matrices."""
    return values[..., inverse]


def shape_matrices(inclusions, G_diff, area, inverse):
    """Toeplitz matrices (M, M) of each inclusion's indicator (traced through its sizes)."""
    return [_toeplitz(shape.fourier(G_diff, area), inverse) for shape, _ in inclusions]


def _composite(eps_back, values, mats, M):
    """eps_back I + sum_i (v_i - eps_back) C_i for eps (W,) -> (W, M, M)."""
    out = eps_back[:, None, None] * onp.eye(M)
    for v, C in zip(values, mats, strict=True):
        out = out + (v - eps_back)[:, None, None] * C[None]
    return out


def normal_field_matrices(inclusions, lattice, dmn, inverse, n_grid: int = NORMAL_GRID):
    """[[n_x n_x]], [[n_x n_y]], [[n_y n_y]] (M, M) of the inclusions' normal field.

    Each grid point of the cell takes the normal of the inclusion (or periodic image)
    whose level function is smallest there (see ``chiropt.fourier.shapes``). Plain values.
    """
    plain = lattice.plain()
    a1, a2 = onp.asarray(plain.a1), onp.asarray(plain.a2)
    u = (onp.arange(n_grid) - n_grid // 2) / n_grid
    U, V = onp.meshgrid(u, u, indexing="ij")
    x = U * a1[0] + V * a2[0]
    y = U * a1[1] + V * a2[1]
    best = onp.full(x.shape, onp.inf)
    nx = onp.zeros(x.shape)
    ny = onp.zeros(x.shape)
    for shape, _ in inclusions:
        for i in (-1, 0, 1):
            for j in (-1, 0, 1):
                sx, sy = i * a1 + j * a2
                level, (mx, my) = shape.level(x - sx, y - sy)
                closer = level < best
                best = onp.where(closer, level, best)
                nx = onp.where(closer, mx, nx)
                ny = onp.where(closer, my, ny)
    # f_hat(m, n) = mean over the grid of f exp(-2 pi i (m u + n v)): an FFT of the grid
    # shifted so that u = 0 comes first
    im, iv = dmn[:, 0] % n_grid, dmn[:, 1] % n_grid

    def coeff(f):
        return onp.fft.fft2(onp.fft.ifftshift(f))[im, iv] / n_grid ** 2

    return tuple(_toeplitz(coeff(f), inverse) for f in (nx * nx, nx * ny, ny * ny))


def layer_matrices(eps_back, inclusions, lattice, mn, dmn, inverse, *,
                   factorization: str = "normal", normals=None) -> LayerMatrices:
    """The in-plane permittivity operator of a patterned layer.

    Parameters
    ----------
    eps_back : (W,) complex — background permittivity [-]
    inclusions : list of (shape, eps (W,)) — shapes of ``chiropt.fourier.shapes`` [m]
    lattice : Lattice [m] (may be traced)
    mn : (M, 2) harmonic indices; dmn, inverse : from ``difference_table``
    factorization : 'normal' or 'laurent' (see the module docstring)
    normals : optional precomputed :func:`normal_field_matrices`

    Returns
    -------
    LayerMatrices
    """
    M = len(mn)
    b1, b2 = lattice.reciprocal()
    G_diff = dmn[:, 0:1] * b1[None, :] + dmn[:, 1:2] * b2[None, :]
    mats = shape_matrices(inclusions, G_diff, lattice.area, inverse)
    E = _composite(eps_back, [e for _, e in inclusions], mats, M)
    ezz_inv = inv(E)
    if factorization == "laurent" or not inclusions:
        zero = np.zeros_like(E)
        return LayerMatrices(E, zero, zero, E, ezz_inv)
    Einv = _composite(1.0 / eps_back, [1.0 / e for _, e in inclusions], mats, M)
    Eta = inv(Einv)
    if normals is None:
        normals = normal_field_matrices(inclusions, lattice, dmn, inverse)
    Rt, Rn = normal_projector_roots(normals)
    zero = np.zeros_like(E)
    E2 = np.concatenate([np.concatenate([E, zero], -1), np.concatenate([zero, E], -1)], -2)
    H2 = np.concatenate([np.concatenate([Eta, zero], -1), np.concatenate([zero, Eta], -1)], -2)
    T = np.matmul(np.matmul(Rt, E2), Rt) + np.matmul(np.matmul(Rn, H2), Rn)
    return LayerMatrices(T[:, :M, :M], T[:, :M, M:], T[:, M:, :M], T[:, M:, M:], ezz_inv)


def normal_projector_roots(normals):
    """Square roots (2M, 2M) of the block-Toeplitz projectors on the tangential and normal
    field directions, P_n = [[n n^T]] and P_t = I - P_n (both positive semidefinite, being
    Toeplitz matrices of positive semidefinite matrix functions), by ``eigh``.

    The in-plane operator is then eps = P_t^1/2 [[eps]] P_t^1/2 + P_n^1/2 [[1/eps]]^-1
    P_n^1/2: Laurent's rule where the field is tangential to the boundaries, the inverse
    rule where it is normal (the normal-vector method of Schuster et al. 2007), written as
    a congruence so that it is Hermitian for lossless media (energy conserved), has a
    positive semidefinite anti-Hermitian part for passive ones (absorption never
    negative, which the product form (Delta N + N Delta)/2 does not guarantee for
    metals), and is invariant under G -> -G with transposition (reciprocity).
    Plain values (the normal field is not differentiated).
    """
    Nxx, Nxy, Nyy = (onp.asarray(getval(n)) for n in normals)
    key = hashlib.sha1(b"".join(onp.ascontiguousarray(n).tobytes()
                                for n in (Nxx, Nxy, Nyy))).hexdigest()
    if key in _ROOTS:
        return _ROOTS[key]
    Pn = onp.block([[Nxx, Nxy], [Nxy, Nyy]])
    Pn = 0.5 * (Pn + Pn.conj().T)
    w, U = onp.linalg.eigh(Pn)
    w = onp.clip(w, 0.0, 1.0)
    Rn = (U * onp.sqrt(w)) @ U.conj().T
    Rt = (U * onp.sqrt(1.0 - w)) @ U.conj().T
    if len(_ROOTS) >= 16:   # a search moves few normal fields; keep the latest
        _ROOTS.pop(next(iter(_ROOTS)))
    _ROOTS[key] = (Rt, Rn)
    return Rt, Rn


def check_factorization(name: str) -> str:
    from chiropt.errors import InputError

    if name not in FACTORIZATIONS:
        raise InputError("model.factorization", f"got {name!r}, allowed: "
                                                f"{', '.join(FACTORIZATIONS)}")
    return name


def plain_normals(inclusions, lattice, dmn, inverse):
    """:func:`normal_field_matrices` on plain values (for reuse across wavelengths)."""
    return normal_field_matrices([(s, getval(e)) for s, e in inclusions], lattice, dmn, inverse)
