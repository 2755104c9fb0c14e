"""Contact sheets and statistics: boxes on the exact pixels, numbers equal to an independent count."""

from __future__ import annotations

import io
import itertools
import json

import numpy as np
import pytest
from PIL import Image
from typer.testing import CliRunner

from synthgen import report
from synthgen.cli import app
from synthgen.errors import InputFileError, UserError

GREY = (100, 100, 100)


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def _write_dataset(root, images, annotations, categories, *, subdir="images"):
    """A hand-made COCO dataset: solid grey PNGs and an annotation file without synthgen keys."""
    image_dir = root / subdir if subdir else root
    image_dir.mkdir(parents=True, exist_ok=True)
    for im in images:
        Image.fromarray(np.full((im["height"], im["width"], 3), GREY, dtype=np.uint8)).save(image_dir / im["file_name"])
    coco = {"images": images, "annotations": annotations, "categories": categories}
    path = root / "annotations.json"
    path.write_text(json.dumps(coco))
    return path


@pytest.fixture
def known_boxes(tmp_path):
    """One 20x16 image with box [2, 3, 7, 9] (category 1) and box [10.5, 4.2, 13.5, 12] (category 2)."""
    images = [{"id": 1, "file_name": "a.png", "width": 20, "height": 16}]
    anns = [
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [2, 3, 5, 6], "area": 30.0, "iscrowd": 0},
        {"id": 2, "image_id": 1, "category_id": 2, "bbox": [10.5, 4.2, 3.0, 7.8], "area": 23.4, "iscrowd": 0},
    ]
    cats = [{"id": 1, "name": "plate", "supercategory": "part"}, {"id": 2, "name": "washer", "supercategory": "part"}]
    _write_dataset(tmp_path / "ds", images, anns, cats)
    return report.open_dataset(tmp_path / "ds")


def _outline_set(c0, r0, c1, r1):
    """Pixels (row, col) of a rectangle outline with inclusive corner pixels, by plain enumeration."""
    pts = set()
    for c in range(c0, c1 + 1):
        pts |= {(r0, c), (r1, c)}
    for r in range(r0, r1 + 1):
        pts |= {(r, c0), (r, c1)}
    return pts


def _pixels_of(tile, rgb):
    rows, cols = np.nonzero(np.all(tile == np.array(rgb, dtype=np.uint8), axis=-1))
    return set(zip(rows.tolist(), cols.tolist()))


def test_sheet_draws_box_edges_on_the_pixels_just_inside_the_box(known_boxes):
    """Box [2, 3, 7, 9] at scale 1 colours cols 2..6 on rows 3 and 8 and rows 3..8 on cols 2 and 6, nothing else."""
    sheet = report.contact_sheet(known_boxes, scale=1, small_outline=0)
    t = sheet.tiles[0]
    tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
    assert tile.shape == (16, 20, 3)
    # ARCHITECTURE.md convention: a box from x0 to x1 covers pixels x0 .. x1 - 1 (half-open)
    expected = _outline_set(2, 3, 6, 8)
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == expected
    # a fractional box [10.5, 4.2, 13.5, 12]: the pixels it touches are cols 10..13, rows 4..11
    assert _pixels_of(tile, report.CATEGORY_COLOURS[1]) == _outline_set(10, 4, 13, 11)
    # inside the outline the image is untouched
    assert (tile[4:8, 3:6] == GREY).all()


def test_sheet_edges_follow_the_convention_at_a_whole_scale(known_boxes):
    """At scale 3 box [2, 3, 7, 9] spans tile pixels 6..20 by 9..26, outlined on that rectangle's rim."""
    sheet = report.contact_sheet(known_boxes, scale=3, small_outline=0)
    t = sheet.tiles[0]
    tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
    assert tile.shape == (48, 60, 3)
    # half-open [6, 21) x [9, 27): columns 6..20, rows 9..26 (ARCHITECTURE.md convention, scaled by 3)
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == _outline_set(6, 9, 20, 26)
    assert (tile[10:26, 7:20] == GREY).all()  # each image pixel is a 3x3 block, interior untouched


def test_halo_darkens_only_pixels_outside_the_box():
    """The dark rim lies on the ring just outside the outline; pixels inside keep their value."""
    img = np.full((12, 12, 3), 200, dtype=np.uint8)
    out = report.draw_boxes(img, [[3, 3, 8, 8]], (255, 0, 0), halo=0.5)
    ring = _outline_set(2, 2, 8, 8)
    dark = _pixels_of(out, (100, 100, 100))
    assert dark == ring
    assert (out[4:7, 4:7] == 200).all()


def test_a_box_far_beyond_the_tile_draws_only_its_edges_inside():
    """A box from x = -1e9 to 1e9 leaves its left and right edges out and draws its top and bottom rows."""
    img = np.zeros((10, 12, 3), dtype=np.uint8)
    out = report.draw_boxes(img, [[-1e9, 2, 1e9, 6]], (255, 0, 0), halo=None)
    assert _pixels_of(out, (255, 0, 0)) == {(r, c) for r in (2, 5) for c in range(12)}


