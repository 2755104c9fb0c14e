"""Shape kinds that can be told apart by their pixels.

Every kind is defined so that no choice of its parameters draws the outline of
another kind (the shapes themselves are described in :mod:`synthgen.scene.shapes`; :data:`KIND_TABLE` holds one entry per kind):

* rectangle: four right-angled corners, the only convex kind with four;
* ellipse: no corner (a polygon keeps corners of at most 135 degrees);
* triangle: three corners (polygons start at five sides);
* polygon: :data:`SIDES` = 5 to 8 sides (``objects.sides``): 3 would be a
  triangle, 4 a rectangle turned 45 degrees, many an ellipse;
* star: :data:`POINTS` = 5 to 8 points (``objects.points``) with inner / outer
  radius :data:`STAR_INNER` = 0.3 to 0.55 (``objects.inner``), so it is at most
  0.68 solid (area over convex hull; every convex kind is 1): fuller stars are
  polygons, 4 points make a cross and 3 a triangle;
* ring: hole :data:`RING_HOLE` = 0.3 to 0.6 of its size (``objects.hole``), the
  only filled kind with a hole; smaller holes vanish, bigger ones make an
  outlined ellipse; never drawn outline-only (that would be two nested rings);
* cross: bars :data:`CROSS_BAR` = 0.2 to 0.4 of its length thick
  (``objects.bar``), 0.53 to 0.78 solid with four arms: thicker bars make an
  octagon, thinner ones two lines.

A config may narrow these ranges, never widen them.  The outline-only style
draws a band at most :data:`OUTLINE_SHARE` (1/8) of the shape's breadth (the
shorter side of its own box, before rotation) thick, so its hole spans at
least three quarters of the shape on both axes while a ring's spans at most
0.6: an outlined ellipse is never a ring.  Fills (flat, gradient, stripes)
change no silhouette: both colours of a fill keep ``objects.min_contrast`` from
what lies under the object.

Below some size any kind is a blob.  :data:`IDENTIFIABLE_BREADTH` holds, per kind
and style, the smallest breadth at which simple shape descriptors tell the kind
from every other kind on rendered samples; :func:`identifiable` is the
per-object fact built on it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from synthgen.config import CROSS_BAR, POINTS, RING_HOLE, SIDES, STAR_INNER
from synthgen.scene import shapes as shapes_mod
from synthgen.scene.shapes import Shape, natural_aspect, trusted_shape

__all__ = [
    "SIDES",
    "POINTS",
    "STAR_INNER",
    "RING_HOLE",
    "CROSS_BAR",
    "OUTLINE_SHARE",
    "MEASURED_ASPECT",
    "MEASURED_STROKE",
    "IDENTIFIABLE_BREADTH",
    "Kind",
    "KIND_TABLE",
    "category_id",
    "parameter_ranges",
    "outlined",
    "breadth",
    "stroke_limit",
    "identifiable",
    "sample_objects",
]

OUTLINE_SHARE = 0.125
"""Largest outline band, as a share of the shape's breadth (outline-only style)."""

MEASURED_ASPECT = (0.25, 4.0)
"""Aspects (relative to the kind's natural proportions) over which :data:`IDENTIFIABLE_BREADTH` was measured."""

MEASURED_STROKE = 1.0
"""Thinnest outline band (px) over which :data:`IDENTIFIABLE_BREADTH` was measured."""


@dataclass(frozen=True)
class Kind:
    """One shape kind: its category id, the config keys that sample its parameters, and what keeps it identifiable.

    The outline itself is drawn by :mod:`synthgen.scene.shapes` (its builder for the kind).

    Parameters
    ----------
    name : str
        As in ``objects.shapes``.
    category : int
        Stable COCO category id; a new kind takes the next free one.
    count : str or None
        The :class:`~synthgen.config.ObjectSpec` field whose whole-number range gives ``Shape.sides``
        (polygon sides, star points); None: the kind has no such parameter (``sides`` stays 5).
    ratio : str or None
        The field whose range gives ``Shape.inner`` (star inner radius, ring hole, cross bar);
        None: ``inner`` stays 0.5.
    count_limits, ratio_limits : (number, number) or None
        The widest ranges of ``sides`` and ``inner`` that keep the kind apart from the others.
    outline : bool
        Whether the kind may be drawn outline-only.
    breadth : (float, float or None)
        :data:`IDENTIFIABLE_BREADTH` filled and outline-only (None when never outlined).
    """

    name: str
    category: int
    count: str | None = None
    ratio: str | None = None
    count_limits: tuple[int, int] | None = None
    ratio_limits: tuple[float, float] | None = None
    outline: bool = True
    breadth: tuple[float, float | None] = (0.0, 0.0)


