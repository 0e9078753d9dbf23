"""Tests of chiropt.stack: Fresnel coefficients, multilayer stacks and fluxes.

Evidence: the ``tmm`` package (reference library) for propagating waves; the
Fresnel formulas of Born & Wolf written out literally; a deliberately literal
solve of the boundary conditions (continuity of tangential E and H) for
evanescent waves and absorbing films; physical invariants (energy, reciprocity,
reference-plane shifts); autograd against finite differences.

Index values of films and substrates below are illustrative: each check
compares two computations with the same inputs, so no value is claimed for a
real material.
"""

import warnings

import autograd.numpy as anp
import numpy as np
import pytest
import tmm
from autograd import grad

from chiropt.errors import InputError
from chiropt.stack import (
    flux_factor,
    interface_coefficients,
    normal_wavenumber,
    power_flux_ratio,
    stack_coefficients,
)

NM = 1e-9
WAVELENGTHS_NM = np.array([450.0, 633.0, 800.0])
K0 = 2 * np.pi / (WAVELENGTHS_NM * NM)
ANGLES_DEG = np.array([0.0, 25.0, 55.0, 80.0])

# Stacks: (host index, film indices bottom first, thicknesses [nm], substrate index).
STACKS = {
    "Si3N4_50nm_on_SiO2": (1.0, [2.02], [50.0], 1.457),
    "ITO_like_on_glass_in_water": (1.33, [1.85 + 0.012j], [150.0], 1.52),
    "Au_mirror_SiO2_spacer_on_glass": (1.0, [0.18 + 3.4j, 1.457], [100.0, 80.0], 1.52),
    "three_films": (1.0, [2.4, 1.457, 2.02 + 0.004j], [80.0, 60.0, 40.0], 1.52),
}


def _orders_from_angles(n_in, angles_deg):
    """q of shape (W, N): one order per incidence angle in the medium of index n_in."""
    return np.outer(K0 * n_in, np.sin(np.deg2rad(angles_deg)))


def _stack_args(name):
    n_h, n_films, d_nm, n_s = STACKS[name]
    eps_layers = [n**2 for n in n_films]
    return n_h, n_films, d_nm, n_s, eps_layers, [d * NM for d in d_nm]


def _tmm_lists(n_h, n_films, d_nm, n_s, from_side):
    """tmm's lists run in the direction of travel: incidence medium first."""
    if from_side == "host":
        return [n_h, *n_films[::-1], n_s], [np.inf, *d_nm[::-1], np.inf]
    return [n_s, *n_films, n_h], [np.inf, *d_nm, np.inf]


def _coefficient(res, kind, pol):
    return getattr(res, f"{kind}_{pol}")


# ---------------------------------------------------------------------------
# Convention mapping to tmm, established once on a single interface.


@pytest.mark.parametrize("angle_deg", [0.0, 40.0])
def test_tmm_p_sign_mapping_single_interface(angle_deg):
    """Our r_p, t_p equal tmm's r, t for p (no sign flip); r_s = -r_p at normal incidence.

    Compared through a basis-free quantity: the ratio of the tangential field
    E_x (p) or E_y (s) of the reflected/transmitted wave to that of the incident
    wave. tmm's axis x coincides with ours (its z axis points along our -z).
    """
    n1, n2, lam_nm = 1.0, 1.5, 633.0
    th = np.deg2rad(angle_deg)
    k0 = np.array([2 * np.pi / (lam_nm * NM)])
    q = np.array([[n1 * k0[0] * np.sin(th)]])
    res = stack_coefficients(q, k0, n1**2, [], [], n2**2)
    kz1 = normal_wavenumber(q, k0, n1**2)[0, 0]
    kz2 = normal_wavenumber(q, k0, n2**2)[0, 0]
    # ours: incident p_hat^- has E_x = -kz1/k1, reflected p_hat^+ has +kz1/k1,
    # transmitted p_hat^- has -kz2/k2.
    ours_ex_r = -res.r_p[0, 0]
    ours_ex_t = res.t_p[0, 0] * (kz2 / (n2 * k0[0])) / (kz1 / (n1 * k0[0]))
    # tmm (reference library): position_resolved gives E_x of the total field;
    # incident forward wave of unit amplitude has E_x = cos(th).
    data = tmm.coh_tmm("p", [n1, n2], [np.inf, np.inf], th, lam_nm)
    ex_total_1 = tmm.position_resolved(0, 0.0, data)["Ex"]
    ex_total_2 = tmm.position_resolved(1, 0.0, data)["Ex"]
    np.testing.assert_allclose(ex_total_1 / np.cos(th) - 1, ours_ex_r, atol=1e-14)
    np.testing.assert_allclose(ex_total_2 / np.cos(th), ours_ex_t, atol=1e-14)
    # hence the mapping used in all further comparisons:
    np.testing.assert_allclose(res.r_p[0, 0], data["r"], atol=1e-14)
    np.testing.assert_allclose(res.t_p[0, 0], data["t"], atol=1e-14)
    data_s = tmm.coh_tmm("s", [n1, n2], [np.inf, np.inf], th, lam_nm)
    ey_total_1 = tmm.position_resolved(0, 0.0, data_s)["Ey"]
    np.testing.assert_allclose(ey_total_1 - 1, res.r_s[0, 0], atol=1e-14)
    if angle_deg == 0.0:
        # Born & Wolf §1.5.2: at normal incidence E_x^r/E_x^i = (n1 - n2)/(n1 + n2)
        np.testing.assert_allclose(ours_ex_r, (n1 - n2) / (n1 + n2), atol=1e-15)
        # docs/theory.md §10: r_s = -r_p at normal incidence
        np.testing.assert_allclose(res.r_s[0, 0], -res.r_p[0, 0], atol=1e-15)


