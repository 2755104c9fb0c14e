"""The visible box of a partly hidden object, from the geometry.

(Which objects are drawn, and which sub-pixel samples of each show, is settled
on samples by :mod:`synthgen.occlusion`; the visible box is the one quantity
taken from the continuous outlines instead, for the objects drawn.)

An object's visible part is its drawn region (the filled shape, or its outline
band, as :func:`synthgen.shapes.sample_inside` tests it) on the canvas, minus
the drawn regions of every object drawn above it.  Its **visible box** is the
tight box of that set (the box kinds are defined in :mod:`synthgen.geometry`).
This module computes it from the continuous outlines, not from sub-pixel
samples, so a thin tip in plain view keeps its full extent:

* polygon kinds (rectangle, triangle, polygon, star, cross, and the outline
  bands of rectangles, triangles and polygons) are exact polygons, and the box
  is exact to floating precision;
* curves (ellipses, rings, outline bands of ellipses and rings, and the round
  inner corners of star and cross outline bands) are enclosed between an
  inscribed and a circumscribed polygon.  The visible part of the inner
  approximations lies inside the true visible part, which lies inside that of
  the outer ones, so the true box is bracketed on every side; the curves are
  refined until each side's bracket is at most :data:`TOLERANCE` px wide, and
  the outer side is returned (never smaller than the true box).

The polygon arithmetic (union, difference) is done by shapely (GEOS).  Most
hidden objects never reach it: when, on every side, a point where the shape
touches its exact box is in plain view, the visible box is the exact box
(:func:`visible_box`).
"""

from __future__ import annotations

import math

import numpy as np
import shapely

from synthgen import shapes as shapes_mod
from synthgen.shapes import Shape, clipped_box

__all__ = ["TOLERANCE", "visible_box", "region_polygons"]

#: Largest error (px) of a visible box side that lies on a curve; polygonal sides are exact.
TOLERANCE = 1e-3

# Largest gap (px) between the inner and outer polygons of a curve on the first pass; each
# further pass divides it by at least 16 (four times as many vertices) where the brackets
# are still open.  A bracket is about the gap over the sine of the angle at which the curve
# meets the edge that ends the visible part, so five passes settle all but grazing crossings
# (under ~0.001 deg); a tangent touch may leave a wider bracket, and its outer side is returned.
_FIRST_GAP = 0.01
_PASSES = 5


# --------------------------------------------------------------------------- curves


def _meets(x0, y0, x1, y1, focus: np.ndarray) -> np.ndarray:
    """Whether the boxes ``(x0, y0, x1, y1)`` (arrays of shape (K,)) meet any box of ``focus`` (F, 4)."""
    f = focus[:, :, None]  # (F, 4, 1)
    return ((x0 <= f[:, 2]) & (f[:, 0] <= x1) & (y0 <= f[:, 3]) & (f[:, 1] <= y1)).any(axis=0)


def _ellipse_polygons(e, gap: float, focus=None):
    """Inscribed and circumscribed polygons of the ellipse ``e`` (a ``shapes._Ellipse``), shapely Polygons.

    The four points where x or y is extreme are vertices of the inscribed
    polygon and tangent points of the circumscribed one, so both have the
    ellipse's own box.  Between them the parameter steps are equal, short
    enough that the two polygons lie within :data:`_FIRST_GAP` px of each other,
    or within ``gap`` px on the steps whose arc may meet a box of ``focus``
    ((F, 4) array; everywhere when ``focus`` is None).
    """
    ax_, bx_ = e.a * e.cos, -e.b * e.sin  # x(t) = ex + ax_ cos t + bx_ sin t
    ay_, by_ = e.a * e.sin, e.b * e.cos
    tx, ty = math.atan2(bx_, ax_), math.atan2(by_, ay_)
    ends = np.sort(np.mod([tx, tx + math.pi, ty, ty + math.pi], 2.0 * math.pi))
    spans = np.diff(np.append(ends, ends[0] + 2.0 * math.pi))  # (4,)
    # The radial gap between the polygons is 1/cos(d/2) - cos(d/2) ~ d^2/4 on the unit circle,
    # at most max(a, b) times that in the image.
    big = max(e.a, e.b)

    def steps(g: float) -> float:
        return 2.0 * math.sqrt(g / big)

    def points(t, d):
        c, s = np.cos(t), np.sin(t)
        inner = np.stack([e.ex + ax_ * c + bx_ * s, e.ey + ay_ * c + by_ * s], axis=1)
        # tangents at t and t + d meet at the middle parameter, 1 / cos(d / 2) out on the unit circle
        m = t + d / 2.0
        r = 1.0 / np.cos(d / 2.0)
        cm, sm = r * np.cos(m), r * np.sin(m)
        outer = np.stack([e.ex + ax_ * cm + bx_ * sm, e.ey + ay_ * cm + by_ * sm], axis=1)
        return inner, outer

    first = _FIRST_GAP if focus is not None else gap
    counts = np.maximum(1, np.ceil(spans / steps(first))).astype(int)
    t = np.concatenate([ends[k] + spans[k] * np.arange(counts[k]) / counts[k] for k in range(4)])
    d = np.repeat(spans / counts, counts)
    if focus is not None:
        inner, outer = points(t, d)
        nxt = np.roll(inner, -1, axis=0)
        lo = np.minimum(np.minimum(inner, nxt), outer)  # each arc step lies in this triangle's box
        hi = np.maximum(np.maximum(inner, nxt), outer)
        near = _meets(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1], focus)
        split = np.where(near, np.maximum(1, np.ceil(d / steps(gap))), 1).astype(int)
        if (split > 1).any():
            sub = np.repeat(d / split, split)
            first_of = np.repeat(t, split)
            k = np.arange(split.sum()) - np.repeat(np.cumsum(split) - split, split)
            t, d = first_of + k * sub, sub
    inner, outer = shapely.polygons(np.stack(points(t, d)))  # both in one call (half the cost)
    return inner, outer