# Smallest breadth (px) at which each kind, filled (False) or outline-only (True), is told from
# every other kind.  Measured by `python tools/measure_identifiable.py --per-class 40 --seed 1`
# (about half an hour on one core): objects of every kind, style and parameter range above, aspect
# in MEASURED_ASPECT, any rotation, outline bands from MEASURED_STROKE to OUTLINE_SHARE of the
# breadth, rendered alone at 4 x 4 samples per pixel on a ladder of breadths from 3 to 64 px and
# described by scikit-image (regionprops solidity and holes, moment invariants of the silhouette
# that no stretch or rotation changes); a nearest-centroid classifier trained on objects at or
# above these breadths labels every held-out object at or above them, and every object of two
# fresh sets in a row, with its own kind.
KIND_TABLE: dict[str, Kind] = {
    k.name: k
    for k in (
        Kind("rectangle", 1, breadth=(5.0, 8.0)),
        Kind("ellipse", 2, breadth=(14.0, 16.0)),
        Kind("triangle", 3, breadth=(3.0, 8.0)),
        Kind("polygon", 4, count="sides", count_limits=SIDES, breadth=(6.0, 8.0)),
        Kind("star", 5, count="points", ratio="inner", count_limits=POINTS, ratio_limits=STAR_INNER, breadth=(14.0, 12.0)),
        Kind("ring", 6, ratio="hole", ratio_limits=RING_HOLE, outline=False, breadth=(12.0, None)),
        Kind("cross", 7, ratio="bar", ratio_limits=CROSS_BAR, breadth=(20.0, 12.0)),
    )
}
"""Every shape kind, in :data:`synthgen.config.KINDS` order (a test holds the two equal)."""

#: (kind, outline-only) -> smallest identifiable breadth (px), from :data:`KIND_TABLE`.
IDENTIFIABLE_BREADTH: dict[tuple[str, bool], float] = {
    **{(k.name, False): k.breadth[0] for k in KIND_TABLE.values()},
    **{(k.name, True): k.breadth[1] for k in KIND_TABLE.values() if k.breadth[1] is not None},
}


def category_id(kind: str) -> int:
    """Stable COCO category id of a shape kind (:attr:`Kind.category`).

    Examples
    --------
    >>> category_id("rectangle"), category_id("cross")
    (1, 7)
    """
    return KIND_TABLE[kind].category


def parameter_ranges(spec) -> tuple[dict, dict]:
    """``(count ranges, ratio ranges)``: kind -> the range of ``spec`` (an ObjectSpec) its parameters come from."""
    counts = {k.name: getattr(spec, k.count) for k in KIND_TABLE.values() if k.count}
    ratios = {k.name: getattr(spec, k.ratio) for k in KIND_TABLE.values() if k.ratio}
    return counts, ratios


def outlined(kind: str) -> bool:
    """Whether ``kind`` may be drawn outline-only (a ring's outline would be two nested rings)."""
    return KIND_TABLE[kind].outline


def breadth(shape: Shape) -> float:
    """The shorter side (px) of the shape's own box, before rotation.

    Examples
    --------
    >>> breadth(Shape("rectangle", 0.0, 0.0, 20.0, aspect=0.5, angle=30.0))  # doctest: +ELLIPSIS
    8.96...
    """
    return min(shapes_mod.own_size(shape))


def stroke_limit(size: float, aspect: float) -> float:
    """Thickest outline band (px) for a shape of ``size`` and (absolute) ``aspect``.

    At most :data:`OUTLINE_SHARE` of the shape's breadth, which is at least
    ``size * min(aspect, 1) / sqrt(1 + aspect^2)`` (the turned box's longer side
    is at most the own box's diagonal), so this needs no geometry; bands are
    never thinner than 0.5 px, however small the shape.
    """
    return max(OUTLINE_SHARE * size * min(aspect, 1.0) / math.sqrt(1.0 + aspect * aspect), 0.5)


def _within(value, bounds) -> bool:
    return bounds[0] <= value <= bounds[1]


def identifiable(shape: Shape, stroke: float = 0.0) -> bool:
    """Whether the kind of ``shape`` (drawn with outline band ``stroke`` px, 0: filled) can be told from its pixels.

    True when its parameters lie in its kind's ranges, its aspect and outline
    band lie in the measured ranges, and its breadth is at least
    :data:`IDENTIFIABLE_BREADTH` of its kind and style.  Occlusion and the
    canvas border are not considered (see the ``visible_fraction`` and
    ``truncated`` facts).

    Examples
    --------
    >>> identifiable(Shape("ellipse", 0.0, 0.0, 40.0))
    True
    >>> identifiable(Shape("ellipse", 0.0, 0.0, 3.0))
    False
    >>> identifiable(Shape("polygon", 0.0, 0.0, 40.0, sides=3))  # a triangle by any other name
    False
    """
    kind = shape.kind
    entry = KIND_TABLE[kind]
    if entry.count_limits is not None and not _within(shape.sides, entry.count_limits):
        return False
    if entry.ratio_limits is not None and not _within(shape.inner, entry.ratio_limits):
        return False
    if stroke > 0.0 and not entry.outline:
        return False
    relative = shape.aspect / natural_aspect(kind, shape.sides, shape.inner)
    if not _within(relative, MEASURED_ASPECT):
        return False
    b = breadth(shape)
    if stroke > 0.0 and not (MEASURED_STROKE <= stroke <= OUTLINE_SHARE * b * (1.0 + 1e-9)):
        return False
    return b >= IDENTIFIABLE_BREADTH[(kind, stroke > 0.0)]


