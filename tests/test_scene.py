"""One scene: exact boxes, occlusion bookkeeping and per-object facts."""

from __future__ import annotations

import numpy as np
import pytest

from synthgen.config import load_config
from synthgen.geometry import mask_box
from synthgen.scene import compose_shapes, image_rng, plan_objects, render_scene
from synthgen.shapes import Shape, coverage, exact_box


@pytest.fixture()
def cfg():
    return load_config(overrides=["canvas.width=64", "canvas.height=48", "objects.min_visible=0", "objects.min_area=0"])


def grey(cfg, value=128):
    return np.full((cfg.canvas.height, cfg.canvas.width, 3), value, np.uint8)


def test_same_index_same_pixels(small_config):
    """Rendering image k twice gives identical arrays and facts."""
    a, b = render_scene(small_config, 4), render_scene(small_config, 4)
    assert np.array_equal(a.image, b.image) and a.facts == b.facts


def test_different_indices_differ(small_config):
    """Two images of a run are not the same picture."""
    assert not np.array_equal(render_scene(small_config, 0).image, render_scene(small_config, 1).image)


def test_image_streams_come_from_spawn_keys():
    """Image k's generator is SeedSequence(seed, spawn_key=(k,)) (numpy.random docs: spawn keys)."""
    expected = np.random.Generator(np.random.PCG64(np.random.SeedSequence(5, spawn_key=(3,)))).random(4)
    assert np.array_equal(image_rng(5, 3).random(4), expected)


def test_pixel_aligned_4x4_square(cfg):
    """A 4x4 square on the pixel grid has area 16 and box width 4 (REFERENCE.md: COCO JSON, mask box)."""
    scene = compose_shapes(grey(cfg), [Shape("rectangle", cx=10.0, cy=12.0, size=4.0)], cfg, rng=np.random.default_rng(0))
    assert scene.boxes.tolist() == [[8.0, 10.0, 12.0, 14.0]]
    assert scene.areas.tolist() == [16.0]
    assert scene.facts[0]["pixel_box"] == [8.0, 10.0, 12.0, 14.0]


def test_one_pixel_square_has_width_one(cfg):
    """A one-pixel square's box is one pixel wide (common practice: half-open boxes)."""
    scene = compose_shapes(grey(cfg), [Shape("rectangle", cx=5.5, cy=7.5, size=1.0)], cfg, rng=np.random.default_rng(0))
    x0, y0, x1, y1 = scene.boxes[0]
    assert (x1 - x0, y1 - y0, scene.areas[0]) == (1.0, 1.0, 1.0)


def test_unoccluded_visible_box_is_exact_box(cfg):
    """With nothing above it, an object's visible box is its exact box and it is fully visible."""
    shape = Shape("ellipse", cx=30.3, cy=20.7, size=17.0, aspect=1.7, angle=33.0)
    scene = compose_shapes(grey(cfg), [shape], cfg, rng=np.random.default_rng(0))
    assert np.allclose(scene.boxes[0], exact_box(shape), atol=1e-12)
    assert scene.facts[0]["visible_fraction"] == 1.0


def test_border_cut_object_is_clipped_and_truncated(cfg):
    """An object cut by the canvas edge gets the clipped box and the truncated flag."""
    shape = Shape("rectangle", cx=2.0, cy=20.0, size=10.0)
    scene = compose_shapes(grey(cfg), [shape], cfg, rng=np.random.default_rng(0))
    assert scene.boxes[0].tolist() == [0.0, 15.0, 7.0, 25.0] and scene.facts[0]["truncated"] is True


