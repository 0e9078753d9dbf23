"""Tests of chiropt.lattice: Bravais lattices, diffraction orders, kz branch, Faddeeva."""

import autograd.numpy as anp
import numpy as np
import pytest
import scipy.special
from autograd import grad

from chiropt.errors import InputError
from chiropt.lattice import (
    Lattice,
    erfc_complex,
    kz_branch,
    order_indices,
    order_wavevectors,
    rayleigh_proximity,
    wofz,
)

A0 = 400e-9  # lattice constant used throughout [m]

LATTICES = {
    "square": lambda: Lattice.square(A0),
    "rectangular": lambda: Lattice.rectangular(A0, 1.4 * A0),
    "hexagonal": lambda: Lattice.hexagonal(A0),
    "oblique": lambda: Lattice.oblique(A0, 1.3 * A0, 1.1),
}


# ---------------------------------------------------------------- Bravais lattices
@pytest.mark.parametrize("name", LATTICES)
def test_reciprocal_vectors_are_dual(name):
    # definition b_i . a_j = 2 pi delta_ij (docs/theory.md §5)
    lat = LATTICES[name]()
    b1, b2 = lat.reciprocal()
    dots = np.array([[b1 @ lat.a1, b1 @ lat.a2], [b2 @ lat.a1, b2 @ lat.a2]])
    np.testing.assert_allclose(dots, 2 * np.pi * np.eye(2), atol=1e-12 * 2 * np.pi)


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        ("square", A0**2),                                  # elementary geometry
        ("rectangular", 1.4 * A0**2),                       # elementary geometry
        ("hexagonal", np.sqrt(3) / 2 * A0**2),              # elementary geometry
        ("oblique", 1.3 * A0**2 * np.sin(1.1)),             # |a1 x a2| = a b sin(angle)
    ],
)
def test_cell_area(name, expected):
    assert LATTICES[name]().area == pytest.approx(expected, rel=1e-14)


def test_hexagonal_vectors():
    # brief's convention: a1 = (a, 0), a2 = (a/2, a sqrt3/2); common practice, no source
    lat = Lattice.hexagonal(A0)
    np.testing.assert_allclose(lat.a2, [A0 / 2, A0 * np.sqrt(3) / 2], rtol=1e-15)
    assert np.linalg.norm(lat.a2 - lat.a1) == pytest.approx(A0, rel=1e-14)


def test_area_differentiable_in_period():
    # d(a^2 sqrt3/2)/da = sqrt3 a (elementary calculus)
    g = grad(lambda a: Lattice.hexagonal(a).area)(A0)
    assert g == pytest.approx(np.sqrt(3) * A0, rel=1e-13)


def test_area_differentiable_in_angle():
    # d(a b sin t)/dt = a b cos t (elementary calculus)
    g = grad(lambda t: Lattice.oblique(A0, 1.3 * A0, t).area)(1.1)
    assert g == pytest.approx(1.3 * A0**2 * np.cos(1.1), rel=1e-13)


def test_reciprocal_differentiable_in_period():
    # |b1| of a square lattice is 2 pi / a, derivative -2 pi / a^2 (elementary calculus)
    g = grad(lambda a: Lattice.square(a).reciprocal()[0][0])(A0)
    assert g == pytest.approx(-2 * np.pi / A0**2, rel=1e-13)


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda: Lattice.square(-1e-7), "positive"),
        (lambda: Lattice.square(np.nan), "positive"),
        (lambda: Lattice.oblique(A0, A0, 0.0), "angle|0, pi"),
        (lambda: Lattice(np.array([A0, 0.0]), np.array([2 * A0, 0.0])), "parallel"),
        (lambda: Lattice(np.array([A0, 0.0, 0.0]), np.array([0.0, A0])), "length 2"),
    ],
)
def test_bad_lattice_raises(make, match):
    with pytest.raises(InputError, match=match):
        make()


# ---------------------------------------------------------------- diffraction orders
@pytest.mark.parametrize("name", LATTICES)
def test_order_indices_complete_and_sorted(name):
    # literal enumeration over a generous box (common practice, no source)
    lat = LATTICES[name]()
    b1, b2 = lat.reciprocal()
    g_max = 3.2 * np.linalg.norm(b1)
    mn = order_indices(lat, g_max)
    assert tuple(mn[0]) == (0, 0)
    box = [(m, n) for m in range(-30, 31) for n in range(-30, 31)
           if np.linalg.norm(m * b1 + n * b2) <= g_max]
    assert sorted(map(tuple, mn)) == sorted(box)
    lengths = np.linalg.norm(mn[:, :1] * b1 + mn[:, 1:] * b2, axis=1)
    assert np.all(np.diff(lengths) >= -1e-9 * g_max)


