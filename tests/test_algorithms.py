"""Algorithm registry, the minimize driver, multi-start and executors on known test functions."""

import numpy as np
import pytest

from chiropt.errors import ComputationError, InputError
from chiropt.search.algorithms import ALGORITHMS, algorithm_names, get_algorithm
from chiropt.search.driver import minimize
from chiropt.search.executor import ProcessExecutor, SerialExecutor
from chiropt.search.multistart import multistart, sobol_starts, start_seed
from chiropt.problem import Evaluation
from chiropt.search.problem import FunctionProblem

# ---------------------------------------------------------------------------------------------
# test functions (module level: picklable for the process executor)


def rosenbrock(x):
    return (1 - x[0]) ** 2 + 100 * (x[1] - x[0] ** 2) ** 2


def rosenbrock_grad(x):
    return np.array([-2 * (1 - x[0]) - 400 * x[0] * (x[1] - x[0] ** 2), 200 * (x[1] - x[0] ** 2)])


ROSENBROCK = FunctionProblem(rosenbrock, [-2, -2], [2, 2], gradient=rosenbrock_grad)


def tutorial_f(x):
    return np.sqrt(x[1])


def tutorial_df(x):
    return np.array([0.0, 0.5 / np.sqrt(x[1])])


def tutorial_g(x):  # x2 >= (a x1 + b)^3 with (a, b) = (2, 0) and (-1, 1)
    return np.array([(2 * x[0]) ** 3 - x[1], (1 - x[0]) ** 3 - x[1]])


def tutorial_dg(x):
    return np.array([[6 * (2 * x[0]) ** 2, -1.0], [-3 * (1 - x[0]) ** 2, -1.0]])


TUTORIAL = FunctionProblem(
    tutorial_f, [-2, 1e-6], [2, 10], gradient=tutorial_df, constraints=tutorial_g,
    constraints_jacobian=tutorial_dg, n_constraints=2,
)  # fmt: skip
TUTORIAL_X = np.array([1 / 3, 8 / 27])  # Johnson, NLopt tutorial: optimum (1/3, 8/27)


def branin(x):
    b, c, t = 5.1 / (4 * np.pi**2), 5 / np.pi, 1 / (8 * np.pi)
    return (x[1] - b * x[0] ** 2 + c * x[0] - 6) ** 2 + 10 * (1 - t) * np.cos(x[0]) + 10


BRANIN = FunctionProblem(branin, [-5, 0], [10, 15])
# Dixon & Szegő 1978: global minimum 0.397887 at (-pi, 12.275), (pi, 2.275), (9.42478, 2.475)
BRANIN_F = 0.397887357729738
BRANIN_X = np.array([[-np.pi, 12.275], [np.pi, 2.275], [9.42478, 2.475]])


def quadratic(x):
    return (x[0] - 2) ** 2 + (x[1] - 2) ** 2


def quadratic_g(x):
    return np.array([x[0] + x[1] - 2])


HALF_PLANE = FunctionProblem(quadratic, [-3, -3], [3, 3], constraints=quadratic_g, n_constraints=1)


class FlakyProblem:
    """Rosenbrock that fails (three ways) in the band 0.2 < x[0] < 0.5, a wall on the path."""

    lower = np.array([-2.0, -2.0])
    upper = np.array([2.0, 2.0])
    n_constraints = 0
    n_objectives = 1

    def __init__(self, how):
        self.how = how

    def evaluate(self, x, need_grad):
        if 0.2 < x[0] < 0.5:
            if self.how == "status":
                return Evaluation.failed("model diverged", 0)
            if self.how == "nan":
                return Evaluation(f=np.nan, df=np.zeros(2), dg=np.zeros((0, 2)))
            raise ComputationError("singular coupling matrix")
        return Evaluation(f=rosenbrock(x), df=rosenbrock_grad(x), dg=np.zeros((0, 2)))


class BuggyProblem(FlakyProblem):
    def evaluate(self, x, need_grad):
        raise KeyError("a bug, not a failed evaluation")


# ---------------------------------------------------------------------------------------------
# registry


def test_registry_holds_the_documented_algorithms():
    # values from the brief / NLopt documentation (Johnson, NLopt algorithms page)
    expected = {
        "MMA": ("gradient", True, True), "SLSQP": ("gradient", True, True),
        "L-BFGS": ("gradient", True, False), "COBYLA": ("derivative-free", False, True),
        "BOBYQA": ("derivative-free", False, False), "Subplex": ("derivative-free", False, False),
        "DIRECT-L": ("global", False, False), "CRS2": ("global", False, False),
        "ISRES": ("global", False, True), "ESCH": ("global", False, False),
    }  # fmt: skip
    assert algorithm_names() == list(expected)
    for name, (family, grad, native) in expected.items():
        info = ALGORITHMS[name]
        assert (info.family, info.uses_gradient, info.native_constraints) == (family, grad, native)
        if native:
            assert info.constraint_mode == "native"
        else:
            assert info.constraint_mode == ("penalty" if family == "global" else "auglag")


