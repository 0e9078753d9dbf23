"""Chirality and spin metrics of the near field: maps, region averages, per-order table.

Owns: the incident reference (the unit circular wave in the host), the quadratic
field quantities (energy density, optical chirality, lab-frame Stokes S0 and S3) as
local maps, as exact region averages over a plane or a slab above the particles
(Parseval over diffraction orders, closed-form z integrals), and per diffraction order;
the single-wave CD bound and the attainable (DOCP, g) region of an order (docs/theory.md §14).
Must not import: search, store, report, cli.

Definitions (docs/theory.md §12), for an incident wave of unit amplitude:

- ``|E|^2`` (energy density ``U = eps |E|^2/4``), ``C_hat = -Im(conj(E) . Z H)``
  (optical chirality ``C = -(eps omega/2) Im(conj(E) . B)`` in units of ``k U`` of a
  unit circular wave: ``C_hat = +-1`` for helicity +-1), lab-frame Stokes
  ``S0 = |Ex|^2 + |Ey|^2``, ``S3 = 2 Im(conj(Ex) Ey)``.
- ``u = <|E+|^2 + |E-|^2>/2``, ``c = <C_hat+ - C_hat->/2``, ``g = c/u``,
  ``background = <|E+|^2 - |E-|^2>/<|E+|^2 + |E-|^2>``;
  per helicity h: ``s0 = <S0>/S0_inc``, ``docp = (<S3>/<S0>)/(S3_inc/S0_inc)``.
- The incident reference is the incident circular wave alone, in the host, unit
  amplitude, at the Bloch vector of the illumination: ``S0_inc = (1 + cos^2 t)/2``,
  ``S3_inc = -h cos t`` for host-side illumination (wave going -z; docs/theory.md §2 worked
  check), ``+h cos t`` for substrate-side illumination (wave going +z, t its polar angle
  in the host). If the Bloch vector is beyond the host light line (substrate-side
  illumination past the critical angle) no such host wave exists: the reference is then
  the normally incident circular wave (``cos t = 1``). ``|E|^2`` and ``C_hat`` of a
  unit circular wave do not depend on its direction, so u, c, g are unaffected.
"""

from __future__ import annotations

from typing import Any

import autograd.numpy as np
import numpy as onp
from autograd.extend import defvjp, defvjp_argnums, primitive
from autograd.tracer import getval

from chiropt.autodiff import ForwardStash, untraced
from chiropt.capacity import capacity_metrics
from chiropt.errors import InputError
from chiropt.fields import (
    NM,
    OrderContent,
    cell_grid,
    field_maps,
    order_content,
    order_fields,
    region_g_max,
    region_span,
)
from chiropt.solution import Solution
from chiropt.structure import Structure

HELICITY_KEYS = ("+1", "-1")
_PHI1_SERIES = 1e-2


# ----------------------------------------------------------------------------------------
# reference and local quantities
# ----------------------------------------------------------------------------------------

def incident_reference(structure: Structure) -> dict:
    """Lab-frame Stokes S0 and S3 of the reference circular wave (unit amplitude, host).

    Parameters
    ----------
    structure : Structure

    Returns
    -------
    dict with ``cos`` (W,) cos t of the reference wave's polar angle in the host [-],
    ``s0`` (W,) and ``s3`` (W, 2) [V^2/m^2] (helicity axis [+1, -1]), ``docp`` (W, 2)
    = s3/s0 = +-2 cos t/(1 + cos^2 t).

    Notes
    -----
    See the module docstring for the substrate-side convention. The polarization
    ``(p + i h s)/sqrt(2)`` projects onto the xy plane as ``(+-cos t q_hat + i h s)/sqrt(2)``.

    References
    ----------
    docs/theory.md §2 (Stokes sign, worked check), §12 (DOCP normalization).
    """
    st = structure
    k = st.k
    kpar2 = np.sum(st.k_par ** 2, axis=-1)
    arg = k ** 2 - kpar2
    normal = type(st.k_par) is onp.ndarray and not onp.any(st.k_par)
    if st.side == "host" and normal and not onp.iscomplexobj(getval(k)):
        # a fixed normal incidence: the reference wave runs along z, cos t = 1 for every
        # design (sqrt(k^2)/k is exactly 1), a constant with no derivative
        cos, sigma = onp.ones(onp.shape(getval(k))), -1.0
    elif st.side == "host":
        cos, sigma = np.sqrt(arg) / k, -1.0
    else:
        ok = getval(arg) > 0
        cos = np.where(ok, np.sqrt(np.where(ok, arg, 1.0)) / k, 1.0 * np.ones(k.shape))
        sigma = 1.0
    s0 = (1.0 + cos ** 2) / 2.0
    s3 = sigma * cos[:, None] * np.array([1.0, -1.0])[None, :]
    return {"cos": cos, "s0": s0, "s3": s3, "docp": s3 / s0[:, None]}


def quadratic_maps(E, ZH) -> dict:
    """Local |E|^2, C_hat, S0, S3 of fields E, Z H (..., 3) [V/m] -> arrays (...) [V^2/m^2].

    References
    ----------
    Tang & Cohen, PRL 104, 163901 (2010) (optical chirality; docs/theory.md §12 for the
    time-harmonic form ``C = -(eps omega/2) Im(E* . B)``); docs/theory.md §2 (Stokes).
    """
    def dot(a, b):  # explicit: numpy reductions over a length-3 last axis are slow
        return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1] + a[..., 2] * b[..., 2]

    return {"EE": np.real(dot(np.conj(E), E)),
            "C": -np.imag(dot(np.conj(E), ZH)),
            "S0": np.abs(E[..., 0]) ** 2 + np.abs(E[..., 1]) ** 2,
            "S3": 2.0 * np.imag(np.conj(E[..., 0]) * E[..., 1])}


def _metrics_from(q: dict, ref: dict) -> dict:
    """Metrics from helicity-resolved quadratic quantities with axis 1 = helicity.

    ``q[...]`` has shape (W, 2, ...); the result has shape (W, ...).
    """
    v = _metric_values(q["EE"], q["C"], q["S0"], q["S3"], ref["s0"], ref["docp"])
    return {"u": v[0], "c": v[1], "g": v[2], "background": v[3],
            "s0": {HELICITY_KEYS[0]: v[4], HELICITY_KEYS[1]: v[5]},
            "docp": {HELICITY_KEYS[0]: v[6], HELICITY_KEYS[1]: v[7]}}


