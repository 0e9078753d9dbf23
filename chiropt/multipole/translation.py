"""Translation coefficients of vector spherical waves (outgoing -> regular).

Owns: Wigner 3j symbols and Gaunt integrals, the scalar addition theorem coefficients,
and the constant tables that express the VSWF translation matrix as a linear
combination of the scalar waves h_p(kb) Y_pM(b_hat), p <= 2 lmax, so that one set of
(lattice-summed) scalar sums gives every vector coefficient.
Must not import: solve, fields, metrics, search, store, report, cli.

Conventions: those of ``chiropt.sphericalwaves``. With b = r_i - r_j (from the source
centre j to the receiving centre i), for |r - r_i| < |b|:

    Psi_u(r - r_j) = sum_u' A_u'u(b) Rg Psi_u'(r - r_i),
    A_u'u(b) = sum_{p, M} C[u', u, p (p+1) + M] h_p(k|b|) Y_pM(b_hat).

Derivation (ours, checked pointwise by tests/test_multipole_basis.py):
scalar addition theorem  psi_lm(r + b) = sum S_{lm;nu mu}(b) Rg psi_{nu mu}(r),
S_{lm;nu mu} = 4 pi sum_q i^(nu - l + q) G(l m; nu mu; q) h_q Y_{q, m-mu}(b_hat) with the
Gaunt integral G = int Y_lm conj(Y_nu mu) conj(Y_q,m-mu) dOmega. Writing
M_lm = L psi_lm / sqrt(l(l+1)) in the components (1, +-i, 0), z_hat and projecting on
X_nu mu gives the same-type coefficient

    A_{nu mu; lm} = [c-(l,m) c-(nu,mu) S_{l,m-1;nu,mu-1}/2 + c+ c+ S_{l,m+1;nu,mu+1}/2
                     + m mu S_{lm;nu mu}] / sqrt(l(l+1) nu(nu+1)),

and, from N = (i/(k sqrt(l(l+1)))) [k^2 r psi + grad d_r(r psi)] and r_j = r_i + b,
the cross-type coefficient

    B_{nu mu; lm} = i [c+(nu,mu) (kb)_+ S_{lm;nu,mu+1}/2 + c-(nu,mu) (kb)_- S_{lm;nu,mu-1}/2
                      + mu (kb)_z S_{lm;nu mu}] / sqrt(l(l+1) nu(nu+1)),

(b_+- = b_x +- i b_y). The products k b h_q Y_{q,.} b_hat_sigma are reduced with
Gaunt integrals of Y_1sigma and the recurrence k b [h_{p-1} + h_{p+1}] = (2p+1) h_p
(DLMF 10.51.1); the table builder checks that the reduction is exact.

References
----------
Stein, Quart. Appl. Math. 19, 15 (1961); Cruzan, Quart. Appl. Math. 20, 33 (1962)
(vector addition theorems); Martin, Multiple Scattering (CUP 2006), §3.13-3.14
(scalar addition theorem with Gaunt coefficients); Edmonds, Angular Momentum in Quantum
Mechanics (1957), eq. 3.7.3 (Racah formula for 3j symbols), eq. 4.6.3 (Gaunt integral);
Tsang, Kong & Ding (2000) ch. 3 and Mackowski, Proc. R. Soc. A 433, 599 (1991) (the
same coefficients in closed form).
"""

from __future__ import annotations

import math
from functools import cache
from types import MappingProxyType

import numpy as onp
import scipy.special as sps

from chiropt.sphericalwaves import lm_index, mode_table, spherical_harmonics


