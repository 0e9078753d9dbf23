"""Fourier modal solution of a Design: particles standing on the stack, as patterned layers.

Owns: turning a Design's structure into a :class:`~chiropt.fourier.stack.FourierStack`
(films, the gap, the particles' cross-sections as patterned sub-layers split where their
heights differ, spheres and spheroids staircased into slices), solving it for both
incident helicities, and returning the common :class:`chiropt.solution.Solution` record
(order amplitudes above and below, referenced as the other solvers do), so far field,
near fields and metrics work unchanged. Must not import: solve (the dipole solver),
multipole, fields, metrics, search, store, report, cli.

Conventions: as ``chiropt.solution`` (SI units, (s, p) components of each order,
up-going waves referenced at the stack top ``z_top``, the exit waves at z = 0 in the
substrate, incident helicity h with components (i h, 1)/sqrt(2) on (s, p)).
Harmonic j of the Fourier solver is diffraction order j of ``OrderSet``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError
from chiropt.fourier.harmonics import shell_cut
from chiropt.fourier.shapes import Circle, Ellipse, Rectangle, Ring
from chiropt.fourier.stack import FourierLayer, FourierStack, outgoing, solve_stack
from chiropt.solution import (
    Solution,
    background_components,
    far_orders_and_anomalies,
    make_orders,
    substrate_basis,
)
from chiropt.structure import Structure

NM = 1e-9
DEFAULT_SLICES = 24


@dataclass
class FourierSolution(Solution):
    """A :class:`Solution` from the Fourier modal method.

    Extra attributes: ``harmonics`` (count M), ``stack_solution`` (the solved layered
    structure, for fields inside the patterned layers), ``z_interface`` (the top of the
    tallest particle, where the host begins) [m], ``layer_bounds`` ((L, 2) bottom and top
    of every layer [m]). Every order of ``orders`` is a computed harmonic, so near fields
    above the particles are exact sums over them (``complete_orders``).
    """

    harmonics: int = 0
    stack_solution: Any = None
    z_interface: Any = None
    layer_bounds: Any = None
    complete_orders: bool = True
    incoming: Any = None
    pieces: Any = None
    interior: bool = False

    def fields_at(self, xy, z, cache: dict | None = None):
        """E and Z H (W, 2, P, 3) [V/m] at in-plane points ``xy`` (P, 2) [m] and height
        ``z`` [m] (plain), anywhere above the substrate: in the host, the films, between
        and inside the particles (needs the solve made with ``interior=True``)."""
        from chiropt.fourier.interior import harmonic_fields_at, point_fields

        if not self.interior:
            raise ValueError("fields inside the layers need solve_fourier(..., interior=True)")
        harm = harmonic_fields_at(self.stack_solution, self.layer_bounds, self.z_interface,
                                  z, from_above=self.incoming, cache=cache)
        return point_fields(self.stack_solution, harm, xy)

    def distance_to_particles(self, xy, z):
        """Signed distance [m] from points (P, 2) at height z [m] to the nearest particle
        (negative inside one), over the particles' periodic images (plain values)."""
        plain = self.structure.lattice.plain()
        a1, a2 = onp.asarray(plain.a1), onp.asarray(plain.a2)
        best = onp.full(len(xy), onp.inf)
        for bottom, top, shape in self.pieces:
            for i in (-1, 0, 1):
                for j in (-1, 0, 1):
                    sx, sy = i * a1 + j * a2
                    side = shape.distance(xy[:, 0] - sx, xy[:, 1] - sy)
                    if bottom <= z <= top:
                        d = side
                    else:
                        dz = z - top if z > top else bottom - z
                        d = onp.hypot(onp.maximum(side, 0.0), dz)
                    best = onp.minimum(best, d)
        return best


def _in_plane(vec):
    """(W, G, 3) -> x and y components (W, G)."""
    return vec[..., 0], vec[..., 1]


def _to_xy(comp, s, p):
    """(s, p) components (W, C, G, 2) on basis s, p (W, G, 3) -> (W, 2G, C) (E_x; E_y)."""
    sx, sy = _in_plane(s)
    px, py = _in_plane(p)
    ex = comp[..., 0] * sx[:, None] + comp[..., 1] * px[:, None]
    ey = comp[..., 0] * sy[:, None] + comp[..., 1] * py[:, None]
    return np.transpose(np.concatenate([ex, ey], axis=-1), (0, 2, 1))


def _to_sp(e, s, p):
    """(W, 2G, C) in-plane fields -> (s, p) components (W, C, G, 2) on s, p (W, G, 3)."""
    G = s.shape[1]
    ex = np.transpose(e[:, :G], (0, 2, 1))
    ey = np.transpose(e[:, G:], (0, 2, 1))
    sx, sy = _in_plane(s)
    px, py = _in_plane(p)
    det = (sx * py - sy * px)[:, None]
    a_s = (py[:, None] * ex - px[:, None] * ey) / det
    a_p = (-sy[:, None] * ex + sx[:, None] * ey) / det
    return np.stack([a_s, a_p], axis=-1)


