"""One scene: exact boxes, occlusion bookkeeping and per-object facts."""

from __future__ import annotations

import numpy as np
import pytest

from synthgen.config import load_config
from synthgen.geometry import mask_box
from synthgen.scene import compose_shapes, image_rng, plan_objects, render_scene
from synthgen.scene.coverage import coverage
from synthgen.scene.shapes import Shape, exact_box


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
    from synthgen.scene.shapes import sample_inside

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

    from synthgen.scene.shapes import outline

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

    from synthgen.scene.shapes import exact_area

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
    from synthgen.scene.composer import _moved
    from synthgen.scene.kinds import sample_objects as _sample_objects

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

    from synthgen.scene.shapes import outline

    shape = Shape("rectangle", cx=-3.0, cy=24.0, size=20.0, angle=45.0)  # a diamond, tips at x = -13 and 7
    scene = compose_shapes(grey(cfg), [shape], cfg, rng=np.random.default_rng(0))
    part = Polygon(outline(shape)[0]).intersection(sbox(0, 0, cfg.canvas.width, cfg.canvas.height))
    assert np.allclose(scene.facts[0]["full_box"], part.bounds, atol=1e-9)
    assert np.allclose(scene.facts[0]["full_box"], [0, 17, 7, 31])  # not the clipped full box [0, 14, 7, 34]
    assert scene.facts[0]["truncated"] is True


def test_aspect_one_keeps_polygons_regular():
    """objects.aspect = 1 draws regular polygons: all vertices on one circle (REFERENCE.md: Geometry)."""
    from synthgen.scene import plan_objects
    from synthgen.scene.shapes import outline

    cfg = load_config(overrides=["objects.aspect=1", "objects.shapes=[\"polygon\"]", "objects.count=[6, 6]",
                                 "objects.rotate=false"])
    shapes = plan_objects(cfg, rng=np.random.default_rng(1))[0]
    for s in shapes:
        ring = outline(s)[0]
        radii = np.hypot(ring[:, 0] - ring[:, 0].mean(), ring[:, 1] - ring[:, 1].mean())
        assert np.ptp(radii) < 1e-9 * s.size


# --------------------------------------------------------------------------- nothing visible goes unannotated


def _coco_union(scene, height, width, *, crowd: bool) -> np.ndarray:
    """Union of the segmentations of a scene's COCO annotations (with or without ignore regions), bool (H, W).

    The masks are decoded by pycocotools from the RLE written to the COCO file (REFERENCE.md: COCO JSON).
    """
    from pycocotools import mask as cocomask

    from synthgen.formats.coco import scene_annotations

    out = np.zeros((height, width), dtype=bool)
    for a in scene_annotations(scene, height, width):
        if a["iscrowd"] and not crowd:
            continue
        seg = dict(a["segmentation"], counts=a["segmentation"]["counts"].encode())
        out |= cocomask.decode(seg).astype(bool)
    return out


def _drawn_pixels(cfg, index: int) -> tuple[np.ndarray, object]:
    """Pixels the objects changed, found without synthgen's masks: the image against the same image with no objects.

    The background (and clutter) come from their own random streams, so the
    run with objects.count = [0, 0] has the very same canvas under the objects.
    """
    from dataclasses import replace

    scene = render_scene(cfg, index)
    bare = render_scene(replace(cfg, objects=replace(cfg.objects, count=(0, 0))), index)
    return np.any(scene.image != bare.image, axis=2), scene


