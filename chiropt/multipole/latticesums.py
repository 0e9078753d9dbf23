"""Ewald lattice sums of outgoing scalar spherical waves, all (p, M) up to a given p.

Owns: D_pM(d) = sum_R exp(i k_par.R) h_p(k|d - R|) Y_pM((d - R)/|d - R|) for a 2D
lattice R in the xy plane and any 3D displacement d (the term with d - R = 0 excluded),
by Ewald summation, differentiable by autograd, vectorized over wavelengths and
displacements.
Must not import: solve, fields, metrics, search, store, report, cli.

Method (ours, built on the scalar split of docs/theory.md §6, checked by tests):
Hobson's theorem gives h_p(kr) Y_pM(r_hat) = (-k)^-p Y_pM(grad) h_0(kr) with the solid
harmonic polynomial Y_pM(x, y, z) = r^p Y_pM(r_hat), so D_pM = (4 pi/(i k)) (-k)^-p
Y_pM(grad) G(d), G the quasi-periodic Green's function of docs/theory.md §6. Apply
Y_pM(grad) to each part of the Ewald split:
- spectral part (1/4A) sum_g exp(i q.rho) F(z)/gamma: grad -> (i q_x, i q_y, d/dz); with
  T+- = exp(+-gamma z) erfc(gamma/2E +- zE) = Phi w(i(gamma/2E +- zE)),
  Phi = exp(-gamma^2/4E^2 - E^2 z^2) (Faddeeva form of docs/theory.md §6),
  F^(n)/gamma = gamma^(n-1) [T+ + (-1)^n T-]
               - (2E/sqrt pi) sum_{j <= n-2, n-1-j odd} 2 gamma^(n-2-j) Phi^(j),
  Phi^(j) = (-E)^j H_j(E z) Phi (Hermite polynomials).
- spatial part: each image is radial, f(r) = (1/(2 pi^1.5)) int_E^inf exp(-r^2 eta^2 +
  k^2/(4 eta^2)) d eta, and Y_pM(grad) f = Y_pM(r) (r^-1 d/dr)^p f = Y_pM(r) (-2)^p
  I_p/(2 pi^1.5), I_p = int_E^inf eta^(2p) exp(...) d eta, with I_0 = sqrt(pi) u/(4r)
  (u of docs/theory.md §6), I_1 = -(dI_0/dr)/(2r) and, integrating by parts,
  I_p = [(2p-1) I_{p-1} - (k^2/2) I_{p-2} + E^(2p-1) X]/(2 r^2), X = exp(k^2/4E^2 - E^2 r^2).
- the excluded image at d - R = 0 contributes only to p = 0, through h0 of
  docs/theory.md §6 (Y_pM(grad) of a smooth radial function vanishes at 0 for p >= 1).
Everything is computed in units of 1/k (k = 1), where D is dimensionless.

References
----------
Kambe, Z. Naturforsch. 22a, 322 (1967) and 23a, 1280 (1968) (Ewald sums of spherical
waves on 2D lattices); Linton, SIAM Rev. 52, 630 (2010), §3-§4 (Ewald method, Hobson's
theorem); Linton & Thompson, J. Comput. Phys. 228, 1815 (2009) (one-dimensional
analogue, recurrences of the integrals I_p); Hobson, Proc. London Math. Soc. 24, 54
(1892); docs/theory.md §6 (scalar split, regularized self term).
"""

from __future__ import annotations

import math
from functools import cache

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval, isbox

from chiropt.errors import InputError
from chiropt.lattice import Lattice, order_indices, order_wavevectors, splitting_parameter
from chiropt.lattice.bravais import integer_pairs_within
from chiropt.lattice.faddeeva import wofz
from chiropt.lattice.orders import kz_branch
from chiropt.sphericalwaves import spherical_harmonics

_SQRT_PI = math.sqrt(math.pi)
_MARGIN = 4.0