def test_order_indices_square_first_shell():
    # square lattice: the first shell |G| = 2 pi / a has 4 orders (common practice, no source)
    mn = order_indices(Lattice.square(A0), 1.01 * 2 * np.pi / A0)
    assert [tuple(x) for x in mn] == [(0, 0), (-1, 0), (0, -1), (0, 1), (1, 0)]


def test_order_indices_rejects_negative():
    with pytest.raises(InputError, match="g_max"):
        order_indices(Lattice.square(A0), -1.0)


def test_order_wavevectors():
    # q = k_par + m b1 + n b2 (docs/theory.md §5)
    lat = Lattice.oblique(A0, 1.3 * A0, 1.1)
    b1, b2 = lat.reciprocal()
    k_par = np.array([[1e6, 2e6], [-3e6, 0.5e6]])
    mn = np.array([[0, 0], [2, -1], [-1, 3]])
    q = order_wavevectors(lat, k_par, mn)
    assert q.shape == (2, 3, 2)
    np.testing.assert_allclose(q[1, 1], k_par[1] + 2 * b1 - b2, rtol=1e-14)


# ---------------------------------------------------------------- kz branch
def _q_line(values):
    return np.stack([np.asarray(values), np.zeros(len(values))], axis=-1)[None]


def test_kz_branch_real_k():
    # docs/theory.md §5: kz > 0 propagating, Im kz > 0 evanescent
    k = np.array([1.0e7])
    q = _q_line([0.0, 0.6e7, 1.5e7])
    kz = kz_branch(k, q)[0]
    np.testing.assert_allclose(kz, [1.0e7, 0.8e7, 1j * np.sqrt(1.25) * 1e7], rtol=1e-14)


@pytest.mark.parametrize("qx", [0.0, 0.9e7, 1.0e7, 3.0e7])
def test_kz_branch_lossy_k(qx):
    # Im kz >= 0 for a passive medium (docs/theory.md §5); kz^2 = k^2 - q^2 (definition)
    k = np.array([1.0e7 + 2e5j])
    kz = kz_branch(k, _q_line([qx]))[0, 0]
    assert kz.imag >= 0
    assert kz**2 == pytest.approx(k[0] ** 2 - qx**2, rel=1e-13)


def test_kz_branch_exactly_on_anomaly_is_finite():
    # documented floor |kz| >= 1e-8 k at k = |q| (module docstring)
    k = np.array([1.0e7])
    kz = kz_branch(k, _q_line([1.0e7]))[0, 0]
    assert np.isfinite(kz) and abs(kz) == pytest.approx(1e-8 * 1e7, rel=1e-12)
    g = grad(lambda kk: anp.real(kz_branch(kk, _q_line([1.0e7]))[0, 0]))(k)
    assert np.all(np.isfinite(g))


@pytest.mark.parametrize("qx", [0.3e7, 2.0e7])
def test_kz_branch_gradient(qx):
    # d kz / dk = k / kz (elementary calculus), propagating and evanescent
    k = np.array([1.0e7])
    f = lambda kk, part: part(kz_branch(kk, _q_line([qx]))[0, 0])
    kz = kz_branch(k, _q_line([qx]))[0, 0]
    assert grad(f)(k, anp.real)[0] == pytest.approx((k[0] / kz).real, rel=1e-12, abs=1e-14)
    assert grad(f)(k, anp.imag)[0] == pytest.approx((k[0] / kz).imag, rel=1e-12, abs=1e-14)


@pytest.mark.parametrize("n", [1.0, 1.5])
@pytest.mark.parametrize(("ratio", "expected"), [(1.01, 1), (0.99, 5)])
def test_square_lattice_only_zeroth_order_propagates(n, ratio, expected):
    # only (0,0) propagates when lambda > n a at normal incidence (common practice, no source)
    lam = ratio * n * A0
    k = np.array([2 * np.pi * n / lam])
    lat = Lattice.square(A0)
    mn = order_indices(lat, 3 * k[0])
    q = order_wavevectors(lat, np.zeros((1, 2)), mn)
    prop = np.linalg.norm(q, axis=-1)[0] < k[0]
    assert prop.sum() == expected


