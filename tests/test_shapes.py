"""Tests for synthgen.scene.shapes: exact boxes, areas, outlines, coverage and fills."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point, Polygon
from skimage.draw import polygon as draw_polygon
from skimage.measure import label, regionprops

from synthgen.geometry import clip_boxes, mask_box
from synthgen.scene.coverage import Coverage, coverage
from synthgen.scene.raster import paint
from synthgen.scene.shapes import (
    FILLS,
    KINDS,
    Shape,
    clipped_box,
    exact_area,
    exact_box,
    natural_aspect,
    outline,
    sample_inside,
)

POLY_KINDS = ("rectangle", "triangle", "polygon", "star", "cross")
ELLIPTIC = ("ellipse", "ring")


def random_shapes(n: int, seed: int, lo: float = 6.0, hi: float = 80.0, canvas=(120, 160)) -> list[Shape]:
    """Reproducible mixed shapes inside (and across the border of) a canvas."""
    rng = np.random.default_rng(seed)
    h, w = canvas
    out = []
    for i in range(n):
        out.append(
            Shape(
                KINDS[i % len(KINDS)],
                float(rng.uniform(-10, w + 10)),
                float(rng.uniform(-10, h + 10)),
                float(rng.uniform(lo, hi)),
                aspect=float(np.exp(rng.uniform(-0.6, 0.6))),
                angle=float(rng.uniform(0, 360)),
                sides=int(rng.integers(3, 9)),
                inner=float(rng.uniform(0.35, 0.75)),
            )
        )
    return out


def shapely_geometry(shape: Shape, resolution: int = 256) -> Polygon:
    rings = outline(shape, resolution=resolution)
    return Polygon(rings[0], rings[1:])


def perimeter(shape: Shape) -> float:
    """Boundary length (an inscribed ring slightly underestimates an ellipse's, hence 1.01)."""
    return 1.01 * shapely_geometry(shape, 512).length


def full_mask(cov: Coverage) -> np.ndarray:
    h, w = cov.values.shape
    return cov.inside(cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)


shape_strategy = st.builds(
    Shape,
    kind=st.sampled_from(KINDS),
    cx=st.floats(5.0, 95.0),
    cy=st.floats(5.0, 75.0),
    size=st.floats(1.0, 70.0),
    aspect=st.floats(0.6, 1.6),
    angle=st.floats(0.0, 360.0),
    sides=st.integers(3, 6),
    inner=st.floats(0.4, 0.7),
)


# ---------------------------------------------------------------- validation


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"kind": "blob"}, r"Shape.kind must be one of rectangle"),
        ({"size": 0.0}, r"Shape.size must be > 0 px \(got 0.0\)"),
        ({"size": float("nan")}, r"Shape.size must be finite"),
        ({"aspect": -1.0}, r"Shape.aspect must be > 0"),
        ({"inner": 1.0}, r"Shape.inner must be in \(0, 1\)"),
        ({"sides": 2}, r"Shape.sides must be a whole number >= 3 \(got 2\)"),
        ({"sides": 4.5}, r"Shape.sides must be a whole number >= 3"),
        ({"cx": "3"}, r"Shape.cx must be a number"),
    ],
)
def test_shape_rejects_bad_fields(kwargs, message):
    """Each invalid field raises ValueError naming the field, the rule and the value."""
    fields = {"kind": "star", "cx": 0.0, "cy": 0.0, "size": 4.0} | kwargs
    with pytest.raises(ValueError, match=message):
        Shape(**fields)


# ---------------------------------------------------------------- exact boxes


@pytest.mark.parametrize("shape", random_shapes(42, seed=1), ids=lambda s: s.kind)
def test_exact_box_longer_side_is_size_and_centred(shape):
    """The unclipped exact box is centred on (cx, cy) and its longer side is the size."""
    box = exact_box(shape)
    assert max(box[2] - box[0], box[3] - box[1]) == pytest.approx(shape.size, abs=1e-9)
    assert (box[0] + box[2]) / 2 == pytest.approx(shape.cx, abs=1e-9)
    assert (box[1] + box[3]) / 2 == pytest.approx(shape.cy, abs=1e-9)


@pytest.mark.parametrize("angle", [0.0, 10.0, 33.0, 45.0, 90.0, 127.0, 200.0, 301.5])
@pytest.mark.parametrize("aspect", [0.4, 1.0, 2.5])
def test_rotated_ellipse_box_formula(angle, aspect):
    """The ellipse box follows the rotated-ellipse half-extent formula."""
    shape = Shape("ellipse", 50.0, 40.0, 30.0, aspect=aspect, angle=angle)
    box = exact_box(shape)
    a, b = aspect / 2.0, 0.5  # own-frame semi-axes before scaling
    t = math.radians(angle)
    # REFERENCE.md: Geometry: half-extents sqrt(a^2 cos^2 + b^2 sin^2), sqrt(a^2 sin^2 + b^2 cos^2)
    hx = math.sqrt(a * a * math.cos(t) ** 2 + b * b * math.sin(t) ** 2)
    hy = math.sqrt(a * a * math.sin(t) ** 2 + b * b * math.cos(t) ** 2)
    k = 30.0 / (2 * max(hx, hy))
    expected = [50.0 - k * hx, 40.0 - k * hy, 50.0 + k * hx, 40.0 + k * hy]
    np.testing.assert_allclose(box, expected, atol=1e-9)