@primitive
def _metric_values(EE, C, S0, S3, s0inc, dinc):
    """(8, W, ...): u, c, g, background, s0 (+1, -1), DOCP (+1, -1) of :func:`_metrics_from`
    from helicity-resolved quantities (W, 2, ...) and the incident reference s0 (W,),
    DOCP (W, 2)."""
    EE, C, S0, S3 = (onp.asarray(a, float) for a in (EE, C, S0, S3))
    s0inc, dinc = _reference_axes(EE, s0inc, dinc)
    u = (EE[:, 0] + EE[:, 1]) / 2.0
    c = (C[:, 0] - C[:, 1]) / 2.0
    s0 = S0 / s0inc
    docp = S3 / S0 / dinc
    return onp.stack([u, c, c / u, (EE[:, 0] - EE[:, 1]) / (EE[:, 0] + EE[:, 1]),
                      s0[:, 0], s0[:, 1], docp[:, 0], docp[:, 1]])


def _reference_axes(EE, s0inc, dinc):
    """The incident reference (W,) and (W, 2) with unit axes to broadcast on (W, 2, ...)."""
    extra = (1,) * (onp.ndim(EE) - 2)
    return (onp.reshape(onp.asarray(s0inc, float), (-1, 1) + extra),
            onp.reshape(onp.asarray(dinc, float), (-1, 2) + extra))


def _metric_values_vjp(argnums, ans, args, kwargs):
    """Derivatives of the quotients (elementary calculus)."""
    EE, C, S0, S3 = (onp.asarray(a, float) for a in args[:4])
    s0inc, dinc = _reference_axes(EE, args[4], args[5])
    u, c = ans[0], ans[1]
    tot = EE[:, 0] + EE[:, 1]
    sq = tot ** 2
    sum_extra = tuple(range(2, onp.ndim(EE)))     # the axes beyond (W, helicity)

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        gu = g[0] - g[2] * c / u ** 2
        gc = g[1] + g[2] / u
        gs, gd = np.stack([g[4], g[5]], axis=1), np.stack([g[6], g[7]], axis=1)
        out = {0: np.stack([gu / 2 + g[3] * 2 * EE[:, 1] / sq,
                            gu / 2 - g[3] * 2 * EE[:, 0] / sq], axis=1),
               1: np.stack([gc / 2, -gc / 2], axis=1),
               2: gs / s0inc - gd * S3 / (S0 ** 2 * dinc),
               3: gd / (S0 * dinc)}
        if 4 in argnums:
            out[4] = -np.sum(gs * S0 / s0inc ** 2, axis=(1,) + sum_extra)
        if 5 in argnums:
            out[5] = -np.sum(gd * S3 / (S0 * dinc ** 2), axis=sum_extra) if sum_extra \
                else -gd * S3 / (S0 * dinc ** 2)
        return tuple(out[i] for i in argnums)

    return vjp


defvjp_argnums(_metric_values, _metric_values_vjp)


def local_metrics(E, ZH, structure: Structure) -> dict:
    """Metric maps from fields of both helicities.

    Parameters
    ----------
    E, ZH : (W, 2, ..., 3) complex — E and Z H [V/m] for incident helicities [+1, -1]
        (e.g. from :func:`chiropt.fields.field_maps`)
    structure : Structure

    Returns
    -------
    dict of arrays (W, ...): ``u``, ``c``, ``g``, ``background``; ``s0`` and ``docp`` as
    ``{"+1": ..., "-1": ...}`` (local values, definitions in the module docstring).

    References
    ----------
    docs/theory.md §12.
    """
    return _metrics_from(quadratic_maps(E, ZH), incident_reference(structure))


# ----------------------------------------------------------------------------------------
# region averages from orders
# ----------------------------------------------------------------------------------------

def _phi1(x):
    """(exp(x) - 1)/x for complex x, exact at 0 (the mean of exp(x t) over t in [0, 1]).

    One autograd node; its derivative phi1'(x) = (exp(x) - phi1(x))/x, by its Taylor
    series near 0 (DLMF 4.2.19 for the series of exp).
    """
    return _phi1_primitive(x)


def _phi1_values(x):
    x = onp.asarray(x)
    small = onp.abs(x) < _PHI1_SERIES
    xs = onp.where(small, 1.0 + 0j, x)
    series = 1.0 + x * (1 / 2 + x * (1 / 6 + x * (1 / 24 + x * (1 / 120 + x * (
        1 / 720 + x / 5040)))))
    return onp.where(small, series, onp.expm1(xs) / xs), small, xs


@primitive
def _phi1_primitive(x):
    return _phi1_values(x)[0]


def _phi1_slope(x, value, small, xs):
    """phi1'(x) = (exp(x) - phi1(x))/x, by its Taylor series where |x| is small."""
    series = 1 / 2 + x * (1 / 3 + x * (1 / 8 + x * (1 / 30 + x * (1 / 144 + x * (
        1 / 840 + x / 5760)))))
    return onp.where(small, series, (onp.exp(xs) - value) / xs)


def _phi1_vjp(ans, x):
    value, small, xs = _phi1_values(x)
    x = onp.asarray(x)
    slope = _phi1_slope(x, value, small, xs)
    real = not onp.iscomplexobj(x)
    return lambda g: np.real(g * slope) if real else g * slope


defvjp(_phi1_primitive, _phi1_vjp)


def _single_wave_forms(up, c, K, decay):
    """Slab-averaged |E|^2, C_hat, S0, S3 of single upward waves, (4, W, 2, G).

    ``up`` (W, 2, 2, G) amplitudes on (s, p_up); ``c = kz/k`` (W, G); ``K = |q|/k``
    (W, G); ``decay`` (W, 1, G) the slab mean of exp(-2 Im(kz) z) (formulas in
    :func:`order_averages`). One autograd node with a hand-written vector-Jacobian product.
    """
    return _single_waves(up, c, K, decay)