@pytest.mark.parametrize(("ratio", "expected"), [(1.001, 1), (0.999, 7)])
def test_hexagonal_first_anomaly(ratio, expected):
    # hexagonal lattice first anomaly at lambda = n a sqrt3/2 (docs/theory.md §5)
    n = 1.33
    lam_ra = n * A0 * np.sqrt(3) / 2
    lat = Lattice.hexagonal(A0)
    k = np.array([2 * np.pi * n / (ratio * lam_ra)])
    mn = order_indices(lat, 3 * k[0])
    q = order_wavevectors(lat, np.zeros((1, 2)), mn)
    assert (np.linalg.norm(q, axis=-1)[0] < k[0]).sum() == expected
    on = rayleigh_proximity(np.array([2 * np.pi * n / lam_ra]), np.zeros((1, 2)), lat)
    assert on[0] < 1e-12


def test_rayleigh_proximity_oblique_incidence():
    # order (-1,0) anomaly at lambda = a (n + n sin theta), incidence in xz (docs/theory.md §5)
    n, theta = 1.0, np.deg2rad(20.0)
    lam = A0 * (n + n * np.sin(theta))
    k = 2 * np.pi * n / lam
    lat = Lattice.square(A0)
    k_par = np.array([[k * np.sin(theta), 0.0], [k * np.sin(theta), 0.0]])
    prox = rayleigh_proximity(np.array([k, 1.05 * k]), k_par, lat)
    assert prox[0] < 1e-12
    assert prox[1] > 1e-3


# ---------------------------------------------------------------- Faddeeva primitive
Z_POINTS = [0.3 + 0.2j, -1.7 + 0.4j, 2.5 + 3.0j, 0.8 - 0.3j, 6.0 + 0.01j]


@pytest.mark.parametrize("z", Z_POINTS)
def test_wofz_matches_erfc_definition(z):
    # w(z) = exp(-z^2) erfc(-iz) (A&S 7.1.3); scipy.special.erfc (reference library)
    assert wofz(z) == pytest.approx(np.exp(-z * z) * scipy.special.erfc(-1j * z), rel=1e-12)


@pytest.mark.parametrize("z", Z_POINTS)
def test_erfc_complex(z):
    # scipy.special.erfc (reference library)
    assert erfc_complex(z) == pytest.approx(scipy.special.erfc(z), rel=1e-12)


@pytest.mark.parametrize("z", Z_POINTS)
def test_wofz_vjp_matches_analytic_derivative(z):
    # holomorphic convention: grad of Re(w) is w'(z) (autograd numpy_vjps); A&S 7.1.20
    deriv = -2 * z * scipy.special.wofz(z) + 2j / np.sqrt(np.pi)
    assert grad(lambda zz: anp.real(wofz(zz)))(z) == pytest.approx(deriv, rel=1e-12)


@pytest.mark.parametrize("z", Z_POINTS)
def test_wofz_gradient_vs_finite_differences(z):
    # central finite differences of a real function of Re z, Im z (common practice, no source)
    c = 0.7 - 1.3j
    f = lambda x, y: anp.real(c * wofz(x + 1j * y)) + anp.abs(wofz(x + 1j * y)) ** 2
    h = 1e-6
    fx = (f(z.real + h, z.imag) - f(z.real - h, z.imag)) / (2 * h)
    fy = (f(z.real, z.imag + h) - f(z.real, z.imag - h)) / (2 * h)
    gx, gy = grad(f, 0)(z.real, z.imag), grad(f, 1)(z.real, z.imag)
    assert gx == pytest.approx(fx, rel=1e-7, abs=1e-9)
    assert gy == pytest.approx(fy, rel=1e-7, abs=1e-9)
    # complex-argument gradient in autograd's convention: df/dx - i df/dy
    gz = grad(lambda zz: f(anp.real(zz), anp.imag(zz)))(z)
    assert gz == pytest.approx(fx - 1j * fy, rel=1e-7, abs=1e-9)


def test_wofz_real_input_gradient():
    # real input: gradient Re(g w'(x)), checked by central finite differences
    x = 0.6
    h = 1e-6
    f = lambda t: anp.imag(wofz(t))
    fd = (f(x + h) - f(x - h)) / (2 * h)
    assert grad(f)(x) == pytest.approx(fd, rel=1e-8)
    # Im w(x) = 2/sqrt(pi) F(x), F Dawson's integral (value from memory: DLMF §7.5);
    # scipy.special.dawsn (reference library)
    assert f(x) == pytest.approx(2 / np.sqrt(np.pi) * scipy.special.dawsn(x), rel=1e-13)
