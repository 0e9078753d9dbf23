"""EBCM T-matrices of spheroids and finite cylinders (chiropt.particles.ebcm)."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from chiropt.errors import InputError
from chiropt.multipole.tmatrix import Sphere, sphere_tmatrix
from chiropt.sphericalwaves import emission_vectors, mode_table, planewave_coefficients
from chiropt.particles import ebcm
from chiropt.particles.ebcm import Cylinder, Spheroid, cylinder_tmatrix, spheroid_tmatrix

NM = 1e-9


def _dag(T):
    return np.conj(np.swapaxes(T, -1, -2))


def _unitarity(T):
    return np.abs(T + _dag(T) + 2 * _dag(T) @ T).max()


def _reciprocity(T, lmax):
    tau, ls, ms = mode_table(lmax)
    perm = np.array([np.flatnonzero((tau == t) & (ls == l) & (ms == -m))[0]
                     for t, l, m in zip(tau, ls, ms, strict=True)])
    sg = (-1.0) ** ms
    R = sg[:, None] * sg[None, :] * T[:, perm][:, :, perm]
    return np.abs(np.swapaxes(R, -1, -2) - T).max()


# shapes at unit host wavenumber: (kind, dims, m_rel, nmax)
SPHEROIDS = [
    ((0.6, 1.2), 1.5),      # prolate 2:1, x = 1.2
    ((1.2, 0.6), 1.5),      # oblate 1:2
    ((1.5, 3.0), 1.5),      # prolate, x = 3
    ((3.0, 1.5), 1.5),      # oblate, x = 3
    ((0.5, 1.0), 3.5),      # high index (silicon-like)
]


# ------------------------------------------------------------------ sphere limit


@pytest.mark.parametrize("x, m", [(0.3, 1.5), (1.0, 3.5 + 0.02j), (2.5, 2.0 + 0.5j),
                                  (3.0, 1.33)])
def test_spheroid_with_equal_axes_is_mie(x, m):
    # sphere_tmatrix = diag(-a_l, -b_l) (Bohren & Huffman; checked against miepython in
    # tests/test_mie.py)
    k = np.array([1.0, 1.2])
    mr = np.array([m, m], dtype=complex)
    T = spheroid_tmatrix(k, mr, x, x, 4)
    ref = sphere_tmatrix(k * x, mr, 4)
    assert np.abs(T - ref).max() < 1e-12


# ------------------------------------------------------------------ invariants


@pytest.mark.parametrize("dims, m", SPHEROIDS)
def test_spheroid_lossless_unitarity(dims, m):
    # docs/theory.md §4: T + T^† + 2 T^† T = 0 for lossless particles (unitary S matrix);
    # on the full internal order so that no coupling to omitted orders is cut off
    T = spheroid_tmatrix(np.array([1.0]), np.array([m + 0j]), *dims, 16, nmax=20)
    assert _unitarity(T) < 1e-9


@pytest.mark.parametrize("dims, m", SPHEROIDS)
def test_spheroid_reciprocity(dims, m):
    # docs/theory.md §4: T^ij_{mn,m'n'} = (-1)^(m+m') T^ji_{-m'n',-mn}
    T = spheroid_tmatrix(np.array([1.0]), np.array([m + 0.1j]), *dims, 5)
    assert _reciprocity(T, 5) < 1e-10


# cylinders: (radius, height, m_rel, tolerance); the EBCM converges only algebraically
# for shapes with edges, so the invariants hold to the truncation error (measured,
# common practice, no source)
CYLINDERS = [
    (0.25, 1.0, 1.5, 1e-6),       # pillar, x = 0.56
    (1.0, 1.0, 1.5, 1e-5),        # disk, diameter/height = 2
    (1.0, 2.0, 1.5, 1e-5),        # h = 2r
    (0.6, 0.6, 3.5, 1e-3),        # silicon-like nanodisk
]


@pytest.mark.parametrize("r, h, m, tol", CYLINDERS)
def test_cylinder_lossless_unitarity_and_reciprocity(r, h, m, tol):
    # docs/theory.md §4 (lossless identity and reciprocity)
    T = cylinder_tmatrix(np.array([1.0]), np.array([m + 0j]), r, h, 12, nmax=20)
    assert _unitarity(T) < tol
    assert _reciprocity(T, 12) < tol


@pytest.mark.parametrize("shape, tol", [("spheroid", 1e-11), ("cylinder", 1e-5)])
def test_mirror_symmetry_selection_rules(shape, tol):
    # docs/theory.md §4: z -> -z symmetric body: same-type blocks vanish for l + l' odd,
    # cross (N-M) blocks for l + l' even. Checked on the raw quadrature (mirror=False:
    # nothing enforced; the cylinder's forbidden entries are cancelling integrals whose
    # round-off the ill-conditioned Q amplifies) and compared with the enforced solve.
    k, mr = np.array([1.0, 1.4]), np.array([2.0 + 0.1j, 3.5 + 0.01j])
    if shape == "spheroid":
        surf = ebcm.spheroid_surface(0.7, 1.3, 120)
    else:
        surf = ebcm.cylinder_surface(0.9, 0.6, 160)
    raw = ebcm.axisymmetric_tmatrix(k, mr, surf, 5, 12, mirror=False)
    sym = ebcm.axisymmetric_tmatrix(k, mr, surf, 5, 12)
    tau, ls, _ = mode_table(5)
    same = tau[:, None] == tau[None, :]
    odd = (ls[:, None] + ls[None, :]) % 2 == 1
    forbidden = np.where(same, odd, ~odd)
    assert np.abs(raw[:, forbidden]).max() < tol * np.abs(raw).max()
    assert np.abs(raw[:, ~forbidden]).max() > 1e-3       # the allowed blocks are filled
    assert np.abs(sym[:, forbidden]).max() == 0.0
    assert np.abs(sym - raw).max() < tol


def test_axisymmetry_block_structure_and_minus_m_blocks():
    # rotational symmetry: T couples only equal m (docs/theory.md §4); the -m blocks used by
    # ebcm (T_-m = (-1)^(tau+tau') T_m, y -> -y mirror symmetry) against direct ones
    k, mr = np.array([1.0, 1.3]), np.array([1.5 + 0.1j, 3.0 + 0.01j])
    surf = ebcm.cylinder_surface(0.7, 1.1, 120)
    blocks = ebcm._qmatrices(k, k * mr, *surf, 8, range(-3, 4))
    for m in (1, 2, 3):
        Tp = ebcm._solve_t(*blocks[m][:2])
        Tn = ebcm._solve_t(*blocks[-m][:2])
        t = np.arange(Tp.shape[-1]) % 2
        sign = (-1.0) ** (t[:, None] + t[None, :])
        assert np.abs(Tn - sign * Tp).max() < 1e-13
    T = cylinder_tmatrix(k, mr, 0.7, 1.1, 4)
    _, _, ms = mode_table(4)
    assert np.abs(T[:, ms[:, None] != ms[None, :]]).max() == 0.0


# ------------------------------------------------------------------ convergence


@pytest.mark.parametrize("dims, m, tol", [
    ((0.8, 1.6), 1.5 + 0.01j, 1e-8),
    ((2.0, 1.0), 3.5 + 0.01j, 1e-8),
])
def test_spheroid_convergence_in_order_and_quadrature(dims, m, tol):
    # common practice, no source: the default orders are converged
    k, mr = np.array([1.0]), np.array([m])
    nmax, nq = ebcm.default_orders(max(dims), 3, max(dims) / min(dims))
    T0 = spheroid_tmatrix(k, mr, *dims, 3)
    T1 = spheroid_tmatrix(k, mr, *dims, 3, nmax=nmax + 6, n_quad=2 * nq)
    assert np.abs(T1 - T0).max() < tol


@pytest.mark.parametrize("r, h, m, tol", [
    (0.8, 0.8, 1.5 + 0.01j, 1e-4),
    (0.6, 0.6, 3.5 + 0.01j, 3e-3),
])
def test_cylinder_convergence_in_order_and_quadrature(r, h, m, tol):
    # common practice, no source; tolerance = the measured algebraic convergence
    k, mr = np.array([1.0]), np.array([m])
    T0 = cylinder_tmatrix(k, mr, r, h, 3)
    T1 = cylinder_tmatrix(k, mr, r, h, 3, nmax=30, n_quad=400)
    assert np.abs(T1 - T0).max() < tol


# ------------------------------------------------------------------ Rayleigh limit


def _depolarization(a, c):
    """L_x = L_y, L_z of a spheroid (semi-axes a, a, c) from the ellipsoid integral."""
    # Bohren & Huffman (1983) eq. 5.33: L_i = (a1 a2 a3 / 2) int_0^inf ds /
    # ((s + a_i^2) f(s)),  f = sqrt((s + a1^2)(s + a2^2)(s + a3^2))
    def f(s):
        return math.sqrt((s + a * a) ** 2 * (s + c * c))

    lz = 0.5 * a * a * c * quad(lambda s: 1.0 / ((s + c * c) * f(s)), 0, np.inf,
                                epsabs=0, epsrel=1e-12)[0]
    return (1 - lz) / 2, lz


@pytest.mark.parametrize("a, c", [(1.0, 2.0), (2.0, 1.0), (1.0, 0.5)])
def test_small_spheroid_matches_electrostatic_polarizability(a, c):
    # Bohren & Huffman (1983) §5.3: alpha_j = V (eps - 1)/(1 + L_j (eps - 1)) (SI, per
    # eps0 eps_host); l = 1 block: alpha = -6 pi i T_N1m / k^3 (sphericalwaves dipole map,
    # docs/theory.md §3: alpha_e = 6 pi i a1/k^3); relative corrections O((k a)^2)
    scale = 0.01 / max(a, c)                    # k max(a, c) = 0.01
    a, c = a * scale, c * scale
    m = 1.5 + 0.5j
    eps = m * m
    T = spheroid_tmatrix(np.array([1.0]), np.array([m]), a, c, 1)[0]
    vol = 4 * math.pi / 3 * a * a * c
    lx, lz = _depolarization(a, c)
    alpha = [vol * (eps - 1) / (1 + L * (eps - 1)) for L in (lx, lz, lx)]
    got = [-6j * math.pi * T[u, u] for u in (0, 2, 4)]    # N modes m = -1, 0, 1
    np.testing.assert_allclose(got, alpha, rtol=1e-3)
    # orientation-averaged extinction (1/k^2 = 1): C_ext = -2 pi Re Tr T
    # (Mishchenko, Travis & Lacis 2002 §5.11) vs k Im(mean alpha) + scattering
    c_ext = -2 * math.pi * np.trace(T).real
    c_ray = np.mean(np.imag(alpha)) + np.mean(np.abs(alpha) ** 2) / (6 * math.pi)
    assert c_ext == pytest.approx(c_ray, rel=1e-3)


def test_prolate_depolarization_closed_form():
    # the quadrature of B&H eq. 5.33 against the closed form for prolate spheroids,
    # B&H eq. 5.34 (L_z = (1-e^2)/e^2 (-1 + ln((1+e)/(1-e))/(2e)))
    a, c = 1.0, 2.0
    e = math.sqrt(1 - a * a / (c * c))
    lz = (1 - e * e) / e ** 2 * (-1 + math.log((1 + e) / (1 - e)) / (2 * e))
    assert _depolarization(a, c)[1] == pytest.approx(lz, rel=1e-10)


# ------------------------------------------------------------------ optical theorem


def _cross_sections(T, k_hat, E0, lmax, n_theta=40, n_phi=80):
    """C_ext from the forward amplitude, C_sca from the angular integral of |F|^2 (k = 1)."""
    e = planewave_coefficients(k_hat, E0, lmax)
    f = T @ e
    # far field F = (-i/k) sum_u f_u (-i)^l W_u(r_hat) (h_l -> (-i)^(l+1) e^(ikr)/(kr))
    forward = -1j * f @ emission_vectors(k_hat, lmax)
    c_ext = 4 * math.pi * np.imag(np.vdot(E0, forward))       # optical theorem, B&H §3.4
    x, wx = np.polynomial.legendre.leggauss(n_theta)
    th = np.arccos(x)
    ph = np.arange(n_phi) * 2 * math.pi / n_phi
    TH, PH = np.meshgrid(th, ph, indexing="ij")
    u = np.stack([np.sin(TH) * np.cos(PH), np.sin(TH) * np.sin(PH), np.cos(TH)], axis=-1)
    F = -1j * np.einsum("u,tpuc->tpc", f, emission_vectors(u, lmax))
    c_sca = np.einsum("t,tp->", wx, np.sum(np.abs(F) ** 2, axis=-1)) * 2 * math.pi / n_phi
    c_abs_t = -(np.vdot(e, f).real + np.vdot(f, f).real)      # from the T-matrix
    return c_ext, c_sca, c_abs_t


@pytest.mark.parametrize("shape, m", [("spheroid", 1.8 + 0j), ("spheroid", 2.0 + 0.3j),
                                      ("cylinder", 1.8 + 0j), ("cylinder", 3.5 + 0.05j)])
def test_optical_theorem(shape, m):
    # B&H (1983) §3.4: C_ext = (4 pi/k) Im(E0* . F(k_inc)) = C_sca + C_abs, C_abs >= 0,
    # C_abs = 0 for lossless particles
    lmax = 6
    k_hat = np.array([math.sin(0.7) * math.cos(0.3), math.sin(0.7) * math.sin(0.3),
                      math.cos(0.7)])
    s = np.cross(k_hat, [0, 0, 1.0])
    s /= np.linalg.norm(s)
    p = np.cross(s, k_hat)
    E0 = (s + 1j * p) / math.sqrt(2)
    if shape == "spheroid":
        T = spheroid_tmatrix(np.array([1.0]), np.array([m]), 0.6, 1.1, lmax)[0]
        tol = 1e-9
    else:
        T = cylinder_tmatrix(np.array([1.0]), np.array([m]), 0.7, 0.5, lmax)[0]
        tol = 1e-4 if m.real > 3 else 1e-5
    c_ext, c_sca, c_abs = _cross_sections(T, k_hat, E0, lmax)
    assert c_sca == pytest.approx(np.vdot(T @ planewave_coefficients(k_hat, E0, lmax),
                                          T @ planewave_coefficients(k_hat, E0, lmax)).real,
                                  rel=1e-10)  # the far-field integral = sum |f_u|^2 / k^2
    assert c_ext - c_sca == pytest.approx(c_abs, abs=1e-12 * c_ext)
    if m.imag == 0:
        assert abs(c_ext - c_sca) < tol * c_ext
    else:
        assert c_abs > 0.01 * c_ext


# ------------------------------------------------------------------ classes, errors


def test_classes_follow_the_tmatrix_source_protocol():
    # same physical inputs as tmatrix.Sphere: sizes [m], index arrays (W,), n_host
    wl = np.array([600.0, 700.0]) * NM
    n_host = 1.33
    k = 2 * math.pi * n_host / wl
    index = np.array([3.9 + 0.02j, 3.8 + 0.01j])
    sph = Sphere(radius=80 * NM, index=index, n_host=n_host)
    spd = Spheroid(a=80 * NM, c=80 * NM, index=index, n_host=n_host)
    assert np.abs(spd.tmatrix(k, 3) - sph.tmatrix(k, 3)).max() < 1e-12
    cyl = Cylinder(radius=80 * NM, height=100 * NM, index=index, n_host=n_host)
    T = cyl.tmatrix(k, 2)
    assert T.shape == (2, 16, 16)
    np.testing.assert_allclose(
        T, cylinder_tmatrix(k, index / n_host, 80 * NM, 100 * NM, 2), rtol=0, atol=0)


@pytest.mark.parametrize("kwargs, key", [
    ({"m_rel": np.array([1.5 - 0.1j])}, "m_rel"),
    ({"k_host": np.array([-1.0])}, "k_host"),
    ({"a": -1.0}, "a"),
    ({"lmax": 0}, "lmax"),
])
def test_bad_input_raises(kwargs, key):
    args = {"k_host": np.array([1.0]), "m_rel": np.array([1.5 + 0j]), "a": 1.0, "c": 0.5,
            "lmax": 2}
    args.update(kwargs)
    with pytest.raises(InputError, match=key):
        spheroid_tmatrix(**args)
