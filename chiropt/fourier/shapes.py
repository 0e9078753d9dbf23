"""Inclusions of a patterned layer: analytic Fourier coefficients and normal-vector fields.

Each shape gives the normalized Fourier transform of its indicator function,

    chi_hat(G) = (1/A) * integral over the shape of exp(-i G . r) d^2 r      [-]

(A the cell area [m^2], G [1/m]) in closed form, so derivatives with respect to radii,
semi-axes, sizes and positions are exact under autograd:

- circle of radius R: (2 pi R^2 / A) J1(|G| R)/(|G| R) e^{-i G.c}
  (the Fourier-Bessel transform of a disc; e.g. Goodman, Introduction to Fourier Optics,
  3rd ed. (2005), sec. 2.1.3, "circ" function);
- ellipse (semi-axes a, b, rotated by theta): the circle formula with
  |G| R -> sqrt((a G_u)^2 + (b G_v)^2), the prefactor pi a b (an affine map of the disc);
- polygon (rectangles, rounded rectangles): the divergence theorem turns the area
  integral into a sum over edges, (i/|G|^2) sum_k (G x e_k)_z e^{-i G.m_k} sinc(G.e_k/2)
  with e_k the edge vector and m_k its midpoint (Lee & Mittra, IEEE Trans. Microwave
  Theory Tech. 31, 99 (1983)), the shoelace area at G = 0;
- ring: the outer circle minus the inner one.

Each shape also gives its outward unit normal field n(r) on a sampling grid of the cell
(used by the normal-vector factorization, Schuster et al., J. Opt. Soc. Am. A 24, 2880
(2007)): the exact boundary normal on the boundary, extended into the cell as the
gradient direction of a level function of the shape (radial for circles and rings,
the ellipse's quadratic form, the nearest edge for polygons).
Must not import: solve, multipole, fields, metrics, search, store, report, cli.
Units: SI [m] for lengths; positions are the inclusion centre in the cell's plane.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import autograd.numpy as np
import autograd.scipy.special as sps
import numpy as onp
from autograd.tracer import getval


def _jinc(x):
    """2 J1(x)/x, equal to 1 at x = 0, with finite derivatives there."""
    small = np.abs(getval(x)) < 1e-6
    xs = np.where(small, 1.0, x)
    series = 1.0 - x ** 2 / 8.0
    return np.where(small, series, 2.0 * sps.j1(xs) / xs)


def _sinc(x):
    """sin(x)/x, 1 at x = 0."""
    small = np.abs(getval(x)) < 1e-6
    xs = np.where(small, 1.0, x)
    return np.where(small, 1.0 - x ** 2 / 6.0, np.sin(xs) / xs)


def _shift(G, centre):
    """exp(-i G . c) for G (..., 2) [1/m] and centre (2,) [m]."""
    return np.exp(-1j * (G[..., 0] * centre[0] + G[..., 1] * centre[1]))


@dataclass
class Circle:
    """A disc: ``radius`` [m], ``centre`` (x, y) [m]; ``material`` a label for the caller."""

    radius: Any
    centre: Any = (0.0, 0.0)
    material: Any = None

    def fourier(self, G, area):
        """chi_hat(G) for G (..., 2) [1/m], cell area [m^2] -> (...) complex [-]."""
        g = np.sqrt(G[..., 0] ** 2 + G[..., 1] ** 2 + 1e-300)
        return np.pi * self.radius ** 2 / area * _jinc(g * self.radius) * _shift(G, self.centre)

    def level(self, x, y):
        """Level function (1 on the boundary, < 1 inside) and its gradient direction."""
        dx, dy = x - getval(self.centre[0]), y - getval(self.centre[1])
        r = onp.hypot(dx, dy)
        centre = r == 0   # the centre itself: any unit vector (x chosen)
        r = onp.where(centre, 1.0, r)
        return onp.where(centre, 0.0, r) / getval(self.radius), (
            onp.where(centre, 1.0, dx / r), dy / r)

    def contains(self, x, y):
        return self.level(x, y)[0] < 1.0

    def distance(self, x, y):
        """Signed in-plane distance to the boundary [m] (negative inside)."""
        return self.level(x, y)[0] * getval(self.radius) - getval(self.radius)


@dataclass
class Ellipse:
    """Ellipse: semi-axes ``a`` (along the rotated u axis) and ``b`` [m], rotation
    ``angle`` [rad] from x to u, ``centre`` [m]."""

    a: Any
    b: Any
    angle: Any = 0.0
    centre: Any = (0.0, 0.0)
    material: Any = None

    def _uv(self, X, Y):
        c, s = np.cos(self.angle), np.sin(self.angle)
        return c * X + s * Y, -s * X + c * Y

    def fourier(self, G, area):
        gu, gv = self._uv(G[..., 0], G[..., 1])
        rho = np.sqrt((self.a * gu) ** 2 + (self.b * gv) ** 2 + 1e-300)
        return np.pi * self.a * self.b / area * _jinc(rho) * _shift(G, self.centre)

    def level(self, x, y):
        a, b, t = getval(self.a), getval(self.b), getval(self.angle)
        dx, dy = x - getval(self.centre[0]), y - getval(self.centre[1])
        c, s = onp.cos(t), onp.sin(t)
        u, v = c * dx + s * dy, -s * dx + c * dy
        q = onp.sqrt((u / a) ** 2 + (v / b) ** 2)
        gu, gv = u / a ** 2, v / b ** 2  # gradient of the quadratic form, in (u, v)
        nx, ny = c * gu - s * gv, s * gu + c * gv
        nn = onp.hypot(nx, ny) + 1e-300
        return q, (nx / nn, ny / nn)

    def contains(self, x, y):
        return self.level(x, y)[0] < 1.0

    def distance(self, x, y):
        """Approximate signed distance [m]: (level - 1) times the smaller semi-axis (exact
        for a circle; within a factor a/b elsewhere)."""
        return (self.level(x, y)[0] - 1.0) * min(getval(self.a), getval(self.b))


@dataclass
class Polygon:
    """A simple polygon: ``vertices`` (V, 2) [m] in counter-clockwise order, absolute
    in-plane positions (may be traced)."""

    vertices: Any
    material: Any = None

    def fourier(self, G, area):
        v = self.vertices
        e = np.roll(v, -1, axis=0) - v            # (V, 2) edge vectors
        m = v + 0.5 * e                            # midpoints
        gx, gy = G[..., 0][..., None], G[..., 1][..., None]
        cross = gx * e[:, 1] - gy * e[:, 0]       # (G x e)_z
        ge = gx * e[:, 0] + gy * e[:, 1]
        gm = gx * m[:, 0] + gy * m[:, 1]
        terms = cross * np.exp(-1j * gm) * _sinc(0.5 * ge)
        gg = G[..., 0] ** 2 + G[..., 1] ** 2
        zero = getval(gg) < 1e-300
        edge_sum = 1j * np.sum(terms, axis=-1) / np.where(zero, 1.0, gg)
        shoelace = 0.5 * np.sum(v[:, 0] * np.roll(v[:, 1], -1) - np.roll(v[:, 0], -1) * v[:, 1])
        return np.where(zero, shoelace, edge_sum) / area

    def level(self, x, y):
        """Signed-distance-like level: 1 + (distance to the nearest edge line, outward
        positive) / inradius scale; the normal is that edge's outward normal."""
        v = onp.asarray(getval(self.vertices))
        e = onp.roll(v, -1, axis=0) - v
        n = onp.stack([e[:, 1], -e[:, 0]], axis=1) / onp.hypot(e[:, 0], e[:, 1])[:, None]
        # distance to each edge's line, outward positive; inside a convex polygon the
        # nearest edge is the one with the largest (least negative) value
        d = (x[..., None] - v[:, 0]) * n[:, 0] + (y[..., None] - v[:, 1]) * n[:, 1]
        k = onp.argmax(d, axis=-1)
        dist = onp.take_along_axis(d, k[..., None], axis=-1)[..., 0]
        scale = onp.max(onp.abs(v - v.mean(axis=0))) + 1e-300
        return 1.0 + dist / scale, (n[k, 0], n[k, 1])

    def contains(self, x, y):
        return self.level(x, y)[0] < 1.0

    def distance(self, x, y):
        """Signed distance [m] to the nearest edge line (exact inside a convex polygon and
        facing an edge; an underestimate beyond a corner)."""
        v = onp.asarray(getval(self.vertices))
        e = onp.roll(v, -1, axis=0) - v
        n = onp.stack([e[:, 1], -e[:, 0]], axis=1) / onp.hypot(e[:, 0], e[:, 1])[:, None]
        d = (x[..., None] - v[:, 0]) * n[:, 0] + (y[..., None] - v[:, 1]) * n[:, 1]
        return onp.max(d, axis=-1)


