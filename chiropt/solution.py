"""The solution record every solver returns, and the order machinery the solvers share.

Owns: the diffraction orders kept (``OrderSet``: in-plane wavevectors, kz, (s, p) basis),
the common ``Solution`` record (plane-wave amplitudes of every order above and below the
structure, referenced at the top of the stack, both incident helicities), the background
(incident plus stack-reflected/transmitted) waves, the stack coefficients per order, and
the Rayleigh-anomaly bookkeeping. The dipole, multipole and Fourier solvers all fill a
``Solution`` (or a subclass adding what that solver can say), so the far field, the
near fields and the metrics never ask which solver ran. Pure array code,
autograd-differentiable. Must not import: any solver, fields, metrics, search, store,
report, cli.

Conventions (docs/theory.md §2, §5): SI units; incident amplitude |E_inc| = 1 V/m with
its phase referenced at the origin; plane-wave amplitudes of the orders are components on
(s, p) referenced at the top of the stack ``z_top`` (z = 0 without a substrate).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
from autograd.tracer import getval

from chiropt.lattice import order_indices, order_wavevectors
from chiropt.lattice.orders import KZ_FLOOR
from chiropt.planewaves import kz_branch, order_basis
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
        the polarizabilities, and for the Fourier model (A = 1 - R - T)
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

    def substrate_orders(self, count: int):
        """:func:`substrate_basis` of the first ``count`` orders, made once per count (the
        exit vectors and the exit flux both need it)."""
        kept = self.__dict__.setdefault("_substrate_orders", {})
        if count not in kept:
            kept[count] = substrate_basis(self.structure, _slice_orders(self.orders, count))
        return kept[count]

    def exit_vectors(self, count: int | None = None):
        """Downward amplitude vectors below the stack (W, 2, G', 3), first ``count`` orders."""
        o, n = self.orders, count or len(self.orders.mn)
        if self.structure.has_substrate:
            _, _, pd, _ = self.substrate_orders(n)
        else:
            pd = o.p_down[:, :n]
        return _vectors(self.exit_sp[:, :, :n], o.s[:, :n], pd)

    def incident_vector(self):
        """Downward incident amplitude vector in the host at z_top, (W, 2, 3)."""
        o = self.orders
        return _vectors(self.incident_sp[:, :, None, :], o.s[:, :1], o.p_down[:, :1])[:, :, 0]


def make_orders(structure: Structure, g_max: float | None, k_par=None, mn=None) -> OrderSet:
    """Orders with |G| <= g_max [1/m] and their host plane-wave data (``k_par``: the
    structure's Bloch wavevector (W, 2) [1/m], if already computed; ``mn``: the order
    indices (G, 2) themselves, instead of ``g_max``)."""
    if mn is None:
        mn = order_indices(structure.lattice, g_max)
    q = order_wavevectors(structure.lattice, structure.k_par if k_par is None else k_par, mn)
    qq = q[..., 0] ** 2 + q[..., 1] ** 2
    kh = structure.k[:, None]
    kz = kz_branch(kh, qq)
    # exactly on a Rayleigh anomaly kz = 0: floor |kz| at the round-off level (flagged)
    floor = KZ_FLOOR * kh * np.ones(np.shape(getval(qq)))
    kz = np.where(np.abs(getval(kz)) < getval(floor), 1j * floor, kz)
    s, pu, pd, ku, kd = order_basis(q, kz, kh, structure.basis_azimuth)
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
    s, pu, pd, ku, kd = order_basis(orders.q, kz2, k2, structure.basis_azimuth)
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
