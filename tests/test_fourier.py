"""Fourier modal (RCWA) solver: checks against outside references and physical laws.

Layers: uniform stacks against the tmm library; the lamellar-grating eigenvalues against
the exact modal dispersion relation; energy conservation, reciprocity and mirror
(helicity) symmetry at every harmonic count; the eigen-derivative rule and design
gradients against finite differences; convergence with the harmonic count; agreement
with the multipole model where both are valid.
"""

from __future__ import annotations

import numpy as onp
import pytest
import tmm
from autograd import grad
from scipy.optimize import brentq

from chiropt.design import design_from_dict
from chiropt.fourier.eig import eig_modes
from chiropt.fourier.harmonics import harmonic_indices
from chiropt.fourier.permittivity import layer_matrices, normal_field_matrices
from chiropt.fourier.harmonics import difference_table
from chiropt.fourier.shapes import Circle, Ellipse, Rectangle, Ring
from chiropt.fourier.smatrix import patterned_modes
from chiropt.fourier.stack import (
    FourierLayer,
    FourierStack,
    outgoing,
    solve_stack,
    uniform_flux,
)
from chiropt.lattice import Lattice
from chiropt.model import quantities_of, run_model

NM = 1e-9


def _disk_design(**over):
    base = {"lattice": {"kind": "square", "period_nm": 400},
            "particles": [{"shape": "cylinder", "radius_nm": 100, "height_nm": 120,
                           "material": {"n": 3.5}}],
            "substrate": {"material": {"n": 1.5}}, "gap_nm": 0,
            "illumination": {"wavelength_nm": [760.0]},
            "region": {"kind": "plane", "height_nm": 10},
            "model": {"solver": "fourier", "harmonics": 25}}
    base.update(over)
    return design_from_dict(base)


# ---------------------------------------------------------------------------------------
# uniform stacks: the transfer-matrix result of the tmm library
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("pol", ["s", "p"])
@pytest.mark.parametrize("theta", [0.0, 0.35, 1.1])
def test_unpatterned_stack_equals_tmm(pol, theta):
    # tmm library (Byrnes, arXiv:1603.02720): coherent multilayer r, t amplitudes
    lat = Lattice.square(300 * NM)
    lam = onp.array([480.0, 633.0, 910.0]) * NM
    k0 = 2 * onp.pi / lam
    n_sub = onp.array([1.52, 1.5 + 0.002j, 1.45])
    films = [(onp.array([2.4 + 0.01j, 2.3 + 0.0j, 2.2 + 0.3j]), 85 * NM),
             (onp.array([1.38, 1.38, 1.38]) + 0j, 140 * NM),
             (onp.array([0.05 + 3.0j, 0.06 + 4.0j, 0.2 + 6.0j]), 20 * NM)]  # a metal film
    kpar = onp.stack([k0 * onp.sin(theta) * onp.cos(0.3), k0 * onp.sin(theta) * onp.sin(0.3)],
                     axis=1)
    mn = harmonic_indices(lat, 9)
    M = len(mn)
    stack = FourierStack(lat, k0, kpar, onp.ones(3) + 0j, n_sub ** 2,
                         [FourierLayer(d, n ** 2) for n, d in films], mn)
    sol = solve_stack(stack)
    # incident (0,0) wave: s = z x q_hat, p_down = s x k_hat (in-plane part -cos(theta) q_hat)
    qh = onp.array([onp.cos(0.3), onp.sin(0.3)])
    s_vec = onp.array([-qh[1], qh[0]])
    inc = onp.zeros((3, 2 * M, 1), complex)
    vec = s_vec if pol == "s" else -onp.cos(theta) * qh
    inc[:, 0, 0], inc[:, M, 0] = vec
    up, down = outgoing(sol, from_above=inc)
    for w in range(3):
        top_down = films[::-1]   # tmm lists layers from the side of incidence
        n_list = [1.0] + [n[w] for n, _ in top_down] + [n_sub[w]]
        ref = tmm.coh_tmm(pol, n_list, [onp.inf] + [d / NM for _, d in top_down] + [onp.inf],
                          theta, lam[w] / NM)
        e_up = onp.array([up[w, 0, 0], up[w, M, 0]])
        e_dn = onp.array([down[w, 0, 0], down[w, M, 0]])
        th_t = tmm.snell(1.0, n_sub[w], theta)
        if pol == "s":
            r, t = e_up @ s_vec, e_dn @ s_vec
        else:  # tmm's p amplitudes: field along p, p_up in-plane +cos(t) q_hat, p_down -cos
            r = (e_up @ qh) / onp.cos(theta)
            t = -(e_dn @ qh) / onp.cos(th_t)
        assert abs(r - ref["r"]) < 1e-12
        assert abs(t - ref["t"]) < 1e-12
    # every other harmonic stays dark in a uniform stack
    dark = onp.delete(onp.abs(up[..., 0]), [0, M], axis=1)
    assert onp.max(dark) < 1e-14


