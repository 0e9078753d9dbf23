"""T-matrices of axisymmetric particles (spheroids, finite cylinders) by the EBCM,
differentiable by autograd.

Owns: the extended boundary condition (null-field) method for homogeneous particles
with rotational symmetry about z — surface shapes r(theta) of spheroids and finite
circular cylinders (nanodisks, pillars), the Q and RgQ matrices in the VSWF basis of
:mod:`chiropt.sphericalwaves`, the choice of the internal order and quadrature, and
the ``Spheroid`` and ``Cylinder`` T-matrix sources (protocol
``chiropt.multipole.tmatrix.TMatrixSource``).
Must not import: solve, fields, metrics, search, store, report, cli, and nothing of
chiropt.multipole (chiropt.multipole.tmatrix imports this module; the VSWF kernel both
share is chiropt.sphericalwaves).

Conventions
-----------
- Basis, mode order and normalization of :mod:`chiropt.sphericalwaves`: X_lm = L Y_lm /
  sqrt(l(l+1)) (Condon-Shortley), M = z_l X, N = curl(M)/k; modes l ascending,
  m = -l..l, N (electric) before M (magnetic); f = T e. A sphere gives T = diag(-a_l)
  on N and diag(-b_l) on M (Bohren & Huffman coefficients).
- Symmetry axis along z, centre at the origin (mirror plane z = 0).
- ``k_host`` [1/m] real (lossless host); ``m_rel = n_particle / n_host`` complex with
  Im >= 0 (exp(-i omega t)).
- Written with ``autograd.numpy``: the T-matrix is differentiable by autograd with
  respect to the sizes (semi-axes; radius and height), ``k_host`` and ``m_rel`` (real
  and imaginary parts). The complex-argument spherical Bessel functions are the
  primitive of :mod:`chiropt.particles._spherical_bessel`. Only the integer choices
  (n_max, the number of Gauss points and their split over the cylinder's three faces)
  are taken from detached values; they are piecewise constant, so the derivative is
  that of the discrete method at fixed orders. The cylinder's quadrature nodes move
  with the edge angle theta_c = atan(2a/H): fixed Gauss-Legendre nodes are mapped
  affinely onto [0, theta_c], [theta_c, pi - theta_c], [pi - theta_c, pi], so the
  node positions and weights are differentiable functions of the sizes.
- Same values as the plain-numpy version (same arithmetic; the row and column
  equilibration of Q is a constant scaling in the derivative, which is exact since
  T = -RgQ Q^-1 does not depend on it).

Method (derived here; structure as in the published null-field equations)
-------------------------------------------------------------------------
With B_S(A, B) = oint_S n.(A x curl B - B x curl A) dS and the interior field
sum_u c_u RgPsi_u(k1 r), the null-field (extended boundary) conditions read
Q c = -b e and RgQ c = b^T f, where Q_vu = B_S(RgPsi_u(k1 r), Psi_v(k r)),
RgQ_vu the same with RgPsi_v(k r), and b_uv = B_sphere(Psi_u, RgPsi_v)
= (i/k) (-1)^m_v delta(tau, l, m_u = -m_v) (Wronskian of the Riccati-Bessel
functions, psi xi' - psi' xi = i, and oint X_lm . X_l'm' dOmega = -(-1)^m'
delta_ll' delta_m,-m'). Hence

    T = -RgQ~ Q~^-1,   Q~_vu = (-1)^m_v B_S(RgPsi_u(k1 r), Psi_{tau_v, l_v, -m_v}(k r)),

and RgQ~ the same with regular waves; curl M = k N, curl N = k M at each wavenumber.
For axisymmetric surfaces Q~ is block-diagonal in m, the phi integral gives 2 pi and
n dS = r^2 sin(theta) [r_hat - (r_theta/r) theta_hat] dtheta dphi (docs/theory.md §4).
The integrand is evaluated from the Cartesian components of the VSWFs at phi = 0
(``sphericalwaves.vector_harmonics``, ``sphericalwaves.spherical_harmonics``), so the
convention of the result is that of ``sphericalwaves`` by construction; the triple products
are taken numerically.

Numerics: Gauss-Legendre in theta (the cylinder split at the edge angles), each m-block
solved with row/column equilibration and LU (numpy.linalg.solve), double precision.
Double precision suffices for spheroids of size parameter k r_max <= ~3 and aspect
ratios 0.5-2 (lossless identity and reciprocity to ~1e-10); cylinders are limited by
the slow (algebraic) convergence caused by their edges, not by round-off (see
``cylinder_tmatrix``). Flatter or larger particles lose accuracy (ill-conditioned Q,
Somerville, Auguie & Le Ru 2012) — no extended precision is used here.

References
----------
P. C. Waterman, Phys. Rev. D 3, 825 (1971) (null-field method, T = -RgQ Q^-1);
M. I. Mishchenko, L. D. Travis & A. A. Lacis, Scattering, Absorption, and Emission of
Light by Small Particles (CUP 2002), §5.2-5.3 (Q-matrix integrals with (-1)^m Psi_-m
test functions, axisymmetric reduction, choice of n_max and quadrature);
G. Kristensson, Scattering of Electromagnetic Waves by Obstacles (SciTech 2016),
eq. 9.12 (Q and RgQ as i k^2 oint (Psi x RgPsi_dual + Psi_dual x RgPsi) . nu dS);
W. R. C. Somerville, B. Auguie & E. C. Le Ru, JQSRT 113, 524 (2012) (loss of
precision in the EBCM integrals).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError
from chiropt.sphericalwaves import mode_table, spherical_harmonics, vector_harmonics
from chiropt.particles._spherical_bessel import spherical_bessel

__all__ = [
    "Cylinder",
    "Spheroid",
    "axisymmetric_tmatrix",
    "cylinder_tmatrix",
    "default_orders",
    "spheroid_tmatrix",
]


# ------------------------------------------------------------------ shapes


def _gauss(a, b, n: int):
    """Gauss-Legendre nodes and weights on [a, b]; a, b may be traced (the fixed nodes
    on [-1, 1] are mapped affinely, so nodes and weights are differentiable in a, b)."""
    x, w = onp.polynomial.legendre.leggauss(n)
    return 0.5 * (b - a) * x + 0.5 * (b + a), 0.5 * (b - a) * w


def spheroid_surface(a, c, n_quad: int):
    """Quadrature of a spheroid surface: nodes theta, weights, r(theta), dr/dtheta.

    Parameters
    ----------
    a : float or traced scalar — equatorial semi-axis (x, y) [m]
    c : float or traced scalar — polar semi-axis (z) [m]
    n_quad : int — Gauss-Legendre points on [0, pi]

    Returns
    -------
    theta, weight, r, r_theta : arrays (n_quad,) [rad], [rad], [m], [m]; r and r_theta
    differentiable in a and c (the nodes do not depend on the shape).

    References
    ----------
    docs/theory.md §4: r(theta) = (sin^2/a^2 + cos^2/c^2)^(-1/2); r_theta by
    differentiation, r_theta = -r^3 sin cos (1/a^2 - 1/c^2).
    """
    th, w = _gauss(0.0, math.pi, n_quad)
    s, co = onp.sin(th), onp.cos(th)
    r = 1.0 / np.sqrt(s ** 2 / a ** 2 + co ** 2 / c ** 2)
    r_th = -r ** 3 * s * co * (1.0 / a ** 2 - 1.0 / c ** 2)
    return th, w, r, r_th


def cylinder_surface(radius, height, n_quad: int):
    """Quadrature of a finite cylinder surface (flat ends at z = +-height/2).

    Parameters
    ----------
    radius : float or traced scalar — cylinder radius [m]
    height : float or traced scalar — cylinder height [m]
    n_quad : int — total Gauss-Legendre points, split over the top face
        [0, theta_c], the side [theta_c, pi - theta_c] and the bottom face, in
        proportion to the lengths of the three pieces of the profile (>= 8 each; the
        split uses detached values and is piecewise constant)

    Returns
    -------
    theta, weight, r, r_theta : arrays [rad], [rad], [m], [m]; all four differentiable
    in radius and height (the nodes move with theta_c).

    References
    ----------
    docs/theory.md §4: r = min(H/(2|cos|), a/sin), quadrature split at the edge angle
    theta_c = atan(2a/H). End faces r = H/(2|cos|), r_theta = r tan(theta) sign(cos);
    side r = a/sin, r_theta = -r cos/sin.
    """
    tc = np.arctan2(2 * radius, height)
    lengths = onp.array([getval(radius), getval(height), getval(radius)], dtype=float)
    counts = onp.maximum(8, onp.round(n_quad * lengths / lengths.sum()).astype(int))
    pieces = [_gauss(0.0, tc, counts[0]), _gauss(tc, math.pi - tc, counts[1]),
              _gauss(math.pi - tc, math.pi, counts[2])]
    rs, rths = [], []
    for i, (th, _) in enumerate(pieces):
        s, co = np.sin(th), np.cos(th)
        if i == 1:                                                  # side
            r = radius / s
            rs.append(r)
            rths.append(-r * co / s)
        else:                                                       # end faces
            r = 0.5 * height / np.abs(co)
            rs.append(r)
            rths.append(r * s / co)
    th = np.concatenate([p[0] for p in pieces])
    w = np.concatenate([p[1] for p in pieces])
    return th, w, np.concatenate(rs), np.concatenate(rths)


# ------------------------------------------------------------------ waves on the surface


def _radial(l, x, regular: bool):
    """z_l(x) and (x z_l)'/x for orders l (L,) at arguments x (..., Q, 1); h_l = j_l + i y_l.

    The values are those of scipy (``derivative=True`` for z_l'), differentiable in x
    through :func:`chiropt.particles._spherical_bessel.spherical_bessel`.
    """
    j = spherical_bessel(x, l, "j")
    jd = spherical_bessel(x, l, "j", True)
    if regular:
        z, zd = j, jd
    else:
        z = j + 1j * spherical_bessel(x, l, "y")
        zd = jd + 1j * spherical_bessel(x, l, "y", True)
    return z, z / x + zd


def _cross(a, b):
    return np.stack([a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1],
                     a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2],
                     a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]], axis=-1)


def _surface_waves(kr, Y, X, nvec, ls, regular: bool):
    """Cartesian fields (..., Q, K, 2, 3) of [N, M] and their duals at k r.

    Returns the waves W[..., 0] = N, W[..., 1] = M and dual D = [M, N], so that
    curl W = k D.
    """
    z, d = _radial(ls, kr[..., None], regular)                     # (..., Q, K)
    rhat = nvec[:, None, :]                                         # (Q, 1, 3)
    rxX = _cross(rhat, X)                                           # (Q, K, 3)
    sq = onp.sqrt(ls * (ls + 1.0))
    M = z[..., None] * X
    N = (1j * sq * z / kr[..., None] * Y)[..., None] * rhat + d[..., None] * rxX
    W = np.stack([N, M], axis=-2)
    D = np.stack([M, N], axis=-2)
    return W, D


def _qmatrices(k, k1, th, w, r, r_th, nmax: int, ms_wanted):
    """Q~ and RgQ~ over all (tau, l, m) modes up to nmax, block-diagonal in m.

    Parameters
    ----------
    k : array (W,) — host wavenumber [1/m]
    k1 : array (W,) — particle wavenumber k m_rel [1/m]
    th, w, r, r_th : surface quadrature (Q,) [rad], [rad], [m], [m]
    nmax : int — internal multipole order
    ms_wanted : iterable of int — azimuthal orders m of the blocks to build

    Returns
    -------
    dict m -> (Q, RgQ, l_values): arrays (W, 2L, 2L) in the order (l, tau) with
    tau = 0 (N), 1 (M), rows v (test modes), columns u (interior modes).
    """
    s, co = np.sin(th), np.cos(th)
    rhat = np.stack([s, 0 * s, co], axis=-1)                        # phi = 0
    that = np.stack([co, 0 * s, -s], axis=-1)
    normal = rhat - (r_th / r)[:, None] * that                      # (Q, 3)
    jac = 2 * math.pi * w * r ** 2 * s                              # (Q,)
    Y = spherical_harmonics(rhat, nmax)[:, 1:]                      # (Q, K)
    X = vector_harmonics(rhat, nmax)                                # (Q, K, 3)
    _, ls2, ms2 = mode_table(nmax)
    ls, ms = ls2[0::2], ms2[0::2]                                   # (K,)
    ms_wanted = list(ms_wanted)
    need = onp.isin(onp.abs(ms), onp.abs(ms_wanted))                # only these m blocks
    Y, X, ls, ms = Y[:, need], X[:, need], ls[need], ms[need]
    kr = k[:, None] * r[None, :]                                    # (W, Q)
    k1r = k1[:, None] * r[None, :]
    Wi, Di = _surface_waves(k1r, Y, X, rhat, ls, True)              # interior RgPsi(k1 r)
    Wo, Do = _surface_waves(kr, Y, X, rhat, ls, False)              # test Psi(k r)
    Wr, Dr = _surface_waves(kr, Y, X, rhat, ls, True)               # test RgPsi(k r)
    lm_of = {(int(l), int(m)): i for i, (l, m) in enumerate(zip(ls, ms, strict=True))}
    out = {}
    kk, kk1 = k[:, None, None], k1[:, None, None]
    nW, nQ = len(getval(k)), len(getval(th))
    nrm = normal[None, :, None, None, :]
    jac5 = jac[None, :, None, None, None]
    for m in ms_wanted:
        lv = onp.arange(max(1, abs(m)), nmax + 1)
        L2 = 2 * len(lv)
        iu = onp.array([lm_of[(int(l), m)] for l in lv])
        iv = onp.array([lm_of[(int(l), -m)] for l in lv])
        sign_v = (-1.0) ** m
        A, Ad = Wi[:, :, iu], Di[:, :, iu]                           # (W, Q, L, 2, 3)
        nA = _cross(nrm, A) * jac5
        # rows (l_u, tau_u) x (q, xyz), columns of the contraction
        nA = np.reshape(np.moveaxis(nA, 1, 3), (nW, L2, 3 * nQ))
        Ad = np.reshape(np.moveaxis(Ad * jac5, 1, 3), (nW, L2, 3 * nQ))
        mats = []
        for B, Bd in ((Wo[:, :, iv], Do[:, :, iv]), (Wr[:, :, iv], Dr[:, :, iv])):
            # n.(A x curl B) = k (n x A).Bd ;  n.(B x curl A) = k1 (n x B).Ad
            nB = _cross(nrm, B)
            nB = np.reshape(np.moveaxis(nB, 1, 3), (nW, L2, 3 * nQ))
            Bd = np.reshape(np.moveaxis(Bd, 1, 3), (nW, L2, 3 * nQ))
            t1 = kk * np.matmul(Bd, np.swapaxes(nA, -1, -2))       # (W, v, u)
            t2 = kk1 * np.matmul(nB, np.swapaxes(Ad, -1, -2))
            mats.append(sign_v * (t1 - t2))
        out[m] = (mats[0], mats[1], lv)
    return out


def _mirror_mask(lv):
    """Allowed (1) and symmetry-forbidden (0) entries of an m-block for a body with the
    mirror plane z = 0: same type for l + l' even, N-M for l + l' odd (docs/theory.md §4)."""
    ls = onp.repeat(lv, 2)
    tau = onp.tile([0, 1], len(lv))
    same = tau[:, None] == tau[None, :]
    even = (ls[:, None] + ls[None, :]) % 2 == 0
    return (same == even).astype(float)


def _solve_t(Q, RgQ):
    """T = -RgQ Q^-1 with row and column equilibration of Q, (W, n, n).

    The scale factors are detached constants: T does not depend on them, so the
    derivative of the scaled solve is the derivative of -RgQ Q^-1.
    """
    Qv = getval(Q)
    dr = 1.0 / onp.max(onp.abs(Qv), axis=-1)                          # rows
    dc = 1.0 / onp.max(onp.abs(Qv * dr[..., :, None]), axis=-2)       # columns
    Qs = Q * dr[..., :, None] * dc[..., None, :]
    R = RgQ * dc[..., None, :]
    # X Qs = R  ->  Qs^T X^T = R^T ; then RgQ Q^-1 = X D_r
    Xt = np.linalg.solve(np.swapaxes(Qs, -1, -2), np.swapaxes(R, -1, -2))
    return -np.swapaxes(Xt, -1, -2) * dr[..., None, :]


# ------------------------------------------------------------------ public API

_CYLINDER_EXTRA = 8


def default_orders(x_max: float, lmax: int, aspect: float = 1.0):
    """Internal EBCM order n_max and quadrature size from the size parameter.

    Parameters
    ----------
    x_max : float — k_host times the circumscribing radius [-]
    lmax : int — requested order of the returned T-matrix
    aspect : float — ratio of the largest to the smallest half-dimension (>= 1) [-]

    Returns
    -------
    (nmax, n_quad) : ints

    Notes
    -----
    n_max = max(lmax + 4, ceil(x + 4.05 x^(1/3)) + 4 + 2 (aspect - 1)), i.e. Wiscombe's
    Mie rule (Wiscombe, Appl. Opt. 19, 1505 (1980)) on the circumscribing size
    parameter with a margin that grows with the aspect ratio, as the EBCM needs more
    orders than Mie (Mishchenko et al. 2002 §5.8 start from Wiscombe's rule and
    increase n_max until convergence); n_quad = max(60, 8 n_max) Gauss points
    (Mishchenko et al. use a multiple of n_max). Cylinders add 8 orders (their edges
    make the convergence algebraic, not geometric). tests/test_ebcm.py checks that
    raising both changes a spheroid's T-matrix by < 1e-8 and a cylinder's by < ~1e-4.
    These integers are piecewise constant in the sizes and k_host: a gradient is that
    of the method at the orders chosen at the current point.
    """
    nmax = max(lmax + 4, math.ceil(x_max + 4.05 * x_max ** (1 / 3)) + 4
               + math.ceil(2 * (aspect - 1)))
    return int(nmax), int(max(60, 8 * nmax))


def _check(k_host, m_rel, sizes: dict, lmax):
    """Validate on detached values; return traced k (W,) real and m_rel (W,) complex."""
    kv = onp.atleast_1d(onp.asarray(getval(k_host)))
    mv = onp.atleast_1d(onp.asarray(getval(m_rel)))
    shape = onp.broadcast_shapes(kv.shape, mv.shape)
    if len(shape) != 1:
        raise InputError("k_host", f"must be a 1-D array (W,); got shape {shape}")
    kf = onp.real(kv).astype(float)
    mc = mv.astype(complex)
    if not onp.all(onp.isfinite(kf)) or onp.any(kf <= 0):
        raise InputError("k_host", f"must be finite and > 0 [1/m]; got {kv!r}")
    if onp.any(mc.imag < 0) or not onp.all(onp.isfinite(mc)):
        raise InputError("m_rel", "relative index must be finite with Im >= 0 "
                         f"(exp(-i omega t), passive); got {mv!r}")
    for key, v in sizes.items():
        v = getval(v)
        if not (onp.ndim(v) == 0 and onp.isfinite(v) and onp.isreal(v) and v > 0):
            raise InputError(key, f"must be a finite length > 0 [m]; got {v!r}")
    if isinstance(lmax, bool) or not isinstance(lmax, (int, onp.integer)) or lmax < 1:
        raise InputError("lmax", f"must be an integer >= 1; got {lmax!r}")
    k = k_host if not onp.iscomplexobj(kv) else np.real(k_host)
    k = k * onp.ones(shape)
    mr = m_rel * onp.ones(shape, dtype=complex)
    return k, mr


def _assembly(lmax: int, blocks_lv: dict):
    """Gather indices placing the m-blocks into the (2K, 2K) T-matrix.

    Returns, for each m >= 0, the (l, tau) rows kept from the block (l <= lmax), and an
    index (2K, 2K) into the concatenation [vec(T_0), vec(T_1), vec(T_-1), ..., 0] of the
    flattened kept blocks followed by one zero (entries between different m).
    """
    tau, ls, ms = mode_table(lmax)
    index = {(int(t), int(l), int(m)): i
             for i, (t, l, m) in enumerate(zip(tau, ls, ms, strict=True))}
    n = len(tau)
    gather = onp.full((n, n), -1, dtype=int)
    keeps = {}
    offset = 0
    for m, lv in blocks_lv.items():
        keep = onp.array([2 * i + t for i, l in enumerate(lv) if l <= lmax for t in (0, 1)])
        keeps[m] = keep
        nk = len(keep)
        for mm in ((m, -m) if m else (0,)):
            dest = onp.array([index[(t, int(l), mm)] for l in lv if l <= lmax for t in (0, 1)])
            gather[dest[:, None], dest[None, :]] = offset + onp.arange(nk * nk).reshape(nk, nk)
            offset += nk * nk
    gather[gather < 0] = offset                                     # the appended zero
    return keeps, gather


def axisymmetric_tmatrix(k_host, m_rel, surface, lmax: int, nmax: int, *, mirror=True):
    """T-matrix (W, 2K, 2K) from a surface quadrature of an axisymmetric particle.

    Parameters
    ----------
    k_host : array (W,) — host wavenumber [1/m]
    m_rel : array (W,) — relative refractive index, Im >= 0 [-]
    surface : tuple (theta, weight, r, r_theta) — see :func:`spheroid_surface` [rad, m]
    lmax : int — order of the returned T-matrix (K = lmax (lmax + 2))
    nmax : int — internal EBCM order (>= lmax); the result is truncated to lmax
    mirror : bool — the body is symmetric under z -> -z: the Q elements that vanish by
        that symmetry (same type, l + l' odd; N-M, l + l' even) are set to exactly zero
        (multiplication by a constant 0/1 mask) instead of being left at the round-off
        of cancelling integrals (which the ill-conditioned inversion would amplify);
        this decouples the two parity classes as in Mishchenko, Travis & Lacis (2002)
        §5.2

    Returns
    -------
    complex array (W, 2K, 2K) in the mode order of :mod:`chiropt.sphericalwaves`,
    differentiable by autograd in k_host, m_rel and the surface arrays. Entries between
    different m are exact zeros.

    References
    ----------
    Module docstring (derivation); Waterman (1971); Mishchenko, Travis & Lacis (2002)
    §5.2-5.3.
    """
    k, mr = k_host, m_rel
    th, w, r, r_th = surface
    blocks = _qmatrices(k, k * mr, th, w, r, r_th, nmax, range(0, lmax + 1))
    keeps, gather = _assembly(lmax, {m: b[2] for m, b in blocks.items()})
    nW = len(getval(k))
    flat = []
    for m, (Q, RgQ, lv) in blocks.items():
        if mirror:
            allowed = _mirror_mask(lv)
            Q, RgQ = Q * allowed, RgQ * allowed
        Tm = _solve_t(Q, RgQ)                                       # (W, 2L, 2L)
        keep = keeps[m]
        Tm = Tm[:, keep[:, None], keep[None, :]]
        flat.append(np.reshape(Tm, (nW, -1)))
        if m:
            # the -m block: T_{-m} = (-1)^(tau + tau') T_m (mirror symmetry y -> -y of
            # an axisymmetric body; checked against the direct -m block in
            # tests/test_ebcm.py)
            tt = keep % 2
            flip = (-1.0) ** (tt[:, None] + tt[None, :])
            flat.append(np.reshape(flip * Tm, (nW, -1)))
    flat.append(onp.zeros((nW, 1), dtype=complex))
    flat = np.concatenate(flat, axis=1)
    return flat[:, gather]


def spheroid_tmatrix(k_host, m_rel, a, c, lmax: int, *, nmax=None, n_quad=None):
    """T-matrix of a homogeneous spheroid with its symmetry axis along z.

    Parameters
    ----------
    k_host : array (W,) — host wavenumber [1/m] (real)
    m_rel : array (W,) — relative refractive index n_particle/n_host, Im >= 0 [-]
    a : float — equatorial semi-axis (x, y) [m]
    c : float — polar semi-axis (z) [m]; c > a prolate, c < a oblate
    lmax : int — order of the returned T-matrix
    nmax, n_quad : int, optional — internal EBCM order and Gauss points
        (default :func:`default_orders` at the largest k_host)

    Returns
    -------
    complex array (W, 2K, 2K), K = lmax (lmax + 2), basis of ``chiropt.sphericalwaves``.

    Notes
    -----
    Differentiable by autograd in k_host, m_rel, a and c (at the integer orders chosen
    at the current point). Accurate to ~1e-9 (unitarity) for k max(a, c) <= 3 and
    aspect ratios 0.5-2 (tests/test_ebcm.py); gradients agree with central finite
    differences to ~1e-8 relative (tests/test_ebcm_gradients.py).

    References
    ----------
    Module docstring; Mishchenko, Travis & Lacis (2002) §5.2-5.3.
    """
    k, mr = _check(k_host, m_rel, {"a": a, "c": c}, lmax)
    av, cv = float(getval(a)), float(getval(c))
    kmax = float(onp.max(getval(k)))
    dn, dq = default_orders(kmax * max(av, cv), lmax, max(av, cv) / min(av, cv))
    nmax = dn if nmax is None else int(nmax)
    n_quad = dq if n_quad is None else int(n_quad)
    return axisymmetric_tmatrix(k, mr, spheroid_surface(a, c, n_quad), lmax, max(nmax, lmax))


def cylinder_tmatrix(k_host, m_rel, radius, height, lmax: int, *, nmax=None, n_quad=None):
    """T-matrix of a finite circular cylinder (disk, pillar) with its axis along z.

    Parameters
    ----------
    k_host : array (W,) — host wavenumber [1/m] (real)
    m_rel : array (W,) — relative refractive index n_particle/n_host, Im >= 0 [-]
    radius : float — cylinder radius [m]
    height : float — cylinder height [m], centred on z = 0
    lmax : int — order of the returned T-matrix
    nmax, n_quad : int, optional — internal EBCM order and total Gauss points
        (default :func:`default_orders` at the largest k_host)

    Returns
    -------
    complex array (W, 2K, 2K), K = lmax (lmax + 2), basis of ``chiropt.sphericalwaves``.

    Notes
    -----
    Differentiable by autograd in k_host, m_rel, radius and height (at the integer
    orders and the node split chosen at the current point; the nodes move with the edge
    angle). The edges make the convergence in n_max algebraic, not geometric: measured
    residuals of the lossless identity and of reciprocity (full internal order,
    tests/test_ebcm.py, benchmarks/ebcm.py) are ~1e-7-1e-5 for m_rel ~ 1.5 and
    k r_max <= 1.5, ~1e-4 at k r_max = 3, and ~1e-3 for silicon-like disks (m_rel ~ 3.5,
    near the dipole resonances); T elements change by about as much when n_max is
    raised. Adequate for design exploration; check critical results against another
    method. The gradient is exact for the discrete method (it agrees with central
    finite differences at fixed orders, tests/test_ebcm_gradients.py); as a derivative of the
    physical T-matrix it carries the same truncation error.

    References
    ----------
    Module docstring; Mishchenko, Travis & Lacis (2002) §5.2-5.3 and §5.8 (finite
    cylinders, split quadrature); Waterman (1971).
    """
    k, mr = _check(k_host, m_rel, {"radius": radius, "height": height}, lmax)
    av, hv = float(getval(radius)), float(getval(height))
    half = 0.5 * hv
    aspect = max(av, half) / min(av, half)
    kmax = float(onp.max(getval(k)))
    dn, dq = default_orders(kmax * math.hypot(av, half), lmax, aspect)
    dn += _CYLINDER_EXTRA  # edges: algebraic convergence in n_max
    dq = max(dq, 8 * dn)
    nmax = dn if nmax is None else int(nmax)
    n_quad = dq if n_quad is None else int(n_quad)
    return axisymmetric_tmatrix(k, mr, cylinder_surface(radius, height, n_quad), lmax,
                                max(nmax, lmax))


def _relative_index(index, n_host, k_host):
    """Particle index over host index, broadcast to the wavelengths of ``k_host``."""
    return index / n_host * onp.ones(onp.shape(getval(k_host)))


@dataclass
class Spheroid:
    """A homogeneous spheroid, axis along z: semi-axes a (x, y) and c (z) [m],
    index (W,) complex, host index n_host (as :class:`chiropt.multipole.tmatrix.Sphere`).
    Differentiable by autograd in a, c, index, n_host and k_host."""

    a: Any
    c: Any
    index: Any
    n_host: Any
    nmax: int | None = None
    n_quad: int | None = None

    def tmatrix(self, k_host, lmax: int):
        m = _relative_index(self.index, self.n_host, k_host)
        return spheroid_tmatrix(k_host, m, self.a, self.c, lmax, nmax=self.nmax,
                                n_quad=self.n_quad)


@dataclass
class Cylinder:
    """A homogeneous finite cylinder, axis along z: radius and height [m], index (W,)
    complex, host index n_host (as :class:`chiropt.multipole.tmatrix.Sphere`).
    Differentiable by autograd in radius, height, index, n_host and k_host."""

    radius: Any
    height: Any
    index: Any
    n_host: Any
    nmax: int | None = None
    n_quad: int | None = None

    def tmatrix(self, k_host, lmax: int):
        m = _relative_index(self.index, self.n_host, k_host)
        return cylinder_tmatrix(k_host, m, self.radius, self.height, lmax, nmax=self.nmax,
                                n_quad=self.n_quad)