def _legendre_derivative_coeffs(p, m):
    """Coefficients a_k of P_p^(m)(t) = sum_k a_k t^(p - m - 2k) (m-th derivative)."""
    # P_p(t) = 2^-p sum_k (-1)^k C(p,k) C(2p-2k, p) t^(p-2k)
    out = []
    for k in range((p - m) // 2 + 1):
        c = (-1) ** k * math.comb(p, k) * math.comb(2 * p - 2 * k, p) / 2 ** p
        e = p - 2 * k
        c *= math.perm(e, m)  # d^m/dt^m t^e = e!/(e-m)! t^(e-m)
        out.append(c)
    return out


@cache
def spectral_operator_table(pmax: int):
    """Y_pM(i q_x, i q_y, d/dz) as sum over (n, j) of c (q_x + i s q_y)^|M| (q^2)^j d^n/dz^n.

    Returns
    -------
    coef : array (J, pmax+1, pmax//2+1) — c[pM index, n, j] (complex)
    absm, sgn : int arrays (J,) — |M| and sign s of M
    """
    J = (pmax + 1) ** 2
    coef = onp.zeros((J, pmax + 1, pmax // 2 + 1), dtype=complex)
    absm = onp.zeros(J, int)
    sgn = onp.zeros(J, int)
    for p in range(pmax + 1):
        for M in range(-p, p + 1):
            idx = p * (p + 1) + M
            am = abs(M)
            norm = math.sqrt((2 * p + 1) / (4 * math.pi) * math.factorial(p - am)
                             / math.factorial(p + am))
            phase = (-1) ** M if M >= 0 else 1
            absm[idx], sgn[idx] = am, (1 if M >= 0 else -1)
            pre = norm * phase * (1j) ** am  # (x + i s y)^|M| -> i^|M| (q_x + i s q_y)^|M|
            for k, a in enumerate(_legendre_derivative_coeffs(p, am)):
                # z^(p-|M|-2k) r^(2k), r^2 -> d_z^2 - q^2
                for j in range(k + 1):
                    c = a * math.comb(k, j) * (-1) ** (k - j)
                    coef[idx, p - am - 2 * k + 2 * j, k - j] += pre * c
    coef.setflags(write=False)
    return coef, absm, sgn


def _hermite(n, x):
    """Physicists' Hermite polynomials H_0..H_n at x (list)."""
    out = [1.0 + 0 * x]
    if n >= 1:
        out.append(2 * x)
    for j in range(2, n + 1):
        out.append(2 * x * out[-1] - 2 * (j - 1) * out[-2])
    return out


def _spectral(k, k_par, lattice, rho, z, E, mn, pmax):
    """Spectral part: sum over orders of Y_pM(i q_x, i q_y, d/dz) exp(i q.rho) F(z)/gamma."""
    q = order_wavevectors(lattice, k_par, mn)                       # (W, G, 2)
    gam = (-1j * kz_branch(k, q))[:, None, :]                        # (W, 1, G)
    Ec = E[:, None, None]
    zc = z[None, :, None]
    Phi = np.exp(-(gam / (2 * Ec)) ** 2 - (Ec * zc) ** 2)           # (W, P, G)
    tp = Phi * wofz(1j * (gam / (2 * Ec) + zc * Ec))
    tm = Phi * wofz(1j * (gam / (2 * Ec) - zc * Ec))
    herm = _hermite(max(pmax - 2, 0), Ec * zc)
    dphi = [(-Ec) ** j * herm[j] * Phi for j in range(max(pmax - 1, 0))]
    fn = [(tp + tm) / gam]
    for n in range(1, pmax + 1):
        val = gam ** (n - 1) * (tp + (-1) ** n * tm)
        for j in range(0, n - 1):
            if (n - 1 - j) % 2 == 1:
                val = val - (4 * Ec / _SQRT_PI) * gam ** (n - 2 - j) * dphi[j]
        fn.append(val)
    coef, absm, sgn = spectral_operator_table(pmax)
    qq = q[..., 0] ** 2 + q[..., 1] ** 2                              # (W, G)
    qpow = [1.0 + 0 * qq]
    for _ in range(pmax // 2):
        qpow.append(qpow[-1] * qq)
    basis = np.stack([np.stack([f * qp[:, None, :] for qp in qpow], axis=-1) for f in fn],
                     axis=-2)                                          # (W, P, G, n, j)
    ang = [[1.0 + 0j * qq], [1.0 + 0j * qq]]                           # (q_x +- i q_y)^a
    for s, lst in ((1, ang[0]), (-1, ang[1])):
        for _ in range(pmax):
            lst.append(lst[-1] * (q[..., 0] + 1j * s * q[..., 1]))
    angular = np.stack([ang[0 if sgn[i] > 0 else 1][absm[i]] for i in range(len(absm))],
                       axis=-1)                                        # (W, G, J)
    radial = np.einsum("wpgnj,inj->wpgi", basis, coef)
    phase = np.exp(1j * np.einsum("wgc,pc->wpg", q, rho)) / (4.0 * lattice.area)
    return np.einsum("wpg,wgi,wpgi->wpi", phase, angular, radial)


def _spatial(k, k_par, lattice, d, E, nm, pmax, self_tol2):
    """Spatial part (sum over lattice points) and the self-term correction."""
    R = lattice.points(nm)                                            # (N, 2)
    vx = d[:, 0:1] - R[None, :, 0]                                    # (P, N)
    vy = d[:, 1:2] - R[None, :, 1]
    vz = d[:, 2:3] + 0.0 * R[None, :, 0]
    r2 = vx * vx + vy * vy + vz * vz
    is_self = onp.asarray(getval(r2)) <= self_tol2
    r2s = np.where(is_self, 1.0, r2)
    r = np.sqrt(r2s)
    unit = np.stack([vx / r, vy / r, vz / r], axis=-1)                # (P, N, 3)
    Y = spherical_harmonics(unit, pmax)                               # (P, N, J)
    kc, Ec = k[:, None, None], E[:, None, None]
    rc = r[None]
    ER = Ec * rc
    X = np.exp((kc / (2 * Ec)) ** 2 - ER * ER)                        # (W, P, N)
    wb = wofz(kc / (2 * Ec) + 1j * ER)
    u0 = 2.0 * X * np.real(wb)
    u1 = 2.0 * kc * X * np.imag(wb) - (4.0 / _SQRT_PI) * Ec * X
    r2c = r2s[None]
    ints = [_SQRT_PI * u0 / (4 * rc), -(_SQRT_PI / (8 * r2c)) * (u1 - u0 / rc)]
    for p in range(2, pmax + 1):
        ints.append(((2 * p - 1) * ints[p - 1] - 0.5 * kc * kc * ints[p - 2]
                     + Ec ** (2 * p - 1) * X) / (2 * r2c))
    ps = onp.array([p for p in range(pmax + 1) for _ in range(-p, p + 1)])
    # solid harmonic r^p Y times (r^-1 d/dr)^p f = (-2)^p I_p / (2 pi^1.5)
    radial = np.stack([ints[p] * (r[None] ** p) * ((-2.0) ** p / (2 * math.pi ** 1.5))
                       for p in ps], axis=-1)                          # (W, P, N, J)
    phase = np.exp(1j * np.dot(k_par, np.transpose(R)))               # (W, N)
    keep = (~is_self).astype(float)
    out = np.einsum("wn,pn,wpnj,pnj->wpj", phase, keep, radial, Y)
    if onp.any(is_self):
        ex = np.exp((k / (2 * E)) ** 2)
        h0 = -(1j * k / (4 * math.pi)) * ex * wofz(k / (2 * E)) - E / (2 * math.pi ** 1.5) * ex
        self_phase = np.dot(phase, onp.transpose(is_self.astype(float)))  # (W, P)
        first = (onp.arange((pmax + 1) ** 2) == 0).astype(float)
        out = out + (self_phase * h0[:, None])[..., None] * first / math.sqrt(4 * math.pi)
    return out


def lattice_sums(k, k_par, lattice: Lattice, d, pmax: int, *, tol=1e-10, splitting=None):
    """Quasi-periodic sums D_pM(d) of outgoing scalar spherical waves, 0 <= p <= pmax.

    Parameters
    ----------
    k : array (W,) — host wavenumber [1/m], real and positive
    k_par : array (W, 2) — Bloch wavevector [1/m]
    lattice : Lattice — lattice vectors [m] (may be traced)
    d : array (P, 3) — displacements r_i - r_j [m] (z may be non-zero)
    pmax : int — highest degree p (2 lmax for the VSWF translation), at most 16
    tol : float — relative accuracy target of the truncated sums [-]
    splitting : float or None — Ewald splitting parameter E [1/m] (tests only);
        default ``chiropt.lattice.splitting_parameter``

    Returns
    -------
    complex array (W, P, (pmax+1)^2) — D_pM [dimensionless], index p (p+1) + M;
    D_pM(d) = sum_R exp(i k_par.R) h_p(k|d-R|) Y_pM(unit(d-R)), the term d - R = 0 omitted.

    Notes
    -----
    Symmetry (a test): D_pM(d, k_par) = (-1)^p D_pM(-d, -k_par). At p <= 2 the sums are
    the multipole content of chiropt.lattice.lattice_green_derivatives:
    G_reg = i k D_00/sqrt(4 pi), Y_1M(grad) G = -i k^2 D_1M/(4 pi),
    Y_2M(grad) G = i k^3 D_2M/(4 pi). Lengths are scaled internally by sqrt(A) (plain), so
    all intermediate values are O(1) powers. Truncation radii use plain values (constant
    under differentiation) and grow with pmax (the p-th terms carry q^p, r^p factors).

    References
    ----------
    Module docstring (Kambe 1967-68; Linton 2010; Linton & Thompson 2009; docs/theory.md §6).
    """
    kv = onp.real(onp.asarray(getval(k), dtype=complex))
    if kv.ndim != 1 or kv.size == 0 or onp.any(kv <= 0) or not onp.all(onp.isfinite(kv)):
        raise InputError("k", f"must be a 1-D array of positive wavenumbers [1/m]; got {kv!r}")
    dv = onp.asarray(getval(d), dtype=float)
    if dv.ndim != 2 or dv.shape[1] != 3 or not onp.all(onp.isfinite(dv)):
        raise InputError("d", f"must be a finite array of shape (P, 3) [m]; got {dv.shape}")
    if not (1e-16 <= float(tol) <= 1e-1):
        raise InputError("tol", f"must lie in [1e-16, 0.1]; got {tol!r}")
    if not isinstance(pmax, int) or isinstance(pmax, bool) or not 0 <= pmax <= 16:
        raise InputError("pmax", f"must be an integer in [0, 16]; got {pmax!r}")
    k = k if isbox(k) else onp.asarray(k)
    k = np.real(k) if onp.iscomplexobj(getval(k)) else k
    plain = lattice.plain()
    W = kv.size
    Ev = (splitting_parameter(kv, plain) if splitting is None
          else onp.full(W, float(onp.asarray(getval(splitting)))))
    scale = math.sqrt(float(plain.area))                 # plain length unit [m]
    lat = Lattice(lattice.a1 / scale, lattice.a2 / scale)
    latp = lat.plain()
    ks, kpar, ds, Es = k * scale, k_par * scale, d / scale, Ev * scale
    ksv = kv * scale
    L = math.log(1.0 / float(tol)) + _MARGIN + 1.5 * pmax
    zmax = float(onp.max(onp.abs(dv[:, 2]))) / scale
    rho_max = float(onp.max(onp.linalg.norm(dv[:, :2], axis=1))) / scale
    kpar_max = float(onp.max(onp.linalg.norm(onp.asarray(getval(k_par)), axis=1))) * scale
    q_cut = float(onp.max(onp.sqrt(ksv ** 2 + 4 * Es ** 2 * (math.sqrt(L) + zmax * Es) ** 2)))
    r_cut = float(onp.max(onp.sqrt(L + (ksv / (2 * Es)) ** 2) / Es))
    b1, b2 = latp.reciprocal()
    mn = order_indices(latp, q_cut + kpar_max)
    nm = integer_pairs_within(latp.a1, latp.a2, b1, b2, r_cut + rho_max)
    spec = _spectral(ks, kpar, lat, ds[:, :2], ds[:, 2], Es, mn, pmax)
    spat = _spatial(ks, kpar, lat, ds, Es, nm, pmax, 1e-24)
    ps = onp.array([p for p in range(pmax + 1) for _ in range(-p, p + 1)])
    pref = (4 * math.pi / 1j) * (-1.0) ** ps / ks[:, None, None] ** (ps + 1)
    return (spec + spat) * pref
