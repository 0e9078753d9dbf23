"""Goals: the goal-file schema, and the objectives and constraints built from it.

Owns: ``schema`` (parsing and validating goal files, the ``--explain`` text) and
``objectives`` (``GoalProblem``, the optimizer hook of a goal, and the pre-run checks).
Must not import: store, report, cli.
"""

from chiropt.goals.objectives import DeadlineReached, GoalProblem, check_goal, metric_spectrum
from chiropt.goals.schema import EXPLAIN, Goal, goal_from_dict, load_goal

__all__ = ["EXPLAIN", "DeadlineReached", "Goal", "GoalProblem", "check_goal", "goal_from_dict",
           "load_goal", "metric_spectrum"]
