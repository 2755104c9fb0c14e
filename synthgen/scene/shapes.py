"""Parametric shapes: exact outline, exact box, exact area and anti-aliased coverage.

Coordinates follow :mod:`synthgen.geometry` (x right, y down, pixel ``(r, c)``
covers ``[c, c + 1) x [r, r + 1)``).

How a shape is placed
---------------------
Every kind is first drawn in its own frame, centred on its own tight box, with
width ``aspect`` and height 1 (x right, y down):

* ``rectangle``: ``[-aspect/2, aspect/2] x [-1/2, 1/2]``.
* ``ellipse``: semi-axes ``aspect/2`` (x) and ``1/2`` (y).
* ``triangle``: isosceles, apex up: ``(0, -1/2)``, ``(aspect/2, 1/2)``,
  ``(-aspect/2, 1/2)``.
* ``polygon``: the regular ``sides``-gon with one vertex straight up, stretched
  to width ``aspect`` and height 1 (so it is regular only when ``aspect``
  equals :func:`natural_aspect`).
* ``star``: ``sides`` points, outer radius 1 and inner radius ``inner``, one
  point straight up, stretched to ``aspect`` x 1 like the polygon.
* ``ring``: the ellipse with a concentric elliptical hole whose semi-axes are
  ``inner`` times the outer ones.
* ``cross``: the union of the bars ``[-aspect/2, aspect/2] x [-inner/2,
  inner/2]`` and ``[-inner*aspect/2, inner*aspect/2] x [-1/2, 1/2]``; each
  bar's thickness is ``inner`` times the length of the other bar.

The frame is then rotated by ``angle`` degrees (clockwise on screen: the +x
axis turns toward +y), scaled uniformly so that the longer side of the rotated
shape's tight box is ``size`` px, and moved so that the centre of that box is
``(cx, cy)``.  The tight box is therefore analytic: from the rotated vertices for
polygon kinds, and from the half-extents ``sqrt(a^2 cos^2 t + b^2 sin^2 t)``,
``sqrt(a^2 sin^2 t + b^2 cos^2 t)`` for ellipses and rings.

Coverage
--------
Each pixel's coverage is the fraction of its ``s x s`` sub-samples, at
``x = c + (j + 0.5)/s``, ``y = r + (i + 0.5)/s``, that the exact point test
:func:`sample_inside` accepts.  To keep big shapes cheap, pixels are first
classified at their centres with a conservative distance bound (a lower bound on
the distance to the boundary; big patches settle 8 x 8 blocks first); only pixels
that the bound cannot settle are sub-sampled, and a star's or an outline's
sub-samples are tested only against the pieces or edges near their pixel.  The
result equals the plain sample rule exactly (``Coverage.inside`` applies that
rule directly, and the tests compare the two).

Polygon kinds are unions of convex pieces (a star: one kite per point plus the
core polygon through its inner vertices; a cross: its two bars), each a set of
half-planes; ellipses and rings use their quadratic form.

Outline-only shapes (``stroke > 0``)
------------------------------------
The stroked shape keeps the points of the filled shape that lie in a band of
thickness ``stroke`` px inside its boundary:

* polygon kinds (rectangle, triangle, polygon, star, cross): the points of the
  shape whose Euclidean distance to the boundary is less than ``stroke``;
* ellipse: the points of the ellipse outside the concentric, equally rotated
  ellipse with semi-axes ``a - stroke`` and ``b - stroke`` (the Euclidean rule
  for circles; for other ellipses the band is exactly ``stroke`` thick at the
  four axis ends);
* ring: the points of the ring outside the ring whose outer semi-axes are
  shorter by ``stroke`` and whose hole semi-axes are longer by ``stroke``.

When the band is as thick as the shape the whole shape is kept.  The tight box
of a stroked shape is the filled shape's box.
"""

from __future__ import annotations

import math
import operator
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from synthgen.config import FILLS, KINDS
from synthgen.scene.regions import (
    ConvexBand,
    ConvexRegion,
    DifferenceRegion,
    EllipseRegion,
    EmptyRegion,
    PolygonBand,
    UnionRegion,
)

__all__ = [
    "trusted_shape",
    "moved_to",
    "shape_geometry",
    "shape_geometries",
    "shape_region",
    "KINDS",
    "FILLS",
    "Shape",
    "exact_box",
    "exact_area",
    "clipped_box",
    "natural_aspect",
    "own_size",
    "outline",
    "sample_inside",
]

_ELLIPTIC = frozenset({"ellipse", "ring"})



def _finite(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ValueError(f"Shape.{name} must be a number (got {value!r})")
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"Shape.{name} must be finite (got {value!r})")
    return v