@pytest.mark.parametrize(
    "extra",
    [
        [],  # configs/tiny.toml: 1-8 px specks, min_visible 0.5, min_area 0.5
        ["canvas.width=640", "canvas.height=480", "objects.size=[2,40]", "objects.outline=0.3",
         "objects.min_visible=0.3", "objects.min_area=4"],
    ],
)
def test_every_drawn_pixel_is_annotated_or_ignored(extra):
    """Each pixel an object changed lies in an annotation's segmentation or an ignore region (issue 12, part 1).

    Dense scenes (300-500 objects) hide and shrink many objects below the annotation rules; the dropped
    ones that still show must be ignore regions, or a detector finding them is charged a false positive.
    """
    cfg = load_config("configs/tiny.toml", ["objects.count=[300,500]", *extra])
    height, width = cfg.canvas.height, cfg.canvas.width
    only_crowd = 0
    for index in range(3):
        changed, scene = _drawn_pixels(cfg, index)
        union = _coco_union(scene, height, width, crowd=True)
        assert not (changed & ~union).any(), f"image {index}: {int((changed & ~union).sum())} drawn pixels unannotated"
        only_crowd += int((changed & ~_coco_union(scene, height, width, crowd=False)).sum())
        assert len(scene.ignored.facts) == sum(scene.info["ignored"].values()) > 0
        assert {f["ignored"] for f in scene.ignored.facts} <= {"min_visible", "min_area"}
    assert only_crowd > 50  # without the ignore regions these drawn pixels would have no annotation


def test_erased_objects_leave_no_trace():
    """objects.dropped = "erase": every changed pixel belongs to an annotated object; no ignore region is written."""
    cfg = load_config("configs/tiny.toml", ["objects.count=[300,500]", "objects.dropped=erase"])
    for index in range(2):
        changed, scene = _drawn_pixels(cfg, index)
        assert len(scene.ignored.facts) == 0 and sum(scene.info["ignored"].values()) == 0
        assert scene.info["dropped"]["min_visible"] + scene.info["dropped"]["min_area"] > 0
        union = _coco_union(scene, cfg.canvas.height, cfg.canvas.width, crowd=False)
        assert not (changed & ~union).any()


def test_erase_judges_each_object_by_the_final_picture():
    """With erase, an annotated object's visible fraction counts only the objects left in the picture above it.

    Reference: every sub-sample of the canvas tested against each kept shape with Coverage.inside (no
    buffer, no patches), the plain rule; a kept object's facts must match the picture as drawn.
    """
    from synthgen.scene.composer import _moved
    from synthgen.scene.kinds import sample_objects as _sample_objects

    cfg = load_config(overrides=["canvas.width=48", "canvas.height=40", "objects.min_visible=0.6",
                                 "objects.min_area=3", "objects.size=[2,24]", "objects.dropped=erase"])
    rng = np.random.default_rng(4)
    s = cfg.render.samples
    checked = erased = 0
    for _ in range(4):
        shapes, styles = _sample_objects(cfg, rng, n=30)
        shapes = [_moved(sh, c) for sh, c in zip(shapes, rng.uniform(size=(30, 2)) * (48, 40))]
        scene = compose_shapes(grey(cfg), shapes, cfg, rng=np.random.default_rng(0), styles=styles)
        erased += scene.info["dropped"]["min_visible"] + scene.info["dropped"]["min_area"]
        kept = {f["z"] for f in scene.facts}  # z = position in `shapes`: every centre lies on the canvas
        masks = {}
        for z in kept:
            cov = coverage(shapes[z], 40, 48, samples=s, stroke=styles[z]["stroke"])
            m = np.zeros((40 * s, 48 * s), dtype=bool)
            h, w = cov.values.shape
            m[cov.row0 * s : (cov.row0 + h) * s, cov.col0 * s : (cov.col0 + w) * s] = cov.inside(
                cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)
            masks[z] = m
        for f in scene.facts:
            above = np.zeros_like(masks[f["z"]])
            for z in kept:
                if z > f["z"]:
                    above |= masks[z]
            seen = masks[f["z"]] & ~above
            assert f["visible_fraction"] == pytest.approx(seen.sum() / masks[f["z"]].sum(), abs=1e-12)
            assert f["visible_fraction"] >= cfg.objects.min_visible
            checked += 1
    assert checked >= 40 and erased >= 10


