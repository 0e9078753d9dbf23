"""VSWFs, translation coefficients and lattice sums of the multipole model (docs/theory.md §9)."""

import math

import numpy as np
import pytest
import scipy.special as sps
from autograd import grad

from chiropt.lattice import Lattice, lattice_green_derivatives, splitting_parameter
from chiropt.multipole.latticesums import lattice_sums
from chiropt.multipole.translation import (
    scalar_addition,
    scalar_waves_at,
    translation_matrix,
    wigner3j,
)
from chiropt.sphericalwaves import (
    emission_vectors,
    lm_index,
    mode_table,
    planewave_coefficients,
    spherical_harmonics,
    vswf_at_points,
)

RNG = np.random.default_rng(7)


def _units(n):
    v = RNG.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1)[:, None]


def test_spherical_harmonics_match_scipy():
    # scipy.special.sph_harm_y (reference library): Condon-Shortley, orthonormal
    u = _units(6)
    th, ph = np.arccos(u[:, 2]), np.arctan2(u[:, 1], u[:, 0])
    Y = np.asarray(spherical_harmonics(u, 8))
    for l in range(9):
        for m in range(-l, l + 1):
            np.testing.assert_allclose(Y[:, lm_index(l, m)], sps.sph_harm_y(l, m, th, ph),
                                       atol=1e-13)


def test_wigner3j_known_values():
    # Edmonds (1957) Table 2 closed forms: (1 1 0; 0 0 0) = -1/sqrt(3),
    # (1 1 2; 0 0 0) = sqrt(2/15), (2 2 2; 0 0 0) = -sqrt(2/35)
    assert wigner3j(1, 1, 0, 0, 0, 0) == pytest.approx(-1 / math.sqrt(3), abs=1e-15)
    assert wigner3j(1, 1, 2, 0, 0, 0) == pytest.approx(math.sqrt(2 / 15), abs=1e-15)
    assert wigner3j(2, 2, 2, 0, 0, 0) == pytest.approx(-math.sqrt(2 / 35), abs=1e-15)


@pytest.mark.parametrize("kind", ["outgoing", "regular"])
def test_curl_relations(kind):
    # Definition (sphericalwaves module docstring; Jackson 1999 §9.7): curl M = k N, curl N = k M,
    # checked by central finite differences (common practice, no source)
    k, h = 1.3e7, 1e-13
    p = RNG.normal(size=3) * 2e-7
    F = lambda x: vswf_at_points(x[None], k, 3, kind)[0]  # noqa: E731
    d = [(F(p + h * e) - F(p - h * e)) / (2 * h) for e in np.eye(3)]
    curl = np.stack([d[1][:, 2] - d[2][:, 1], d[2][:, 0] - d[0][:, 2],
                     d[0][:, 1] - d[1][:, 0]], axis=-1) / k
    Fv = F(p)
    scale = np.abs(Fv).max()
    assert np.abs(curl[1::2] - Fv[0::2]).max() < 1e-7 * scale   # curl M / k = N
    assert np.abs(curl[0::2] - Fv[1::2]).max() < 1e-7 * scale   # curl N / k = M


def test_planewave_expansion_pointwise():
    # Plane-wave expansion in regular VSWFs (Tsang, Kong & Ding 2000, ch. 1),
    # summed to l = 14 near the origin, against the plane wave itself
    k = 1.0
    kh = np.array([0.3, -0.5, 0.7])
    kh /= np.linalg.norm(kh)
    E0 = np.cross(kh, [0.2, 1.0, -0.4]) + 1j * np.cross(kh, [1.0, 0.1, 0.3])
    pts = RNG.normal(size=(5, 3)) * 0.7
    e = np.asarray(planewave_coefficients(kh, E0, 14))
    field = np.einsum("u,pud->pd", e, vswf_at_points(pts, k, 14, "regular"))
    np.testing.assert_allclose(field, E0[None] * np.exp(1j * k * pts @ kh)[:, None],
                               atol=1e-12)


