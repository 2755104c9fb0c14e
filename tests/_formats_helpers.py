"""Small hand-built datasets (tiny PNGs + a COCO dict laid out as DATASET.md says)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PIL import Image

from synthgen.formats import rle
from synthgen.formats.coco import write_coco

KINDS = ("rectangle", "ellipse", "triangle", "polygon", "star", "ring", "cross")


def rect_annotation(ann_id, image_id, box, category_id, width, height, *, visible_fraction=1.0, truncated=False):
    """COCO annotation of a filled rectangle ``box`` (xyxy pixels), its RLE from the covered pixels."""
    x0, y0, x1, y1 = (float(v) for v in box)
    c0, r0 = int(np.floor(x0)), int(np.floor(y0))
    c1, r1 = int(np.ceil(x1)), int(np.ceil(y1))
    patch = np.ones((r1 - r0, c1 - c0), bool)
    return {
        "id": ann_id,
        "image_id": image_id,
        "category_id": category_id,
        "bbox": [x0, y0, x1 - x0, y1 - y0],
        "area": (x1 - x0) * (y1 - y0),
        "iscrowd": 0,
        "segmentation": rle.encode_patch(patch, r0, c0, height, width),
        "synthgen": {
            "kind": KINDS[category_id - 1],
            "z": 0,
            "full_box": [x0, y0, x1, y1],
            "visible_box": [x0, y0, x1, y1],
            "pixel_box": [float(c0), float(r0), float(c1), float(r1)],
            "visible_fraction": visible_fraction,
            "truncated": truncated,
        },
    }


def mark_ignored(coco: dict, ann_ids) -> dict:
    """Make the annotations ``ann_ids`` ignore regions (``iscrowd`` 1, as synthgen writes dropped objects that show)."""
    for a in coco["annotations"]:
        if a["id"] in ann_ids:
            a["iscrowd"] = 1
            a["synthgen"]["ignored"] = "min_visible"
    return coco


def build_coco(images, categories=(1, 2, 3)):
    """COCO dict from ``[(width, height, [(box, category_id), ...]), ...]``."""
    coco = {
        "info": {"description": "hand-built test set"},
        "images": [],
        "annotations": [],
        "categories": [{"id": c, "name": KINDS[c - 1], "supercategory": "shape"} for c in categories],
    }
    ann_id = 1
    for k, (w, h, objects) in enumerate(images):
        coco["images"].append(
            {"id": k + 1, "file_name": f"{k:06d}.png", "width": w, "height": h, "synthgen": {"index": k}}
        )
        for z, (box, cat) in enumerate(objects):
            a = rect_annotation(ann_id, k + 1, box, cat, w, h)
            a["synthgen"]["z"] = z
            coco["annotations"].append(a)
            ann_id += 1
    return coco


DEFAULT_IMAGES = [
    (40, 30, [((3, 2, 7, 5), 1), ((10, 10, 30, 25), 2), ((0, 0, 40, 1), 3)]),
    (40, 30, []),
    (40, 30, [((5.25, 4.5, 12.75, 20.0), 1), ((20, 0, 40, 30), 2)]),
]


def make_dataset(root: Path, images=DEFAULT_IMAGES, categories=(1, 2, 3), ignored=()) -> dict:
    """Write ``root/images/*.png`` and ``root/annotations.json``; return the COCO dict.

    ``ignored``: annotation ids to write as ignore regions (:func:`mark_ignored`).
    """
    root = Path(root)
    (root / "images").mkdir(parents=True, exist_ok=True)
    coco = mark_ignored(build_coco(images, categories), ignored)
    rng = np.random.default_rng(0)
    for im in coco["images"]:
        pixels = rng.integers(0, 256, (im["height"], im["width"], 3), dtype=np.uint8)
        Image.fromarray(pixels).save(root / "images" / im["file_name"])
    write_coco(root / "annotations.json", coco)
    return coco
