"""Tests of chiropt.lattice.ewald: lattice Green's dyadics by Ewald summation.

Three kinds of evidence: independent slow references kept here (a literal Weyl spectral
sum, a literal real-space sum with a Gaussian cutoff extrapolated in the cutoff radius),
the energy identities of docs/theory.md §8, and symmetries / independence of the splitting.
"""

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import grad

from chiropt.errors import InputError
from chiropt.lattice import (
    Lattice,
    kz_branch,
    lattice_green_derivatives,
    lattice_green_dyadics,
    order_indices,
    order_wavevectors,
    rayleigh_proximity,
    splitting_parameter,
)

A0 = 400e-9  # lattice constant [m]

LATTICES = {
    "square": lambda a=A0: Lattice.square(a),
    "hexagonal": lambda a=A0: Lattice.hexagonal(a),
    "oblique": lambda a=A0: Lattice.oblique(a, 1.3 * a, 1.1),
}


def wavenumbers(*ratios):
    """k [1/m] for vacuum wavelengths lambda = ratio * A0 (host n = 1)."""
    return 2 * np.pi / (np.asarray(ratios, dtype=float) * A0)


def bloch(k, fx, fy):
    """In-plane Bloch vectors (fx k, fy k), shape (W, 2)."""
    return np.stack([fx * k, fy * k], axis=-1)


def block_error(x, ref):
    """Largest |x - ref| of each (w, p) block, relative to that block's largest |ref|."""
    axes = tuple(range(2, ref.ndim))
    return np.max(np.abs(x - ref), axis=axes) / np.max(np.abs(ref), axis=axes)


def assert_away_from_anomalies(k, k_par, lat, margin=0.02):
    assert np.all(rayleigh_proximity(k, k_par, lat) > margin), "test case too close to an RA"


# ---------------------------------------------------------------- splitting independence
D_EWALD = np.array([
    [0.0, 0.0, 0.0],                       # self term (regularized)
    [0.3, -0.2, 0.0],                      # in-plane
    [0.2, 0.1, 0.25],                      # off-plane, Ewald branch
    [-0.4, 0.35, -0.45],                   # off-plane, Ewald branch
]) * A0


@pytest.mark.parametrize("lattice", LATTICES)
@pytest.mark.parametrize("kpar", [(0.0, 0.0), (0.2, 0.1)])
def test_independent_of_splitting_low_frequency(lattice, kpar):
    # docs/theory.md §6 (Linton 2010 Ewald method): the sum does not depend on E
    lat = LATTICES[lattice]()
    k = wavenumbers(1.35, 2.0)
    kp = bloch(k, *kpar)
    assert_away_from_anomalies(k, kp, lat)
    e_opt = np.sqrt(np.pi / lat.area)
    out = [lattice_green_dyadics(k, kp, lat, D_EWALD, tol=1e-14, splitting=f * e_opt)
           for f in (0.5, 1.0, 2.0)]
    for S, c in out[1:]:
        scale = np.max(np.abs(out[0][0]), axis=(2, 3))
        assert np.max(block_error(S, out[0][0])) < 1e-10
        assert np.max(np.max(np.abs(c - out[0][1]), axis=2) / scale) < 1e-10


@pytest.mark.parametrize("lattice", LATTICES)
@pytest.mark.parametrize("kpar", [(0.0, 0.0), (0.15, -0.25)])
def test_independent_of_splitting_high_frequency(lattice, kpar):
    # docs/theory.md §6: at period >> lambda, E >= k/(2H) keeps exp(k^2/4E^2) bounded;
    # E-independence still holds (Linton 2010 Ewald method)
    lat = LATTICES[lattice]()
    k = wavenumbers(0.46)
    kp = bloch(k, *kpar)
    assert_away_from_anomalies(k, kp, lat, margin=0.005)
    e_def = k[0] / (2 * np.sqrt(3.0))
    out = [lattice_green_dyadics(k, kp, lat, D_EWALD, tol=1e-14, splitting=f * e_def)
           for f in (1.0, 1.5, 2.0)]
    for S, _ in out[1:]:
        assert np.max(block_error(S, out[0][0])) < 1e-10
    default = lattice_green_dyadics(k, kp, lat, D_EWALD, tol=1e-14)
    assert np.max(block_error(default[0], out[0][0])) < 1e-10