def test_occluded_fraction_matches_independent_sample_count(cfg):
    """Visible fraction equals the share of the lower shape's samples not inside the upper shape.

    The reference counts samples with the shapes' point test directly (no patches),
    at the same sample positions (sample (i, j) of pixel (r, c) at c + (j + .5)/s).
    """
    low = Shape("ellipse", cx=30.0, cy=24.0, size=30.0, aspect=1.3, angle=10.0)
    up = Shape("rectangle", cx=40.0, cy=24.0, size=16.0, aspect=0.8, angle=20.0)
    scene = compose_shapes(grey(cfg), [low, up], cfg, rng=np.random.default_rng(0))
    from synthgen.shapes import sample_inside

    s = cfg.render.samples
    ys, xs = np.mgrid[0 : cfg.canvas.height * s, 0 : cfg.canvas.width * s]
    xs, ys = (xs + 0.5) / s, (ys + 0.5) / s
    inside_low = sample_inside(low, xs, ys)
    hidden = inside_low & sample_inside(up, xs, ys)
    expected = 1.0 - hidden.sum() / inside_low.sum()
    assert scene.facts[0]["visible_fraction"] == pytest.approx(expected, abs=1e-12)
    assert scene.facts[1]["visible_fraction"] == 1.0
    # the visible box is the geometry's: the rectangle's left edge crosses the ellipse (shapely reference)
    from tests import _visible_reference as reference

    want = reference.visible(low, 0.0, [(up, 0.0)], cfg.canvas.height, cfg.canvas.width)
    assert np.all(np.abs(scene.boxes[0] - want) <= 1e-3)


def test_hidden_object_is_dropped_and_counted():
    """An object hidden below min_visible is not annotated; the drop is counted."""
    cfg = load_config(overrides=["canvas.width=64", "canvas.height=48", "objects.min_visible=0.5"])
    low = Shape("rectangle", cx=30.0, cy=24.0, size=10.0)
    up = Shape("rectangle", cx=31.0, cy=24.0, size=12.0)
    part = Shape("rectangle", cx=10.0, cy=10.0, size=10.0)  # box [5, 5, 15, 15]
    over = Shape("rectangle", cx=14.0, cy=10.0, size=10.0)  # hides 6 of its 10 columns
    scene = compose_shapes(grey(cfg), [low, up, part, over], cfg, rng=np.random.default_rng(0))
    assert len(scene.boxes) == 2
    assert scene.info["dropped"] == {"outside": 0, "hidden": 1, "min_visible": 1, "min_area": 0}


def test_contrast_is_met_on_a_plain_background(cfg):
    """Fill colours keep at least objects.min_contrast luma difference with the background."""
    scene = compose_shapes(
        grey(cfg), [Shape("star", cx=20.0 + 5 * i, cy=24.0, size=8.0) for i in range(5)], cfg,
        rng=np.random.default_rng(3),
    )
    assert all(f["contrast"] >= cfg.objects.min_contrast - 1e-9 for f in scene.facts)


def test_max_iou_and_neighbours_facts(cfg):
    """max_iou is the largest box IoU with another annotated object (REFERENCE.md: Geometry, 1/7)."""
    a = Shape("rectangle", cx=11.0, cy=11.0, size=2.0)  # box [10, 10, 12, 12]
    b = Shape("rectangle", cx=12.0, cy=12.0, size=2.0)  # box [11, 11, 13, 13]
    scene = compose_shapes(grey(cfg), [a, b], cfg, rng=np.random.default_rng(0))
    # b hides a's lower-right pixel only, so a's visible box stays [10, 10, 12, 12]
    assert scene.boxes[0].tolist() == [10.0, 10.0, 12.0, 12.0]
    assert scene.facts[0]["max_iou"] == pytest.approx(1 / 7) == scene.facts[1]["max_iou"]
    assert scene.facts[0]["neighbours"] == 1 and scene.facts[1]["neighbours"] == 1


def test_masks_support_gives_the_pixel_box(small_config):
    """Each mask patch's tight box is the object's pixel box."""
    scene = render_scene(small_config, 2)
    for (row0, col0, support), facts in zip(scene.masks, scene.facts):
        assert mask_box(support, origin=(col0, row0)).tolist() == facts["pixel_box"]


def test_coverage_patch_never_exceeds_canvas():
    """A huge shape's patch is clipped to the canvas."""
    cov = coverage(Shape("ellipse", cx=10.0, cy=10.0, size=500.0), 48, 64)
    assert cov.values.shape == (48, 64)


# --------------------------------------------------------------------------- difficulty dials