# ---------------------------------------------------------------------------------------
# lamellar grating: eigenvalues against the exact modal dispersion relation
# ---------------------------------------------------------------------------------------

def _lamellar_dispersion(g2, eps1, eps2, a, b, k0, kx0, tm):
    """Modal dispersion relation of a lamellar grating (Botten et al., Optica Acta 28, 413
    (1981); Li, J. Mod. Opt. 40, 553 (1993), eq. 9): lamellae of widths a, b, permittivities
    eps1, eps2; normalized propagation constant squared g2; TM uses beta/eps."""
    b1 = k0 * onp.sqrt(eps1 - g2 + 0j)
    b2 = k0 * onp.sqrt(eps2 - g2 + 0j)
    r1, r2 = (b1 / eps1, b2 / eps2) if tm else (b1, b2)
    val = (onp.cos(b1 * a) * onp.cos(b2 * b)
           - 0.5 * (r1 / r2 + r2 / r1) * onp.sin(b1 * a) * onp.sin(b2 * b)
           - onp.cos(kx0 * (a + b)))
    return float(onp.real(val))


def _lamellar_eigenvalues(count, factorization, tm):
    period, fill, lam = 1000 * NM, 0.5, 1550 * NM
    eps1, eps2 = 12.0, 1.0
    lat = Lattice.rectangular(period, period / 40)  # y-uniform: only (m, 0) harmonics kept
    k0 = onp.array([2 * onp.pi / lam])
    kx0 = 0.2 * k0[0]
    mn = harmonic_indices(lat, count)
    assert onp.all(mn[:, 1] == 0)
    ridge = Rectangle(fill * period, period / 40, material=None)
    one = onp.ones(1) + 0j
    dmn, inverse = difference_table(mn)
    # the lamellae's normal is x everywhere (their y edges are the cell's, not boundaries)
    eye, zero = onp.eye(len(mn)), onp.zeros((len(mn), len(mn)))
    mats = layer_matrices(one, [(ridge, eps1 * one)], lat, mn, dmn, inverse,
                          factorization=factorization, normals=(eye, zero, zero))
    Kx = (kx0 + mn[:, 0] * 2 * onp.pi / period)[None] / k0[0]
    modes = patterned_modes(mats, Kx, 0 * Kx)
    g2 = onp.asarray(modes.gamma[0] ** 2)
    # TE: E along the lamellae (y), the E_y block; TM: the E_x block
    M = len(mn)
    W = onp.asarray(modes.W[0])
    weight_x = onp.sum(onp.abs(W[:M]) ** 2, axis=0)
    is_tm = weight_x > 0.5 * onp.sum(onp.abs(W) ** 2, axis=0)
    g2 = onp.sort(onp.real(g2[is_tm == tm]))[::-1]
    args = (eps1, eps2, fill * period, (1 - fill) * period, k0[0], kx0, tm)
    return g2, args


