"""Reflection and transmission of a substrate with thin films, per diffraction order.

Owns: ``stack_coefficients`` (s/p amplitude coefficients of host | films |
substrate for every order, from either side) and its result record
``StackCoefficients``.

Geometry: the substrate fills ``z < 0``; films, listed bottom first (top layer
last), fill ``0 < z < z_top`` (``z_top`` = sum of thicknesses); the lossless host
fills ``z > z_top``. Conventions (basis, ``kz`` branch, amplitudes) are those of
:mod:`chiropt.stack.fresnel`.

Method: the tangential fields ``(E_t, Z0 H_t)`` of the order are carried through
each film with its characteristic matrix (Born & Wolf §1.6.2), multiplied by the
decaying factor ``exp(i kz d)``. Its entries are then
``C = (1 + exp(2 i kz d))/2`` and ``d (exp(2 i kz d) - 1)/(2 i kz d)``, bounded for
``Im(kz) >= 0`` (no overflow for thick films with evanescent or absorbed waves)
and regular at ``kz -> 0`` inside a film, where the r/t recursion of Yeh (1988)
meets 0/0. The result equals that recursion (FORMULAS.md §3) wherever the latter
is defined; the tests check both against tmm and against the boundary conditions.

Must not import: any chiropt module other than ``chiropt.errors`` and
``chiropt.stack`` (never store/report/cli).
"""

from __future__ import annotations

from dataclasses import dataclass

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError
from chiropt.stack.fresnel import (
    _check_permittivity,
    _check_wavenumbers,
    _column,
    _kz_over_k0,
    refractive_index,
)

SIDES = ("host", "substrate")

# Below this |x| the function (exp(x) - 1)/x is evaluated by its Taylor series
# (5 terms: truncation error |x|^5/720 < 2e-18 here).
_SERIES_LIMIT = 1e-3


@dataclass(frozen=True)
class StackCoefficients:
    """Amplitude coefficients of a layered substrate for every diffraction order.

    Attributes
    ----------
    r_s, r_p : complex array (W, N) — reflection amplitude ratios [1]
    t_s, t_p : complex array (W, N) — transmission amplitude ratios [1]
    from_side : str — ``"host"`` (wave coming down from the host) or
        ``"substrate"`` (wave coming up from the substrate); fixes the
        reference planes (see :func:`stack_coefficients`).
    """

    r_s: object
    r_p: object
    t_s: object
    t_p: object
    from_side: str


def _expm1_over_x(x):
    """``(exp(x) - 1)/x``, entire, with value 1 at ``x = 0``; autograd-safe."""
    small = np.abs(x) < _SERIES_LIMIT
    x_safe = np.where(small, 1.0, x)
    series = 1 + x * (1 / 2 + x * (1 / 6 + x * (1 / 24 + x / 120)))
    return np.where(small, series, np.expm1(x_safe) / x_safe)


def _layer_list(eps_layers, thicknesses, n_wavelengths):
    """Validate films; return a list of (eps, thickness) pairs, bottom first."""
    if eps_layers is None:
        eps_layers = []
    if thicknesses is None:
        thicknesses = []
    d_val = onp.asarray(getval(thicknesses) if not isinstance(thicknesses, list | tuple)
                        else [getval(d) for d in thicknesses])
    n_layers = len(eps_layers)
    if d_val.ndim != 1 or d_val.shape[0] != n_layers:
        raise InputError(
            "thicknesses", f"need one thickness per film: {n_layers} film permittivities "
            f"but thicknesses of shape {d_val.shape}"
        )
    if n_layers and (onp.iscomplexobj(d_val) or not onp.all(onp.isfinite(d_val))
                     or onp.any(d_val < 0)):
        raise InputError(
            "thicknesses", f"film thicknesses must be real, finite and >= 0 [m]; got {d_val}"
        )
    layers = []
    for j in range(n_layers):
        _check_permittivity(eps_layers[j], f"eps_layers[{j}]", n_wavelengths)
        layers.append((eps_layers[j], thicknesses[j]))
    return layers


