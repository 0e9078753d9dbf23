"""Riccati-Bessel functions and their ratio functions, written for autograd.

Owns: the order-by-order kernels behind the Mie coefficients of
:mod:`chiropt.particles.mie` -- the ratio function ``g_n(z)`` by downward
recurrence and the Riccati-Bessel functions ``psi_n(z) = z j_n(z)``,
``chi_n(z) = -z y_n(z)`` and ``xi_n(z) = z h^(1)_n(z)`` for real or complex ``z``.
Must not import: anything of chiropt outside ``chiropt.particles`` and
``chiropt.errors``; never store/report/cli.

Everything is written with ``autograd.numpy`` and without in-place assignment,
so autograd differentiates it in ``z`` (real and imaginary parts). Orders are a
Python loop (a handful of array operations per order); the argument arrays
carry the wavelength and particle axes.

Conventions (Bohren & Huffman 1983, §4.1 and §4.4):
``psi_n(z) = z j_n(z)``, ``chi_n(z) = -z y_n(z)``, ``xi_n = psi_n - i chi_n``
(outgoing for the time factor ``exp(-i omega t)``).
"""

from __future__ import annotations

import math

import autograd.numpy as np
from autograd.tracer import getval

from chiropt.particles._ratio_primitive import ratio_g_stacked


def downward_start(n_hi: int, abs_z_max: float) -> int:
    """Order at which the downward recurrence of :func:`ratio_g` starts.

    Parameters
    ----------
    n_hi : int
        Highest order whose ratio is needed [dimensionless].
    abs_z_max : float
        Largest ``|z|`` in the argument array [dimensionless].

    Returns
    -------
    int
        Start order ``N``. The truncation error of the continued fraction decays
        like ``exp(-c (N - |z|)^{3/2} / |z|^{1/2})`` once ``N > |z|``; the margin
        ``16 + 8 |z|^{1/3}`` keeps it below double-precision rounding.

    References
    ----------
    Wiscombe, Appl. Opt. 19, 1505 (1980), §III (start of the downward
    recurrence of the logarithmic derivative above ``max(N_stop, |mx|)``); the
    ``|z|^{1/3}`` width of the turning-point region is the Airy scaling of
    ``j_n(z)`` near ``n = z`` (Abramowitz & Stegun 9.3.23). The margin constant
    was set by comparison with a start 600 orders higher (tests/test_mie.py).
    """
    return int(max(n_hi, math.ceil(abs_z_max)) + 16 + math.ceil(8.0 * abs_z_max ** (1.0 / 3.0)))


def ratio_g(z_sq, n_hi: int, n_start: int) -> list:
    """Ratio functions ``g_n(z) = -z j_{n+1}(z) / j_n(z)`` for ``n = 1..n_hi``.

    Parameters
    ----------
    z_sq : array (real or complex)
        Square of the argument, ``z**2`` [dimensionless].
    n_hi : int
        Highest order returned [dimensionless].
    n_start : int
        Order at which the downward recurrence starts (``>= n_hi``); see
        :func:`downward_start`.

    Returns
    -------
    list of arrays
        ``[g_1, ..., g_n_hi]``, each of the shape of ``z_sq``.

    Notes
    -----
    ``g_n = z D_n(z) - (n + 1)`` where ``D_n = psi_n' / psi_n`` is the
    logarithmic derivative of Bohren & Huffman. Substituting it into their
    downward recurrence (eq. 4.89), ``D_{n-1} = n/z - 1/(D_n + n/z)``, gives

        ``g_{n-1} = -z^2 / (2n + 1 + g_n)``,

    which depends on ``z^2`` only and has no cancellation at small ``|z|``
    (``g_n ~ -z^2/(2n+3)``), whereas ``D_n ~ (n+1)/z`` hides the small
    physical part under a large one. The recurrence is seeded with the first
    term of the continued fraction, ``g_N = -z^2/(2N+3)``.

    References
    ----------
    Bohren & Huffman, *Absorption and Scattering of Light by Small Particles*
    (Wiley, 1983), eq. 4.89; Wiscombe, Appl. Opt. 19, 1505 (1980);
    Abramowitz & Stegun 10.1.19 (recurrence of spherical Bessel functions).
    """
    # one autograd primitive with a hand-written derivative (one reverse-pass node
    # instead of two per recurrence step)
    stacked = ratio_g_stacked(z_sq, n_hi, n_start)
    return [stacked[n] for n in range(n_hi)]


