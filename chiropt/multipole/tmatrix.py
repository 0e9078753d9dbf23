"""T-matrices of particles in the VSWF basis of ``chiropt.sphericalwaves``.

Owns: the T-matrix interface (anything with ``tmatrix(k_host, lmax)`` returning
(W, 2K, 2K)), sphere and core-shell T-matrices from the Mie coefficients
(differentiable), the T-matrices of a Design's particles, and the choice of lmax from
the Mie coefficients (``auto``).
Must not import: solve, fields, metrics, search, store, report, cli.

Conventions: f = T e (outgoing from exciting coefficients), modes ordered as in
``chiropt.sphericalwaves`` (l, m, then N/electric before M/magnetic). A sphere has
T = diag(-a_l) on N modes and diag(-b_l) on M modes (Bohren & Huffman 1983 coefficients;
docs/theory.md §4: "a sphere gives T = diag(-b_n, -a_n)").
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval, isbox

from chiropt.errors import InputError
from chiropt.sphericalwaves import mode_table
from chiropt.particles.mie import coreshell_mie_coefficients, mie_coefficients

NM = 1e-9


class TMatrixSource(Protocol):
    """A particle that can give its T-matrix (non-spherical particles plug in here)."""

    def tmatrix(self, k_host, lmax: int):
        """T-matrix (W, 2K, 2K) at host wavenumbers k_host (W,) [1/m]."""
        ...


def diagonal_tmatrix(a, b, lmax: int):
    """T-matrix of a rotationally symmetric (spherical) scatterer from a_l, b_l.

    Parameters
    ----------
    a, b : arrays (..., lmax) — electric and magnetic Mie coefficients, [..., l-1] [-]
    lmax : int

    Returns
    -------
    array (..., 2K, 2K) — diag(-a_l) on N modes, diag(-b_l) on M modes [-].

    References
    ----------
    Bohren & Huffman (1983) eqs. 4.37, 4.45 (scattered/incident coefficient ratios);
    Mishchenko, Travis & Lacis, Scattering, Absorption, and Emission of Light by Small
    Particles (CUP 2002), §5.8 (sphere T-matrix).
    """
    tau, ls, _ = mode_table(lmax)
    sel_a = onp.zeros((lmax, len(tau)))
    sel_b = onp.zeros((lmax, len(tau)))
    for u, (t, l) in enumerate(zip(tau, ls, strict=True)):
        (sel_a if t == 0 else sel_b)[l - 1, u] = 1.0
    diag = -(np.dot(a[..., :lmax], sel_a) + np.dot(b[..., :lmax], sel_b))
    return diag[..., :, None] * onp.eye(len(tau))


def sphere_tmatrix(x, m, lmax: int):
    """Homogeneous sphere: ``x = k_host radius`` [-], ``m = n_particle/n_host`` [-] (W,)."""
    a, b = mie_coefficients(x, m, lmax)
    return diagonal_tmatrix(a, b, lmax)


def coreshell_tmatrix(x_core, x_shell, m_core, m_shell, lmax: int):
    """Coated sphere: size parameters k_host r [-] and relative indices [-], each (W,)."""
    a, b = coreshell_mie_coefficients(x_core, x_shell, m_core, m_shell, lmax)
    return diagonal_tmatrix(a, b, lmax)


@dataclass
class Sphere:
    """A (possibly coated) sphere: radius [m], index (W,) complex; core optional."""

    radius: Any
    index: Any
    n_host: Any
    core_radius: Any = None
    core_index: Any = None

    def tmatrix(self, k_host, lmax: int):
        return diagonal_tmatrix(*self.mie(k_host, lmax), lmax)

    def is_plain(self) -> bool:
        return not any(isbox(v) for v in (self.radius, self.index, self.n_host,
                                          self.core_radius, self.core_index))

    def plain(self) -> Sphere:
        """The same sphere with untraced values."""
        return Sphere(getval(self.radius), getval(self.index), getval(self.n_host),
                      getval(self.core_radius), getval(self.core_index))

    def mie(self, k_host, lmax: int):
        """Mie coefficients a_l, b_l (W, lmax) at host wavenumbers k_host (W,) [1/m].

        Untraced inputs: the coefficients of the highest order asked for at the same
        ``k_host`` array are kept on the particle and sliced for lower orders (the degree
        choice asks for lmax_cap + 1 first, the T-matrix then for lmax).
        """
        plain = not isbox(k_host) and self.is_plain()
        kept = self.__dict__.get("_kept_mie")
        if plain and kept is not None and kept[0] is k_host and kept[1] >= lmax:
            return kept[2][:, :lmax], kept[3][:, :lmax]
        a, b = self._mie(k_host, lmax)
        if plain:
            self.__dict__["_kept_mie"] = (k_host, lmax, a, b)
        return a, b

    def _mie(self, k_host, lmax: int):
        if self.core_radius is None:
            return mie_coefficients(k_host * self.radius, self.index / self.n_host, lmax)
        return coreshell_mie_coefficients(k_host * self.core_radius, k_host * self.radius,
                                          self.core_index / self.n_host,
                                          self.index / self.n_host, lmax)


def _order_magnitudes(particle, k_host, lmax: int):
    """max |T| over the modes of each degree l = 1..lmax, (W, lmax), plain values.

    A sphere gives max(|a_l|, |b_l|) from its Mie coefficients directly; other particles
    the diagonal of their T-matrix.
    """
    if isinstance(particle, Sphere):
        a, b = particle.mie(k_host, lmax) if particle.is_plain() else \
            particle.plain().mie(k_host, lmax)   # traced: plain copy, nothing on the tape
        return onp.maximum(onp.abs(a), onp.abs(b))
    T = onp.asarray(getval(particle.tmatrix(k_host, lmax)))
    diag = onp.abs(onp.diagonal(T, axis1=-2, axis2=-1))             # (W, 2K)
    _, ls, _ = mode_table(lmax)
    return onp.stack([onp.max(diag[..., ls == l], axis=-1) for l in range(1, lmax + 1)],
                     axis=-1)


def design_particles(design, values: dict | None = None) -> list:
    """The particles of a Design as T-matrix sources (same parameters as build_structure):
    spheres (Mie, differentiable), cylinders and spheroids (EBCM, chiropt.particles.ebcm;
    differentiable at fixed internal orders).

    Parameters
    ----------
    design : chiropt.design.Design
    values : dict, optional — traced replacements of ``design.parameters()`` entries
    """
    from chiropt.structure import material_index

    p = design.parameters()
    if values:
        p.update(values)
    wl = p["illumination.wavelength_nm"]
    wl = wl * np.ones(np.shape(getval(wl)))
    out = []
    for i, part in enumerate(design.particles):
        n_out = material_index(part.material, wl, key=f"particles[{i}].material",
                               base_dir=design.base_dir, p=p, pkey=f"particles[{i}].material")
        core_r = core_n = None
        if part.core_radius_nm is not None:
            core_r = p[f"particles[{i}].core_radius_nm"] * NM
            core_n = material_index(part.core_material, wl,
                                    key=f"particles[{i}].core_material",
                                    base_dir=design.base_dir, p=p,
                                    pkey=f"particles[{i}].core_material")
        radius = p[f"particles[{i}].radius_nm"] * NM
        if part.shape == "cylinder":
            from chiropt.particles.ebcm import Cylinder

            out.append(Cylinder(radius, p[f"particles[{i}].height_nm"] * NM, n_out,
                                p["host_index"]))
        elif part.shape == "spheroid":
            from chiropt.particles.ebcm import Spheroid

            out.append(Spheroid(radius, p[f"particles[{i}].height_nm"] * NM / 2.0, n_out,
                                p["host_index"]))
        else:
            out.append(Sphere(radius=radius, index=n_out, n_host=p["host_index"],
                              core_radius=core_r, core_index=core_n))
    return out


def stack_tmatrices(particles, k_host, lmax: int):
    """T-matrices of several particles, (W, N, 2K, 2K)."""
    return np.stack([pa.tmatrix(k_host, lmax) for pa in particles], axis=1)


def choose_lmax(particles, k_host, *, tol: float = 1e-6, lmax_cap: int = 8) -> int:
    """Smallest lmax whose first omitted Mie order is below ``tol`` for every particle.

    Parameters
    ----------
    particles : list of Sphere
    k_host : array (W,) — host wavenumber [1/m]
    tol : float — bound on max |a_(lmax+1)|, |b_(lmax+1)| over wavelengths [-]
    lmax_cap : int — largest lmax returned

    Notes
    -----
    A heuristic on the isolated particles (the coupled lattice converges at the same
    rate: the translation coefficients are bounded for separated particles); the change
    of the results with one more order is the real check.
    """
    if not (0 < tol < 1):
        raise InputError("model.lmax_tolerance", f"must lie in (0, 1); got {tol!r}")
    k = getval(k_host)
    size = onp.max([onp.max(_order_magnitudes(pa, k, lmax_cap + 1), axis=0)
                    for pa in particles], axis=0)                    # (lmax_cap + 1,)
    for lmax in range(1, lmax_cap + 1):
        if size[lmax] < tol:        # degree lmax + 1, the first one left out
            return lmax
    return lmax_cap
