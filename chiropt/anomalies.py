"""Rayleigh-anomaly wavelengths of a lattice (where a diffraction order grazes).

Owns: the closed-form wavelengths at which ``|k_par + G| = n k0`` for the first orders.
Must not import: solve, search, store, report, cli.
"""

from __future__ import annotations

import math

import numpy as onp

from chiropt.design import Design, lattice_vectors_nm


def rayleigh_wavelengths_nm(design: Design, *, max_index: int = 2) -> list[tuple[float, str]]:
    """Vacuum wavelengths [nm] of Rayleigh anomalies in the host and the substrate.

    Solves ``|n_in sin(t) u + (lambda/2 pi) G|^2 = n^2`` for lambda, with ``u`` the
    incidence azimuth direction, for every order 0 < |m|, |n| <= max_index and medium
    index ``n`` (host, and the substrate's real index at the middle wavelength).

    Returns
    -------
    list of (wavelength_nm, label) sorted by wavelength, e.g. (420.0, "(1,0) host").

    References
    ----------
    docs/theory.md §5 (Rayleigh anomaly condition); square lattice at normal incidence:
    lambda = n a (common practice).
    """
    from chiropt.structure import material_index

    a1, a2 = lattice_vectors_nm(design.lattice)
    area = abs(a1[0] * a2[1] - a1[1] * a2[0])
    b1 = 2 * math.pi * onp.array([a2[1], -a2[0]]) / area
    b2 = 2 * math.pi * onp.array([-a1[1], a1[0]]) / area
    ill = design.illumination
    wl_mid = float(onp.median(ill.wavelength_nm))
    media = [("host", design.host_index)]
    if design.substrate is not None:
        n_sub = material_index(design.substrate, onp.array([wl_mid]), key="substrate.material",
                               base_dir=design.base_dir)
        media.append(("substrate", float(onp.real(n_sub[0]))))
    n_in = design.host_index if ill.side == "host" else media[-1][1]
    t, f = math.radians(ill.polar_deg), math.radians(ill.azimuth_deg)
    u = n_in * math.sin(t) * onp.array([math.cos(f), math.sin(f)])
    found: dict[float, str] = {}
    for m in range(-max_index, max_index + 1):
        for n in range(-max_index, max_index + 1):
            if m == 0 and n == 0:
                continue
            G = m * b1 + n * b2  # [1/nm]
            for label, nm_ in media:
                # x = lambda/(2 pi): |G|^2 x^2 + 2 x (u.G) + |u|^2 - n^2 = 0
                a, b, c = G @ G, 2 * (u @ G), u @ u - nm_ ** 2
                disc = b * b - 4 * a * c
                if disc < 0:
                    continue
                x = (-b + math.sqrt(disc)) / (2 * a)
                if x > 0:
                    found.setdefault(round(2 * math.pi * x, 6), f"({m},{n}) {label}")
    return sorted(found.items())
