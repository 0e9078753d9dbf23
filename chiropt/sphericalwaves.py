"""Vector spherical waves: conventions, mode indexing, plane-wave expansions.

Owns: the one statement of the VSWF conventions of chiropt (below), the mode index,
spherical harmonics evaluated at complex unit vectors (so that evanescent plane waves
are handled by analytic continuation), the regular-wave expansion of a plane wave,
the plane-wave (diffraction-order) expansion of a 2D lattice of outgoing VSWFs, the
map between l = 1 coefficients and the dipole moments of chiropt.solve, and plain
(non-traced) point evaluation of the waves for tests and field maps. A kernel shared by
the particle T-matrices (chiropt.particles.ebcm) and the multipole lattice model
(chiropt.multipole); it belongs to neither.
Must not import: any other chiropt module (particles, multipole, solve, fields, metrics,
search, store, report, cli).

Conventions (stated once; locked in by tests/test_multipole_basis.py)
-------------------------------------------------------------------
- Time factor exp(-i omega t); SI; host wavenumber k (real).
- Scalar spherical harmonics Y_lm with the Condon-Shortley phase, orthonormal on the
  sphere (same as ``scipy.special.sph_harm_y``); Y_{l,-m} = (-1)^m conj(Y_lm).
- Vector spherical harmonic X_lm = L Y_lm / sqrt(l (l+1)), L = -i r x grad.
- Waves (z_l = j_l regular, h_l = h_l^(1) outgoing):
  M_lm = z_l(kr) X_lm(r_hat),   N_lm = curl(M_lm) / k, so curl N = k M.
  Explicitly N_lm = i sqrt(l(l+1)) z_l/(kr) Y_lm r_hat + [(kr z_l)'/(kr)] r_hat x X_lm.
- Mode index (per particle, 2K modes, K = lmax (lmax + 2)): l ascending, m = -l..l,
  polarization fastest, electric (N, "TM") first, magnetic (M, "TE") second:
  u = 2 (l (l+1) + m - 1) + tau, tau = 0 for N, 1 for M.
- A field near a particle is sum_u [e_u Rg Psi_u + f_u Psi_u]; a T-matrix maps the
  exciting (regular) coefficients e to the scattered (outgoing) ones: f = T e.
  A sphere has T = diag(-a_l) on N modes and diag(-b_l) on M modes (Bohren & Huffman
  coefficients; the ratio of scattered to incident coefficients of B&H eqs. 4.37, 4.45).
- Plane wave E0 exp(i k k_hat . r) (k_hat . E0 = 0, bilinear):
  e_u = 4 pi i^l V_u(k_hat) . E0 with V_M,lm = -(-1)^m X_{l,-m}(k_hat) and
  V_N,lm = (-1)^m i k_hat x X_{l,-m}(k_hat) (= conj(X_lm), conj(i k_hat x X_lm) for real
  k_hat). Complex k_hat (evanescent waves) use the polynomial continuation of Y_lm.
- Outgoing-wave lattice (Weyl analogue), cell area A, Bloch vector k_par:
  sum_R exp(i k_par.R) Psi_u(r - R) = (2 pi/(A k)) sum_g (-i)^l W_u(k_hat_g) exp(i k_g.r)/kz_g,
  W_M = X_lm, W_N = i k_hat x X_lm, k_g = (q_g, +-kz_g) for z >< 0.
- Dipoles (normalization of chiropt.solve): P = p/(eps0 n_h^2) = (sqrt(6 pi)/k^3)
  sum_m f^N_1m eps_m, Z m = (-i sqrt(6 pi)/k^3) sum_m f^M_1m eps_m, with the spherical
  unit vectors eps_{+1} = -(1, i, 0)/sqrt 2, eps_0 = (0, 0, 1), eps_{-1} = (1, -i, 0)/sqrt 2.

References
----------
Jackson, Classical Electrodynamics, 3rd ed. (1999), §9.6-9.7 (X_lm, multipole fields);
Bohren & Huffman, Absorption and Scattering of Light by Small Particles (1983), §4.1-4.4;
Tsang, Kong & Ding, Scattering of Electromagnetic Waves: Theories and Applications
(2000), ch. 1 (plane-wave and angular-spectrum expansions of VSWFs); Devaney & Wolf,
J. Math. Phys. 15, 234 (1974) (angular-spectrum representation of multipole fields).
"""

