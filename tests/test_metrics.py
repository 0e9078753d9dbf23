"""Chirality metrics: limits, Parseval and slab closed forms, single-wave bounds, gradients."""

import json
import warnings

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import grad
from hypothesis import given, settings
from hypothesis import strategies as hs
from scipy.integrate import quad_vec

from chiropt.design import RegionSpec, design_from_dict
from chiropt.fields import field_maps, order_content, region_span
from chiropt.metrics import (
    attainable_boundary,
    attainable_fill,
    cd_bound,
    incident_reference,
    local_metrics,
    order_averages,
    order_metrics,
    order_table,
    quadratic_maps,
    region_averages,
    region_metrics,
)
from chiropt.planewaves import cross, kz_branch, order_basis
from chiropt.solve import solve
from chiropt.structure import build_structure

PLANE = RegionSpec("plane", height_nm=10.0)
SLAB = RegionSpec("slab", from_nm=5.0, thickness_nm=60.0)


def _design(particles=None, wl=(550.0, 700.0), polar=0.0, azimuth=0.0, host=1.0, period=420.0,
            lattice=None, **extra):
    data = {"lattice": lattice or {"kind": "square", "period_nm": period},
            "particles": particles or [{"radius_nm": 75, "material": "Si"}],
            "host_index": host,
            "illumination": {"wavelength_nm": list(wl), "polar_deg": polar,
                             "azimuth_deg": azimuth}}
    data.update(extra)
    return design_from_dict(data)


def _solve(design, values=None):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # 0/0 local fields of void spheres
        st = build_structure(design, values)
        return solve(st, warn=False)


# -- limits -------------------------------------------------------------------------------

@pytest.mark.parametrize("polar,host", [(0.0, 1.0), (40.0, 1.0), (25.0, 1.33)])
@pytest.mark.parametrize("region", [PLANE, SLAB], ids=["plane", "slab"])
def test_bare_plane_wave_gives_unit_metrics(polar, host, region):
    # docs/theory.md §12: the bare incident circular wave has u = 1, g = 1, DOCP = +1,
    # background = 0 (and s0 = 1); spheres of the host's own index scatter nothing.
    sol = _solve(_design([{"radius_nm": 60, "material": {"n": host}}], polar=polar, host=host,
                         azimuth=30.0))
    r = region_metrics(sol, region, tol=1e-6)
    for key, want in (("u", 1.0), ("g", 1.0), ("c", 1.0), ("background", 0.0)):
        np.testing.assert_allclose(r[key], want, atol=1e-12)
    for h in ("+1", "-1"):
        np.testing.assert_allclose(r["docp"][h], 1.0, atol=1e-12)
        np.testing.assert_allclose(r["s0"][h], 1.0, atol=1e-12)
        np.testing.assert_allclose(r["area_fraction"][h], 1.0)


def test_substrate_side_illumination_of_matched_stack_is_the_bare_wave():
    # Module convention (metrics.py docstring): for substrate-side illumination the
    # reference is the unit circular wave in the host going +z; with a substrate and
    # spheres of the host's index the host field is that wave (docs/theory.md §12 limits).
    d = _design([{"radius_nm": 60, "material": {"n": 1.0}}], polar=30.0,
                substrate={"material": {"n": 1.0}},
                illumination={"wavelength_nm": [600.0], "polar_deg": 30.0, "side": "substrate"})
    r = region_metrics(_solve(d), PLANE, tol=1e-6)
    for key in ("u", "g"):
        np.testing.assert_allclose(r[key], 1.0, atol=1e-12)
    for h in ("+1", "-1"):
        np.testing.assert_allclose(r["docp"][h], 1.0, atol=1e-12)


@pytest.mark.parametrize("polar", [0.0, 30.0, 60.0])
def test_incident_reference_stokes(polar):
    # docs/theory.md §2 worked check (S3 < 0 for +1 going -z) and §12 (|DOCP_inc| =
    # 2 cos t/(1 + cos^2 t)).
    st = build_structure(_design(polar=polar, wl=(700.0,)))
    ref = incident_reference(st)
    t = np.radians(polar)
    want = 2 * np.cos(t) / (1 + np.cos(t) ** 2)
    np.testing.assert_allclose(ref["docp"][0], [-want, want], rtol=1e-12)


# -- Parseval and slab closed forms --------------------------------------------------------