@dataclass(frozen=True, slots=True)
class Shape:
    """One parametric shape in image coordinates.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    cx, cy : float
        Centre of the shape's unclipped exact box, px.
    size : float
        Longer side of the unclipped exact box of the rotated shape, px, > 0.
    aspect : float
        Width / height of the shape in its own (unrotated) frame, > 0.
    angle : float
        Rotation in degrees, clockwise on screen (the +x axis turns toward +y).
    sides : int
        Number of polygon sides or star points, >= 3; ignored by other kinds.
    inner : float
        In (0, 1): star inner/outer radius ratio, ring hole ratio, cross bar
        thickness ratio; ignored by other kinds.

    Examples
    --------
    >>> Shape("ellipse", 10.0, 10.0, 8.0).size
    8.0
    >>> Shape("blob", 0, 0, 1)
    Traceback (most recent call last):
    ...
    ValueError: Shape.kind must be one of rectangle, ellipse, triangle, polygon, star, ring, cross (got 'blob')
    """

    kind: str
    cx: float
    cy: float
    size: float
    aspect: float = 1.0
    angle: float = 0.0
    sides: int = 5
    inner: float = 0.5

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"Shape.kind must be one of {', '.join(KINDS)} (got {self.kind!r})")
        for name in ("cx", "cy", "size", "aspect", "angle", "inner"):
            object.__setattr__(self, name, _finite(name, getattr(self, name)))
        if self.size <= 0:
            raise ValueError(f"Shape.size must be > 0 px (got {self.size!r})")
        if self.aspect <= 0:
            raise ValueError(f"Shape.aspect must be > 0 (got {self.aspect!r})")
        if not 0.0 < self.inner < 1.0:
            raise ValueError(f"Shape.inner must be in (0, 1) (got {self.inner!r})")
        try:
            if isinstance(self.sides, bool):
                raise TypeError
            sides = operator.index(self.sides)
        except TypeError:
            raise ValueError(f"Shape.sides must be a whole number >= 3 (got {self.sides!r})") from None
        if sides < 3:
            raise ValueError(f"Shape.sides must be a whole number >= 3 (got {self.sides!r})")
        object.__setattr__(self, "sides", int(sides))


_SHAPE_FIELDS = ("kind", "cx", "cy", "size", "aspect", "angle", "sides", "inner")
_new_object = object.__new__
_set_field = object.__setattr__


def trusted_shape(
    kind: str, cx: float, cy: float, size: float, aspect: float, angle: float, sides: int, inner: float
) -> Shape:
    """A :class:`Shape` from values already known to pass its checks (Python floats, int ``sides``).

    For callers that draw many shapes from validated arrays: the same object
    ``Shape(...)`` would build, without re-running the per-field checks.
    """
    s = _new_object(Shape)
    _set_field(s, "kind", kind)
    _set_field(s, "cx", cx)
    _set_field(s, "cy", cy)
    _set_field(s, "size", size)
    _set_field(s, "aspect", aspect)
    _set_field(s, "angle", angle)
    _set_field(s, "sides", sides)
    _set_field(s, "inner", inner)
    return s


def moved_to(shape: Shape, cx: float, cy: float) -> Shape:
    """``replace(shape, cx=cx, cy=cy)`` for finite Python floats, without re-checking the other fields."""
    if not (math.isfinite(cx) and math.isfinite(cy)):
        raise ValueError(f"Shape centre must be finite (got {cx!r}, {cy!r})")
    return trusted_shape(shape.kind, cx, cy, shape.size, shape.aspect, shape.angle, shape.sides, shape.inner)


# --------------------------------------------------------------------------
# Geometry of one shape
# --------------------------------------------------------------------------


class ShapeGeometry:
    """What a shape's outline makes of it, in image coordinates: its unclipped exact box, area and filled region."""

    __slots__ = ("box", "area", "region", "ellipse", "hole", "_verts", "_nring", "_map", "scale")

    def __init__(self, box, area, region, ellipse=None, hole=0.0, verts=None, nring=0, affine=None, scale=1.0):
        self.box = box  # tuple (x0, y0, x1, y1), unclipped
        self.area = area
        self.scale = scale  # px per unit of the own frame (width aspect, height 1)
        self.region = region  # fill region
        self.ellipse = ellipse  # EllipseRegion for ellipse / ring, else None
        self.hole = hole  # ring hole ratio, else 0.0
        self._verts = verts  # own-frame vertices (2, K) of polygon kinds, else None
        self._nring = nring
        self._map = affine  # (M (2, 2), t (2,)): image point = M @ own point + t

    @property
    def ring(self) -> np.ndarray | None:
        """Exact vertices (K, 2) in image coordinates (polygon kinds), else None."""
        if self._verts is None:
            return None
        m, t = self._map
        return (m @ self._verts[:, : self._nring]).T + t