from __future__ import annotations

import math
from functools import cache

import autograd.numpy as np
import numpy as onp
import scipy.special as sps
from autograd.extend import defvjp, defvjp_argnums, primitive
from autograd.tracer import isbox

from chiropt.autodiff import ForwardStash

# ------------------------------------------------------------------ indexing


def n_modes(lmax: int) -> int:
    """Number of modes per particle, 2 lmax (lmax + 2)."""
    return 2 * lmax * (lmax + 2)


@cache
def mode_table(lmax: int):
    """Mode labels (tau, l, m) of the 2K modes, tau = 0 (N, electric), 1 (M, magnetic).

    Returns
    -------
    (tau, l, m) : three int arrays (2K,)
    """
    tau, ls, ms = [], [], []
    for l in range(1, lmax + 1):
        for m in range(-l, l + 1):
            for t in (0, 1):
                tau.append(t)
                ls.append(l)
                ms.append(m)
    return onp.array(tau), onp.array(ls), onp.array(ms)


def lm_index(l, m):
    """Index l (l+1) + m of (l, m) in arrays over all l >= 0 (Y_00 at index 0)."""
    return l * (l + 1) + m


# ------------------------------------------------------------------ spherical harmonics


def _norm(l, m):
    return math.sqrt((2 * l + 1) / (4 * math.pi) * math.factorial(l - m) / math.factorial(l + m))


def spherical_harmonics(u, lmax: int):
    """Y_lm(u) for 0 <= l <= lmax at (possibly complex) unit vectors u.

    Parameters
    ----------
    u : array (..., 3) — unit vectors (bilinear u.u = 1; complex for evanescent waves) [-]
    lmax : int — highest degree

    Returns
    -------
    array (..., (lmax+1)^2), index l (l+1) + m.

    Notes
    -----
    Uses the polynomial form Y_lm = N_lm (-1)^m (u_x + i u_y)^m P_l^(m)(u_z) (m >= 0) and
    Y_{l,-m} = N_lm (u_x - i u_y)^m P_l^(m)(u_z), P_l^(m) the m-th derivative of the
    Legendre polynomial, by the recurrence (l - m) P_l^(m) = (2l - 1) t P_{l-1}^(m)
    - (l + m - 1) P_{l-2}^(m), P_m^(m) = (2m - 1)!!. It equals the usual harmonic on the
    real sphere and is its analytic continuation elsewhere. One autograd primitive: its
    derivative (the same polynomials differentiated in u_x, u_y, u_z, the components taken
    as independent) is computed with the values, so the reverse pass has one node instead
    of one per (l, m) term.

    References
    ----------
    DLMF 14.7.8, 14.10.3 (Legendre recurrences), 14.30.1 (Y_lm); Jackson (1999) eq. 3.53.
    """
    return _harmonics(u, int(lmax))


def harmonics_and_derivatives(u, lmax: int, derivative: bool = True):
    """Plain values Y (..., J) of ``spherical_harmonics`` and, with ``derivative``, dY/du.

    dY/du (..., J, 3) differentiates the polynomial form in u_x, u_y, u_z taken as
    independent (the rule of ``spherical_harmonics``' reverse pass); None without it.
    """
    return _harmonic_table(u, int(lmax), bool(derivative))