@cache
def wigner3j(j1: int, j2: int, j3: int, m1: int, m2: int, m3: int) -> float:
    """Wigner 3j symbol (j1 j2 j3; m1 m2 m3) for integer arguments (Racah formula).

    References
    ----------
    Edmonds (1957) eq. 3.7.3; DLMF 34.2.4.
    """
    if m1 + m2 + m3 != 0 or j3 < abs(j1 - j2) or j3 > j1 + j2:
        return 0.0
    if abs(m1) > j1 or abs(m2) > j2 or abs(m3) > j3:
        return 0.0
    f = math.factorial
    tri = f(j1 + j2 - j3) * f(j1 - j2 + j3) * f(-j1 + j2 + j3) / f(j1 + j2 + j3 + 1)
    pre = math.sqrt(tri * f(j1 + m1) * f(j1 - m1) * f(j2 + m2) * f(j2 - m2)
                    * f(j3 + m3) * f(j3 - m3))
    s = 0.0
    for t in range(0, j1 + j2 + j3 + 1):
        d = [t, j3 - j2 + t + m1, j3 - j1 + t - m2, j1 + j2 - j3 - t, j1 - t - m1, j2 - t + m2]
        if min(d) < 0:
            continue
        s += (-1) ** t / math.prod(f(x) for x in d)
    return (-1.0) ** (j1 - j2 - m3) * pre * s


@cache
def gaunt(l1: int, m1: int, l2: int, m2: int, l3: int, m3: int) -> float:
    """int Y_l1m1 Y_l2m2 Y_l3m3 dOmega (Condon-Shortley harmonics).

    References
    ----------
    Edmonds (1957) eq. 4.6.3; DLMF 34.3.22.
    """
    return (math.sqrt((2 * l1 + 1) * (2 * l2 + 1) * (2 * l3 + 1) / (4 * math.pi))
            * wigner3j(l1, l2, l3, 0, 0, 0) * wigner3j(l1, l2, l3, m1, m2, m3))


def _conj_gaunt(l, m, nu, mu, q):
    """int Y_lm conj(Y_nu,mu) conj(Y_q,m-mu) dOmega."""
    return (-1.0) ** m * gaunt(l, m, nu, -mu, q, mu - m)


@cache
def scalar_addition(l, m, nu, mu):
    """Coefficients s_q with S_{lm;nu mu}(b) = sum_q s_q h_q(kb) Y_{q,m-mu}(b_hat), dict q -> s_q.

    References
    ----------
    Martin, Multiple Scattering (2006) eq. 3.78 (up to notation); derived in the module
    docstring.
    """
    out = {}
    if abs(m) > l or abs(mu) > nu:
        return out
    for q in range(abs(l - nu), l + nu + 1):
        if (l + nu + q) % 2 or abs(m - mu) > q:
            continue
        g = _conj_gaunt(l, m, nu, mu, q)
        if g != 0.0:
            out[q] = 4 * math.pi * (1j) ** (nu - l + q) * g
    return MappingProxyType(out)   # cached: read-only


def _cpm(l, m, sign):
    return math.sqrt(max((l - sign * m) * (l + sign * m + 1), 0))


# b_hat_sigma = (b_x + i b_y, b_x - i b_y, b_z)/|b| as sqrt(4 pi/3) * c Y_1s
_BHAT = {+1: (1, -math.sqrt(8 * math.pi / 3)), -1: (-1, math.sqrt(8 * math.pi / 3)),
         0: (0, math.sqrt(4 * math.pi / 3))}


@cache
def _product_with_y1(q, M, sigma):
    """b_hat_sigma Y_qM = sum_p g_p Y_{p, M + s}: dict p -> g_p (p = q -+ 1)."""
    s, c = _BHAT[sigma]
    out = {}
    for p in (q - 1, q + 1):
        if p < 0 or abs(M + s) > p:
            continue
        g = (-1.0) ** (M + s) * gaunt(1, s, q, M, p, -(M + s))
        if g != 0.0:
            out[p] = c * g
    return MappingProxyType(out)   # cached: read-only


@cache
def translation_columns(lmax: int):
    """The table of :func:`translation_table` as a (J, 2K 2K) matrix, contiguous:
    A = D @ translation_columns(lmax) gives the flattened (2K, 2K) translation matrices of
    the lattice sums D (..., J) in one matrix product."""
    C = translation_table(lmax)
    out = onp.ascontiguousarray(onp.reshape(C, (-1, C.shape[-1])).T)
    out.setflags(write=False)
    return out


