"""One reverse walk with the rows' cotangents stacked gives autograd's Jacobian.

- On a function that uses every operation with a stacked rule (broadcasting in both
  operands, basic and advanced indexing, gathers of distinct and of repeated positions,
  where, transpose, sums and means over axes, stacks and array literals, matrix products,
  real and imaginary parts, powers and quotients in both arguments) and operations
  without one (einsum, a tuple argument, vector matrix products): the rows equal
  autograd's ``jacobian`` and central differences.
- On goals of every solver kind (multipole sphere on glass, Fourier disks, a chiral film
  with torque rows): the rows equal autograd's one-pass-per-row reverse mode
  (``chiropt.autodiff.value_and_jacobian``) to 1e-12 (in practice bit for bit).
"""

from __future__ import annotations

from pathlib import Path

import autograd.numpy as anp
import numpy as onp
import pytest
from autograd import jacobian

from chiropt.stacked_reverse import stacked_jacobian

CONFIGS = Path(__file__).resolve().parent.parent / "configs"


def _mixed(x):
    """A real (5,) function of x (3,) through complex, broadcast and indexed arrays."""
    a = anp.reshape(anp.arange(12.0), (3, 4)) / 7.0
    z = anp.exp(1j * x[:, None] * a) * (x[0] + 2.0)           # (3, 4) broadcast, complex
    w = anp.where(anp.real(z) > 0.0, z, -2.0 * z)
    t = anp.transpose(w)                                       # (4, 3)
    t2 = anp.transpose(anp.reshape(w, (3, 2, 2)), (2, 0, 1))
    m = anp.matmul(t, w) / (1.0 + x[1] ** 2)                   # (4, 4)
    s = anp.sum(m, axis=0, keepdims=True) + anp.mean(t2, axis=(0, 2))[0]
    picked = m[[0, 2, 2], [1, 1, 3]]                           # advanced, a repeated element
    gathered = m[:, onp.array([3, 0, 2])][1:, :]               # a gather of distinct columns
    repeated = t[onp.array([1, 1, 0]), :]                      # a gather repeating a row
    stacked = anp.stack([anp.sum(picked) + 0.5 * anp.sum(gathered) - anp.sum(repeated ** 2),
                         s[0, 1], t2[1, 2, 0]])
    lit = anp.array([x[0] * x[2], anp.sqrt(x[1] + 3.0)])
    e = anp.einsum("ij,ij->", w, anp.conj(w))
    v = anp.dot(anp.array([1.0, 2.0, 3.0]), x)                 # vector operand
    power = (x[2] + 2.0) ** (x[0] + 1.5) / (x[1] + 4.0)
    return anp.concatenate([anp.real(stacked) - anp.imag(stacked)[::-1] ** 2,
                            anp.array([anp.real(e) * lit[1], v * power - lit[0]])])


def test_rows_equal_autograds_jacobian_and_differences_on_every_rule():
    # common practice, no source: reverse mode against autograd's jacobian and against
    # central differences (Griewank & Walther 2008, §3)
    x = onp.array([0.3, -0.7, 0.45])
    value, J = stacked_jacobian(_mixed, x)
    onp.testing.assert_allclose(value, _mixed(x), rtol=0, atol=0)
    onp.testing.assert_allclose(J, jacobian(_mixed)(x), rtol=1e-13, atol=1e-13)
    h = 1e-6
    fd = onp.stack([(_mixed(x + h * e) - _mixed(x - h * e)) / (2 * h) for e in onp.eye(3)],
                   axis=1)
    onp.testing.assert_allclose(J, fd, rtol=1e-6, atol=1e-7)
    assert J.shape == (5, 3) and onp.all(onp.abs(J).sum(axis=1) > 0)


def test_a_tuple_argument_and_a_constant_output_row():
    # common practice, no source: a primitive taking a tuple (container cotangents that do
    # not stack into one array) and a row that does not depend on x at all
    from autograd.builtins import tuple as agtuple

    def f(x):
        pair = agtuple((x[0] * x[1], anp.sin(x[1])))
        return anp.array([pair[0] + pair[1] ** 2, 4.0, anp.cos(x[0]) * pair[1]])

    x = onp.array([0.8, 1.3])
    value, J = stacked_jacobian(f, x)
    onp.testing.assert_allclose(J, jacobian(f)(x), rtol=1e-14, atol=1e-15)
    onp.testing.assert_array_equal(J[1], 0.0)
    # cos(x0) sin(x1): d/dx0 = -sin(x0) sin(x1)   # common practice, no source
    assert J[2, 0] == pytest.approx(-onp.sin(0.8) * onp.sin(1.3), rel=1e-14)


def test_summed_cotangents_never_write_into_a_shared_one():
    # common practice, no source: a parent's cotangent sums are made in place only where
    # the walk owns them; a cotangent a rule hands to two parents (x + x, a reshape's view,
    # a slice of a slice) and overlapping slices of one array must still give autograd's
    # jacobian, bit for bit, and central differences
    def f(x):
        a = x * anp.array([1.0, 2.0, 3.0, 4.0])
        b = a + a                                   # add: one cotangent for both parents
        c = anp.reshape(b, (2, 2))
        d = c[0] * c[1] + c[:, 0] ** 2              # slices of a view, twice over
        e = b[1:3] + b[0:2] * b[2:4] + b[1:3] ** 3  # overlapping slices of one array
        g = anp.exp(1j * b)[::2] * (1.0 + e)        # complex cotangent into a real slice
        p, q = anp.sin(x[:2]), anp.cos(x[2:])
        t = p * 3.0 + q * 5.0                       # reached after s in the reverse walk:
        s = p + q                                   # s hands one cotangent to p and q,
        return anp.concatenate([anp.real(d) + anp.imag(g), anp.real(g) * e, e[::-1],
                                t, s])              # then t adds to each of them

    x = onp.array([0.3, -0.7, 0.45, 0.2])
    value, J = stacked_jacobian(f, x)
    onp.testing.assert_array_equal(J, jacobian(f)(x))
    h = 1e-6
    fd = onp.stack([(f(x + h * u) - f(x - h * u)) / (2 * h) for u in onp.eye(4)], axis=1)
    onp.testing.assert_allclose(J, fd, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("name", ["quickstart.yaml", "silicon-disks-grid.yaml",
                                  "overnight-torque.yaml"])
def test_goal_rows_equal_one_reverse_pass_per_row(name):
    # common practice, no source: the stacked walk against autograd's reverse passes (one
    # per row, make_vjp's rules) on the physics rows of goals of each solver kind
    from chiropt.autodiff import value_and_jacobian
    from chiropt.goals import GoalProblem, load_goal

    P = GoalProblem(load_goal(str(CONFIGS / name))[0])
    x = 0.35 * P.lower + 0.65 * P.upper

    def rows(xv):
        return P._physics_vector(xv, {})

    v_ref, J_ref = value_and_jacobian(rows, x)
    value, J = stacked_jacobian(rows, x)
    onp.testing.assert_array_equal(value, v_ref)
    scale = onp.max(onp.abs(J_ref), axis=1, keepdims=True)
    onp.testing.assert_allclose(J, J_ref, rtol=1e-12, atol=1e-12 * float(scale.max()))
    assert J.shape == (value.size, x.size) and onp.all(scale > 0)
