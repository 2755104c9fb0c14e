"""The visible box of a partly hidden object, from the geometry.

(Which objects are drawn, and which sub-pixel samples of each show, is settled
on samples by :mod:`synthgen.scene.occlusion`; the visible box is the one quantity
taken from the continuous outlines instead, for the objects drawn.)

An object's visible part is its drawn region (the filled shape, or its outline
band, as :func:`synthgen.scene.shapes.sample_inside` tests it) on the canvas, minus
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

The polygon arithmetic (intersection, difference) is done by shapely (GEOS),
for many objects at once (:func:`visible_boxes`).  It is kept small three ways:

* a side of the exact box is settled without it when a point where the shape
  touches that side is in plain view;
* given a box known to lie inside the visible part (in a scene, the box of
  the visible sub-pixel sample centres), only the strips between it and the
  exact box are looked at, each on its own, where the open sides must lie;
* only the shapes above whose polygons meet what is left in a strip are
  subtracted there.
"""

from __future__ import annotations

import math

import numpy as np

from synthgen.scene import shapes as shapes_mod
from synthgen.scene.regions import ConvexBand, DifferenceRegion, EllipseRegion, EmptyRegion
from synthgen.scene.shapes import Shape, clipped_box

__all__ = ["TOLERANCE", "visible_box", "visible_boxes", "region_polygons"]

#: Largest error (px) of a visible box side that lies on a curve; polygonal sides are exact.
TOLERANCE = 1e-3

