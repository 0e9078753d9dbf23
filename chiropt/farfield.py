"""Far field of the array: reflectance, transmittance, absorptance per helicity.

Owns: power fractions of all propagating diffraction orders, and an independent
absorptance: the power the dipoles absorb, or, when the solution carries it
(``Solution.absorbed_particles``, the multipole model), the power the particles absorb.
Reads any ``chiropt.solve.Solution`` the same way, whichever solver made it.
Must not import: multipole, search, store, report, cli.

All fractions are normalized to the z-directed power flux of the incident wave
(unit amplitude, in its medium of incidence).
"""

from __future__ import annotations

import autograd.numpy as np

from chiropt.planewaves import z_flux
from chiropt.solution import Solution


def _propagating_host_flux(sol: Solution, vectors, k_hat):
    """Summed z flux (units 1/(2 Z0)) of host orders, evanescent ones excluded, (W, 2)."""
    st, n = sol.structure, sol.n_far
    kz = sol.orders.kz[:, :n]
    prop = (np.real(kz) > 0) & (np.abs(np.imag(kz)) <= 1e-12 * st.k[:, None])
    f = z_flux(vectors, (k_hat[:, :n] * (st.n_host + 0j))[:, None])
    return np.sum(np.where(prop[:, None], f, 0.0), axis=-1)


def _exit_flux(sol: Solution):
    """Downward flux (negative, units 1/(2 Z0)) below the stack, summed over orders, (W, 2)."""
    st, o, n = sol.structure, sol.orders, sol.n_far
    if st.has_substrate:
        _, _, _, kvec = sol.substrate_orders(n)
        return np.sum(z_flux(sol.exit_vectors(n), kvec[:, None]), axis=-1)
    return _propagating_host_flux(sol, sol.exit_vectors(n), o.k_down)


def incident_flux(sol: Solution):
    """|z flux| of the unit-amplitude incident wave (units 1/(2 Z0)): n cos(theta), (W,)."""
    st = sol.structure
    n_in = st.n_incidence
    kin = np.real(n_in) * st.k0
    kpar2 = np.sum(st.k_par ** 2, axis=-1)
    return np.real(np.sqrt(kin ** 2 - kpar2 + 0j)) / st.k0


def power_fractions(sol: Solution) -> dict:
    """R, T, A = 1 - R - T and an independent absorbed fraction, each (W, 2) [+1, -1].

    R: power into the medium of incidence; T: into the other half space (for
    host-side illumination: the substrate, or the host below the array).
    A_dipoles: the fraction the dipoles absorb (NaN for particles without scalar
    polarizabilities); for a solution that carries ``absorbed_particles`` (the multipole
    model) it is instead ``A_particles``, that power per cell over the cell area and the
    incident flux, and both keys are returned with the same array.

    References
    ----------
    Absorbed power of a dipole with radiative correction:
    W_abs = (omega/2) eps |P|^2 (-Im(1/alpha) - k^3/(6 pi)) (Draine, ApJ 333, 848 (1988);
    docs/theory.md §7); fluxes from the Poynting vector of each order (docs/theory.md §11);
    particles' absorption from expansion coefficients: Mishchenko, Travis & Lacis (2002)
    §5.8 (chiropt.multipole.solve.absorbed_power).
    """
    st = sol.structure
    inc = incident_flux(sol)[:, None]
    up = _propagating_host_flux(sol, sol.up_vectors(sol.n_far), sol.orders.k_up) / inc
    down = -_exit_flux(sol) / inc
    if st.side == "host":
        R, T = up, down
    else:
        R, T = down, up
    if sol.absorbed_particles is not None:
        A_p = sol.absorbed_particles / (st.lattice.area * inc)
        return {"R": R, "T": T, "A": 1.0 - R - T, "A_particles": A_p, "A_dipoles": A_p}
    k = st.k
    k3 = (k ** 3 / (6 * np.pi))[:, None]
    P = sol.moments[..., :3]
    M = sol.moments[..., 3:]
    if not all(st.spherical):  # no scalar polarizabilities
        nan = np.full(np.shape(R), np.nan)
        return {"R": R, "T": T, "A": 1.0 - R - T, "A_dipoles": nan}
    loss_e = -np.imag(1.0 / st.alpha_e) - k3  # (W, N)
    loss_m = -np.imag(1.0 / st.alpha_m) - k3
    absorbed = (np.sum(np.abs(P) ** 2, axis=-1) * loss_e[:, None]
                + np.sum(np.abs(M) ** 2, axis=-1) * loss_m[:, None])  # (W, 2, N)
    A_dip = (st.k0 * st.n_host ** 2)[:, None] * np.sum(absorbed, axis=-1) / (
        st.lattice.area * inc)
    return {"R": R, "T": T, "A": 1.0 - R - T, "A_dipoles": A_dip}
