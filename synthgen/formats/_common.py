"""Helpers shared by the format modules: grouping a COCO dict, naming records and sidecar files."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

import numpy as np

from synthgen.errors import InputFileError, bad_record, is_int

__all__ = [
    "annotations_by_image",
    "categories_in_order",
    "image_index",
    "pixel_box",
    "bad_record",
    "sidecar_name",
    "inside_dataset",
    "WriteJob",
    "write_lines",
]


def annotations_by_image(coco: dict) -> dict[int, list[dict]]:
    """Annotations of each image id, in the order they appear in the file."""
    out: dict[int, list[dict]] = {im["id"]: [] for im in coco["images"]}
    for a in coco["annotations"]:
        out.setdefault(a["image_id"], []).append(a)
    return out


def categories_in_order(coco: dict) -> list[dict]:
    """Categories sorted by id: the order of class indices in every format."""
    return sorted(coco["categories"], key=lambda c: c["id"])


def image_index(image: dict, position: int) -> int:
    """0-based image index ``k``: synthgen's own when recorded, else the position."""
    facts = image.get("synthgen")
    if isinstance(facts, dict) and is_int(facts.get("index")):
        return facts["index"]
    return position


def inside_dataset(file_name: str) -> bool:
    """Whether a ``file_name`` from a file is a relative path that stays inside the dataset.

    >>> inside_dataset("a/000001.png"), inside_dataset("../x.png"), inside_dataset("/etc/x.png")
    (True, False, False)
    """
    p = PurePosixPath(file_name.replace("\\", "/"))
    return not p.is_absolute() and ".." not in p.parts


def sidecar_name(file_name: str, suffix: str) -> str:
    """Per-image file name for another format: the image's path with ``suffix``.

    >>> sidecar_name("000012.png", ".xml")
    '000012.xml'
    """
    if not inside_dataset(file_name):
        raise InputFileError(file_name, "image file_name must be a relative path inside the dataset")
    return str(PurePosixPath(file_name.replace("\\", "/")).with_suffix(suffix))


def pixel_box(ann: dict) -> np.ndarray:
    """Pixel box (xyxy, integer-valued floats) of an annotation.

    synthgen's recorded ``synthgen.pixel_box`` when present; else the tight box
    of an RLE segmentation; else the COCO bbox rounded outwards to whole pixels
    (the pixels the box touches).
    """
    facts = ann.get("synthgen")
    if isinstance(facts, dict) and facts.get("pixel_box") is not None:
        return np.asarray(facts["pixel_box"], dtype=np.float64)
    seg = ann.get("segmentation")
    if isinstance(seg, dict) and "counts" in seg:
        from synthgen.formats import rle
        from synthgen.geometry import mask_box

        box = mask_box(rle.decode(seg))
        if box is not None:
            return box
    x, y, w, h = (float(v) for v in ann["bbox"])
    return np.array([np.floor(x), np.floor(y), np.ceil(x + w), np.ceil(y + h)], dtype=np.float64)


@dataclass(frozen=True)
class WriteJob:
    """What every format writer of a dataset directory is given (see :mod:`synthgen.formats.registry`).

    ``parts`` maps a split name to its COCO dict and ``stems`` to its images' file stems
    (both empty without splits); the rest are the options of
    :func:`synthgen.formats.export.write_formats`.
    """

    coco: dict
    out: Path
    images_dir: Path
    parts: dict = field(default_factory=dict)
    stems: dict = field(default_factory=dict)
    seed: int = 0
    n_bins: int = 1000
    order: str = "random"
    noise: object = None
    masks: str = "png"


def write_lines(path: Path, items: list[str]) -> None:
    """Write one item per line (UTF-8, ``\\n`` after each), making the parent directory."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("".join(f"{s}\n" for s in items), encoding="utf-8")