def _sandwich(region, gap: float, focus):
    """``(inner, outer)`` shapely geometries with inner <= region <= outer, for elliptic regions."""
    if isinstance(region, shapes_mod._Ellipse):
        return _ellipse_polygons(region, gap, focus)
    if isinstance(region, shapes_mod._Nothing):
        return shapely.Polygon(), shapely.Polygon()
    if isinstance(region, shapes_mod._Diff):
        keep_in, keep_out = _sandwich(region.keep, gap, focus)
        cut_in, cut_out = _sandwich(region.cut, gap, focus)
        return keep_in.difference(cut_out), keep_out.difference(cut_in)
    raise TypeError(f"no polygons for region {type(region).__name__}")  # pragma: no cover


# --------------------------------------------------------------------------- outline bands


def _convex_band(ring: np.ndarray, width: float):
    """Outline band of a convex polygon: the polygon minus its inward offset by ``width``.

    Inside a convex polygon the points at least ``width`` from the outline are
    the polygon's half-planes each moved in by ``width``; GEOS's inward offset
    with mitred corners is exactly that (the tests hold it to 1e-9 px against
    a buffer of the outline).
    """
    shape = shapely.Polygon(ring)
    return shape.difference(shape.buffer(-width, join_style="mitre", mitre_limit=1e9))


def _band(ring: np.ndarray, width: float, gap: float):
    """Inner and outer polygons of a polygonal shape's outline band (its points closer than ``width`` to its outline).

    The band is the shape minus its erosion by a disc of radius ``width`` (the
    points at least ``width`` inside).  GEOS erodes a polygon exactly along its
    edges and rounds each concave corner with chords between points of the
    circle of radius ``width`` about the corner: those chords cut into the disc,
    so that erosion holds the true one and the band left is inside the true
    band.  Eroding by ``far`` = ``width / cos(x)`` instead, with ``x`` at least
    half of every chord's angle, puts every chord outside the disc, so that
    erosion lies inside the true one and the band left holds the true band.
    That is checked, not assumed: the far erosion's outline must keep
    ``width`` from the shape's (the distance to the outline has no minimum
    inside the shape, so all of it then keeps ``width``); else ``x`` grows,
    and at worst the whole shape stands for the outer band.
    """
    shape = shapely.Polygon(ring)
    # GEOS divides a corner's arc into steps of at most about pi / (2 q); the two erosions are
    # at most width (1/cos(x) - cos(x)) ~ width x^2 apart
    q = max(1, math.ceil(math.pi / 2.0 * math.sqrt(width / gap)))
    inner = shape.difference(shape.buffer(-width, quad_segs=q))
    edge = shape.exterior
    for x in (math.pi / (2.0 * q), math.pi / q, 2.0 * math.pi / q):
        core = shape.buffer(-width / math.cos(min(x, 1.0)), quad_segs=q)
        if core.is_empty or shapely.distance(core.boundary, edge) >= width:
            return inner, shape.difference(core)
    return inner, shape  # pragma: no cover - GEOS keeps its steps within pi / (2 q)


# --------------------------------------------------------------------------- regions


