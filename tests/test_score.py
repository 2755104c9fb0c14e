"""Tests for synthgen.evaluate: COCO box metrics against pycocotools, known answers, slices."""

from __future__ import annotations

import copy
import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _coco_cases import coco_reference, random_case  # noqa: E402

from synthgen.errors import InputFileError, UserError  # noqa: E402
from synthgen.evaluate.cocoeval import (  # noqa: E402
    IOU_THRESHOLDS,
    STAT_NAMES,
    evaluate,
)
from synthgen.evaluate.match import coco_iou  # noqa: E402
from synthgen.evaluate.slices import parse_slice_spec  # noqa: E402

N_RANDOM = 400  # random cases compared with pycocotools in the main equality test


def _gt(boxes, cats=None, areas=None, crowd=None, image_ids=None, facts=None, n_cats=3):
    """COCO ground truth from xywh boxes (ids from 1, REFERENCE.md: COCO JSON pitfalls)."""
    n = len(boxes)
    cats = cats or [1] * n
    image_ids = image_ids or [1] * n
    anns = []
    for i, b in enumerate(boxes):
        a = {
            "id": i + 1,
            "image_id": image_ids[i],
            "category_id": cats[i],
            "bbox": [float(v) for v in b],
            "area": float(areas[i]) if areas else float(b[2] * b[3]),
            "iscrowd": int(crowd[i]) if crowd else 0,
        }
        if facts:
            a["synthgen"] = facts[i]
        anns.append(a)
    imgs = sorted(set(image_ids) | {1})
    return {
        "images": [{"id": i, "width": 640, "height": 480, "file_name": f"{i:06d}.png"} for i in imgs],
        "annotations": anns,
        "categories": [{"id": c, "name": f"c{c}", "supercategory": "shape"} for c in range(1, n_cats + 1)],
    }


def _pred(image_id, cat, box, score):
    return {"image_id": image_id, "category_id": cat, "bbox": [float(v) for v in box], "score": float(score)}


# ----------------------------------------------------------------- equality with the reference library


def test_stats_equal_pycocotools_on_random_cases():
    """All 12 stats equal pycocotools' COCOeval (bbox) to 1e-9 on hundreds of random cases."""
    compared = 0
    for seed in range(N_RANDOM):
        gt, preds = random_case(np.random.default_rng(seed), many=seed % 5 == 0, grid=seed % 2 == 1)
        ref = coco_reference(gt, preds)  # reference: pycocotools 2.0.x COCOeval
        if ref is None:
            continue
        ours = evaluate(gt, preds)
        np.testing.assert_allclose(ours.stats, ref.stats, rtol=0, atol=1e-9, err_msg=f"seed {seed}")
        compared += 1
    assert compared > 0.9 * N_RANDOM


def test_precision_and_recall_arrays_equal_pycocotools():
    """The full precision (T,R,K,A,M) and recall (T,K,A,M) arrays equal COCOeval.eval's."""
    for seed in range(1000, 1060):
        gt, preds = random_case(np.random.default_rng(seed), many=seed % 2 == 0, grid=seed % 3 == 0)
        ref = coco_reference(gt, preds)  # reference: pycocotools COCOeval.accumulate
        if ref is None:
            continue
        ours = evaluate(gt, preds)
        np.testing.assert_allclose(ours.precision, ref.eval["precision"], rtol=0, atol=1e-12)
        np.testing.assert_allclose(ours.recall, ref.eval["recall"], rtol=0, atol=1e-12)


def test_per_category_ap_equals_pycocotools_run_per_category():
    """Per-category AP, AP50, AP75 and AR100 equal pycocotools run with params.catIds=[c]."""
    for seed in range(2000, 2050):
        gt, preds = random_case(np.random.default_rng(seed), grid=seed % 2 == 0)
        if not preds:
            continue
        ours = evaluate(gt, preds)
        for c in ours.per_category:
            ref = coco_reference(gt, preds, cat_ids=[c.id])  # reference: pycocotools, one category
            got = (c.ap, c.ap50, c.ap75, c.ar100)
            np.testing.assert_allclose(got, [ref.stats[i] for i in (0, 1, 2, 8)], rtol=0, atol=1e-9)


