"""Near fields as sums of diffraction orders: amplitudes, maps, the fields file."""

import numpy as np
import pytest

from chiropt.design import RegionSpec, design_from_dict
from chiropt.errors import InputError
from chiropt.fields import (
    cell_grid,
    field_maps,
    order_content,
    order_fields,
    particle_top,
    region_g_max,
    region_span,
    write_fields_npz,
)
from chiropt.solve import solve
from chiropt.structure import build_structure


def _structure(extra=None, particles=None, wl=(550.0, 700.0, 810.0), polar=20.0, azimuth=30.0,
               host=1.0, period=420.0):
    data = {"lattice": {"kind": "square", "period_nm": period},
            "particles": particles or [{"radius_nm": 75, "material": "Si"}],
            "host_index": host,
            "illumination": {"wavelength_nm": list(wl), "polar_deg": polar,
                             "azimuth_deg": azimuth}}
    data.update(extra or {})
    return build_structure(design_from_dict(data))


TWO = [{"radius_nm": 75, "material": "Si"},
       {"radius_nm": 40, "material": "TiO2", "position_nm": [200, 150]}]
STACK = {"substrate": {"material": "SiO2"}, "gap_nm": 20,
         "layers": [{"material": "Si3N4", "thickness_nm": 40}]}


@pytest.mark.parametrize("extra", [{}, STACK], ids=["no-substrate", "film-on-substrate"])
def test_order_amplitudes_match_the_solver_orders(extra):
    # Two implementations of docs/theory.md §5, §10 (sheet emission + per-order stack reflection):
    # ours from the moments, the solver's when asked to keep the same orders.
    st = _structure(extra, particles=TWO)
    z = float(particle_top(st)) + 10e-9
    g_max = region_g_max(st, z, tol=1e-6)
    content = order_content(solve(st, warn=False), z, g_max=g_max)
    wide = solve(st, g_max=g_max, warn=False)
    G = len(content.mn)
    np.testing.assert_array_equal(wide.orders.mn[:G], content.mn)
    ref = (wide.up_sp * np.exp(1j * wide.orders.kz * (z - st.z_top))[:, None, :, None])[:, :, :G]
    ours = np.transpose(content.up, (0, 1, 3, 2))  # components-first layout
    assert np.max(np.abs(ours - ref)) < 1e-12 * np.max(np.abs(ref))


def test_bare_plane_wave_map_is_the_incident_wave():
    # docs/theory.md §1, §2: incident k = k (sin t cos f, sin t sin f, -cos t), helicity vector
    # (p + i h s)/sqrt(2) on the downward basis, unit amplitude, phase 0 at the origin.
    host = 1.33
    st = _structure(particles=[{"radius_nm": 60, "material": {"n": host}}], host=host,
                    wl=(640.0,), polar=35.0, azimuth=25.0)
    sol = solve(st, warn=False)
    z = float(particle_top(st)) + 37e-9
    n = 5
    E, ZH = field_maps(order_content(sol, z, tol=1e-6), st.lattice, n)
    t, f = np.radians(35.0), np.radians(25.0)
    kv = st.k[0] * np.array([np.sin(t) * np.cos(f), np.sin(t) * np.sin(f), -np.cos(t)])
    khat = kv / st.k[0]
    s = np.array([-np.sin(f), np.cos(f), 0.0])
    p = np.cross(s, khat)
    rho = cell_grid(st.lattice, n)
    pts = np.concatenate([rho, np.full(rho.shape[:2] + (1,), z)], axis=-1)
    phase = np.exp(1j * pts @ kv)
    for i, h in enumerate((1, -1)):
        e = (p + 1j * h * s) / np.sqrt(2)
        np.testing.assert_allclose(E[0, i], phase[..., None] * e, atol=1e-12)
        np.testing.assert_allclose(ZH[0, i], phase[..., None] * np.cross(khat, e), atol=1e-12)


