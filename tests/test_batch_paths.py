"""Batch (vectorized) paths of synthgen equal their plain one-object-at-a-time paths exactly.

The reference in each test is the project's own per-object path, which the
other tests hold against outside references (shapely, scikit-image,
pycocotools); here only bit-for-bit equality of the fast path is checked.
"""

from __future__ import annotations

import numpy as np
import pytest

from synthgen.scene.coverage import coverage, coverage_many
from synthgen.scene.shapes import KINDS, Shape


def _tiny_scene(seed: int, n: int, lo: float, hi: float, height: int = 60, width: int = 80):
    """Random shapes of every kind, many cut by the border, with and without an outline band."""
    rng = np.random.default_rng(seed)
    shapes, strokes = [], []
    for _ in range(n):
        size = float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
        shapes.append(
            Shape(
                KINDS[int(rng.integers(len(KINDS)))],
                float(rng.uniform(-4, width + 4)),
                float(rng.uniform(-4, height + 4)),
                size,
                aspect=float(np.exp(rng.uniform(-1.0, 1.0))),
                angle=float(rng.uniform(0, 360)),
                sides=int(rng.integers(3, 9)),
                inner=float(rng.uniform(0.2, 0.9)),
            )
        )
        strokes.append(float(rng.uniform(0.3, 3.0)) if rng.random() < 0.3 else 0.0)
    return shapes, strokes, height, width


@pytest.mark.parametrize("samples", [1, 3, 4, 16])
@pytest.mark.parametrize("seed", range(6))
def test_coverage_many_equals_coverage(seed, samples):
    """coverage_many gives, shape by shape, the very patch and values coverage gives."""
    shapes, strokes, h, w = _tiny_scene(seed, 300, 0.3, 16.0)
    many = coverage_many(shapes, h, w, samples=samples, strokes=strokes)
    assert len(many) == len(shapes)
    for shape, stroke, got in zip(shapes, strokes, many):
        want = coverage(shape, h, w, samples=samples, stroke=stroke)
        if want is None:
            assert got is None
            continue
        assert (got.row0, got.col0, got.samples, got.stroke, got.shape) == (
            want.row0, want.col0, want.samples, want.stroke, want.shape
        )
        assert got.values.dtype == want.values.dtype
        assert np.array_equal(got.values, want.values)


def test_coverage_many_rejects_bad_stroke():
    """A negative stroke is refused as coverage refuses it."""
    with pytest.raises(ValueError, match="stroke"):
        coverage_many([Shape("ellipse", 5.0, 5.0, 3.0)], 10, 10, strokes=[-1.0])


def _region_arrays(region) -> list:
    """Every number that defines a region, in a fixed order (for exact comparison)."""
    from synthgen.scene.regions import ConvexRegion, DifferenceRegion, EllipseRegion, UnionRegion

    if isinstance(region, ConvexRegion):
        return [np.asarray(region.nx), np.asarray(region.ny), np.asarray(region.c)]
    if isinstance(region, UnionRegion):
        return [a for p in region.parts for a in _region_arrays(p)]
    if isinstance(region, DifferenceRegion):
        return _region_arrays(region.keep) + _region_arrays(region.cut)
    if isinstance(region, EllipseRegion):
        return [np.array([region.ex, region.ey, region.cos, region.sin, region.a, region.b])]
    raise AssertionError(f"unexpected region {region!r}")


@pytest.mark.parametrize("seed", range(4))
def test_bulk_geometry_equals_one_by_one(seed, monkeypatch):
    """Geometry built in bulk (boxes, areas, half-planes, vertices) equals the one-shape build exactly."""
    from synthgen.scene import shapes as sh

    monkeypatch.setattr(sh, "_BULK_BUILD_MIN", 1)  # every group in bulk, even of one shape
    shapes, _strokes, _h, _w = _tiny_scene(seed, 400, 0.5, 200.0)
    for shape, got in zip(shapes, sh._build_many(shapes)):
        want = sh._build(shape)
        assert got.box == want.box
        assert got.area == want.area
        assert got.scale == want.scale
        for a, b in zip(_region_arrays(got.region), _region_arrays(want.region), strict=True):
            assert np.array_equal(a, b)
        if want.ring is None:
            assert got.ring is None
        else:
            assert np.array_equal(got.ring, want.ring)


@pytest.mark.parametrize("seed", range(5))
def test_encode_patches_equals_encode_patch(seed):
    """RLE of many patches in one call equals encode_patch patch by patch (cut, empty, whole-height)."""
    from synthgen.formats.rle import encode_patch, encode_patches

    rng = np.random.default_rng(seed)
    height, width = int(rng.integers(1, 12)), int(rng.integers(1, 12))
    patches = []
    for _ in range(300):
        h, w = int(rng.integers(1, height + 3)), int(rng.integers(1, width + 3))
        mask = rng.random((h, w)) < rng.choice([0.0, 0.3, 0.7, 1.0])
        patches.append((int(rng.integers(-3, height + 1)), int(rng.integers(-3, width + 1)), mask))
    got = encode_patches(patches, height, width)
    assert got == [encode_patch(p, r, c, height, width) for r, c, p in patches]


