"""Exact gradients of far-field quantities through the whole forward model (autograd).

Reference: central finite differences (common practice, no source), with a step-size study.
"""

import autograd.numpy as anp
import numpy as np
import pytest

from chiropt.design import design_from_dict
from chiropt.sensitivity import (
    FAR_FIELD,
    compute_quantities,
    quantity_names,
    spectrum_sensitivities,
    value_and_gradient,
)


def _substrate_design(rng):
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": float(rng.uniform(380, 480))},
        "particles": [{"radius_nm": float(rng.uniform(55, 85)), "material": "Si"}],
        "substrate": {"material": "SiO2"},
        "layers": [{"material": "Si3N4", "thickness_nm": float(rng.uniform(20, 80))}],
        "gap_nm": float(rng.uniform(2, 20)),
        "region": {"kind": "plane", "height_nm": float(rng.uniform(5, 20))},
        "illumination": {"wavelength_nm": [float(rng.uniform(600, 800))],
                         "polar_deg": float(rng.uniform(5, 30)),
                         "azimuth_deg": float(rng.uniform(0, 40))},
    })


def _free_design(rng):
    return design_from_dict({
        "lattice": {"kind": "oblique", "period_nm": [float(rng.uniform(420, 480)),
                                                     float(rng.uniform(380, 420))],
                    "angle_deg": float(rng.uniform(65, 80))},
        "particles": [
            {"radius_nm": float(rng.uniform(50, 70)), "material": {"n": 3.5, "k": 0.05},
             "position_nm": [0.0, 0.0]},
            {"radius_nm": float(rng.uniform(45, 60)), "core_radius_nm": 30.0,
             "core_material": {"n": 2.4, "k": 0.01}, "material": {"n": 1.5, "k": 0.002},
             "position_nm": [float(rng.uniform(200, 230)), float(rng.uniform(160, 190))]},
        ],
        "host_index": float(rng.uniform(1.0, 1.4)),
        "region": {"kind": "slab", "from_nm": float(rng.uniform(2, 10)),
                   "thickness_nm": float(rng.uniform(10, 30))},
        "illumination": {"wavelength_nm": [float(rng.uniform(700, 850))],
                         "polar_deg": float(rng.uniform(5, 25)),
                         "azimuth_deg": float(rng.uniform(0, 40))},
    })


def _near_mie(_rng):
    # n = 3.5 sphere at its magnetic dipole resonance x = 0.8612 (docs/theory.md §3)
    wl = 700.0
    return design_from_dict({
        "lattice": {"kind": "hexagonal", "period_nm": 420.0},
        "particles": [{"radius_nm": 0.8612 * wl / (2 * np.pi), "material": {"n": 3.5, "k": 0.002}}],
        "illumination": {"wavelength_nm": [wl], "polar_deg": 8.0},
    })


def _near_rayleigh(_rng):
    # 0.2 % to the red of the (1,0)/(0,1) substrate anomaly lambda = n_sub a (common practice)
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": 400.0},
        "particles": [{"radius_nm": 60.0, "material": {"n": 3.0, "k": 0.02}}],
        "substrate": {"material": {"n": 1.46}},
        "region": {"kind": "plane", "height_nm": 5.0},
        "illumination": {"wavelength_nm": [1.46 * 400.0 * 1.002], "polar_deg": 0.0},
    })


def _multipole_normal(rng):
    # multipole model at normal incidence on a square lattice (degenerate (1,0)/(0,1)
    # orders, plain zero Bloch vector): the coarse primitives' hardest symmetric point
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": float(rng.uniform(400, 440))},
        "particles": [{"radius_nm": float(rng.uniform(75, 90)), "material": "Si"}],
        "substrate": {"material": "SiO2"}, "gap_nm": 0,
        "region": {"kind": "plane", "height_nm": 10.0},
        "illumination": {"wavelength_nm": [float(rng.uniform(660, 720))], "polar_deg": 0.0},
        "model": {"lmax": 3},
    })


