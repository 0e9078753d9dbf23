"""The coarse primitives of the evaluation path change its cost, never its numbers.

- Spectra, exact gradients and per-wavelength sensitivities of a set of designs (dipole
  and multipole, with and without substrate and films, every lattice kind, one and two
  particles per cell, normal and oblique incidence) equal the values stored in
  tests/data/solver_reference.json, which tests/data/make_solver_reference.py wrote with
  the evaluation path as it was before the primitives, to 1e-12.
- Each new primitive's vector-Jacobian product against finite differences, at ordinary
  points, at normal incidence and near a Rayleigh anomaly.
- Two designs evaluated in turn never return each other's values (no stale state).
"""

from __future__ import annotations

import json
from pathlib import Path

import autograd.numpy as anp
import numpy as onp
import pytest

from chiropt.design import design_from_dict
from chiropt.sensitivity import compute_quantities, value_and_gradient

REFERENCE = json.loads((Path(__file__).parent / "data" / "solver_reference.json").read_text())


def _check_every_argument(fun, *args):
    """Central finite differences against reverse mode (autograd.test_util.check_grads,
    first order) in every positional argument at once: check_grads varies only the first
    argument unless told otherwise."""
    from autograd.test_util import check_grads

    check_grads(fun, argnum=tuple(range(len(args))), modes=["rev"], order=1)(*args)


def _close(ours, ref, what):
    ours, ref = onp.asarray(ours, float), onp.asarray(ref, float)
    scale = max(1.0, float(onp.max(onp.abs(ref))))
    onp.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12 * scale, err_msg=what)


@pytest.mark.parametrize("name", sorted(REFERENCE))
def test_spectra_equal_the_stored_reference(name):
    # common practice, no source: a refactoring regression against values stored before it
    case = REFERENCE[name]
    q = compute_quantities(design_from_dict(case["design"]))
    assert set(case["quantities"]) <= set(q)
    for key, ref in case["quantities"].items():
        _close(onp.real(onp.asarray(q[key])), ref, f"{name}: {key}")


@pytest.mark.parametrize("name", sorted(REFERENCE))
def test_gradients_equal_the_stored_reference(name):
    # common practice, no source: exact gradients unchanged by the coarse primitives
    case = REFERENCE[name]
    design = design_from_dict(case["design"])
    for label, ref in case["gradients"].items():
        qname, w = label[:-3], int(label[-2])
        s = value_and_gradient(design, lambda q, n=qname, w=w: anp.real(q[n][w]), list(ref))
        for path, v in ref.items():
            _close(s.gradient[path], v, f"{name}: d {label} / d {path}")


@pytest.mark.parametrize("name", sorted(REFERENCE))
def test_per_wavelength_sensitivities_equal_the_stored_reference(name):
    # common practice, no source: reverse mode applied twice (the vector-Jacobian products
    # of the primitives differentiated in their cotangents) gives the stored values
    from chiropt.sensitivity import spectrum_sensitivities
    case = REFERENCE[name]
    design = design_from_dict(case["design"])
    paths = sorted({p for d in case["sensitivities"].values() for p in d})
    ours = spectrum_sensitivities(design, paths)
    for qname, per_path in case["sensitivities"].items():
        for path, v in per_path.items():
            _close(ours[qname][path], v, f"{name}: d {qname} / d {path} per wavelength")


# ------------------------------------------------------------------ primitives vs FD

def _c(rng, *shape):
    return rng.normal(size=shape) + 1j * rng.normal(size=shape)


def _directions(W, G, at):
    """In-plane wavevectors (W, G, 2) [1/k] with (0,0) first: ``ordinary`` orders, the
    orders of a square lattice at ``normal`` incidence (q = 0 and degenerate pairs), or
    one order ``grazing`` a Rayleigh anomaly (|q| = k within 1e-3)."""
    rng = onp.random.default_rng(7)
    q = rng.normal(size=(W, G, 2)) * 0.8
    if at == "normal":
        mn = onp.array([[0, 0], [1, 0], [0, 1], [-1, 0], [0, -1], [1, 1]])[:G]
        q = onp.broadcast_to(0.7 * mn.astype(float), (W, G, 2)).copy()
    elif at == "grazing":
        q[:, 1] = [1.0 + 1e-3, 0.0]
    return q