# --------------------------------------------------------------------------- sampling


def sample_objects(config, rng: np.random.Generator, n: int | None = None, kinds=None):
    """Draw each object's shape parameters and paint style, all centred at the origin.

    Each kind's own parameters come from its range in the config (polygon sides,
    star points and inner ratio, ring hole, cross bar; :mod:`synthgen.scene.kinds`).
    ``kinds`` (names) replaces ``objects.shapes`` as the kinds to draw from.
    """
    spec = config.objects
    if n is None:
        n = int(rng.integers(spec.count[0], spec.count[1] + 1))
    pool = spec.shapes if kinds is None else tuple(kinds)
    picks = rng.choice(len(pool), size=n)
    lo, hi = spec.size
    if spec.size_law == "log-uniform":
        sizes = np.exp(rng.uniform(np.log(lo), np.log(hi), size=n))
    else:
        sizes = rng.uniform(lo, hi, size=n)
    aspects = np.exp(rng.uniform(np.log(spec.aspect[0]), np.log(spec.aspect[1]), size=n))
    angles = rng.uniform(0.0, 360.0, size=n) if spec.rotate else np.zeros(n)
    counts = rng.random(size=n)  # where in its kind's range of sides or points
    ratios = rng.random(size=n)  # where in its kind's range of inner, hole or bar ratio
    fills = rng.choice(len(spec.fills), size=n)
    outline = rng.random(size=n) < spec.outline
    strokes = rng.uniform(spec.stroke[0], spec.stroke[1], size=n)
    fill_angles = rng.uniform(0.0, 180.0, size=n)
    periods = rng.uniform(2.0, 8.0, size=n)
    names = [pool[k] for k in picks.tolist()]
    count_range, ratio_range = parameter_ranges(spec)
    sides = [_whole_in(count_range[k], u) if k in count_range else 5 for k, u in zip(names, counts.tolist())]
    inner = [_at_in(ratio_range[k], u) if k in ratio_range else 0.5 for k, u in zip(names, ratios.tolist())]
    # Plain Python values (the same floats as float(array[i])); the config's ranges
    # already guarantee what Shape checks, so shapes are built without re-checking
    # unless a value is off (then Shape raises its usual error).
    trusted = bool(
        n == 0
        or (np.isfinite(sizes).all() and (sizes > 0).all() and np.isfinite(aspects).all() and (aspects > 0).all()
            and np.isfinite(angles).all() and 0 < min(inner) and max(inner) < 1 and min(sides) >= 3)
    )
    make = trusted_shape if trusted else Shape
    fill_names = [spec.fills[k] for k in fills.tolist()]
    shapes, styles = [], []
    for kind, size, asp, angle, side, inr, is_outline, fill, stroke, fill_angle, period in zip(
        names, sizes.tolist(), aspects.tolist(), angles.tolist(), sides, inner,
        outline.tolist(), fill_names, strokes.tolist(), fill_angles.tolist(), periods.tolist(),
    ):
        # objects.aspect stretches a kind's natural proportions: 1 keeps polygons and stars regular
        shape = make(kind, 0.0, 0.0, size, asp * natural_aspect(kind, side, inr), angle, side, inr)
        shapes.append(shape)
        is_outline = is_outline and outlined(kind)  # rings are always filled (synthgen.scene.kinds)
        styles.append(
            {
                "fill": "flat" if is_outline else fill,
                "outline": is_outline,
                "stroke": float(min(stroke, stroke_limit(size, shape.aspect))) if is_outline else 0.0,
                "fill_angle": fill_angle,
                "period": float(max(period, size / 8.0)),
            }
        )
    return shapes, styles


def _whole_in(bounds, u: float) -> int:
    """The whole number at ``u`` in [0, 1) of the inclusive range ``bounds``, each equally likely."""
    lo, hi = bounds
    return int(lo) + min(int(u * (hi - lo + 1)), int(hi - lo))


def _at_in(bounds, u: float) -> float:
    """The number at ``u`` in [0, 1) of the range ``bounds``."""
    return bounds[0] + u * (bounds[1] - bounds[0])


#: Layouts that read the objects' box sizes.