@pytest.mark.parametrize("tm", [False, True], ids=["TE", "TM"])
def test_lamellar_eigenvalues_converge_to_the_modal_dispersion_relation(tm):
    # Botten et al. 1981 (exact lamellar modes); Li 1996 (TM converges with the inverse
    # rule, eps_xx = [[1/eps]]^-1, which the normal-vector factorization gives here)
    errors = []
    for count in (21, 41, 81):
        g2, args = _lamellar_eigenvalues(count, "normal", tm)
        err = 0.0
        for value in g2[:3]:   # the three most propagating modes
            def f(x, args=args):
                return _lamellar_dispersion(x, *args)
            lo, hi = value - 0.2, value + 0.2
            grid = onp.linspace(lo, hi, 401)
            vals = [f(x) for x in grid]
            roots = [brentq(f, grid[i], grid[i + 1]) for i in range(400)
                     if vals[i] * vals[i + 1] < 0]
            assert roots, "no exact mode near an eigenvalue"
            err = max(err, min(abs(r - value) for r in roots))
        errors.append(err)
    assert errors[-1] < 2e-3
    assert errors[-1] < errors[0]


def test_laurent_rule_converges_slower_for_tm_lamellar_modes():
    # Li, J. Opt. Soc. Am. A 13, 1870 (1996): Laurent's rule for the TM field of a
    # lamellar grating converges much more slowly than the inverse rule
    def err(fact):
        g2, args = _lamellar_eigenvalues(41, fact, True)
        value = g2[0]
        f = lambda x: _lamellar_dispersion(x, *args)
        grid = onp.linspace(value - 0.3, value + 0.3, 1201)
        vals = [f(x) for x in grid]
        roots = [brentq(f, grid[i], grid[i + 1]) for i in range(1200) if vals[i] * vals[i + 1] < 0]
        return min(abs(r - value) for r in roots)

    assert err("normal") < 0.2 * err("laurent")


# ---------------------------------------------------------------------------------------
# conservation laws and symmetries at every harmonic count
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("count", [9, 25, 49])
@pytest.mark.parametrize("lattice,polar", [({"kind": "square", "period_nm": 400}, 0.0),
                                           ({"kind": "hexagonal", "period_nm": 420}, 25.0)])
def test_lossless_disk_array_conserves_energy(count, lattice, polar):
    # Poynting's theorem: no absorption in lossless media, R + T = 1 (common practice)
    d = _disk_design(lattice=lattice, illumination={"wavelength_nm": [640.0, 760.0],
                                                    "polar_deg": polar, "azimuth_deg": 20.0},
                     model={"solver": "fourier", "harmonics": count})
    f = run_model(d).fractions
    assert onp.max(onp.abs(onp.asarray(f["R"]) + onp.asarray(f["T"]) - 1)) < 1e-10


@pytest.mark.parametrize("count", [9, 25, 49])
def test_achiral_array_at_normal_incidence_treats_both_helicities_alike(count):
    # mirror symmetry maps one helicity onto the other (common practice, no source):
    # equal R and T, mirror-related near fields, zero chiral background
    d = _disk_design(model={"solver": "fourier", "harmonics": count},
                     illumination={"wavelength_nm": [700.0, 820.0]})
    q = {k: onp.asarray(v) for k, v in quantities_of(run_model(d)).items()}
    for name in ("R", "T", "docp", "s0"):
        assert onp.max(onp.abs(q[name + "+1"] - q[name + "-1"])) < 1e-10
    assert onp.max(onp.abs(q["background"])) < 1e-10


def _reflected_vector(sol, M, j, e_in, i=0):
    """Full reflected field 3-vector of harmonic j for a wave of vector e_in incident in
    harmonic i."""
    inc = onp.zeros((1, 2 * M, 1), complex)
    inc[0, i, 0], inc[0, M + i, 0] = e_in[0], e_in[1]
    up, _ = outgoing(sol, from_above=inc)
    ex, ey = up[0, j, 0], up[0, M + j, 0]
    kx, ky = sol.Kx[0, j], sol.Ky[0, j]
    kz = onp.sqrt(1.0 - kx ** 2 - ky ** 2 + 0j)
    return onp.array([ex, ey, -(kx * ex + ky * ey) / kz]), kz