def test_scalar_addition_theorem_pointwise():
    # Scalar addition theorem (Martin, Multiple Scattering 2006, §3.13) summed to nu = 14
    k, b = 1.0, np.array([2.1, -1.3, 0.8])
    pts = RNG.normal(size=(5, 3)) * 0.1
    waves = scalar_waves_at(b[None], k, 30)[0]

    def psi(l, m, x, outgoing):
        r = np.linalg.norm(x, axis=-1)
        Y = np.asarray(spherical_harmonics(x / r[:, None], l))[:, lm_index(l, m)]
        return (sps.spherical_jn(l, k * r) + (1j * sps.spherical_yn(l, k * r) if outgoing
                                              else 0)) * Y

    for l, m in ((1, 0), (2, -1), (3, 2)):
        total = 0
        for nu in range(15):
            for mu in range(-nu, nu + 1):
                s = sum(c * waves[lm_index(q, m - mu)]
                        for q, c in scalar_addition(l, m, nu, mu).items())
                total = total + s * psi(nu, mu, pts, False)
        np.testing.assert_allclose(total, psi(l, m, pts + b, True), atol=1e-11)


def test_vector_translation_pointwise():
    # Vector addition theorem (Stein 1961; Cruzan 1962): outgoing waves of l <= 3 about
    # r_j re-expanded in regular waves (to l = 9) about r_i, evaluated at points near r_i
    k, lmax, big = 1.0, 3, 9
    b = np.array([2.1, -1.3, 0.8])
    pts = RNG.normal(size=(5, 3)) * 0.05
    A = translation_matrix(b[None], k, big)[0]
    n = 2 * lmax * (lmax + 2)
    approx = np.einsum("au,pad->pud", A[:, :n], vswf_at_points(pts, k, big, "regular"))
    exact = vswf_at_points(pts + b, k, lmax, "outgoing")
    assert np.abs(approx - exact).max() < 1e-8 * np.abs(exact).max()


# ------------------------------------------------------------------ lattice sums

LAT = Lattice.square(500e-9)
HEXL = Lattice.hexagonal(430e-9)
K = 2 * np.pi / np.array([700e-9, 900e-9])
KPAR = np.array([[0.2, 0.1], [0.0, 0.3]]) * K[:, None]
DISP = np.array([[0.0, 0.0, 0.0], [120e-9, -80e-9, 0.0], [130e-9, 40e-9, 25e-9]])
PMAX = 8
PS = np.array([p for p in range(PMAX + 1) for _ in range(-p, p + 1)])


@pytest.mark.parametrize("lattice", [LAT, HEXL])
@pytest.mark.parametrize("factor", [0.6, 1.7])
def test_lattice_sums_splitting_independence(lattice, factor):
    # docs/theory.md §6: Ewald sums must not depend on the splitting parameter (1e-10);
    # checked at every (p, M) with p <= 8 (lmax = 4), in-plane and off-plane displacements
    D = lattice_sums(K, KPAR, lattice, DISP, PMAX, tol=1e-12)
    E0 = splitting_parameter(K, lattice)
    D2 = lattice_sums(K, KPAR, lattice, DISP, PMAX, tol=1e-12, splitting=factor * E0[0])
    for p in range(PMAX + 1):
        sel = PS == p
        assert np.abs(D2 - D)[..., sel].max() < 1e-10 * np.abs(D)[..., sel].max()


def test_lattice_sums_match_dipole_green_derivatives():
    # docs/theory.md §6, §7 / chiropt.lattice (the dipole model's Ewald sums): D_00, D_1M, D_2M
    # are the multipole content of G_reg, grad G, grad grad G (Hobson's theorem)
    D = lattice_sums(K, KPAR, LAT, DISP, 2, tol=1e-12)
    G, gr, H = lattice_green_derivatives(K, KPAR, LAT, DISP, tol=1e-12)
    k = K[:, None]
    np.testing.assert_allclose(1j * k * D[..., 0] / np.sqrt(4 * np.pi), G, rtol=1e-11)
    eps = {-1: np.array([1, -1j, 0]) / np.sqrt(2), 0: np.array([0, 0, 1.0]),
           1: -np.array([1, 1j, 0]) / np.sqrt(2)}
    for M in (-1, 0, 1):
        lhs = np.sqrt(3 / (4 * np.pi)) * gr @ eps[M]
        assert np.abs(lhs + 1j * k ** 2 * D[..., 2 + M] / (4 * np.pi)).max() \
            < 1e-11 * np.abs(gr).max()
    u = _units(9)
    Y2 = np.asarray(spherical_harmonics(u, 2))[:, 4:9]
    # least-squares quadratic forms Q_M with Y_2M(u) = u.Q_M.u (exact: 6 unknowns, 9 points)
    basis = np.stack([u[:, 0] ** 2, u[:, 1] ** 2, u[:, 2] ** 2, 2 * u[:, 0] * u[:, 1],
                      2 * u[:, 0] * u[:, 2], 2 * u[:, 1] * u[:, 2]], axis=1)
    for M in range(-2, 3):
        c = np.linalg.lstsq(basis, Y2[:, M + 2], rcond=None)[0]
        Q = np.array([[c[0], c[3], c[4]], [c[3], c[1], c[5]], [c[4], c[5], c[2]]])
        lhs = np.einsum("ab,wpab->wp", Q, H)
        assert np.abs(lhs - 1j * k ** 3 * D[..., 6 + M] / (4 * np.pi)).max() \
            < 1e-11 * np.abs(H).max()


