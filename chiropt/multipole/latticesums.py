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
from autograd.extend import defvjp_argnums, primitive
from autograd.tracer import getval, isbox

from chiropt.autodiff import ForwardStash
from chiropt.errors import InputError
from chiropt.lattice import Lattice, order_indices, splitting_parameter
from chiropt.lattice.bravais import integer_pairs_within
from chiropt.lattice import tangents as T
from chiropt.lattice.orders import KZ_FLOOR, kz_branch
from chiropt.lattice.symmetry import orbit_weights, shape_rotation
from chiropt.sphericalwaves import harmonics_and_derivatives

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


def _reciprocal(a1, a2):
    """b1, b2 (each a pair of components) with b_i . a_j = 2 pi delta_ij; the cell area."""
    cross = a1[0] * a2[1] - a1[1] * a2[0]
    s = (2.0 * math.pi) / cross
    area = cross if float(T.value(cross)) > 0 else -cross
    return (s * a2[1], -(s * a2[0])), (-(s * a1[1]), s * a1[0]), area


def _gamma(k, qx, qy):
    """gamma = -i kz of each order (W, G), kz on the branch of lattice.orders.kz_branch."""
    kv, qxv, qyv = T.value(k), T.value(qx), T.value(qy)
    kz = kz_branch(kv, onp.stack([qxv, qyv], axis=-1))
    x = (k * k)[:, None] - qx * qx - qy * qy
    if not isinstance(x, T.Tangent):
        return -1j * kz
    # d kz = d(k^2 - q^2) / (2 kz); zero where kz_branch floors the radicand
    live = onp.abs(x.v) >= ((KZ_FLOOR * onp.abs(kv)) ** 2)[:, None]
    dkz = onp.where(live, T._full_tangent(x) / (2 * kz), 0.0)
    return T.Tangent(-1j * kz, -1j * dkz)