# Largest gap (px) between the inner and outer polygons of a curve on the first pass; each
# further pass divides it by at least 16 (four times as many vertices) where the brackets
# are still open.  A bracket is about the gap over the sine of the angle at which the curve
# meets the edge that ends the visible part (or 0 where the side lies on a vertex), so five
# passes settle all but grazing crossings (under ~1e-4 deg); a tangent touch may leave a wider
# bracket, and its outer side is returned.  Measured in dense scenes: at 0.001 px nine in ten
# objects need no second pass, and the whole costs about a fifth less than starting at 0.01 px.
_FIRST_GAP = 0.001
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
    import shapely  # on first use: ~15 ms, and a scene where nothing overlaps never needs it

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
    import shapely

    if isinstance(region, EllipseRegion):
        return _ellipse_polygons(region, gap, focus)
    if isinstance(region, EmptyRegion):
        return shapely.Polygon(), shapely.Polygon()
    if isinstance(region, DifferenceRegion):
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
    import shapely

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
    import shapely

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
    """Polygons enclosing the region that :func:`synthgen.scene.shapes.sample_inside` tests.

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
    import shapely

    stroke = float(stroke)
    key = (shape, stroke)
    first = focus is None and gap == _FIRST_GAP
    if first:
        got = _CACHE.get(key)
        if got is not None:
            return got
    g = shapes_mod.shape_geometry(shape)
    if not first and ((g.ellipse is None and stroke <= 0.0) or not _meets(*(np.array([v]) for v in g.box), focus)):
        return region_polygons(shape, stroke)  # no curve, or no curve step meets the focus: the first polygons do
    region = shapes_mod.shape_region(shape, stroke)
    ring = g.ring
    if ring is None:
        out = _sandwich(region, gap, focus)
    elif stroke <= 0.0:
        poly = shapely.Polygon(ring)
        out = poly, poly
    elif isinstance(region, ConvexBand):
        if not first:
            return region_polygons(shape, stroke)  # exact: the first polygons do
        poly = _convex_band(ring, region.width)
        out = poly, poly
    else:
        out = _band(ring, region.width, gap)
    if first:
        if len(_CACHE) >= _CACHE_MAX:
            _CACHE.clear()
        _CACHE[key] = out
    return out


#: Polygons of recently used regions at the first gap, by (shape, stroke): an object
#: above several others is built once.  Emptied when full (a dense image uses a few hundred;
#: shapes of earlier images never come back).
_CACHE: dict = {}
_CACHE_MAX = 2048


# --------------------------------------------------------------------------- the visible box


def _touch_points(shape: Shape) -> list[np.ndarray]:
    """Points (K, 2) where the shape meets each side of its unclipped exact box: left, top, right, bottom."""
    g = shapes_mod.shape_geometry(shape)
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


def _sides_in_view(shape: Shape, above, height: int, width: int) -> np.ndarray:
    """Per side of its box (left, top, right, bottom): whether a point where the shape touches it is in view.

    A touch point on the canvas outside every shape above has a neighbourhood
    in view, so the visible box reaches that side of the unclipped exact box.
    """
    sides = _touch_points(shape)
    pts = np.concatenate(sides)
    x, y = pts[:, 0], pts[:, 1]
    hidden = (x < 0.0) | (x > width) | (y < 0.0) | (y > height)  # off the canvas: not in view
    boxes = np.array([shapes_mod.shape_geometry(u).box for u, _ in above], dtype=np.float64)  # (K, 4)
    inbox = ((x >= boxes[:, 0:1]) & (x <= boxes[:, 2:3]) & (y >= boxes[:, 1:2]) & (y <= boxes[:, 3:4]))  # (K, P)
    for j in np.flatnonzero(inbox.any(axis=1)).tolist():
        near = inbox[j] & ~hidden
        if near.any():
            upper, stroke = above[j]
            hidden[near] |= shapes_mod.shape_region(upper, stroke).contains(x[near], y[near])
    out = np.zeros(4, dtype=bool)
    start = 0
    for k, side in enumerate(sides):
        n = side.shape[0]
        out[k] = n > 0 and not hidden[start : start + n].all()
        start += n
    return out


def _sides_in_view_many(items, height: int, width: int) -> np.ndarray:
    """``[_sides_in_view(shape, above, height, width) for shape, above in items]`` as an (N, 4) array.

    The same point tests, run for all objects together: the touch points of every
    polygon kind are picked from all the rings at once, the points are matched to
    the boxes of the shapes above their own object in one step, and each shape
    above tests all the points it may hide in one call.  A point's verdict is the
    same as one object at a time (each test is per point; a point is hidden when
    it is off the canvas or inside any shape above), so the sides are the same.
    """
    n = len(items)
    owner, side, px, py = _touch_points_many([shape for shape, _ in items])
    hidden = (px < 0.0) | (px > width) | (py < 0.0) | (py > height)
    # every (point, shape above its object) pair whose box holds the point
    order = np.argsort(owner, kind="stable")
    owner, side, px, py, hidden = owner[order], side[order], px[order], py[order], hidden[order]
    first = np.searchsorted(owner, np.arange(n + 1))
    uppers: dict = {}
    pair_owner, pair_upper, pair_boxes = [], [], []
    for i, (_, above) in enumerate(items):
        for upper in above:
            pair_owner.append(i)
            pair_upper.append(uppers.setdefault(upper, len(uppers)))
            pair_boxes.append(shapes_mod.shape_geometry(upper[0]).box)
    if pair_owner:
        pair_owner = np.array(pair_owner)
        counts = first[pair_owner + 1] - first[pair_owner]
        pair = np.repeat(np.arange(len(pair_owner)), counts)  # pair of each (pair, point) row
        ends = np.cumsum(counts)
        point = np.arange(ends[-1] if len(ends) else 0) - np.repeat(ends - counts, counts) + first[pair_owner][pair]
        boxes = np.array(pair_boxes, dtype=np.float64)[pair]
        x, y = px[point], py[point]
        keep = (x >= boxes[:, 0]) & (x <= boxes[:, 2]) & (y >= boxes[:, 1]) & (y <= boxes[:, 3]) & ~hidden[point]
        point, upper_of = point[keep], np.array(pair_upper)[pair[keep]]
        by_upper = np.argsort(upper_of, kind="stable")
        point, upper_of = point[by_upper], upper_of[by_upper]
        cuts = np.flatnonzero(np.diff(upper_of)) + 1
        keys = list(uppers)
        for group in np.split(np.arange(len(point)), cuts) if len(point) else []:
            pts = point[group]
            hidden[pts[shapes_mod.shape_region(*keys[upper_of[group[0]]]).contains(px[pts], py[pts])]] = True
    seen = np.bincount(owner[~hidden] * 4 + side[~hidden], minlength=4 * n)
    return (seen > 0).reshape(n, 4)


def _touch_points_many(shapes) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The points of :func:`_touch_points` of every shape: owner index, side (0-3), x and y, one row each.

    The vertices of all polygon rings are compared with their boxes in one
    step (the same comparisons :func:`_touch_points` makes); ellipse kinds
    take :func:`_touch_points` itself.
    """
    geoms = shapes_mod.shape_geometries(shapes)
    rings, ring_owner, parts = [], [], []
    for i, (shape, g) in enumerate(zip(shapes, geoms)):
        ring = g.ring
        if ring is not None:
            rings.append(ring)
            ring_owner.append(i)
            continue
        pts = np.concatenate(_touch_points(shape))
        parts.append((np.full(4, i), np.arange(4), pts[:, 0], pts[:, 1]))
    if rings:
        lengths = np.array([r.shape[0] for r in rings])
        own = np.repeat(np.array(ring_owner), lengths)
        verts = np.concatenate(rings)
        box = np.array([geoms[i].box for i in ring_owner], dtype=np.float64)  # (R, 4)
        tol = 1e-9 * np.maximum(1.0, np.abs(box).max(axis=1))
        per = np.repeat(np.arange(len(rings)), lengths)
        for k, axis in enumerate((0, 1, 0, 1)):
            on = np.abs(verts[:, axis] - box[per, k]) <= tol[per]
            parts.append((own[on], np.full(int(on.sum()), k), verts[on, 0], verts[on, 1]))
    if not parts:
        empty = np.zeros(0)
        return empty.astype(np.int64), empty.astype(np.int64), empty, empty
    return tuple(np.concatenate(col) for col in zip(*parts))


