"""Tests for synthgen.scene.visible: the visible box of a partly hidden object, from the geometry."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely

from synthgen.scene.shapes import KINDS, Shape, natural_aspect
from synthgen.scene.visible import TOLERANCE, region_polygons, visible_box, visible_boxes
from tests import _visible_reference as reference


def square(cx, cy, side):
    return Shape("rectangle", float(cx), float(cy), float(side))


def circle(cx, cy, radius, kind="ellipse", hole=0.5):
    return Shape(kind, float(cx), float(cy), 2.0 * radius, inner=hole)


# --------------------------------------------------------------------------- hand cases


def test_thin_triangle_keeps_its_apex_in_view():
    """A thin triangle half hidden at the bottom keeps its apex: [30.125, 10, 33.875, 35] (worked by hand).

    Apex (32, 10), base 6 px wide at y = 50; the square's top edge y = 35 cuts the triangle
    25/40 of the way down, where it is 6 * 25/40 = 3.75 px wide (similar triangles).
    """
    tri = Shape("triangle", 32.0, 30.0, 40.0, aspect=0.15)
    got = visible_box(tri, [(square(32, 45, 20), 0.0)], 64, 64)
    np.testing.assert_allclose(got, [30.125, 10.0, 33.875, 35.0], rtol=0, atol=1e-12)


def test_nothing_above_gives_the_exact_box():
    """With no shape over it, the visible box is the exact box."""
    e = Shape("ellipse", 30.3, 20.7, 17.0, aspect=1.7, angle=33.0)
    far = square(60, 60, 4)
    assert visible_box(e, [(far, 0.0)], 80, 80).tolist() == visible_box(e, [], 80, 80).tolist()
    np.testing.assert_allclose(visible_box(e, [], 80, 80), reference.visible(e, 0.0, [], 80, 80), atol=1e-4)


def test_fully_covered_shape_has_no_visible_box():
    """A shape inside a bigger filled shape above it is not in view at all."""
    assert visible_box(circle(30, 30, 5), [(square(30, 30, 20), 0.0)], 64, 64) is None


def test_hidden_rectangle_corners_leave_an_exact_box():
    """Squares over two corners of [10, 10, 30, 20] leave every side in view; a wall over its left end cuts it."""
    low = Shape("rectangle", 20.0, 15.0, 20.0, aspect=2.0)  # [10, 10, 30, 20]
    left, right = square(10, 10, 6), square(30, 20, 8)  # hide [7, 7, 13, 13] and [26, 16, 34, 24]
    assert visible_box(low, [(left, 0.0), (right, 0.0)], 40, 40).tolist() == [10.0, 10.0, 30.0, 20.0]
    wall = Shape("rectangle", 8.0, 15.0, 20.0, aspect=0.3)  # [5, 5, 11, 25]: hides x < 11
    assert visible_box(low, [(wall, 0.0), (right, 0.0)], 40, 40).tolist() == [11.0, 10.0, 30.0, 20.0]


def test_circle_cut_by_a_wall_ends_where_the_wall_crosses_it():
    """A circle (r = 10 at (30, 30)) right of x = 24 hidden: y = 30 +- sqrt(10^2 - 6^2) = 22, 38 (Pythagoras)."""
    wall = Shape("rectangle", 34.0, 30.0, 40.0, aspect=0.5)  # [24, 10, 44, 50]
    got = visible_box(circle(30, 30, 10), [(wall, 0.0)], 64, 64)
    true = np.array([20.0, 22.0, 24.0, 38.0])
    assert np.all(np.abs(got - true) <= TOLERANCE)
    assert np.all(got[:2] <= true[:2] + 1e-12) and np.all(got[2:] >= true[2:] - 1e-12)  # never inside


def test_ring_cut_by_a_wall():
    """A ring (r = 10, hole 5) right of x = 27 hidden: y = 30 +- sqrt(100 - 9) on the outer circle (Pythagoras)."""
    wall = Shape("rectangle", 37.0, 30.0, 40.0, aspect=0.5)  # [27, 10, 47, 50]
    got = visible_box(circle(30, 30, 10, "ring"), [(wall, 0.0)], 64, 64)
    h = math.sqrt(91.0)
    np.testing.assert_allclose(got, [20.0, 30.0 - h, 27.0, 30.0 + h], rtol=0, atol=TOLERANCE)


def test_visible_box_under_a_circle_crossing():
    """A square under a disc: corners in view keep its box; with them hidden, its top is a crossing (Pythagoras)."""
    low = square(30, 30, 20)  # [20, 20, 40, 40]
    disc = circle(30, 14, 10)  # covers y <= 14 + sqrt(100 - dx^2) near the top edge
    # the top edge y = 20 is hidden where |x - 30| < sqrt(100 - 36) = 8; the corners (20, 20)
    # and (40, 20) stay in view, so the box is the whole square
    assert np.allclose(visible_box(low, [(disc, 0.0)], 64, 64), [20, 20, 40, 40], atol=1e-12)
    # a wider disc hides the top corners: the top side is where the circle meets x = 20
    big = circle(30, 8, 17)  # reaches down to y = 8 + sqrt(289 - 100) = 21.748 at x = 20
    got = visible_box(low, [(big, 0.0)], 64, 64)
    top = 8.0 + math.sqrt(289.0 - 100.0)
    np.testing.assert_allclose(got, [20.0, top, 40.0, 40.0], rtol=0, atol=TOLERANCE)
    assert got[1] <= top + 1e-12


def test_outline_band_shows_through_a_filled_shape():
    """An outline-only square keeps its box under a square inside its hole, and under an outline whose hole shows it."""
    frame = square(30, 30, 20)
    inside = square(30, 30, 12)  # covers only the hole and nothing of the 2 px frame
    assert visible_box(frame, [(inside, 0.0)], 64, 64, stroke=2.0).tolist() == [20.0, 20.0, 40.0, 40.0]
    # an outline above hides only its band: the frame's top is above it, its sides and bottom show
    # through its hole
    upper = square(30, 40, 30)  # outline [15, 25, 45, 55] with a 3 px band: its hole is [18, 28, 42, 52]
    assert visible_box(frame, [(upper, 3.0)], 64, 64, stroke=2.0).tolist() == [20.0, 20.0, 40.0, 40.0]


def test_cut_by_the_canvas_and_hidden():
    """A diamond over the left border, its right part hidden: the box of what is left on the canvas.

    The diamond is |x + 3| + |y - 20| <= 10; on the canvas (x >= 0) and left of the wall (x < 5) its
    widest column is x = 0, where |y - 20| <= 7.
    """
    low = Shape("rectangle", -3.0, 20.0, 20.0, angle=45.0)
    wall = Shape("rectangle", 10.0, 20.0, 40.0, aspect=0.25)  # [5, 0, 15, 40]
    got = visible_box(low, [(wall, 0.0)], 40, 40)
    np.testing.assert_allclose(got, [0.0, 13.0, 5.0, 27.0], rtol=0, atol=1e-12)


# --------------------------------------------------------------------------- random scenes


def _scene_shapes(rng, n, width, height, kinds=KINDS, outline=0.4):
    """Random shapes and outline bands, as the config's ranges allow, dense enough to hide each other."""
    shapes, strokes = [], []
    for _ in range(n):
        kind = str(rng.choice(kinds))
        sides = int(rng.integers(5, 9))
        inner = float(rng.uniform(0.3, 0.55))
        size = float(np.exp(rng.uniform(np.log(3.0), np.log(60.0))))
        aspect = float(np.exp(rng.uniform(np.log(0.5), np.log(2.0)))) * natural_aspect(kind, sides, inner)
        shape = Shape(kind, float(rng.uniform(-5, width + 5)), float(rng.uniform(-5, height + 5)), size, aspect,
                      float(rng.uniform(0, 360)), sides, inner)
        shapes.append(shape)
        thin = min(size, size * aspect) / 8.0
        strokes.append(float(min(rng.uniform(0.5, 4.0), max(thin, 0.5))) if rng.random() < outline else 0.0)
    return shapes, strokes


