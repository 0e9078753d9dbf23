"""Stack-reflected coupling summed over one order per rotation orbit (normal incidence).

References: the lattice's point group (a square lattice is invariant under rotations by
pi/2, a hexagonal one by pi/3, every Bravais lattice by pi; Ashcroft & Mermin, Solid State
Physics (1976) ch. 7); the orthogonality of the characters of the cyclic group C_n,
sum_k exp(2 pi i k q / n) = n [q = 0 mod n] (Tinkham, Group Theory and Quantum Mechanics
(1964) §3-4), which gives the selection m_a = m_b (mod n) of the folded sum. The folded
solve is compared with the sum over every order (the same model without the fold).
"""

import autograd.numpy as anp
import numpy as np
import pytest

import chiropt.multipole.solve as msolve
from chiropt.design import design_from_dict
from chiropt.lattice.bravais import Lattice
from chiropt.lattice.orders import order_indices
from chiropt.lattice.symmetry import order_orbits, rotation_order
from chiropt.multipole.tmatrix import design_particles, stack_tmatrices
from chiropt.sensitivity import compute_quantities, value_and_gradient
from chiropt.structure import build_structure

LATTICES = {
    "square": ({"kind": "square", "period_nm": 420.0}, 4),
    "hexagonal": ({"kind": "hexagonal", "period_nm": 450.0}, 6),
    "rectangular": ({"kind": "rectangular", "period_nm": [430.0, 380.0]}, 2),
    "oblique": ({"kind": "oblique", "period_nm": [440.0, 400.0], "angle_deg": 72.0}, 2),
}


def _rotate(v, n):
    c, s = np.cos(2 * np.pi / n), np.sin(2 * np.pi / n)
    return np.array([[c, -s], [s, c]]) @ v


@pytest.mark.parametrize("lattice, n", [
    (Lattice.square(400e-9), 4), (Lattice.hexagonal(400e-9), 6),
    (Lattice.rectangular(400e-9, 300e-9), 2), (Lattice.oblique(400e-9, 350e-9, 1.2), 2)])
def test_rotation_order_maps_reciprocal_lattice_onto_itself(lattice, n):
    # Ashcroft & Mermin ch. 7: the largest rotation of each lattice's point group
    got, M = rotation_order(lattice)
    assert got == n
    b1, b2 = (np.asarray(b, float) for b in lattice.reciprocal())
    B = np.stack([b1, b2], axis=1)                                  # columns b1, b2
    for j, b in enumerate((b1, b2)):
        np.testing.assert_allclose(_rotate(b, n), B @ M[:, j], atol=1e-9 * np.linalg.norm(b))


@pytest.mark.parametrize("lattice", [Lattice.square(400e-9), Lattice.hexagonal(400e-9),
                                     Lattice.oblique(400e-9, 350e-9, 1.2)])
def test_orbits_partition_a_rotation_invariant_order_set(lattice):
    # common practice, no source: a disc of orders is a union of whole orbits of n members
    n, M = rotation_order(lattice)
    mn = np.asarray(order_indices(lattice, 12 * 2 * np.pi / 400e-9))[1:]   # without (0, 0)
    reps = order_orbits(mn, n, M)
    assert reps is not None and len(reps) * n == len(mn)
    members = {tuple(x) for x in mn}
    seen = set()
    for r in reps:
        orbit = {tuple(np.linalg.matrix_power(M, k) @ mn[r]) for k in range(n)}
        assert len(orbit) == n and orbit <= members and not (orbit & seen)
        seen |= orbit
    assert seen == members
    # a set cut across an orbit is refused (the caller then sums every order)
    assert order_orbits(mn[:-1], n, M) is None


def _design(lattice, *, polar=0.0, layers=(), lmax=3):
    return design_from_dict({
        "lattice": lattice,
        "particles": [{"radius_nm": 85.0, "material": {"n": 3.6, "k": 0.01}}],
        "substrate": {"material": {"n": 1.46}}, "layers": list(layers), "gap_nm": 4.0,
        "region": {"kind": "plane", "height_nm": 10.0},
        "illumination": {"wavelength_nm": [640.0, 710.0], "polar_deg": polar},
        "model": {"lmax": lmax, "tolerance": 1e-8}})


def _solve(design, lmax):
    st = build_structure(design)
    T = stack_tmatrices(design_particles(design), st.k, lmax)
    return msolve.solve_multipole(st, T, lmax, g_max=None, trim=True)


def _unfolded(monkeypatch):
    monkeypatch.setattr(msolve, "_fold_reflected_orders",
                        lambda st, mn, keep, N: (mn, 1, None, None))


