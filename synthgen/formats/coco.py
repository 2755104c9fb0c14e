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

import json
import math
from collections import Counter
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import orjson

from synthgen._io import read_input, write_atomic
from synthgen.errors import InputFileError
from synthgen.errors import is_int as _is_int
from synthgen.errors import is_number as _is_num
from synthgen.formats import rle
from synthgen.formats._common import inside_dataset
from synthgen.formats.dataset_dir import ANNOTATIONS
from synthgen.geometry import as_boxes

if TYPE_CHECKING:
    from synthgen.formats.check_context import CheckContext

__all__ = [
    "AREA_RANGES",
    "coco_categories",
    "scene_annotations",
    "assemble_coco",
    "write_coco",
    "read_coco",
    "structure_problems",
    "coco_problems",
    "index_coco",
    "BOX_TOL",
    "loads_lenient",
    "check_coco",
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
    their images, ids are unique etc. is :func:`coco_problems`' job (which
    starts with these).

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


#: Slack of the inside-the-image rule for boxes, in pixels.
BOX_TOL = 1e-6


def index_coco(coco: dict) -> tuple[list[dict], list[dict], list[dict], dict, dict]:
    """The records of a COCO dict that passed :func:`structure_problems`, indexed.

    Returns
    -------
    images, annotations, categories : lists of dict
        The records that are objects, in file order.
    size_of : dict
        Image id -> ``(width, height)``, for images whose size is two positive whole numbers.
    per_image : dict
        Image id (of ``size_of``) -> its annotations, in file order.
    """
    images = [im for im in coco["images"] if isinstance(im, dict)]
    anns = [a for a in coco["annotations"] if isinstance(a, dict)]
    cats = [c for c in coco["categories"] if isinstance(c, dict)]
    size_of = {}
    for im in images:
        w, h = im.get("width"), im.get("height")
        if _is_int(w) and _is_int(h) and w > 0 and h > 0:
            size_of[im.get("id")] = (w, h)
    per_image: dict = {}
    for a in anns:
        if a.get("image_id") in size_of:
            per_image.setdefault(a.get("image_id"), []).append(a)
    return images, anns, cats, size_of, per_image


def coco_problems(coco, *, image_file: Callable | None = None) -> Iterator[tuple[str, str, object]]:
    """Every COCO rule ``coco`` breaks: its structure, then ids, references, boxes and masks.

    The one COCO validator.  After :func:`structure_problems` (which ends the
    walk when the top level is broken): ids are positive whole numbers and
    unique per kind; category names are unique; images have a positive whole
    size and a unique ``file_name`` that stays inside the dataset; annotations
    name an existing image and category and have ``iscrowd``; ``bbox`` is
    finite, non-empty and inside its image (to :data:`BOX_TOL`); ``area`` is
    finite and >= 0; an RLE ``segmentation`` has its image's ``[height, width]``
    and decodes.

    Parameters
    ----------
    coco : object
        A parsed JSON document.
    image_file : callable, optional
        ``image_file(record, file_name, width, height)`` -> iterable of
        ``(record, rule, value)``: rules about the image file itself (exists,
        has that size), asked for each image record that passed its own rules.

    Yields
    ------
    (record, rule, value)
        As :func:`structure_problems`.

    Examples
    --------
    >>> doc = {"images": [{"id": 1, "file_name": "a.png", "width": 4, "height": 4}],
    ...        "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [2, 2, 3, 1], "iscrowd": 0}],
    ...        "categories": [{"id": 1, "name": "ring"}]}
    >>> list(coco_problems(doc))
    [('annotations[0] (id 1)', 'bbox must lie inside the image [0, 4] x [0, 4]', [2, 2, 3, 1])]
    """
    top_broken = False
    for record, rule, value in structure_problems(coco):
        yield record, rule, value
        top_broken |= record == "top level"
    if top_broken:
        return
    images, anns, cats, size_of, _ = index_coco(coco)
    for kind, records in (("images", images), ("annotations", anns), ("categories", cats)):
        yield from _id_problems(kind, records)
    for name, n in Counter(c.get("name") for c in cats).items():
        if n > 1:
            yield "categories", "category names must be unique", name
    yield from _image_problems(images, image_file)
    cat_ids = {c.get("id") for c in cats}
    for i, a in enumerate(anns):
        record = f"annotations[{i}] (id {a.get('id')!r})"
        image_id = a.get("image_id")
        if image_id not in size_of:
            if _is_int(image_id):
                yield record, "image_id must name an image", image_id
            continue
        if a.get("category_id") not in cat_ids and _is_int(a.get("category_id")):
            yield record, "category_id must name a category", a.get("category_id")
        if "iscrowd" not in a:
            yield record, "must have 'iscrowd' (0 or 1)", "<missing>"
        yield from ((record, rule, value) for rule, value in _annotation_problems(a, *size_of[image_id]))


def _id_problems(kind: str, records: list[dict]) -> Iterator[tuple[str, str, object]]:
    seen = Counter(r.get("id") for r in records if _is_int(r.get("id")))
    for i, r in enumerate(records):
        v = r.get("id")
        if not _is_int(v):
            continue
        if v <= 0:
            yield f"{kind}[{i}]", "id must be a positive whole number", v
        elif seen[v] > 1:
            yield f"{kind}[{i}] (id {v})", f"{kind} ids must be unique", v


