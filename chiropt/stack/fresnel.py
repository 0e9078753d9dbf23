"""Single-interface Fresnel coefficients, the normal wavenumber and plane-wave fluxes.

Owns: the branch of the normal wavenumber ``kz`` of one diffraction order in one
medium, the s/p Fresnel coefficients of one planar interface, and the z-directed
Poynting flux carried by one s- or p-polarized plane wave (and the flux ratio of a
transmitted to an incident wave).

Conventions (project-wide, docs/theory.md §1, §5):

- Time dependence ``exp(-i omega t)``; passive media have ``Im(eps) >= 0``;
  media are non-magnetic; ``n = sqrt(eps)`` on the principal branch
  (``Re(n) >= 0``, ``Im(n) >= 0``).
- Every diffraction order is a plane wave with real in-plane wavenumber
  ``q = |q_vec| >= 0`` [1/m], the same in all media (phase matching).
- ``kz = sqrt(eps k0^2 - q^2)`` with ``Im(kz) >= 0``, and ``kz > 0`` when real.
- Polarization basis: ``s_hat = z_hat x q_hat`` (``q_hat = x_hat`` when ``q = 0``),
  ``p_hat = s_hat x k_hat`` with ``k_hat = (q_vec, +-kz)/(n k0)`` (upgoing /
  downgoing), so ``(p_hat, s_hat, k_hat)`` is right-handed. Amplitudes are the
  E-field components along ``s_hat`` and ``p_hat`` (bilinear, also for complex
  evanescent ``p_hat``). With this basis the coefficients below hold for a wave
  going up or going down. At normal incidence ``r_s = -r_p``.
- Arrays: ``q`` has shape ``(W, N)`` (wavelengths, orders); ``k0`` has shape
  ``(W,)``; permittivities are scalars or shape ``(W,)``.

Must not import: any chiropt module other than ``chiropt.errors`` (never
store/report/cli).
"""

from __future__ import annotations

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError

POLARIZATIONS = ("s", "p")


def _column(value, k0):
    """Broadcast a scalar or ``(W,)`` quantity to a ``(W, 1)`` column."""
    return np.reshape(value * np.ones(np.shape(k0)), (-1, 1))


def _check_wavenumbers(q, k0):
    """Raise InputError unless ``q`` is real, >= 0, of shape (W, N) and ``k0`` real > 0, (W,)."""
    q_val = onp.asarray(getval(q))
    k0_val = onp.asarray(getval(k0))
    if onp.iscomplexobj(k0_val) or k0_val.ndim != 1 or not onp.all(k0_val > 0):
        raise InputError(
            "k0", f"vacuum wavenumbers must be a real 1-D array (W,) of values > 0 [1/m]; "
            f"got shape {k0_val.shape}, dtype {k0_val.dtype}"
        )
    if onp.iscomplexobj(q_val) or q_val.ndim != 2 or q_val.shape[0] != k0_val.shape[0]:
        raise InputError(
            "q", f"in-plane wavenumbers must be a real array of shape (W, N) = "
            f"({k0_val.shape[0]}, N) [1/m]; got shape {q_val.shape}, dtype {q_val.dtype}"
        )
    if not onp.all(onp.isfinite(q_val)) or onp.any(q_val < 0):
        raise InputError(
            "q", f"in-plane wavenumbers |q| must be finite and >= 0 [1/m]; "
            f"smallest given {onp.min(q_val) if q_val.size else 'none'}"
        )


def _check_permittivity(eps, key, n_wavelengths, *, lossless=False):
    """Raise InputError unless ``eps`` is a scalar or (W,) array of a passive medium."""
    val = onp.asarray(getval(eps))
    if val.ndim > 1 or (val.ndim == 1 and val.shape[0] != n_wavelengths):
        raise InputError(
            key, f"permittivity must be a scalar or an array of shape ({n_wavelengths},) "
            f"(one value per wavelength); got shape {val.shape}"
        )
    if not onp.all(onp.isfinite(val)):
        raise InputError(key, "permittivity must be finite")
    if onp.any(onp.imag(val) < 0):
        raise InputError(
            key, f"Im(eps) = {onp.min(onp.imag(val)):.3g} < 0: passive media need "
            "Im(eps) >= 0 with exp(-i omega t) (index n + i k, k >= 0); "
            "was the index given as n - i k?"
        )
    if lossless and (onp.any(onp.imag(val) != 0) or onp.any(onp.real(val) <= 0)):
        raise InputError(
            key, "the host (superstrate) must be lossless with real eps > 0; "
            f"got eps between {onp.min(onp.real(val)):.4g} and {onp.max(onp.real(val)):.4g}"
            f" with Im up to {onp.max(onp.imag(val)):.3g}"
        )


