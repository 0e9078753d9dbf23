"""Plots of a run: the front, the convergence of each start, fronts compared across materials.

Owns: ``plot_front``, ``plot_convergence``, ``plot_comparison``. The look comes from
``chiropt.report.style``. Must not import: cli, store writers (reads records it is given).

The (DOCP, g) panel shows, when ``chiropt.metrics`` offers them, the CD bound
``K^2/sqrt(2K^2 - 1)`` and the attainable boundary of the dominant evanescent order of the
best-g candidate (docs/theory.md §14); without them the panel is drawn without the overlay.
"""

from __future__ import annotations

from pathlib import Path

import numpy as onp

from chiropt.report.labels import axis_where, objective_label, spec_label
from chiropt.report.style import PALETTE, new_figure, save

__all__ = ["plot_comparison", "plot_convergence", "plot_front"]

FRONT_COLOR = "#D55E00"
CLOUD_COLOR = "0.78"
START_COLORS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442",
                "#000000")


def _axis_label(label: str) -> str:
    name = label.split("@")[0]
    unit = "[-]"
    words = {"u": "intensity enhancement u", "g": "CD enhancement g", "c": "chirality c",
             "docp": "DOCP", "s0": "spin s0", "g_00": "g of the (0,0) order",
             "g_prop": "g of propagating orders", "g_ev": "g of evanescent orders",
             "ev_share": "evanescent share of intensity", "cd_capacity": "CD capacity",
             "cd_efficiency": "CD efficiency", "docp_efficiency": "DOCP efficiency"}
    base = name.rstrip("+-1") if name[-2:] in ("+1", "-1") else name
    nice = words.get(base, name)
    if base.startswith("ev_share_k"):
        nice = f"share of intensity in orders with |q|/k >= {base[len('ev_share_k'):]}"
    if name != base:
        nice += f" (helicity {name[-2:]})"
    where = axis_where(label.split("@", 1)[1]) if "@" in label else ""
    return f"{nice} at {where} {unit}" if where else f"{nice} {unit}"


def _metric_at(problem, rec, name, spec) -> float:
    q = {k: onp.asarray(v) for k, v in rec.evaluation.metrics["quantities"].items()}
    return float(problem._spec_value(q, name, spec))


