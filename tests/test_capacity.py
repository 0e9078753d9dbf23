"""Order capacity and polarization efficiency: split of g, bounds, single-wave limit, gradients,
goals that steer with them and the staged start points."""

import warnings

import autograd.numpy as anp
import numpy as np
import pytest
from autograd.differential_operators import make_jvp_reversemode
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

from chiropt.capacity import capacity_metrics, ev_share_above, verdict
from chiropt.design import design_from_dict
from chiropt.errors import InputError
from chiropt.fields import OrderContent, field_maps
from chiropt.metrics import (cd_bound, order_averages, order_metrics, quadratic_maps,
                             region_content)
from chiropt.model import CAPACITY_QUANTITIES, metrics_tolerance, run_model
from chiropt.planewaves import cross, kz_branch, order_basis
from chiropt.sensitivity import compute_quantities

PLANE = {"kind": "plane", "height_nm": 10.0}
SLAB = {"kind": "slab", "from_nm": 5.0, "thickness_nm": 60.0}


def _design(region=PLANE, substrate=True, wl=(600.0, 700.0), radius=75.0, period=420.0,
            polar=0.0, lmax=1, host=1.0, **extra):
    data = {"lattice": {"kind": "square", "period_nm": period},
            "particles": [{"radius_nm": radius, "material": "Si"}],
            "host_index": host,
            "illumination": {"wavelength_nm": list(wl), "polar_deg": polar, "azimuth_deg": 20.0},
            "region": region, "model": {"lmax": lmax}}
    data.update(extra)
    if substrate:
        data.update(substrate={"material": "SiO2"}, gap_nm=0)
    return design_from_dict(data)


def _metrics(design):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = run_model(design)
    return out, out.metrics


CASES = [
    pytest.param(dict(region=PLANE, substrate=False), id="plane-no-substrate"),
    pytest.param(dict(region=PLANE, substrate=True), id="plane-substrate"),
    pytest.param(dict(region=SLAB, substrate=False, polar=30.0), id="slab-no-substrate"),
    pytest.param(dict(region=SLAB, substrate=True, polar=30.0), id="slab-substrate"),
    pytest.param(dict(region=PLANE, substrate=True, lmax=2, wl=(650.0,)), id="multipole"),
    pytest.param(dict(region=PLANE, substrate=True, wl=(650.0,),
                      particles=[{"shape": "cylinder", "radius_nm": 100, "height_nm": 120,
                                  "material": "Si"}],
                      model={"solver": "fourier", "harmonics": 25}), id="fourier"),
]


# -- the split of g -------------------------------------------------------------------------

@pytest.mark.parametrize("kw", CASES)
def test_split_adds_up_to_region_g(kw):
    # docs/theory.md §13 (Parseval: the region average is a sum over orders) and §18 (the
    # three order classes partition it): g_00 + g_prop + g_ev = g to round-off; each part
    # also equals the share-weighted per-order g of order_metrics summed over its class
    design = _design(**kw)
    out, m = _metrics(design)
    total = m["g_00"] + m["g_prop"] + m["g_ev"]
    np.testing.assert_allclose(total, m["g"], rtol=0, atol=1e-12)
    om = order_metrics(out.solution, design.region, tol=metrics_tolerance(design))
    part = np.asarray(om["share"]) * np.asarray(om["g"])
    G = part.shape[1]
    ev = om["evanescent"] & (np.arange(G) > 0)[None]
    prop = ~om["evanescent"] & (np.arange(G) > 0)[None]
    np.testing.assert_allclose(m["g_00"], part[:, 0], atol=1e-12)
    np.testing.assert_allclose(m["g_ev"], np.where(ev, part, 0).sum(1), atol=1e-12)
    np.testing.assert_allclose(m["g_prop"], np.where(prop, part, 0).sum(1), atol=1e-12)