@lru_cache(maxsize=64)
def _unit(kind: str, sides: int):
    """Own-frame geometry of a rectangle, triangle or regular polygon.

    Returns ``(verts (2, K), groups, area, ext_x, ext_y)``: the ring's vertices
    as columns; ``groups``, a tuple of ``(nx, ny, c)`` half-plane arrays of shape
    (P, E) (unit normals) whose convex pieces together make up the shape; its area
    and its box size.  The frame is the natural one (a polygon has circumradius
    1); :func:`_build` stretches it to width ``aspect`` and height 1.
    """
    if kind == "rectangle":
        v = np.array([[-0.5, -0.5], [0.5, -0.5], [0.5, 0.5], [-0.5, 0.5]])
        area = 1.0
    elif kind == "triangle":
        v = np.array([[0.0, -0.5], [0.5, 0.5], [-0.5, 0.5]])
        area = 0.5
    else:
        phi = 2.0 * np.pi * np.arange(sides) / sides
        v = np.stack([np.sin(phi), -np.cos(phi)], axis=1)
        area = sides * math.sin(2.0 * math.pi / sides) / 2.0  # n R^2 sin(2 pi / n) / 2
    hp = ConvexRegion.from_pieces(v[None, :, :])
    ext = v.max(axis=0) - v.min(axis=0)
    verts = np.ascontiguousarray(v.T)
    for arr in (verts, hp.nx, hp.ny, hp.c):
        arr.flags.writeable = False
    return verts, ((hp.nx, hp.ny, hp.c),), area, float(ext[0]), float(ext[1])


@lru_cache(maxsize=64)
def _star_table(sides: int):
    """Per-``sides`` constants of a star: vertex directions, parity and kite turns."""
    n2 = 2 * sides
    phi = np.pi * np.arange(n2) / sides
    dirs = np.stack([np.sin(phi), -np.cos(phi)])  # (2, 2n), point 0 straight up
    odd = np.arange(n2) % 2 == 1
    turn = 2.0 * np.pi * np.arange(sides) / sides
    for arr in (dirs, odd):
        arr.flags.writeable = False
    return dirs, odd, np.cos(turn)[:, None], np.sin(turn)[:, None]


def _star(sides: int, inner: float):
    """Own-frame geometry of a star (outer radius 1), in :func:`_unit`'s layout."""
    dirs, odd, ct, st = _star_table(sides)
    verts = dirs * np.where(odd, inner, 1.0)  # (2, 2n)
    lo = verts.min(axis=1)
    hi = verts.max(axis=1)
    # Kite 0 = (centre, inner vertex before, point straight up, inner vertex after);
    # its outward edge normals, in order, then the other kites turned about the centre.
    sa, ca = math.sin(math.pi / sides), math.cos(math.pi / sides)
    r = inner
    inv = 1.0 / math.hypot(1.0 - r * ca, r * sa)
    n0x = np.array([-ca, (r * ca - 1.0) * inv, (1.0 - r * ca) * inv, ca])
    n0y = np.array([sa, -r * sa * inv, -r * sa * inv, sa])
    c0 = np.array([0.0, r * sa * inv, r * sa * inv, 0.0])
    nx = ct * n0x - st * n0y  # (n, 4)
    ny = st * n0x + ct * n0y
    c = np.broadcast_to(c0, nx.shape)
    # The core n-gon through the inner vertices overlaps the kites along their
    # shared edges, so that no interior point sits on the edge of every piece
    # holding it (such points would needlessly count as boundary).
    core = (st.T, -ct.T, np.full((1, sides), r * ca))
    area = sides * inner * sa
    return verts, ((nx, ny, c), core), area, float(hi[0] - lo[0]), float(hi[1] - lo[1])


_CROSS_NX = np.array([[1.0, -1.0, 0.0, 0.0], [1.0, -1.0, 0.0, 0.0]])
_CROSS_NY = np.array([[0.0, 0.0, 1.0, -1.0], [0.0, 0.0, 1.0, -1.0]])