CASES = {
    "Si-oblique": dict(polar=25.0, azimuth=30.0),
    "Si-on-glass": dict(polar=15.0, substrate={"material": "SiO2"}, gap_nm=10.0),
    "two-particles-hex": dict(lattice={"kind": "hexagonal", "period_nm": 430},
                              particles=[{"radius_nm": 70, "material": "Si"},
                                         {"radius_nm": 40, "material": "Ag",
                                          "position_nm": [215, 124]}], polar=10.0),
}


@pytest.mark.parametrize("case", list(CASES))
def test_plane_averages_equal_grid_averages(case):
    # docs/theory.md §13 (Parseval): cell averages are sums over orders; on the grid of
    # docs/cli.md the plain mean is exact once the grid out-resolves the orders kept.
    sol = _solve(_design(**CASES[case]))
    avg = region_averages(sol, PLANE, tol=1e-4)
    content = avg["content"]
    n = 2 * int(np.max(np.abs(content.mn))) + 2
    E, ZH = field_maps(content, sol.structure.lattice, n)
    maps = quadratic_maps(E, ZH)
    for key in ("EE", "C", "S0", "S3"):
        np.testing.assert_allclose(maps[key].mean(axis=(-2, -1)), avg[key], rtol=0, atol=1e-8)
    m = local_metrics(E, ZH, sol.structure)
    r = region_metrics(sol, PLANE, tol=1e-4, area_grid=0)
    np.testing.assert_allclose(m["u"].mean(axis=(-2, -1)), r["u"], atol=1e-8)
    np.testing.assert_allclose(m["c"].mean(axis=(-2, -1)), r["c"], atol=1e-8)


@pytest.mark.parametrize("case", list(CASES))
def test_slab_closed_form_equals_z_quadrature(case):
    # Closed-form z integrals (docs/theory.md §13 decay, standing (0,0) wave) against
    # scipy's adaptive quadrature of the plane averages.
    sol = _solve(_design(**CASES[case]))
    avg = region_averages(sol, SLAB, tol=1e-6)
    content, L = avg["content"], avg["thickness"]
    side = sol.structure.side

    def plane(dz):
        per = order_averages(content.shifted(dz), 0.0, side=side)
        return np.stack([per[k].sum(axis=-1) for k in ("EE", "C", "S0", "S3")])

    num, _ = quad_vec(plane, 0.0, L, epsabs=1e-13, epsrel=1e-12)
    want = np.stack([avg[k] for k in ("EE", "C", "S0", "S3")])
    np.testing.assert_allclose(want, num / L, rtol=0, atol=1e-8)


def test_phi1_is_smooth_through_the_series_switch():
    # the closed-form slab mean uses (e^x - 1)/x with a series near 0 (common practice,
    # no source): both sides of the switch agree with the mean by quadrature.
    from chiropt.metrics import _phi1
    for x in (0.0, 1e-6 + 2e-6j, 0.0099j, 0.0101j, -0.3, 2.0 - 5.0j):
        num = quad_vec(lambda t, x=x: np.exp(x * t), 0.0, 1.0, epsabs=1e-15)[0]
        assert abs(_phi1(np.array(x)) - num) < 1e-14


# -- single-wave bounds (docs/theory.md §14, our derivation: these are its tests) ---------------

def _wave(K, s_amp, p_amp, azimuth=0.3):
    """E and Z H of one upward plane wave with |q|/k = K, amplitudes (s, p), k = 1."""
    q = K * np.array([[np.cos(azimuth), np.sin(azimuth)]])
    kz = kz_branch(1.0, np.sum(q ** 2, axis=-1))
    s, pu, _, ku, _ = order_basis(q, kz, 1.0, azimuth)
    E = s_amp * s[0] + p_amp * pu[0]
    return E, cross(ku[0], E)


def _point(K, s_amp, p_amp):
    q = quadratic_maps(*_wave(K, s_amp, p_amp))
    return float(q["S3"] / q["S0"]), float(q["C"] / q["EE"])


amp = hs.complex_numbers(max_magnitude=10.0, allow_nan=False, allow_infinity=False)


@settings(max_examples=300, deadline=None)
@given(K=hs.floats(1.0 + 1e-6, 30.0), s_amp=amp, p_amp=amp)
def test_evanescent_wave_within_bound_and_region(K, s_amp, p_amp):
    # docs/theory.md §14: |g| <= K^2/sqrt(2K^2-1) and (DOCP, g) in the union of ellipses.
    if abs(s_amp) + abs(p_amp) < 1e-6:
        return
    docp, g = _point(K, s_amp, p_amp)
    assert abs(g) <= cd_bound(K) * (1 + 1e-12)
    assert attainable_fill(K, docp, g) <= 1 + 1e-9


