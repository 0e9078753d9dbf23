"""Writing a run's results as files a researcher and ``chiropt evaluate`` can read.

Owns: candidate design files (YAML that ``chiropt evaluate`` reproduces exactly: floats are
written with their shortest round-trip text) and the front table (CSV with ``#`` header
lines). Must not import: physics modules, search, store, cli.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import yaml

__all__ = ["read_front_csv", "write_candidate", "write_front_csv"]


class _Dumper(yaml.SafeDumper):
    """Block style for mappings, flow style for short lists of numbers."""


def _list(dumper, data):
    flow = all(isinstance(v, int | float) for v in data) and len(data) <= 8
    return dumper.represent_sequence("tag:yaml.org,2002:seq", data, flow_style=flow)


_Dumper.add_representer(list, _list)


def write_candidate(path: str | Path, design_data: dict, *, comments: Sequence[str] = ()) -> Path:
    """Write one candidate design (plain data of ``Design.to_dict``) as a design file.

    Parameters
    ----------
    path : file to write
    design_data : dict — design file content (lengths in nm, angles in degrees)
    comments : lines written as ``#`` comments above the design (objective values...)

    Returns
    -------
    Path of the file.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    head = "".join(f"# {line}\n" for line in comments)
    body = yaml.dump(design_data, Dumper=_Dumper, sort_keys=False, allow_unicode=True,
                     default_flow_style=False)
    path.write_text(head + body)
    return path


def _cell(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "" if math.isnan(v) else repr(v)
    return str(v)


def write_front_csv(path: str | Path, columns: Sequence[str], rows: Sequence[Sequence[Any]], *,
                    header: Sequence[str] = ()) -> Path:
    """Write the front table: ``#`` header lines, then a CSV with a column-name row.

    Floats are written with ``repr`` (round-trip exact); NaN as an empty cell.
    """
    path = Path(path)
    with path.open("w", newline="") as fh:
        for line in header:
            fh.write(f"# {line}\n")
        w = csv.writer(fh)
        w.writerow(list(columns))
        for r in rows:
            w.writerow([_cell(v) for v in r])
    return path


def read_front_csv(path: str | Path) -> tuple[list[str], list[dict[str, str]]]:
    """Header comment lines (without ``# ``) and the rows of a front table as dicts."""
    lines = Path(path).read_text().splitlines()
    header = [ln[2:] for ln in lines if ln.startswith("# ")]
    body = [ln for ln in lines if not ln.startswith("#")]
    return header, list(csv.DictReader(body))
