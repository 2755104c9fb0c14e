"""Tests for synthgen.jitter.coco: simulated detections for a COCO dataset, its sidecar and its files."""

from __future__ import annotations

import os

import orjson
import pytest
import shapely

from synthgen.errors import ConfigError, InputFileError, UserError
from synthgen.formats.results import write_results
from synthgen.jitter import DETECTION_KINDS, IOU_TOLERANCE, OUTCOMES, DetectorSpec
from synthgen.jitter.coco import SIDECAR_FORMAT, jitter_dataset, jitter_files, truth_path_for
from tests._coco_cases import coco_reference


def hand_coco() -> dict:
    """Two images, three categories, nine boxes that do not overlap, one crowd region; ids from 1."""
    boxes = {  # image id -> list of (category, [x, y, w, h])
        1: [(1, [4.0, 4.0, 20.0, 12.0]), (2, [40.0, 6.0, 16.0, 16.0]), (3, [70.0, 30.0, 9.5, 25.25]),
            (1, [0.0, 50.0, 1.0, 1.0]), (2, [85.0, 0.0, 15.0, 10.0])],
        2: [(3, [10.0, 10.0, 30.0, 30.0]), (1, [50.0, 50.0, 14.0, 7.0]), (2, [0.0, 0.0, 5.0, 5.0]),
            (1, [60.0, 0.0, 20.0, 20.0])],
    }
    anns = []
    for image_id, items in boxes.items():
        for cat, bbox in items:
            anns.append({"id": len(anns) + 1, "image_id": image_id, "category_id": cat, "bbox": bbox,
                         "area": bbox[2] * bbox[3], "iscrowd": 0})
    anns.append({"id": len(anns) + 1, "image_id": 2, "category_id": 1, "bbox": [30.0, 60.0, 10.0, 10.0],
                 "area": 100.0, "iscrowd": 1})
    return {
        "images": [{"id": 1, "file_name": "000000.png", "width": 100, "height": 80},
                   {"id": 2, "file_name": "000001.png", "width": 90, "height": 90}],
        "annotations": anns,
        "categories": [{"id": c, "name": n, "supercategory": "shape"} for c, n in ((1, "rectangle"), (2, "ellipse"), (3, "star"))],
    }


def shapely_bbox_iou(a, b) -> float:
    """IoU of two COCO [x, y, w, h] boxes by shapely polygon areas."""
    pa = shapely.box(a[0], a[1], a[0] + a[2], a[1] + a[3])
    pb = shapely.box(b[0], b[1], b[0] + b[2], b[1] + b[3])
    return pa.intersection(pb).area / pa.union(pb).area


def evaluate(gt: dict, preds: list[dict], iou_thrs=None):
    """pycocotools bbox evaluation on copies (tests/_coco_cases.py; loadRes edits its input, REFERENCE.md pitfalls)."""
    return coco_reference(gt, preds, iou_thrs=iou_thrs)


def test_zero_rates_give_only_true_positives_in_range():
    """With every rate 0, each non-crowd box gets one true positive inside the IoU range."""
    coco = hand_coco()
    preds, sidecar, summary = jitter_dataset(coco, seed=3, spec=DetectorSpec(iou=(0.55, 0.7)))
    gt = {a["id"]: a for a in coco["annotations"]}
    assert len(preds) == 9 and summary["kinds"]["true_positive"] == 9
    assert sorted(r["gt_id"] for r in sidecar["predictions"]) == list(range(1, 10))  # the crowd box (10) is left out
    for p, r in zip(preds, sidecar["predictions"]):
        ref = shapely_bbox_iou(p["bbox"], gt[r["gt_id"]]["bbox"])  # shapely reference
        assert ref == pytest.approx(r["iou"], abs=IOU_TOLERANCE)
        assert 0.55 - IOU_TOLERANCE <= ref <= 0.7 + IOU_TOLERANCE
        assert p["category_id"] == gt[r["gt_id"]]["category_id"]
    assert summary["ignored_crowd"] == 1