def test_dashed_outline_is_four_on_three_off_clockwise():
    """A dashed box colours pixels 0..3 and skips 4..6 along its top edge, with its halo beside the dashes only."""
    img = np.full((6, 16, 3), 200, dtype=np.uint8)
    out = report.draw_boxes(img, [[1, 1, 15, 5]], (255, 255, 255), dashed=True, halo=0.5)
    top = np.all(out[1, 1:15] == 255, axis=-1)
    assert top.tolist() == [True] * 4 + [False] * 3 + [True] * 4 + [False] * 3
    above = np.all(out[0, 1:15] == 100, axis=-1)  # the ring row just outside the top edge
    assert above.tolist() == top.tolist()


def test_zoom_crop_draws_a_one_pixel_object_on_the_enlarged_grid(tmp_path):
    """A 1x1 px box at (5, 4) in a zoom crop is outlined on the z x z block it occupies."""
    images = [{"id": 1, "file_name": "b.png", "width": 30, "height": 20}]
    anns = [
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [5, 4, 1, 1], "area": 1.0, "iscrowd": 0},
        {"id": 2, "image_id": 1, "category_id": 1, "bbox": [12, 2, 10, 10], "area": 100.0, "iscrowd": 0},
    ]
    _write_dataset(tmp_path / "z", images, anns, [{"id": 1, "name": "pin"}])
    sheet = report.contact_sheet(report.open_dataset(tmp_path / "z"), zoom=True, scale=1)
    crop = next(c for c in sheet.crops if c.annotation == 0)
    z = int(crop.sx)
    assert z >= 8
    tile = sheet.pixels[crop.top : crop.top + crop.height, crop.left : crop.left + crop.width]
    c0 = round((5 - crop.ox) * z)
    r0 = round((4 - crop.oy) * z)
    # the pixel [5, 6) x [4, 5) enlarged z times is [c0, c0 + z) x [r0, r0 + z) (ARCHITECTURE.md convention)
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) >= _outline_set(c0, r0, c0 + z - 1, r0 + z - 1)
    assert (tile[r0 + 1 : r0 + z - 1, c0 + 1 : c0 + z - 1] == GREY).all()


def _machado(kind):
    # Simulation matrices for dichromacy at severity 1.0, applied to linear RGB
    # (Machado, Oliveira and Fernandes 2009; values from memory).
    return {
        "protan": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]],
        "deutan": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]],
        "tritan": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602], [0.004733, 0.691367, 0.303900]],
    }[kind]


def _seen_as(rgb, kind):
    from skimage.color import rgb2lab

    s = np.asarray(rgb, dtype=float) / 255
    if kind != "normal":
        lin = np.where(s <= 0.04045, s / 12.92, ((s + 0.055) / 1.055) ** 2.4)  # sRGB transfer (IEC 61966-2-1)
        lin = np.clip(lin @ np.array(_machado(kind)).T, 0, 1)
        s = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)
    return rgb2lab(s[None])[0]


@pytest.mark.parametrize("palette", ["categories", "predictions"])
def test_palettes_stay_apart_under_colour_vision_deficiencies(palette):
    """Every pair of palette colours differs by CIEDE2000 >= 12 in normal vision and simulated dichromacies."""
    from skimage.color import deltaE_ciede2000

    colours = report.CATEGORY_COLOURS if palette == "categories" else tuple(report.PREDICTION_COLOURS.values())
    for kind in ("normal", "protan", "deutan", "tritan"):
        lab = _seen_as(colours, kind)
        worst = min(deltaE_ciede2000(lab[i], lab[j]) for i, j in itertools.combinations(range(len(colours)), 2))
        # a difference of about 10 or more reads as a different colour at a glance (common practice)
        assert worst >= (14 if palette == "categories" else 12), (kind, worst)


def test_category_colours_differ_in_hue_for_thin_outlines():
    """Every two category colours are at least 30 degrees apart in CIELAB hue angle.

    On a 1-pixel outline, lightness and chroma differences fade and hue carries the
    difference (common practice): the old palette's mint/green (triangle/star) and
    magenta/pink (polygon/cross) were 2-5 degrees apart.
    """
    lab = _seen_as(report.CATEGORY_COLOURS, "normal")
    hue = np.degrees(np.arctan2(lab[:, 2], lab[:, 1])) % 360
    gaps = [min(abs(a - b), 360 - abs(a - b)) for a, b in itertools.combinations(hue, 2)]
    assert min(gaps) >= 30, min(gaps)


def test_classify_names_each_kind_of_prediction():
    """TP, duplicate, wrong class, localization error and background come out as built."""
    gt = {"annotations": [
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10]},
        {"id": 2, "image_id": 1, "category_id": 2, "bbox": [40, 40, 10, 10]},
        {"id": 3, "image_id": 1, "category_id": 1, "bbox": [70, 0, 10, 10]},
    ]}
    boxes = np.array([
        [0, 0, 10, 10],      # TP of annotation 0
        [0, 1, 10, 11],      # duplicate of 0 (IoU 9/11)
        [40, 40, 50, 50],    # class 1 on a class-2 object
        [70, 0, 76, 6],      # IoU 0.36 with annotation 2: localization error
        [200, 200, 210, 210],  # background
    ], dtype=float)
    p = report.Predictions(boxes, np.ones(5, int), np.ones(5, int), np.array([0.9, 0.8, 0.7, 0.6, 0.5]), ("",) * 5)
    out, missed = report.classify_predictions(gt, p)
    assert out.kind == ("true_positive", "duplicate", "wrong_class", "localization", "background")
    assert missed == {2, 3}