def test_ignore_region_is_the_visible_support_with_its_reason():
    """A dropped object that shows becomes an ignore region: its mask, box and visible area, and why (issue 12, part 1)."""
    cfg = load_config(overrides=["canvas.width=64", "canvas.height=48", "objects.min_visible=0.5"])
    part = Shape("rectangle", cx=10.0, cy=10.0, size=10.0)  # box [5, 5, 15, 15]
    over = Shape("rectangle", cx=14.0, cy=10.0, size=10.0)  # hides its 6 right columns: 40 % shows
    scene = compose_shapes(grey(cfg), [part, over], cfg, rng=np.random.default_rng(0))
    assert len(scene.boxes) == 1 and scene.facts[0]["z"] == 1
    (facts,) = scene.ignored.facts
    assert facts["ignored"] == "min_visible" and facts["z"] == 0
    assert facts["visible_fraction"] == pytest.approx(0.4)
    assert scene.ignored.boxes.tolist() == [[5.0, 5.0, 9.0, 15.0]]
    assert scene.ignored.areas.tolist() == [40.0]
    row0, col0, mask = scene.ignored.masks[0]
    assert (row0, col0, mask.shape, bool(mask.all())) == (5, 5, (10, 4), True)
    assert scene.info["dropped"]["min_visible"] == 1 and scene.info["ignored"] == {"min_visible": 1, "min_area": 0}
    erased = compose_shapes(grey(cfg), [part, over], load_config(overrides=[
        "canvas.width=64", "canvas.height=48", "objects.min_visible=0.5", "objects.dropped=erase"]),
        rng=np.random.default_rng(0))
    assert len(erased.ignored.facts) == 0 and (erased.image[5:15, 5:9] == 128).all()


def test_dense_canvas_renders_the_most_objects_the_check_allows():
    """4096 objects of 12-120 px on a 64x64 canvas (the most objects.min_area = 1 admits) finish and add up."""
    cfg = load_config(overrides=["canvas.width=64", "canvas.height=64", "objects.count=[4096,4096]"])
    changed, scene = _drawn_pixels(cfg, 0)
    assert len(scene.boxes) + sum(scene.info["dropped"].values()) == 4096
    assert scene.info["dropped"]["hidden"] > 3900
    assert not (changed & ~_coco_union(scene, 64, 64, crowd=True)).any()


# --------------------------------------------------------------------------- sizes stay as asked


@pytest.mark.parametrize("layout", ["scatter", "separated", "pairs", "grid", "clusters"])
def test_no_annotated_size_leaves_its_range(layout):
    """Every annotated object, occluders included, keeps its size fact inside objects.size (issue 12, part 3).

    Big targets with a small occluder range used to get their occluders grown 1.5x at a time, past the range.
    """
    lo, hi = 16.0, 96.0
    cfg = load_config(overrides=[
        "canvas.width=320", "canvas.height=240", f"objects.layout={layout}", "objects.count=[6,10]",
        f"objects.size=[{lo},{hi}]", "objects.occlusion=[0.5,0.9]", "objects.min_visible=0", "objects.max_iou=0.3",
    ])
    occluders = 0
    for index in range(6):
        scene = render_scene(cfg, index)
        for f in (*scene.facts, *scene.ignored.facts):
            assert lo * (1 - 1e-12) <= f["size"] <= hi * (1 + 1e-12), f
            occluders += bool(f.get("occluder"))
    assert occluders >= 10


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