@pytest.mark.parametrize("kind", list(LATTICES))
@pytest.mark.parametrize("layers", [(), ({"material": {"n": 2.0}, "thickness_nm": 60.0},)])
def test_folded_solve_equals_the_sum_over_every_order(kind, layers, monkeypatch):
    lattice, n = LATTICES[kind]
    design = _design(lattice, layers=layers)
    st = build_structure(design)
    mn = order_indices(st.lattice, msolve._reflected_orders_radius(st, 3))
    keep = len(order_indices(st.lattice, msolve.orders_radius(st)))
    folded_mn, fold, gram, mult = msolve._fold_reflected_orders(st, mn, keep, 1)
    assert fold == n and len(folded_mn) == keep + (len(mn) - keep) // n   # the fold is used
    assert len(mn) > 1.5 * keep
    assert len(gram) == 1 + (len(mn) - 1) // n and mult.sum() == len(mn)
    sol = _solve(design, 3)
    _unfolded(monkeypatch)
    ref = _solve(design, 3)
    for a, b in ((sol.coefficients, ref.coefficients), (sol.exciting, ref.exciting),
                 (sol.up_sp, ref.up_sp), (sol.exit_sp, ref.exit_sp)):
        a, b = np.asarray(a), np.asarray(b)
        assert a.shape == b.shape
        assert np.max(np.abs(a - b)) < 1e-12 * np.max(np.abs(b))


def test_no_fold_off_normal_incidence_or_with_two_particles():
    # the orbit's orders differ in weight once the Bloch vector is not zero
    st = build_structure(_design(LATTICES["square"][0], polar=5.0))
    mn = order_indices(st.lattice, msolve._reflected_orders_radius(st, 3))
    keep = len(order_indices(st.lattice, msolve.orders_radius(st)))
    assert msolve._fold_reflected_orders(st, mn, keep, 1)[1] == 1
    st0 = build_structure(_design(LATTICES["square"][0]))
    assert msolve._fold_reflected_orders(st0, mn, keep, 2)[1] == 1


@pytest.mark.parametrize("kind", ["square", "rectangular"])
def test_folded_gradient_equals_the_unfolded_one(kind, monkeypatch):
    # the rectangular lattice keeps only G -> -G for every (px, py): its derivatives along
    # both periods are those of the full sum (common practice, no source)
    design = _design(LATTICES[kind][0], lmax=2)
    paths = [p for p in design.parameters() if p.startswith(("lattice.", "particles[0].r"))]

    def objective(q):
        return anp.sum(q["g"]) + 0.3 * anp.sum(q["u"]) - 0.2 * anp.sum(q["docp+1"])

    folds = []
    original = msolve._fold_reflected_orders

    def spy(st, mn, keep, N):
        out = original(st, mn, keep, N)
        folds.append(out[1])
        return out

    monkeypatch.setattr(msolve, "_fold_reflected_orders", spy)
    sens = value_and_gradient(design, objective, paths)
    values = compute_quantities(design)
    assert folds and all(f == LATTICES[kind][1] for f in folds)   # the fold is in use
    _unfolded(monkeypatch)
    ref = value_and_gradient(design, objective, paths)
    assert abs(sens.value - ref.value) < 1e-12 * abs(ref.value)
    assert np.max(np.abs(np.asarray(values["g"]) - np.asarray(compute_quantities(design)["g"]))
                  ) < 1e-12
    for p in paths:
        a, b = np.asarray(sens.gradient[p], float), np.asarray(ref.gradient[p], float)
        assert np.max(np.abs(a - b)) <= 1e-10 * max(np.max(np.abs(b)), 1e-30), p


@pytest.mark.parametrize("lattice, n", [
    (Lattice.square(420e-9), 4), (Lattice.hexagonal(450e-9), 6),
    (Lattice.rectangular(430e-9, 380e-9), 2), (Lattice.oblique(440e-9, 400e-9, 1.25), 2)])
def test_folded_lattice_sums_equal_the_sums_over_every_term(lattice, n, monkeypatch):
    # D_pM at zero Bloch vector and zero displacement: every orbit of the rotation gives
    # n [M = 0 mod n] times one member's term (Tinkham §3-4); the unfolded sums (every
    # order and lattice point) are the reference, values and derivatives along k and the
    # lattice (its length, or both vectors of a free lattice)
    from autograd import jacobian

    import chiropt.multipole.latticesums as ls

    k = 2 * np.pi / np.array([640e-9, 700e-9, 760e-9])
    kpar, d = np.zeros((3, 2)), np.zeros((1, 3))
    calls = []
    original = ls._sum_fold
    monkeypatch.setattr(ls, "_sum_fold", lambda *a: calls.append(1) or original(*a))

    def sums(scale):
        lat = (Lattice.of_shape(lattice.length * scale, lattice.shape) if lattice.shape
               else Lattice(lattice.a1 * scale, lattice.a2 * scale))
        return ls.lattice_sums(k * scale, kpar, lat, d, 6, tol=1e-11)

    def parts(scale):
        v = sums(scale)
        return anp.stack([anp.real(v), anp.imag(v)])

    D, J = sums(1.0), jacobian(parts)(1.0)
    ms = np.array([m for p in range(7) for m in range(-p, p + 1)])
    assert calls and np.all(np.asarray(D)[..., ms % n != 0] == 0)   # the fold is in use
    monkeypatch.setattr(ls, "_sum_fold", lambda *a: None)
    D0, J0 = sums(1.0), jacobian(parts)(1.0)
    assert np.max(np.abs(D - D0)) < 1e-12 * np.max(np.abs(D0))
    assert np.max(np.abs(J - J0)) < 1e-10 * np.max(np.abs(J0))
