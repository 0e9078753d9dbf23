"""Coupled electric + magnetic dipole equations of a periodic array, with an optional stack.

Owns: the background (incident + stack-reflected/transmitted) field, the lattice
interaction (Ewald sums) plus the stack-reflected interaction (per diffraction order),
the solution for the induced moments of both incident helicities, and the outgoing
amplitudes of every diffraction order. Pure array code, autograd-differentiable.
Must not import: metrics, search, store, report, cli.

Normalization (docs/theory.md §1, §7): ``P = p/(eps0 n_h^2)``, ``M = Z m`` [V m];
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
from chiropt.planewaves import cross_matrix, kz_branch, order_basis
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
    s, p_up, p_down, k_up, k_down : (W, G, 3) basis vectors (docs/theory.md §5)
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

    Plane-wave amplitudes are components on (s, p) of each order, referenced at z_top:

    moments : (W, 2, N, 6) [P, M] per particle [V m]
    up_sp : (W, 2, G, 2) upward wave in the host above all particles (incident
        specular/transmitted part, direct emission, stack-reflected emission) [V/m]
    down_sp : (W, 2, G, 2) downward wave emitted by the particles [V/m]
    exit_sp : (W, 2, G, 2) downward wave just below the stack (z = 0-, in the substrate,
        basis (s, p_down) of the substrate), or in the host without substrate [V/m]
    incident_sp : (W, 2, 2) downward incident wave in the host at z_top (zero for
        substrate-side illumination) [V/m]
    local_E, local_H : (W, 2, N, 3) exciting fields E and Z H at the particles [V/m]
    rayleigh : (W,) smallest |kz|/k over host (and substrate) orders
    n_far : number of leading orders that can propagate in the host or substrate
    absorbed_particles : (W, 2) power the particles of one cell absorb, in units of
        1/(2 Z0) [V^2] (divided by the cell area and the incident flux it is an
        absorptance), when the solver computes it from its own unknowns (the multipole
        model); None for the dipole model, whose absorption chiropt.farfield takes from
        the polarizabilities
    """

    structure: Structure
    orders: OrderSet
    moments: Any
    up_sp: Any
    down_sp: Any
    exit_sp: Any
    incident_sp: Any
    local_E: Any
    local_H: Any
    rayleigh: Any
    eps_exit: Any
    n_far: int
    absorbed_particles: Any = None

    def up_vectors(self, count: int | None = None):
        """Upward amplitude vectors (W, 2, G', 3) of the first ``count`` orders."""
        o, n = self.orders, count or len(self.orders.mn)
        return _vectors(self.up_sp[:, :, :n], o.s[:, :n], o.p_up[:, :n])

    def exit_vectors(self, count: int | None = None):
        """Downward amplitude vectors below the stack (W, 2, G', 3), first ``count`` orders."""
        o, n = self.orders, count or len(self.orders.mn)
        if self.structure.has_substrate:
            _, _, pd, _ = substrate_basis(self.structure, _slice_orders(o, n))
        else:
            pd = o.p_down[:, :n]
        return _vectors(self.exit_sp[:, :, :n], o.s[:, :n], pd)

    def incident_vector(self):
        """Downward incident amplitude vector in the host at z_top, (W, 2, 3)."""
        o = self.orders
        return _vectors(self.incident_sp[:, :, None, :], o.s[:, :1], o.p_down[:, :1])[:, :, 0]


def make_orders(structure: Structure, g_max: float, k_par=None) -> OrderSet:
    """Orders with |G| <= g_max [1/m] and their host plane-wave data (``k_par``: the
    structure's Bloch wavevector (W, 2) [1/m], if already computed)."""
    mn = order_indices(structure.lattice, g_max)
    q = order_wavevectors(structure.lattice, structure.k_par if k_par is None else k_par, mn)
    qq = q[..., 0] ** 2 + q[..., 1] ** 2
    kh = structure.k[:, None]
    kz = kz_branch(kh, qq)
    # exactly on a Rayleigh anomaly kz = 0: floor |kz| at the round-off level (flagged)
    floor = KZ_FLOOR * kh * np.ones(np.shape(getval(qq)))
    kz = np.where(np.abs(getval(kz)) < getval(floor), 1j * floor, kz)
    s, pu, pd, ku, kd = order_basis(q, kz, kh, structure.azimuth)
    return OrderSet(mn=mn, q=q, qn=np.sqrt(qq + 1e-300), kz=kz, s=s, p_up=pu, p_down=pd,
                    k_up=ku, k_down=kd)


MAX_ORDERS = 6000