@settings(max_examples=200, deadline=None)
@given(K=hs.floats(0.05, 1.0 - 1e-6), s_amp=amp, p_amp=amp)
def test_propagating_wave_within_bound_and_region(K, s_amp, p_amp):
    # docs/theory.md §14: a single propagating wave has |g| <= 1; CD and DOCP go together.
    if min(abs(s_amp), abs(p_amp)) < 1e-3 * max(abs(s_amp), abs(p_amp), 1e-6):
        return  # nearly pure s or p: the region pinches to the origin (fill ill-conditioned)
    docp, g = _point(K, s_amp, p_amp)
    assert abs(g) <= 1 + 1e-12
    assert docp * g >= -1e-12
    # the cone is ~K^2/r^2 wide here: round-off 1e-16 costs up to ~1e-7 of the fill
    assert attainable_fill(K, docp, g) <= 1 + 1e-6


@pytest.mark.parametrize("K", [1.0001, 1.2, 2.0, 7.5])
@pytest.mark.parametrize("sign", [1, -1])
def test_maximizing_polarization_reaches_the_bound(K, sign):
    # docs/theory.md §14: |p/s| = 1/sqrt(2K^2-1), phase -+pi/2 gives |g| = K^2/sqrt(2K^2-1).
    docp, g = _point(K, 1.0, -sign * 1j / np.sqrt(2 * K ** 2 - 1))
    assert abs(g - sign * K ** 2 / np.sqrt(2 * K ** 2 - 1)) < 1e-12
    assert abs(docp) < 1e-12
    assert abs(attainable_fill(K, docp, g) - 1.0) < 1e-12


@settings(max_examples=100, deadline=None)
@given(K=hs.floats(1.01, 20.0), theta=hs.floats(0.0, 2 * np.pi))
def test_boundary_points_are_reached_by_waves(K, theta):
    # The closed-form region boundary (attainable_fill) is reached by an actual wave:
    # ellipse of r* = |p/s| minimizing D^2/a^2 + g^2/b^2, at the angle hitting the ray.
    a2, b2 = K ** 2 - 1, 2 * K ** 2 - 1
    c1, c2 = np.cos(theta) ** 2 / (4 * a2), np.sin(theta) ** 2 / (4 * K ** 4)
    r = ((c1 + c2) / (c1 * a2 ** 2 + c2 * b2 ** 2)) ** 0.25
    a = 2 * np.sqrt(a2) * r / (1 + a2 * r ** 2)
    b = 2 * K ** 2 * r / (1 + b2 * r ** 2)
    phi = np.arctan2(np.sin(theta) / b, np.cos(theta) / a)
    # docp = -a cos(phi') and g = -b sin(phi') for p = r e^{i phi'} (docs/theory.md §14)
    docp, g = _point(K, 1.0, r * np.exp(1j * (phi + np.pi)))
    assert abs(np.arctan2(g, docp) - np.arctan2(np.sin(theta), np.cos(theta))) % (
        2 * np.pi) < 1e-9 or abs(np.hypot(docp, g)) < 1e-12
    assert abs(attainable_fill(K, docp, g) - 1.0) < 1e-9


def test_attainable_boundary_curve():
    # docs/theory.md §14: the boundary touches DOCP = +-1 and g = +-bound.
    d, g = attainable_boundary(1.5, n=2001)
    assert np.max(np.abs(d)) == pytest.approx(1.0, rel=1e-5)
    assert np.max(np.abs(g)) == pytest.approx(cd_bound(1.5), rel=1e-5)
    np.testing.assert_allclose(attainable_fill(1.5, d, g), 1.0, rtol=1e-12)
    d, g = attainable_boundary(0.6, n=401)
    ok = np.isfinite(d)
    assert np.all(d[ok] * g[ok] >= 0) and np.nanmax(np.abs(g)) <= 1 + 1e-12


# -- symmetry, metal vs dielectric ---------------------------------------------------------

