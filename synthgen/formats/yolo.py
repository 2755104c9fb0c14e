"""YOLO txt: one file per image plus ``labels.txt``, writer and reader.

Rule
----
``yolo/labels.txt`` lists the category names, one per line, in order of
category id; a class index is the 0-based line number in that file.  Each image
gets ``yolo/<image stem>.txt`` (an empty file when it has no objects) with one
line per annotation, in annotation order, leaving out ignore regions (``iscrowd``
1: YOLO txt has no way to mark a region as ignored)::

    class xc yc w h

from the annotated (visible) box ``[x, y, w, h]`` of the COCO file and the
image size ``W x H``: ``xc = (x + w / 2) / W``, ``yc = (y + h / 2) / H``,
``w / W``, ``h / H``, each written with 8 decimals (a 10,000-px side keeps
5e-5 px).  The reader inverts this to half-open xyxy floats in pixels.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from synthgen.formats._common import (
    annotations_by_image,
    bad_record,
    categories_in_order,
    read_input_text,
    sidecar_name,
)
from synthgen.geometry import as_boxes

__all__ = [
    "LABELS_FILE",
    "yolo_lines",
    "normalize_boxes",
    "denormalize_boxes",
    "write_yolo",
    "read_yolo",
    "read_labels",
]

LABELS_FILE = "labels.txt"


def normalize_boxes(boxes, width: float, height: float) -> np.ndarray:
    """YOLO ``(xc, yc, w, h)`` fractions from xyxy boxes in pixels.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
    width, height : float
        Image size in pixels.

    Returns
    -------
    ndarray of float64, shape (N, 4)

    Examples
    --------
    >>> normalize_boxes([[10, 20, 30, 60]], 100, 200).tolist()
    [[0.2, 0.2, 0.2, 0.2]]
    """
    b = as_boxes(boxes)
    out = np.empty_like(b)
    out[:, 0] = (b[:, 0] + b[:, 2]) / 2 / width
    out[:, 1] = (b[:, 1] + b[:, 3]) / 2 / height
    out[:, 2] = (b[:, 2] - b[:, 0]) / width
    out[:, 3] = (b[:, 3] - b[:, 1]) / height
    return out


def denormalize_boxes(yolo, width: float, height: float) -> np.ndarray:
    """xyxy boxes in pixels from YOLO ``(xc, yc, w, h)`` fractions (inverse of :func:`normalize_boxes`)."""
    y = as_boxes(yolo)
    out = np.empty_like(y)
    half_w = y[:, 2] * width / 2
    half_h = y[:, 3] * height / 2
    out[:, 0] = y[:, 0] * width - half_w
    out[:, 1] = y[:, 1] * height - half_h
    out[:, 2] = y[:, 0] * width + half_w
    out[:, 3] = y[:, 1] * height + half_h
    return out


def yolo_lines(annotations: list[dict], width: int, height: int, class_of: dict[int, int]) -> str:
    """The text of one image's YOLO file ("" for no objects).

    Parameters
    ----------
    annotations : list of dict
        COCO annotations of the image (``bbox`` = ``[x, y, w, h]``); those with
        ``iscrowd`` 1 are left out.
    width, height : int
        Image size in pixels.
    class_of : dict
        Category id -> 0-based class index.
    """
    annotations = [a for a in annotations if a.get("iscrowd", 0) != 1]
    if not annotations:
        return ""
    bbox = np.array([a["bbox"] for a in annotations], dtype=np.float64)
    xyxy = bbox.copy()
    xyxy[:, 2:] += bbox[:, :2]
    norm = normalize_boxes(xyxy, width, height)
    return "".join(
        f"{class_of[a['category_id']]} {r[0]:.8f} {r[1]:.8f} {r[2]:.8f} {r[3]:.8f}\n"
        for a, r in zip(annotations, norm.tolist())
    )


def write_yolo(coco: dict, out_dir) -> int:
    """Write ``labels.txt`` and one YOLO txt file per image into ``out_dir``.

    Returns
    -------
    int
        Number of per-image files written.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    cats = categories_in_order(coco)
    class_of = {c["id"]: i for i, c in enumerate(cats)}
    (out_dir / LABELS_FILE).write_text("".join(f"{c['name']}\n" for c in cats), encoding="utf-8")
    by_image = annotations_by_image(coco)
    for im in coco["images"]:
        target = out_dir / sidecar_name(im["file_name"], ".txt")
        target.parent.mkdir(parents=True, exist_ok=True)
        text = yolo_lines(by_image.get(im["id"], []), im["width"], im["height"], class_of)
        target.write_text(text, encoding="utf-8")
    return len(coco["images"])


def read_labels(path) -> list[str]:
    """Class names from a ``labels.txt`` (one per line; blank lines at the end ignored)."""
    path = Path(path)
    lines = read_input_text(path).splitlines()
    while lines and not lines[-1].strip():
        lines.pop()
    return [line.strip() for line in lines]


def read_yolo(path, width: float | None = None, height: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Read one YOLO txt file.

    Parameters
    ----------
    path : str or Path
    width, height : float, optional
        Image size in pixels; when given, boxes come back as xyxy pixels,
        otherwise as the normalized ``(xc, yc, w, h)`` of the file.

    Returns
    -------
    classes : ndarray of int64, shape (N,)
    boxes : ndarray of float64, shape (N, 4)

    Raises
    ------
    synthgen.errors.InputFileError
        When a line does not hold an integer class and four finite numbers;
        the message names the file and the line.
    """
    path = Path(path)
    text = read_input_text(path)
    classes, rows = [], []
    for n, line in enumerate(text.splitlines(), start=1):
        parts = line.split()
        if not parts:
            continue
        record = f"line {n}"
        if len(parts) != 5:
            raise bad_record(path, record, "must be 'class xc yc w h' (5 fields)", line)
        try:
            cls = int(parts[0])
        except ValueError:
            raise bad_record(path, record, "class must be a whole number", parts[0]) from None
        try:
            vals = [float(v) for v in parts[1:]]
        except ValueError:
            raise bad_record(path, record, "xc yc w h must be numbers", " ".join(parts[1:])) from None
        if not all(math.isfinite(v) for v in vals):
            raise bad_record(path, record, "xc yc w h must be finite", " ".join(parts[1:]))
        classes.append(cls)
        rows.append(vals)
    cls_arr = np.array(classes, dtype=np.int64)
    boxes = as_boxes(rows)
    if width is not None and height is not None:
        boxes = denormalize_boxes(boxes, width, height)
    return cls_arr, boxes