# ---------------------------------------------------------------------------
# Single interfaces and multilayers against tmm (propagating incident waves).


SINGLE_INTERFACES = [
    # (incidence index, other index, from_side, angles [deg])
    pytest.param(1.0, 1.5, "host", [0.0, 30.0, 60.0, 85.0], id="air_to_glass"),
    pytest.param(1.33, 3.88 + 0.016j, "host", [0.0, 45.0, 70.0], id="water_to_lossy_Si"),
    # glass -> air from the substrate side; critical angle 41.8 deg, beyond it TIR
    pytest.param(1.5, 1.0, "substrate", [0.0, 30.0, 41.0, 50.0, 70.0], id="glass_to_air_TIR"),
]


@pytest.mark.parametrize("n_in, n_out, from_side, angles", SINGLE_INTERFACES)
@pytest.mark.parametrize("pol", ["s", "p"])
def test_single_interface_against_tmm(n_in, n_out, from_side, angles, pol):
    q = _orders_from_angles(n_in, np.array(angles))
    if from_side == "host":
        res = stack_coefficients(q, K0, n_in**2, [], [], n_out**2, from_side="host")
    else:
        res = stack_coefficients(q, K0, n_out**2, [], [], n_in**2, from_side="substrate")
    T = power_flux_ratio(_coefficient(res, "t", pol), q, K0, n_in**2, n_out**2, pol)
    for w, lam_nm in enumerate(WAVELENGTHS_NM):
        for j, ang in enumerate(angles):
            # tmm (reference library); complex exit angles beyond the critical angle
            ref = tmm.coh_tmm(pol, [n_in, n_out], [np.inf, np.inf], np.deg2rad(ang), lam_nm)
            assert abs(_coefficient(res, "r", pol)[w, j] - ref["r"]) < 1e-10
            assert abs(_coefficient(res, "t", pol)[w, j] - ref["t"]) < 1e-10
            assert abs(abs(_coefficient(res, "r", pol)[w, j]) ** 2 - ref["R"]) < 1e-10
            assert abs(T[w, j] - ref["T"]) < 1e-10


@pytest.mark.parametrize("name", list(STACKS))
@pytest.mark.parametrize("from_side", ["host", "substrate"])
@pytest.mark.parametrize("pol", ["s", "p"])
def test_multilayer_against_tmm(name, from_side, pol):
    n_h, n_films, d_nm, n_s, eps_layers, d = _stack_args(name)
    q = _orders_from_angles(n_h, ANGLES_DEG)
    res = stack_coefficients(q, K0, n_h**2, eps_layers, d, n_s**2, from_side=from_side)
    n_in, n_out = (n_h, n_s) if from_side == "host" else (n_s, n_h)
    T = power_flux_ratio(_coefficient(res, "t", pol), q, K0, n_in**2, n_out**2, pol)
    n_list, d_list = _tmm_lists(n_h, n_films, d_nm, n_s, from_side)
    for w, lam_nm in enumerate(WAVELENGTHS_NM):
        for j, ang in enumerate(ANGLES_DEG):
            th_in = np.arcsin(n_h * np.sin(np.deg2rad(ang)) / n_in)
            ref = tmm.coh_tmm(pol, n_list, d_list, th_in, lam_nm)  # tmm (reference library)
            assert abs(_coefficient(res, "r", pol)[w, j] - ref["r"]) < 1e-10
            assert abs(_coefficient(res, "t", pol)[w, j] - ref["t"]) < 1e-10
            assert abs(abs(_coefficient(res, "r", pol)[w, j]) ** 2 - ref["R"]) < 1e-10
            assert abs(T[w, j] - ref["T"]) < 1e-10