@pytest.mark.parametrize("extra", [{}, {"substrate": {"material": "SiO2"}, "gap_nm": 5.0}])
@pytest.mark.parametrize("region", [PLANE, SLAB], ids=["plane", "slab"])
def test_achiral_array_normal_incidence_no_background(extra, region):
    # docs/theory.md §8, §12: achiral structure, mirror-symmetric illumination -> <U+> = <U->
    # (common practice, no source).
    sol = _solve(_design(wl=(500.0, 640.0, 800.0), **extra))
    r = region_metrics(sol, region, tol=1e-6, area_grid=0)
    assert np.max(np.abs(r["background"])) < 1e-12
    avg = region_averages(sol, region, tol=1e-6)
    np.testing.assert_allclose(avg["EE"][:, 0], avg["EE"][:, 1], rtol=1e-12)


def _strongest_evanescent_docp(material, wl):
    d = _design([{"radius_nm": 70 if material == "Si" else 40, "material": material}],
                wl=wl, period=350.0 if material == "Si" else 300.0)
    om = order_metrics(_solve(d), PLANE, tol=1e-6)
    share = np.where(om["evanescent"], om["share"], 0.0)
    j = np.argmax(share, axis=1)
    w = np.arange(len(wl))
    return om["docp"]["+1"][w, j], om["docp"]["-1"][w, j]


def test_metal_array_flips_evanescent_handedness():
    # docs/theory.md §8 (common practice, no source). In the dipole model an electric dipole
    # sheet radiates into an evanescent order (K > 1) the in-plane field
    # ((1 - K^2) P_q, P_s) (docs/theory.md §5, E_g ~ (I - k k) P): the q component flips sign,
    # so the in-plane handedness is opposite to the dipole's (the incident's). A silver
    # sphere has almost no magnetic dipole (|alpha_m/alpha_e| < 0.1 here): opposite.
    wl = (400.0, 450.0, 550.0, 700.0, 900.0)
    for docp in _strongest_evanescent_docp("Ag", wl):
        assert np.all(docp < -0.1)


def test_silicon_array_keeps_handedness_where_its_magnetic_dipole_dominates():
    # docs/theory.md §8 says positive-permittivity dielectrics keep the handedness. In the
    # dipole model a magnetic dipole M = alpha_m Z H_inc radiates -k x M, whose in-plane
    # part is -i sqrt(K^2-1) alpha_m E_inc,par: same handedness. A Si sphere keeps it near
    # its magnetic dipole resonance (575 nm: |alpha_m/alpha_e| = 2.5, DOCP = +0.87), but
    # where its electric dipole dominates (long wavelengths, 850 nm: |alpha_m/alpha_e| =
    # 0.18) it flips, like a metal. The rule of §6 therefore holds only where the magnetic
    # response dominates (reported to the lead).
    plus, minus = _strongest_evanescent_docp("Si", (575.0, 850.0))
    np.testing.assert_allclose(plus, minus, atol=1e-10)  # mirror symmetry at normal incidence
    assert plus[0] > 0.5
    assert plus[1] < -0.2


# -- convergence, truncation estimate -----------------------------------------------------

@pytest.mark.parametrize("region", [RegionSpec("plane", height_nm=0.0), SLAB],
                         ids=["touching-plane", "slab"])
def test_metrics_converge_with_orders(region):
    # Convergence in the number of orders kept (common practice, no source): the error
    # against a 1e-12 reference falls with tol, stays below tol, and below the reported
    # truncation estimate.
    sol = _solve(_design(particles=[{"radius_nm": 50, "material": "Ag"}], period=300.0,
                         wl=(450.0, 600.0), polar=10.0))
    ref = region_metrics(sol, region, tol=1e-12, area_grid=0)
    prev = np.inf
    for tol in (1e-3, 1e-5, 1e-7):
        r = region_metrics(sol, region, tol=tol, area_grid=0)
        errs = [np.max(np.abs(r[k] - ref[k])) for k in ("u", "c", "g", "background")]
        errs += [np.max(np.abs(r[k][h] - ref[k][h])) for k in ("s0", "docp")
                 for h in ("+1", "-1")]
        err = max(errs)
        assert err < tol
        assert np.max(np.abs(r["u"] - ref["u"]) / ref["u"]) <= np.max(r["truncation"])
        assert err < prev
        prev = err


