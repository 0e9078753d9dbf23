"""Mie coefficients of spheres and coated spheres; dipole polarizabilities.

Owns: the Lorenz-Mie external coefficients ``a_n``, ``b_n`` of a homogeneous
sphere and of a coated (core-shell) sphere, the efficiencies derived from them,
and the conversion of ``a_1``, ``b_1`` to the electric and magnetic dipole
polarizabilities used by the lattice model.
Must not import: store, report, cli, search, goals (physics never does); only
``chiropt.errors`` and ``chiropt.particles._riccati`` from chiropt.

Conventions
-----------
- Bohren & Huffman (1983) coefficients, time factor ``exp(-i omega t)``: a
  small lossless sphere has ``a_1 ~ -i (2 x^3 / 3)(m^2 - 1)/(m^2 + 2)`` and
  every lossless coefficient satisfies ``Re a_n = |a_n|^2``.
- ``x = k_host * radius`` (real, > 0) and ``m = n_particle / n_host`` (complex,
  ``Im m >= 0`` for passive particles). Libraries that take ``m = n - i k``
  (Wiscombe's MIEV0, miepython) need the conjugate index.
- Arrays: ``x`` and ``m`` broadcast together (leading axes: wavelength,
  particle...); the multipole order is the last axis, index 0 = order 1.
- Everything is written with ``autograd.numpy``; the coefficients are
  differentiable in ``x`` and in the real and imaginary parts of ``m``.
- Dipole normalization (docs/theory.md §7): ``P = p / (eps0 eps_host) = alpha_e
  E_loc`` and ``Z m = alpha_m Z H_loc``, both polarizabilities in m^3.
"""

from __future__ import annotations

import math
import operator
from typing import NamedTuple

import autograd.numpy as np
from autograd.extend import defvjp, primitive
from autograd.tracer import getval

from chiropt.errors import InputError
from chiropt.particles._ratio_primitive import ratio_g_plain
from chiropt.particles._riccati import downward_start, ratio_g, riccati_psi_chi, riccati_xi

__all__ = [
    "MieEfficiencies",
    "coreshell_mie_coefficients",
    "dipole_polarizabilities",
    "mie_coefficients",
    "mie_efficiencies",
    "wiscombe_n_max",
]


class MieEfficiencies(NamedTuple):
    """Efficiencies of a sphere (cross sections divided by ``pi radius^2``).

    Attributes
    ----------
    qext, qsca, qabs, qback : array
        Extinction, scattering, absorption and backscattering efficiencies
        [dimensionless].
    g : array
        Asymmetry parameter ``<cos theta>`` [dimensionless].
    """

    qext: object
    qsca: object
    qabs: object
    qback: object
    g: object


# ---------------------------------------------------------------- validation


def _check_n_max(n_max) -> int:
    try:
        n = operator.index(n_max)
    except TypeError:
        raise InputError(
            "n_max", f"must be an integer >= 1, got {n_max!r} ({type(n_max).__name__})"
        ) from None
    if isinstance(n_max, bool) or n < 1:
        raise InputError("n_max", f"must be an integer >= 1, got {n_max!r}")
    return n


def _check_size(key: str, x, allow_zero: bool = False) -> np.ndarray:
    value = np.asarray(getval(x))
    if np.iscomplexobj(value):
        raise InputError(key, f"size parameter must be real, got complex values {value!r}")
    if not np.all(np.isfinite(value)):
        raise InputError(key, f"size parameter must be finite, got {value!r}")
    bad = value < 0 if allow_zero else value <= 0
    if np.any(bad):
        bound = ">= 0" if allow_zero else "> 0"
        raise InputError(
            key, f"size parameter k_host*radius must be {bound}, got min {value.min()!r}"
        )
    return value


def _check_index(key: str, m) -> np.ndarray:
    value = np.asarray(getval(m))
    if not np.all(np.isfinite(value)):
        raise InputError(key, f"relative refractive index must be finite, got {value!r}")
    if np.any(np.imag(value) < 0):
        raise InputError(
            key,
            "relative refractive index must have Im(m) >= 0 (passive medium, exp(-i omega t));"
            f" got min Im(m) = {np.imag(value).min()!r}. Data given as n - ik needs conj().",
        )
    return value


