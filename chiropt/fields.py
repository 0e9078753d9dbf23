"""Near fields above a periodic array, as sums of diffraction orders.

Owns: the vertical extent of a region above the particles, the number of evanescent
orders a region needs for a tolerance, the plane-wave amplitudes of every order at any
height above the particle tops, field maps on a grid over the unit cell, and the
fields ``.npz`` file (docs/cli.md, ``--fields``).
Must not import: metrics, search, store, report, cli.

Conventions (docs/theory.md §1, §5): SI units, ``exp(-i omega t)``,
heights ``z`` measured like :attr:`chiropt.structure.Structure.centres` (from the
substrate top, or from the particle bottoms without a substrate). Above every particle
the field is exactly

    E(rho, z) = sum_g [u_g e^{i kz_g (z - z0)} + delta_g0 d e^{-i kz_0 (z - z0)}] e^{i q_g . rho}

with ``u_g`` on ``(s, p_up)`` and the incident ``d`` on ``(s, p_down)`` of the order
(:mod:`chiropt.planewaves`); ``Z H = k_hat x E`` wave by wave (``Z = Z0/n_host``).
Helicity axis ``[+1, -1]``; the incident wave has unit amplitude (1 V/m).

The (0,0) order is taken from the :class:`~chiropt.solve.Solution` (it holds the
stack-reflected or transmitted background). Every other order is computed here from
the induced moments (direct emission plus its stack reflection), with phases referenced
at each particle, so that a far-field solve serves the near field and no amplitude is
ever referenced below its source (no overflow for tall gaps).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import ComputationError, InputError
from chiropt.lattice import order_indices, order_wavevectors
from chiropt.lattice.orders import KZ_FLOOR
from chiropt.planewaves import cross, kz_branch, order_basis
from chiropt.solution import Solution
from chiropt.stack import stack_coefficients
from chiropt.structure import Structure

NM = 1e-9


# ----------------------------------------------------------------------------------------
# region geometry and truncation
# ----------------------------------------------------------------------------------------

def particle_top(structure: Structure):
    """Height of the highest particle top, max_j (z_j + r_j) [m] (traced if the geometry is)."""
    return np.max(structure.centres[:, 2] + structure.half_heights)


def _safe_norm(qq):
    """sqrt(qq) with a finite derivative at qq = 0 (the (0,0) order at normal incidence)."""
    pos = qq > 0
    return np.where(pos, np.sqrt(np.where(pos, qq, 1.0)), 0.0 * qq)


def region_span(structure: Structure, region) -> tuple[Any, Any]:
    """Bottom and top heights (z_lo, z_hi) [m] of a region above the particle tops.

    Parameters
    ----------
    structure : Structure
    region : RegionSpec-like — ``kind`` ``'plane'`` (``height_nm`` above the highest
        particle top [nm]) or ``'slab'`` (``from_nm`` above the tops [nm],
        ``thickness_nm`` thick [nm]); the numeric fields may be autograd-traced

    Returns
    -------
    (z_lo, z_hi) : heights [m], measured like ``structure.centres``; equal for a plane.
    """
    top = particle_top(structure)
    kind = getattr(region, "kind", None)
    if kind == "surface":   # from the particle bottoms to a film's thickness above the tops
        bottom = np.min(structure.centres[:, 2] - structure.half_heights)
        return bottom, top + region.thickness_nm * NM
    if kind == "slab" and getattr(region, "origin", "tops") == "substrate":
        z_lo = region.from_nm * NM
        return z_lo, z_lo + region.thickness_nm * NM
    if kind == "plane":
        z = top + region.height_nm * NM
        return z, z
    if kind == "slab":
        z_lo = top + region.from_nm * NM
        return z_lo, z_lo + region.thickness_nm * NM
    raise InputError("region.kind", f"got {kind!r}, allowed: plane, slab, surface")


def representative_plane_nm(structure: Structure, region) -> float:
    """Height [nm] of the plane that represents a region in maps and field files: the
    plane itself, or a slab's mid-plane (plain float, measured like ``structure.centres``)."""
    z_lo, z_hi = region_span(structure, region)
    return float(getval(0.5 * (z_lo + z_hi))) / NM