def test_reciprocity_of_a_chiral_patterned_layer():
    # Lorentz reciprocity (e.g. Landau & Lifshitz, Electrodynamics of Continuous Media,
    # sec. 89; for gratings: Petit, Electromagnetic Theory of Gratings (1980), ch. 1):
    # the flux-normalized amplitude from (k_i, e_i) to (k_o, e_o) equals that from
    # (-k_o, e_o) to (-k_i, e_i). The truncated problems are exactly reciprocal when the
    # reverse one keeps the mirrored harmonics, G' = G_o - G (Li, J. Opt. Soc. Am. A 14,
    # 2758 (1997) discusses such truncation symmetries)
    lat = Lattice.oblique(520 * NM, 470 * NM, onp.radians(75))
    lam = 600 * NM
    k0 = onp.array([2 * onp.pi / lam])
    eps = onp.array([6.0 + 0.2j])
    incl = [(Ellipse(120 * NM, 60 * NM, angle=0.5, centre=(30 * NM, -20 * NM)), eps),
            (Circle(40 * NM, centre=(-170 * NM, 150 * NM)), 3.0 * onp.ones(1) + 0j)]
    layers = [FourierLayer(90 * NM, onp.ones(1) + 0j, incl), FourierLayer(50 * NM, 2.1 + 0j)]
    q_in = onp.array([0.31, -0.12]) * k0[0]
    for count in (25, 49):
        mn = harmonic_indices(lat, count)
        M = len(mn)
        b1, b2 = lat.reciprocal()
        j = 1   # the first non-specular harmonic (propagating at this wavelength)
        G = mn[j, 0] * b1 + mn[j, 1] * b2
        q_out = q_in + G
        assert onp.hypot(*q_out) < k0[0]

        def solved(kpar, harmonics):
            st = FourierStack(lat, k0, kpar[None], onp.ones(1) + 0j, 2.25 * onp.ones(1) + 0j,
                              layers, harmonics)
            return solve_stack(st)

        def basis(q, up):
            qh = q / onp.hypot(*q)
            kz = onp.sqrt(k0[0] ** 2 - q @ q)
            s = onp.array([-qh[1], qh[0], 0.0])
            kvec = onp.array([q[0], q[1], kz if up else -kz]) / k0[0]
            return [s, onp.cross(s, kvec)], kz

        fwd, rev = solved(q_in, mn), solved(-q_out, mn[j] - mn)
        e_in, kz_in = basis(q_in, up=False)
        e_out, kz_out = basis(q_out, up=True)
        for a in range(2):
            for b in range(2):
                vf, _ = _reflected_vector(fwd, M, j, e_in[a][:2])
                vr, _ = _reflected_vector(rev, M, 0, e_out[b][:2], i=j)
                forward = (e_out[b] @ vf) * onp.sqrt(kz_out / kz_in)
                reverse = (e_in[a] @ vr) * onp.sqrt(kz_in / kz_out)
                assert abs(forward - reverse) < 1e-10 * max(1.0, abs(forward))


# ---------------------------------------------------------------------------------------
# derivatives
# ---------------------------------------------------------------------------------------

def test_eig_primitive_vjp_matches_finite_differences():
    # Giles 2008 (eigenvalue/eigenvector derivative rules), checked by central differences
    rng = onp.random.default_rng(4)
    A = rng.normal(size=(5, 5)) + 1j * rng.normal(size=(5, 5))
    dA = rng.normal(size=(5, 5)) + 1j * rng.normal(size=(5, 5))
    # a gauge-invariant function of the eigen-decomposition: sum_i f(lam_i) w_i v_i^T
    C = rng.normal(size=(5, 5))

    def f(t):
        lam, W = eig_modes(A + t * dA)
        F = W @ onp.diag(onp.exp(0.3 * lam)) @ onp.linalg.inv(W)
        return onp.real(onp.sum(C * F))

    import autograd.numpy as anp

    def fa(t):
        lam, W = eig_modes(A + t * dA)
        F = anp.matmul(anp.matmul(W, anp.exp(0.3 * lam)[:, None] * anp.eye(5)),
                       anp.linalg.inv(W))
        return anp.real(anp.sum(C * F))

    h = 1e-6
    fd = (f(h) - f(-h)) / (2 * h)
    assert abs(grad(fa)(0.0) - fd) < 1e-6 * max(1.0, abs(fd))


