"""Jacobian rows in one reverse pass: the cotangents of every output row stacked.

Owns: ``stacked_jacobian`` — the value (R,) and the exact Jacobian (R, n) of a real vector
function, from one traced forward pass and one walk of its tape in which every node's
cotangent carries all R rows at once, as an array (R, *shape of the node).
Must not import: any chiropt module but ``chiropt.autodiff`` (whose rules it mirrors).

Why: a goal's evaluation asks for a few rows (objectives and physics constraints) of a tape
of a few hundred operations, most of them small (slices, products, sums of arrays of a few
hundred elements). autograd's reverse mode walks the tape once per row, and its
bookkeeping per node (the cotangent's vector space, the sum over broadcast axes, the
scatter of a slice) costs more than the arithmetic. Walking once with the rows stacked
pays the bookkeeping once; numpy does the rows in one call per operation.

How: the nodes of the tape record their operation and its plain arguments. The common
elementwise, shape and indexing operations have rules here that apply autograd's own
vector-Jacobian products (``autograd/numpy/numpy_vjps.py``, with ``chiropt.autodiff``'s
sums over broadcast axes and in-place scatter of basic indices) to the stacked cotangent,
the leading axis being the row: the same products in the same order, so the same numbers
up to the order of additions inside numpy's sums. Every other operation (matrix products,
einsum, the model's coarse primitives, whose costs grow with the rows anyway) runs its
autograd rule once per row on that row's cotangent.

References
----------
Griewank & Walther, *Evaluating Derivatives*, 2nd ed., SIAM (2008), §3.2 and §5.1 (reverse
mode; vector mode with several adjoint directions at once). autograd
``numpy/numpy_vjps.py`` (the rules mirrored here).
"""

from __future__ import annotations

import numpy as onp
import autograd.numpy as anp
import autograd.numpy.numpy_wrapper as _wrapper
from autograd.core import VJPNode, primitive_vjps, vspace
from autograd.numpy.numpy_boxes import ArrayBox
from autograd.tracer import notrace_primitives, toposort, trace

import chiropt.autodiff as _autodiff   # noqa: F401  (the rules mirrored here are its)

__all__ = ["stacked_jacobian"]

# the primitive behind autograd.numpy.where (which wraps it to keep Python types)
_np_where = getattr(anp, "_original_where", _wrapper.where)


class _RecordingNode(VJPNode):
    """A tape node that keeps its operation and plain arguments; autograd's VJP closure
    is made only for operations without a stacked rule."""

    __slots__ = ["fun", "args", "kwargs", "argnums", "value"]

    def __init__(self, value, fun, args, kwargs, parent_argnums, parents):
        self.parents = parents
        self.fun, self.args, self.kwargs = fun, args, kwargs
        self.argnums, self.value = parent_argnums, value
        self.vjp = None if fun in _RULES else self.autograd_vjp()

    def autograd_vjp(self):
        """autograd's VJP closure of this node's operation (its error if there is none)."""
        try:
            vjpmaker = primitive_vjps[self.fun]
        except KeyError:
            raise NotImplementedError(
                f"VJP of {getattr(self.fun, '__name__', self.fun)} wrt argnums "
                f"{self.argnums} not defined") from None
        return vjpmaker(self.argnums, self.value, self.args, self.kwargs)

    def initialize_root(self):
        self.parents = []
        self.vjp = lambda g: ()
        self.fun = None


# the operations autograd does not record (comparisons, zeros_like, ...) are not recorded
# on this node type either
notrace_primitives[_RecordingNode] = notrace_primitives[VJPNode]


def _iscomplex(x) -> bool:
    return x.dtype.kind == "c" if type(x) is onp.ndarray else onp.iscomplexobj(x)


def _unbroadcast(B, target):
    """Stacked cotangent B (R, *out) summed down to ``target``'s shape (autograd's and
    ``chiropt.autodiff.unbroadcast``'s rule, the row axis kept)."""
    shape = onp.shape(target)
    bs = B.shape[1:]
    if bs != shape:
        extra = len(bs) - len(shape)
        if extra > 0:
            B = onp.sum(B, axis=tuple(range(1, 1 + extra)))
            bs = B.shape[1:]
        axes = tuple([i + 1 for i, size in enumerate(shape) if size == 1 and bs[i] != 1])
        if axes:
            B = onp.sum(B, axis=axes, keepdims=True)
    if not _iscomplex(target) and onp.iscomplexobj(B):
        B = onp.real(B)
    return B


def _match_complex(target, B):
    """autograd's ``match_complex`` (the cotangent of ``real``/``imag``)."""
    if onp.iscomplexobj(B) and not _iscomplex(target):
        return onp.real(B)
    if not onp.iscomplexobj(B) and _iscomplex(target):
        return B + 0j
    return B


def _replace_zero(x, val):
    return onp.where(x, x, val)