@cache
def _harmonic_constants(lmax: int):
    """Per (l, m >= 0) constants of :func:`_harmonic_table`, over l = 0..lmax rows."""
    ms = onp.arange(lmax + 1)
    dfact = onp.array([float(onp.prod(onp.arange(2 * m - 1, 0, -2))) if m else 1.0
                       for m in ms])
    norm = onp.array([[_norm(l, m) if m <= l else 0.0 for m in ms] for l in range(lmax + 1)])
    sign = (-1.0) ** ms
    return ms, dfact, norm, sign


def _harmonic_table(u, lmax: int, derivative: bool):
    """Plain values Y (..., J) and, with ``derivative``, dY/du (..., J, 3).

    Y_lm = c_lm (-1)^m (u_x + i u_y)^m q_lm(u_z), Y_l,-m = c_lm (u_x - i u_y)^m q_lm(u_z),
    with q_lm = d^m P_l / dt^m (t = u_z) from the three-term recurrence in l (DLMF 14.10.3
    differentiated m times; the polynomial form continues Y_lm to complex u), run for all
    m at once: one step per degree l.
    """
    u = onp.asarray(u)
    ux, uy, t = u[..., 0], u[..., 1], u[..., 2]
    sh = t.shape
    ms, dfact, norm, sign = _harmonic_constants(lmax)
    M = lmax + 1
    # powers (u_x +- i u_y)^m, m = 0..lmax, and m (u_x +- i u_y)^(m-1) for the derivative
    pw_p = onp.empty((M,) + sh, dtype=complex)
    pw_m = onp.empty((M,) + sh, dtype=complex)
    pw_p[0] = pw_m[0] = 1.0
    plus, minus = ux + 1j * uy, ux - 1j * uy
    for m in range(1, M):
        pw_p[m] = pw_p[m - 1] * plus
        pw_m[m] = pw_m[m - 1] * minus
    J = M * M
    Y = onp.empty((J,) + sh, dtype=complex)          # harmonic index first while filling
    D = onp.zeros((J, 3) + sh, dtype=complex) if derivative else None
    q_prev = onp.zeros((M,) + sh, dtype=complex)
    q = onp.zeros((M,) + sh, dtype=complex)
    dq_prev = onp.zeros_like(q) if derivative else None
    dq = onp.zeros_like(q) if derivative else None
    tb = t[None]
    for l in range(M):
        lo = ms[:l]                                     # m < l: one recurrence step
        if l:
            a = ((2 * l - 1) / (l - lo)).reshape((-1,) + (1,) * t.ndim)
            b = ((l + lo - 1) / (l - lo)).reshape((-1,) + (1,) * t.ndim)
            nxt = a * tb * q[:l] - b * q_prev[:l]
            if derivative:
                dnxt = a * (q[:l] + tb * dq[:l]) - b * dq_prev[:l]
                dq_prev[:l], dq[:l] = dq[:l], dnxt
            q_prev[:l], q[:l] = q[:l], nxt
        q[l] = dfact[l]                                 # m = l starts its column
        if derivative:
            dq[l] = 0.0
        c = norm[l, :l + 1].reshape((-1,) + (1,) * t.ndim)
        s = sign[:l + 1].reshape(c.shape)
        pos = c * s * pw_p[:l + 1] * q[:l + 1]          # Y_l,m, m = 0..l
        neg = c[1:] * pw_m[1:l + 1] * q[1:l + 1]        # Y_l,-m, m = 1..l
        base = l * (l + 1)
        Y[base:base + l + 1] = pos
        Y[base - l:base][::-1] = neg                    # m = -1 .. -l at base-1 .. base-l
        if derivative:
            mm = ms[1:l + 1].reshape((-1,) + (1,) * t.ndim)
            low_p = mm * pw_p[:l]                       # m (u_x + i u_y)^(m-1), m >= 1
            low_m = mm * pw_m[:l]
            cs = c * s
            Dp, Dn = D[base:base + l + 1], D[base - l:base][::-1]
            Dp[1:, 0] = cs[1:] * low_p * q[1:l + 1]
            Dp[1:, 1] = 1j * Dp[1:, 0]
            Dp[:, 2] = cs * pw_p[:l + 1] * dq[:l + 1]
            Dn[:, 0] = c[1:] * low_m * q[1:l + 1]
            Dn[:, 1] = -1j * Dn[:, 0]
            Dn[:, 2] = c[1:] * pw_m[1:l + 1] * dq[1:l + 1]
    Y = onp.ascontiguousarray(onp.moveaxis(Y, 0, -1))
    if derivative:
        D = onp.ascontiguousarray(onp.moveaxis(D, (0, 1), (-2, -1)))
    return Y, D