def test_default_splitting_parameter():
    # docs/theory.md §6: E = max(sqrt(pi/A), k/(2H)); chiropt's choice H = sqrt(3)
    lat = LATTICES["hexagonal"]()
    k = wavenumbers(2.0, 0.3)
    E = splitting_parameter(k, lat)
    assert E[0] == pytest.approx(np.sqrt(np.pi / lat.area), rel=1e-15)
    assert E[1] == pytest.approx(k[1] / (2 * np.sqrt(3)), rel=1e-15)


# ---------------------------------------------------------------- reference: Weyl sum
def weyl_reference(k, k_par, lat, d, n_max=40):
    """Literal spectral (Weyl) sum of S and c for one wavelength, z != 0 (slow reference).

    G = (i/2A) sum_g exp(i q.rho + i kz |z|)/kz (docs/theory.md §6), so that
    S = sum (i/2A) e^(...)/kz [I - kv kv / k^2] and c = sum (i/2A) e^(...)/kz (i kv / k),
    kv = (q, kz sign z) the order's wavevector.
    """
    b1, b2 = lat.reciprocal()
    area = lat.area
    S = np.zeros((3, 3), complex)
    c = np.zeros(3, complex)
    for m in range(-n_max, n_max + 1):
        for n in range(-n_max, n_max + 1):
            q = k_par + m * b1 + n * b2
            kz = np.sqrt(complex(k**2 - q @ q))
            kz = kz if kz.imag >= 0 else -kz
            kv = np.array([q[0], q[1], kz * np.sign(d[2])])
            term = 1j / (2 * area) * np.exp(1j * q @ d[:2] + 1j * kz * abs(d[2])) / kz
            S += term * (np.eye(3) - np.outer(kv, kv) / k**2)
            c += term * 1j * kv / k
    return S, c


@pytest.mark.parametrize(
    ("lattice", "ratio", "kpar", "d"),
    [
        ("square", 1.3, (0.0, 0.0), (0.21, -0.13, 0.35)),     # Ewald branch
        ("square", 0.8, (0.3, 0.1), (0.21, -0.13, -0.3)),     # above threshold, Ewald
        ("hexagonal", 1.1, (0.1, -0.2), (0.5, 0.2, 0.6)),     # Ewald, near the switch
        ("oblique", 1.6, (0.25, 0.05), (-0.3, 0.4, 1.2)),     # Weyl branch
        ("hexagonal", 0.8, (0.0, 0.3), (0.1, 0.1, -2.0)),     # Weyl branch
    ],
)
def test_agrees_with_weyl_sum_off_plane(lattice, ratio, kpar, d):
    # independent reference: literal Weyl spectral sum (docs/theory.md §6, Linton 2010)
    lat = LATTICES[lattice]()
    k = wavenumbers(ratio)
    kp = bloch(k, *kpar)
    assert_away_from_anomalies(k, kp, lat)
    dv = np.array([d]) * A0
    S, c = lattice_green_dyadics(k, kp, lat, dv, tol=1e-12)
    S_ref, c_ref = weyl_reference(k[0], kp[0], lat, dv[0])
    scale = np.max(np.abs(S_ref))
    assert np.max(np.abs(S[0, 0] - S_ref)) / scale < 1e-9
    assert np.max(np.abs(c[0, 0] - c_ref)) / scale < 1e-9