def test_classify_keeps_every_prediction_past_the_hundred_the_coco_metrics_keep():
    """The error kinds use the COCO matcher but classify every prediction, not only the 100 best per image and class.

    pycocotools keeps maxDets[-1] = 100 detections per image and category for its metrics (REFERENCE.md:
    COCO-style AP); a contact sheet still has to say what the 101st box is.
    """
    n = 101
    x = 20.0 * np.arange(n)
    gt = {"annotations": [{"id": i + 1, "image_id": 1, "category_id": 1, "bbox": [float(x[i]), 0.0, 10.0, 10.0]}
                          for i in range(n)]}
    boxes = np.c_[x, np.zeros(n), x + 10, np.full(n, 10.0)]
    p = report.Predictions(boxes, np.ones(n, int), np.ones(n, int), np.linspace(1.0, 0.5, n), ("",) * n)
    out, missed = report.classify_predictions(gt, p)
    assert out.kind == ("true_positive",) * n
    assert missed == frozenset()


def test_classify_calls_predictions_on_ignore_regions_ignored_as_pycocotools_does():
    """With ignore regions (iscrowd 1), true positives and ignored predictions are those pycocotools finds at IoU 0.5.

    pycocotools cocoeval.py: a detection matched to a crowd region (intersection over the detection's
    area >= the threshold, same category) gets dtIgnore, unless a free non-crowd box matches it first.
    """
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    rng = np.random.default_rng(12)
    anns, preds = [], []
    for image_id in (1, 2, 3):
        for _ in range(25):
            x, y = rng.uniform(0, 150, 2)
            w, h = rng.uniform(4, 40, 2)
            a = {"id": len(anns) + 1, "image_id": image_id, "category_id": int(rng.integers(1, 3)),
                 "bbox": [x, y, w, h], "area": w * h, "iscrowd": int(rng.random() < 0.3)}
            anns.append(a)
            for _ in range(rng.integers(0, 3)):
                px, py = x + rng.normal(0, 0.1) * w, y + rng.normal(0, 0.1) * h
                pw, ph = w * np.exp(rng.normal(0, 0.2)), h * np.exp(rng.normal(0, 0.2))
                preds.append({"image_id": image_id, "category_id": int(rng.choice([a["category_id"], 1, 2])),
                              "bbox": [px, py, pw, ph], "score": float(rng.uniform())})
    coco = {"images": [{"id": i, "width": 200, "height": 200, "file_name": f"{i}.png"} for i in (1, 2, 3)],
            "annotations": anns, "categories": [{"id": 1, "name": "a"}, {"id": 2, "name": "b"}]}
    boxes = np.array([p["bbox"] for p in preds])
    boxes[:, 2:] += boxes[:, :2]
    p = report.Predictions(boxes, np.array([q["image_id"] for q in preds]), np.array([q["category_id"] for q in preds]),
                           np.array([q["score"] for q in preds]), ("",) * len(preds))
    kinds = report.classify_predictions(coco, p)[0].kind

    gt = COCO()
    gt.dataset = json.loads(json.dumps(coco))
    gt.createIndex()
    ev = COCOeval(gt, gt.loadRes([dict(q) for q in preds]), "bbox")
    ev.params.iouThrs = np.array([0.5])
    ev.params.areaRng, ev.params.areaRngLbl = [[0, 1e10]], ["all"]
    ev.evaluate()
    tp, ignored = set(), set()
    for e in ev.evalImgs:
        if e is not None:
            for d, m, ig in zip(e["dtIds"], e["dtMatches"][0], e["dtIgnore"][0]):
                (ignored if ig else tp if m > 0 else set()).add(d)
    ours_tp = {i + 1 for i, k in enumerate(kinds) if k == "true_positive"}  # loadRes numbers results from 1
    ours_ignored = {i + 1 for i, k in enumerate(kinds) if k == "ignored"}
    assert len(ours_ignored) > 10 and len(ours_tp) > 20
    assert ours_tp == tp and ours_ignored == ignored


def test_stats_leave_ignore_regions_out(known_boxes):
    """Ignore regions (iscrowd 1) are counted apart and left out of every object statistic."""
    coco = dict(known_boxes.coco)
    coco["annotations"] = [dict(a) for a in coco["annotations"]]
    coco["annotations"][1]["iscrowd"] = 1
    s = report.dataset_stats(coco)
    assert (s["objects"], s["ignore_regions"]) == (1, 1)
    assert [c["count"] for c in s["per_category"]] == [1, 0] and s["size"]["max"] == 6.0
    assert any("1 ignore regions (iscrowd 1) are left out" in n for n in s["notes"])


def test_sheet_draws_ignore_regions_in_grey_and_counts_them_apart(tmp_path):
    """An ignore region's box is drawn in the muted grey, not its category's colour; the caption counts it apart."""
    images = [{"id": 1, "file_name": "a.png", "width": 20, "height": 16}]
    anns = [
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [2, 3, 5, 6], "area": 30.0, "iscrowd": 0},
        {"id": 2, "image_id": 1, "category_id": 1, "bbox": [11, 4, 3, 8], "area": 24.0, "iscrowd": 1},
    ]
    _write_dataset(tmp_path / "ds", images, anns, [{"id": 1, "name": "plate"}])
    sheet = report.contact_sheet(report.open_dataset(tmp_path / "ds"), scale=1, small_outline=0)
    t = sheet.tiles[0]
    tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
    assert _pixels_of(tile, report.sheet._MUTED) == _outline_set(11, 4, 13, 11)
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == _outline_set(2, 3, 6, 8)