@pytest.mark.parametrize("spelling", ["mma", "Mma", " MMA ", "l-bfgs", "direct-l", "subplex"])
def test_lookup_is_case_insensitive(spelling):
    assert get_algorithm(spelling).name.lower() == spelling.strip().lower()


@pytest.mark.parametrize(("typo", "closest"), [("cobila", "COBYLA"), ("lbfgs", "L-BFGS")])
def test_unknown_algorithm_names_the_closest(typo, closest):
    with pytest.raises(InputError, match=f"Did you mean '{closest}'") as err:
        get_algorithm(typo)
    assert err.value.key == "search.algorithm"
    assert "valid names: MMA, SLSQP" in err.value.message


# ---------------------------------------------------------------------------------------------
# one driver, every family


@pytest.mark.parametrize("name", ["MMA", "SLSQP", "L-BFGS", "COBYLA", "BOBYQA", "Subplex"])
def test_local_algorithms_find_rosenbrock_minimum(name):
    # Rosenbrock 1960: minimum 0 at (1, 1); classic start (-1.2, 1)
    r = minimize(ROSENBROCK, [-1.2, 1.0], name, max_evals=20000)
    np.testing.assert_allclose(r.x_best, [1.0, 1.0], atol=1e-3)
    assert r.f_best < 1e-6
    assert r.feasible
    assert r.n_evals == len(r.history) <= 20000


@pytest.mark.parametrize("name", ["MMA", "SLSQP", "COBYLA", "L-BFGS", "BOBYQA", "Subplex"])
def test_local_algorithms_solve_nlopt_tutorial_problem(name):
    # Johnson, NLopt tutorial: min sqrt(x2) s.t. x2 >= (2 x1)^3, x2 >= (1 - x1)^3
    # -> (1/3, 8/27), f = sqrt(8/27); native constraints or the augmented Lagrangian
    r = minimize(TUTORIAL, [1.234, 5.678], name, max_evals=5000, xtol_rel=1e-10)
    assert r.feasible
    np.testing.assert_allclose(r.x_best, TUTORIAL_X, atol=1e-5)
    assert r.f_best == pytest.approx(np.sqrt(8 / 27), abs=1e-5)


def test_isres_native_constraints_on_tutorial_problem():
    # Johnson, NLopt tutorial optimum; stochastic global search with a modest budget
    r = minimize(TUTORIAL, [1.234, 5.678], "ISRES", max_evals=3000, seed=1,
                 xtol_rel=0, ftol_rel=0)  # fmt: skip
    assert r.feasible
    assert r.f_best == pytest.approx(np.sqrt(8 / 27), abs=0.03)


@pytest.mark.parametrize("name", ["DIRECT-L", "CRS2", "ISRES", "ESCH"])
def test_global_algorithms_find_a_branin_minimum(name):
    # Dixon & Szegő 1978: three global minima of value 0.397887; budget 2000 evaluations
    r = minimize(BRANIN, [2.5, 7.5], name, max_evals=2000, seed=3, xtol_rel=0, ftol_rel=0)
    assert r.f_best == pytest.approx(BRANIN_F, abs=0.03)
    assert np.min(np.linalg.norm(BRANIN_X - r.x_best, axis=1)) < 0.2


@pytest.mark.parametrize("name", ["DIRECT-L", "CRS2"])
def test_global_penalty_handles_a_constraint(name):
    # worked by hand: min (x-2)^2 + (y-2)^2 s.t. x + y <= 2 -> (1, 1), f = 2 (exact L1 penalty)
    r = minimize(HALF_PLANE, [0.0, 0.0], name, max_evals=2000, seed=0, xtol_rel=0, ftol_rel=0)
    assert r.feasible
    np.testing.assert_allclose(r.x_best, [1.0, 1.0], atol=0.01)


@pytest.mark.parametrize("name", ["CRS2", "ISRES", "ESCH"])
def test_stochastic_search_is_reproducible_with_seed(name):
    a = minimize(BRANIN, [2.5, 7.5], name, max_evals=300, seed=11)
    b = minimize(BRANIN, [2.5, 7.5], name, max_evals=300, seed=11)
    assert [t.x.tobytes() for t in a.history] == [t.x.tobytes() for t in b.history]