def test_lattice_sums_reciprocity_symmetry():
    # Reciprocity of the lattice sums (R -> -R in the definition; Linton 2010 §2):
    # D_pM(d, k_par) = (-1)^p D_pM(-d, -k_par)
    D = lattice_sums(K, KPAR, HEXL, DISP, PMAX, tol=1e-12)
    Dm = lattice_sums(K, -KPAR, HEXL, -DISP, PMAX, tol=1e-12)
    assert np.abs(D - (-1.0) ** PS * Dm).max() < 1e-10 * np.abs(D).max()


def test_lattice_sums_off_plane_equal_weyl_series():
    # Weyl (plane-wave) series of the lattice of outgoing waves (sphericalwaves module docstring;
    # docs/theory.md §6 spectral form), exponentially convergent off the plane:
    # D_pM(d) = (2 pi (-i)^p/(A k)) sum_g exp(i k_g.d) Y_pM(k_g/k)/kz_g for d_z > 0
    from chiropt.lattice import order_indices, order_wavevectors

    d = np.array([[60e-9, -35e-9, 260e-9]])
    D = lattice_sums(K, KPAR, LAT, d, 6, tol=1e-12)
    mn = order_indices(LAT, 40 * 2 * np.pi / 500e-9)
    q = order_wavevectors(LAT, KPAR, mn)
    kz = np.sqrt(K[:, None] ** 2 - np.sum(q ** 2, -1) + 0j)
    kvec = np.concatenate([q, kz[..., None]], axis=-1) / K[:, None, None]
    Y = np.asarray(spherical_harmonics(kvec, 6))
    ph = np.exp(1j * np.einsum("wgc,c->wg", kvec * K[:, None, None], d[0]))
    ps = np.array([p for p in range(7) for _ in range(-p, p + 1)])
    weyl = (2 * np.pi * (-1j) ** ps / (LAT.area * K[:, None])) * np.einsum(
        "wg,wgj->wj", ph / kz, Y)
    assert np.abs(D[:, 0] - weyl).max() < 1e-10 * np.abs(weyl).max()


def test_emission_vectors_weyl_expansion_of_vswf_lattice():
    # sphericalwaves docstring: sum_R exp(i k_par.R) Psi_u(r - R) = (2 pi/(A k)) sum_g (-i)^l W_u
    # exp(i k_g.r)/kz; checked against a direct lattice sum of translated VSWFs
    # (translation tables + lattice sums with the regular waves at a point above the plane)
    from chiropt.lattice import order_indices, order_wavevectors
    from chiropt.multipole.translation import translation_table

    lmax, k = 2, K[:1]
    r0 = np.array([40e-9, 20e-9, 300e-9])
    D = lattice_sums(k, KPAR[:1], LAT, r0[None], 2 * lmax + 8, tol=1e-12)
    # field at r0 + small offset through the regular expansion about r0
    A = np.einsum("abj,j->ab", translation_table(lmax + 4)[:, :16],
                  D[0, 0, :(2 * lmax + 9) ** 2][:(2 * (lmax + 4) + 1) ** 2])
    off = np.array([[5e-9, -3e-9, 4e-9]])
    via_sums = np.einsum("au,pad->pud", A, vswf_at_points(off, k[0], lmax + 4, "regular"))
    mn = order_indices(LAT, 30 * 2 * np.pi / 500e-9)
    q = order_wavevectors(LAT, KPAR[:1], mn)[0]
    kz = np.sqrt(k[0] ** 2 - np.sum(q ** 2, -1) + 0j)
    kvec = np.concatenate([q, kz[:, None]], axis=-1)
    Wv = np.asarray(emission_vectors(kvec / k[0], lmax))           # (G, 2K, 3)
    ph = np.exp(1j * kvec @ (r0 + off[0]))
    weyl = (2 * np.pi / (LAT.area * k[0])) * np.einsum("g,gud->ud", ph / kz, Wv)
    assert np.abs(via_sums[0] - weyl).max() < 1e-7 * np.abs(weyl).max()