def decay_exponent(tol: float) -> float:
    """x with x^3 exp(-x) = tol (x >= 3): the evanescent tail beyond |q| d = x/2 is below tol.

    The power in a ring of evanescent orders at |q| seen at distance d from a dipole sheet
    falls like |q|^3 exp(-2 |q| d) (pref ~ 1/|q|, (I - k k) P ~ q^2, ring size ~ |q|;
    docs/theory.md §5), hence x = 2 |q| d.
    """
    if not (0.0 < tol < 1.0):
        raise InputError("tolerance", f"got {tol!r}, allowed a number in (0, 1)")
    x = np.log(1.0 / tol) + 3.0
    for _ in range(8):
        x = np.log(1.0 / tol) + 3.0 * np.log(x)
    return float(x)


def region_g_max(structure: Structure, z_lo, *, tol: float | None = None) -> float:
    """Largest |G| [1/m] of the orders needed above height ``z_lo`` [m] to tolerance ``tol``.

    Parameters
    ----------
    structure : Structure
    z_lo : float — lowest height of the region [m] (above every particle top)
    tol : float, optional — relative truncation target (default ``structure.tolerance``)

    Notes
    -----
    An evanescent order emitted by particle j decays as exp(-|q| (z - z_j)) (stack-reflected
    paths are longer), so the nearest particle centre fixes the cut:
    ``|q| <= x / (2 d)``, ``d = z_lo - max_j z_j``, x from :func:`decay_exponent`.
    At least two rings of evanescent orders beyond the light line are kept, so the
    truncation estimate (share of the last ring) is always about evanescent orders.
    """
    tol = structure.tolerance if tol is None else tol
    st = structure
    d = float(getval(z_lo)) - float(onp.max(getval(st.centres)[:, 2]))
    if d <= 0:
        raise InputError("region", f"the region starts {d / NM:.4g} nm from the nearest particle "
                                   "centre; it must lie above the particle tops")
    kmax = float(onp.max(getval(st.k)))
    kpar = float(onp.max(onp.hypot(*getval(st.k_par).T)))
    b1, b2 = st.lattice.plain().reciprocal()
    b_min = float(min(onp.linalg.norm(b1), onp.linalg.norm(b2)))
    return kmax + kpar + max(decay_exponent(tol) / (2.0 * d), 2.0 * b_min)


# ----------------------------------------------------------------------------------------
# order amplitudes
# ----------------------------------------------------------------------------------------

@dataclass
class OrderContent:
    """Plane-wave content of the field at height ``z``, both incident helicities.

    Attributes
    ----------
    mn : (G, 2) int — order indices, (0, 0) first, sorted by |G|
    g_norm : (G,) — |G| [1/m] (plain values)
    q : (W, G, 2) — in-plane wavevectors q_g = k_par + G [1/m]
    kz : (W, G) — normal wavenumber in the host, Im >= 0 [1/m]
    k : (W,) — host wavenumber [1/m]
    up : (W, 2, 2, G) — upward wave of every order at height z [V/m]: axes helicity
        [+1, -1], component [s, p_up], order (components first: contiguous per order)
    down : (W, 2, 2) — downward (incident) wave of the (0,0) order on (s, p_down) at z [V/m]
        (zero for substrate-side illumination)
    z : height [m]
    azimuth : incidence azimuth [rad] (fixes s where q = 0): a number, or (W, 1) with one
        direction per wavelength row (``Structure.basis_azimuth``)
    n_host : host refractive index [-]
    """

    mn: Any
    g_norm: Any
    q: Any
    kz: Any
    k: Any
    up: Any
    down: Any
    z: Any
    azimuth: Any
    n_host: Any

    @cached_property
    def K(self):
        """|q|/k of every order, (W, G) [-] (made once per content)."""
        # explicit sum: numpy reductions over a length-2 last axis are ~40x slower
        return _safe_norm(self.q[..., 0] ** 2 + self.q[..., 1] ** 2) / self.k[:, None]

    @cached_property
    def kz_over_k(self):
        """kz/k = cos of the polar angle (imaginary for evanescent orders), (W, G)."""
        return self.kz / self.k[:, None]

    def basis(self):
        """Unit vectors s, p_up, p_down, k_up, k_down of every order, each (W, G, 3)."""
        return order_basis(self.q, self.kz, self.k[:, None], self.azimuth)

    def shifted(self, dz):
        """The same content at height ``z + dz``; ``dz`` [m] scalar, >= 0 (may be traced)."""
        ph = np.exp(1j * self.kz * dz)[:, None, None, :]
        ph0 = np.exp(-1j * self.kz[:, 0] * dz)[:, None, None]
        return OrderContent(self.mn, self.g_norm, self.q, self.kz, self.k, self.up * ph,
                            self.down * ph0, self.z + dz, self.azimuth, self.n_host)


