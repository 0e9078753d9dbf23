"""``evaluate --fields`` for every model, checked by Parseval's theorem: the cell average
of |E|^2 on the written grid equals the sum of |E_G|^2 over the diffraction orders
(# Parseval's theorem for a lattice-periodic field; the grid resolves every order kept).
"""

from __future__ import annotations

import numpy as onp
import pytest

from chiropt.cli import main
from chiropt.design import load_design
from chiropt.fields import NM, order_content, order_fields, representative_plane_nm
from chiropt.model import maps_tolerance, run_model

DESIGN = """\
lattice: {{kind: square, period_nm: 420}}
particles:
  - {{shape: sphere, radius_nm: 75, material: Si}}
{substrate}illumination: {{wavelength_nm: [650, 700]}}
region: {{kind: plane, height_nm: 20}}
model: {{lmax: {lmax}}}
"""


@pytest.mark.parametrize("substrate", ["", "substrate: {material: SiO2}\n"])
@pytest.mark.parametrize("lmax", [1, 2, 3, 4])
def test_fields_file_for_every_model_obeys_parseval(tmp_path, capsys, lmax, substrate):
    path = tmp_path / "d.yaml"
    path.write_text(DESIGN.format(lmax=lmax, substrate=substrate))
    npz = tmp_path / "f.npz"
    assert main(["evaluate", str(path), "--json", "--fields", str(npz), "--grid", "64"]) == 0
    data = onp.load(npz)
    mean_grid = onp.mean(onp.sum(onp.abs(data["E"]) ** 2, axis=-1), axis=(2, 3))  # (W, 2)
    design = load_design(path)
    sol = run_model(design, maps=True).solution
    z = representative_plane_nm(sol.structure, design.region) * NM
    E, _ = order_fields(order_content(sol, z, tol=maps_tolerance(design)))
    orders_sum = onp.sum(onp.abs(onp.asarray(E)) ** 2, axis=(2, 3))
    assert onp.allclose(mean_grid, orders_sum, rtol=1e-10, atol=0)


REF = """\
lattice: {{kind: square, period_nm: 420}}
particles: [{{shape: sphere, radius_nm: 75, material: Si}}]
{substrate}illumination: {{wavelength_nm: [600, 700, 800]}}
region: {{kind: plane, height_nm: 20}}
model: {{lmax: {lmax}}}
"""


@pytest.mark.parametrize("substrate", ["", "substrate: {material: SiO2}\n"])
@pytest.mark.parametrize("lmax", [1, 3])
def test_default_tolerance_bounds_near_fields_to_1e6(tmp_path, monkeypatch, lmax, substrate):
    # common practice, no source: convergence against a tightly truncated reference
    import chiropt.model as model
    from chiropt.fields import field_maps
    from chiropt.response import evaluate

    path = tmp_path / "d.yaml"
    path.write_text(REF.format(lmax=lmax, substrate=substrate))
    design = load_design(path)

    def fields_and_averages():
        r = evaluate(design, keep_solution=True)
        sol = r.solution
        z = representative_plane_nm(sol.structure, design.region) * NM
        E, _ = field_maps(order_content(sol, z, tol=model.maps_tolerance(design)),
                          sol.structure.lattice.plain(), 40)
        avg = onp.stack([r.metrics["u"], r.metrics["g"], r.metrics["docp"]["+1"],
                         r.metrics["docp"]["-1"]])
        return onp.sum(onp.abs(onp.asarray(E)) ** 2, axis=-1), avg

    I, avg = fields_and_averages()
    monkeypatch.setattr(model, "metrics_tolerance", lambda d: 1e-9)  # maps: 1e-18
    I_ref, avg_ref = fields_and_averages()
    assert onp.max(onp.abs(avg - avg_ref) / onp.abs(avg_ref)) < 1e-6
    assert onp.max(onp.abs(I - I_ref) / I_ref) < 1e-6
