"""geometry: box arrays, areas, IoU, clipping and mask boxes against independent references."""

from __future__ import annotations

import numpy as np
import pytest
from shapely.geometry import box as sbox
from skimage.measure import regionprops

from synthgen import geometry
from synthgen.geometry import (
    as_boxes,
    box_area,
    box_intersection,
    box_iou,
    boxes_valid,
    clip_boxes,
    mask_box,
    pairwise_iou,
)


def _random_boxes(rng, n):
    xy = rng.uniform(0, 100, (n, 2))
    wh = rng.uniform(0.5, 60, (n, 2))
    return np.hstack([xy, xy + wh])


def test_iou_worked_example_is_one_seventh():
    """IoU of [0, 0, 2, 2] and [1, 1, 3, 3] is 1/7 (REFERENCE.md: Geometry)."""
    assert pairwise_iou([[0, 0, 2, 2]], [[1, 1, 3, 3]])[0, 0] == pytest.approx(1 / 7, abs=1e-15)
    assert box_iou([[0, 0, 2, 2]], [[1, 1, 3, 3]])[0] == pytest.approx(1 / 7, abs=1e-15)


def test_offset_equal_boxes_have_iou_w_minus_d_over_w_plus_d():
    """Equal w x h boxes offset by d along x have IoU (w - d)/(w + d) (REFERENCE.md: Geometry)."""
    w, h, d = 10.0, 4.0, 3.0
    assert box_iou([[0, 0, w, h]], [[d, 0, w + d, h]])[0] == pytest.approx((w - d) / (w + d), abs=1e-15)


def test_pairwise_iou_and_intersection_match_shapely():
    """Every pair's intersection and IoU equal shapely's polygon areas (reference library)."""
    rng = np.random.default_rng(3)
    a, b = _random_boxes(rng, 17), _random_boxes(rng, 11)
    inter, iou = box_intersection(a, b), pairwise_iou(a, b)
    assert inter.shape == iou.shape == (17, 11)
    for i, p in enumerate(a):
        for j, q in enumerate(b):
            sp, sq = sbox(*p), sbox(*q)  # reference: shapely polygons
            assert inter[i, j] == pytest.approx(sp.intersection(sq).area, abs=1e-9)
            assert iou[i, j] == pytest.approx(sp.intersection(sq).area / sp.union(sq).area, abs=1e-12)
    assert (iou > 0).any() and (iou == 0).any()  # both overlapping and disjoint pairs were checked


def test_box_iou_is_the_diagonal_of_pairwise_iou():
    """Element-wise IoU equals the diagonal of the IoU matrix."""
    rng = np.random.default_rng(4)
    a, b = _random_boxes(rng, 20), _random_boxes(rng, 20)
    np.testing.assert_array_equal(box_iou(a, b), np.diag(pairwise_iou(a, b)))


def test_empty_inputs_give_empty_outputs():
    """No boxes on either side gives (0,), (0, M) and (N, 0) results, not errors."""
    one = [[0, 0, 1, 1]]
    assert as_boxes([]).shape == (0, 4) and box_area([]).shape == (0,)
    assert pairwise_iou([], one).shape == (0, 1) and pairwise_iou(one, []).shape == (1, 0)
    assert box_iou([], []).shape == (0,) and boxes_valid([]).shape == (0,)


def test_degenerate_boxes_have_zero_area_and_iou():
    """A zero-width box has area 0 and IoU 0 with itself (empty union), and is not valid."""
    flat = [[5, 5, 5, 9]]
    assert box_area(flat)[0] == 0.0
    assert pairwise_iou(flat, flat)[0, 0] == 0.0 and box_iou(flat, flat)[0] == 0.0
    assert boxes_valid(flat).tolist() == [False]
    assert boxes_valid([[0, 0, 1, np.nan], [0, 0, 1, 1], [2, 0, 1, 1]]).tolist() == [False, True, False]


def test_box_iou_rejects_unequal_lengths():
    """Element-wise IoU of 2 and 3 boxes is a ValueError naming both shapes."""
    with pytest.raises(ValueError, match=r"\(2, 4\) and \(3, 4\)"):
        box_iou(np.zeros((2, 4)), np.zeros((3, 4)))


