"""Write tests/data/solver_reference.json: spectra and exact gradients of a set of designs.

Run by hand from the repository root with the code whose results are to be kept:
``PYTHONPATH=. python tests/data/make_solver_reference.py``. The stored file was made with
the evaluation path as it stood before its reverse passes were regrouped into coarse
primitives (lattice sums, channel projections, stack-reflected coupling); the test
``tests/test_throughput.py`` checks that the current path gives the same numbers to 1e-12.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import autograd.numpy as anp
import numpy as onp

from chiropt.design import design_from_dict
from chiropt.sensitivity import compute_quantities, spectrum_sensitivities, value_and_gradient

OUT = Path(__file__).with_name("solver_reference.json")

# scenarios of our own: each model, with and without substrate and films, every lattice
# kind, one and two particles per cell, normal and oblique incidence
CASES = {
    "dipole-square-free-oblique": {
        "lattice": {"kind": "square", "period_nm": 400},
        "particles": [{"radius_nm": 70, "material": "Si"}],
        "illumination": {"wavelength_nm": [640.0, 700.0], "polar_deg": 10.0},
        "region": {"kind": "plane", "height_nm": 15.0}, "model": {"lmax": 1}},
    "dipole-hexagonal-substrate": {
        "lattice": {"kind": "hexagonal", "period_nm": 380},
        "particles": [{"radius_nm": 65, "material": "TiO2"}],
        "substrate": {"material": "SiO2"}, "gap_nm": 5,
        "illumination": {"wavelength_nm": [600.0, 680.0], "polar_deg": 0.0},
        "region": {"kind": "plane", "height_nm": 10.0}, "model": {"lmax": 1}},
    "multipole-square-substrate-normal": {
        "lattice": {"kind": "square", "period_nm": 420},
        "particles": [{"radius_nm": 85, "material": "Si"}],
        "substrate": {"material": "SiO2"}, "gap_nm": 0,
        "illumination": {"wavelength_nm": [680.0, 710.0], "polar_deg": 0.0},
        "region": {"kind": "plane", "height_nm": 10.0}, "model": {"lmax": 3}},
    "multipole-rectangular-film-oblique": {
        "lattice": {"kind": "rectangular", "period_nm": [400, 450]},
        "particles": [{"radius_nm": 75, "material": "Si"}],
        "substrate": {"material": "SiO2"},
        "layers": [{"material": "TiO2", "thickness_nm": 40}], "gap_nm": 10,
        "illumination": {"wavelength_nm": [650.0, 720.0], "polar_deg": 12.0,
                         "azimuth_deg": 30.0},
        "region": {"kind": "plane", "height_nm": 10.0}, "model": {"lmax": 2}},
    "multipole-oblique-two-particles": {
        "lattice": {"kind": "oblique", "period_nm": [520, 480], "angle_deg": 75},
        "particles": [{"radius_nm": 60, "material": "Si", "position_nm": [0, 0]},
                      {"radius_nm": 50, "material": "Si", "position_nm": [230, 150]}],
        "substrate": {"material": "SiO2"}, "gap_nm": 5,
        "illumination": {"wavelength_nm": [690.0, 740.0], "polar_deg": 5.0},
        "region": {"kind": "plane", "height_nm": 10.0}, "model": {"lmax": 2}},
    "multipole-hexagonal-free-slab": {
        "lattice": {"kind": "hexagonal", "period_nm": 450},
        "particles": [{"radius_nm": 90, "material": "Si"}],
        "illumination": {"wavelength_nm": [700.0, 760.0], "polar_deg": 0.0},
        "region": {"kind": "slab", "from_nm": 5.0, "thickness_nm": 20.0},
        "model": {"lmax": 3}},
}

# the quantities whose gradients are kept (each at every wavelength of the case)
GRADIENT_OF = ("R+1", "T-1", "u", "g", "docp+1")


def reference(data: dict) -> dict:
    design = design_from_dict(data)
    q = compute_quantities(design)
    paths = [p for p in design.parameters() if p != "host_index"]
    grads = {}
    for name in GRADIENT_OF:
        for w in range(len(data["illumination"]["wavelength_nm"])):
            s = value_and_gradient(design, lambda qq, n=name, w=w: anp.real(qq[n][w]), paths)
            grads[f"{name}[{w}]"] = {p: onp.asarray(v, float).tolist()
                                     for p, v in s.gradient.items()}
    # per-wavelength sensitivities: reverse mode applied twice (the VJPs differentiated)
    sens = spectrum_sensitivities(design, paths)
    return {"quantities": {k: onp.real(onp.asarray(v)).tolist() for k, v in q.items()},
            "gradients": grads,
            "sensitivities": {n: {p: onp.asarray(v, float).tolist() for p, v in d.items()}
                              for n, d in sens.items() if n in GRADIENT_OF}}


def main() -> None:
    out = {name: {"design": data, **reference(data)} for name, data in CASES.items()}
    OUT.write_text(json.dumps(out, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT} ({len(out)} designs)", file=sys.stderr)


if __name__ == "__main__":
    main()