def _single_wave_parts(up, c, K):
    a_s, a_p = up[:, :, 0], up[:, :, 1]
    c2 = (onp.real(c) ** 2 + onp.imag(c) ** 2)[:, None]
    p2 = (K ** 2)[:, None] + c2
    ss = onp.real(a_s) ** 2 + onp.imag(a_s) ** 2
    pp = onp.real(a_p) ** 2 + onp.imag(a_p) ** 2
    sp = onp.conj(a_s) * a_p
    return a_s, a_p, c2, p2, ss, pp, sp


@primitive
def _single_waves(up, c, K, decay):
    _, _, c2, p2, ss, pp, sp = _single_wave_parts(up, c, K)
    raw = onp.stack([ss + p2 * pp, -(1.0 + p2) * onp.imag(sp), ss + c2 * pp,
                     -2.0 * onp.imag(c[:, None] * sp)])
    return raw * decay


def _single_waves_vjp(argnums, ans, args, kwargs):
    """Wirtinger form: a real output y of complex z has zbar = 2 g dy/dz (dy/dz at fixed
    conj z), autograd's convention for complex inputs."""
    up, c, K, decay = args
    a_s, a_p, c2, p2, ss, pp, sp = _single_wave_parts(up, c, K)
    cs, cp, cc = onp.conj(a_s), onp.conj(a_p), onp.conj(c)[:, None]
    im_sp = onp.imag(sp)
    raw = None if 3 not in argnums else onp.stack(
        [ss + p2 * pp, -(1.0 + p2) * im_sp, ss + c2 * pp, -2.0 * onp.imag(c[:, None] * sp)])

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        wE, wC, w0, w3 = g[0] * decay, g[1] * decay, g[2] * decay, g[3] * decay
        out = []
        for i in argnums:
            if i == 0:
                bar_s = (2.0 * cs * (wE + w0) - 1j * (1.0 + p2) * wC * cp
                         - 2j * w3 * cc * cp)
                bar_p = (2.0 * cp * (wE * p2 + w0 * c2) + 1j * (1.0 + p2) * wC * cs
                         + 2j * w3 * c[:, None] * cs)
                out.append(np.stack([bar_s, bar_p], axis=2))
            elif i == 1:
                out.append(2.0 * np.sum(cc * (pp * (wE + w0) - wC * im_sp) + 1j * w3 * sp,
                                        axis=1))
            elif i == 2:
                out.append(np.sum((wE * pp - wC * im_sp) * 2.0 * K[:, None], axis=1))
            else:
                out.append(np.sum(np.sum(g * raw, axis=0), axis=1, keepdims=True))
        return tuple(out)

    return vjp


defvjp_argnums(_single_waves, _single_waves_vjp)


def _wave_vectors(up0, down, s, pu, pd, ku, kd):
    """E (W, T, a, 3) and the unit wavevectors (W, a, 3) of the (0,0) order's waves a
    (up, then down when ``down`` is given) from their (s, p) amplitudes, plain."""
    E = [up0[..., 0, None] * s[:, None] + up0[..., 1, None] * pu[:, None]]
    kv = [ku]
    if down is not None:
        E.append(down[..., 0, None] * s[:, None] + down[..., 1, None] * pd[:, None])
        kv.append(kd)
    return onp.stack(E, axis=2), onp.stack(kv, axis=1)


def _zero_order_parts(up0, down, s, pu, pd, ku, kd, kz0, L):
    """What the (0,0) forms and their VJP share, plain: E (W, T, a, 3), the unit
    wavevectors kv (W, a, 3), H = kv x E, beta (W, a) = (+kz, -kz), the slab means
    m = phi1(i (beta_b - conj beta_a) L) (W, a, b) and their slopes phi1'."""
    E, kv = _wave_vectors(up0, down, s, pu, pd, ku, kd)
    beta = onp.stack([kz0, -kz0][:E.shape[2]], axis=-1)
    expo = 1j * (beta[:, None, :] - onp.conj(beta)[:, :, None]) * L
    m, small, xs = _phi1_values(expo)
    return E, kv, onp.cross(kv[:, None], E), beta, m, _phi1_slope(expo, m, small, xs)


_ZERO_ORDER_STASH = ForwardStash()


@primitive
def _zero_order_forms(up0, down, s, pu, pd, ku, kd, kz0, L):
    """Slab means of |E|^2, C_hat, S0, S3 of the (0,0) order, (4, W, T): the up wave and,
    for host-side light, the incident down wave with their interference (module
    ``order_averages``). up0, down (W, T, 2) amplitudes on (s, p); s, pu, pd, ku, kd
    (W, 3) its unit vectors; kz0 (W,) [1/m]; L the slab thickness [m]."""
    parts = _zero_order_parts(up0, down, s, pu, pd, ku, kd, kz0, L)
    E, _, H, _, m, _ = parts
    cE = onp.conj(E)
    out = onp.stack([
        onp.real(onp.einsum("wtai,wtbi,wab->wt", cE, E, m)),
        -onp.imag(onp.einsum("wtai,wtbi,wab->wt", cE, H, m)),
        onp.real(onp.einsum("wtai,wtbi,wab->wt", cE[..., :2], E[..., :2], m)),
        2.0 * onp.imag(onp.einsum("wta,wtb,wab->wt", cE[..., 0], E[..., 1], m))])
    _ZERO_ORDER_STASH.put(out, None, parts)
    return out