def test_results_file_shape_and_sidecar_alignment():
    """Results entries are exactly {image_id, category_id, bbox, score}; the sidecar mirrors them in order."""
    preds, sidecar, summary = jitter_dataset(hand_coco(), seed=1, spec=DetectorSpec(miss=0.2, background=2.0, duplicates=0.3))
    # REFERENCE.md: COCO JSON, results file is a JSON array of {image_id, category_id, bbox: [x, y, w, h], score}
    assert all(set(p) == {"image_id", "category_id", "bbox", "score"} for p in preds)
    assert sidecar["format"] == SIDECAR_FORMAT and sidecar["summary"] == summary
    for i, (p, r) in enumerate(zip(preds, sidecar["predictions"])):
        assert r["index"] == i and all(r[k] == p[k] for k in p)
        assert r["kind"] in DETECTION_KINDS
        assert (r["gt_id"] is None) == (r["kind"] == "background") == (r["iou"] is None)
    assert summary["predictions"] == len(preds) == sum(summary["kinds"].values())
    assert sum(summary["outcomes"].values()) == summary["ground_truth"] == 9
    assert sorted(sidecar["missed"]) == sorted(g["gt_id"] for g in sidecar["ground_truth"] if g["outcome"] == "missed")
    assert summary["outcomes"]["missed"] == 2  # floor(0.2 * 9 + 0.5)
    assert all(g["outcome"] in OUTCOMES for g in sidecar["ground_truth"])


def test_same_seed_same_bytes():
    """The same seed gives byte-identical predictions and sidecar; another seed changes them."""
    spec = DetectorSpec(miss=0.1, duplicates=0.2, background=1.0, relabel=0.1, score_overlap=0.3)
    a = jitter_dataset(hand_coco(), seed=5, spec=spec)
    b = jitter_dataset(hand_coco(), seed=5, spec=spec)
    c = jitter_dataset(hand_coco(), seed=6, spec=spec)
    assert orjson.dumps(a[0]) == orjson.dumps(b[0]) and orjson.dumps(a[1]) == orjson.dumps(b[1])
    assert orjson.dumps(a[0]) != orjson.dumps(c[0])


def test_input_is_not_modified():
    """jitter_dataset leaves the COCO dict it is given unchanged."""
    coco = hand_coco()
    before = orjson.dumps(coco)
    jitter_dataset(coco, seed=0, spec=DetectorSpec(background=1.0))
    assert orjson.dumps(coco) == before


def test_pycocotools_ap_known_answers():
    """IoU in [0.55, 0.70] and no false positives: AP50 = 1, AP75 = 0; IoU >= 0.96: AP = 1 (pycocotools)."""
    coco = hand_coco()
    preds, _, _ = jitter_dataset(coco, seed=2, spec=DetectorSpec(iou=(0.55, 0.70)))
    ev = evaluate(coco, preds)
    # pycocotools 2.0.x stats order: AP, AP50, AP75, ... (REFERENCE.md: COCO-style AP)
    assert ev.stats[1] == pytest.approx(1.0, abs=1e-9) and ev.stats[2] == 0.0
    preds, _, _ = jitter_dataset(coco, seed=2, spec=DetectorSpec(iou=(0.96, 1.0)))
    assert evaluate(coco, preds).stats[0] == pytest.approx(1.0, abs=1e-9)


def test_pycocotools_recall_matches_missed_list():
    """Recall at IoU 0.5 per category equals 1 - missed / total from the sidecar (pycocotools)."""
    coco = hand_coco()
    preds, sidecar, _ = jitter_dataset(coco, seed=8, spec=DetectorSpec(miss=0.34, duplicates=0.3, background=1.5))
    assert all(r["other_iou"] < 0.5 for r in sidecar["predictions"])  # precondition of the known answer
    ev = evaluate(coco, preds, iou_thrs=[0.5])
    recall = ev.eval["recall"][0, :, 0, -1]  # pycocotools 2.0.x: [iouThr, category, area 'all', maxDets 100]
    missed = set(sidecar["missed"])
    for k, c in enumerate(ev.params.catIds):
        ids = [g["gt_id"] for g in sidecar["ground_truth"] if g["category_id"] == c]
        assert recall[k] == (len(ids) - len(missed & set(ids))) / len(ids)


def test_boxes_touching_the_image_border_stay_inside():
    """Predictions of border-touching boxes stay inside their images."""
    coco = hand_coco()
    preds, _, _ = jitter_dataset(coco, seed=4, spec=DetectorSpec(iou=(0.3, 0.5), duplicates=0.5, background=3.0))
    size = {im["id"]: (im["width"], im["height"]) for im in coco["images"]}
    for p in preds:
        x, y, w, h = p["bbox"]
        W, H = size[p["image_id"]]
        assert x >= 0 and y >= 0 and x + w <= W + 1e-9 and y + h <= H + 1e-9


def test_empty_annotations():
    """A dataset without annotations gives only background predictions, or none."""
    coco = hand_coco()
    coco["annotations"] = []
    preds, sidecar, summary = jitter_dataset(coco, seed=0)
    assert preds == [] and sidecar["missed"] == [] and summary["ground_truth"] == 0
    preds, _, summary = jitter_dataset(coco, seed=0, spec=DetectorSpec(background=2.0))
    assert summary["kinds"]["background"] == len(preds)