def _points_in_view(shape, stroke, above, height, width):
    """Box of a point inside each part of the visible part (shapely reference), or None: a box known to be in view."""
    part = reference.region(shape, stroke).intersection(shapely.box(0, 0, width, height))
    if above:
        part = part.difference(shapely.union_all([reference.region(u, s) for u, s in above]))
    pieces = [p for p in shapely.get_parts(part) if p.area > 0]
    if not pieces:
        return None
    pts = np.array([p.representative_point().coords[0] for p in pieces])
    return np.concatenate([pts.min(axis=0), pts.max(axis=0)])


def _check_scene(shapes, strokes, height, width, atol):
    """Each shape's visible box under the later ones against the reference, with and without a box known in view.

    All shapes are also measured together (visible_boxes), which must give the same boxes as one at a time.
    """
    checked = 0
    items = []
    for i, (shape, stroke) in enumerate(zip(shapes, strokes)):
        above = list(zip(shapes[i + 1 :], strokes[i + 1 :]))
        want = reference.visible(shape, stroke, above, height, width)  # reference: shapely, built independently
        inside = _points_in_view(shape, stroke, above, height, width) if want is not None else None
        for hint in (None, inside):
            got = visible_box(shape, above, height, width, stroke=stroke, inside=hint)
            if want is None or got is None:
                assert want is None and got is None, (shape, stroke, got, want)
                continue
            assert np.all(np.abs(got - want) <= atol), (shape, stroke, hint, got, want)
        items.append((shape, stroke, above, None, inside))
        checked += want is not None
    together = visible_boxes(items, height, width)
    for (shape, stroke, above, _, inside), got in zip(items, together):
        alone = visible_box(shape, above, height, width, stroke=stroke, inside=inside)
        assert (got is None and alone is None) or np.array_equal(got, alone)
    return checked


