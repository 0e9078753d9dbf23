"""Forward-mode derivatives along a few directions at once, for coarse autograd primitives.

Owns: ``Tangent`` (a value and its derivatives along D directions, ``t`` of shape
(D,) + value shape) and the functions the lattice-sum kernels need on it (``exp``,
``sqrt``, ``real``, ``imag``, ``wofz``, ``einsum``, ``matmul``, ``sum``, ``stack``,
``where``, ``powers``, ``reshape``). Each function
accepts plain numpy arrays too and then does plain numpy, so one kernel serves the value
(no tangents, no tape) and the value with its Jacobian (one pass, all directions).
Must not import: any chiropt module but ``chiropt.lattice.faddeeva``.

Why: autograd records every small operation of a kernel as a node and walks them all in
every reverse pass (one per objective or constraint row). A kernel whose inputs are a
handful of scalars (wavenumber, Bloch vector, lattice vectors, displacements) is cheaper
as one primitive whose Jacobian along those few directions is computed with its value;
its vector-Jacobian product is then a contraction, however many reverse passes follow.

Rules: the chain rule of each operation, applied to every direction at once (standard
forward-mode differentiation, Griewank & Walther, *Evaluating Derivatives*, 2nd ed.,
SIAM 2008, ch. 3). Holomorphic functions carry complex derivatives without conjugation.
"""

from __future__ import annotations

import numpy as onp
import scipy.special

from chiropt.lattice.faddeeva import wofz_derivative


class Tangent:
    """A value ``v`` with derivatives ``t`` along D directions (``t.ndim == v.ndim + 1``).

    Arithmetic with plain arrays and scalars broadcasts as numpy does (the direction axis
    stays first). ``__array_ufunc__ = None`` makes numpy hand mixed operations back here.
    """

    __slots__ = ("v", "t")
    __array_ufunc__ = None

    def __init__(self, v, t):
        v = onp.asarray(v)
        t = onp.asarray(t)
        if t.ndim != v.ndim + 1:
            raise ValueError(f"tangent of shape {t.shape} for a value of shape {v.shape}")
        self.v, self.t = v, t

    @classmethod
    def _raw(cls, v, t):
        """A Tangent from arrays already consistent (the arithmetic's results; no checks)."""
        obj = object.__new__(cls)
        obj.v, obj.t = v, t
        return obj

    @classmethod
    def seed(cls, v, direction: int, directions: int):
        """``v`` varying along one direction with unit rate (all its elements at once)."""
        v = onp.asarray(v, dtype=float)
        t = onp.zeros((directions,) + v.shape)
        t[direction] = 1.0
        return cls(v, t)

    @property
    def ndim(self):
        return self.v.ndim

    @property
    def shape(self):
        return self.v.shape

    def lifted(self, ndim: int) -> Tangent:
        """The same values with leading unit axes up to ``ndim`` (numpy's broadcasting)."""
        extra = ndim - self.v.ndim
        if extra <= 0:
            return self
        pad = (1,) * extra
        return Tangent(self.v.reshape(pad + self.v.shape),
                       self.t.reshape(self.t.shape[:1] + pad + self.v.shape))

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        return Tangent(self.v[key], self.t[(slice(None),) + key])

    def __neg__(self):
        return Tangent._raw(-self.v, -self.t)

    def __add__(self, other):
        if type(other) is Tangent and other.v.ndim == self.v.ndim:
            return Tangent._raw(self.v + other.v, self.t + other.t)
        a, b = _pair(self, other)
        return Tangent._raw(a.v + b.v, _sum_t(a, b))

    __radd__ = __add__

    def __sub__(self, other):
        return self + (-_as_tangent_or_value(other))

    def __rsub__(self, other):
        return (-self) + other

    def __mul__(self, other):
        if type(other) in (float, int, complex):
            return Tangent._raw(self.v * other, self.t * other)
        if type(other) is Tangent and other.v.ndim == self.v.ndim:
            return Tangent._raw(self.v * other.v, self.t * other.v + self.v * other.t)
        a, b = _pair(self, other)
        return Tangent._raw(a.v * b.v, _product_t(a, b))

    __rmul__ = __mul__

    def __truediv__(self, other):
        if not isinstance(other, Tangent):
            return Tangent(self.v / other, self.t / other)
        return self * _reciprocal(other)

    def __rtruediv__(self, other):
        return _reciprocal(self) * other

    def __pow__(self, n):
        """x ** n for a constant exponent (scalar or array; d x^n = n x^(n-1) dx)."""
        if onp.isscalar(n) and n == 0:
            return Tangent(onp.ones_like(self.v), onp.zeros_like(self.t))
        if onp.isscalar(n) and n == 1:
            return self
        v = self.v ** n
        return Tangent(v, (n * self.v ** (onp.asarray(n) - 1)) * self.t)