def _bounds(geom) -> np.ndarray | None:
    return None if geom.is_empty else np.array(geom.bounds)


def visible_box(shape: Shape, above, height: int, width: int, *, stroke: float = 0.0,
                exact: np.ndarray | None = None, inside: np.ndarray | None = None) -> np.ndarray | None:
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
        (see :func:`synthgen.scene.shapes.clipped_box`); computed when None.
    inside : ndarray of shape (4,) or None
        A box known to lie inside the visible box, such as the box of the
        centres of the object's sub-pixel samples no shape above covers (each
        is a point in view).  Then only the strips between it and the exact
        box, where the sides of the visible box lie, are looked at: the
        result is the same, at a fraction of the polygon arithmetic.

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
    return visible_boxes([(shape, stroke, above, exact, inside)], height, width)[0]


def visible_boxes(objects, height: int, width: int) -> list:
    """:func:`visible_box` of many objects, ``[visible_box(s, a, ..., stroke=t, exact=e, inside=i) ...]``.

    The polygon arithmetic of all the objects runs together, a step at a time
    (shapely's array functions), with the same operations on the same polygons
    as one object at a time, so the boxes are the same.

    Parameters
    ----------
    objects : sequence of (Shape, float, sequence of (Shape, float), ndarray or None, ndarray or None)
        Per object: the shape, its outline band, the shapes above it with
        theirs, and its ``exact`` and ``inside`` boxes as :func:`visible_box` takes them.
    height, width : int
        Canvas size in px.
    """
    out: list = [None] * len(objects)
    jobs, firsts = [], []
    for i, (shape, _, above, exact, _) in enumerate(objects):
        first = _Job.meeting(shape, above, height, width, exact)
        if isinstance(first, tuple):
            firsts.append((i, first))
        else:
            out[i] = first
    in_view = _sides_in_view_many([(objects[i][0], first[2]) for i, first in firsts], height, width)
    for (i, first), sides in zip(firsts, in_view):
        shape, stroke, _, _, inside = objects[i]
        job = _Job.begin(shape, float(stroke), first, sides, inside)
        if isinstance(job, _Job):
            job.index = i
            jobs.append(job)
        else:
            out[i] = job
    # First look: the strips between the exact box and the points known in view on each open
    # side, or the whole exact box (which lies on the canvas) when none is known.
    tasks = []
    for job in jobs:
        if job.known is None:
            tasks.append((job, None, job.exact, _FIRST_GAP, None))
        else:
            tasks.extend((job, k, _strip(job.exact, job.known[k], k), _FIRST_GAP, None) for k in job.open_)
    for (job, k, _, _, _), (inner, outer) in zip(tasks, _seen_many(tasks)):
        job.curved |= inner is not None
        if k is not None:
            _narrow(job.box, job.limit, k, inner, outer)
            continue
        b_out = _bounds(outer)
        if b_out is None:
            job.empty = True
            continue
        b_in = None if inner is None else _bounds(inner)
        for k in job.open_:
            job.box[k] = b_out[k]
            if b_in is not None:
                job.limit[k] = b_in[k]
    # Each open side lies between the outer box and the inner limit.  Narrow the brackets with
    # finer curves in the strips between the two, where the true sides lie.  A bracket is about
    # the gap over the sine of the crossing angle, so the next gap is scaled to close the widest
    # bracket at once (and at least divided by 16).
    live = [job for job in jobs if job.curved and not job.empty]
    for _ in range(_PASSES):
        tasks = []
        for job in live:
            open_ = [k for k in range(4) if abs(job.limit[k] - job.box[k]) > TOLERANCE]
            if not open_:
                continue
            windows = [_strip(job.box, job.limit[k], k) for k in open_]
            focus = np.sort(np.array(windows).reshape(-1, 2, 2), axis=1).reshape(-1, 4)
            widest = max(abs(job.limit[k] - job.box[k]) for k in open_)
            job.gap = min(job.gap / 16.0, job.gap * TOLERANCE / (2.0 * widest))
            tasks.extend((job, k, w, job.gap, focus) for k, w in zip(open_, focus))
        if not tasks:
            break
        for (job, k, _, _, _), (inner, outer) in zip(tasks, _seen_many(tasks)):
            _narrow(job.box, job.limit, k, inner, outer)
    for job in jobs:
        box = job.box
        out[job.index] = None if job.empty or not (box[0] < box[2] and box[1] < box[3]) else box
    return out


