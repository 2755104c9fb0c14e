"""Time synthgen's COCO box evaluation against pycocotools on the same data, in one run.

5,000 images x 20 ground-truth boxes x 50 predictions, 3 classes (PERF-NOTES.md:
Scoring).  Prints both times, the ratio, and whether the 12 stats are identical;
asserts nothing.

    python benchmarks/bench_score.py [--images 5000]
"""

from __future__ import annotations

import argparse
import contextlib
import copy
import io
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.evaluate import STAT_NAMES, evaluate  # noqa: E402


def make_data(n_images: int, n_gt: int, n_pred: int, n_cls: int, seed: int = 0) -> tuple[dict, list]:
    """Ground truth and predictions: each prediction is a jittered true box or a random box."""
    rng = np.random.default_rng(seed)
    images = [{"id": i + 1, "width": 640, "height": 480, "file_name": f"{i:06d}.png"} for i in range(n_images)]
    cats = [{"id": c + 1, "name": f"class{c + 1}", "supercategory": "shape"} for c in range(n_cls)]
    wh = rng.uniform(8, 160, (n_images, n_gt, 2))
    xy = rng.uniform(0, 1, (n_images, n_gt, 2)) * (np.array([640, 480]) - wh)
    gcls = rng.integers(1, n_cls + 1, (n_images, n_gt))
    anns = []
    for i in range(n_images):
        for j in range(n_gt):
            w, h = wh[i, j]
            anns.append({"id": len(anns) + 1, "image_id": i + 1, "category_id": int(gcls[i, j]),
                         "bbox": [float(xy[i, j, 0]), float(xy[i, j, 1]), float(w), float(h)],
                         "area": float(w * h), "iscrowd": 0})
    src = rng.integers(0, n_gt, (n_images, n_pred))
    real = rng.random((n_images, n_pred)) < 0.6
    jit = rng.normal(0, 0.12, (n_images, n_pred, 4))
    rwh = rng.uniform(8, 160, (n_images, n_pred, 2))
    rxy = rng.uniform(0, 480, (n_images, n_pred, 2))
    relabel = rng.random((n_images, n_pred)) < 0.1
    rcls = rng.integers(1, n_cls + 1, (n_images, n_pred))
    score = np.round(rng.random((n_images, n_pred)), 3)
    preds = []
    for i in range(n_images):
        for j in range(n_pred):
            if real[i, j]:
                g = src[i, j]
                w, h = wh[i, g]
                x, y = xy[i, g]
                box = [x + jit[i, j, 0] * w, y + jit[i, j, 1] * h, w * np.exp(jit[i, j, 2]), h * np.exp(jit[i, j, 3])]
                cls = int(rcls[i, j]) if relabel[i, j] else int(gcls[i, g])
            else:
                box = [*rxy[i, j], *rwh[i, j]]
                cls = int(rcls[i, j])
            preds.append({"image_id": i + 1, "category_id": cls, "bbox": [float(v) for v in box],
                          "score": float(score[i, j])})
    return {"images": images, "annotations": anns, "categories": cats}, preds


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--images", type=int, default=5000)
    args = ap.parse_args()
    gt, preds = make_data(args.images, 20, 50, 3)
    print(f"{args.images} images, {len(gt['annotations'])} ground truth, {len(preds)} predictions, 3 classes")

    t0 = time.perf_counter()
    ours = evaluate(gt, preds)
    t_ours = time.perf_counter() - t0
    print(f"synthgen.evaluate.evaluate (validation, matching, 12 stats, per category): {t_ours:.2f} s")
    t0 = time.perf_counter()
    ours.confusion
    t_conf = time.perf_counter() - t0
    print(f"  + confusion summary: {t_conf:.2f} s")

    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    with contextlib.redirect_stdout(io.StringIO()):
        coco = COCO()
        coco.dataset = copy.deepcopy(gt)
        coco.createIndex()
        dt = coco.loadRes(copy.deepcopy(preds))
        ev = COCOeval(coco, dt, "bbox")
        t0 = time.perf_counter()
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
        t_ref = time.perf_counter() - t0
    print(f"pycocotools evaluate+accumulate+summarize: {t_ref:.2f} s")
    print(f"ratio synthgen / pycocotools: {t_ours / t_ref:.3f} (with confusion {(t_ours + t_conf) / t_ref:.3f})")
    diff = np.abs(np.array(ours.stats) - np.array(ev.stats)).max()
    print(f"stats identical (max |diff| = {diff:.3g}): {bool(diff <= 1e-9)}")
    for name, a, b in zip(STAT_NAMES, ours.stats, ev.stats):
        print(f"  {name:<10} {a:.6f} {b:.6f}")


if __name__ == "__main__":
    main()