# ---------------------------------------------------------------- reference: real space
def windowed_real_space_sum(k, k_par, lat, d, r_cut):
    """Literal real-space sum sum_R e^(i k_par.R) G(d - R) exp(-(|d-R|/r_cut)^2), R = 0
    excluded when d = 0 (slow reference).

    Closed-form dyadic of g (Jackson, Classical Electrodynamics, §9.2):
    (I + grad grad/k^2) g = g [(1 + i/kr - 1/(kr)^2) I + (-1 - 3i/kr + 3/(kr)^2) r^r^],
    and grad g = g (ik - 1/r) r^.
    """
    a1, a2 = np.asarray(lat.a1), np.asarray(lat.a2)
    b1, b2 = lat.reciprocal()
    reach = 6.5 * r_cut + np.linalg.norm(d[:2])
    n1 = int(reach * np.linalg.norm(b1) / (2 * np.pi)) + 1
    n2 = int(reach * np.linalg.norm(b2) / (2 * np.pi)) + 1
    i1, i2 = np.meshgrid(np.arange(-n1, n1 + 1), np.arange(-n2, n2 + 1), indexing="ij")
    R = i1.ravel()[:, None] * a1 + i2.ravel()[:, None] * a2
    r = d[None, :] - np.concatenate([R, np.zeros((len(R), 1))], axis=1)
    dist = np.linalg.norm(r, axis=1)
    keep = dist > 1e-6 * A0
    r, dist, R = r[keep], dist[keep], R[keep]
    rhat = r / dist[:, None]
    kr = k * dist
    g = np.exp(1j * kr) / (4 * np.pi * dist)
    w = np.exp(1j * R @ k_par) * np.exp(-((dist / r_cut) ** 2)) * g
    S = (np.sum(w * (1 + 1j / kr - 1 / kr**2)) * np.eye(3)
         + np.einsum("n,ni,nj->ij", w * (-1 - 3j / kr + 3 / kr**2), rhat, rhat))
    c = np.einsum("n,ni->i", w * (1j * k - 1 / dist), rhat) / k
    return S, c


@pytest.mark.parametrize(
    ("lattice", "ratio", "kpar", "d"),
    [
        ("square", 1.375, (0.0, 0.0), (0.0, 0.0, 0.0)),
        ("hexagonal", 1.375, (0.2, 0.1), (0.3, 0.1, 0.0)),
        ("oblique", 2.0, (-0.1, 0.25), (0.0, 0.0, 0.0)),
    ],
)
def test_agrees_with_extrapolated_real_space_sum(lattice, ratio, kpar, d):
    # Independent reference: the conditionally convergent real-space sum with a Gaussian
    # cutoff exp(-(R/Rc)^2), at Rc = 6..16 periods, extrapolated Rc -> infinity by a
    # least-squares polynomial in 1/Rc^2 (the cutoff's error is a series in 1/Rc^2 plus
    # terms exp(-(delta Rc)^2/4), delta the distance to the light cone in k-space:
    # Poisson summation; common practice, no source).
    lat = LATTICES[lattice]()
    k = wavenumbers(ratio)
    kp = bloch(k, *kpar)
    assert_away_from_anomalies(k, kp, lat, margin=0.3)
    dv = np.array([d]) * A0
    S, c = lattice_green_dyadics(k, kp, lat, dv, tol=1e-12)
    cuts = np.array([6.0, 8.0, 10.0, 12.0, 14.0, 16.0]) * A0
    sums = [windowed_real_space_sum(k[0], kp[0], lat, dv[0], rc) for rc in cuts]
    vander = np.vander((A0 / cuts) ** 2, 5)
    S_ext = np.linalg.lstsq(vander, np.array([s[0].ravel() for s in sums]), rcond=None)[0][-1]
    c_ext = np.linalg.lstsq(vander, np.array([s[1] for s in sums]), rcond=None)[0][-1]
    scale = np.max(np.abs(S[0, 0]))
    assert np.max(np.abs(S[0, 0].ravel() - S_ext)) / scale < 1e-6
    assert np.max(np.abs(c[0, 0] - c_ext)) / scale < 1e-6


# ---------------------------------------------------------------- energy identities
def propagating_orders(k, k_par, lat):
    mn = order_indices(lat, 2 * k[0] + 2 * np.max(np.linalg.norm(k_par, axis=1)))
    q = order_wavevectors(lat, k_par, mn)[0]
    kz = kz_branch(k, q[None])[0]
    prop = np.linalg.norm(q, axis=1) < k[0]
    return q[prop], kz[prop].real