def _kz_host(structure: Structure, q):
    """kz of the orders in the host, floored at the Rayleigh anomaly as the solver does."""
    kh = structure.k[:, None]
    kz = kz_branch(kh, q[..., 0] ** 2 + q[..., 1] ** 2)
    floor = KZ_FLOOR * kh * np.ones(kz.shape)
    return np.where(np.abs(getval(kz)) < getval(floor), 1j * floor, kz)


def _in_plane_unit(q, azimuth):
    """q_hat (W, G, 2): q/|q|, or the incidence azimuth direction where q = 0."""
    qq = q[..., 0] ** 2 + q[..., 1] ** 2
    nonzero = getval(qq) > 0
    safe = np.sqrt(np.where(nonzero, qq, 1.0))
    ones = np.ones(qq.shape)
    qx = np.where(nonzero, q[..., 0] / safe, np.cos(azimuth) * ones)
    qy = np.where(nonzero, q[..., 1] / safe, np.sin(azimuth) * ones)
    return qx, qy


def order_content(solution: Solution, z, *, g_max: float | None = None,
                  tol: float | None = None) -> OrderContent:
    """Plane-wave amplitudes of every diffraction order at height ``z`` above the particles.

    Parameters
    ----------
    solution : Solution — from :func:`chiropt.solve.solve` (the far-field solve suffices)
    z : float — height [m], measured like ``structure.centres``; must be above every
        particle top (may be autograd-traced)
    g_max : float, optional — keep the orders with |G| <= g_max [1/m]; default
        :func:`region_g_max` at ``z`` for ``tol``
    tol : float, optional — truncation target when ``g_max`` is not given

    Returns
    -------
    OrderContent — amplitudes [V/m] on (s, p) of every order at ``z``, both helicities

    Notes
    -----
    Order g != 0 of particle j (P, M the normalized moments, ``pref = i k^2/(2 A kz)``,
    ``p_up . v = (kz/k) q_hat . v - K v_z``, ``p_down . v = -(kz/k) q_hat . v - K v_z``):

        up_s = pref e^{-i q.rho_j} [e^{i kz (z - z_j)} (s.P - p_up.M)
                                    + r_s e^{i kz (z + z_j - 2 z_top)} (s.P - p_down.M)]
        up_p = pref e^{-i q.rho_j} [e^{i kz (z - z_j)} (p_up.P + s.M)
                                    + r_p e^{i kz (z + z_j - 2 z_top)} (p_down.P + s.M)]

    (``r_s, r_p`` of the stack seen from the host, zero without a substrate); the (0,0)
    order is the solution's ``up_sp`` and ``incident_sp`` carried from ``z_top`` to ``z``.

    References
    ----------
    docs/theory.md §5, §10 (sheet emission E_g = pref [(I - k k) P - k x M], substrate
    reflection per order); García de Abajo, Rev. Mod. Phys. 79, 1267 (2007), Sec. II.
    """
    st = solution.structure
    if g_max is None:
        g_max = region_g_max(st, z, tol=tol)
    mn = order_indices(st.lattice, g_max)
    if mn.shape[0] == 0 or tuple(mn[0]) != (0, 0):
        raise InputError("g_max", f"got {g_max!r}; it must keep at least the (0,0) order")
    zv = float(getval(z))
    top = float(getval(particle_top(st)))
    if zv < top - 1e-15:
        raise InputError("region", f"height {zv / NM:.6g} nm is below the particle tops "
                                   f"({top / NM:.6g} nm): the order expansion holds only above")
    if getattr(solution, "complete_orders", False):
        return _complete_content(solution, z)
    plain = st.lattice.plain()
    b1, b2 = plain.reciprocal()
    gv = mn[:, 0:1] * b1[None, :] + mn[:, 1:2] * b2[None, :]
    g_norm = onp.sqrt(onp.sum(gv ** 2, axis=1))

    mn_e = mn[1:]
    k = st.k
    q_all = order_wavevectors(st.lattice, st.k_par, mn)
    kz_all = _kz_host(st, q_all)
    q, kz = q_all[:, 1:], kz_all[:, 1:]
    # -- (0,0): from the solution, carried from z_top to z -----------------------------------
    kz0 = solution.orders.kz[:, 0]
    dz_top = z - st.z_top
    up0 = solution.up_sp[:, :, 0, :] * np.exp(1j * kz0 * dz_top)[:, None, None]   # (W, 2, 2)
    down0 = solution.incident_sp * np.exp(-1j * kz0 * dz_top)[:, None, None]
    if mn_e.shape[0] == 0:
        return OrderContent(mn, g_norm, q_all, kz_all, k, up0[..., None], down0, z,
                            st.basis_azimuth, st.n_host)
    if getattr(solution, "coefficients", None) is not None:
        return _multipole_content(solution, mn, g_norm, q_all, kz_all, k, down0, z)

    # -- other orders: emission from the moments ---------------------------------------------
    # (elementwise on contiguous (W, 2, G) arrays: stacking along short last axes and
    # reductions over them cost numpy an order of magnitude more)
    qx, qy = _in_plane_unit(q, st.basis_azimuth)                # (W, G)
    qn = _safe_norm(q[..., 0] ** 2 + q[..., 1] ** 2)
    K = qn / k[:, None]
    c = kz / k[:, None]
    W, N = K.shape[0], st.centres.shape[0]
    rho = st.centres[:, :2]
    zj = st.centres[:, 2]
    pref = 1j * k[:, None] ** 2 / (2.0 * st.lattice.area * kz)            # (W, G)
    if N == 1:
        inplane = np.exp(-1j * (q[..., 0] * rho[0, 0] + q[..., 1] * rho[0, 1]))[..., None]
    else:
        inplane = np.exp(-1j * np.einsum("wgc,nc->wgn", q, rho))          # (W, G, N)
    x = np.reshape(solution.moments, (W, 2, N, 6))
    xt = np.reshape(np.transpose(x, (0, 1, 3, 2)), (W, 12, N))            # (W, [t, a], N)

    def sums(phase):
        """sum_j phase_j x_j, per helicity and component: list of 6 arrays (W, 2, G)."""
        d = pref[..., None] * inplane * phase                              # (W, G, N)
        Y = np.reshape(np.matmul(xt, np.transpose(d, (0, 2, 1))), (W, 2, 6, -1))
        return [Y[:, :, a] for a in range(6)]

    cc, ux, uy, KK = c[:, None], qx[:, None], qy[:, None], K[:, None]    # (W, 1, G)
    Px, Py, Pz, Mx, My, Mz = sums(np.exp(1j * kz[..., None] * (z - zj)[None, None, :]))
    up_s = ux * (Py - cc * Mx) - uy * (Px + cc * My) + KK * Mz
    up_p = cc * (ux * Px + uy * Py) - KK * Pz + ux * My - uy * Mx
    if st.has_substrate:
        eps_h = st.n_host ** 2 * np.ones_like(st.k0)
        coef = stack_coefficients(qn, st.k0, eps_h, st.eps_layers, st.thicknesses,
                                  st.eps_substrate, from_side="host")
        path = (z - st.z_top) + (zj - st.z_top)
        Px, Py, Pz, Mx, My, Mz = sums(np.exp(1j * kz[..., None] * path[None, None, :]))
        up_s = up_s + coef.r_s[:, None] * (ux * (Py + cc * Mx) - uy * (Px - cc * My) + KK * Mz)
        up_p = up_p + coef.r_p[:, None] * (-cc * (ux * Px + uy * Py) - KK * Pz + ux * My
                                           - uy * Mx)
    up = np.concatenate([up0[..., None], np.stack([up_s, up_p], axis=2)], axis=3)
    return OrderContent(mn, g_norm, q_all, kz_all, k, up, down0, z, st.basis_azimuth,
                        st.n_host)


