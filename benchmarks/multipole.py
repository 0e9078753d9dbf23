"""Cost per wavelength point of the multipole model at lmax 1-4 (one sphere per cell).

Run by hand: ``python benchmarks/multipole.py``. Prints milliseconds per wavelength
point for the dipole model (chiropt.solve) and the multipole model, without and with a
substrate (sphere 10 nm above glass), 20 wavelengths, oblique incidence.
"""

import time

import numpy as np

from chiropt.design import design_from_dict
from chiropt.farfield import power_fractions
from chiropt.multipole import (
    design_particles,
    solve_multipole,
    stack_tmatrices,
)
from chiropt.solve import solve
from chiropt.structure import build_structure


def design(substrate):
    data = {"lattice": {"kind": "square", "period_nm": 450},
            "particles": [{"radius_nm": 90, "material": {"n": 3.6, "k": 0.0}}],
            "host_index": 1.0,
            "illumination": {"wavelength_nm": list(np.linspace(500, 900, 20)),
                             "polar_deg": 20, "azimuth_deg": 30}}
    if substrate:
        data.update(substrate={"material": {"n": 1.46, "k": 0.0}}, gap_nm=10.0)
    return design_from_dict(data)


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main():
    for substrate in (False, True):
        des = design(substrate)
        st = build_structure(des)
        W = len(st.k0)
        t = best_of(lambda st=st: power_fractions(solve(st)))
        print(f"substrate={substrate}  dipole model      : {1e3 * t / W:8.2f} ms/point")
        for lmax in (1, 2, 3, 4):
            def run(lmax=lmax, des=des, st=st):
                T = stack_tmatrices(design_particles(des), st.k, lmax)
                return power_fractions(solve_multipole(st, T, lmax))
            t = best_of(run)
            print(f"substrate={substrate}  multipole lmax={lmax} : {1e3 * t / W:8.2f} ms/point")


if __name__ == "__main__":
    main()