@pytest.mark.parametrize(
    ("edit", "match"),
    [
        (lambda c: c.pop("images"), "'images' must be a list"),
        (lambda c: c["annotations"][0].update(bbox=[1, 2, -3, 4]), r"annotations\[0\] \(id 1\): 'bbox' must be finite"),
        (lambda c: c["annotations"][1].update(image_id=77), "'image_id' must name an image"),
        (lambda c: c["annotations"][2].update(category_id=9), "'category_id' must name a category"),
        (lambda c: c["annotations"][3].update(bbox=[95.0, 0.0, 10.0, 10.0]), "must lie inside its 100 x 80 image"),
        (lambda c: c["annotations"][4].update(id=1), "'id' must be unique"),
    ],
)
def test_malformed_ground_truth_is_a_user_error(edit, match):
    """Malformed ground truth raises InputFileError naming the file, the record and the rule."""
    coco = hand_coco()
    edit(coco)
    with pytest.raises(InputFileError, match=match) as info:
        jitter_dataset(coco, seed=0, source="DIR/annotations.json")
    assert str(info.value).startswith("DIR/annotations.json: ")


def test_box_outside_image_allowed_without_keep_inside():
    """Turning keep-inside off accepts boxes that leave their image."""
    coco = hand_coco()
    coco["annotations"][3]["bbox"] = [95.0, 0.0, 10.0, 10.0]
    preds, _, _ = jitter_dataset(coco, seed=0, spec=DetectorSpec(keep_inside=False))
    assert len(preds) == 9


def test_relabel_needs_two_categories():
    """Relabelling a one-category dataset is refused as a user error."""
    coco = hand_coco()
    coco["categories"] = coco["categories"][:1]
    for a in coco["annotations"]:
        a["category_id"] = 1
    with pytest.raises(UserError, match="at least 2 categories"):
        jitter_dataset(coco, seed=0, spec=DetectorSpec(relabel=0.5))


def test_bad_seed():
    """A negative seed is refused."""
    with pytest.raises(ConfigError, match="'seed'"):
        jitter_dataset(hand_coco(), seed=-1)


def test_write_outputs_atomically(tmp_path):
    """Both files are written under their final names and nothing else is left behind."""
    preds, sidecar, _ = jitter_dataset(hand_coco(), seed=0)
    write_results(tmp_path / "pred.json", tmp_path / "pred.truth.json", preds, sidecar)
    assert sorted(os.listdir(tmp_path)) == ["pred.json", "pred.truth.json"]
    assert orjson.loads((tmp_path / "pred.json").read_bytes()) == preds
    assert orjson.loads((tmp_path / "pred.truth.json").read_bytes()) == sidecar


def test_write_outputs_nothing_when_a_directory_is_missing(tmp_path):
    """A missing output directory raises before either file is written."""
    preds, sidecar, _ = jitter_dataset(hand_coco(), seed=0)
    with pytest.raises(InputFileError, match="directory does not exist"):
        write_results(tmp_path / "pred.json", tmp_path / "nope" / "t.json", preds, sidecar)
    assert os.listdir(tmp_path) == []


def write_dataset(root, coco) -> None:
    root.mkdir()
    (root / "annotations.json").write_bytes(orjson.dumps(coco))


def test_jitter_files_end_to_end(tmp_path):
    """jitter_files reads DATASET/annotations.json and writes results plus PRED.truth.json."""
    write_dataset(tmp_path / "ds", hand_coco())
    summary = jitter_files(tmp_path / "ds", tmp_path / "pred.json", seed=1, spec=DetectorSpec(background=1.0))
    assert truth_path_for(tmp_path / "pred.json") == tmp_path / "pred.truth.json"
    side = orjson.loads((tmp_path / "pred.truth.json").read_bytes())
    assert side["summary"] == summary
    assert len(orjson.loads((tmp_path / "pred.json").read_bytes())) == summary["predictions"]


def test_jitter_files_missing_dataset_writes_nothing(tmp_path):
    """A missing dataset directory is a user error and no output appears."""
    with pytest.raises(InputFileError, match="is not a dataset directory"):
        jitter_files(tmp_path / "absent", tmp_path / "pred.json")
    assert os.listdir(tmp_path) == []


def test_jitter_files_malformed_json_writes_nothing(tmp_path):
    """Broken annotations.json is a user error naming the file; no output appears."""
    (tmp_path / "ds").mkdir()
    (tmp_path / "ds" / "annotations.json").write_text("{\"images\": [", encoding="utf-8")
    with pytest.raises(InputFileError, match="annotations.json: is not valid JSON"):
        jitter_files(tmp_path / "ds", tmp_path / "pred.json")
    assert os.listdir(tmp_path) == ["ds"]