def _sin_cos(z):
    """``sin z`` and ``cos z``, times ``exp(-Im z)`` when ``z`` is complex.

    For complex ``z`` (``Im z >= 0`` for passive media) both are multiplied by
    the common factor ``exp(-Im z)`` so that they never overflow; ratios of
    Riccati-Bessel functions of the same argument are unchanged.
    """
    if not np.iscomplexobj(getval(z)):
        return np.sin(z), np.cos(z)
    a = np.real(z)
    b = np.imag(z)
    half_sum = 0.5 * (1.0 + np.exp(-2.0 * b))  # cosh(b) exp(-b)
    half_diff = -0.5 * np.expm1(-2.0 * b)  # sinh(b) exp(-b)
    sin_a = np.sin(a)
    cos_a = np.cos(a)
    sin_z = sin_a * half_sum + 1j * cos_a * half_diff
    cos_z = cos_a * half_sum - 1j * sin_a * half_diff
    return sin_z, cos_z


def riccati_psi_chi(z, g_list: list, n_hi: int):
    """Riccati-Bessel functions ``psi_n(z)`` and ``chi_n(z)``, ``n = -1..n_hi``.

    Parameters
    ----------
    z : array (real or complex, ``Im z >= 0``)
        Argument [dimensionless].
    g_list : list of arrays
        ``[g_1(z), ..., g_n_hi(z)]`` from :func:`ratio_g` (same shape as ``z``).
    n_hi : int
        Highest order returned [dimensionless].

    Returns
    -------
    psi, chi : list of arrays
        ``psi[k] = psi_{k-1}(z)`` and ``chi[k] = chi_{k-1}(z)`` for
        ``k = 0..n_hi+1`` (so index 1 is order 0). For complex ``z`` both are
        multiplied by the common factor ``exp(-Im z)``.

    Notes
    -----
    ``psi_{-1} = cos z``, ``psi_0 = sin z``, ``chi_{-1} = -sin z``,
    ``chi_0 = cos z`` (closed forms), then for each order:

    - ``chi_n`` by the upward recurrence
      ``chi_n = (2n-1)/z chi_{n-1} - chi_{n-2}``, stable because ``chi_n`` is
      the dominant solution;
    - ``psi_n`` by the same upward recurrence while ``n < |z|`` (oscillatory
      region, neutral stability), and for ``n >= |z|`` -- where ``psi_n`` is
      the minimal solution and the upward recurrence would lose it -- by the
      ratio ``psi_n = psi_{n-1} z / (2n + 1 + g_n)``, which is well conditioned
      there because the first zero of ``psi_{n-1}`` lies beyond ``n``.

    References
    ----------
    Bohren & Huffman (1983), §4.8 (upward recurrence of ``chi_n``; downward
    logarithmic derivative); Abramowitz & Stegun 10.1.19 and 10.1.11-12
    (recurrence, closed forms of orders 0 and 1).
    """
    sin_z, cos_z = _sin_cos(z)
    abs_z = np.abs(getval(z))
    psi = [cos_z, sin_z]
    chi = [-sin_z, cos_z]
    for n in range(1, n_hi + 1):
        c = (2.0 * n - 1.0) / z
        chi.append(c * chi[-1] - chi[-2])
        upward = c * psi[-1] - psi[-2]
        use_up = n < abs_z
        den = np.where(use_up, 1.0, 2.0 * n + 1.0 + g_list[n - 1])
        psi.append(np.where(use_up, upward, psi[-1] * z / den))
    return psi, chi


def riccati_xi(z, n_hi: int) -> list:
    """Scaled Riccati-Hankel functions ``xi_n(z) exp(Im z)``, ``n = -1..n_hi``.

    Parameters
    ----------
    z : array (complex, ``Im z >= 0``)
        Argument [dimensionless].
    n_hi : int
        Highest order returned [dimensionless].

    Returns
    -------
    list of arrays
        ``xi[k] = xi_{k-1}(z) exp(Im z)`` for ``k = 0..n_hi+1``, with
        ``xi_n = z h^(1)_n(z) = psi_n - i chi_n``.

    Notes
    -----
    ``xi_{-1} = exp(iz)`` and ``xi_0 = -i exp(iz)``, so the scaled seeds are the
    unit phases ``exp(i Re z)`` and ``-i exp(i Re z)``; then the upward
    recurrence ``xi_n = (2n-1)/z xi_{n-1} - xi_{n-2}``, stable for
    ``Im z >= 0`` (``xi_n`` is the dominant solution for ``n > |z|`` and the
    recurrence is neutral below). Unlike ``chi_n``, ``xi_n`` keeps its relative
    accuracy where ``Im z`` is large (``psi_n`` and ``i chi_n`` then agree to
    ``exp(-2 Im z)``).

    References
    ----------
    Bohren & Huffman (1983), §4.1 (definition of ``xi_n``); Abramowitz & Stegun
    10.1.11-12 and 10.1.19.
    """
    phase = np.exp(1j * np.real(z))
    xi = [phase, -1j * phase]
    for n in range(1, n_hi + 1):
        xi.append((2.0 * n - 1.0) / z * xi[-1] - xi[-2])
    return xi