@pytest.mark.parametrize("key", ["particles[0].radius_nm", "particles[0].height_nm",
                                 "lattice.period_nm", "illumination.wavelength_nm"])
def test_design_gradients_match_finite_differences_at_normal_incidence(key):
    # central differences (common practice); normal incidence on a square lattice is where
    # the layer eigenvalues are degenerate
    d = _disk_design()
    x0 = onp.asarray(d.parameters()[key], float)

    def f(v):
        o = run_model(d, {key: v})
        return o.fractions["R"][0, 0] + 0.3 * o.metrics["g"][0] + 0.1 * o.metrics["u"][0]

    g = float(onp.ravel(grad(f)(x0))[0])
    h = 1e-3
    fd = float((f(x0 + h) - f(x0 - h)) / (2 * h))
    assert abs(g - fd) < 1e-6 * max(1e-3, abs(fd))


# ---------------------------------------------------------------------------------------
# convergence and agreement with the multipole model
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("material", [{"n": 3.7, "k": 0.01}, "Ag"])
def test_successive_differences_shrink_with_the_harmonic_count(material):
    # common practice, no source: a converging truncation
    values = []
    for count in (25, 97, 197):
        d = _disk_design(particles=[{"shape": "cylinder", "radius_nm": 80, "height_nm": 60,
                                     "material": material}],
                         illumination={"wavelength_nm": [620.0]},
                         model={"solver": "fourier", "harmonics": count})
        q = quantities_of(run_model(d))
        values.append(onp.array([float(q["R+1"][0]), float(q["T+1"][0])]))
    d1 = onp.max(onp.abs(values[1] - values[0]))
    d2 = onp.max(onp.abs(values[2] - values[1]))
    assert d2 < d1


def test_auto_harmonics_stops_at_the_tolerance():
    # common practice, no source
    small = [{"shape": "cylinder", "radius_nm": 60, "height_nm": 50, "material": {"n": 2.0}}]
    over = dict(particles=small, illumination={"wavelength_nm": [800.0]}, region=None)
    loose = run_model(_disk_design(model={"solver": "fourier", "harmonics": "auto",
                                          "harmonics_tolerance": 2e-2, "harmonics_max": 197},
                                   **over))
    assert loose.harmonics_change is not None and loose.harmonics_change < 2e-2
    tight = run_model(_disk_design(model={"solver": "fourier", "harmonics": "auto",
                                          "harmonics_tolerance": 1e-3, "harmonics_max": 197},
                                   **over))
    assert tight.harmonics >= loose.harmonics
    # the change auto reports is the change of R and T to the next count (recomputed)
    if tight.harmonics_change < 1e-3:
        prev = run_model(_disk_design(model={"solver": "fourier", "harmonics": 97}, **over))
        if tight.harmonics > 97:
            assert abs(float(prev.fractions["R"][0, 0]) - float(tight.fractions["R"][0, 0])
                       ) <= tight.harmonics_change + 1e-12


def test_lifted_disk_agrees_with_the_multipole_model():
    # two independent rigorous models where both are valid (disk lifted above the stack,
    # plane above its circumscribing sphere): differences within both truncations
    over = dict(particles=[{"shape": "cylinder", "radius_nm": 60, "height_nm": 80,
                            "material": {"n": 3.5}}], gap_nm=40,
                illumination={"wavelength_nm": [750.0]},
                region={"kind": "plane", "height_nm": 40})
    multi = quantities_of(run_model(_disk_design(model={"lmax": 6}, **over)))
    four = quantities_of(run_model(_disk_design(model={"solver": "fourier", "harmonics": 301},
                                                **over)))
    for key, tol in (("R+1", 5e-4), ("T+1", 5e-4), ("u", 3e-3), ("g", 3e-3),
                     ("docp+1", 2e-3)):
        assert abs(float(multi[key][0]) - float(four[key][0])) < tol, key