@pytest.mark.parametrize("dropped", ["ignore", "erase"])
def test_visible_boxes_of_dense_scenes_equal_an_independent_computation(dropped):
    """Every annotated object's visible box equals shapely's box of it minus the objects drawn above it.

    Reference: tests/_visible_reference.py (shapely on dense polygons, built from the shape parameters);
    the objects drawn above are the annotated ones and the ignore regions, not the hidden or erased ones.
    """
    from synthgen.scene.composer import _moved
    from synthgen.scene.kinds import sample_objects as _sample_objects
    from synthgen.scene.visible import TOLERANCE
    from tests import _visible_reference as reference

    cfg = load_config(overrides=["canvas.width=64", "canvas.height=48", "objects.outline=0.3",
                                 "objects.min_visible=0.4", "objects.size=[3,30]", f"objects.dropped={dropped}"])
    rng = np.random.default_rng(21)
    cut = 0
    for _ in range(2):
        shapes, styles = _sample_objects(cfg, rng, n=40)
        shapes = [_moved(sh, c) for sh, c in zip(shapes, rng.uniform(size=(40, 2)) * (64, 48))]
        scene = compose_shapes(grey(cfg), shapes, cfg, rng=np.random.default_rng(0), styles=styles)
        drawn = sorted(f["z"] for f in (*scene.facts, *scene.ignored.facts))  # z = position in `shapes`
        for f, box in zip(scene.facts, scene.boxes):
            z = f["z"]
            above = [(shapes[u], styles[u]["stroke"]) for u in drawn if u > z]
            want = reference.visible(shapes[z], styles[z]["stroke"], above, 48, 64)
            assert np.all(np.abs(box - want) <= TOLERANCE + 1e-4), (z, box, want)
            cut += bool(np.any(np.abs(want - np.array(f["full_box"])) > 1e-6))
    assert cut >= 10  # boxes the objects above actually cut


def test_only_drawn_objects_cut_the_visible_box():
    """An erased object hides nothing: the object below it keeps its exact box; kept as an ignore region, it cuts it.

    Worked by hand: A = [5, 15]^2; B = [12, 22] x [5, 15] lies on A's right part; C = [15, 30] x [0, 20]
    (touching A only along x = 15) leaves 3/10 of B in view, under objects.min_visible = 0.5.
    """
    a = Shape("rectangle", cx=10.0, cy=10.0, size=10.0)
    b = Shape("rectangle", cx=17.0, cy=10.0, size=10.0)
    c = Shape("rectangle", cx=22.5, cy=10.0, size=20.0, aspect=0.75)
    base = ["canvas.width=64", "canvas.height=48", "objects.min_visible=0.5"]
    for dropped, box_a in (("erase", [5.0, 5.0, 15.0, 15.0]), ("ignore", [5.0, 5.0, 12.0, 15.0])):
        low_cfg = load_config(overrides=[*base, f"objects.dropped={dropped}"])
        scene = compose_shapes(grey(low_cfg), [a, b, c], low_cfg, rng=np.random.default_rng(0))
        assert [f["z"] for f in scene.facts] == [0, 2]
        assert scene.boxes[0].tolist() == box_a, dropped
        if dropped == "ignore":  # the ignore region's box is its visible box too
            assert scene.ignored.boxes.tolist() == [[12.0, 5.0, 15.0, 15.0]]


def test_ignore_region_box_is_the_box_of_its_segmentation():
    """An ignore region's box is its pixel box, the box of its RLE: it holds every pixel the region changed.

    The thin triangle of the test above under objects.min_visible = 0.8: its top 5/8, so (5/8)^2 < 0.8
    of its area, shows, so it is ignored.  Its pixels: those that differ from the grey canvas, but for
    the square's.
    """
    tri = Shape("triangle", cx=32.0, cy=30.0, size=40.0, aspect=0.15)
    square = Shape("rectangle", 32.0, 45.0, 20.0)
    low_cfg = load_config(overrides=["canvas.width=64", "canvas.height=64", "objects.min_visible=0.8"])
    scene = compose_shapes(grey(low_cfg), [tri, square], low_cfg, rng=np.random.default_rng(0))
    (facts,) = scene.ignored.facts
    assert facts["ignored"] == "min_visible" and "visible_box" not in facts
    row0, col0, mask = scene.ignored.masks[0]
    assert scene.ignored.boxes[0].tolist() == facts["pixel_box"] == mask_box(mask, origin=(col0, row0)).tolist()
    changed = np.any(scene.image != grey(low_cfg), axis=2)
    r0, c0, sq = scene.masks[0]
    changed[r0 : r0 + sq.shape[0], c0 : c0 + sq.shape[1]] &= ~sq
    rows, cols = np.nonzero(changed)
    x0, y0, x1, y1 = scene.ignored.boxes[0]
    assert rows.size and x0 <= cols.min() and cols.max() + 1 <= x1 and y0 <= rows.min() and rows.max() + 1 <= y1
