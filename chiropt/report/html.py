"""One self-contained HTML page of one or more run folders (``chiropt report``).

Owns: ``write_html_report`` and the page's data (``page_data``). The page is plain HTML
with inline SVG drawn by a small script of our own (``page.js``, styles in ``page.css``):
no network, no external file, nothing to install, and it opens from a file:// URL. All
figures are computed here in Python (``report.runs``, ``report.compare``,
``report.details``) and embedded as one JSON object; the script only draws them.
Must not import: cli.
"""

from __future__ import annotations

import datetime
import html
import json
import math
import os
from pathlib import Path
from typing import Any

import numpy as onp

from chiropt.report.compare import compare_fronts, same_objectives
from chiropt.report.details import design_detail
from chiropt.report.runs import (RunData, budget_used, constraint_activity, convergence,
                                 failures, load_run, material_sources)

__all__ = ["CLOUD_MAX", "DETAILS_MAX", "page_data", "write_html_report"]

HERE = Path(__file__).parent
CLOUD_MAX = 3000   # evaluations drawn behind the front (an even subsample beyond)
DETAILS_MAX = 200  # front designs with spectra and maps (spread along the front beyond)
BOOK = ("index", "feasible", "max_violation", "stage", "search", "seq")


def _clean(obj):
    """JSON-safe data: NaN and infinities become null, numpy scalars plain numbers."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, onp.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (onp.floating, float)):
        return float(obj) if math.isfinite(obj) else None
    if isinstance(obj, (onp.integer,)):
        return int(obj)
    if isinstance(obj, (onp.bool_,)):
        return bool(obj)
    return obj


def column_groups(run: RunData) -> dict[str, list[str]]:
    """front.csv columns by what they hold: parameters, objectives, metrics, validity,
    confirmation, bookkeeping and any other (e.g. columns a later stage added)."""
    cols = run.columns
    params = [c for c in run.problem.paths if c in cols]
    objs = [c for c in run.labels if c in cols]
    validity = [c for c in cols if c.endswith("(lmax+1)")] + [
        c for c in ("lmax", "lmax_change", "model_check") if c in cols]
    confirm = [c for c in cols if c.endswith("(confirmed)")] + [
        c for c in ("confirm_feasible", "confirm_model", "confirm_change") if c in cols]
    taken = set(params) | set(objs) | set(validity) | set(confirm) | set(BOOK)
    metrics = [c for c in cols if "@" in c and c not in taken]
    other = [c for c in cols if c not in taken and c not in metrics]
    return {"parameters": params, "objectives": objs, "metrics": metrics,
            "validity": validity, "confirmation": confirm, "bookkeeping": list(BOOK),
            "other": other}


def _colour_column(groups: dict) -> str | None:
    metrics = groups["metrics"]
    return next((c for c in metrics if c.startswith("u@")), metrics[0] if metrics else None)


def _cloud(run: RunData) -> dict[str, list]:
    from chiropt.report.runs import is_feasible

    ok = [r for r in run.records if r.evaluation.status == "ok"
          and "objectives" in r.evaluation.metrics]
    if len(ok) > CLOUD_MAX:
        ok = [ok[int(i)] for i in onp.linspace(0, len(ok) - 1, CLOUD_MAX)]
    out: dict[str, list] = {"feasible": [], "infeasible": []}
    for r in ok:
        key = "feasible" if is_feasible(r.evaluation) else "infeasible"
        out[key].append([float(v) for v in r.evaluation.metrics["objectives"]])
    return out


def _detail_rows(n: int, limit: int) -> list[int]:
    if n <= limit:
        return list(range(n))
    return sorted({int(round(t)) for t in onp.linspace(0, n - 1, limit)})


def _outlines(design) -> dict[str, Any]:
    from chiropt.design import lattice_vectors_nm

    a1, a2 = lattice_vectors_nm(design.lattice)
    circles = [[float(p.position_nm[0]), float(p.position_nm[1]), float(p.radius_nm)]
               for p in design.particles if getattr(p, "radius_nm", None)]
    return {"a1": [float(v) for v in a1], "a2": [float(v) for v in a2], "circles": circles}


def run_data(run: RunData, out_dir: Path, *, details: int = DETAILS_MAX, points: int = 41,
             grid: int = 24, progress=None) -> dict[str, Any]:
    """Everything the page shows of one run (plain data)."""
    groups = column_groups(run)
    goal = run.goal
    hv = run.summary.get("hypervolume")
    det = {}
    rows = _detail_rows(len(run.front), details)
    for n, k in enumerate(rows):
        if progress is not None:
            progress(f"{run.name}: design {k} ({n + 1} of {len(rows)})")
        d = design_detail(run.problem, run.front_records[k].x, points=points, grid=grid)
        d["cell"] = _outlines(run.problem.design_at(run.front_records[k].x))
        det[str(k)] = d
    links = {str(k): Path(os.path.relpath(p.resolve(), out_dir.resolve())).as_posix()
             for k, p in run.candidates.items()}
    return {
        "name": run.name, "path": str(run.path), "status": run.status,
        "goal": {"name": goal.name, "description": goal.description,
                 "material": goal.material, "source": goal.source,
                 "objectives": [{"label": lab, "sense": s}
                                for lab, s in zip(run.labels, run.senses, strict=True)],
                 "constraints": list(run.problem.constraint_labels),
                 "variables": [{"path": v.path, "min": v.lower, "max": v.upper}
                               for v in goal.variables],
                 "search": goal.search.to_dict(), "budget": goal.budget.to_dict(),
                 "seed": goal.seed, "model": goal.design.model_dict()},
        "budget": budget_used(run), "materials": material_sources(goal.design),
        "labels": run.labels, "senses": list(run.senses), "reference": run.reference,
        "reference_source": run.reference_source, "hypervolume": hv,
        "coverage": run.summary.get("coverage", {}),
        "groups": groups, "colour": _colour_column(groups), "front": run.front,
        "cloud": _cloud(run), "details": det, "candidates": links,
        "convergence": convergence(run), "failures": failures(run),
        "constraints": constraint_activity(run), "warnings": run.log_warnings,
    }


def comparison(runs: list[RunData]) -> dict[str, Any] | None:
    """The comparison of several runs, or None for one (refuses different objectives)."""
    if len(runs) < 2:
        return None
    names = [r.name for r in runs]
    same_objectives(names, [r.labels for r in runs], [r.senses for r in runs])
    return compare_fronts(names, [r.nondominated for r in runs], [r.reference for r in runs],
                          runs[0].senses)


def page_data(runs: list[RunData], out_dir: Path, **kw) -> dict[str, Any]:
    from chiropt import __version__

    cmp = comparison(runs)  # refuses before any costly detail is computed
    return _clean({"generated": datetime.datetime.now(datetime.UTC).strftime(
        "%Y-%m-%d %H:%M UTC"), "version": __version__, "comparison": cmp,
        "colormap": colormap(), "runs": [run_data(r, out_dir, **kw) for r in runs]})


def colormap(n: int = 64) -> list[str]:
    """``n`` colours of matplotlib's cividis (monotonic lightness, colour-blind safe)."""
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps["cividis"]
    return [to_hex(cmap(i / (n - 1))) for i in range(n)]