def test_classify_true_positives_agree_with_pycocotools(small_dataset):
    """Predictions called true positives are exactly those pycocotools matches at IoU 0.5."""
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    from synthgen.formats.coco import bbox_from_xyxy, xyxy_from_bbox

    out, _ = small_dataset
    coco = json.loads((out / "annotations.json").read_text())
    rng = np.random.default_rng(5)
    preds = []
    for a in coco["annotations"]:
        b = xyxy_from_bbox([a["bbox"]])[0]
        w, h = b[2] - b[0], b[3] - b[1]
        for _ in range(rng.integers(1, 4)):
            shift = rng.normal(0, 0.12, 4) * [w, h, w, h]
            nb = b + shift
            if nb[2] - nb[0] > 0.5 and nb[3] - nb[1] > 0.5:
                preds.append({"image_id": a["image_id"], "category_id": int(rng.choice([a["category_id"], 1, 2])),
                              "bbox": bbox_from_xyxy([nb])[0], "score": float(rng.uniform())})
    path = out.parent / "preds.json"
    path.write_text(json.dumps(preds))
    p, _ = report.classify_predictions(coco, report.read_predictions(path))

    gt = COCO()
    gt.dataset = json.loads(json.dumps(coco))
    gt.createIndex()
    dt = gt.loadRes([dict(r) for r in preds])
    ev = COCOeval(gt, dt, "bbox")
    ev.params.iouThrs = np.array([0.5])
    ev.params.areaRng, ev.params.areaRngLbl = [[0, 1e10]], ["all"]
    ev.evaluate()
    # pycocotools cocoeval.py: evalImgs[...]["dtMatches"][t] is the matched gt id, 0 when unmatched;
    # "dtIgnore"[t] marks a detection matched to an ignore region (iscrowd 1), which is no true positive
    matched_dt = set()
    for e in ev.evalImgs:
        if e is not None:
            matched_dt |= {d for d, m, ig in zip(e["dtIds"], e["dtMatches"][0], e["dtIgnore"][0]) if m > 0 and not ig}
    ours = {i + 1 for i, k in enumerate(p.kind) if k == "true_positive"}  # loadRes numbers results from 1
    assert len(ours) > 20 and len(preds) - len(ours) > 10
    assert ours == matched_dt

    # and the project's own evaluator agrees per category: recall at IoU 0.5 = true positives / objects
    from synthgen.evaluate.cocoeval import evaluate

    ev = evaluate(coco, preds)
    for k, cat in enumerate(ev.per_category):
        tp = sum(1 for kind, c in zip(p.kind, p.category_id) if kind == "true_positive" and c == cat.id)
        if cat.n_gt:
            assert ev.recall[0, k, 0, -1] * cat.n_gt == pytest.approx(tp)


def test_truth_sidecar_is_read_in_its_accepted_shapes(tmp_path):
    """A list of records, an object with 'predictions', aliases and explicit indices all give the kinds."""
    a = tmp_path / "a.json"
    a.write_text(json.dumps([{"kind": "true_positive"}, {"kind": "localization_error"}, {"status": "bg"}]))
    assert report.read_truth_sidecar(a, 3).kinds == ("true_positive", "localization", "background")
    b = tmp_path / "b.json"
    b.write_text(json.dumps({"predictions": [{"index": 1, "kind": "duplicate"}, {"index": 0, "kind": "wrong_class"}],
                             "missed": [7]}))
    assert report.read_truth_sidecar(b, 2) == report.TruthSidecar(("wrong_class", "duplicate"), frozenset({7}))


def test_truth_sidecar_errors_name_the_record(tmp_path):
    """An unknown kind and a prediction the sidecar does not cover are one-line file errors."""
    c = tmp_path / "c.json"
    c.write_text(json.dumps([{"kind": "great"}]))
    with pytest.raises(InputFileError, match="record 0: the kind must be one of"):
        report.read_truth_sidecar(c, 1)
    d = tmp_path / "d.json"
    d.write_text(json.dumps({"predictions": [{"index": 1, "kind": "duplicate"}]}))
    with pytest.raises(InputFileError, match="says nothing about 2 of 3 predictions"):
        report.read_truth_sidecar(d, 3)


# --------------------------------------------------------------------------- statistics


