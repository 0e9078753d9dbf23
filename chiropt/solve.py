"""Coupled electric + magnetic dipole equations of a periodic array, with an optional stack.

Owns: the background (incident + stack-reflected/transmitted) field, the lattice
interaction (Ewald sums) plus the stack-reflected interaction (per diffraction order),
the solution for the induced moments of both incident helicities, and the outgoing
amplitudes of every diffraction order. Pure array code, autograd-differentiable.
Must not import: metrics, search, store, report, cli.

Normalization (FORMULAS.md §0, §2): ``P = p/(eps0 n_h^2)``, ``M = Z m`` [V m];
``P = alpha_e E_loc``, ``M = alpha_m Z H_loc``;
``E_loc = E_bg + k^2 (S P + i C M) + E_refl``, ``Z H_loc = Z H_bg + k^2 (S M - i C P) + ZH_refl``
with ``C v = c x v``. Incident amplitude |E_inc| = 1 V/m, phase referenced at the origin.
Plane-wave amplitudes of the orders are referenced at the top of the stack ``z_top``
(z = 0 without a substrate).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
from autograd.tracer import getval

from chiropt.lattice import lattice_green_dyadics, order_indices, order_wavevectors
from chiropt.lattice.orders import KZ_FLOOR
from chiropt.planewaves import cross, cross_matrix, helicity_vectors, kz_branch, order_basis
from chiropt.stack import stack_coefficients
from chiropt.structure import Structure

RAYLEIGH_WARN = 1e-6


class RayleighAnomalyWarning(UserWarning):
    """A diffraction order grazes (|k_par + G| = k n): lattice sums diverge like 1/kz."""


@dataclass
class OrderSet:
    """Diffraction orders kept, with their plane-wave data in the host.

    mn : (G, 2) integer order indices, (0, 0) first
    q : (W, G, 2) in-plane wavevectors [1/m]; qn : (W, G) |q| [1/m]
    kz : (W, G) normal wavenumber in the host [1/m]
    s, p_up, p_down, k_up, k_down : (W, G, 3) basis vectors (FORMULAS.md §3)
    """

    mn: Any
    q: Any
    qn: Any
    kz: Any
    s: Any
    p_up: Any
    p_down: Any
    k_up: Any
    k_down: Any


@dataclass
class Solution:
    """Induced moments and order amplitudes for both incident helicities [+1, -1].

    moments : (W, 2, N, 6) [P, M] per particle [V m]
    up : (W, 2, G, 3) upward amplitude in the host at z_top, all sources (incident
        specular/transmitted part, direct emission, stack-reflected emission) [V/m]
    down_scat : (W, 2, G, 3) downward amplitude emitted by the particles at z_top [V/m]
    exit_down : (W, 2, G, 3) downward amplitude just below the stack (z = 0-, in the
        substrate), or in the host at z_top without substrate [V/m]
    incident_down : (W, 2, 3) downward incident amplitude in the host at z_top
        (zero for substrate-side illumination) [V/m]
    rayleigh : (W,) smallest |kz|/k over host (and substrate) orders
    """

    structure: Structure
    orders: OrderSet
    moments: Any
    up: Any
    down_scat: Any
    exit_down: Any
    incident_down: Any
    local_E: Any
    local_H: Any
    rayleigh: Any
    eps_exit: Any


def make_orders(structure: Structure, g_max: float) -> OrderSet:
    """Orders with |G| <= g_max [1/m] and their host plane-wave data."""
    mn = order_indices(structure.lattice, g_max)
    q = order_wavevectors(structure.lattice, structure.k_par, mn)
    qq = q[..., 0] ** 2 + q[..., 1] ** 2
    kh = structure.k[:, None]
    kz = kz_branch(kh, qq)
    # exactly on a Rayleigh anomaly kz = 0: floor |kz| at the round-off level (flagged)
    floor = KZ_FLOOR * kh
    kz = np.where(np.abs(getval(kz)) < getval(floor), 1j * floor, kz)
    s, pu, pd, ku, kd = order_basis(q, kz, kh, structure.azimuth)
    return OrderSet(mn=mn, q=q, qn=np.sqrt(qq + 1e-300), kz=kz, s=s, p_up=pu, p_down=pd,
                    k_up=ku, k_down=kd)


def orders_radius(structure: Structure) -> float:
    """|G| cut [1/m] covering every propagating order and, with a stack, the evanescent
    orders the reflected interaction needs to ``structure.tolerance``.

    Evanescent orders reflected back to particles at heights h_i, h_j above the stack
    decay as exp(-|q|(h_i + h_j)) (FORMULAS.md §3): keep |q| <= (ln(1/tol) + 3)/(2 h_min).
    """
    k0 = getval(structure.k0)
    kmax = k0.max() * float(getval(structure.n_host))
    if structure.has_substrate:
        kmax = max(kmax, float(np.max(np.real(np.sqrt(getval(structure.eps_substrate))) * k0)))
        if getval(structure.eps_layers).size:
            kmax = max(kmax, float(np.max(np.real(np.sqrt(getval(structure.eps_layers)))) *
                                   k0.max()))
    kpar = float(np.max(np.hypot(*getval(structure.k_par).T)))
    g = kmax + kpar
    if structure.has_substrate:
        h_min = float(np.min(getval(structure.centres)[:, 2]) - getval(structure.z_top))
        g = max(g, (np.log(1.0 / structure.tolerance) + 3.0) / (2.0 * h_min) + kmax + kpar)
    return g * 1.0000001


def _emission(orders: OrderSet, k, area):
    """Plane-wave emission operators (W, G, 3, 6) of a dipole sheet, up and down.

    ``E_g = (i k^2 / (2 A kz)) [(I - k k) P - k x M]`` (FORMULAS.md §3, Weyl expansion).
    """
    pref = 1j * k[:, None] ** 2 / (2.0 * area * orders.kz)
    out = []
    for kv in (orders.k_up, orders.k_down):
        proj = np.eye(3) - kv[..., :, None] * kv[..., None, :]
        op = np.concatenate([proj, -cross_matrix(kv)], axis=-1)
        out.append(pref[..., None, None] * op)
    return out


def _phases(orders: OrderSet, centres, z_top):
    """exp(-i q.rho_j) exp(-/+ i kz h_j) for upward/downward emission from particle j.

    Returns (up, down), each (W, G, N).
    """
    rho = centres[:, :2]
    h = centres[:, 2] - z_top
    qr = np.einsum("wgc,nc->wgn", orders.q, rho)
    kzh = orders.kz[..., None] * h[None, None, :]
    return np.exp(-1j * qr - 1j * kzh), np.exp(-1j * qr + 1j * kzh)


def _stack(structure: Structure, orders: OrderSet, side: str):
    eps_h = structure.n_host ** 2 * np.ones_like(structure.k0)
    return stack_coefficients(orders.qn, structure.k0, eps_h, structure.eps_layers,
                              structure.thicknesses, structure.eps_substrate, from_side=side)


def _reflect(coef, orders: OrderSet, D):
    """Upward amplitude r_s (s.D) s + r_p (p_down.D) p_up for downward amplitudes D (.., G, 3)."""
    a_s = np.sum(orders.s * D, axis=-1)
    a_p = np.sum(orders.p_down * D, axis=-1)
    return (coef.r_s * a_s)[..., None] * orders.s + (coef.r_p * a_p)[..., None] * orders.p_up


def substrate_basis(structure: Structure, orders: OrderSet):
    """Wavevectors/k0 (down) and p vectors (up, down) of the orders in the substrate."""
    k2 = np.sqrt(structure.eps_substrate)[:, None] * structure.k0[:, None]
    kz2 = kz_branch(k2, orders.qn ** 2)
    s, pu, pd, ku, kd = order_basis(orders.q, kz2, k2, structure.azimuth)
    kvec_down = kd * (k2 / structure.k0[:, None])[..., None]
    return kz2, pu, pd, kvec_down


def _transmit(coef, orders: OrderSet, sub_p_down, D):
    """Downward amplitude in the substrate at z = 0 for downward host amplitudes D at z_top."""
    a_s = np.sum(orders.s * D, axis=-1)
    a_p = np.sum(orders.p_down * D, axis=-1)
    return (coef.t_s * a_s)[..., None] * orders.s + (coef.t_p * a_p)[..., None] * sub_p_down


def solve(structure: Structure, *, warn: bool = True) -> Solution:
    """Solve the coupled dipole equations for both incident helicities.

    Parameters
    ----------
    structure : Structure (SI arrays; may be autograd-traced)
    warn : bool — emit :class:`RayleighAnomalyWarning` near a grazing order

    Returns
    -------
    Solution

    References
    ----------
    FORMULAS.md §2 (coupled equations; validated by R + T = 1), §3 (orders, substrate);
    García de Abajo, Rev. Mod. Phys. 79, 1267 (2007); Evlyukhin et al., PRB 82, 045404 (2010).
    """
    st = structure
    W = len(getval(st.k0))
    N = len(getval(st.radii))
    k = st.k
    area = st.lattice.area
    orders = make_orders(st, orders_radius(st))
    G = len(orders.mn)
    centres = st.centres
    h = centres[:, 2] - st.z_top

    # -- lattice interaction (Ewald) ------------------------------------------------
    d = (centres[:, None, :] - centres[None, :, :]).reshape(N * N, 3)
    S, c = lattice_green_dyadics(k, st.k_par, st.lattice, d, tol=st.tolerance)
    S = S.reshape(W, N, N, 3, 3)
    Cm = cross_matrix(c.reshape(W, N, N, 3))
    k2 = (k ** 2)[:, None, None, None, None]
    top = np.concatenate([S, 1j * Cm], axis=-1)
    bottom = np.concatenate([-1j * Cm, S], axis=-1)
    Wmat = k2 * np.concatenate([top, bottom], axis=-2)  # (W, N, N, 6, 6)

    em_up, em_down = _emission(orders, k, area)
    ph_up, ph_down = _phases(orders, centres, st.z_top)
    # receive an upward amplitude V at z_top: E = V e^{i q.rho_i + i kz h_i}, ZH = k_up x E
    recv = np.exp(1j * np.einsum("wgc,nc->wgn", orders.q, centres[:, :2])
                  + 1j * orders.kz[..., None] * h[None, None, :])  # (W, G, N)
    receive_op = np.concatenate([np.broadcast_to(np.eye(3), cross_matrix(orders.k_up).shape),
                                 cross_matrix(orders.k_up)], axis=-2)  # (W, G, 6, 3)

    if st.has_substrate:
        coef = _stack(st, orders, "host")
        s_, pu_, pd_ = orders.s, orders.p_up, orders.p_down
        Rf = (coef.r_s[..., None, None] * s_[..., :, None] * s_[..., None, :]
              + coef.r_p[..., None, None] * pu_[..., :, None] * pd_[..., None, :])
        K = np.einsum("wgab,wgbc,wgcd->wgad", receive_op, Rf, em_down)  # (W, G, 6, 6)
        Wref = np.einsum("wgi,wgj,wgab->wijab", recv, ph_down, K)
        Wmat = Wmat + Wref
    Wflat = np.transpose(Wmat, (0, 1, 3, 2, 4)).reshape(W, 6 * N, 6 * N)

    # -- background field -------------------------------------------------------------
    basis0 = tuple(v[:, 0] for v in (orders.s, orders.p_up, orders.p_down, orders.k_up,
                                     orders.k_down))
    s0, pu0, pd0, ku0, kd0 = basis0
    kz0 = orders.kz[:, 0]
    if st.side == "host":
        e_inc = helicity_vectors(s0, pd0)  # (W, 2, 3)
        D0 = e_inc * np.exp(-1j * kz0 * st.z_top)[:, None, None]
        if st.has_substrate:
            Dg = D0[:, :, None, :]
            o0 = _slice_order0(orders)
            coef0 = _stack(st, o0, "host")
            U0 = _reflect(coef0, o0, Dg)[:, :, 0, :]
            kz2, sub_pu, sub_pd, sub_kvec = substrate_basis(st, o0)
            X0 = _transmit(coef0, o0, sub_pd, Dg)[:, :, 0, :]
        else:
            U0 = np.zeros_like(D0)
            X0 = D0
    else:
        o0 = _slice_order0(orders)
        kz2, sub_pu, sub_pd, sub_kvec = substrate_basis(st, o0)
        e_inc = helicity_vectors(s0, sub_pu[:, 0])  # upward in the substrate, at z = 0
        coef_s = _stack(st, o0, "substrate")
        a_s = np.sum(s0[:, None, :] * e_inc, axis=-1)
        a_p = np.sum(sub_pu[:, 0][:, None, :] * e_inc, axis=-1)
        U0 = (coef_s.t_s[:, :1] * a_s)[..., None] * s0[:, None, :] + \
             (coef_s.t_p[:, :1] * a_p)[..., None] * pu0[:, None, :]
        X0 = (coef_s.r_s[:, :1] * a_s)[..., None] * s0[:, None, :] + \
             (coef_s.r_p[:, :1] * a_p)[..., None] * sub_pd[:, 0][:, None, :]
        D0 = np.zeros_like(U0)
    rho = centres[:, :2]
    ph0 = np.exp(1j * np.einsum("wc,nc->wn", orders.q[:, 0], rho))  # (W, N)
    dn = np.exp(-1j * kz0[:, None] * h[None, :]) * ph0
    upp = np.exp(1j * kz0[:, None] * h[None, :]) * ph0
    E_bg = D0[:, :, None, :] * dn[:, None, :, None] + U0[:, :, None, :] * upp[:, None, :, None]
    H_bg = (cross(kd0[:, None, :], D0)[:, :, None, :] * dn[:, None, :, None]
            + cross(ku0[:, None, :], U0)[:, :, None, :] * upp[:, None, :, None])
    b = np.concatenate([E_bg, H_bg], axis=-1)  # (W, 2, N, 6)

    # -- solve (I - alpha W) x = alpha b ------------------------------------------------
    alpha = np.concatenate([np.repeat(st.alpha_e[..., None], 3, axis=-1),
                            np.repeat(st.alpha_m[..., None], 3, axis=-1)], axis=-1)  # (W, N, 6)
    alpha = alpha.reshape(W, 6 * N)
    A = np.eye(6 * N)[None] - alpha[:, :, None] * Wflat
    rhs = alpha[:, :, None] * np.transpose(b.reshape(W, 2, 6 * N), (0, 2, 1))
    x = np.linalg.solve(A, rhs)  # (W, 6N, 2)
    moments = np.transpose(x, (0, 2, 1)).reshape(W, 2, N, 6)

    # local (exciting) field at each particle: x / alpha
    loc = moments / alpha.reshape(W, 1, N, 6)

    # -- outgoing orders --------------------------------------------------------------
    up_dir = np.einsum("wgab,wgn,wtnb->wtga", em_up, ph_up, moments)
    down = np.einsum("wgab,wgn,wtnb->wtga", em_down, ph_down, moments)
    zero_order = (np.arange(G) == 0)[None, None, :, None]
    if st.has_substrate:
        up = up_dir + _reflect(coef, orders, down) + zero_order * U0[:, :, None, :]
        kz2, sub_pu, sub_pd, sub_kvec = substrate_basis(st, orders)
        exit_down = _transmit(coef, orders, sub_pd[:, None], down) + \
            zero_order * X0[:, :, None, :]
        eps_exit = st.eps_substrate
    else:
        up = up_dir
        exit_down = down + zero_order * X0[:, :, None, :]
        eps_exit = st.n_host ** 2 * np.ones_like(st.k0)

    rayleigh = np.min(np.abs(getval(orders.kz)) / getval(k)[:, None], axis=1)
    if st.has_substrate:
        k2v = np.sqrt(getval(st.eps_substrate))[:, None] * getval(st.k0)[:, None]
        kz2v = np.sqrt(k2v ** 2 - getval(orders.qn) ** 2 + 0j)
        rayleigh = np.minimum(rayleigh, np.min(np.abs(kz2v) / np.abs(k2v), axis=1))
    if warn and np.any(rayleigh < RAYLEIGH_WARN):
        bad = np.asarray(getval(st.wavelength_nm))[rayleigh < RAYLEIGH_WARN]
        warnings.warn(f"a diffraction order grazes (Rayleigh anomaly) at wavelength(s) "
                      f"{', '.join(f'{w:.6g}' for w in bad)} nm: results there are unreliable",
                      RayleighAnomalyWarning, stacklevel=2)
    return Solution(structure=st, orders=orders, moments=moments, up=up, down_scat=down,
                    exit_down=exit_down, incident_down=D0, local_E=loc[..., :3],
                    local_H=loc[..., 3:], rayleigh=rayleigh, eps_exit=eps_exit)


def _slice_order0(orders: OrderSet) -> OrderSet:
    return OrderSet(mn=orders.mn[:1], q=orders.q[:, :1], qn=orders.qn[:, :1],
                    kz=orders.kz[:, :1], s=orders.s[:, :1], p_up=orders.p_up[:, :1],
                    p_down=orders.p_down[:, :1], k_up=orders.k_up[:, :1],
                    k_down=orders.k_down[:, :1])
