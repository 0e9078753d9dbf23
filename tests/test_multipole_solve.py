"""Coupled multipole lattice model against the dipole model and physics (docs/theory.md §9)."""

import miepython
import numpy as np
import pytest
from autograd import grad

from chiropt.design import design_from_dict
from chiropt.farfield import power_fractions
from chiropt.multipole.solve import solve_multipole
from chiropt.multipole.tmatrix import (
    choose_lmax,
    design_particles,
    sphere_tmatrix,
    stack_tmatrices,
)
from chiropt.solve import solve
from chiropt.structure import build_structure

SQUARE = {"kind": "square", "period_nm": 450}
HEX = {"kind": "hexagonal", "period_nm": 470}
SI = {"n": 3.6, "k": 0.0}     # silicon-like, lossless (illustrative)
GLASS = {"n": 1.46, "k": 0.0}  # fused-silica-like (illustrative)


def _design(lattice=SQUARE, *, radius=90.0, material=SI, wl=(600.0, 700.0, 850.0), polar=0.0,
            azimuth=0.0, substrate=None, particles=None, host=1.0, gap=0.0):
    data = {"lattice": lattice,
            "particles": particles or [{"radius_nm": radius, "material": material}],
            "host_index": host,
            "illumination": {"wavelength_nm": list(wl), "polar_deg": polar,
                             "azimuth_deg": azimuth},
            "model": {"tolerance": 1e-10}}
    if substrate is not None:
        data.update(substrate={"material": substrate}, gap_nm=gap)
    return design_from_dict(data)


def _run(design, lmax, values=None, **kw):
    st = build_structure(design, values)
    T = stack_tmatrices(design_particles(design, values), st.k, lmax)
    return st, solve_multipole(st, T, lmax, **kw)


TWO = [{"radius_nm": 80, "material": SI, "position_nm": [0, 0]},
       {"radius_nm": 55, "material": {"n": 2.4, "k": 0.0}, "position_nm": [210, 140]}]


@pytest.mark.parametrize("substrate", [None, GLASS])
@pytest.mark.parametrize("particles", [None, TWO])
def test_lmax1_equals_dipole_model(substrate, particles):
    # chiropt.solve (the dipole model, docs/theory.md §5, §7): at lmax = 1 the multipole
    # equations are the same physics; same orders kept -> R, T, amplitudes, moments to 1e-10
    des = _design(polar=20, azimuth=30, substrate=substrate, particles=particles, gap=10.0)
    st, sol = _run(des, 1)
    ref = solve(st, g_max=float(np.max(np.linalg.norm(sol.orders.q[0], axis=-1))) * 1.5)
    n = sol.up_sp.shape[2]
    assert ref.up_sp.shape[2] >= n
    fr, fm = power_fractions(ref), power_fractions(sol)
    assert np.abs(fr["R"] - fm["R"]).max() < 1e-10
    assert np.abs(fr["T"] - fm["T"]).max() < 1e-10
    nf = sol.n_far
    for a, b in ((ref.up_sp, sol.up_sp), (ref.exit_sp, sol.exit_sp)):
        assert np.abs(a[:, :, :nf] - b[:, :, :nf]).max() < 1e-10
    # evanescent orders referenced at z_top grow like exp(|kz| h): compare relatively
    assert np.abs(ref.down_sp[:, :, :n] - sol.down_sp).max() \
        < 1e-10 * np.abs(sol.down_sp).max()
    assert np.abs(ref.moments - sol.moments).max() < 1e-10 * np.abs(ref.moments).max()


@pytest.mark.parametrize("lmax", [1, 2, 3, 4])
@pytest.mark.parametrize("lattice", [SQUARE, HEX])
@pytest.mark.parametrize("polar,azimuth", [(0.0, 0.0), (25.0, 30.0)])
def test_energy_conservation_lossless(lmax, lattice, polar, azimuth):
    # docs/theory.md §8: R + T = 1 for lossless particles (both below and above the
    # diffraction threshold: 420 nm diffracts on the square lattice) to 1e-10
    _, sol = _run(_design(lattice, wl=(420.0, 620.0, 800.0), polar=polar, azimuth=azimuth),
                  lmax)
    fr = power_fractions(sol)
    assert np.abs(fr["R"] + fr["T"] - 1).max() < 1e-10
    assert fr["R"].max() > 1e-2


@pytest.mark.parametrize("lmax", [1, 2, 3])
@pytest.mark.parametrize("polar,azimuth", [(0.0, 0.0), (30.0, 20.0)])
def test_energy_conservation_with_substrate(lmax, polar, azimuth):
    # docs/theory.md §8 with a lossless substrate (to 1e-9), sphere 20 nm above glass
    _, sol = _run(_design(HEX, wl=(640.0, 780.0), polar=polar, azimuth=azimuth,
                          substrate=GLASS, gap=20.0), lmax)
    fr = power_fractions(sol)
    assert np.abs(fr["R"] + fr["T"] - 1).max() < 1e-9