def region_polygons(shape: Shape, stroke: float = 0.0, *, gap: float = _FIRST_GAP, focus=None):
    """Polygons enclosing the region that :func:`synthgen.shapes.sample_inside` tests.

    Parameters
    ----------
    shape : Shape
    stroke : float
        Outline band thickness in px; 0 for the filled shape.
    gap : float
        Largest distance (px) between the two polygons along a curve.
    focus : ndarray of shape (F, 4) or None
        Boxes ``(x0, y0, x1, y1)``; when given, only the curve steps that may
        meet one of them keep within ``gap``, the others within :data:`_FIRST_GAP`.

    Returns
    -------
    inner, outer : shapely geometry
        ``inner`` lies inside the region and ``outer`` contains it; both equal
        the region (exactly, up to floating point) for polygonal regions, so
        ``inner is outer`` there.

    Examples
    --------
    >>> inner, outer = region_polygons(Shape("rectangle", 4.0, 4.0, 4.0))
    >>> inner.bounds, inner is outer
    ((2.0, 2.0, 6.0, 6.0), True)
    >>> inner, outer = region_polygons(Shape("ellipse", 0.0, 0.0, 20.0))
    >>> bool(inner.area < 100 * math.pi < outer.area)
    True
    """
    stroke = float(stroke)
    g = shapes_mod._geom(shape)
    if focus is not None and not _meets(*(np.array([v]) for v in g.box), focus)[0]:
        focus, gap = None, _FIRST_GAP  # no curve step meets the focus: the first polygons do
    key = (shape, stroke)
    if focus is None and gap == _FIRST_GAP:
        got = _CACHE.get(key)
        if got is not None:
            return got
    region = shapes_mod._region(shape, stroke)
    if g.ring is None:
        out = _sandwich(region, gap, focus)
    elif stroke <= 0.0:
        poly = shapely.Polygon(g.ring)
        out = poly, poly
    elif isinstance(region, shapes_mod._ConvexBand):
        poly = _convex_band(g.ring, region.width)
        out = poly, poly
    else:
        out = _band(g.ring, region.width, gap)
    if focus is None and gap == _FIRST_GAP:
        if len(_CACHE) >= _CACHE_MAX:
            _CACHE.clear()
        _CACHE[key] = out
    return out


#: Polygons of recently used regions at the first gap, by (shape, stroke): an object
#: above several others is built once.
_CACHE: dict = {}
_CACHE_MAX = 4096


# --------------------------------------------------------------------------- the visible box


def _touch_points(shape: Shape) -> list[np.ndarray]:
    """Points (K, 2) where the shape meets each side of its unclipped exact box: left, top, right, bottom."""
    g = shapes_mod._geom(shape)
    x0, y0, x1, y1 = g.box
    if g.ring is not None:
        ring = g.ring
        tol = 1e-9 * max(1.0, abs(x0), abs(x1), abs(y0), abs(y1))
        return [ring[np.abs(ring[:, 0] - x0) <= tol], ring[np.abs(ring[:, 1] - y0) <= tol],
                ring[np.abs(ring[:, 0] - x1) <= tol], ring[np.abs(ring[:, 1] - y1) <= tol]]
    e = g.ellipse
    ax_, bx_ = e.a * e.cos, -e.b * e.sin
    ay_, by_ = e.a * e.sin, e.b * e.cos
    tx, ty = math.atan2(bx_, ax_), math.atan2(by_, ay_)
    t = np.array([tx + math.pi, ty + math.pi, tx, ty])
    pts = np.stack([e.ex + ax_ * np.cos(t) + bx_ * np.sin(t), e.ey + ay_ * np.cos(t) + by_ * np.sin(t)], axis=1)
    return [pts[k : k + 1] for k in range(4)]


def _sides_in_view(shape: Shape, above) -> np.ndarray:
    """Per side of its box (left, top, right, bottom): whether a point where the shape touches it is in view.

    A touch point outside every shape above has a neighbourhood in view, so
    the visible box reaches that side of the exact box.
    """
    sides = _touch_points(shape)
    pts = np.concatenate(sides)
    x, y = pts[:, 0], pts[:, 1]
    hidden = np.zeros(pts.shape[0], dtype=bool)
    for upper, stroke in above:
        ux0, uy0, ux1, uy1 = shapes_mod._geom(upper).box
        near = (x >= ux0) & (x <= ux1) & (y >= uy0) & (y <= uy1)
        if near.any():
            hidden[near] |= shapes_mod._region(upper, stroke).contains(x[near], y[near])
    out = np.zeros(4, dtype=bool)
    start = 0
    for k, side in enumerate(sides):
        n = side.shape[0]
        out[k] = n > 0 and not hidden[start : start + n].all()
        start += n
    return out


def _bounds(geom) -> np.ndarray | None:
    return None if geom.is_empty else np.array(geom.bounds)


