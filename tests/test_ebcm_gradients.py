"""Autograd-differentiable EBCM T-matrices (chiropt.particles.ebcm) and the spherical
Bessel primitive (chiropt.particles._spherical_bessel)."""

import math

import autograd.numpy as anp
import numpy as np
import pytest
import scipy.special as sps
from autograd import grad

from chiropt.multipole.tmatrix import sphere_tmatrix
from chiropt.sphericalwaves import mode_table, planewave_coefficients
from chiropt.particles import ebcm
from chiropt.particles._spherical_bessel import spherical_bessel, spherical_bessel_derivative

NM = 1e-9

# ------------------------------------------------------------------ Bessel primitive

BESSEL_POINTS = [0.3, 2.7, 8.0, 1.2 + 0.4j, 3.5 + 0.05j, 0.8 + 2.0j, 12.0 + 1.0j]


@pytest.mark.parametrize("kind", ["j", "y"])
@pytest.mark.parametrize("z", BESSEL_POINTS)
@pytest.mark.parametrize("derivative", [False, True])
def test_bessel_values_are_scipy(kind, z, derivative):
    # the primitive only wraps scipy.special (reference library)
    n = np.arange(0, 9)
    ref = (sps.spherical_jn if kind == "j" else sps.spherical_yn)(n, z, derivative=derivative)
    assert np.array_equal(spherical_bessel(z, n, kind, derivative), ref)


def _fd(f, t0, h=1e-6):
    return (f(t0 + h) - f(t0 - h)) / (2 * h)


@pytest.mark.parametrize("kind", ["j", "y"])
@pytest.mark.parametrize("z", BESSEL_POINTS)
@pytest.mark.parametrize("n", [0, 1, 2, 5, 8])
def test_bessel_gradient_vs_finite_differences_and_recurrence(kind, z, n):
    # along a direction d in the complex plane, d/dt z_n(z + t d) = z_n'(z) d
    # (holomorphic); autograd of the real and imaginary parts against central finite
    # differences (common practice, no source) and against the other recurrence
    # z_n' = (n/z) z_n - z_{n+1} (DLMF 10.51.2), independent of the one the primitive uses
    fn = sps.spherical_jn if kind == "j" else sps.spherical_yn
    exact = n / z * fn(n, z) - fn(n + 1, z)
    if n == 0:
        exact = -fn(1, z)                                   # DLMF 10.51.3
    np.testing.assert_allclose(spherical_bessel_derivative(z, np.array(n), kind), exact,
                               rtol=1e-12, atol=1e-14 * abs(fn(n, z)))
    scale = max(abs(exact), 1e-300)
    for d in ((1.0, 1j) if isinstance(z, complex) else (1.0,)):
        for part in (anp.real, anp.imag):
            def f(t, d=d, part=part):
                return part(spherical_bessel(z + t * d, n, kind))
            g = grad(f)(0.0)
            assert abs(g - part(exact * d)) < 1e-11 * scale
            assert abs(g - _fd(f, 0.0, 1e-6 * max(1.0, abs(z)))) < 1e-7 * scale


@pytest.mark.parametrize("kind", ["j", "y"])
@pytest.mark.parametrize("z", BESSEL_POINTS)
@pytest.mark.parametrize("n", [0, 1, 4])
def test_bessel_derivative_primitive_gradient(kind, z, n):
    # d/dz z_n' = z_n'' from the spherical Bessel equation (DLMF 10.47.1), checked
    # against central finite differences of scipy's z_n' (reference library)
    fn = sps.spherical_jn if kind == "j" else sps.spherical_yn
    exact = -2 / z * fn(n, z, derivative=True) - (1 - n * (n + 1) / z ** 2) * fn(n, z)
    scale = max(abs(exact), abs(fn(n, z)))
    for part in (anp.real, anp.imag):
        def f(t, part=part):
            return part(spherical_bessel(z + t, n, kind, True))
        g = grad(f)(0.0)
        assert abs(g - part(exact)) < 1e-11 * scale
        assert abs(g - _fd(f, 0.0, 1e-6 * max(1.0, abs(z)))) < 1e-7 * scale


