"""Regions of the plane with an exact point test and a conservative distance bound.

The filled part of a shape, or its outline band, is one of these regions, in
image coordinates (:mod:`synthgen.geometry` states the conventions).  Every
region offers ``contains(x, y)``, the exact point test, broadcasting ``x`` and
``y``, and ``bound(x, y)``: a signed number, negative inside, whose magnitude
never exceeds the Euclidean distance to the region's boundary.  Unions take the
minimum, differences ``max(a, -b)``; both keep the lower-bound property, which
lets coverage classify whole pixels without sampling them.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "EDGE_TOLERANCE",
    "ConvexRegion",
    "EllipseRegion",
    "EmptyRegion",
    "UnionRegion",
    "DifferenceRegion",
    "ConvexBand",
    "PolygonBand",
]

EDGE_TOLERANCE = 1e-9
"""Convex pieces accept points up to this far (px) outside their edges, so that
points on an edge shared by two pieces of one shape are never lost to rounding."""

_TOL = EDGE_TOLERANCE


def _expand(coef: np.ndarray, nd: int) -> np.ndarray:
    return coef.reshape(coef.shape + (1,) * nd)


class ConvexRegion:
    """Union of P convex polygons, each given by E half-planes ``nx x + ny y <= c``.

    ``nx``, ``ny`` and ``c`` have shape (P, E); the normals are unit vectors, so
    ``nx x + ny y - c`` is the signed distance to each edge's line.
    """

    __slots__ = ("nx", "ny", "c", "_nx2", "_ny2", "_c2")

    def __init__(self, nx: np.ndarray, ny: np.ndarray, c: np.ndarray):
        self.nx, self.ny, self.c = nx, ny, c
        # Pre-expanded for 2-D point arrays, the common case.
        self._nx2, self._ny2, self._c2 = nx[..., None, None], ny[..., None, None], c[..., None, None]

    @classmethod
    def from_pieces(cls, pieces: np.ndarray) -> ConvexRegion:
        """Half-planes of convex polygons with vertices ``pieces`` (P, E, 2), any orientation."""
        d = np.roll(pieces, -1, axis=1) - pieces  # (P, E, 2) edge vectors
        length = np.hypot(d[..., 0], d[..., 1])  # (P, E)
        nx = d[..., 1] / length
        ny = -d[..., 0] / length
        c = nx * pieces[..., 0] + ny * pieces[..., 1]
        mid = pieces.mean(axis=1)  # (P, 2), strictly inside each convex piece
        flip = (nx * mid[:, None, 0] + ny * mid[:, None, 1] - c) > 0  # normal points inward
        sign = np.where(flip, -1.0, 1.0)
        return cls(nx * sign, ny * sign, c * sign)

    def _edge_max(self, x, y) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        nd = max(x.ndim, y.ndim)
        if nd == 2:
            vals = (self._nx2 * x - self._c2) + self._ny2 * y  # (P, E, ...)
        else:
            vals = (_expand(self.nx, nd) * x - _expand(self.c, nd)) + _expand(self.ny, nd) * y
        return vals.max(axis=1)  # (P, ...)

    def contains(self, x, y) -> np.ndarray:
        m = self._edge_max(x, y)
        return m[0] <= _TOL if m.shape[0] == 1 else (m <= _TOL).any(axis=0)

    def bound(self, x, y) -> np.ndarray:
        m = self._edge_max(x, y)
        return m[0] if m.shape[0] == 1 else m.min(axis=0)


class EllipseRegion:
    """Filled ellipse: centre, rotation (cos, sin) and semi-axes a (own x), b (own y)."""

    __slots__ = ("ex", "ey", "cos", "sin", "a", "b", "qa", "qb", "qc")

    def __init__(self, ex, ey, cos, sin, a, b):
        self.ex, self.ey, self.cos, self.sin, self.a, self.b = ex, ey, cos, sin, a, b
        # q = (u/a)^2 + (v/b)^2 with u = cos dx + sin dy, v = -sin dx + cos dy,
        # expanded as qa dx^2 + qb dx dy + qc dy^2 so that a grid needs few full-size ops.
        ia, ib = 1.0 / (a * a), 1.0 / (b * b)
        self.qa = cos * cos * ia + sin * sin * ib
        self.qb = 2.0 * cos * sin * (ia - ib)
        self.qc = sin * sin * ia + cos * cos * ib

    def _q(self, x, y):
        dx = np.asarray(x, dtype=np.float64) - self.ex
        dy = np.asarray(y, dtype=np.float64) - self.ey
        return (self.qa * dx * dx + self.qc * dy * dy) + (self.qb * dx) * dy

    def contains(self, x, y) -> np.ndarray:
        return self._q(x, y) <= 1.0

    def bound(self, x, y) -> np.ndarray:
        dx = np.asarray(x, dtype=np.float64) - self.ex
        dy = np.asarray(y, dtype=np.float64) - self.ey
        u = self.cos * dx + self.sin * dy
        v = self.cos * dy - self.sin * dx
        a, b = self.a, self.b
        rho = np.sqrt((u / a) ** 2 + (v / b) ** 2)
        # Outside: the support line at the nearest level-set point separates the
        # point from the ellipse by (rho - 1) * h(n) with h(n) = rho / |grad|.
        grad = np.maximum(np.sqrt((u / (a * a)) ** 2 + (v / (b * b)) ** 2), 1e-300)
        outside = (rho - 1.0) * rho / grad
        # Inside: the gauge function is Lipschitz with constant 1 / min(a, b).
        inside = (rho - 1.0) * min(a, b)
        return np.where(rho > 1.0, outside, inside)


class EmptyRegion:
    """The empty region."""

    __slots__ = ()

    def contains(self, x, y):
        return np.zeros(np.broadcast_shapes(np.shape(x), np.shape(y)), dtype=bool)

    def bound(self, x, y):
        return np.full(np.broadcast_shapes(np.shape(x), np.shape(y)), np.inf)


class UnionRegion:
    """Points in any of ``parts`` (each a :class:`ConvexRegion`)."""

    __slots__ = ("parts", "_padded")

    def __init__(self, parts):
        self.parts = tuple(parts)
        self._padded = None

    def padded(self):
        """All pieces' half-planes as (E, P) arrays, short pieces padded with a repeated edge."""
        if self._padded is None:
            e = max(p.nx.shape[1] for p in self.parts)

            def pad(a):
                return np.concatenate([a, np.repeat(a[:, :1], e - a.shape[1], axis=1)], axis=1)

            self._padded = tuple(
                np.ascontiguousarray(np.concatenate([pad(np.asarray(getattr(p, name))) for p in self.parts]).T)
                for name in ("nx", "ny", "c")
            )
        return self._padded

    def contains(self, x, y):
        out = self.parts[0].contains(x, y)
        for part in self.parts[1:]:
            out = out | part.contains(x, y)
        return out

    def bound(self, x, y):
        out = self.parts[0].bound(x, y)
        for part in self.parts[1:]:
            out = np.minimum(out, part.bound(x, y))
        return out


