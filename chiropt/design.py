"""The Design record: one validated, immutable description of an array and its illumination.

Owns: parsing and validating design files (YAML or dicts), the named continuous
design quantities (``parameters``), and nothing physical beyond geometry checks.
The optimizer, the store, the report and the exporter all pass Designs around.
Must not import: solve, fields, metrics, search, store, report, cli.

User-facing units: lengths and wavelengths in nm, angles in degrees.
"""

from __future__ import annotations

import math
import re
import unicodedata
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as onp

from chiropt.errors import InputError
from chiropt.yamlio import Located, check_keys, load_yaml

LATTICE_KINDS = ("square", "rectangular", "hexagonal", "oblique")
ILLUMINATION_SIDES = ("host", "substrate")
REGION_KINDS = ("plane", "slab", "surface")
MAX_WAVELENGTH_POINTS = 100_000


@dataclass(frozen=True)
class LatticeSpec:
    """Bravais lattice. ``periods_nm`` = (a, b) [nm]; ``angle_deg`` between a1 and a2 [deg]."""

    kind: str
    periods_nm: tuple[float, float]
    angle_deg: float


@dataclass(frozen=True)
class ParticleSpec:
    """A particle in the unit cell, its symmetry axis along z.

    ``shape``: ``sphere`` (optionally with a core), ``cylinder`` (a disk or pillar) or
    ``spheroid``; with the Fourier solver also ``elliptic_cylinder`` (semi-axes
    ``radius_nm`` and ``radius_b_nm``, rotated by ``angle_deg``), ``box`` (``size_nm``
    [width, depth], ``angle_deg``, optional ``corner_radius_nm``; ``radius_nm`` is then
    its half diagonal) and ``ring`` (outer ``radius_nm``, hole ``inner_radius_nm``).
    ``radius_nm`` is the outer (sphere, cylinder) or equatorial (spheroid)
    radius [nm]; ``height_nm`` the full height of a cylinder or the polar diameter of a
    spheroid [nm]; ``material`` the outer material; ``core_radius_nm`` /
    ``core_material`` an optional core of a sphere; ``position_nm`` the in-plane centre
    (x, y) in the cell [nm].
    """

    shape: str
    radius_nm: float
    material: Any
    position_nm: tuple[float, float] = (0.0, 0.0)
    core_radius_nm: float | None = None
    core_material: Any = None
    height_nm: float | None = None
    radius_b_nm: float | None = None
    angle_deg: float | None = None
    size_nm: tuple[float, float] | None = None
    corner_radius_nm: float | None = None
    inner_radius_nm: float | None = None

    @property
    def reach_nm(self) -> float:
        """In-plane radius [nm] of the smallest centred disc holding the cross-section."""
        if self.shape == "elliptic_cylinder":
            return max(self.radius_nm, self.radius_b_nm)
        return self.radius_nm

    @property
    def half_height_nm(self) -> float:
        """Vertical half extent [nm]: the radius of a sphere, half the height otherwise."""
        return self.radius_nm if self.height_nm is None else self.height_nm / 2.0


@dataclass(frozen=True)
class LayerSpec:
    """A homogeneous film on the substrate: material and thickness [nm]."""

    material: Any
    thickness_nm: float


@dataclass(frozen=True)
class IlluminationSpec:
    """Plane-wave illumination: vacuum wavelengths [nm], polar and azimuth angles [deg]."""

    wavelength_nm: tuple[float, ...]
    polar_deg: float = 0.0
    azimuth_deg: float = 0.0
    side: str = "host"


@dataclass(frozen=True)
class RegionSpec:
    """Where near-field metrics are averaged, above the particle tops.

    ``kind='plane'``: at ``height_nm`` above the highest particle top.
    ``kind='slab'``: from ``from_nm`` above the tops, ``thickness_nm`` thick; with
    ``origin='substrate'`` ``from_nm`` is measured from the substrate top instead, so the
    slab may reach down between the particles (Fourier solver only; the average is then
    taken over the part of the slab outside the particles).
    ``kind='surface'``: the film of ``thickness_nm`` wrapping the particles' tops and side
    walls, outside them (Fourier solver only).
    """

    kind: str
    height_nm: float = 0.0
    from_nm: float = 0.0
    thickness_nm: float = 0.0
    origin: str = "tops"

    @property
    def inside_layer(self) -> bool:
        """Whether the region may reach into the particles' layer (sampled fields)."""
        return self.kind == "surface" or self.origin == "substrate"


