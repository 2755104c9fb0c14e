"""Instance masks (opt-in): per-image instance-id PNGs, or per-object RLE lines.

Rule
----
``png`` mode: ``masks/<image stem>.png``, single-channel **uint16**, the image's
size.  0 is background; pixel value ``i`` (1-based) is the ``i``-th object
annotation (``iscrowd`` 0) of that image in annotation order (the order of
``annotations`` in the COCO file, which for synthgen is draw order, bottom
first); :data:`IGNORE_ID` (65535) marks the pixels of ignore regions
(``iscrowd`` 1), which a consumer should leave out of its loss and scores.
Each annotation's mask is its ``segmentation`` (RLE, or a polygon filled with
Pillow for other tools' files).  Where masks share pixels (anti-aliased edges
of overlapping objects) the later annotation, the one drawn on top, wins, with
one exception: an object whose every pixel an upper annotation won (a small
object whose visible part lies under the soft edges of the objects above it)
takes back one of its pixels, the one whose owner has the most pixels (the
first in column-major order among equals), provided that owner keeps at least
one.  So every object with a non-empty segmentation owns at least one pixel,
unless each of its pixels is the only pixel of another annotation
(:func:`lost_annotations` tells which break that rule).  At most 65,534
objects per image.

``rle`` mode: ``masks.jsonl``, one line per image: ``image_id``,
``file_name``, and ``masks``, a list in annotation order of ``{"id",
"category_id", "iscrowd", "size": [H, W], "counts"}`` (COCO compressed RLE,
see :mod:`synthgen.formats.rle`), exactly each annotation's own mask with no
overlap resolution.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import orjson

from synthgen._io import read_input
from synthgen.errors import InputFileError
from synthgen.formats import rle
from synthgen.formats._common import annotations_by_image, bad_record, sidecar_name
from synthgen.formats.check_context import listing
from synthgen.formats.dataset_dir import MASKS_DIR, MASKS_RLE

if TYPE_CHECKING:
    from synthgen.formats.check_context import CheckContext

__all__ = [
    "MASK_MODES",
    "check_masks",
    "MAX_IDS",
    "IGNORE_ID",
    "annotation_mask",
    "instance_id_image",
    "lost_annotations",
    "write_instance_pngs",
    "write_mask_rles",
    "read_instance_png",
    "read_mask_rles",
]

MASK_MODES = ("png", "rle")
#: Pixel value of ignore regions (annotations with ``iscrowd`` 1) in an instance-id PNG.
IGNORE_ID = 65535
#: Most objects one instance-id PNG (uint16) can number (the largest value marks ignore regions).
MAX_IDS = IGNORE_ID - 1


def annotation_mask(ann: dict, height: int, width: int) -> np.ndarray:
    """Binary mask (bool (H, W)) of one COCO annotation's segmentation."""
    from PIL import Image, ImageDraw

    seg = ann.get("segmentation")
    if isinstance(seg, dict):
        if list(seg.get("size", [])) != [height, width]:
            raise ValueError(f"annotation {ann.get('id')}: RLE size {seg.get('size')} is not the image's [{height}, {width}]")
        return rle.decode(seg)
    if isinstance(seg, list) and seg:
        canvas = Image.new("L", (width, height), 0)
        draw = ImageDraw.Draw(canvas)
        for poly in seg:
            if len(poly) >= 6:
                draw.polygon([float(v) for v in poly], fill=1)
        return np.asarray(canvas, dtype=bool)
    raise ValueError(f"annotation {ann.get('id')} has no segmentation")


def instance_id_image(annotations: list[dict], height: int, width: int) -> np.ndarray:
    """Instance-id image of one image's annotations.

    Parameters
    ----------
    annotations : list of dict
        The image's COCO annotations, in annotation order.
    height, width : int
        Image size in pixels.

    Returns
    -------
    ndarray of uint16, shape (H, W)
        0 background, ``i`` = the ``i``-th object annotation (1-based),
        :data:`IGNORE_ID` an ignore region; later annotations win.
    """
    crowd = [a.get("iscrowd", 0) == 1 for a in annotations]
    n_objects = len(annotations) - sum(crowd)
    if n_objects > MAX_IDS:
        raise ValueError(f"an instance-id PNG holds at most {MAX_IDS} objects (got {n_objects})")
    flat = np.zeros(width * height, dtype=np.uint16)  # column-major, as RLE runs are
    ids = np.cumsum([not c for c in crowd]).tolist()
    for a, is_crowd, number in zip(annotations, crowd, ids):
        flat[_pixels(a, height, width)] = IGNORE_ID if is_crowd else number
    objects = [a for a, c in zip(annotations, crowd) if not c]
    counts = np.bincount(flat, minlength=IGNORE_ID + 1)
    for i in np.flatnonzero(counts[1 : n_objects + 1] == 0) + 1:  # objects every upper annotation covered
        idx = _pixels(objects[i - 1], height, width)
        if idx.size == 0:
            continue
        owners = flat[idx]
        k = int(np.argmax(counts[owners]))  # the first pixel whose owner can best spare one
        if counts[owners[k]] > 1:
            counts[owners[k]] -= 1
            counts[i] = 1
            flat[idx[k]] = i
    return flat.reshape(width, height).T.copy()


