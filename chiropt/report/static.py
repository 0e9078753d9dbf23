"""The static comparison of run folders (``chiropt compare``): PNG, CSV and Markdown.

Owns: ``write_comparison_folder``. The figures are those of the HTML report's comparison
(``report.compare`` on the runs read by ``report.runs``); the look comes from
``report.style``. Files written into the output folder:

- ``fronts.png``: the fronts overlaid with the common reference point;
- ``runs.csv``: per run its folder name, material, status, evaluations, front designs, the
  hypervolume at the common reference point and the best value of each objective;
- ``dominance.csv``: which run holds the combined front where (``compare`` module notes);
- ``coverage.csv``: the coverage matrix, row run over column run;
- ``README.md``: the three tables in Markdown, with the reference point.

Must not import: cli.
"""

from __future__ import annotations

import csv
from pathlib import Path

from chiropt.report.compare import compare_fronts, same_objectives
from chiropt.report.runs import RunData, load_run

__all__ = ["write_comparison_folder"]

COLOURS = ("#1f6f8b", "#c8553d", "#5b8e3e", "#8e5ba8", "#c99a1b", "#4a4a4a", "#2b9eb3",
           "#a23b72")


def _best(run: RunData) -> list[float | None]:
    F = run.front_F
    return [None if not len(F) else float(F[:, k].max() if s == "max" else F[:, k].min())
            for k, s in enumerate(run.senses)]


def tables(runs: list[RunData], cmp: dict) -> dict[str, list[list]]:
    """The three tables (header row first) of the module notes."""
    labels = runs[0].labels
    head = ["run", "material", "status", "evaluations", "front designs", "hypervolume"]
    out = {"runs": [head + [f"best {lab}" for lab in labels]]}
    for r, hv in zip(runs, cmp["hypervolume"], strict=True):
        out["runs"].append([r.name, r.goal.material, r.status, len(r.records), len(r.front),
                            hv, *_best(r)])
    out["dominance"] = [["run", "points"] + [f"{lab} from" for lab in labels]
                        + [f"{lab} to" for lab in labels]
                        + ["hypervolume only this stretch adds", "share"]]
    for s in cmp["stretches"]:
        lo = [a for a, _ in s["ranges"]]
        hi = [b for _, b in s["ranges"]]
        out["dominance"].append([cmp["names"][s["run"]], s["points"], *lo, *hi,
                                 s["exclusive_hypervolume"], s["share"]])
    out["coverage"] = [["covering \\ covered", *cmp["names"]]]
    for name, row in zip(cmp["names"], cmp["coverage"], strict=True):
        out["coverage"].append([name, *row])
    return out


def _text(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def _markdown(rows: list[list]) -> str:
    head, *body = rows
    lines = ["| " + " | ".join(map(str, head)) + " |", "|" + "---|" * len(head)]
    lines += ["| " + " | ".join(_text(v) for v in row) + " |" for row in body]
    return "\n".join(lines)


def _plot(runs: list[RunData], cmp: dict, path: Path) -> None:
    from chiropt.report.front import _axis_label
    from chiropt.report.style import new_figure, save

    fig, axes = new_figure(1, 1, width=6.2, height=4.4)
    ax = axes[0, 0]
    labels = runs[0].labels
    for n, r in enumerate(runs):
        F = r.front_F
        c = COLOURS[n % len(COLOURS)]
        if F.shape[1] == 2:
            ax.plot(F[:, 0], F[:, 1], "-o", ms=3.5, lw=1.2, color=c, label=r.name)
        elif len(F):
            ax.plot([n] * len(F), F[:, 0], "o", color=c, label=r.name)
    if len(labels) == 2:
        ref = cmp["reference"]
        ax.plot([ref[0]], [ref[1]], "+", color="#20303b", ms=9, mew=1.5,
                label="common hypervolume reference")
        ax.set_xlabel(_axis_label(labels[0]))
        ax.set_ylabel(_axis_label(labels[1]))
    else:
        ax.set_ylabel(_axis_label(labels[0]))
        ax.set_xticks([])
    ax.set_title("fronts of " + ", ".join(r.name for r in runs), loc="left")
    ax.legend(loc="best")
    save(fig, path)


def write_comparison_folder(run_dirs, out: str | Path | None = None) -> list[Path]:
    """Compare run folders into ``out`` (default ``compare/`` beside the first run folder);
    return the files written. Refuses runs whose objectives differ (``InputError``, nothing
    written)."""
    runs = [load_run(p) for p in run_dirs]
    names = [r.name for r in runs]
    same_objectives(names, [r.labels for r in runs], [r.senses for r in runs])
    cmp = compare_fronts(names, [r.nondominated for r in runs], [r.reference for r in runs],
                         runs[0].senses)
    out = Path(out) if out is not None else runs[0].path.parent / "compare"
    out.mkdir(parents=True, exist_ok=True)
    written = []
    t = tables(runs, cmp)
    for name, rows in t.items():
        path = out / f"{name}.csv"
        with path.open("w", newline="") as fh:
            csv.writer(fh).writerows([[_text(v) for v in row] for row in rows])
        written.append(path)
    ref = ", ".join(f"{lab} = {v:g}" for lab, v in zip(runs[0].labels, cmp["reference"],
                                                        strict=True))
    md = [f"# Runs compared: {', '.join(names)}", "",
          f"Common reference point: {ref} ({cmp['reference_source']}).", "",
          "## Runs", "", _markdown(t["runs"]), "",
          "## Which run holds the combined front where", "", _markdown(t["dominance"]), "",
          "## Coverage (share of the column run's front the row run's front weakly "
          "dominates)", "", _markdown(t["coverage"]), ""]
    (out / "README.md").write_text("\n".join(md))
    written.append(out / "README.md")
    _plot(runs, cmp, out / "fronts.png")
    written.append(out / "fronts.png")
    return written