def _cross(inner: float):
    """Own-frame geometry of a cross (1 x 1), in :func:`_unit`'s layout."""
    h = inner / 2.0
    verts = np.array(
        [
            [-h, h, h, 0.5, 0.5, h, h, -h, -h, -0.5, -0.5, -h],
            [-0.5, -0.5, -h, -h, h, h, 0.5, 0.5, h, h, -h, -h],
        ]
    )
    c = np.array([[0.5, 0.5, h, h], [h, h, 0.5, 0.5]])  # horizontal bar, vertical bar
    return verts, ((_CROSS_NX, _CROSS_NY, c),), 2.0 * inner - inner * inner, 1.0, 1.0


def _build(shape: Shape) -> ShapeGeometry:
    th = math.radians(shape.angle)
    cos, sin = math.cos(th), math.sin(th)
    kind = shape.kind
    asp = shape.aspect
    if kind in _ELLIPTIC:
        a0, b0 = asp / 2.0, 0.5
        hx = math.hypot(a0 * cos, b0 * sin)
        hy = math.hypot(a0 * sin, b0 * cos)
        k = shape.size / (2.0 * max(hx, hy))
        a, b = k * a0, k * b0
        hx, hy = k * hx, k * hy
        box = (shape.cx - hx, shape.cy - hy, shape.cx + hx, shape.cy + hy)
        ell = EllipseRegion(shape.cx, shape.cy, cos, sin, a, b)
        if kind == "ring":
            q = shape.inner
            hole = EllipseRegion(shape.cx, shape.cy, cos, sin, q * a, q * b)
            return ShapeGeometry(box, math.pi * a * b * (1.0 - q * q), DifferenceRegion(ell, hole), ell, q, scale=k)
        return ShapeGeometry(box, math.pi * a * b, ell, ell, scale=k)

    if kind == "star":
        verts, groups, area0, ex, ey = _star(shape.sides, shape.inner)
    elif kind == "cross":
        verts, groups, area0, ex, ey = _cross(shape.inner)
    else:
        verts, groups, area0, ex, ey = _unit(kind, shape.sides if kind == "polygon" else 0)
    # natural frame -> image: stretch to width `aspect` and height 1, rotate,
    # then scale by k and translate (below)
    sx, sy = asp / ex, 1.0 / ey
    lin = np.array([[cos * sx, -sin * sy], [sin * sx, cos * sy]])
    rot = lin @ verts  # (2, K)
    lo = rot.min(axis=1)
    hi = rot.max(axis=1)
    wx, wy = float(hi[0] - lo[0]), float(hi[1] - lo[1])
    k = shape.size / max(wx, wy)
    tx = shape.cx - k * float(hi[0] + lo[0]) / 2.0
    ty = shape.cy - k * float(hi[1] + lo[1]) / 2.0
    box = (shape.cx - k * wx / 2.0, shape.cy - k * wy / 2.0, shape.cx + k * wx / 2.0, shape.cy + k * wy / 2.0)
    # Half-planes n.l <= c of the natural frame map to (R S^-1 n).p <= k c + (R S^-1 n).t
    # in the image (S = diag(sx, sy), R the rotation); then renormalise.
    parts = []
    for lnx, lny, lc in groups:
        mx = lnx / sx
        my = lny / sy
        inv_len = 1.0 / np.sqrt(mx * mx + my * my)
        ux = mx * inv_len
        uy = my * inv_len
        nx = cos * ux - sin * uy
        ny = sin * ux + cos * uy
        parts.append(ConvexRegion(nx, ny, (k * lc) * inv_len + (nx * tx + ny * ty)))
    return ShapeGeometry(
        box,
        area0 * sx * sy * k * k,
        parts[0] if len(parts) == 1 else UnionRegion(parts),
        verts=verts,
        nring=verts.shape[1],
        affine=(k * lin, np.array([tx, ty])),
        scale=k,
    )


def _build_many(shapes) -> list:
    """``[_build(s) for s in shapes]`` with the polygon kinds built in bulk, one group per kind and side count.

    Every number is computed by the same operations as :func:`_build`, element
    by element (the 2 x 2 linear maps go through the same stacked matrix
    product), so the geometries are identical; ellipses and rings, cheap
    already, are built one by one.
    """
    out: list = [None] * len(shapes)
    groups: dict = {}
    for i, shape in enumerate(shapes):
        kind = shape.kind
        if kind in _ELLIPTIC:
            out[i] = _build(shape)
        else:
            groups.setdefault((kind, shape.sides if kind in ("polygon", "star") else 0), []).append(i)
    for (kind, sides), idx in groups.items():
        if len(idx) < _BULK_BUILD_MIN:  # a few shapes: the one-shape build costs less
            for i in idx:
                out[i] = _build(shapes[i])
            continue
        for i, g in zip(idx, _build_polygon_group(kind, sides, [shapes[i] for i in idx])):
            out[i] = g
    return out


