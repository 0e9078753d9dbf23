"""Fabrication layouts (GDSII) and full-wave set-up files from a design.

Owns: writing a design's array as a GDSII layout (through the ``gdstk`` library) and as
a plain JSON description of the geometry, materials (n, k at the design's wavelengths),
stack and illumination, to seed a full-wave simulation. Must not import: search, store,
report, cli.

Layout conventions: one unit cell as its own GDS cell (``UNIT``), arrayed ``cells x cells``
along the lattice vectors in the top cell (``ARRAY``); each particle's footprint is the
circle of its outer radius (what electron-beam lithography writes for a sphere-like
pillar or a particle site); one GDS layer per material in order of appearance (layer
numbers listed in the JSON and the GDS cell names). Units: micrometre user unit, 1 nm
database precision.
"""

from __future__ import annotations

import math

import json
from pathlib import Path
from typing import Any

import numpy as onp

from chiropt.design import Design, lattice_vectors_nm
from chiropt.errors import InputError

LAYOUT_TOLERANCE_NM = 0.5  # max deviation of the circle polygons from true circles [nm]


def material_layers(design: Design) -> dict[str, int]:
    """GDS layer per particle material label, in order of appearance (from layer 1)."""
    layers: dict[str, int] = {}
    for part in design.particles:
        layers.setdefault(_label(part.material), len(layers) + 1)
    return layers


def _label(spec: Any) -> str:
    if isinstance(spec, dict):
        return f"n={spec['n']:g},k={spec.get('k', 0.0):g}" if "n" in spec else spec["table"]
    return str(spec)


def write_gds(design: Design, path: str | Path, *, cells: int = 10) -> Path:
    """Write the array as GDSII: a unit cell arrayed ``cells x cells`` times.

    Parameters
    ----------
    design : Design
    path : output file (.gds)
    cells : int — number of unit cells along each lattice vector, 1..10000

    Returns
    -------
    Path of the written file.
    """
    import gdstk

    if isinstance(cells, bool) or not isinstance(cells, int) or not 1 <= cells <= 10000:
        raise InputError("--cells", f"got {cells!r}, allowed an integer in [1, 10000]")
    a1, a2 = (v / 1000.0 for v in lattice_vectors_nm(design.lattice))  # um
    layers = material_layers(design)
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    unit = lib.new_cell("UNIT")
    for part in design.particles:
        unit.add(_outline(gdstk, part, layers[_label(part.material)]))
    top = lib.new_cell("ARRAY")
    ref = gdstk.Reference(unit, (0, 0))
    ref.repetition = gdstk.Repetition(columns=cells, rows=cells, v1=tuple(a1), v2=tuple(a2))
    top.add(ref)
    path = Path(path)
    lib.write_gds(str(path))
    return path


def _outline(gdstk, part, layer):
    """The particle's footprint [um]: a disc, an ellipse, a (rounded) rectangle or a ring,
    rotated by ``angle_deg`` about its centre."""
    centre = tuple(onp.asarray(part.position_nm) / 1000.0)
    tol = LAYOUT_TOLERANCE_NM / 1000.0
    angle = math.radians(part.angle_deg or 0.0)
    if part.shape == "box":
        w, d = (v / 1000.0 for v in part.size_nm)
        shape = gdstk.rectangle((-w / 2, -d / 2), (w / 2, d / 2), layer=layer)
        if part.corner_radius_nm:
            shape.fillet(part.corner_radius_nm / 1000.0, tolerance=tol)
        return shape.rotate(angle).translate(*centre)
    if part.shape == "elliptic_cylinder":
        shape = gdstk.ellipse((0.0, 0.0), (part.radius_nm / 1000.0, part.radius_b_nm / 1000.0),
                              tolerance=tol, layer=layer)
        return shape.rotate(angle).translate(*centre)
    inner = part.inner_radius_nm / 1000.0 if part.shape == "ring" else None
    return gdstk.ellipse(centre, part.radius_nm / 1000.0, inner_radius=inner, tolerance=tol,
                         layer=layer)