ENERGY_CASES = [(lat, ratio, kpar) for lat in ("square", "hexagonal")
                for ratio in (1.4, 0.8) for kpar in ((0.0, 0.0), (0.3, 0.1))]


@pytest.mark.parametrize(("lattice", "ratio", "kpar"), ENERGY_CASES)
def test_energy_identities(lattice, ratio, kpar):
    # docs/theory.md §8 (García de Abajo, RMP 79, 1267 (2007)), below and above threshold
    lat = LATTICES[lattice]()
    k = wavenumbers(ratio)
    kp = bloch(k, *kpar)
    assert_away_from_anomalies(k, kp, lat)
    area, kk = lat.area, k[0]
    q, kz = propagating_orders(k, kp, lat)
    G, _, _ = lattice_green_derivatives(k, kp, lat, np.zeros((1, 3)), tol=1e-13)
    S, c = lattice_green_dyadics(k, kp, lat, np.zeros((1, 3)), tol=1e-13)

    im_g = np.sum(1 / (2 * area * kz)) - kk / (4 * np.pi)
    assert abs(G[0, 0].imag - im_g) < 1e-10 * abs(G[0, 0])

    kv_up = np.concatenate([q, kz[:, None]], axis=1)
    kv_dn = np.concatenate([q, -kz[:, None]], axis=1)
    im_k2s = (np.einsum("g,gij->ij", 1 / (2 * area * kz),
                        kk**2 * np.eye(3)[None]
                        - 0.5 * (np.einsum("gi,gj->gij", kv_up, kv_up)
                                 + np.einsum("gi,gj->gij", kv_dn, kv_dn)))
              - kk**3 / (6 * np.pi) * np.eye(3))
    k2s = kk**2 * S[0, 0]
    assert np.max(np.abs(k2s.imag - im_k2s)) < 1e-10 * np.max(np.abs(k2s))

    re_c = -np.concatenate([np.sum(q / (2 * area * kk * kz[:, None]), axis=0), [0.0]])
    assert np.max(np.abs(c[0, 0].real - re_c)) < 1e-10 * np.max(np.abs(S[0, 0]))


def test_below_threshold_normal_incidence_closed_form():
    # docs/theory.md §8: Im(k^2 S_xx) = k/(2A) - k^3/(6 pi), Im(k^2 S_zz) = -k^3/(6 pi)
    lat = Lattice.square(A0)
    k = wavenumbers(1.5)
    S, _ = lattice_green_dyadics(k, np.zeros((1, 2)), lat, np.zeros((1, 3)), tol=1e-13)
    kk = k[0]
    assert (kk**2 * S[0, 0, 0, 0]).imag == pytest.approx(kk / (2 * A0**2) - kk**3 / (6 * np.pi),
                                                         rel=1e-10)
    assert (kk**2 * S[0, 0, 2, 2]).imag == pytest.approx(-kk**3 / (6 * np.pi), rel=1e-10)


# ---------------------------------------------------------------- symmetries
def test_self_dyadic_symmetric_and_z_decoupled():
    # S^T = S (reciprocity of the dyadic); S_xz = S_yz = 0 for d = 0 and in-plane k_par
    # (mirror symmetry z -> -z; common practice, no source)
    lat = LATTICES["oblique"]()
    k = wavenumbers(1.3, 0.8)
    S, c = lattice_green_dyadics(k, bloch(k, 0.3, -0.2), lat, np.zeros((1, 3)))
    scale = np.max(np.abs(S))
    assert np.max(np.abs(S - np.swapaxes(S, -1, -2))) < 1e-14 * scale
    assert np.max(np.abs(S[..., 0, 2])) < 1e-14 * scale
    assert np.max(np.abs(S[..., 1, 2])) < 1e-14 * scale
    assert np.max(np.abs(c[..., 2])) < 1e-14 * scale