def orders_radius(structure: Structure, k_par=None) -> float:
    """|G| cut [1/m] covering every propagating order and, with a stack, the evanescent
    orders the reflected interaction needs to ``structure.tolerance``.

    Evanescent orders reflected back to particles at heights h_i, h_j above the stack
    decay as exp(-|q|(h_i + h_j)) (docs/theory.md §5): keep |q| <= (ln(1/tol) + 3)/(2 h_min).
    The count is capped at about ``MAX_ORDERS`` (tiny particles touching the stack would
    need millions); the cap and its error estimate exp(-2 |q|max h_min) are warned about.
    """
    k0 = getval(structure.k0)
    kmax = k0.max() * float(getval(structure.n_host))
    if structure.has_substrate:
        kmax = max(kmax, float(np.max(np.real(np.sqrt(getval(structure.eps_substrate))) * k0)))
        if getval(structure.eps_layers).size:
            kmax = max(kmax, float(np.max(np.real(np.sqrt(getval(structure.eps_layers)))) *
                                   k0.max()))
    kpar = float(np.max(np.hypot(*getval(structure.k_par if k_par is None else k_par).T)))
    g = kmax + kpar
    if structure.has_substrate:
        h_min = float(np.min(getval(structure.centres)[:, 2]) - getval(structure.z_top))
        need = (np.log(1.0 / structure.tolerance) + 3.0) / (2.0 * h_min) + kmax + kpar
        b1, b2 = structure.lattice.plain().reciprocal()
        cell = abs(float(b1[0] * b2[1] - b1[1] * b2[0]))
        cap = float(np.sqrt(MAX_ORDERS * cell / np.pi))
        if need > max(cap, g):
            warnings.warn(f"reflected interaction truncated at {int(MAX_ORDERS)} orders "
                          f"(estimated relative error {np.exp(-2 * cap * h_min):.1e}); the "
                          "particles sit very close to the stack for their period",
                          RuntimeWarning, stacklevel=3)
            need = max(cap, g)
        g = max(g, need)
    return g * 1.0000001


def _sp_vectors(orders: OrderSet):
    """6-vectors of the s and p channels, upward and downward, each (W, G, 2, 6).

    Channel axis [sigma, pi]: sigma± = (s, -p±), pi± = (p±, s). A plane wave with
    components (a_s, a_p) on (s, p±) has the 6-field (E, Z H) = a_s sigma± + a_p pi±
    (since k± x s = -p±, k± x p± = s), and a dipole sheet (P, M) radiates into it
    a_s = pref sigma±.x, a_p = pref pi±.x with pref = i k^2/(2 A kz)
    (docs/theory.md §5: E_g = pref [(I - k k) P - k x M]).
    """
    s, pu, pd = orders.s, orders.p_up, orders.p_down
    W, G = np.shape(getval(s))[:2]
    up = np.reshape(np.concatenate([s, -pu, pu, s], axis=-1), (W, G, 2, 6))
    down = np.reshape(np.concatenate([s, -pd, pd, s], axis=-1), (W, G, 2, 6))
    return up, down


def _amplitudes(vec, phase, xr):
    """Emitted (s, p) amplitudes of every order: sum_j phase_gj (vec_g . x_j).

    vec (W, G, 2, 6), phase (W, G, N) (prefactor included), xr (W, 6, 2 N) the moments
    [w, a, (t, j)] -> (W, 2, G, 2) [helicity, order, channel].
    """
    W, G, N = np.shape(getval(phase))
    y = np.matmul(np.reshape(vec, (W, 2 * G, 6)), xr)  # (W, 2G, 2N): [(g, c), (t, j)]
    if N == 1:
        y = np.reshape(y, (W, G, 2, 2)) * np.reshape(phase, (W, G, 1, 1))
    else:
        y = np.sum(np.reshape(y, (W, G, 2, 2, N)) * np.reshape(phase, (W, G, 1, 1, N)),
                   axis=-1)
    return np.transpose(y, (0, 3, 1, 2))


def stack_for_orders(structure: Structure, orders: OrderSet, side: str):
    """Stack coefficients (r_s, r_p, t_s, t_p), each (W, G), of the orders, seen from
    ``side`` ('host' or 'substrate'); see :func:`chiropt.stack.stack_coefficients`."""
    eps_h = structure.n_host ** 2 * np.ones_like(structure.k0)
    return stack_coefficients(orders.qn, structure.k0, eps_h, structure.eps_layers,
                              structure.thicknesses, structure.eps_substrate, from_side=side)


