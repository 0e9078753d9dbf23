"""Quantities over a sample plan: incoherent averages and statistics, differentiable.

Owns: :func:`metric_value` (a metric from the quantity spectra), :func:`combine` (the
incoherent average of quantity spectra over cone directions and band nodes),
:func:`sample_quantities` (one combined quantity set per fabrication sample, traced values
welcome) and :func:`summarize` (mean, p10, p90, worst of per-sample values).
Must not import: search, store, report, cli, goals.

Why incoherent. The region metrics are area averages of quadratic field quantities
(docs/theory.md §12-§13). A focused beam on an array is a superposition of plane waves with
different in-plane wavevectors; each excites its own Bloch field, and the cross terms of
two of them carry ``exp(i dk.r)`` with ``dk`` their in-plane difference, so they vanish on
the average over the illuminated area (many cells) and a measured area average is the sum
of the directions' own averages. Likewise distinct frequencies of a band do not interfere
in a time average. So intensive quantities add, and ratios are taken after adding:

- ``u``, ``c``: weighted means (every direction has the same incident intensity);
  ``g = <c> / <u>`` (not the mean of ``g``); ``background`` weighted by ``u``.
- ``s0``: the in-plane Stokes ``S0`` of each direction is ``s0 (1 + cos^2 t) / 2`` in units
  of the incident intensity, ``S3`` is ``docp s0 cos t`` (docs/theory.md §12); the cone's
  ``s0`` and ``docp`` are the ratios of the summed Stokes parameters, each divided by the
  bare cone's own value (so the bare cone gives ``s0 = docp = 1``, as the plane wave does).
- ``R``, ``T``, ``A``: power fractions weighted by the incident flux through the plane,
  ``cos t`` per direction.
- order capacity (docs/theory.md §18): the shares and parts of g (``ev_share``,
  ``ev_share_k*``, ``cd_capacity``, ``g_00``, ``g_prop``, ``g_ev``) are ratios to ``u`` and
  are weighted by ``u`` (``ev_share+-1`` by each helicity's intensity ``u (1 +- background)``);
  ``cd_efficiency = <g_ev> / <cd_capacity>``. ``docp_efficiency+-1`` is a ratio to the
  evanescent part's own S0, which the quantities do not carry: it is weighted by that
  helicity's evanescent intensity, an approximation (exact when the in-plane share of the
  evanescent intensity is the same at every node).

One direction with weight 1 returns the inputs unchanged (to rounding).
"""

from __future__ import annotations

from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.design import Design
from chiropt.robust.sampling import SamplePlan
from chiropt.sensitivity import compute_quantities

__all__ = ["combine", "metric_value", "quantile", "sample_quantities", "summarize"]

WAVELENGTH_PATH = "illumination.wavelength_nm"
POLAR_PATH, AZIMUTH_PATH = "illumination.polar_deg", "illumination.azimuth_deg"


def metric_value(q: dict, name: str):
    """A metric's spectrum (W,) from quantity spectra: ``docp``, ``s0``, ``R``, ``T``, ``A``
    are the averages of the two incident helicities; other names are read directly."""
    if name in q:
        return np.real(q[name])
    return 0.5 * (np.real(q[name + "+1"]) + np.real(q[name + "-1"]))


def _wsum(w, a):
    return np.sum(w * a, axis=-1)


def combine(q: dict[str, Any], weights, cos_t) -> dict[str, Any]:
    """Incoherent average over the last axis (nodes) of every quantity array (..., N).

    Parameters
    ----------
    q : name -> array (..., N) (names of ``sensitivity.compute_quantities``)
    weights : (N,) node weights summing to 1
    cos_t : (N,) cosine of each node's polar angle in the medium of incidence

    Returns
    -------
    name -> array (...) (see the module docstring for the rule of each quantity)
    """
    w = np.asarray(weights, float)
    ct = np.asarray(cos_t, float)
    stokes0 = 0.5 * (1.0 + ct ** 2)
    out: dict[str, Any] = {}
    for name, v in q.items():
        v = np.real(v)
        if name[0] in "RTA":
            out[name] = _wsum(w * ct, v) / np.sum(w * ct)
        elif name in ("u", "c"):
            out[name] = _wsum(w, v)
        elif name.startswith("s0"):
            out[name] = _wsum(w * stokes0, v) / np.sum(w * stokes0)
    if "u" in q:
        u = np.real(q["u"])
        out["g"] = out["c"] / out["u"]
        out["background"] = _wsum(w, np.real(q["background"]) * u) / out["u"]
        bare = np.sum(w * ct) / np.sum(w * stokes0)
        for h in ("+1", "-1"):
            s0 = np.real(q["s0" + h])
            num = _wsum(w * ct, np.real(q["docp" + h]) * s0)
            out["docp" + h] = num / _wsum(w * stokes0, s0) / bare
        _combine_capacity(q, w, u, out)
    return out


def _combine_capacity(q, w, u, out):
    """Order-capacity quantities of the combined set (rules in the module docstring)."""
    for name, v in q.items():
        if name in ("ev_share", "cd_capacity", "g_00", "g_prop", "g_ev") or \
                name.startswith("ev_share_k"):
            out[name] = _wsum(w, np.real(v) * u) / out["u"]
    if "background" not in q:
        return
    for h, sign in (("+1", 1.0), ("-1", -1.0)):
        if "ev_share" + h not in q:
            continue
        inten = u * (1.0 + sign * np.real(q["background"]))
        ev = np.real(q["ev_share" + h]) * inten
        out["ev_share" + h] = _wsum(w, ev) / _wsum(w, inten)
        if "docp_efficiency" + h in q:
            total = _wsum(w, ev)
            num = _wsum(w, np.real(q["docp_efficiency" + h]) * ev)
            out["docp_efficiency" + h] = np.where(getval(total) > 0, num / np.where(
                getval(total) > 0, total, 1.0), 0.0)
    if "cd_capacity" in out and "g_ev" in out:
        cap = out["cd_capacity"]
        ok = getval(cap) > 0
        out["cd_efficiency"] = np.where(ok, out["g_ev"] / np.where(ok, cap, 1.0), 0.0)