# ---------------------------------------------------------------------------------------
# shapes
# ---------------------------------------------------------------------------------------

def test_shape_coefficients_match_a_numerical_integral():
    # direct quadrature of (1/A) int_shape exp(-i G.r) on a fine grid (common practice)
    lat = Lattice.square(400 * NM)
    n = 800
    u = (onp.arange(n) + 0.5) / n - 0.5
    X, Y = onp.meshgrid(u * 400 * NM, u * 400 * NM, indexing="ij")
    G = onp.array([[0.0, 0.0], [1.0, 0.0], [1.0, 2.0], [-3.0, 1.0]]) * 2 * onp.pi / (400 * NM)
    shapes = [Circle(110 * NM, (20 * NM, -10 * NM)),
              Ellipse(150 * NM, 70 * NM, angle=0.4, centre=(-10 * NM, 5 * NM)),
              Rectangle(220 * NM, 120 * NM, angle=0.3, corner_radius=30 * NM,
                        centre=(5 * NM, 15 * NM)),
              Ring(150 * NM, 80 * NM, (0.0, 10 * NM))]
    for s in shapes:
        inside = s.contains(X, Y)
        for g in G:
            num = onp.mean(inside * onp.exp(-1j * (g[0] * X + g[1] * Y)))
            ana = complex(s.fourier(g[None], lat.area)[0])
            assert abs(num - ana) < 4e-3, type(s).__name__


def test_normal_field_is_the_boundary_normal_of_a_circle():
    # the normal-vector field of a disc is radial (Schuster et al. 2007): [[n_x n_x]] +
    # [[n_y n_y]] is the identity, and its (0,0) coefficient of n_x n_x is 1/2
    lat = Lattice.square(400 * NM)
    mn = harmonic_indices(lat, 25)
    dmn, inverse = difference_table(mn)
    Nxx, Nxy, Nyy = normal_field_matrices([(Circle(100 * NM), None)], lat, dmn, inverse)
    assert onp.allclose(Nxx + Nyy, onp.eye(len(mn)), atol=1e-12)
    assert abs(Nxx[0, 0] - 0.5) < 1e-3


def test_energy_flux_of_the_incident_wave():
    # Poynting flux of a unit plane wave at polar angle t in a medium of index n:
    # n cos(t) in units 1/(2 Z0) (common practice)
    lat = Lattice.square(400 * NM)
    mn = harmonic_indices(lat, 9)
    M = len(mn)
    k0 = onp.array([2 * onp.pi / (600 * NM)])
    t = 0.4
    st = FourierStack(lat, k0, onp.array([[onp.sin(t) * 1.3 * k0[0], 0.0]]),
                      1.69 * onp.ones(1) + 0j, 2.25 * onp.ones(1) + 0j, [], mn)
    sol = solve_stack(st)
    e = onp.zeros((1, 2 * M, 1), complex)
    e[0, M, 0] = 1.0    # s wave (E along y), unit amplitude
    flux = -uniform_flux(sol.above, e, down=True)[0, 0]
    assert abs(flux - 1.3 * onp.cos(t)) < 1e-12


# ---------------------------------------------------------------------------------------
# fields inside the particles' layer
# ---------------------------------------------------------------------------------------

def _interior_solution(**over):
    from chiropt.fourier.solve import solve_fourier
    from chiropt.structure import build_structure

    d = _disk_design(gap_nm=15, layers=[{"material": {"n": 2.1}, "thickness_nm": 40}],
                     illumination={"wavelength_nm": [720.0], "polar_deg": 20.0}, **over)
    st = build_structure(d)
    return d, solve_fourier(d, st, harmonics=49, interior=True)


