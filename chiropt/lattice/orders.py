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
    """
    g = float(onp.asarray(getval(g_max)))
    if not onp.isfinite(g) or g < 0:
        raise InputError("g_max", f"must be a finite non-negative wavenumber [1/m]; got {g!r}")
    plain = lattice.plain()
    return _sorted_orders(tuple(float(v) for v in onp.concatenate([plain.a1, plain.a2])), g)


@lru_cache(maxsize=64)
def _sorted_orders(a12: tuple[float, ...], g: float) -> onp.ndarray:
    """The sorted pairs of :func:`order_indices` for lattice vectors a1 = a12[:2],
    a2 = a12[2:] [m], memoised on the exact values (read-only result)."""
    plain = Lattice(onp.array(a12[:2]), onp.array(a12[2:]))
    b1, b2 = (onp.asarray(b, float) for b in plain.reciprocal())
    mn = pairs_within_plain(b1, b2, plain.a1, plain.a2, g)
    vec = mn[:, 0:1] * b1[None, :] + mn[:, 1:2] * b2[None, :]
    unit = min(onp.linalg.norm(b1), onp.linalg.norm(b2))
    length = onp.round(onp.sqrt(onp.sum(vec**2, axis=1)) / unit, 9)
    order = onp.lexsort((mn[:, 1], mn[:, 0], length))
    out = mn[order].astype(int)
    out.setflags(write=False)
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