def _raster(shape, height, width, s):
    """Boolean mask of a shape on an s-times finer grid, from its outline polygons by scikit-image."""
    from skimage.draw import polygon

    from synthgen.shapes import outline

    mask = np.zeros((height * s, width * s), dtype=bool)
    for k, ring in enumerate(outline(shape, resolution=512)):
        # skimage fills the cells whose centres lie inside; cell (r, c) of the fine grid has centre
        # ((c + 0.5) / s, (r + 0.5) / s) in image coordinates, i.e. fine coords x * s - 0.5.
        rr, cc = polygon(ring[:, 1] * s - 0.5, ring[:, 0] * s - 0.5, shape=mask.shape)
        part = np.zeros_like(mask)
        part[rr, cc] = True
        mask = mask | part if k == 0 else mask & ~part
    return mask


def test_occlusion_dial_matches_masks_rasterized_independently():
    """Visible fraction = visible / full coverage of masks drawn by scikit-image from outlines (within 1%)."""
    lo, hi = 0.3, 0.6
    cfg = load_config(overrides=[
        "canvas.width=200", "canvas.height=150", "objects.layout=separated", "objects.count=[6,6]",
        "objects.size=[30,50]", "objects.outline=0", "objects.occlusion=[0.3,0.6]", "objects.min_visible=0",
    ])
    s = 8
    checked = 0
    for index in range(3):
        sc = render_scene(cfg, index)
        _bg, obj_rng, _cl, _dg = image_rng(cfg.seed, index).spawn(4)  # the composer's stages
        shapes = plan_objects(cfg, rng=obj_rng)[0]
        masks = [_raster(sh, 150, 200, s) for sh in shapes]
        by_z = {f["z"]: f for f in sc.facts}
        for z, f in by_z.items():
            if "occlusion_goal" not in f:
                continue
            above = np.zeros_like(masks[z])
            for m in masks[z + 1 :]:
                above |= m
            full = masks[z].sum()
            expected = (masks[z] & ~above).sum() / full  # reference: scikit-image polygon rasterization
            assert f["visible_fraction"] == pytest.approx(expected, abs=0.01)
            assert lo <= f["occluder_hides"] <= hi
            others = [m for m in masks[z + 1 :] if (m & masks[z]).any()]
            if len(others) == 1:  # only its own occluder lies over it: the dial's range holds
                assert lo - 0.01 <= 1 - f["visible_fraction"] <= hi + 0.01
                checked += 1
    assert checked >= 12


@pytest.mark.parametrize("size", [1, 2, 3, 4, 8])
@pytest.mark.parametrize("kind", ["rectangle", "ellipse", "triangle", "polygon"])
def test_tiny_shapes_area_and_regionprops_box(size, kind):
    """Tiny convex shapes: coverage sum within the sampling bound of the exact area; regionprops box within 1 px.

    Bound: with s x s samples (cell side h = 1/s) only cells the boundary crosses can be wrong, each by at
    most h^2.  A convex boundary is four monotone arcs with total extents 2W and 2H, and a monotone arc of
    extents (a, b) crosses at most a/h + b/h + 2 cells, so |sum - area| <= h (2W + 2H) + 8 h^2.
    """
    from skimage.measure import regionprops

    from synthgen.shapes import exact_area

    rng = np.random.default_rng(size)
    s = 8
    for _ in range(10):
        shape = Shape(kind, cx=float(rng.uniform(10, 20)), cy=float(rng.uniform(10, 20)), size=float(size),
                      aspect=float(rng.uniform(0.6, 1.6)), angle=float(rng.uniform(0, 360)), sides=6)
        cov = coverage(shape, 32, 32, samples=s)
        x0, y0, x1, y1 = exact_box(shape)
        h = 1.0 / s
        bound = h * (2 * (x1 - x0) + 2 * (y1 - y0)) + 8 * h * h
        assert abs(float(cov.values.sum()) - exact_area(shape)) <= bound
        canvas = np.zeros((32, 32), dtype=np.uint8)
        canvas[cov.row0 : cov.row0 + cov.values.shape[0], cov.col0 : cov.col0 + cov.values.shape[1]] = cov.values > 0
        (region,) = regionprops(canvas)  # reference: scikit-image, half-open (min_row, min_col, max_row, max_col)
        r0, c0, r1, c1 = region.bbox
        assert max(abs(c0 - x0), abs(r0 - y0), abs(c1 - x1), abs(r1 - y1)) <= 1.0