#: Smallest group of one polygon kind that :func:`_build_many` builds in bulk.
_BULK_BUILD_MIN = 8


def _col(a: np.ndarray) -> np.ndarray:
    """(N,) -> (N, 1, 1), to broadcast one value per shape over its pieces."""
    return a[:, None, None]


def _build_polygon_group(kind: str, sides: int, shapes) -> list:
    """:func:`_build` for shapes of one polygon kind (and one side count), as arrays over the shapes."""
    n = len(shapes)
    ths = [math.radians(s.angle) for s in shapes]
    cos = np.array([math.cos(t) for t in ths])
    sin = np.array([math.sin(t) for t in ths])
    asp = np.array([s.aspect for s in shapes])
    size = np.array([s.size for s in shapes])
    cx = np.array([s.cx for s in shapes])
    cy = np.array([s.cy for s in shapes])
    if kind == "star":
        dirs, odd, ct, st = _star_table(sides)
        r = np.array([s.inner for s in shapes])
        verts = dirs * np.where(odd, r[:, None], 1.0)[:, None, :]  # (N, 2, 2n)
        ext = verts.max(axis=2) - verts.min(axis=2)  # (N, 2)
        ex, ey = ext[:, 0], ext[:, 1]
        sa, ca = math.sin(math.pi / sides), math.cos(math.pi / sides)
        rca, rsa = r * ca, r * sa
        inv = np.array([1.0 / math.hypot(a, b) for a, b in zip((1.0 - rca).tolist(), rsa.tolist())])
        n0x = np.stack([np.full(n, -ca), (rca - 1.0) * inv, (1.0 - rca) * inv, np.full(n, ca)], axis=1)[:, None, :]
        n0y = np.stack([np.full(n, sa), -r * sa * inv, -r * sa * inv, np.full(n, sa)], axis=1)[:, None, :]
        c0 = np.stack([np.zeros(n), rsa * inv, rsa * inv, np.zeros(n)], axis=1)[:, None, :]
        kites = (ct * n0x - st * n0y, st * n0x + ct * n0y, np.broadcast_to(c0, (n, sides, 4)))
        core = (
            np.broadcast_to(st.T, (n, 1, sides)),
            np.broadcast_to(-ct.T, (n, 1, sides)),
            np.broadcast_to(rca[:, None, None], (n, 1, sides)),
        )
        groups = (kites, core)
        area0 = sides * r * sa
    elif kind == "cross":
        r = np.array([s.inner for s in shapes])
        h = r / 2.0
        half = np.full(n, 0.5)
        verts = np.stack(
            [
                np.stack([-h, h, h, half, half, h, h, -h, -h, -half, -half, -h], axis=1),
                np.stack([-half, -half, -h, -h, h, h, half, half, h, h, -h, -h], axis=1),
            ],
            axis=1,
        )  # (N, 2, 12)
        c = np.stack([np.stack([half, half, h, h], axis=1), np.stack([h, h, half, half], axis=1)], axis=1)
        groups = ((np.broadcast_to(_CROSS_NX, (n, 2, 4)), np.broadcast_to(_CROSS_NY, (n, 2, 4)), c),)
        area0 = 2.0 * r - r * r
        ex = ey = np.ones(n)
    else:
        verts, groups0, area0, ex0, ey0 = _unit(kind, sides)
        groups = tuple((g[0][None], g[1][None], g[2][None]) for g in groups0)
        ex, ey = np.full(n, ex0), np.full(n, ey0)
    sx, sy = asp / ex, 1.0 / ey
    lin = np.empty((n, 2, 2))
    lin[:, 0, 0] = cos * sx
    lin[:, 0, 1] = -sin * sy
    lin[:, 1, 0] = sin * sx
    lin[:, 1, 1] = cos * sy
    rot = lin @ verts  # (N, 2, K), the same products as one lin @ verts per shape
    lo = rot.min(axis=2)
    hi = rot.max(axis=2)
    wx, wy = hi[:, 0] - lo[:, 0], hi[:, 1] - lo[:, 1]
    k = size / np.maximum(wx, wy)
    tx = cx - k * (hi[:, 0] + lo[:, 0]) / 2.0
    ty = cy - k * (hi[:, 1] + lo[:, 1]) / 2.0
    boxes = np.stack([cx - k * wx / 2.0, cy - k * wy / 2.0, cx + k * wx / 2.0, cy + k * wy / 2.0], axis=1).tolist()
    areas = (area0 * sx * sy * k * k).tolist()
    parts = []
    for lnx, lny, lc in groups:
        mx = lnx / _col(sx)
        my = lny / _col(sy)
        inv_len = 1.0 / np.sqrt(mx * mx + my * my)
        ux = mx * inv_len
        uy = my * inv_len
        nx = _col(cos) * ux - _col(sin) * uy
        ny = _col(sin) * ux + _col(cos) * uy
        parts.append((nx, ny, (_col(k) * lc) * inv_len + (nx * _col(tx) + ny * _col(ty))))
    maps = _col(k) * lin
    shifts = np.stack([tx, ty], axis=1)
    scales = k.tolist()
    shared = verts.ndim == 2
    nring = verts.shape[-1]
    out = []
    for i in range(n):
        convex = [ConvexRegion(nx[i], ny[i], c[i]) for nx, ny, c in parts]
        out.append(
            ShapeGeometry(
                tuple(boxes[i]),
                areas[i],
                convex[0] if len(convex) == 1 else UnionRegion(convex),
                verts=verts if shared else verts[i],
                nring=nring,
                affine=(maps[i], shifts[i]),
                scale=scales[i],
            )
        )
    return out


