"""Faster reverse rules for indexing and broadcasting in autograd (exact, set on import).

Owns: the vector-Jacobian product of ``ArrayBox.__getitem__`` and the sum over broadcast
axes that every elementwise rule applies to its cotangent (``unbroadcast``).

Indexing: the vector-Jacobian product of ``ArrayBox.__getitem__``. autograd scatters the
cotangent of every indexing operation with ``numpy.add.at``, which is needed when an
integer-array index repeats an element but costs ~30 us per call even on small arrays;
the forward model slices large (wavelength, order, mode) arrays a few hundred times per
evaluation, and each reverse pass paid for it again. For basic indices (integers, slices,
``None``, ``Ellipsis``: no element can repeat) the scatter is an in-place ``+=`` on the
view, the same sum exactly. Advanced indices keep autograd's rule. Second derivatives (the
reverse-of-reverse of ``chiropt.sensitivity``) use the same rule as autograd's: the
derivative of the scatter is the gather ``g[idx]``.
Broadcasting: autograd's ``unbroadcast`` sums the cotangent once per removed axis and
once more for every axis of length 1 in the operand, even where the cotangent's axis has
length 1 as well (a no-op sum, ~10 us each: the forward model keeps a wavelength axis of
length 1 in a single-wavelength goal, so nearly every rule paid it). The replacement sums
all removed axes in one call and only the axes that were really broadcast: the same sum
up to the order of floating-point additions (round-off).
Plain copies: ``untraced`` gives a record (dataclass, dict, list) with every traced value
replaced by its plain value, so that quantities no derivative is asked of are computed
without recording operations on the tape.
Jacobian rows: ``value_and_jacobian`` is autograd's reverse mode for a vector function,
one reverse pass per output row as ``make_vjp`` makes them, with the tape's topological
order computed once for all rows instead of once per pass (the reference for
``chiropt.stacked_reverse``, which walks once with the rows stacked).
Forward stash: ``ForwardStash`` hands what a coarse primitive's forward pass made (factors,
directional derivatives) to its vector-Jacobian-product maker, which autograd calls right
after the forward pass with the same arguments, so nothing is computed twice.
Must not import: any chiropt module (imported for its side effect by the modules that run
reverse passes: ``chiropt.sensitivity``, ``chiropt.goals.objectives``).

References
----------
autograd ``numpy/numpy_vjps.py`` (``untake``, the rule replaced here for basic indices);
NumPy manual, "Indexing on ndarrays" (basic versus advanced indexing).
"""

from __future__ import annotations

import dataclasses
import threading

import numpy as onp
from autograd.core import SparseObject, VJPNode, add_outgrads, vspace
from autograd.extend import defjvp, defvjp, primitive
from autograd.numpy.numpy_boxes import ArrayBox
import autograd.numpy as anp
import autograd.numpy.numpy_vjps as _numpy_vjps
from autograd.numpy.numpy_vjps import untake
from autograd.tracer import getval, isbox, toposort, trace


_BASIC = (slice, int, type(None), type(Ellipsis))


class ForwardStash:
    """One slot per thread: the data a primitive's forward pass made for its VJP maker.

    ``put(value, key, data)`` in the forward pass; ``take(value, key)`` in the VJP maker
    returns ``data`` only for the very array the forward pass returned (identity, so a
    stale entry of another call can never be used) and the same ``key`` (e.g. the traced
    argument positions), else None (then the maker recomputes). The slot is emptied on take.
    """

    def __init__(self):
        self._local = threading.local()

    def put(self, value, key, data) -> None:
        self._local.entry = (value, key, data)

    def take(self, value, key):
        entry = getattr(self._local, "entry", None)
        self._local.entry = None
        if entry is not None and entry[0] is value and entry[1] == key:
            return entry[2]
        return None


def _is_basic(idx) -> bool:
    items = idx if type(idx) is tuple else (idx,)
    for i in items:
        if type(i) not in _BASIC and not isinstance(i, onp.integer):
            return False    # arrays, lists, booleans (type bool is not int): advanced
    return True


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


def unbroadcast(x, target_meta, broadcast_idx=0):
    """Sum cotangent ``x`` down to the operand's shape (autograd's rule, fewer sums).

    ``broadcast_idx`` is where the extra axes sit: 0 (leading), -1 (trailing) or the
    position of an einsum ellipsis, as in autograd.
    """
    target_shape, target_ndim, _, target_iscomplex = target_meta
    shape = onp.shape(x)
    if shape != target_shape:
        extra = len(shape) - target_ndim
        if extra > 0:
            start = len(shape) - extra if broadcast_idx < 0 else broadcast_idx
            x = anp.sum(x, axis=tuple(range(start, start + extra)))
            shape = onp.shape(x)
        axes = tuple([i for i, size in enumerate(target_shape) if size == 1 and shape[i] != 1])
        if axes:
            x = anp.sum(x, axis=axes, keepdims=True)
    if not target_iscomplex and onp.iscomplexobj(x):
        x = anp.real(x)
    return x


def unbroadcast_f(target, f):
    """autograd's ``unbroadcast_f`` with the operand's metadata read off the array itself
    (``anp.metadata`` goes through a wrapped function and ``result_type`` for every node
    of the tape; for an ndarray its dtype is that result type)."""
    if type(target) is onp.ndarray:
        dtype = target.dtype
        meta = (target.shape, target.ndim, dtype, dtype.kind == "c")
    else:
        meta = anp.metadata(target)
    return lambda g: unbroadcast(f(g), meta)


AUTOGRAD_UNBROADCAST = _numpy_vjps.unbroadcast   # autograd's own rule (tests compare)
_numpy_vjps.unbroadcast = unbroadcast
_numpy_vjps.unbroadcast_f = unbroadcast_f


def value_and_jacobian(fun, x):
    """Value (R,) and Jacobian (R, n) of a real vector function ``fun`` at ``x`` (n,).

    autograd's reverse mode: one traced forward pass, then for each output row the
    reverse pass of ``autograd.make_vjp`` with the unit cotangent of that row (the same
    rules, the same order of accumulation, so the same numbers), walking the tape in one
    topological order made once for all rows.
    """
    x = onp.asarray(x, float)
    end_value, end_node = trace(VJPNode.new_root(), fun, x)
    value = onp.asarray(end_value, float)
    rows = onp.eye(value.size).reshape((value.size,) + value.shape)
    if end_node is None:
        return value.reshape(-1), onp.zeros((value.size, x.size))
    order = list(toposort(end_node))
    J = onp.empty((value.size, x.size))
    for r, seed in enumerate(rows):
        outgrads = {end_node: (seed, False)}
        for node in order:
            g = outgrads.pop(node)[0]
            for parent, ingrad in zip(node.parents, node.vjp(g), strict=True):
                outgrads[parent] = add_outgrads(outgrads.get(parent), ingrad)
        J[r] = onp.reshape(onp.asarray(g, float), -1)
    return value.reshape(-1), J


def untraced(obj):
    """``obj`` with every autograd box replaced by its plain value, recursively through
    dataclass fields (and the values a record caches beside them, such as
    ``functools.cached_property`` results), dicts, lists and tuples: a new record; arrays
    are not copied."""
    if isbox(obj):
        return getval(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        new = object.__new__(type(obj))
        names = [f.name for f in dataclasses.fields(obj)]
        names += [k for k in getattr(obj, "__dict__", {}) if k not in names]
        for name in names:
            object.__setattr__(new, name, untraced(getattr(obj, name)))
        return new
    if isinstance(obj, dict):
        return {k: untraced(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return type(obj)(untraced(v) for v in obj)
    return obj
