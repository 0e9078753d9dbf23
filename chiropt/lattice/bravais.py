"""Two-dimensional Bravais lattices in the xy plane.

Owns: the ``Lattice`` record (in-plane lattice vectors, cell area, reciprocal vectors)
and its constructors. Lengths are in metres (SI); the vectors may be autograd-traced
values, so periods and angles can be design variables.
Must not import: store, report, cli, search (physics never imports them), nor
other lattice modules.

Conventions: lattice points R = n1 a1 + n2 a2; reciprocal vectors b_i with
b_i . a_j = 2 pi delta_ij; cell area A = |a1 x a2|.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property, lru_cache

import autograd.numpy as np
import numpy as onp
from autograd.tracer import getval

from chiropt.errors import InputError


def _check_length(key, value):
    v = np.asarray(getval(value), dtype=float)
    if v.ndim != 0 or not np.isfinite(v) or v <= 0:
        raise InputError(key, f"must be a positive finite length in metres; got {v!r}")


def _as_vector(key, value):
    """Return ``value`` as a length-2 array (keeping autograd boxes as they are)."""
    plain = np.asarray(getval(value))
    if plain.shape != (2,) or not np.all(np.isfinite(plain)) or np.iscomplexobj(plain):
        raise InputError(key, f"must be a real finite vector of length 2 [m]; got {plain!r}")
    if isinstance(value, list | tuple):
        return np.array([value[0], value[1]])
    return value


@dataclass(frozen=True, eq=False)
class Lattice:
    """A 2D Bravais lattice in the plane z = const.

    Parameters
    ----------
    a1 : array (2,) — first lattice vector [m]
    a2 : array (2,) — second lattice vector [m]

    Either vector may be an autograd-traced array. The cell must be non-degenerate.
    ``length`` and ``shape`` (set by the square and hexagonal constructors): the lattice is
    ``a_i = length * shape[i]`` with a plain shape, so a kernel can follow one direction
    (the length) instead of four vector components.
    """

    a1: object
    a2: object
    length: object = None
    shape: tuple | None = None

    def __post_init__(self):
        object.__setattr__(self, "a1", _as_vector("lattice.a1", self.a1))
        object.__setattr__(self, "a2", _as_vector("lattice.a2", self.a2))
        a1, a2 = np.asarray(getval(self.a1)), np.asarray(getval(self.a2))
        cross = a1[0] * a2[1] - a1[1] * a2[0]
        scale = np.linalg.norm(a1) * np.linalg.norm(a2)
        if not scale > 0 or abs(cross) <= 1e-9 * scale:
            raise InputError(
                "lattice",
                f"lattice vectors a1={a1!r}, a2={a2!r} [m] are (nearly) parallel or zero; "
                "they must span a cell of non-zero area",
            )

    # -- constructors ----------------------------------------------------------------
    @classmethod
    def square(cls, period):
        """Square lattice, a1 = (a, 0), a2 = (0, a).

        Parameters
        ----------
        period : float — lattice constant a [m]
        """
        _check_length("lattice.period", period)
        return cls.of_shape(period, ((1.0, 0.0), (0.0, 1.0)))

    @classmethod
    def rectangular(cls, px, py):
        """Rectangular lattice, a1 = (px, 0), a2 = (0, py).

        Parameters
        ----------
        px : float — period along x [m]
        py : float — period along y [m]
        """
        _check_length("lattice.period_x", px)
        _check_length("lattice.period_y", py)
        return cls(np.stack([px, 0.0 * px]), np.stack([0.0 * py, py]))

    @classmethod
    def hexagonal(cls, period):
        """Hexagonal lattice, a1 = (a, 0), a2 = (a/2, a sqrt(3)/2).

        Parameters
        ----------
        period : float — nearest-neighbour distance a [m]
        """
        _check_length("lattice.period", period)
        return cls.of_shape(period, ((1.0, 0.0), (0.5, 0.5 * float(onp.sqrt(3.0)))))

    @classmethod
    def of_shape(cls, length, shape):
        """A lattice of fixed shape, a_i = length * shape[i] (shape plain, length [m] may be
        traced): its area, reciprocal vectors and order vectors are then plain constants
        times powers of the length, one traced operation each."""
        u1, u2 = onp.asarray(shape[0], float), onp.asarray(shape[1], float)
        return cls(length * u1, length * u2, length=length,
                   shape=(tuple(u1.tolist()), tuple(u2.tolist())))

    @classmethod
    def oblique(cls, a, b, angle_rad):
        """Oblique lattice, a1 = (a, 0), a2 = b (cos angle, sin angle).

        Parameters
        ----------
        a : float — length of a1 [m]
        b : float — length of a2 [m]
        angle_rad : float — angle from a1 to a2, in (0, pi) [rad]
        """
        _check_length("lattice.a", a)
        _check_length("lattice.b", b)
        ang = float(np.asarray(getval(angle_rad)))
        if not (0.0 < ang < np.pi):
            raise InputError("lattice.angle", f"must lie in (0, pi) rad; got {ang!r}")
        return cls(np.stack([a, 0.0 * a]),
                   np.stack([b * np.cos(angle_rad), b * np.sin(angle_rad)]))

    # -- derived quantities ------------------------------------------------------------
    @cached_property
    def _unit(self):
        """For a lattice of fixed shape: the cross product of the shape vectors and the
        reciprocal vectors of the lattice of unit length, (c, (2, 2)) plain."""
        u1, u2 = onp.asarray(self.shape[0]), onp.asarray(self.shape[1])
        c = float(u1[0] * u2[1] - u1[1] * u2[0])
        return c, (2.0 * onp.pi / c) * onp.array([[u2[1], -u2[0]], [-u1[1], u1[0]]])

    @cached_property
    def _cross(self):
        if self.length is not None:
            return self._unit[0] * self.length ** 2
        return self.a1[0] * self.a2[1] - self.a1[1] * self.a2[0]

    @cached_property
    def area(self):
        """Unit-cell area A = |a1 x a2| [m^2] (traced if the vectors are)."""
        return np.abs(self._cross)

    def reciprocal(self):
        """Reciprocal vectors (b1, b2) with b_i . a_j = 2 pi delta_ij [1/m].

        Returns
        -------
        (b1, b2) : two arrays (2,) [1/m], traced if the lattice vectors are.
        """
        return self._reciprocal

    def order_vectors(self, mn):
        """Reciprocal lattice vectors g = m b1 + n b2, (N, 2) [1/m], of integer pairs ``mn``
        (N, 2); traced if the lattice is."""
        mn = onp.asarray(mn, dtype=float)
        if self.length is not None:
            return (mn @ self._unit[1]) / self.length
        b1, b2 = self.reciprocal()
        return mn[:, 0:1] * b1[None, :] + mn[:, 1:2] * b2[None, :]

    @cached_property
    def _reciprocal(self):
        if self.length is not None:
            inv = 1.0 / self.length
            return inv * self._unit[1][0], inv * self._unit[1][1]
        s = 2.0 * np.pi / self._cross
        b1 = s * np.stack([self.a2[1], -self.a2[0]])
        b2 = s * np.stack([-self.a1[1], self.a1[0]])
        return b1, b2

    def points(self, nm):
        """Lattice points R = n1 a1 + n2 a2 [m] for integer pairs ``nm`` (N, 2)."""
        nm = np.asarray(nm, dtype=float)
        return nm[:, 0:1] * self.a1[None, :] + nm[:, 1:2] * self.a2[None, :]

    def plain(self):
        """The same lattice with untraced (plain float) vectors (cached)."""
        return self._plain

    @cached_property
    def _plain(self):
        return Lattice(np.array(getval(self.a1), dtype=float),
                       np.array(getval(self.a2), dtype=float))


def integer_pairs_within(basis1, basis2, dual1, dual2, radius):
    """All integer pairs (m, n) with |m basis1 + n basis2| <= radius (plain values).

    ``dual_i`` must satisfy dual_i . basis_j = 2 pi delta_ij; then |m| <= radius |dual1| / 2 pi
    bounds the search exactly. Returns a read-only int array (N, 2), unsorted.

    The result is a pure function of the seven numbers, so it is memoised on their exact
    values (a search evaluates the same lattice several times per design; a changed
    design changes a key and is computed afresh).
    """
    parts = [onp.ravel(onp.asarray(getval(v), float)) for v in (basis1, basis2, dual1, dual2)]
    key = tuple(float(v) for v in onp.concatenate([*parts, [float(getval(radius))]]))
    return _pairs_within(key)


@lru_cache(maxsize=64)
def _pairs_within(key: tuple[float, ...]) -> onp.ndarray:
    out = pairs_within_plain(onp.array(key[0:2]), onp.array(key[2:4]), onp.array(key[4:6]),
                             onp.array(key[6:8]), key[8])
    out.setflags(write=False)
    return out


def pairs_within_plain(basis1, basis2, dual1, dual2, radius: float) -> onp.ndarray:
    """:func:`integer_pairs_within` on plain float arrays, not memoised (for callers that
    memoise their own result)."""
    m_max = int(onp.floor(radius * onp.linalg.norm(dual1) / (2 * onp.pi) + 1e-9))
    n_max = int(onp.floor(radius * onp.linalg.norm(dual2) / (2 * onp.pi) + 1e-9))
    m, n = onp.meshgrid(onp.arange(-m_max, m_max + 1), onp.arange(-n_max, n_max + 1),
                        indexing="ij")
    mn = onp.stack([m.ravel(), n.ravel()], axis=1)
    vec = mn[:, 0:1] * basis1[None, :] + mn[:, 1:2] * basis2[None, :]
    keep = onp.sqrt(onp.sum(vec**2, axis=1)) <= radius * (1 + 1e-12)
    return mn[keep]