@primitive
def _harmonics(u, lmax):
    return _harmonic_table(u, lmax, False)[0]


def _harmonics_vjp(ans, u, lmax):
    _, D = _harmonic_table(u, lmax, True)

    def vjp(g):   # autograd operations: the vjp is itself differentiated by --grad
        out = np.matmul(g[..., None, :], D)[..., 0, :]   # sum_j g_j dY_j/du_c
        return out if onp.iscomplexobj(u) else np.real(out)

    return vjp


defvjp(_harmonics, _harmonics_vjp, None)


def _cpm(l, m, sign):
    """c_+-(l, m) = sqrt((l -+ m)(l +- m + 1)): L_+- Y_lm = c_+- Y_{l,m+-1}."""
    return math.sqrt(max((l - sign * m) * (l + sign * m + 1), 0))


@cache
def _x_matrices(lmax: int):
    """Constant maps from Y_{l m'} ((lmax+1)^2) to the x, y, z components of X_lm (K)."""
    K = lmax * (lmax + 2)
    C = onp.zeros((3, (lmax + 1) ** 2, K), dtype=complex)
    col = 0
    for l in range(1, lmax + 1):
        s = 1.0 / math.sqrt(l * (l + 1))
        for m in range(-l, l + 1):
            cm, cp = _cpm(l, m, -1), _cpm(l, m, +1)
            if m - 1 >= -l:  # (1/2) c_- Y_{l,m-1} u_+,  u_+ = (1, i, 0)
                C[0, lm_index(l, m - 1), col] += 0.5 * cm * s
                C[1, lm_index(l, m - 1), col] += 0.5j * cm * s
            if m + 1 <= l:  # (1/2) c_+ Y_{l,m+1} u_-,  u_- = (1, -i, 0)
                C[0, lm_index(l, m + 1), col] += 0.5 * cp * s
                C[1, lm_index(l, m + 1), col] += -0.5j * cp * s
            C[2, lm_index(l, m), col] += m * s
            col += 1
    return C


def vector_harmonics(u, lmax: int):
    """X_lm(u) = L Y_lm / sqrt(l(l+1)) at (possibly complex) unit vectors u.

    Parameters
    ----------
    u : array (..., 3) — unit vectors [-]
    lmax : int

    Returns
    -------
    array (..., K, 3), K = lmax (lmax+2), mode order l ascending, m = -l..l.

    Notes
    -----
    With L_+- = L_x +- i L_y, L_+- Y_lm = c_+- Y_{l,m+-1}, L_z Y_lm = m Y_lm:
    L Y = (1/2) (L_- Y)(1, i, 0) + (1/2)(L_+ Y)(1, -i, 0) + (L_z Y) z_hat.

    References
    ----------
    Jackson (1999) eqs. 9.101-9.104 (L operators, X_lm).
    """
    Y = spherical_harmonics(u, lmax)
    C = _x_matrices(lmax)
    return np.stack([np.dot(Y, C[0]), np.dot(Y, C[1]), np.dot(Y, C[2])], axis=-1)


def _cross(a, b):
    return np.stack([a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1],
                     a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2],
                     a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]], axis=-1)


