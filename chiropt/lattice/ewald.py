"""Quasi-periodic Green's function of a 2D lattice in 3D and its dipole dyadics.

Owns: the Ewald-summed lattice Green's function G(d) = sum_R exp(i k_par.R) g(d - R),
g(r) = exp(ikr)/(4 pi r), with its gradient and Hessian (``lattice_green_derivatives``),
the dipole coupling dyadics S and c (``lattice_green_dyadics``) and the default
splitting parameter (``splitting_parameter``).
Must not import: store, report, cli, search, nor particles/stack/solve.

Conventions (docs/theory.md §1, §6, §7): SI units, exp(-i omega t), real host
wavenumber k. Quasi-periodicity G(r + R) = exp(i k_par.R) G(r). A displacement d that
coincides with a lattice point (d = 0: the particle with its own images) has that
singular term removed and replaced by the regularized limit
G_reg = lim [G(r) - exp(i k_par.R0) g(r - R0)] (docs/theory.md §6, "G_reg(0)"); all other
terms are kept. Array axes: W (wavelengths), P (displacements), then lattice points /
diffraction orders, then Cartesian components (x, y, z).

Method: Ewald split (spectral part over diffraction orders + spatial part over lattice
points, both through the Faddeeva function for stability) for in-plane and slightly
off-plane displacements; the plain spectral (Weyl) sum for displacements far enough from
the lattice plane that it needs fewer terms. Truncations are chosen from ``tol`` on plain
values, so they are constant under differentiation.

Rayleigh anomalies: when an order grazes (kz -> 0) the sums grow like 1/kz, as the physics
does; values stay finite because ``kz_branch`` floors |kz| at 1e-8 k (reached only within
round-off of the anomaly). Use ``chiropt.lattice.orders.rayleigh_proximity`` to warn.
"""

from __future__ import annotations

import autograd.numpy as np
from autograd.tracer import getval, isbox

from chiropt.errors import InputError
from chiropt.lattice.bravais import Lattice, integer_pairs_within
from chiropt.lattice.faddeeva import wofz
from chiropt.lattice.orders import kz_branch, order_indices, order_wavevectors

#: Cap on the exponent k^2 / (4 E^2) of the default splitting (H^2 in E >= k / (2H)).
MAX_SPLIT_EXPONENT = 3.0
# Extra e-folds beyond ln(1/tol) in the truncation radii (polynomial prefactors, term count).
_MARGIN = 4.0
_SQRT_PI = np.sqrt(np.pi)


def splitting_parameter(k, lattice: Lattice):
    """Default Ewald splitting parameter E per wavelength (plain values).

    Parameters
    ----------
    k : array (W,) — host wavenumber [1/m]
    lattice : Lattice — the array's lattice [m]

    Returns
    -------
    float array (W,) — E = max(sqrt(pi / A), k / (2 H)) [1/m] with H = sqrt(3), so that the
    round-off amplifying factor exp(k^2 / (4 E^2)) never exceeds e^3 ~ 20.

    References
    ----------
    Jordan, Richter & Sheng, J. Comput. Phys. 63, 222 (1986) (E = sqrt(pi/A));
    docs/theory.md §6 "Splitting parameter" (high-frequency cap).
    """
    kv = np.asarray(getval(k), dtype=float)
    area = float(getval(lattice.area))
    return np.maximum(np.sqrt(np.pi / area), kv / (2.0 * np.sqrt(MAX_SPLIT_EXPONENT)))


