"""Cost and convergence of the Fourier modal solver for a silicon disk on glass.

Run by hand: ``python benchmarks/fourier.py [--quick]``. Prints, for a silicon disk
(radius 100 nm, height 120 nm, period 400 nm) standing on glass with the near field 5 nm
above its top:

- seconds per wavelength point at about 100, 200 and 400 harmonics, forward (R, T and
  the region metrics) and value + gradient (one scalar of R and g, by autograd, with
  respect to radius, height, period and wavelength);
- the harmonic count ``harmonics: auto`` picks at tolerance 1e-3 on R, T and g, and the
  last change it saw;
- a disk lifted so that the multipole model is valid, both models side by side.
"""

from __future__ import annotations

import argparse
import time

import numpy as onp
from autograd import grad

from chiropt.design import design_from_dict
from chiropt.model import quantities_of, run_model

KEYS = ["particles[0].radius_nm", "particles[0].height_nm", "lattice.period_nm",
        "illumination.wavelength_nm"]


def disk(model, wavelengths=(800.0,), **over):
    data = {"lattice": {"kind": "square", "period_nm": 400},
            "particles": [{"shape": "cylinder", "radius_nm": 100, "height_nm": 120,
                           "material": "Si"}],
            "substrate": {"material": "SiO2"}, "gap_nm": 0,
            "illumination": {"wavelength_nm": list(wavelengths)},
            "region": {"kind": "plane", "height_nm": 5}, "model": model}
    data.update(over)
    return design_from_dict(data)


def timed(fn, repeat=2):
    fn()
    t = time.perf_counter()
    for _ in range(repeat):
        out = fn()
    return (time.perf_counter() - t) / repeat, out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="100 and 200 harmonics only")
    args = ap.parse_args()
    counts = (100, 200) if args.quick else (100, 200, 400)
    print("silicon disk r 100 nm, h 120 nm, period 400 nm, on glass; plane 5 nm above")
    print(f"{'harmonics':>9} {'kept':>5} {'forward s/pt':>13} {'value+grad s/pt':>16} "
          f"{'R(+1)':>9} {'g':>9}")
    for count in counts:
        d = disk({"solver": "fourier", "harmonics": count})
        x0 = {k: onp.asarray(d.parameters()[k], float) for k in KEYS}

        def f(vals, d=d):
            o = run_model(d, vals)
            return o.fractions["R"][0, 0] + o.metrics["g"][0]

        t_f, out = timed(lambda d=d: run_model(d))
        t_g, _ = timed(lambda f=f, x0=x0: grad(f)(x0), repeat=1)
        q = quantities_of(out)
        print(f"{count:9d} {out.harmonics:5d} {t_f:13.3f} {t_g:16.3f} "
              f"{float(q['R+1'][0]):9.5f} {float(q['g'][0]):9.5f}")
    d = disk({"solver": "fourier", "harmonics": "auto", "harmonics_tolerance": 1e-3,
              "harmonics_max": 441 if args.quick else 841})
    t, out = timed(lambda: run_model(d), repeat=1)
    print(f"auto at tolerance 1e-3: {out.harmonics} harmonics, last change "
          f"{out.harmonics_change:.2e} ({t:.1f} s)")
    over = dict(particles=[{"shape": "cylinder", "radius_nm": 60, "height_nm": 80,
                            "material": "Si"}], gap_nm=40,
                region={"kind": "plane", "height_nm": 40})
    for model in ({"lmax": 6}, {"solver": "fourier", "harmonics": 301}):
        t, out = timed(lambda model=model: run_model(disk(model, (750.0,), **over)), repeat=1)
        q = quantities_of(out)
        name = "multipole lmax 6" if "lmax" in model else "fourier 301"
        print(f"lifted disk, {name:17s}: R {float(q['R+1'][0]):.5f} T "
              f"{float(q['T+1'][0]):.5f} u {float(q['u'][0]):.5f} g {float(q['g'][0]):.5f} "
              f"({t:.2f} s)")


if __name__ == "__main__":
    main()
