"""Writing robustness results: the per-design table (CSV and Markdown), the ranking of a
run's candidates, the JSON record and its section of the full-wave set-up.

Owns: turning the plain data of ``chiropt.robust.analysis.analyse`` into files. Must not
import: physics modules, search, store, cli.
"""

from __future__ import annotations

import csv
import json
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as onp

__all__ = ["TABLE_COLUMNS", "read_robustness", "robustness_rows", "setup_section",
           "write_ranking", "write_robustness", "write_table"]

TABLE_COLUMNS = ("metric", "nominal", "first_order_mean", "first_order_std", "mc_mean",
                 "mc_std", "mc_p5", "mc_p50", "mc_p95", "first_order_p5", "first_order_p95",
                 "first_order", "cone_average", "band_average", "fwhm_nm")


def robustness_rows(result: dict) -> list[list[Any]]:
    """One row per metric, in :data:`TABLE_COLUMNS` order (NaN where not computed)."""
    nan = float("nan")
    rows = []
    for m, r in result["metrics"].items():
        fo, mc = r.get("first_order", {}), r.get("monte_carlo", {})
        rows.append([m, r["nominal"], fo.get("mean", nan), fo.get("std", nan),
                     mc.get("mean", nan), mc.get("std", nan), mc.get("p5", nan),
                     mc.get("p50", nan), mc.get("p95", nan), fo.get("p5", nan),
                     fo.get("p95", nan), r.get("agreement", {}).get("first_order", ""),
                     r.get("cone", nan), r.get("band", nan), r.get("fwhm_nm", nan)])
    return rows


def _summary_lines(result: dict) -> list[str]:
    em = result["error_model"]
    errs = ", ".join(f"{e['key']} ({' + '.join(e['paths'])}) sigma {e['sigma']:g}"
                     for e in em["errors"]) or "none"
    lines = [f"robustness at {result['at_nm']:g} nm; seed {result['seed']}",
             f"fabrication errors: {errs}; {em['samples']} scrambled-Sobol samples",
             f"cone: NA {em['na']:g} ({em['polar_points']} x {em['azimuth_points']} "
             "directions, incoherent)",
             f"band: {em['band_nm']:g} nm {em['band_shape']} ({em['band_points']} nodes)"]
    for c in result["constraints"]:
        lines.append(f"probability that {c['label']} holds: {c['probability']:.4g}")
    if result.get("yield") is not None:
        lines.append(f"yield (every constraint holds): {result['yield']:.4g}")
    return lines


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        return "" if math.isnan(v) else f"{v:.6g}"
    return str(v)


def write_table(stem: str | Path, result: dict) -> tuple[Path, Path]:
    """``STEM.csv`` (``#`` header lines, then the table) and the same table in Markdown
    (suffix ``.md``); their paths."""
    stem = Path(stem)
    csv_path, md_path = stem.with_suffix(".csv"), stem.with_suffix(".md")
    rows = robustness_rows(result)
    with csv_path.open("w", newline="") as fh:
        for line in _summary_lines(result):
            fh.write(f"# {line}\n")
        w = csv.writer(fh)
        w.writerow(TABLE_COLUMNS)
        for r in rows:
            w.writerow([repr(v) if isinstance(v, float) else v for v in r])
    md = [f"# Robustness of {stem.name}", ""] + [f"- {ln}" for ln in _summary_lines(result)]
    md += ["", "| " + " | ".join(TABLE_COLUMNS) + " |",
           "|" + "---|" * len(TABLE_COLUMNS)]
    md += ["| " + " | ".join(_fmt(v) for v in r) + " |" for r in rows]
    md_path.write_text("\n".join(md) + "\n")
    return csv_path, md_path


def _plain(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, onp.ndarray):
        return obj.tolist()
    if isinstance(obj, onp.floating | float):
        return None if math.isnan(float(obj)) else float(obj)
    return obj


def write_robustness(path: str | Path, result: dict) -> Path:
    """The whole analysis as JSON (NaN as null): what ``export --robustness`` reads."""
    path = Path(path)
    path.write_text(json.dumps(_plain(result), indent=1) + "\n")
    return path


def read_robustness(path: str | Path) -> dict:
    """A JSON file written by :func:`write_robustness`."""
    return json.loads(Path(path).read_text())


def setup_section(result: dict) -> dict:
    """The ``robustness`` entry of a full-wave set-up: the error model, the very samples
    (so a full-wave check can solve the same perturbed designs) and the figures.

    ``result`` is a file of ``chiropt robustness`` (``<stem>-robustness.json``) or a run's
    ``robust_samples.json`` (the robust goal terms: each one's error model and samples).
    """
    if "error_model" not in result:  # a run's robust goal terms
        return {"note": "the robust goal terms of the run: per term its error model and the "
                        "samples every design of the run was evaluated with",
                "goal_terms": result}
    figures = {m: {k: v for k, v in r.items() if k != "derivatives"}
               for m, r in result["metrics"].items()}
    return {"note": "fabrication errors are offsets of the named design quantities in user "
                    "units (one row per sample in 'samples.offsets', columns "
                    "'samples.paths'); cone and band averages are incoherent",
            "at_nm": result["at_nm"], "error_model": result["error_model"],
            "samples": result.get("plan"), "figures": _plain(figures),
            "constraints": result.get("constraints", []), "yield": result.get("yield")}


def write_ranking(stem: str | Path, rows: Sequence[dict]) -> tuple[Path, Path]:
    """``STEM.csv`` and its Markdown twin (suffix ``.md``): a run's candidates ranked by
    robust value.

    ``rows``: dicts with ``rank``, ``candidate``, ``metric``, ``nominal``, ``robust``,
    ``robust_kind``, ``nominal_rank``, ``yield``, in rank order.
    """
    stem = Path(stem)
    cols = ["rank", "candidate", "metric", "robust", "robust_kind", "nominal", "nominal_rank",
            "yield"]
    csv_path, md_path = stem.with_suffix(".csv"), stem.with_suffix(".md")
    with csv_path.open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            w.writerow(["" if r.get(c) is None else r.get(c) for c in cols])
    md = ["# Candidates ranked by robust value", "", "| " + " | ".join(cols) + " |",
          "|" + "---|" * len(cols)]
    md += ["| " + " | ".join(_fmt(r.get(c)) if r.get(c) is not None else "" for c in cols)
           + " |" for r in rows]
    md_path.write_text("\n".join(md) + "\n")
    return csv_path, md_path