def _validate(k, k_par, d, tol, splitting):
    kv = np.asarray(getval(k))
    if kv.ndim != 1 or kv.size == 0:
        raise InputError("k", f"must be a 1-D array of wavenumbers [1/m]; got shape {kv.shape}")
    if np.iscomplexobj(kv) and np.any(np.imag(kv) != 0):
        raise InputError("k", "the lattice sums need a real (lossless) host wavenumber; "
                              f"got complex values such as {kv[np.imag(kv) != 0][0]!r}")
    kv = np.real(kv).astype(float)
    if not np.all(np.isfinite(kv)) or np.any(kv <= 0):
        raise InputError("k", f"must be positive and finite [1/m]; got min {np.min(kv)!r}")
    kp = np.asarray(getval(k_par))
    if kp.shape != (kv.size, 2) or np.iscomplexobj(kp) or not np.all(np.isfinite(kp)):
        raise InputError("k_par", f"must be a real finite array of shape ({kv.size}, 2) [1/m]; "
                                  f"got shape {kp.shape}")
    dv = np.asarray(getval(d))
    if dv.ndim != 2 or dv.shape[1] != 3 or dv.shape[0] == 0 or np.iscomplexobj(dv) \
            or not np.all(np.isfinite(dv)):
        raise InputError("d", f"must be a real finite array of shape (P, 3) [m]; "
                              f"got shape {dv.shape}")
    tol = float(tol)
    if not (1e-16 <= tol <= 1e-1):
        raise InputError("tol", f"must lie in [1e-16, 0.1]; got {tol!r}")
    if splitting is not None:
        sp = float(np.asarray(getval(splitting)))
        if not np.isfinite(sp) or sp <= 0:
            raise InputError("splitting", f"must be a positive finite value [1/m]; got {sp!r}")
    return kv, kp.astype(float), dv.astype(float), tol


def _stack_hessian(hxx, hxy, hxz, hyy, hyz, hzz):
    return np.stack([np.stack([hxx, hxy, hxz], axis=-1),
                     np.stack([hxy, hyy, hyz], axis=-1),
                     np.stack([hxz, hyz, hzz], axis=-1)], axis=-2)


def _ewald_spectral(k, k_par, lattice, rho, z, E, mn, z_is_zero):
    """Spectral (reciprocal-space) part of the Ewald split and its derivatives.

    docs/theory.md §6: G_spec = (1/4A) sum_g exp(i q.rho)/gamma [T+ + T-], with
    T+- = exp(+-gamma z) erfc(gamma/2E +- zE) = exp(-gamma^2/4E^2 - E^2 z^2) w(i(gamma/2E +- zE)).
    z-derivatives: F'/gamma = T+ - T-, F''/gamma = gamma (T+ + T-) - (4E/sqrt(pi)) exp(...).
    """
    q = order_wavevectors(lattice, k_par, mn)                       # (W, G, 2)
    gam = (-1j * kz_branch(k, q))[:, None, :]                        # (W, 1, G), Re >= 0
    Ec = E[:, None, None]
    zc = z[None, :, None]
    gauss = np.exp(-(gam / (2 * Ec)) ** 2 - (Ec * zc) ** 2)           # (W, P, G)
    tp = gauss * wofz(1j * (gam / (2 * Ec) + zc * Ec))
    tm = tp if z_is_zero else gauss * wofz(1j * (gam / (2 * Ec) - zc * Ec))
    phase = np.exp(1j * np.einsum("wgc,pc->wpg", q, rho)) / (4.0 * lattice.area)
    ssum = tp + tm
    f0 = phase * ssum / gam
    f2 = phase * (gam * ssum - (4.0 / _SQRT_PI) * Ec * gauss)
    qx, qy = q[:, None, :, 0], q[:, None, :, 1]
    G = np.sum(f0, axis=-1)
    gx, gy = np.sum(1j * qx * f0, axis=-1), np.sum(1j * qy * f0, axis=-1)
    hxx = -np.sum(qx * qx * f0, axis=-1)
    hxy = -np.sum(qx * qy * f0, axis=-1)
    hyy = -np.sum(qy * qy * f0, axis=-1)
    hzz = np.sum(f2, axis=-1)
    if z_is_zero:
        gz = hxz = hyz = 0.0 * G
    else:
        f1 = phase * (tp - tm)
        gz = np.sum(f1, axis=-1)
        hxz, hyz = np.sum(1j * qx * f1, axis=-1), np.sum(1j * qy * f1, axis=-1)
    grad = np.stack([gx, gy, gz], axis=-1)
    return G, grad, _stack_hessian(hxx, hxy, hxz, hyy, hyz, hzz)