def substrate_basis(structure: Structure, orders: OrderSet):
    """kz, p vectors (up, down) and wavevector/k0 (down) of the orders in the substrate."""
    k2 = np.sqrt(structure.eps_substrate)[:, None] * structure.k0[:, None]
    kz2 = kz_branch(k2, orders.qn ** 2)
    s, pu, pd, ku, kd = order_basis(orders.q, kz2, k2, structure.azimuth)
    kvec_down = kd * (k2 / structure.k0[:, None])[..., None]
    return kz2, pu, pd, kvec_down


def _vectors(comp, s, p):
    """Amplitude vectors a_s s + a_p p: comp (W, 2, G, 2), s, p (W, G, 3) -> (W, 2, G, 3)."""
    return np.einsum("wtgc,wgcd->wtgd", comp, np.stack([s, p], axis=-2))


def background_components(st: Structure, orders: OrderSet, coef=None):
    """(s, p) components of the (0,0)-order background waves, each (W, 2, 2) [V/m].

    Returns (D0, U0, X0): the downward incident wave in the host at z_top (zero for
    substrate-side illumination), the upward background wave in the host at z_top
    (specular reflection, or the wave transmitted from the substrate), and the downward
    background wave below the stack (transmitted, or specularly reflected in the
    substrate; the incident wave itself without a stack). ``coef``: the stack seen from
    the host for the orders (None without substrate). Incident helicity h has the
    components (i h, 1)/sqrt(2) on (s, p) (docs/theory.md §2, checked in test_conventions).
    """
    W = len(getval(st.k0))
    hel = np.array([[1j, 1.0], [-1j, 1.0]]) / np.sqrt(2.0)  # (helicity, [s, p]) of (p + i h s)
    kz0 = orders.kz[:, 0]
    zeros = np.zeros((W, 2, 2), dtype=complex)
    if st.side == "host":
        D0 = hel[None] * np.exp(-1j * kz0 * st.z_top)[:, None, None]
        if coef is None:
            return D0, zeros, D0
        U0 = D0 * np.stack([coef.r_s[:, 0], coef.r_p[:, 0]], axis=-1)[:, None]
        X0 = D0 * np.stack([coef.t_s[:, 0], coef.t_p[:, 0]], axis=-1)[:, None]
        return D0, U0, X0
    coef_s = stack_for_orders(st, _slice_order0(orders), "substrate")
    U0 = hel[None] * np.stack([coef_s.t_s[:, 0], coef_s.t_p[:, 0]], axis=-1)[:, None]
    X0 = hel[None] * np.stack([coef_s.r_s[:, 0], coef_s.r_p[:, 0]], axis=-1)[:, None]
    return zeros, U0, X0


def emission_phases(orders: OrderSet, rho, h, pref):
    """Phase factors of the orders for particles at in-plane rho (N, 2) and heights h (N,)
    above z_top [m]: q.rho and kz h (W, G, N), and the emission factors
    pref exp(-i q.rho -/+ i kz h) of an upward / downward wave (pref (W, G))."""
    W, G = np.shape(orders.kz)
    qr = np.matmul(orders.q, np.transpose(rho))
    kzh = np.reshape(orders.kz, (W, G, 1)) * h
    pref3 = np.reshape(pref, (W, G, 1))
    return qr, kzh, pref3 * np.exp(-1j * qr - 1j * kzh), pref3 * np.exp(-1j * qr + 1j * kzh)


def combine_orders(st: Structure, coef, up_c, down_c, U0, X0):
    """Total outgoing waves from the particles' emission and the background.

    Parameters: ``up_c``, ``down_c`` (W, 2, G, 2) emitted upward/downward components at
    z_top; ``U0``, ``X0`` (W, 2, 2) background (0,0)-order waves (see
    :func:`background_components`); ``coef`` the stack seen from the host (or None).

    Returns
    -------
    (up, exit, eps_exit): upward waves in the host above the particles (emission plus its
    stack reflection plus the background), downward waves below the stack (transmitted
    emission plus background), and the permittivity (W,) of that exit medium.
    """
    first = (np.arange(up_c.shape[2]) == 0)[None, None, :, None]
    if coef is None:
        return up_c, down_c + first * X0[:, :, None, :], st.n_host ** 2 * np.ones_like(st.k0)
    rr = np.stack([coef.r_s, coef.r_p], axis=-1)[:, None]
    tt = np.stack([coef.t_s, coef.t_p], axis=-1)[:, None]
    return (up_c + rr * down_c + first * U0[:, :, None, :],
            tt * down_c + first * X0[:, :, None, :], st.eps_substrate)