def render(data: dict[str, Any]) -> str:
    """The page: template with the styles, the script and the data inlined."""
    payload = json.dumps(data, separators=(",", ":"), allow_nan=False)
    payload = payload.replace("<", "\\u003c")   # no "</script>" inside the data block
    names = ", ".join(r["name"] for r in data["runs"])
    return ((HERE / "page.html").read_text()
            .replace("{{title}}", html.escape(f"chiropt report: {names}"))
            .replace("{{css}}", (HERE / "page.css").read_text())
            .replace("{{js}}", (HERE / "page.js").read_text())
            .replace("{{data}}", payload))


def write_html_report(run_dirs, out: str | Path | None = None, *, progress=None,
                      **kw) -> Path:
    """Write the report of ``run_dirs`` to ``out`` (default: ``RUN_DIR/report.html`` for
    one run, ``report.html`` beside the first run folder for several); return its path.

    Raises ``InputError`` (nothing written) for a folder that is not a run folder or runs
    whose objectives differ.
    """
    runs = [load_run(p) for p in run_dirs]
    if out is None:
        out = (runs[0].path / "report.html" if len(runs) == 1
               else runs[0].path.parent / "report.html")
    out = Path(out)
    text = render(page_data(runs, out.parent, progress=progress, **kw))
    out.write_text(text, encoding="utf-8")
    return out
