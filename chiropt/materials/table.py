"""User tables of optical constants (CSV files).

Owns: reading and validating a CSV table ``wavelength_nm,n,k`` into a
``Material`` whose n and k are PCHIP-interpolated (cached per file version).

File format::

    # any comment lines; those before the first data row become the reference
    wavelength_nm,n,k
    400,2.52,0.010
    500,2.45,0.002   # trailing comments are allowed too

Rules: the header is exactly ``wavelength_nm,n,k``; at least 2 data rows;
wavelengths [nm] positive and strictly increasing; n > 0; k >= 0 (passive
medium, exp(-i omega t) convention, n + i k).

Must not import: chiropt modules other than ``chiropt.errors`` and this package.
"""

from __future__ import annotations

import functools
import math
import os
from pathlib import Path

import numpy as onp

from chiropt.errors import InputError
from chiropt.materials.material import Material, TabulatedPart

HEADER = ("wavelength_nm", "n", "k")


class _TableFault(Exception):
    """Internal: a message about a malformed table (converted to InputError)."""


@functools.lru_cache(maxsize=64)
def _parse(path: str, mtime_ns: int, size: int):
    """Parse a table file -> (range_nm, n_part, k_part, notes). Cached per file version."""
    del mtime_ns, size  # only part of the cache key
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise _TableFault(f"cannot read {path}: {err}") from err
    notes: list[str] = []
    header_seen = False
    rows: list[tuple[float, float, float]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        body, _, comment = line.partition("#")
        body = body.strip()
        if not body:
            if comment.strip() and not rows:
                notes.append(comment.strip())
            continue
        fields = [f.strip() for f in body.split(",")]
        if not header_seen:
            if tuple(f.lower() for f in fields) != HEADER:
                raise _TableFault(f"{path}, line {lineno}: expected the header "
                                  f"'wavelength_nm,n,k', got {body!r}")
            header_seen = True
            continue
        row = len(rows) + 1
        where = f"{path}, data row {row} (line {lineno})"
        if len(fields) != 3:
            raise _TableFault(f"{where}: expected 3 comma-separated numbers "
                              f"(wavelength_nm, n, k), got {body!r}")
        try:
            wl, n, k = (float(f) for f in fields)
        except ValueError:
            raise _TableFault(f"{where}: not a number in {body!r}") from None
        if not all(math.isfinite(v) for v in (wl, n, k)):
            raise _TableFault(f"{where}: values must be finite, got {body!r}")
        if wl <= 0:
            raise _TableFault(f"{where}: wavelength_nm must be > 0, got {wl:g}")
        if rows and wl <= rows[-1][0]:
            raise _TableFault(f"{where}: wavelengths must increase strictly, but {wl:g} nm "
                              f"follows {rows[-1][0]:g} nm")
        if n <= 0:
            raise _TableFault(f"{where}: n must be > 0, got {n:g}")
        if k < 0:
            raise _TableFault(f"{where}: k must be >= 0 (passive medium, n + i k with "
                              f"exp(-i omega t)), got {k:g}")
        rows.append((wl, n, k))
    if not header_seen:
        raise _TableFault(f"{path}: no header line 'wavelength_nm,n,k' found")
    if len(rows) < 2:
        raise _TableFault(f"{path}: at least 2 data rows are needed for interpolation, "
                          f"found {len(rows)}")
    data = onp.array(rows, dtype=float)
    wl = data[:, 0]
    rng = (float(wl[0]), float(wl[-1]))
    return rng, TabulatedPart(wl, data[:, 1]), TabulatedPart(wl, data[:, 2]), " ".join(notes)


def table_material(path, *, base_dir=None, name: str | None = None,
                   key: str = "material") -> Material:
    """Material from a user CSV table ``wavelength_nm,n,k``.

    Parameters
    ----------
    path : str or os.PathLike -- the table file; relative paths are resolved
        against ``base_dir`` (if given) or the current directory
    base_dir : str or os.PathLike, optional -- directory of the file that named the table
    name : str, optional -- display name (defaults to the file's stem)
    key : str -- key path used in error messages

    Returns
    -------
    Material with n and k interpolated separately by PCHIP over the table's
    wavelength range [nm]; its reference is the table's leading comment lines.

    Raises
    ------
    InputError
        Missing file, wrong header, malformed row (the message names the file
        and the row), non-increasing wavelengths, k < 0, n <= 0, fewer than 2 rows.

    References
    ----------
    Interpolation: Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238 (1980).
    """
    if not isinstance(path, str | os.PathLike) or not str(path).strip():
        raise InputError(key, f"a table must be given as a file path, got {path!r}")
    p = Path(path).expanduser()
    if not p.is_absolute() and base_dir is not None:
        p = Path(base_dir) / p
    p = p.resolve()
    if not p.is_file():
        raise InputError(key, f"table file {str(path)!r} not found (looked for {p})")
    stat = p.stat()
    try:
        rng, n_part, k_part, notes = _parse(str(p), stat.st_mtime_ns, stat.st_size)
    except _TableFault as err:
        raise InputError(key, str(err)) from None
    return Material(
        name=name or p.stem,
        reference=notes or f"user table {p}",
        wavelength_range_nm=rng,
        source=str(p),
        n_part=n_part,
        k_part=k_part,
    )
