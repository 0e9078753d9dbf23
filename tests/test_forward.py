"""The far field of sphere arrays: energy, limits, anomalies (docs/theory.md §8)."""

import warnings

import miepython
import numpy as np
import pytest

from chiropt.design import design_from_dict
from chiropt.response import evaluate
from chiropt.solve import RayleighAnomalyWarning


def _design(lattice, radius=70.0, material=None, wl=(600.0, 700.0, 800.0), polar=0.0,
            azimuth=0.0, host=1.0, particles=None, **extra):
    data = {
        "lattice": lattice,
        "particles": particles or [{"radius_nm": radius,
                                    "material": material or {"n": 3.5, "k": 0.0}}],
        "host_index": host,
        "illumination": {"wavelength_nm": list(wl), "polar_deg": polar,
                         "azimuth_deg": azimuth},
    }
    data.update(extra)
    return design_from_dict(data)


SQUARE = {"kind": "square", "period_nm": 400}
HEX = {"kind": "hexagonal", "period_nm": 420}


@pytest.mark.parametrize("lattice", [SQUARE, HEX, {"kind": "rectangular", "period_nm": [400, 330]},
                                     {"kind": "oblique", "period_nm": [400, 380], "angle_deg": 70}])
@pytest.mark.parametrize("polar,azimuth", [(0, 0), (20, 0), (25, 33)])
def test_lossless_energy_conservation_below_diffraction(lattice, polar, azimuth):
    # docs/theory.md §8: R + T = 1 to 1e-10 for lossless particles below the diffraction
    # threshold; holds only if Im(lattice sum) cancels the radiative term
    # (García de Abajo, RMP 79, 1267 (2007)).
    r = _design(lattice, wl=(820.0, 900.0, 1000.0), polar=polar, azimuth=azimuth)
    res = evaluate(r)
    assert np.all(np.abs(res.R + res.T - 1.0) < 1e-10)
    assert res.R.max() > 1e-3  # the particles do scatter


def test_lossless_energy_conservation_with_diffraction():
    # Above the threshold several orders propagate; energy is still conserved
    # (docs/theory.md §8 identities hold above threshold too).
    res = evaluate(_design(SQUARE, wl=(450.0, 500.0, 560.0), polar=10))
    assert np.all(np.abs(res.R + res.T - 1.0) < 1e-10)


def test_two_particles_per_cell_energy():
    # docs/theory.md §8, several particles per cell (common practice, no source).
    parts = [{"radius_nm": 60, "material": {"n": 3.5}, "position_nm": [0, 0]},
             {"radius_nm": 45, "material": {"n": 2.4}, "position_nm": [230, 170]}]
    res = evaluate(_design({"kind": "square", "period_nm": 460}, particles=parts,
                           wl=(700.0, 800.0, 950.0), polar=15, azimuth=20))
    assert np.all(np.abs(res.R + res.T - 1.0) < 1e-10)


@pytest.mark.parametrize("material", [{"n": 3.5, "k": 0.1}, "Si", "Ag", "Au"])
def test_lossy_absorption_equals_dipole_losses(material):
    # docs/theory.md §8: with loss, 1 - R - T equals the power absorbed by the dipoles
    # (Draine, ApJ 333, 848 (1988) radiative correction; to 1e-8).
    res = evaluate(_design(HEX, radius=60, material=material, wl=(550.0, 650.0, 760.0),
                           polar=12))
    np.testing.assert_allclose(res.A, res.A_dipoles, atol=1e-8)
    assert res.A.min() > 0


def test_vanishing_particles_transmit_everything():
    # docs/theory.md §8 limits: radius -> 0 gives R -> 0, T -> 1 (R ~ r^6).
    res = evaluate(_design(SQUARE, radius=0.5, wl=(600.0, 700.0)))
    assert np.all(res.R < 1e-12)
    assert np.all(np.abs(res.T - 1) < 1e-6)


@pytest.mark.parametrize("m,x", [(3.5, 0.8612), (3.5, 1.1454), (1.5 + 0.1j, 0.7)])
def test_sparse_lattice_approaches_isolated_sphere(m, x):
    # Optical theorem: for a sparse lattice, A (1 - t00) -> sigma_ext / 2 per
    # helicity, i.e. the forward (0,0) amplitude gives the isolated sphere's extinction.
    # Reference: miepython (reference library) a1, b1 -> dipole extinction
    # sigma_ext = (6 pi / k^2) Re(a1 + b1) (Bohren & Huffman eq. 4.62 truncated at n = 1).
    wl = 700.0
    k = 2 * np.pi / wl
    radius = x / k
    # miepython takes m = n - i k (flip the sign of the imaginary part)
    a, b = miepython.an_bn(np.conj(m), x, 1)
    sigma = 6 * np.pi / k ** 2 * np.real(a[0] + b[0])
    errs = []
    for period in (40.37 * wl, 80.61 * wl):  # away from the anomalies lambda = a/m
        des = _design({"kind": "square", "period_nm": period}, radius=radius,
                      material={"n": float(np.real(m)), "k": float(np.imag(m))}, wl=(wl,))
        res = evaluate(des, keep_solution=True)
        sol = res.solution
        e_inc = sol.incident_vector()[0, 0]
        t00 = np.vdot(e_inc, sol.exit_vectors(1)[0, 0, 0])  # forward zeroth-order amplitude
        sigma_lat = 2 * period ** 2 * np.real(1 - t00)
        errs.append(abs(sigma_lat / sigma - 1))
    # the lattice correction decays like 1/period with an oscillating phase
    assert errs[0] < 0.03 and errs[1] < 0.01


def test_rayleigh_anomaly_warns_never_nan():
    # docs/theory.md §5: at the Rayleigh anomaly (lambda = period x host index at normal
    # incidence; common practice) a warning, never NaN.
    period, host = 400.0, 1.33
    des = _design({"kind": "square", "period_nm": period}, host=host,
                  wl=(period * host, 560.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = evaluate(des)
    assert any("Rayleigh" in w for w in res.warnings)
    assert np.all(np.isfinite(res.R)) and np.all(np.isfinite(res.T))
    with pytest.warns(RayleighAnomalyWarning):
        from chiropt.solve import solve
        from chiropt.structure import build_structure
        solve(build_structure(des))


def test_achiral_normal_incidence_helicity_symmetric():
    # A mirror-symmetric array at normal incidence responds equally to both
    # helicities (common practice, no source).
    res = evaluate(_design(SQUARE, material="Si", wl=(600.0, 700.0, 800.0)))
    np.testing.assert_allclose(res.R[:, 0], res.R[:, 1], atol=1e-12)
    np.testing.assert_allclose(res.T[:, 0], res.T[:, 1], atol=1e-12)