@pytest.mark.parametrize("how", ["status", "nan", "raise"])
@pytest.mark.parametrize("name", ["SLSQP", "MMA", "BOBYQA", "COBYLA", "Subplex"])
def test_failed_evaluations_do_not_stop_the_search(how, name):
    # worked by hand: with the band failing, the best reachable point from (-1.2, 1) is the
    # band's edge on the parabola, (0.2, 0.04) with f = (1 - 0.2)^2 = 0.64
    r = minimize(FlakyProblem(how), [-1.2, 1.0], name, max_evals=20000)
    failed = [i for i, t in enumerate(r.history) if t.evaluation.status == "failed"]
    assert failed and failed[0] < r.n_evals - 10  # the search went on after failing
    assert all(r.history[i].evaluation.reason for i in failed)
    assert r.n_failed == len(failed)
    assert r.feasible and r.history[r.i_best].evaluation.status == "ok"
    assert r.x_best[0] == pytest.approx(0.2, abs=1e-3)
    assert r.f_best == pytest.approx(0.64, abs=0.02)


@pytest.mark.parametrize("name", ["COBYLA", "MMA", "CRS2", "DIRECT-L", "L-BFGS"])
def test_other_exceptions_propagate(name):
    with pytest.raises(KeyError, match="a bug"):
        minimize(BuggyProblem("status"), [0.0, 0.0], name)


@pytest.mark.parametrize("name", ["COBYLA", "ESCH", "L-BFGS"])
def test_budget_is_a_hard_cap(name):
    r = minimize(ROSENBROCK, [-1.2, 1.0], name, max_evals=17, xtol_rel=0, ftol_rel=0)
    assert r.n_evals <= 17
    assert r.nlopt_result == 5


@pytest.mark.parametrize(
    ("x0", "algorithm", "problem", "match"),
    [
        ([3.0, 0.0], "COBYLA", ROSENBROCK, "outside the bounds"),
        ([0.0], "COBYLA", ROSENBROCK, "start point has 1 entries"),
        ([0.0, 0.0], "DIRECT-L", FunctionProblem(rosenbrock, [-np.inf, 0], [1, 1]), "finite"),
    ],
)
def test_bad_input_is_rejected(x0, algorithm, problem, match):
    with pytest.raises(InputError, match=match):
        minimize(problem, x0, algorithm)


def test_swapped_bounds_are_explained():
    with pytest.raises(InputError, match="swap"):
        FunctionProblem(rosenbrock, [1, 1], [0, 2])


# ---------------------------------------------------------------------------------------------
# multi-start and executors


def test_sobol_starts_are_deterministic_nested_and_inside():
    a = sobol_starts([-5, 0], [10, 15], 5, seed=4)
    b = sobol_starts([-5, 0], [10, 15], 16, seed=4)
    c = sobol_starts([-5, 0], [10, 15], 5, seed=5)
    np.testing.assert_array_equal(a, b[:5])
    assert not np.array_equal(a, c)
    assert np.all((b >= [-5, 0]) & (b <= [10, 15]))


def test_start_seeds_differ_per_start():
    seeds = {start_seed(7, k) for k in range(50)}
    assert len(seeds) == 50 and all(0 <= s < 2**31 for s in seeds)


def test_multistart_finds_branin_global_minimum():
    # Dixon & Szegő 1978: global minimum value 0.397887
    res = multistart(BRANIN, "BOBYQA", 8, seed=0, max_evals=400)
    assert len(res.results) == 8
    assert res.f_best == pytest.approx(BRANIN_F, abs=1e-7)
    assert res.n_evals == sum(r.n_evals for r in res.results)


def test_process_executor_gives_the_serial_answers_in_order():
    serial = multistart(BRANIN, "CRS2", 4, seed=2, executor=SerialExecutor(), max_evals=150)
    with ProcessExecutor(2) as ex:
        parallel = multistart(BRANIN, "CRS2", 4, seed=2, executor=ex, max_evals=150)
        assert ex.map(abs, [-3, 2, -1]) == [3, 2, 1]
    for a, b in zip(serial.results, parallel.results, strict=True):
        assert a.x_best.tobytes() == b.x_best.tobytes()
        assert a.n_evals == b.n_evals
    assert serial.best == parallel.best


def test_serial_submit_returns_a_future_with_the_exception():
    fut = SerialExecutor().submit(int, "not a number")
    assert isinstance(fut.exception(), ValueError)


def test_process_executor_needs_a_positive_worker_count():
    with pytest.raises(InputError, match="integer >= 1"):
        ProcessExecutor(0)
