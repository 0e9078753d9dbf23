"""Robustness: error samples, cone and band averages, first order against Monte Carlo."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as onp
import pytest

from chiropt.design import design_from_dict
from chiropt.errors import InputError
from chiropt.goals.schema import design_with
from chiropt.robust.analysis import analyse, band_width
from chiropt.robust.average import combine, quantile, sample_quantities
from chiropt.robust.sampling import band_nodes, cone_nodes, make_plan, normal_samples
from chiropt.robust.spec import parse_robust, parse_sigma_text, resolve_sigma
from chiropt.sensitivity import compute_quantities


def _design(wavelengths=(700.0,), **over):
    data = {"lattice": {"kind": "square", "period_nm": 420},
            "particles": [{"shape": "sphere", "radius_nm": 75, "material": "Si"}],
            "substrate": {"material": "SiO2"}, "gap_nm": 0,
            "illumination": {"wavelength_nm": list(wavelengths), "polar_deg": 0},
            "region": {"kind": "plane", "height_nm": 10}, "model": {"lmax": 1}}
    data.update(over)
    return design_from_dict(data)


DESIGN = _design()


def _spec(raw, design=DESIGN):
    return parse_robust(raw, "robust", design.parameters(), design.host_index)


def _plain(q):
    return {k: onp.real(onp.asarray(v, float)) for k, v in q.items()}


@pytest.mark.parametrize("raw", [
    {"sigma": {"radius_nm": 0.0, "period_nm": 0.0}, "samples": 8},
    {"sigma": {"radius_nm": 1e-12, "period_nm": 1e-12}, "samples": 8},
    {"na": 1e-12},
    {"band_nm": 1e-12},
    {"band_nm": 1e-12, "band_shape": "flat"},
])
def test_vanishing_errors_cone_and_band_give_the_nominal_design(raw):
    # the brief: sigma -> 0, NA -> 0 and band -> 0 reproduce the nominal design to 1e-12
    nominal = _plain(compute_quantities(DESIGN))
    plan = make_plan(_spec(raw), DESIGN, seed=4)
    for q in sample_quantities(DESIGN, None, plan):
        for name, v in nominal.items():
            assert abs(float(q[name][0]) - float(v[0])) < 1e-12, name


def test_one_node_combine_is_the_identity_and_ratios_add_their_parts():
    # docs: one direction with weight 1 returns the inputs; g of a sum is the ratio of sums
    # (common practice, no source: incoherent addition of intensities)
    q = {k: v[:, None] for k, v in _plain(compute_quantities(DESIGN)).items()}
    one = combine(q, [1.0], [1.0])
    for k in q:
        assert abs(float(one[k][0]) - float(q[k][0, 0])) < 1e-14, k
    two = combine({k: onp.concatenate([v, 2 * v], axis=1) for k, v in q.items()},
                  [0.5, 0.5], [1.0, 1.0])
    assert abs(float(two["g"][0]) - float(q["g"][0, 0])) < 1e-14  # c and u scale together


def test_cone_average_equals_a_direct_sum_of_separate_evaluations():
    # the brief: the NA average against a direct sum over the same angles, each direction a
    # separately built design; docs/theory.md §12 (S0 ~ (1 + cos^2 t)/2, S3 ~ cos t)
    spec = _spec({"na": 0.3, "polar_points": 2, "azimuth_points": 3})
    plan = make_plan(spec, DESIGN, seed=1)
    (got,) = sample_quantities(DESIGN, None, plan)
    angles, w = cone_nodes(0.3, DESIGN.host_index, 2, 3)
    qs = [_plain(compute_quantities(design_with(DESIGN, {"illumination.polar_deg": t,
                                                          "illumination.azimuth_deg": p})))
          for t, p in angles]
    ct = onp.cos(onp.deg2rad(angles[:, 0]))
    u = sum(wi * q["u"][0] for wi, q in zip(w, qs, strict=True))
    c = sum(wi * q["c"][0] for wi, q in zip(w, qs, strict=True))
    s_0 = [q["s0+1"][0] * (1 + cti ** 2) / 2 for q, cti in zip(qs, ct, strict=True)]
    s_3 = [q["docp+1"][0] * q["s0+1"][0] * cti for q, cti in zip(qs, ct, strict=True)]
    bare = onp.sum(w * ct) / onp.sum(w * (1 + ct ** 2) / 2)
    docp = onp.dot(w, s_3) / onp.dot(w, s_0) / bare
    T = onp.dot(w * ct, [q["T+1"][0] for q in qs]) / onp.sum(w * ct)
    # the directions are solved together, each row keeping the orders and lattice terms of
    # the widest direction: each within the model's tolerance of its own solve
    tol = DESIGN.tolerance
    assert abs(float(got["u"][0]) - u) < tol * abs(u)
    assert abs(float(got["g"][0]) - c / u) < tol * abs(c / u)
    assert abs(float(got["docp+1"][0]) - docp) < tol * abs(docp)
    assert abs(float(got["T+1"][0]) - T) < tol * abs(T)
    assert abs(float(got["g"][0]) - float(qs[0]["g"][0])) > 1e-6  # the cone does something


@pytest.mark.parametrize("lmax", [1, 3])
def test_directions_on_the_wavelength_axis_are_their_own_solves(lmax):
    # common practice, no source: rows of one solve with their own incidence angles (a
    # cone's directions on the wavelength axis) against each direction solved alone, a
    # normal-incidence row among them (its q = 0 order takes the row's own azimuth): the
    # same direction repeated is the single solve to 1e-12; different directions agree to
    # the model's tolerance (each row keeps the orders and lattice terms of the widest)
    design = _design(model={"lmax": lmax})
    polar, azimuth = onp.array([0.0, 7.0, 12.0, 7.0]), onp.array([40.0, 10.0, 75.0, 130.0])
    rows = design.with_wavelengths([690.0] * 4)
    both = _plain(compute_quantities(rows, {"illumination.wavelength_nm": onp.full(4, 690.0),
                                            "illumination.polar_deg": polar,
                                            "illumination.azimuth_deg": azimuth}))
    same = _plain(compute_quantities(rows, {"illumination.wavelength_nm": onp.full(4, 690.0),
                                            "illumination.polar_deg": onp.full(4, 7.0),
                                            "illumination.azimuth_deg": onp.full(4, 10.0)}))
    for i, (t, f) in enumerate(zip(polar, azimuth, strict=True)):
        alone = _plain(compute_quantities(design_with(
            design.with_wavelengths([690.0]),
            {"illumination.polar_deg": float(t), "illumination.azimuth_deg": float(f)})))
        for name in ("u", "c", "g", "docp+1", "docp-1", "s0+1", "R+1", "T-1", "A+1"):
            ref = float(alone[name][0])
            assert abs(both[name][i] - ref) < design.tolerance * max(abs(ref), 1e-3), name
            if (t, f) == (7.0, 10.0):
                onp.testing.assert_allclose(same[name], ref, rtol=1e-12, atol=1e-14)
    assert abs(both["g"][1] - both["g"][2]) > 1e-6   # the rows differ


def test_cone_nodes_are_uniform_in_solid_angle_inside_the_aperture():
    # Gauss-Legendre in cos(theta) (Abramowitz & Stegun 1964, 25.4.29): the mean of cos t
    # over a cone of half angle a, uniform in solid angle, is (1 + cos a) / 2
    angles, w = cone_nodes(0.5, 1.0, 3, 5)
    a = math.asin(0.5)
    assert abs(onp.sum(w) - 1.0) < 1e-14
    assert onp.all(angles[:, 0] < math.degrees(a))
    assert abs(onp.dot(w, onp.cos(onp.deg2rad(angles[:, 0]))) - (1 + math.cos(a)) / 2) < 1e-14


def test_cone_around_an_oblique_direction_keeps_its_axis():
    # common practice, no source: the weighted mean direction of a cone is along its axis
    angles, w = cone_nodes(0.4, 1.0, 3, 6, axis_deg=(30.0, 45.0))
    t, p = onp.deg2rad(angles[:, 0]), onp.deg2rad(angles[:, 1])
    v = onp.stack([onp.sin(t) * onp.cos(p), onp.sin(t) * onp.sin(p), onp.cos(t)], -1)
    m = w @ v
    m /= onp.linalg.norm(m)
    axis = [math.sin(math.radians(30)) * math.cos(math.radians(45)),
            math.sin(math.radians(30)) * math.sin(math.radians(45)), math.cos(math.radians(30))]
    assert onp.allclose(m, axis, atol=1e-12)


def test_square_lattice_cone_average_does_not_depend_on_the_azimuth_origin():
    # the brief: a square lattice's cone average is independent of the azimuth origin; the
    # response has period 90 deg in azimuth (C4 symmetry: only harmonics 4k), and N equally
    # spaced azimuths integrate every harmonic below N exactly, so with 12 of them only the
    # 12th aliases, tiny at this small NA (common practice, no source)
    turn = [float(onp.real(compute_quantities(DESIGN, {"illumination.polar_deg": 8.0,
                                                       "illumination.azimuth_deg": p})["u"][0]))
            for p in (23.0, 113.0)]
    assert abs(turn[0] - turn[1]) < 1e-10
    base = {"na": 0.15, "polar_points": 2, "azimuth_points": 12}
    out = []
    for origin in (0.0, 17.0):
        spec = replace(_spec(base), azimuth_origin_deg=origin)
        (q,) = sample_quantities(DESIGN, None, make_plan(spec, DESIGN, 1))
        out.append(q)
    for k in ("u", "g", "docp+1", "T+1"):
        assert abs(float(out[0][k][0]) - float(out[1][k][0])) < 1e-8, k


def test_flat_band_quadrature_matches_a_dense_average():
    # Gauss-Legendre with 5 nodes integrates degree-9 polynomials exactly (A&S 25.4.29);
    # a smooth 20 nm band agrees with a 401-point trapezoid of the same ratio of averages
    spec = _spec({"band_nm": 20.0, "band_shape": "flat", "band_points": 5})
    (q,) = sample_quantities(DESIGN, None, make_plan(spec, DESIGN, 1))
    wl = onp.linspace(690.0, 710.0, 401)
    dense = _plain(compute_quantities(DESIGN.with_wavelengths(wl)))
    u, c = onp.trapezoid(dense["u"], wl), onp.trapezoid(dense["c"], wl)
    assert abs(float(q["u"][0]) - u / 20.0) < 1e-6
    assert abs(float(q["g"][0]) - c / u) < 1e-6


def test_gaussian_band_nodes_have_the_stated_width():
    # Gauss-Hermite nodes (A&S 25.4.46) reproduce the weight's variance; FWHM = 2 sqrt(2 ln 2) s
    x, w = band_nodes(10.0, "gaussian", 5)
    sigma = 10.0 / (2 * math.sqrt(2 * math.log(2)))
    assert abs(onp.dot(w, x)) < 1e-12 and abs(onp.dot(w, x ** 2) - sigma ** 2) < 1e-10


def test_band_width_of_a_lorentzian_is_its_fwhm():
    # a Lorentzian 1 + h / (1 + ((l - l0) / gamma)^2) has full width 2 gamma at half height
    # above its baseline (common practice, no source)
    wl = onp.linspace(600, 800, 2001)
    v = 1.0 + 3.0 / (1.0 + ((wl - 700.0) / 6.0) ** 2)
    assert abs(band_width(wl, v, 700.0, 1.0) - 12.0) < 1e-3
    assert math.isnan(band_width(wl, 1.0 + 0.0 * wl + 1e-3 * (wl - 600), 700.0, 1.0))


def test_sobol_normals_and_quantiles():
    # scrambled Sobol (scipy.stats.qmc, reference library) through the normal inverse CDF:
    # 256 points give the first two moments closely; quantile = numpy's linear percentile
    z = normal_samples(2, 256, seed=3)
    assert onp.all(abs(z.mean(axis=0)) < 0.01) and onp.all(abs(z.std(axis=0) - 1) < 0.02)
    assert onp.array_equal(z, normal_samples(2, 256, seed=3))
    assert not onp.array_equal(z, normal_samples(2, 256, seed=4))
    v = onp.random.default_rng(0).normal(size=37)
    for p in (0.1, 0.5, 0.9):
        assert abs(float(quantile(v, p)) - onp.percentile(v, 100 * p)) < 1e-14


def test_first_order_matches_monte_carlo_for_small_errors_on_a_smooth_metric():
    # delta method (Casella & Berger 2002, §5.5.4): for small sigma the metric is normal with
    # variance sum (sigma_k d_k)^2; Monte Carlo agrees within its standard error
    spec = _spec({"sigma": {"radius_nm": 0.05, "period_nm": 0.1}, "samples": 128})
    r = analyse(DESIGN, spec, at_nm=700.0, seed=2, metrics=("u", "docp"), scan=False)
    for m in ("u", "docp"):
        a = r["metrics"][m]["agreement"]
        assert a["first_order"] == "agrees", (m, a)
        assert abs(a["variance_mc"] / a["variance_first_order"] - 1.0) < 0.1


def test_first_order_fails_at_a_resonance():
    # at a sharp lattice resonance (absorption peak near the first Rayleigh anomaly) the
    # metric is curved on the scale of sigma: the first-order variance and mean miss the
    # Monte Carlo ones (delta method validity, Casella & Berger 2002, §5.5.4)
    design = _design(host_index=1.45)
    wl = onp.linspace(615.0, 660.0, 181)
    A = onp.real(onp.asarray(compute_quantities(design.with_wavelengths(wl))["A+1"]))
    peak = float(wl[int(onp.argmax(A))])
    spec = _spec({"sigma": {"radius_nm": 3.0, "period_nm": 2.0}, "samples": 128}, design)
    r = analyse(design, spec, at_nm=peak, seed=2, metrics=("A",), scan=False)
    a = r["metrics"]["A"]["agreement"]
    assert a["first_order"] == "fails"
    assert r["metrics"]["A"]["monte_carlo"]["mean"] < r["metrics"]["A"]["nominal"]  # at a peak


def test_shared_error_moves_every_named_quantity():
    # a bare last component names every quantity ending in it: one shared error
    d = _design(particles=[{"shape": "sphere", "radius_nm": 60, "material": "Si"},
                           {"shape": "sphere", "radius_nm": 50, "material": "Si",
                            "position_nm": [210, 210]}])
    spec = _spec({"sigma": {"radius_nm": 2.0}, "samples": 16}, d)
    (term,) = spec.errors
    assert term.paths == ("particles[0].radius_nm", "particles[1].radius_nm")
    plan = make_plan(spec, d, 1)
    assert onp.array_equal(plan.offsets[:, 0], plan.offsets[:, 1])
    both = resolve_sigma("particles[0].radius_nm+particles[1].radius_nm", d.parameters(), "k")
    assert both == term.paths


@pytest.mark.parametrize("raw, key, words", [
    ({"na": 1.6}, "robust.na", ["allowed", "< 1", "host index"]),
    ({"na": -0.1}, "robust.na", ["allowed >= 0"]),
    ({"band_nm": -2}, "robust.band_nm", ["allowed >= 0", "<= 1000"]),
    ({"statistic": "median"}, "robust.statistic", ["mean, p10, p90, worst"]),
    ({"samples": 0}, "robust.samples", ["[1, 4096]"]),
    ({"band_shape": "box"}, "robust.band_shape", ["gaussian, flat"]),
    ({"sigma": {"radius_nm": -1}}, "robust.sigma.radius_nm", ["allowed >= 0"]),
    ({"sigma": {"radus_nm": 1}}, "robust.sigma.radus_nm", ["unknown design quantity",
                                                         "particles[0].radius_nm"]),
    ({"sigma": {"wavelength_nm": 1}}, "robust.sigma.wavelength_nm", ["band_nm"]),
    ({"sigmas": {}}, "robust.sigmas", ["allowed"]),
])
def test_bad_robust_input_names_the_key_and_the_allowed_range(raw, key, words):
    # the helper rules: InputError naming the key path and the allowed range
    with pytest.raises(InputError) as exc:
        _spec(raw)
    assert exc.value.key == key
    for w in words:
        assert w in exc.value.message, exc.value.message


def test_sigma_text_of_the_command_line():
    # common practice, no source: commas inside brackets do not split
    assert parse_sigma_text("radius_nm=3, lattice.period_nm=2") == {
        "radius_nm": 3.0, "lattice.period_nm": 2.0}
    assert parse_sigma_text("particles[0].radius_nm=1") == {"particles[0].radius_nm": 1.0}
    with pytest.raises(InputError, match="--sigma"):
        parse_sigma_text("radius_nm")
    with pytest.raises(InputError, match="expected a number"):
        parse_sigma_text("radius_nm=abc")