@pytest.mark.parametrize("shape", random_shapes(28, seed=2), ids=lambda s: s.kind)
def test_outline_matches_box_and_area_in_shapely(shape):
    """shapely's area and bounds of the outline agree with exact_area and exact_box."""
    n = 400
    geom = shapely_geometry(shape, n)
    assert geom.is_valid  # shapely: the rings form a valid simple polygon
    box = exact_box(shape)
    if shape.kind in POLY_KINDS:
        # shapely Polygon.area / .bounds of the exact vertices
        assert geom.area == pytest.approx(exact_area(shape), rel=1e-12)
        np.testing.assert_allclose(geom.bounds, box, atol=1e-9)
    else:
        # n points at equal parametric steps form the affine image of a regular
        # n-gon inscribed in the unit circle: area ratio n sin(2 pi / n) / (2 pi)
        # (REFERENCE.md: Geometry, regular n-gon area).
        ratio = n * math.sin(2 * math.pi / n) / (2 * math.pi)
        assert geom.area == pytest.approx(exact_area(shape) * ratio, rel=1e-12)
        # x(t) = cx + hx cos(t - t0): the sampled extreme falls short by at most hx (1 - cos(pi / n))
        hx, hy = (box[2] - box[0]) / 2, (box[3] - box[1]) / 2
        gap = 1 - math.cos(math.pi / n)
        bx0, by0, bx1, by1 = geom.bounds
        for got, exact, half in ((bx0, box[0], -hx), (by0, box[1], -hy), (bx1, box[2], hx), (by1, box[3], hy)):
            assert 0 <= (exact - got) / math.copysign(1, half) <= abs(half) * gap + 1e-9


@pytest.mark.parametrize("sides", [3, 4, 5, 6, 7, 8, 12])
def test_regular_polygon_area_formula(sides):
    """A polygon at its natural aspect is regular with area n R^2 sin(2 pi / n) / 2."""
    shape = Shape("polygon", 60.0, 60.0, 50.0, aspect=natural_aspect("polygon", sides=sides), sides=sides, angle=13.0)
    ring = outline(shape)[0]
    centre = ring.mean(axis=0)
    radii = np.hypot(*(ring - centre).T)
    np.testing.assert_allclose(radii, radii[0], rtol=1e-12)  # all vertices on one circle: regular
    r = radii[0]
    # REFERENCE.md: Geometry: regular n-gon area n R^2 sin(2 pi / n) / 2
    expected = sides * r * r * math.sin(2 * math.pi / sides) / 2
    assert exact_area(shape) == pytest.approx(expected, rel=1e-12)
    cov = coverage(shape, 120, 120, samples=8)
    assert abs(float(cov.values.sum()) - expected) <= perimeter(shape) / 8


def test_star_at_natural_aspect_is_regular():
    """A star at its natural aspect has its points on one circle and its inner vertices on another."""
    shape = Shape("star", 50.0, 50.0, 60.0, sides=5, inner=0.4, aspect=natural_aspect("star", sides=5, inner=0.4))
    ring = outline(shape)[0]
    # the star's centre is the mean of its five points (a regular pentagon's centroid, analytic geometry)
    centre = ring[0::2].mean(axis=0)
    outer = np.hypot(*(ring[0::2] - centre).T)
    inner = np.hypot(*(ring[1::2] - centre).T)
    np.testing.assert_allclose(outer, outer[0], rtol=1e-12)
    np.testing.assert_allclose(inner, 0.4 * outer[0], rtol=1e-12)


def test_star_area_from_shoelace():
    """A star's area equals the shoelace area of its 2n vertices."""
    shape = Shape("star", 30.0, 30.0, 40.0, sides=7, inner=0.4, aspect=1.3, angle=21.0)
    x, y = outline(shape)[0].T
    # REFERENCE.md: Geometry: shoelace formula for polygon area
    shoelace = 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))
    assert exact_area(shape) == pytest.approx(shoelace, rel=1e-12)


# ---------------------------------------------------------------- point test


@pytest.mark.parametrize("shape", random_shapes(14, seed=3, canvas=(60, 60)), ids=lambda s: s.kind)
def test_point_test_agrees_with_shapely(shape):
    """sample_inside agrees with shapely's contains away from the boundary."""
    rng = np.random.default_rng(4)
    box = exact_box(shape)
    x = rng.uniform(box[0] - 2, box[2] + 2, 2000)
    y = rng.uniform(box[1] - 2, box[3] + 2, 2000)
    geom = shapely_geometry(shape, 2048)
    ours = sample_inside(shape, x, y)
    points = shapely.points(x, y)
    theirs = shapely.contains(geom, points)  # shapely: point-in-polygon reference
    # skip points within the ellipse polygonisation error of the boundary
    far = shapely.distance(geom.boundary, points) > 1e-3 * shape.size
    assert far.sum() > 1500
    np.testing.assert_array_equal(ours[far], theirs[far])