def _plain_iou(a, b):
    """IoU of two xyxy boxes by the textbook formula, no +1 (REFERENCE.md: Geometry)."""
    iw = max(0.0, min(a[2], b[2]) - max(a[0], b[0]))
    ih = max(0.0, min(a[3], b[3]) - max(a[1], b[1]))
    inter = iw * ih
    union = (a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter
    return inter / union if union > 0 else 0.0


def test_stats_equal_an_independent_count(small_dataset):
    """Counts, quantiles, area ranges, visibility, truncation and max IoU match plain numpy on the file."""
    out, _ = small_dataset
    coco = json.loads((out / "annotations.json").read_text())
    s = report.dataset_stats(coco)
    anns = [a for a in coco["annotations"] if not a["iscrowd"]]  # objects; ignore regions are counted apart
    assert s["ignore_regions"] == len(coco["annotations"]) - len(anns)
    per_image = np.array([sum(a["image_id"] == im["id"] for a in anns) for im in coco["images"]])
    assert s["images"] == len(coco["images"])
    assert s["objects"] == len(anns)
    assert (s["objects_per_image"]["min"], s["objects_per_image"]["median"], s["objects_per_image"]["max"]) == (
        per_image.min(), np.median(per_image), per_image.max())
    for c in s["per_category"]:
        assert c["count"] == sum(a["category_id"] == c["id"] for a in anns)
    longer = np.array([max(a["bbox"][2], a["bbox"][3]) for a in anns])
    assert s["size"]["median"] == pytest.approx(np.median(longer), abs=1e-12)
    assert s["size"]["p25"] == pytest.approx(np.percentile(longer, 25), abs=1e-12)
    area = np.array([a["area"] for a in anns])
    # REFERENCE.md: COCO-style AP, size ranges with both ends inclusive
    assert s["area_ranges"]["small"] == np.sum(area <= 32**2)
    assert s["area_ranges"]["medium"] == np.sum((area >= 32**2) & (area <= 96**2))
    assert s["area_ranges"]["large"] == np.sum(area >= 96**2)
    vis = np.array([a["synthgen"]["visible_fraction"] for a in anns])
    assert s["visible_fraction"]["mean"] == pytest.approx(vis.mean(), abs=1e-12)
    assert s["visible_fraction"]["fully_visible"] == pytest.approx(np.mean(vis >= 1))
    trunc = np.array([a["synthgen"]["truncated"] for a in anns])
    assert s["truncated"]["count"] == trunc.sum()
    boxes = [[a["bbox"][0], a["bbox"][1], a["bbox"][0] + a["bbox"][2], a["bbox"][1] + a["bbox"][3]] for a in anns]
    best = [max([_plain_iou(boxes[i], boxes[j]) for j in range(len(anns))
                 if j != i and anns[j]["image_id"] == anns[i]["image_id"]] or [0.0]) for i in range(len(anns))]
    assert s["max_iou"]["max"] == pytest.approx(max(best), abs=1e-12)
    assert s["max_iou"]["mean"] == pytest.approx(np.mean(best), abs=1e-12)
    assert s["max_iou"]["overlapping"] == pytest.approx(np.mean(np.array(best) > 0))
    # and the same as the fact synthgen records per object (DATASET.md: max_iou)
    assert np.allclose(best, [a["synthgen"]["max_iou"] for a in anns], atol=1e-9)


def test_area_of_exactly_1024_counts_as_small_and_medium():
    """COCO's ranges include both ends, so area 32^2 is in two ranges (REFERENCE.md: COCO-style AP)."""
    coco = {"images": [{"id": 1, "width": 64, "height": 64}], "categories": [{"id": 1, "name": "a"}],
            "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 32, 32], "area": 1024.0}]}
    r = report.dataset_stats(coco)["area_ranges"]
    assert (r["small"], r["medium"], r["large"]) == (1, 1, 0)


def _png_ok(data: bytes, size):
    im = Image.open(io.BytesIO(data))
    im.verify()  # Pillow's PNG checks: chunks and CRCs
    im = Image.open(io.BytesIO(data))
    assert im.format == "PNG"
    assert im.size == size
    arr = np.asarray(im.convert("RGB")).astype(int)
    assert arr.std() > 10 and len(np.unique(arr.reshape(-1, 3), axis=0)) > 50  # not blank


def test_stats_figure_is_a_png_of_the_stated_size(small_dataset, tmp_path):
    """The figure is a valid 1200x700 PNG with drawn content."""
    out, _ = small_dataset
    coco = json.loads((out / "annotations.json").read_text())
    path = tmp_path / "fig.png"
    report.save_figure(report.stats_figure(coco, width=12, height=7), path, dpi=100)
    _png_ok(path.read_bytes(), (1200, 700))


def test_show_command_writes_the_sheet_it_reports(small_dataset, tmp_path):
    """`show` writes a non-blank PNG of the size it prints."""
    out, _ = small_dataset
    res = run("show", out, "--out", tmp_path / "s.png", "--images", 4, "--cols", 2, "--zoom")
    assert res.exit_code == 0, res.output
    w, h = map(int, res.stdout.split("(")[1].split(" px")[0].split("x"))
    _png_ok((tmp_path / "s.png").read_bytes(), (w, h))


def test_stats_command_prints_tables_and_writes_json_and_a_plot(small_dataset, tmp_path):
    """`stats` prints its tables and writes the JSON and a 1200x700 figure."""
    out, _ = small_dataset
    res = run("stats", out, "--json", tmp_path / "s.json", "--plot", tmp_path / "p.png")
    assert res.exit_code == 0, res.output
    assert "objects per category" in res.stdout and "COCO area ranges" in res.stdout
    assert json.loads((tmp_path / "s.json").read_text())["images"] == 6
    _png_ok((tmp_path / "p.png").read_bytes(), (1200, 700))


def test_both_commands_work_on_another_tools_coco_file(tmp_path):
    """A COCO file without synthgen keys (images beside it, a polygon, an annotation without area) works."""
    images = [{"id": 10, "file_name": "f1.png", "width": 50, "height": 40},
              {"id": 11, "file_name": "f2.png", "width": 50, "height": 40}]
    anns = [
        {"id": 1, "image_id": 10, "category_id": 3, "bbox": [5, 5, 20, 10], "area": 200.0, "iscrowd": 0,
         "segmentation": [[5, 5, 25, 5, 25, 15, 5, 15]]},
        {"id": 2, "image_id": 10, "category_id": 4, "bbox": [15, 8, 20, 20], "iscrowd": 0},
        {"id": 3, "image_id": 11, "category_id": 3, "bbox": [0, 0, 2, 3], "area": 6.0, "iscrowd": 0},
    ]
    cats = [{"id": 3, "name": "bolt", "supercategory": "hardware"},
            {"id": 4, "name": "nut", "supercategory": "hardware"}]
    path = _write_dataset(tmp_path / "other", images, anns, cats, subdir=None)
    path = path.rename(tmp_path / "other" / "gt.json")
    res = run("show", path, "--out", tmp_path / "o.png", "--zoom")
    assert res.exit_code == 0, res.output
    res = run("stats", path, "--json", tmp_path / "o.json", "--plot", tmp_path / "o_plot.png")
    assert res.exit_code == 0, res.output
    s = json.loads((tmp_path / "o.json").read_text())
    assert s["visible_fraction"] is None and s["truncated"] is None
    assert any("visible fraction: not recorded" in n for n in s["notes"])
    assert any("no 'area'" in n for n in s["notes"])
    assert s["area_ranges"]["small"] == 3  # 200, 400 (box w*h for the one without area) and 6
    assert s["max_iou"]["max"] == pytest.approx(_plain_iou([5, 5, 25, 15], [15, 8, 35, 28]))
    _png_ok((tmp_path / "o_plot.png").read_bytes(), (1200, 700))


def test_show_with_predictions_colours_them_by_kind(known_boxes, tmp_path):
    """Predictions matched by IoU are drawn dashed in their kind's colour on the exact pixels."""
    preds = [{"image_id": 1, "category_id": 1, "bbox": [2, 3, 5, 6], "score": 0.9},
             {"image_id": 1, "category_id": 1, "bbox": [14, 0, 4, 4], "score": 0.5}]
    path = tmp_path / "p.json"
    path.write_text(json.dumps(preds))
    p, _ = report.classify_predictions(known_boxes.coco, report.read_predictions(path))
    assert p.kind == ("true_positive", "background")
    sheet = report.contact_sheet(known_boxes, scale=1, predictions=p, small_outline=0)
    t = sheet.tiles[0]
    tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
    bg = _pixels_of(tile, report.PREDICTION_COLOURS["background"])
    ring = _outline_set(14, 0, 17, 3)
    assert bg <= ring and len(bg) == sum(1 for k in range(len(ring)) if k % 7 < 4)
    tp = _pixels_of(tile, report.PREDICTION_COLOURS["true_positive"])
    assert tp and tp < _outline_set(2, 3, 6, 8)  # dashed over the truth, whose colour shows in the gaps
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == _outline_set(2, 3, 6, 8) - tp


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["--ids", "1,99"], "image id 99 is not in the dataset"),
        (["--ids", "a,b"], "option '--ids' must be comma-separated image ids"),
        (["--truth", "x.json"], "option '--truth' needs '--pred'"),
        (["--ids", "1", "--images", "3"], "options '--images' and '--ids' choose the images in two ways"),
        (["--pred", "missing.json"], "missing.json: cannot be read"),
    ],
)
def test_show_bad_input_exits_2_with_one_line(known_boxes, tmp_path, args, pattern):
    """Unknown ids, a bad id list, a sidecar without predictions and a missing file exit 2 with one line."""
    res = run("show", known_boxes.root, "--out", tmp_path / "x.png", *args)
    assert res.exit_code == 2, res.output
    assert pattern in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "x.png").exists()