@pytest.mark.parametrize("substrate", [False, True], ids=["no-substrate", "substrate"])
def test_evanescent_part_from_field_maps_on_a_grid(substrate):
    # field_maps docstring / docs/theory.md §13 (discrete Parseval): the grid average of
    # C_hat of a field built (as vectors, from the order basis) from the evanescent orders
    # only equals their sum of c_G when the grid is finer than twice the largest index
    design = _design(region=PLANE, substrate=substrate, wl=(650.0,))
    out, m = _metrics(design)
    sol, st = out.solution, out.solution.structure
    content, _ = region_content(sol, design.region, tol=metrics_tolerance(design))
    K = np.asarray(content.K)
    keep = (K > 1.0) & (np.arange(K.shape[1]) > 0)[None]
    up = np.asarray(content.up) * keep[:, None, None, :]
    only = OrderContent(content.mn, content.g_norm, content.q, content.kz, content.k, up,
                        0 * np.asarray(content.down), content.z, content.azimuth,
                        content.n_host)
    n = 2 * int(np.abs(content.mn).max()) + 2
    E, ZH = field_maps(only, st.lattice, n)
    q = quadratic_maps(E, ZH)
    c_ev = (np.mean(q["C"][:, 0], axis=(-2, -1)) - np.mean(q["C"][:, 1], axis=(-2, -1))) / 2
    np.testing.assert_allclose(c_ev / m["u"], m["g_ev"], rtol=1e-9, atol=1e-12)


# -- bounds on random designs ---------------------------------------------------------------

@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(radius=hs.floats(40.0, 130.0), period=hs.floats(300.0, 560.0),
       wl=hs.floats(500.0, 900.0), polar=hs.floats(0.0, 50.0), height=hs.floats(2.0, 60.0),
       slab=hs.booleans(), substrate=hs.booleans())
def test_shares_and_efficiencies_are_bounded(radius, period, wl, polar, height, slab,
                                             substrate):
    # docs/theory.md §18: 0 <= ev_share <= 1, |g_ev| <= cd_capacity (hence
    # |cd_efficiency| <= 1) and |docp_efficiency| <= 1 from the single-wave bounds of §14
    if 2 * radius + 20.0 > period:
        period = 2 * radius + 20.0
    region = ({"kind": "slab", "from_nm": height, "thickness_nm": 40.0} if slab
              else {"kind": "plane", "height_nm": height})
    _, m = _metrics(_design(region=region, substrate=substrate, wl=(wl,), radius=radius,
                            period=period, polar=polar))
    tiny = 1e-12
    for share in [m["ev_share"], *m["ev_share_h"].values(), ev_share_above(m, 2.0)]:
        assert np.all((share >= -tiny) & (share <= 1 + tiny))
    assert np.all(np.abs(m["g_ev"]) <= m["cd_capacity"] * (1 + 1e-12) + tiny)
    assert np.all(np.abs(m["cd_efficiency"]) <= 1 + 1e-12)
    for eff in m["docp_efficiency"].values():
        assert np.all(np.abs(eff) <= 1 + 1e-12)
    assert np.all(ev_share_above(m, 2.0) <= m["ev_share"] + tiny)


def test_ev_share_k_at_the_light_line_is_ev_share():
    # common practice, no source: K >= 1 counts the same orders as K > 1 off a grazing order
    _, m = _metrics(_design(wl=(650.0,)))
    np.testing.assert_allclose(ev_share_above(m, 1.0), m["ev_share"], atol=1e-14)
    with pytest.raises(InputError, match="k_min"):
        ev_share_above(m, 0.5)


# -- a single evanescent wave at its bound ----------------------------------------------------

def _one_wave(K, ratio, phase):
    """OrderContent of one evanescent order (1, 0) at K (k = 1), (0,0) empty; helicity +1
    has p/s = ratio exp(i phase), helicity -1 its mirror image (phase -> -phase)."""
    k = np.array([1.0])
    q = np.array([[[0.0, 0.0], [K, 0.0]]])
    kz = kz_branch(k[:, None], np.sum(q ** 2, axis=-1))
    up = np.zeros((1, 2, 2, 2), complex)
    for h, ph in ((0, phase), (1, -phase)):
        up[0, h, 0, 1] = 1.0
        up[0, h, 1, 1] = ratio * np.exp(1j * ph)
    return OrderContent(np.array([[0, 0], [1, 0]]), np.array([0.0, K]), q, kz, k, up,
                        np.zeros((1, 2, 2)), 0.0, 0.0, 1.0)