def _zero_order_forms_vjp(argnums, ans, args, kwargs):
    """Each form is Re(kappa sum_ab m_ab conj(X_a) . Y_b) (kappa = 1, i, 1, -2i): with its
    cotangent g, X_bar_a = g conj(kappa sum_b m_ab Y_b), Y_bar_b = g kappa sum_a m_ab
    conj(X_a), m_bar_ab = g kappa conj(X_a) . Y_b (autograd's convention); H = k x E
    passes H_bar x k to E and E x H_bar to k; m = phi1(x), x = i (beta_b - conj beta_a) L."""
    up0, down, s, pu, pd, ku, kd, kz0, L = args
    parts = _ZERO_ORDER_STASH.take(ans, None)
    if parts is None:
        parts = _zero_order_parts(*args)
    E, kv, H, beta, m, slope = parts
    a = E.shape[2]
    cE = onp.conj(E)
    mE = onp.einsum("wab,wtbi->wtai", m, E)            # sum_b m_ab E_b
    mH = onp.einsum("wab,wtbi->wtai", m, H)
    Em = onp.einsum("wab,wtai->wtbi", m, cE)           # sum_a m_ab conj(E_a)
    EE_ab = onp.einsum("wtai,wtbi->wtab", cE, E)       # conj(E_a) . E_b
    EH_ab = onp.einsum("wtai,wtbi->wtab", cE, H)
    E2_ab = onp.einsum("wtai,wtbi->wtab", cE[..., :2], E[..., :2])
    E3_ab = onp.einsum("wta,wtb->wtab", cE[..., 0], E[..., 1])
    two = onp.array([1.0, 1.0, 0.0])
    e0, e1 = onp.eye(3)[0], onp.eye(3)[1]
    real_in = [not onp.iscomplexobj(v) for v in args]

    def vjp(g):   # linear in g with autograd operations: reverse mode applied twice works
        gE, gC, gS, g3 = (g[i][..., None, None] for i in range(4))   # (W, T, 1, 1)
        Ebar = (gE * (np.conj(mE) + Em) + gS * (np.conj(mE) + Em) * two
                + gC * np.conj(1j * mH)
                + g3 * (np.conj(-2j * mE[..., 1:2]) * e0 + (-2j) * Em[..., 0:1] * e1))
        Hbar = gC * 1j * Em
        Ebar = Ebar + np.cross(Hbar, kv[:, None] * np.ones(Hbar.shape))
        gm = g[:, :, :, None, None]
        mbar = np.sum(gm[0] * EE_ab + gm[1] * 1j * EH_ab + gm[2] * E2_ab
                      + gm[3] * (-2j) * E3_ab, axis=1)               # (W, a, b)
        xbar = mbar * slope
        out = {}
        # E_a = A_s s + A_p p_a
        if 0 in argnums:
            out[0] = np.stack([np.sum(Ebar[:, :, 0] * s[:, None], axis=-1),
                               np.sum(Ebar[:, :, 0] * pu[:, None], axis=-1)], axis=-1)
        if 1 in argnums:
            out[1] = np.stack([np.sum(Ebar[:, :, 1] * s[:, None], axis=-1),
                               np.sum(Ebar[:, :, 1] * pd[:, None], axis=-1)], axis=-1)
        if 2 in argnums:
            v = np.sum(up0[..., 0, None] * Ebar[:, :, 0], axis=1)
            if a > 1:
                v = v + np.sum(down[..., 0, None] * Ebar[:, :, 1], axis=1)
            out[2] = v
        if 3 in argnums:
            out[3] = np.sum(up0[..., 1, None] * Ebar[:, :, 0], axis=1)
        if 4 in argnums:   # p_down and k_down: only the down wave (host-side light)
            out[4] = (np.sum(down[..., 1, None] * Ebar[:, :, 1], axis=1) if a > 1
                      else onp.zeros(onp.shape(pd), complex))
        if {5, 6} & set(argnums):
            kbar = np.sum(np.cross(E, Hbar), axis=1)                  # (W, a, 3)
            if 5 in argnums:
                out[5] = kbar[:, 0]
            if 6 in argnums:
                out[6] = kbar[:, 1] if a > 1 else onp.zeros(onp.shape(kd), complex)
        if 7 in argnums or 8 in argnums:
            beta_bar = (np.sum(xbar * 1j * L, axis=1)
                        + np.conj(np.sum(xbar * (-1j * L), axis=2)))  # (W, a)
            if 7 in argnums:
                out[7] = beta_bar[:, 0] - beta_bar[:, 1] if a > 1 else beta_bar[:, 0]
            if 8 in argnums:
                out[8] = np.real(np.sum(xbar * 1j * (beta[:, None, :]
                                                      - onp.conj(beta)[:, :, None])))
        return tuple(np.real(out[i]) if real_in[i] else out[i] for i in argnums)

    return vjp


defvjp_argnums(_zero_order_forms, _zero_order_forms_vjp)


def order_averages(content: OrderContent, thickness, *, side: str = "host") -> dict:
    """Cell- and slab-averaged |E|^2, C_hat, S0, S3 of every order, (W, 2, G) each.

    Parameters
    ----------
    content : OrderContent — amplitudes at the bottom of the region
    thickness : float — slab thickness L >= 0 [m] (0: a plane)
    side : ``'host'`` or ``'substrate'`` — illumination side (no incident downward wave
        from the substrate side)

    Notes
    -----
    Orders other than (0,0) are single upward waves; with ``a_s, a_p`` on (s, p_up),
    ``c = kz/k``, ``K = |q|/k`` and ``|p|^2 = K^2 + |c|^2`` (2K^2 - 1 if evanescent):
    ``|E|^2 = |a_s|^2 + |p|^2 |a_p|^2``, ``C_hat = -(1 + |p|^2) Im(conj(a_s) a_p)``,
    ``S0 = |a_s|^2 + |c|^2 |a_p|^2``, ``S3 = 2 Im(conj(c a_p) a_s)`` (in-plane field
    ``(c a_p, a_s)`` on the right-handed axes (q_hat, s)), times the slab mean of
    ``exp(-2 Im(kz) z)``. The (0,0) order is the up wave plus the incident down wave;
    each product of waves a, b is averaged with the mean of
    ``exp(i (beta_b - conj(beta_a)) z)``, ``beta = +-kz``, over the slab: the
    up/down cross terms oscillate as ``exp(-+2 i Re(kz) z)``.

    References
    ----------
    docs/theory.md §5, §12, §14 (single-wave forms).
    """
    up = content.up
    decay = np.real(_phi1(-2.0 * np.imag(content.kz) * thickness))[:, None]   # (W, 1, G)
    forms = _single_wave_forms(up, content.kz_over_k, content.K, decay)   # (4, W, 2, G)

    # (0,0): up and down waves with interference, one primitive
    o0 = OrderContent(content.mn[:1], content.g_norm[:1], content.q[:, :1], content.kz[:, :1],
                      content.k, content.up[..., :1], content.down, content.z,
                      content.azimuth, content.n_host)
    s, pu, pd, ku, kd = (v[:, 0] for v in o0.basis())
    r0 = _zero_order_forms(up[:, :, :, 0], content.down if side == "host" else None,
                           s, pu, pd, ku, kd, content.kz[:, 0], thickness)
    keys = ("EE", "C", "S0", "S3")
    # the (0,0) order's interference forms replace its single-wave ones
    both = np.concatenate([r0[..., None], forms[..., 1:]], axis=-1)
    return {key: both[i] for i, key in enumerate(keys)}