def test_stats_on_a_missing_dataset_exits_2(tmp_path):
    """A directory without annotations.json is bad input."""
    res = run("stats", tmp_path)
    assert res.exit_code == 2
    assert "has no annotations.json" in res.stderr


def test_show_with_a_truth_sidecar_uses_its_kinds(known_boxes, tmp_path):
    """`--pred` with `--truth` colours each prediction by the sidecar's kind, not by matching."""
    preds = [{"image_id": 1, "category_id": 1, "bbox": [2, 3, 5, 6], "score": 0.9}]
    (tmp_path / "p.json").write_text(json.dumps(preds))
    (tmp_path / "t.json").write_text(json.dumps({"predictions": [{"kind": "duplicate"}]}))
    res = run("show", known_boxes.root, "--out", tmp_path / "s.png", "--pred", tmp_path / "p.json",
              "--truth", tmp_path / "t.json", "--scale", 1)
    assert res.exit_code == 0, res.output
    sheet = np.asarray(Image.open(tmp_path / "s.png").convert("RGB"))
    p = report.read_predictions(tmp_path / "p.json")
    p = p.with_kinds(("duplicate",))
    t = report.contact_sheet(known_boxes, scale=1, predictions=p).tiles[0]  # same layout, for the tile's place
    assert np.array_equal(report.contact_sheet(known_boxes, scale=1, predictions=p).pixels, sheet)
    tile = sheet[t.top : t.top + t.height, t.left : t.left + t.width]
    # the box is under 12 tile px across, so it is outlined on the ring just outside it
    assert _pixels_of(tile, report.PREDICTION_COLOURS["duplicate"]) < _outline_set(1, 2, 7, 9)
    assert not _pixels_of(tile, report.PREDICTION_COLOURS["true_positive"])


