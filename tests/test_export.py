"""Layout (GDSII) and full-wave set-up export of a design."""

import json
import subprocess
import sys
from pathlib import Path

import gdstk
import numpy as np
import pytest

from chiropt.design import design_from_dict
from chiropt.export.layout import fullwave_setup, write_gds
from chiropt.materials import get_material

ROOT = Path(__file__).resolve().parents[1]


def _design(kind="hexagonal"):
    lattice = ({"kind": kind, "period_nm": 400} if kind != "oblique"
               else {"kind": "oblique", "period_nm": [420, 380], "angle_deg": 70})
    return design_from_dict({
        "lattice": lattice,
        "particles": [{"radius_nm": 70, "material": "Si", "position_nm": [0, 0]},
                      {"radius_nm": 50, "material": "TiO2", "position_nm": [200, 115]}],
        "substrate": {"material": "SiO2"},
        "layers": [{"material": "Si3N4", "thickness_nm": 40}],
        "region": {"kind": "plane", "height_nm": 10},
        "illumination": {"wavelength_nm": [600, 700], "polar_deg": 20, "azimuth_deg": 30},
    })


@pytest.mark.parametrize("kind", ["square", "hexagonal", "oblique"])
def test_gds_layout_round_trip(tmp_path, kind):
    # gdstk (reference library) reads back what we wrote: cells x cells x particles
    # circles, on one layer per material, at the lattice positions, with the radius
    # within the polygon tolerance.
    design = _design(kind)
    path = write_gds(design, tmp_path / "a.gds", cells=4)
    lib = gdstk.read_gds(str(path))
    top = next(c for c in lib.cells if c.name == "ARRAY")
    polys = top.get_polygons()
    assert len(polys) == 4 * 4 * 2
    assert {p.layer for p in polys} == {1, 2}
    from chiropt.design import lattice_vectors_nm
    a1, a2 = (v / 1000 for v in lattice_vectors_nm(design.lattice))
    centres = sorted(tuple(np.round(p.points.mean(axis=0), 4)) for p in polys if p.layer == 1)
    expected = sorted(tuple(np.round(i * a1 + j * a2, 4)) for i in range(4) for j in range(4))
    np.testing.assert_allclose(centres, expected, atol=2e-3)
    radii = np.hypot(*(polys[0].points - polys[0].points.mean(axis=0)).T)
    r_true = 0.07 if polys[0].layer == 1 else 0.05
    assert np.all(np.abs(radii - r_true) < 1e-3)


def test_fullwave_setup_contents():
    d = _design()
    data = json.loads(json.dumps(fullwave_setup(d)))  # JSON-ready
    # materials at the design wavelengths equal the catalogue (refractiveindex.info data)
    n_si = get_material("Si").index(np.array([600.0, 700.0]))
    np.testing.assert_allclose(data["particles"][0]["material"]["n"], n_si.real)
    np.testing.assert_allclose(data["particles"][0]["material"]["k"], n_si.imag)
    # particles sit on the film: centre z = film thickness + radius
    assert data["particles"][1]["centre_nm"][2] == pytest.approx(40 + 50)
    # the incident +1 Jones vector is transverse and has positive optical chirality
    # (docs/theory.md §2): -Im(E* . (k x E)) > 0
    k = np.array(data["illumination"]["direction"])
    e = np.array(data["illumination"]["jones"]["+1"]["re"]) + 1j * np.array(
        data["illumination"]["jones"]["+1"]["im"])
    assert abs(np.dot(k, e)) < 1e-12
    assert -np.imag(np.vdot(e, np.cross(k, e))) > 0.99


def test_export_cli(tmp_path):
    res = subprocess.run([sys.executable, "-m", "chiropt.cli", "export",
                          "configs/near-field-design.yaml", "--gds", str(tmp_path / "x.gds"),
                          "--cells", "3", "--setup", str(tmp_path / "x.json")], cwd=ROOT,
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "x.gds").stat().st_size > 200
    assert json.loads((tmp_path / "x.json").read_text())["lattice"]["kind"] == "square"
    bad = subprocess.run([sys.executable, "-m", "chiropt.cli", "export",
                          "configs/near-field-design.yaml", "--gds", str(tmp_path / "y.gds"),
                          "--cells", "0"], cwd=ROOT, capture_output=True, text=True,
                         timeout=120)
    assert bad.returncode == 2 and "--cells" in bad.stderr


def test_layout_draws_the_fourier_shapes_with_their_areas(tmp_path):
    # footprint areas against the closed forms (box minus its four rounded corners, ring,
    # ellipse pi a b; common practice, no source), to the layout's polygon tolerance
    import math

    import gdstk

    from chiropt.design import design_from_dict
    from chiropt.export.layout import write_gds

    d = design_from_dict({
        "lattice": {"kind": "square", "period_nm": 420},
        "particles": [
            {"shape": "box", "size_nm": [200, 120], "angle_deg": 30, "corner_radius_nm": 20,
             "height_nm": 90, "material": {"n": 3.5}, "position_nm": [-80, 0]},
            {"shape": "ring", "radius_nm": 70, "inner_radius_nm": 30, "height_nm": 140,
             "material": {"n": 2.4}, "position_nm": [120, 120]},
            {"shape": "elliptic_cylinder", "radius_nm": 50, "radius_b_nm": 25,
             "angle_deg": 10, "height_nm": 60, "material": {"n": 2.0},
             "position_nm": [120, -110]}],
        "substrate": {"material": {"n": 1.5}},
        "illumination": {"wavelength_nm": 700},
        "model": {"solver": "fourier", "harmonics": 25}})
    lib = gdstk.read_gds(str(write_gds(d, tmp_path / "a.gds", cells=1)))
    unit = next(c for c in lib.cells if c.name == "UNIT")
    areas = sorted(p.area() * 1e6 for p in unit.polygons)   # nm^2
    expected = sorted([200 * 120 - (4 - math.pi) * 20 ** 2, math.pi * (70 ** 2 - 30 ** 2),
                       math.pi * 50 * 25])
    for got, want in zip(areas, expected, strict=True):
        assert abs(got - want) < 0.02 * want
