"""Robustness figures and costs: first order against Monte Carlo, robust evaluations.

Run by hand: ``python benchmarks/robust.py``. Prints figures; asserts nothing.

1. The quickstart goal's silicon base design (``configs/quickstart.yaml``: 80 nm spheres on
   glass, the plane 10 nm above them, lmax 3) at 700 nm under Gaussian radius and period
   errors: first-order spread (exact gradients) against a
   256-sample scrambled-Sobol Monte Carlo, for a small and a realistic sigma.
2. Cost of one robust goal evaluation (value, and value with the exact Jacobian) over the
   nominal one, dipole model, one wavelength: fabrication samples, a cone, a band.
"""

from __future__ import annotations

import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

import numpy as np

from chiropt.goals import GoalProblem, load_goal
from chiropt.robust.analysis import analyse
from chiropt.robust.spec import parse_robust

from timing import median_seconds

ROOT = Path(__file__).resolve().parents[1]

GOAL = """\
design:
  lattice: {kind: square, period_nm: 420}
  particles: [{radius_nm: 75, material: Si}]
  substrate: {material: SiO2}
  illumination: {wavelength_nm: 700}
  region: {kind: plane, height_nm: 10}
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
  - {maximize: g, at_nm: 700%s}
"""


def first_order_vs_monte_carlo():
    from dataclasses import replace

    design = replace(load_goal(ROOT / "configs" / "quickstart.yaml")[0].design, lmax=3)
    for sig in (0.5, 3.0):
        raw = {"sigma": {"radius_nm": sig, "period_nm": 2 * sig / 3}, "samples": 256}
        spec = parse_robust(raw, "robust", design.parameters(), design.host_index)
        t0 = time.perf_counter()
        r = analyse(design, spec, at_nm=700.0, seed=1, scan=False)
        dt = time.perf_counter() - t0
        print(f"quickstart goal design (Si), sigma radius {sig:g} nm, period {2 * sig / 3:g} nm "
              f"({dt:.1f} s for 256 samples + gradients)")
        for m, v in r["metrics"].items():
            fo, mc, a = v["first_order"], v["monte_carlo"], v["agreement"]
            print(f"  {m}: nominal {v['nominal']:.5f}; first-order std {fo['std']:.3g}, "
                  f"Monte Carlo std {mc['std']:.3g} (ratio {mc['std'] / fo['std']:.3f}), "
                  f"mean shift {mc['mean'] - v['nominal']:+.3g}, p5 {mc['p5']:.5f} vs "
                  f"{fo['p5']:.5f}: {a['first_order']}")


def evaluation_costs():
    cases = [("nominal", ""),
             ("16 error samples", ", robust: {sigma: {radius_nm: 2, period_nm: 2}, samples: 16}"),
             ("cone NA 0.2 (3 x 4)", ", robust: {na: 0.2}"),
             ("band 10 nm (5 nodes)", ", robust: {band_nm: 10}"),
             ("16 samples x cone x band",
              ", robust: {sigma: {radius_nm: 2}, samples: 16, na: 0.2, band_nm: 10}")]
    x = np.array([80.0, 410.0])
    base = None
    with TemporaryDirectory() as tmp:
        for name, robust in cases:
            path = Path(tmp) / "g.yaml"
            path.write_text(textwrap.dedent(GOAL % robust))
            (goal,) = load_goal(path)
            problem = GoalProblem(goal)
            t_val = median_seconds(lambda p=problem: p.evaluate(x, False), 3)
            t_grad = median_seconds(lambda p=problem: p.evaluate(x, True), 3)
            base = base or t_val
            print(f"  {name:26s} value {t_val * 1e3:8.1f} ms ({t_val / base:6.1f}x nominal), "
                  f"value + Jacobian {t_grad * 1e3:8.1f} ms ({t_grad / t_val:.2f}x its value)")


def main():
    first_order_vs_monte_carlo()
    print("cost of one goal evaluation (dipole model, one wavelength):")
    evaluation_costs()


if __name__ == "__main__":
    main()