def _image_problems(images: list[dict], image_file: Callable | None) -> Iterator[tuple[str, str, object]]:
    files = Counter(im.get("file_name") for im in images)
    for i, im in enumerate(images):
        record = f"images[{i}] (id {im.get('id')!r})"
        w, h = im.get("width"), im.get("height")
        if not (_is_int(w) and _is_int(h) and w > 0 and h > 0):
            yield record, "width and height must be positive whole numbers", (w, h)
            continue
        fn = im.get("file_name")
        if not isinstance(fn, str):
            continue
        if not inside_dataset(fn):
            yield record, "file_name must be a relative path inside the dataset", fn
            continue
        if files[fn] > 1:
            yield record, "file_name must be unique", fn
        if image_file is not None:
            yield from image_file(record, fn, w, h)


def _annotation_problems(a: dict, width: int, height: int) -> Iterator[tuple[str, object]]:
    """``(rule, value)`` of an annotation's box, area and RLE mask in an image of that size."""
    bbox = a.get("bbox")
    if isinstance(bbox, list) and len(bbox) == 4 and all(_is_num(v) for v in bbox):
        x, y, w, h = (float(v) for v in bbox)
        if not all(math.isfinite(v) for v in (x, y, w, h)):
            yield "bbox must be finite", bbox
        elif w <= 0 or h <= 0:
            yield "bbox must be non-empty (w > 0 and h > 0)", bbox
        elif x < -BOX_TOL or y < -BOX_TOL or x + w > width + BOX_TOL or y + h > height + BOX_TOL:
            yield f"bbox must lie inside the image [0, {width}] x [0, {height}]", bbox
    area = a.get("area")
    if _is_num(area) and not (math.isfinite(area) and area >= 0):
        yield "area must be finite and >= 0", area
    seg = a.get("segmentation")
    if isinstance(seg, dict) and isinstance(seg.get("size"), list):
        if list(seg["size"]) != [height, width]:
            yield f"RLE size must be the image's [height, width] [{height}, {width}]", seg["size"]
        else:
            try:
                rle.decode(seg)
            except (ValueError, TypeError) as e:
                yield "RLE segmentation must decode", str(e)


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


# --------------------------------------------------------------------------- check rule (synthgen check)


def loads_lenient(raw: bytes):
    """Parse JSON; NaN, Infinity and overflowing numbers are read on (so a checker can name them).

    Raises
    ------
    orjson.JSONDecodeError
        When ``raw`` is not JSON even so.
    """
    try:
        return orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        try:
            return json.loads(raw)
        except ValueError:
            raise e from None


def check_coco(ctx: CheckContext) -> bool:
    """Check rule of COCO: ``annotations.json``, ``annotations.<split>.json``, ``annotations/*.json``
    (or the file given); True when there is one.

    The whole-dataset file is the reference for the other formats; without one
    (only split files, or ``annotations/*.json``), all the files together are.
    Split files hold the reference's categories and each image once.
    """
    root = ctx.root
    if ctx.given is not None:
        files = [ctx.given]
    else:
        files = [root / ANNOTATIONS] if (root / ANNOTATIONS).is_file() else []
        files += sorted(root.glob("annotations.*.json"))
        if (root / "annotations").is_dir():
            files += sorted((root / "annotations").glob("*.json"))
    if not files:
        return False
    whole = files[0].name == ANNOTATIONS
    main = _check_file(ctx, files[0], reference=True) if whole else None
    parts = {}
    for p in files[1:] if whole else files:
        c = _check_file(ctx, p, reference=not whole)
        if c is not None and (p.name.startswith("annotations.") or not whole):
            parts[p.name] = (p, c)
    if parts and (main is not None or len(parts) > 1):
        _check_splits(ctx, main, parts)
    return True


def _check_file(ctx: CheckContext, path: Path, *, reference: bool) -> dict | None:
    try:
        coco = loads_lenient(path.read_bytes())
    except OSError as e:
        ctx.add(path, "", "file must be readable", str(e))
        return None
    except orjson.JSONDecodeError as e:
        ctx.add(path, f"line {e.lineno}, column {e.colno}", "file must be valid JSON", e.msg)
        return None
    broken_top = False
    for record, rule, value in coco_problems(coco, image_file=ctx.image_file_problems):
        ctx.add(path, record, rule, value)
        broken_top |= record == "top level"
    if broken_top:
        return None
    if reference:
        images, anns, cats, size_of, per_image = index_coco(coco)
        ctx.take_reference(images, cats, per_image, size_of)
        total = ctx.counts.setdefault("coco", {"files": 0, "images": 0, "objects": 0, "ignored": 0})
        crowd = sum(a.get("iscrowd") == 1 for a in anns)
        total["files"] += 1
        total["images"] += len(images)
        total["objects"] += len(anns) - crowd
        total["ignored"] += crowd
    return coco


def _check_splits(ctx: CheckContext, main: dict | None, parts: dict[str, tuple[Path, dict]]) -> None:
    main_ids = {im.get("id"): im.get("file_name") for im in main["images"]} if main else None
    owner: dict[object, str] = {}
    first_name, (_, first) = next(iter(parts.items()))
    for name, (path, coco) in parts.items():
        if main is not None and coco["categories"] != main["categories"]:
            ctx.add(path, "categories", "must be the categories of annotations.json", coco["categories"])
        elif main is None and coco["categories"] != first["categories"]:
            ctx.add(path, "categories", f"must be the categories of {first_name}", coco["categories"])
        for i, im in enumerate(coco["images"]):
            key = im.get("file_name")
            record = f"images[{i}] (id {im.get('id')!r})"
            if key in owner:
                ctx.add(path, record, f"image must be in one split only (also in {owner[key]})", key)
            owner[key] = name
            if main_ids is not None and main_ids.get(im.get("id")) != key:
                ctx.add(path, record, "image must appear in annotations.json with the same id", key)