def test_tangential_fields_are_continuous_across_every_interface():
    # Maxwell boundary conditions: E_t and H_t continuous (common practice, no source);
    # checked between the particles (outside them) at the film, gap and top interfaces
    _, sol = _interior_solution()
    xy = onp.array([[190e-9, 0.0], [150e-9, 170e-9], [-185e-9, 40e-9]])
    for z in [b for bound in sol.layer_bounds for b in bound][1:]:
        z = float(z)
        E1, H1 = sol.fields_at(xy, z - 1e-16)
        E2, H2 = sol.fields_at(xy, z + 1e-16)
        scale = float(onp.max(onp.abs(E1)))
        assert onp.max(onp.abs(E1[..., :2] - E2[..., :2])) < 1e-8 * scale
        assert onp.max(onp.abs(H1[..., :2] - H2[..., :2])) < 1e-8 * scale


def test_power_flux_through_the_patterned_layer_is_the_transmitted_power():
    # Poynting's theorem in a lossless structure: the cell-averaged z flux is the same at
    # every height, equal to the transmitted power (common practice, no source)
    from chiropt.farfield import incident_flux, power_fractions

    _, sol = _interior_solution()
    T = onp.asarray(power_fractions(sol)["T"])[0]
    inc = float(incident_flux(sol)[0])
    n = 24
    u = (onp.arange(n) + 0.5) / n - 0.5
    U, V = [g.ravel() for g in onp.meshgrid(u, u, indexing="ij")]
    xy = onp.stack([U * 400e-9, V * 400e-9], axis=1)
    for z in (20e-9, 47e-9, 80e-9, 150e-9):   # film, gap, inside the disks' layer
        E, H = sol.fields_at(xy, z)
        Sz = onp.real(E[..., 0] * onp.conj(H[..., 1]) - E[..., 1] * onp.conj(H[..., 0]))
        flux = -onp.mean(Sz, axis=-1)[0] / inc   # downward
        assert onp.max(onp.abs(flux - T)) < 1e-9


def test_thin_slab_sampled_above_the_tops_equals_the_plane_average():
    # the sampled average of a trigonometric polynomial on a fine enough grid is exact
    # (discrete orthogonality of the Fourier basis; common practice, no source)
    plane = run_model(_disk_design(region={"kind": "plane", "height_nm": 12},
                                   illumination={"wavelength_nm": [700.0, 790.0]})).metrics
    slab = run_model(_disk_design(region={"kind": "slab", "origin": "substrate",
                                          "from_nm": 131.9999, "thickness_nm": 2e-4},
                                  illumination={"wavelength_nm": [700.0, 790.0]})).metrics
    for key in ("u", "c", "g"):
        assert onp.max(onp.abs(onp.asarray(plane[key]) - onp.asarray(slab[key]))) < 1e-6
    for h in ("+1", "-1"):
        assert onp.max(onp.abs(onp.asarray(plane["docp"][h])
                               - onp.asarray(slab["docp"][h]))) < 1e-6


def test_surface_region_leaves_out_the_particles_and_states_its_sampling_error():
    # common practice, no source: every sampled point lies outside the disk, within the
    # film thickness of its surface
    d = _disk_design(region={"kind": "surface", "thickness_nm": 10})
    out = run_model(d)
    m = out.metrics
    assert m["sampled_points"] > 100
    assert onp.all(onp.isfinite(m["truncation"]))
    sol = out.solution
    xy = onp.array([[0.0, 0.0], [105e-9, 0.0], [200e-9, 200e-9]])
    dist = sol.distance_to_particles(xy, 60e-9)
    assert dist[0] < 0 < dist[1] <= 10e-9 < dist[2]


