"""Where a region's CD can come from: order capacity and polarization efficiency.

Owns: the region metrics built from the per-order sums of a region average
(docs/theory.md §13, §18) — the split ``g = g_00 + g_prop + g_ev``, the evanescent share of
the intensity (``ev_share``, ``ev_share_k`` above a threshold ``k_min``), the CD capacity
``cd_capacity`` and the efficiencies ``cd_efficiency`` and ``docp_efficiency`` — and the
one-line verdict on which of the two limits holds a design back. Pure array functions
(autograd-differentiable) on arrays the caller computes; no solver, no I/O.
Must not import: anything of chiropt but errors (``chiropt.metrics`` calls it).

Definitions (docs/theory.md §18), per wavelength, with ``u_G = (|E+|^2_G + |E-|^2_G)/2``
and ``c_G = (C+_G - C-_G)/2`` the region averages of order G (the (0,0) order is the
incident plus specular standing wave; E (orders with K = |q|/k > 1 other than (0,0)) the
evanescent orders, P the other propagating orders):

- ``g_00 = c_00/u``, ``g_prop = sum_P c_G/u``, ``g_ev = sum_E c_G/u``; their sum is g.
- ``ev_share = sum_E u_G/u`` (per helicity: the share of that helicity's ``<|E|^2>``);
  ``ev_share_k(k_min) = sum_{G != 0, K_G >= k_min} u_G/u``.
- ``cd_capacity = sum_E (u_G/u) b(K_G)`` with ``b(K) = K^2/sqrt(2K^2 - 1)`` (§14): the
  largest ``|g_ev|`` the intensity distribution allows.
- ``cd_efficiency = g_ev/cd_capacity`` in [-1, 1] (0 where the capacity vanishes).
- per helicity h: ``docp_efficiency = sign(S3_inc,h) sum_E S3_G / sum_E S0_G`` in [-1, 1]:
  the in-plane DOCP of the evanescent part of the field against what each order could
  reach, ``|S3_G| <= S0_G`` (reached by every order, propagating or evanescent, for a
  suitable s/p ratio), signed so that +1 is the incident's handedness.
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError

HELICITY_KEYS = ("+1", "-1")
K_MIN_RANGE = (1.0, 1e3)
#: a capacity (or evanescent in-plane intensity) below this share counts as none
EMPTY = 1e-300
#: the verdict: "limited by where the light goes" below this ev_share
CAPACITY_LIMITED_SHARE = 0.2
#: the verdict: "limited by polarization" below this |cd_efficiency|
POLARIZATION_LIMITED = 0.5

CAPACITY_NAMES = ("ev_share", "cd_capacity", "cd_efficiency", "g_00", "g_prop", "g_ev")
PER_HELICITY = ("ev_share", "docp_efficiency")


def order_classes(K, n_orders: int):
    """Masks (W, G) of the propagating orders other than (0,0) and of the evanescent ones.

    ``K`` (W, G) |q|/k (plain or traced: the classes are chosen from plain values).
    """
    Kp = onp.asarray(getval(K))
    first = (onp.arange(n_orders) == 0)[None, :]
    ev = (Kp > 1.0) & ~first
    return ~ev & ~first, ev


def _masked_sum(x, mask):
    return np.sum(np.where(mask, x, 0.0 * x), axis=-1)


def _safe_ratio(num, den):
    ok = onp.abs(onp.asarray(getval(den))) > EMPTY
    return np.where(ok, num / np.where(ok, den, 1.0), 0.0 * num)


def capacity_metrics(per: dict, K, bound, s3_incident) -> dict:
    """Capacity, efficiency and the split of g from per-order region averages.

    Parameters
    ----------
    per : dict — ``EE, C, S0, S3`` (W, 2, G): region-averaged |E|^2, C_hat, S0, S3 of every
        order per helicity [+1, -1], (0,0) first (``chiropt.metrics.order_averages``)
    K : (W, G) — |q|/k of every order [-]
    bound : (W, G) — single-wave CD bound ``b(K)`` of every order (any value at (0,0)) [-]
    s3_incident : (W, 2) — lab-frame S3 of the incident reference (its sign only) [-]

    Returns
    -------
    dict of (W,) arrays [-]: ``g_00, g_prop, g_ev, ev_share, cd_capacity,
    cd_efficiency``; ``ev_share_h, docp_efficiency`` as ``{"+1", "-1"}``; ``order_share``
    (W, G) the share ``u_G/u`` of every order and ``order_K`` (W, G) plain K (for
    :func:`ev_share_above`).

    References
    ----------
    docs/theory.md §13 (Parseval: the region average is the sum over orders), §14 (the
    single-wave bound), §18 (these definitions and the bounds |cd_efficiency| <= 1,
    |docp_efficiency| <= 1).
    """
    EE, C, S0, S3 = per["EE"], per["C"], per["S0"], per["S3"]
    n_orders = EE.shape[-1]
    prop, ev = order_classes(K, n_orders)
    u_g = (EE[:, 0] + EE[:, 1]) / 2.0
    c_g = (C[:, 0] - C[:, 1]) / 2.0
    u = np.sum(u_g, axis=-1)
    share = u_g / u[:, None]
    capacity = _masked_sum(share * bound, ev)
    g_ev = _masked_sum(c_g, ev) / u
    out = {"g_00": c_g[:, 0] / u, "g_prop": _masked_sum(c_g, prop) / u, "g_ev": g_ev,
           "ev_share": _masked_sum(share, ev), "cd_capacity": capacity,
           "cd_efficiency": _safe_ratio(g_ev, capacity), "ev_share_h": {},
           "docp_efficiency": {}, "order_share": share, "order_K": onp.asarray(getval(K))}
    sign = onp.sign(onp.asarray(getval(s3_incident), float))
    for i, key in enumerate(HELICITY_KEYS):
        out["ev_share_h"][key] = _masked_sum(EE[:, i], ev) / np.sum(EE[:, i], axis=-1)
        out["docp_efficiency"][key] = sign[:, i] * _safe_ratio(_masked_sum(S3[:, i], ev),
                                                               _masked_sum(S0[:, i], ev))
    return out


def check_k_min(k_min, key: str = "k_min") -> float:
    """A valid ``k_min`` [-] (orders with K = |q|/k >= k_min), or InputError naming ``key``."""
    lo, hi = K_MIN_RANGE
    if isinstance(k_min, bool) or not isinstance(k_min, (int, float, onp.floating)) \
            or not lo <= float(k_min) <= hi:
        raise InputError(key, f"got {k_min!r}, allowed a number in [{lo:g}, {hi:g}] "
                              "(K = |q|/k of the evanescent orders counted)")
    return float(k_min)


def ev_share_above(metrics: dict, k_min: float):
    """``ev_share_k``: share (W,) of the region-averaged intensity in the orders other than
    (0,0) with ``K >= k_min`` (docs/theory.md §18), from :func:`capacity_metrics` output."""
    k_min = check_k_min(k_min)
    K = metrics["order_K"]
    mask = (K >= k_min) & (onp.arange(K.shape[-1]) > 0)[None, :]
    return _masked_sum(metrics["order_share"], mask)


def ev_share_name(k_min: float) -> str:
    """Quantity name of ``ev_share_k`` at ``k_min`` (``ev_share_k2``, ``ev_share_k1.5``)."""
    return f"ev_share_k{float(k_min):g}"


def parse_ev_share_name(name: str) -> float | None:
    """The ``k_min`` of a quantity name from :func:`ev_share_name`, else None."""
    if not name.startswith("ev_share_k"):
        return None
    try:
        return float(name[len("ev_share_k"):])
    except ValueError:
        return None


def verdict(ev_share: float, share_00: float | None, cd_efficiency: float, g: float,
            g_ev: float) -> str:
    """One line: which limit holds the design's CD back (plain values at one wavelength;
    ``share_00`` the (0,0) order's share of the intensity, None when unknown).

    - ``ev_share < CAPACITY_LIMITED_SHARE``: limited by capacity (where the light goes):
      most of the intensity is in the (0,0) or propagating orders, whose |g| cannot exceed
      about 1 whatever their polarization.
    - else ``sign(g) cd_efficiency < POLARIZATION_LIMITED``: limited by polarization (how
      it is polarized): the evanescent orders carry the intensity but their CD is far
      from their bound, or of the opposite sign to g (it then lowers |g|).
    - else: near both limits; more CD needs higher-K orders (a larger capacity).

    The thresholds are ours (common practice, no source), stated in docs/theory.md §18.
    """
    if not onp.isfinite(ev_share):
        return "capacity not defined for this region (sampled fields)"
    if ev_share < CAPACITY_LIMITED_SHARE:
        where = "" if share_00 is None else f"{100 * share_00:.0f}% of the intensity in (0,0), "
        return (f"limited by capacity: {where}{100 * ev_share:.0f}% evanescent "
                f"(g_ev = {g_ev:.3g} of g = {g:.3g})")
    signed = cd_efficiency * (1.0 if g >= 0 else -1.0)
    if signed < 0:
        return (f"limited by polarization: the evanescent orders' CD opposes g (efficiency "
                f"{cd_efficiency:.2g}, {100 * ev_share:.0f}% of the intensity evanescent)")
    if signed < POLARIZATION_LIMITED:
        return (f"limited by polarization: efficiency {cd_efficiency:.2g} with "
                f"{100 * ev_share:.0f}% of the intensity evanescent")
    return (f"near both limits: {100 * ev_share:.0f}% evanescent at efficiency "
            f"{cd_efficiency:.2g}; more CD needs higher-K orders")