def test_mask_box_is_half_open_like_regionprops():
    """A 4x4 block has width 4 and area 16, one pixel width 1, as scikit-image regionprops' bbox says."""
    m = np.zeros((10, 12), bool)
    m[2:6, 3:7] = True
    m2 = np.zeros((10, 12), bool)
    m2[7, 9] = True
    for mask in (m, m2):
        r0, c0, r1, c1 = regionprops(mask.astype(np.uint8))[0].bbox  # reference: half-open (min_row, min_col, max_row, max_col)
        assert mask_box(mask).tolist() == [c0, r0, c1, r1]
    assert box_area(mask_box(m))[0] == 16.0
    assert (mask_box(m2)[2] - mask_box(m2)[0]) == 1.0
    assert mask_box(np.zeros((3, 3), bool)) is None


def test_mask_box_with_origin_and_scale():
    """A 4x supersampled mask's box is scaled by 1/4 and shifted by its origin."""
    m = np.zeros((8, 8), bool)
    m[2:6, 1:3] = True
    assert mask_box(m, origin=(10.0, 20.0), scale=0.25).tolist() == [10.25, 20.5, 10.75, 21.5]


def test_clip_boxes_matches_shapely_intersection_with_the_canvas():
    """Clipping equals the bounds of the box's intersection with the canvas polygon (shapely)."""
    boxes = np.array([[-5, -5, 10, 10], [90, 70, 120, 95], [20, 30, 40, 50]], dtype=float)
    canvas = sbox(0, 0, 100, 80)
    got = clip_boxes(boxes, 100, 80)
    for b, g in zip(boxes, got):
        assert g.tolist() == list(sbox(*b).intersection(canvas).bounds)  # reference: shapely
    outside = clip_boxes([[120, 10, 130, 20]], 100, 80)
    assert boxes_valid(outside).tolist() == [False]


def _small_boxes(n, rng):
    """Boxes of 0.5 to 15 px on a 50 px field, so that some overlap and some do not."""
    xy = rng.uniform(0, 50.0, size=(n, 2))
    return np.concatenate([xy, xy + rng.uniform(0.5, 15.0, size=(n, 2))], axis=1)


def test_box_relations_equal_a_plain_double_loop():
    """Largest IoU and overlap count per box within its group equal a double loop over shapely boxes."""
    rng = np.random.default_rng(4)
    b = _small_boxes(300, rng)
    g = rng.integers(0, 5, size=300)
    best, count = geometry.box_relations(b, g)
    polys = [sbox(*row) for row in b]  # GEOS areas: an outside reference for the IoU
    for i in range(len(b)):
        ious = [
            polys[i].intersection(polys[j]).area / polys[i].union(polys[j]).area
            for j in range(len(b))
            if j != i and g[j] == g[i]
        ]
        assert best[i] == pytest.approx(max(ious, default=0.0), abs=1e-12)
        assert count[i] == sum(v > 0 for v in ious)


def test_box_relations_of_one_group_and_of_none():
    """groups=None is one group; a lone box has no relation; touching boxes do not overlap."""
    b = np.array([[0, 0, 2, 2], [2, 0, 4, 2], [1, 0, 3, 2.0]])
    best, count = geometry.box_relations(b)
    assert best.tolist() == pytest.approx([1 / 3, 1 / 3, 1 / 3])
    assert count.tolist() == [1, 1, 2]
    best, count = geometry.box_relations(b[:1])
    assert best.tolist() == [0.0] and count.tolist() == [0]


def test_group_max_overlap_equals_a_double_loop():
    """Each box's largest IoU (or IoA) with the other set's boxes of its group, skipping one, as a loop gives it."""
    rng = np.random.default_rng(8)
    a, b = _small_boxes(60, rng), _small_boxes(80, rng)
    ga, gb = rng.integers(0, 4, 60), rng.integers(0, 4, 80)
    skip = rng.integers(-1, 80, 60)
    for measure in (geometry.box_iou, geometry.box_ioa):
        got = geometry.group_max_overlap(a, ga, b, gb, exclude=skip, measure=measure)
        for i in range(60):
            vals = [measure(a[i : i + 1], b[j : j + 1])[0] for j in range(80) if gb[j] == ga[i] and j != skip[i]]
            assert got[i] == max(vals, default=0.0)


def test_longer_side_and_half_extents_of_a_pixel_block():
    """A 4x4 pixel block's box has longer side 4 and half extents 2 (common practice: half-open boxes)."""
    box = geometry.mask_box(np.ones((4, 4), bool))
    assert geometry.box_longer_side([box]).tolist() == [4.0]
    assert geometry.half_extents([box]).tolist() == [[2.0, 2.0]]