@pytest.mark.parametrize("lattice", LATTICES)
def test_no_magnetoelectric_self_coupling_at_normal_incidence(lattice):
    # c = 0 at k_par = 0 for d = 0 on a centrosymmetric lattice (docs/theory.md §7)
    lat = LATTICES[lattice]()
    k = wavenumbers(1.3, 0.7)
    S, c = lattice_green_dyadics(k, np.zeros((2, 2)), lat, np.zeros((1, 3)))
    assert np.max(np.abs(c)) < 1e-13 * np.max(np.abs(S))


@pytest.mark.parametrize("d", [(0.3, -0.1, 0.0), (0.2, 0.1, 0.3), (-0.1, 0.4, 1.5)])
def test_reciprocity(d):
    # S(d, k_par) = S(-d, -k_par)^T and c(d, k_par) = -c(-d, -k_par), from g(-r) = g(r)
    # (reciprocity, common practice, no source)
    lat = LATTICES["hexagonal"]()
    k = wavenumbers(1.2, 0.9)
    kp = bloch(k, 0.25, 0.1)
    dv = np.array([d]) * A0
    S1, c1 = lattice_green_dyadics(k, kp, lat, dv, tol=1e-13)
    S2, c2 = lattice_green_dyadics(k, -kp, lat, -dv, tol=1e-13)
    assert np.max(block_error(np.swapaxes(S2, -1, -2), S1)) < 1e-11
    assert np.max(np.abs(c1 + c2)) < 1e-11 * np.max(np.abs(S1))


@pytest.mark.parametrize("d", [(0.3, -0.1, 0.0), (0.2, 0.1, 0.3), (0.0, 0.0, 0.0)])
def test_quasi_periodicity(d):
    # convention check G(r + R) = exp(i k_par.R) G(r) (docs/theory.md §6 definition)
    lat = LATTICES["oblique"]()
    k = wavenumbers(1.2)
    kp = bloch(k, 0.25, 0.1)
    base = np.array([d]) * A0
    shifted = base + np.concatenate([np.asarray(lat.a1) + np.asarray(lat.a2), [0.0]])[None]
    phase = np.exp(1j * kp[0] @ (np.asarray(lat.a1) + np.asarray(lat.a2)))
    S1, c1 = lattice_green_dyadics(k, kp, lat, base, tol=1e-13)
    S2, c2 = lattice_green_dyadics(k, kp, lat, shifted, tol=1e-13)
    assert np.max(block_error(S2, phase * S1)) < 1e-11
    assert np.max(np.abs(c2 - phase * c1)) < 1e-11 * np.max(np.abs(S1))


def test_batch_equals_single_wavelengths():
    # vectorized W axis gives the same values as one call per wavelength (no source)
    lat = LATTICES["square"]()
    k = wavenumbers(1.4, 1.1, 0.8)
    kp = bloch(k, 0.1, 0.0)
    S, c = lattice_green_dyadics(k, kp, lat, D_EWALD, tol=1e-12)
    for w in range(3):
        Sw, cw = lattice_green_dyadics(k[w:w + 1], kp[w:w + 1], lat, D_EWALD, tol=1e-12)
        assert np.max(block_error(Sw, S[w:w + 1])) < 1e-11


# ---------------------------------------------------------------- Rayleigh anomaly
def test_rayleigh_anomaly_finite_and_growing_like_inverse_kz():
    # the sum diverges like 1/kz of the grazing order (docs/theory.md §6); the (+-1,0) orders
    # of a square lattice at normal incidence feed S_yy and S_zz
    lat = Lattice.square(A0)
    eps = np.array([1e-4, 1e-6, 0.0])
    k = 2 * np.pi / (A0 * (1 + eps))
    S, _ = lattice_green_dyadics(k, np.zeros((3, 2)), lat, np.zeros((1, 3)))
    assert np.all(np.isfinite(S))
    kz = np.sqrt(k**2 - (2 * np.pi / A0) ** 2 + 0j)
    prod = S[:2, 0, 1, 1] * kz[:2]
    assert abs(prod[1] / prod[0] - 1) < 0.05
    assert abs(S[2, 0, 1, 1]) > 1e3 * abs(S[0, 0, 1, 1])