@cache
def _neg_m_perm(lmax: int):
    """Permutation of the K (l, m) modes taking m -> -m, and the signs (-1)^m."""
    idx, sign = [], []
    for l in range(1, lmax + 1):
        for m in range(-l, l + 1):
            idx.append(lm_index(l, -m) - 1)
            sign.append((-1.0) ** m)
    return onp.array(idx), onp.array(sign)


def _interleave(wn, wm):
    """(..., K, 3) N-type and M-type vectors -> (..., 2K, 3) in the mode order."""
    sh = np.shape(wn)
    return np.reshape(np.stack([wn, wm], axis=-2), sh[:-2] + (2 * sh[-2], 3))


@cache
def _i_power(lmax: int, sign: int):
    _, ls, _ = mode_table(lmax)
    return (1j * sign) ** ls


def outgoing_vectors(u, lmax: int):
    """Angular-spectrum vectors W_u(k_hat): W_N = i k_hat x X_lm, W_M = X_lm, (..., 2K, 3)."""
    X = vector_harmonics(u, lmax)
    W_n = 1j * _cross(u[..., None, :] + 0 * X, X)
    return _interleave(W_n, X)


def incoming_vectors(u, lmax: int):
    """Projection vectors V_u(k_hat) of the regular-wave expansion of a plane wave, (..., 2K, 3).

    V_M,lm = -(-1)^m X_{l,-m}(k_hat), V_N,lm = (-1)^m i k_hat x X_{l,-m}(k_hat); for real
    k_hat these equal conj(X_lm) and conj(i k_hat x X_lm) (Y_{l,-m} = (-1)^m conj Y_lm).
    """
    X = vector_harmonics(u, lmax)
    perm, sign = _neg_m_perm(lmax)
    Xn = X[..., perm, :] * sign[:, None]
    V_n = 1j * _cross(u[..., None, :] + 0 * Xn, Xn)
    return _interleave(V_n, -Xn)


def planewave_coefficients(u, E0, lmax: int):
    """Regular-VSWF coefficients e_u of the plane wave E0 exp(i k u.r) about the origin.

    Parameters
    ----------
    u : array (..., 3) — propagation direction k_vec / k (complex for evanescent waves) [-]
    E0 : array (..., 3) — amplitude vector, u . E0 = 0 (bilinear) [V/m]
    lmax : int

    Returns
    -------
    array (..., 2K) — e_u = 4 pi i^l V_u(u) . E0 [V/m].

    References
    ----------
    Tsang, Kong & Ding (2000) ch. 1 (plane-wave expansion in VSWFs); derived here from
    Rg M_lm = (1/(4 pi i^l)) \\int exp(i k k_hat.r) X_lm(k_hat) dOmega and the completeness
    of the tangential vector harmonics; checked pointwise by a test.
    """
    V = incoming_vectors(u, lmax)
    return 4 * np.pi * _i_power(lmax, +1) * np.sum(V * E0[..., None, :], axis=-1)


def emission_vectors(u, lmax: int):
    """(-i)^l W_u(k_hat): a lattice of outgoing waves with coefficients f radiates into the
    plane wave of direction k_hat the amplitude (2 pi/(A k kz)) sum_u f_u (-i)^l W_u, (..., 2K, 3).

    References
    ----------
    Weyl expansion (docs/theory.md §6) with h_l Y_lm = (-k)^-l Y_lm(grad) h_0 (Hobson's
    theorem, Hobson, Proc. London Math. Soc. 24, 54 (1892)), then L applied to both sides.
    """
    return outgoing_vectors(u, lmax) * _i_power(lmax, -1)[:, None]


@cache
def _projection_tables(lmax: int):
    """Constants of :func:`order_projections`: the maps from Y ((lmax+1)^2) to the x, y, z
    components of X_lm side by side ((lmax+1)^2, 3K), and the z-parity (-1)^(l+m) of the
    K modes."""
    C = _x_matrices(lmax)
    cat = onp.concatenate([C[0], C[1], C[2]], axis=1)
    _, ls, ms = mode_table(lmax)
    parity = (-1.0) ** (ls[0::2] + ms[0::2])
    cat.setflags(write=False)
    return cat, parity