def _order_overlay(ax, problem, rec, spec) -> str:
    """Draw the dominant evanescent order's bound and attainable boundary; return a note."""
    from chiropt.metrics import attainable_boundary, order_table
    from chiropt.model import metrics_tolerance, run_model

    try:
        design = problem.design_at(rec.x)
        # the spec's middle wavelength, moved with the wavelength variable if there is one
        w0 = spec.wavelengths_nm[len(spec.wavelengths_nm) // 2]
        shift = problem.wavelengths_at(rec.x)[0] - problem.wavelengths_nm[0]
        sol = run_model(design.with_wavelengths([w0 + shift])).solution
        rows = [r for r in order_table(sol, design.region, 0, tol=metrics_tolerance(design))
                if r["evanescent"]]
        if not rows:
            return "no evanescent order at the best-g design"
        top = max(rows, key=lambda r: r["share"])
        K = top["K"]
        d, g = attainable_boundary(K)
        ax.plot(d, g, color="0.35", lw=0.9, ls=(0, (3, 2)),
                label=f"attainable, order ({top['m']},{top['n']}) of the largest-g front "
                      f"design (evaluation {getattr(rec, 'id', '?')}), K = {K:.3g}")
        ax.axhline(top["bound"], color="0.35", lw=0.8, ls=":",
                   label=f"CD bound of that order, K²/√(2K²−1) = {top['bound']:.3g}")
        return f"bound:{top['bound']}"
    except Exception as exc:  # an overlay must never stop the report
        return f"per-order overlay skipped ({type(exc).__name__})"


def plot_front(path, problem, records, F, feasible, chosen, picks, confirmed=None) -> Path:
    """The front in objective space and, with a region, in the (DOCP, g) plane coloured by u.

    Parameters
    ----------
    path : PNG file
    problem : GoalProblem
    records : stored evaluations (unique designs, status ok), rows of ``F``
    F : (N, M) objective values; feasible : (N,) bool
    chosen : indices of the front (in ``records``); picks : front positions with a candidate
    confirmed : optional (len(chosen), M) values of the front re-solved by the
        confirmation model (drawn as open markers joined to the search model's points)
    """
    goal = problem.goal
    region = goal.design.region is not None
    M = F.shape[1] if F.size else len(goal.objectives)
    capacity = region and bool(records) and "cd_capacity" in records[0].evaluation.metrics.get(
        "quantities", {})
    fig, axes = new_figure(1, 1 + region + capacity, width=5.2, height=4.2)
    ax = axes[0, 0]
    labels = [objective_label(o, problem) for o in goal.objectives]
    fe = onp.asarray(feasible, bool)
    if M == 2:
        ax.scatter(F[~fe, 0], F[~fe, 1], s=6, marker="x", color=CLOUD_COLOR, lw=0.6,
                   label="infeasible")
        ax.scatter(F[fe, 0], F[fe, 1], s=7, color="0.55", label="feasible evaluations")
        if chosen:
            Fc = F[chosen]
            ax.plot(Fc[:, 0], Fc[:, 1], "-o", color=FRONT_COLOR, ms=4, lw=1.2,
                    label="non-dominated front")
            if confirmed is not None and len(confirmed) == len(chosen):
                Cf = onp.asarray(confirmed, float)
                for a, b in zip(Fc, Cf, strict=True):
                    ax.plot([a[0], b[0]], [a[1], b[1]], color=FRONT_COLOR, lw=0.6, ls=":")
                ax.scatter(Cf[:, 0], Cf[:, 1], s=22, facecolors="none",
                           edgecolors=FRONT_COLOR, lw=1.0, label="confirmed (rigorous model)")
            _label_uncrowded(ax, Fc, picks, F[fe] if fe.any() else Fc)
        ax.set_xlabel(_axis_label(labels[0]))
        ax.set_ylabel(_axis_label(labels[1]))
        ax.set_title("objective space")
    else:
        idx = onp.arange(F.shape[0])
        ax.scatter(idx[fe], F[fe, 0], s=7, color="0.55", label="feasible evaluations")
        ax.scatter(idx[~fe], F[~fe, 0], s=6, marker="x", color=CLOUD_COLOR, label="infeasible")
        if chosen:
            ax.scatter(onp.asarray(chosen), F[chosen, 0], s=30, color=FRONT_COLOR,
                       label="best of each search")
        ax.set_xlabel("unique design (evaluation order) [-]")
        ax.set_ylabel(_axis_label(labels[0]))
        ax.set_title("objective")
    ax.legend(loc="best")
    if region:
        ax = axes[0, 1]
        spec = goal.objectives[0].spec
        for o in goal.objectives:
            if any(m in ("g", "docp", "docp+1", "docp-1") for m in o.metrics):
                spec = o.spec
                break
        idx = [i for i in range(len(records)) if fe[i]] or list(range(len(records)))
        D = onp.array([_metric_at(problem, records[i], "docp", spec) for i in idx])
        g = onp.array([_metric_at(problem, records[i], "g", spec) for i in idx])
        u = onp.array([_metric_at(problem, records[i], "u", spec) for i in idx])
        sc = ax.scatter(D, g, c=u, s=8, cmap="viridis", alpha=0.55, lw=0)
        if chosen:
            Dc = onp.array([_metric_at(problem, records[i], "docp", spec) for i in chosen])
            gc = onp.array([_metric_at(problem, records[i], "g", spec) for i in chosen])
            uc = onp.array([_metric_at(problem, records[i], "u", spec) for i in chosen])
            ax.scatter(Dc, gc, c=uc, s=36, cmap="viridis", edgecolors=FRONT_COLOR,
                       linewidths=1.0, vmin=u.min() if u.size else None,
                       vmax=u.max() if u.size else None, label="front designs")
            best = chosen[int(onp.argmax(gc))]
            note = _order_overlay(ax, problem, records[best], spec)
            top = max(float(g.max()), float(gc.max()))
            if note.startswith("bound:"):
                top = max(top, float(note.split(":")[1]))
                note = ""
            # keep the view on the designs (the overlay is a whole ellipse-like region)
            ax.set_xlim(min(float(D.min()), float(Dc.min())) - 0.05,
                        max(1.02, float(D.max()) + 0.02))
            ax.set_ylim(min(float(g.min()), float(gc.min())) - 0.1, top + 0.15)
            if note:
                ax.text(0.02, 0.02, note, transform=ax.transAxes, fontsize=6, color="0.4")
        cb = fig.colorbar(sc, ax=ax)
        where = axis_where(spec_label(spec, problem))
        cb.set_label(f"intensity enhancement u at {where} [-]")
        ax.set_xlabel(f"DOCP, helicity average, at {where} [-]")
        ax.set_ylabel(f"CD enhancement g at {where} [-]")
        ax.set_title("(DOCP, g) plane")
        if ax.get_legend_handles_labels()[0]:   # below the panel: the labels are long
            ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), fontsize=6,
                      frameon=False)
    if capacity:
        _capacity_panel(axes[0, 2], problem, records, fe, chosen, picks)
    fig.suptitle(f"run {goal.run_name}", fontsize=10, color=PALETTE["c"])
    path = Path(path)
    save(fig, path)
    return path


