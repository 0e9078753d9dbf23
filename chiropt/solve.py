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

import autograd.numpy as np
from autograd.tracer import getval

from chiropt.lattice import lattice_green_dyadics
from chiropt.planewaves import cross_matrix
from chiropt.solution import (  # noqa: F401  (re-exported: the dipole solver's record)
    RAYLEIGH_WARN,
    RayleighAnomalyWarning,
    OrderSet,
    Solution,
    make_orders,
    orders_radius,
    stack_for_orders,
    substrate_basis,
    background_components,
    emission_phases,
    combine_orders,
    far_orders_and_anomalies,
    orders_radius_far,
    _slice_orders,
    _slice_order0,
    _vectors,
    MAX_ORDERS,
)
from chiropt.structure import Structure


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
