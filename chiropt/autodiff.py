"""A faster reverse rule for basic indexing of autograd arrays (exact, registered on import).

Owns: the vector-Jacobian product of ``ArrayBox.__getitem__``. autograd scatters the
cotangent of every indexing operation with ``numpy.add.at``, which is needed when an
integer-array index repeats an element but costs ~30 us per call even on small arrays;
the forward model slices large (wavelength, order, mode) arrays a few hundred times per
evaluation, and each reverse pass paid for it again. For basic indices (integers, slices,
``None``, ``Ellipsis``: no element can repeat) the scatter is an in-place ``+=`` on the
view, the same sum exactly. Advanced indices keep autograd's rule. Second derivatives (the
reverse-of-reverse of ``chiropt.sensitivity``) use the same rule as autograd's: the
derivative of the scatter is the gather ``g[idx]``.
Must not import: any chiropt module (imported for its side effect by the modules that run
reverse passes: ``chiropt.sensitivity``, ``chiropt.goals.objectives``).

References
----------
autograd ``numpy/numpy_vjps.py`` (``untake``, the rule replaced here for basic indices);
NumPy manual, "Indexing on ndarrays" (basic versus advanced indexing).
"""

from __future__ import annotations

import numpy as onp
from autograd.core import SparseObject, vspace
from autograd.extend import defjvp, defvjp, primitive
from autograd.numpy.numpy_boxes import ArrayBox
from autograd.numpy.numpy_vjps import untake
from autograd.tracer import getval


def _is_basic(idx) -> bool:
    items = idx if isinstance(idx, tuple) else (idx,)
    return all(i is None or i is Ellipsis or isinstance(i, slice)
               or (isinstance(i, (int, onp.integer)) and not isinstance(i, bool))
               for i in items)


@primitive
def untake_basic(x, idx, vs):
    """The cotangent ``x`` of ``A[idx]`` (basic ``idx``) scattered into A's space."""
    def mut_add(A):
        A[idx] += x
        return A

    return SparseObject(vs, mut_add)


defvjp(untake_basic, lambda ans, x, idx, _: lambda g: g[idx])
defjvp(untake_basic, "same")


def _getitem_vjp(ans, A, idx):
    scatter = untake_basic if _is_basic(getval(idx)) else untake
    return lambda g: scatter(g, idx, vspace(A))


defvjp(ArrayBox.__getitem__, _getitem_vjp)
