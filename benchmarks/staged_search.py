"""Staged search (stage 1: CD capacity, stage 2: g from stage 1's front) against a plain
search of g, at the same evaluation budget, on two goals and several seeds. Run by hand:

    python benchmarks/staged_search.py [--evals 160] [--starts 4] [--seeds 1 2 3] [--out DIR]

Goal "on-glass" is configs/overnight-capacity.yaml / configs/overnight-capacity-g.yaml
(silicon spheres on glass, maximize g with u >= 2). Goal "embedded" is a two-objective
variant of our own: silicon spheres in a glass-like host (no substrate), maximize g and u
with u >= 1 (stage 1: cd_capacity and u), hypervolume at the reference g = 0, u = 1.
Material Si only. The plain search spends ``--evals`` evaluations on stage 2's goal (its
usual exploration included); the staged one ``--evals / 2`` on stage 1 and the rest on
stage 2 without exploration, its local searches started from stage 1's front
(``search.starts_from``). A budget caps the searches; SLSQP often stops earlier, so the
evaluations actually spent are printed too. Prints per goal, seed and search: the
evaluations, the best feasible g, the hypervolume (two objectives), and g_ev, ev_share and
cd_capacity of the best-g design.
"""

from __future__ import annotations

import argparse
import copy
import tempfile
import time
from pathlib import Path

import yaml

from chiropt.goals.schema import goal_from_dict
from chiropt.run import run_goal

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"


def _pair(name: str):
    one = yaml.safe_load((CONFIGS / "overnight-capacity.yaml").read_text())
    two = yaml.safe_load((CONFIGS / "overnight-capacity-g.yaml").read_text())
    if name == "embedded":
        for d, first in ((one, "cd_capacity"), (two, "g")):
            d["design"].pop("substrate")
            d["design"].pop("gap_nm")
            d["design"]["host_index"] = 1.45
            d["constraints"][0]["min"] = 1.0
            d["objectives"] = [{"maximize": first, "at_nm": 700},
                               {"maximize": "u", "at_nm": 700}]
            d["search"]["front"] = {"method": "epsilon-constraint", "points": 5,
                                    "reference": {first: 0.0, "u": 1.0}}
    for d in (one, two):
        d["name"] = f"{name}-{d['name']}"
        d["materials"] = ["Si"]
        d["search"].pop("starts_from", None)
    return one, two


def _run(data: dict, out: Path, evals: int, starts: int, seed: int, **search) -> dict:
    data = copy.deepcopy(data)
    data["budget"] = {"evaluations": evals}
    data["search"] = {**data["search"], "starts": starts, **search}
    data["seed"] = seed
    data["name"] += f"-seed{seed}"
    goal = goal_from_dict(data, base_dir=CONFIGS)[0]
    t0 = time.time()
    summary = run_goal(goal, out=out, workers=0, progress=False)
    rows = summary.front
    label = next(k for k in rows[0] if k.startswith(goal.objectives[0].terms[0][0] + "@"))
    best = max(rows, key=lambda r: float(r[label]))

    def col(prefix):
        key = next((k for k in best if k.startswith(prefix + "@")), None)
        return float(best[key]) if key else float("nan")

    return {"run": summary.run_dir, "evaluations": summary.n_evaluations,
            "hv": summary.hypervolume if len(goal.objectives) == 2 else float("nan"),
            "g": col("g"), "g_ev": col("g_ev"), "ev_share": col("ev_share"),
            "cd_capacity": col("cd_capacity"), "seconds": time.time() - t0}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--evals", type=int, default=160)
    ap.add_argument("--starts", type=int, default=4)
    ap.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    ap.add_argument("--goals", nargs="+", default=["on-glass", "embedded"])
    ap.add_argument("--out", default=None)
    args = ap.parse_args()
    out = Path(args.out or tempfile.mkdtemp(prefix="staged-"))
    half = args.evals // 2
    print(f"runs in {out}; budget {args.evals} evaluations per search method")
    print(f"{'goal':>10} {'seed':>4} {'search':>8} {'evals':>6} {'best g':>8} {'HV':>8} "
          f"{'g_ev':>8} {'ev_share':>8} {'cd_cap':>8} {'s':>6}", flush=True)
    for name in args.goals:
        one, two = _pair(name)
        for seed in args.seeds:
            plain = _run(two, out / "plain", args.evals, args.starts, seed)
            first = _run(one, out / "staged", half, args.starts, seed)
            second = _run(two, out / "staged", args.evals - half, args.starts, seed,
                          explore={"samples": 0},
                          starts_from=str(Path(first["run"]) / "front.csv"))
            staged = dict(second, evaluations=first["evaluations"] + second["evaluations"],
                          seconds=first["seconds"] + second["seconds"])
            for label, r in (("plain", plain), ("stage 1", first), ("staged", staged)):
                print(f"{name:>10} {seed:4d} {label:>8} {r['evaluations']:6d} {r['g']:8.4f} "
                      f"{r['hv']:8.4f} {r['g_ev']:8.4f} {r['ev_share']:8.4f} "
                      f"{r['cd_capacity']:8.4f} {r['seconds']:6.0f}", flush=True)


if __name__ == "__main__":
    main()