def _as_tangent_or_value(x):
    return x if isinstance(x, Tangent) else onp.asarray(x)


def _pair(a, b):
    """Both operands as Tangent or plain, lifted to a common number of axes."""
    nd = max(onp.ndim(a.v if isinstance(a, Tangent) else a),
             onp.ndim(b.v if isinstance(b, Tangent) else b))
    a = a.lifted(nd) if isinstance(a, Tangent) else _Plain(onp.asarray(a))
    b = b.lifted(nd) if isinstance(b, Tangent) else _Plain(onp.asarray(b))
    return a, b


class _Plain:
    """A constant operand: value only."""

    __slots__ = ("v",)
    t = None

    def __init__(self, v):
        self.v = v


def _sum_t(a, b):
    if a.t is None:
        return onp.broadcast_to(b.t, b.t.shape[:1] + onp.broadcast_shapes(a.v.shape, b.v.shape))
    if b.t is None:
        return onp.broadcast_to(a.t, a.t.shape[:1] + onp.broadcast_shapes(a.v.shape, b.v.shape))
    return a.t + b.t


def _product_t(a, b):
    if a.t is None:
        return a.v * b.t
    if b.t is None:
        return a.t * b.v
    return a.t * b.v + a.v * b.t


def _reciprocal(x: Tangent) -> Tangent:
    inv = 1.0 / x.v
    return Tangent._raw(inv, -(inv * inv) * x.t)


def _unary(x, value, derivative):
    if not isinstance(x, Tangent):
        return value(onp.asarray(x))
    v = value(x.v)
    return Tangent(v, derivative(x.v, v) * x.t)


def exp(x):
    """exp, d exp(x) = exp(x) dx."""
    return _unary(x, onp.exp, lambda _, v: v)


def sqrt(x):
    """Principal square root, d sqrt(x) = dx / (2 sqrt(x))."""
    return _unary(x, onp.sqrt, lambda _, v: 0.5 / v)


def wofz(z):
    """Faddeeva w(z); w'(z) = -2 z w + 2i/sqrt(pi) (Abramowitz & Stegun 7.1.20)."""
    return _unary(z, scipy.special.wofz, lambda zv, w: wofz_derivative(w, zv))


def real(x):
    """Real part (of the value and of each derivative: the inputs are real)."""
    if not isinstance(x, Tangent):
        return onp.real(x)
    return Tangent(onp.real(x.v), onp.real(x.t))


def imag(x):
    """Imaginary part (of the value and of each derivative: the inputs are real)."""
    if not isinstance(x, Tangent):
        return onp.imag(x)
    return Tangent(onp.imag(x.v), onp.imag(x.t))


def where(mask, constant, x):
    """``constant`` where ``mask`` (a plain boolean array), else ``x``."""
    if not isinstance(x, Tangent):
        return onp.where(mask, constant, x)
    x = x.lifted(onp.ndim(mask))
    v = onp.where(mask, constant, x.v)
    return Tangent(v, onp.where(mask, 0.0, onp.broadcast_to(x.t, x.t.shape[:1] + v.shape)))


def _full_tangent(x: Tangent) -> onp.ndarray:
    return onp.broadcast_to(x.t, x.t.shape[:1] + x.v.shape)