def _label_uncrowded(ax, points, picks, cloud) -> None:
    """Label candidate j at ``points[j]`` (x, y) as ``c<j>``, skipping one that would sit
    closer than 6% of the cloud's span to a label already placed (crowded labels overlap
    unreadably; the candidates table names them all)."""
    span = onp.ptp(onp.asarray(cloud, float), axis=0)
    span = onp.where(onp.isfinite(span) & (span > 0), span, 1.0)
    placed: list = []
    for j in picks:
        if not 0 <= j < len(points) or not onp.all(onp.isfinite(points[j])):
            continue
        pos = onp.asarray(points[j], float) / span
        if any(onp.hypot(*(pos - other)) < 0.06 for other in placed):
            continue
        placed.append(pos)
        ax.annotate(f"c{j:03d}", tuple(points[j]), textcoords="offset points", xytext=(4, 4),
                    fontsize=7)


def _capacity_panel(ax, problem, records, fe, chosen, picks) -> None:
    """Where the CD comes from: g_ev against cd_capacity (|g_ev| <= cd_capacity, the
    diagonals; docs/theory.md §18), coloured by the evanescent share; front designs ringed.
    Points far left are limited by capacity, points far below the diagonal by polarization.
    """
    goal = problem.goal
    spec = goal.objectives[0].spec
    idx = [i for i in range(len(records)) if fe[i]] or list(range(len(records)))

    def values(rows, name):
        return onp.array([_metric_at(problem, records[i], name, spec) for i in rows])

    cap, gev, share = values(idx, "cd_capacity"), values(idx, "g_ev"), values(idx, "ev_share")
    sc = ax.scatter(cap, gev, c=share, s=8, cmap="cividis", alpha=0.6, lw=0, vmin=0, vmax=1)
    top = max(float(onp.nanmax(cap)) if cap.size else 1.0, 1e-3) * 1.05
    ax.plot([0, top], [0, top], color="0.35", lw=0.8, ls=":", label="|g_ev| = cd_capacity")
    ax.plot([0, top], [0, -top], color="0.35", lw=0.8, ls=":")
    if chosen:
        cc, gc = values(chosen, "cd_capacity"), values(chosen, "g_ev")
        ax.scatter(cc, gc, c=values(chosen, "ev_share"), s=36, cmap="cividis", vmin=0, vmax=1,
                   edgecolors=FRONT_COLOR, linewidths=1.0, label="front designs")
        _label_uncrowded(ax, onp.stack([cc, gc], axis=1), picks,
                         onp.stack([cap, gev], axis=1) if cap.size else onp.ones((1, 2)))
    cb = ax.figure.colorbar(sc, ax=ax)
    where = axis_where(spec_label(spec, problem))
    cb.set_label(f"evanescent share of intensity at {where} [-]")
    ax.set_xlabel(f"CD capacity at {where} [-]")
    ax.set_ylabel(f"g of evanescent orders, g_ev, at {where} [-]")
    ax.set_title("where the CD comes from")
    ax.legend(loc="upper left", fontsize=6)