class _Scatter:
    """The stacked cotangent of a basic slice (or of a gather of distinct positions): zero
    but for ``G`` at ``index`` of an array (R, *shape); made dense only where it is
    accumulated (autograd's sparse cotangent of ``getitem``, with the row axis kept)."""

    __slots__ = ("shape", "dtype", "index", "G")

    def __init__(self, shape, dtype, index, G):
        self.shape, self.dtype, self.index, self.G = shape, dtype, index, G

    def add_into(self, Z):
        Z[self.index] += self.G
        return Z

    def dense(self):
        return self.add_into(onp.zeros(self.shape, self.dtype))


def _distinct_gather(idx) -> bool:
    """Whether ``idx`` is one 1-D integer array of distinct entries among slices (a gather
    whose cotangent is an in-place scatter, no index repeated; with no other advanced
    index the gathered axis stays in place, also behind the row axis)."""
    parts = idx if type(idx) is tuple else (idx,)
    arrays = [p for p in parts if type(p) is onp.ndarray]
    if len(arrays) != 1 or arrays[0].ndim != 1 or arrays[0].dtype.kind not in "iu":
        return False
    if not all(p is Ellipsis or type(p) is slice for p in parts if type(p) is not onp.ndarray):
        return False
    a = arrays[0]
    return onp.unique(a).size == a.size and (a.size == 0 or a.min() >= 0)


def _getitem(G, node, i):
    A, idx = node.args[0], node.args[1]
    if not _autodiff._is_basic(idx) and not _distinct_gather(idx):
        return NotImplemented                       # advanced: autograd's scatter per row
    return _Scatter((G.shape[0],) + onp.shape(A), complex if _iscomplex(A) else float,
                    (slice(None),) + (idx if type(idx) is tuple else (idx,)), G)


def _where(G, node, i):
    c, x = node.args[0], node.args[i]
    if onp.shape(x) != G.shape[1:]:
        return NotImplemented
    zeros = onp.zeros(G.shape)
    return onp.where(c, G, zeros) if i == 1 else onp.where(c, zeros, G)


def _reshape(G, node, i):
    order = node.kwargs.get("order") or "C"
    return onp.reshape(G, (G.shape[0],) + onp.shape(node.args[0]), order=order)


def _transpose(G, node, i):
    axes = node.args[1] if len(node.args) > 1 else node.kwargs.get("axes")
    nd = G.ndim - 1
    inv = range(nd - 1, -1, -1) if axes is None else onp.argsort(axes)
    return onp.transpose(G, (0,) + tuple(int(a) + 1 for a in inv))


def _repeat(G, node):
    """autograd's ``repeat_to_match_shape`` with the row axis kept (sum and mean)."""
    x = node.args[0]
    shape = onp.shape(x)
    if shape == ():
        return G, 1
    axis = node.args[1] if len(node.args) > 1 else node.kwargs.get("axis")
    axis = list(axis) if isinstance(axis, tuple) else axis
    new_shape = onp.array(shape)
    new_shape[axis] = 1
    reps = onp.prod(onp.array(shape)[axis])
    out = onp.reshape(G, (G.shape[0],) + tuple(new_shape)) + onp.zeros(shape,
                                                                         anp.result_type(x))
    return out, reps


def _sum(G, node, i):
    return _repeat(G, node)[0]


def _mean(G, node, i):
    out, reps = _repeat(G, node)
    return out / reps


def _concatenate(G, node, i):
    axis, args = node.args[0], node.args[1:]
    sizes = [onp.shape(a)[axis] for a in args[:i]]
    start = sum(sizes[:-1])
    idxs = [slice(None)] * G.ndim
    idxs[axis + 1 if axis >= 0 else axis] = slice(start, start + sizes[-1])
    return G[tuple(idxs)]


def _from_scalar_or_array(G, node, i):
    ndmin = node.args[1].get("ndmin", 0)
    nd = onp.ndim(node.args[2])
    if ndmin > nd:
        return onp.squeeze(G, axis=tuple(range(1, 1 + ndmin - nd)))
    return G


def _matmul(G, node, i):
    A, B = node.args[0], node.args[1]
    if onp.ndim(A) < 2 or onp.ndim(B) < 2:
        return NotImplemented                     # vector operands: autograd's rule per row
    if i == 0:
        return _unbroadcast(onp.matmul(G, onp.swapaxes(B, -2, -1)), A)
    return _unbroadcast(onp.matmul(onp.swapaxes(A, -2, -1), G), B)


def _binary(fx, fy):
    def rule(G, node, i):
        x, y = node.args[0], node.args[1]
        return _unbroadcast(fx(G, x, y, node.value) if i == 0 else fy(G, x, y, node.value),
                            node.args[i])
    return rule


def _unary(f):
    return lambda G, node, i: f(G, node.args[0], node.value)


