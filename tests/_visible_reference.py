"""An independent computation of visible boxes, for the tests of synthgen.scene.visible.

Each drawn region is rebuilt with shapely from the shape's parameters as the
module docstring of synthgen.scene.shapes states them (own frame of width ``aspect``
and height 1, turned by ``angle``, scaled so that the longer side of the turned
box is ``size``, centred on ``(cx, cy)``), by shapely's affine transforms and
without synthgen's geometry code; curves are dense inscribed polygons
(``Point.buffer``, 4 * QUAD vertices).  Outline bands are built as the shape
intersected with the buffer of its boundary (the points closer than the
stroke to it), not as the shape minus its erosion as synthgen does.  The
visible part is then ``region n canvas - union(regions above)`` by shapely.
"""

from __future__ import annotations

import math

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import LinearRing, Point, Polygon
from shapely.geometry import box as shapely_box

QUAD = 1024  # segments per quarter circle: a 60 px radius is off by at most 60 (1 - cos(pi / 4096)) < 2e-5 px


def _own_vertices(kind: str, aspect: float, sides: int, inner: float) -> np.ndarray:
    """Vertices of a polygon kind in its own frame (width ``aspect``, height 1, centred on its box)."""
    if kind == "rectangle":
        v = [(-0.5, -0.5), (0.5, -0.5), (0.5, 0.5), (-0.5, 0.5)]
    elif kind == "triangle":
        v = [(0.0, -0.5), (0.5, 0.5), (-0.5, 0.5)]
    elif kind == "polygon":
        v = [(math.sin(2 * math.pi * k / sides), -math.cos(2 * math.pi * k / sides)) for k in range(sides)]
    elif kind == "star":
        v = [((1.0 if k % 2 == 0 else inner) * math.sin(math.pi * k / sides),
              -(1.0 if k % 2 == 0 else inner) * math.cos(math.pi * k / sides)) for k in range(2 * sides)]
    else:  # cross: bars as thick as `inner` times the other bar's length
        h = inner / 2.0
        v = [(-h, -0.5), (h, -0.5), (h, -h), (0.5, -h), (0.5, h), (h, h), (h, 0.5), (-h, 0.5), (-h, h),
             (-0.5, h), (-0.5, -h), (-h, -h)]
    v = np.array(v, dtype=np.float64)
    v -= (v.max(axis=0) + v.min(axis=0)) / 2.0
    ext = v.max(axis=0) - v.min(axis=0)
    return v * np.array([aspect / ext[0], 1.0 / ext[1]])


def _scale(own, shape) -> float:
    """The uniform scale that makes the longer side of the turned own-frame box ``shape.size``."""
    x0, y0, x1, y1 = affinity.rotate(own, shape.angle, origin=(0, 0)).bounds
    return shape.size / max(x1 - x0, y1 - y0)


def _place(own, shape):
    k = _scale(own, shape)
    g = affinity.scale(affinity.rotate(own, shape.angle, origin=(0, 0)), k, k, origin=(0, 0))
    x0, y0, x1, y1 = g.bounds
    return affinity.translate(g, shape.cx - (x0 + x1) / 2.0, shape.cy - (y0 + y1) / 2.0)


def _ellipse(shape, shrink: float = 0.0, factor: float = 1.0):
    """The shape's ellipse with semi-axes times ``factor`` minus ``shrink`` px, or None when that is empty."""
    disc = Point(0.0, 0.0).buffer(1.0, quad_segs=QUAD)
    k = _scale(affinity.scale(disc, shape.aspect / 2.0, 0.5, origin=(0, 0)), shape)
    a = k * shape.aspect / 2.0 * factor - shrink
    b = k * 0.5 * factor - shrink
    if a <= 0 or b <= 0:
        return None
    e = affinity.rotate(affinity.scale(disc, a, b, origin=(0, 0)), shape.angle, origin=(0, 0))
    return affinity.translate(e, shape.cx, shape.cy)


def region(shape, stroke: float = 0.0):
    """The drawn region of ``shape`` (its outline band when ``stroke > 0``) as a shapely geometry."""
    if shape.kind in ("ellipse", "ring"):
        outer = _ellipse(shape)
        if shape.kind == "ellipse":
            core = _ellipse(shape, stroke) if stroke > 0 else None
            return outer if core is None else outer.difference(core)
        ring = outer.difference(_ellipse(shape, 0.0, shape.inner))
        core = _ellipse(shape, stroke) if stroke > 0 else None
        if core is None:
            return ring
        return ring.difference(core.difference(_ellipse(shape, -stroke, shape.inner)))
    poly = _place(Polygon(_own_vertices(shape.kind, shape.aspect, shape.sides, shape.inner)), shape)
    if stroke <= 0:
        return poly
    return poly.intersection(LinearRing(poly.exterior.coords).buffer(stroke, quad_segs=QUAD // 4))


def visible(shape, stroke: float, above, height: int, width: int):
    """Bounds ``(x0, y0, x1, y1)`` of the part of the drawn shape in view, or None."""
    part = region(shape, stroke).intersection(shapely_box(0, 0, width, height))
    if above:
        part = part.difference(shapely.union_all([region(u, s) for u, s in above]))
    return None if part.is_empty else np.array(part.bounds)