def visible_box(shape: Shape, above, height: int, width: int, *, stroke: float = 0.0,
                exact: np.ndarray | None = None) -> np.ndarray | None:
    """The tight box of the part of ``shape`` on the canvas that no shape in ``above`` covers.

    Parameters
    ----------
    shape : Shape
        The object.
    above : sequence of (Shape, float)
        The objects drawn above it, each with its outline band thickness in px
        (0: filled).  Order does not matter.
    height, width : int
        Canvas size in px.
    stroke : float
        The object's own outline band thickness in px (0: filled).
    exact : ndarray of shape (4,) or None
        The object's exact box clipped to the canvas, when the caller has it
        (see :func:`synthgen.shapes.clipped_box`); computed when None.

    Returns
    -------
    ndarray of shape (4,), float64, or None
        ``(x0, y0, x1, y1)``; None when nothing of it is in view.  Sides on
        polygon edges or vertices are exact to floating precision; sides on a
        curve are at most :data:`TOLERANCE` px outside the true side, never
        inside it.

    Examples
    --------
    A thin triangle whose lower part a square hides keeps its apex (y = 10):

    >>> tri = Shape("triangle", 32.0, 30.0, 40.0, aspect=0.15)
    >>> square = Shape("rectangle", 32.0, 45.0, 20.0)
    >>> visible_box(tri, [(square, 0.0)], 64, 64).round(9).tolist()
    [30.125, 10.0, 33.875, 35.0]
    """
    stroke = float(stroke)
    gb = shapes_mod._geom(shape).box
    on_canvas = gb[0] >= 0.0 and gb[1] >= 0.0 and gb[2] <= width and gb[3] <= height
    if exact is None:
        exact = np.array(gb) if on_canvas else clipped_box(shape, height, width)
    if exact is None:
        return None
    exact = np.asarray(exact, dtype=np.float64)
    ex0, ey0, ex1, ey1 = exact.tolist()
    near = []
    for upper, up_stroke in above:
        ux0, uy0, ux1, uy1 = shapes_mod._geom(upper).box
        if ux0 < ex1 and ex0 < ux1 and uy0 < ey1 and ey0 < uy1:
            near.append((upper, float(up_stroke)))
    if not near:
        return exact
    settled = _sides_in_view(shape, near) if on_canvas else np.zeros(4, dtype=bool)
    if settled.all():
        return exact
    canvas = None if on_canvas else shapely.box(0.0, 0.0, float(width), float(height))

    def seen(gap, focus=None):
        """Inner and outer visible parts (the inner one None when both are the region itself).

        With ``focus`` (strips, (F, 4)), the curves are finer in the strips.
        """
        a_in, a_out = region_polygons(shape, stroke, gap=gap, focus=focus)
        if canvas is not None:
            same = a_out is a_in
            a_in = a_in.intersection(canvas)
            a_out = a_in if same else a_out.intersection(canvas)
        inner = None if a_in is a_out else a_in
        outer = a_out
        for u, s in near:
            u_in, u_out = region_polygons(u, s, gap=gap, focus=focus)
            if inner is None and u_in is not u_out:
                inner = outer  # from here on the inner and outer parts differ
            outer = outer.difference(u_in)
            if inner is not None:
                inner = inner.difference(u_out)
            if outer.is_empty:
                break
        return inner, outer

    inner, outer = seen(_FIRST_GAP)
    box = _bounds(outer)
    if box is None:
        return None
    box = np.concatenate([np.maximum(box[:2], exact[:2]), np.minimum(box[2:], exact[2:])])
    box[settled] = exact[settled]
    if inner is None:  # polygons only: exact
        return box if box[0] < box[2] and box[1] < box[3] else None
    # Each open side lies between the outer box's and the inner box's (``limit``).  Narrow the
    # brackets with finer curves in the strips between the two, where the true sides lie.  A
    # bracket is about the gap over the sine of the crossing angle, so the next gap is scaled to
    # close the widest bracket at once (and at least divided by 16).
    low = _bounds(inner)
    limit = exact[[2, 3, 0, 1]].copy() if low is None else low.copy()
    limit[settled] = exact[settled]
    gap = _FIRST_GAP
    for _ in range(_PASSES):
        open_ = [k for k in range(4) if abs(limit[k] - box[k]) > TOLERANCE]
        if not open_:
            break
        strips = np.repeat(box[None, :], len(open_), axis=0)
        for row, k in enumerate(open_):
            strips[row, (k + 2) % 4] = limit[k]  # from the outer side to the inner limit
        widest = max(abs(limit[k] - box[k]) for k in open_)
        gap = min(gap / 16.0, gap * TOLERANCE / (2.0 * widest))
        inner, outer = seen(gap, np.sort(strips.reshape(-1, 2, 2), axis=1).reshape(-1, 4))
        b_out, b_in = _bounds(outer), _bounds(inner)
        for k in open_:
            if b_out is None:  # not even the outer part is left: nothing in view
                return None
            box[k] = max(box[k], b_out[k]) if k < 2 else min(box[k], b_out[k])
            if b_in is not None:
                limit[k] = min(limit[k], b_in[k]) if k < 2 else max(limit[k], b_in[k])
    if not (box[0] < box[2] and box[1] < box[3]):
        return None
    return box