def stack_coefficients(q, k0, eps_host, eps_layers, thicknesses, eps_substrate, *,
                       from_side="host"):
    """s/p reflection and transmission of host | films | substrate, per order.

    Parameters
    ----------
    q : real array (W, N) — in-plane wavenumber of each order [1/m], ``q >= 0``
    k0 : real array (W,) — vacuum wavenumber ``2 pi / wavelength`` [1/m]
    eps_host : real scalar or array (W,) — host (superstrate) permittivity [1], > 0
    eps_layers : sequence of L complex scalars or (W,) arrays, or array (L, W) —
        film permittivities [1], bottom film first; L may be 0
    thicknesses : sequence or array (L,) — film thicknesses [m], >= 0
    eps_substrate : complex scalar or array (W,) — substrate permittivity [1]
    from_side : {"host", "substrate"}, keyword-only — side of the incident wave

    Returns
    -------
    StackCoefficients
        ``r_s, r_p, t_s, t_p``, complex arrays (W, N) [1], amplitudes along
        ``s_hat`` and ``p_hat`` (see :mod:`chiropt.stack.fresnel`).

        - ``from_side="host"``: ``r`` = upgoing / downgoing amplitude in the host
          at ``z = z_top``; ``t`` = downgoing amplitude in the substrate at
          ``z = 0`` / downgoing amplitude in the host at ``z = z_top``.
        - ``from_side="substrate"``: ``r`` = downgoing (reflected) / upgoing
          (incident) amplitude in the substrate at ``z = 0``; ``t`` = upgoing
          amplitude in the host at ``z = z_top`` / upgoing incident amplitude in
          the substrate at ``z = 0``.

    Notes
    -----
    Valid for propagating and evanescent orders, absorbing films and substrates
    (metals, ITO) and ``L = 0`` (then equal to
    :func:`chiropt.stack.fresnel.interface_coefficients`). Differentiable by
    autograd in ``q``, ``k0``, all permittivities and thicknesses. The
    coefficients are infinite exactly at a guided-mode pole of a lossless stack
    (real ``q``); at a Rayleigh anomaly of the host or substrate (``kz = 0``
    there) they stay finite but their derivative in ``q`` does not.

    Reciprocity (tested): ``kz_substrate t_down = kz_host t_up`` for both
    polarizations, ``t_down``/``t_up`` the transmissions from the host/substrate.

    Method: in each film the tangential pair is ``(E_y, Z0 H_x)`` for s and
    ``(E_x, Z0 H_y)`` for p, carried by the characteristic matrix
    ``[[cos, -i k0 sin/kz], [-i kz sin/k0, cos]]`` (s) and
    ``[[cos, i kz sin/(k0 eps)], [i eps k0 sin/kz, cos]]`` (p) of argument
    ``kz d``, scaled by ``exp(i kz d)``; the host and substrate fields are then
    split into up- and downgoing waves.

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.6.2 (characteristic
    matrix of a stratified medium) and §1.6.4 (single film);
    Yeh, *Optical Waves in Layered Media* (1988), ch. 5 (multilayer r and t,
    recursion); Chew, *Waves and Fields in Inhomogeneous Media* (1990), §2.1
    (generalized reflection coefficients); FORMULAS.md §3.
    """
    if from_side not in SIDES:
        raise InputError("from_side", f"must be one of {SIDES}; got {from_side!r}")
    _check_wavenumbers(q, k0)
    n_w = onp.shape(getval(k0))[0]
    _check_permittivity(eps_host, "eps_host", n_w, lossless=True)
    _check_permittivity(eps_substrate, "eps_substrate", n_w)
    layers = _layer_list(eps_layers, thicknesses, n_w)

    k0_col = np.reshape(k0, (-1, 1))
    Q2 = (q / k0_col) ** 2
    e_h = _column(eps_host + 0j, k0)
    e_s = _column(eps_substrate + 0j, k0)
    n_h = refractive_index(e_h)
    n_s = refractive_index(e_s)
    kap_h = _kz_over_k0(q, k0, eps_host)
    kap_s = _kz_over_k0(q, k0, eps_substrate)
    one = np.ones(np.shape(kap_h)) + 0j

    # Tangential fields (E_t, Z0 H_t) of the single outgoing wave (unit amplitude)
    # in the exit medium, at the exit plane; all lengths normalized by 1/k0.
    if from_side == "host":
        e_sv, h_sv = one, kap_s
        e_pv, h_pv = -kap_s / n_s, n_s * one
        sweep, sign = layers, 1.0
    else:
        e_sv, h_sv = one, -kap_h
        e_pv, h_pv = kap_h / n_h, n_h * one
        sweep, sign = layers[::-1], -1.0

    phase = 0j
    for eps_j, d_j in sweep:
        e_j = _column(eps_j + 0j, k0)
        kap2 = e_j - Q2
        kap = _kz_over_k0(q, k0, eps_j)
        delta = k0_col * d_j
        x = 2j * kap * delta
        C = (1 + np.exp(x)) / 2
        S = sign * delta * _expm1_over_x(x)
        e_sv, h_sv = C * e_sv - 1j * S * h_sv, -1j * kap2 * S * e_sv + C * h_sv
        e_pv, h_pv = C * e_pv + 1j * kap2 * S / e_j * h_pv, 1j * e_j * S * e_pv + C * h_pv
        phase = phase + kap * delta
    decay = np.exp(1j * phase)

    if from_side == "host":
        den_s = kap_h * e_sv + h_sv
        den_p = kap_h * h_pv - e_h * e_pv
        r_s = (kap_h * e_sv - h_sv) / den_s
        r_p = (kap_h * h_pv + e_h * e_pv) / den_p
        t_s = decay * 2 * kap_h / den_s
        t_p = decay * 2 * n_h * kap_h / den_p
    else:
        den_s = kap_s * e_sv - h_sv
        den_p = kap_s * h_pv + e_s * e_pv
        r_s = (kap_s * e_sv + h_sv) / den_s
        r_p = (kap_s * h_pv - e_s * e_pv) / den_p
        t_s = decay * 2 * kap_s / den_s
        t_p = decay * 2 * n_s * kap_s / den_p
    return StackCoefficients(r_s=r_s, r_p=r_p, t_s=t_s, t_p=t_p, from_side=from_side)
