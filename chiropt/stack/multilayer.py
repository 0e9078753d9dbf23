"""Reflection and transmission of a substrate with thin films, per diffraction order.

Owns: ``stack_coefficients`` (s/p amplitude coefficients of host | films |
substrate for every order, from either side) and its result record
``StackCoefficients``.

Geometry: the substrate fills ``z < 0``; films, listed bottom first (top layer
last), fill ``0 < z < z_top`` (``z_top`` = sum of thicknesses); the lossless host
fills ``z > z_top``. Conventions (basis, ``kz`` branch, amplitudes) are those of
:mod:`chiropt.stack.fresnel`.

Method: the tangential fields ``(E_t, Z0 H_t)`` of the order are carried through
each film with its characteristic matrix (Born & Wolf §1.6.2), whose entries
``cos(kz d)``, ``kz sin(kz d)`` and ``sin(kz d)/kz`` are entire in ``(kz d)^2``.
Where ``|kz d| <= 1`` they are summed as power series (no branch point at
``kz = 0`` in a film, where the r/t recursion of Yeh (1988) meets 0/0, and finite
derivatives there); elsewhere they are multiplied by the decaying factor
``exp(i kz d)``, which keeps them bounded for thick films with evanescent or
absorbed waves (no overflow). The result equals that recursion (docs/theory.md §10)
wherever the latter is defined; the tests check it against tmm, the Airy
formula and a direct solve of the boundary conditions.

Must not import: any chiropt module other than ``chiropt.errors`` and
``chiropt.stack`` (never store/report/cli).
"""

from __future__ import annotations

import math
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

# Inside a film the entries cos(kz d) and sin(kz d)/kz are entire functions of
# z = (kz d)^2. For |z| <= _SERIES_LIMIT they are summed as power series in z
# (_SERIES_TERMS terms: truncation below 1/24! ~ 2e-24); beyond it, as
# exponentials of 2 i kz d with the decaying factor exp(i kz d) taken out.
_SERIES_LIMIT = 1.0
_SERIES_TERMS = 12
_FACTORIALS = [float(math.factorial(k)) for k in range(2 * _SERIES_TERMS)]


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


def _film_entries(kap2, delta):
    """Scaled characteristic-matrix entries of one film, regular at kz = 0.

    Parameters
    ----------
    kap2 : complex array (W, N) — ``(kz/k0)^2 = eps - (q/k0)^2`` of the film [1]
    delta : real array (W, 1) — ``k0 d``, film thickness times k0 [1]

    Returns
    -------
    C, S, phase : complex arrays (W, N) — ``C = f cos(kz d)``,
        ``S = f k0 sin(kz d)/kz`` and ``phase`` with ``f = exp(i phase)``:
        ``phase = kz d`` where ``|kz d| > 1`` (then ``C = (1 + e^{2 i kz d})/2``
        and ``S = k0 (e^{2 i kz d} - 1)/(2 i kz)`` stay bounded however large
        ``Im(kz d)``), and ``phase = 0`` elsewhere (power series in
        ``(kz d)^2``: no branch point at ``kz = 0``, value and derivatives regular).

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.6.2 (entries of the
    characteristic matrix); Abramowitz & Stegun, *Handbook of Mathematical
    Functions* (1964), §4.3 (power series of cos and sin).
    """
    # full (W, N) shape first: autograd's vjp of np.where does not unbroadcast
    delta = delta * np.ones(np.shape(kap2))
    z = kap2 * delta**2
    small = np.abs(z) <= _SERIES_LIMIT
    # series branch (Horner in -z), fed zeros where unused
    minus_z = -np.where(small, z, 0.0)
    c_a, s_a = 0.0, 0.0
    for k in range(_SERIES_TERMS - 1, -1, -1):
        c_a = c_a * minus_z + 1.0 / _FACTORIALS[2 * k]
        s_a = s_a * minus_z + 1.0 / _FACTORIALS[2 * k + 1]
    s_a = s_a * delta
    # exponential branch, fed a harmless value (kz d = 2) where unused
    kap_b = np.sqrt(np.where(small, 4.0 + 0j, kap2))
    kap_b = np.where(np.imag(kap_b) < 0, -kap_b, kap_b)
    delta_b = np.where(small, 1.0, delta)
    x = 2j * kap_b * delta_b
    c_b = (1 + np.exp(x)) / 2
    s_b = delta_b * np.expm1(x) / x
    phase = np.where(small, 0j, kap_b * delta_b)
    return np.where(small, c_a, c_b), np.where(small, s_a, s_b), phase


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
    ``kz d`` (x along ``q_hat``; scaled by ``exp(i kz d)`` where ``|kz d| > 1``);
    the host and substrate fields are then split into up- and downgoing waves.

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.6.2 (characteristic
    matrix of a stratified medium) and §1.6.4 (single film);
    Yeh, *Optical Waves in Layered Media* (1988), ch. 5 (multilayer r and t,
    recursion); Chew, *Waves and Fields in Inhomogeneous Media* (1990), §2.1
    (generalized reflection coefficients); docs/theory.md §10.
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
        C, S, phase_j = _film_entries(kap2, k0_col * d_j)
        S = sign * S
        e_sv, h_sv = C * e_sv - 1j * S * h_sv, -1j * kap2 * S * e_sv + C * h_sv
        e_pv, h_pv = C * e_pv + 1j * kap2 * S / e_j * h_pv, 1j * e_j * S * e_pv + C * h_pv
        phase = phase + phase_j
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
