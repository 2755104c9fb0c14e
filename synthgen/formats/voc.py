"""Pascal VOC XML: one file per image, writer and reader.

Rule
----
VOC boxes are 1-based inclusive integer pixel indices: the top-left pixel is
``(1, 1)`` and a box's width is ``xmax - xmin + 1``.  synthgen writes each
object's **pixel box** (the tight box of the pixels it covers, half-open
``(c0, r0, c1, r1)`` in the coordinates of :mod:`synthgen.geometry`) as::

    xmin = c0 + 1    ymin = r0 + 1    xmax = c1    ymax = r1

so a pixel-aligned COCO box ``[x, y, w, h]`` becomes ``xmin = x + 1, ymin =
y + 1, xmax = x + w, ymax = y + h``.  The reader inverts this and returns
half-open xyxy floats ``(xmin - 1, ymin - 1, xmax, ymax)``.

The pixel box is taken from the annotation's ``synthgen.pixel_box``; for COCO
files from other tools, from the tight box of an RLE segmentation, else from
the bbox rounded outwards to whole pixels.

Per object: ``name`` (the category name), ``pose`` ``Unspecified``,
``truncated`` 1 when the object is cut by the image border
(``synthgen.truncated``), ``occluded`` 1 when objects above it hide part of it
(``synthgen.visible_fraction < 1``), ``difficult`` 0 for an object and 1 for an
ignore region (a COCO annotation with ``iscrowd`` 1): VOC's evaluation neither
counts a difficult object nor charges a detection of it.  Files are
``voc/<image stem>.xml``; ``size/depth`` is 3.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from synthgen.errors import InputFileError
from synthgen.formats._common import (
    annotations_by_image,
    bad_record,
    categories_in_order,
    inside_dataset,
    pixel_box,
    sidecar_name,
)
from synthgen.formats.dataset_dir import VOC_DIR

if TYPE_CHECKING:
    from synthgen.formats.check_context import CheckContext

__all__ = ["voc_document", "write_voc", "read_voc", "voc_box_from_pixel_box", "xyxy_from_voc_box", "check_voc"]

# A visible fraction this close to 1 counts as not occluded (float slack).
_OCCLUDED_BELOW = 1.0 - 1e-9


def voc_box_from_pixel_box(boxes) -> np.ndarray:
    """VOC ``(xmin, ymin, xmax, ymax)`` integers from half-open pixel boxes.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        Pixel boxes ``(c0, r0, c1, r1)``; values are whole pixels.

    Returns
    -------
    ndarray of int64, shape (N, 4)
        ``(c0 + 1, r0 + 1, c1, r1)``.

    Examples
    --------
    >>> voc_box_from_pixel_box([[3, 2, 7, 5]]).tolist()
    [[4, 3, 7, 5]]
    """
    b = np.rint(np.asarray(boxes, dtype=np.float64).reshape(-1, 4)).astype(np.int64)
    b[:, :2] += 1
    return b


def xyxy_from_voc_box(boxes) -> np.ndarray:
    """Half-open xyxy floats from VOC ``(xmin, ymin, xmax, ymax)``.

    Examples
    --------
    >>> xyxy_from_voc_box([[4, 3, 7, 5]]).tolist()
    [[3.0, 2.0, 7.0, 5.0]]
    """
    b = np.asarray(boxes, dtype=np.float64).reshape(-1, 4).copy()
    b[:, :2] -= 1
    return b


def _flag(v: bool) -> str:
    return "1" if v else "0"


def voc_document(image: dict, annotations: list[dict], names: dict[int, str]) -> bytes:
    """The VOC XML of one image.

    Parameters
    ----------
    image : dict
        COCO image record (``file_name``, ``width``, ``height``).
    annotations : list of dict
        The image's COCO annotations, written in this order.
    names : dict
        Category id -> name.

    Returns
    -------
    bytes
        UTF-8 XML document.
    """
    import xml.etree.ElementTree as ET

    root = ET.Element("annotation")
    ET.SubElement(root, "folder").text = "images"
    ET.SubElement(root, "filename").text = Path(image["file_name"]).name
    size = ET.SubElement(root, "size")
    ET.SubElement(size, "width").text = str(int(image["width"]))
    ET.SubElement(size, "height").text = str(int(image["height"]))
    ET.SubElement(size, "depth").text = "3"
    ET.SubElement(root, "segmented").text = "0"
    if annotations:
        boxes = voc_box_from_pixel_box(np.stack([pixel_box(a) for a in annotations]))
    for a, box in zip(annotations, boxes if annotations else []):
        facts = a.get("synthgen") if isinstance(a.get("synthgen"), dict) else {}
        obj = ET.SubElement(root, "object")
        ET.SubElement(obj, "name").text = names[a["category_id"]]
        ET.SubElement(obj, "pose").text = "Unspecified"
        ET.SubElement(obj, "truncated").text = _flag(bool(facts.get("truncated", False)))
        ET.SubElement(obj, "occluded").text = _flag(float(facts.get("visible_fraction", 1.0)) < _OCCLUDED_BELOW)
        ET.SubElement(obj, "difficult").text = _flag(a.get("iscrowd", 0) == 1)
        bnd = ET.SubElement(obj, "bndbox")
        for tag, v in zip(("xmin", "ymin", "xmax", "ymax"), box):
            ET.SubElement(bnd, tag).text = str(int(v))
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=False) + b"\n"


def write_voc(coco: dict, out_dir) -> int:
    """Write one VOC XML file per image of ``coco`` into ``out_dir``.

    Parameters
    ----------
    coco : dict
        COCO dict (synthgen's own or another tool's).
    out_dir : str or Path
        Directory to fill (created when missing), e.g. ``DIR/voc``.

    Returns
    -------
    int
        Number of files written.
    """
    out_dir = Path(out_dir)
    names = {c["id"]: c["name"] for c in categories_in_order(coco)}
    by_image = annotations_by_image(coco)
    for im in coco["images"]:
        target = out_dir / sidecar_name(im["file_name"], ".xml")
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(voc_document(im, by_image.get(im["id"], []), names))
    return len(coco["images"])


def _text(path, node, tag: str, record: str) -> str:
    child = node.find(tag)
    if child is None or child.text is None or not child.text.strip():
        raise bad_record(path, record, f"must have a <{tag}> value", None)
    return child.text.strip()


def _number(path, node, tag: str, record: str) -> float:
    text = _text(path, node, tag, record)
    try:
        value = float(text)
    except ValueError:
        raise bad_record(path, record, f"<{tag}> must be a number", text) from None
    if not np.isfinite(value):
        raise bad_record(path, record, f"<{tag}> must be finite", text)
    return value


def read_voc(path) -> dict:
    """Read one VOC XML file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict
        ``filename`` (str), ``width``, ``height``, ``depth`` (int),
        ``names`` (list of str), ``boxes`` (float64 (N, 4), half-open xyxy, see
        the module rule), ``truncated``, ``occluded``, ``difficult`` (bool (N,)).

    Raises
    ------
    synthgen.errors.InputFileError
        When the file is missing, not XML, or a value is missing or not a
        number; the message names the file and the object.
    """
    import xml.etree.ElementTree as ET

    path = Path(path)
    try:
        root = ET.parse(path).getroot()
    except OSError as e:
        raise InputFileError(path, f"cannot be read ({e.strerror or e})") from None
    except ET.ParseError as e:
        raise bad_record(path, "", "must be well-formed XML", str(e)) from None
    if root.tag != "annotation":
        raise bad_record(path, "root", "must be <annotation>", root.tag)
    size = root.find("size")
    if size is None:
        raise bad_record(path, "annotation", "must have <size>", None)
    dims = [_number(path, size, t, "size") for t in ("width", "height")]
    has_depth = size.find("depth") is not None and (size.find("depth").text or "").strip()
    out = {
        "filename": _text(path, root, "filename", "annotation"),
        "width": int(dims[0]),
        "height": int(dims[1]),
        "depth": int(_number(path, size, "depth", "size")) if has_depth else 3,
    }
    names, boxes, flags = [], [], {"truncated": [], "occluded": [], "difficult": []}
    for i, obj in enumerate(root.findall("object")):
        record = f"object[{i}]"
        names.append(_text(path, obj, "name", record))
        bnd = obj.find("bndbox")
        if bnd is None:
            raise bad_record(path, record, "must have <bndbox>", None)
        boxes.append([_number(path, bnd, t, f"{record} bndbox") for t in ("xmin", "ymin", "xmax", "ymax")])
        for key in flags:
            node = obj.find(key)
            flags[key].append(node is not None and (node.text or "").strip() == "1")
    out["names"] = names
    out["boxes"] = xyxy_from_voc_box(boxes) if boxes else np.zeros((0, 4))
    for key, values in flags.items():
        out[key] = np.array(values, dtype=bool)
    return out


# --------------------------------------------------------------------------- check rule (synthgen check)


def check_voc(ctx: CheckContext) -> bool:
    """Check rule of VOC: ``voc/**/*.xml`` or ``Annotations/**/*.xml`` (not ``ImageSets``); True when found.

    Each file's image exists with the size it gives, names are categories of the
    reference, boxes are whole 1-based pixel indices, non-empty and inside the
    image, and the objects are the reference's (ignore regions as ``difficult``).
    """
    d = next((ctx.root / n for n in (VOC_DIR, "Annotations") if (ctx.root / n).is_dir()), None)
    if d is None:
        return False
    files = sorted(p for p in d.rglob("*.xml") if "ImageSets" not in p.relative_to(d).parts)
    seen, n_obj = set(), 0
    names_allowed = set(ctx.ref_names) if ctx.ref_names is not None else None
    for p, stem, doc in ctx.read_each(d, files, read_voc, seen):
        w, h = doc["width"], doc["height"]
        n = len(doc["names"])
        n_obj += n
        img = ctx.find_image(doc["filename"]) if inside_dataset(doc["filename"]) else None
        if img is None:
            ctx.add(p, "filename", "image file must exist", doc["filename"])
        else:
            size = ctx.image_size(img)
            if size is not None and size != (w, h):
                ctx.add(p, "size", f"must match the image {ctx.rel(img)} {size}", (w, h))
        voc = voc_box_from_pixel_box(doc["boxes"]) if n else np.zeros((0, 4), np.int64)
        raw = doc["boxes"].copy()
        raw[:, :2] += 1  # back to the file's 1-based values
        for i in range(n):
            record = f"object[{i}]"
            xmin, ymin, xmax, ymax = raw[i].tolist()
            if names_allowed is not None and doc["names"][i] not in names_allowed:
                ctx.add(p, record, "name must be a category of annotations.json", doc["names"][i])
            if not np.array_equal(raw[i], voc[i]):
                ctx.add(p, f"{record} bndbox", "coordinates must be whole pixel indices", raw[i].tolist())
            if xmin > xmax or ymin > ymax:
                ctx.add(p, f"{record} bndbox", "box must be non-empty (xmin <= xmax, ymin <= ymax)", raw[i].tolist())
            elif xmin < 1 or ymin < 1 or xmax > w or ymax > h:
                ctx.add(p, f"{record} bndbox", f"box must lie inside the image [1, {w}] x [1, {h}]", raw[i].tolist())
        found = [(f"object[{i}]", doc["names"][i], tuple(doc["boxes"][i].tolist())) for i in range(n)]
        ctx.compare("voc", p, stem, found, (w, h), tol=1.0)
    ctx.missing("voc", seen, ctx.rel(d) + "/{stem}.xml")
    ctx.count("voc", len(files), len(files), n_obj)
    ctx.compare_total("voc", d)
    return True