@pytest.mark.parametrize("lmax", [1, 3])
def test_lossy_absorption_equals_particle_losses(lmax):
    # docs/theory.md §8: with loss, 1 - R - T equals the power the particles absorb,
    # -Re(e^H f) - |f|^2 per particle (Mishchenko, Travis & Lacis 2002 §5.8)
    _, sol = _run(_design(HEX, material={"n": 3.7, "k": 0.08}, polar=15, azimuth=10,
                          substrate=GLASS, gap=5.0, wl=(560.0, 700.0)), lmax)
    fr = power_fractions(sol)
    assert np.abs(fr["A"] - fr["A_particles"]).max() < 1e-9
    assert fr["A"].min() > 1e-3


@pytest.mark.parametrize("polar", [0.0, 20.0])
def test_convergence_with_lmax_is_geometric(polar):
    # docs/theory.md §15: successive differences shrink geometrically (Si-like n = 3.6, r = 100 nm,
    # period 450 nm, x = k r = 1.21 at 520 nm, 1.45 at 435 nm); common practice, no source
    des = _design(radius=100.0, wl=(520.0, 600.0), polar=polar)
    R = [power_fractions(_run(des, L)[1])["R"] for L in (1, 2, 3, 4, 5)]
    diff = [np.abs(R[i + 1] - R[i]).max() for i in range(4)]
    assert diff[0] > 1e-3  # the dipole model is measurably off (docs/theory.md §15)
    assert diff[1] < 0.3 * diff[0] and diff[2] < 0.3 * diff[1] and diff[3] < 0.3 * diff[2]


def test_sparse_lattice_forward_extinction_equals_mie():
    # Optical theorem: for a sparse lattice 2 A Re(1 - t00) -> sigma_ext of the isolated
    # sphere truncated at lmax; miepython (reference library) a_n, b_n,
    # sigma_ext = (2 pi/k^2) sum (2n+1) Re(a_n + b_n) (Bohren & Huffman eq. 4.62).
    # A weak scatterer (m = 1.33, x = 2) keeps the lattice correction (~ sigma/A, decaying
    # like period^-1.5 next to the nearest grazing order) well below the quadrupole share.
    wl, m, x, lmax = 700.0, 1.33, 2.0, 2
    k = 2 * np.pi / wl

    def mie_sigma(L):
        a, b = miepython.an_bn(np.conj(m), x, L)  # miepython takes m = n - i k
        n = np.arange(1, L + 1)
        return 2 * np.pi / k ** 2 * np.sum((2 * n + 1) * np.real(a + b))

    sigma = mie_sigma(lmax)
    share = 1 - mie_sigma(lmax - 1) / sigma   # quadrupole share, ~ 0.11
    errs = []
    # periods chosen as far as possible from the anomalies |G| = k (square lattice)
    for period in (19.532 * wl, 40.927 * wl):
        des = _design({"kind": "square", "period_nm": period}, radius=x / k,
                      material={"n": m, "k": 0.0}, wl=(wl,))
        _, sol = _run(des, lmax)
        e_inc = sol.incident_vector()[0, 0]
        t00 = np.vdot(e_inc, sol.exit_vectors(1)[0, 0, 0])
        errs.append(abs(2 * period ** 2 * np.real(1 - t00) / sigma - 1))
    assert errs[1] < errs[0] < 0.04
    assert errs[1] < 0.1 * share


def _jones(sol):
    """Zeroth-order reflection Jones matrix on (s, p) from the two helicity solutions."""
    inc = sol.incident_sp[0].T          # (2 comps, 2 helicities)
    out = sol.up_sp[0, :, 0, :].T
    return out @ np.linalg.inv(inc)


@pytest.mark.parametrize("lmax", [1, 2, 3])
def test_reciprocity_of_zeroth_order_reflection(lmax):
    # Lorentz reciprocity (Landau & Lifshitz, ECM §89; common practice): reversing k_par
    # (azimuth + 180 deg) gives r_ss, r_pp unchanged and r_sp(k_par) = -r_ps(-k_par) in the
    # basis s = z x q_hat, p = s x k_hat; chiral-looking two-particle cell, oblique incidence
    J1 = _jones(_run(_design(particles=TWO, wl=(720.0,), polar=35, azimuth=25), lmax)[1])
    J2 = _jones(_run(_design(particles=TWO, wl=(720.0,), polar=35, azimuth=205), lmax)[1])
    assert abs(J1[0, 1]) > 1e-3  # cross-polarized reflection is present
    np.testing.assert_allclose([J1[0, 0], J1[1, 1], J1[0, 1], J1[1, 0]],
                               [J2[0, 0], J2[1, 1], -J2[1, 0], -J2[0, 1]], atol=1e-10)


def test_sphere_tmatrix_is_minus_mie_coefficients():
    # sphericalwaves/tmatrix convention: T = diag(-a_l) on N modes, diag(-b_l) on M modes;
    # miepython (reference library) a_n, b_n
    x, m = np.array([1.3]), np.array([3.5 + 0.02j])
    T = np.asarray(sphere_tmatrix(x, m, 3))[0]
    a, b = miepython.an_bn(np.conj(m[0]), x[0], 3)
    d = np.diagonal(T)
    np.testing.assert_allclose(d[0:6:2], -a[0], rtol=1e-12)   # l = 1, N modes
    np.testing.assert_allclose(d[7:16:2], -b[1], rtol=1e-12)  # l = 2, M modes
    assert np.abs(T - np.diag(d)).max() == 0