def test_lattice_sums_gradient_matches_finite_differences():
    # common practice, no source: autograd derivative w.r.t. the period against a central
    # finite difference, every (p, M) to p = 6
    def f(a, part):
        D = lattice_sums(K[:1], KPAR[:1], Lattice.square(a), DISP[1:3], 6, tol=1e-13)
        w = np.cos(np.arange(D.size)).reshape(D.shape)
        import autograd.numpy as anp
        return anp.sum(w * (anp.real(D) if part == 0 else anp.imag(D)))

    a0, h = 500e-9, 1e-12
    for part in (0, 1):
        g = grad(f)(a0, part)
        fd = (f(a0 + h, part) - f(a0 - h, part)) / (2 * h)
        assert abs(g - fd) < 1e-6 * abs(fd)


@pytest.mark.parametrize("name", ["k", "k_par", "a1", "a2", "d"])
def test_lattice_sums_jacobian_every_input_matches_finite_differences(name):
    # common practice, no source: the one-node primitive's forward-mode Jacobian (all
    # inputs at once) against central differences, input by input, on an oblique lattice,
    # two wavelengths, displacements in and off the plane and the excluded self term
    import autograd.numpy as anp
    from autograd import grad as agrad

    base = {"k": K.copy(), "k_par": KPAR.copy(), "a1": np.array([470e-9, 0.0]),
            "a2": np.array([130e-9, 520e-9]), "d": DISP.copy()}
    weights = np.cos(np.arange(2 * 3 * 49) * 0.7).reshape(2, 3, 49)

    def f(x, part):
        v = dict(base, **{name: x})
        D = lattice_sums(v["k"], v["k_par"], Lattice(v["a1"], v["a2"]), v["d"], 6,
                         tol=1e-13, splitting=4.0e6)
        return anp.sum(weights * (anp.real(D) if part == 0 else anp.imag(D)))

    x0 = base[name]
    scale = np.abs(x0).max()
    for part in (0, 1):
        g = agrad(f)(x0, part)
        assert g.shape == x0.shape
        fd = np.zeros_like(x0)
        h = 1e-6 * scale
        for idx in np.ndindex(x0.shape):
            if name == "d" and idx[0] == 0:
                continue   # the self term d = 0: no derivative (the image is excluded)
            e = np.zeros_like(x0)
            e[idx] = h
            fd[idx] = (f(x0 + e, part) - f(x0 - e, part)) / (2 * h)
        rows = slice(1, None) if name == "d" else slice(None)
        assert np.abs(g - fd)[rows].max() < 2e-6 * np.abs(fd)[rows].max()


def test_mode_table_order():
    # sphericalwaves docstring: l ascending, m = -l..l, electric (N) before magnetic (M)
    tau, ls, ms = mode_table(2)
    assert list(tau[:4]) == [0, 1, 0, 1] and list(ls[:6]) == [1] * 6
    assert list(ms[:6]) == [-1, -1, 0, 0, 1, 1] and len(tau) == 16


@pytest.mark.parametrize("complex_u", [False, True])
def test_spherical_harmonics_primitive_derivative_matches_finite_differences(complex_u):
    # central differences of the polynomial form (common practice, no source); complex
    # directions are those of evanescent waves
    import autograd.numpy as anp
    from autograd import grad

    rng = np.random.default_rng(3)
    u0 = rng.normal(size=(4, 3)) + (1j * rng.normal(size=(4, 3)) if complex_u else 0.0)
    w = rng.normal(size=(4, 16)) + 1j * rng.normal(size=(4, 16))
    du = rng.normal(size=(4, 3))

    def f(s):
        return anp.real(anp.sum(w * spherical_harmonics(u0 + s * du, 3)))

    h = 1e-6
    fd = (f(h) - f(-h)) / (2 * h)
    assert abs(grad(f)(0.0) - fd) < 1e-7 * max(1.0, abs(fd))
