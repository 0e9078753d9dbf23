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
from chiropt.model import run_model, validity
from chiropt.solution import Solution

HELICITIES = (+1, -1)
AREA_GRID = 48  # grid of the handedness area fraction (converged to 0.01, tests/test_metrics)
VALIDITY_TOLERANCE = 0.01  # change with one more multipole order that triggers a warning


@dataclass
class Response:
    """Spectra of one design. Arrays have shape (W, 2): wavelength x helicity [+1, -1].

    Attributes
    ----------
    wavelength_nm : (W,) [nm]
    metrics : near-field region metrics (docs/theory.md §12) when the design has a region:
        u, c, g, background (W,); s0, docp, area_fraction {"+1", "-1"} (W,);
        truncation (W,) estimated relative truncation error; n_orders; for a region above
        the particles the capacity metrics (docs/theory.md §18, :func:`capacity_spectra`)
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
    lmax: int | None = 1
    harmonics: int | None = None
    harmonics_change: float | None = None
    harmonics_changes: dict | None = None
    validity: dict | None = None
    solution: Solution | None = field(default=None, repr=False)

    def spectra(self) -> dict[str, Any]:
        """JSON-ready spectra: lists over wavelength, helicity keys "+1" and "-1"."""
        out: dict[str, Any] = {"wavelength_nm": self.wavelength_nm.tolist()}
        for name in ("R", "T", "A"):
            arr = getattr(self, name)
            out[name] = {"+1": arr[:, 0].tolist(), "-1": arr[:, 1].tolist()}
        out["A_particles"] = {"+1": self.A_dipoles[:, 0].tolist(),
                              "-1": self.A_dipoles[:, 1].tolist()}
        if self.metrics is not None:
            m = self.metrics
            out["metrics"] = {k: onp.asarray(m[k]).tolist()
                              for k in ("u", "c", "g", "background", "truncation")}
            for k in ("s0", "docp", "area_fraction"):
                if k in m:
                    out["metrics"][k] = {h: onp.asarray(v).tolist() for h, v in m[k].items()}
            out["metrics"]["n_orders"] = int(m["n_orders"])
            if "cd_capacity" in m:
                out["metrics"].update(capacity_spectra(m))
        # absorbed in the particles themselves (null where the model does not separate it)
        a_p = onp.broadcast_to(onp.asarray(self.A_dipoles, float), self.R.shape)
        out["A_particles"] = {h: [v if onp.isfinite(v) else None for v in a_p[:, j].tolist()]
                              for j, h in enumerate(("+1", "-1"))}
        out["lmax"] = self.lmax
        if self.harmonics is not None:
            out["harmonics"] = self.harmonics
            if self.harmonics_change is not None:
                out["harmonics_change"] = self.harmonics_change
            if self.harmonics_changes is not None:   # per quantity: its error estimate
                out["harmonics_change_by_quantity"] = self.harmonics_changes
        if self.validity is not None:
            out["validity"] = self.validity
        return out


#: ``ev_share_k`` thresholds reported by ``evaluate`` (goals may ask for any other)
REPORTED_K_MIN = (1.5, 2.0, 3.0)


def capacity_spectra(m: dict) -> dict[str, Any]:
    """JSON-ready capacity metrics (docs/cli.md): ``g_00, g_prop, g_ev, ev_share,
    cd_capacity, cd_efficiency`` as lists over wavelength, ``ev_share_h`` and
    ``docp_efficiency`` by helicity, ``ev_share_k`` by threshold (``"2"``: K >= 2) and the
    per-wavelength ``verdict`` line (docs/theory.md §18)."""
    from chiropt.capacity import ev_share_above, verdict

    out: dict[str, Any] = {k: onp.asarray(m[k]).tolist()
                           for k in ("g_00", "g_prop", "g_ev", "ev_share", "cd_capacity",
                                     "cd_efficiency")}
    for k in ("ev_share_h", "docp_efficiency"):
        out[k] = {h: onp.asarray(v).tolist() for h, v in m[k].items()}
    out["ev_share_k"] = {f"{k:g}": onp.asarray(ev_share_above(m, k)).tolist()
                         for k in REPORTED_K_MIN}
    share00 = onp.asarray(m["order_share"])[:, 0]
    out["verdict"] = [verdict(*vals) for vals in zip(
        out["ev_share"], share00.tolist(), out["cd_efficiency"], onp.asarray(m["g"]).tolist(),
        out["g_ev"], strict=True)]
    return out


def evaluate(design: Design, *, keep_solution: bool = False,
             with_validity: bool = False) -> Response:
    """Solve the forward model of ``design`` at all its wavelengths.

    Parameters
    ----------
    design : Design
    keep_solution : bool — keep the raw :class:`Solution` (moments, order amplitudes)
    with_validity : bool — also solve at lmax + 1 and report the change of every quantity
        (a warning when it exceeds ``VALIDITY_TOLERANCE``)

    Returns
    -------
    Response
    """
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = run_model(design, area_grid=AREA_GRID, warn=True, maps=keep_solution)
        check = validity(design, out) if with_validity else None
    st, sol, frac, metrics = out.structure, out.solution, out.fractions, out.metrics
    if check is not None and check["worst"] > VALIDITY_TOLERANCE:
        notes.append(f"{check['label']} may be too low: the finer model "
                     f"({check['label_check']}) changes a reported quantity by "
                     f"{check['worst']:.2g} (> {VALIDITY_TOLERANCE:g})")
    for w in caught:
        notes.append(str(w.message))
    return Response(design=design, wavelength_nm=onp.asarray(st.wavelength_nm, float),
                    R=onp.asarray(frac["R"]), T=onp.asarray(frac["T"]),
                    A=onp.asarray(frac["A"]), A_dipoles=onp.asarray(frac["A_dipoles"]),
                    rayleigh=onp.asarray(sol.rayleigh), warnings=notes, metrics=metrics,
                    lmax=out.lmax, harmonics=out.harmonics,
                    harmonics_change=out.harmonics_change,
                    harmonics_changes=out.harmonics_changes, validity=check,
                    solution=sol if keep_solution else None)