@pytest.mark.parametrize("pol", ["s", "p"])
def test_flux_into_lossy_exit_medium_against_tmm(pol):
    """p flux factor Re(kz conj(eps))/|eps| differs from Re(kz) in a lossy medium."""
    n_h, n_s = 1.0, 0.5 + 2.5j  # strongly absorbing substrate, illustrative
    q = _orders_from_angles(n_h, ANGLES_DEG)
    res = stack_coefficients(q, K0, n_h**2, [1.6**2], [30 * NM], n_s**2)
    T = power_flux_ratio(_coefficient(res, "t", pol), q, K0, n_h**2, n_s**2, pol)
    for w, lam_nm in enumerate(WAVELENGTHS_NM):
        for j, ang in enumerate(ANGLES_DEG):
            ref = tmm.coh_tmm(pol, [n_h, 1.6, n_s], [np.inf, 30.0, np.inf],
                              np.deg2rad(ang), lam_nm)  # tmm (reference library)
            assert abs(T[w, j] - ref["T"]) < 1e-10


@pytest.mark.parametrize("pol", ["s", "p"])
@pytest.mark.parametrize("n", [1.5, 0.3 + 3.0j, 2.0 + 0.5j])
@pytest.mark.parametrize("Q", [0.0, 0.4, 1.3, 3.0])
def test_flux_factor_from_explicit_poynting_vector(pol, n, Q):
    """S_z = (1/2) Re(E x conj(H))_z from explicit 3-vectors of one downgoing wave."""
    k0 = np.array([1.0e7])
    q = np.array([[Q * k0[0]]])
    kz = normal_wavenumber(q, k0, n**2)[0, 0]
    k = n * k0[0]
    k_hat = np.array([q[0, 0], 0.0, -kz]) / k
    s_hat = np.array([0.0, 1.0, 0.0])  # z_hat x q_hat with q along x
    e = s_hat if pol == "s" else np.cross(s_hat, k_hat)
    z0_h = n * np.cross(k_hat, e)  # Faraday's law for a plane wave, Z0 H = n k_hat x E
    # Born & Wolf §1.1.4 (Poynting vector); per unit Z0: S_z = 0.5 Re(E x conj(Z0 H))_z
    s_z = 0.5 * np.real(np.cross(e, np.conj(z0_h)))[2]
    expected = -flux_factor(q, k0, n**2, pol)[0, 0] / (2 * k0[0])  # downgoing: S_z < 0
    assert abs(s_z - expected) < 1e-14


# ---------------------------------------------------------------------------
# Evanescent orders: literal Fresnel formulas and the boundary conditions.


def _born_wolf_fresnel(n1, n2, Q):
    """Born & Wolf §1.5.2 with complex cos(theta): n_j cos(theta_j) = kz_j/k0."""
    c1 = np.sqrt(n1**2 - Q**2 + 0j)
    c2 = np.sqrt(n2**2 - Q**2 + 0j)
    c1 = np.where(c1.imag < 0, -c1, c1)  # decaying branch, Im >= 0
    c2 = np.where(c2.imag < 0, -c2, c2)
    cos1, cos2 = c1 / n1, c2 / n2
    r_s = (n1 * cos1 - n2 * cos2) / (n1 * cos1 + n2 * cos2)
    r_p = (n2 * cos1 - n1 * cos2) / (n2 * cos1 + n1 * cos2)
    t_s = 2 * n1 * cos1 / (n1 * cos1 + n2 * cos2)
    t_p = 2 * n1 * cos1 / (n2 * cos1 + n1 * cos2)
    return r_s, r_p, t_s, t_p


@pytest.mark.parametrize("n_h, n_s", [(1.0, 1.5), (1.33, 0.18 + 3.4j), (1.5, 1.0), (1.0, 3.88)])
@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_evanescent_single_interface_against_born_wolf(n_h, n_s, from_side):
    Q = np.array([0.0, 0.7, 1.2, 2.0, 5.0, 40.0])  # q/k0, beyond both light lines
    q = np.outer(K0, Q)
    n1, n2 = (n_h, n_s) if from_side == "host" else (n_s, n_h)
    expected = _born_wolf_fresnel(n1, n2, Q[None, :])
    res = stack_coefficients(q, K0, n_h**2, [], [], n_s**2, from_side=from_side)
    direct = interface_coefficients(q, K0, n1**2, n2**2)
    for got_stack, got_direct, want in zip(
        (res.r_s, res.r_p, res.t_s, res.t_p), direct, expected, strict=True
    ):
        np.testing.assert_allclose(got_direct, np.broadcast_to(want, q.shape), atol=1e-14)
        np.testing.assert_allclose(got_stack, np.broadcast_to(want, q.shape), atol=1e-13)


def _tangential(pol, n, kappa, a_down, a_up):
    """Tangential (E, Z0 H) of down+up waves: s -> (E_y, Z0 H_x), p -> (E_x, Z0 H_y).

    From E = a s_hat or a p_hat^{-/+} and Z0 H = n k_hat x E (see flux test).
    """
    if pol == "s":
        return a_down + a_up, kappa * (a_down - a_up)
    return (kappa / n) * (a_up - a_down), n * (a_up + a_down)