def test_every_order_is_transverse():
    # Gauss's law for each plane wave: k . E = 0 (bilinear, also for evanescent orders),
    # docs/theory.md §5 basis.
    st = _structure(particles=TWO)
    z = float(particle_top(st)) + 5e-9
    content = order_content(solve(st, warn=False), z, tol=1e-4)
    E, ZH = order_fields(content)
    _, _, _, ku, _ = content.basis()
    scale = np.max(np.abs(E))
    assert np.max(np.abs(np.sum(ku[:, None, 1:] * E[:, :, 1:], axis=-1))) < 1e-12 * scale
    assert np.max(np.abs(np.sum(ku[:, None, 1:] * ZH[:, :, 1:], axis=-1))) < 1e-12 * scale


def test_grid_follows_the_contract():
    # docs/cli.md: grid points (i a1 + j a2)/N, i, j = 0..N-1, starting at the origin.
    st = build_structure(design_from_dict({
        "lattice": {"kind": "oblique", "period_nm": [400, 380], "angle_deg": 70},
        "particles": [{"radius_nm": 50, "material": "Si"}],
        "illumination": {"wavelength_nm": 700}}))
    g = cell_grid(st.lattice, 4)
    a1, a2 = np.asarray(st.lattice.a1), np.asarray(st.lattice.a2)
    np.testing.assert_allclose(g[0, 0], 0.0)
    np.testing.assert_allclose(g[3, 2], (3 * a1 + 2 * a2) / 4, rtol=1e-14)


def test_fields_file(tmp_path):
    # docs/cli.md `--fields`: keys, shapes, H stored as Z0 H = n_host Z H.
    host = 1.33
    st = _structure(host=host, wl=(700.0, 800.0))
    sol = solve(st, warn=False)
    z_nm = float(particle_top(st)) / 1e-9 + 10.0
    data = write_fields_npz(tmp_path / "f.npz", sol, z_nm=z_nm, n=8, tol=1e-4)
    with np.load(tmp_path / "f.npz") as f:
        assert set(f.files) == {"x_nm", "y_nm", "z_nm", "E", "H", "wavelength_nm"}
        assert f["E"].shape == f["H"].shape == (2, 2, 8, 8, 3)
        assert f["x_nm"].shape == (8, 8)
        assert float(f["z_nm"]) == pytest.approx(z_nm)
        np.testing.assert_allclose(f["wavelength_nm"], [700.0, 800.0])
        E, ZH = field_maps(order_content(sol, z_nm * 1e-9, tol=1e-4), st.lattice, 8)
        np.testing.assert_allclose(f["H"], host * ZH, rtol=1e-13, atol=1e-15)
        np.testing.assert_allclose(f["E"], data["E"])


def test_region_span_plane_and_slab():
    # Design spec (RegionSpec): heights above the highest particle top.
    st = _structure(extra={"substrate": {"material": "SiO2"}, "gap_nm": 20})
    top = 20e-9 + 150e-9
    lo, hi = region_span(st, RegionSpec("plane", height_nm=12.0))
    assert lo == hi == pytest.approx(top + 12e-9)
    lo, hi = region_span(st, RegionSpec("slab", from_nm=5.0, thickness_nm=30.0))
    assert (lo, hi) == (pytest.approx(top + 5e-9), pytest.approx(top + 35e-9))


@pytest.mark.parametrize("bad,match", [
    (lambda sol, st: order_content(sol, float(particle_top(st)) - 5e-9), "below the particle"),
    (lambda sol, st: cell_grid(st.lattice, 0), "grid"),
    (lambda sol, st: region_span(st, RegionSpec("volume")), "plane, slab"),
    (lambda sol, st: region_g_max(st, 1e-6, tol=2.0), r"\(0, 1\)"),
])
def test_bad_input_raises(bad, match):
    st = _structure(wl=(700.0,))
    sol = solve(st, warn=False)
    with pytest.raises(InputError, match=match):
        bad(sol, st)
