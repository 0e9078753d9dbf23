"""Diffraction orders of a 2D lattice: selection, in-plane wavevectors, kz branch.

Owns: ``order_indices`` (which (m, n) orders to keep), ``order_wavevectors``
(q_mn = k_par + m b1 + n b2), ``kz_branch`` (the outgoing/decaying square root) and
``rayleigh_proximity`` (distance to the nearest Rayleigh anomaly, for warnings).
Must not import: store, report, cli, search.

Conventions (docs/theory.md §5): SI units; kz = sqrt(k^2 - |q|^2) with
Im kz >= 0, and kz > 0 when real. Array axes: W (wavelengths) first, then N (orders).
"""

from __future__ import annotations

from functools import lru_cache

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError
from chiropt.lattice.bravais import Lattice, pairs_within_plain

# |kz| is never smaller than this fraction of |k|: exactly on a Rayleigh anomaly kz = 0
# would give 1/kz = inf; the floor is at the round-off level of k^2 - |q|^2.
KZ_FLOOR = 1e-8


def order_indices(lattice: Lattice, g_max):
    """Diffraction orders (m, n) with |m b1 + n b2| <= g_max.

    Parameters
    ----------
    lattice : Lattice — the array's lattice [m]
    g_max : float — largest reciprocal-vector length kept [1/m]

    Returns
    -------
    int array (N, 2) — the pairs (m, n), sorted by |G| then m then n; (0, 0) first.

    Notes
    -----
    The selection uses plain (untraced) values, so it is constant under differentiation.
    The sorted pairs come from a memoised table of the lattice's shape (its reciprocal
    vectors in units of |b1|) up to a power-of-two radius, so a search that moves the
    period or the wavelength only measures the table's lengths again (a changed shape
    gets a table of its own); the result is read-only.
    """
    g = float(onp.asarray(getval(g_max)))
    if not onp.isfinite(g) or g < 0:
        raise InputError("g_max", f"must be a finite non-negative wavenumber [1/m]; got {g!r}")
    plain = lattice.plain()
    b1, b2 = (onp.asarray(b, float) for b in plain.reciprocal())
    scale = float(onp.linalg.norm(b1))
    # the shape rounded to 12 digits: a hexagonal lattice's vectors change in their last
    # bits with the period; the table's radius margin (>= 1e-9) covers the rounding
    shape = tuple(round(float(v), 12) for v in onp.concatenate([b1, b2]) / scale)
    mn, mm, mn2, nn = _shape_orders(shape, _radius_bucket(g / scale))
    # |m b1 + n b2|^2 <= g^2 on the actual reciprocal vectors (the criterion of
    # ``pairs_within_plain``); the table is sorted by length, so the kept orders are (but
    # for ties at the cut) a prefix
    length2 = mm * float(b1 @ b1) + mn2 * float(b1 @ b2) + nn * float(b2 @ b2)
    keep = length2 <= (g * (1 + 1e-12)) ** 2
    count = int(onp.count_nonzero(keep))
    if keep[:count].all():
        return mn[:count]
    out = mn[keep]
    out.setflags(write=False)
    return out


def _radius_bucket(r: float) -> float:
    """The table radius serving a cut r (in units of |b1|): the next power of 2 above r
    (at least 4), so that a search whose period or wavelength moves reads one table."""
    return float(2.0 ** max(2, int(onp.ceil(onp.log2(max(r, 1e-300) * (1 + 1e-9))))))