def region_content(solution: Solution, region, *, tol: float | None = None):
    """Order content at the bottom of a region and the region's thickness.

    Returns
    -------
    (content, thickness) : OrderContent at ``z_lo`` (orders chosen by
    :func:`chiropt.fields.region_g_max` for ``tol``) and ``z_hi - z_lo`` [m].
    """
    st = solution.structure
    z_lo, z_hi = region_span(st, region)
    g_max = region_g_max(st, z_lo, tol=tol)
    return order_content(solution, z_lo, g_max=g_max), z_hi - z_lo


def region_averages(solution: Solution, region, *, tol: float | None = None) -> dict:
    """Region-averaged |E|^2, C_hat, S0, S3 per helicity, (W, 2) each, plus per order.

    Parameters
    ----------
    solution : Solution
    region : RegionSpec-like (``kind`` plane or slab; fields in nm, may be traced)
    tol : float, optional — order truncation target (default ``structure.tolerance``)

    Returns
    -------
    dict: ``EE, C, S0, S3`` (W, 2) [V^2/m^2]; ``orders`` the per-order dict (W, 2, G);
    ``content`` the OrderContent at the region bottom; ``thickness`` [m].

    References
    ----------
    docs/theory.md §13 (Parseval: cross terms of different orders vanish on the cell average).
    """
    content, L = region_content(solution, region, tol=tol)
    per = order_averages(content, L, side=solution.structure.side)
    out = {key: np.sum(val, axis=-1) for key, val in per.items()}
    out.update(orders=per, content=content, thickness=L)
    return out


def _truncation(per: dict, content: OrderContent):
    """Share of the outermost ring of orders kept in u (plus |c|), (W,) plain.

    Ring: max|G| - |b|min < |G| <= max|G| (|b|min the shortest reciprocal vector). The
    dropped orders beyond hold about exp(-2 |b| d)/(1 - exp(-2 |b| d)) of it (geometric
    decay from the nearest particle at distance d), i.e. less than the ring itself once
    |b| d > 0.35: the estimate is an upper bound in practice (measured 2-4x above the
    true error of u and g, 4-60x, on the cases of tests/test_metrics.py).
    """
    EE, C = getval(per["EE"]), getval(per["C"])
    gn = content.g_norm
    if len(gn) < 2:
        return onp.zeros(EE.shape[0])
    ring = gn > gn.max() - gn[gn > 0].min()
    u_all = onp.sum(EE, axis=(1, 2)) / 2.0
    u_ring = onp.sum(EE[..., ring], axis=(1, 2)) / 2.0
    c_ring = onp.abs(onp.sum(C[:, 0, ring] - C[:, 1, ring], axis=-1)) / 2.0
    return (u_ring + c_ring) / u_all


def region_metrics(solution: Solution, region, *, tol: float | None = None,
                   area_grid: int = 48, area_planes: int = 4,
                   plain_capacity: bool = False) -> dict:
    """Metrics of docs/theory.md §12 averaged over a plane or slab above the particles.

    Parameters
    ----------
    solution : Solution — from :func:`chiropt.solve.solve` (no extra orders needed:
        the evanescent orders are computed from the moments)
    region : RegionSpec-like — ``kind='plane'`` with ``height_nm`` [nm] above the highest
        particle top, or ``kind='slab'`` with ``from_nm`` [nm] and ``thickness_nm`` [nm];
        numeric fields may be autograd-traced
    tol : float, optional — relative truncation target of the orders (default
        ``structure.tolerance``)
    area_grid : int — grid points per lattice vector for the area fraction; 0 skips it
    area_planes : int — z planes (midpoints) sampled in a slab for the area fraction
    plain_capacity : bool — compute the capacity metrics from plain values (no derivatives
        through them; the same numbers)

    Returns
    -------
    dict: ``u, c, g, background`` (W,) [-]; ``s0, docp`` as ``{"+1": (W,), "-1": (W,)}``;
    ``area_fraction`` ``{"+1", "-1"}`` (W,) (absent when ``area_grid=0``);
    ``truncation`` (W,) estimated relative truncation error (plain values);
    ``n_orders`` number of orders kept; the capacity metrics of
    :func:`chiropt.capacity.capacity_metrics` (``g_00, g_prop, g_ev, ev_share,
    cd_capacity, cd_efficiency`` (W,), ``ev_share_h, docp_efficiency`` per helicity,
    ``order_share``, ``order_K``; absent for sampled regions).

    Notes
    -----
    Averages are exact sums over orders (Parseval) with closed-form z integrals; they are
    autograd-differentiable. The area fraction (fraction of the region where the local
    lab-frame S3 has the sign of the incident's S3_inc) is a grid count, not
    differentiable (returned as plain values).

    References
    ----------
    docs/theory.md §5, §12; Tang & Cohen, PRL 104, 163901 (2010).
    """
    st = solution.structure
    if getattr(region, "inside_layer", False):
        return sampled_region_metrics(solution, region)
    avg = region_averages(solution, region, tol=tol)
    ref = incident_reference(st)
    out = _metrics_from(avg, ref)
    out["truncation"] = _truncation(avg["orders"], avg["content"])
    out["n_orders"] = int(len(avg["content"].mn))
    inputs = (avg["orders"], avg["content"].K, ref["s3"])
    if plain_capacity:
        inputs = untraced(inputs)
    out.update(capacity_metrics(inputs[0], inputs[1], cd_bound(inputs[1]), inputs[2]))
    if area_grid:
        frac = handedness_fraction(avg["content"], avg["thickness"], st, n=area_grid,
                                   planes=area_planes)
        out["area_fraction"] = {key: frac[:, i] for i, key in enumerate(HELICITY_KEYS)}
    return out


SAMPLE_GRID = 40    # in-plane points per lattice vector of a sampled region
SAMPLE_NODES = 4    # Gauss-Legendre nodes per layer crossed by a sampled region