def fullwave_setup(design: Design) -> dict:
    """A plain description of the design for a full-wave solver, in SI-free user units.

    Returns a JSON-ready dict: lattice vectors [nm], particles (centre x, y, z [nm] with z
    from the substrate top, radius, core), every material's n and k at the design
    wavelengths, the stack (substrate, films bottom first with thicknesses), host index,
    illumination (wavelengths, angles, the incident Jones vectors of both helicities in
    the lab frame) and the region; plus the layer map of :func:`write_gds`.
    """
    from chiropt.planewaves import helicity_vectors, kz_branch, order_basis
    from chiropt.structure import build_structure, material_index

    st = build_structure(design)
    wl = onp.asarray(design.illumination.wavelength_nm, float)

    def nk(spec, key):
        n = onp.asarray(material_index(spec, wl, key=key, base_dir=design.base_dir))
        return {"spec": spec, "n": onp.real(n).tolist(), "k": onp.imag(n).tolist()}

    a1, a2 = lattice_vectors_nm(design.lattice)
    parts = []
    for i, part in enumerate(design.particles):
        entry = {"shape": part.shape, "radius_nm": part.radius_nm,
                 "height_nm": 2 * part.half_height_nm,
                 "centre_nm": (onp.asarray(st.centres[i]) * 1e9).tolist(),
                 "material": nk(part.material, f"particles[{i}].material")}
        for extra in ("radius_b_nm", "angle_deg", "size_nm", "corner_radius_nm",
                      "inner_radius_nm"):
            if getattr(part, extra) is not None:
                entry[extra] = (list(getattr(part, extra)) if extra == "size_nm"
                                else getattr(part, extra))
        if part.core_radius_nm is not None:
            entry["core"] = {"radius_nm": part.core_radius_nm,
                             "material": nk(part.core_material, f"particles[{i}].core_material")}
        parts.append(entry)
    out: dict[str, Any] = {
        "description": "chiropt full-wave set-up: lengths in nm, z measured from the "
                       "substrate top; time dependence exp(-i omega t); Jones vectors are "
                       "the incident E field (unit amplitude) in lab coordinates, helicity "
                       "+1 = positive optical chirality",
        "name": design.name,
        "wavelength_nm": wl.tolist(),
        "lattice": {"kind": design.lattice.kind, "a1_nm": a1.tolist(), "a2_nm": a2.tolist()},
        "host_index": design.host_index,
        "particles": parts,
        "gds_layers": material_layers(design),
    }
    if design.substrate is not None:
        out["substrate"] = nk(design.substrate, "substrate.material")
        out["layers"] = [dict(nk(la.material, f"layers[{i}].material"),
                              thickness_nm=la.thickness_nm)
                         for i, la in enumerate(design.layers)]
        out["gap_nm"] = design.gap_nm
    ill = design.illumination
    t, f = onp.radians(ill.polar_deg), onp.radians(ill.azimuth_deg)
    q = onp.array([[onp.sin(t) * onp.cos(f), onp.sin(t) * onp.sin(f)]])
    kz = kz_branch(1.0, onp.sum(q ** 2, axis=-1))
    s, pu, pd, ku, kd = order_basis(q, kz, 1.0, f)
    p_vec = pd if ill.side == "host" else pu
    k_vec = kd if ill.side == "host" else ku
    jones = onp.asarray(helicity_vectors(s, p_vec))[0]
    out["illumination"] = {
        "side": ill.side, "polar_deg": ill.polar_deg, "azimuth_deg": ill.azimuth_deg,
        "direction": onp.real(onp.asarray(k_vec)[0]).tolist(),
        "jones": {h: {"re": onp.real(jones[j]).tolist(), "im": onp.imag(jones[j]).tolist()}
                  for j, h in enumerate(("+1", "-1"))}}
    if design.region is not None:
        r = design.region
        out["region"] = {"kind": r.kind, "height_nm": r.height_nm, "from_nm": r.from_nm,
                         "thickness_nm": r.thickness_nm,
                         "note": "heights above the highest particle top"}
    return out


def write_fullwave_setup(design: Design, path: str | Path, *,
                         robustness: dict | None = None) -> Path:
    """Write :func:`fullwave_setup` as JSON; with ``robustness`` (a section of
    ``export.robustness.setup_section``) the error model, its samples and the robust
    figures go in as its ``robustness`` entry."""
    path = Path(path)
    setup = fullwave_setup(design)
    if robustness is not None:
        setup["robustness"] = robustness
    path.write_text(json.dumps(setup, indent=1))
    return path