@lru_cache(maxsize=64)
def _shape_orders(b12: tuple[float, ...], radius: float):
    """Every pair (m, n) with |m b1 + n b2| <= radius for reciprocal vectors b1 = b12[:2],
    b2 = b12[2:] in units of |b1| (a scale-free lattice shape), sorted by |G| (rounded to 9
    digits of the shorter vector's length) then m then n; memoised on the shape, so every
    period of one lattice kind reads the same table.

    Returns (mn (N, 2) int, m^2, 2 m n, n^2 (N,) float), all read-only: the floats give
    |G|^2 = m^2 |b1|^2 + 2 m n b1.b2 + n^2 |b2|^2 for any scale of the shape.
    """
    b1, b2 = onp.array(b12[:2]), onp.array(b12[2:])
    det = b1[0] * b2[1] - b1[1] * b2[0]
    # duals a_i with a_i . b_j = 2 pi delta_ij bound the search exactly
    a1 = 2 * onp.pi * onp.array([b2[1], -b2[0]]) / det
    a2 = 2 * onp.pi * onp.array([-b1[1], b1[0]]) / det
    mn = pairs_within_plain(b1, b2, a1, a2, radius)
    vec = mn[:, 0:1] * b1[None, :] + mn[:, 1:2] * b2[None, :]
    unit = min(onp.linalg.norm(b1), onp.linalg.norm(b2))
    length = onp.round(onp.sqrt(onp.sum(vec**2, axis=1)) / unit, 9)
    mn = mn[onp.lexsort((mn[:, 1], mn[:, 0], length))].astype(int)
    m, n = mn[:, 0].astype(float), mn[:, 1].astype(float)
    out = (mn, m * m, 2.0 * m * n, n * n)
    for a in out:
        a.setflags(write=False)
    return out


def order_wavevectors(lattice: Lattice, k_par, mn):
    """In-plane wavevectors of the diffraction orders, q = k_par + m b1 + n b2.

    Parameters
    ----------
    lattice : Lattice — the array's lattice [m] (may be traced)
    k_par : array (W, 2) — Bloch (incident in-plane) wavevector [1/m]
    mn : int array (N, 2) — order indices, e.g. from ``order_indices``

    Returns
    -------
    array (W, N, 2) — q [1/m], differentiable w.r.t. ``k_par`` and the lattice vectors.

    References
    ----------
    docs/theory.md §5 (q_g = k_par + g); standard grating equation.
    """
    g = lattice.order_vectors(mn)
    return k_par[:, None, :] + g[None, :, :]


def kz_branch(k, q):
    """Normal wavenumber of each order, kz = sqrt(k^2 - |q|^2), outgoing/decaying branch.

    Parameters
    ----------
    k : array (W,) — wavenumber in the medium [1/m]; complex allowed for lossy media
        (Im k >= 0)
    q : array (W, N, 2) — in-plane wavevectors of the orders [1/m] (real)

    Returns
    -------
    complex array (W, N) — kz [1/m] with Im kz >= 0 and kz > 0 when real.

    Notes
    -----
    The branch is chosen on values (principal root, negated where its imaginary part
    is negative), so the derivative is that of the selected root. Exactly on a
    Rayleigh anomaly (k^2 = |q|^2 to round-off) the radicand is replaced by
    ``KZ_FLOOR**2 |k|^2``, so |kz| >= 1e-8 |k| and 1/kz stays finite; the derivative
    w.r.t. that order's radicand is then zero.

    References
    ----------
    docs/theory.md §5 (branch Im kz >= 0).
    """
    k2 = (k * k)[:, None]
    x = k2 - np.sum(q * q, axis=-1) + 0j
    floor = (KZ_FLOOR * np.abs(np.asarray(getval(k)))) ** 2
    small = np.abs(getval(x)) < floor[:, None]
    x = np.where(small, floor[:, None] + 0j, x)
    root = np.sqrt(x)
    return np.where(np.imag(getval(root)) < 0, -root, root)


def rayleigh_proximity(k, k_par, lattice: Lattice):
    """Relative distance to the nearest Rayleigh anomaly, min_g | |q_g| - k | / k.

    Parameters
    ----------
    k : array (W,) — wavenumber in the medium whose anomalies are sought [1/m] (real part
        used)
    k_par : array (W, 2) — Bloch wavevector [1/m]
    lattice : Lattice — the array's lattice [m]

    Returns
    -------
    float array (W,) — plain (untraced) values; 0 means an order grazes exactly.

    References
    ----------
    docs/theory.md §5 (anomaly condition |k_par + G_mn| = k).
    """
    kv = np.real(np.asarray(getval(k), dtype=complex))
    kp = np.asarray(getval(k_par), dtype=float)
    plain = lattice.plain()
    b1, b2 = plain.reciprocal()
    reach = np.max(kv) + np.max(np.linalg.norm(kp, axis=-1)) + np.linalg.norm(b1) \
        + np.linalg.norm(b2)
    mn = order_indices(plain, reach)
    q = order_wavevectors(plain, kp, mn)
    qn = np.sqrt(np.sum(q**2, axis=-1))
    return np.min(np.abs(qn - kv[:, None]), axis=1) / kv