def sampled_region_metrics(solution, region, *, n: int = SAMPLE_GRID,
                           nodes: int = SAMPLE_NODES) -> dict:
    """Metrics of a region that reaches between the particles, from sampled fields.

    For solutions that can give fields anywhere (``fields_at``, ``distance_to_particles``:
    the Fourier solver). The region (a slab measured from the substrate top, or the film
    of ``thickness_nm`` around the particles' tops and side walls) is sampled on an
    ``n`` x ``n`` grid of cell midpoints times Gauss-Legendre nodes in z (``nodes`` per
    layer crossed, so no node sits on an interface where E_z jumps); points inside the
    particles are left out, so the averages are over where molecules can be.

    Returns the dict of :func:`region_metrics`; ``truncation`` is here the sampling
    error estimate: the largest relative change of u, c and s0 when every other grid
    point is dropped (a grid of n/2). The point set is fixed by plain geometry, so
    derivatives follow the fields at fixed sample points, not the moving boundary.

    References
    ----------
    docs/theory.md §12 (the metrics), §16 (fields inside the layers);
    Abramowitz & Stegun (1964) 25.4.29 (Gauss-Legendre nodes).
    """
    st = solution.structure
    z_lo, z_hi = region_span(st, region)
    lo, hi = float(getval(z_lo)), float(getval(z_hi))
    cuts = sorted({lo, hi} | {float(getval(b)) for bound in solution.layer_bounds
                              for b in bound if lo < float(getval(b)) < hi}
                  | ({float(getval(solution.z_interface))}
                     if lo < float(getval(solution.z_interface)) < hi else set()))
    x, w = onp.polynomial.legendre.leggauss(nodes)
    zs, wz = [], []
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        zs += list(0.5 * (a + b) + 0.5 * (b - a) * x)
        wz += list(0.5 * (b - a) * w)
    plain = st.lattice.plain()
    u = (onp.arange(n) + 0.5) / n - 0.5
    U, V = [g.ravel() for g in onp.meshgrid(u, u, indexing="ij")]
    coarse = ((onp.arange(n)[:, None] % 2 == 0) & (onp.arange(n)[None, :] % 2 == 0)).ravel()
    a1, a2 = st.lattice.a1, st.lattice.a2
    xy = np.stack([U * a1[0] + V * a2[0], U * a1[1] + V * a2[1]], axis=1)   # traced lattice
    xy_plain = onp.stack([U * plain.a1[0] + V * plain.a2[0],
                          U * plain.a1[1] + V * plain.a2[1]], axis=1)
    cache: dict = {}
    sums = {"fine": None, "coarse": None}
    counts = {"fine": 0.0, "coarse": 0.0}
    same = []
    for z, weight in zip(zs, wz, strict=True):
        dist = solution.distance_to_particles(xy_plain, z)
        keep = dist > 0
        if region.kind == "surface":
            keep &= dist <= float(getval(region.thickness_nm)) * NM
        if not keep.any():
            continue
        E, ZH = solution.fields_at(xy[keep], z, cache=cache)
        q = quadratic_maps(E, ZH)                   # (W, 2, P)
        S3 = onp.asarray(getval(q["S3"]))
        same.append((weight, S3))
        for label, mask in (("fine", onp.ones(int(keep.sum()), bool)),
                            ("coarse", coarse[keep])):
            part = {k: weight * np.sum(v[..., mask], axis=-1) for k, v in q.items()}
            sums[label] = part if sums[label] is None else {
                k: sums[label][k] + part[k] for k in part}
            counts[label] += weight * float(mask.sum())
    if sums["fine"] is None:
        raise InputError("region", "the region holds no point outside the particles")
    ref = incident_reference(st)
    avg = {k: v / counts["fine"] for k, v in sums["fine"].items()}
    out = _metrics_from(avg, ref)
    if sums["coarse"] is not None:
        rough = _metrics_from({k: v / counts["coarse"] for k, v in sums["coarse"].items()}, ref)
        err = onp.zeros(len(getval(st.k0)))
        for key in ("u", "c"):
            fine, crude = onp.asarray(getval(out[key])), onp.asarray(getval(rough[key]))
            err = onp.maximum(err, onp.abs(crude - fine) / onp.maximum(onp.abs(fine), 1e-300))
        out["truncation"] = err
    else:
        out["truncation"] = onp.full(len(getval(st.k0)), onp.nan)
    inc_sign = onp.sign(onp.asarray(getval(ref["s3"])))            # (W, 2)
    total = sum(weight * s3.shape[-1] for weight, s3 in same)
    frac = sum(weight * onp.sum(onp.sign(s3) == inc_sign[..., None], axis=-1)
               for weight, s3 in same) / total
    out["area_fraction"] = {key: frac[:, i] for i, key in enumerate(HELICITY_KEYS)}
    out["n_orders"] = int(solution.harmonics)
    out["sampled_points"] = int(sum(s3.shape[-1] for _, s3 in same))
    return out


def handedness_fraction(content: OrderContent, thickness, structure: Structure, *,
                        n: int = 48, planes: int = 4):
    """Fraction of a plane or slab where the local S3 has the incident's sign, (W, 2).

    Parameters
    ----------
    content : OrderContent — at the region bottom
    thickness : float — slab thickness [m] (0: the plane itself)
    structure : Structure
    n : int — grid points per lattice vector (grid of :func:`chiropt.fields.cell_grid`)
    planes : int — z samples (midpoints) in a slab

    Notes
    -----
    Evaluated by inverse FFT on the n x n grid (orders aliased onto the grid exactly as
    sampling does); plain numpy, no derivative (a step function). The sign map varies
    on the scale of the shortest decay length and of the period; n = 48 resolves the
    pattern of the rings that dominate above the tops (the test checks the fraction
    against n = 96).
    """
    L = float(getval(thickness))
    plain = _plain_content(content)
    if L > 0:
        dzs = (onp.arange(planes) + 0.5) / planes * L
    else:
        dzs = onp.zeros(1)
    ref = getval(incident_reference(structure)["s3"])
    sign = onp.sign(ref)                                                  # (W, 2)
    idx = (plain.mn[:, 0] % n, plain.mn[:, 1] % n)
    unique = len(set(zip(*idx, strict=True))) == len(plain.mn)
    count = onp.zeros(sign.shape)
    for dz in dzs:
        E, _ = order_fields(plain.shifted(dz))
        E = onp.asarray(E)[..., :2]                                       # (W, 2, G, 2)
        grid = onp.zeros(E.shape[:2] + (2, n, n), dtype=complex)
        where = (slice(None), slice(None), slice(None)) + idx
        if unique:
            grid[where] = onp.moveaxis(E, 2, -1)
        else:  # orders alias onto the same grid frequency: they add, as sampling does
            onp.add.at(grid, where, onp.moveaxis(E, 2, -1))
        f = onp.fft.ifft2(grid, axes=(-2, -1)) * n * n                   # (W, 2, 2, n, n)
        s3 = 2.0 * onp.imag(onp.conj(f[:, :, 0]) * f[:, :, 1])
        count += onp.mean(s3 * sign[:, :, None, None] > 0, axis=(-2, -1))
    return count / len(dzs)