@cache
def translation_table(lmax: int):
    """Constant table C (2K, 2K, (2 lmax + 1)^2) of the VSWF translation (module docstring).

    Returns a read-only complex array; A_u'u(b) = C[u', u, :] . [h_p(kb) Y_pM(b_hat)].
    """
    tau, ls, ms = mode_table(lmax)
    n = len(tau)
    J = (2 * lmax + 1) ** 2
    C = onp.zeros((n, n, J), dtype=complex)
    # the entries depend on the modes' types only through tau = tau': the rows of
    # tau' = 1 repeat those of tau' = 0 with the column types swapped (filled below)
    for a in range(0, n, 2):  # receiving (regular) mode u' = (tau', nu, mu), tau' = 0
        t2, nu, mu = int(tau[a]), int(ls[a]), int(ms[a])
        for b in range(n):   # source (outgoing) mode u = (tau, l, m)
            t1, l, m = int(tau[b]), int(ls[b]), int(ms[b])
            norm = 1.0 / math.sqrt(l * (l + 1) * nu * (nu + 1))
            if t1 == t2:
                terms = [(0.5 * _cpm(l, m, -1) * _cpm(nu, mu, -1), m - 1, mu - 1),
                         (0.5 * _cpm(l, m, +1) * _cpm(nu, mu, +1), m + 1, mu + 1),
                         (float(m * mu), m, mu)]
                for c, mm, mmu in terms:
                    if c == 0.0:
                        continue
                    for q, s in scalar_addition(l, mm, nu, mmu).items():
                        C[a, b, lm_index(q, m - mu)] += norm * c * s
            else:
                # k b h_q Y_{p,M} products, K2[q, p]
                K2 = {}
                terms = [(0.5 * _cpm(nu, mu, +1), mu + 1, +1),
                         (0.5 * _cpm(nu, mu, -1), mu - 1, -1),
                         (float(mu), mu, 0)]
                for c, mmu, sigma in terms:
                    if c == 0.0:
                        continue
                    for q, s in scalar_addition(l, m, nu, mmu).items():
                        for p, g in _product_with_y1(q, m - mmu, sigma).items():
                            K2[(q, p)] = K2.get((q, p), 0.0) + 1j * norm * c * s * g
                ps = sorted({p for _, p in K2})
                scale = max([abs(v) for v in K2.values()] + [1.0])
                for p in ps:
                    lo, hi = K2.get((p - 1, p), 0.0), K2.get((p + 1, p), 0.0)
                    if abs(lo - hi) > 1e-12 * scale:
                        raise RuntimeError(f"translation table reduction failed at "
                                           f"(l, m, nu, mu, p) = {(l, m, nu, mu, p)}")
                    if abs(hi) > 1e-14 * scale:
                        C[a, b, lm_index(p, m - mu)] += (2 * p + 1) * hi
    C[1::2, 1::2] = C[0::2, 0::2]
    C[1::2, 0::2] = C[0::2, 1::2]
    C.setflags(write=False)
    return C


def scalar_waves_at(b, k, pmax: int):
    """Plain-value h_p(k|b|) Y_pM(b_hat), (P, (pmax+1)^2), for b (P, 3) [m], k [1/m]."""
    r = onp.linalg.norm(b, axis=-1)
    u = b / r[:, None]
    Y = onp.asarray(spherical_harmonics(u, pmax))
    ps = onp.array([p for p in range(pmax + 1) for _ in range(-p, p + 1)])
    x = k * r[:, None]
    h = sps.spherical_jn(ps[None, :], x) + 1j * sps.spherical_yn(ps[None, :], x)
    return h * Y


def translation_matrix(b, k, lmax: int):
    """Plain-value translation matrices A(b) (P, 2K, 2K) for displacements b (P, 3) [m].

    Parameters
    ----------
    b : array (P, 3) — r_i - r_j, from the source centre to the receiving centre [m]
    k : float — host wavenumber [1/m]
    lmax : int

    Returns
    -------
    complex array (P, 2K, 2K): outgoing mode u at r_j -> regular mode u' at r_i, [u', u].
    """
    D = scalar_waves_at(onp.atleast_2d(b), k, 2 * lmax)
    return onp.einsum("abj,pj->pab", translation_table(lmax), D)