def test_pair_iou_equals_pycocotools_mask_iou_bitwise():
    """IoU of COCO boxes, crowd included, is bit-identical to pycocotools.mask.iou."""
    from pycocotools import mask as mask_utils

    rng = np.random.default_rng(5)
    d = np.round(rng.uniform(0, 50, (60, 4)), rng.integers(0, 3))
    g = np.round(rng.uniform(0, 50, (40, 4)), 1)
    crowd = rng.random(40) < 0.3
    ref = mask_utils.iou(d.tolist(), g.tolist(), crowd.astype(np.uint8).tolist())  # reference: pycocotools
    di, gi = np.meshgrid(np.arange(60), np.arange(40), indexing="ij")
    ours = coco_iou(d[di.ravel()], g[gi.ravel()], crowd[gi.ravel()]).reshape(60, 40)
    assert np.array_equal(ours, ref)


def test_predictions_of_categories_absent_from_ground_truth_change_nothing():
    """Predictions of unlisted categories are left out, as pycocotools leaves them out."""
    gt, preds = random_case(np.random.default_rng(7))
    extra = [_pred(gt["images"][0]["id"], 77, [0, 0, 30, 30], 0.99) for _ in range(5)]
    ours = evaluate(gt, preds + extra)
    ref = coco_reference(gt, preds + extra)  # reference: pycocotools drops unknown categories
    np.testing.assert_allclose(ours.stats, ref.stats, rtol=0, atol=1e-9)
    assert ours.n_unknown_category >= 5


def test_empty_predictions_give_zero_where_there_is_ground_truth():
    """No predictions: the stats pycocotools gives when its only prediction is dropped (AP 0, -1 without gt)."""
    gt, _ = random_case(np.random.default_rng(11))
    # pycocotools raises on [] (REFERENCE.md: COCO JSON pitfalls); one prediction of an unlisted
    # category is dropped by its category filter, which leaves it nothing to score.
    ref = coco_reference(gt, [_pred(gt["images"][0]["id"], 999, [0, 0, 5, 5], 0.5)])
    ours = evaluate(gt, [])
    np.testing.assert_allclose(ours.stats, ref.stats, rtol=0, atol=1e-9)
    assert ours.stats[0] == 0.0


def test_empty_predictions_on_small_objects_only():
    """No predictions on small objects only: AP and AR small are 0, medium and large -1 (derived from the rules)."""
    gt = _gt([[0, 0, 10, 10], [50, 50, 20, 20]])
    stats = evaluate(gt, []).stats
    assert stats[0] == 0.0 and stats[3] == 0.0 and stats[9] == 0.0
    assert stats[4] == -1.0 and stats[5] == -1.0 and stats[10] == -1.0 and stats[11] == -1.0


def test_no_ground_truth_at_all_gives_minus_one():
    """Without ground truth every stat is -1, as in pycocotools."""
    gt = _gt([])
    preds = [_pred(1, 1, [0, 0, 10, 10], 0.9)]
    ours = evaluate(gt, preds)
    ref = coco_reference(gt, preds)  # reference: pycocotools
    np.testing.assert_allclose(ours.stats, ref.stats, rtol=0, atol=0)
    assert ours.stats == (-1.0,) * 12


# ----------------------------------------------------------------- known answers