def test_boundary_conditions_from_reconstructed_amplitudes():
    """Tangential E and H continuous at every interface, evanescent in the host.

    Amplitudes in film j are rebuilt from our own coefficients of sub-stacks
    (film j as the 'host' of the films below it): at the film's bottom,
    downgoing = t / t_j and upgoing = r_j x downgoing.
    Check: Born & Wolf §1.1.3 (continuity of tangential E and H).
    """
    n_h, n_films, d_nm, n_s = 1.0, [2.4, 1.457, 2.02], [80.0, 60.0, 40.0], 1.52
    Q = np.array([0.3, 1.2, 1.7, 2.2, 3.0])  # 1.7 is evanescent in host and SiO2 film
    q = np.outer(K0, Q)
    full = stack_coefficients(q, K0, n_h**2, [n**2 for n in n_films],
                              [d * NM for d in d_nm], n_s**2)
    media = [n_s, *n_films, n_h]
    for pol in ("s", "p"):
        # amplitudes (down, up) at the bottom and top plane of each medium
        sub_kappa = normal_wavenumber(q, K0, n_s**2) / K0[:, None]
        planes = [(None, _tangential(pol, n_s, sub_kappa, _coefficient(full, "t", pol), 0))]
        for j, n_j in enumerate(n_films):
            part = stack_coefficients(q, K0, n_j**2, [n**2 for n in n_films[:j]],
                                      [d * NM for d in d_nm[:j]], n_s**2)
            kappa = normal_wavenumber(q, K0, n_j**2) / K0[:, None]
            down_bottom = _coefficient(full, "t", pol) / _coefficient(part, "t", pol)
            up_bottom = _coefficient(part, "r", pol) * down_bottom
            phase = np.exp(1j * kappa * K0[:, None] * d_nm[j] * NM)
            bottom = _tangential(pol, n_j, kappa, down_bottom, up_bottom)
            top = _tangential(pol, n_j, kappa, down_bottom / phase, up_bottom * phase)
            planes.append((bottom, top))
        host_kappa = normal_wavenumber(q, K0, n_h**2) / K0[:, None]
        planes.append((_tangential(pol, n_h, host_kappa, 1.0, _coefficient(full, "r", pol)),
                       None))
        assert len(planes) == len(media)
        for below, above in zip(planes[:-1], planes[1:], strict=True):
            for field_below, field_above in zip(below[1], above[0], strict=True):
                np.testing.assert_allclose(field_above, field_below, rtol=0, atol=1e-12)


def _literal_boundary_solve(pol, Q, n_h, n_films, d_k0, n_s, from_side):
    """Solve the 2(L+1) continuity equations as one dense linear system (one order).

    Unknowns: per film (down at its top, up at its bottom) — decaying references —
    then r and t. Fields: see ``_tangential``. Reference implementation, slow.
    """
    media = [n_s, *n_films, n_h]
    kap = [np.sqrt(n**2 - Q**2 + 0j) for n in media]
    kap = [-k if k.imag < 0 else k for k in kap]
    n_f = len(n_films)
    size = 2 * n_f + 2
    i_r, i_t = 2 * n_f, 2 * n_f + 1

    def unit(i):
        v = np.zeros(size, complex)
        v[i] = 1.0
        return v

    rows, rhs = [], []
    # interface m between medium m (below) and medium m+1 (above), at z_m
    for m in range(n_f + 1):
        # medium m at its top plane (coefficient vectors for down, up)
        if m == 0:
            if from_side == "host":
                down_b, up_b, const_b = unit(i_t), np.zeros(size), (0.0, 0.0)
            else:
                down_b, up_b, const_b = unit(i_r), np.zeros(size), (0.0, 1.0)
        else:
            ph = np.exp(1j * kap[m] * d_k0[m - 1])
            down_b, up_b, const_b = unit(2 * (m - 1)), unit(2 * (m - 1) + 1) * ph, (0.0, 0.0)
        # medium m+1 at its bottom plane
        if m == n_f:
            if from_side == "host":
                down_a, up_a, const_a = np.zeros(size), unit(i_r), (1.0, 0.0)
            else:
                down_a, up_a, const_a = np.zeros(size), unit(i_t), (0.0, 0.0)
        else:
            ph = np.exp(1j * kap[m + 1] * d_k0[m])
            down_a, up_a, const_a = unit(2 * m) * ph, unit(2 * m + 1), (0.0, 0.0)
        tb = _tangential(pol, media[m], kap[m], down_b, up_b)
        ta = _tangential(pol, media[m + 1], kap[m + 1], down_a, up_a)
        cb = _tangential(pol, media[m], kap[m], *const_b)
        ca = _tangential(pol, media[m + 1], kap[m + 1], *const_a)
        for k in range(2):
            rows.append(ta[k] - tb[k])
            rhs.append(cb[k] - ca[k])
    sol = np.linalg.solve(np.array(rows), np.array(rhs))
    return sol[i_r], sol[i_t]