#: Geometry cache (shape -> ShapeGeometry); cleared whole when it reaches _GEOM_MAX entries.
_GEOMS: dict = {}
_GEOM_MAX = 8192


def shape_geometry(shape: Shape) -> ShapeGeometry:
    """The shape's outline, exact box, area and filled region, built once and cached (shapes are hashable)."""
    g = _GEOMS.get(shape)
    if g is None:
        g = _build(shape)
        if len(_GEOMS) >= _GEOM_MAX:
            _GEOMS.clear()
        _GEOMS[shape] = g
    return g


def shape_geometries(shapes) -> list:
    """``[shape_geometry(s) for s in shapes]``, building the missing ones in bulk."""
    got = [_GEOMS.get(s) for s in shapes]
    todo = list({s: None for s, g in zip(shapes, got) if g is None})
    if not todo:
        return got
    if len(_GEOMS) + len(todo) > _GEOM_MAX:
        _GEOMS.clear()
    built = dict(zip(todo, _build_many(todo)))
    _GEOMS.update(built)
    return [g if g is not None else built[s] for s, g in zip(shapes, got)]


@lru_cache(maxsize=8192)
def shape_region(shape: Shape, stroke: float):
    """The region the shape covers: its filled region (``stroke`` 0) or its outline band ``stroke`` px wide."""
    g = shape_geometry(shape)
    if stroke <= 0.0:
        return g.region
    if g.ring is not None:
        if isinstance(g.region, ConvexRegion) and g.region.nx.shape[0] == 1:
            return ConvexBand(g.region, stroke)  # rectangle, triangle, polygon
        return PolygonBand(g.region, g.ring, stroke)
    e = g.ellipse
    a, b = e.a, e.b

    def shrunk(da: float, db: float):
        if da <= 0.0 or db <= 0.0:
            return EmptyRegion()
        return EllipseRegion(e.ex, e.ey, e.cos, e.sin, da, db)

    if g.hole == 0.0:
        return DifferenceRegion(e, shrunk(a - stroke, b - stroke))
    core = shrunk(a - stroke, b - stroke)
    if isinstance(core, EmptyRegion):
        return g.region
    inner_ring = DifferenceRegion(core, EllipseRegion(e.ex, e.ey, e.cos, e.sin, g.hole * a + stroke, g.hole * b + stroke))
    return DifferenceRegion(g.region, inner_ring)


# --------------------------------------------------------------------------
# Public geometry
# --------------------------------------------------------------------------


def exact_box(shape: Shape) -> np.ndarray:
    """Unclipped tight box of the continuous shape.

    Parameters
    ----------
    shape : Shape

    Returns
    -------
    ndarray of shape (4,), float64
        ``(x0, y0, x1, y1)`` in px, centred on ``(shape.cx, shape.cy)``; its
        longer side equals ``shape.size``.  Clip with
        :func:`synthgen.geometry.clip_boxes` for the exact box on a canvas.

    Examples
    --------
    >>> exact_box(Shape("rectangle", 4.0, 4.0, 4.0)).tolist()
    [2.0, 2.0, 6.0, 6.0]
    >>> exact_box(Shape("ellipse", 0.0, 0.0, 10.0, aspect=2.0, angle=90.0)).round(9).tolist()
    [-2.5, -5.0, 2.5, 5.0]
    """
    return np.array(shape_geometry(shape).box, dtype=np.float64)


def exact_area(shape: Shape) -> float:
    """Area of the continuous (filled) shape, px^2, from closed-form formulas.

    Examples
    --------
    >>> exact_area(Shape("rectangle", 0.0, 0.0, 4.0))
    16.0
    """
    return float(shape_geometry(shape).area)