@dataclass(frozen=True)
class Design:
    """A complete, validated design. Build with :func:`load_design` or :func:`design_from_dict`."""

    lattice: LatticeSpec
    particles: tuple[ParticleSpec, ...]
    illumination: IlluminationSpec
    host_index: float = 1.0
    substrate: Any = None
    layers: tuple[LayerSpec, ...] = ()
    gap_nm: float = 0.0
    region: RegionSpec | None = None
    lmax: int | str = 1
    lmax_tolerance: float = 1e-6
    tolerance: float = 1e-8
    solver: str = "multipole"
    harmonics: int | str = "auto"
    harmonics_tolerance: float = 1e-3
    harmonics_max: int = 625
    factorization: str = "normal"
    slices: int = 24
    name: str = ""
    base_dir: str = "."
    raw: dict = field(default_factory=dict, compare=False, repr=False)

    # -- named continuous quantities ------------------------------------------------
    def parameters(self) -> dict[str, Any]:
        """The continuous design quantities by key path, in user units (nm, deg, index).

        Array-valued entries (``illumination.wavelength_nm``) are numpy arrays.
        These are the names the goal file's ``variables:`` and ``--grad`` use.
        """
        p: dict[str, Any] = {}
        lat = self.lattice
        if lat.kind in ("square", "hexagonal"):
            p["lattice.period_nm"] = lat.periods_nm[0]
        else:
            p["lattice.period_nm[0]"] = lat.periods_nm[0]
            p["lattice.period_nm[1]"] = lat.periods_nm[1]
        if lat.kind == "oblique":
            p["lattice.angle_deg"] = lat.angle_deg
        for i, part in enumerate(self.particles):
            if part.shape == "box":
                p[f"particles[{i}].size_nm[0]"] = part.size_nm[0]
                p[f"particles[{i}].size_nm[1]"] = part.size_nm[1]
            else:
                p[f"particles[{i}].radius_nm"] = part.radius_nm
            for extra in ("radius_b_nm", "angle_deg", "corner_radius_nm", "inner_radius_nm"):
                if getattr(part, extra) is not None:
                    p[f"particles[{i}].{extra}"] = getattr(part, extra)
            if part.height_nm is not None:
                p[f"particles[{i}].height_nm"] = part.height_nm
            if part.core_radius_nm is not None:
                p[f"particles[{i}].core_radius_nm"] = part.core_radius_nm
            p[f"particles[{i}].position_nm[0]"] = part.position_nm[0]
            p[f"particles[{i}].position_nm[1]"] = part.position_nm[1]
            for key, spec in (("material", part.material), ("core_material", part.core_material)):
                if isinstance(spec, dict) and "n" in spec:
                    p[f"particles[{i}].{key}.n"] = float(spec["n"])
                    p[f"particles[{i}].{key}.k"] = float(spec.get("k", 0.0))
        p["host_index"] = self.host_index
        if self.substrate is not None:
            p["gap_nm"] = self.gap_nm
            for i, layer in enumerate(self.layers):
                p[f"layers[{i}].thickness_nm"] = layer.thickness_nm
        p["illumination.wavelength_nm"] = onp.asarray(self.illumination.wavelength_nm, float)
        p["illumination.polar_deg"] = self.illumination.polar_deg
        p["illumination.azimuth_deg"] = self.illumination.azimuth_deg
        if self.region is not None:
            if self.region.kind == "plane":
                p["region.height_nm"] = self.region.height_nm
            elif self.region.kind == "surface":
                p["region.thickness_nm"] = self.region.thickness_nm
            else:
                p["region.from_nm"] = self.region.from_nm
                p["region.thickness_nm"] = self.region.thickness_nm
        return p

    def with_wavelengths(self, wavelength_nm) -> Design:
        """A copy at other wavelengths [nm]."""
        wl = tuple(float(w) for w in onp.atleast_1d(wavelength_nm))
        return replace(self, illumination=replace(self.illumination, wavelength_nm=wl))

    def model_dict(self) -> dict:
        """The ``model:`` section that :func:`design_from_dict` reads back."""
        if self.solver == "fourier":
            return {"solver": "fourier", "harmonics": self.harmonics,
                    "harmonics_tolerance": self.harmonics_tolerance,
                    "harmonics_max": self.harmonics_max,
                    "factorization": self.factorization, "slices": self.slices,
                    "tolerance": self.tolerance}
        return {"lmax": self.lmax, "tolerance": self.tolerance,
                "lmax_tolerance": self.lmax_tolerance}

    def to_dict(self) -> dict:
        """Plain data that :func:`design_from_dict` turns back into an equal Design."""
        lat = self.lattice
        if lat.kind in ("square", "hexagonal"):
            ld: dict[str, Any] = {"kind": lat.kind, "period_nm": lat.periods_nm[0]}
        else:
            ld = {"kind": lat.kind, "period_nm": list(lat.periods_nm)}
        if lat.kind == "oblique":
            ld["angle_deg"] = lat.angle_deg
        parts = []
        for part in self.particles:
            pd: dict[str, Any] = {"shape": part.shape, "material": part.material,
                                  "position_nm": list(part.position_nm)}
            if part.shape == "box":
                pd["size_nm"] = list(part.size_nm)
            else:
                pd["radius_nm"] = part.radius_nm
            for extra in ("radius_b_nm", "angle_deg", "corner_radius_nm", "inner_radius_nm"):
                if getattr(part, extra) is not None:
                    pd[extra] = getattr(part, extra)
            if part.core_radius_nm is not None:
                pd["core_radius_nm"] = part.core_radius_nm
                pd["core_material"] = part.core_material
            if part.height_nm is not None:
                pd["height_nm"] = part.height_nm
            parts.append(pd)
        wl = list(self.illumination.wavelength_nm)
        out: dict[str, Any] = {
            "lattice": ld,
            "particles": parts,
            "host_index": self.host_index,
            "illumination": {"wavelength_nm": wl if len(wl) > 1 else wl[0],
                             "polar_deg": self.illumination.polar_deg,
                             "azimuth_deg": self.illumination.azimuth_deg,
                             "side": self.illumination.side},
            "model": self.model_dict(),
        }
        if self.name:
            out["name"] = self.name
        if self.substrate is not None:
            out["substrate"] = {"material": self.substrate}
            out["layers"] = [{"material": la.material, "thickness_nm": la.thickness_nm}
                             for la in self.layers]
            out["gap_nm"] = self.gap_nm
        if self.region is not None:
            r = self.region
            if r.kind == "plane":
                out["region"] = {"kind": "plane", "height_nm": r.height_nm}
            elif r.kind == "surface":
                out["region"] = {"kind": "surface", "thickness_nm": r.thickness_nm}
            else:
                out["region"] = {"kind": "slab", "from_nm": r.from_nm,
                                 "thickness_nm": r.thickness_nm}
                if r.origin != "tops":
                    out["region"]["origin"] = r.origin
        return out