def _plain_content(c: OrderContent) -> OrderContent:
    return OrderContent(c.mn, c.g_norm, *(onp.asarray(getval(x)) for x in
                                          (c.q, c.kz, c.k, c.up, c.down, c.z, c.azimuth,
                                           c.n_host)))


# ----------------------------------------------------------------------------------------
# per-order metrics and the attainable (DOCP, g) region
# ----------------------------------------------------------------------------------------

def cd_bound(K):
    """Largest |g| of one plane wave with in-plane wavenumber K = |q|/k [-].

    ``K^2/sqrt(2 K^2 - 1)`` for an evanescent wave (K > 1), 1 for a propagating one.

    References
    ----------
    docs/theory.md §14 (our derivation: |E|^2 = |s|^2 + (2K^2-1)|p|^2, C ~ 2K^2 Im(conj(s) p);
    tested in tests/test_metrics.py).
    """
    ev = onp.asarray(getval(K)) > 1.0
    Ks = np.where(ev, K, 2.0)
    return np.where(ev, Ks ** 2 / np.sqrt(2.0 * Ks ** 2 - 1.0), 1.0)


def attainable_fill(K, docp, g):
    """Where a single wave's (DOCP, g) lies in its attainable region: radial fill [-].

    Parameters
    ----------
    K : array — |q|/k of the wave [-]
    docp : array — lab-frame S3/S0 of the wave (not normalized to the incident) [-]
    g : array — C_hat/|E|^2 of the wave [-]

    Returns
    -------
    array — ``|point| / |boundary point on the same ray from the origin|``: <= 1 inside,
    1 on the boundary, > 1 outside (inf where a propagating wave's ray misses the region).

    Notes
    -----
    Evanescent (K > 1): the region is the union over r = |p/s| of ellipses with semi-axes
    ``a(r) = 2 alpha r/(1 + alpha^2 r^2)`` (DOCP), ``b(r) = 2 K^2 r/(1 + beta^2 r^2)`` (g),
    alpha^2 = K^2 - 1, beta^2 = 2K^2 - 1. A point is inside iff
    ``min_r (D^2/a^2 + g^2/b^2) <= 1``; with ``c1 = D^2/(4 alpha^2)``, ``c2 = g^2/(4 K^4)``
    the minimum is ``2 sqrt((c1 + c2)(c1 alpha^4 + c2 beta^4)) + 2 (c1 alpha^2 + c2 beta^2)``,
    homogeneous of degree 2 in (D, g): its square root is the radial fill (our derivation).
    Propagating (K < 1, c = sqrt(1 - K^2)): DOCP and g share the factor -Im(conj(s) p):
    ``(D, g) = u (2 c r/(1 + c^2 r^2), 2 r/(1 + r^2))``, |u| <= 1; eliminating r
    (``r . 1/r = 1``) gives the fill ``|u| = K^2 |g D| / (2 sqrt(c (D - c g)(g - c D)))``
    (inf outside the cone c <= g/D <= 1/c). The region pinches to the origin at the cone
    edges (nearly pure s or p waves, r -> 0 or infinity; width ~ K^2 min(r, 1/r)^2): the
    fill is ill-conditioned within round-off of them.

    References
    ----------
    docs/theory.md §14.
    """
    K = onp.asarray(getval(K), dtype=float)
    D = onp.asarray(getval(docp), dtype=float)
    g = onp.asarray(getval(g), dtype=float)
    K, D, g = onp.broadcast_arrays(K, D, g)
    out = onp.full(K.shape, onp.nan)
    ev = K > 1.0
    a2 = K[ev] ** 2 - 1.0
    b2 = 2.0 * K[ev] ** 2 - 1.0
    c1 = D[ev] ** 2 / (4.0 * a2)
    c2 = g[ev] ** 2 / (4.0 * K[ev] ** 4)
    out[ev] = onp.sqrt(2.0 * onp.sqrt((c1 + c2) * (c1 * a2 ** 2 + c2 * b2 ** 2))
                       + 2.0 * (c1 * a2 + c2 * b2))
    pr = ~ev
    Kp = K[pr]
    c = onp.sqrt(onp.clip(1.0 - Kp ** 2, 0.0, 1.0))
    scale = onp.maximum(onp.abs(D[pr]), onp.abs(g[pr]))
    safe = onp.where(scale > 0, scale, 1.0)
    Dp, gp = D[pr] / safe, g[pr] / safe
    prod = c * (Dp - c * gp) * (gp - c * Dp)
    with onp.errstate(divide="ignore", invalid="ignore"):
        u = Kp ** 2 * onp.abs(gp * Dp) / (2.0 * onp.sqrt(prod)) * safe
    u = onp.where(prod < 0, onp.inf, u)
    # near-normal waves (cone narrower than 1e-8): DOCP = g to that accuracy, fill |g|
    u = onp.where(Kp ** 2 < 1e-8, onp.where(onp.abs(Dp - gp) < 1e-7, onp.abs(g[pr]), onp.inf), u)
    u = onp.where(scale < 1e-12, scale, u)  # at the origin to round-off
    out[pr] = u
    return out