def test_staircased_sphere_approaches_the_mie_based_multipole_model():
    # Mie theory (through the multipole lattice model, itself checked against miepython):
    # a staircased sphere converges slowly with the harmonic count (each step is an edge;
    # common practice, no source) but towards the Mie result, and validity reports the
    # slicing error (the change with twice the slices)
    from chiropt.model import validity

    def sphere(model):
        return design_from_dict({"lattice": {"kind": "square", "period_nm": 400},
                                 "particles": [{"shape": "sphere", "radius_nm": 70,
                                                "material": {"n": 3.5}}],
                                 "illumination": {"wavelength_nm": [780.0]}, "model": model})

    mie = float(quantities_of(run_model(sphere({"lmax": 5})))["R+1"][0])
    errs = [abs(float(quantities_of(run_model(sphere({"solver": "fourier", "harmonics": n,
                                                      "slices": 8})))["R+1"][0]) - mie)
            for n in (97, 301)]
    assert errs[1] < errs[0] < 0.5 * mie
    check = validity(sphere({"solver": "fourier", "harmonics": 25, "slices": 4}))
    assert check["slicing_change"] > 0 and check["worst"] >= check["slicing_change"]


def test_illumination_from_the_substrate_side_conserves_energy():
    # Poynting's theorem (common practice, no source): lossless array lit from the glass
    d = _disk_design(illumination={"wavelength_nm": [650.0, 800.0], "polar_deg": 15.0,
                                   "azimuth_deg": 10.0, "side": "substrate"},
                     region=None)
    f = run_model(d).fractions
    R, T = onp.asarray(f["R"]), onp.asarray(f["T"])
    assert onp.max(onp.abs(R + T - 1)) < 1e-10
    assert onp.all(R > 0) and onp.all(T > 0)


def test_spectrum_sensitivities_of_a_fourier_design_match_finite_differences():
    # the --grad path (reverse-of-reverse Jacobian, which differentiates the primitives'
    # own derivative rules again) against central differences (common practice)
    from chiropt.design import design_from_dict as build
    from chiropt.sensitivity import spectrum_sensitivities

    d = _disk_design(illumination={"wavelength_nm": [700.0, 800.0]})
    sens = spectrum_sensitivities(d, ["particles[0].radius_nm"])
    h = 1e-3
    data = d.to_dict()

    def g_at(r):
        data["particles"][0]["radius_nm"] = r
        return onp.asarray(quantities_of(run_model(build(data)))["g"], float)

    fd = (g_at(100 + h) - g_at(100 - h)) / (2 * h)
    got = onp.asarray(sens["g"]["particles[0].radius_nm"], float)
    assert onp.max(onp.abs(got - fd)) < 1e-6 * max(1.0, float(onp.max(onp.abs(fd))))


def test_boxes_rings_and_ellipses_of_different_heights_conserve_energy():
    # Poynting's theorem (common practice, no source): three shapes, three heights (so
    # three patterned sub-layers), an oblique lattice, oblique incidence, lossless media
    d = design_from_dict({
        "lattice": {"kind": "oblique", "period_nm": [430, 410], "angle_deg": 70},
        "particles": [
            {"shape": "box", "size_nm": [180, 110], "angle_deg": 25, "corner_radius_nm": 15,
             "height_nm": 90, "material": {"n": 3.4}, "position_nm": [-90, 0]},
            {"shape": "ring", "radius_nm": 70, "inner_radius_nm": 30, "height_nm": 140,
             "material": {"n": 2.4}, "position_nm": [110, 120]},
            {"shape": "elliptic_cylinder", "radius_nm": 50, "radius_b_nm": 25,
             "angle_deg": 10, "height_nm": 60, "material": {"n": 2.0},
             "position_nm": [150, -120]}],
        "substrate": {"material": {"n": 1.5}}, "layers": [{"material": {"n": 1.9},
                                                          "thickness_nm": 30}],
        "illumination": {"wavelength_nm": [690.0, 820.0], "polar_deg": 12, "azimuth_deg": 35},
        "model": {"solver": "fourier", "harmonics": 49}})
    f = run_model(d).fractions
    R, T = onp.asarray(f["R"]), onp.asarray(f["T"])
    assert onp.max(onp.abs(R + T - 1)) < 1e-10
    assert onp.min(R) > 1e-4   # the particles scatter
