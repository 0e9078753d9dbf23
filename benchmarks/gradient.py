"""Gradient cost over forward cost (reverse mode, all design quantities at once).

Run by hand: ``python benchmarks/gradient.py``. Prints figures; asserts nothing.
Target: gradient <= 4x forward, one sphere per cell, with substrate,
for one wavelength and for a 31-point band average.
"""

from __future__ import annotations

import autograd.numpy as anp

from chiropt.design import design_from_dict
from chiropt.sensitivity import compute_quantities, value_and_gradient

from timing import median_seconds


def _design(points, region):
    data = {"lattice": {"kind": "square", "period_nm": 420},
            "particles": [{"radius_nm": 75, "material": "Si"}],
            "substrate": {"material": "SiO2"},
            "illumination": {"wavelength_nm": {"start": 650, "stop": 750, "points": points}
                             if points > 1 else 700.0, "polar_deg": 10.0}}
    if region:
        data["region"] = {"kind": "plane", "height_nm": 10.0}
    return design_from_dict(data)


def main():
    for region in (False, True):
        for points in (1, 31):
            design = _design(points, region)
            names = ["R+1", "T+1"] + (["g", "u"] if region else [])
            paths = list(design.parameters())

            def objective(q, names=names):
                return sum(anp.mean(q[n]) for n in names)

            t_f = median_seconds(lambda d=design, o=objective: o(compute_quantities(d)))
            t_g = median_seconds(lambda d=design, o=objective, p=paths:
                               value_and_gradient(d, o, p))
            print(f"{'near+far' if region else 'far field':9s} {points:3d} wavelength(s), "
                  f"{len(paths)} variables: forward {t_f * 1e3:7.1f} ms, "
                  f"value+gradient {t_g * 1e3:7.1f} ms, ratio {t_g / t_f:4.2f}")


if __name__ == "__main__":
    main()