def _check_pol(pol):
    if pol not in POLARIZATIONS:
        raise InputError("pol", f"polarization must be one of {POLARIZATIONS}; got {pol!r}")


def refractive_index(eps):
    """Complex refractive index ``n = sqrt(eps)`` on the passive branch.

    Parameters
    ----------
    eps : complex array or scalar — relative permittivity [1], ``Im(eps) >= 0``

    Returns
    -------
    n : complex array — refractive index [1] with ``Re(n) >= 0`` and ``Im(n) >= 0``

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), ch. 14 (complex index of
    absorbing media).
    """
    return np.sqrt(eps + 0j)


def _kz_over_k0(q, k0, eps):
    """Normalized normal wavenumber ``kz/k0`` on the branch ``Im >= 0``, shape (W, N)."""
    Q = q / np.reshape(k0, (-1, 1))
    kappa = np.sqrt(_column(eps, k0) - Q**2 + 0j)
    # A negative zero imaginary part (e.g. from conj) would pick the -i branch.
    return np.where(np.imag(kappa) < 0, -kappa, kappa)


def normal_wavenumber(q, k0, eps):
    """Normal (z) wavenumber of each diffraction order in a homogeneous medium.

    Parameters
    ----------
    q : real array (W, N) — in-plane wavenumber of each order [1/m], ``q >= 0``
    k0 : real array (W,) — vacuum wavenumber ``2 pi / wavelength`` [1/m]
    eps : complex scalar or array (W,) — relative permittivity of the medium [1]

    Returns
    -------
    kz : complex array (W, N) — ``sqrt(eps k0^2 - q^2)`` [1/m] with
        ``Im(kz) >= 0``, and ``kz > 0`` for a propagating order in a lossless medium.

    References
    ----------
    Chew, *Waves and Fields in Inhomogeneous Media* (1990), §2.1 (branch of kz
    for outgoing/decaying waves); docs/theory.md §1.
    """
    _check_wavenumbers(q, k0)
    _check_permittivity(eps, "eps", onp.shape(getval(k0))[0])
    return _kz_over_k0(q, k0, eps) * np.reshape(k0, (-1, 1))


def interface_coefficients(q, k0, eps1, eps2):
    """Fresnel amplitude coefficients of one planar interface, per order.

    A plane wave in medium 1 meets the planar interface with medium 2 (either
    going down or going up; the formulas are the same in our basis). All
    coefficients are referenced at the interface plane.

    Parameters
    ----------
    q : real array (W, N) — in-plane wavenumber of each order [1/m], ``q >= 0``
    k0 : real array (W,) — vacuum wavenumber [1/m]
    eps1 : complex scalar or array (W,) — permittivity of the incidence medium [1]
    eps2 : complex scalar or array (W,) — permittivity of the other medium [1]

    Returns
    -------
    r_s, r_p, t_s, t_p : complex arrays (W, N) — reflection and transmission
        amplitude ratios [1] of the E-field components along ``s_hat`` and
        ``p_hat``:
        ``r_s = (kz1 - kz2)/(kz1 + kz2)``, ``t_s = 2 kz1/(kz1 + kz2)``,
        ``r_p = (eps2 kz1 - eps1 kz2)/(eps2 kz1 + eps1 kz2)``,
        ``t_p = 2 n1 n2 kz1/(eps2 kz1 + eps1 kz2)``.

    Notes
    -----
    Valid for evanescent orders (``q`` above ``n k0`` in either medium) and
    absorbing media. At normal incidence ``r_p = -r_s`` because ``p_hat`` of the
    reflected wave is the mirror image of the incident one. These ``r_p`` and
    ``t_p`` coincide with Born & Wolf's ``r_parallel``, ``t_parallel`` written with
    ``kz = n k0 cos(theta)``.

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.5.2 (Fresnel formulas;
    equation numbers not checked);
    Yeh, *Optical Waves in Layered Media* (1988), §3.2; docs/theory.md §10.
    """
    _check_wavenumbers(q, k0)
    n_w = onp.shape(getval(k0))[0]
    _check_permittivity(eps1, "eps1", n_w)
    _check_permittivity(eps2, "eps2", n_w)
    k1 = _kz_over_k0(q, k0, eps1)
    k2 = _kz_over_k0(q, k0, eps2)
    e1 = _column(eps1 + 0j, k0)
    e2 = _column(eps2 + 0j, k0)
    s_den = k1 + k2
    p_den = e2 * k1 + e1 * k2
    r_s = (k1 - k2) / s_den
    t_s = 2 * k1 / s_den
    r_p = (e2 * k1 - e1 * k2) / p_den
    t_p = 2 * refractive_index(e1) * refractive_index(e2) * k1 / p_den
    return r_s, r_p, t_s, t_p