def _complete_content(solution: Solution, z) -> OrderContent:
    """Content at height ``z`` of a solution that computed every order it holds (the
    Fourier solver: its harmonics are the orders): the upward waves of all of them,
    carried from ``z_top`` to ``z``, plus the incident wave. The truncation is the
    solver's own (its harmonic count), not a choice of this module."""
    st, o = solution.structure, solution.orders
    dz = z - st.z_top
    up = np.transpose(solution.up_sp, (0, 1, 3, 2)) * np.exp(1j * o.kz * dz)[:, None, None, :]
    down0 = solution.incident_sp * np.exp(-1j * o.kz[:, 0] * dz)[:, None, None]
    b1, b2 = st.lattice.plain().reciprocal()
    gv = o.mn[:, 0:1] * b1[None, :] + o.mn[:, 1:2] * b2[None, :]
    g_norm = onp.sqrt(onp.sum(gv ** 2, axis=1))
    return OrderContent(o.mn, g_norm, o.q, o.kz, st.k, up, down0, z, st.basis_azimuth,
                        st.n_host)


def order_fields(content: OrderContent):
    """Complex E and Z H vectors of every order at the content's height, both helicities.

    Parameters
    ----------
    content : OrderContent

    Returns
    -------
    E, ZH : (W, 2, G, 3) complex [V/m]; the (0,0) order includes the incident downward
        wave. ``Z H = k_hat x E`` wave by wave, ``Z = Z0/n_host`` (multiply by ``n_host``
        for ``Z0 H``).

    References
    ----------
    docs/theory.md §5 (ZH_g = k_hat x E_g; basis (p, s, k) right-handed).
    """
    s, pu, pd, ku, kd = content.basis()
    up = content.up
    E_up = up[:, :, 0, :, None] * s[:, None] + up[:, :, 1, :, None] * pu[:, None]  # (W,2,G,3)
    H_up = cross(ku[:, None] * np.ones(E_up.shape), E_up)
    d = content.down
    E_d = d[..., 0:1] * s[:, None, 0] + d[..., 1:2] * pd[:, None, 0]      # (W, 2, 3)
    H_d = cross(kd[:, None, 0] * np.ones(E_d.shape), E_d)
    G = up.shape[3]
    first = (onp.arange(G) == 0)[None, None, :, None]
    return E_up + first * E_d[:, :, None, :], H_up + first * H_d[:, :, None, :]


