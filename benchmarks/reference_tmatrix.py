"""Side by side with a general-purpose T-matrix library: one far-field point, and our main job.

Run by hand: ``python benchmarks/reference_tmatrix.py`` (needs ``pip install treams``, a
general T-matrix scattering library used here as the reference for cost only; it is not a
dependency). Prints figures; asserts nothing. All on one BLAS thread, as in the run's
workers; CPU time, minimum over repeats.

1. The reference library: one forward far-field point of a square array of silicon-like
   spheres (radius 80 nm, period 420 nm, 700 nm, lmax 2, normal incidence, no substrate,
   one incident polarization): T-matrix, lattice interaction, S-matrix, R and T.
2. chiropt on the same array (lmax 2, both helicities): the forward far field, and the
   value and gradient of R + T in radius, period and wavelength.
3. chiropt's main job: one evaluation of the quickstart goal (objectives, constraints and
   their exact Jacobian), at the centre of its box and at its base design.
"""

from __future__ import annotations

from pathlib import Path

import autograd.numpy as anp
import numpy as np

from chiropt.design import design_from_dict
from chiropt.goals import GoalProblem, load_goal
from chiropt.search.executor import limit_blas_threads, reuse_freed_memory
from chiropt.sensitivity import compute_quantities, value_and_gradient

from timing import best_cpu_seconds

ROOT = Path(__file__).resolve().parent.parent
N_SI = 3.7 + 0.01j   # a silicon-like constant index (demo value)


def _reference_point():
    import treams
    k0 = 2 * np.pi / 700.0
    lattice = treams.Lattice.square(420.0)
    spheres = treams.TMatrix.sphere(2, k0, 80.0, [N_SI ** 2, 1]).latticeinteraction.solve(
        lattice, [0.0, 0.0])
    basis = treams.PlaneWaveBasisByComp.diffr_orders([0.0, 0.0], lattice, 0.02)
    wave = treams.plane_wave([0.0, 0.0], [1, 0, 0], k0=k0, basis=basis, material=1)
    return treams.SMatrices.from_array(spheres, basis).tr(wave)


def _our_design():
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": 420},
        "particles": [{"radius_nm": 80, "material": {"n": N_SI.real, "k": N_SI.imag}}],
        "illumination": {"wavelength_nm": 700.0}, "model": {"lmax": 2}})


def main():
    limit_blas_threads(1)
    reuse_freed_memory()
    try:
        t_ref = best_cpu_seconds(_reference_point, 15)
        T_ref, R_ref = _reference_point()
        print(f"reference library, forward far-field point (lmax 2): {1e3 * t_ref:7.1f} ms "
              f"(T {float(T_ref):.4f}, R {float(R_ref):.4f})")
    except ImportError:
        t_ref = None
        print("reference library not installed (pip install treams): its figures skipped")
    design = _our_design()
    paths = ["particles[0].radius_nm", "lattice.period_nm", "illumination.wavelength_nm"]
    t_fwd = best_cpu_seconds(lambda: compute_quantities(design), 15)
    q = compute_quantities(design)
    t_grad = best_cpu_seconds(lambda: value_and_gradient(
        design, lambda qq: anp.mean(qq["R+1"] + qq["T+1"]), paths), 15)
    print(f"chiropt, same array, forward far field (lmax 2, both helicities): "
          f"{1e3 * t_fwd:7.1f} ms (T {float(q['T+1'][0]):.4f}, R {float(q['R+1'][0]):.4f})")
    print(f"chiropt, same array, value + gradient in 3 quantities:           "
          f"{1e3 * t_grad:7.1f} ms")
    goal = load_goal(str(ROOT / "configs" / "quickstart.yaml"))[0]
    problem = GoalProblem(goal)
    base = np.array([float(np.ravel(problem._params[p])[0]) for p in problem.paths])
    for label, x in (("box centre", (problem.lower + problem.upper) / 2), ("base design", base)):
        t_f = best_cpu_seconds(lambda x=x: problem.evaluate(x, False), 9)
        t_p = best_cpu_seconds(lambda x=x: problem.evaluate(x, True), 9)
        line = (f"quickstart goal at its {label}: forward {1e3 * t_f:6.1f} ms, value + "
                f"Jacobian {1e3 * t_p:6.1f} ms ({t_p / t_f:.1f} x forward)")
        if t_ref:
            line += f", {t_p / t_ref:.1f} x the reference point"
        print(line)


if __name__ == "__main__":
    main()
