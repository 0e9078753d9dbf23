"""Rotations that map a 2D Bravais lattice onto itself, and the orbits of its orders.

Owns: ``rotation_order`` / ``shape_rotation`` (the largest n = 2, 3, 4 or 6 such that
the rotation by 2 pi / n about z maps the lattice onto itself for every value of the
lattice's parameters, and its integer action on orders and lattice points),
``order_orbits`` and ``orbit_weights`` (one representative per orbit of that rotation
among a set of orders or lattice points, with the check that every orbit is complete).
Must not import: store, report, cli, search, particles, stack.

Why: at normal incidence (Bloch vector zero) the in-plane wavevector of order G is G
itself, and any quantity of an order that depends on |G| only (kz, the stack's
reflection coefficients) is the same on the whole orbit {G, R G, ..., R^(n-1) G}; sums
over the orders of such quantities times spherical-wave factors can then run over one
representative per orbit with the azimuthal selection rule of the rotation
(``chiropt.multipole.reflected``).

Conventions: orders are integer pairs (m, n) with G = m b1 + n b2 (``chiropt.lattice
.orders``); a rotation acts on them as an integer matrix M with (m', n') = M (m, n).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as onp

from chiropt.lattice.bravais import Lattice

__all__ = ["orbit_weights", "order_orbits", "rotation_order", "shape_rotation"]


def rotation_order(lattice: Lattice) -> tuple[int, onp.ndarray]:
    """(n, M): the rotation by 2 pi / n maps the lattice onto itself, M (2, 2) int its
    action on order indices (m, n).

    A lattice of fixed shape (``Lattice.square``, ``Lattice.hexagonal``: only its length
    varies, so a derivative along it keeps the symmetry) gets the largest n in (6, 4, 3,
    2) its shape allows; any other lattice n = 2 (G -> -G maps every Bravais lattice onto
    itself, whatever its parameters). n = 1 never occurs.
    """
    n, M, _ = shape_rotation(lattice.shape)
    return n, M


def shape_rotation(shape) -> tuple[int, onp.ndarray, onp.ndarray]:
    """(n, M, N) of a lattice shape a_i = shape[i] (None: a lattice of free vectors, n =
    2): M acts on order indices (m, n) of G = m b1 + n b2, N on lattice points (n1, n2)
    of R = n1 a1 + n2 a2 (both integer (2, 2))."""
    if shape is None:
        return 2, _MINUS_ONE, _MINUS_ONE
    return _shape_rotation(tuple(float(v) for v in onp.ravel(shape)))


_MINUS_ONE = -onp.eye(2, dtype=int)
_MINUS_ONE.setflags(write=False)


def _integer_action(basis: onp.ndarray, rot: onp.ndarray) -> onp.ndarray | None:
    """M with rot v_j = sum_i M[i, j] v_i for the rows v_i of ``basis``, if integer."""
    coords = onp.linalg.solve(basis.T, rot @ basis.T)
    M = onp.round(coords)
    if onp.max(onp.abs(coords - M)) >= 1e-9:
        return None
    out = M.astype(int)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=32)
def _shape_rotation(shape: tuple[float, ...]) -> tuple[int, onp.ndarray, onp.ndarray]:
    """:func:`shape_rotation` of a plain shape (flattened a1, a2)."""
    a = onp.array(shape, float).reshape(2, 2)                  # rows a1, a2
    b = 2 * onp.pi * onp.linalg.inv(a).T                       # rows b1, b2: b_i . a_j
    for n in (6, 4, 3, 2):
        c, s = math.cos(2 * math.pi / n), math.sin(2 * math.pi / n)
        rot = onp.array([[c, -s], [s, c]])
        M, N = _integer_action(b, rot), _integer_action(a, rot)
        if M is not None and N is not None:
            return n, M, N
    raise AssertionError("every lattice is symmetric under G -> -G")


def orbit_weights(pairs, n: int, M) -> tuple[onp.ndarray, onp.ndarray] | None:
    """(pairs', weights): one pair per orbit of the rotation M of order n among integer
    ``pairs`` (G, 2) — orders or lattice points, (0, 0) kept as its own orbit — and the
    orbit sizes (1 for (0, 0), n for the others); None when an orbit is incomplete.
    A sum over ``pairs`` of f(pair) with f(R p) = e^(i M_z alpha) f(p) is then
    n [M_z = 0 mod n] sum over pairs' of the weighted terms (:func:`order_orbits`)."""
    pairs = onp.asarray(pairs)
    zero = onp.all(pairs == 0, axis=1)
    rest = pairs[~zero]
    reps = order_orbits(rest, n, M)
    if reps is None:
        return None
    out = onp.concatenate([pairs[zero], rest[reps]])
    weights = onp.concatenate([onp.ones(int(zero.sum())), onp.full(len(reps), float(n))])
    return out, weights


def order_orbits(mn, n: int, M) -> onp.ndarray | None:
    """Positions of one representative per orbit of the rotation among the orders ``mn``.

    Parameters
    ----------
    mn : int array (G, 2) — distinct order indices, none of them (0, 0)
    n, M : the rotation of :func:`rotation_order`

    Returns
    -------
    int array of positions into ``mn`` (the first member of each orbit in the order
    given, so a list sorted by |G| keeps its order; read-only), or None when some orbit
    is not complete in ``mn`` (a set cut across an orbit; the caller then sums every
    order). Every orbit of a nonzero G has exactly n members (a rotation fixes only
    G = 0). Memoised on the exact integers: a search asks for the same sets at every
    evaluation of one lattice shape and cut.
    """
    mn = onp.ascontiguousarray(mn, dtype=onp.int64)
    M = onp.ascontiguousarray(M, dtype=onp.int64)
    return _orbits(int(n), M.tobytes(), mn.shape[0], mn.tobytes())


@lru_cache(maxsize=128)
def _orbits(n: int, M: bytes, count: int, pairs: bytes) -> onp.ndarray | None:
    mn = onp.frombuffer(pairs, dtype=onp.int64).reshape(count, 2)
    M = onp.frombuffer(M, dtype=onp.int64).reshape(2, 2)
    if mn.size == 0:
        out = onp.zeros(0, dtype=int)
        out.setflags(write=False)
        return out
    if onp.any(onp.all(mn == 0, axis=1)):
        raise ValueError("order_orbits: the (0, 0) order is its own orbit; leave it out")
    span = int(onp.max(onp.abs(mn))) * 2 + 1
    code = (mn[:, 0] + span) * (4 * span) + (mn[:, 1] + span)
    images = [mn]
    for _ in range(n - 1):
        images.append(images[-1] @ M.T)
    codes = onp.stack([(im[:, 0] + span) * (4 * span) + (im[:, 1] + span) for im in images])
    order = onp.argsort(code)
    where = onp.searchsorted(code[order], codes)
    where = onp.minimum(where, code.size - 1)
    found = code[order][where] == codes
    if not found.all():
        return None
    pos = order[where]                       # (n, G): position of each image in mn
    first = onp.min(pos, axis=0)             # the orbit's earliest member
    out = onp.flatnonzero(first == onp.arange(mn.shape[0]))
    out.setflags(write=False)
    return out
