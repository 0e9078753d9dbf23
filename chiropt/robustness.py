"""``chiropt robustness``: the robustness analysis of a design file or a run's candidates.

Owns: building the error model from command-line values (or from a run's robust goal
terms), running :func:`chiropt.robust.analysis.analyse` on each design, writing the
per-design table, JSON and figure, and for a run folder the ranking of its candidates by
robust value beside their nominal value. Must not import: cli.

Files (``--out``, default: the current folder for a design file, ``RUN_DIR/robustness/``
for a run folder): ``<stem>-robustness.csv`` / ``.md`` (one row per metric: nominal,
first-order mean and spread, Monte Carlo mean, spread and 5/50/95 percentiles, whether the
first-order picture holds, cone and band averages, the width around the design
wavelength; header lines with constraint probabilities and the yield), ``.json`` (the
whole analysis with the samples: what ``chiropt export --robustness`` reads) and ``.png``;
for a run folder ``ranking.csv`` and the same table in Markdown (``.md``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as onp

from chiropt.design import Design, load_design
from chiropt.errors import InputError
from chiropt.robust.analysis import analyse, robust_value
from chiropt.robust.spec import RobustSpec, parse_robust

__all__ = ["RobustnessOutcome", "build_spec", "robustness"]

OPTION_OF = {"sigma": "--sigma", "na": "--na", "band_nm": "--band-nm", "samples": "--samples",
             "band_shape": "--band-shape"}
DEFAULT_TOP = 5


@dataclass
class RobustnessOutcome:
    """What a robustness command wrote: ``files`` per design (stem -> paths), ``ranking``
    rows (run folders only) and ``results`` (stem -> analysis data)."""

    files: dict[str, list[Path]] = field(default_factory=dict)
    ranking: list[dict] = field(default_factory=list)
    results: dict[str, dict] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def _cli_error(key: str, message: str) -> InputError:
    """Errors of the command-line error model name the option (``--sigma radius_nm``)."""
    parts = key.split(".", 2)
    option = OPTION_OF.get(parts[1], key) if len(parts) > 1 else key
    if len(parts) > 2 and parts[1] == "sigma":
        option = f"--sigma {parts[2]}"
    return InputError(option, message)


def build_spec(design: Design, *, sigma: dict[str, float] | None = None, na=None,
               band_nm=None, samples=None, band_shape=None,
               base: dict | None = None) -> RobustSpec:
    """The error model from command-line values over ``base`` (a ``robust:`` mapping)."""
    raw: dict[str, Any] = dict(base or {})
    raw.pop("statistic", None)
    for key, value in (("sigma", sigma or None), ("na", na), ("band_nm", band_nm),
                       ("samples", samples), ("band_shape", band_shape)):
        if value is not None:
            raw[key] = value
    return parse_robust(raw, "robustness", design.parameters(), design.host_index,
                        error=_cli_error)


def parse_requirements(text: str | None, design: Design) -> list[tuple]:
    """``u>=0.3,g>=1.1,R<=0.2`` -> constraint tuples ``(label, metric, lower, upper)``."""
    import re

    from chiropt.goals.schema import METRIC_NAMES
    from chiropt.sensitivity import NEAR_FIELD

    out = []
    for item in (t.strip() for t in (text or "").split(",")):
        if not item:
            continue
        m = re.fullmatch(r"([\w+-]+?)\s*(>=|<=)\s*([-+0-9.eE]+)", item)
        if m is None:
            raise InputError("--require", f"got {item!r}; allowed METRIC>=VALUE or "
                                          "METRIC<=VALUE, e.g. u>=0.3")
        name, op, value = m.groups()
        near = name in NEAR_FIELD or name in ("docp", "s0")
        if name not in METRIC_NAMES or (near and design.region is None):
            allowed = [n for n in METRIC_NAMES if design.region is not None
                       or not (n in NEAR_FIELD or n in ("docp", "s0"))]
            raise InputError("--require", f"unknown metric {name!r} for this design; "
                                          f"allowed: {', '.join(allowed)}")
        try:
            v = float(value)
        except ValueError:
            raise InputError("--require", f"{name}: got {value!r}, expected a number") from None
        out.append((item, name, v if op == ">=" else None, v if op == "<=" else None))
    return out


def _write(design: Design, spec: RobustSpec, stem: Path, outcome: RobustnessOutcome, *,
           at_nm: float, seed: int, **kw) -> dict:
    from chiropt.export.robustness import write_robustness, write_table
    from chiropt.report.robustness import plot_robustness

    result = analyse(design, spec, at_nm=at_nm, seed=seed, **kw)
    csv_path, md_path = write_table(stem, result)
    json_path = write_robustness(stem.with_suffix(".json"), result)
    files = [csv_path, md_path, json_path]
    try:
        files.append(plot_robustness(result, stem.with_suffix(".png"), title=stem.name))
    except Exception as exc:  # a plot must never lose the tables
        outcome.notes.append(f"plotting failed: {type(exc).__name__}: {exc}")
    outcome.files[stem.name] = files
    outcome.results[stem.name] = result
    return result


def _folder(path: Path) -> Path:
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError("--out", f"cannot create folder {path}: {exc.strerror}") from None
    return path


def robustness(target: str | Path, *, top: int = DEFAULT_TOP, sigma=None, na=None,
               band_nm=None, samples=None, seed: int | None = None, at_nm: float | None = None,
               band_shape=None, out: str | Path | None = None,
               require: str | None = None) -> RobustnessOutcome:
    """Analyse a design file, or the candidates of a run folder (see the module notes)."""
    target = Path(target)
    if not target.exists():
        raise InputError("target", f"{target} does not exist; give a design file or a run "
                                   "folder")
    if seed is not None and not 0 <= seed < 2**31:
        raise InputError("--seed", f"got {seed}, allowed an integer in [0, 2^31 - 1]")
    if not 1 <= top <= 1000:
        raise InputError("--top", f"got {top}, allowed an integer in [1, 1000]")
    outcome = RobustnessOutcome()
    if target.is_file():
        design = load_design(target)
        wl = at_nm if at_nm is not None else float(design.illumination.wavelength_nm[0])
        if not 1.0 <= wl <= 1e6:
            raise InputError("--at-nm", f"got {wl:g}, allowed a wavelength in [1, 1e6] nm")
        spec = build_spec(design, sigma=sigma, na=na, band_nm=band_nm, samples=samples,
                          band_shape=band_shape)
        cons = parse_requirements(require, design)
        metrics = ("g", "docp", "u") if design.region is not None else ("R", "T", "A")
        metrics = tuple(dict.fromkeys(list(metrics) + [c[1] for c in cons]))
        folder = _folder(Path(out) if out else Path.cwd())
        _write(design, spec, folder / f"{target.stem}-robustness", outcome, at_nm=wl,
               seed=1 if seed is None else seed, metrics=metrics, constraints=cons)
        return outcome
    if require:
        raise InputError("--require", "goes with a design file; a run folder uses its goal's "
                                      "constraints")
    return _run_folder(target, outcome, top=top, sigma=sigma, na=na, band_nm=band_nm,
                       samples=samples, seed=seed, band_shape=band_shape, out=out)


def _resolved_goal(path: Path):
    """The goal of a run folder from its ``goal.resolved.yaml``."""
    import yaml

    from chiropt.goals import goal_from_dict

    data = yaml.safe_load(path.read_text())
    return goal_from_dict(data, base_dir=path.parent, default_name=path.parent.name)


def _run_folder(run_dir: Path, outcome: RobustnessOutcome, *, top, sigma, na, band_nm,
                samples, seed, band_shape, out) -> RobustnessOutcome:
    from chiropt.export.robustness import write_ranking
    from chiropt.goals import GoalProblem
    from chiropt.goals.objectives import fabrication_rows

    resolved = run_dir / "goal.resolved.yaml"
    cands = sorted((run_dir / "candidates").glob("c*.yaml"))
    if not resolved.exists() or not cands:
        raise InputError("target", f"{run_dir} is not a run folder with candidates "
                                   "(goal.resolved.yaml, candidates/c*.yaml)")
    (goal,) = _resolved_goal(resolved)
    problem = GoalProblem(goal)
    obj = goal.objectives[0]
    metric = obj.terms[0][0]
    if obj.weighted:
        outcome.notes.append(f"the weighted objective is ranked by its first metric {metric}")
    base = next((i.robust.to_dict() for i in list(goal.objectives) + list(
        goal.metric_constraints) if i.robust is not None), None)
    if sigma or na is not None or band_nm is not None:
        base = None  # the command line gives the error model
    centre = float(onp.mean(obj.spec.wavelengths_nm))
    cons = [(c.label() + (f">={c.lower:g}" if c.lower is not None else "")
             + (f"<={c.upper:g}" if c.upper is not None else ""), c.metric, c.lower, c.upper)
            for c in goal.metric_constraints
            if abs(float(onp.mean(c.spec.wavelengths_nm)) - centre) < 1e-9]
    skipped = len(goal.metric_constraints) - len(cons)
    if skipped:
        outcome.notes.append(f"{skipped} constraint(s) read at other wavelengths are left out "
                             "of the yield")
    rows = fabrication_rows(goal)
    fab = (lambda p: [r(p) for r in rows]) if rows else None
    metrics = tuple(dict.fromkeys([t[0] for o in goal.objectives for t in o.terms]
                                  + (["g", "docp", "u"] if goal.design.region else [])))
    if len(cands) > top:
        cands = [cands[int(round(k))] for k in onp.linspace(0, len(cands) - 1, top)]
    folder = _folder(Path(out) if out else run_dir / "robustness")
    seed = goal.seed if seed is None else seed
    ranking = []
    for path in cands:
        design = load_design(path)
        spec = build_spec(design, sigma=sigma, na=na, band_nm=band_nm, samples=samples,
                          band_shape=band_shape, base=base)
        shift = float(design.illumination.wavelength_nm[0]) - float(problem.wavelengths_nm[0])
        result = _write(design, spec, folder / f"{path.stem}-robustness", outcome,
                        at_nm=centre + shift, seed=seed, metrics=metrics, constraints=cons,
                        fabrication=fab)
        r = result["metrics"][metric]
        kind = ("p5 over fabrication errors" if "monte_carlo" in r and obj.sense == "max"
                else "p95 over fabrication errors" if "monte_carlo" in r
                else "cone average" if "cone" in r else "band average" if "band" in r
                else "nominal")
        ranking.append({"candidate": path.stem, "metric": metric, "nominal": r["nominal"],
                        "robust": robust_value(result, metric, obj.sense),
                        "robust_kind": kind, "yield": result.get("yield")})
    sign = -1.0 if obj.sense == "max" else 1.0
    by_nominal = sorted(ranking, key=lambda d: sign * d["nominal"])
    for k, d in enumerate(by_nominal):
        d["nominal_rank"] = k + 1
    ranking.sort(key=lambda d: sign * d["robust"])
    for k, d in enumerate(ranking):
        d["rank"] = k + 1
    outcome.ranking = ranking
    outcome.files["ranking"] = list(write_ranking(folder / "ranking", ranking))
    return outcome