def _sized_boxes():
    """Objects in every COCO size range, on a grid so that none overlap."""
    sides = [8, 20, 40, 60, 100, 150]
    return [[200.0 * (i % 3), 160.0 * (i // 3), float(s), float(s)] for i, s in enumerate(sides)]


def test_ground_truth_fed_back_scores_one_everywhere():
    """Ground truth as predictions gives every stat 1.0 (REFERENCE.md: COCO-style AP, worked values)."""
    boxes = _sized_boxes()
    # One object per image and category, so that AR@1 can reach 1 too.
    gt = _gt(boxes, cats=[1, 2, 3, 1, 2, 3], image_ids=[1, 1, 1, 2, 2, 2])
    preds = [_pred(a["image_id"], a["category_id"], a["bbox"], 0.9) for a in gt["annotations"]]
    stats = evaluate(gt, preds).stats
    np.testing.assert_allclose(stats, 1.0, atol=1e-12)


@pytest.mark.parametrize(("iou", "ap"), [(0.60, 0.3), (0.59, 0.2)])
def test_predictions_shifted_to_a_fixed_iou(iou, ap):
    """Shifted to IoU 0.60: AP50 1, AP75 0, AP 0.3; at 0.59, AP 0.2 (REFERENCE.md: COCO-style AP, worked values)."""
    w = 100.0
    d = w * (1 - iou) / (1 + iou)  # REFERENCE.md: Geometry, offset for a target IoU
    boxes = [[x, 150.0, w, w] for x in (0.0, 300.0)]
    gt = _gt(boxes, cats=[1, 2])
    preds = [_pred(1, a["category_id"], [a["bbox"][0] + d, *a["bbox"][1:]], 0.8) for a in gt["annotations"]]
    stats = evaluate(gt, preds).stats
    assert stats[1] == pytest.approx(1.0, abs=1e-12)
    assert stats[2] == pytest.approx(0.0, abs=1e-12)
    assert stats[0] == pytest.approx(ap, abs=1e-12)


@pytest.mark.parametrize(("first_is_hit", "ap"), [(True, 1.0), (False, 0.5)])
def test_equal_scores_keep_the_results_order(first_is_hit, ap):
    """Tied scores keep the results' order: hit then miss gives AP 1, miss then hit 0.5 (REFERENCE.md: stable sort)."""
    gt = _gt([[10, 10, 50, 50]])
    hit = _pred(1, 1, [10, 10, 50, 50], 0.7)
    miss = _pred(1, 1, [300, 300, 50, 50], 0.7)
    preds = [hit, miss] if first_is_hit else [miss, hit]
    ours = evaluate(gt, preds).stats
    ref = coco_reference(gt, preds).stats  # reference: pycocotools
    assert ours[0] == pytest.approx(ap, abs=1e-12)
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)


def test_equal_scores_across_images_follow_image_id_order():
    """Across images, tied detections are pooled in image-id order, whatever the results' order (pycocotools)."""
    gt = _gt([[10, 10, 50, 50]], image_ids=[2])
    gt["images"].append({"id": 1, "width": 640, "height": 480, "file_name": "000001.png"})
    preds = [_pred(2, 1, [10, 10, 50, 50], 0.7), _pred(1, 1, [10, 10, 50, 50], 0.7)]
    ours = evaluate(gt, preds).stats
    ref = coco_reference(gt, preds).stats  # reference: pycocotools accumulates images by sorted id
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)
    assert ours[0] == pytest.approx(0.5, abs=1e-12)


def test_at_most_100_detections_per_image_and_category():
    """A hit ranked 101st in its image and category is dropped (maxDets 100, REFERENCE.md: COCO-style AP)."""
    gt = _gt([[10, 10, 50, 50]])
    misses = [_pred(1, 1, [300, 300, 20, 20], 0.9) for _ in range(100)]
    preds = misses + [_pred(1, 1, [10, 10, 50, 50], 0.5)]
    ours = evaluate(gt, preds).stats
    assert ours[8] == 0.0
    np.testing.assert_allclose(ours, coco_reference(gt, preds).stats, rtol=0, atol=1e-12)


def test_crowd_region_absorbs_detections_without_counting():
    """Detections inside a crowd region are ignored, not false positives (COCO crowd rule, pycocotools)."""
    gt = _gt([[10, 10, 50, 50], [200, 200, 200, 200]], crowd=[0, 1])
    preds = [_pred(1, 1, [220, 220, 40, 40], 0.9), _pred(1, 1, [10, 10, 50, 50], 0.8)]
    ours = evaluate(gt, preds).stats
    # The crowd IoU is intersection over the detection's area: 1.0 here, so the first is ignored.
    assert ours[1] == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(ours, coco_reference(gt, preds).stats, rtol=0, atol=1e-12)


def test_area_exactly_1024_counts_as_small_and_medium():
    """An object of area exactly 32^2 is in both the small and medium ranges (REFERENCE.md: inclusive ends)."""
    gt = _gt([[10, 10, 32, 32]])
    stats = evaluate(gt, [_pred(1, 1, [10, 10, 32, 32], 0.9)]).stats
    assert stats[3] == pytest.approx(1.0) and stats[4] == pytest.approx(1.0)
    assert stats[5] == -1.0


# ----------------------------------------------------------------- per-category and confusion


def test_confusion_counts_cross_class_hits():
    """A detection on an object of another class counts in that class's row; the rest as hit or none."""
    gt = _gt([[10, 10, 50, 50], [200, 10, 50, 50]], cats=[1, 2])
    preds = [
        _pred(1, 1, [10, 10, 50, 50], 0.9),  # hit class 1
        _pred(1, 2, [12, 10, 50, 50], 0.8),  # class 2 on the class-1 object: IoU 48/52
        _pred(1, 3, [400, 400, 20, 20], 0.7),  # class 3 on nothing
    ]
    conf = evaluate(gt, preds).confusion
    # rows: c1, c2, c3, none; columns: c1, c2, c3
    expected = np.array([[1, 1, 0], [0, 0, 0], [0, 0, 0], [0, 0, 1]])
    assert np.array_equal(conf.counts, expected)
    assert conf.confused == 1


def test_confusion_without_any_object_counts_every_detection_as_none():
    """No annotation at all: each detection is a false positive in the "none" row (Confusion's rule)."""
    gt = {"images": [{"id": 1}], "categories": [{"id": 1, "name": "disc"}, {"id": 2, "name": "ring"}], "annotations": []}
    preds = [_pred(1, 1, [0, 0, 10, 10], 0.9), _pred(1, 2, [5, 5, 10, 10], 0.8), _pred(1, 2, [50, 5, 10, 10], 0.7)]
    assert evaluate(gt, preds).confusion.counts.tolist() == [[0, 0], [0, 0], [1, 2]]


@pytest.mark.parametrize("seed", range(12))
def test_confusion_best_other_class_agrees_with_a_plain_loop(seed):
    """The padded-table and pair-list searches for a false positive's best other-class object agree with a
    loop over pairs by synthgen.geometry.box_iou (IoU >= 0.5, highest, first in file order among equals)."""
    from synthgen.evaluate import classify
    from synthgen.formats.coco import xyxy_from_bbox
    from synthgen.geometry import box_iou

    gt, preds = random_case(np.random.default_rng(seed), grid=seed % 2 == 0, many=seed % 3 == 0)
    ev = evaluate(gt, preds)
    t, pb = ev._truth, ev._pb
    fp = np.arange(len(pb.rec))  # every detection, to exercise many candidates
    gxy, dxy = xyxy_from_bbox(t.box), xyxy_from_bbox(pb.box)
    expected = np.full(len(fp), -1)
    for i, d in enumerate(fp):
        best = 0.5
        for g in range(len(t.img)):
            if t.img[g] != pb.img[d] or t.crowd[g] or t.cat[g] == pb.cat[d]:
                continue
            v = box_iou(dxy[d : d + 1], gxy[g : g + 1])[0]
            if v > best or (v == best and expected[i] < 0):
                best, expected[i] = v, g
    table = classify._best_other_class(t, pb, fp, gxy, dxy)
    keep = np.flatnonzero(~t.crowd)
    g_order = keep[np.argsort(t.img[keep], kind="stable")]
    per_img = np.bincount(t.img[g_order], minlength=len(t.image_ids))
    pairs = classify._best_other_class_pairs(t, pb, fp, g_order, per_img, gxy, dxy)
    assert table.tolist() == expected.tolist()
    assert pairs.tolist() == expected.tolist()


def test_per_category_counts():
    """Per-category results count non-crowd objects and that category's predictions."""
    gt = _gt([[10, 10, 50, 50], [100, 10, 50, 50], [200, 10, 50, 50]], cats=[1, 1, 2], crowd=[0, 1, 0])
    ev = evaluate(gt, [_pred(1, 2, [200, 10, 50, 50], 0.9)])
    by_id = {c.id: c for c in ev.per_category}
    assert (by_id[1].n_gt, by_id[1].n_pred, by_id[2].n_gt, by_id[2].n_pred) == (1, 0, 1, 1)
    assert by_id[2].ap == pytest.approx(1.0) and by_id[1].ap == 0.0 and by_id[3].ap == -1.0


# ----------------------------------------------------------------- slices


def _two_size_case():
    sizes = [10, 12, 14, 80, 90, 100]
    boxes = [[150.0 * (i % 3), 200.0 * (i // 3), float(s), float(s)] for i, s in enumerate(sizes)]
    facts = [{"size": float(s), "kind": "star" if s < 50 else "ring", "visible_fraction": 0.2 if s < 50 else 1.0}
             for s in sizes]
    gt = _gt(boxes, facts=facts)
    preds = [_pred(1, 1, b, 0.9) for b in boxes[3:]]  # only the large ones are found
    return gt, preds


def test_slice_whose_objects_are_all_missed_has_recall_zero():
    """Every small object missed: recall 0 in that bin; the found bin has recall 1 and AP 1 (derived)."""
    gt, preds = _two_size_case()
    small, large = evaluate(gt, preds).slice_by("size", [0, 50, 200])
    assert (small.n_gt, small.recall50, small.recall75, small.ap) == (3, 0.0, 0.0, 0.0)
    assert (large.n_gt, large.recall50) == (3, 1.0)
    assert large.ap == pytest.approx(1.0) and large.mean_iou == pytest.approx(1.0)


def test_categorical_slice_bins_by_value():
    """A string fact gives one bin per value, in sorted order."""
    gt, preds = _two_size_case()
    bins = evaluate(gt, preds).slice_by("kind")
    assert [(b.label, b.n_gt, b.recall50) for b in bins] == [("ring", 3, 1.0), ("star", 3, 0.0)]


def test_fact_without_box_value_counts_unmatched_detections_in_every_bin():
    """For a fact a box cannot carry, a false positive lowers AP in every bin (documented rule)."""
    gt, preds = _two_size_case()
    preds = preds + [_pred(1, 1, [600, 400, 30, 30], 0.95)]  # a false positive on nothing
    low, high = evaluate(gt, preds).slice_by("visible_fraction", [0, 0.5, 1])
    assert low.ap == pytest.approx(0.0)
    # In the found bin the false positive ranks first, then three hits: precision 0, 1/2, 2/3, 3/4,
    # made monotone from the right it is 3/4 at every recall point (derived from the COCO rules).
    assert high.ap50 == pytest.approx(0.75, abs=1e-12)


def test_area_slices_equal_pycocotools_size_ranges():
    """Slicing by area at 32^2 and 96^2 gives pycocotools' AP per size range when no area sits on an edge."""
    for seed in range(3000, 3040):
        gt, preds = random_case(np.random.default_rng(seed))
        for a in gt["annotations"]:
            a["area"] = a["bbox"][2] * a["bbox"][3] * 1.0000001 + 1e-7  # off the edges
        for p in preds:  # detection areas off the edges too
            p["bbox"][2] *= 1.0000003
        ref = coco_reference(gt, preds)  # reference: pycocotools COCOeval, size ranges
        if ref is None:
            continue
        bins = evaluate(gt, preds).slice_by("area", [0, 32**2, 96**2, 1e10])
        for b, a in zip(bins, (1, 2, 3)):
            p = ref.eval["precision"][:, :, :, a, 2]
            ap = float(np.mean(p[p > -1])) if (p > -1).any() else math.nan
            p50 = ref.eval["precision"][0, :, :, a, 2]
            ap50 = float(np.mean(p50[p50 > -1])) if (p50 > -1).any() else math.nan
            np.testing.assert_allclose([b.ap, b.ap50], [ap, ap50], rtol=0, atol=1e-9, err_msg=f"seed {seed}")


def test_slice_by_unknown_fact_names_the_available_ones():
    """Asking for a fact no object records raises a UserError listing the facts."""
    gt, preds = _two_size_case()
    with pytest.raises(UserError, match="'brightness' is not recorded.*kind"):
        evaluate(gt, preds).slice_by("brightness")


def test_parse_slice_spec_rejects_decreasing_edges():
    """FACT:EDGES needs strictly increasing numbers."""
    assert parse_slice_spec("max_iou:0,0.5,1") == ("max_iou", (0.0, 0.5, 1.0))
    with pytest.raises(UserError, match="strictly increasing"):
        parse_slice_spec("size:0,32,16")


# ----------------------------------------------------------------- output and validation


def test_to_dict_is_strict_json():
    """to_dict holds only JSON values (no NaN), including slices."""
    gt, preds = _two_size_case()
    ev = evaluate(gt, preds)
    out = ev.to_dict({"size": ev.slice_by("size"), "kind": ev.slice_by("kind")})
    text = json.dumps(out, allow_nan=False)
    assert set(json.loads(text)["stats"]) == set(STAT_NAMES)


def test_inputs_are_not_modified():
    """evaluate leaves the ground truth and predictions as they were (pycocotools' loadRes does not)."""
    gt, preds = random_case(np.random.default_rng(3))
    gt0, preds0 = copy.deepcopy(gt), copy.deepcopy(preds)
    evaluate(gt, preds)
    assert gt == gt0 and preds == preds0


@pytest.mark.parametrize(
    ("records", "message"),
    [
        ({"image_id": 1}, "predictions must be a JSON array"),
        ([_pred(1, 1, [0, 0, 5, 5], 0.5), {"image_id": 1, "category_id": 1, "score": 0.5}], "record 1: missing key 'bbox'"),
        ([_pred(1, 1, [0, 0, 5, 5], 0.5), _pred(8, 1, [0, 0, 5, 5], 0.5)], "record 1: 'image_id' must be the id"),
        ([_pred(1, 1, [0, 0, 5, 5], 0.5)] * 2 + [_pred(1, 1, [0, 0, math.inf, 5], 0.5)], "record 2: 'bbox' must be"),
        ([_pred(1, 1, [0, 0, -5, 5], 0.5)], r"record 0: 'bbox' .* width >= 0"),
        ([_pred(1, 1, [0, 0, 5, 5], math.nan)], "record 0: 'score' must be a finite number"),
        ([{**_pred(1, 1, [0, 0, 5, 5], 0.5), "image_id": "1"}], "record 0: 'image_id' must be an integer"),
        (["box"], "record 0: must be an object"),
    ],
)
def test_malformed_predictions_name_the_record_and_rule(records, message):
    """Malformed predictions raise InputFileError naming the file, the record and the rule."""
    with pytest.raises(InputFileError, match=f"^pred.json: {message}"):
        evaluate(_gt([[0, 0, 10, 10]]), records, pred_name="pred.json")


def test_annotation_id_zero_is_rejected():
    """Annotation id 0 would silently never match in COCO evaluation (REFERENCE.md: COCO JSON pitfalls)."""
    gt = _gt([[0, 0, 10, 10]])
    gt["annotations"][0]["id"] = 0
    with pytest.raises(InputFileError, match=r"annotations\[0\]: 'id' must be a non-zero integer"):
        evaluate(gt, [])


def test_thresholds_are_cocos():
    """Ten IoU thresholds from 0.5 to 0.95 (REFERENCE.md: COCO-style AP)."""
    assert len(IOU_THRESHOLDS) == 10 and IOU_THRESHOLDS[0] == 0.5 and IOU_THRESHOLDS[5] == 0.75


def test_stats_equal_pycocotools_on_a_synthgen_dataset(small_dataset):
    """On a rendered synthgen dataset with jittered, relabelled and missing detections, stats equal pycocotools'."""
    ds, _ = small_dataset
    gt = json.loads((ds / "annotations.json").read_text())
    cat_ids = [c["id"] for c in gt["categories"]]
    for seed in range(20):
        rng = np.random.default_rng(seed)
        preds = []
        for a in gt["annotations"]:
            if rng.random() < 0.2:
                continue  # missed
            x, y, w, h = a["bbox"]
            dx, dy = rng.normal(0, 0.2, 2) * (w, h)
            cat = a["category_id"] if rng.random() < 0.9 else int(rng.choice(cat_ids))
            preds.append(_pred(a["image_id"], cat, [x + dx, y + dy, w * rng.uniform(0.8, 1.25), h], rng.random()))
        ours = evaluate(gt, preds)
        ref = coco_reference(gt, preds)  # reference: pycocotools COCOeval (bbox)
        np.testing.assert_allclose(ours.stats, ref.stats, rtol=0, atol=1e-9)
        for bins in (ours.slice_by("size"), ours.slice_by("kind"), ours.slice_by("visible_fraction")):
            assert sum(b.n_gt for b in bins) == sum(not a["iscrowd"] for a in gt["annotations"])  # objects only


def test_slices_of_a_dataset_without_objects_are_empty_bins():
    """With no ground truth at all, default-binned facts give bins of 0 objects (not an error), others none."""
    gt = {"images": [{"id": 1, "width": 50, "height": 50}], "annotations": [],
          "categories": [{"id": 1, "name": "disc"}]}
    ev = evaluate(gt, [{"image_id": 1, "category_id": 1, "bbox": [1, 1, 5, 5], "score": 0.5}])
    vf = ev.slice_by("visible_fraction")
    assert [b.n_gt for b in vf] == [0] * 5 and all(math.isnan(b.recall50) for b in vf)
    assert [(b.lo, b.hi, b.n_gt) for b in ev.slice_by("size", [0, 8, 16])] == [(0.0, 8.0, 0), (8.0, 16.0, 0)]
    assert ev.slice_by("kind") == [] and ev.slice_by("contrast", None) != []
    assert ev.slice_by("shininess") == []
    # pycocotools (REFERENCE.md: COCO-style AP): a category without ground truth scores -1
    assert ev.stats[0] == -1.0


def test_derived_facts_equal_the_recorded_ones(small_dataset):
    """On synthgen's own data with the facts removed, kind, max_iou and neighbours derive to the recorded values,
    and max_iou agrees with box IoUs from shapely polygons (outside reference)."""
    import json

    import shapely

    from synthgen.evaluate.cocoeval import evaluate

    ds, _ = small_dataset
    gt = json.loads((ds / "annotations.json").read_text())
    bare = json.loads(json.dumps(gt))
    for a in bare["annotations"]:
        a.pop("synthgen")
    preds = [{"image_id": a["image_id"], "category_id": a["category_id"], "bbox": a["bbox"], "score": 1.0}
             for a in gt["annotations"]]
    with_facts, without = evaluate(gt, preds), evaluate(bare, preds)
    for fact in ("kind", "max_iou", "neighbours"):
        recorded, _ = with_facts.fact_values(fact)
        derived, _ = without.fact_values(fact)
        if fact == "kind":
            assert derived.tolist() == recorded.tolist()
        else:
            np.testing.assert_allclose(derived, recorded, rtol=0, atol=1e-12)
    size, _ = without.fact_values("size")
    assert size.tolist() == [max(a["bbox"][2], a["bbox"][3]) for a in gt["annotations"]]
    max_iou, _ = without.fact_values("max_iou")
    assert (max_iou > 0).any()  # the small dataset has overlapping boxes, so the check is not vacuous
    for i, a in enumerate(gt["annotations"]):
        if a["iscrowd"]:  # an ignore region has no box relations (README: max_iou, objects only)
            assert np.isnan(max_iou[i])
            continue
        x, y, w, h = a["bbox"]
        pa = shapely.box(x, y, x + w, y + h)
        others = [shapely.box(b["bbox"][0], b["bbox"][1], b["bbox"][0] + b["bbox"][2], b["bbox"][1] + b["bbox"][3])
                  for b in gt["annotations"]
                  if b["image_id"] == a["image_id"] and b["id"] != a["id"] and not b["iscrowd"]]
        ref = max((pa.intersection(pb).area / pa.union(pb).area for pb in others), default=0.0)
        assert abs(max_iou[i] - ref) < 1e-9


# ----------------------------------------------------------------- ignore regions of rendered datasets


@pytest.fixture(scope="module")
def dense_coco(tmp_path_factory):
    """COCO ground truth of three dense tiny-object images (configs/tiny.toml, 300-500 objects each)."""
    from synthgen.config import load_config
    from synthgen.run.make import make_dataset

    out = tmp_path_factory.mktemp("dense") / "ds"
    make_dataset(load_config("configs/tiny.toml", ["count=3", "objects.count=[300,500]"]), out, workers=1)
    return json.loads((out / "annotations.json").read_text())


def test_finding_every_visible_speck_loses_nothing(dense_coco):
    """Truth fed back plus one confident prediction on every ignore region: AP 1.0 in pycocotools and here.

    REFERENCE.md: COCO-style AP (truth fed back gives every stat 1.0) and pycocotools' crowd rule: a
    detection matched to an iscrowd region is ignored, neither true nor false.  Without the ignore
    regions the same predictions are charged as false positives.
    """
    anns = dense_coco["annotations"]
    crowd = [a for a in anns if a["iscrowd"] == 1]
    objects = [a for a in anns if a["iscrowd"] == 0]
    assert len(crowd) > 30 and len(objects) > 100
    preds = [_pred(a["image_id"], a["category_id"], a["bbox"], 0.9) for a in objects]
    preds += [_pred(a["image_id"], a["category_id"], a["bbox"], 0.99) for a in crowd]  # ranked above the objects
    ref = coco_reference(dense_coco, preds)  # reference: pycocotools 2.0.x COCOeval
    mine = evaluate(dense_coco, preds).stats
    for stats in (ref.stats, mine):
        assert stats[0] == pytest.approx(1.0, abs=1e-9) and stats[1] == pytest.approx(1.0, abs=1e-9)
        assert stats[8] == pytest.approx(1.0, abs=1e-9)
    np.testing.assert_allclose(mine, ref.stats, rtol=0, atol=1e-9)
    unmarked = dict(dense_coco, annotations=objects)  # the specks drawn but not annotated at all
    worse = coco_reference(unmarked, preds)
    assert worse.stats[0] < 0.99  # the specks found become false positives, ranked first
    np.testing.assert_allclose(evaluate(unmarked, preds).stats, worse.stats, rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_pairs_listed_in_small_slices_give_the_same_evaluation(seed, monkeypatch):
    """Pairs are listed in slices of detections; slices of 2 give the stats, matches and confusion of one slice."""
    from synthgen.evaluate import match as match_module

    gt, preds = random_case(np.random.default_rng(100 + seed), grid=seed % 2 == 0, many=seed % 3 == 0)
    whole = evaluate(gt, preds)
    monkeypatch.setattr(match_module, "_CHUNK", 2)
    sliced = evaluate(gt, preds)
    assert sliced.stats == whole.stats
    assert np.array_equal(sliced._matched, whole._matched)
    assert np.array_equal(sliced.confusion.counts, whole.confusion.counts)
    assert len(sliced._pb.p_iou) == 0 or sliced._pb.p_iou.min() >= 0.5  # pairs below every threshold left out
