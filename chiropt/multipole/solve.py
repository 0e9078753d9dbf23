"""Coupled multipole (T-matrix) equations of a periodic array, with an optional stack.

Owns: the lattice interaction of all particles of the cell in the VSWF basis up to lmax
(Ewald sums of ``latticesums`` contracted with the tables of ``translation``), the
stack-reflected interaction per diffraction order (downward orders reflected with the
chiropt.stack coefficients and re-expanded in regular waves at every particle), the
solution for both incident helicities, and the outgoing (s, p) amplitudes of every
order, returned as a :class:`MultipoleSolution` that is a ``chiropt.solve.Solution``
(same component and reference-plane conventions), so farfield/fields code reads it
unchanged. Pure array code, autograd-differentiable.
Must not import: farfield, fields, metrics, search, store, report, cli (the far field
reads the solution; the solver computes no far-field quantity).

Equations: f_i = T_i e_i, e_i = b_i + sum_j [A^lat_ij + W^refl_ij] f_j, with b the
background (incident + stack-reflected) field's regular coefficients at particle i,
A^lat_ij = sum_R exp(i k_par.R) A(r_i - r_j - R) (R = 0 omitted for i = j) and W^refl
the sum over orders of (regular expansion at i) x (r_s, r_p) x (downward emission of j).
At lmax = 1 these are the coupled dipole equations of chiropt.solve (docs/theory.md §5, §7).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval, isbox

from chiropt.errors import InputError
from chiropt.multipole.coupled import coupled_solve
from chiropt.multipole.emission import radiated_orders
from chiropt.multipole.latticesums import lattice_sums
from chiropt.multipole.translation import translation_columns
from chiropt.sphericalwaves import (
    channel_modes,
    dipole_fields,
    dipole_moments,
    n_modes,
    order_projections,
)
from chiropt.solution import (
    Solution,
    _slice_orders,
    background_components,
    combine_orders,
    emission_phases,
    far_orders_and_anomalies,
    make_orders,
    stack_for_orders,
    orders_radius,
)
from chiropt.lattice.orders import order_indices
from chiropt.lattice.symmetry import order_orbits, rotation_order
from chiropt.structure import Structure

#: Cap on the number of orders kept for the reflected interaction.
MAX_ORDERS = 6000


@dataclass
class MultipoleSolution(Solution):
    """A :class:`chiropt.solve.Solution` from the multipole model, plus its coefficients.

    coefficients : (W, 2, N, 2K) outgoing VSWF coefficients f of every particle [V/m]
    exciting : (W, 2, N, 2K) regular coefficients e of the exciting field [V/m]
    tmatrices : (W, N, 2K, 2K) the particles' T-matrices [-]
    lmax : highest multipole degree
    ``moments``, ``local_E``, ``local_H`` hold the l = 1 (dipole) part in the
    normalization of chiropt.solve.
    """

    coefficients: Any = None
    exciting: Any = None
    tmatrices: Any = None
    lmax: int = 1


def _margin_power(lmax: int) -> float:
    """Power c of the (q/k)^c margin of the reflected-order cut (1, 2.5, 4, 5.5, ...)."""
    return 1.5 * lmax - 0.5


def _reflected_orders_radius(st: Structure, lmax: int) -> float:
    """|G| cut [1/m] for the stack-reflected interaction at multipole degree lmax.

    An evanescent order q reflected between particles at heights h_i, h_j above the
    stack carries exp(-q (h_i + h_j)) times the angular factors (q/k)^(l + l') of the
    emission and re-expansion (``chiropt.sphericalwaves``): keep q with
    2 q h_min - c ln(q/k) <= ln(1/tol) + 3 (fixed-point iteration), c = _margin_power(lmax).

    The margin power is set from measured truncation errors against references at
    tolerance 1e-14 with 1.3 x the orders (gaps 2-40 nm, radii 30-150 nm, one and two
    particles per cell, lmax 1-4, tol 1e-4 to 1e-8): the relative errors of the
    coefficients f, e (whole and per degree l) stay below ~0.02 tol; c = 2 lmax kept
    errors near 1e-4 tol with up to twice the orders. tests/test_multipole_cutoff.py
    checks error < tol on such cases.
    """
    g = orders_radius(st)
    if not st.has_substrate:
        return g
    k = float(onp.max(getval(st.k)))
    h = float(onp.min(getval(st.centres)[:, 2]) - getval(st.z_top))
    L = math.log(1.0 / st.tolerance) + 3.0
    q = max(k, L / (2 * h))
    for _ in range(50):
        q = max(k, (L + _margin_power(lmax) * math.log(max(q / k, 1.0))) / (2 * h))
    kpar = float(onp.max(onp.hypot(*getval(st.k_par).T)))
    need = q + k * float(onp.max(onp.real(onp.sqrt(getval(st.eps_substrate) + 0j)))) + kpar
    b1, b2 = st.lattice.plain().reciprocal()
    cell = abs(float(b1[0] * b2[1] - b1[1] * b2[0]))
    cap = math.sqrt(MAX_ORDERS * cell / math.pi)
    if need > max(cap, g):
        warnings.warn(f"reflected multipole interaction truncated at {MAX_ORDERS} orders; "
                      "the particles sit very close to the stack for their period",
                      RuntimeWarning, stacklevel=3)
        need = max(cap, g)
    return max(g, need) * 1.0000001


def _fold_reflected_orders(st: Structure, mn, keep: int, N: int):
    """(mn, fold, gram, mult): the orders the solve uses, the rotation order of the
    stack-reflected sum, the positions (G',) of the orders that sum runs over and their
    multiplicities (G',) (gram None: every order, once).

    The first ``keep`` orders are kept whole (their amplitudes leave the solve); the
    further evanescent ones, which only the stack-reflected coupling reads, are replaced
    by one representative per orbit of the lattice's rotation (``chiropt.lattice.
    symmetry``), and that coupling sums one representative per orbit of every order,
    weighted by the orbit's size. This holds where every order of an orbit has the same
    weight: one particle per cell (its in-plane phases cancel), a stack, and normal
    incidence held fixed (a plain zero Bloch vector, so q = G; the stack's coefficients
    and kz depend on |q| only). The coupling is the same sum
    (``chiropt.multipole.reflected``) at a fraction 1/n of the orders' cost.
    """
    k_par = st.k_par
    if (N != 1 or not st.has_substrate or isbox(k_par) or onp.any(onp.asarray(k_par))):
        return mn, 1, None, None
    fold, M = rotation_order(st.lattice)
    near = order_orbits(mn[1:keep], fold, M)          # (0, 0) is an orbit of its own
    far = order_orbits(mn[keep:], fold, M)
    if near is None or far is None:
        return mn, 1, None, None
    used = onp.concatenate([mn[:keep], mn[keep:][far]])
    gram = onp.concatenate([[0], 1 + near, keep + onp.arange(len(far))])
    mult = onp.concatenate([[1.0], onp.full(len(gram) - 1, float(fold))])
    return used, fold, gram, mult


def _block_diag(T):
    """(W, N, K2, K2) -> (W, N K2, N K2) block-diagonal."""
    W, N, K2, _ = np.shape(T)
    eye = onp.eye(N)
    return np.reshape(np.einsum("wiab,ij->wiajb", T, eye), (W, N * K2, N * K2))


def _check(structure, tmatrices, lmax):
    if not isinstance(lmax, int) or isinstance(lmax, bool) or not 1 <= lmax <= 8:
        raise InputError("model.lmax", f"must be an integer in [1, 8]; got {lmax!r}")
    W = len(getval(structure.k0))
    N = len(getval(structure.radii))
    K2 = n_modes(lmax)
    shape = onp.shape(getval(tmatrices))
    if shape != (W, N, K2, K2):
        raise InputError("tmatrices", f"must have shape (W, N, 2K, 2K) = {(W, N, K2, K2)} "
                                      f"for lmax = {lmax}; got {shape}")


def solve_multipole(structure: Structure, tmatrices, lmax: int, *, warn: bool = True,
                    g_max: float | None = None, trim: bool = False) -> MultipoleSolution:
    """Solve the coupled multipole equations for both incident helicities.

    Parameters
    ----------
    structure : Structure — SI description (chiropt.structure.build_structure); its
        dipole polarizabilities are not used
    tmatrices : array (W, N, 2K, 2K) — T-matrices of the N particles of the cell in the
        basis of ``chiropt.sphericalwaves`` [-]
    lmax : int — multipole degree of the basis, 1 <= lmax <= 8
    warn : bool — emit :class:`chiropt.solve.RayleighAnomalyWarning` near a grazing order
    g_max : float, optional — keep at least the orders with |G| <= g_max [1/m]
    trim : bool — keep in the solution only the orders with |G| <= max(g_max,
        :func:`chiropt.solution.orders_radius`): the further evanescent orders that the
        stack-reflected coupling needs are used inside the solve only, and their emitted
        amplitudes are not made (the same numbers for every order kept)

    Returns
    -------
    MultipoleSolution — order amplitudes on (s, p) referenced at z_top, as in
    chiropt.solve, and ``absorbed_particles`` (:func:`absorbed_power`).

    References
    ----------
    Kambe (1967-68) and Stefanou, Yannopapas & Modinos, Comput. Phys. Commun. 113, 49
    (1998) (layer-KKR: lattice-summed multipole coupling and plane-wave expansion of a
    layer of multipoles); Mishchenko, Travis & Lacis (2002) §5 (T-matrix); docs/theory.md
    §7, §10 (dipole limit, substrate per order).
    """
    _check(structure, tmatrices, lmax)
    st = structure
    W = len(getval(st.k0))
    N = len(getval(st.radii))
    K2 = n_modes(lmax)
    k = st.k
    mn = order_indices(st.lattice, max(_reflected_orders_radius(st, lmax), float(g_max or 0.0)))
    keep = (len(order_indices(st.lattice, max(orders_radius(st), float(g_max or 0.0))))
            if trim else len(mn))
    mn, fold, gram, mult = _fold_reflected_orders(st, mn, keep, N)
    orders = make_orders(st, None, mn=mn)
    centres = st.centres
    h = centres[:, 2] - st.z_top
    rho = centres[:, :2]
    area = st.lattice.area

    # -- lattice interaction (Ewald sums of scalar waves, translation tables) -----------
    # one particle per cell: the displacement is identically zero for every design, so it
    # is a plain array and the lattice sums carry no derivative along it
    d = (onp.zeros((1, 3)) if N == 1 else
         np.reshape(centres[:, None, :] - centres[None, :, :], (N * N, 3)))
    D = lattice_sums(k, st.k_par, st.lattice, d, 2 * lmax, tol=min(st.tolerance, 1e-10))
    A = np.matmul(D, translation_columns(lmax))                        # (W, N N, 2K 2K)
    if N == 1:
        Wmat = np.reshape(A, (W, K2, K2))
    else:
        A = np.reshape(A, (W, N, N, K2, K2))
        Wmat = np.reshape(np.transpose(A, (0, 1, 3, 2, 4)), (W, N * K2, N * K2))

    # -- plane-wave channels of every order ------------------------------------------------
    # P: [X.s, X.p] of every upward order (W, G, 2, K); the downward one is P * down_parity
    P = order_projections(orders.k_up, orders.s, orders.p_up, lmax)
    pref = 2 * np.pi / (area * k[:, None] * orders.kz)                # (W, G)
    qr, kzh, ph_up, ph_dn = emission_phases(orders, rho, h, pref)

    coef = reflected = None
    if st.has_substrate:
        coef = stack_for_orders(st, orders, "host")
        # stack-reflected interaction, both channels of every order in one product
        # (W, N 2K, 2G) @ (W, 2G, N 2K): rows (i, a) receive, columns (j, b) emit
        r = np.stack([coef.r_s, coef.r_p], axis=-1)                    # (W, G, 2)
        rc_up = np.exp(1j * qr + 1j * kzh)                             # receive upward wave
        # reception of the upward and emission of the downward orders, from P
        if gram is None:
            reflected = (rc_up, r, P, ph_dn, lmax)
        else:   # one order per orbit, weighted by the orbit's size
            reflected = (rc_up[:, gram], r[:, gram], P[:, gram],
                         ph_dn[:, gram] * mult[:, None], lmax, fold)

    # -- background field: (0,0)-order components on (s, p) ---------------------------------
    D0, U0, X0 = background_components(st, orders, coef)
    kz0 = orders.kz[:, 0]
    ph0 = np.exp(1j * np.einsum("wc,nc->wn", orders.q[:, 0], rho))   # (W, N)
    dn0 = (ph0 * np.exp(-1j * kz0[:, None] * h[None, :]))[:, None, :, None]
    up0 = (ph0 * np.exp(1j * kz0[:, None] * h[None, :]))[:, None, :, None]
    r0_up = channel_modes(P[:, 0], "receive", lmax)                   # (W, 2, 2K)
    r0_dn = channel_modes(P[:, 0], "receive", lmax, down=True)
    b = (np.matmul(D0, r0_dn)[:, :, None, :] * dn0
         + np.matmul(U0, r0_up)[:, :, None, :] * up0)                 # (W, 2, N, 2K)
    b = np.reshape(b, (W, 2, N * K2))

    # -- solve (I - T W) f = T b, e = b + W f (W with the stack-reflected part) -----------
    f, e = coupled_solve(_block_diag(tmatrices), Wmat, b, reflected)   # (W, 2, N 2K) each

    # -- outgoing orders, components on (s, p) --------------------------------------------
    n_far, rayleigh = far_orders_and_anomalies(st, orders, warn=warn)
    if trim:
        if keep < len(orders.mn):
            orders = _slice_orders(orders, keep)
            P, ph_up, ph_dn = P[:, :keep], ph_up[:, :keep], ph_dn[:, :keep]
            coef = None if coef is None else replace(
                coef, r_s=coef.r_s[:, :keep], r_p=coef.r_p[:, :keep],
                t_s=coef.t_s[:, :keep], t_p=coef.t_p[:, :keep])
    up_c, down_c = radiated_orders(f, P, ph_up, ph_dn, lmax)           # (W, 2, G, 2) each
    f4 = np.reshape(f, (W, 2, N, K2))
    up_c, exit_c, eps_exit = combine_orders(st, coef, up_c, down_c, U0, X0)

    e4 = np.reshape(e, (W, 2, N, K2))
    moments = dipole_moments(f4, k[:, None, None])
    local = dipole_fields(e4)
    return MultipoleSolution(structure=st, orders=orders, moments=moments, up_sp=up_c,
                             down_sp=down_c, exit_sp=exit_c, incident_sp=D0,
                             local_E=local[..., :3], local_H=local[..., 3:],
                             rayleigh=rayleigh, eps_exit=eps_exit, n_far=n_far,
                             absorbed_particles=absorbed_power(st, f4, e4),
                             coefficients=f4, exciting=e4, tmatrices=tmatrices, lmax=lmax)


def absorbed_power(structure: Structure, f, e):
    """Power the particles of one cell absorb, per helicity, (W, 2) in units of 1/(2 Z0) [V^2].

    sum_i (n_h/k^2) [-Re(e_i^H f_i) - |f_i|^2] over the particles i of the cell (extinction
    minus scattering), from the outgoing coefficients f and exciting coefficients e
    (W, 2, N, 2K) [V/m]; chiropt.farfield divides it by the cell area and the incident flux
    (an absorptance independent of R and T).

    References
    ----------
    Mishchenko, Travis & Lacis (2002) §5.8 (extinction and scattering from expansion
    coefficients); normalization fixed by the sphere's sigma_ext = (2 pi/k^2)
    sum (2l+1) Re(a_l + b_l) (Bohren & Huffman eq. 4.62), checked by a test.
    """
    st = structure
    ext = -np.real(np.sum(np.conj(e) * f, axis=(-1, -2)))
    sca = np.sum(np.abs(f) ** 2, axis=(-1, -2))
    return (st.n_host / st.k ** 2)[:, None] * (ext - sca)