def _strip(outer_box: np.ndarray, inner_side: float, k: int) -> np.ndarray:
    """The part of ``outer_box`` beyond ``inner_side`` on side ``k`` (0 left, 1 top, 2 right, 3 bottom)."""
    w = outer_box.copy()
    w[(k + 2) % 4] = inner_side
    return w


class _Job:
    """One object's visible box in the making: its brackets per side and its polygons."""

    __slots__ = ("shape", "stroke", "near", "near_boxes", "exact", "known", "open_", "box", "limit",
                 "curved", "empty", "gap", "memo", "index")

    @classmethod
    def start(cls, shape: Shape, stroke: float, above, height: int, width: int, exact, inside):
        """A job, or the answer itself (a box or None) when no polygon arithmetic is needed.

        One object at a time; :func:`visible_boxes` runs the two halves,
        :meth:`meeting` and :meth:`begin`, with the side tests of all objects together.
        """
        first = cls.meeting(shape, above, height, width, exact)
        if not isinstance(first, tuple):
            return first
        return cls.begin(shape, stroke, first, _sides_in_view(shape, first[2], height, width), inside)

    @staticmethod
    def meeting(shape: Shape, above, height: int, width: int, exact):
        """``(exact, unclipped box, shapes above that meet the exact box)``, or the answer itself."""
        gb = shapes_mod.shape_geometry(shape).box
        on_canvas = gb[0] >= 0.0 and gb[1] >= 0.0 and gb[2] <= width and gb[3] <= height
        if exact is None:
            exact = np.array(gb) if on_canvas else clipped_box(shape, height, width)
        if exact is None:
            return None
        exact = np.asarray(exact, dtype=np.float64)
        ex0, ey0, ex1, ey1 = exact.tolist()
        near = []
        for upper, up_stroke in above:
            ux0, uy0, ux1, uy1 = shapes_mod.shape_geometry(upper).box
            if ux0 < ex1 and ex0 < ux1 and uy0 < ey1 and ey0 < uy1:
                near.append((upper, float(up_stroke)))
        if not near:
            return exact
        return exact, gb, near

    @classmethod
    def begin(cls, shape: Shape, stroke: float, first, in_view: np.ndarray, inside):
        """The job after :meth:`meeting`, given :func:`_sides_in_view` of the object (or the answer itself)."""
        exact, gb, near = first
        # a side of the exact box that the canvas does not cut is reached when a touch point is in view
        settled = in_view & (exact == np.asarray(gb))
        known = None  # the box `inside`, cut to the exact box
        if inside is not None:
            known = np.concatenate([np.maximum(inside[:2], exact[:2]), np.minimum(inside[2:], exact[2:])])
            settled |= known == exact  # a point in view on that side of the exact box
        if settled.all():
            return exact
        job = cls()
        job.shape, job.stroke, job.near, job.exact, job.known = shape, stroke, near, exact, known
        job.near_boxes = np.array([shapes_mod.shape_geometry(u).box for u, _ in near], dtype=np.float64)  # (K, 4)
        job.open_ = [k for k in range(4) if not settled[k]]
        job.box = exact.copy()  # outer side of each bracket
        job.limit = exact[[2, 3, 0, 1]].copy() if known is None else known.copy()  # inner side (a point in view)
        job.limit[settled] = exact[settled]
        job.curved = job.empty = False
        job.gap = _FIRST_GAP
        job.memo = {}
        return job

    def polygons(self, j: int, gap: float, focus):
        """:func:`region_polygons` of the object (``j`` = -1) or of ``near[j]``; one focus per gap."""
        got = self.memo.get((j, gap))
        if got is None:
            shape, stroke = (self.shape, self.stroke) if j < 0 else self.near[j]
            got = self.memo[j, gap] = region_polygons(shape, stroke, gap=gap, focus=focus)
        return got