def _ewald_spatial(k, k_par, lattice, rho, z, E, nm, self_tol2):
    """Spatial (real-space) part of the Ewald split, its derivatives and the self term.

    docs/theory.md §6: f(R) = u/(8 pi R), u = exp(ikR) erfc(RE + ik/2E) + c.c.-partner,
    stably u = 2 X Re w(k/2E + iER), X = exp(k^2/4E^2 - E^2 R^2) (real k);
    u' = ik v - (4E/sqrt(pi)) X, u'' = -k^2 u + (8 E^3 R/sqrt(pi)) X.
    Terms with d - R = 0 are replaced by the regularized self term h0 and its Hessian.
    """
    R = lattice.points(nm)                                            # (N, 2)
    rx = rho[:, 0:1] - R[None, :, 0]                                  # (P, N)
    ry = rho[:, 1:2] - R[None, :, 1]
    rz = z[:, None] + 0.0 * R[None, :, 0]
    dist2 = rx * rx + ry * ry + rz * rz
    is_self = np.asarray(getval(dist2)) <= self_tol2                   # plain (P, N)
    dist = np.sqrt(np.where(is_self, 1e6 * self_tol2, dist2))          # no 0 under sqrt
    unit = [rx / dist, ry / dist, rz / dist]

    kc, Ec = k[:, None, None], E[:, None, None]
    Rc = dist[None, :, :]
    ER = Ec * Rc
    X = np.exp((kc / (2 * Ec)) ** 2 - ER * ER)
    wb = wofz(kc / (2 * Ec) + 1j * ER)
    u0 = 2.0 * X * np.real(wb)
    u1 = 2.0 * kc * X * np.imag(wb) - (4.0 / _SQRT_PI) * Ec * X
    u2 = -kc * kc * u0 + (8.0 / _SQRT_PI) * Ec ** 3 * Rc * X
    f0 = u0 / (8 * np.pi * Rc)
    f1 = (u1 - u0 / Rc) / (8 * np.pi * Rc)
    f2 = (u2 - 2 * u1 / Rc + 2 * u0 / Rc ** 2) / (8 * np.pi * Rc)

    phase = np.exp(1j * np.dot(k_par, np.transpose(R)))               # (W, N)
    keep = (~is_self).astype(float)
    wgt = phase[:, None, :] * keep[None, :, :]                        # (W, P, N)
    G = np.sum(wgt * f0, axis=-1)
    grad = np.stack([np.sum(wgt * f1 * uc, axis=-1) for uc in unit], axis=-1)
    radial = wgt * (f2 - f1 / Rc)
    iso = np.sum(wgt * f1 / Rc, axis=-1)
    hess = _stack_hessian(*[np.sum(radial * unit[a] * unit[b], axis=-1) + (iso if a == b else 0)
                            for a, b in ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))])

    if np.any(is_self):
        # docs/theory.md §6: h0 = -(ik/4pi) erfc(-ik/2E) - (E/(2 pi^1.5)) exp(k^2/4E^2),
        # erfc(-ik/2E) = exp(k^2/4E^2) w(k/2E);
        # d_i d_j h(0) = (delta_ij/3) [E^3 exp(k^2/4E^2)/pi^1.5 - k^2 h0]
        ex = np.exp((k / (2 * E)) ** 2)
        h0 = -(1j * k / (4 * np.pi)) * ex * wofz(k / (2 * E)) - E / (2 * np.pi ** 1.5) * ex
        hh = (E ** 3 * ex / np.pi ** 1.5 - k * k * h0) / 3.0
        self_phase = np.dot(phase, np.transpose(is_self.astype(float)))  # (W, P)
        G = G + self_phase * h0[:, None]
        hess = hess + (self_phase * hh[:, None])[:, :, None, None] * np.eye(3)
    return G, grad, hess