def order_projections(k_up, s, p_up, lmax: int):
    """Projections X_lm(k_hat) . s and X_lm(k_hat) . p of plane waves on their channels.

    Parameters
    ----------
    k_up : array (..., 3) — upward unit wavevectors (q, kz)/k (complex for evanescent
        waves) [-]
    s, p_up : arrays (..., 3) — polarization vectors of chiropt.planewaves
        (k x s = -p, k x p = s) [-]
    lmax : int

    Returns
    -------
    complex array (..., 2, K) — [X . s, X . p_up] over the K (l, m) modes [-]; the
    downward direction (q, -kz)/k has ``P * down_parity(lmax)`` with its p_down.

    Notes
    -----
    With the Cartesian components X_c (c = x, y, z) of X_lm, linear in Y_lm
    (:func:`_x_matrices`), the projections are the matrix product P = V X of the
    (2, 3) rows V = [s; p_up] and the (3, K) components: one evaluation of Y_lm, and every
    emission and reception vector of the order follows from these two numbers per mode
    (:func:`channel_modes`). One autograd node: its vector-Jacobian product is three matrix
    products (V^T Pbar for X, Pbar X^T for V, then dY/dk_hat of the harmonic table).

    References
    ----------
    Jackson (1999) eqs. 9.101-9.104 (X_lm); module docstring.
    """
    return _projections(k_up, np.stack([s, p_up], axis=-2), int(lmax), isbox(k_up))


def _cartesian_x(Y, lmax: int):
    """Cartesian components (..., 3, K) of X_lm from the harmonics Y (..., J)."""
    cat, _ = _projection_tables(lmax)
    K = lmax * (lmax + 2)
    sh = onp.shape(Y)[:-1]
    return onp.reshape(onp.reshape(Y, (-1, (lmax + 1) ** 2)) @ cat, sh + (3, K))


_PROJECTION_STASH = ForwardStash()


@primitive
def _projections(k_up, V, lmax, traced=False):
    """[X . s, X . p_up] (..., 2, K) from unit wavevectors (..., 3) and V = [s; p] (..., 2, 3);
    with ``traced`` the harmonics' derivatives are made in the same pass, for the VJP."""
    Y, D = _harmonic_table(k_up, lmax, traced)
    X = _cartesian_x(Y, lmax)
    out = onp.matmul(V, X)
    if traced:
        _PROJECTION_STASH.put(out, None, (X, D))
    return out


def _projections_vjp(argnums, ans, args, kwargs):
    k_up, V, lmax = args[:3]
    table = _PROJECTION_STASH.take(ans, None)
    if table is None or (0 in argnums and table[1] is None):
        Y, D = _harmonic_table(k_up, lmax, 0 in argnums)
        table = (_cartesian_x(Y, lmax), D)
    X, D = table                                                     # (..., 3, K), dY/dk
    cat, _ = _projection_tables(lmax)
    J = (lmax + 1) ** 2
    sh = onp.shape(X)[:-2]
    Vt = onp.swapaxes(V, -1, -2)
    Xt = onp.swapaxes(X, -1, -2)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        out = []
        for i in argnums:
            if i == 0:
                Xbar = np.reshape(np.matmul(Vt, g), (-1, cat.shape[1]))   # (..., 3K)
                Ybar = np.reshape(np.matmul(Xbar, cat.T), sh + (1, J))
                v = np.matmul(Ybar, D)[..., 0, :]
            else:
                v = np.matmul(g, Xt)
            out.append(v if onp.iscomplexobj(args[i]) else np.real(v))
        return tuple(out)

    return vjp


defvjp_argnums(_projections, _projections_vjp)