# ---------------------------------------------------------------- gradients
RNG = np.random.default_rng(7)
WEIGHT_S = RNG.normal(size=(2, 4, 3, 3)) + 1j * RNG.normal(size=(2, 4, 3, 3))
WEIGHT_C = RNG.normal(size=(2, 4, 3)) + 1j * RNG.normal(size=(2, 4, 3))
# self / in-plane (z = 0: S_xz, S_yz have non-zero z-derivatives) / off-plane Ewald / Weyl
D_GRAD = np.array([[0.0, 0.0, 0.0], [0.25, 0.3, 0.0], [0.3, -0.2, 0.15], [0.1, 0.2, 1.6]]) * A0


def objective(k, k_par, period, d, lattice):
    """Real scalar of S and c (random complex weights), scaled to order one."""
    lat = LATTICES[lattice](period)
    S, c = lattice_green_dyadics(k, k_par, lat, d, tol=1e-14)
    return (anp.sum(anp.real(WEIGHT_S * S)) + anp.sum(anp.imag(WEIGHT_C * c))) * A0


@pytest.mark.parametrize("lattice", ["square", "hexagonal"])
@pytest.mark.parametrize("variable", ["k", "k_par", "period", "d"])
def test_gradient_matches_finite_differences(lattice, variable):
    # autograd vs central finite differences along a random direction (no source)
    k = wavenumbers(1.3, 0.85)
    args = {"k": k, "k_par": bloch(k, 0.2, -0.1), "period": A0, "d": D_GRAD}
    x0 = args[variable]
    direction = np.asarray(RNG.normal(size=np.shape(x0)))
    if variable == "d":
        direction[0] = 0.0   # moving the self displacement off 0 un-regularizes it
    h = 1e-6 * np.max(np.abs(x0)) if variable != "k_par" else 1e-6 * k[0]

    def along(t):
        return objective(**{**args, variable: x0 + t * direction}, lattice=lattice)

    fd = (along(h) - along(-h)) / (2 * h)
    g = grad(lambda x: objective(**{**args, variable: x}, lattice=lattice))(x0)
    ad = np.sum(g * direction)
    assert ad == pytest.approx(fd, rel=1e-6)


# ---------------------------------------------------------------- input errors
@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"k": np.array([-1e7])}, "positive"),
        ({"k": np.array([1e7 + 1e5j])}, "real"),
        ({"k_par": np.zeros((2, 2))}, "shape"),
        ({"d": np.zeros((1, 2))}, "shape"),
        ({"tol": 0.5}, "tol|1e-16"),
        ({"splitting": -1.0}, "positive"),
    ],
)
def test_bad_input_raises(kwargs, match):
    args = {"k": np.array([1e7]), "k_par": np.zeros((1, 2)), "lattice": Lattice.square(A0),
            "d": np.zeros((1, 3))}
    extra = {key: kwargs.pop(key) for key in ("tol", "splitting") if key in kwargs}
    with pytest.raises(InputError, match=match):
        lattice_green_dyadics(**{**args, **kwargs}, **extra)


@pytest.mark.parametrize("direction", [(0.0, 0.0, 1.0), (0.6, -0.3, 0.7)])
def test_gradient_in_plane_displacement_includes_z(direction):
    # d in the plane (z = 0): S_xz, S_yz and c_z change to first order in d_z;
    # autograd vs central finite differences (no source)
    lat = Lattice.hexagonal(A0)
    k = wavenumbers(1.3, 0.85)
    kp = bloch(k, 0.2, -0.1)
    d0 = np.array([[0.25, 0.3, 0.0], [-0.1, 0.2, 0.0]]) * A0
    step = np.array([direction, direction]) * A0

    def f(d):
        S, c = lattice_green_dyadics(k, kp, lat, d, tol=1e-14)
        weighted = anp.sum(anp.real(WEIGHT_S[:, :2] * S)) + anp.sum(anp.imag(WEIGHT_C[:, :2] * c))
        return weighted * A0

    h = 1e-6
    fd = (f(d0 + h * step) - f(d0 - h * step)) / (2 * h)
    assert np.sum(grad(f)(d0) * step) == pytest.approx(fd, rel=1e-6)