def own_size(shape: Shape) -> tuple[float, float]:
    """Width and height (px) of the shape in its own frame, before rotation (their ratio is ``aspect``).

    Examples
    --------
    >>> own_size(Shape("rectangle", 0.0, 0.0, 10.0, aspect=0.5, angle=90.0))  # lying on its side
    (5.0, 10.0)
    >>> [round(v, 6) for v in own_size(Shape("ellipse", 0.0, 0.0, 10.0, aspect=2.0, angle=30.0))]
    [11.094004, 5.547002]
    """
    k = shape_geometry(shape).scale
    return k * shape.aspect, k


def natural_aspect(kind: str, sides: int = 5, inner: float = 0.5) -> float:
    """Width / height of the undistorted kind (the aspect that keeps polygons regular).

    Examples
    --------
    >>> natural_aspect("polygon", sides=4)
    1.0
    >>> round(natural_aspect("polygon", sides=6), 6)  # hexagon with a vertex up: sqrt(3) / 2
    0.866025
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {', '.join(KINDS)} (got {kind!r})")
    if kind not in ("polygon", "star"):
        return 1.0
    # a polygon's proportions do not depend on `inner`
    return _natural_aspect(kind, int(sides), float(inner) if kind == "star" else 0.0)


@lru_cache(maxsize=8192)
def _natural_aspect(kind: str, sides: int, inner: float) -> float:
    phi = (np.pi / sides) * np.arange(2 * sides)
    r = np.where(np.arange(2 * sides) % 2 == 0, 1.0, float(inner) if kind == "star" else 0.0)
    if kind == "polygon":
        phi, r = phi[::2], r[::2]
    x, y = r * np.sin(phi), -r * np.cos(phi)
    return float(np.ptp(x) / np.ptp(y))


def clipped_box(shape: Shape, height: int, width: int) -> np.ndarray | None:
    """Tight box of the part of the shape that lies on the canvas.

    Unlike ``clip_boxes(exact_box(shape), width, height)``, which only cuts the
    full box at the border, this is the exact tight box of ``shape`` intersected
    with ``[0, width] x [0, height]``: for a shape cut by the border it can be
    smaller than the clipped full box.  It is the same for filled and stroked
    shapes (both contain the boundary, where the extremes lie).

    Parameters
    ----------
    shape : Shape
    height, width : int
        Canvas size in pixels.

    Returns
    -------
    ndarray of shape (4,), float64, or None
        ``(x0, y0, x1, y1)`` in px; None when the shape and the canvas share no
        area.

    Notes
    -----
    The extremes of ``shape n canvas`` lie at its corners: shape vertices (or an
    ellipse's own extreme points) on the canvas, crossings of the outline with
    the canvas border, and canvas corners inside the shape.  Polygon edges are
    intersected exactly; ellipse crossings come from ``x(t) = cx + hx cos(t - tx)``.

    Examples
    --------
    >>> diamond = Shape("rectangle", 0.0, 5.0, 10.0, angle=45.0)
    >>> clipped_box(diamond, 20, 20).round(9).tolist()  # the right half of the diamond
    [0.0, 0.0, 5.0, 10.0]
    """
    g = shape_geometry(shape)
    W, H = float(width), float(height)
    bx0, by0, bx1, by1 = g.box
    if not (max(bx0, 0.0) < min(bx1, W) and max(by0, 0.0) < min(by1, H)):
        return None
    pts = []  # candidate points, (N, 2) arrays
    if g.ellipse is None:
        ring = g.ring
        pts.append(ring)
        a = ring
        d = np.roll(ring, -1, axis=0) - ring  # (K, 2) edges
        for axis, value in ((0, 0.0), (0, W), (1, 0.0), (1, H)):
            with np.errstate(divide="ignore", invalid="ignore"):
                t = (value - a[:, axis]) / d[:, axis]
            hit = (t >= 0.0) & (t <= 1.0)
            if hit.any():
                p = a[hit] + t[hit, None] * d[hit]
                p[:, axis] = value
                pts.append(p)
    else:
        e = g.ellipse
        for scale, extremes in ((1.0, True), (g.hole, False)):
            if scale == 0.0:
                continue
            a, b = e.a * scale, e.b * scale
            # p(t) = centre + a cos t (cos, sin) + b sin t (-sin, cos)
            ax_, ay_ = a * e.cos, a * e.sin
            bx_, by_ = -b * e.sin, b * e.cos
            hx, tx = math.hypot(ax_, bx_), math.atan2(bx_, ax_)  # x(t) = ex + hx cos(t - tx)
            hy, ty = math.hypot(ay_, by_), math.atan2(by_, ay_)
            ts = [tx, tx + math.pi, ty, ty + math.pi] if extremes else []
            for value, h, t0, centre in ((0.0, hx, tx, e.ex), (W, hx, tx, e.ex), (0.0, hy, ty, e.ey), (H, hy, ty, e.ey)):
                u = (value - centre) / h
                if -1.0 <= u <= 1.0:
                    w = math.acos(u)
                    ts += [t0 + w, t0 - w]
            if ts:
                t = np.array(ts)
                pts.append(np.stack([e.ex + ax_ * np.cos(t) + bx_ * np.sin(t), e.ey + ay_ * np.cos(t) + by_ * np.sin(t)], axis=1))
    corners = np.array([[0.0, 0.0], [W, 0.0], [0.0, H], [W, H]])
    pts.append(corners[sample_inside(shape, corners[:, 0], corners[:, 1])])
    p = np.concatenate(pts)
    eps = 1e-9 * max(1.0, W, H)
    on = (p[:, 0] >= -eps) & (p[:, 0] <= W + eps) & (p[:, 1] >= -eps) & (p[:, 1] <= H + eps)
    p = p[on]
    if p.shape[0] == 0:
        return None
    x0, x1 = max(float(p[:, 0].min()), 0.0), min(float(p[:, 0].max()), W)
    y0, y1 = max(float(p[:, 1].min()), 0.0), min(float(p[:, 1].max()), H)
    if not (x0 < x1 and y0 < y1):
        return None
    return np.array([x0, y0, x1, y1])


def outline(shape: Shape, *, resolution: int = 256) -> list[np.ndarray]:
    """Boundary rings of the filled shape in image coordinates.

    Parameters
    ----------
    shape : Shape
    resolution : int
        Number of points on each ellipse ring (ellipse, ring); polygon kinds
        return their exact vertices and ignore it.

    Returns
    -------
    list of ndarray of shape (K, 2), float64
        ``[outer, *holes]`` with columns ``(x, y)`` in px, the first point not
        repeated.  The outer ring has a positive shoelace area in (x, y), holes a
        negative one.  Ellipse points sit on the exact ellipse at equal steps of
        the parametric angle, so the ring is inscribed.

    Examples
    --------
    >>> outline(Shape("rectangle", 2.0, 2.0, 2.0))[0].tolist()
    [[1.0, 1.0], [3.0, 1.0], [3.0, 3.0], [1.0, 3.0]]
    """
    g = shape_geometry(shape)
    if g.ring is not None:
        return [_oriented(g.ring.copy(), positive=True)]
    resolution = int(resolution)
    if resolution < 3:
        raise ValueError(f"resolution must be >= 3 (got {resolution})")
    e = g.ellipse
    t = 2.0 * np.pi * np.arange(resolution) / resolution

    def ring(a: float, b: float, positive: bool) -> np.ndarray:
        u, v = a * np.cos(t), b * np.sin(t)
        xy = np.stack([e.ex + e.cos * u - e.sin * v, e.ey + e.sin * u + e.cos * v], axis=1)
        return _oriented(xy, positive)

    rings = [ring(e.a, e.b, True)]
    if g.hole:
        rings.append(ring(g.hole * e.a, g.hole * e.b, False))
    return rings


def _oriented(ring: np.ndarray, positive: bool) -> np.ndarray:
    x, y = ring[:, 0], ring[:, 1]
    area2 = float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))
    return ring if (area2 > 0) == positive else ring[::-1].copy()


def sample_inside(shape: Shape, x, y, *, stroke: float = 0.0) -> np.ndarray:
    """Exact point test of the shape (filled, or its outline band when ``stroke > 0``).

    Parameters
    ----------
    shape : Shape
    x, y : array_like
        Point coordinates in px; broadcast against each other.
    stroke : float
        Outline band thickness in px (module docstring); 0 tests the filled shape.

    Returns
    -------
    ndarray of bool
        Broadcast shape of ``x`` and ``y``.  Points on the boundary count as
        inside (a ring's hole boundary as outside); polygon edges accept points
        up to 1e-9 px outside.

    Examples
    --------
    >>> sample_inside(Shape("ellipse", 0.0, 0.0, 2.0), [0.0, 0.9, 1.1], 0.0).tolist()
    [True, True, False]
    """
    stroke = float(stroke)
    if not (math.isfinite(stroke) and stroke >= 0.0):
        raise ValueError(f"stroke must be a finite number >= 0 px (got {stroke!r})")
    return shape_region(shape, stroke).contains(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