def attainable_boundary(K: float, n: int = 721):
    """Boundary of the attainable (DOCP, g) region of one wave, for plotting.

    Parameters
    ----------
    K : float — |q|/k [-]
    n : int — number of points

    Returns
    -------
    (docp, g) : arrays (n,) [-] — a closed curve for K > 1; for K <= 1 the two loops
    (first and third quadrant) separated by a NaN.

    References
    ----------
    docs/theory.md §14 (see :func:`attainable_fill`).
    """
    K = float(K)
    if K > 1.0:
        th = onp.linspace(0.0, 2.0 * onp.pi, n)
        x, y = onp.cos(th), onp.sin(th)
        rad = 1.0 / attainable_fill(K * onp.ones(n), x, y)
        return rad * x, rad * y
    c = onp.sqrt(1.0 - K ** 2)
    half = (n - 1) // 2
    r = onp.tan(onp.linspace(0.0, onp.pi / 2, half))
    with onp.errstate(invalid="ignore"):
        D = onp.where(onp.isfinite(r), 2 * c * r / (1 + c ** 2 * r ** 2), 0.0)
        G = onp.where(onp.isfinite(r), 2 * r / (1 + r ** 2), 0.0)
    return (onp.concatenate([D, [onp.nan], -D]), onp.concatenate([G, [onp.nan], -G]))


def order_metrics(solution: Solution, region, *, tol: float | None = None) -> dict:
    """Per-order metrics over a region, arrays (W, G) (differentiable ones traced).

    Returns
    -------
    dict: ``mn`` (G, 2) int; ``K`` (W, G) |q|/k; ``evanescent`` (W, G) bool;
    ``share`` (W, G) of the region's <|E|^2> (both helicities); ``g`` (W, G)
    helicity-combined ``(C+ - C-)/(|E+|^2 + |E-|^2)`` of the order; ``docp``
    ``{"+1", "-1"}`` (W, G) normalized to the incident's DOCP; ``bound`` (W, G)
    (NaN for (0,0)); ``fill`` ``{"+1", "-1"}`` (W, G) radial fill of the order's own
    attainable region at its per-helicity (lab DOCP, C_hat/|E|^2) (NaN for (0,0)).

    References
    ----------
    docs/theory.md §12 (per-order metrics), §14 (bounds).
    """
    st = solution.structure
    avg = region_averages(solution, region, tol=tol)
    per, content = avg["orders"], avg["content"]
    ref = incident_reference(st)
    EE, C, S0, S3 = per["EE"], per["C"], per["S0"], per["S3"]
    tot = np.sum(EE[:, 0] + EE[:, 1], axis=-1)[:, None]
    K = content.K
    G = K.shape[1]
    first = onp.arange(G) == 0
    out: dict[str, Any] = {
        "mn": content.mn, "K": K, "evanescent": getval(K) > 1.0,
        "share": (EE[:, 0] + EE[:, 1]) / tot,
        "g": (C[:, 0] - C[:, 1]) / (EE[:, 0] + EE[:, 1]),
        "bound": onp.where(first[None, :], onp.nan, getval(cd_bound(K))),
        "docp": {}, "fill": {}}
    for i, key in enumerate(HELICITY_KEYS):
        out["docp"][key] = S3[:, i] / S0[:, i] / ref["docp"][:, i][:, None]
        fill = attainable_fill(K, getval(S3[:, i] / S0[:, i]), getval(C[:, i] / EE[:, i]))
        out["fill"][key] = onp.where(first[None, :], onp.nan, fill)
    return out


def order_table(solution: Solution, region, wavelength_index: int, *,
                tol: float | None = None, min_share: float = 0.0) -> list[dict]:
    """JSON-ready per-order table at one wavelength (docs/cli.md ``"orders"``).

    Parameters
    ----------
    solution : Solution
    region : RegionSpec-like
    wavelength_index : int — index into the solution's wavelengths
    tol : float, optional — order truncation target
    min_share : float — leave out orders with a smaller share of <U> [-] (0 keeps all)

    Returns
    -------
    list of dicts, one per order: ``m, n, K, evanescent, share, g, docp {"+1", "-1"},
    bound`` (number for evanescent orders, 1 for propagating orders other than (0,0),
    None for (0,0)), ``fill {"+1", "-1"}`` (None for (0,0); see :func:`attainable_fill`).
    """
    W = len(onp.atleast_1d(getval(solution.structure.wavelength_nm)))
    if isinstance(wavelength_index, bool) or not isinstance(wavelength_index, (int, onp.integer)) \
            or not -W <= wavelength_index < W:
        raise InputError("wavelength_index", f"got {wavelength_index!r}, allowed an integer "
                                             f"in [0, {W - 1}]")
    om = order_metrics(solution, region, tol=tol)
    w = int(wavelength_index)

    def val(x):
        return onp.asarray(getval(x))[w]

    rows = []
    for j, (m, n) in enumerate(om["mn"]):
        share = float(val(om["share"])[j])
        if share < min_share:
            continue
        zero = j == 0
        rows.append({
            "m": int(m), "n": int(n), "K": float(val(om["K"])[j]),
            "evanescent": bool(om["evanescent"][w, j]), "share": share,
            "g": float(val(om["g"])[j]),
            "docp": {key: float(val(om["docp"][key])[j]) for key in HELICITY_KEYS},
            "bound": None if zero else float(om["bound"][w, j]),
            "fill": None if zero else {key: _json_number(om["fill"][key][w, j])
                                       for key in HELICITY_KEYS}})
    return rows


def _json_number(x):
    x = float(x)
    return x if onp.isfinite(x) else None


# ----------------------------------------------------------------------------------------
# maps at a plane
# ----------------------------------------------------------------------------------------

def plane_maps(solution: Solution, z_nm: float, n: int, *, tol: float | None = None) -> dict:
    """Local metric maps on the n x n cell grid at height ``z_nm`` [nm] above the stack origin.

    Parameters
    ----------
    solution : Solution
    z_nm : float — plane height [nm] (substrate top, or particle bottoms, at 0)
    n : int — grid points per lattice vector
    tol : float, optional — order truncation target

    Returns
    -------
    dict of :func:`local_metrics` maps (W, n, n), plus ``x_nm``, ``y_nm`` (n, n).
    """
    st = solution.structure
    content = order_content(solution, z_nm * NM, tol=tol)
    E, ZH = field_maps(content, st.lattice, n)
    out = local_metrics(E, ZH, st)
    xy = cell_grid(st.lattice.plain(), n) / NM
    out["x_nm"], out["y_nm"] = xy[..., 0], xy[..., 1]
    return out