def far_orders_and_anomalies(st: Structure, orders: OrderSet, k_par=None, *, warn: bool = True):
    """Number of leading orders that can propagate in host or substrate, and the (W,)
    smallest |kz|/k of any order (0 on a Rayleigh anomaly; plain values). Emits
    :class:`RayleighAnomalyWarning` below ``RAYLEIGH_WARN`` when ``warn``."""
    k_par = st.k_par if k_par is None else k_par
    k_prop = orders_radius_far(st, k_par)
    g = getval(orders.q)[0] - getval(k_par)[0][None, :]
    n_far = int(np.sum(np.linalg.norm(g, axis=-1) <= k_prop))
    rayleigh = np.min(np.abs(getval(orders.kz)) / getval(st.k)[:, None], axis=1)
    if st.has_substrate:
        k2v = np.sqrt(getval(st.eps_substrate))[:, None] * getval(st.k0)[:, None]
        kz2v = np.sqrt(k2v ** 2 - getval(orders.qn) ** 2 + 0j)
        rayleigh = np.minimum(rayleigh, np.min(np.abs(kz2v) / np.abs(k2v), axis=1))
    if warn and np.any(rayleigh < RAYLEIGH_WARN):
        bad = np.asarray(getval(st.wavelength_nm))[rayleigh < RAYLEIGH_WARN]
        warnings.warn(f"a diffraction order grazes (Rayleigh anomaly) at wavelength(s) "
                      f"{', '.join(f'{w:.6g}' for w in bad)} nm: results there are unreliable",
                      RayleighAnomalyWarning, stacklevel=3)
    return n_far, rayleigh


