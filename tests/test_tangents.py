"""chiropt.lattice.tangents: forward-mode derivatives of each operation against differences."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.special

from chiropt.lattice import tangents as T

RNG = np.random.default_rng(11)


def _composite(a, b, c):
    """A chain of every supported operation; a (3,), b (2, 3), c () in any mix of types."""
    x = T.exp(0.3j * a[None, :] * b) / (1.5 + b * b)
    y = T.sqrt(2.0 + a * a) ** 3 - 1.0 / (2.0 + c)
    z = T.wofz(0.4 * a + 0.7j + 0.1 * c)
    w = T.where(np.array([True, False, False]), 1.0, a - c)
    s = T.stack([y, T.real(z), T.imag(z), w], axis=-1)                 # (3, 4)
    m = T.matmul(s, np.arange(8.0).reshape(4, 2))                     # (3, 2)
    e = T.einsum("ij,jk->ik", x, m)                                   # (2, 2)
    q = T.reshape(T.powers(0.5 * a + 0.2j * c + 0.1, 4), (5, 3))     # (5, 3)
    return T.sum(e * e + (s ** 2.5)[..., :2][:2], axis=0) + T.sum(q, axis=0)[:2]   # (2,)


@pytest.mark.parametrize("which", [0, 1, 2])
def test_every_operation_matches_central_differences(which):
    # common practice, no source: forward-mode tangents of a composite expression against
    # central differences along a random direction of one argument
    args = [RNG.uniform(0.5, 1.5, size=3), RNG.uniform(0.5, 1.5, size=(2, 3)),
            np.array(0.4)]
    direction = RNG.normal(size=args[which].shape)
    seeded = list(args)
    seeded[which] = T.Tangent(args[which], direction[None])
    out = _composite(*seeded)
    h = 1e-6
    plus = list(args)
    minus = list(args)
    plus[which] = args[which] + h * direction
    minus[which] = args[which] - h * direction
    fd = (_composite(*plus) - _composite(*minus)) / (2 * h)
    np.testing.assert_allclose(out.t[0], fd, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(out.v, _composite(*args), rtol=1e-14)


def test_powers_are_the_running_products_of_a_loop():
    # common practice, no source: x^0..x^n as a loop p = p * x makes them (to round-off),
    # with d(x^a) = a x^(a-1) dx; x = 0 has the derivative 1 at a = 1 only
    x = np.array([0.0, 0.7 - 0.2j, -1.3 + 0.5j])
    loop, p = [], np.ones(3, complex)
    for _ in range(6):
        loop.append(p)
        p = p * x
    out = T.powers(T.Tangent(x, np.ones((1, 3))), 5)
    np.testing.assert_allclose(out.v, np.stack(loop, axis=-1), rtol=1e-15, atol=0)
    expected = np.stack([a * x ** (a - 1) if a else np.zeros(3) for a in range(6)], axis=-1)
    expected[0, 1:] = [1.0, 0, 0, 0, 0]
    np.testing.assert_allclose(out.t[0], expected, rtol=1e-14, atol=0)
    np.testing.assert_allclose(T.powers(x, 5), np.stack(loop, axis=-1), rtol=1e-15, atol=0)


def test_plain_inputs_give_plain_numpy():
    # common practice, no source: without tangents the kernel is plain numpy
    a = np.array([0.5, 1.0, 2.0])
    out = _composite(a, np.ones((2, 3)), np.array(0.4))
    assert isinstance(out, np.ndarray)
    np.testing.assert_allclose(T.wofz(a + 1j), scipy.special.wofz(a + 1j), rtol=1e-15)


def test_tangent_shape_is_checked():
    # common practice, no source: a tangent without its direction axis is refused
    with pytest.raises(ValueError):
        T.Tangent(np.ones(3), np.ones(3))