def _as_array(v):
    """``v`` as an array; autograd-traced values are returned unchanged."""
    return v if getval(v) is not v else np.asarray(v)


def _as_complex(m):
    """``m`` as a complex array (traced values stay traced)."""
    m = _as_array(m)
    if np.iscomplexobj(getval(m)):
        return m
    return m + 0j


def _broadcast_shape(*values) -> tuple:
    return np.broadcast_shapes(*(np.shape(getval(v)) for v in values))


# ---------------------------------------------------------------- kernel


def _numerators(n, x, m_sq, ga, gb, psi_n, psi_n1, chi_n, chi_nm1):
    """N_a, P_a, N_b, P_b of :func:`mie_coefficients` (a_n = N_a/(N_a - i P_a), likewise
    b_n): numerators times x m^2 and x, written with psi_{n+1} so that nothing cancels at
    small x."""
    num_a = ((n + 1.0) * (1.0 - m_sq) + ga) * psi_n + m_sq * x * psi_n1
    p_a = (n + 1.0 + ga + n * m_sq) * chi_n - m_sq * x * chi_nm1
    num_b = gb * psi_n + x * psi_n1
    p_b = (2.0 * n + 1.0 + gb) * chi_n - x * chi_nm1
    return num_a, p_a, num_b, p_b


def _coefficients_from_g(x, m, big_g_a: list, big_g_b: list, n_max: int):
    """``a_n``, ``b_n`` from the ratio functions of the outermost medium.

    ``big_g_a[n-1]`` and ``big_g_b[n-1]`` stand for ``z D_n(z) - (n+1)`` with
    ``z = m x``, ``D_n`` the logarithmic derivative of Bohren & Huffman eq. 4.88
    (for a coated sphere, the effective one of the shell field; for a
    homogeneous sphere the two lists are the same). See :func:`mie_coefficients`.
    """
    g_x = ratio_g(x * x, n_max + 1, downward_start(n_max + 1, float(np.max(getval(x)))))
    psi, chi = riccati_psi_chi(x, g_x, n_max + 1)  # index k holds order k-1
    m_sq = m * m
    a_list = []
    b_list = []
    for n in range(1, n_max + 1):
        psi_n, psi_n1 = psi[n + 1], psi[n + 2]
        chi_n, chi_nm1 = chi[n + 1], chi[n]
        num_a, p_a, num_b, p_b = _numerators(n, x, m_sq, big_g_a[n - 1], big_g_b[n - 1],
                                             psi_n, psi_n1, chi_n, chi_nm1)
        a_list.append(num_a / (num_a - 1j * p_a))
        b_list.append(num_b / (num_b - 1j * p_b))
    return np.stack(a_list, axis=-1), np.stack(b_list, axis=-1)


# ---------------------------------------------------------------- public API