#: most wavelength rows (wavelengths x cone directions x band nodes) of one solve: a cone's
#: directions ride on the wavelength axis in groups of whole directions up to this size
#: (the fixed cost of a solve is spread thin by then; the arrays of a multipole solve with
#: thousands of stack-reflected orders grow with the rows)
MAX_ROWS = 24


def sample_quantities(design: Design, values: dict[str, Any] | None, plan: SamplePlan
                      ) -> list[dict[str, Any]]:
    """One combined quantity set (name -> (W,)) per fabrication sample of ``plan``.

    ``design`` fixes the wavelengths (W,) and everything not in ``values``; ``values``
    holds replacements of named quantities (may be traced; ``illumination.wavelength_nm``
    shifts the wavelengths). Each sample adds its offsets to the quantities it moves and
    solves its cone directions and band nodes together: every (wavelength, direction, band
    node) is one row of the wavelength axis, with its own incidence angles
    (``Structure.polar``, ``azimuth`` per row), in groups of whole directions of at most
    :data:`MAX_ROWS` rows (the Fourier solver, whose cost is per row, one direction a
    solve); then the directions and band nodes are combined incoherently
    (:func:`combine`). Cost: S x ceil(A / max(1, MAX_ROWS // (W B))) solves of up to
    MAX_ROWS rows, where one direction a solve took S x A (most of a solve's cost at a few
    rows is fixed).

    Every row keeps the diffraction orders and lattice-sum terms that the widest row of its
    solve needs: each direction's numbers are those of its own solve to within the model's
    ``tolerance`` (terms each below it), not bit for bit.
    """
    values = dict(values or {})
    params = design.parameters()
    wl = values.get(WAVELENGTH_PATH, np.asarray(params[WAVELENGTH_PATH], float))
    W, B = len(design.illumination.wavelength_nm), plan.band_offsets_nm.size
    A = len(plan.angles_deg)
    wl_all = np.reshape(np.reshape(wl, (W, 1)) + plan.band_offsets_nm[None, :], (W * B,))
    weights = (plan.angle_weights[:, None] * plan.band_weights[None, :]).reshape(-1)
    cos_t = np.repeat(np.cos(np.deg2rad(plan.angles_deg[:, 0])), B)
    # the Fourier solver's cost is its eigenproblems, per row: nothing to share, one
    # direction a solve (measured: 190-210 ms per row at 1 to 16 rows, 97 harmonics)
    batched = plan.cone and design.solver != "fourier"
    per_solve = max(1, MAX_ROWS // (W * B)) if batched else 1
    # each solve's rows (wavelength, direction, band node), the band nodes fastest, and
    # their angles: the same for every sample
    solves = []
    for a in range(0, A, per_solve):
        n = min(per_solve, A - a)
        rows = np.reshape(np.broadcast_to(np.reshape(wl_all, (W, 1, B)), (W, n, B)),
                          (W * n * B,))
        angles = {}
        if plan.cone:
            for i, path in enumerate((POLAR_PATH, AZIMUTH_PATH)):
                angles[path] = onp.broadcast_to(plan.angles_deg[None, a:a + n, i, None],
                                                (W, n, B)).reshape(-1)
        solves.append((n, rows, design.with_wavelengths(getval(rows)), angles))
    out = []
    for s in range(plan.n_samples):
        vals = dict(values)
        for j, p in enumerate(plan.paths):
            vals[p] = values.get(p, params[p]) + plan.offsets[s, j]
        per_group = []
        for n, rows, solved, angles in solves:
            vals[WAVELENGTH_PATH] = rows
            vals.update(angles)
            q = compute_quantities(solved, vals)
            per_group.append({k: np.reshape(np.real(v), (W, n, B)) for k, v in q.items()})
        stacked = {k: np.reshape(np.concatenate([d[k] for d in per_group], axis=1),
                                 (W, -1)) for k in per_group[0]}
        if weights.size == 1:   # no cone, no band: the solve itself (exactly nominal)
            out.append({k: v[:, 0] for k, v in stacked.items()})
        else:
            out.append(combine(stacked, weights, cos_t))
    return out


def quantile(v, p: float):
    """The ``p`` quantile (0..1) of the values (S,), linear between order statistics
    (numpy's default 'linear' method; Hyndman & Fan 1996, definition 7); differentiable
    wherever no two values tie."""
    s = np.sort(v)
    n = s.shape[0]
    pos = p * (n - 1)
    i = int(min(max(int(pos), 0), n - 1))
    j = min(i + 1, n - 1)
    frac = pos - i
    return s[i] * (1.0 - frac) + s[j] * frac


def summarize(v, statistic: str, sense: str = "max"):
    """``statistic`` of per-sample values (S,): mean, p10, p90, or worst (the smallest when
    larger is better, ``sense`` 'max'; the largest for 'min')."""
    if statistic == "mean":
        return np.mean(v)
    if statistic == "p10":
        return quantile(v, 0.10)
    if statistic == "p90":
        return quantile(v, 0.90)
    return np.min(v) if sense == "max" else np.max(v)