def test_show_names_a_missing_image_file(known_boxes, tmp_path):
    """An image the annotations list but the disk lacks is bad input naming the file."""
    (known_boxes.root / "images" / "a.png").unlink()
    res = run("show", known_boxes.root, "--out", tmp_path / "s.png")
    assert res.exit_code == 2
    assert "a.png" in res.stderr


def test_saved_pictures_are_readable_by_others(tmp_path):
    """Sheets are written with the umask's permissions, not the private mode of a temporary file."""
    import os

    old = os.umask(0o022)
    try:
        report.save_png(np.zeros((4, 4, 3), dtype=np.uint8), tmp_path / "x.png")
    finally:
        os.umask(old)
    assert (tmp_path / "x.png").stat().st_mode & 0o777 == 0o644


def test_matching_agrees_with_what_the_jitter_sidecar_says(small_dataset):
    """On simulated detections, greedy matching names each unambiguous prediction as the simulator built it."""
    from synthgen.jitter import DetectorSpec
    from synthgen.jitter.coco import jitter_dataset

    out, _ = small_dataset
    coco = json.loads((out / "annotations.json").read_text())
    spec = DetectorSpec(miss=0.1, localization=0.15, duplicates=0.15, background=1.0, relabel=0.15)
    preds, sidecar, _ = jitter_dataset(coco, seed=4, spec=spec)
    path = out.parent / "jitter-preds.json"
    path.write_text(json.dumps(preds))
    ours, missed = report.classify_predictions(coco, report.read_predictions(path))
    told = sidecar["predictions"]
    (out.parent / "jitter-truth.json").write_text(json.dumps(sidecar))
    read = report.read_truth_sidecar(out.parent / "jitter-truth.json", len(preds))  # the format jitter writes
    assert read.kinds == tuple(r["kind"] for r in told) and read.missed == set(sidecar["missed"])
    clear = [i for i, r in enumerate(told) if r["other_iou"] < 0.5]  # no other box competes for it
    assert len(set(told[i]["kind"] for i in clear)) == 5
    assert [ours.kind[i] for i in clear] == [told[i]["kind"] for i in clear]
    not_found = {g["gt_id"] for g in sidecar["ground_truth"] if g["outcome"] != "detected"}
    assert missed == not_found


def test_stats_report_the_degradations_each_image_got(tmp_path):
    """Per-degradation image counts and parameter ranges equal a direct count over the image facts."""
    from synthgen.config import load_config
    from synthgen.run.make import make_dataset

    cfg = load_config(overrides=["count=5", "seed=3", "canvas.width=48", "canvas.height=32",
                                 "degrade.noise.p=1", "degrade.jpeg.p=0.5"])
    make_dataset(cfg, tmp_path / "d", workers=1)
    ds = report.open_dataset(tmp_path / "d")
    st = report.dataset_stats(ds.coco, ds.manifest)["settings"]
    coco = json.loads((tmp_path / "d" / "annotations.json").read_text())
    facts = [im["synthgen"]["degradations"] for im in coco["images"]]
    assert st["degraded_images"]["noise"] == sum("noise" in f for f in facts) == 5
    assert st["degraded_images"].get("jpeg", 0) == sum("jpeg" in f for f in facts)
    sig = [f["noise"]["sigma"] for f in facts]
    assert st["degradation_ranges"]["noise"]["sigma"] == [min(sig), max(sig)]
    assert set(st["degrade_config"]) == {"noise", "jpeg"}


def test_a_wide_grid_of_large_images_is_shrunk_to_4096_px(tmp_path):
    """Five 2000 px wide images in one row fit a 4096 px sheet; boxes follow the shrunk grid."""
    images = [{"id": i, "file_name": f"w{i}.png", "width": 2000, "height": 60} for i in range(1, 6)]
    anns = [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [100, 10, 400, 40], "area": 16000.0, "iscrowd": 0}]
    _write_dataset(tmp_path / "w", images, anns, [{"id": 1, "name": "rail"}])
    sheet = report.contact_sheet(report.open_dataset(tmp_path / "w"), cols=5)
    assert sheet.pixels.shape[1] <= 4096
    t = sheet.tiles[0]
    assert t.sx < 0.5
    tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
    c0, r0, c1, r1 = report.outline_pixels([[100, 10, 500, 50]], t.sx, t.sy)[0]
    assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == _outline_set(c0, r0, c1, r1)


def test_stats_table_prints_names_with_brackets_as_written(tmp_path):
    """A category called "[m6] bolt" is printed as is, not swallowed as rich markup."""
    images = [{"id": 1, "file_name": "a.png", "width": 8, "height": 8}]
    anns = [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2, 2], "area": 4.0, "iscrowd": 0}]
    _write_dataset(tmp_path / "b", images, anns, [{"id": 1, "name": "[m6] bolt"}])
    res = run("stats", tmp_path / "b")
    assert res.exit_code == 0, res.output
    assert "[m6] bolt" in res.stdout