def mie_coefficients(x, m, n_max: int):
    """External Mie coefficients ``a_n``, ``b_n`` of a homogeneous sphere.

    Parameters
    ----------
    x : array_like (real)
        Size parameter ``k_host * radius``, > 0 [dimensionless].
    m : array_like (complex)
        Relative refractive index ``n_particle / n_host``, ``Im m >= 0``
        [dimensionless]. Broadcasts with ``x``.
    n_max : int
        Highest multipole order returned, >= 1 [dimensionless].

    Returns
    -------
    a, b : complex arrays, shape ``broadcast(x, m).shape + (n_max,)``
        Electric (``a``) and magnetic (``b``) coefficients; ``[..., 0]`` is
        order 1 [dimensionless].

    Raises
    ------
    InputError
        ``x`` not real and positive, ``Im m < 0``, non-finite values, or
        ``n_max`` not an integer >= 1.

    Notes
    -----
    With ``G_n = z D_n(z) - (n+1) = -z j_{n+1}(z)/j_n(z)`` at ``z = m x``
    (downward recurrence, :func:`chiropt.particles._riccati.ratio_g`),
    Bohren & Huffman eq. 4.88 becomes, after multiplying numerator and
    denominator by ``x m^2`` (for ``a_n``) or ``x`` (for ``b_n``) and using
    ``x psi_{n-1} = (2n+1) psi_n - x psi_{n+1}``,

        ``a_n = N_a / (N_a - i P_a)``,
        ``N_a = [(n+1)(1 - m^2) + G_n] psi_n + m^2 x psi_{n+1}``,
        ``P_a = (n + 1 + G_n + n m^2) chi_n - m^2 x chi_{n-1}``,

        ``b_n = N_b / (N_b - i P_b)``,
        ``N_b = G_n psi_n + x psi_{n+1}``,
        ``P_b = (2n + 1 + G_n) chi_n - x chi_{n-1}``,

    all Riccati-Bessel functions at the real argument ``x``. The numerators
    then carry the factor ``m^2 - 1`` explicitly instead of obtaining it as a
    difference of large terms, so the relative accuracy stays near machine
    precision down to small ``x`` (where ``b_n`` of the textbook form loses a
    factor ``x^2``). For real ``m`` both ``N`` and ``P`` are real, so
    ``Re a_n = |a_n|^2`` holds to rounding. ``G_n`` has poles (zeros of
    ``j_n(mx)``, real ``m`` only) but enters linear-fractionally, so the
    coefficients stay well conditioned there.

    The range is that of double precision: ``chi_n(x) ~ (2n-1)!!/x^n`` must
    not overflow (for ``n_max = 8`` any ``x > 1e-30`` is fine).

    References
    ----------
    Bohren & Huffman, *Absorption and Scattering of Light by Small Particles*
    (Wiley, 1983), eqs. 4.53 (coefficients), 4.88 (logarithmic-derivative
    form), 4.89 (downward recurrence); Wiscombe, Appl. Opt. 19, 1505 (1980).
    """
    n_max = _check_n_max(n_max)
    _check_size("x", x)
    _check_index("m", m)
    shape = _broadcast_shape(x, m)
    ones = np.ones(shape)
    x = _as_array(x) * ones
    m = _as_complex(m) * ones
    ab = _sphere_ab(x, m, n_max)
    return ab[0], ab[1]