def test_bessel_broadcasting_vjp_sums_over_orders():
    # x (Q, 1) against orders (K,): the reverse pass sums over the order axis
    x = np.array([[0.7], [1.9 + 0.2j]])
    n = np.array([1, 2, 3])

    def f(s):
        return anp.real(anp.sum(spherical_bessel(s * x, n, "j")))

    ref = np.sum(np.real(x * (sps.spherical_jn(n, x, derivative=True))))   # scipy
    assert grad(f)(1.0) == pytest.approx(ref, rel=1e-12)


def test_sphere_limit_and_mirror_zeros():
    # sphere_tmatrix = diag(-a_l, -b_l) (Bohren & Huffman; miepython-checked in test_mie.py)
    k, mr = np.array([1.0, 1.2]), np.array([2.0 + 0.5j, 2.0 + 0.5j])
    T = ebcm.spheroid_tmatrix(k, mr, 1.1, 1.1, 4)
    assert np.abs(T - sphere_tmatrix(k * 1.1, mr, 4)).max() < 1e-12
    # docs/theory.md §4 selection rules, enforced as exact zeros
    T = ebcm.cylinder_tmatrix(k, mr, 0.8, 0.5, 4)
    tau, ls, ms = mode_table(4)
    same = tau[:, None] == tau[None, :]
    odd = (ls[:, None] + ls[None, :]) % 2 == 1
    forbidden = np.where(same, odd, ~odd) | (ms[:, None] != ms[None, :])
    assert np.all(T[:, forbidden] == 0)
    assert np.all(T[:, ~forbidden] != 0)


# ------------------------------------------------------------------ gradients


LMAX = 2


def _label(t, l, m):
    tau, ls, ms = mode_table(LMAX)
    return int(np.flatnonzero((tau == t) & (ls == l) & (ms == m))[0])


# allowed entries (row, column) as (tau, l, m): N10-N10, M21-M21 (diagonal), N11-M21 and
# M1-1-N2-1 (cross-type, l + l' odd; docs/theory.md §4 selection rules)
ENTRIES = [(_label(0, 1, 0), _label(0, 1, 0)), (_label(1, 2, 1), _label(1, 2, 1)),
           (_label(0, 1, 1), _label(1, 2, 1)), (_label(1, 1, -1), _label(0, 2, -1))]
NAMES = ["size1_nm", "size2_nm", "wavelength_nm", "n_re", "n_im"]
N_HOST = 1.33
K_HAT = np.array([math.sin(0.7) * math.cos(0.3), math.sin(0.7) * math.sin(0.3),
                  math.cos(0.7)])
_S = np.cross(K_HAT, [0, 0, 1.0]) / np.linalg.norm(np.cross(K_HAT, [0, 0, 1.0]))
E0 = (_S + 1j * np.cross(_S, K_HAT)) / math.sqrt(2)
E_INC = planewave_coefficients(K_HAT, E0, LMAX)

# (shape, p0 = [size1, size2, wavelength, Re n, Im n], nmax, n_quad, rtol):
# spheroid a, c; cylinder radius, height. rtol 1e-6 for both; measured agreement at the
# 1e-5 step: spheroids ~2e-9, cylinders ~2e-8 (the gradient is that of the discrete
# method at fixed orders and node split, so finite differences converge to it; the
# cylinder's larger residual is finite-difference round-off from its worse-conditioned Q)
GRAD_CASES = [
    ("spheroid", [90.0, 60.0, 700.0, 3.6, 0.02], 10, 100, 1e-6),
    ("spheroid", [50.0, 110.0, 600.0, 2.0, 0.3], 10, 100, 1e-6),
    ("cylinder", [100.0, 120.0, 750.0, 3.7, 0.01], 14, 160, 1e-6),
    ("cylinder", [60.0, 200.0, 650.0, 2.0, 0.1], 14, 160, 1e-6),
]


def _outputs(shape, p, nmax, n_quad):
    """Selected T entries (Re, Im) at the second wavelength and the orientation-fixed
    extinction summed over the two wavelengths [nm^2]."""
    s1, s2, wl, nre, nim = p[0] * NM, p[1] * NM, p[2] * NM, p[3], p[4]
    k = 2 * math.pi * N_HOST / (wl * np.array([1.0, 1.15]))
    m = (nre + 1j * nim) / N_HOST * np.ones(2)
    T = getattr(ebcm, f"{shape}_tmatrix")(k, m, s1, s2, LMAX, nmax=nmax, n_quad=n_quad)
    vals = []
    for i, j in ENTRIES:
        vals += [anp.real(T[1, i, j]), anp.imag(T[1, i, j])]
    # C_ext = -Re(e^H T e)/k^2 (optical theorem in the T-matrix form used by
    # tests/test_ebcm.py::test_optical_theorem; Bohren & Huffman 1983 §3.4)
    f = anp.einsum("wij,j->wi", T, E_INC)
    c_ext = -anp.real(anp.sum(anp.conj(E_INC) * f, axis=-1)) / k ** 2
    vals.append(anp.sum(c_ext) / NM ** 2)
    return vals