@pytest.mark.parametrize("from_side", ["host", "substrate"])
@pytest.mark.parametrize("pol", ["s", "p"])
def test_lossy_evanescent_multilayer_against_literal_boundary_solve(from_side, pol):
    # Born & Wolf §1.1.3 continuity conditions, solved directly
    n_h, n_films, d_nm, n_s = 1.33, [0.18 + 3.4j, 1.457, 1.85 + 0.012j], [30.0, 90.0, 60.0], 1.52
    Q = np.array([0.0, 0.9, 1.4, 1.8, 2.6, 6.0])
    q = np.outer(K0, Q)
    res = stack_coefficients(q, K0, n_h**2, [n**2 for n in n_films],
                             [d * NM for d in d_nm], n_s**2, from_side=from_side)
    for w, k0 in enumerate(K0):
        d_k0 = [d * NM * k0 for d in d_nm]
        for j, Qj in enumerate(Q):
            r_ref, t_ref = _literal_boundary_solve(pol, Qj, n_h, n_films, d_k0, n_s, from_side)
            assert abs(_coefficient(res, "r", pol)[w, j] - r_ref) < 1e-12 * max(1, abs(r_ref))
            assert abs(_coefficient(res, "t", pol)[w, j] - t_ref) < 1e-12 * max(1, abs(t_ref))


# ---------------------------------------------------------------------------
# Invariants.


@pytest.mark.parametrize("from_side", ["host", "substrate"])
@pytest.mark.parametrize("pol", ["s", "p"])
def test_energy_conservation_lossless_stack(from_side, pol):
    """R + T = 1 for a lossless stack (Born & Wolf §1.5.3), also under TIR."""
    n_h, n_films, d_nm, n_s = 1.0, [2.4, 1.457, 2.02], [80.0, 60.0, 40.0], 1.52
    n_in, n_out = (n_h, n_s) if from_side == "host" else (n_s, n_h)
    q = _orders_from_angles(n_in, np.array([0.0, 20.0, 40.0, 60.0, 85.0]))
    res = stack_coefficients(q, K0, n_h**2, [n**2 for n in n_films],
                             [d * NM for d in d_nm], n_s**2, from_side=from_side)
    R = np.abs(_coefficient(res, "r", pol)) ** 2
    T = power_flux_ratio(_coefficient(res, "t", pol), q, K0, n_in**2, n_out**2, pol)
    np.testing.assert_allclose(R + T, 1.0, rtol=0, atol=1e-12)


@pytest.mark.parametrize("pol", ["s", "p"])
def test_transmission_reciprocity(pol):
    """kz_sub t_down = kz_host t_up for our E-amplitude basis, s and p.

    Our derivation (Lorentz reciprocity, Born & Wolf §1.6.2: the characteristic
    matrix in (E_t, H_t) has determinant 1): for s this is kz2 t_12 = kz1 t_21
    with t_12 = 2 kz1/(kz1 + kz2); for p the amplitudes along p_hat carry a factor
    n that cancels in the same identity. Holds with loss and evanescent orders.
    """
    n_h, n_films, d_nm, n_s = 1.33, [0.18 + 3.4j, 2.02], [20.0, 70.0], 1.5 + 0.01j
    q = np.outer(K0, [0.0, 0.5, 1.2, 1.45, 2.5, 8.0])
    args = (q, K0, n_h**2, [n**2 for n in n_films], [d * NM for d in d_nm], n_s**2)
    down = stack_coefficients(*args, from_side="host")
    up = stack_coefficients(*args, from_side="substrate")
    kz_h = normal_wavenumber(q, K0, n_h**2) / K0[:, None]
    kz_s = normal_wavenumber(q, K0, n_s**2) / K0[:, None]
    lhs = kz_s * _coefficient(down, "t", pol)
    rhs = kz_h * _coefficient(up, "t", pol)
    np.testing.assert_allclose(lhs, rhs, rtol=0, atol=1e-12)


@pytest.mark.parametrize("Q", [0.0, 0.6, 1.3, 2.5])
def test_single_interface_stokes_relations(Q):
    """r_21 = -r_12 and t_12 t_21 = 1 - r_12^2 (docs/theory.md §10, required by the recursion)."""
    q = np.outer(K0, [Q])
    for eps1, eps2 in ((1.0, 2.25), (1.77, (0.18 + 3.4j) ** 2)):
        a = interface_coefficients(q, K0, eps1, eps2)
        b = interface_coefficients(q, K0, eps2, eps1)
        for r12, r21, t12, t21 in ((a[0], b[0], a[2], b[2]), (a[1], b[1], a[3], b[3])):
            np.testing.assert_allclose(r21, -r12, rtol=0, atol=1e-14)
            np.testing.assert_allclose(t12 * t21, 1 - r12**2, rtol=0, atol=1e-14)


BASE = (1.0, [2.02 + 0.01j, 1.457], [70.0 * NM, 45.0 * NM], 1.52)
Q_MIXED = np.outer(K0, [0.0, 0.8, 1.3, 1.7, 3.0])  # propagating and evanescent


