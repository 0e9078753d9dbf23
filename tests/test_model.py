"""The model switch: dipoles (lmax 1) vs multipoles (lmax >= 2), validity notes."""

import numpy as np
import pytest

from chiropt.design import design_from_dict
from chiropt.metrics import region_metrics
from chiropt.model import run_model, validity
from chiropt.multipole.solve import solve_multipole
from chiropt.multipole.tmatrix import design_particles, stack_tmatrices
from chiropt.response import evaluate
from chiropt.solve import solve
from chiropt.structure import build_structure


def _design(lmax=1, radius=90.0, region=None, substrate=True):
    data = {"lattice": {"kind": "square", "period_nm": 450},
            "particles": [{"radius_nm": radius, "material": {"n": 3.6, "k": 0.0}}],
            "illumination": {"wavelength_nm": [640.0, 720.0, 820.0], "polar_deg": 12.0},
            "model": {"lmax": lmax}}
    if substrate:
        data["substrate"] = {"material": {"n": 1.46}}
    if region:
        data["region"] = region
    return design_from_dict(data)


@pytest.mark.parametrize("region", [{"kind": "plane", "height_nm": 8.0},
                                    {"kind": "slab", "from_nm": 3.0, "thickness_nm": 25.0}])
def test_multipole_near_field_at_lmax1_equals_dipole_near_field(region):
    # The multipole solver's own order amplitudes at lmax = 1 must give the dipole
    # model's region metrics. Far-field quantities agree to 1e-10
    # (tests/test_multipole_solve.py); the near-field sums over hundreds of evanescent
    # orders carry both models' lattice-sum tolerances, so 1e-8 here.
    d = _design(region=region)
    st = build_structure(d)
    dip = region_metrics(solve(st, warn=False), d.region, tol=1e-6, area_grid=0)
    from chiropt.fields import region_g_max, region_span

    g_max = region_g_max(st, region_span(st, d.region)[0], tol=1e-6)
    T = stack_tmatrices(design_particles(d), st.k, 1)
    mp = region_metrics(solve_multipole(st, T, 1, warn=False, g_max=g_max), d.region,
                        tol=1e-6, area_grid=0)
    for key in ("u", "c", "g", "background"):
        np.testing.assert_allclose(mp[key], dip[key], rtol=1e-8, atol=1e-10)
    for key in ("docp", "s0"):
        np.testing.assert_allclose(mp[key]["+1"], dip[key]["+1"], rtol=1e-8, atol=1e-10)


@pytest.mark.parametrize("lmax", [2, 3])
def test_lossless_energy_through_evaluate(lmax):
    # docs/theory.md §8 energy check through the public entry point at lmax > 1.
    res = evaluate(_design(lmax=lmax))
    assert res.lmax == lmax
    np.testing.assert_allclose(res.R + res.T, 1.0, atol=1e-9)


def test_auto_lmax_grows_with_size():
    # Mie coefficients of order l fall like x^(2l+1) (Bohren & Huffman §4.4): bigger
    # spheres need more orders.
    small = run_model(_design(lmax="auto", radius=40.0, substrate=False))
    big = run_model(_design(lmax="auto", radius=140.0, substrate=False))
    assert 1 <= small.lmax < big.lmax


def test_validity_note_flags_dipole_model_for_large_silicon_spheres():
    # docs/theory.md §15: the dipole model is off by 0.03-0.5 on R, T for x = k r > ~1.1;
    # a 140 nm n = 3.6 sphere at 640 nm has x = 1.37.
    res = evaluate(_design(lmax=1, radius=140.0, substrate=False), with_validity=True)
    assert res.validity["lmax_check"] == 2
    assert res.validity["worst"] > 0.01
    assert any("may be too low" in w for w in res.warnings)
    small = validity(_design(lmax=1, radius=30.0, substrate=False))
    assert small["worst"] < 1e-3
