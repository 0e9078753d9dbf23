"""A finished (or stopped) run folder read back for reports: the figures both the HTML
report (``report.html``) and the static comparison (``report.static``) show.

Owns: ``load_run`` (goal, store records, front table, summary) and the per-run figures
computed from them: budget used, convergence of the searches, failed evaluations grouped
by reason, constraint activity, material sources. Reads only; writes nothing into the run
folder. Must not import: cli.

Conventions
-----------
- The front is the run's own ``front.csv`` (the rows ``chiropt run`` reported), each row
  matched to its stored evaluation by (stage, search, seq).
- Feasible: status ok and every scaled constraint ``<= FEASIBILITY_TOL`` (as in the run).
- A constraint row is *active* at a design when its scaled value lies in
  ``[-ACTIVE_TOL, FEASIBILITY_TOL]`` (common practice, no source: within 0.1% of its bound).
- Convergence: per search, the hypervolume of the feasible front found so far at the run's
  reference point (two objectives) or the best feasible objective (one), against the
  evaluation number of that search; ``overall`` is the same over every evaluation of the
  run in store insertion order.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as onp

from chiropt.errors import InputError
from chiropt.goals.objectives import GoalProblem
from chiropt.goals.reference import reference_point
from chiropt.goals.schema import Goal
from chiropt.report.labels import objective_label
from chiropt.report.progress import progress, search_streams
from chiropt.run import CONFIRM_NAME, FEASIBILITY_TOL, STORE_NAME, SUMMARY_NAME
from chiropt.search.pareto import non_dominated

__all__ = ["ACTIVE_TOL", "RunData", "budget_used", "constraint_activity", "convergence",
           "failures", "is_feasible", "load_run", "material_sources"]

ACTIVE_TOL = 1e-3
RESOLVED_NAME = "goal.resolved.yaml"


@dataclass
class RunData:
    """Everything a report reads from one run folder (see ``load_run``)."""

    path: Path
    goal: Goal
    problem: GoalProblem
    labels: list[str]
    senses: tuple[str, ...]
    records: list            # every stored evaluation, store order (stage, search, seq)
    columns: list[str]       # front.csv columns
    front: list[dict]        # front.csv rows (strings converted to numbers where they are)
    front_records: list      # the stored evaluation of each front row
    front_F: onp.ndarray     # (P, M) objectives of the front rows
    nondominated: onp.ndarray  # (K, M) every feasible non-dominated evaluation
    reference: list[float]
    reference_source: str
    summary: dict = field(default_factory=dict)
    status: str = ""
    log_warnings: list[str] = field(default_factory=list)
    candidates: dict[int, Path] = field(default_factory=dict)
    confirmed: dict = field(default_factory=dict)

    @property
    def name(self) -> str:
        return self.goal.run_name


def _number(text: str):
    if text in ("true", "false", "True", "False"):
        return text.lower() == "true"
    try:
        return float(text)
    except ValueError:
        return text


def is_feasible(ev) -> bool:
    g = onp.asarray(ev.metrics.get("constraints", []), float)
    return ev.status == "ok" and "objectives" in ev.metrics and bool(
        onp.all(g <= FEASIBILITY_TOL))


def _resolved_goal(path: Path) -> list[Goal]:
    """The goal of ``goal.resolved.yaml``."""
    from chiropt.goals.schema import load_goal

    return load_goal(str(path))


def load_run(path: str | Path) -> RunData:
    """Read a run folder written by ``chiropt run``.

    Raises
    ------
    InputError
        ``RUN_DIR`` when the folder is missing or not a run folder (no goal, store or front).
    """
    from chiropt.export import read_front_csv
    from chiropt.store import EvaluationStore

    path = Path(path)
    missing = [n for n in (RESOLVED_NAME, STORE_NAME, "front.csv") if not (path / n).is_file()]
    if missing:
        hint = ("; the same `chiropt run GOAL.yaml` writes front.csv from the store"
                if missing == ["front.csv"] else "")
        raise InputError("RUN_DIR", f"{path} is not a run folder of `chiropt run` (missing "
                                    f"{', '.join(missing)}){hint}")
    (goal,) = _resolved_goal(path / RESOLVED_NAME)
    problem = GoalProblem(goal)
    store = EvaluationStore(path / STORE_NAME)
    try:
        records = store.records()
        status = str(store.get_meta("status", "") or "")
    finally:
        store.close()
    _, rows = read_front_csv(path / "front.csv")
    columns = list(rows[0]) if rows else []
    front = [{k: _number(v) for k, v in row.items()} for row in rows]
    by_key = {(r.stage, r.start, r.seq): r for r in records}
    front_records = [by_key.get((row["stage"], int(row["search"]), int(row["seq"])))
                     for row in front]
    if any(r is None for r in front_records):
        raise InputError("RUN_DIR", f"{path}: front.csv names evaluations the store does not "
                                    "hold; regenerate the report with `chiropt run`")
    M = len(goal.objectives)
    labels = [objective_label(o, problem) for o in goal.objectives]
    front_F = onp.array([[row[lab] for lab in labels] for row in front], float).reshape(-1, M)
    feas = [r for r in records if is_feasible(r.evaluation)]
    F = onp.array([r.evaluation.metrics["objectives"] for r in feas], float).reshape(-1, M)
    nd = F[non_dominated(F, problem.senses)] if len(F) else onp.zeros((0, M))
    ref, source = reference_point(goal)
    summary = {}
    if (path / SUMMARY_NAME).is_file():
        summary = json.loads((path / SUMMARY_NAME).read_text())
    log = path / "run.log"
    warns = [ln.split("  ", 1)[-1].strip() for ln in log.read_text().splitlines()
             if "WARNING" in ln] if log.is_file() else []
    cands = {int(p.stem[1:]): p for p in sorted((path / "candidates").glob("c[0-9]*.yaml"))}
    confirmed = {}
    if (path / CONFIRM_NAME).is_file():
        confirmed = json.loads((path / CONFIRM_NAME).read_text())
    return RunData(path=path, goal=goal, problem=problem, labels=labels,
                   senses=problem.senses, records=records, columns=columns, front=front,
                   front_records=front_records, front_F=front_F, nondominated=nd,
                   reference=list(ref), reference_source=source, summary=summary,
                   status=status or summary.get("status", ""), log_warnings=list(
                       dict.fromkeys(warns)), candidates=cands, confirmed=confirmed)


def budget_used(run: RunData) -> dict[str, Any]:
    """Evaluations and time used against the goal's budget.

    ``solve_time_s`` is the sum of the evaluations' own wall times [s] (work, all workers);
    ``span_s`` the time from the first to the last stored evaluation [s] (elapsed, over
    every invocation of the run).
    """
    from datetime import datetime

    recs = run.records
    times = sorted(datetime.fromisoformat(r.created) for r in recs if r.created)
    b = run.goal.budget
    stages: dict[str, int] = {}
    for r in recs:
        key = "exploration" if r.stage == "explore" else (
            "superseded" if ":" in r.stage else "local searches")
        stages[key] = stages.get(key, 0) + 1
    return {"evaluations": len(recs),
            "failed": sum(r.evaluation.status != "ok" for r in recs),
            "feasible": sum(is_feasible(r.evaluation) for r in recs),
            "by_stage": stages,
            "budget_evaluations": b.evaluations, "budget_wall_time": b.wall_time_text,
            "solve_time_s": float(sum(r.wall_time_s for r in recs)),
            "span_s": (times[-1] - times[0]).total_seconds() if len(times) > 1 else 0.0}


def _key(r) -> str:
    from chiropt.search.explore import search_key

    return search_key(r.stage, r.start)


def convergence(run: RunData) -> dict[str, Any]:
    """Progress of each search and of the whole run (module notes)."""
    overall = sorted(run.records, key=lambda r: r.id)
    kind = "hypervolume" if len(run.senses) == 2 else run.labels[0]
    return {"quantity": kind,
            "overall": progress(overall, run.senses, run.reference, FEASIBILITY_TOL),
            "searches": {k: progress(v, run.senses, run.reference, FEASIBILITY_TOL)
                         for k, v in search_streams(run.records).items()}}


def failures(run: RunData, *, examples: int = 3) -> list[dict[str, Any]]:
    """Failed evaluations grouped by reason, most frequent first.

    Each group: ``reason``, ``count``, ``searches`` (sorted labels) and up to ``examples``
    design vectors ``{path: value}`` of failed evaluations.
    """
    groups: dict[str, dict] = {}
    for r in run.records:
        if r.evaluation.status == "ok":
            continue
        reason = (r.evaluation.reason or r.evaluation.status or "no reason stored").strip()
        g = groups.setdefault(reason, {"reason": reason, "count": 0, "searches": set(),
                                       "examples": []})
        g["count"] += 1
        g["searches"].add(_key(r))
        if len(g["examples"]) < examples:
            g["examples"].append(dict(zip(run.problem.paths, map(float, r.x), strict=True)))
    out = sorted(groups.values(), key=lambda g: (-g["count"], g["reason"]))
    for g in out:
        g["searches"] = sorted(g["searches"])
    return out


def constraint_activity(run: RunData) -> list[dict[str, Any]]:
    """Per constraint row: how often it binds (module notes).

    ``violated``: share of the ok evaluations with the row above ``FEASIBILITY_TOL``;
    ``active``: share of the ok evaluations where it is active; ``front_active``: front
    designs where it is active; ``front_max``: its largest scaled value on the front.
    """
    ok = [r for r in run.records if r.evaluation.status == "ok"
          and "objectives" in r.evaluation.metrics]
    G = onp.array([r.evaluation.metrics.get("constraints", []) for r in ok], float)
    Gf = onp.array([r.evaluation.metrics.get("constraints", []) for r in run.front_records],
                   float)
    out = []
    for j, label in enumerate(run.problem.constraint_labels):
        col = G[:, j] if G.size else onp.zeros(0)
        fcol = Gf[:, j] if Gf.size else onp.zeros(0)
        act = (col >= -ACTIVE_TOL) & (col <= FEASIBILITY_TOL)
        out.append({"constraint": label,
                    "violated": float(onp.mean(col > FEASIBILITY_TOL)) if col.size else 0.0,
                    "active": float(onp.mean(act)) if col.size else 0.0,
                    "front_active": int(onp.sum((fcol >= -ACTIVE_TOL)
                                                & (fcol <= FEASIBILITY_TOL))),
                    "front_max": float(fcol.max()) if fcol.size else None})
    return out


def material_sources(design) -> list[dict[str, Any]]:
    """Every material of a design: where it is used, name, data source, literature
    reference and wavelength range [nm] (``chiropt.materials.get_material``)."""
    from chiropt.materials import get_material

    d = design
    uses: list[tuple[str, Any]] = []
    for i, p in enumerate(d.particles):
        uses.append((f"particles[{i}].material", p.material))
        if p.core_material is not None:
            uses.append((f"particles[{i}].core_material", p.core_material))
    if d.substrate is not None:
        uses.append(("substrate.material", d.substrate))
    uses += [(f"layers[{i}].material", la.material) for i, la in enumerate(d.layers or ())]
    out = []
    for key, spec in uses:
        try:
            m = get_material(spec, key=key)
            lo, hi = m.wavelength_range_nm
            out.append({"used_as": key, "name": m.name, "source": m.source,
                        "reference": m.reference.strip(),
                        "range_nm": [float(lo), None if hi == float("inf") else float(hi)]})
        except Exception as exc:  # a report shows what it cannot resolve, it never stops
            out.append({"used_as": key, "name": str(spec), "source": "",
                        "reference": f"not resolved: {exc}", "range_nm": [None, None]})
    return out