def test_point_test_broadcasts():
    """sample_inside broadcasts x and y like numpy."""
    shape = Shape("ring", 0.0, 0.0, 10.0)
    got = sample_inside(shape, np.array([[0.0], [4.0]]), np.array([0.0, 1.0, 6.0]))
    assert got.shape == (2, 3)
    # ring of outer radius 5, hole radius 2.5 (analytic geometry)
    assert got.tolist() == [[False, False, False], [True, True, False]]
    assert bool(sample_inside(shape, 4.0, 0.0)) and np.ndim(sample_inside(shape, 4.0, 0.0)) == 0
    assert Point(4.0, 0.0).within(shapely_geometry(shape))  # shapely agrees


# ---------------------------------------------------------------- coverage


def test_pixel_aligned_square_covers_sixteen_pixels():
    """A 4x4 pixel-aligned square has coverage sum 16 and mask box width 4."""
    cov = coverage(Shape("rectangle", 5.0, 6.0, 4.0), 12, 12)
    assert (cov.row0, cov.col0, cov.values.shape) == (4, 3, (4, 4))
    assert float(cov.values.sum()) == 16.0
    box = mask_box(cov.values > 0, origin=(cov.col0, cov.row0))
    # STYLE.md (torchvision slip): a 4x4 block has width 4 and area 16
    assert box.tolist() == [3.0, 4.0, 7.0, 8.0]
    assert box[2] - box[0] == 4.0


def test_one_pixel_square_has_width_one():
    """A pixel-aligned one-pixel square covers exactly one pixel."""
    cov = coverage(Shape("rectangle", 2.5, 3.5, 1.0), 8, 8)
    assert cov.values.tolist() == [[1.0]]
    box = mask_box(cov.values > 0, origin=(cov.col0, cov.row0))
    # STYLE.md: a one-pixel shape has width 1
    assert box.tolist() == [2.0, 3.0, 3.0, 4.0]


@settings(max_examples=60, deadline=None)
@given(shape=shape_strategy, samples=st.sampled_from([4, 8]))
def test_regionprops_box_within_one_pixel(shape, samples):
    """regionprops' box of coverage > 0 is the mask box and lies within 1 px of the exact box."""
    # From 4 px up every part of these shapes is at least sqrt(2)/s thick, so it
    # holds a sub-sample (the sample lattice's covering radius is 1/(s sqrt(2))).
    # The shape is moved wholly onto the canvas: a clipped exact box is not the
    # tight box of the clipped shape, so the 1 px promise is for unclipped shapes.
    move = {"size": max(shape.size, 4.0), "cx": shape.cx / 10 + 45, "cy": shape.cy / 10 + 35}
    shape = replace(shape, **move)
    cov = coverage(shape, 80, 100, samples=samples)
    support = cov.values > 0
    assert support.any()
    props = regionprops(support.astype(np.uint8))  # scikit-image: one label, half-open bbox
    assert len(props) == 1
    r0, c0, r1, c1 = props[0].bbox
    pixel_box = mask_box(support, origin=(cov.col0, cov.row0))
    assert pixel_box.tolist() == [c0 + cov.col0, r0 + cov.row0, c1 + cov.col0, r1 + cov.row0]
    exact = clip_boxes(exact_box(shape), 100, 80)[0]
    assert np.all(np.abs(pixel_box - exact) <= 1.0)
    # the pixel box never reaches past the pixels the exact box touches
    assert pixel_box[0] >= math.floor(exact[0]) and pixel_box[2] <= math.ceil(exact[2])
    assert pixel_box[1] >= math.floor(exact[1]) and pixel_box[3] <= math.ceil(exact[3])


@pytest.mark.parametrize(
    "shape",
    [s for s in random_shapes(28, seed=11, lo=8, hi=90, canvas=(60, 60)) if s.kind in POLY_KINDS],
    ids=lambda s: s.kind,
)
def test_one_sample_per_pixel_matches_skimage_polygon_fill(shape):
    """At samples=1 a polygon kind covers the pixels scikit-image's polygon fill selects."""
    shape = replace(shape, cx=shape.cx + 10, cy=shape.cy + 10)
    cov = coverage(shape, 80, 80, samples=1)
    ring = outline(shape)[0]
    # scikit-image.draw.polygon tests pixel centres, which sit at integer (row, col): shift by 1/2
    rr, cc = draw_polygon(ring[:, 1] - 0.5, ring[:, 0] - 0.5, shape=(80, 80))
    theirs = np.zeros((80, 80), dtype=bool)
    theirs[rr, cc] = True
    ours = np.zeros((80, 80), dtype=bool)
    h, w = cov.values.shape
    ours[cov.row0 : cov.row0 + h, cov.col0 : cov.col0 + w] = cov.values > 0
    # leave out pixel centres within 1e-6 px of the outline, where edge rules differ
    yc, xc = np.mgrid[0:80, 0:80] + 0.5
    near = shapely.distance(shapely.points(xc.ravel(), yc.ravel()), shapely.LinearRing(ring)).reshape(80, 80) < 1e-6
    np.testing.assert_array_equal(ours[~near], theirs[~near])