def grid_coco(n_side: int = 14) -> dict:
    """One 1000 x 1000 image with n_side^2 boxes of assorted sizes on a grid, none overlapping."""
    anns = []
    for r in range(n_side):
        for c in range(n_side):
            w, h = 12.0 + (r * 7 + c * 3) % 40, 10.0 + (r * 5 + c * 11) % 38
            anns.append({"id": len(anns) + 1, "image_id": 1, "category_id": 1 + (r + c) % 2,
                         "bbox": [c * 70.0 + 3.5, r * 70.0 + 1.25, w, h], "area": w * h, "iscrowd": 0})
    return {
        "images": [{"id": 1, "file_name": "000000.png", "width": 1000, "height": 1000}],
        "annotations": anns,
        "categories": [{"id": 1, "name": "ring", "supercategory": "shape"}, {"id": 2, "name": "star", "supercategory": "shape"}],
    }


@pytest.mark.parametrize(
    ("iou", "matched", "missed"),
    [
        ((0.5, 0.5), [0.5], []),          # a point on a threshold: every box matched there
        ((0.7, 0.7), [0.5, 0.7], [0.75]),  # 0.7 is linspace's 0.7000000000000001
        ((0.55, 0.7), [0.5, 0.55], [0.7]),  # a high end on a threshold: no box matched there
    ],
)
def test_ranges_on_coco_thresholds_land_on_a_known_side(iou, matched, missed):
    """pycocotools matches every box at the thresholds the range reaches and none at those it stops on."""
    coco = grid_coco()
    preds, sidecar, summary = jitter_dataset(coco, seed=4, spec=DetectorSpec(iou=iou))
    ev = evaluate(coco, preds)
    thresholds = ev.params.iouThrs.tolist()  # pycocotools: linspace(0.5, 0.95, 10)
    recall = ev.eval["recall"][:, :, 0, -1]  # [iouThr, category, area 'all', maxDets 100]
    for t in matched:
        assert (recall[thresholds.index(min(thresholds, key=lambda v: abs(v - t)))] == 1.0).all()
    for t in missed:
        assert (recall[thresholds.index(min(thresholds, key=lambda v: abs(v - t)))] == 0.0).all()
    assert summary["nudged"]["iou"]["asked"] == list(iou)
    assert sidecar["spec"]["iou"] == summary["nudged"]["iou"]["used"]


def test_ranges_off_the_thresholds_are_kept():
    """A range whose ends are not COCO thresholds is used as asked and nothing is recorded."""
    preds, sidecar, summary = jitter_dataset(hand_coco(), seed=1, spec=DetectorSpec(iou=(0.52, 0.68), duplicate_iou=(0.62, 0.78)))
    assert summary["nudged"] == {} and sidecar["spec"]["iou"] == [0.52, 0.68]


def test_background_boxes_stay_off_ignore_regions_so_evaluators_count_them():
    """Background predictions cover less than background_iou of their area with any ignore region.

    pycocotools cocoeval.py: a detection whose box lies at least half (IoU threshold 0.5) inside a crowd
    region of its category is ignored, not counted false; the sidecar calls every background box a false
    positive, so none may be ignored.  Here an ignore region covers most of the second image.
    """
    coco = hand_coco()
    coco["annotations"].append({"id": 99, "image_id": 2, "category_id": 1, "bbox": [0.0, 20.0, 90.0, 70.0],
                                "area": 6300.0, "iscrowd": 1})
    spec = DetectorSpec(background=6.0, background_size=(0.1, 0.3))
    preds, sidecar, summary = jitter_dataset(coco, seed=3, spec=spec)
    bg = [r for r in sidecar["predictions"] if r["kind"] == "background"]
    assert len(bg) > 8 and summary["ignored_crowd"] == 2
    assert all(r["crowd_overlap"] < spec.background_iou for r in bg)
    assert any(r["crowd_overlap"] > 0 for r in sidecar["predictions"] if r["image_id"] == 2)
    ev = evaluate(coco, preds, iou_thrs=[0.5])
    whole = [e for e in ev.evalImgs if e is not None and e["aRng"] == ev.params.areaRng[0]]  # area range "all"
    ignored = {d for e in whole for d, ig in zip(e["dtIds"], e["dtIgnore"][0]) if ig}
    assert not ignored & {r["index"] + 1 for r in bg}  # loadRes numbers results from 1