def column_section(part, i: int, p: dict, radius, xy):
    """The cross-section of a column-like particle (cylinder, elliptic cylinder, box,
    ring) as a shape of ``chiropt.fourier.shapes``, sizes from the (traced) parameters."""
    key = f"particles[{i}]."
    if part.shape == "cylinder":
        return Circle(radius, xy)
    if part.shape == "ring":
        return Ring(radius, p[key + "inner_radius_nm"] * NM, xy)
    angle = p[key + "angle_deg"] * np.pi / 180.0
    if part.shape == "elliptic_cylinder":
        return Ellipse(radius, p[key + "radius_b_nm"] * NM, angle=angle, centre=xy)
    corner = p.get(key + "corner_radius_nm", 0.0) * NM
    return Rectangle(p[key + "size_nm[0]"] * NM, p[key + "size_nm[1]"] * NM, angle=angle,
                     centre=xy, corner_radius=corner)


def particle_layers(design, st: Structure, values, eps_host, slices: int = DEFAULT_SLICES):
    """Patterned sub-layers [(bottom, top, inclusions)] of the particles, bottom to top.

    Cylinders are discs over their height; spheres and spheroids are staircased into
    ``slices`` slices of equal thickness, each a disc of the section's radius at the
    slice's mid-height (the staircase error falls like 1/slices^2; compare two slice
    counts to see it). Sub-layers are split wherever a particle starts or ends.
    """
    from chiropt.structure import material_index

    p = design.parameters()
    if values:
        p.update({k: v for k, v in values.items() if not k.startswith("region.")})
    wl = st.wavelength_nm
    pieces = []   # (bottom, top, shape, eps) per particle piece
    for i, part in enumerate(design.particles):
        n = material_index(part.material, wl, key=f"particles[{i}].material",
                           base_dir=design.base_dir, p=p, pkey=f"particles[{i}].material")
        if part.core_radius_nm is not None:
            raise InputError(f"particles[{i}].core_radius_nm", "coated spheres are not "
                             "supported by model.solver fourier; use the multipole model")
        centre = st.centres[i]
        xy = (centre[0], centre[1])
        half, r = st.half_heights[i], st.radii[i]
        if part.shape != "sphere" and part.shape != "spheroid":
            pieces.append((centre[2] - half, centre[2] + half,
                           column_section(part, i, p, r, xy), n ** 2))
            continue
        edges = onp.linspace(-1.0, 1.0, slices + 1)
        mids = 0.5 * (edges[1:] + edges[:-1])
        for lo, hi, mid in zip(edges[:-1], edges[1:], mids, strict=True):
            rad = r * onp.sqrt(1.0 - mid ** 2)
            pieces.append((centre[2] + lo * half, centre[2] + hi * half, Circle(rad, xy), n ** 2))
    cuts = sorted({float(getval(b)) for b, _, _, _ in pieces}
                  | {float(getval(t)) for _, t, _, _ in pieces})
    # traced cut positions: the plain cut values identify the piece boundaries
    traced = {}
    for b, t, _, _ in pieces:
        traced.setdefault(float(getval(b)), b)
        traced.setdefault(float(getval(t)), t)
    layers = []
    for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
        if hi - lo <= 1e-15:
            continue
        inside = [(shape, eps) for b, t, shape, eps in pieces
                  if float(getval(b)) <= lo + 1e-15 and float(getval(t)) >= hi - 1e-15]
        layers.append((traced[lo], traced[hi], inside))
    return layers, [(float(getval(b)), float(getval(t)), shape) for b, t, shape, _ in pieces]


def fourier_stack(design, st: Structure, values, count: int, *,
                  factorization: str = "normal", slices: int = DEFAULT_SLICES):
    """The :class:`FourierStack` of a design and the layer bounds (L, 2) [m]."""
    W = len(getval(st.k0))
    ones = np.ones(W) + 0j
    eps_host = st.n_host ** 2 * ones
    layers, bounds = [], []
    z = 0.0
    for i in range(len(getval(st.thicknesses))):
        layers.append(FourierLayer(st.thicknesses[i], st.eps_layers[i]))
        bounds.append((z, z + st.thicknesses[i]))
        z = z + st.thicknesses[i]
    parts, pieces = particle_layers(design, st, values, eps_host, slices)
    bottom = parts[0][0]
    if float(getval(bottom)) - float(getval(z)) > 1e-15:
        layers.append(FourierLayer(bottom - z, eps_host))
        bounds.append((z, bottom))
    for lo, hi, inclusions in parts:
        if not inclusions:
            layers.append(FourierLayer(hi - lo, eps_host))
        else:
            layers.append(FourierLayer(hi - lo, eps_host, inclusions))
        bounds.append((lo, hi))
    eps_below = st.eps_substrate if st.has_substrate else eps_host
    mn_cut = shell_cut(st.lattice, count)
    from chiropt.lattice import order_indices

    mn = order_indices(st.lattice, mn_cut)
    stack = FourierStack(lattice=st.lattice, k0=st.k0, k_par=st.k_par, eps_above=eps_host,
                         eps_below=eps_below * ones, layers=layers, mn=mn,
                         factorization=factorization)
    return stack, bounds, mn_cut, pieces