def _styled_scene(seed: int, n: int):
    """Random small and big shapes with every fill, some outlined, crowded so that many overlap."""
    from synthgen.config import load_config
    from synthgen.scene import plan_objects

    rng = np.random.default_rng(seed)
    config = load_config(
        overrides=[
            "canvas.width=96", "canvas.height=72", f"objects.count=[{n}, {n}]", "objects.size=[1, 24]",
            "objects.outline=0.3", "objects.min_area=0", f"render.samples={int(rng.choice([2, 3, 4]))}",
            f"objects.min_contrast={float(rng.choice([0.0, 0.15, 0.6]))}",
        ]
    )
    shapes, styles, extras, _placement, _info = plan_objects(config, rng=rng)
    canvas = rng.integers(0, 256, size=(72, 96, 3), dtype=np.uint8)
    return canvas, shapes, styles, extras, config


@pytest.mark.parametrize("seed", range(8))
def test_bulk_drawing_equals_one_shape_at_a_time(seed, monkeypatch):
    """compose_shapes judging occlusion and drawing in bulk gives the same image bytes, boxes, areas, facts and masks."""
    from synthgen.scene import composer as scene

    canvas, shapes, styles, extras, config = _styled_scene(seed, 150)
    bulk = scene.compose_shapes(canvas, shapes, config, rng=np.random.default_rng(seed), styles=styles, extras=extras)
    assert len(bulk.ignored.facts) > 0 and bulk.info["dropped"]["hidden"] > 0
    from synthgen.scene import raster

    monkeypatch.setattr(raster, "_BULK_DRAW_MIN", 10**9)
    monkeypatch.setattr(scene, "_BULK_WALK_MIN", 10**9)
    monkeypatch.setattr(scene, "_CONTACT_PAIRS", -1)  # no shortcuts for patches that meet nothing above or below
    plain = scene.compose_shapes(canvas, shapes, config, rng=np.random.default_rng(seed), styles=styles, extras=extras)
    assert bulk.image.tobytes() == plain.image.tobytes()
    assert np.array_equal(bulk.boxes, plain.boxes)
    assert np.array_equal(bulk.areas, plain.areas)
    assert np.array_equal(bulk.categories, plain.categories)
    assert bulk.facts == plain.facts
    assert len(bulk.masks) == len(plain.masks)
    for (r0, c0, m0), (r1, c1, m1) in zip(bulk.masks, plain.masks):
        assert (r0, c0) == (r1, c1) and np.array_equal(m0, m1)
    assert bulk.info == plain.info
    assert np.array_equal(bulk.ignored.boxes, plain.ignored.boxes) and bulk.ignored.facts == plain.ignored.facts


@pytest.mark.parametrize("seed", range(3))
def test_coverage_many_sample_masks_equal_inside(seed):
    """The whole-patch sample masks coverage_many hands back equal Coverage.inside, whole and cut."""
    shapes, strokes, h, w = _tiny_scene(seed, 200, 0.3, 14.0)
    insides: list = []
    covs = coverage_many(shapes, h, w, samples=4, strokes=strokes, insides=insides)
    rng = np.random.default_rng(seed)
    checked = 0
    for cov, mask in zip(covs, insides):
        if mask is None:
            continue
        ph, pw = cov.values.shape
        assert np.array_equal(mask, cov.inside(cov.row0, cov.col0, cov.row0 + ph, cov.col0 + pw))
        r0, c0 = cov.row0 + int(rng.integers(ph)), cov.col0 + int(rng.integers(pw))
        r1, c1 = int(rng.integers(r0, cov.row0 + ph)) + 1, int(rng.integers(c0, cov.col0 + pw)) + 1
        s = cov.samples
        cut = mask[(r0 - cov.row0) * s : (r1 - cov.row0) * s, (c0 - cov.col0) * s : (c1 - cov.col0) * s]
        assert np.array_equal(cut, cov.inside(r0, c0, r1, c1))
        checked += 1
    assert checked > 100


@pytest.mark.parametrize("seed", range(4))
def test_clear_sides_equal_a_double_loop(seed):
    """The patches the walk treats as meeting nothing above (or below) are exactly those (plain double loop)."""
    from synthgen.scene.composer import _clear_sides

    rng = np.random.default_rng(seed)
    n = 300
    r0, c0 = rng.integers(0, 200, n), rng.integers(0, 300, n)
    rects = np.stack([r0, c0, r0 + rng.integers(1, 12, n), c0 + rng.integers(1, 12, n)], axis=1).tolist()

    def meet(a, b):
        return max(a[0], b[0]) < min(a[2], b[2]) and max(a[1], b[1]) < min(a[3], b[3])

    order = list(range(n))[::-1]  # top first, as the walk goes
    patches = dict(enumerate(rects))
    above, below = _clear_sides(order, patches)
    want_above = {i for i in order if not any(meet(rects[i], rects[j]) for j in range(i + 1, n))}
    want_below = {i for i in order if not any(meet(rects[i], rects[j]) for j in range(i))}
    assert above == want_above and below == want_below
    assert 0 < len(above & below) < len(above) < n
    crowded = {i: [0, 0, 50, 50] for i in range(40)}  # every pair meets: too many pairs, the safe answer
    assert _clear_sides(list(crowded), crowded) == (set(), set())