def stack(items, axis=0):
    """numpy.stack of values and of derivatives (constants get zero derivatives)."""
    tangents = [x for x in items if isinstance(x, Tangent)]
    if not tangents:
        return onp.stack([onp.asarray(x) for x in items], axis=axis)
    nd = max(onp.ndim(x.v if isinstance(x, Tangent) else x) for x in items)
    shape = onp.broadcast_shapes(*[onp.shape(x.v if isinstance(x, Tangent) else x)
                                   for x in items])
    D = tangents[0].t.shape[0]
    vals, ts = [], []
    for x in items:
        if isinstance(x, Tangent):
            x = x.lifted(nd)
            vals.append(onp.broadcast_to(x.v, shape))
            ts.append(onp.broadcast_to(x.t, (D,) + shape))
        else:
            vals.append(onp.broadcast_to(onp.asarray(x), shape))
            ts.append(onp.zeros((D,) + shape))
    t_axis = axis + 1 if axis >= 0 else axis
    return Tangent(onp.stack(vals, axis=axis), onp.stack(ts, axis=t_axis))


def einsum(subscripts: str, *operands):
    """numpy.einsum with the product rule; explicit output subscripts ('...->...') only."""
    values = [x.v if isinstance(x, Tangent) else onp.asarray(x) for x in operands]
    out = onp.einsum(subscripts, *values, optimize=len(values) > 2)
    if not any(isinstance(x, Tangent) for x in operands):
        return out
    inputs, output = subscripts.replace(" ", "").split("->")
    terms = inputs.split(",")
    if "Z" in subscripts:
        raise ValueError("einsum subscripts must not use the letter Z (the direction axis)")
    t = None
    for i, x in enumerate(operands):
        if not isinstance(x, Tangent):
            continue
        spec = ",".join(("Z" + s) if j == i else s for j, s in enumerate(terms))
        ops = [_full_tangent(x) if j == i else values[j] for j in range(len(values))]
        part = onp.einsum(f"{spec}->Z{output}", *ops, optimize=len(ops) > 2)
        t = part if t is None else t + part
    return Tangent(out, t)


def matmul(x, M):
    """x @ M for a constant 2-D matrix M (contracts the last axis of x)."""
    M = onp.asarray(M)
    if not isinstance(x, Tangent):
        return onp.asarray(x) @ M
    return Tangent(x.v @ M, _full_tangent(x) @ M)


def sum(x, axis: int):  # noqa: A001 (the numpy name, on purpose)
    """Sum over one axis of the value (and the same axis of each derivative)."""
    if not isinstance(x, Tangent):
        return onp.sum(x, axis=axis)
    t_axis = axis + 1 if axis >= 0 else axis
    return Tangent(onp.sum(x.v, axis=axis), onp.sum(_full_tangent(x), axis=t_axis))


def powers(x, n: int):
    """x^0, x^1, ..., x^n along a new last axis, (..., n + 1).

    The values are the running products of a loop ``p = p * x`` (to round-off); the derivatives
    d(x^a) = a x^(a-1) dx. One operation instead of n, for kernels that need every power.
    """
    xv = x.v if isinstance(x, Tangent) else onp.asarray(x)
    run = onp.empty(xv.shape + (n + 1,), dtype=onp.result_type(xv, float))
    run[..., 0] = 1.0
    run[..., 1:] = xv[..., None]
    v = onp.cumprod(run, axis=-1)
    if not isinstance(x, Tangent):
        return v
    lower = onp.concatenate([onp.zeros_like(v[..., :1]), v[..., :-1]], axis=-1)
    return Tangent._raw(v, x.t[..., None] * (onp.arange(n + 1) * lower))


def reshape(x, shape):
    """numpy.reshape of the value (and of each derivative, the direction axis kept)."""
    if not isinstance(x, Tangent):
        return onp.reshape(x, shape)
    return Tangent._raw(onp.reshape(x.v, shape),
                        onp.reshape(_full_tangent(x), x.t.shape[:1] + tuple(shape)))


def value(x):
    """The plain value of a Tangent or array."""
    return x.v if isinstance(x, Tangent) else onp.asarray(x)
