"""The forward model as one call: Design -> Response.

Owns: ``evaluate(design)`` (the library entry point the CLI and the search layer
use) and the :class:`Response` record of spectra. Must not import: search, store,
report, cli.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as onp

from chiropt.design import Design
from chiropt.farfield import power_fractions
from chiropt.solve import Solution, solve
from chiropt.structure import build_structure

HELICITIES = (+1, -1)


@dataclass
class Response:
    """Spectra of one design. Arrays have shape (W, 2): wavelength x helicity [+1, -1].

    Attributes
    ----------
    wavelength_nm : (W,) [nm]
    metrics : near-field region metrics (PHYSICS.md §4) when the design has a region:
        u, c, g, background (W,); s0, docp, area_fraction {"+1", "-1"} (W,);
        truncation (W,) estimated relative truncation error; n_orders
    R, T, A : power fractions reflected (into the medium of incidence), transmitted,
        and absorbed (A = 1 - R - T) [-]
    A_dipoles : absorbed fraction computed from the dipoles' own losses [-]
    rayleigh : (W,) smallest |kz|/k of any order (0 at a Rayleigh anomaly) [-]
    warnings : messages about the validity of the result
    """

    design: Design
    wavelength_nm: onp.ndarray
    R: onp.ndarray
    T: onp.ndarray
    A: onp.ndarray
    A_dipoles: onp.ndarray
    rayleigh: onp.ndarray
    warnings: list[str] = field(default_factory=list)
    metrics: dict | None = None
    solution: Solution | None = field(default=None, repr=False)

    def spectra(self) -> dict[str, Any]:
        """JSON-ready spectra: lists over wavelength, helicity keys "+1" and "-1"."""
        out: dict[str, Any] = {"wavelength_nm": self.wavelength_nm.tolist()}
        for name in ("R", "T", "A"):
            arr = getattr(self, name)
            out[name] = {"+1": arr[:, 0].tolist(), "-1": arr[:, 1].tolist()}
        if self.metrics is not None:
            m = self.metrics
            out["metrics"] = {k: onp.asarray(m[k]).tolist()
                              for k in ("u", "c", "g", "background", "truncation")}
            for k in ("s0", "docp", "area_fraction"):
                if k in m:
                    out["metrics"][k] = {h: onp.asarray(v).tolist() for h, v in m[k].items()}
            out["metrics"]["n_orders"] = int(m["n_orders"])
        return out


def evaluate(design: Design, *, keep_solution: bool = False) -> Response:
    """Solve the forward model of ``design`` at all its wavelengths.

    Parameters
    ----------
    design : Design
    keep_solution : bool — keep the raw :class:`Solution` (moments, order amplitudes)

    Returns
    -------
    Response
    """
    notes: list[str] = []
    metrics = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        st = build_structure(design)
        sol = solve(st)
        frac = power_fractions(sol)
        if design.region is not None:
            from chiropt.metrics import region_metrics
            from chiropt.sensitivity import metrics_tolerance

            metrics = region_metrics(sol, design.region, tol=metrics_tolerance(design))
    for w in caught:
        notes.append(str(w.message))
    return Response(design=design, wavelength_nm=onp.asarray(st.wavelength_nm, float),
                    R=onp.asarray(frac["R"]), T=onp.asarray(frac["T"]),
                    A=onp.asarray(frac["A"]), A_dipoles=onp.asarray(frac["A_dipoles"]),
                    rayleigh=onp.asarray(sol.rayleigh), warnings=notes, metrics=metrics,
                    solution=sol if keep_solution else None)