class DifferenceRegion:
    """Points of ``keep`` that are not in ``cut``."""

    __slots__ = ("keep", "cut")

    def __init__(self, keep, cut):
        self.keep, self.cut = keep, cut

    def contains(self, x, y):
        return self.keep.contains(x, y) & ~self.cut.contains(x, y)

    def bound(self, x, y):
        return np.maximum(self.keep.bound(x, y), -self.cut.bound(x, y))


class ConvexBand:
    """Points of one convex polygon closer than ``width`` to its boundary.

    Inside a convex polygon the distance to the boundary is exactly ``-f`` with
    ``f`` the largest signed edge-line distance, so no segment distances are needed.
    """

    __slots__ = ("fill", "width")

    def __init__(self, fill: ConvexRegion, width: float):
        self.fill = fill
        self.width = float(width)

    def contains(self, x, y):
        f = self.fill.bound(x, y)
        return (f <= _TOL) & (f > -self.width)

    def bound(self, x, y):
        f = self.fill.bound(x, y)
        w = self.width
        return np.where(f > 0.0, f, np.where(f > -w, np.maximum(f, -w - f), -f - w))


class PolygonBand:
    """Points of a polygonal region closer than ``width`` to its boundary segments."""

    __slots__ = ("fill", "ax", "ay", "dx", "dy", "inv", "width")

    def __init__(self, fill, ring: np.ndarray, width: float):
        self.fill = fill
        d = np.roll(ring, -1, axis=0) - ring  # (K, 2)
        self.ax, self.ay = ring[:, 0].copy(), ring[:, 1].copy()
        self.dx, self.dy = d[:, 0].copy(), d[:, 1].copy()
        self.inv = 1.0 / (self.dx**2 + self.dy**2)
        self.width = float(width)

    def _dist2(self, x, y):
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        nd = max(x.ndim, y.ndim)
        px = x - _expand(self.ax, nd)  # (K, ...)
        py = y - _expand(self.ay, nd)
        dx, dy = _expand(self.dx, nd), _expand(self.dy, nd)
        t = np.clip((px * dx + py * dy) * _expand(self.inv, nd), 0.0, 1.0)
        ex = px - t * dx
        ey = py - t * dy
        return (ex * ex + ey * ey).min(axis=0)

    def contains(self, x, y):
        return self.fill.contains(x, y) & (self._dist2(x, y) < self.width * self.width)

    # The fill is a union of convex pieces, whose bound f is a lower bound on the
    # distance to the boundary: f < -width already rules a point out of the band,
    # and only points with -width <= f <= 0 need their exact segment distance.

    def bound(self, x, y):
        f = self.fill.bound(x, y)
        w = self.width
        # outside the shape: f bounds the distance to the shape, which holds the band;
        # deeper than w: the band is at least -f - w away
        out = np.where(f > 0.0, f, -f - w)
        near = (f <= 0.0) & (f >= -w)
        if near.any():
            xb, yb = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
            xs, ys = xb[near], yb[near]
            d = np.sqrt(self._dist2(xs, ys))
            band = np.where(d < w, -np.minimum(d, w - d), d - w)
            if isinstance(self.fill, (ConvexRegion, UnionRegion)):
                # their contains() is exactly bound() <= _TOL (the same edge values), and
                # f <= 0 here: every near point is inside, no need to test again
                out[near] = band
            else:
                out[near] = np.where(self.fill.contains(xs, ys), band, d)
        return out
