"""Conventions locked by tests: helicity sign, Stokes sign, order basis handedness."""

import numpy as np
import pytest

from chiropt.planewaves import cross, helicity_vectors, kz_branch, order_basis


def _plane_wave(polar_deg, azimuth_deg, helicity):
    k = 1.0
    t, f = np.radians(polar_deg), np.radians(azimuth_deg)
    q = np.array([[k * np.sin(t) * np.cos(f), k * np.sin(t) * np.sin(f)]])
    kz = kz_branch(k, np.sum(q ** 2, axis=-1))
    s, pu, pd, ku, kd = order_basis(q, kz, k, f)
    e = helicity_vectors(s, pd)[0, 0 if helicity == 1 else 1]
    zh = cross(kd[0], e)  # Z H = k_hat x E for a plane wave in its medium
    return e, zh


@pytest.mark.parametrize("polar_deg,azimuth_deg", [(0, 0), (0, 37), (30, 0), (55, 120)])
def test_positive_helicity_has_positive_optical_chirality(polar_deg, azimuth_deg):
    # docs/theory.md §2: a +1 plane wave in the host has C > 0, with
    # C ∝ -Im(E* . Z H) (Tang & Cohen, PRL 104, 163901 (2010), e^{-i omega t}).
    for h in (+1, -1):
        e, zh = _plane_wave(polar_deg, azimuth_deg, h)
        chirality = -np.imag(np.vdot(e, zh))
        assert np.sign(chirality) == h
        assert abs(abs(chirality) - 1.0) < 1e-12  # |C| = k U for circular light (docs/theory.md §2)


def test_worked_example_jones_minus_i_travelling_down():
    # docs/theory.md §2 worked check: a wave along -z with Jones vector (1, -i)/sqrt(2)
    # has C > 0 and lab-frame S3 = 2 Im(conj(Ex) Ey) < 0.
    e = np.array([1.0, -1j, 0.0]) / np.sqrt(2)
    zh = cross(np.array([0.0, 0.0, -1.0]) + 0j, e)
    assert -np.imag(np.vdot(e, zh)) > 0
    assert 2 * np.imag(np.conj(e[0]) * e[1]) < 0
    # and our +1 vector at normal incidence is that wave up to a phase
    ours, _ = _plane_wave(0, 0, +1)
    assert abs(abs(np.vdot(ours, e)) - 1.0) < 1e-12


def test_basis_is_right_handed_and_transverse():
    # docs/theory.md §5: (p, s, k_hat) right-handed, p = s x k_hat; bilinear products.
    q = np.array([[0.3, -0.2], [1.7, 0.4]])  # second one evanescent for k = 1
    kz = kz_branch(1.0, np.sum(q ** 2, axis=-1))
    assert np.all(np.imag(kz) >= 0)
    s, pu, pd, ku, kd = order_basis(q, kz, 1.0, 0.0)
    for p, kv in ((pu, ku), (pd, kd)):
        np.testing.assert_allclose(np.sum(p * kv, axis=-1), 0, atol=1e-14)
        np.testing.assert_allclose(np.sum(s * kv, axis=-1), 0, atol=1e-14)
        np.testing.assert_allclose(np.sum(p * p, axis=-1), 1, atol=1e-14)
        np.testing.assert_allclose(cross(p, s), kv, atol=1e-14)