def solve_fourier(design, st: Structure, values=None, *, harmonics: int,
                  factorization: str = "normal", slices: int = DEFAULT_SLICES,
                  interior: bool = False, warn: bool = True) -> FourierSolution:
    """Solve a design's array with the Fourier modal method, both helicities.

    Parameters
    ----------
    design : Design; st : its Structure (possibly traced); values : traced replacements
    harmonics : int — requested number of plane-wave harmonics (whole shells are kept)
    factorization : 'normal' or 'laurent' (``chiropt.fourier.permittivity``)
    slices : staircase slices of spheres and spheroids
    interior : keep what fields inside the layers need

    Returns
    -------
    FourierSolution

    References
    ----------
    Moharam et al., J. Opt. Soc. Am. A 12, 1068 (1995); Li, J. Opt. Soc. Am. A 13, 1024
    (1996) and 14, 2758 (1997); Schuster et al., J. Opt. Soc. Am. A 24, 2880 (2007);
    Liu & Fan, Comput. Phys. Commun. 183, 2233 (2012).
    """
    stack, bounds, g_cut, pieces = fourier_stack(design, st, values, harmonics,
                                                 factorization=factorization, slices=slices)
    orders = make_orders(st, g_cut)
    if len(orders.mn) != len(stack.mn) or not onp.array_equal(orders.mn, stack.mn):
        raise AssertionError("harmonic set and order set differ")
    sol = solve_stack(stack, interior=interior)
    z_int = bounds[-1][1]
    W = len(getval(st.k0))
    G = len(orders.mn)
    kz = orders.kz
    D0, _, _ = background_components(st, orders, None)   # incident at z_top (host side)
    zeros = np.zeros((W, 2, G, 2), dtype=complex)
    first = (onp.arange(G) == 0)[None, None, :, None]
    if st.side == "host":
        inc = D0[:, :, None, :] * np.exp(-1j * kz[:, 0] * (z_int - st.z_top))[:, None, None, None]
        e_in = _to_xy(inc * first, orders.s, orders.p_down)
        up_e, down_e = outgoing(sol, from_above=e_in)
        incident_sp = D0
        incoming = e_in
    else:
        hel = np.array([[1j, 1.0], [-1j, 1.0]]) / np.sqrt(2.0)
        _, pu2, _, _ = substrate_basis(st, orders)
        inc = hel[None, :, None, :] * np.ones((W, 1, 1, 1)) * first
        up_e, down_e = outgoing(sol, from_below=_to_xy(inc, orders.s, pu2))
        incident_sp = np.zeros((W, 2, 2), dtype=complex)
        incoming = None
        if interior:
            raise InputError("illumination.side", "regions between the particles are "
                             "computed for illumination from the host side only")
    up_sp = _to_sp(up_e, orders.s, orders.p_up)
    up_sp = up_sp * np.exp(-1j * kz * (z_int - st.z_top))[:, None, :, None]
    if st.has_substrate:
        _, _, pd2, _ = substrate_basis(st, orders)
    else:
        pd2 = orders.p_down
    exit_sp = _to_sp(down_e, orders.s, pd2)
    n_far, rayleigh = far_orders_and_anomalies(st, orders, warn=warn)
    N = len(getval(st.radii))
    moments = np.zeros((W, 2, N, 6), dtype=complex)
    eps_exit = st.eps_substrate if st.has_substrate else st.n_host ** 2 * np.ones_like(st.k0)
    return FourierSolution(structure=st, orders=orders, moments=moments, up_sp=up_sp,
                           down_sp=zeros, exit_sp=exit_sp, incident_sp=incident_sp,
                           local_E=moments[..., :3], local_H=moments[..., 3:],
                           rayleigh=rayleigh, eps_exit=eps_exit, n_far=n_far,
                           harmonics=G, stack_solution=sol, z_interface=z_int,
                           layer_bounds=bounds, incoming=incoming, pieces=pieces,
                           interior=interior)