def test_thousand_tiny_objects_in_one_image():
    """1000 objects of 2-8 px on 640x480 compose; every annotated box is valid and inside the canvas."""
    cfg = load_config(overrides=["objects.count=[1000,1000]", "objects.size=[2,8]", "objects.min_visible=0",
                                 "objects.min_area=0.5"])
    sc = render_scene(cfg, 0)
    assert len(sc.boxes) + sum(sc.info["dropped"].values()) == 1000
    assert np.all(sc.boxes[:, 2] > sc.boxes[:, 0]) and np.all(sc.boxes[:, :2] >= 0)
    assert np.all(sc.boxes[:, 2] <= 640) and np.all(sc.boxes[:, 3] <= 480)
    assert (sc.areas >= 0.5).all()


def test_degradations_reach_from_set_and_keep_boxes():
    """--set degrade.blur.p=1 and degrade.noise.p=1 change pixels, never boxes (issue 3: degradations)."""
    base = ["canvas.width=96", "canvas.height=64", "objects.count=[4,4]"]
    plain = render_scene(load_config(overrides=base), 1)
    worse = render_scene(load_config(overrides=base + ["degrade.blur.p=1", "degrade.noise.p=1"]), 1)
    assert np.array_equal(plain.boxes, worse.boxes) and not np.array_equal(plain.image, worse.image)
    assert worse.info["degradations"] != plain.info["degradations"]


def test_layouts_are_deterministic():
    """Each layout gives the same scene twice for the same image index."""
    for name in ("separated", "pairs", "grid", "clusters"):
        cfg = load_config(overrides=["canvas.width=96", "canvas.height=64", f"objects.layout={name}",
                                     "objects.count=[6,6]", "objects.size=[4,16]", "objects.occlusion=[0.2,0.4]"])
        a, b = render_scene(cfg, 2), render_scene(cfg, 2)
        assert np.array_equal(a.image, b.image) and a.facts == b.facts


def test_dense_occlusion_matches_brute_force_sample_count():
    """In crowded scenes (outlines too), visible fractions and boxes equal a whole-canvas sample count.

    The reference tests every sub-sample of the canvas against every shape with
    Coverage.inside (no pixel classes, no patches), the plain rule of the module docstring.
    """
    from synthgen.scene import _sample_objects, _moved

    cfg = load_config(overrides=["canvas.width=48", "canvas.height=40", "objects.outline=0.4",
                                 "objects.min_visible=0", "objects.min_area=0", "objects.size=[2,30]"])
    rng = np.random.default_rng(9)
    s = cfg.render.samples
    occluded = 0
    for _ in range(4):
        shapes, styles = _sample_objects(cfg, rng, n=25)
        shapes = [_moved(sh, c) for sh, c in zip(shapes, rng.uniform(size=(25, 2)) * (48, 40))]
        scene = compose_shapes(grey(cfg), shapes, cfg, rng=np.random.default_rng(0), styles=styles)
        masks = []
        for sh, st in zip(shapes, styles):
            cov = coverage(sh, 40, 48, samples=s, stroke=st["stroke"])  # never None: centres lie on the canvas
            m = np.zeros((40 * s, 48 * s), dtype=bool)
            h, w = cov.values.shape
            m[cov.row0 * s : (cov.row0 + h) * s, cov.col0 * s : (cov.col0 + w) * s] = cov.inside(
                cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)
            masks.append(m)
        for f in scene.facts:
            z = f["z"]  # every shape is drawn, so draw order = shape order
            above = np.zeros_like(masks[z])
            for m in masks[z + 1 :]:
                above |= m
            seen = masks[z] & ~above
            assert f["visible_fraction"] == pytest.approx(seen.sum() / masks[z].sum(), abs=1e-12)
            if f["visible_fraction"] < 1.0:
                # every visible sample is a point of the visible part, so it lies in the visible box
                rows, cols = np.nonzero(seen)
                x0, y0, x1, y1 = f["visible_box"]
                assert x0 <= (cols.min() + 0.5) / s and (cols.max() + 0.5) / s <= x1
                assert y0 <= (rows.min() + 0.5) / s and (rows.max() + 0.5) / s <= y1
                occluded += 1
    assert occluded >= 20