def _pixels(ann: dict, height: int, width: int) -> np.ndarray:
    """Column-major flat indices of an annotation's segmentation pixels, int64 (A,)."""
    seg = ann.get("segmentation")
    if isinstance(seg, dict) and list(seg.get("size", [])) == [height, width]:
        return rle.flat_indices(seg)  # cost grows with the mask, not the canvas
    return np.flatnonzero(annotation_mask(ann, height, width).ravel(order="F"))


def lost_annotations(annotations: list[dict], ids: np.ndarray) -> list[int]:
    """Positions (1-based, among the objects) of objects an instance-id image leaves without a pixel against the rule.

    The rule (module docstring): an object (``iscrowd`` 0) with a non-empty segmentation
    owns at least one pixel of ``ids``, unless each of its pixels is the only
    pixel of another annotation.

    Parameters
    ----------
    annotations : list of dict
        The image's COCO annotations, in annotation order.
    ids : ndarray of int, shape (H, W)
        The instance-id image.

    Returns
    -------
    list of int
        1-based positions among the image's objects (the ids they should have), increasing.
    """
    height, width = ids.shape
    objects = [a for a in annotations if a.get("iscrowd", 0) != 1]
    flat = ids.T.ravel()  # column-major
    counts = np.bincount(flat, minlength=IGNORE_ID + 1)
    lost = []
    for i in np.flatnonzero(counts[1 : len(objects) + 1] == 0) + 1:
        try:
            idx = _pixels(objects[i - 1], height, width)
        except ValueError:  # no usable segmentation: nothing to own
            continue
        if idx.size and not (counts[flat[idx]] == 1).all():
            lost.append(int(i))
    return lost


def write_instance_pngs(coco: dict, out_dir) -> int:
    """Write ``<image stem>.png`` instance-id images into ``out_dir``; returns the count."""
    from PIL import Image

    out_dir = Path(out_dir)
    by_image = annotations_by_image(coco)
    for im in coco["images"]:
        ids = instance_id_image(by_image.get(im["id"], []), im["height"], im["width"])
        target = out_dir / sidecar_name(im["file_name"], ".png")
        target.parent.mkdir(parents=True, exist_ok=True)
        Image.fromarray(ids).save(target, format="PNG", compress_level=6)
    return len(coco["images"])


def write_mask_rles(coco: dict, path) -> int:
    """Write ``masks.jsonl`` (one line per image, per-object RLE); returns the line count."""
    by_image = annotations_by_image(coco)
    lines = []
    for im in coco["images"]:
        h, w = im["height"], im["width"]
        masks = []
        for a in by_image.get(im["id"], []):
            seg = a.get("segmentation")
            if not (isinstance(seg, dict) and isinstance(seg.get("counts"), str)):
                seg = rle.encode(annotation_mask(a, h, w))
            masks.append({"id": a["id"], "category_id": a["category_id"], "iscrowd": int(a.get("iscrowd", 0)),
                          "size": [h, w], "counts": seg["counts"]})
        lines.append(orjson.dumps({"image_id": im["id"], "file_name": im["file_name"], "masks": masks}))
    Path(path).write_bytes(b"\n".join(lines) + (b"\n" if lines else b""))
    return len(lines)


def read_instance_png(path) -> np.ndarray:
    """Read an instance-id PNG as uint16 (H, W); raises InputFileError when unusable."""
    from PIL import Image

    path = Path(path)
    try:
        with Image.open(path) as im:
            im.load()
            arr = np.asarray(im)
    except FileNotFoundError:
        raise InputFileError(path, "does not exist") from None
    except OSError as e:
        raise bad_record(path, "", "must be a readable PNG", str(e)) from None
    if arr.ndim != 2:
        raise bad_record(path, "", "must be a single-channel image", arr.shape)
    if arr.dtype.kind not in "ui" or (arr.size and (arr.min() < 0 or arr.max() > IGNORE_ID)):
        raise bad_record(path, "", "must hold integer instance ids in [0, 65535]", str(arr.dtype))
    return arr.astype(np.uint16, copy=False)