# ---------------------------------------------------------------------------------
# parsing helpers
# ---------------------------------------------------------------------------------

def _number(value: Any, key: str, *, low: float | None = None, high: float | None = None,
            low_open: bool = False, unit: str = "") -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(key, f"expected a number{' in ' + unit if unit else ''}, got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise InputError(key, f"expected a finite number, got {value!r}")
    rng = _range_text(low, high, low_open, unit)
    if low is not None and (v < low or (low_open and v == low)):
        raise InputError(key, f"got {v:g}, allowed {rng}")
    if high is not None and v > high:
        raise InputError(key, f"got {v:g}, allowed {rng}")
    return v


def _range_text(low, high, low_open, unit) -> str:
    u = f" {unit}" if unit else ""
    if low is not None and high is not None:
        return f"{'(' if low_open else '['}{low:g}, {high:g}]{u}"
    if low is not None:
        return f"{'>' if low_open else '>='} {low:g}{u}"
    return f"<= {high:g}{u}"


def _pair(value: Any, key: str, **kw) -> tuple[float, float]:
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise InputError(key, f"expected a list of two numbers [x, y], got {value!r}")
    return (_number(value[0], f"{key}[0]", **kw), _number(value[1], f"{key}[1]", **kw))


def _material_spec(value: Any, key: str) -> Any:
    if isinstance(value, str) and value.strip():
        return value.strip()
    if isinstance(value, dict):
        if "n" in value:
            check_keys(value, {"n", "k"}, key)
            n = _number(value["n"], f"{key}.n", low=0.0, low_open=True)
            k = _number(value.get("k", 0.0), f"{key}.k", low=0.0)
            return {"n": n, "k": k}
        if "table" in value:
            check_keys(value, {"table"}, key)
            return {"table": str(value["table"])}
    raise InputError(key, "expected a material: a short name (Si, SiO2, TiO2, GaP, Si3N4, Ag, Au"
                          "...), a database id 'shelf/book/page', {n: 3.5, k: 0.0} or "
                          f"{{table: file.csv}}; got {value!r}")


def _wavelengths(value: Any, key: str) -> tuple[float, ...]:
    kw = dict(low=1.0, high=1e6, unit="nm")
    if isinstance(value, dict):
        check_keys(value, {"start", "stop", "points"}, key)
        for name in ("start", "stop", "points"):
            if name not in value:
                raise InputError(f"{key}.{name}", "missing; a range needs start, stop and points")
        start = _number(value["start"], f"{key}.start", **kw)
        stop = _number(value["stop"], f"{key}.stop", **kw)
        pts = value["points"]
        if isinstance(pts, bool) or not isinstance(pts, int) or not (
                1 <= pts <= MAX_WAVELENGTH_POINTS):
            raise InputError(f"{key}.points",
                             f"got {pts!r}, allowed an integer in [1, {MAX_WAVELENGTH_POINTS}]")
        if stop < start:
            raise InputError(f"{key}.stop", f"got {stop:g} below start {start:g}")
        return tuple(float(w) for w in onp.linspace(start, stop, pts))
    if isinstance(value, (list, tuple)):
        if not value:
            raise InputError(key, "an empty list; give at least one wavelength")
        return tuple(_number(v, f"{key}[{i}]", **kw) for i, v in enumerate(value))
    return (_number(value, key, **kw),)


TOP_KEYS = {"name", "description", "lattice", "particles", "host_index", "substrate", "layers",
            "gap_nm", "illumination", "region", "model"}


def design_from_dict(data: dict, *, base_dir: str | Path = ".", located: Located | None = None,
                     prefix: str = "") -> Design:
    """Validate plain data (as read from a design file) into a :class:`Design`.

    Raises :class:`InputError` naming the key path (and file:line when known).
    ``prefix`` is prepended to key paths (a goal file's ``design.``).
    """
    try:
        return _design_from_dict(data, base_dir=base_dir, prefix=prefix)
    except InputError as exc:
        if located is not None and exc.key:
            raise InputError(exc.key, f"{exc.message} ({located.where(exc.key)})") from None
        raise


def _design_from_dict(data: dict, *, base_dir, prefix: str) -> Design:
    P = prefix
    if (not prefix and isinstance(data, dict) and "lattice" not in data
            and {"objectives", "variables"} & set(data)):
        raise InputError("", "this is a goal file (it has objectives/variables), not a design "
                             "file; use chiropt run (or chiropt goal --check) with it")
    check_keys(data, TOP_KEYS, prefix.rstrip("."))
    for required in ("lattice", "particles", "illumination"):
        if required not in data:
            raise InputError(P + required, "missing (required keys: lattice, particles, "
                                           "illumination)")
    lattice = _lattice(data["lattice"], P + "lattice")
    parts_raw = data["particles"]
    if not isinstance(parts_raw, list) or not parts_raw:
        raise InputError(P + "particles", "expected a non-empty list of particles")
    particles = tuple(_particle(p, f"{P}particles[{i}]") for i, p in enumerate(parts_raw))
    host_index = _number(data.get("host_index", 1.0), P + "host_index", low=1.0, high=5.0)
    substrate = None
    layers: tuple[LayerSpec, ...] = ()
    gap = 0.0
    if data.get("substrate") is not None:
        sub = data["substrate"]
        check_keys(sub, {"material"}, P + "substrate")
        substrate = _material_spec(sub.get("material"), P + "substrate.material")
        lay = data.get("layers") or []
        if not isinstance(lay, list):
            raise InputError(P + "layers", "expected a list of {material, thickness_nm}")
        layers = tuple(_layer(la, f"{P}layers[{i}]") for i, la in enumerate(lay))
        gap = _number(data.get("gap_nm", 0.0), P + "gap_nm", low=0.0, high=1e5, unit="nm")
    else:
        for key in ("layers", "gap_nm"):
            if data.get(key):
                raise InputError(P + key, "needs a substrate: add substrate: {material: ...}")
    illum_raw = data["illumination"]
    check_keys(illum_raw, {"wavelength_nm", "polar_deg", "azimuth_deg", "side"},
               P + "illumination")
    if "wavelength_nm" not in illum_raw:
        raise InputError(P + "illumination.wavelength_nm", "missing")
    side = illum_raw.get("side", "host")
    if side not in ILLUMINATION_SIDES:
        raise InputError(P + "illumination.side", f"got {side!r}, allowed: host, substrate")
    if side == "substrate" and substrate is None:
        raise InputError(P + "illumination.side", "'substrate' needs a substrate in the design")
    illum = IlluminationSpec(
        wavelength_nm=_wavelengths(illum_raw["wavelength_nm"], P + "illumination.wavelength_nm"),
        polar_deg=_number(illum_raw.get("polar_deg", 0.0), P + "illumination.polar_deg",
                          low=0.0, high=89.0, unit="deg"),
        azimuth_deg=_number(illum_raw.get("azimuth_deg", 0.0), P + "illumination.azimuth_deg",
                            low=-360.0, high=360.0, unit="deg"),
        side=side)
    region = _region(data["region"], P + "region") if data.get("region") is not None else None
    model = _model(data.get("model"), P, particles)
    design = Design(lattice=lattice, particles=particles, illumination=illum,
                    host_index=host_index, substrate=substrate, layers=layers, gap_nm=gap,
                    region=region, **model,
                    name=str(data.get("name", "")), base_dir=str(base_dir), raw=dict(data))
    check_geometry(design, prefix=P)
    return design


SOLVERS = ("multipole", "fourier")


def _model(raw: Any, P: str, particles) -> dict:
    """The ``model:`` section: solver and its truncation settings, as Design fields."""
    raw = {} if raw is None else raw
    solver = raw.get("solver", "multipole") if isinstance(raw, dict) else "multipole"
    if solver not in SOLVERS:
        raise InputError(P + "model.solver", f"got {solver!r}, allowed: {', '.join(SOLVERS)} "
                                             "(multipole: dipoles at lmax 1 and the multipole "
                                             "lattice model; fourier: the Fourier modal method)")
    tol = 1e-8
    if solver == "fourier":
        check_keys(raw, {"solver", "harmonics", "harmonics_tolerance", "harmonics_max",
                         "factorization", "slices", "tolerance"}, P + "model")
        harmonics = raw.get("harmonics", "auto")
        if harmonics != "auto" and (isinstance(harmonics, bool) or not isinstance(harmonics, int)
                                    or not 1 <= harmonics <= 2000):
            raise InputError(P + "model.harmonics", f"got {harmonics!r}, allowed an integer "
                                                    "in [1, 2000] or 'auto'")
        factorization = raw.get("factorization", "normal")
        if factorization not in ("normal", "laurent"):
            raise InputError(P + "model.factorization", f"got {factorization!r}, allowed: "
                                                        "normal, laurent")
        slices = raw.get("slices", 24)
        if isinstance(slices, bool) or not isinstance(slices, int) or not 1 <= slices <= 400:
            raise InputError(P + "model.slices", f"got {slices!r}, allowed an integer in "
                                                 "[1, 400]")
        htol = _number(raw.get("harmonics_tolerance", 1e-3), P + "model.harmonics_tolerance",
                       low=1e-8, high=0.5)
        tol = _number(raw.get("tolerance", 1e-8), P + "model.tolerance", low=1e-14, high=1e-2)
        hmax = raw.get("harmonics_max", 625)
        if isinstance(hmax, bool) or not isinstance(hmax, int) or not 25 <= hmax <= 2000:
            raise InputError(P + "model.harmonics_max", f"got {hmax!r}, allowed an integer in "
                                                        "[25, 2000] (the cap of harmonics: auto)")
        return {"solver": "fourier", "harmonics": harmonics, "harmonics_tolerance": htol,
                "harmonics_max": hmax,
                "factorization": factorization, "slices": slices, "tolerance": tol,
                "lmax": "auto"}
    # Non-spherical particles couple every multipole order to the next: a truncated
    # T-matrix loses energy (a lossless Si-like disk at lmax 2: |R + T - 1| ~ 4e-4), so
    # their default order is chosen by convergence ('auto'), spheres keep the dipoles.
    default_lmax: int | str = 1 if all(p.shape == "sphere" for p in particles) else "auto"
    lmax: int | str = default_lmax
    lmax_tol = 1e-6
    if raw:
        check_keys(raw, {"solver", "lmax", "tolerance", "lmax_tolerance"}, P + "model")
        lmax = raw.get("lmax", default_lmax)
        if lmax != "auto" and (isinstance(lmax, bool) or not isinstance(lmax, int)
                               or not 1 <= lmax <= 8):
            raise InputError(P + "model.lmax", f"got {lmax!r}, allowed an integer in [1, 8] "
                                               "(1: electric+magnetic dipoles) or 'auto'")
        tol = _number(raw.get("tolerance", 1e-8), P + "model.tolerance", low=1e-14, high=1e-2)
        lmax_tol = _number(raw.get("lmax_tolerance", 1e-6), P + "model.lmax_tolerance",
                           low=1e-12, high=1e-1)
    return {"solver": "multipole", "lmax": lmax, "lmax_tolerance": lmax_tol, "tolerance": tol}


def _lattice(raw: Any, key: str) -> LatticeSpec:
    check_keys(raw, {"kind", "period_nm", "angle_deg"}, key)
    kind = raw.get("kind", "square")
    if kind not in LATTICE_KINDS:
        raise InputError(f"{key}.kind", f"got {kind!r}, allowed: {', '.join(LATTICE_KINDS)}")
    if "period_nm" not in raw:
        raise InputError(f"{key}.period_nm", "missing")
    kw = dict(low=1.0, high=1e5, low_open=True, unit="nm")
    per = raw["period_nm"]
    if kind in ("square", "hexagonal"):
        a = _number(per, f"{key}.period_nm", **kw)
        periods = (a, a)
    else:
        periods = _pair(per, f"{key}.period_nm", **kw)
    angle = {"square": 90.0, "rectangular": 90.0, "hexagonal": 60.0}.get(kind)
    if kind == "oblique":
        if "angle_deg" not in raw:
            raise InputError(f"{key}.angle_deg", "missing; an oblique lattice needs the angle "
                                                 "between a1 and a2")
        angle = _number(raw["angle_deg"], f"{key}.angle_deg", low=30.0, high=150.0, unit="deg")
    elif "angle_deg" in raw:
        raise InputError(f"{key}.angle_deg", f"only for kind 'oblique' (a {kind} lattice has "
                                             "a fixed angle)")
    return LatticeSpec(kind=kind, periods_nm=periods, angle_deg=float(angle))


PARTICLE_SHAPES = ("sphere", "cylinder", "spheroid", "elliptic_cylinder", "box", "ring")
#: shapes only the Fourier solver can model (columns standing on the stack)
FOURIER_SHAPES = ("elliptic_cylinder", "box", "ring")


def _particle(raw: Any, key: str) -> ParticleSpec:
    check_keys(raw, {"shape", "radius_nm", "material", "position_nm", "core_radius_nm",
                     "core_material", "height_nm", "radius_b_nm", "angle_deg", "size_nm",
                     "corner_radius_nm", "inner_radius_nm"}, key)
    shape = raw.get("shape", "sphere")
    if shape not in PARTICLE_SHAPES:
        raise InputError(f"{key}.shape", f"got {shape!r}, allowed: {', '.join(PARTICLE_SHAPES)}")
    allowed_extra = {"elliptic_cylinder": {"radius_b_nm", "angle_deg"},
                     "box": {"size_nm", "angle_deg", "corner_radius_nm"},
                     "ring": {"inner_radius_nm"}}.get(shape, set())
    for extra in ("radius_b_nm", "angle_deg", "size_nm", "corner_radius_nm", "inner_radius_nm"):
        if extra in raw and extra not in allowed_extra:
            raise InputError(f"{key}.{extra}", f"not a property of shape {shape}")
    extras: dict[str, Any] = {}
    if shape == "box":
        if "size_nm" not in raw:
            raise InputError(f"{key}.size_nm", "missing; a box needs [width, depth] in nm")
        if "radius_nm" in raw:
            raise InputError(f"{key}.radius_nm", "a box is given by size_nm [width, depth]")
        size = _pair(raw["size_nm"], f"{key}.size_nm", low=0.0, high=1e4)
        if min(size) <= 0:
            raise InputError(f"{key}.size_nm", f"got {list(size)}, allowed sizes > 0 nm")
        extras["size_nm"] = size
        corner = _number(raw.get("corner_radius_nm", 0.0), f"{key}.corner_radius_nm", low=0.0,
                         high=min(size) / 2.0, unit="nm")
        extras["corner_radius_nm"] = corner if "corner_radius_nm" in raw else None
        radius = 0.5 * math.hypot(*size)
    else:
        if "radius_nm" not in raw:
            raise InputError(f"{key}.radius_nm", "missing")
        radius = _number(raw["radius_nm"], f"{key}.radius_nm", low=0.0, high=1e4,
                         low_open=True, unit="nm")
    if shape in ("elliptic_cylinder", "box"):
        extras["angle_deg"] = _number(raw.get("angle_deg", 0.0), f"{key}.angle_deg",
                                      low=-360.0, high=360.0, unit="deg")
    if shape == "elliptic_cylinder":
        if "radius_b_nm" not in raw:
            raise InputError(f"{key}.radius_b_nm", "missing; an elliptic cylinder needs its "
                                                   "second semi-axis")
        extras["radius_b_nm"] = _number(raw["radius_b_nm"], f"{key}.radius_b_nm", low=0.0,
                                        high=1e4, low_open=True, unit="nm")
    if shape == "ring":
        if "inner_radius_nm" not in raw:
            raise InputError(f"{key}.inner_radius_nm", "missing; a ring needs its hole radius")
        extras["inner_radius_nm"] = _number(raw["inner_radius_nm"], f"{key}.inner_radius_nm",
                                            low=0.0, high=radius, low_open=True, unit="nm")
        if extras["inner_radius_nm"] >= radius:
            raise InputError(f"{key}.inner_radius_nm", f"got {extras['inner_radius_nm']:g}, "
                                                       f"allowed (0, {radius:g}) nm (below "
                                                       "radius_nm)")
    height = None
    if shape == "sphere":
        if "height_nm" in raw:
            raise InputError(f"{key}.height_nm", "only for shape cylinder or spheroid (and the "
                             "Fourier solver's columns), not spheres")
    else:
        if "height_nm" not in raw:
            raise InputError(f"{key}.height_nm", f"missing; a {shape} needs its height")
        height = _number(raw["height_nm"], f"{key}.height_nm", low=0.0, high=1e4,
                         low_open=True, unit="nm")
        if "core_radius_nm" in raw or "core_material" in raw:
            raise InputError(f"{key}.core_radius_nm", "cores are supported for spheres only")
    if "material" not in raw:
        raise InputError(f"{key}.material", "missing")
    material = _material_spec(raw["material"], f"{key}.material")
    pos = _pair(raw.get("position_nm", [0.0, 0.0]), f"{key}.position_nm", low=-1e5, high=1e5)
    core_r = core_m = None
    if "core_radius_nm" in raw or "core_material" in raw:
        for k in ("core_radius_nm", "core_material"):
            if k not in raw:
                raise InputError(f"{key}.{k}", "missing; a core needs core_radius_nm and "
                                               "core_material")
        core_r = _number(raw["core_radius_nm"], f"{key}.core_radius_nm", low=0.0,
                         high=radius, low_open=True, unit="nm")
        core_m = _material_spec(raw["core_material"], f"{key}.core_material")
    return ParticleSpec(shape=shape, radius_nm=radius, material=material, position_nm=pos,
                        core_radius_nm=core_r, core_material=core_m, height_nm=height,
                        **extras)


def _layer(raw: Any, key: str) -> LayerSpec:
    check_keys(raw, {"material", "thickness_nm"}, key)
    if "thickness_nm" not in raw:
        raise InputError(f"{key}.thickness_nm", "missing")
    return LayerSpec(material=_material_spec(raw.get("material"), f"{key}.material"),
                     thickness_nm=_number(raw["thickness_nm"], f"{key}.thickness_nm", low=0.0,
                                          high=1e5, unit="nm"))


def _region(raw: Any, key: str) -> RegionSpec:
    if not isinstance(raw, dict):
        raise InputError(key, f"expected a mapping, got {raw!r}")
    kind = raw.get("kind")
    if kind not in REGION_KINDS:
        raise InputError(f"{key}.kind", f"got {kind!r}, allowed: {', '.join(REGION_KINDS)}")
    if kind == "surface":
        check_keys(raw, {"kind", "thickness_nm"}, key)
        if "thickness_nm" not in raw:
            raise InputError(f"{key}.thickness_nm", "missing")
        return RegionSpec(kind=kind, thickness_nm=_number(raw["thickness_nm"],
                                                          f"{key}.thickness_nm", low=0.0,
                                                          high=1e3, low_open=True, unit="nm"))
    if kind == "plane":
        check_keys(raw, {"kind", "height_nm"}, key)
        return RegionSpec(kind=kind, height_nm=_number(raw.get("height_nm", 0.0),
                                                       f"{key}.height_nm", low=0.0, high=1e4,
                                                       unit="nm"))
    check_keys(raw, {"kind", "from_nm", "thickness_nm", "origin"}, key)
    if "thickness_nm" not in raw:
        raise InputError(f"{key}.thickness_nm", "missing")
    origin = raw.get("origin", "tops")
    if origin not in ("tops", "substrate"):
        raise InputError(f"{key}.origin", f"got {origin!r}, allowed: tops (from_nm above the "
                                          "highest particle top), substrate (from the "
                                          "substrate top)")
    return RegionSpec(kind=kind, origin=origin,
                      from_nm=_number(raw.get("from_nm", 0.0), f"{key}.from_nm", low=0.0,
                                      high=1e4, unit="nm"),
                      thickness_nm=_number(raw["thickness_nm"], f"{key}.thickness_nm", low=0.0,
                                           high=1e4, low_open=True, unit="nm"))


def lattice_vectors_nm(spec: LatticeSpec) -> tuple[onp.ndarray, onp.ndarray]:
    """Lattice vectors a1 = (a, 0), a2 = b (cos angle, sin angle) [nm]."""
    a, b = spec.periods_nm
    ang = math.radians(spec.angle_deg)
    return onp.array([a, 0.0]), onp.array([b * math.cos(ang), b * math.sin(ang)])


def check_geometry(design: Design, prefix: str = "") -> None:
    """Fabrication-level sanity: no particle overlaps another or its own lattice images.

    Raises :class:`InputError` naming the offending particle and the allowed limit.
    """
    a1, a2 = lattice_vectors_nm(design.lattice)
    images = [i * a1 + j * a2 for i in range(-2, 3) for j in range(-2, 3)]
    parts = design.particles
    # shortest lattice vector limits a single particle's diameter
    shortest = min(onp.hypot(*v) for v in images if onp.hypot(*v) > 0)
    for i, p in enumerate(parts):
        if p.shape in FOURIER_SHAPES and design.solver != "fourier":
            raise InputError(f"{prefix}particles[{i}].shape",
                             f"shape {p.shape} needs model.solver fourier (the multipole model "
                             "has sphere, cylinder and spheroid)")
        reach = max(p.size_nm) / 2.0 if p.shape == "box" else p.reach_nm
        if 2 * reach > shortest:
            raise InputError(f"{prefix}particles[{i}]." + ("size_nm" if p.shape == "box"
                                                            else "radius_nm"),
                             f"diameter {2 * reach:g} nm exceeds the shortest lattice "
                             f"period {shortest:g} nm (spheres would overlap their neighbours); "
                             f"allowed radius <= {shortest / 2:g} nm, or {prefix}lattice.period_nm "
                             f"of at least {2 * p.radius_nm:g} nm")
        if design.solver == "fourier":
            continue
        aspect = 2.0 * p.half_height_nm / (2 * p.radius_nm)
        if p.shape != "sphere" and not 0.25 <= aspect <= 4.0:
            raise InputError(f"{prefix}particles[{i}].height_nm",
                             f"height/diameter = {aspect:.3g}; allowed [0.25, 4] (the T-matrix "
                             "method is ill-conditioned for flatter or longer shapes; "
                             "model.solver fourier has no such limit)")
        if 2 * _circumradius(p) > shortest:
            raise InputError(f"{prefix}particles[{i}].height_nm",
                             f"the circumscribing sphere of this {p.shape} (diameter "
                             f"{2 * _circumradius(p):.4g} nm) exceeds the shortest lattice period "
                             f"{shortest:g} nm: its T-matrix expansion would not converge "
                             "between neighbours")
    if design.solver != "fourier":
        if design.region is not None and design.region.inside_layer:
            raise InputError(prefix + "region", "regions reaching between the particles "
                             "(kind surface, or origin substrate) need model.solver fourier")
        _check_expansion_limits(design, prefix)
    for i in range(len(parts)):
        for j in range(i + 1, len(parts)):
            d0 = onp.subtract(parts[i].position_nm, parts[j].position_nm)
            # bottoms aligned: centres differ in height by the half-height difference;
            # non-spheres are checked by their circumscribing spheres (conservative)
            dz = parts[i].half_height_nm - parts[j].half_height_nm
            if design.solver == "fourier":  # columns standing side by side: in-plane discs
                dz = 0.0
                reach = parts[i].reach_nm + parts[j].reach_nm
            else:
                reach = _circumradius(parts[i]) + _circumradius(parts[j])
            dist = min(math.sqrt(float(onp.sum((d0 + v) ** 2)) + dz ** 2) for v in images)
            if dist < reach:
                raise InputError(f"{prefix}particles[{j}].position_nm",
                                 f"particle {j} overlaps particle {i} (centre distance "
                                 f"{dist:.4g} nm < sum of circumscribing radii {reach:g} nm)")


def _check_expansion_limits(design: Design, prefix: str) -> None:
    """Where the T-matrix (multipole) expansion of a non-spherical particle is valid.

    The outgoing expansion converges outside the particle's circumscribing sphere only.
    Its coupling to the stack through the reflected orders needs the sphere and its
    mirror image not to overlap (centre at least one circumradius above the stack), and
    near-field regions must lie above the sphere's top. Spheres satisfy both by
    construction; cylinders and spheroids need a gap and a height (raised as errors with
    the allowed values rather than returning results that do not converge with lmax).
    """
    worst_gap = max(_circumradius(p) - p.half_height_nm for p in design.particles)
    if worst_gap <= 0:
        return
    if design.substrate is not None and design.gap_nm < worst_gap:
        raise InputError(prefix + "gap_nm",
                         f"got {design.gap_nm:g} nm; a cylinder or spheroid's circumscribing "
                         "sphere must stay above the stack for its multipole coupling to the "
                         f"reflected waves to converge: allowed gap_nm >= {worst_gap:.4g} nm")
    region = design.region
    if region is not None:
        key, low = (("region.height_nm", region.height_nm) if region.kind == "plane"
                    else ("region.from_nm", region.from_nm))
        # heights are counted from the tallest top; every particle's bottom is at gap_nm
        tallest = max(2.0 * p.half_height_nm for p in design.particles)
        need = max(p.half_height_nm + _circumradius(p) for p in design.particles) - tallest
        if low < need:
            raise InputError(prefix + key,
                             f"got {low:g} nm; near fields of a cylinder or spheroid are "
                             "computed from its multipole expansion, valid above its "
                             f"circumscribing sphere: allowed {key.split('.')[-1]} >= "
                             f"{need:.4g} nm")


def _circumradius(part: ParticleSpec) -> float:
    """Radius [nm] of the sphere around a particle's centre that contains it."""
    if part.shape == "cylinder":
        return math.hypot(part.radius_nm, part.height_nm / 2.0)
    return max(part.radius_nm, part.half_height_nm)


def file_safe_name(label: str) -> str:
    """``label`` made safe as a file or folder name: ASCII letters, digits and ``._+-``.

    Accents are dropped (``café`` -> ``cafe``), other characters (``/``, spaces, ``..``
    at the ends) become ``_`` or are stripped; an empty result becomes ``design``.
    """
    ascii_ = unicodedata.normalize("NFKD", str(label)).encode("ascii", "ignore").decode()
    safe = re.sub(r"[^A-Za-z0-9._+-]+", "_", ascii_).strip("._-")
    return safe[:120] or "design"


def load_design(path: str | Path) -> Design:
    """Read and validate a design file (YAML). Errors name the key path and file:line."""
    located = load_yaml(path)
    return design_from_dict(located, base_dir=Path(path).resolve().parent, located=located)