def _coeffs(res):
    return np.stack([res.r_s, res.r_p, res.t_s, res.t_p])


@pytest.mark.parametrize("from_side", ["host", "substrate"])
@pytest.mark.parametrize("position", [0, 1, 2])
def test_zero_thickness_film_changes_nothing(from_side, position):
    # common practice, no source: a film of zero thickness is no film
    n_h, eps_l, d, n_s = BASE
    ref = stack_coefficients(Q_MIXED, K0, n_h**2, eps_l, d, n_s**2, from_side=from_side)
    eps_new = eps_l[:position] + [(3.5 + 0.2j) ** 2] + eps_l[position:]
    d_new = d[:position] + [0.0] + d[position:]
    got = stack_coefficients(Q_MIXED, K0, n_h**2, eps_new, d_new, n_s**2, from_side=from_side)
    np.testing.assert_allclose(_coeffs(got), _coeffs(ref), rtol=0, atol=1e-14)


@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_split_film_changes_nothing(from_side):
    # common practice, no source: two touching films of one material are one film
    n_h, eps_l, d, n_s = BASE
    ref = stack_coefficients(Q_MIXED, K0, n_h**2, eps_l, d, n_s**2, from_side=from_side)
    got = stack_coefficients(Q_MIXED, K0, n_h**2, [eps_l[0], eps_l[0], eps_l[1]],
                             [30 * NM, 40 * NM, d[1]], n_s**2, from_side=from_side)
    np.testing.assert_allclose(_coeffs(got), _coeffs(ref), rtol=0, atol=1e-14)


@pytest.mark.parametrize("from_side", ["host", "substrate"])
@pytest.mark.parametrize("matched", ["host", "substrate"])
def test_index_matched_film_only_moves_reference_planes(from_side, matched):
    """A film of the host (top) or substrate (bottom) material only shifts a plane.

    Host-matched top film of thickness d: z_top moves up by d, so the host-side r
    gains exp(2 i kz_h d) and both t gain exp(i kz_h d). Substrate-matched bottom
    film: t gains exp(i kz_s d), and the substrate-side r gains exp(2 i kz_s d).
    (Plane-wave phase propagation; common practice, no source.)
    """
    n_h, eps_l, d, n_s = BASE
    extra = 55 * NM
    ref = stack_coefficients(Q_MIXED, K0, n_h**2, eps_l, d, n_s**2, from_side=from_side)
    if matched == "host":
        got = stack_coefficients(Q_MIXED, K0, n_h**2, [*eps_l, n_h**2], [*d, extra], n_s**2,
                                 from_side=from_side)
        ph = np.exp(1j * normal_wavenumber(Q_MIXED, K0, n_h**2) * extra)
        r_factor = ph**2 if from_side == "host" else 1.0
    else:
        got = stack_coefficients(Q_MIXED, K0, n_h**2, [n_s**2, *eps_l], [extra, *d], n_s**2,
                                 from_side=from_side)
        ph = np.exp(1j * normal_wavenumber(Q_MIXED, K0, n_s**2) * extra)
        r_factor = ph**2 if from_side == "substrate" else 1.0
    expected = np.stack([ref.r_s * r_factor, ref.r_p * r_factor, ref.t_s * ph, ref.t_p * ph])
    np.testing.assert_allclose(_coeffs(got), expected, rtol=0, atol=1e-14)


@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_no_film_equals_interface_coefficients(from_side):
    n_h, n_s = 1.33, 0.18 + 3.4j
    res = stack_coefficients(Q_MIXED, K0, n_h**2, [], [], n_s**2, from_side=from_side)
    e1, e2 = (n_h**2, n_s**2) if from_side == "host" else (n_s**2, n_h**2)
    direct = interface_coefficients(Q_MIXED, K0, e1, e2)
    np.testing.assert_allclose(_coeffs(res), np.stack(direct), rtol=0, atol=1e-14)