def test_polygon_scenes_are_exact():
    """Heavily overlapping polygon kinds (filled, and outlined convex ones): boxes equal shapely's to 1e-9."""
    rng = np.random.default_rng(12)
    checked = 0
    for _ in range(6):
        shapes, strokes = _scene_shapes(rng, 12, 60, 50, kinds=("rectangle", "triangle", "polygon", "star", "cross"))
        strokes = [s if sh.kind in ("rectangle", "triangle", "polygon") else 0.0 for sh, s in zip(shapes, strokes)]
        checked += _check_scene(shapes, strokes, 50, 60, 1e-9)
    assert checked >= 50


def test_curved_scenes_are_within_the_tolerance():
    """Heavily overlapping shapes of every kind and style: boxes within TOLERANCE of shapely's dense polygons."""
    rng = np.random.default_rng(5)
    checked = 0
    for _ in range(6):
        shapes, strokes = _scene_shapes(rng, 12, 60, 50)
        checked += _check_scene(shapes, strokes, 50, 60, TOLERANCE + 1e-4)
    assert checked >= 50


@pytest.mark.parametrize("kind", KINDS)
def test_region_polygons_enclose_the_region(kind):
    """Inner polygons lie inside the drawn region and outer ones hold it (shapely, dense reference)."""
    rng = np.random.default_rng(KINDS.index(kind))
    for stroke in (0.0, 1.5, 4.0):
        shape = Shape(kind, 40.0, 30.0, float(rng.uniform(10, 60)), float(rng.uniform(0.6, 1.6)),
                      float(rng.uniform(0, 360)), int(rng.integers(5, 9)), float(rng.uniform(0.3, 0.55)))
        true = reference.region(shape, stroke)
        inner, outer = region_polygons(shape, stroke)
        # the dense reference is itself inscribed (within 2e-5 px), hence the small slack
        assert inner.difference(true.buffer(1e-4)).area < 1e-9
        assert true.difference(outer.buffer(1e-4)).area < 1e-9
        assert shapely.hausdorff_distance(inner, outer) <= 0.05