def Rectangle(width, height, *, angle=0.0, centre=(0.0, 0.0), corner_radius=0.0,
              material=None, arc_segments: int = 12) -> Polygon:
    """A rectangle ``width`` x ``height`` [m] rotated by ``angle`` [rad] about its
    ``centre`` [m], with optional rounded corners of ``corner_radius`` [m] (each arc drawn
    with ``arc_segments`` straight edges whose vertices lie on the arc; area error
    ~ r^2 (pi/(2 n))^2 / 6 per corner relative to the arc's quarter disc)."""
    r = corner_radius
    if float(getval(r)) <= 0.0:
        hx, hy = 0.5 * width, 0.5 * height
        local = np.array([[1.0, -1.0], [1.0, 1.0], [-1.0, 1.0], [-1.0, -1.0]])
        pts = local * np.array([1.0, 0.0]) * hx + local * np.array([0.0, 1.0]) * hy
    else:
        corners = [(1.0, -1.0, -0.5), (1.0, 1.0, 0.0), (-1.0, 1.0, 0.5), (-1.0, -1.0, 1.0)]
        rows = []
        for sx, sy, start in corners:
            t = onp.pi * (start + 0.5 * onp.arange(arc_segments + 1) / arc_segments)
            cx = sx * (0.5 * width - r)
            cy = sy * (0.5 * height - r)
            rows.append(np.stack([cx + r * onp.cos(t), cy + r * onp.sin(t)], axis=1))
        pts = np.concatenate(rows, axis=0)
    c, s = np.cos(angle), np.sin(angle)
    xr = c * pts[:, 0] - s * pts[:, 1] + centre[0]
    yr = s * pts[:, 0] + c * pts[:, 1] + centre[1]
    return Polygon(vertices=np.stack([xr, yr], axis=1), material=material)