def _spectral(k, kpar, a1, a2, rho, z, E, mn, pmax, weights=None):
    """Spectral part: sum over orders of Y_pM(i q_x, i q_y, d/dz) exp(i q.rho) F(z)/gamma.

    Arrays or ``Tangent`` values: k (W,), kpar (kx (W,), ky (W,)), a1, a2 (pairs of
    components), rho (x (P,), y (P,)), z (P,); E (W,) and the order indices mn plain;
    ``weights`` (G,), plain: each order's term times its weight (:func:`_sum_fold`).
    """
    b1, b2, area = _reciprocal(a1, a2)
    m, n = mn[:, 0].astype(float), mn[:, 1].astype(float)
    qx = kpar[0][:, None] + (m * b1[0] + n * b2[0])[None, :]            # (W, G)
    qy = kpar[1][:, None] + (m * b1[1] + n * b2[1])[None, :]
    gam = _gamma(k, qx, qy)[:, None, :]                                # (W, 1, G)
    Ec = E[:, None, None]
    zc = z[None, :, None]
    Phi = T.exp(-(gam / (2 * Ec)) ** 2 - (Ec * zc) ** 2)              # (W, P, G)
    tp = Phi * T.wofz(1j * (gam / (2 * Ec) + zc * Ec))
    tm = Phi * T.wofz(1j * (gam / (2 * Ec) - zc * Ec))
    # F^(n)/gamma, n = 0..pmax, along a last axis: gamma^(n-1) [T+ + (-1)^n T-] minus the
    # Phi^(j) terms (j <= n-2, n-1-j odd), each power of gamma made once
    gp = T.powers(gam, pmax)                                           # (W, 1, G, n)
    lead = T.stack([1.0 / gam] + [gp[..., i] for i in range(pmax)], axis=-1)   # gamma^(n-1)
    both = T.stack([tp + tm, tp - tm], axis=-1)[..., onp.arange(pmax + 1) % 2]
    fn = lead * both                                                   # (W, P, G, n)
    if pmax >= 2:
        herm = _hermite(pmax - 2, Ec * zc)
        consts = T.stack([(-Ec) ** j * herm[j] for j in range(pmax - 1)], axis=-1)
        dphi = Phi[..., None] * consts                                 # (W, P, G, j)
        nn, jj = onp.meshgrid(onp.arange(pmax + 1), onp.arange(pmax - 1), indexing="ij")
        live = ((jj <= nn - 2) & ((nn - 1 - jj) % 2 == 1)).astype(float)
        expo = onp.where(live > 0, nn - 2 - jj, 0)
        corr = T.sum(gp[..., expo] * (live * dphi[..., None, :]), axis=-1)   # (W, P, G, n)
        fn = fn - (4 * Ec / _SQRT_PI)[..., None] * corr
    coef, absm, sgn = spectral_operator_table(pmax)
    qq = (qx * qx + qy * qy)[:, None, :]                                # (W, 1, G)
    qpow = T.powers(qq, pmax // 2)                                     # (W, 1, G, j)
    shape = T.value(fn).shape[:-1] + ((pmax + 1) * (pmax // 2 + 1),)
    basis = T.reshape(fn[..., :, None] * qpow[..., None, :], shape)   # (W, P, G, n j)
    pick = absm + (pmax + 1) * (sgn < 0)                               # (q_x +- i q_y)^|M|
    powers = T.powers(T.stack([qx + 1j * qy, qx - 1j * qy], axis=-1), pmax)   # (W, G, 2, a)
    angular = T.reshape(powers, T.value(qx).shape + (2 * (pmax + 1),))[..., pick]  # (W, G, J)
    radial = T.matmul(basis, coef.reshape(coef.shape[0], -1).T)       # (W, P, G, J)
    phase = T.exp(1j * (qx[:, None, :] * rho[0][None, :, None]
                        + qy[:, None, :] * rho[1][None, :, None])) / (4.0 * area)
    if weights is not None:
        phase = phase * weights
    return T.sum(phase[..., None] * (angular[:, None] * radial), axis=2)


def _harmonics(ux, uy, uz, pmax):
    """Y_pM at the unit vectors (ux, uy, uz) (arrays or Tangents), (..., J)."""
    parts = (ux, uy, uz)
    u = onp.stack([T.value(c) for c in parts], axis=-1)
    traced = any(isinstance(c, T.Tangent) for c in parts)
    Y, dY = harmonics_and_derivatives(u, pmax, derivative=traced)
    if not traced:
        return Y
    t = 0.0
    for c, part in enumerate(parts):
        if isinstance(part, T.Tangent):
            t = t + T._full_tangent(part)[..., None] * dY[..., c]
    return T.Tangent(Y, t)


def _spatial(k, kpar, a1, a2, d, E, nm, pmax, self_tol2, weights=None):
    """Spatial part (sum over lattice points) and the self-term correction.

    Arrays or ``Tangent`` values: k (W,), kpar and a1, a2 as pairs of components, d as
    three components (each (P,)); E (W,) and the integer pairs nm plain; ``weights``
    (N,), plain: each lattice point's term times its weight (:func:`_sum_fold`).
    """
    n1, n2 = nm[:, 0].astype(float), nm[:, 1].astype(float)
    Rx = n1 * a1[0] + n2 * a2[0]                                       # (N,)
    Ry = n1 * a1[1] + n2 * a2[1]
    vx = d[0][:, None] - Rx[None, :]                                   # (P, N)
    vy = d[1][:, None] - Ry[None, :]
    vz = d[2][:, None] + 0.0 * Rx[None, :]
    r2 = vx * vx + vy * vy + vz * vz
    is_self = T.value(r2) <= self_tol2
    r2s = T.where(is_self, 1.0, r2)
    r = T.sqrt(r2s)
    Y = _harmonics(vx / r, vy / r, vz / r, pmax)                       # (P, N, J)
    kc, Ec = k[:, None, None], E[:, None, None]
    rc = r[None]
    ER = Ec * rc
    X = T.exp((kc / (2 * Ec)) ** 2 - ER * ER)                          # (W, P, N)
    wb = T.wofz(kc / (2 * Ec) + 1j * ER)
    u0 = 2.0 * X * T.real(wb)
    u1 = 2.0 * kc * X * T.imag(wb) - (4.0 / _SQRT_PI) * Ec * X
    r2c = r2s[None]
    inv_r, inv_r2 = 1.0 / rc, 1.0 / r2c
    ints = [(_SQRT_PI / 4) * u0 * inv_r, -(_SQRT_PI / 8) * (u1 - u0 * inv_r) * inv_r2]
    if pmax >= 2:
        half_k2, inv_2r2 = 0.5 * kc * kc, 0.5 * inv_r2
    for p in range(2, pmax + 1):
        ints.append(((2 * p - 1) * ints[p - 1] - half_k2 * ints[p - 2]
                     + Ec ** (2 * p - 1) * X) * inv_2r2)
    ps = onp.array([p for p in range(pmax + 1) for _ in range(-p, p + 1)])
    # solid harmonic r^p Y times (r^-1 d/dr)^p f = (-2)^p I_p / (2 pi^1.5)
    scale = (-2.0) ** onp.arange(pmax + 1) / (2 * math.pi ** 1.5)
    per_p = T.stack(ints[:pmax + 1], axis=-1) * T.powers(rc, pmax) * scale   # (W, P, N, p)
    radial = per_p[..., ps]                                            # (W, P, N, J)
    phase = T.exp(1j * (kpar[0][:, None] * Rx[None, :] + kpar[1][:, None] * Ry[None, :]))
    keep = (~is_self).astype(float)
    if weights is not None:
        keep = keep * weights
    out = T.sum((phase[:, None, :] * keep[None])[..., None] * (radial * Y[None]), axis=2)
    if onp.any(is_self):
        ex = T.exp((k / (2 * E)) ** 2)
        h0 = -(1j * k / (4 * math.pi)) * ex * T.wofz(k / (2 * E)) - E / (2 * math.pi ** 1.5) * ex
        self_phase = T.matmul(phase, is_self.T.astype(float))           # (W, P)
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
    split = None if splitting is None else float(onp.asarray(getval(splitting)))
    shape = lattice.shape if lattice.length is not None else None
    # a lattice of fixed shape: one direction (its length) instead of the four components
    args = ((k, k_par, lattice.length, None, d) if shape is not None
            else (k, k_par, lattice.a1, lattice.a2, d))
    traced = tuple(i for i, a in enumerate(args) if isbox(a))
    return _sums(*args, pmax, float(tol), split, traced, shape)


_ARG_SIZES = (1, 2, 2, 2, 3)   # directions per argument: k; k_par; a1; a2; d (x, y, z)


def _sizes(shape):
    return _ARG_SIZES if shape is None else (1, 2, 1, 0, 3)


def _sum_fold(shape, wrt, k_par, d, mn, nm, pmax):
    """Both sums over one order (lattice point) per orbit of the lattice's rotation, where
    every member's term is the representative's times e^(i M alpha): the Bloch vector
    and the displacement plain zeros (normal incidence, one particle per cell), so q = G
    and d - R = -R, whose radial factors depend on |q|, |R| only and whose angular
    factors (q_x +- i q_y)^|M| and Y_pM(R_hat) turn with e^(i M alpha). Then D_pM is n
    times the representatives' weighted sum where M = 0 (mod n) and zero elsewhere
    (docs/theory.md §6, §10; ``chiropt.lattice.symmetry``). A lattice of fixed shape keeps its
    full rotation under a derivative along its length, any lattice G -> -G under any.

    Returns (mn, weights, nm, weights, mask (J,)) or None (no fold).
    """
    if 1 in wrt or 4 in wrt or onp.any(k_par) or onp.any(d):
        return None
    n, M, N = shape_rotation(shape)
    spec, spat = orbit_weights(mn, n, M), orbit_weights(nm, n, N)
    if spec is None or spat is None:
        return None
    return (*spec, *spat, _fold_mask(n, pmax))


@cache
def _fold_mask(n: int, pmax: int) -> onp.ndarray:
    """(J,) 1.0 where M = 0 (mod n) over the (p, M) index p (p + 1) + M, else 0."""
    ms = onp.array([m for p in range(pmax + 1) for m in range(-p, p + 1)])
    out = (onp.mod(ms, n) == 0).astype(float)
    out.setflags(write=False)
    return out


def _kernel(k, k_par, a1, a2, d, pmax, tol, splitting, wrt=(), shape=None):
    """D_pM (W, P, J) and, for the arguments ``wrt``, dD along their input directions.

    Plain inputs; ``wrt`` lists argument positions (0 k, 1 k_par, 2 a1, 3 a2, 4 d).
    Truncations, the splitting parameter and the length unit come from the plain values
    and are constants of the derivative. Returns the values, or (values, derivatives
    (D, W, P, J)) with D = 1, 2, 2, 2, 3 directions for the arguments in ``wrt``, in that
    order: derivatives w.r.t. k [m], k_par [m], a1, a2 [1/m] and d [1/m] (x, y, z), each
    direction moving all wavelengths (or all displacements) at once: output (w, p)
    depends on wavelength w and displacement p only.
    """
    kv = onp.asarray(k, dtype=float)
    kparv = onp.asarray(k_par, dtype=float)
    if shape is not None:
        length = float(a1)
        a1v, a2v = length * onp.asarray(shape[0]), length * onp.asarray(shape[1])
    else:
        a1v, a2v = onp.asarray(a1, dtype=float), onp.asarray(a2, dtype=float)
    dv = onp.asarray(d, dtype=float)
    plain = Lattice(a1v, a2v)
    W = kv.size
    Ev = (splitting_parameter(kv, plain) if splitting is None else onp.full(W, splitting))
    scale = math.sqrt(float(plain.area))                 # length unit [m]
    latp = Lattice(a1v / scale, a2v / scale)
    ksv, Es = kv * scale, Ev * scale
    L = math.log(1.0 / tol) + _MARGIN + 1.5 * pmax
    zmax = float(onp.max(onp.abs(dv[:, 2]))) / scale
    rho_max = float(onp.max(onp.linalg.norm(dv[:, :2], axis=1))) / scale
    kpar_max = float(onp.max(onp.linalg.norm(kparv, axis=1))) * scale
    q_cut = float(onp.max(onp.sqrt(ksv ** 2 + 4 * Es ** 2 * (math.sqrt(L) + zmax * Es) ** 2)))
    r_cut = float(onp.max(onp.sqrt(L + (ksv / (2 * Es)) ** 2) / Es))
    b1, b2 = latp.reciprocal()
    mn = order_indices(latp, q_cut + kpar_max)
    nm = integer_pairs_within(latp.a1, latp.a2, b1, b2, r_cut + rho_max)
    fold = _sum_fold(shape, wrt, kparv, dv, mn, nm, pmax)
    w_spec = w_spat = None
    if fold is not None:
        mn, w_spec, nm, w_spat, mask = fold
    groups = [[ksv], [kparv[:, 0] * scale, kparv[:, 1] * scale], list(a1v / scale),
              list(a2v / scale), list(dv.T / scale)]
    units = [scale, scale, 1.0 / scale, 1.0 / scale, 1.0 / scale]   # d(scaled)/d(input)
    sizes = _sizes(shape)
    D = sum(sizes[i] for i in wrt)
    seeded, unit = 0, []
    for i in sorted(wrt):
        if shape is not None and i == 2:   # a_i = L u_i: d(a_i / scale)/dL = u_i / scale
            rates = list(onp.asarray(shape[0]) / scale) + list(onp.asarray(shape[1]) / scale)
            lat = [T.Tangent(x, _unit_rate(rate, seeded, D)) for x, rate in
                   zip(groups[2] + groups[3], rates, strict=True)]
            groups[2], groups[3] = lat[:2], lat[2:]
            unit.append(1.0)
        else:
            groups[i] = [T.Tangent.seed(x, seeded + j, D) for j, x in enumerate(groups[i])]
            unit += [units[i]] * sizes[i]
        seeded += sizes[i]
    (ks,), (kpx, kpy), (a1x, a1y), (a2x, a2y), (dx, dy, dz) = groups
    spec = _spectral(ks, (kpx, kpy), (a1x, a1y), (a2x, a2y), (dx, dy), dz, Es, mn, pmax,
                     w_spec)
    spat = _spatial(ks, (kpx, kpy), (a1x, a1y), (a2x, a2y), (dx, dy, dz), Es, nm, pmax, 1e-24,
                    w_spat)
    ps = onp.array([p for p in range(pmax + 1) for _ in range(-p, p + 1)])
    pref = (4 * math.pi / 1j) * (-1.0) ** ps * ks[:, None, None] ** (-(ps + 1.0))
    if fold is not None:
        pref = pref * mask
    out = (spec + spat) * pref
    if not wrt:
        return out
    if not isinstance(out, T.Tangent):   # cannot happen: some input carries a direction
        raise AssertionError("lattice sums lost their derivatives")
    return out.v, T._full_tangent(out) * onp.array(unit)[:, None, None, None]


# the directional derivatives made with the value of a traced call, for its
# vector-Jacobian product
_STASH = ForwardStash()


def _unit_rate(rate: float, direction: int, directions: int):
    """Tangent (D,) of a scalar moving with ``rate`` along one direction."""
    t = onp.zeros(directions)
    t[direction] = rate
    return t


@primitive
def _sums(k, k_par, a1, a2, d, pmax, tol, splitting, traced=(), shape=None):
    """D_pM from plain inputs: one autograd node (derivatives in ``_sums_vjp``).

    ``traced``: the argument positions that carry derivatives; their directional
    derivatives are made in the same pass as the value and kept for ``_sums_vjp``.
    """
    if not traced:
        return _kernel(k, k_par, a1, a2, d, pmax, tol, splitting, shape=shape)
    value, t = _kernel(k, k_par, a1, a2, d, pmax, tol, splitting, wrt=traced, shape=shape)
    _STASH.put(value, tuple(traced), t)
    return value


def _sums_vjp(argnums, ans, args, kwargs):
    """The traced arguments' directional derivatives at once; each reverse pass contracts.

    Written with autograd operations, so that the vector-Jacobian product is itself
    differentiable in the cotangent (the reverse-of-reverse used by --grad sensitivities).
    """
    wrt = tuple(sorted(argnums))
    shape = args[9] if len(args) > 9 else kwargs.get("shape")
    t = _STASH.take(ans, wrt)
    if t is None:
        _, t = _kernel(*args[:8], wrt=wrt, shape=shape)
    rules = {0: "wpj,wpj->w", 1: "wpj,cwpj->wc", 2: "wpj,cwpj->c", 3: "wpj,cwpj->c",
             4: "wpj,cwpj->pc"}
    if shape is not None:
        rules[2] = "wpj,wpj->"
    sizes = _sizes(shape)
    blocks, start = {}, 0
    for i in wrt:
        n = sizes[i]
        blocks[i] = (t[start] if i == 0 or (shape is not None and i == 2)
                     else t[start:start + n], rules[i])
        start += n

    def vjp(g):
        return tuple(np.real(np.einsum(blocks[i][1], g, blocks[i][0])) for i in argnums)

    return vjp


defvjp_argnums(_sums, _sums_vjp)