def _multipole_near_rayleigh(_rng):
    # multipole model 0.2 % to the red of the (1,0) substrate anomaly of a hexagonal lattice
    # (lambda = n_sub a sqrt(3)/2 for its shortest reciprocal vector), oblique incidence
    a = 420.0
    return design_from_dict({
        "lattice": {"kind": "hexagonal", "period_nm": a},
        "particles": [{"radius_nm": 70.0, "material": {"n": 3.2, "k": 0.02}}],
        "substrate": {"material": {"n": 1.46}}, "gap_nm": 5,
        "region": {"kind": "slab", "from_nm": 5.0, "thickness_nm": 15.0},
        "illumination": {"wavelength_nm": [1.46 * a * np.sqrt(3) / 2 * 1.002],
                         "polar_deg": 3.0, "azimuth_deg": 10.0},
        "model": {"lmax": 2},
    })


BUILDERS = {"substrate": _substrate_design, "free-oblique-coreshell": _free_design,
            "near-mie": _near_mie, "near-rayleigh": _near_rayleigh,
            "multipole-normal": _multipole_normal,
            "multipole-near-rayleigh": _multipole_near_rayleigh}


def _objective(weights, names=FAR_FIELD):
    def f(q):
        return sum(w * anp.sum(q[name]) for name, w in zip(names, weights, strict=True))
    return f


def _fd(design, objective, path, value, h):
    def at(v):
        return objective(compute_quantities(design, {path: v}))
    return (at(value + h) - at(value - h)) / (2 * h)


STEP = {"illumination.wavelength_nm": 1e-3}


@pytest.mark.parametrize("case", list(BUILDERS))
@pytest.mark.parametrize("seed", [1, 2])
def test_every_variable_against_finite_differences(case, seed):
    rng = np.random.default_rng(seed)
    design = BUILDERS[case](rng)
    names = quantity_names(design)  # far field, and near-field metrics with a region
    weights = rng.normal(size=len(names))
    objective = _objective(weights, names)
    paths = list(design.parameters())
    sens = value_and_gradient(design, objective, paths)
    assert not sens.flagged
    params = design.parameters()
    for path in paths:
        v0 = np.asarray(params[path], float)
        ad = float(np.sum(sens.gradient[path]))
        if v0.ndim:  # array path: perturb all wavelengths together
            fds = [_fd(design, objective, path, v0, h * np.ones_like(v0)) for h in (1e-2, 1e-3)]
        else:
            scale = max(abs(float(v0)), 1.0)
            fds = [_fd(design, objective, path, float(v0), h * scale) for h in (1e-4, 1e-5, 1e-6)]
        errors = [abs(fd - ad) for fd in fds]
        tol = 1e-6 * max(abs(ad), 1e-3 * max(abs(sens.value), 1e-12))
        # step-size study: the better of the two steps meets 1e-6 relative
        assert min(errors) < tol, (path, ad, fds)


def test_spectrum_sensitivities_match_finite_differences():
    rng = np.random.default_rng(7)
    design = _substrate_design(rng).with_wavelengths([620.0, 700.0, 780.0])
    paths = ["particles[0].radius_nm", "illumination.wavelength_nm", "layers[0].thickness_nm"]
    jac = spectrum_sensitivities(design, paths)
    params = design.parameters()
    for path in paths:
        v0 = np.asarray(params[path], float)
        h = 1e-5 * (np.ones_like(v0) if v0.ndim else max(abs(float(v0)), 1.0))
        up = compute_quantities(design, {path: v0 + h})
        dn = compute_quantities(design, {path: v0 - h})
        for name in FAR_FIELD:
            fd = (up[name] - dn[name]) / (2 * float(np.max(h)))
            np.testing.assert_allclose(jac[name][path], fd, rtol=1e-5, atol=1e-9)


def test_gradient_on_rayleigh_anomaly_is_flagged_not_nan():
    design = design_from_dict({
        "lattice": {"kind": "square", "period_nm": 400.0},
        "particles": [{"radius_nm": 60.0, "material": {"n": 3.0}}],
        "illumination": {"wavelength_nm": [400.0]},
    })
    sens = value_and_gradient(design, _objective(np.ones(6)), ["particles[0].radius_nm"])
    assert sens.flagged
    assert np.isfinite(sens.value)
    assert all(np.all(np.isfinite(v)) for v in sens.gradient.values())