@pytest.mark.parametrize("K", [1.2, 2.0, 3.5])
@pytest.mark.parametrize("thickness", [0.0, 0.3])
def test_single_evanescent_wave_at_its_bound_has_unit_efficiency(K, thickness):
    # docs/theory.md §14: |p/s| = 1/sqrt(2K^2 - 1) with phase -pi/2 reaches
    # g = K^2/sqrt(2K^2 - 1); checked first on the vectors built from the order basis
    # (planewaves.order_basis, Z H = k_hat x E), then through the capacity metrics
    ratio = 1.0 / np.sqrt(2 * K ** 2 - 1)
    content = _one_wave(K, ratio, -np.pi / 2)
    s, pu, _, ku, _ = order_basis(content.q, content.kz, content.k[:, None], 0.0)
    E = content.up[0, 0, 0, 1] * s[0, 1] + content.up[0, 0, 1, 1] * pu[0, 1]
    qm = quadratic_maps(E, cross(ku[0, 1], E))
    bound = K ** 2 / np.sqrt(2 * K ** 2 - 1)
    np.testing.assert_allclose(qm["C"] / qm["EE"], bound, rtol=1e-12)
    per = order_averages(content, thickness)
    cap = capacity_metrics(per, content.K, cd_bound(content.K), np.array([[-1.0, 1.0]]))
    np.testing.assert_allclose(cap["ev_share"], 1.0, rtol=1e-12)
    np.testing.assert_allclose(cap["cd_capacity"], bound, rtol=1e-12)
    np.testing.assert_allclose(cap["cd_efficiency"], 1.0, rtol=1e-12)
    np.testing.assert_allclose(cap["g_ev"], bound, rtol=1e-12)
    # the same wave off its bound (other ratio, other phase) has a smaller efficiency
    off = _one_wave(K, 2 * ratio, -np.pi / 3)
    cap_off = capacity_metrics(order_averages(off, thickness), off.K, cd_bound(off.K),
                               np.array([[-1.0, 1.0]]))
    assert 0 < cap_off["cd_efficiency"][0] < 1 - 1e-3


@pytest.mark.parametrize("K", [1.5, 3.0])
def test_fully_circular_evanescent_wave_has_unit_docp_efficiency_and_no_cd(K):
    # docs/theory.md §14, §18: |s| = sqrt(K^2 - 1)|p| with a real ratio gives an in-plane
    # field of DOCP +-1 and zero CD (the two efficiencies compete order by order)
    content = _one_wave(K, 1.0 / np.sqrt(K ** 2 - 1), 0.0)
    per = order_averages(content, 0.0)
    cap = capacity_metrics(per, content.K, cd_bound(content.K), np.array([[-1.0, 1.0]]))
    for h in ("+1", "-1"):
        np.testing.assert_allclose(abs(cap["docp_efficiency"][h][0]), 1.0, rtol=1e-12)
    np.testing.assert_allclose(cap["cd_efficiency"], 0.0, atol=1e-12)


# -- gradients --------------------------------------------------------------------------------

NAMES = CAPACITY_QUANTITIES + ("ev_share_k2",)


def test_gradients_of_every_capacity_metric_match_finite_differences():
    # common practice, no source: exact derivatives against central differences
    design = _design(region=PLANE, substrate=True, wl=(640.0, 720.0), polar=15.0)
    paths = ("particles[0].radius_nm", "lattice.period_nm", "region.height_nm")
    x0 = np.array([75.0, 420.0, 10.0])

    def f(x):
        q = compute_quantities(design, dict(zip(paths, x, strict=True)), k_min=(2.0,))
        return anp.stack([anp.real(q[n]) for n in NAMES])

    h = np.array([1e-3, 1e-3, 1e-3])
    for i in range(3):
        e = np.zeros(3)
        e[i] = 1.0
        exact = make_jvp_reversemode(f)(x0)(e)
        fd = (f(x0 + h * e) - f(x0 - h * e)) / (2 * h[i])
        np.testing.assert_allclose(exact, fd, rtol=2e-5, atol=1e-8, err_msg=paths[i])


# -- verdict ----------------------------------------------------------------------------------

def test_verdict_names_the_limit():
    # docs/theory.md §18 thresholds (ours): little evanescent intensity -> capacity;
    # evanescent intensity far from the bound or against g -> polarization
    assert verdict(0.05, 0.95, 0.55, 0.76, 0.05).startswith("limited by capacity: 95%")
    assert verdict(0.6, 0.3, 0.2, 1.1, 0.3).startswith("limited by polarization")
    assert "opposes g" in verdict(0.6, 0.3, -0.8, 0.7, -0.4)
    assert verdict(0.6, 0.3, 0.9, 1.4, 0.9).startswith("near both limits")


# -- goals ------------------------------------------------------------------------------------