def test_area_fraction_grid_converged():
    # The grid count at n = 48 agrees with n = 96 to a few cells (common practice, no source).
    sol = _solve(_design(wl=(550.0, 610.0), polar=20.0))
    a = region_metrics(sol, PLANE, tol=1e-4, area_grid=48)["area_fraction"]
    b = region_metrics(sol, PLANE, tol=1e-4, area_grid=96)["area_fraction"]
    for h in ("+1", "-1"):
        assert np.all(np.abs(a[h] - b[h]) < 0.01)
        assert np.all((a[h] >= 0) & (a[h] <= 1))


# -- per-order table ---------------------------------------------------------------------

def test_order_table_contract():
    # docs/cli.md "orders": keys, bound = null for (0,0), 1 for propagating orders,
    # K^2/sqrt(2K^2-1) for evanescent ones (docs/theory.md §14); shares sum to 1.
    sol = _solve(_design(wl=(380.0, 600.0), polar=10.0))
    rows = order_table(sol, SLAB, 0, tol=1e-5)
    json.dumps(rows)
    assert (rows[0]["m"], rows[0]["n"], rows[0]["bound"], rows[0]["fill"]) == (0, 0, None, None)
    assert sum(r["share"] for r in rows) == pytest.approx(1.0, abs=1e-12)
    prop = [r for r in rows[1:] if not r["evanescent"]]
    assert prop, "380 nm < 420 nm period: first orders propagate"
    for r in rows[1:]:
        want = 1.0 if not r["evanescent"] else r["K"] ** 2 / np.sqrt(2 * r["K"] ** 2 - 1)
        assert r["bound"] == pytest.approx(want, rel=1e-12)
        assert abs(r["g"]) <= r["bound"] * (1 + 1e-9)
        for h in ("+1", "-1"):
            assert r["fill"][h] is None or r["fill"][h] <= 1 + 1e-6
    assert set(rows[0]) == {"m", "n", "K", "evanescent", "share", "g", "docp", "bound", "fill"}


# -- gradients -----------------------------------------------------------------------------

GRAD_DESIGN = dict(particles=[{"radius_nm": 70, "material": {"n": 3.5, "k": 0.01}}],
                   wl=(600.0,), polar=20.0, azimuth=10.0, substrate={"material": "SiO2"},
                   gap_nm=10.0, region={"kind": "slab", "from_nm": 5.0, "thickness_nm": 40.0})


@pytest.mark.parametrize("path", ["particles[0].radius_nm", "region.from_nm",
                                  "region.thickness_nm", "illumination.polar_deg"])
def test_gradients_match_central_differences(path):
    # autograd vs central differences (common practice, no source).
    design = _design(**GRAD_DESIGN)
    x0 = design.parameters()[path]

    def metric(x):
        values = {path: x} if not path.startswith("region") else {}
        sol = _solve(design, values)
        reg = design.region
        if path.startswith("region"):
            kw = {"from_nm": reg.from_nm, "thickness_nm": reg.thickness_nm}
            kw[path.split(".")[1]] = x
            reg = RegionSpec("slab", **kw)
        r = region_metrics(sol, reg, tol=1e-8, area_grid=0)
        return anp.stack([r["u"][0], r["g"][0], r["docp"]["+1"][0], r["docp"]["-1"][0],
                          r["s0"]["+1"][0], r["c"][0]])

    h = 1e-3
    fd = (metric(x0 + h) - metric(x0 - h)) / (2 * h)
    for i in range(len(fd)):
        gi = grad(lambda x, i=i: metric(x)[i])(float(x0))
        assert abs(gi - fd[i]) <= 1e-6 * max(1.0, abs(fd[i])), (i, gi, fd[i])


def test_region_height_of_plane_is_differentiable():
    # d u/d height of a plane region (traced RegionSpec field) vs central differences.
    sol = _solve(_design(wl=(620.0,), polar=15.0))

    def u(hnm):
        return region_metrics(sol, RegionSpec("plane", height_nm=hnm), tol=1e-8,
                              area_grid=0)["u"][0]

    fd = (u(12.0 + 1e-3) - u(12.0 - 1e-3)) / 2e-3
    assert abs(grad(u)(12.0) - fd) < 1e-7 * max(1.0, abs(fd))


def test_region_span_consistency():
    # slab bottom/top from the design's region spec (docs/theory.md §12 regions)
    design = _design(**GRAD_DESIGN)
    st = build_structure(design)
    lo, hi = region_span(st, design.region)
    assert hi - lo == pytest.approx(40e-9)
    content = order_content(_solve(design), lo, tol=1e-4)
    assert content.up.shape[:2] == (1, 2)
