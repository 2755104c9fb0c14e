"""Random COCO ground truth and predictions for the scoring tests (seeded)."""

from __future__ import annotations

import contextlib
import copy
import io

import numpy as np

# Areas exactly on the COCO size thresholds and just around them (REFERENCE.md: COCO-style AP).
EDGE_AREAS = (1024.0, 9216.0, 1023.999, 1024.001, 9215.999, 9216.001, 0.0)


def random_case(rng: np.random.Generator, *, many: bool = False, grid: bool = False) -> tuple[dict, list]:
    """A small random COCO ground truth and a results list built from it.

    Ground truth: 1-6 images (some empty), 0-12 objects each, categories 1-4
    listed (category 4 never annotated), about 10 % crowd, areas from the box,
    random, or exactly on the size thresholds.  Predictions: jittered copies of
    the ground truth (some relabelled), duplicates, random boxes, a category 9
    not in the ground truth, scores on a coarse grid so that ties are common;
    with ``many`` one image gets more than 100 detections of one category.
    About one object in ten has an identical twin; with ``grid`` boxes sit on a
    coarse integer grid (some of zero width) and predictions snap to it, so
    that equal IoUs and zero-size boxes are common.
    """
    n_img = int(rng.integers(1, 7))
    images = [{"id": int(i), "width": 300, "height": 300, "file_name": f"{i:06d}.png"}
              for i in rng.permutation(np.arange(1, 40))[:n_img]]
    cats = [{"id": c, "name": f"c{c}", "supercategory": "shape"} for c in (1, 2, 3, 4)]
    anns = []
    for im in images:
        for _ in range(int(rng.integers(0, 13)) if rng.random() > 0.15 else 0):
            side = rng.choice([rng.uniform(2, 40), rng.uniform(20, 130), 32.0, 96.0])
            w = float(side * rng.uniform(0.5, 1.5)) if rng.random() < 0.6 else float(side)
            h = float(side)
            if rng.random() < 0.3:  # integer-aligned boxes make IoU ties likely
                w, h = float(round(w)) or 1.0, float(round(h)) or 1.0
            x, y = float(rng.uniform(0, 200)), float(rng.uniform(0, 200))
            u = rng.random()
            area = w * h if u < 0.5 else (float(rng.choice(EDGE_AREAS)) if u < 0.8 else float(w * h * rng.uniform(0.3, 1)))
            if grid:  # coarse integer grid: equal IoUs between different objects are common
                x, y = float(4 * rng.integers(0, 50)), float(4 * rng.integers(0, 50))
                w, h = float(4 * rng.integers(0, 12)), float(4 * rng.integers(1, 12))
                area = w * h if rng.random() < 0.7 else float(rng.choice(EDGE_AREAS))
            anns.append({"id": len(anns) + 1, "image_id": im["id"], "category_id": int(rng.integers(1, 4)),
                         "bbox": [x, y, w, h], "area": area, "iscrowd": int(rng.random() < 0.1)})
            if rng.random() < 0.1:  # an identical twin, possibly with another area or crowd flag
                twin = dict(anns[-1], id=len(anns) + 1, bbox=list(anns[-1]["bbox"]))
                twin["area"] = float(rng.choice([twin["area"], *EDGE_AREAS]))
                twin["iscrowd"] = int(rng.random() < 0.3)
                anns.append(twin)
    gt = {"images": images, "annotations": anns, "categories": cats}
    preds = []
    scores = np.round(np.linspace(0.05, 1.0, 20), 2) if rng.random() < 0.5 else np.array([0.3, 0.5, 0.9])
    for a in anns:
        for _ in range(int(rng.integers(0, 3))):
            x, y, w, h = a["bbox"]
            s = rng.uniform(0.7, 1.3, 2) if rng.random() < 0.8 else np.ones(2)
            d = rng.normal(0, 0.15 * max(w, h), 2) if rng.random() < 0.8 else np.zeros(2)
            cat = a["category_id"] if rng.random() < 0.85 else int(rng.integers(1, 4))
            box = [x + d[0], y + d[1], w * s[0], h * s[1]]
            if grid:
                box = [float(4 * round(v / 4)) for v in box]
            preds.append({"image_id": a["image_id"], "category_id": cat, "bbox": box,
                          "score": float(rng.choice(scores))})
    for im in images:
        for _ in range(int(rng.integers(0, 8))):
            w, h = rng.uniform(1, 120, 2)
            if rng.random() < 0.2:
                w, h = 32.0, 32.0  # detection area exactly 1024
            preds.append({"image_id": im["id"], "category_id": int(rng.choice([1, 2, 3, 4, 9])),
                          "bbox": [float(v) for v in (*rng.uniform(0, 250, 2), w, h)],
                          "score": float(rng.choice(scores))})
    if many and images:
        im = images[0]["id"]
        for _ in range(int(rng.integers(101, 140))):
            w, h = rng.uniform(5, 60, 2)
            preds.append({"image_id": im, "category_id": 1, "bbox": [float(v) for v in (*rng.uniform(0, 200, 2), w, h)],
                          "score": float(rng.choice(scores))})
    order = rng.permutation(len(preds))
    return gt, [preds[i] for i in order]


def coco_reference(gt: dict, preds: list, cat_ids=None, iou_thrs=None):
    """Run pycocotools' COCOeval (bbox) on copies of the inputs; None when it cannot run.

    pycocotools raises on an empty results list and ``loadRes`` edits the dicts
    it is given (REFERENCE.md: COCO JSON pitfalls).  With ``iou_thrs`` other
    than the standard ones only evaluate and accumulate run (summarize looks
    up 0.5 and 0.75 among the thresholds).
    """
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    if not preds:
        return None
    with contextlib.redirect_stdout(io.StringIO()):
        coco = COCO()
        coco.dataset = copy.deepcopy(gt)
        coco.createIndex()
        dt = coco.loadRes(copy.deepcopy(preds))
        ev = COCOeval(coco, dt, "bbox")
        if cat_ids is not None:
            ev.params.catIds = list(cat_ids)
        if iou_thrs is not None:
            ev.params.iouThrs = np.asarray(iou_thrs, dtype=float)
        ev.evaluate()
        ev.accumulate()
        if iou_thrs is None:
            ev.summarize()
    return ev