def _weyl(k, k_par, lattice, rho, z, mn):
    """Plain spectral (Weyl) sum, valid for z != 0.

    docs/theory.md §6: G = (i/2A) sum_g exp(i q.rho + i kz |z|)/kz; derivatives bring down
    i q_x, i q_y and i kz sign(z).
    """
    q = order_wavevectors(lattice, k_par, mn)                       # (W, G, 2)
    kz = kz_branch(k, q)[:, None, :]                                 # (W, 1, G)
    sgn = np.sign(np.asarray(getval(z)))                             # plain (P,)
    absz = (z * sgn)[None, :, None]
    expo = 1j * np.einsum("wgc,pc->wpg", q, rho) + 1j * kz * absz
    term = (0.5j / lattice.area) * np.exp(expo) / kz                 # (W, P, G)
    qx, qy = q[:, None, :, 0], q[:, None, :, 1]
    kzs = kz * sgn[None, :, None]
    G = np.sum(term, axis=-1)
    grad = np.stack([np.sum(1j * qx * term, axis=-1), np.sum(1j * qy * term, axis=-1),
                     np.sum(1j * kzs * term, axis=-1)], axis=-1)
    hess = _stack_hessian(-np.sum(qx * qx * term, axis=-1), -np.sum(qx * qy * term, axis=-1),
                          -np.sum(qx * kzs * term, axis=-1), -np.sum(qy * qy * term, axis=-1),
                          -np.sum(qy * kzs * term, axis=-1), -np.sum(kz * kz * term, axis=-1))
    return G, grad, hess


def _ewald_reach(kv, E, L, zmax):
    """Plain truncation radii of the Ewald split, maximized over the wavelength axis 0:
    (spectral |q| cutoff, spatial |R| cutoff)."""
    q_cut = np.max(np.sqrt(kv ** 2 + 4 * E ** 2 * (np.sqrt(L) + zmax * E) ** 2), axis=0)
    r_cut = np.max(np.sqrt(L + (kv / (2 * E)) ** 2) / E, axis=0)
    return q_cut, r_cut


def _weyl_reach(kv, L, zmin):
    """Plain |q| cutoff of the Weyl sum (evanescent decay exp(-sqrt(q^2-k^2)|z|) <= e^-L)."""
    return np.max(np.sqrt(kv ** 2 + (L / zmin) ** 2), axis=0)


def lattice_green_derivatives(k, k_par, lattice: Lattice, d, *, tol=1e-8, splitting=None):
    """Quasi-periodic scalar Green's function of a 2D lattice, with gradient and Hessian.

    Parameters
    ----------
    k : array (W,) — host wavenumber n_h omega / c [1/m], real and positive
    k_par : array (W, 2) — Bloch wavevector (in-plane incident wavevector) [1/m]
    lattice : Lattice — lattice vectors [m] (may be traced)
    d : array (P, 3) — displacements r_i - r_j [m] (x, y in-plane, z normal)
    tol : float — relative accuracy target of the truncated sums [dimensionless]
    splitting : float or None — Ewald splitting parameter E [1/m]; default
        ``splitting_parameter(k, lattice)``

    Returns
    -------
    G : complex array (W, P) — sum_R exp(i k_par.R) g(d - R) [1/m]
    grad : complex array (W, P, 3) — its gradient w.r.t. d [1/m^2]
    hess : complex array (W, P, 3, 3) — its Hessian w.r.t. d [1/m^3]
    A term with d - R = 0 is replaced by its regularized limit (module docstring).

    Notes
    -----
    Differentiable by autograd w.r.t. ``k``, ``k_par``, the lattice vectors and ``d``.
    E and the truncations use plain values (the result does not depend on E).
    Displacements with z != 0 use the Weyl sum when it needs fewer terms than the
    Ewald split (roughly |z| above one period).

    References
    ----------
    Linton, SIAM Rev. 52, 630 (2010) (Ewald method for 2D lattices in 3D);
    Jordan, Richter & Sheng, J. Comput. Phys. 63, 222 (1986); docs/theory.md §6 (split,
    derivatives, regularized self term, Faddeeva form — re-derived and checked there).
    """
    kv, kpv, dv, tol = _validate(k, k_par, d, tol, splitting)
    k, k_par, d = (x if isbox(x) else np.asarray(x) for x in (k, k_par, d))
    k_real = np.real(k) if np.iscomplexobj(getval(k)) else k
    W = kv.size
    plain = lattice.plain()
    area = float(plain.area)
    E = (splitting_parameter(kv, plain) if splitting is None
         else np.full(W, float(np.asarray(getval(splitting)))))
    L = np.log(1.0 / tol) + _MARGIN
    kpar_max = float(np.max(np.linalg.norm(kpv, axis=1)))
    b1, b2 = plain.reciprocal()

    # Choose Ewald or Weyl per displacement by the estimated number of terms.
    absz = np.abs(dv[:, 2])
    rho_abs = np.linalg.norm(dv[:, :2], axis=1)
    off_plane = absz > 1e-9 * np.sqrt(area)
    q_e, r_e = _ewald_reach(kv[:, None], E[:, None], L, absz[None, :])          # (P,) each
    cost_e = (q_e + kpar_max) ** 2 * area / (4 * np.pi) + np.pi * (r_e + rho_abs) ** 2 / area
    z_safe = np.where(off_plane, absz, 1.0)
    cost_w = (_weyl_reach(kv[:, None], L, z_safe[None, :]) + kpar_max) ** 2 * area / (4 * np.pi)
    use_weyl = off_plane & (cost_w <= cost_e)

    parts, order = [], []
    idx_e = np.nonzero(~use_weyl)[0]
    if idx_e.size:
        de = d[idx_e]
        zmax = float(np.max(absz[idx_e]))
        q_e, r_e = _ewald_reach(kv, E, L, zmax)
        mn = order_indices(plain, q_e + kpar_max)
        nm = integer_pairs_within(plain.a1, plain.a2, b1, b2, r_e + np.max(rho_abs[idx_e]))
        # all z = 0 and untraced: T- = T+ (halves the Faddeeva calls); a traced z keeps both
        # so that the z-derivatives of S are right at z = 0
        in_plane = zmax == 0.0 and not isbox(de)
        spec = _ewald_spectral(k_real, k_par, lattice, de[:, :2], de[:, 2], E, mn, in_plane)
        spat = _ewald_spatial(k_real, k_par, lattice, de[:, :2], de[:, 2], E, nm,
                              (1e-12 ** 2) * area)
        parts.append(tuple(a + b for a, b in zip(spec, spat, strict=True)))
        order.append(idx_e)
    idx_w = np.nonzero(use_weyl)[0]
    if idx_w.size:
        dw = d[idx_w]
        mn = order_indices(plain, _weyl_reach(kv, L, float(np.min(absz[idx_w]))) + kpar_max)
        parts.append(_weyl(k_real, k_par, lattice, dw[:, :2], dw[:, 2], mn))
        order.append(idx_w)

    if len(parts) == 1:
        return parts[0]
    inverse = np.argsort(np.concatenate(order))
    return tuple(np.concatenate([pa[i] for pa in parts], axis=1)[:, inverse] for i in range(3))


