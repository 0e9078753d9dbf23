"""Near-field metrics speed: region metrics of both helicities vs. the far-field spectrum.

Run by hand: ``python benchmarks/metrics.py``. Prints figures; asserts nothing.
Target (brief: metrics): region metrics cost at most +30% over the far-field spectrum
(solve + R, T, A). The metrics reuse the far-field solve (evanescent orders come from the
moments), so the extra cost is the order sums: it grows with the number of orders the
region needs (tolerance, height above the tops).
"""

from __future__ import annotations

from chiropt.design import RegionSpec, design_from_dict
from chiropt.farfield import power_fractions
from chiropt.metrics import region_metrics
from chiropt.solve import solve
from chiropt.structure import build_structure
from timing import median_seconds

CASES = {
    "homogeneous host": {},
    "SiO2 substrate": {"substrate": {"material": "SiO2"}},
}
REGIONS = {
    "plane 10 nm": RegionSpec("plane", height_nm=10.0),
    "slab 5-65 nm": RegionSpec("slab", from_nm=5.0, thickness_nm=60.0),
}


def _design(extra):
    data = {"lattice": {"kind": "square", "period_nm": 420},
            "particles": [{"radius_nm": 75, "material": "Si"}],
            "host_index": 1.0,
            "illumination": {"wavelength_nm": {"start": 550, "stop": 900, "points": 71}},
            "model": {"tolerance": 1e-8}}
    data.update(extra)
    return design_from_dict(data)


def _median_ms(f, repeats=15):
    return 1e3 * median_seconds(f, repeats)


def main():
    for name, extra in CASES.items():
        st = build_structure(_design(extra))
        far = _median_ms(lambda st=st: power_fractions(solve(st, warn=False)))
        print(f"{name}: far-field spectrum {far:.2f} ms (71 wavelengths)")
        sol = solve(st, warn=False)
        for rname, region in REGIONS.items():
            for tol in (1e-8, 1e-6, 1e-4):
                n = region_metrics(sol, region, tol=tol, area_grid=0)["n_orders"]
                t0 = _median_ms(lambda s=sol, r=region, t=tol: region_metrics(
                    s, r, tol=t, area_grid=0))
                t1 = _median_ms(lambda s=sol, r=region, t=tol: region_metrics(s, r, tol=t),
                                repeats=5)
                print(f"  {rname:13s} tol {tol:.0e}: {n:4d} orders, metrics {t0:6.2f} ms "
                      f"(+{100 * t0 / far:4.0f}%), with area fraction (48x48) {t1:6.2f} ms")


if __name__ == "__main__":
    main()
