"""Bi-objective front tracing on problems with analytic Pareto fronts."""

import numpy as np
import pytest

from chiropt.errors import InputError
from chiropt.search.fronts import Scalarized, epsilon_constraint, weighted_sum
from chiropt.problem import VectorEvaluation


class Schaffer:
    """Schaffer 1985 (problem N.1): f1 = x^2, f2 = (x - 2)^2; front for x in [0, 2]."""

    senses = ("min", "min")
    n_objectives = 2
    n_constraints = 0

    def __init__(self, flip=False):
        self.lower, self.upper = np.array([-5.0]), np.array([5.0])
        self.flip = flip  # maximize -f instead of minimizing f
        if flip:
            self.senses = ("max", "max")

    def evaluate(self, x, need_grad):
        s = -1.0 if self.flip else 1.0
        f = s * np.array([x[0] ** 2, (x[0] - 2) ** 2])
        df = s * np.array([[2 * x[0]], [2 * (x[0] - 2)]]) if need_grad else None
        return VectorEvaluation(f=f, df=df, dg=np.zeros((0, 1)) if need_grad else None)


class ZDT1:
    """Zitzler, Deb & Thiele, Evol. Comput. 8, 173 (2000): front f2 = 1 - sqrt(f1).

    x1 starts at 1e-6 instead of 0: the gradient of f2 is infinite at x1 = 0, and a
    gradient search must not be handed that point (the front is unchanged on [1e-6, 1]).
    """

    senses = ("min", "min")
    n_objectives = 2
    n_constraints = 0

    def __init__(self, n=30):
        self.n = n
        self.lower = np.r_[1e-6, np.zeros(n - 1)]
        self.upper = np.ones(n)

    def evaluate(self, x, need_grad):
        n = self.n
        g = 1 + 9 * np.sum(x[1:]) / (n - 1)
        f1, f2 = x[0], g * (1 - np.sqrt(x[0] / g))  # f2 = g - sqrt(f1 g)
        df = None
        if need_grad:
            dg = np.r_[0.0, np.full(n - 1, 9 / (n - 1))]
            df1 = np.r_[1.0, np.zeros(n - 1)]
            df = np.array([df1, dg - 0.5 * (g * df1 + f1 * dg) / np.sqrt(f1 * g)])
        return VectorEvaluation(f=[f1, f2], df=df, dg=np.zeros((0, n)) if need_grad else None)


class Coinciding:
    """No trade-off: both objectives are optimal at x = 1 (worked by hand)."""

    senses = ("min", "min")
    n_objectives = 2
    n_constraints = 0
    lower, upper = np.array([-3.0]), np.array([3.0])

    def evaluate(self, x, need_grad):
        f = np.array([(x[0] - 1) ** 2, (x[0] - 1) ** 2 + 1])
        df = np.array([[2 * (x[0] - 1)], [2 * (x[0] - 1)]]) if need_grad else None
        return VectorEvaluation(f=f, df=df, dg=np.zeros((0, 1)) if need_grad else None)


class ConstrainedSchaffer(Schaffer):
    """Schaffer's problem with x <= 1.5: the front is cut at f1 = 2.25 (worked by hand)."""

    n_constraints = 1

    def evaluate(self, x, need_grad):
        ev = super().evaluate(x, need_grad)
        return VectorEvaluation(f=ev.f, df=ev.df, g=[x[0] - 1.5],
                                dg=np.array([[1.0]]) if need_grad else None)  # fmt: skip


def schaffer_front_error(F):
    # Schaffer 1985: on the front f2 = (sqrt(f1) - 2)^2 with f1 in [0, 4]
    return np.max(np.abs(F[:, 1] - (np.sqrt(F[:, 0]) - 2) ** 2))


@pytest.mark.parametrize("algorithm", ["SLSQP", "MMA", "COBYLA"])
def test_epsilon_constraint_on_schaffer(algorithm):
    res = epsilon_constraint(Schaffer(), 9, algorithm=algorithm, x0=[4.0], max_evals=500)
    assert [p.label for p in res.points[:2]] == ["anchor-1", "anchor-2"]
    # Schaffer 1985: anchors at x = 0 and x = 2; the lexicographic slack (1e-9 on one
    # objective) moves the other by up to 4 sqrt(1e-9) ~ 1.3e-4
    np.testing.assert_allclose(res.points[0].f, [0, 4], atol=2e-4)
    np.testing.assert_allclose(res.points[1].f, [4, 0], atol=2e-4)
    assert res.front.all() and not res.degenerate
    F = res.front_f
    assert schaffer_front_error(F) < 1e-4
    assert np.all((res.front_x >= -1e-6) & (res.front_x <= 2 + 1e-6))
    # the epsilon bounds are active: h2 equals its bound at every sweep point
    h2 = np.array([(p.f[1] - res.ideal[1]) / (res.nadir[1] - res.ideal[1]) for p in res.points[2:]])
    np.testing.assert_allclose(h2, [p.parameter for p in res.points[2:]], atol=1e-5)