def down_parity(lmax: int):
    """Factors (2, K) taking :func:`order_projections` at (q, kz) to those at (q, -kz).

    With Y_lm(u_x, u_y, -u_z) = (-1)^(l+m) Y_lm(u) (parity of P_l^m, DLMF 14.7.17; the
    polynomial continuation keeps it), s unchanged and p_down = (-p_x, -p_y, p_z):
    X.s -> -(-1)^(l+m) X.s and X.p -> (-1)^(l+m) X.p.
    """
    _, parity = _projection_tables(lmax)
    return onp.stack([-parity, parity])


def channel_modes(P, kind: str, lmax: int, down: bool = False):
    """Emission or reception vectors over the 2K modes from the projections P.

    Parameters
    ----------
    P : array (..., 2, K) — [X . s, X . p] of one direction (:func:`order_projections`)
    kind : 'emit' or 'receive'
    lmax : int
    down : the vectors of the downward direction (q, -kz)/k, whose projections are
        ``P * down_parity(lmax)`` (the parity folded into the constant factors)

    Returns
    -------
    complex array (..., 2, 2K) over channels (s, p) and modes:
    'emit' — (-i)^l W_u . (s, p), the (s, p) components of :func:`emission_vectors`;
    'receive' — :func:`planewave_coefficients` of unit s and p waves.

    Notes
    -----
    From k x s = -p, k x p = s: (k x X) . s = X . p and (k x X) . p = -X . s, so
    W_M . (s, p) = (X.s, X.p), W_N . (s, p) = i (X.p, -X.s); V the same with
    X -> -(-1)^m X_{l,-m}.
    """
    if kind not in ("emit", "receive"):
        raise ValueError(f"kind must be 'emit' or 'receive', not {kind!r}")
    return _channels(P, kind == "receive", int(lmax), bool(down))


@cache
def channel_tables(receive: bool, lmax: int, down: bool):
    """Constants of :func:`channel_modes`: the gather of P over modes (m -> -m for
    'receive', identity for 'emit') and the factors (a_s, a_p (K,), b (2, K)) with
    out[c, (l m), N] = a_c P[1 - c] and out[c, (l m), M] = b_c P[c] after the gather;
    ``down`` folds in the parity of :func:`down_parity`."""
    perm, sign = _neg_m_perm(lmax)
    factor = 4 * onp.pi * _i_power(lmax, +1) if receive else _i_power(lmax, -1)
    fN, fM = factor[0::2], factor[1::2]
    w = sign if receive else onp.ones_like(sign)   # receive: P -> -(-1)^m P[m -> -m], n -> -n
    a0, a1 = 1j * w * fN, -1j * w * fN
    b = onp.stack([-w * fM if receive else fM] * 2)
    if down:
        par = down_parity(lmax)[:, perm] if receive else down_parity(lmax)
        a0, a1, b = a0 * par[1], a1 * par[0], b * par
    return (perm if receive else None), onp.argsort(perm), a0, a1, b


@primitive
def _channels(P, receive, lmax, down):
    """:func:`channel_modes` as one autograd node (a linear map of P, transposed in reverse)."""
    perm, _, a0, a1, b = channel_tables(receive, lmax, down)
    Pg = P[..., perm] if receive else P
    K = lmax * (lmax + 2)
    sh = onp.shape(Pg)[:-2]
    out = onp.empty(sh + (2, K, 2), dtype=complex)
    out[..., 0, :, 0] = Pg[..., 1, :] * a0
    out[..., 1, :, 0] = Pg[..., 0, :] * a1
    onp.multiply(Pg, b, out=out[..., 1])
    return onp.reshape(out, sh + (2, 2 * K))


def _channels_vjp(ans, P, receive, lmax, down):
    _, inverse, a0, a1, b = channel_tables(receive, lmax, down)
    K = lmax * (lmax + 2)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        g4 = np.reshape(g, np.shape(g)[:-1] + (K, 2))
        gn, gm = g4[..., 0], g4[..., 1]
        Pbar = gm * b + np.stack([gn[..., 1, :] * a1, gn[..., 0, :] * a0], axis=-2)
        return Pbar[..., inverse] if receive else Pbar

    return vjp