def _sphere_ab_values(x, m, n_max: int, derivative: bool = False):
    """Plain a_n, b_n (..., n_max) and, with ``derivative``, their derivatives in x and m.

    Derivatives of the form of :func:`mie_coefficients` (a = N/(N - i P), so
    da = i (N dP - P dN)/(N - i P)^2), with
    dG_n/dz = D_n + z D_n', D_n' = n(n+1)/z^2 - 1 - D_n^2, D_n = (G_n + n + 1)/z (the
    Riccati equation of the logarithmic derivative, Bohren & Huffman eq. 4.88's D_n), z = m x,
    and f_n' = f_{n-1} - (n/x) f_n for psi and chi (DLMF 10.51.2 for x j_n, x y_n).
    """
    import numpy as onp

    x = onp.asarray(x, float)
    m = onp.asarray(m, complex)
    z = m * x
    big_g = ratio_g_plain(z * z, n_max, downward_start(n_max, float(onp.max(onp.abs(z)))))
    g_x = ratio_g_plain(x * x, n_max + 1, downward_start(n_max + 1, float(onp.max(x))))
    psi, chi = riccati_psi_chi(x, list(g_x), n_max + 1)
    psi = onp.stack([onp.asarray(v) for v in psi])       # (n_max + 3, ...): orders -1..
    chi = onp.stack([onp.asarray(v) for v in chi])
    # every order n = 1..n_max at once, n on the leading axis (the same operations per
    # element as one order at a time)
    n = onp.arange(1, n_max + 1, dtype=float).reshape((n_max,) + (1,) * x.ndim)
    p0, p1, pm = psi[2:n_max + 2], psi[3:n_max + 3], psi[1:n_max + 1]  # psi_n, _n+1, _n-1
    c0, cm = chi[2:n_max + 2], chi[1:n_max + 1]                          # chi_n, chi_n-1
    G = big_g[:n_max]
    m2 = m * m
    Na, Pa, Nb, Pb = _numerators(n, x, m2, G, G, p0, p1, c0, cm)
    last = lambda v: onp.moveaxis(v, 0, -1)  # noqa: E731   (n last)
    ab = onp.stack([last(Na / (Na - 1j * Pa)), last(Nb / (Nb - 1j * Pb))])
    if not derivative:
        return ab, None
    D = (G + n + 1.0) / z
    dG = D + z * (n * (n + 1.0) / (z * z) - 1.0 - D * D)    # dG/dz
    dp0 = pm - n * p0 / x
    dp1 = p0 - (n + 1.0) * p1 / x
    dc0 = cm - n * c0 / x
    dcm = -c0 + n * cm / x
    dNa_x = dG * m * p0 + ((n + 1.0) * (1.0 - m2) + G) * dp0 + m2 * p1 + m2 * x * dp1
    dNa_m = (-2.0 * m * (n + 1.0) + dG * x) * p0 + 2.0 * m * x * p1
    dPa_x = dG * m * c0 + (n + 1.0 + G + n * m2) * dc0 - m2 * cm - m2 * x * dcm
    dPa_m = (dG * x + 2.0 * n * m) * c0 - 2.0 * m * x * cm
    dNb_x = dG * m * p0 + G * dp0 + p1 + x * dp1
    dNb_m = dG * x * p0
    dPb_x = dG * m * c0 + (2.0 * n + 1.0 + G) * dc0 - cm - x * dcm
    dPb_m = dG * x * c0
    qa, qb = (Na - 1j * Pa) ** 2, (Nb - 1j * Pb) ** 2
    dax = 1j * (Na * dPa_x - Pa * dNa_x) / qa
    dam = 1j * (Na * dPa_m - Pa * dNa_m) / qa
    dbx = 1j * (Nb * dPb_x - Pb * dNb_x) / qb
    dbm = 1j * (Nb * dPb_m - Pb * dNb_m) / qb
    return ab, (onp.stack([last(dax), last(dbx)]), onp.stack([last(dam), last(dbm)]))


@primitive
def _sphere_ab(x, m, n_max):
    """[a, b] (2, ..., n_max) of a homogeneous sphere as one autograd primitive."""
    return _sphere_ab_values(x, m, n_max)[0]


_DERIVATIVES: dict = {}


def _sphere_ab_derivatives(x, m, n_max):
    """(d/dx, d/dm) of [a, b], memoized by the argument values (the reverse passes of one
    Jacobian ask for them once per output row and argument)."""
    import numpy as onp

    key = (onp.asarray(x, float).tobytes(), onp.asarray(m, complex).tobytes(),
           onp.shape(x), int(n_max))
    if key not in _DERIVATIVES:
        if len(_DERIVATIVES) >= 8:
            _DERIVATIVES.pop(next(iter(_DERIVATIVES)))
        _DERIVATIVES[key] = _sphere_ab_values(x, m, n_max, derivative=True)[1]
    return _DERIVATIVES[key]


def _sphere_ab_vjp_x(ans, x, m, n_max):
    dx, _ = _sphere_ab_derivatives(x, m, n_max)
    # x is real: the real part of the holomorphic rule (autograd operations on g, so the
    # rule is differentiable again for reverse-of-reverse Jacobians)
    return lambda g: np.real(np.sum(g * dx, axis=(0, -1)))


def _sphere_ab_vjp_m(ans, x, m, n_max):
    _, dm = _sphere_ab_derivatives(x, m, n_max)
    return lambda g: np.sum(g * dm, axis=(0, -1))


defvjp(_sphere_ab, _sphere_ab_vjp_x, _sphere_ab_vjp_m, None)


