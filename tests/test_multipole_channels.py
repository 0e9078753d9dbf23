"""(s, p) channel projections of the order plane waves against the 3-vector forms."""

import numpy as np
import pytest

from chiropt.sphericalwaves import (
    channel_modes,
    down_parity,
    emission_vectors,
    order_projections,
    planewave_coefficients,
)
from chiropt.planewaves import order_basis


def _orders():
    # propagating and evanescent in-plane wavevectors, including q = 0 (k = 1)
    rng = np.random.default_rng(3)
    q = np.concatenate([np.zeros((1, 2)), rng.normal(size=(12, 2)) * 2.5], axis=0)
    qq = np.sum(q ** 2, axis=-1)
    kz = np.sqrt(1.0 - qq + 0j)
    kz = np.where(np.imag(kz) < 0, -kz, kz)
    return order_basis(q, kz, np.ones_like(qq), 0.3)


@pytest.mark.parametrize("lmax", [1, 2, 4])
@pytest.mark.parametrize("direction", [0, 1])
def test_channel_modes_equal_vector_forms(lmax, direction):
    # identity of sphericalwaves.channel_modes (k x s = -p, k x p = s; parity of Y_lm,
    # DLMF 14.7.17):
    # projections of emission_vectors / planewave_coefficients on s and p
    s, pu, pd, ku, kd = _orders()
    P = order_projections(ku, s, pu, lmax)
    u, p = (ku, pu) if direction == 0 else (kd, pd)
    if direction == 1:
        P = P * down_parity(lmax)
    emit, recv = channel_modes(P, "emit", lmax), channel_modes(P, "receive", lmax)
    ev = emission_vectors(u, lmax)
    for c, v in enumerate((s + 0j, p)):
        ref_e = np.einsum("gud,gd->gu", ev, v)
        ref_r = planewave_coefficients(u, v, lmax)
        assert np.allclose(emit[:, c], ref_e, rtol=0, atol=1e-12 * np.abs(ref_e).max())
        assert np.allclose(recv[:, c], ref_r, rtol=0, atol=1e-12 * np.abs(ref_r).max())