def plot_convergence(path, problem, records, *, reference) -> Path:
    """Per start: objective vs evaluation (one objective) or front hypervolume (two).

    ``records`` are all stored evaluations (any status), ordered by stage, search, seq.
    """
    from chiropt.report.progress import progress, search_streams
    from chiropt.run import FEASIBILITY_TOL

    goal = problem.goal
    M = problem.n_objectives
    senses = problem.senses
    fig, axes = new_figure(1, 1, width=6.0, height=3.8)
    ax = axes[0, 0]
    streams = search_streams(records)
    for n, (key, recs) in enumerate(streams.items()):
        color = START_COLORS[n % len(START_COLORS)]
        best_y = progress(recs, senses, reference, FEASIBILITY_TOL)
        ys = [r.evaluation.metrics["objectives"][0] if r.evaluation.status == "ok"
              and r.evaluation.metrics.get("objectives") is not None else onp.nan
              for r in recs]
        x = onp.arange(1, len(recs) + 1)
        if M == 1:
            ax.plot(x, ys, ".", color=color, ms=2.5, alpha=0.5)
        ax.plot(x, best_y, "-", color=color, lw=1.3, label=key)
    if M == 1:
        ylab = _axis_label(objective_label(goal.objectives[0], problem))
        ax.set_ylabel(f"{ylab}\n(dots: every evaluation, line: best feasible)")
    else:
        ax.set_ylabel("hypervolume of the feasible front [objective units²]")
    ax.set_xlabel("evaluation of this search [-]")
    ax.set_title(f"convergence of each search, run {goal.run_name}")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best")
    path = Path(path)
    save(fig, path)
    return path


def plot_comparison(summaries, path, reference=None) -> Path:
    """The fronts of several runs (materials) in one objective-space figure, with the
    common hypervolume reference point (two objectives) when given."""
    fig, axes = new_figure(1, 1, width=6.0, height=4.4)
    ax = axes[0, 0]
    from chiropt.goals.objectives import GoalProblem

    goal = summaries[0].goal
    problem = GoalProblem(goal)
    labels = [objective_label(o, problem) for o in goal.objectives]
    for n, s in enumerate(summaries):
        F = s.front_objectives
        color = START_COLORS[n % len(START_COLORS)]
        name = s.goal.material or s.goal.run_name
        if F is None or len(F) == 0:
            continue
        if F.shape[1] == 2:
            ax.plot(F[:, 0], F[:, 1], "-o", ms=3.5, color=color, label=name)
        else:
            ax.bar(n, F[0, 0], color=color, label=name)
    if len(labels) == 2 and reference is not None:
        ax.plot([reference[0]], [reference[1]], "x", color=PALETTE["c"], ms=7,
                label="hypervolume reference")
    if len(labels) == 2:
        ax.set_xlabel(_axis_label(labels[0]))
        ax.set_ylabel(_axis_label(labels[1]))
    else:
        ax.set_ylabel(_axis_label(labels[0]))
        ax.set_xticks([])
    ax.set_title(f"{goal.name}: fronts by material")
    ax.legend(loc="best")
    path = Path(path)
    save(fig, path)
    return path
