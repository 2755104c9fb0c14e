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
from typing import TYPE_CHECKING

import numpy as np

from synthgen._io import read_input_text
from synthgen.errors import InputFileError
from synthgen.formats._common import (
    annotations_by_image,
    bad_record,
    categories_in_order,
    sidecar_name,
)
from synthgen.formats.check_context import name_at
from synthgen.formats.coco import BOX_TOL  # also the slack, as a fraction of a side, of YOLO boxes
from synthgen.formats.dataset_dir import YOLO_DIR
from synthgen.geometry import as_boxes

if TYPE_CHECKING:
    from synthgen.formats.check_context import CheckContext

__all__ = [
    "LABELS_FILE",
    "check_yolo",
    "yolo_lines",
    "normalize_boxes",
    "denormalize_boxes",
    "write_yolo",
    "parse_yolo",
    "read_yolo",
    "read_labels",
    "read_data_yaml",
]

LABELS_FILE = "labels.txt"
# YOLO dataset files naming the classes, beside images/ and labels/ (common practice)
_DATA_YAML = ("data.yaml", "data.yml", "dataset.yaml")


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


def parse_yolo(path) -> tuple[np.ndarray, np.ndarray, list[int], list]:
    r"""Read one YOLO txt file line by line, keeping every good line and every problem.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    classes : ndarray of int64, shape (N,)
        Class index of each good line.
    boxes : ndarray of float64, shape (N, 4)
        Normalized ``(xc, yc, w, h)`` of each good line.
    line_numbers : list of int, length N
        1-based line number of each good line.
    problems : list of synthgen.errors.InputFileError
        One per bad line (naming the file, the line, the rule and the value),
        in file order.

    Raises
    ------
    synthgen.errors.InputFileError
        When the file cannot be read as UTF-8 text.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> _ = f.write_text("0 0.5 0.5 0.2\n9 0.5 0.5 0.2 0.2\n")
    >>> classes, boxes, lines, problems = parse_yolo(f)
    >>> classes.tolist(), lines, [e.record for e in problems]
    ([9], [2], ['line 1'])
    """
    path = Path(path)
    text = read_input_text(path)
    classes, rows, numbers, problems = [], [], [], []
    for n, line in enumerate(text.splitlines(), start=1):
        parts = line.split()
        if not parts:
            continue
        problem = _line_problem(parts)
        if problem is not None:
            rule, value = problem
            problems.append(bad_record(path, f"line {n}", rule, value if value is not None else line))
            continue
        classes.append(int(parts[0]))
        rows.append([float(v) for v in parts[1:]])
        numbers.append(n)
    return np.array(classes, dtype=np.int64), as_boxes(rows), numbers, problems


def _line_problem(parts: list[str]) -> tuple[str, object] | None:
    """(rule, value) a split YOLO line breaks, or None; value None means the whole line."""
    if len(parts) != 5:
        return "must be 'class xc yc w h' (5 fields)", None
    try:
        int(parts[0])
    except ValueError:
        return "class must be a whole number", parts[0]
    try:
        vals = [float(v) for v in parts[1:]]
    except ValueError:
        return "xc yc w h must be numbers", " ".join(parts[1:])
    if not all(math.isfinite(v) for v in vals):
        return "xc yc w h must be finite", " ".join(parts[1:])
    return None