def _seen_many(tasks) -> list:
    """Inner and outer parts in view of each task's object within its window, as ``(inner, outer)`` pairs.

    A task is ``(job, side, window (4,), gap, focus)``.  The inner part is None
    when both are the region itself (polygons only).  Only the shapes above
    whose polygons meet the region in the window are subtracted, in their
    order; the polygon arithmetic of all tasks runs a step at a time.
    """
    import shapely

    n = len(tasks)
    if n == 0:
        return []
    windows = np.array([t[2] for t in tasks], dtype=np.float64).reshape(n, 4)
    rects = shapely.box(windows[:, 0], windows[:, 1], windows[:, 2], windows[:, 3])
    own = [job.polygons(-1, gap, focus) for job, _, _, gap, focus in tasks]
    a_out = _objects([p[1] for p in own])
    outer = shapely.intersection(a_out, rects)
    inner = np.full(n, None, dtype=object)
    curved = np.array([p[0] is not p[1] for p in own], dtype=bool)
    if curved.any():
        inner[curved] = shapely.intersection(_objects([p[0] for p, c in zip(own, curved.tolist()) if c]), rects[curved])
    # the shapes above whose boxes meet the box of what is left in each window
    ob = shapely.bounds(outer)  # (n, 4), NaN where empty
    pairs_t, pairs_j = [], []
    for t, (job, _, _, _, _) in enumerate(tasks):
        b = ob[t]
        if np.isnan(b[0]):
            continue
        nb = job.near_boxes
        cand = np.flatnonzero((nb[:, 0] < b[2]) & (b[0] < nb[:, 2]) & (nb[:, 1] < b[3]) & (b[1] < nb[:, 3]))
        pairs_t.extend([t] * cand.size)
        pairs_j.extend(cand.tolist())
    pt = np.array(pairs_t, dtype=np.int64)
    pj = pairs_j
    if pt.size:
        # finer polygons only for the shapes that meet the outer part: a shape whose first (cached)
        # outer polygon misses it is not in view there at all
        fine = np.array([tasks[t][3] != _FIRST_GAP for t in pairs_t], dtype=bool)
        if fine.any():
            coarse = _objects([tasks[t][0].polygons(j, _FIRST_GAP, None)[1] for t, j, f in zip(pairs_t, pj, fine.tolist()) if f])
            keep = np.ones(pt.size, dtype=bool)
            keep[fine] = shapely.intersects(outer[pt[fine]], coarse)
            pt = pt[keep]
            pj = [j for j, k in zip(pj, keep.tolist()) if k]
    if pt.size:
        ups = [tasks[t][0].polygons(j, tasks[t][3], tasks[t][4]) for t, j in zip(pt.tolist(), pj)]
        u_in = _objects([u[0] for u in ups])
        u_out = _objects([u[1] for u in ups])
        u_curved = np.array([u[0] is not u[1] for u in ups], dtype=bool)
        # a shape whose outer polygon misses the outer part misses the inner part (inside it) too
        hit = shapely.intersects(outer[pt], u_out)
        pt, u_in, u_out, u_curved = pt[hit], u_in[hit], u_out[hit], u_curved[hit]
        # step r subtracts each task's r-th shape (pairs are grouped by task, in order)
        rank = np.arange(pt.size) - np.searchsorted(pt, pt, side="left")
        done = np.zeros(n, dtype=bool)  # nothing left in view: later shapes are skipped
        for r in range(int(rank.max()) + 1 if rank.size else 0):
            sel = np.flatnonzero(rank == r)
            sel = sel[~done[pt[sel]]]
            if sel.size == 0:
                break
            ts = pt[sel]
            start = sel[(inner[ts] == None) & u_curved[sel]]  # noqa: E711 - an object array
            inner[pt[start]] = outer[pt[start]]  # from here on the inner and outer parts differ
            outer[ts] = shapely.difference(outer[ts], u_in[sel])
            both = sel[inner[ts] != None]  # noqa: E711
            if both.size:
                inner[pt[both]] = shapely.difference(inner[pt[both]], u_out[both])
            done[ts] = shapely.is_empty(outer[ts])
    return list(zip(inner.tolist(), outer.tolist()))


def _objects(items) -> np.ndarray:
    """A 1-d object array of ``items`` (geometries), never broadcast into more dimensions."""
    out = np.empty(len(items), dtype=object)
    out[:] = items
    return out
def _narrow(box: np.ndarray, limit: np.ndarray, k: int, inner, outer) -> None:
    """Side ``k`` of the bracket ``limit`` (inner, a point in view) .. ``box`` (outer), from a look at its strip.

    ``inner`` and ``outer`` are the parts in view that :func:`_seen_many`
    found in the strip between ``box[k]`` and ``limit[k]`` (``inner`` None
    when the outer part is exact).  Nothing of the outer part there:
    nothing in view lies beyond the inner limit, which is then the side.
    """
    low = k < 2  # left and top sides are minima
    b_out = _bounds(outer)
    if b_out is None:
        box[k] = limit[k]
        return
    box[k] = min(limit[k], b_out[k]) if low else max(limit[k], b_out[k])
    if inner is None:  # exact: the bracket is closed
        limit[k] = box[k]
        return
    b_in = _bounds(inner)
    if b_in is not None:
        limit[k] = min(limit[k], b_in[k]) if low else max(limit[k], b_in[k])
