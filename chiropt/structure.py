"""From a Design (plus optional traced parameter values) to SI arrays for the solver.

Owns: unit conversion at the configuration boundary (nm -> m, deg -> rad), the
vertical geometry (substrate top at z = 0, films above it, particle bottoms at
``z_top + gap``), material evaluation at the wavelengths, and the particles'
dipole polarizabilities. Every quantity named by ``Design.parameters()`` can be
replaced by an autograd-traced value, so derivatives flow through this module.
Must not import: search, store, report, cli.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval, isbox

from chiropt.errors import MaterialRangeError
from chiropt.design import Design
from chiropt.lattice import Lattice
from chiropt.materials import get_material
from chiropt.particles.mie import (
    coreshell_mie_coefficients,
    dipole_polarizabilities,
    mie_coefficients,
)

NM = 1e-9
C0 = 299_792_458.0


@dataclass
class Structure:
    """SI description of one design at W wavelengths (arrays may be autograd-traced).

    Attributes
    ----------
    wavelength_nm : (W,) vacuum wavelengths [nm]
    k0 : (W,) vacuum wavenumber [1/m]
    n_host : host refractive index (real) [-]
    lattice : Lattice with vectors in [m]
    centres : (N, 3) particle centres [m]; z measured from the substrate top
        (or, with no substrate, from the particle bottoms)
    radii : (N,) outer (equatorial) radii [m]
    half_heights : (N,) vertical half extents [m] (the radius for spheres)
    spherical : tuple of bool, per particle (non-spheres need the multipole model)
    polarizabilities : callable returning ``alpha_e, alpha_m`` (below); the multipole and
        Fourier solvers never call it, so their evaluations skip the dipole Mie terms
    alpha_e, alpha_m : (W, N) electric and magnetic dipole polarizabilities [m^3]
        in the normalization P = p/(eps0 n_h^2) = alpha_e E, Z m = alpha_m Z H
        (properties, made once from ``polarizabilities``)
    eps_particles_imag_positive : bool, all particle materials passive
    z_top : height of the top of the stack (substrate top + films) [m]; 0 without substrate
    eps_substrate : (W,) complex or None
    eps_layers : (L, W) complex
    thicknesses : (L,) [m]
    polar, azimuth : incidence angles [rad] (in the medium of incidence): numbers, or (W,)
        arrays with one direction per wavelength row (a cone's directions solved together,
        ``chiropt.robust.average``)
    side : 'host' or 'substrate'
    tolerance : target relative accuracy of lattice sums and order truncation
    """

    wavelength_nm: Any
    k0: Any
    n_host: Any
    lattice: Lattice
    centres: Any
    radii: Any
    half_heights: Any
    spherical: tuple
    polarizabilities: Any       # () -> (alpha_e, alpha_m), made when first asked for
    z_top: Any
    eps_substrate: Any
    eps_layers: Any
    thicknesses: Any
    polar: Any
    azimuth: Any
    side: str
    tolerance: float

    @cached_property
    def k(self):
        """Host wavenumber n_h k0 [1/m], shape (W,)."""
        return self.n_host * self.k0

    @property
    def has_substrate(self) -> bool:
        return self.eps_substrate is not None

    @property
    def n_incidence(self):
        """Refractive index of the medium the incident wave comes from, (W,)."""
        if self.side == "substrate":
            return np.sqrt(self.eps_substrate)
        return self.n_host * np.ones_like(self.k0)

    @cached_property
    def _alphas(self):
        return self.polarizabilities()

    @property
    def alpha_e(self):
        """(W, N) electric dipole polarizabilities [m^3] (NaN for non-spheres)."""
        return self._alphas[0]

    @property
    def alpha_m(self):
        """(W, N) magnetic dipole polarizabilities [m^3] (NaN for non-spheres)."""
        return self._alphas[1]

    @property
    def basis_azimuth(self):
        """The azimuth that fixes s where an order's q = 0 (``planewaves.order_basis``),
        broadcast against (W, G) order arrays: the number, or (W, 1) per wavelength row."""
        az = self.azimuth
        return az if onp.ndim(getval(az)) == 0 else np.reshape(az, (-1, 1))

    @cached_property
    def k_par(self):
        """Bloch (in-plane incident) wavevector [1/m], shape (W, 2).

        At a fixed normal incidence (polar angle zero and not traced) it is a plain zero
        array: identically zero for every design, so no derivative is carried through it.
        """
        if not isbox(self.polar) and not onp.any(onp.sin(onp.asarray(self.polar))):
            return onp.zeros((len(getval(self.k0)), 2))
        kin = np.real(self.n_incidence) * self.k0 * np.sin(self.polar)
        return np.stack([kin * np.cos(self.azimuth), kin * np.sin(self.azimuth)], axis=-1)


def _lattice_from(design: Design, p: dict) -> Lattice:
    kind = design.lattice.kind
    if kind == "square":
        return Lattice.square(p["lattice.period_nm"] * NM)
    if kind == "hexagonal":
        return Lattice.hexagonal(p["lattice.period_nm"] * NM)
    if kind == "rectangular":
        return Lattice.rectangular(p["lattice.period_nm[0]"] * NM, p["lattice.period_nm[1]"] * NM)
    return Lattice.oblique(p["lattice.period_nm[0]"] * NM, p["lattice.period_nm[1]"] * NM,
                           p["lattice.angle_deg"] * np.pi / 180.0)


def material_index(spec: Any, wavelength_nm, *, key: str, base_dir: str, p: dict | None = None,
                   pkey: str = ""):
    """Complex refractive index (W,) of a material spec at the wavelengths [nm].

    A constant index whose ``pkey.n`` / ``pkey.k`` are in the parameter dict ``p``
    uses those (possibly traced) values, so it can be differentiated.
    """
    if p is not None and pkey and f"{pkey}.n" in p:
        return (p[f"{pkey}.n"] + 1j * p[f"{pkey}.k"]) * np.ones_like(wavelength_nm)
    material = get_material(spec, key=key, base_dir=base_dir)
    try:
        return material.index(wavelength_nm)
    except MaterialRangeError as exc:  # name both keys: the wavelengths and the material
        err = MaterialRangeError("illumination.wavelength_nm", f"{exc.message} (the material "
                                                              f"of {key})")
        err.range_nm = getattr(exc, "range_nm", None)
        raise err from None


def build_structure(design: Design, values: dict[str, Any] | None = None) -> Structure:
    """Assemble the SI :class:`Structure` of ``design``.

    Parameters
    ----------
    design : Design
    values : dict, optional
        Replacements for entries of ``design.parameters()`` (same key paths, user
        units); may hold autograd-traced values.
    """
    p = design.parameters()
    if values:
        values = {k: v for k, v in values.items() if not k.startswith("region.")}
        unknown = set(values) - set(p)
        if unknown:
            from chiropt.errors import InputError
            raise InputError(sorted(unknown)[0], "not a continuous quantity of this design; "
                                                 f"known: {', '.join(sorted(p))}")
        p.update(values)
    wl = p["illumination.wavelength_nm"]
    wl = wl * np.ones(np.shape(getval(wl)))  # keep traced, ensure array
    k0 = 2 * np.pi / (wl * NM)
    n_h = p["host_index"]
    kh = n_h * k0
    base = design.base_dir

    z_top = 0.0
    eps_sub = None
    eps_layers = np.zeros((0, len(getval(wl))), dtype=complex)
    thick = np.zeros(0)
    if design.substrate is not None:
        eps_sub = material_index(design.substrate, wl, key="substrate.material",
                                 base_dir=base) ** 2
        if design.layers:
            eps_layers = np.stack([
                material_index(la.material, wl, key=f"layers[{i}].material", base_dir=base) ** 2
                for i, la in enumerate(design.layers)])
            thick = np.stack([p[f"layers[{i}].thickness_nm"] * NM
                              for i in range(len(design.layers))])
            z_top = np.sum(thick)
        z_base = z_top + p["gap_nm"] * NM
    else:
        z_base = 0.0

    radii, halves, centres = [], [], []
    for i, part in enumerate(design.particles):
        r = p.get(f"particles[{i}].radius_nm", part.radius_nm) * NM
        half = r if part.height_nm is None else p[f"particles[{i}].height_nm"] * NM / 2.0
        radii.append(r)
        halves.append(half)
        centres.append(np.stack([p[f"particles[{i}].position_nm[0]"] * NM,
                                 p[f"particles[{i}].position_nm[1]"] * NM,
                                 z_base + half]))

    def polarizabilities():
        a_e, a_m = [], []
        for i, part in enumerate(design.particles):
            if part.shape != "sphere":
                # no scalar polarizabilities: the multipole model uses the particle's T-matrix
                ae = am = np.full(np.shape(getval(wl)), np.nan + 0j)
            else:
                n_out = material_index(part.material, wl, key=f"particles[{i}].material",
                                       base_dir=base, p=p, pkey=f"particles[{i}].material")
                if part.core_radius_nm is None:
                    a, b = mie_coefficients(kh * radii[i], n_out / n_h, 1)
                else:
                    rc = p[f"particles[{i}].core_radius_nm"] * NM
                    n_core = material_index(part.core_material, wl,
                                            key=f"particles[{i}].core_material",
                                            base_dir=base, p=p,
                                            pkey=f"particles[{i}].core_material")
                    a, b = coreshell_mie_coefficients(kh * rc, kh * radii[i], n_core / n_h,
                                                      n_out / n_h, 1)
                ae, am = dipole_polarizabilities(a[..., 0], b[..., 0], kh)
            a_e.append(ae)
            a_m.append(am)
        return np.stack(a_e, axis=-1), np.stack(a_m, axis=-1)

    return Structure(
        wavelength_nm=wl, k0=k0, n_host=n_h, lattice=_lattice_from(design, p),
        centres=np.stack(centres), radii=np.stack(radii), half_heights=np.stack(halves),
        spherical=tuple(part.shape == "sphere" for part in design.particles),
        polarizabilities=polarizabilities,
        z_top=z_top, eps_substrate=eps_sub, eps_layers=eps_layers, thicknesses=thick,
        polar=p["illumination.polar_deg"] * np.pi / 180.0,
        azimuth=p["illumination.azimuth_deg"] * np.pi / 180.0,
        side=design.illumination.side, tolerance=design.tolerance)