def coreshell_mie_coefficients(x_core, x_shell, m_core, m_shell, n_max: int):
    """External Mie coefficients ``a_n``, ``b_n`` of a coated sphere.

    Parameters
    ----------
    x_core : array_like (real)
        ``k_host * core_radius``, > 0 [dimensionless].
    x_shell : array_like (real)
        ``k_host * outer_radius``, ``>= x_core`` [dimensionless].
    m_core : array_like (complex)
        Core index relative to the host, ``Im >= 0`` [dimensionless].
    m_shell : array_like (complex)
        Shell index relative to the host, ``Im >= 0`` [dimensionless].
    n_max : int
        Highest multipole order returned, >= 1 [dimensionless].

    Returns
    -------
    a, b : complex arrays, shape ``broadcast(all inputs).shape + (n_max,)``
        ``[..., 0]`` is order 1 [dimensionless].

    Raises
    ------
    InputError
        Sizes not real and positive, ``x_core > x_shell``, ``Im m < 0``,
        non-finite values, or ``n_max`` not an integer >= 1.

    Notes
    -----
    Bohren & Huffman eq. 8.2 (``x = x_core``, ``y = x_shell``, ``m1 = m_core``,
    ``m2 = m_shell``) is the homogeneous-sphere formula at ``y`` with
    ``D_n(m2 y)`` replaced by the logarithmic derivative of the shell field
    ``u_n(r) = psi_n(m2 k r) - A_n chi_n(m2 k r)`` (``B_n`` for ``b_n``). This
    routine uses that form -- ``G~_n = -w u_{n+1}(w)/u_n(w)`` at ``w = m2 y``
    feeds the same kernel as :func:`mie_coefficients` -- with two changes:

    1. B&H's ``A_n`` and ``B_n`` are each a ratio ``L[psi]/L[chi]`` of one linear
       inner-interface condition applied to ``psi_n`` and ``chi_n`` at
       ``z2 = m2 x``. Rewritten with ``psi_n G_n = -z psi_{n+1}``,

           ``L_a[f] = ((n+1)(m2^2 - m1^2) + m2^2 G1) f_n(z2) + m1^2 z2 f_{n+1}(z2)``,
           ``L_b[f] = G1 f_n(z2) + z2 f_{n+1}(z2)``,

       with ``G1 = z1 D_n(z1) - (n+1)``, ``z1 = m1 x`` (downward recurrence).
       The factor ``m2^2 - m1^2`` is explicit (equal materials give a vanishing
       ``L[psi]`` to rounding) and ``G1`` enters linearly (no trouble at its poles).
    2. The shell field is written on ``(psi_n, xi_n)`` instead of
       ``(psi_n, chi_n)``: ``u_n = psi_n - beta xi_n`` with
       ``beta = L[psi]/L[xi]``. With ``psi`` scaled by ``exp(-Im z)`` and ``xi``
       by ``exp(+Im z)``, ``beta xi_n(w)/psi_n(w)`` carries the explicit factor
       ``exp(-2 Im m2 (y - x))``, so thick absorbing shells neither overflow nor
       lose the core's contribution to cancellation (``psi_n`` and ``i chi_n``
       coincide to ``exp(-2 Im z)`` there); this is the difficulty the Toon &
       Ackerman (1981) algorithm addresses, handled here differently.

    A lossless coated sphere satisfies ``Re a_n = |a_n|^2`` to rounding relative
    to ``|a_n|`` (not ``|a_n|^2``, as the homogeneous sphere does), because
    ``xi_n`` is complex.

    References
    ----------
    Bohren & Huffman (1983), §8.1, eq. 8.2 (coated sphere); Aden & Kerker,
    J. Appl. Phys. 22, 1242 (1951); Toon & Ackerman, Appl. Opt. 20, 3657
    (1981) (the large-absorbing-shell problem).
    """
    n_max = _check_n_max(n_max)
    xc = _check_size("x_core", x_core)
    xs = _check_size("x_shell", x_shell)
    _check_index("m_core", m_core)
    _check_index("m_shell", m_shell)
    if np.any(xc > xs):
        raise InputError(
            "x_core",
            f"core size parameter must not exceed the shell's (x_core <= x_shell); "
            f"got x_core = {xc!r}, x_shell = {xs!r}. Did you swap them?",
        )
    shape = _broadcast_shape(x_core, x_shell, m_core, m_shell)
    ones = np.ones(shape)
    x = _as_array(x_core) * ones
    y = _as_array(x_shell) * ones
    m1 = _as_complex(m_core) * ones
    m2 = _as_complex(m_shell) * ones
    z1 = m1 * x
    z2 = m2 * x
    w = m2 * y

    def big_g_of(z, n_hi):
        abs_z = float(np.max(np.abs(getval(z))))
        return ratio_g(z * z, n_hi, downward_start(n_hi, abs_z))

    g1 = big_g_of(z1, n_max)
    psi2, _ = riccati_psi_chi(z2, big_g_of(z2, n_max + 1), n_max + 1)
    psi_w, _ = riccati_psi_chi(w, big_g_of(w, n_max + 1), n_max + 1)
    xi2 = riccati_xi(z2, n_max + 1)
    xi_w = riccati_xi(w, n_max + 1)
    # psi above carries exp(-Im z), xi carries exp(+Im z); the shell's own factor
    # exp(-2 Im(w - z2)) <= 1 restores their relative scale without overflow
    damp = np.exp(-2.0 * np.imag(w - z2))
    m1_sq = m1 * m1
    m2_sq = m2 * m2
    ga_list = []
    gb_list = []
    for n in range(1, n_max + 1):
        g1n = g1[n - 1]
        c_a = (n + 1.0) * (m2_sq - m1_sq) + m2_sq * g1n

        def cond_a(f, n=n, c_a=c_a):  # inner-interface condition of the TM (a_n) field
            return c_a * f[n + 1] + m1_sq * z2 * f[n + 2]

        def cond_b(f, n=n, g1n=g1n):  # inner-interface condition of the TE (b_n) field
            return g1n * f[n + 1] + z2 * f[n + 2]

        for cond, out in ((cond_a, ga_list), (cond_b, gb_list)):
            beta = cond(psi2) / cond(xi2) * damp
            out.append(
                -w * (psi_w[n + 2] - beta * xi_w[n + 2]) / (psi_w[n + 1] - beta * xi_w[n + 1])
            )
    return _coefficients_from_g(y, m2, ga_list, gb_list, n_max)