# ----------------------------------------------------------------------------------------
# maps and the fields file
# ----------------------------------------------------------------------------------------

def cell_grid(lattice, n: int):
    """Grid points (i a1 + j a2)/n, i, j = 0..n-1, of the unit cell, (n, n, 2) [m].

    A plain average over this grid is the cell average (docs/cli.md, ``--grid N``).
    """
    n = _check_grid(n)
    i = onp.arange(n) / n
    a1, a2 = lattice.a1, lattice.a2
    return i[:, None, None] * a1[None, None, :] + i[None, :, None] * a2[None, None, :]


def _check_grid(n) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, onp.integer)) or not 1 <= n <= 4096:
        raise InputError("grid", f"got {n!r}, allowed an integer in [1, 4096]")
    return int(n)


def _phase_matrix(mn, n: int):
    """exp(i G . rho_ij) on the grid, (G, n*n): G . rho_ij = 2 pi (m i + n j)/n (plain)."""
    i = onp.arange(n)
    arg = (mn[:, 0, None, None] * i[None, :, None] + mn[:, 1, None, None] * i[None, None, :])
    return onp.exp(2j * onp.pi * (arg % n) / n).reshape(len(mn), n * n)


def field_maps(content: OrderContent, lattice, n: int):
    """E and Z H on the n x n cell grid at the content's height, both helicities.

    Parameters
    ----------
    content : OrderContent — from :func:`order_content`
    lattice : Lattice — the array's lattice [m]
    n : int — grid points per lattice vector

    Returns
    -------
    E, ZH : (W, 2, n, n, 3) complex [V/m] at the points of :func:`cell_grid`
        (``Z H`` with the host impedance; ``Z0 H = n_host Z H``)

    Notes
    -----
    ``E(rho) = e^{i k_par . rho} sum_g E_g e^{i G . rho}``; the grid average of any
    product of two fields equals the sum over orders exactly when n > 2 max(|m|, |n|)
    (discrete Parseval); otherwise orders alias, as sampling does.

    References
    ----------
    docs/theory.md §5 (fields as sums of orders).
    """
    n = _check_grid(n)
    E, ZH = order_fields(content)
    F = _phase_matrix(content.mn, n)                                   # (G, P)
    rho = cell_grid(lattice, n).reshape(n * n, 2)
    bloch = np.exp(1j * np.einsum("wc,pc->wp", content.q[:, 0], rho))  # q_00 = k_par
    W = E.shape[0]

    def to_grid(X):
        Xt = np.transpose(X, (0, 1, 3, 2))                              # (W, 2, 3, G)
        out = np.matmul(Xt, F) * bloch[:, None, None, :]                # (W, 2, 3, P)
        return np.transpose(out, (0, 1, 3, 2)).reshape(W, 2, n, n, 3)

    return to_grid(E), to_grid(ZH)