GOAL = {
    "design": {"lattice": {"kind": "square", "period_nm": 420},
               "particles": [{"radius_nm": 75, "material": "Si"}],
               "substrate": {"material": "SiO2"}, "gap_nm": 0,
               "illumination": {"wavelength_nm": 700}, "region": PLANE,
               "model": {"lmax": 1}},
    "variables": {"particles[0].radius_nm": {"min": 50, "max": 110},
                  "lattice.period_nm": {"min": 300, "max": 520}},
    "objectives": [{"maximize": "ev_share_k", "k_min": 2.0, "at_nm": 700}],
    "constraints": [{"metric": "cd_capacity", "min": 0.05, "at_nm": 700},
                    {"metric": "u", "min": 0.5, "at_nm": 700}],
}


def _goal(**changes):
    from chiropt.goals.schema import goal_from_dict

    data = {**GOAL, **changes}
    return goal_from_dict(data)[0]


def test_goal_steers_with_capacity_metrics_and_round_trips():
    # common practice, no source: an objective and constraints on the new metrics evaluate
    # to the same numbers as the forward model, and the resolved goal reads back the same
    from chiropt.goals import GoalProblem
    from chiropt.goals.schema import goal_from_dict

    goal = _goal()
    assert goal.objectives[0].metrics == ("ev_share_k2",)
    resolved = goal.to_dict()
    again = goal_from_dict({**GOAL, "objectives": resolved["objectives"],
                            "constraints": resolved["constraints"]})[0]
    assert again.objectives == goal.objectives and again.constraints == goal.constraints
    problem = GoalProblem(goal)
    x = np.array([80.0, 430.0])
    ev = problem.evaluate(x, True)
    assert ev.status == "ok"
    q = compute_quantities(problem.design_at(x), k_min=(2.0,))
    np.testing.assert_allclose(ev.f[0], q["ev_share_k2"][0], rtol=1e-12)
    np.testing.assert_allclose(ev.g[0], (0.05 - q["cd_capacity"][0]) / 1.0, rtol=1e-12)
    assert np.all(np.isfinite(ev.df)) and np.all(np.isfinite(ev.dg))


@pytest.mark.parametrize("change,key", [
    ({"objectives": [{"maximize": "ev_share_k", "at_nm": 700}]}, "objectives[0].maximize"),
    ({"objectives": [{"maximize": "g", "k_min": 2.0, "at_nm": 700}]}, "objectives[0].k_min"),
    ({"objectives": [{"maximize": "ev_share_k", "k_min": 0.5, "at_nm": 700}]},
     "objectives[0].k_min"),
    ({"constraints": [{"metric": "cd_efficency", "min": 0.1}]}, "constraints[0].metric"),
    ({"search": {"starts_from": 3}}, "search.starts_from"),
])
def test_goal_rejects_bad_capacity_input(change, key):
    # common practice, no source: errors name the key path
    with pytest.raises(InputError) as info:
        _goal(**change)
    assert info.value.key == key


def test_capacity_metric_needs_a_region_above_the_tops():
    # docs/theory.md §18: a sampled region's average is no order sum
    design = dict(GOAL["design"], region={"kind": "surface", "thickness_nm": 5.0},
                  particles=[{"shape": "cylinder", "radius_nm": 75, "height_nm": 80,
                              "material": "Si"}],
                  model={"solver": "fourier", "harmonics": 25})
    with pytest.raises(InputError, match="above the particle tops"):
        _goal(design=design, variables={"particles[0].radius_nm": {"min": 50, "max": 110}})


def test_stage_starts_come_from_an_earlier_front(tmp_path):
    # common practice, no source: the staged recipe's second stage starts where the first
    # stage's front is, clipped to its own bounds, at most `starts` of them
    from chiropt.export.candidates import write_front_csv
    from chiropt.run import stage_starts

    csv = tmp_path / "front.csv"
    write_front_csv(csv, ["index", "particles[0].radius_nm", "lattice.period_nm", "x"],
                    [[0, 90.0, 450.0, 1.0], [1, 120.0, 400.0, 2.0], [2, 60.0, 350.0, 0.0]],
                    header=["a run"])
    goal = _goal(search={"starts": 2, "starts_from": str(csv)})
    X = stage_starts(goal)
    np.testing.assert_array_equal(X, [[90.0, 450.0], [110.0, 400.0]])
    with pytest.raises(InputError, match="not found"):
        stage_starts(_goal(search={"starts_from": str(tmp_path / "none.csv")}))
    write_front_csv(csv, ["index", "lattice.period_nm"], [[0, 450.0]])
    with pytest.raises(InputError, match="no column"):
        stage_starts(goal)
