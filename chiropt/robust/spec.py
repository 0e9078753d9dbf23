"""The error model of a robustness analysis or a robust goal term, validated.

Owns: :class:`ErrorTerm` (one Gaussian error moving one or several design quantities),
:class:`RobustSpec` (errors, cone, band, statistic, sample counts) and their parsing from
goal-file mappings and ``--sigma`` text. Must not import: physics, search, store, report, cli.

Units: ``sigma`` in the user units of each quantity (nm, deg, index), ``na`` the numerical
aperture in the host medium (``n_host sin(theta_max)``, dimensionless), ``band_nm`` the
full width at half maximum of a Gaussian spectral weight, or the full width of a flat one [nm].
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from chiropt.errors import InputError

__all__ = ["BAND_SHAPES", "STATISTICS", "ErrorTerm", "RobustSpec", "parse_robust",
           "parse_sigma_text", "resolve_sigma"]

STATISTICS = ("mean", "p10", "p90", "worst")
BAND_SHAPES = ("gaussian", "flat")
SPEC_KEYS = {"sigma", "na", "band_nm", "band_shape", "statistic", "samples", "polar_points",
             "azimuth_points", "band_points"}
SAMPLES_RANGE = (1, 4096)
POINTS_RANGE = (1, 32)
WAVELENGTH_PATH = "illumination.wavelength_nm"


@dataclass(frozen=True)
class ErrorTerm:
    """One independent Gaussian error of standard deviation ``sigma`` [user units].

    Every quantity in ``paths`` moves by the same amount (a shared error: "all radii move
    together"); ``key`` is how the user named it.
    """

    key: str
    paths: tuple[str, ...]
    sigma: float


@dataclass(frozen=True)
class RobustSpec:
    """What a robust value averages over (see the module docstring for units).

    ``samples`` Monte Carlo error samples (scrambled Sobol, mapped to normal errors),
    ``polar_points`` x ``azimuth_points`` nodes over the cone, ``band_points`` nodes over the
    band; ``statistic`` summarizes the per-sample values; ``azimuth_origin_deg`` rotates the
    azimuth nodes (a symmetry check: a square lattice's cone average must not depend on it).
    """

    errors: tuple[ErrorTerm, ...] = ()
    na: float = 0.0
    band_nm: float = 0.0
    band_shape: str = "gaussian"
    statistic: str = "mean"
    samples: int = 64
    polar_points: int = 3
    azimuth_points: int = 4
    band_points: int = 5
    azimuth_origin_deg: float = field(default=0.0, compare=True)

    @property
    def has_errors(self) -> bool:
        return bool(self.errors)

    def to_dict(self) -> dict[str, Any]:
        """The goal-file form (defaults made explicit)."""
        out: dict[str, Any] = {}
        if self.errors:
            out["sigma"] = {e.key: e.sigma for e in self.errors}
        out.update({"na": self.na, "band_nm": self.band_nm, "band_shape": self.band_shape,
                    "statistic": self.statistic, "samples": self.samples,
                    "polar_points": self.polar_points, "azimuth_points": self.azimuth_points,
                    "band_points": self.band_points})
        return out

    def describe(self) -> dict[str, Any]:
        """The error model as plain data, with every shared error's quantities spelled out."""
        out = self.to_dict()
        out["errors"] = [{"key": e.key, "paths": list(e.paths), "sigma": e.sigma}
                         for e in self.errors]
        return out


def _raise(key: str, message: str) -> InputError:
    return InputError(key, message)


def resolve_sigma(name: str, params: dict[str, Any], key: str,
                  error: Callable[[str, str], Exception] = _raise) -> tuple[str, ...]:
    """Design quantities moved by the error named ``name``.

    ``name`` is a key path of ``Design.parameters()`` (``particles[0].radius_nm``), several
    joined by ``+`` (one shared error), or a bare last component (``radius_nm``,
    ``period_nm``, ``height_nm``) that names every quantity ending in it: all of them move
    together (one shared error).
    """
    parts = [p.strip() for p in str(name).split("+") if p.strip()]
    if not parts:
        raise error(key, "an empty design quantity name")
    paths: list[str] = []
    for part in parts:
        if part == WAVELENGTH_PATH or part == "wavelength_nm":
            raise error(key, "the wavelength is not a fabrication quantity; use band_nm for "
                             "a spectral band")
        if part in params:
            found = [part]
        else:
            found = [p for p in params if p != WAVELENGTH_PATH
                     and (p.endswith("." + part) or p.endswith("]" + part))]
        if not found:
            names = ", ".join(p for p in params if p != WAVELENGTH_PATH)
            raise error(key, f"unknown design quantity '{part}'; this design has: {names}")
        paths += [p for p in found if p not in paths]
    return tuple(paths)


def _number(value: Any, key: str, error, low: float, high: float | None = None,
            high_open: bool = False, what: str = "") -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) \
            or not math.isfinite(float(value)):
        raise error(key, f"expected a number, got {value!r}")
    v = float(value)
    top = "" if high is None else f" and {'<' if high_open else '<='} {high:g}"
    if v < low or (high is not None and (v > high or (high_open and v >= high))):
        raise error(key, f"got {v:g}, allowed >= {low:g}{top}{what}")
    return v


def _integer(value: Any, key: str, error, bounds: tuple[int, int]) -> int:
    lo, hi = bounds
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise error(key, f"got {value!r}, allowed an integer in [{lo}, {hi}]")
    return int(value)


def parse_robust(raw: Any, key: str, params: dict[str, Any], host_index: float,
                 error: Callable[[str, str], Exception] = _raise) -> RobustSpec:
    """Validate a ``robust:`` mapping into a :class:`RobustSpec`.

    Parameters
    ----------
    raw : the mapping (``{sigma: {...}, na: ..., band_nm: ..., statistic: ..., samples: N}``)
    key : its key path (``objectives[0].robust``); every error names the key below it
    params : ``Design.parameters()`` of the design the errors apply to
    host_index : refractive index of the host (the cone's NA must stay below it)
    error : builds the exception for (key, message) (the goal file adds its line numbers)
    """
    if not isinstance(raw, dict):
        raise error(key, "expected a mapping such as {sigma: {radius_nm: 3}, na: 0.2, "
                         "band_nm: 10, statistic: mean, samples: 64}")
    unknown = sorted(set(raw) - SPEC_KEYS)
    if unknown:
        raise error(f"{key}.{unknown[0]}", f"unknown key; allowed: {', '.join(sorted(SPEC_KEYS))}")
    sigma_raw = raw.get("sigma") or {}
    if not isinstance(sigma_raw, dict):
        raise error(f"{key}.sigma", "expected a mapping QUANTITY: SIGMA, e.g. {radius_nm: 3}")
    errors = []
    for name, s in sigma_raw.items():
        skey = f"{key}.sigma.{name}"
        paths = resolve_sigma(name, params, skey, error)
        sig = _number(s, skey, error, 0.0, what=" (a standard deviation in the quantity's "
                                                "units)")
        errors.append(ErrorTerm(str(name), paths, sig))
    seen: dict[str, str] = {}
    for e in errors:
        for p in e.paths:
            if p in seen:
                raise error(f"{key}.sigma.{e.key}", f"'{p}' already has an error (from "
                                                    f"'{seen[p]}'); give each quantity one")
            seen[p] = e.key
    na = _number(raw.get("na", 0.0), f"{key}.na", error, 0.0, host_index, high_open=True,
                 what=f" (the host index {host_index:g} bounds the numerical aperture)")
    band = _number(raw.get("band_nm", 0.0), f"{key}.band_nm", error, 0.0, 1000.0)
    shape = raw.get("band_shape", "gaussian")
    if shape not in BAND_SHAPES:
        raise error(f"{key}.band_shape", f"got {shape!r}, allowed: {', '.join(BAND_SHAPES)}")
    stat = raw.get("statistic", "mean")
    if stat not in STATISTICS:
        raise error(f"{key}.statistic", f"got {stat!r}, allowed: {', '.join(STATISTICS)}")
    samples = _integer(raw.get("samples", 64), f"{key}.samples", error, SAMPLES_RANGE)
    pp = _integer(raw.get("polar_points", 3), f"{key}.polar_points", error, POINTS_RANGE)
    ap = _integer(raw.get("azimuth_points", 4), f"{key}.azimuth_points", error, POINTS_RANGE)
    bp = _integer(raw.get("band_points", 5), f"{key}.band_points", error, POINTS_RANGE)
    return RobustSpec(errors=tuple(errors), na=na, band_nm=band, band_shape=shape,
                      statistic=stat, samples=samples, polar_points=pp, azimuth_points=ap,
                      band_points=bp)


def parse_sigma_text(text: str | None, option: str = "--sigma") -> dict[str, float]:
    """``radius_nm=3,lattice.period_nm=2`` -> ``{"radius_nm": 3.0, ...}`` (CLI form).

    Commas inside brackets do not split; numbers are checked by :func:`parse_robust`.
    """
    out: dict[str, float] = {}
    if not text:
        return out
    depth, item, items = 0, "", []
    for ch in text:
        depth += {"[": 1, "]": -1}.get(ch, 0)
        if ch == "," and depth == 0:
            items.append(item)
            item = ""
        else:
            item += ch
    items.append(item)
    for it in (i.strip() for i in items):
        if not it:
            continue
        if "=" not in it:
            raise InputError(option, f"got {it!r}; expected QUANTITY=SIGMA, e.g. radius_nm=3")
        name, value = it.rsplit("=", 1)
        try:
            out[name.strip()] = float(value)
        except ValueError:
            raise InputError(option, f"{name.strip()}: got {value!r}, expected a number "
                                     ">= 0") from None
    return out
