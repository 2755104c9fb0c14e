"""Detectors for the probe tests: one that returns the ground truth, and ways to break it.

They find each image's truth by the image's pixels (a digest of the array),
from the COCO file named by ``SYNTHGEN_TEST_TRUTH``; ``SYNTHGEN_TEST_BREAK``
(``CASE@INDEX``) makes the output of image INDEX break the contract.  Both are
read at call time, so worker processes see them too.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import cv2
import numpy as np

_CACHE: dict = {}


def _truth() -> dict:
    """digest of the RGB pixels -> (index, xyxy boxes, category names)."""
    path = Path(os.environ["SYNTHGEN_TEST_TRUTH"])
    if path not in _CACHE:
        coco = json.loads(path.read_text())
        names = {c["id"]: c["name"] for c in coco["categories"]}
        table = {}
        for k, img in enumerate(coco["images"]):
            rgb = cv2.cvtColor(cv2.imread(str(path.parent / "images" / img["file_name"])), cv2.COLOR_BGR2RGB)
            anns = [a for a in coco["annotations"] if a["image_id"] == img["id"] and not a["iscrowd"]]
            boxes = np.array([[a["bbox"][0], a["bbox"][1], a["bbox"][0] + a["bbox"][2], a["bbox"][1] + a["bbox"][3]]
                              for a in anns]).reshape(-1, 4)
            table[hashlib.sha256(rgb.tobytes()).hexdigest()] = (k, boxes, [names[a["category_id"]] for a in anns])
        _CACHE[path] = table
    return _CACHE[path]


def _broken(case: str, boxes, scores, labels):
    if case == "raises":
        raise ValueError("the model fell over\n  (a second line of its message)")
    if case == "shape":
        return {"boxes": np.zeros((len(boxes), 5)), "scores": scores, "labels": labels}
    if case == "nan":
        boxes = boxes.copy()
        boxes[0, 2] = np.nan
    if case == "inf_score":
        scores = scores.copy()
        scores[0] = np.inf
    if case == "negative":
        boxes = boxes.copy()
        boxes[0, 2] = boxes[0, 0] - 1.0
    if case == "label":
        labels = ["hexnut", *labels[1:]]
    if case == "label_id":
        labels = [99, *labels[1:]]
    if case == "label_float":
        labels = [1.5, *labels[1:]]
    if case == "scores_len":
        scores = scores[:-1]
    if case == "not_a_result":
        return "boxes"
    if case == "text_boxes":
        return {"boxes": [["a", "b", "c", "d"]] * len(boxes), "scores": scores, "labels": labels}
    if case == "missing_key":
        return {"boxes": boxes, "labels": labels}
    return {"boxes": boxes, "scores": scores, "labels": labels}


def perfect(images):
    """The ground truth of each image, scores falling with the object's order (all distinct)."""
    table = _truth()
    case, _, at = os.environ.get("SYNTHGEN_TEST_BREAK", "").partition("@")
    out = []
    for image in images:
        k, boxes, labels = table[hashlib.sha256(np.ascontiguousarray(image).tobytes()).hexdigest()]
        scores = 1.0 - np.arange(len(boxes)) / (len(boxes) + 1.0)
        out.append(_broken(case, boxes, scores, labels) if case and int(at) == k else
                   {"boxes": boxes, "scores": scores, "labels": labels})
    if case == "count" and any(table[hashlib.sha256(np.ascontiguousarray(i).tobytes()).hexdigest()][0] == int(at)
                               for i in images):
        out = out[:-1]
    return out


def as_tuples(images):
    """The same as ``perfect``, each result a (boxes, scores, labels) tuple with COCO ids as labels."""
    coco = json.loads(Path(os.environ["SYNTHGEN_TEST_TRUTH"]).read_text())
    ids = {c["name"]: c["id"] for c in coco["categories"]}
    return [(r["boxes"].tolist(), r["scores"], np.array([ids[n] for n in r["labels"]])) for r in perfect(images)]