@dataclass
class Ring:
    """A ring: a disc of radius ``outer`` with a concentric hole of radius ``inner`` [m]
    (the hole holds the layer's background material)."""

    outer: Any
    inner: Any
    centre: Any = (0.0, 0.0)
    material: Any = None

    def fourier(self, G, area):
        return (Circle(self.outer, self.centre).fourier(G, area)
                - Circle(self.inner, self.centre).fourier(G, area))

    def level(self, x, y):
        """Distance from the mid-radius, scaled so the two boundaries are at 1; the
        normal points away from the ring's material (outward at the outer rim, inward at
        the hole)."""
        ro, ri = getval(self.outer), getval(self.inner)
        dx, dy = x - getval(self.centre[0]), y - getval(self.centre[1])
        r0 = onp.hypot(dx, dy)
        centre = r0 == 0
        r = onp.where(centre, 1.0, r0)
        mid, half = 0.5 * (ro + ri), 0.5 * (ro - ri)
        sign = onp.where(r0 >= mid, 1.0, -1.0)
        return onp.abs(r0 - mid) / half, (sign * onp.where(centre, 1.0, dx / r), sign * dy / r)

    def contains(self, x, y):
        return self.level(x, y)[0] < 1.0

    def distance(self, x, y):
        """Signed distance [m] to the ring's material (negative inside it)."""
        return (self.level(x, y)[0] - 1.0) * 0.5 * (getval(self.outer) - getval(self.inner))
