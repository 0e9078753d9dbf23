"""Robustness of one design at one wavelength: fabrication, focusing and bandwidth.

Owns: :func:`analyse` (the figures of ``chiropt robustness`` for one design),
:func:`first_order` (mean and spread from the exact gradients), :func:`band_width` (the
width of a metric's feature around the design wavelength) and :func:`metric_value` (a
metric from the quantity spectra, helicity averages included). Plain data out; no I/O.
Must not import: search, store, report, cli, goals.

First order: for independent Gaussian errors ``e_k`` of standard deviation ``sigma_k``
(a shared error moves all its quantities by the same ``e_k``), ``f(x + e) ~ f(x) + sum_k
d_k e_k`` with ``d_k`` the sum of the exact derivatives over the term's quantities, so the
metric is normal with mean ``f(x)`` and variance ``sum_k (sigma_k d_k)^2`` (the delta
method; e.g. Casella & Berger 2002, §5.5.4). The Monte Carlo estimate solves the design at
every error sample of the plan; its variance has a standard error of about
``var sqrt(2 / (S - 1))`` for normal values (same source, §5.3), and the first-order
picture is reported as failing when the two variances or the two means differ by more than
three of those standard errors: where the metric is curved on the scale of sigma (at a
resonance) the first-order mean misses the shift and its variance the skew.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as onp

from chiropt.design import Design
from chiropt.robust.average import metric_value, sample_quantities
from chiropt.robust.sampling import make_plan
from chiropt.robust.spec import RobustSpec
from chiropt.sensitivity import compute_quantities, spectrum_sensitivities

__all__ = ["BASELINES", "analyse", "band_width", "first_order", "metric_value"]

# the bare incident plane wave's value of each metric (docs/theory.md §12): the level a
# feature's height is measured from in band_width
BASELINES = {"g": 1.0, "u": 1.0, "c": 1.0, "s0": 1.0, "s0+1": 1.0, "s0-1": 1.0}
PERCENTILES = (5.0, 50.0, 95.0)
Z95 = 1.6448536269514722  # standard normal 95% quantile
SCAN_HALF_WIDTH_NM = 60.0
SCAN_POINTS = 121


def _term_derivatives(design: Design, spec: RobustSpec, metrics) -> dict[str, onp.ndarray]:
    paths = [p for e in spec.errors for p in e.paths]
    jac = spectrum_sensitivities(design, paths)

    def dmetric(name, path):
        if name in jac:
            return float(jac[name][path][0])
        return 0.5 * (float(jac[name + "+1"][path][0]) + float(jac[name + "-1"][path][0]))

    return {m: onp.array([sum(dmetric(m, p) for p in e.paths) for e in spec.errors])
            for m in metrics}


def first_order(nominal: float, derivatives, sigmas) -> dict[str, float]:
    """Mean, standard deviation and 5/50/95 percentiles of the linearized metric."""
    std = float(onp.sqrt(onp.sum((onp.asarray(derivatives) * onp.asarray(sigmas)) ** 2)))
    return {"mean": nominal, "std": std, "p5": nominal - Z95 * std, "p50": nominal,
            "p95": nominal + Z95 * std}


def _agreement(fo: dict, mc_values: onp.ndarray) -> dict[str, Any]:
    S = mc_values.size
    var_mc = float(onp.var(mc_values, ddof=1)) if S > 1 else 0.0
    var_fo = fo["std"] ** 2
    se_var = max(var_mc, var_fo) * math.sqrt(2.0 / max(S - 1, 1))
    se_mean = math.sqrt(max(var_mc, var_fo) / max(S, 1))
    dvar = abs(var_mc - var_fo)
    dmean = abs(float(onp.mean(mc_values)) - fo["mean"])
    ok = dvar <= 3 * se_var + 1e-300 and dmean <= 3 * se_mean + 1e-300
    return {"variance_mc": var_mc, "variance_first_order": var_fo,
            "variance_standard_error": se_var, "mean_shift": dmean,
            "first_order": "agrees" if ok else "fails"}


def band_width(wl: onp.ndarray, values: onp.ndarray, at_nm: float, baseline: float) -> float:
    """Width [nm] of the interval around ``at_nm`` where ``values - baseline`` keeps its sign
    and at least half its size at ``at_nm`` (linear interpolation between scan points).

    At a peak this is its full width at half maximum above the plane-wave level; NaN when
    the interval reaches an end of the scan (wider than the scan) or the metric sits at the
    baseline.
    """
    wl, v = onp.asarray(wl, float), onp.asarray(values, float) - baseline
    h0 = float(onp.interp(at_nm, wl, v))
    if h0 == 0.0:
        return float("nan")
    keep = onp.sign(v) * onp.sign(h0) * onp.abs(v) >= 0.5 * abs(h0)
    k = int(onp.argmin(abs(wl - at_nm)))
    if not keep[k]:
        return float("nan")
    lo, hi = k, k
    while lo > 0 and keep[lo - 1]:
        lo -= 1
    while hi < wl.size - 1 and keep[hi + 1]:
        hi += 1
    if lo == 0 or hi == wl.size - 1:
        return float("nan")

    def cross(i, j):  # keep[i] true, keep[j] false: where s*v = |h0|/2 in between
        a = onp.sign(h0) * v[i] - 0.5 * abs(h0)
        b = onp.sign(h0) * v[j] - 0.5 * abs(h0)
        return wl[i] + (wl[j] - wl[i]) * a / (a - b)

    return float(cross(hi, hi + 1) - cross(lo, lo - 1))


def _scan_window(design: Design, at_nm: float) -> onp.ndarray:
    from chiropt.materials import get_material

    specs = [p.material for p in design.particles]
    specs += [p.core_material for p in design.particles if p.core_material is not None]
    if design.substrate is not None:
        specs += [design.substrate] + [la.material for la in design.layers]
    lo, hi = at_nm - SCAN_HALF_WIDTH_NM, at_nm + SCAN_HALF_WIDTH_NM
    for s in specs:
        a, b = get_material(s, base_dir=design.base_dir).wavelength_range_nm
        lo, hi = max(lo, a), min(hi, b)
    return onp.linspace(lo, hi, SCAN_POINTS)


def analyse(design: Design, spec: RobustSpec, *, at_nm: float, seed: int = 1,
            metrics: tuple[str, ...] | None = None, constraints=(),
            fabrication=None, scan: bool = True) -> dict[str, Any]:
    """Every robustness figure of ``design`` at the wavelength ``at_nm`` [nm].

    Parameters
    ----------
    design : Design (its other wavelengths are ignored)
    spec : RobustSpec — errors, cone and band (statistic unused)
    seed : seed of the error samples
    metrics : names (default g, docp, u with a region, else R, T, A)
    constraints : ``(label, metric, lower, upper)`` tuples; the probability of each holding
        over the error samples and the yield (all of them, and every ``fabrication`` row)
    fabrication : optional callable (design quantities dict -> list of scaled rows, feasible
        when <= 0) checked on every error sample
    scan : also scan the wavelength around ``at_nm`` for the band widths

    Returns
    -------
    dict with ``metrics`` (name -> nominal, first_order, monte_carlo, agreement, cone,
    band, fwhm_nm), ``samples`` (name -> (S,) values), ``constraints``, ``yield``, ``scan``,
    ``error_model``, ``plan``.
    """
    if metrics is None:
        metrics = ("g", "docp", "u") if design.region is not None else ("R", "T", "A")
    d0 = design.with_wavelengths([at_nm])
    q0 = {k: onp.real(onp.asarray(v)) for k, v in compute_quantities(d0).items()}
    nominal = {m: float(metric_value(q0, m)[0]) for m in metrics}
    out: dict[str, Any] = {"at_nm": float(at_nm), "seed": int(seed),
                           "error_model": spec.describe(), "metrics": {}, "samples": {},
                           "constraints": [], "yield": None}
    for m in metrics:
        out["metrics"][m] = {"nominal": nominal[m]}
    if spec.errors:
        fab_spec = replace(spec, na=0.0, band_nm=0.0)
        plan = make_plan(fab_spec, d0, seed)
        out["plan"] = plan.to_dict()
        qs = sample_quantities(d0, None, plan)
        derivs = _term_derivatives(d0, spec, metrics)
        sig = [e.sigma for e in spec.errors]
        for m in metrics:
            vals = onp.array([float(metric_value(q, m)[0]) for q in qs])
            out["samples"][m] = vals
            fo = first_order(nominal[m], derivs[m], sig)
            mc = {"mean": float(onp.mean(vals)), "std": float(onp.std(vals, ddof=1))
                  if vals.size > 1 else 0.0}
            mc.update({f"p{p:g}": float(onp.percentile(vals, p)) for p in PERCENTILES})
            out["metrics"][m].update(first_order=fo, monte_carlo=mc,
                                     agreement=_agreement(fo, vals),
                                     derivatives={e.key: float(d) for e, d in
                                                  zip(spec.errors, derivs[m], strict=True)})
        held_all = onp.ones(plan.n_samples, bool)
        for label, metric, lower, upper in constraints:
            v = onp.array([float(metric_value(q, metric)[0]) for q in qs])
            ok = onp.ones(v.size, bool)
            if lower is not None:
                ok &= v >= lower
            if upper is not None:
                ok &= v <= upper
            held_all &= ok
            out["constraints"].append({"label": label, "probability": float(ok.mean())})
        if fabrication is not None:
            params = d0.parameters()
            okf = onp.ones(plan.n_samples, bool)
            for s in range(plan.n_samples):
                p = dict(params)
                for j, path in enumerate(plan.paths):
                    p[path] = params[path] + plan.offsets[s, j]
                okf[s] = all(float(r) <= 1e-9 for r in fabrication(p))
            held_all &= okf
            out["constraints"].append({"label": "fabrication limits",
                                       "probability": float(okf.mean())})
        if constraints or fabrication is not None:
            out["yield"] = float(held_all.mean())
    for kind, sub in (("cone", replace(spec, errors=(), band_nm=0.0)),
                      ("band", replace(spec, errors=(), na=0.0))):
        if (kind == "cone" and spec.na > 0) or (kind == "band" and spec.band_nm > 0):
            (q,) = sample_quantities(d0, None, make_plan(sub, d0, seed))
            for m in metrics:
                out["metrics"][m][kind] = float(metric_value(q, m)[0])
    if scan:
        wl = _scan_window(design, at_nm)
        qs = {k: onp.real(onp.asarray(v))
              for k, v in compute_quantities(design.with_wavelengths(wl)).items()}
        out["scan"] = {"wavelength_nm": wl}
        for m in metrics:
            spectrum = onp.asarray(metric_value(qs, m), float)
            out["scan"][m] = spectrum
            out["metrics"][m]["fwhm_nm"] = band_width(wl, spectrum, at_nm,
                                                      BASELINES.get(m, 0.0))
    return out


def robust_value(result: dict, metric: str, sense: str = "max") -> float:
    """The pessimistic figure of a metric: the 5th (``sense`` 'max') or 95th percentile
    over the fabrication errors, else the cone average, else the band average, else the
    nominal value."""
    r = result["metrics"][metric]
    if "monte_carlo" in r:
        return r["monte_carlo"]["p5" if sense == "max" else "p95"]
    for kind in ("cone", "band"):
        if kind in r:
            return r[kind]
    return r["nominal"]