def test_choose_lmax_grows_with_size():
    # Mie orders fall off beyond l ~ x (Wiscombe, Appl. Opt. 19, 1505 (1980)); common practice
    small = design_particles(_design(radius=30.0))
    big = design_particles(_design(radius=120.0))
    k = 2 * np.pi / np.array([600e-9])
    assert choose_lmax(small, k, tol=1e-4) < choose_lmax(big, k, tol=1e-4)


def test_gradient_through_multipole_solve():
    # common practice, no source: autograd derivative of R w.r.t. the radius (lmax = 2,
    # with a substrate) against a central finite difference
    des = _design(HEX, wl=(700.0,), polar=20, substrate=GLASS, gap=10.0)

    def R(radius):
        vals = {"particles[0].radius_nm": radius}
        return power_fractions(_run(des, 2, vals, warn=False)[1])["R"][0, 0]

    g = grad(R)(90.0)
    h = 1e-4
    fd = (R(90.0 + h) - R(90.0 - h)) / (2 * h)
    assert abs(g - fd) < 1e-6 * max(abs(fd), 1e-3)


def test_bad_tmatrix_shape_is_an_input_error():
    from chiropt.errors import InputError

    des = _design()
    st = build_structure(des)
    with pytest.raises(InputError, match="tmatrices"):
        solve_multipole(st, np.zeros((3, 1, 6, 6)), 2)
    with pytest.raises(InputError, match="lmax"):
        solve_multipole(st, np.zeros((3, 1, 6, 6)), 0)


@pytest.mark.parametrize("arg,reflected", [(a, True) for a in range(7)]
                         + [(a, False) for a in range(3)])
def test_coupled_solve_primitive_matches_the_taped_operations(arg, reflected):
    # autograd (reference library): its own derivative of the operation-by-operation
    # system (reception and emission vectors of the orders, their stack-reflected products,
    # (I - T W) f = T b, e = b + W f) that the primitive replaces; values equal, and the
    # gradient of a real functional of f and e w.r.t. each (complex) input equal to round-off
    import autograd.numpy as anp
    from autograd import grad as agrad

    from chiropt.multipole.coupled import coupled_solve
    from chiropt.sphericalwaves import channel_modes

    rng = np.random.default_rng(5)
    W, G, N, lmax = 2, 7, 2, 1
    K = lmax * (lmax + 2)
    M = N * 2 * K

    def c(*shape):
        return rng.normal(size=shape) + 1j * rng.normal(size=shape)

    args = [0.3 * c(W, M, M), 0.2 * c(W, M, M), c(W, 2, M),
            c(W, G, N), c(W, G, 2), 0.3 * c(W, G, 2, K), c(W, G, N)]
    weight_f, weight_e = c(W, 2, M), c(W, 2, M)

    def taped(Tb, W_lat, b, rc, r, P, ph):
        Wm = W_lat
        if reflected:
            recv = channel_modes(P, "receive", lmax)
            emit = channel_modes(P, "emit", lmax, down=True)
            rv = (anp.reshape(rc, (W, G, 1, N, 1)) * anp.reshape(r, (W, G, 2, 1, 1))
                  * anp.reshape(recv, (W, G, 2, 1, 2 * K)))
            em = anp.reshape(ph, (W, G, 1, N, 1)) * anp.reshape(emit, (W, G, 2, 1, 2 * K))
            Wm = Wm + anp.matmul(anp.transpose(anp.reshape(rv, (W, 2 * G, M)), (0, 2, 1)),
                                 anp.reshape(em, (W, 2 * G, M)))
        A = anp.eye(M)[None] - anp.matmul(Tb, Wm)
        f = anp.transpose(anp.linalg.solve(A, anp.matmul(Tb, anp.transpose(b, (0, 2, 1)))),
                          (0, 2, 1))
        e = b + anp.transpose(anp.matmul(Wm, anp.transpose(f, (0, 2, 1))), (0, 2, 1))
        return f, e

    def ours(Tb, W_lat, b, rc, r, P, ph):
        return coupled_solve(Tb, W_lat, b, (rc, r, P, ph, lmax) if reflected else None)

    def functional(fn):
        def wrapped(x):
            a = list(args)
            a[arg] = x
            f, e = fn(*a)
            return anp.real(anp.sum(weight_f * f) + anp.sum(weight_e * e))
        return wrapped

    for mine, ref in zip(ours(*args), taped(*args), strict=True):
        np.testing.assert_allclose(mine, ref, rtol=1e-12)
    mine = agrad(functional(ours))(args[arg])
    ref = agrad(functional(taped))(args[arg])
    np.testing.assert_allclose(mine, ref, rtol=1e-11, atol=1e-12)