def _multipole_content(solution, mn, g_norm, q_all, kz_all, k, down0, z):
    """Order content of a multipole solution: its own upward order amplitudes at z_top
    (the solve kept at least these orders) carried to height z.

    A multipole solution's moments hold only the l = 1 part, so the orders are taken from
    the plane-wave expansion of all multipoles that the multipole solver computed.
    """
    st = solution.structure
    G = mn.shape[0]
    if len(solution.orders.mn) < G or not onp.array_equal(solution.orders.mn[:G], mn):
        raise ComputationError("internal: the multipole solution keeps fewer diffraction "
                               "orders than this plane needs; solve it with the plane's "
                               "g_max (region_g_max)")
    up = solution.up_sp[:, :, :G, :] * np.exp(1j * solution.orders.kz[:, :G] *
                                               (z - st.z_top))[:, None, :, None]
    return OrderContent(mn, g_norm, q_all, kz_all, k, np.transpose(up, (0, 1, 3, 2)), down0, z,
                        st.basis_azimuth, st.n_host)


def write_fields_npz(path, solution: Solution, *, z_nm: float, n: int,
                     tol: float | None = None) -> dict:
    """Write the fields file of docs/cli.md (``--fields FILE.npz --grid N``).

    Parameters
    ----------
    path : str or Path — output file (``.npz``)
    solution : Solution
    z_nm : float — plane height [nm], measured from the substrate top (or from the
        particle bottoms without a substrate); must be above the particle tops
    n : int — grid points per lattice vector
    tol : float, optional — order truncation target (default ``structure.tolerance``)

    Returns
    -------
    dict of the arrays written: ``x_nm, y_nm`` (n, n), ``z_nm`` (), ``E``, ``H``
    (W, 2, n, n, 3) complex [V/m] (``H`` stored as ``Z0 H``), ``wavelength_nm`` (W,).
    """
    st = solution.structure
    z = float(z_nm) * NM
    content = order_content(solution, z, tol=tol)
    E, ZH = field_maps(content, st.lattice.plain(), n)
    xy = cell_grid(st.lattice.plain(), n) / NM
    data = {"x_nm": onp.asarray(xy[..., 0]), "y_nm": onp.asarray(xy[..., 1]),
            "z_nm": onp.asarray(float(z_nm)),
            "E": onp.asarray(getval(E)),
            "H": onp.asarray(getval(ZH)) * float(getval(st.n_host)),
            "wavelength_nm": onp.asarray(getval(st.wavelength_nm), dtype=float)}
    onp.savez(path, **data)
    return data