@pytest.fixture(scope="module", params=GRAD_CASES, ids=lambda c: f"{c[0]}-{c[1][0]:g}")
def grad_case(request):
    shape, p0, nmax, nq, rtol = request.param
    p0 = np.array(p0)
    n_out = len(_outputs(shape, p0, nmax, nq))
    ad = np.array([grad(lambda p, i=i: _outputs(shape, p, nmax, nq)[i])(p0)
                   for i in range(n_out)])                           # (outputs, params)
    fd = np.empty_like(ad)
    for q in range(len(p0)):
        h = 1e-5 * max(abs(p0[q]), 0.1)
        e = np.zeros(len(p0))
        e[q] = h
        fd[:, q] = (np.array(_outputs(shape, p0 + e, nmax, nq))
                    - np.array(_outputs(shape, p0 - e, nmax, nq))) / (2 * h)
    return shape, ad, fd, rtol


@pytest.mark.parametrize("q", range(len(NAMES)), ids=NAMES)
def test_gradients_vs_central_finite_differences(grad_case, q):
    # central finite differences, step 1e-5 relative (common practice, no source); per
    # output, error relative to the largest |derivative| of that output over the five
    # parameters scaled to unit relative change (so all parameters are comparable)
    shape, ad, fd, rtol = grad_case
    assert np.all(np.isfinite(ad))
    err = np.abs(ad[:, q] - fd[:, q])
    assert np.all(err <= rtol * np.abs(fd).max(axis=1) + 1e-300), (shape, NAMES[q], err)


def test_extinction_gradient_relative_accuracy(grad_case):
    # the extinction row alone, per parameter relative error (central FD, common practice)
    shape, ad, fd, rtol = grad_case
    ext_ad, ext_fd = ad[-1], fd[-1]
    big = np.abs(ext_fd) > 1e-3 * np.abs(ext_fd).max()
    np.testing.assert_allclose(ext_ad[big], ext_fd[big], rtol=rtol)


def test_cylinder_nodes_move_with_edge_angle():
    # d theta_c / d radius = 2 H / (H^2 + 4 a^2) (derivative of atan(2a/H)); the first
    # face node sits at theta_c (1 + x_0)/2 with x_0 the first Gauss node on [-1, 1]
    a, h, nq = 0.7, 1.1, 80
    counts0 = round(nq * a / (2 * a + h))
    x0 = np.polynomial.legendre.leggauss(max(8, counts0))[0][-1]
    g = grad(lambda r: ebcm.cylinder_surface(r, h, nq)[0][max(8, counts0) - 1])(a)
    assert g == pytest.approx(2 * h / (h * h + 4 * a * a) * (1 + x0) / 2, rel=1e-12)


def test_classes_differentiable_in_size_and_index():
    # the protocol classes pass traced sizes and indices through (no detaching)
    wl = np.array([600.0, 700.0]) * NM
    k = 2 * math.pi * N_HOST / wl

    def f(p):
        cyl = ebcm.Cylinder(radius=p[0] * NM, height=p[1] * NM,
                               index=(p[2] + 0.02j) * np.ones(2), n_host=N_HOST,
                               nmax=12, n_quad=120)
        spd = ebcm.Spheroid(a=p[0] * NM, c=p[1] * NM, index=(p[2] + 0.02j) * np.ones(2),
                               n_host=N_HOST, nmax=10, n_quad=80)
        return anp.real(anp.sum(cyl.tmatrix(k, 1)) + anp.sum(spd.tmatrix(k, 1)))

    p0 = np.array([80.0, 100.0, 3.8])
    g = grad(f)(p0)
    fd = np.array([_fd(lambda t, i=i: f(p0 + t * np.eye(3)[i]), 0.0, 1e-4) for i in range(3)])
    np.testing.assert_allclose(g, fd, rtol=1e-6, atol=1e-6 * np.abs(fd).max())