def test_connected_shapes_give_one_component():
    """Each unclipped convex or star-shaped kind renders as one 8-connected component."""
    for shape in random_shapes(21, seed=5, lo=10, hi=50, canvas=(200, 200)):
        shape = replace(shape, cx=100.0, cy=100.0)
        cov = coverage(shape, 200, 200)
        # scikit-image label, 8-connectivity
        assert label(cov.values > 0, connectivity=2).max() == 1, shape


@settings(max_examples=50, deadline=None)
@given(shape=shape_strategy, samples=st.sampled_from([4, 8]))
def test_coverage_sum_matches_area(shape, samples):
    """The coverage sum equals the analytic area within the sampling bound perimeter / s."""
    shape = replace(shape, cx=shape.cx / 10 + 55, cy=shape.cy / 10 + 45)
    cov = coverage(shape, 100, 120, samples=samples)  # the whole shape is on the canvas
    # Each unit of boundary crosses about s sample rows and s columns, and each
    # crossing miscounts at most one sample of area 1/s^2: |error| <~ perimeter / s
    # (common practice: midpoint-rule error of supersampled area).
    assert abs(float(cov.values.sum()) - exact_area(shape)) <= perimeter(shape) / samples


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("size", [1.0, 2.0, 3.0, 4.0, 8.0])
def test_small_sizes_render_with_exact_box(kind, size):
    """Shapes of 1-8 px render inside their exact box, non-empty where thick enough."""
    shape = Shape(kind, 10.3, 9.6, size, aspect=1.2, angle=25.0, inner=0.5)
    box = exact_box(shape)
    assert max(box[2] - box[0], box[3] - box[1]) == pytest.approx(size, abs=1e-9)
    cov = coverage(shape, 20, 20, samples=4)
    assert cov.values.shape == (
        math.ceil(box[3]) - math.floor(box[1]),
        math.ceil(box[2]) - math.floor(box[0]),
    )
    assert float(cov.values.sum()) > 0
    pixel_box = mask_box(cov.values > 0, origin=(cov.col0, cov.row0))
    assert np.all(np.abs(pixel_box - box) <= 1.0)
    assert abs(float(cov.values.sum()) - exact_area(shape)) <= perimeter(shape) / 4