def wiscombe_n_max(x) -> int:
    """Number of multipole orders for converged efficiencies.

    Parameters
    ----------
    x : array_like
        Size parameter(s) [dimensionless]; the largest one sets the count.

    Returns
    -------
    int
        ``floor(x + 4 x^{1/3} + 2)`` at the largest ``x`` (at least 1).

    References
    ----------
    Wiscombe, Appl. Opt. 19, 1505 (1980), eq. for ``N_stop`` (§III).
    """
    x_max = float(np.max(np.asarray(getval(x))))
    return max(1, int(x_max + 4.0 * x_max ** (1.0 / 3.0) + 2.0))


def mie_efficiencies(x, m, n_max: int | None = None) -> MieEfficiencies:
    """Extinction, scattering, absorption, backscattering efficiencies; asymmetry.

    Parameters
    ----------
    x : array_like (real)
        Size parameter ``k_host * radius``, > 0 [dimensionless].
    m : array_like (complex)
        Relative refractive index, ``Im m >= 0`` [dimensionless].
    n_max : int, optional
        Number of orders summed; default :func:`wiscombe_n_max` of ``x``.

    Returns
    -------
    MieEfficiencies
        ``qext``, ``qsca``, ``qabs``, ``qback`` [dimensionless, per geometric
        cross section ``pi radius^2``] and ``g`` [dimensionless], each of shape
        ``broadcast(x, m).shape``.

    Notes
    -----
    ``qext = (2/x^2) sum (2n+1) Re(a_n + b_n)``,
    ``qsca = (2/x^2) sum (2n+1)(|a_n|^2 + |b_n|^2)``, ``qabs = qext - qsca``,
    ``qback = (1/x^2) |sum (2n+1)(-1)^n (a_n - b_n)|^2``,
    ``g qsca = (4/x^2) [sum n(n+2)/(n+1) Re(a_n a*_{n+1} + b_n b*_{n+1})
    + sum (2n+1)/(n(n+1)) Re(a_n b*_n)]`` (the ``n+1`` terms beyond ``n_max``
    taken as zero).

    References
    ----------
    Bohren & Huffman (1983), eqs. 4.61 (qsca) and 4.62 (qext); the
    asymmetry parameter and the backscattering efficiency (from the amplitude
    ``S_1`` at 180 degrees) as in B&H §4.5 and Wiscombe, Appl. Opt. 19, 1505
    (1980) [equation numbers for these two not checked against the books].
    """
    if n_max is None:
        _check_size("x", x)
        n_max = wiscombe_n_max(x)
    a, b = mie_coefficients(x, m, n_max)
    x = _as_array(x) * np.ones(np.shape(getval(a))[:-1])
    n = np.arange(1, n_max + 1, dtype=float)
    two_n1 = 2.0 * n + 1.0
    inv_x2 = 1.0 / (x * x)
    qext = 2.0 * inv_x2 * np.sum(two_n1 * np.real(a + b), axis=-1)
    qsca = 2.0 * inv_x2 * np.sum(two_n1 * (np.abs(a) ** 2 + np.abs(b) ** 2), axis=-1)
    sign = np.where(n % 2 == 0, 1.0, -1.0)
    qback = inv_x2 * np.abs(np.sum(two_n1 * sign * (a - b), axis=-1)) ** 2
    cross = np.sum(two_n1 / (n * (n + 1.0)) * np.real(a * np.conj(b)), axis=-1)
    if n_max > 1:
        nn = n[:-1]
        pairs = np.real(a[..., :-1] * np.conj(a[..., 1:]) + b[..., :-1] * np.conj(b[..., 1:]))
        cross = cross + np.sum(nn * (nn + 2.0) / (nn + 1.0) * pairs, axis=-1)
    g = 4.0 * inv_x2 * cross / qsca
    return MieEfficiencies(qext=qext, qsca=qsca, qabs=qext - qsca, qback=qback, g=g)


