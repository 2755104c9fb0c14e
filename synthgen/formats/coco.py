"""COCO JSON: writer, reader and the ``[x, y, w, h]`` box conversions.

Rule
----
* COCO's ``bbox`` is ``[x0, y0, x1 - x0, y1 - y0]`` in continuous image
  coordinates (see :mod:`synthgen.geometry`), floats, measured from the
  top-left corner of the image: ``[0, 0, 1, 1]`` is exactly the first pixel.
  :func:`bbox_from_xyxy` and :func:`xyxy_from_bbox` are the only conversions.
* Image ids and annotation ids start at 1 (an id of 0 never matches in the
  reference evaluator); every annotation has ``iscrowd``.
* synthgen writes each annotation's ``segmentation`` as compressed RLE
  (:mod:`synthgen.formats.rle`, ``counts`` a str) of the visible region's
  support, for every object, occluded or not: one rule, and the tight box of the
  mask is the object's pixel box.  The reader also accepts polygon
  segmentations written by other tools.
* synthgen's own facts sit under the extra key ``"synthgen"`` of images and
  annotations; readers that do not know it ignore it.

Files are written atomically: to a temporary file in the same directory, flushed
and fsync'ed, then renamed over the final name, so a crash never leaves a
truncated file under the final name.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import orjson

from synthgen._io import read_input, write_atomic
from synthgen.errors import InputFileError
from synthgen.errors import is_int as _is_int
from synthgen.errors import is_number as _is_num
from synthgen.formats import rle
from synthgen.geometry import as_boxes

__all__ = [
    "AREA_RANGES",
    "coco_categories",
    "scene_annotations",
    "assemble_coco",
    "write_coco",
    "read_coco",
    "structure_problems",
    "bbox_from_xyxy",
    "xyxy_from_bbox",
]


#: COCO size ranges by ground-truth ``area`` in px^2, both ends inclusive (the COCO
#: detection evaluation's ``areaRng``: all, small < 32^2, medium, large >= 96^2).
AREA_RANGES = (
    ("all", 0**2, 1e5**2),
    ("small", 0**2, 32**2),
    ("medium", 32**2, 96**2),
    ("large", 96**2, 1e5**2),
)

def bbox_from_xyxy(boxes) -> list[list[float]]:
    """COCO ``bbox`` lists from xyxy boxes.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        Boxes ``(x0, y0, x1, y1)`` in pixels.

    Returns
    -------
    list of N lists ``[x0, y0, x1 - x0, y1 - y0]`` of Python floats.

    Examples
    --------
    >>> bbox_from_xyxy([[3, 2, 7, 5]])
    [[3.0, 2.0, 4.0, 3.0]]
    """
    b = as_boxes(boxes)
    out = np.empty_like(b)
    out[:, :2] = b[:, :2]
    out[:, 2:] = b[:, 2:] - b[:, :2]
    return out.tolist()


def xyxy_from_bbox(bboxes) -> np.ndarray:
    """xyxy boxes from COCO ``bbox`` values.

    Parameters
    ----------
    bboxes : array_like of shape (N, 4)
        ``[x, y, w, h]`` rows in pixels.

    Returns
    -------
    ndarray of float64, shape (N, 4)
        ``(x, y, x + w, y + h)``.

    Examples
    --------
    >>> xyxy_from_bbox([[3, 2, 4, 3]]).tolist()
    [[3.0, 2.0, 7.0, 5.0]]
    """
    b = as_boxes(bboxes)
    out = b.copy()
    with np.errstate(over="ignore"):  # an absurd but finite box (1e308 wide) ends at inf
        out[:, 2:] = b[:, :2] + b[:, 2:]
    return out


def write_coco(path, coco: dict, *, indent: bool = False) -> None:
    """Write a COCO dict as JSON, atomically.

    Parameters
    ----------
    path : str or Path
        Output file, e.g. ``DIR/annotations.json``.
    coco : dict
        ``{"images": [...], "annotations": [...], "categories": [...], ...}``.
        numpy scalars and arrays are written as JSON numbers and lists.
    indent : bool
        Indent by two spaces (larger files, easier to read).
    """
    option = orjson.OPT_SERIALIZE_NUMPY
    if indent:
        option |= orjson.OPT_INDENT_2
    write_atomic(path, orjson.dumps(coco, option=option))


def read_coco(path) -> dict:
    """Read a COCO JSON file and check its structure.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict
        The parsed file.

    Raises
    ------
    synthgen.errors.InputFileError
        When the file is missing, is not JSON, or breaks the structure of a
        COCO file; the message names the file, the record and the rule.
    """
    path = Path(path)
    raw = read_input(path)
    try:
        coco = orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        raise InputFileError(path, f"is not valid JSON at line {e.lineno}, column {e.colno} ({e.msg})") from None
    for record, rule, value in structure_problems(coco):
        raise InputFileError(path, f"{record}: {rule} (got {_show(value)})")
    return coco


def _show(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _name(kind: str, i: int, rec) -> str:
    if isinstance(rec, dict) and "id" in rec:
        return f"{kind}[{i}] (id {_show(rec['id'])})"
    return f"{kind}[{i}]"


def structure_problems(coco) -> Iterator[tuple[str, str, object]]:
    """Ways in which ``coco`` is not shaped like a COCO file.

    Only types and required keys are checked here; whether boxes lie inside
    their images, ids are unique etc. is :mod:`synthgen.check`'s job.

    Parameters
    ----------
    coco : object
        A parsed JSON document.

    Yields
    ------
    (record, rule, value)
        ``record`` names the place (``"annotations[4] (id 5)"``), ``rule`` what
        must hold, ``value`` what was found.
    """
    if not isinstance(coco, dict):
        yield "top level", "must be a JSON object", type(coco).__name__
        return
    for key in ("images", "annotations", "categories"):
        if not isinstance(coco.get(key), list):
            yield "top level", f"'{key}' must be a list", coco.get(key, "<missing>")
    images = coco.get("images") if isinstance(coco.get("images"), list) else []
    for i, im in enumerate(images):
        rec = _name("images", i, im)
        if not isinstance(im, dict):
            yield rec, "must be an object", im
            continue
        if not _is_int(im.get("id")):
            yield rec, "'id' must be an integer", im.get("id", "<missing>")
        if not isinstance(im.get("file_name"), str):
            yield rec, "'file_name' must be a string", im.get("file_name", "<missing>")
        for key in ("width", "height"):
            if not _is_int(im.get(key)):
                yield rec, f"'{key}' must be an integer", im.get(key, "<missing>")
    anns = coco.get("annotations") if isinstance(coco.get("annotations"), list) else []
    for i, a in enumerate(anns):
        rec = _name("annotations", i, a)
        if not isinstance(a, dict):
            yield rec, "must be an object", a
            continue
        for key in ("id", "image_id", "category_id"):
            if not _is_int(a.get(key)):
                yield rec, f"'{key}' must be an integer", a.get(key, "<missing>")
        bbox = a.get("bbox")
        if not (isinstance(bbox, list) and len(bbox) == 4 and all(_is_num(v) for v in bbox)):
            yield rec, "'bbox' must be a list of 4 numbers [x, y, w, h]", bbox if bbox is not None else "<missing>"
        if "area" in a and not _is_num(a["area"]):
            yield rec, "'area' must be a number", a["area"]
        if "iscrowd" in a and a["iscrowd"] not in (0, 1):
            yield rec, "'iscrowd' must be 0 or 1", a["iscrowd"]
        seg = a.get("segmentation")
        if seg is not None and not _segmentation_ok(seg):
            yield rec, "'segmentation' must be a polygon list or an RLE {size: [h, w], counts}", seg
    cats = coco.get("categories") if isinstance(coco.get("categories"), list) else []
    for i, c in enumerate(cats):
        rec = _name("categories", i, c)
        if not isinstance(c, dict):
            yield rec, "must be an object", c
            continue
        if not _is_int(c.get("id")):
            yield rec, "'id' must be an integer", c.get("id", "<missing>")
        if not isinstance(c.get("name"), str):
            yield rec, "'name' must be a string", c.get("name", "<missing>")


def _segmentation_ok(seg) -> bool:
    if isinstance(seg, dict):
        size = seg.get("size")
        counts = seg.get("counts")
        return (
            isinstance(size, list)
            and len(size) == 2
            and all(_is_int(v) and v >= 0 for v in size)
            and (isinstance(counts, str) or (isinstance(counts, list) and all(_is_int(v) for v in counts)))
        )
    if isinstance(seg, list):
        return all(
            isinstance(p, list) and len(p) % 2 == 0 and all(_is_num(v) and math.isfinite(v) for v in p)
            for p in seg
        )
    return False


# --------------------------------------------------------------------------- building a dataset's COCO dict


def coco_categories(pairs) -> list[dict]:
    """COCO ``categories`` records from ``(id, name)`` pairs, by rising id (every synthgen category is a shape).

    Examples
    --------
    >>> coco_categories([(3, "triangle"), (1, "rectangle")])[0]
    {'id': 1, 'name': 'rectangle', 'supercategory': 'shape'}
    """
    return [{"id": i, "name": name, "supercategory": "shape"} for i, name in sorted(pairs)]


def scene_annotations(scene, height: int, width: int) -> list[dict]:
    """COCO annotation records (without ``id`` and ``image_id``) for a scene's objects and ignore regions.

    ``scene`` is a :class:`synthgen.scene.Scene` (any object with its ``boxes``,
    ``categories``, ``areas``, ``facts``, ``masks`` and ``ignored`` parts).

    Objects have ``iscrowd`` 0; ignore regions (:class:`synthgen.scene.IgnoreRegions`)
    ``iscrowd`` 1.  Records are in draw order (``synthgen.z``), bottom first,
    so that where masks share a pixel the later record is the one on top.
    """
    parts = ((scene, 0), (scene.ignored, 1))
    records = []
    for part, crowd in parts:
        segmentations = rle.encode_patches(part.masks, height, width)  # all masks in one pass
        records.extend(
            {
                "category_id": category,
                "bbox": bbox,
                "area": area,
                "iscrowd": crowd,
                "segmentation": segmentation,
                "synthgen": facts,
            }
            for category, bbox, area, segmentation, facts in zip(
                part.categories.tolist(), bbox_from_xyxy(part.boxes), part.areas.tolist(), segmentations, part.facts
            )
        )
    if len(scene.ignored.facts):
        records.sort(key=lambda r: r["synthgen"]["z"])
    return records


def assemble_coco(info: dict, categories: list[dict], records) -> dict:
    """The COCO dict from per-image records (``{"image": ..., "annotations": [...]}``) in index order.

    Annotation ids start at 1 and run over all images in order.  The in-memory
    reference for :func:`synthgen.run.journal.write_coco_streamed`, which writes the
    same bytes without holding every record.
    """
    images, annotations = [], []
    next_id = 1
    for rec in records:
        images.append(rec["image"])
        for ann in rec["annotations"]:
            annotations.append({"id": next_id, "image_id": rec["image"]["id"], **ann})
            next_id += 1
    return {"info": info, "images": images, "annotations": annotations, "categories": categories}