_RULES = {
    anp.add: _binary(lambda G, x, y, a: G, lambda G, x, y, a: G),
    anp.subtract: _binary(lambda G, x, y, a: G, lambda G, x, y, a: -G),
    anp.multiply: _binary(lambda G, x, y, a: y * G, lambda G, x, y, a: x * G),
    anp.divide: _binary(lambda G, x, y, a: G / y, lambda G, x, y, a: -G * x / y**2),
    anp.true_divide: _binary(lambda G, x, y, a: G / y, lambda G, x, y, a: -G * x / y**2),
    anp.power: _binary(lambda G, x, y, a: G * y * x ** onp.where(y, y - 1, 1.0),
                       lambda G, x, y, a: G * onp.log(_replace_zero(x, 1.0)) * a),
    anp.negative: _unary(lambda G, x, a: -G),
    anp.exp: _unary(lambda G, x, a: a * G),
    anp.sqrt: _unary(lambda G, x, a: G * 0.5 * x**-0.5),
    anp.real: _unary(lambda G, x, a: _match_complex(x, G)),
    anp.imag: _unary(lambda G, x, a: _match_complex(x, -1j * G)),
    _np_where: _where,
    anp.matmul: _matmul,
    anp.reshape: _reshape,
    anp.transpose: _transpose,
    anp.sum: _sum,
    _wrapper._primitive_mean: _mean,
    _wrapper.concatenate_args: _concatenate,
    _wrapper._array_from_scalar_or_array: _from_scalar_or_array,
    ArrayBox.__getitem__: _getitem,
}


class _Rows(list):
    """Row cotangents that do not stack into one array (containers: a primitive's tuple or
    list argument), one per row."""


def _dense(g):
    """A row cotangent with autograd's sparse scatter objects made dense."""
    if type(g) is onp.ndarray:
        return g
    if hasattr(g, "mut_add"):
        return g.mut_add(g.vs.zeros())
    return g


def _stacked(rows):
    """The row cotangents of one parent as an array (R, ...) when they are arrays or
    numbers of one shape, else as :class:`_Rows`."""
    rows = [_dense(g) for g in rows]
    if all(isinstance(g, onp.ndarray | float | complex) for g in rows) and \
            len({onp.shape(g) for g in rows}) == 1:
        return onp.stack(rows)
    return _Rows(rows)


def _accumulate(prev, B):
    """``(sum, mutable)`` of a parent's cotangent so far (None or such a pair) and a new
    one, as autograd's ``add_outgrads``: a sum made here is owned by the walk (mutable) and
    takes later cotangents in place; one handed over by a rule (which may share it with
    other parents) is copied before anything is added to it. The same additions in the
    same order as a new array each time."""
    scatter = type(B) is _Scatter
    if prev is None:
        return (B.dense(), True) if scatter else (B, False)
    prev, mutable = prev
    if type(prev) is _Rows or type(B) is _Rows:
        B = B.dense() if scatter else B
        return _Rows(vspace(a).add(a, b) for a, b in zip(prev, B, strict=True)), False
    dtype = onp.result_type(prev, B.dtype if scatter else B)
    fits = type(prev) is onp.ndarray and prev.dtype == dtype and \
        prev.shape == (B.shape if scatter else onp.shape(B))
    if scatter:
        return B.add_into(prev if mutable and fits else onp.array(prev, dtype=dtype)), True
    if mutable and fits:
        prev += B
        return prev, True
    return prev + B, True


def _parent_cotangents(node, G):
    """Stacked cotangents of the node's parents, in the order of ``node.parents``."""
    rule = None if type(G) is _Rows else _RULES.get(node.fun)
    if rule is not None:
        out = [rule(G, node, i) for i in node.argnums]
        if all(o is not NotImplemented for o in out):
            return out
    if node.vjp is None:
        node.vjp = node.autograd_vjp()
    rows = [tuple(node.vjp(g)) for g in G]
    return [_stacked([row[p] for row in rows]) for p in range(len(node.parents))]


def stacked_jacobian(fun, x):
    """Value (R,) and Jacobian (R, n) of a real vector function ``fun`` at ``x`` (n,).

    One traced forward pass and one reverse walk with the R unit cotangents stacked
    (module docstring); the rows are autograd's reverse-mode gradients
    (``chiropt.autodiff.value_and_jacobian`` gives them one pass per row), equal up to the
    order of additions inside numpy's sums.
    """
    x = onp.asarray(x, float)
    end_value, end_node = trace(_RecordingNode.new_root(), fun, x)
    value = onp.asarray(end_value, float)
    R = value.size
    if end_node is None:
        return value.reshape(-1), onp.zeros((R, x.size))
    outgrads = {end_node: (onp.eye(R).reshape((R,) + value.shape), False)}
    G = None
    for node in toposort(end_node):
        G = outgrads.pop(node)[0]
        for parent, B in zip(node.parents, _parent_cotangents(node, G), strict=True):
            outgrads[parent] = _accumulate(outgrads.get(parent), B)
    return value.reshape(-1), onp.reshape(onp.real(G), (R, x.size))