def dipole_polarizabilities(a1, b1, k):
    """Electric and magnetic dipole polarizabilities from ``a_1``, ``b_1``.

    Parameters
    ----------
    a1 : array_like (complex)
        Electric dipole Mie coefficient ``a_1`` [dimensionless].
    b1 : array_like (complex)
        Magnetic dipole Mie coefficient ``b_1`` [dimensionless].
    k : array_like (real)
        Host wavenumber ``2 pi n_host / lambda``, > 0 [1/m]. Broadcasts with
        ``a1`` and ``b1``.

    Returns
    -------
    alpha_e, alpha_m : complex arrays
        ``alpha_e = 6 pi i a_1 / k^3`` and ``alpha_m = 6 pi i b_1 / k^3`` [m^3],
        normalized as ``P = p / (eps0 eps_host) = alpha_e E_loc`` and
        ``Z m = alpha_m Z H_loc`` (``Z`` the host impedance).

    Notes
    -----
    These include the radiative reaction exactly: for a lossless sphere
    ``Im(1/alpha) = -k^3/(6 pi)``; for ``x -> 0``,
    ``alpha_e -> 4 pi R^3 (m^2 - 1)/(m^2 + 2)`` (Clausius-Mossotti).

    References
    ----------
    Evlyukhin et al., Phys. Rev. B 82, 045404 (2010), eq. for the Mie dipole
    polarizabilities; García de Abajo, Rev. Mod. Phys. 79, 1267 (2007);
    docs/theory.md §7.
    """
    k_val = np.asarray(getval(k))
    if np.iscomplexobj(k_val) or not np.all(np.isfinite(k_val)) or np.any(k_val <= 0):
        raise InputError("k", f"host wavenumber must be real, finite and > 0 [1/m], got {k_val!r}")
    scale = 6.0 * math.pi * 1j / _as_array(k) ** 3
    return scale * a1, scale * b1