@pytest.mark.parametrize("algorithm", ["SLSQP", "MMA"])
def test_epsilon_constraint_on_zdt1(algorithm):
    res = epsilon_constraint(ZDT1(), 9, algorithm=algorithm, max_evals=3000)
    F = res.front_f
    assert len(F) == 9
    # Zitzler, Deb & Thiele 2000: front f2 = 1 - sqrt(f1)
    assert np.max(np.abs(F[:, 1] - (1 - np.sqrt(F[:, 0])))) < 1e-4
    assert F[:, 0].min() < 1e-5 and F[:, 0].max() > 1 - 1e-5  # anchors span the front


@pytest.mark.parametrize(("problem", "front"), [
    (Schaffer(), lambda F: schaffer_front_error(F)),
    (ZDT1(), lambda F: np.max(np.abs(F[:, 1] - (1 - np.sqrt(F[:, 0]))))),
])  # fmt: skip
def test_weighted_sum_on_convex_fronts(problem, front):
    # Schaffer 1985 and Zitzler, Deb & Thiele 2000: both fronts are convex
    res = weighted_sum(problem, 7, algorithm="SLSQP", max_evals=3000)
    assert front(res.front_f) < 1e-4
    assert len(res.points) == 7


def test_senses_max_gives_the_mirrored_front():
    # Schaffer 1985 with both objectives negated and maximized: the same designs
    res = epsilon_constraint(Schaffer(flip=True), 5, x0=[4.0], max_evals=500)
    assert res.front.all()
    assert schaffer_front_error(-res.front_f) < 1e-4
    np.testing.assert_allclose(res.ideal, [0, 0], atol=1e-8)
    np.testing.assert_allclose(res.nadir, [-4, -4], atol=2e-4)


def test_constraints_cut_the_front():
    # worked by hand: x <= 1.5 limits f1 to 2.25 and f2 to 0.25
    res = epsilon_constraint(ConstrainedSchaffer(), 6, x0=[0.0], max_evals=500)
    assert all(p.feasible for p in res.points)
    F = res.front_f
    assert schaffer_front_error(F) < 1e-4
    assert F[:, 0].max() == pytest.approx(2.25, abs=1e-5)


def test_evaluations_cover_every_search():
    res = epsilon_constraint(Schaffer(), 5, x0=[4.0], max_evals=500)
    ev = res.evaluations
    searches = len(res.points) + 2  # two first-stage anchor searches are listed too
    assert ev["x"].shape[0] == ev["f"].shape[0] == ev["front"].shape[0]
    assert ev["search"].max() == searches - 1
    # common practice, no source: every front evaluation is feasible and on Schaffer's front
    assert ev["front"].any() and np.all(ev["feasible"][ev["front"]])
    assert schaffer_front_error(ev["f"][ev["front"]]) < 1e-8


def test_degenerate_objectives_give_two_anchors():
    res = epsilon_constraint(Coinciding(), 9, x0=[-2.0], max_evals=500)
    assert res.degenerate
    assert len(res.points) == 2
    np.testing.assert_allclose(res.points[0].x, [1.0], atol=1e-5)


def test_scalarized_gradient_matches_finite_differences():
    # common practice, no source: central differences of the bounded scalarization
    s = Scalarized(ZDT1(5), "bounded", 0, 0.4, ideal=[0.1, 0.2], scale=[2.0, 3.0])
    x = np.array([0.3, 0.2, 0.1, 0.4, 0.7])
    ev = s.evaluate(x, True)
    h = 1e-6
    for i in range(x.size):
        e = np.zeros_like(x)
        e[i] = h
        a, b = s.evaluate(x + e, False), s.evaluate(x - e, False)
        assert ev.df[i] == pytest.approx((a.f - b.f) / (2 * h), rel=1e-6, abs=1e-9)
        assert ev.dg[0, i] == pytest.approx((a.g[0] - b.g[0]) / (2 * h), rel=1e-6, abs=1e-9)


@pytest.mark.parametrize(("points", "match"), [(1, "integer >= 2"), (2.5, "integer >= 2")])
def test_bad_point_counts_are_rejected(points, match):
    with pytest.raises(InputError, match=match):
        epsilon_constraint(Schaffer(), points)
