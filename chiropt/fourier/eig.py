"""Eigen-decomposition of a general complex matrix as an autograd primitive.

``eig_modes(A)`` returns (lam, W) with A W = W diag(lam), like ``numpy.linalg.eig``, for a
stack of matrices (..., n, n). Its reverse-mode rule is the first-order perturbation theory
of non-Hermitian eigenproblems (Giles, "An extended collection of matrix derivative
results for forward and reverse mode algorithmic differentiation", Oxford NA report 08/01
(2008), sec. 3.1; written without conjugation, autograd's convention for holomorphic
functions):

    X = W^-1 dA W,  d lam_i = X_ii,  dW = W (F o X),  F_ij = 1/(lam_j - lam_i) (i != j)
    A_bar = W^-T [diag(lam_bar) + F o (W^T W_bar)] W^T

Degenerate eigenvalues (|lam_i - lam_j| below ``DEGENERACY`` of the spectrum's scale) are
the rule at normal incidence on square and hexagonal lattices. There F_ij is set to 0: the
eigenvectors inside a degenerate subspace are arbitrary, the layer's scattering matrix does
not depend on that choice, and for perturbations that keep the symmetry protecting the
degeneracy (radii, heights, periods of the same lattice kind, wavelength) X is a multiple
of the identity on the subspace (Schur's lemma), so the rule is exact. For perturbations
that split a degeneracy (an incidence angle away from zero at zero), the omitted term is
the derivative of the splitting; it is documented, and the tests check gradients where
the rule is exact.
"""

from __future__ import annotations

import autograd.numpy as anp
import numpy as onp
from autograd.extend import defvjp, primitive

from chiropt.fourier.linalg import solve

DEGENERACY = 1e-9


@primitive
def eig_modes(A):
    """Eigenvalues (..., n) and right eigenvectors (..., n, n) of A (..., n, n) [any units]."""
    lam, W = onp.linalg.eig(A)
    return lam, W


def _pair_factors(lam):
    """F_ij = 1/(lam_j - lam_i), zero on the diagonal and for degenerate pairs."""
    diff = lam[..., None, :] - lam[..., :, None]
    scale = onp.max(onp.abs(lam), axis=-1, keepdims=True)[..., None] + 1e-300
    degenerate = onp.abs(diff) <= DEGENERACY * onp.maximum(scale, 1.0)
    safe = onp.where(degenerate, 1.0, diff)
    return onp.where(degenerate, 0.0, 1.0 / safe)


def _eig_vjp(ans, A):
    lam, W = ans
    F = _pair_factors(lam)
    WT = onp.swapaxes(W, -1, -2)

    def vjp(g):   # autograd operations: differentiable again in the cotangent
        g_lam, g_W = g
        Z = F * anp.matmul(WT, g_W) if g_W is not None else onp.zeros_like(W)
        if g_lam is not None:
            Z = Z + g_lam[..., :, None] * onp.eye(lam.shape[-1])
        # A_bar = W^-T Z W^T
        return solve(WT, anp.matmul(Z, WT))

    return vjp


defvjp(eig_modes, _eig_vjp)
