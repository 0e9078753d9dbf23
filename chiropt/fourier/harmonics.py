"""The truncated set of lattice harmonics of the Fourier modal method.

Owns: which reciprocal-lattice vectors G = m b1 + n b2 are kept for a requested count
(whole shells of equal |G| only, a disc in reciprocal space: the truncation follows the
lattice and is closed under G -> -G and under the lattice's mirror symmetries, which
keeps reciprocity and the mirror (helicity) symmetry of the truncated problem exact), and
the index differences at which Fourier coefficients of the permittivity are needed.
Must not import: solve, multipole, fields, metrics, search, store, report, cli.

Conventions: SI units [1/m]; index pairs (m, n) ordered by |G|, (0, 0) first, as the
diffraction orders of ``chiropt.lattice.order_indices``, so harmonic j of this solver is
diffraction order j of the others. Circular truncation: Li, J. Opt. Soc. Am. A 14, 2758
(1997) discusses truncation shapes; a disc is the common choice for crossed gratings.
"""

from __future__ import annotations

import numpy as onp

from chiropt.errors import InputError
from chiropt.lattice import Lattice, order_indices

MAX_HARMONICS = 2000


def shell_cut(lattice: Lattice, count: int) -> float:
    """|G| cut [1/m] keeping the complete shells whose total is closest to ``count``.

    Parameters
    ----------
    lattice : Lattice [m]
    count : int — requested number of harmonics (>= 1)

    Returns
    -------
    float — g_max with ``order_indices(lattice, g_max)`` the chosen set; the set holds
    whole shells, so its size may differ a little from ``count``.
    """
    if isinstance(count, bool) or not isinstance(count, int | onp.integer) or not (
            1 <= count <= MAX_HARMONICS):
        raise InputError("model.harmonics", f"got {count!r}, allowed an integer in "
                                            f"[1, {MAX_HARMONICS}] or 'auto'")
    plain = lattice.plain()
    b1, b2 = plain.reciprocal()
    unit = float(min(onp.linalg.norm(b1), onp.linalg.norm(b2)))
    mn = order_indices(plain, unit * (2.0 * onp.sqrt(count) + 3.0))
    g = onp.hypot(*(mn[:, :1] * b1 + mn[:, 1:] * b2).T)
    shells = onp.unique(onp.round(g / unit, 9))
    sizes = onp.array([int(onp.sum(onp.round(g / unit, 9) <= s)) for s in shells])
    best = int(onp.argmin(onp.abs(sizes - count) + 1e-9 * sizes))
    upper = shells[best + 1] if best + 1 < len(shells) else shells[best] + 1.0
    return float(0.5 * (shells[best] + upper) * unit)


def harmonic_indices(lattice: Lattice, count: int):
    """Index pairs (M, 2) int of the kept harmonics, (0, 0) first (see :func:`shell_cut`)."""
    return order_indices(lattice, shell_cut(lattice, count))


def difference_table(mn):
    """Index differences of all harmonic pairs.

    Returns (dmn, inverse): ``dmn`` (D, 2) the distinct differences mn_i - mn_j, and
    ``inverse`` (M, M) int with ``dmn[inverse[i, j]] = mn[i] - mn[j]``: the Toeplitz
    matrix of a periodic function f is ``f_hat[inverse]`` (Moharam et al., J. Opt. Soc.
    Am. A 12, 1068 (1995), eq. 4: [[f]]_ij = f_hat(G_i - G_j)).
    """
    diff = (mn[:, None, :] - mn[None, :, :]).reshape(-1, 2)
    dmn, inverse = onp.unique(diff, axis=0, return_inverse=True)
    return dmn, inverse.reshape(len(mn), len(mn))
