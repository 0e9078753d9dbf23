"""Truncation of the stack-reflected multipole interaction: error against tolerance."""

import numpy as np
import pytest

from chiropt.design import design_from_dict
from chiropt.multipole.solve import _reflected_orders_radius, solve_multipole
from chiropt.multipole.tmatrix import design_particles, stack_tmatrices
from chiropt.sphericalwaves import mode_table
from chiropt.structure import build_structure

TWO = [{"radius_nm": 80, "material": {"n": 3.6, "k": 0.0}, "position_nm": [0, 0]},
       {"radius_nm": 55, "material": {"n": 2.4, "k": 0.0}, "position_nm": [210, 140]}]


def _design(tol, *, radius, period, gap, particles=None):
    return design_from_dict({
        "lattice": {"kind": "square", "period_nm": period},
        "particles": particles or [{"radius_nm": radius, "material": {"n": 3.6, "k": 0.0}}],
        "host_index": 1.0,
        "illumination": {"wavelength_nm": [500.0, 800.0], "polar_deg": 20, "azimuth_deg": 30},
        "substrate": {"material": {"n": 1.46, "k": 0.0}}, "gap_nm": gap,
        "model": {"tolerance": tol}})


def _solve(design, lmax, g_max=None):
    st = build_structure(design)
    T = stack_tmatrices(design_particles(design), st.k, lmax)
    return st, solve_multipole(st, T, lmax, g_max=g_max)


def _relative_errors(sol, ref):
    """Largest relative error of f and e over wavelengths and helicities, whole vectors
    and each degree l separately."""
    _, ls, _ = mode_table(sol.lmax)
    out = []
    for a, b in ((sol.coefficients, ref.coefficients), (sol.exciting, ref.exciting)):
        a, b = np.asarray(a), np.asarray(b)
        out.append(np.max(np.linalg.norm(a - b, axis=(-1, -2))
                          / np.linalg.norm(b, axis=(-1, -2))))
        for l in range(1, sol.lmax + 1):
            sel = ls == l
            out.append(np.max(np.linalg.norm((a - b)[..., sel], axis=(-1, -2))
                              / np.linalg.norm(b[..., sel], axis=(-1, -2))))
    return max(out)


@pytest.mark.parametrize("geometry, lmax", [
    ({"radius": 150, "period": 500, "gap": 5.0}, 3),
    ({"radius": 150, "period": 500, "gap": 5.0}, 4),
    ({"radius": 90, "period": 450, "gap": 10.0}, 2),
    ({"radius": None, "period": 450, "gap": 10.0, "particles": TWO}, 2),
])
def test_reflected_order_cut_meets_tolerance(geometry, lmax):
    # common practice, no source: truncation error measured against a reference with
    # tolerance 1e-14 and 1.3 x the reflected-order radius; the coefficients f and e
    # (whole and per degree l) must stay below the requested tolerance with margin
    ref_design = _design(1e-14, **geometry)
    st_ref = build_structure(ref_design)
    _, ref = _solve(ref_design, lmax, g_max=1.3 * _reflected_orders_radius(st_ref, lmax))
    for tol in (1e-4, 1e-7):
        _, sol = _solve(_design(tol, **geometry), lmax)
        assert len(sol.orders.mn) < len(ref.orders.mn)
        assert _relative_errors(sol, ref) < 0.2 * tol
