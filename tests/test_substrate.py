"""Arrays on substrates and thin-film stacks (docs/theory.md §10)."""

import numpy as np
import pytest
import tmm

from chiropt.design import design_from_dict
from chiropt.response import evaluate

SIO2 = {"n": 1.46, "k": 0.0}  # illustrative constant index (fused-silica-like)


def _design(*, substrate=None, layers=(), gap=0.0, host=1.0, radius=70.0, material=None,
            wl=(600.0, 700.0, 820.0), polar=0.0, azimuth=0.0, side="host", period=400.0,
            tol=1e-8, particles=None):
    data = {
        "lattice": {"kind": "square", "period_nm": period},
        "particles": particles or [{"radius_nm": radius,
                                    "material": material or {"n": 3.5, "k": 0.0}}],
        "host_index": host,
        "illumination": {"wavelength_nm": list(wl), "polar_deg": polar,
                         "azimuth_deg": azimuth, "side": side},
        "model": {"tolerance": tol},
    }
    if substrate is not None:
        data.update(substrate={"material": substrate}, layers=list(layers), gap_nm=gap)
    return design_from_dict(data)


def _tmm_stack(n_list, d_list, polar_deg, wl):
    """Helicity-averaged R, T of a bare stack from tmm (reference library)."""
    th = np.radians(polar_deg)
    out = []
    for pol in ("s", "p"):
        res = tmm.coh_tmm(pol, n_list, d_list, th, wl)
        out.append((res["R"], res["T"]))
    return np.mean(out, axis=0)


@pytest.mark.parametrize("polar", [0.0, 35.0])
@pytest.mark.parametrize("layers", [[], [{"material": {"n": 2.0, "k": 0.0},
                                          "thickness_nm": 55.0}],
                                    [{"material": {"n": 2.0, "k": 0.05}, "thickness_nm": 80.0},
                                     {"material": {"n": 1.46, "k": 0.0}, "thickness_nm": 30.0}]])
def test_vanishing_particles_reproduce_bare_stack(polar, layers):
    # tmm (reference library): with particles of vanishing size R and T are the stack's.
    wl = (600.0, 750.0)
    res = evaluate(_design(substrate=SIO2, layers=layers, radius=0.02, gap=40.0, wl=wl,
                           polar=polar))
    for i, lam in enumerate(wl):
        n_list = [1.0] + [complex(la["material"]["n"], la["material"]["k"])
                          for la in reversed(layers)] + [1.46]
        d_list = [np.inf] + [la["thickness_nm"] for la in reversed(layers)] + [np.inf]
        R, T = _tmm_stack(n_list, d_list, polar, lam)
        # circular light = equal s and p power: helicity-averaged R, T equal tmm's s/p mean
        assert abs(res.R[i].mean() - R) < 1e-9
        assert abs(res.T[i].mean() - T) < 1e-9


@pytest.mark.parametrize("polar,azimuth", [(0.0, 0.0), (25.0, 30.0)])
def test_index_matched_substrate_equals_homogeneous_host(polar, azimuth):
    # An index-matched substrate is no interface at all (common practice, no source);
    # required to 1e-10.
    kw = dict(host=1.46, wl=(600.0, 700.0, 820.0), polar=polar, azimuth=azimuth)
    a = evaluate(_design(**kw))
    b = evaluate(_design(substrate=SIO2, **kw))
    np.testing.assert_allclose(b.R, a.R, atol=1e-10)
    np.testing.assert_allclose(b.T, a.T, atol=1e-10)


@pytest.mark.parametrize("side", ["host", "substrate"])
@pytest.mark.parametrize("polar,azimuth", [(0.0, 0.0), (20.0, 0.0), (30.0, 45.0)])
@pytest.mark.parametrize("layers,gap", [([], 0.0), ([{"material": {"n": 2.0},
                                                       "thickness_nm": 50.0}], 10.0)])
def test_lossless_energy_conservation_on_substrate(side, polar, azimuth, layers, gap):
    # docs/theory.md §8: lossless particles on a lossless stack, R + T = 1 to 1e-9,
    # normal and oblique incidence, both sides of illumination (diffraction included).
    res = evaluate(_design(substrate=SIO2, layers=layers, gap=gap, side=side, polar=polar,
                           azimuth=azimuth, wl=(560.0, 680.0, 800.0)))
    assert np.all(np.abs(res.R + res.T - 1.0) < 1e-9)
    assert res.R.min() > 1e-4


@pytest.mark.parametrize("material", [{"n": 3.5, "k": 0.0}, {"n": 3.8, "k": 0.2}])
def test_reciprocity_of_transmission(material):
    # Lorentz reciprocity (Landau & Lifshitz, ECM §89; Potton, Rep. Prog. Phys. 67, 717
    # (2004)): the transmission matrix of the reversed path is the transpose, so the
    # polarization-averaged transmitted power fraction is unchanged when source and
    # detector directions are exchanged. Subwavelength period: only the (0,0) order.
    n_sub, polar_h, az = 1.46, 28.0, 20.0
    polar_s = np.degrees(np.arcsin(np.sin(np.radians(polar_h)) / n_sub))
    wl = (780.0, 850.0)
    fwd = evaluate(_design(substrate=SIO2, material=material, wl=wl, polar=polar_h,
                           azimuth=az, period=300.0, radius=60.0))
    rev = evaluate(_design(substrate=SIO2, material=material, wl=wl, polar=polar_s,
                           azimuth=az + 180.0, side="substrate", period=300.0, radius=60.0))
    np.testing.assert_allclose(fwd.T.mean(axis=1), rev.T.mean(axis=1), atol=1e-8)


def test_lossy_particles_on_substrate_absorb_what_dipoles_absorb():
    # docs/theory.md §8 with a stack: A = 1 - R - T equals the dipoles' absorption for a
    # lossless stack (Draine 1988 radiative correction).
    res = evaluate(_design(substrate=SIO2, material="Si", wl=(520.0, 640.0), polar=15.0))
    np.testing.assert_allclose(res.A, res.A_dipoles, atol=1e-8)


def test_reflected_interaction_converges_with_orders_for_touching_spheres():
    # Convergence with the number of orders kept for particles touching the
    # substrate (gap 0): successive tolerances change R by ever less (common practice).
    kw = dict(substrate={"n": 2.0, "k": 0.0}, wl=(650.0, 760.0), radius=80.0, gap=0.0)
    R = [evaluate(_design(tol=t, **kw)).R for t in (1e-3, 1e-5, 1e-7, 1e-10)]
    diffs = [np.abs(R[i + 1] - R[i]).max() for i in range(3)]
    assert diffs[0] > diffs[1] > diffs[2]
    assert diffs[2] < 1e-7
    assert np.abs(R[3] - R[0]).max() > 1e-6  # the tolerance does change what is kept