def solve(structure: Structure, *, warn: bool = True, g_max: float | None = None) -> Solution:
    """Solve the coupled dipole equations for both incident helicities.

    Parameters
    ----------
    structure : Structure (SI arrays; may be autograd-traced)
    warn : bool — emit :class:`RayleighAnomalyWarning` near a grazing order
    g_max : float, optional — keep at least the orders with |G| <= g_max [1/m]
        (near fields need evanescent orders; the far field and the stack pick their own)

    Returns
    -------
    Solution

    Notes
    -----
    The stack-reflected interaction is a sum over orders of rank-2 operators
    (s and p channels), assembled as one batched matrix product
    (W, 6N, G) @ (W, G, 6N) per channel. The sum over all orders contains each
    particle's own image (docs/theory.md §10).

    References
    ----------
    docs/theory.md §7 (coupled equations; validated by R + T = 1), §5, §10 (orders, substrate);
    García de Abajo, Rev. Mod. Phys. 79, 1267 (2007); Evlyukhin et al., PRB 82, 045404 (2010).
    """
    st = structure
    if not all(st.spherical):
        from chiropt.errors import InputError

        raise InputError("particles", "non-spherical particles need the multipole model "
                                      "(chiropt.model.run_model chooses it)")
    W = len(getval(st.k0))
    N = len(getval(st.radii))
    k = st.k
    k_par = st.k_par  # (a traced property: computed once)
    orders = make_orders(st, max(orders_radius(st, k_par), float(g_max or 0.0)), k_par)
    G = len(orders.mn)
    centres = st.centres
    h = centres[:, 2] - st.z_top
    rho = centres[:, :2]

    # -- lattice interaction (Ewald) ------------------------------------------------
    d = (centres[:, None, :] - centres[None, :, :]).reshape(N * N, 3)
    S, c = lattice_green_dyadics(k, k_par, st.lattice, d, tol=st.tolerance)
    S = S.reshape(W, N, N, 3, 3)
    Cm = cross_matrix(c.reshape(W, N, N, 3))
    top = np.concatenate([S, 1j * Cm], axis=-1)
    bottom = np.concatenate([-1j * Cm, S], axis=-1)
    Wmat = (k ** 2)[:, None, None, None, None] * np.concatenate([top, bottom], axis=-2)
    Wflat = np.transpose(Wmat, (0, 1, 3, 2, 4)).reshape(W, 6 * N, 6 * N)

    # -- plane-wave channels of every order ------------------------------------------
    vec_up, vec_down = _sp_vectors(orders)
    pref = 1j * k[:, None] ** 2 / (2.0 * st.lattice.area * orders.kz)  # (W, G)
    qr, kzh, ph_up, ph_down = emission_phases(orders, rho, h, pref)

    coef = None
    if st.has_substrate:
        coef = stack_for_orders(st, orders, "host")
        # stack-reflected interaction: both channels of every order in one matrix product
        # (W, 6N, 2G) @ (W, 2G, 6N), rows (i, a) receive, columns (j, b) emit
        recv_up = np.exp(1j * qr + 1j * kzh)  # receive an upward wave
        r = np.stack([coef.r_s, coef.r_p], axis=-1)  # (W, G, 2)
        recv = (np.reshape(recv_up, (W, G, 1, N, 1)) * np.reshape(r, (W, G, 2, 1, 1))
                * np.reshape(vec_up, (W, G, 2, 1, 6)))
        emit_down = np.reshape(ph_down, (W, G, 1, N, 1)) * np.reshape(vec_down, (W, G, 2, 1, 6))
        Wflat = Wflat + np.matmul(np.transpose(np.reshape(recv, (W, 2 * G, 6 * N)), (0, 2, 1)),
                                  np.reshape(emit_down, (W, 2 * G, 6 * N)))

    # -- background field: (0,0)-order components on (s, p) ------------------------------
    D0, U0, X0 = background_components(st, orders, coef)
    kz0 = orders.kz[:, 0]
    ph0 = np.exp(1j * np.einsum("wc,nc->wn", orders.q[:, 0], rho))  # (W, N)
    dn = (ph0 * np.exp(-1j * kz0[:, None] * h[None, :]))[:, None, :, None]
    upp = (ph0 * np.exp(1j * kz0[:, None] * h[None, :]))[:, None, :, None]
    v0_up, v0_down = _sp_vectors(_slice_order0(orders))  # (W, 1, 2, 6)
    b = (np.reshape(np.matmul(D0, np.reshape(v0_down, (W, 2, 6))), (W, 2, 1, 6)) * dn
         + np.reshape(np.matmul(U0, np.reshape(v0_up, (W, 2, 6))), (W, 2, 1, 6)) * upp)
    # (W, 2, N, 6)

    # -- solve (I - alpha W) x = alpha b ------------------------------------------------
    alpha = np.concatenate([np.repeat(st.alpha_e[..., None], 3, axis=-1),
                            np.repeat(st.alpha_m[..., None], 3, axis=-1)], axis=-1)
    alpha = alpha.reshape(W, 6 * N)
    A = np.eye(6 * N)[None] - alpha[:, :, None] * Wflat
    rhs = alpha[:, :, None] * np.transpose(b.reshape(W, 2, 6 * N), (0, 2, 1))
    x = np.linalg.solve(A, rhs)  # (W, 6N, 2)
    xt = np.transpose(x, (0, 2, 1))  # (W, 2, 6N)
    moments = xt.reshape(W, 2, N, 6)
    loc = moments / alpha.reshape(W, 1, N, 6)

    # -- outgoing orders, components on (s, p) ------------------------------------------
    xr = np.reshape(np.transpose(np.reshape(x, (W, N, 6, 2)), (0, 2, 3, 1)), (W, 6, 2 * N))
    up_c = _amplitudes(vec_up, ph_up, xr)  # (W, 2, G, 2)
    down_c = _amplitudes(vec_down, ph_down, xr)
    up_c, exit_c, eps_exit = combine_orders(st, coef, up_c, down_c, U0, X0)
    n_far, rayleigh = far_orders_and_anomalies(st, orders, k_par, warn=warn)
    return Solution(structure=st, orders=orders, moments=moments, up_sp=up_c,
                    down_sp=down_c, exit_sp=exit_c, incident_sp=D0, local_E=loc[..., :3],
                    local_H=loc[..., 3:], rayleigh=rayleigh, eps_exit=eps_exit, n_far=n_far)


def _slice_orders(orders: OrderSet, n: int) -> OrderSet:
    """The first n orders."""
    return OrderSet(mn=orders.mn[:n], q=orders.q[:, :n], qn=orders.qn[:, :n],
                    kz=orders.kz[:, :n], s=orders.s[:, :n], p_up=orders.p_up[:, :n],
                    p_down=orders.p_down[:, :n], k_up=orders.k_up[:, :n],
                    k_down=orders.k_down[:, :n])


def _slice_order0(orders: OrderSet) -> OrderSet:
    return _slice_orders(orders, 1)


def orders_radius_far(st: Structure, k_par=None) -> float:
    """|G| cut [1/m] containing every order propagating in the host or the substrate."""
    k0 = getval(st.k0)
    kmax = k0.max() * float(getval(st.n_host))
    if st.has_substrate:
        kmax = max(kmax, float(np.max(np.real(np.sqrt(getval(st.eps_substrate))) * k0)))
    kpar = float(np.max(np.hypot(*getval(st.k_par if k_par is None else k_par).T)))
    return (kmax + kpar) * 1.0000001