def lattice_green_dyadics(k, k_par, lattice: Lattice, d, *, tol=1e-8, splitting=None):
    """Lattice dipole-coupling dyadics S (electric-electric) and c (electric-magnetic).

    Parameters
    ----------
    k : array (W,) — host wavenumber [1/m], real and positive
    k_par : array (W, 2) — Bloch wavevector [1/m]
    lattice : Lattice — lattice vectors [m] (may be traced)
    d : array (P, 3) — displacements r_i - r_j [m]
    tol : float — relative accuracy target [dimensionless]
    splitting : float or None — Ewald splitting parameter E [1/m] (tests only)

    Returns
    -------
    S : complex array (W, P, 3, 3) — sum_R exp(i k_par.R) (I + grad grad / k^2) g(d - R) [1/m]
    c : complex array (W, P, 3) — grad G(d) / k [1/m]; the coupling acts as C v = c x v.
    For d on a lattice point (d = 0) the singular term is regularized (docs/theory.md §6).

    Notes
    -----
    Fields of the dipole sheet at r_i: E = k^2 (S P + i C M), Z H = k^2 (S M - i C P)
    (docs/theory.md §7). S is symmetric; S(d, k_par) = S(-d, -k_par) and
    c(d, k_par) = -c(-d, -k_par) (reciprocity).

    References
    ----------
    docs/theory.md §6, §7; García de Abajo, Rev. Mod. Phys. 79, 1267 (2007) (lattice sums of
    dipole arrays); Linton, SIAM Rev. 52, 630 (2010).
    """
    G, grad, hess = lattice_green_derivatives(k, k_par, lattice, d, tol=tol, splitting=splitting)
    k = k if isbox(k) else np.asarray(k)
    k_real = np.real(k) if np.iscomplexobj(getval(k)) else k
    S = G[:, :, None, None] * np.eye(3) + hess / (k_real ** 2)[:, None, None, None]
    c = grad / k_real[:, None, None]
    return S, c