def _flux_factor_normalized(kappa, eps_col, pol):
    if pol == "s":
        return np.real(kappa)
    return np.real(kappa * np.conj(eps_col)) / np.abs(eps_col)


def flux_factor(q, k0, eps, pol):
    """z-directed Poynting flux of a plane wave per unit squared amplitude.

    A plane wave of E-amplitude ``a`` (along ``s_hat`` or ``p_hat``) carries the
    time-averaged flux ``|S_z| = F |a|^2 / (2 Z0 k0)`` through a plane
    ``z = const`` (``Z0`` the vacuum impedance), with

    - s: ``F = Re(kz)``,
    - p: ``F = Re(kz conj(n)/n) = Re(kz conj(eps))/|eps|``.

    Parameters
    ----------
    q : real array (W, N) — in-plane wavenumber of each order [1/m]
    k0 : real array (W,) — vacuum wavenumber [1/m]
    eps : complex scalar or array (W,) — permittivity of the medium [1]
    pol : {"s", "p"} — polarization

    Returns
    -------
    F : real array (W, N) — flux factor [1/m]; 0 for an evanescent order in a
        lossless medium (``kz`` purely imaginary).

    Notes
    -----
    Derivation (ours; checked against tmm in the tests): for s,
    ``E = a s_hat``, ``Z0 H_t = -+(kz/k0) a`` (tangential, up/down), so
    ``S_z = -(1/2) Re(E_y conj(H_x)) = +-Re(kz)|a|^2/(2 Z0 k0)``. For p,
    ``E_x = +-(kz/(n k0)) a`` and ``Z0 H_y = n a``, so
    ``S_z = +-Re(kz conj(n)/n) |a|^2/(2 Z0 k0)``. The p factor differs from
    ``Re(kz)`` only in an absorbing medium.

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.5.3 (energy in
    reflection and refraction); Byrnes, "Multilayer optical calculations",
    arXiv:1603.02720 (2016) (p-polarized flux in absorbing media).
    """
    _check_wavenumbers(q, k0)
    _check_pol(pol)
    _check_permittivity(eps, "eps", onp.shape(getval(k0))[0])
    kappa = _kz_over_k0(q, k0, eps)
    return _flux_factor_normalized(kappa, _column(eps + 0j, k0), pol) * np.reshape(k0, (-1, 1))


def power_flux_ratio(t, q, k0, eps_in, eps_out, pol):
    """Flux of a transmitted (or reflected) plane wave relative to the incident one.

    The ratio of the z-directed time-averaged Poynting flux of the wave of
    amplitude ``t`` in medium ``eps_out`` to that of the unit-amplitude incident
    wave in medium ``eps_in``, both of the same order ``q``:
    ``T = |t|^2 F_out / F_in`` (see :func:`flux_factor`). For a reflected wave
    pass ``eps_out = eps_in``. Valid for an absorbing exit medium (flux at the
    reference plane of ``t``).

    Parameters
    ----------
    t : complex array (W, N) — amplitude ratio of the outgoing to the incident wave [1]
    q : real array (W, N) — in-plane wavenumber of each order [1/m]
    k0 : real array (W,) — vacuum wavenumber [1/m]
    eps_in : complex scalar or array (W,) — permittivity of the incidence medium [1]
    eps_out : complex scalar or array (W,) — permittivity of the exit medium [1]
    pol : {"s", "p"} — polarization

    Returns
    -------
    ratio : real array (W, N) — flux ratio [1]. 0 for an order evanescent in a
        lossless exit medium; also set to 0 where the incident wave itself
        carries no flux (evanescent incident order), where the ratio is undefined.

    Notes
    -----
    With an absorbing incidence medium the flux of incident plus reflected wave
    is not the sum of their separate fluxes; this function gives the separate
    ratio only.

    References
    ----------
    Born & Wolf, *Principles of Optics*, 7th ed. (1999), §1.5.3; Byrnes,
    arXiv:1603.02720 (2016).
    """
    _check_wavenumbers(q, k0)
    _check_pol(pol)
    n_w = onp.shape(getval(k0))[0]
    _check_permittivity(eps_in, "eps_in", n_w)
    _check_permittivity(eps_out, "eps_out", n_w)
    f_in = _flux_factor_normalized(_kz_over_k0(q, k0, eps_in), _column(eps_in + 0j, k0), pol)
    f_out = _flux_factor_normalized(_kz_over_k0(q, k0, eps_out), _column(eps_out + 0j, k0), pol)
    carries = f_in > 0
    f_in_safe = np.where(carries, f_in, 1.0)
    return np.where(carries, np.real(t * np.conj(t)) * f_out / f_in_safe, 0.0)
