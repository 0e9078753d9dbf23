"""Store layer: the SQLite evaluation store of a run and resume by replay.

Owns: ``evaluations`` (schema, reads, writes, ``CachedProblem``, ``CachingWrap``).

Must not import: physics modules, search, report, cli.
"""

from chiropt.store.evaluations import (
    CachedProblem,
    CachingWrap,
    EvaluationStore,
    StoredEvaluation,
    StoreMismatchError,
)

__all__ = [
    "CachedProblem", "CachingWrap", "EvaluationStore", "StoreMismatchError", "StoredEvaluation",
]  # fmt: skip