def test_show_finds_images_kept_apart_from_the_annotations(tmp_path):
    """With --image-dir, an annotation file in annotations/ finds its images in a sibling folder."""
    images = [{"id": 1, "file_name": "a.png", "width": 8, "height": 8}]
    anns = [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [1, 1, 2, 2], "area": 4.0, "iscrowd": 0}]
    _write_dataset(tmp_path / "set", images, anns, [{"id": 1, "name": "pin"}], subdir="val")
    (tmp_path / "set" / "annotations").mkdir()
    gt = (tmp_path / "set" / "annotations.json").rename(tmp_path / "set" / "annotations" / "val.json")
    assert run("show", gt, "--out", tmp_path / "no.png").exit_code == 2  # not beside the file
    res = run("show", gt, "--out", tmp_path / "s.png", "--image-dir", tmp_path / "set" / "val")
    assert res.exit_code == 0, res.output


def test_overview_tile_leaves_a_tiny_object_visible_under_its_box(tmp_path):
    """A 3x3 px object keeps every one of its pixels: its outline goes on the ring just outside it."""
    img = np.full((30, 40, 3), 90, dtype=np.uint8)
    img[10:13, 10:13] = (250, 20, 20)
    root = tmp_path / "ds"
    _write_dataset(root, [{"id": 1, "file_name": "a.png", "width": 40, "height": 30}],
                   [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [10, 10, 3, 3], "area": 9.0, "iscrowd": 0}],
                   [{"id": 1, "name": "pin"}])
    Image.fromarray(img).save(root / "images" / "a.png")
    ds = report.open_dataset(root)
    for scale in (1, 2):
        sheet = report.contact_sheet(ds, scale=scale)
        t = sheet.tiles[0]
        tile = sheet.pixels[t.top : t.top + t.height, t.left : t.left + t.width]
        obj = tile[10 * scale : 13 * scale, 10 * scale : 13 * scale]
        assert (obj == (250, 20, 20)).all()
        ring = _outline_set(10 * scale - 1, 10 * scale - 1, 13 * scale, 13 * scale)
        assert _pixels_of(tile, report.CATEGORY_COLOURS[0]) == ring
    # the old rule (outline just inside) covers the object's border pixels
    t = report.contact_sheet(ds, scale=1, small_outline=0)
    tile = t.pixels[t.tiles[0].top :, t.tiles[0].left :]
    assert not (tile[10:13, 10:13] == (250, 20, 20)).all()


def _sized_dataset(tmp_path, sizes):
    """One 200x60 image with square objects of the given sides in a row, each of its own colour."""
    img = np.full((60, 200, 3), 60, dtype=np.uint8)
    anns, x = [], 4
    for i, s in enumerate(sizes):
        img[10 : 10 + s, x : x + s] = (200, 200 - 10 * i, 40)
        anns.append({"id": i + 1, "image_id": 1, "category_id": 1, "bbox": [x, 10, s, s], "area": float(s * s),
                     "iscrowd": 0})
        x += s + 6
    root = tmp_path / "sized"
    _write_dataset(root, [{"id": 1, "file_name": "a.png", "width": 200, "height": 60}], anns,
                   [{"id": 1, "name": "pin"}])
    Image.fromarray(img).save(root / "images" / "a.png")
    return report.open_dataset(root)


def test_zoom_strip_can_show_a_spread_of_sizes_or_the_missed(tmp_path):
    """--zoom-pick: smallest takes the smallest, spread reaches the larger ones, missed only unfound objects."""
    sizes = [2, 3, 4, 6, 8, 10, 12, 14]
    ds = _sized_dataset(tmp_path, sizes)

    def shown(**kw):
        sheet = report.contact_sheet(ds, scale=1, zoom=True, zoom_count=3, **kw)
        return [sizes[c.annotation] for c in sheet.crops]

    assert shown() == [2, 3, 4]
    assert shown(zoom_pick="spread") == [2, 8, 14]
    anns = ds.coco["annotations"]
    preds = [{"image_id": 1, "category_id": 1, "bbox": a["bbox"], "score": 1.0} for a in anns[:5]]
    (tmp_path / "p.json").write_text(json.dumps(preds))
    p, missed = report.classify_predictions(ds.coco, report.read_predictions(tmp_path / "p.json"))
    assert shown(zoom_pick="missed", predictions=p, missed=missed) == [10, 12, 14]
    with pytest.raises(UserError, match="needs predictions"):
        shown(zoom_pick="missed")


def test_show_caption_counts_only_the_predictions_drawn(small_dataset, tmp_path):
    """With 2 of 6 images shown, the line printed counts the predictions on those 2 images only."""
    ds, _ = small_dataset
    coco = json.loads((ds / "annotations.json").read_text())
    preds = [{"image_id": a["image_id"], "category_id": a["category_id"], "bbox": a["bbox"], "score": 1.0}
             for a in coco["annotations"] if not a["iscrowd"]]
    (tmp_path / "p.json").write_text(json.dumps(preds))
    res = run("show", ds, "--out", tmp_path / "s.png", "--pred", tmp_path / "p.json", "--images", 2)
    assert res.exit_code == 0, res.output
    first = sorted(im["id"] for im in coco["images"])[:2]
    drawn = sum(p["image_id"] in first for p in preds)
    assert drawn < len(preds)
    assert f"{drawn} of {len(preds)} predictions drawn" in res.stdout