def read_data_yaml(path) -> list[str]:
    r"""Class names from a YOLO dataset file (``data.yaml``), in class-index order.

    The file is YAML with ``names`` either a list (index = position) or a
    mapping index -> name (indices 0 .. n-1); ``nc``, when present, must be the
    number of names.  Other keys (``path``, ``train``, ``val``, ...) are not
    read.

    Raises
    ------
    synthgen.errors.InputFileError
        When the file is not YAML, has no usable ``names``, or ``nc`` disagrees.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "data.yaml"
    >>> _ = f.write_text("nc: 2\nnames: {0: bolt, 1: washer}\n")
    >>> read_data_yaml(f)
    ['bolt', 'washer']
    """
    import yaml

    path = Path(path)
    try:
        doc = yaml.safe_load(read_input_text(path))
    except yaml.YAMLError as e:
        mark = getattr(e, "problem_mark", None)
        where = f"line {mark.line + 1}" if mark is not None else ""
        raise bad_record(path, where, "must be valid YAML", str(getattr(e, "problem", e))) from None
    names = doc.get("names") if isinstance(doc, dict) else None
    if isinstance(names, dict):
        keys = sorted(names, key=lambda k: (not isinstance(k, int), k if isinstance(k, int) else 0))
        if keys != list(range(len(names))):
            raise bad_record(path, "names", "must map the class indices 0 .. n-1 to names", keys)
        names = [names[k] for k in keys]
    if not (isinstance(names, list) and all(isinstance(n, (str, int, float)) for n in names)):
        raise bad_record(path, "names", "must be a list of class names or a mapping index -> name", names)
    nc = doc.get("nc")
    if nc is not None and nc != len(names):
        raise bad_record(path, "nc", f"must be the number of names ({len(names)})", nc)
    return [str(n) for n in names]


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
        the message names the file and the first such line (see
        :func:`parse_yolo` for every bad line at once).
    """
    cls_arr, boxes, _, problems = parse_yolo(path)
    if problems:
        raise problems[0]
    if width is not None and height is not None:
        boxes = denormalize_boxes(boxes, width, height)
    return cls_arr, boxes


# --------------------------------------------------------------------------- check rule (synthgen check)


def check_yolo(ctx: CheckContext) -> bool:
    """Check rule of YOLO: ``yolo/**/*.txt`` with ``yolo/labels.txt`` (or ``labels/**/*.txt`` with
    ``classes.txt`` or the ``names`` of ``data.yaml``); True when found.

    The class names are the reference's categories by id; each label file has an
    image of the same base name; classes index the names; boxes are non-empty and
    inside ``[0, 1]``; the objects are the reference's without its ignore regions.
    """
    d = next((ctx.root / n for n in (YOLO_DIR, "labels") if (ctx.root / n).is_dir()), None)
    if d is None:
        return False
    labels_path, labels = _check_class_names(ctx, d)
    skip = {labels_path}
    files = sorted(
        p for p in d.rglob("*.txt") if p not in skip and p.relative_to(d).parts[0] != "splits"
    )
    seen, n_obj = set(), 0
    for p, stem, (classes, boxes, lines, bad) in ctx.read_each(d, files, parse_yolo, seen):
        for e in bad:  # every bad line on its own; the good ones are still checked
            ctx.add_error(e)
        n_obj += classes.size
        if ctx.find_image_by_stem(stem) is None and ctx.find_image(stem) is None:
            ctx.add(p, "", "image file must exist (same base name in images/)", stem)
        names = labels if labels is not None else ctx.ref_names
        for i in range(classes.size):
            record = f"line {lines[i]}"
            c = int(classes[i])
            xc, yc, w, h = boxes[i].tolist()
            if labels is not None and not 0 <= c < len(labels):
                ctx.add(p, record, f"class must be in [0, {len(labels) - 1}] ({labels_path.name})", c)
            if w <= 0 or h <= 0:
                ctx.add(p, record, "box must be non-empty (w > 0 and h > 0)", boxes[i].tolist())
            # the slack of COCO's inside-the-image rule, as a fraction of the side
            elif xc - w / 2 < -BOX_TOL or yc - h / 2 < -BOX_TOL or xc + w / 2 > 1 + BOX_TOL or yc + h / 2 > 1 + BOX_TOL:
                ctx.add(p, record, "box must lie inside the image (normalized [0, 1])", boxes[i].tolist())
        if stem in ctx.ref_sizes:
            pixels = denormalize_boxes(boxes, *ctx.ref_sizes[stem])
            found = [
                (f"line {lines[i]}", name_at(names, int(classes[i])), tuple(pixels[i].tolist()))
                for i in range(classes.size)
            ]
        else:
            found = [(f"line {n}", None, None) for n in lines]
        ctx.compare("yolo", p, stem, found, crowd=False)
    ctx.missing("yolo", seen, ctx.rel(d) + "/{stem}.txt")
    ctx.count("yolo", len(files), len(files), n_obj)
    ctx.compare_total("yolo", d)
    return True


def _check_class_names(ctx: CheckContext, d: Path) -> tuple[Path | None, list[str] | None]:
    """The class-name file of a YOLO directory and its names (None when missing or unreadable, with a problem)."""
    places = [d / LABELS_FILE, d / "classes.txt", ctx.root / "classes.txt"]
    places += [ctx.root / n for n in _DATA_YAML]
    labels_path = next((p for p in places if p.is_file()), None)
    labels = None
    if labels_path is None:
        ctx.add(
            d / LABELS_FILE, "", f"class-name file must exist (or classes.txt, or {_DATA_YAML[0]})",
            "<missing>",
        )
    else:
        try:
            if labels_path.suffix in (".yaml", ".yml"):
                labels = read_data_yaml(labels_path)
            else:
                labels = read_labels(labels_path)
        except InputFileError as e:
            ctx.add_error(e)
        if labels is not None and ctx.ref_names is not None and labels != ctx.ref_names:
            ctx.add(labels_path, "", f"must list the categories of annotations.json by id {ctx.ref_names}", labels)
    return labels_path, labels
