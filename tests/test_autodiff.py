"""chiropt.autodiff: the faster indexing and broadcasting rules give autograd's results."""

from __future__ import annotations

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import grad
from autograd.numpy.numpy_vjps import untake
from autograd.core import vspace

import chiropt.autodiff as ad

RNG = np.random.default_rng(3)

CASES = [  # (cotangent shape, operand shape, broadcast_idx)
    ((4, 3), (4, 3), 0), ((1, 3), (1, 3), 0), ((5, 4, 3), (4, 3), 0), ((5, 4, 3), (1, 3), 0),
    ((2, 1, 6), (1, 1, 6), 0), ((4, 3, 2), (4, 1, 1), 0), ((3, 4, 5), (3,), -1),
    ((3, 4, 5, 2), (3, 2), 1), ((), (), 0),
]


@pytest.mark.parametrize("complex_x", [False, True])
@pytest.mark.parametrize("complex_target", [False, True])
@pytest.mark.parametrize("shape_x, shape_t, idx", CASES)
def test_unbroadcast_equals_autograds_rule(shape_x, shape_t, idx, complex_x, complex_target):
    # autograd (reference library): its own unbroadcast, kept as AUTOGRAD_UNBROADCAST
    x = RNG.normal(size=shape_x) + (1j * RNG.normal(size=shape_x) if complex_x else 0)
    target = np.zeros(shape_t, dtype=complex if complex_target else float)
    meta = anp.metadata(target)
    ours = ad.unbroadcast(x, meta, idx)
    ref = ad.AUTOGRAD_UNBROADCAST(x, meta, idx)
    assert np.shape(ours) == np.shape(ref)
    assert np.iscomplexobj(ours) == np.iscomplexobj(ref)
    np.testing.assert_allclose(ours, ref, rtol=1e-14, atol=1e-14)


@pytest.mark.parametrize("idx", [(slice(1, 3), 0), (Ellipsis, None, 2), 1, (slice(None), -1),
                                 np.int64(0), (Ellipsis, slice(None, None, 2))])
def test_basic_index_scatter_equals_add_at(idx):
    # autograd (reference library): its untake (numpy.add.at) on the same index
    A = RNG.normal(size=(4, 5, 3))
    g = RNG.normal(size=np.shape(A[idx]))
    vs = vspace(A)
    ours = ad.untake_basic(g, idx, vs).mut_add(np.zeros_like(A))
    ref = untake(g, idx, vs).mut_add(np.zeros_like(A))
    np.testing.assert_array_equal(ours, ref)
    assert ad._is_basic(idx)


def test_repeated_advanced_index_still_accumulates():
    # common practice, no source: d/dx sum(x[[0, 0, 2]]) = (2, 0, 1); repeats need add.at
    assert not ad._is_basic(([0, 0, 2],))
    g = grad(lambda x: anp.sum(x[np.array([0, 0, 2])] ** 2))(np.array([1.0, 2.0, 3.0]))
    np.testing.assert_array_equal(g, [4.0, 0.0, 6.0])


def test_second_derivative_through_a_slice_and_a_broadcast():
    # common practice, no source: f(x) = sum_jk (x_k w_j)^3 over k >= 1 has the diagonal
    # Hessian 6 x_k sum_j w_j^3; its product with ones, by reverse-of-reverse
    w = RNG.normal(size=(3, 1))
    x0 = RNG.normal(size=(4,))

    def f(x):
        return anp.sum((x[1:][None, :] * w) ** 3)

    hv = grad(lambda x: anp.sum(grad(f)(x) * np.ones(4)))(x0)
    expected = np.concatenate([[0.0], 6 * x0[1:] * np.sum(w ** 3)])
    np.testing.assert_allclose(hv, expected, rtol=1e-13)