def read_mask_rles(path) -> list[dict]:
    """Read ``masks.jsonl``: per line the image's fields and ``masks`` decoded to bool (H, W) arrays."""
    path = Path(path)
    raw = read_input(path)
    out = []
    for n, text in enumerate(raw.splitlines(), start=1):
        if not text.strip():
            continue
        try:
            line = orjson.loads(text)
            decoded = [rle.decode(m) for m in line["masks"]]
        except (orjson.JSONDecodeError, KeyError, TypeError, ValueError) as e:
            raise bad_record(path, f"line {n}", "must be a JSON object with RLE 'masks'", str(e)) from None
        line["decoded"] = decoded
        out.append(line)
    return out


# --------------------------------------------------------------------------- check rule (synthgen check)


def check_masks(ctx: CheckContext) -> bool:
    """Check rule of masks: ``masks/**/*.png`` (instance ids) or ``masks.jsonl`` (per-object RLE);
    True when found.

    Each image's masks have the reference's size and stand for its objects
    (ignore regions as the ignore value, or in ``masks.jsonl``); every object
    keeps a pixel (:func:`lost_annotations`).
    """
    if (ctx.root / MASKS_DIR).is_dir():
        _check_pngs(ctx, ctx.root / MASKS_DIR)
    elif (ctx.root / MASKS_RLE).is_file():
        _check_rles(ctx, ctx.root / MASKS_RLE)
    else:
        return False
    return True


def _check_pngs(ctx: CheckContext, d: Path) -> None:
    files = sorted(d.rglob("*.png"))
    seen, n_obj = set(), 0
    for p, stem, ids in ctx.read_each(d, files, read_instance_png, seen):
        numbered = ids[ids != IGNORE_ID]
        n_obj += int(np.count_nonzero(np.bincount(numbered)[1:])) if numbered.size else 0
        if ctx.ref_objects is None or stem not in ctx.ref_objects:
            ctx.compare("masks", p, stem, [])
            continue
        h, w = ids.shape
        if (w, h) != ctx.ref_sizes[stem]:
            ctx.add(p, "", f"mask size (width, height) must match annotations.json {ctx.ref_sizes[stem]}", (w, h))
            continue
        anns = ctx.ref_anns[stem]
        n_plain = sum(a.get("iscrowd", 0) != 1 for a in anns)
        top = int(numbered.max()) if numbered.size else 0
        if top > n_plain:
            ctx.add(p, "", f"instance ids must be at most the image's object count ({n_plain})", top)
            continue
        if n_plain == len(anns) and numbered.size < ids.size:
            ctx.add(p, "", f"ignore value {IGNORE_ID} must mark ignore regions of annotations.json "
                     "(this image has none)", IGNORE_ID)
        lost = lost_annotations(anns, ids)
        if lost:
            plain = [a for a in anns if a.get("iscrowd", 0) != 1]
            ctx.add(
                p, "",
                f"every object of image {ctx.ref_files[stem]} with segmentation pixels must keep one "
                "(unless each is another annotation's only pixel); none for annotation id "
                + listing([plain[i - 1].get("id") for i in lost]),
                [f"id {i}" for i in lost] if len(lost) <= 5 else len(lost),
            )
            ctx.mismatched.add("masks")
    ctx.missing("masks", seen, ctx.rel(d) + "/{stem}.png")
    # objects = instances with at least one pixel (one drawn over entirely has none); ignore regions not counted
    ctx.count("masks", len(files), len(files), n_obj)



def _check_rles(ctx: CheckContext, path: Path) -> None:
    try:
        lines = read_mask_rles(path)
    except InputFileError as e:
        ctx.add_error(e)
        return
    n_obj = 0
    for i, line in enumerate(lines):
        n_obj += len(line["masks"])
        stem = ctx.ref_ids.get(line.get("image_id"))
        if stem is None:
            continue
        by_id = {a.get("id"): a for a in ctx.ref_anns[stem]}
        found = [
            (f"masks[{j}]", ctx.ref_cat_names.get(by_id.get(m.get("id"), {}).get("category_id")),
             _id_box(by_id.get(m.get("id"))))
            for j, m in enumerate(line["masks"])
        ]
        ctx.compare("masks", path, stem, found, record=f"line {i + 1}", what="masks")
        for m in line["decoded"]:
            if (m.shape[1], m.shape[0]) != ctx.ref_sizes[stem]:
                ctx.add(path, f"line {i + 1}", f"mask size must match annotations.json {ctx.ref_sizes[stem]}", m.shape)
                break
    ctx.count("masks", 1, len(lines), n_obj)
    ctx.compare_total("masks", path)




def _id_box(ann: dict | None) -> tuple | None:
    """The xyxy box of a reference annotation an RLE mask names by id (None when it names none)."""
    if ann is None:
        return None
    x, y, w, h = ann["bbox"]
    return (x, y, x + w, y + h)