defvjp(_channels, _channels_vjp, None, None, None)


# ------------------------------------------------------------------ dipole map

_EPS = onp.array([[1.0, -1j, 0.0], [0.0, 0.0, 1.0], [-1.0, -1j, 0.0]]) / onp.array(
    [[math.sqrt(2)], [1.0], [math.sqrt(2)]])  # rows m = -1, 0, +1


def dipole_moments(f, k):
    """Dipole moments (P, Z m) of the l = 1 outgoing coefficients.

    Parameters
    ----------
    f : array (..., 2K) — outgoing coefficients (mode order of this module) [V/m]
    k : array broadcast against f[..., 0] — host wavenumber [1/m]

    Returns
    -------
    array (..., 6) — [P, M] with P = p/(eps0 n_h^2), M = Z m [V m] (chiropt.solve).

    References
    ----------
    Module docstring (derived by matching the Weyl expansions of docs/theory.md §5 and of
    ``emission_vectors`` at l = 1; gives alpha_e = 6 pi i a1/k^3 as in docs/theory.md §3).
    """
    c = np.sqrt(6 * np.pi) / k ** 3
    fn, fm = f[..., 0:6:2], f[..., 1:6:2]  # m = -1, 0, 1
    P = c[..., None] * np.dot(fn, _EPS)
    M = -1j * c[..., None] * np.dot(fm, _EPS)
    return np.concatenate([P, M], axis=-1)


def dipole_fields(e):
    """Exciting fields (E, Z H) [V/m] at the origin from the l = 1 regular coefficients.

    E = (i/sqrt(6 pi)) sum_m e^N_1m eps_m, Z H = (1/sqrt(6 pi)) sum_m e^M_1m eps_m.
    """
    c = 1.0 / np.sqrt(6 * np.pi)
    E = 1j * c * np.dot(e[..., 0:6:2], _EPS)
    H = c * np.dot(e[..., 1:6:2], _EPS)
    return np.concatenate([E, H], axis=-1)


# ------------------------------------------------------------------ point evaluation


def vswf_at_points(points, k, lmax: int, kind: str = "outgoing"):
    """Plain-value VSWFs Psi_u(k r) at real points (tests and field maps; not traced).

    Parameters
    ----------
    points : array (P, 3) — positions relative to the expansion centre [m]
    k : float — host wavenumber [1/m]
    lmax : int
    kind : 'outgoing' (h_l^(1)) or 'regular' (j_l)

    Returns
    -------
    complex array (P, 2K, 3) — the fields of every mode [-].
    """
    r = onp.linalg.norm(points, axis=-1)
    u = points / r[:, None]
    x = k * r
    _, ls, _ = mode_table(lmax)
    lk = onp.arange(1, lmax + 1)
    jl = sps.spherical_jn(lk[None, :], x[:, None])
    jd = sps.spherical_jn(lk[None, :], x[:, None], derivative=True)
    if kind == "regular":
        z, zd = jl, jd
    else:
        z = jl + 1j * sps.spherical_yn(lk[None, :], x[:, None])
        zd = jd + 1j * sps.spherical_yn(lk[None, :], x[:, None], derivative=True)
    X = onp.asarray(vector_harmonics(u, lmax))          # (P, K, 3)
    Y = onp.asarray(spherical_harmonics(u, lmax))[:, 1:]  # (P, K)
    lK = ls[0::2]
    zK = z[:, lK - 1]
    dK = (zK + x[:, None] * zd[:, lK - 1]) / x[:, None]   # (x z)'/x
    M = zK[..., None] * X
    N = (1j * onp.sqrt(lK * (lK + 1.0)) * zK / x[:, None] * Y)[..., None] * u[:, None, :] \
        + dK[..., None] * onp.cross(u[:, None, :], X)
    return onp.asarray(_interleave(N, M))