@pytest.mark.parametrize("at", ["ordinary", "normal", "grazing"])
def test_order_basis_primitive_against_finite_differences(at):
    # central finite differences (autograd.test_util.check_grads, common practice, no
    # source) of s, p_up, p_down, k_up, k_down; q = 0 only where the azimuth fixes q_hat

    from chiropt.planewaves import kz_branch, order_basis
    q = _directions(2, 6, at)
    k = onp.array([[1.0], [1.1]])
    kz = kz_branch(k, onp.sum(q ** 2, axis=-1))
    nonzero = onp.any(q != 0, axis=-1)

    def stacked(qv, kzv, kv, az):
        q_full = anp.where(nonzero[..., None], qv, 0.0)
        return anp.stack(order_basis(q_full, kzv, kv, az))

    _check_every_argument(stacked, onp.where(nonzero[..., None], q, 0.3), kz,
                          k * (1 + 0.02j), 0.4)


@pytest.mark.parametrize("N", [1, 2])
def test_coupled_solve_with_the_reflected_coupling_against_finite_differences(N):
    # central finite differences (check_grads, common practice, no source) of the coupled
    # solve in every input, the stack-reflected factors included (one particle per cell
    # takes the factored order-independent path for the projections' cotangent); reverse
    # mode applied twice is checked by the per-wavelength sensitivities above

    from chiropt.multipole.coupled import coupled_solve
    from chiropt.sphericalwaves import n_modes

    lmax, W, G = 2, 2, 5
    K2 = n_modes(lmax)
    rng = onp.random.default_rng(7 + N)

    def c(*shape, scale=1.0):
        return scale * (rng.normal(size=shape) + 1j * rng.normal(size=shape))

    Tb, W_lat, b = c(W, N * K2, N * K2, scale=0.05), c(W, N * K2, N * K2, scale=0.05), \
        c(W, 2, N * K2)
    rc, r, P, ph = c(W, G, N, scale=0.3), c(W, G, 2, scale=0.3), c(W, G, 2, K2 // 2), \
        c(W, G, N, scale=0.3)
    weights = c(2, W, 2, N * K2)

    def scalar(Tb, W_lat, b, rc, r, P, ph):
        f, e = coupled_solve(Tb, W_lat, b, (rc, r, P, ph, lmax))
        return anp.real(anp.sum(weights[0] * f + weights[1] * e * anp.conj(f)))

    _check_every_argument(scalar, Tb, W_lat, b, rc, r, P, ph)


@pytest.mark.parametrize("N", [1, 2])
@pytest.mark.parametrize("lmax", [1, 3])
def test_reflected_matrix_is_the_order_sum_of_its_channel_vectors(N, lmax):
    # common practice, no source: the factored stack-reflected coupling (one particle per
    # cell: three Gram products per channel; several: one product) equals its definition
    # W[(i,a),(j,b)] = sum_(g,c) rc[g,i] r[g,c] recv[g,c,a] ph[g,j] emit[g,c,b] with the
    # reception and downward emission vectors made from the projections
    from chiropt.multipole.reflected import reflected_matrix_from_projections
    from chiropt.sphericalwaves import channel_modes, n_modes

    W, G = 2, 7
    K = n_modes(lmax) // 2
    rng = onp.random.default_rng(11 + N + lmax)

    def c(*shape):
        return rng.normal(size=shape) + 1j * rng.normal(size=shape)

    rc, r, P, ph = c(W, G, N), c(W, G, 2), c(W, G, 2, K), c(W, G, N)
    recv = channel_modes(P, "receive", lmax)
    emit = channel_modes(P, "emit", lmax, down=True)
    direct = onp.einsum("wgi,wgc,wgca,wgj,wgcb->wiajb", rc, r, recv, ph, emit)
    ours = reflected_matrix_from_projections(rc, r, P, ph, lmax)
    onp.testing.assert_allclose(ours, direct.reshape(W, N * 2 * K, N * 2 * K),
                                rtol=1e-13, atol=1e-13 * onp.abs(direct).max())


@pytest.mark.parametrize("lmax", [1, 2, 4])
def test_channel_maps_moved_onto_the_columns_give_the_channel_vectors_products(lmax):
    # common practice, no source: (channel vectors of P) @ X equals P @ (the channel map
    # applied to the columns X), for reception (with its m -> -m gather) and emission, up
    # and down, so the one-particle VJP never makes the channel vectors
    from chiropt.multipole.reflected import _folded_channels
    from chiropt.sphericalwaves import channel_modes

    W, G, T = 2, 5, 3
    K = lmax * (lmax + 2)
    rng = onp.random.default_rng(lmax)
    P = rng.normal(size=(W, G, 2, K)) + 1j * rng.normal(size=(W, G, 2, K))
    X = rng.normal(size=(W, 2 * K, T)) + 1j * rng.normal(size=(W, 2 * K, T))
    for kind in ("receive", "emit"):
        for down in (False, True):
            direct = onp.matmul(onp.reshape(channel_modes(P, kind, lmax, down), (W, 2 * G, 2 * K)),
                                X).reshape(W, G, 2, T)
            folded = onp.matmul(P.reshape(W, G, 2 * K),
                                _folded_channels(X, kind == "receive", lmax, down))
            onp.testing.assert_allclose(folded.reshape(W, G, 2, T), direct, rtol=1e-13,
                                        atol=1e-13 * onp.abs(direct).max())


@pytest.mark.parametrize("at", ["ordinary", "normal", "grazing"])
@pytest.mark.parametrize("lmax", [1, 3])
def test_projection_and_channel_primitives_against_finite_differences(at, lmax):
    # central finite differences (check_grads, common practice, no source) of the
    # projections X . s, X . p (analytic continuation for evanescent directions) and of
    # the emission and reception vectors built from them
    from autograd.test_util import check_grads

    from chiropt.planewaves import kz_branch, order_basis
    from chiropt.sphericalwaves import channel_modes, down_parity, order_projections
    q = _directions(1, 6, at)
    kz = kz_branch(1.0, onp.sum(q ** 2, axis=-1))
    s, pu, _, ku, _ = order_basis(q, kz, 1.0, 0.2)
    _check_every_argument(lambda a, b, c: order_projections(a, b, c, lmax), ku, s, pu)
    P = order_projections(ku, s, pu, lmax)
    for kind in ("emit", "receive"):
        for down in (False, True):
            check_grads(lambda x, kind=kind, down=down: channel_modes(x, kind, lmax, down),
                        modes=["rev"], order=1)(P)
        # the downward direction's vectors: the projections times their z-parity
        onp.testing.assert_allclose(channel_modes(P, kind, lmax, down=True),
                                    channel_modes(P * down_parity(lmax), kind, lmax),
                                    rtol=1e-15, atol=0)


def test_region_average_primitives_against_finite_differences():
    # central finite differences (check_grads, common practice, no source): single-wave
    # forms of |E|^2, C, S0, S3, and (exp(x)-1)/x on both sides of its series switch
    from autograd.test_util import check_grads

    from chiropt.metrics import _phi1, _single_wave_forms
    rng = onp.random.default_rng(3)
    W, G = 2, 5
    _check_every_argument(
        _single_wave_forms, _c(rng, W, 2, 2, G), _c(rng, W, G),
        onp.abs(rng.normal(size=(W, G))), onp.abs(rng.normal(size=(W, 1, G))))
    for x in (onp.array([0.0, 1e-3, -9e-3, 1.1e-2, 0.5, -3.0]),
              onp.array([1e-3 + 2e-3j, 0.4 - 0.2j, 2j])):
        check_grads(_phi1, modes=["rev"], order=1)(x)


@pytest.mark.parametrize("kind", ["square", "hexagonal"])
def test_lattice_sums_along_the_length_against_finite_differences(kind):
    # central finite differences (common practice, no source) of the lattice sums of a
    # lattice of fixed shape, differentiated along its length (one direction), against the
    # same sums built from the four vector components (the general path)
    from autograd import jacobian

    from chiropt.lattice import Lattice
    from chiropt.multipole.latticesums import lattice_sums
    k = onp.array([2 * onp.pi / 700e-9])
    kp = onp.array([[1.2e6, -0.4e6]])
    d = onp.array([[0.0, 0.0, 0.0], [60e-9, -30e-9, 10e-9]])
    make = getattr(Lattice, kind)

    def general(a):
        lat = make(a)
        return lattice_sums(k, kp, Lattice(lat.a1, lat.a2), d, 4)

    def along(a):
        return lattice_sums(k, kp, make(a), d, 4)

    a0, h = 410e-9, 1e-12
    fd = (general(a0 + h) - general(a0 - h)) / (2 * h)
    ours = jacobian(lambda a: anp.real(along(a)))(a0) + 1j * jacobian(
        lambda a: anp.imag(along(a)))(a0)
    onp.testing.assert_allclose(along(a0), general(a0), rtol=1e-13)
    onp.testing.assert_allclose(ours, fd, rtol=1e-5, atol=1e-6 * onp.max(onp.abs(fd)))


def test_designs_evaluated_in_turn_never_share_values():
    # common practice, no source: the forward stashes (lattice sums, coupled solve) and the
    # cached tables must not hand one design's data to another
    a, b = (REFERENCE[n]["design"] for n in ("multipole-square-substrate-normal",
                                             "multipole-oblique-two-particles"))
    da, db = design_from_dict(a), design_from_dict(b)

    def grad_of(design):
        paths = [p for p in design.parameters() if p != "host_index"]
        return value_and_gradient(design, lambda q: anp.real(q["g"][0]), paths)

    first = grad_of(da)
    other = grad_of(db)
    again = grad_of(da)
    assert again.value == first.value and other.value != first.value
    for path, v in first.gradient.items():
        onp.testing.assert_array_equal(again.gradient[path], v)
    # plain evaluations (the Mie coefficients kept between the degree choice and the
    # T-matrix), with the degree chosen per design
    auto = [design_from_dict({**d, "model": {"lmax": "auto"}}) for d in (a, b)]
    qa = compute_quantities(auto[0])
    qb = compute_quantities(auto[1])
    qa_again = compute_quantities(auto[0])
    for key in qa:
        onp.testing.assert_array_equal(qa_again[key], qa[key])
    assert not onp.allclose(qa["g"], qb["g"])


def test_memoised_order_tables_follow_the_lattice_and_cannot_be_altered():
    # common practice, no source: the order and lattice-pair tables are memoised (on the
    # lattice shape, and on the exact lattice vectors and cut); lattices asked for in turn
    # get their own tables, equal to a direct count of |m b1 + n b2| <= g_max, and a table
    # cannot be written to
    from chiropt.lattice.bravais import Lattice
    from chiropt.lattice.orders import order_indices

    def direct(lat, g):
        b1, b2 = (onp.asarray(b, float) for b in lat.reciprocal())
        m, n = onp.meshgrid(onp.arange(-30, 31), onp.arange(-30, 31), indexing="ij")
        mn = onp.stack([m.ravel(), n.ravel()], axis=1)
        keep = onp.hypot(*(mn @ onp.stack([b1, b2])).T) <= g * (1 + 1e-12)
        return {tuple(p) for p in mn[keep]}

    square = Lattice.square(420e-9)
    hexagonal = Lattice.hexagonal(420e-9)
    g = 6 * 2 * onp.pi / 420e-9
    tables = [order_indices(lat, g) for lat in (square, hexagonal, square, hexagonal)]
    for lat, t in zip((square, hexagonal), tables[:2], strict=True):
        assert {tuple(p) for p in t} == direct(lat, g)
        assert tuple(t[0]) == (0, 0)
    assert len(tables[0]) != len(tables[1])
    onp.testing.assert_array_equal(tables[2], tables[0])
    onp.testing.assert_array_equal(tables[3], tables[1])
    with pytest.raises(ValueError):
        tables[0][0, 0] = 5
    assert {tuple(p) for p in order_indices(square, 0.5 * g)} == direct(square, 0.5 * g)


@pytest.mark.parametrize("kind", ["square", "hexagonal", "oblique"])
def test_order_tables_of_one_shape_serve_every_period_exactly(kind):
    # common practice, no source: one table per lattice shape serves every period and cut;
    # each answer is the direct count |m b1 + n b2| <= g_max (same set), sorted by |G|
    # with (0, 0) first, also at cuts just above and below a ring of orders
    from chiropt.lattice.bravais import Lattice
    from chiropt.lattice.orders import order_indices

    def make(a):
        if kind == "oblique":
            return Lattice(onp.array([a, 0.0]), onp.array([0.31 * a, 0.87 * a]))
        return getattr(Lattice, kind)(a)

    rng = onp.random.default_rng(5)
    for a in 1e-9 * (280 + 240 * rng.random(12)):
        lat = make(a)
        b1, b2 = (onp.asarray(b, float) for b in lat.reciprocal())
        ring = onp.hypot(*(onp.array([3, 2]) @ onp.stack([b1, b2])))
        for g in (ring * (1 - 1e-9), ring * (1 + 1e-9), (2 + 28 * rng.random()) * ring / 3):
            mn = order_indices(lat, g)
            m, n = onp.meshgrid(onp.arange(-40, 41), onp.arange(-40, 41), indexing="ij")
            all_mn = onp.stack([m.ravel(), n.ravel()], axis=1)
            keep = onp.hypot(*(all_mn @ onp.stack([b1, b2])).T) <= g
            assert {tuple(p) for p in mn} == {tuple(p) for p in all_mn[keep]}
            length = onp.hypot(*(mn @ onp.stack([b1, b2])).T)
            assert tuple(mn[0]) == (0, 0)
            assert onp.all(onp.diff(length) >= -1e-9 * length[1:])


def test_a_stash_entry_is_used_only_by_the_call_that_made_it():
    # common practice, no source: a VJP maker that meets another call's stash entry
    # recomputes instead of using it
    from chiropt.autodiff import ForwardStash
    stash = ForwardStash()
    first, second = onp.zeros(3), onp.zeros(3)
    stash.put(first, (0,), "data of the first call")
    assert stash.take(second, (0,)) is None        # another array: not its entry
    stash.put(first, (0,), "data of the first call")
    assert stash.take(first, (1,)) is None         # other traced arguments
    stash.put(first, (0,), "data of the first call")
    assert stash.take(first, (0,)) == "data of the first call"
    assert stash.take(first, (0,)) is None         # emptied on take


def test_radiated_orders_primitive_against_finite_differences_and_the_taped_sum():
    # central finite differences (check_grads, common practice, no source), and the values
    # of the operation-by-operation sum of the emission identities it replaces

    from chiropt.multipole.emission import radiated_orders
    from chiropt.sphericalwaves import down_parity
    rng = onp.random.default_rng(11)
    W, G, N, lmax = 2, 5, 2, 2
    K = lmax * (lmax + 2)
    f, P = _c(rng, W, 2, N * 2 * K), _c(rng, W, G, 2, K)
    ph_up, ph_dn = _c(rng, W, G, N), _c(rng, W, G, N)
    _check_every_argument(lambda *a: anp.stack(radiated_orders(*a, lmax)), f, P, ph_up, ph_dn)
    e_l = (-1j) ** onp.array([l for l in range(1, lmax + 1) for _ in range(2 * l + 1)])
    f5 = f.reshape(W, 2, N, K, 2)
    fN, fM = f5[..., 0] * e_l, f5[..., 1] * e_l                     # (W, t, N, K)
    for d, (ph, Pd) in enumerate([(ph_up, P), (ph_dn, P * down_parity(lmax))]):
        s = (onp.einsum("wgk,wtnk->wgtn", Pd[:, :, 0], fM)
             + onp.einsum("wgk,wtnk->wgtn", Pd[:, :, 1], 1j * fN))
        p = (onp.einsum("wgk,wtnk->wgtn", Pd[:, :, 0], -1j * fN)
             + onp.einsum("wgk,wtnk->wgtn", Pd[:, :, 1], fM))
        ref = onp.stack([onp.einsum("wgtn,wgn->wtg", x, ph) for x in (s, p)], axis=-1)
        onp.testing.assert_allclose(radiated_orders(f, P, ph_up, ph_dn, lmax)[d], ref,
                                    rtol=1e-13, atol=1e-13 * onp.max(onp.abs(ref)))


def test_jacobian_rows_equal_autograds_reverse_passes():
    # common practice, no source: the rows of value_and_jacobian (one topological order for
    # all reverse passes) are autograd's make_vjp passes, number for number, for a goal's
    # physics rows (objectives and constraints of a multipole design on glass)
    from autograd import make_vjp

    from chiropt.autodiff import value_and_jacobian
    from chiropt.goals import GoalProblem, load_goal

    goal = load_goal(str(Path(__file__).resolve().parent.parent / "configs"
                         / "quickstart.yaml"))[0]
    P = GoalProblem(goal)
    x = 0.3 * P.lower + 0.7 * P.upper

    def rows(xv):
        return P._physics_vector(xv, {})

    value, J = value_and_jacobian(rows, x)
    vjp, out = make_vjp(rows)(x)
    onp.testing.assert_array_equal(value, onp.asarray(out, float))
    for r, seed in enumerate(onp.eye(value.size)):
        onp.testing.assert_array_equal(J[r], onp.asarray(vjp(seed), float))
    assert J.shape == (value.size, x.size) and onp.all(onp.abs(J).sum(axis=1) > 0)


def test_quantities_no_row_reads_are_the_same_numbers_without_derivatives():
    # common practice, no source: a goal whose rows read neither R, T, A nor the capacity
    # quantities computes those from plain values; every recorded number is the same as
    # with derivatives through everything, the rows' Jacobian is unchanged, and asking for
    # the derivative of such a quantity through the plain path gives none
    from autograd import grad

    from chiropt.goals import GoalProblem, load_goal
    from chiropt.sensitivity import plain_groups

    goal = load_goal(str(Path(__file__).resolve().parent.parent / "configs"
                         / "quickstart.yaml"))[0]
    P = GoalProblem(goal)
    assert P.plain_groups == ("far_field", "capacity")
    assert plain_groups(["g", "R"]) == ("capacity",)
    assert plain_groups(["docp_efficiency", "u"]) == ("far_field",)
    assert plain_groups(["ev_share_k1.5"]) == ("far_field",)
    x = 0.4 * P.lower + 0.6 * P.upper
    ev = P.evaluate(x, True)
    traced = compute_quantities(P.eval_design, P.values(x), k_min=P.k_min)
    for key, v in traced.items():
        assert ev.metrics["quantities"][key] == onp.real(onp.asarray(v)).tolist(), key
    every = GoalProblem(goal)
    every.plain_groups = ()
    ev_all = every.evaluate(x, True)
    onp.testing.assert_array_equal(ev.df, ev_all.df)
    onp.testing.assert_array_equal(ev.dg, ev_all.dg)
    path = "lattice.period_nm"

    def R_of(period, plain, weight=1.0):
        values = dict(P.values(x), **{path: period})
        q = compute_quantities(P.eval_design, values, plain=plain)
        return weight * anp.real(q["R+1"][0]) + anp.real(q["g"][0])

    p0 = P.values(x)[path]
    with_R = grad(lambda p: R_of(p, ()))(p0)
    without_R = grad(lambda p: R_of(p, ("far_field",)))(p0)
    g_only = grad(lambda p: R_of(p, (), 0.0))(p0)
    assert without_R == g_only and abs(with_R - g_only) > 1e-6 * abs(g_only)


@pytest.mark.parametrize("side", ["host", "substrate"])
@pytest.mark.parametrize("thickness", [0.0, 0.37])
def test_zero_order_forms_primitive_against_finite_differences(side, thickness):
    # central finite differences (check_grads, common practice, no source) of the (0,0)
    # order's slab means with the incident down wave's interference (host side) or the up
    # wave alone (substrate side), on a plane and a slab; complex unit vectors stand for
    # the analytic continuation the region averages are differentiated along
    from autograd.test_util import check_grads

    from chiropt.metrics import _zero_order_forms
    rng = onp.random.default_rng(5)
    W, T = 2, 2
    args = [_c(rng, W, T, 2), _c(rng, W, T, 2) if side == "host" else None]
    args += [_c(rng, W, 3) for _ in range(5)] + [onp.abs(_c(rng, W)) + 0.3j]
    if side == "host":
        _check_every_argument(lambda *a: _zero_order_forms(*a, thickness), *args)
    else:
        _check_every_argument(lambda u, s, pu, pd, ku, kd, kz: _zero_order_forms(
            u, None, s, pu, pd, ku, kd, kz, thickness), args[0], *args[2:])
    check_grads(lambda L: _zero_order_forms(*args, L), modes=["rev"], order=1)(0.2)


def test_metric_values_primitive_against_finite_differences():
    # central finite differences (check_grads, common practice, no source) of u, c, g,
    # background, s0 and DOCP per helicity from region averages and the incident reference

    from chiropt.metrics import _metric_values
    rng = onp.random.default_rng(9)
    W = 3
    EE = onp.abs(rng.normal(size=(W, 2))) + 0.5
    S0 = onp.abs(rng.normal(size=(W, 2))) + 0.5
    _check_every_argument(
        _metric_values, EE, rng.normal(size=(W, 2)), S0, rng.normal(size=(W, 2)),
        onp.abs(rng.normal(size=W)) + 0.5, rng.normal(size=(W, 2)) + 2.0)


def test_quantities_with_the_trimmed_order_set_equal_the_full_solution():
    # common practice, no source: compute_quantities keeps only the orders the region and
    # the far field need (the reflected coupling's further orders stay inside the solve);
    # the quantities equal those of the full solution, and the full solution still gives
    # fields at a lower plane
    from chiropt.metrics import plane_maps
    from chiropt.model import quantities_of, run_model

    design = design_from_dict(REFERENCE["multipole-square-substrate-normal"]["design"])
    trimmed = run_model(design, trim=True)
    full = run_model(design)
    assert len(trimmed.solution.orders.mn) < len(full.solution.orders.mn)
    q, ref = compute_quantities(design), quantities_of(full)
    for key, v in ref.items():
        onp.testing.assert_allclose(q[key], v, rtol=1e-13, atol=1e-15, err_msg=key)
    from chiropt.fields import particle_top
    low = float(particle_top(full.structure)) * 1e9 + 1.0    # 1 nm above the tops [nm]
    assert onp.all(onp.isfinite(plane_maps(full.solution, low, 8)["u"]))


def test_metric_values_primitive_on_maps_against_finite_differences():
    # central finite differences (check_grads, common practice, no source): the same
    # metrics of helicity-resolved maps (W, 2, n, n), the reference broadcast over the grid

    from chiropt.metrics import _metric_values
    rng = onp.random.default_rng(10)
    W, n = 2, 3
    EE = onp.abs(rng.normal(size=(W, 2, n, n))) + 0.5
    S0 = onp.abs(rng.normal(size=(W, 2, n, n))) + 0.5
    _check_every_argument(
        _metric_values, EE, rng.normal(size=(W, 2, n, n)), S0, rng.normal(size=(W, 2, n, n)),
        onp.abs(rng.normal(size=W)) + 0.5, rng.normal(size=(W, 2)) + 2.0)
