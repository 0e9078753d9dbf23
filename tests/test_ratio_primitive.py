"""The ratio-function primitive: values equal the traced recurrence, derivative matches
finite differences (real and complex arguments)."""

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import grad

from chiropt.particles._ratio_primitive import ratio_g_stacked


def _traced_recurrence(z_sq, n_hi, n_start):
    # the recurrence written op by op (the form the primitive replaces)
    g = -z_sq / (2.0 * n_start + 3.0)
    out = [None] * (n_hi + 1)
    for n in range(n_start, 1, -1):
        g = -z_sq / (2.0 * n + 1.0 + g)
        if n - 1 <= n_hi:
            out[n - 1] = g
    return anp.stack(out[1:])


@pytest.mark.parametrize("z_sq", [np.array([0.3, 4.0, 25.0]),
                                  np.array([0.3 + 0.01j, 4.0 + 0.5j, 25.0 + 3.0j])])
def test_values_and_derivative(z_sq):
    n_hi, n_start = 4, 40
    np.testing.assert_allclose(ratio_g_stacked(z_sq, n_hi, n_start),
                               _traced_recurrence(z_sq, n_hi, n_start), rtol=1e-15)
    # central finite differences along the real axis (g_n holomorphic in z^2)
    # common practice, no source
    h = 1e-6 * np.abs(z_sq)
    fd = (ratio_g_stacked(z_sq + h, n_hi, n_start)
          - ratio_g_stacked(z_sq - h, n_hi, n_start)) / (2 * h)
    weights = np.arange(1.0, n_hi + 1)[:, None]

    def f(x):
        return anp.sum(anp.real(anp.sum(weights * ratio_g_stacked(z_sq + x, n_hi, n_start),
                                        axis=0)))

    np.testing.assert_allclose(grad(f)(0.0), np.sum(np.real(weights * fd)), rtol=1e-6)
    # the same derivative through the op-by-op recurrence
    def f_ref(x):
        return anp.sum(anp.real(anp.sum(weights * _traced_recurrence(z_sq + x, n_hi, n_start),
                                        axis=0)))

    np.testing.assert_allclose(grad(f)(0.0), grad(f_ref)(0.0), rtol=1e-12)
