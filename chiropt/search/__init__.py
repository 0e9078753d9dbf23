"""Search layer: model-independent drivers over the one ``Problem`` hook (chiropt.problem).

Owns: the algorithm registry (``algorithms``), the single nlopt driver (``driver.minimize``),
multi-start (``multistart``), bi-objective fronts (``fronts``), Pareto tools (``pareto``) and
executors (``executor``), ``FunctionProblem`` and bound checks (``problem``).

Must not import: physics modules, store, report, cli. The store plugs in through the ``wrap``
hook of ``multistart`` and the front tracers.
"""

from chiropt.problem import Evaluation, Problem, VectorEvaluation, VectorProblem
from chiropt.search.algorithms import ALGORITHMS, AlgorithmInfo, algorithm_names, get_algorithm
from chiropt.search.driver import SearchResult, Trial, minimize
from chiropt.search.executor import Executor, ProcessExecutor, SerialExecutor
from chiropt.search.fronts import FrontPoint, FrontResult, epsilon_constraint, weighted_sum
from chiropt.search.multistart import MultistartResult, multistart, sobol_starts
from chiropt.search.pareto import hypervolume, non_dominated
from chiropt.search.problem import FunctionProblem

__all__ = [
    "ALGORITHMS", "AlgorithmInfo", "Evaluation", "Executor", "FrontPoint", "FrontResult",
    "FunctionProblem", "MultistartResult", "Problem", "ProcessExecutor", "SearchResult",
    "SerialExecutor", "Trial", "VectorEvaluation", "VectorProblem", "algorithm_names",
    "epsilon_constraint", "get_algorithm", "hypervolume", "minimize", "multistart",
    "non_dominated", "sobol_starts", "weighted_sum",
]  # fmt: skip
