"""What one front design looks like and does, computed for the report at report time.

Owns: ``design_detail`` (spectra around the operating wavelength, near-field cell maps,
the per-order table there, Rayleigh anomalies nearby, the design file text) and
``operating_wavelength``. Every number comes from the model the run used
(``chiropt.response.evaluate``, ``chiropt.model.run_model``); nothing is stored back.
Must not import: cli.

Sizes: maps are ``grid x grid`` values quantized to 8 bits between their minimum and
maximum (``encode_map``), spectra are rounded to ``DIGITS`` significant digits, the order
table keeps the ``ORDERS`` orders with the largest share; about 8 kB per design.
"""

from __future__ import annotations

import base64
from typing import Any

import numpy as onp
import yaml

__all__ = ["DIGITS", "ORDERS", "decode_map", "design_detail", "encode_map",
           "operating_wavelength"]

DIGITS = 5
ORDERS = 10
SPAN = 0.15  # spectra cover the goal's wavelengths widened by this fraction on each side


def _round(a) -> list:
    a = onp.asarray(a, float)
    return [float(f"{v:.{DIGITS}g}") if onp.isfinite(v) else None for v in a.ravel()]


def _short(v):
    return None if v is None else _round([v])[0]


def encode_map(a) -> dict[str, Any]:
    """A real map (n, n) as 8-bit levels between its min and max: ``{n, lo, hi, b64}``.

    Level ``q`` stands for ``lo + q (hi - lo) / 255``; the error is at most
    ``(hi - lo) / 510``. Non-finite values become level 0.
    """
    a = onp.asarray(a, float)
    fin = onp.isfinite(a)
    lo = float(a[fin].min()) if fin.any() else 0.0
    hi = float(a[fin].max()) if fin.any() else 0.0
    q = onp.zeros(a.shape, onp.uint8)
    if hi > lo:
        q[fin] = onp.round((a[fin] - lo) / (hi - lo) * 255).astype(onp.uint8)
    return {"n": int(a.shape[0]), "lo": lo, "hi": hi,
            "b64": base64.b64encode(q.tobytes()).decode("ascii")}


def decode_map(m: dict) -> onp.ndarray:
    """Inverse of :func:`encode_map` (to within its quantization)."""
    q = onp.frombuffer(base64.b64decode(m["b64"]), onp.uint8).astype(float)
    return (m["lo"] + q * (m["hi"] - m["lo"]) / 255).reshape(m["n"], -1)


def operating_wavelength(problem, x) -> float:
    """The wavelength [nm] the first objective is read at for the design ``x`` (the middle
    of its spec's wavelengths, moved with the wavelength variable if the goal has one)."""
    spec = problem.goal.objectives[0].spec
    shift = float(problem.wavelengths_at(x)[0] - problem.wavelengths_nm[0])
    if spec.wavelengths_nm:
        return float(spec.wavelengths_nm[len(spec.wavelengths_nm) // 2]) + shift
    return float(onp.median(problem.wavelengths_at(x)))


def _spectrum_grid(problem, design, x, points: int) -> onp.ndarray:
    from chiropt.report.runs import material_sources

    wl = problem.wavelengths_at(x)
    lo, hi = float(wl.min()) * (1 - SPAN), float(wl.max()) * (1 + SPAN)
    for m in material_sources(design):
        a, b = m["range_nm"]
        lo = max(lo, a) if a is not None else lo
        hi = min(hi, b) if b is not None else hi
    return onp.linspace(lo, hi, points) if hi > lo else onp.asarray(wl, float)


def _spectra(design, grid) -> dict[str, Any]:
    from chiropt.response import evaluate

    r = evaluate(design.with_wavelengths(grid))
    out: dict[str, Any] = {"wavelength_nm": _round(r.wavelength_nm)}
    for q in ("R", "T", "A"):
        for col, h in enumerate(("+1", "-1")):
            out[q + h] = _round(getattr(r, q)[:, col])
    if r.metrics is not None:
        for q in ("u", "g"):
            out[q] = _round(r.metrics[q])
        for h in ("+1", "-1"):
            out["docp" + h] = _round(r.metrics["docp"][h])
    return out


def _near_field(design, w0: float, grid: int) -> tuple[dict, list]:
    from chiropt.fields import representative_plane_nm
    from chiropt.metrics import order_table, plane_maps
    from chiropt.model import maps_tolerance, metrics_tolerance, run_model

    sol = run_model(design.with_wavelengths([w0]), maps=True).solution
    z = representative_plane_nm(sol.structure, design.region)
    m = plane_maps(sol, z, grid, tol=maps_tolerance(design))
    maps = {"z_nm": float(z), "u": encode_map(m["u"][0]), "g": encode_map(m["g"][0]),
            "docp+1": encode_map(m["docp"]["+1"][0])}
    rows = sorted(order_table(sol, design.region, 0, tol=metrics_tolerance(design)),
                  key=lambda r: -r["share"])[:ORDERS]
    table = [{"order": f"({r['m']},{r['n']})", "K": _short(r["K"]),
              "evanescent": r["evanescent"], "share": _short(r["share"]), "g": _short(r["g"]),
              "docp+1": _short(r["docp"]["+1"]), "docp-1": _short(r["docp"]["-1"]),
              "bound": _short(r["bound"])} for r in rows]
    return maps, table


def design_detail(problem, x, *, points: int = 41, grid: int = 24) -> dict[str, Any]:
    """Spectra, maps, orders, anomalies and the design file of the design ``x``.

    Parameters
    ----------
    problem : GoalProblem of the run
    x : design vector [user units]
    points : wavelengths of the spectra; grid : map points per lattice vector

    Returns
    -------
    dict with ``operating_nm``, ``spectra`` (lists per quantity), ``maps`` (encoded, or
    None without a region), ``orders``, ``rayleigh`` (anomalies inside the spectra's range:
    ``[wavelength_nm, label]``), ``nearest_rayleigh_nm`` (signed distance of the nearest
    anomaly from the operating wavelength [nm]), ``yaml`` and ``errors`` (what could not be
    computed, with the reason; the rest is kept).
    """
    from chiropt.anomalies import rayleigh_wavelengths_nm

    design = problem.design_at(onp.asarray(x, float))
    w0 = operating_wavelength(problem, x)
    out: dict[str, Any] = {"operating_nm": w0, "spectra": None, "maps": None, "orders": [],
                           "rayleigh": [], "nearest_rayleigh_nm": None, "errors": []}
    out["yaml"] = yaml.safe_dump(design.to_dict(), sort_keys=False)
    grid_nm = _spectrum_grid(problem, design, x, points)
    try:
        out["spectra"] = _spectra(design, grid_nm)
    except Exception as exc:  # one design's failure never stops a report
        out["errors"].append(f"spectra: {type(exc).__name__}: {exc}")
    if design.region is not None:
        try:
            out["maps"], out["orders"] = _near_field(design, w0, grid)
        except Exception as exc:
            out["errors"].append(f"near field: {type(exc).__name__}: {exc}")
    try:
        ray = [(float(w), lab) for w, lab in rayleigh_wavelengths_nm(design)]
        if ray:
            near = min(ray, key=lambda t: abs(t[0] - w0))
            out["nearest_rayleigh_nm"] = [near[0] - w0, near[1]]
        out["rayleigh"] = [[w, lab] for w, lab in ray if grid_nm[0] <= w <= grid_nm[-1]]
    except Exception as exc:
        out["errors"].append(f"Rayleigh anomalies: {type(exc).__name__}: {exc}")
    return out