@pytest.mark.parametrize("samples", [1, 3, 4, 8])
@pytest.mark.parametrize("stroke", [0.0, 1.5])
def test_values_are_block_means_of_inside(samples, stroke):
    """values equal the per-pixel means of inside() (float32-rounded for s = 3)."""
    for shape in random_shapes(14, seed=6, lo=3, hi=120, canvas=(100, 130)):
        cov = coverage(shape, 100, 130, samples=samples, stroke=stroke)
        if cov is None:
            continue
        h, w = cov.values.shape
        means = full_mask(cov).reshape(h, samples, w, samples).mean(axis=(1, 3))
        np.testing.assert_array_equal(cov.values, means.astype(np.float32))
        if samples in (1, 4, 8):
            np.testing.assert_array_equal(cov.values, means)  # exact: k / s^2 is a float32
        r, c = cov.row0 + h // 2, cov.col0 + w // 2
        assert cov.values[h // 2, w // 2] == np.float32(cov.inside(r, c, r + 1, c + 1).mean())


@pytest.mark.parametrize("stroke", [0.0, 2.0])
def test_inside_equals_plain_point_test(stroke):
    """inside() gives exactly sample_inside at every sub-sample point, for any pixel block."""
    for shape in random_shapes(14, seed=10, lo=3, hi=150, canvas=(120, 150)):
        cov = coverage(shape, 120, 150, samples=4, stroke=stroke)
        if cov is None:
            continue
        h, w = cov.values.shape
        for r0, c0, r1, c1 in ((0, 0, h, w), (h // 3, w // 4, h, max(w // 4 + 1, w - 2))):
            r0, r1, c0, c1 = r0 + cov.row0, r1 + cov.row0, c0 + cov.col0, c1 + cov.col0
            xs = (np.arange(c0, c1)[:, None] + (np.arange(4) + 0.5) / 4).ravel()
            ys = (np.arange(r0, r1)[:, None] + (np.arange(4) + 0.5) / 4).ravel()
            plain = sample_inside(shape, xs[None, :], ys[:, None], stroke=stroke)
            np.testing.assert_array_equal(cov.inside(r0, c0, r1, c1), plain)


def test_big_shape_on_whole_canvas_equals_plain_sampling():
    """A canvas-filling shape (block classification path) equals the plain sample rule."""
    for shape in (
        Shape("star", 160.0, 120.0, 300.0, sides=7, inner=0.45, angle=10.0),
        Shape("ring", 160.0, 120.0, 330.0, aspect=1.5, inner=0.6, angle=-20.0),
        Shape("cross", 150.0, 130.0, 310.0, inner=0.3, angle=30.0),
    ):
        for stroke in (0.0, 3.0):
            cov = coverage(shape, 240, 320, samples=4, stroke=stroke)
            h, w = cov.values.shape
            assert h * w > 200 * 250
            xs = (np.arange(cov.col0, cov.col0 + w)[:, None] + (np.arange(4) + 0.5) / 4).ravel()
            ys = (np.arange(cov.row0, cov.row0 + h)[:, None] + (np.arange(4) + 0.5) / 4).ravel()
            mask = sample_inside(shape, xs[None, :], ys[:, None], stroke=stroke)
            np.testing.assert_array_equal(full_mask(cov), mask)
            np.testing.assert_array_equal(cov.values, mask.reshape(h, 4, w, 4).mean(axis=(1, 3)))


def test_inside_rejects_rows_outside_patch():
    """inside() refuses pixel ranges outside the patch."""
    cov = coverage(Shape("ellipse", 10.0, 10.0, 6.0), 20, 20)
    with pytest.raises(ValueError, match="must lie within the patch"):
        cov.inside(0, 0, 5, 5)


@pytest.mark.parametrize(
    "shape",
    [
        Shape("rectangle", 30.2, 20.7, 25.0, aspect=1.7, angle=12.0),
        Shape("ellipse", 30.2, 20.7, 25.0, aspect=0.6, angle=71.0),
        Shape("ring", 30.2, 20.7, 25.0, aspect=1.3, angle=5.0, inner=0.6),
        Shape("cross", 30.2, 20.7, 25.0, aspect=1.2, angle=33.0, inner=0.35),
        Shape("polygon", 30.2, 20.7, 25.0, aspect=0.9, angle=48.0, sides=6),
        Shape("star", 30.2, 20.7, 25.0, aspect=1.1, angle=101.0, sides=4, inner=0.45),
    ],
    ids=lambda s: s.kind,
)
def test_point_symmetric_kinds_repeat_after_half_turn(shape):
    """Point-symmetric kinds give the same coverage at angle and angle + 180."""
    turned = replace(shape, angle=shape.angle + 180.0)
    a, b = coverage(shape, 50, 60), coverage(turned, 50, 60)
    # scikit-image's drawing tests use the same symmetry (STYLE.md)
    np.testing.assert_allclose(exact_box(shape), exact_box(turned), atol=1e-9)
    assert (a.row0, a.col0) == (b.row0, b.col0)
    np.testing.assert_array_equal(a.values, b.values)


def test_triangle_is_not_point_symmetric():
    """A triangle turned by 180 degrees points the other way (the symmetry test can fail)."""
    up = coverage(Shape("triangle", 20.0, 20.0, 20.0), 40, 40)
    down = coverage(Shape("triangle", 20.0, 20.0, 20.0, angle=180.0), 40, 40)
    assert not np.array_equal(up.values, down.values)
    np.testing.assert_array_equal(up.values, down.values[::-1])  # mirror image across y = 20


@pytest.mark.parametrize("shape", random_shapes(14, seed=7, lo=15, hi=60, canvas=(90, 90)), ids=lambda s: s.kind)
def test_stroke_keeps_filled_box(shape):
    """A stroked shape has the filled shape's patch and pixel box, and lies inside it."""
    shape = replace(shape, cx=45.0, cy=45.0)
    fill = coverage(shape, 90, 90, samples=4)
    line = coverage(shape, 90, 90, samples=4, stroke=1.5)
    assert (line.row0, line.col0, line.values.shape) == (fill.row0, fill.col0, fill.values.shape)
    assert np.all(line.values <= fill.values)
    assert float(line.values.sum()) < float(fill.values.sum())
    origin = (fill.col0, fill.row0)
    assert mask_box(line.values > 0, origin).tolist() == mask_box(fill.values > 0, origin).tolist()


@pytest.mark.parametrize("kind", POLY_KINDS)
def test_polygon_stroke_area_matches_shapely_inward_buffer(kind):
    """A polygon's outline band has the area of the shape minus shapely's inward buffer."""
    shape = Shape(kind, 40.3, 39.8, 60.0, aspect=1.2, angle=17.0, sides=6, inner=0.5)
    t = 2.0
    geom = shapely_geometry(shape)
    band = geom.difference(geom.buffer(-t, quad_segs=64))  # shapely: erosion by a disk of radius t
    cov = coverage(shape, 80, 80, samples=8, stroke=t)
    tol = (geom.length + geom.buffer(-t).length) / 8  # sampling bound on both edges of the band
    assert abs(float(cov.values.sum()) - band.area) <= tol


def test_ellipse_stroke_area_is_difference_of_ellipses():
    """A stroked ellipse covers pi (a b - (a - t)(b - t)) and a circle's band matches shapely."""
    t = 3.0
    shape = Shape("ellipse", 40.0, 40.0, 60.0, aspect=1.5, angle=30.0)
    a, b = 30.0, 20.0  # semi-axes: longer side 60 px and aspect 1.5, unrotated frame
    cov = coverage(shape, 80, 80, samples=8, stroke=t)
    expected = math.pi * (a * b - (a - t) * (b - t))  # analytic geometry: ellipse area pi a b
    assert abs(float(cov.values.sum()) - expected) <= 2 * 2 * math.pi * a / 8
    circle = Shape("ellipse", 40.0, 40.0, 60.0)
    disk = Point(40.0, 40.0).buffer(30.0, quad_segs=256)
    band = disk.difference(disk.buffer(-t, quad_segs=256))  # shapely: inward buffer of a disk
    cov = coverage(circle, 80, 80, samples=8, stroke=t)
    assert abs(float(cov.values.sum()) - band.area) <= (disk.length + band.length) / 8


def test_ring_stroke_covers_both_edges():
    """A stroked ring keeps bands along the outer edge and the hole's edge, not the middle."""
    shape = Shape("ring", 40.0, 40.0, 60.0, inner=0.5)  # outer radius 30, hole radius 15
    line = coverage(shape, 80, 80, samples=4, stroke=2.0)
    row = line.values[40 - line.row0]  # the row through the centre
    x = np.arange(line.col0, line.col0 + row.size) + 0.5
    # analytic: |x - 40| in (28, 30) or (15, 17) is in the band, (18, 27) is not
    r = np.abs(x - 40.0)
    assert np.all(row[(r > 28.5) & (r < 29.5)] == 1.0)
    assert np.all(row[(r > 15.5) & (r < 16.5)] == 1.0)
    assert np.all(row[(r > 17.5) & (r < 27.5)] == 0.0)
    assert np.all(row[r < 14.5] == 0.0)


def test_thick_stroke_keeps_whole_shape():
    """A band thicker than the shape keeps the whole shape."""
    for kind in KINDS:
        shape = Shape(kind, 20.0, 20.0, 14.0, angle=10.0)
        fill = coverage(shape, 40, 40)
        line = coverage(shape, 40, 40, stroke=20.0)
        np.testing.assert_array_equal(line.values, fill.values)


def test_shape_half_off_canvas_is_clipped():
    """A shape across the left edge gets a patch from column 0 equal to the visible part."""
    shape = Shape("star", 1.0, 30.0, 20.0, angle=12.0, sides=5, inner=0.45)
    cov = coverage(shape, 60, 60)
    box = exact_box(shape)
    assert cov.col0 == 0 and cov.values.shape[1] == math.ceil(box[2])
    # the same shape moved 20 px right on a wider canvas shows the cut-off columns too
    moved = Shape("star", 21.0, 30.0, 20.0, angle=12.0, sides=5, inner=0.45)
    whole = coverage(moved, 60, 100)
    assert whole.col0 == math.floor(box[0] + 20)
    cut = whole.values[:, -cov.values.shape[1] :]
    np.testing.assert_array_equal(cov.values, cut)


@pytest.mark.parametrize(
    "shape",
    [
        Shape("ellipse", -20.0, 10.0, 10.0),
        Shape("ellipse", 10.0, 45.0, 10.0),
        Shape("rectangle", -2.0, 10.0, 4.0),  # box ends exactly at x = 0
        Shape("rectangle", 10.0, 32.0, 4.0),  # box starts exactly at y = 30 (the canvas height)
    ],
)
def test_shape_outside_canvas_gives_none(shape):
    """A shape whose exact box misses the canvas gives None."""
    assert coverage(shape, 30, 40) is None


def ellipse_sandwich(shape: Shape, n: int) -> tuple[Polygon, Polygon]:
    """Polygons inside and around an ellipse or ring: the n-point outline and its 1/cos(pi/n) scaling."""
    grow = 1.0 / math.cos(math.pi / n)  # an inscribed regular n-gon scaled by this circumscribes
    centre = np.array([shape.cx, shape.cy])
    rings = outline(shape, resolution=n)
    big = [centre + (r - centre) * grow for r in rings]
    inner = Polygon(rings[0], [big[1]] if len(rings) > 1 else [])
    outer = Polygon(big[0], rings[1:])
    return inner, outer


@pytest.mark.parametrize("shape", random_shapes(35, seed=8, lo=10, hi=90, canvas=(60, 80)), ids=lambda s: s.kind)
def test_clipped_box_matches_shapely_intersection(shape):
    """clipped_box is the box of shapely's intersection of the outline with the canvas."""
    canvas = shapely.box(0.0, 0.0, 80.0, 60.0)
    got = clipped_box(shape, 60, 80)
    if shape.kind in POLY_KINDS:
        part = shapely_geometry(shape).intersection(canvas)  # shapely: polygon clipping
        if part.area == 0:
            assert got is None
        else:
            np.testing.assert_allclose(got, part.bounds, atol=1e-9)
        return
    inner, outer = ellipse_sandwich(shape, 2048)
    lo, hi = inner.intersection(canvas), outer.intersection(canvas)  # shapely: polygon clipping
    if hi.area == 0:
        assert got is None
        return
    assert got is not None
    if lo.area > 0:
        # the exact region lies between the two polygons, so do their clipped boxes
        assert np.all(got[:2] <= np.array(lo.bounds[:2]) + 1e-9) and np.all(got[2:] >= np.array(lo.bounds[2:]) - 1e-9)
    assert np.all(got[:2] >= np.array(hi.bounds[:2]) - 1e-9) and np.all(got[2:] <= np.array(hi.bounds[2:]) + 1e-9)


def test_clipped_box_of_cut_shapes_bounds_their_coverage():
    """The sub-sample box of a shape cut by the border lies inside clipped_box, within 1 px."""
    for shape in random_shapes(35, seed=9, lo=10, hi=60, canvas=(60, 80)):
        cov = coverage(shape, 60, 80, samples=8)
        got = clipped_box(shape, 60, 80)
        if cov is None or not cov.values.any():
            continue
        # box of the inside sub-sample points (cell box shrunk by half a cell)
        support = mask_box(full_mask(cov), origin=(cov.col0, cov.row0), scale=1 / 8) + np.array([1, 1, -1, -1]) / 16
        assert np.all(support[:2] >= got[:2] - 1e-9) and np.all(support[2:] <= got[2:] + 1e-9)
        assert np.all(np.abs(support - got) <= 1.0)
        full = clip_boxes(exact_box(shape), 80, 60)[0]
        assert np.all(got[:2] >= full[:2] - 1e-9) and np.all(got[2:] <= full[2:] + 1e-9)  # within the clipped full box


def test_clipped_box_of_ring_hole_covering_a_corner():
    """A canvas corner inside a ring's hole is not part of the clipped box."""
    shape = Shape("ring", 0.0, 0.0, 100.0, inner=0.8)  # hole radius 40 around the corner (0, 0)
    got = clipped_box(shape, 100, 100)
    # analytic geometry: the quarter annulus 40 <= r <= 50 in the first quadrant
    np.testing.assert_allclose(got, [0.0, 0.0, 50.0, 50.0], atol=1e-9)
    inside_hole = Shape("ring", 50.0, 50.0, 400.0, inner=0.9)  # the canvas sits inside the hole
    assert clipped_box(inside_hole, 100, 100) is None
    assert coverage(inside_hole, 100, 100).values.sum() == 0


def test_small_shape_on_huge_canvas_has_small_patch():
    """The patch of a small shape does not depend on the canvas size."""
    shape = Shape("star", 5000.5, 7000.25, 6.0)
    small = coverage(shape, 8000, 10000)
    assert small.values.shape == (7, 7)
    again = coverage(Shape("star", 5.5, 7.25, 6.0), 20, 20)
    np.testing.assert_array_equal(small.values, again.values)


def test_coverage_rejects_bad_options():
    """Bad samples or stroke values raise ValueError."""
    shape = Shape("ellipse", 10.0, 10.0, 5.0)
    with pytest.raises(ValueError, match="samples must be >= 1"):
        coverage(shape, 20, 20, samples=0)
    with pytest.raises(ValueError, match="stroke must be a finite number >= 0"):
        coverage(shape, 20, 20, stroke=-1.0)


# ---------------------------------------------------------------- outlines


def test_outline_orientation_and_holes():
    """Outer rings are counter-clockwise for shapely, holes clockwise; only the ring has a hole."""
    for kind in KINDS:
        rings = outline(Shape(kind, 10.0, 10.0, 10.0, angle=40.0), resolution=64)
        assert len(rings) == (2 if kind == "ring" else 1)
        assert shapely.LinearRing(rings[0]).is_ccw  # shapely's orientation test
        for hole in rings[1:]:
            assert not shapely.LinearRing(hole).is_ccw


def test_outline_vertex_counts():
    """Polygon kinds return their exact vertex counts; ellipses the resolution."""
    counts = {"rectangle": 4, "triangle": 3, "polygon": 7, "star": 14, "cross": 12, "ellipse": 50}
    for kind, n in counts.items():
        rings = outline(Shape(kind, 0.0, 0.0, 10.0, sides=7), resolution=50)
        assert rings[0].shape == (n, 2)


def test_triangle_apex_points_up():
    """An unrotated triangle has its apex at the top centre of its box."""
    ring = outline(Shape("triangle", 10.0, 10.0, 8.0, aspect=0.5))[0]
    apex = ring[np.argmin(ring[:, 1])]
    np.testing.assert_allclose(apex, [10.0, 6.0], atol=1e-12)


def test_rotation_is_clockwise_on_screen():
    """A positive angle turns the +x axis toward +y (clockwise on screen)."""
    ring = outline(Shape("triangle", 0.0, 0.0, 8.0, aspect=0.5, angle=90.0))[0]
    # the apex (own -y) turns to +x after 90 degrees clockwise on screen
    apex = ring[np.argmax(ring[:, 0])]
    assert apex[1] == pytest.approx(0.0, abs=1e-12)


# ---------------------------------------------------------------- paint


COLORS = np.array([[10.0, 20.0, 30.0], [250.0, 200.0, 100.0]])


def test_paint_flat():
    """Flat paint is colors[0] everywhere."""
    out = paint("flat", COLORS, 3, 4, row0=5, col0=6, angle=0.0, period=4.0)
    assert out.shape == (3, 4, 3) and out.dtype == np.float32
    assert np.all(out == COLORS[0].astype(np.float32))


def test_paint_gradient_ends_and_middle():
    """A gradient runs from colors[0] to colors[1] across the patch along its angle."""
    out = paint("gradient", COLORS, 3, 5, row0=7, col0=2, angle=0.0, period=1.0)
    # linear interpolation (common practice): t = 0, 0.5, 1 at the first, middle and last column
    np.testing.assert_allclose(out[:, 0], np.broadcast_to(COLORS[0], (3, 3)), atol=1e-4)
    np.testing.assert_allclose(out[:, 4], np.broadcast_to(COLORS[1], (3, 3)), atol=1e-4)
    np.testing.assert_allclose(out[1, 2], (COLORS[0] + COLORS[1]) / 2, atol=1e-4)
    down = paint("gradient", COLORS, 5, 3, row0=0, col0=0, angle=90.0, period=1.0)
    np.testing.assert_allclose(down[0, 1], COLORS[0], atol=1e-4)
    np.testing.assert_allclose(down[4, 1], COLORS[1], atol=1e-4)
    np.testing.assert_allclose(down[1, 2], COLORS[0] + 0.25 * (COLORS[1] - COLORS[0]), atol=1e-4)


def test_paint_stripes_at_known_pixels():
    """Stripes alternate every `period` px along the angle, anchored at the canvas origin."""
    out = paint("stripes", COLORS, 2, 6, row0=0, col0=3, angle=0.0, period=2.0)
    # pixel centres x = 3.5 .. 8.5; band floor(x / 2): 1, 2, 2, 3, 3, 4 (hand computed)
    expected = [1, 0, 0, 1, 1, 0]
    for j, band in enumerate(expected):
        np.testing.assert_array_equal(out[1, j], COLORS[band].astype(np.float32))
    # at 90 degrees the stripes run horizontally: rows 0-1 one colour, rows 2-3 the other
    rows = paint("stripes", COLORS, 4, 2, row0=0, col0=0, angle=90.0, period=2.0)
    assert np.all(rows[:2] == COLORS[0].astype(np.float32)) and np.all(rows[2:] == COLORS[1].astype(np.float32))


def test_paint_rejects_bad_input():
    """Unknown styles, wrong colour shapes and bad periods raise ValueError."""
    with pytest.raises(ValueError, match="style must be one of flat, gradient, stripes"):
        paint("dots", COLORS, 2, 2, row0=0, col0=0, angle=0.0, period=1.0)
    with pytest.raises(ValueError, match=r"colors must have shape \(2, 3\)"):
        paint("flat", COLORS[0], 2, 2, row0=0, col0=0, angle=0.0, period=1.0)
    with pytest.raises(ValueError, match="period must be a finite number > 0"):
        paint("stripes", COLORS, 2, 2, row0=0, col0=0, angle=0.0, period=0.0)
    assert FILLS == ("flat", "gradient", "stripes")


def test_classified_sample_counts_equal_a_plain_sum():
    """The sub-sample counts behind classified coverage equal a plain sum of the flags, for every supported s."""
    from synthgen.scene.coverage import _sample_counts

    rng = np.random.default_rng(2)
    for s in (1, 2, 3, 4, 8, 15, 16):  # 16: 256 samples, past a byte
        flags = rng.random((s, s, 50)) < 0.7
        flags[:, :, 0] = True
        got = _sample_counts(flags, s)
        assert np.array_equal(got, flags.sum(axis=(0, 1)))
        assert int(got[0]) == s * s


@pytest.mark.parametrize("samples", [2, 4, 5])
def test_elliptic_gauge_classes_equal_plain_sampling(samples):
    """Ellipses, rings and outlined ellipses settled by their gauge (thin, wide, tiny, holed, cut by the border)
    give the coverage of the plain sample rule: every pixel the gauge settles is settled right."""
    from synthgen.scene.coverage import _elliptic_classes
    from synthgen.scene.shapes import shape_region

    rng = np.random.default_rng(9)
    checked = 0
    for _ in range(40):
        kind = ("ellipse", "ring")[int(rng.integers(2))]
        shape = Shape(kind, float(rng.uniform(-5, 85)), float(rng.uniform(-5, 65)), float(rng.uniform(1.0, 100.0)),
                      aspect=float(np.exp(rng.uniform(-2.5, 2.5))), angle=float(rng.uniform(0, 360)),
                      inner=float(rng.uniform(0.05, 0.95)))
        for stroke in (0.0, float(rng.uniform(0.3, 4.0))):
            cov = coverage(shape, 60, 80, samples=samples, stroke=stroke)
            if cov is None:
                continue
            h, w = cov.values.shape
            xs = (np.arange(cov.col0, cov.col0 + w)[:, None] + (np.arange(samples) + 0.5) / samples).ravel()
            ys = (np.arange(cov.row0, cov.row0 + h)[:, None] + (np.arange(samples) + 0.5) / samples).ravel()
            plain = sample_inside(shape, xs[None, :], ys[:, None], stroke=stroke)
            want = plain.reshape(h, samples, w, samples).mean(axis=(1, 3)).astype(np.float32)
            np.testing.assert_array_equal(cov.values, want)
            xc, yc = np.arange(cov.col0, cov.col0 + w) + 0.5, np.arange(cov.row0, cov.row0 + h) + 0.5
            checked += _elliptic_classes(shape_region(shape, stroke), xc, yc, 0.5) is not None
    assert checked > 40  # the gauge path was taken (filled and outlined ellipses, rings)
