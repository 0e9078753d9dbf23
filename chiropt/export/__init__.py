"""Export: candidate design files and the front table of a run.

Owns: ``candidates`` (design YAML writer, front CSV). Must not import: physics modules,
search, store, cli.
"""

from chiropt.export.candidates import read_front_csv, write_candidate, write_front_csv

__all__ = ["read_front_csv", "write_candidate", "write_front_csv"]
