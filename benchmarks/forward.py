"""Forward-model speed: time per (design, wavelength) point, one sphere per cell.

Run by hand: ``python benchmarks/forward.py``. Prints figures; asserts nothing.
Target: < 0.5 ms per point on one core, lattice sums to 1e-8.
"""

from __future__ import annotations

import time

import numpy as np

from chiropt.design import design_from_dict
from chiropt.farfield import power_fractions
from chiropt.solve import solve
from chiropt.structure import build_structure

CASES = {
    "homogeneous host": {},
    "SiO2 substrate": {"substrate": {"material": "SiO2"}},
    "Si3N4 film on SiO2": {"substrate": {"material": "SiO2"},
                           "layers": [{"material": "Si3N4", "thickness_nm": 50}]},
}


def _design(extra):
    data = {"lattice": {"kind": "square", "period_nm": 420},
            "particles": [{"radius_nm": 75, "material": "Si"}],
            "host_index": 1.0,
            "illumination": {"wavelength_nm": {"start": 550, "stop": 900, "points": 71},
                             "polar_deg": 0.0},
            "model": {"tolerance": 1e-8}}
    data.update(extra)
    return design_from_dict(data)


def time_case(extra, repeats=15):
    design = _design(extra)
    power_fractions(solve(build_structure(design), warn=False))  # warm caches
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        power_fractions(solve(build_structure(design), warn=False))
        times.append(time.perf_counter() - t0)
    n = len(design.illumination.wavelength_nm)
    return float(np.median(times)) / n * 1e3


def main():
    base = None
    for name, extra in CASES.items():
        ms = time_case(extra)
        base = base or ms
        print(f"{name:22s} {ms:7.3f} ms per wavelength point  ({ms / base:4.2f}x homogeneous)")


if __name__ == "__main__":
    main()