@pytest.mark.parametrize("n_film, d_um", [(0.18 + 3.4j, 20.0), (1.5, 50.0), (2.4, 5.0)])
@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_thick_film_against_airy_formula_no_overflow(n_film, d_um, from_side):
    """Thick film, evanescent up to q = 200 k0: no overflow or warnings, and r, t
    equal the one-film Airy summation to 1e-12 relative (t down to underflow;
    1e-15 absolute where a propagating r or t nearly vanishes):
    r = (r12 + r23 e^{2 i b})/(1 + r12 r23 e^{2 i b}),
    t = t12 t23 e^{i b}/(1 + r12 r23 e^{2 i b}), b = kz_film d
    (Born & Wolf §1.6.4; Yeh 1988 ch. 5; docs/theory.md §10 recursion)."""
    n_h, n_s = 1.0, 1.52
    q = np.outer(K0, [0.4, 2.6, 10.0, 200.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = stack_coefficients(q, K0, n_h**2, [n_film**2], [d_um * 1e-6], n_s**2,
                                 from_side=from_side)
        e_in, e_out = (n_h**2, n_s**2) if from_side == "host" else (n_s**2, n_h**2)
        a = interface_coefficients(q, K0, e_in, n_film**2)
        b = interface_coefficients(q, K0, n_film**2, e_out)
        ph = np.exp(1j * normal_wavenumber(q, K0, n_film**2) * d_um * 1e-6)
    for i in range(2):  # s, p
        den = 1 + a[i] * b[i] * ph**2
        np.testing.assert_allclose(_coeffs(res)[i], (a[i] + b[i] * ph**2) / den,
                                   rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(_coeffs(res)[2 + i], a[2 + i] * b[2 + i] * ph / den,
                                   rtol=1e-12, atol=1e-15)
    assert np.all(np.isfinite(_coeffs(res)))


def test_grazing_inside_a_film_is_regular():
    """kz = 0 exactly inside a lossless film: finite, continuous and differentiable in q.

    The coefficients are even in the film's kz (no branch point there), so a
    relative change 1e-9 in q changes them by O(1e-9) at most, and the q
    derivative exists. (Born & Wolf §1.6.2: the characteristic matrix depends
    on kz^2 only.)
    """
    k0 = np.array([1.0e7])
    eps_film = 4.0
    q0 = np.array([[2.0e7]])  # eps_film k0^2 - q0^2 == 0 exactly in floating point
    assert normal_wavenumber(q0, k0, eps_film)[0, 0] == 0
    args = (1.0, [eps_film, 1.5**2], [120 * NM, 30 * NM], 1.52**2)
    for side in ("host", "substrate"):
        at = _coeffs(stack_coefficients(q0, k0, *args, from_side=side))
        assert np.all(np.isfinite(at))
        for step in (1e-9, -1e-9):
            near = _coeffs(stack_coefficients(q0 * (1 + step), k0, *args, from_side=side))
            np.testing.assert_allclose(at, near, rtol=0, atol=1e-7)

        def f(scale, side=side):
            res = stack_coefficients(q0 * scale, k0, *args, from_side=side)
            return anp.sum(anp.real(res.r_p) + anp.imag(res.t_s))

        g = grad(f)(1.0)
        fd = (f(1 + 1e-6) - f(1 - 1e-6)) / 2e-6  # common practice, no source
        assert np.isfinite(g) and abs(g - fd) <= 1e-6 * max(abs(fd), 1.0)


@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_continuous_across_series_switch(from_side):
    """Film entries switch from power series to exponentials at |kz d| = 1;
    both are exact, so the coefficients agree across the switch to 1e-14.
    (Continuity of an entire function; common practice, no source.)"""
    k0 = np.array([1.0e7])
    q = np.array([[0.0, 1.5e7, 3.0e7]])  # propagating, grazing-near, evanescent in film
    eps_film = (2.0 + 0.01j) ** 2
    for Qi in range(3):
        kap = abs(normal_wavenumber(q[:, Qi:Qi + 1], k0, eps_film)[0, 0]) / k0[0]
        d_switch = 1.0 / (kap * k0[0])
        below, above = (
            _coeffs(stack_coefficients(q, k0, 1.0, [eps_film], [d_switch * (1 + s)], 2.25,
                                       from_side=from_side))[:, 0, Qi]
            for s in (-2e-15, 2e-15)
        )
        np.testing.assert_allclose(below, above, rtol=0, atol=1e-13)


def test_normal_wavenumber_branch():
    # docs/theory.md §5: Im(kz) >= 0, kz > 0 when real; a -0.0 imaginary part of eps
    # must not flip the branch
    q = np.outer(K0, [0.0, 0.5, 1.0, 2.0])
    eps = complex(1.0, -0.0)
    kz = normal_wavenumber(q, K0, eps) / K0[:, None]
    np.testing.assert_allclose(kz, [[1.0, np.sqrt(0.75), 0.0, 1j * np.sqrt(3.0)]] * 3,
                               atol=1e-15)
    kz_metal = normal_wavenumber(q, K0, (0.18 + 3.4j) ** 2)
    assert np.all(kz_metal.imag > 0)


def test_output_shapes_and_record():
    q = np.outer(K0, [0.0, 0.4, 1.5, 2.5])
    res = stack_coefficients(q, K0, 1.0, np.array([[2.0 + 0.1j] * 3]), np.array([50 * NM]), 2.25)
    assert res.from_side == "host"
    for arr in _coeffs(res):
        assert arr.shape == (3, 4)
    with pytest.raises(AttributeError):
        res.r_s = None  # frozen record


# ---------------------------------------------------------------------------
# autograd against central finite differences.


def _objective(param, which, Q, from_side):
    """A real function of r_p and t_s depending on one scalar parameter."""
    d = [40 * NM, 90 * NM]
    eps_l = [(2.02 + 0.05j) ** 2, 1.457**2]
    eps_s = (1.52 + 0.01j) ** 2
    k0 = K0
    q = anp.outer(K0, Q)
    if which == "thickness":
        d = [param * NM, 90 * NM]
    elif which == "thick_film":
        d = [40 * NM, param * NM]
    elif which == "q":
        q = q * param
    elif which == "k0":
        k0 = K0 * param
    elif which == "eps_real":
        eps_l = [param + 0.2j, 1.457**2]
    elif which == "eps_imag":
        eps_l = [4.08 + 1j * param, 1.457**2]
    elif which == "eps_substrate":
        eps_s = param + 0.03j
    res = stack_coefficients(q, k0, 1.0, eps_l, d, eps_s, from_side=from_side)
    return anp.sum(anp.real(res.r_p) * 0.7 - anp.imag(res.r_p) * 0.3
                   + anp.real(res.t_s * anp.conj(res.t_s)))


GRAD_POINTS = {
    "thickness": 40.0,
    "thick_film": 700.0,
    "q": 1.0,
    "k0": 1.0,
    "eps_real": 4.08,
    "eps_imag": 0.2,
    "eps_substrate": 2.31,
}


@pytest.mark.parametrize("which", list(GRAD_POINTS))
@pytest.mark.parametrize("regime, Q", [("propagating", [0.3, 0.8]),
                                       ("evanescent", [1.2, 1.8, 3.0])])
@pytest.mark.parametrize("from_side", ["host", "substrate"])
def test_gradient_against_finite_differences(which, regime, Q, from_side):
    # common practice, no source: central differences, step 1e-6 relative
    x0 = GRAD_POINTS[which]
    Q = np.array(Q)
    g = grad(_objective)(x0, which, Q, from_side)
    h = 1e-6 * abs(x0)
    f_plus = _objective(x0 + h, which, Q, from_side)
    f_minus = _objective(x0 - h, which, Q, from_side)
    fd = (f_plus - f_minus) / (2 * h)
    assert abs(g - fd) <= 1e-6 * max(abs(fd), 1e-3), (regime, g, fd)


def _interface_objective(param, which, Q):
    q = anp.outer(K0, Q)
    eps2 = (0.3 + 3.1j) ** 2
    if which == "q":
        q = q * param
    elif which == "eps_real":
        eps2 = param + 1.9j
    r_s, r_p, t_s, t_p = interface_coefficients(q, K0, 1.77, eps2)
    T = power_flux_ratio(t_p, q, K0, 1.77, eps2, "p")
    F = flux_factor(q, K0, eps2, "p") / K0[:, None]
    kz = normal_wavenumber(q, K0, eps2) / K0[:, None]
    return anp.sum(anp.real(r_p) + anp.imag(r_s) * anp.real(t_s) + T + F + anp.imag(kz))


@pytest.mark.parametrize("which, x0", [("q", 1.0), ("eps_real", -9.5)])
def test_interface_and_flux_gradients_against_finite_differences(which, x0):
    # common practice, no source: central differences, step 1e-6 relative
    Q = np.array([0.2, 0.9, 1.6, 4.0])
    g = grad(_interface_objective)(x0, which, Q)
    h = 1e-6 * abs(x0)
    fd = (_interface_objective(x0 + h, which, Q) - _interface_objective(x0 - h, which, Q)) / (
        2 * h)
    assert abs(g - fd) <= 1e-6 * abs(fd)


# ---------------------------------------------------------------------------
# Errors for bad input.


@pytest.mark.parametrize("kwargs, key, match", [
    ({"thicknesses": [-5 * NM]}, "thicknesses", ">= 0"),
    ({"eps_layers": [2.0 - 0.1j]}, "eps_layers[0]", "n - i k"),
    ({"eps_substrate": 2.25 - 1e-3j}, "eps_substrate", "Im"),
    ({"eps_host": 1.77 + 0.01j}, "eps_host", "lossless"),
    ({"thicknesses": [1e-8, 2e-8]}, "thicknesses", "one thickness per film"),
    ({"from_side": "left"}, "from_side", "host"),
    ({"q": -np.ones((3, 2))}, "q", ">= 0"),
    ({"q": np.ones((3, 2)) + 0j}, "q", "real"),
    ({"q": np.ones((2, 2))}, "q", "shape"),
])
def test_bad_input_raises(kwargs, key, match):
    args = {"q": np.ones((3, 2)), "k0": K0, "eps_host": 1.0, "eps_layers": [2.0],
            "thicknesses": [1e-8], "eps_substrate": 2.25}
    args.update(kwargs)
    from_side = args.pop("from_side", "host")
    with pytest.raises(InputError, match=match) as info:
        stack_coefficients(**args, from_side=from_side)
    assert info.value.key == key


def test_bad_polarization_raises():
    with pytest.raises(InputError, match="polarization"):
        flux_factor(np.ones((3, 1)), K0, 1.0, "te")