def test_max_iou_and_neighbours_match_a_double_loop():
    """max_iou and neighbours equal a plain double loop over the annotated boxes (common practice)."""
    from synthgen.geometry import pairwise_iou

    cfg = load_config(overrides=["canvas.width=120", "canvas.height=90", "objects.count=[40,40]",
                                 "objects.size=[6,40]", "objects.min_visible=0"])
    scene = render_scene(cfg, 1)
    n = len(scene.boxes)
    for i in range(n):
        ious = [float(pairwise_iou(scene.boxes[i : i + 1], scene.boxes[j : j + 1])[0, 0]) for j in range(n) if j != i]
        assert scene.facts[i]["max_iou"] == max(ious)
        assert scene.facts[i]["neighbours"] == sum(v > 0 for v in ious)


def test_cut_rotated_shape_gets_the_tight_box_of_its_visible_part(cfg):
    """A diamond cut by the border: its exact box is the bounds of outline n canvas (shapely)."""
    from shapely.geometry import Polygon
    from shapely.geometry import box as sbox

    from synthgen.shapes import outline

    shape = Shape("rectangle", cx=-3.0, cy=24.0, size=20.0, angle=45.0)  # a diamond, tips at x = -13 and 7
    scene = compose_shapes(grey(cfg), [shape], cfg, rng=np.random.default_rng(0))
    part = Polygon(outline(shape)[0]).intersection(sbox(0, 0, cfg.canvas.width, cfg.canvas.height))
    assert np.allclose(scene.facts[0]["full_box"], part.bounds, atol=1e-9)
    assert np.allclose(scene.facts[0]["full_box"], [0, 17, 7, 31])  # not the clipped full box [0, 14, 7, 34]
    assert scene.facts[0]["truncated"] is True


def test_aspect_one_keeps_polygons_regular():
    """objects.aspect = 1 draws regular polygons: all vertices on one circle (REFERENCE.md: Geometry)."""
    from synthgen.scene import plan_objects
    from synthgen.shapes import outline

    cfg = load_config(overrides=["objects.aspect=1", "objects.shapes=[\"polygon\"]", "objects.count=[6, 6]",
                                 "objects.rotate=false"])
    shapes = plan_objects(cfg, rng=np.random.default_rng(1))[0]
    for s in shapes:
        ring = outline(s)[0]
        radii = np.hypot(ring[:, 0] - ring[:, 0].mean(), ring[:, 1] - ring[:, 1].mean())
        assert np.ptp(radii) < 1e-9 * s.size


def test_thin_tip_in_plain_view_keeps_the_visible_box(cfg):
    """A thin triangle hidden only at the bottom is annotated up to its apex (issue 12: visible box from geometry).

    By similar triangles: apex (32, 10), base 6 px wide at y = 50, cut at y = 35 where it is 3.75 px wide.
    """
    tri = Shape("triangle", cx=32.0, cy=30.0, size=40.0, aspect=0.15)
    low_cfg = load_config(overrides=["canvas.width=64", "canvas.height=64", "objects.min_visible=0"])
    scene = compose_shapes(np.full((64, 64, 3), 128, np.uint8), [tri, Shape("rectangle", 32.0, 45.0, 20.0)],
                           low_cfg, rng=np.random.default_rng(0))
    np.testing.assert_allclose(scene.boxes[0], [30.125, 10.0, 33.875, 35.0], rtol=0, atol=1e-12)
    assert scene.facts[0]["visible_box"] == scene.boxes[0].tolist()
