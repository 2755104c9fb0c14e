"""Validate a detection dataset directory in any of synthgen's formats.

:func:`check_dataset` looks for each format it knows (whoever wrote the files)
and reports every rule a file breaks as a :class:`Problem` (file, record,
rule, value), with a summary of what it found.  Places looked at, relative to
the dataset directory ``DIR`` (or a COCO file given directly):

======  ====================================================================
COCO    ``annotations.json``, ``annotations.<split>.json``, ``annotations/*.json``
VOC     ``voc/**/*.xml`` or ``Annotations/**/*.xml``
YOLO    ``yolo/**/*.txt`` with ``yolo/labels.txt`` (or ``labels/**/*.txt`` with ``classes.txt``
        or the ``names`` of ``data.yaml``)
tokens  ``tokens.jsonl`` (and ``tokens.<split>.jsonl``) with ``tokens.vocab.json``
masks   ``masks/**/*.png`` (instance ids) or ``masks.jsonl`` (per-object RLE)
images  ``images/`` (or ``JPEGImages/`` for VOC, or beside the COCO file)
======  ====================================================================

Rules: referenced image files exist and decode, with the size the annotations
give; boxes are finite, non-empty and inside their image (to 1e-6 px or 1e-6
of the normalized side); ids are unique and positive; annotations refer to
existing images and categories; class names and indices agree between
formats; every format holds the same images as the COCO file and, per image,
its objects (ignore regions, ``iscrowd`` 1, count in VOC as ``difficult``
objects, in ``masks.jsonl`` and as the ignore value of the instance-id masks,
and are absent from YOLO and token files): a mismatch is one problem naming the
image and the objects on either side, paired by category and box; every object
keeps a pixel of its instance-id mask (the rule of
:mod:`synthgen.formats.masks`); files listed in a synthgen ``manifest.json``
exist and match their sha256 digests (a mismatch shows both digests).  Every
bad line of a file is its own problem, and the file's good lines are still
checked.  The box conventions are those of :mod:`synthgen.formats`.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import orjson
from PIL import Image

from synthgen._io import read_input
from synthgen.errors import InputFileError, bad_record
from synthgen.errors import is_int as _is_int
from synthgen.errors import is_number as _is_num
from synthgen.formats import masks as masks_fmt
from synthgen.formats import rle
from synthgen.formats import tokens as tokens_fmt
from synthgen.formats import voc as voc_fmt
from synthgen.formats import yolo as yolo_fmt
from synthgen.formats._common import inside_dataset as _inside
from synthgen.formats.coco import structure_problems
from synthgen.formats.dataset_dir import ANNOTATIONS, MANIFEST, MASKS_RLE, TOKENS, TOKENS_VOCAB

__all__ = ["Problem", "CheckReport", "check_dataset"]

_TOL = 1e-6
# YOLO dataset files naming the classes, beside images/ and labels/ (common practice)
_DATA_YAML = ("data.yaml", "data.yml", "dataset.yaml")
_IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".bmp", ".tif", ".tiff", ".webp")


@dataclass(frozen=True, slots=True)
class Problem:
    """One broken rule.

    Attributes
    ----------
    file : str
        File, relative to the dataset directory (``/``-separated).
    record : str
        Place in the file (``"annotations[3] (id 4)"``, ``"object[0]"``,
        ``"line 2"``), or ``""`` for the file as a whole.
    rule : str
        What must hold.
    value : object
        What was found.
    """

    file: str
    record: str
    rule: str
    value: object = None

    def __str__(self) -> str:
        where = f"{self.file}: {self.record}" if self.record else self.file
        if self.value is None:  # the rule says it all (a file that cannot be read, say)
            return f"{where}: {self.rule}"
        shown = repr(self.value)
        if len(shown) > 80:
            shown = shown[:77] + "..."
        return f"{where}: {self.rule} (got {shown})"


@dataclass(frozen=True, slots=True)
class CheckReport:
    """What :func:`check_dataset` found.

    Attributes
    ----------
    root : str
        The dataset directory.
    formats : tuple of str
        Formats found, e.g. ``("coco", "voc")``.
    counts : dict
        Format -> ``{"files": n, "images": n, "objects": n}`` (COCO also
        ``"ignored"``: the ignore regions, which ``objects`` leaves out).
    problems : tuple of Problem
    """

    root: str
    formats: tuple[str, ...]
    counts: dict = field(default_factory=dict)
    problems: tuple[Problem, ...] = ()

    @property
    def ok(self) -> bool:
        """True when no problem was found."""
        return not self.problems

    def summary(self) -> str:
        """One line: the formats with their counts and the number of problems."""
        parts = []
        for f in self.formats:
            c = self.counts.get(f, {})
            ignored = f" (+{c['ignored']} ignore regions)" if c.get("ignored") else ""
            parts.append(f"{f} {c.get('images', 0)} images / {c.get('objects', 0)} objects{ignored}")
        n = len(self.problems)
        verdict = "no problems" if n == 0 else f"{n} problem{'s' if n != 1 else ''}"
        return f"{self.root}: {'; '.join(parts)}: {verdict}"


class _Checker:
    def __init__(self, root: Path, *, decode_images: bool):
        self.root = root
        self.decode_images = decode_images
        self.problems: list[Problem] = []
        self.counts: dict[str, dict] = {}
        self._sizes: dict[Path, tuple[int, int] | None] = {}
        self._stem_index: dict[str, Path] | None = None
        # From the main COCO file, the reference for the other formats.
        self.ref_objects: dict[str, int] | None = None  # image stem -> annotation count
        self.ref_anns: dict[str, list[dict]] = {}  # image stem -> its annotations, in file order
        self.ref_files: dict[str, str] = {}  # image stem -> file_name
        self.mismatched: set[str] = set()  # formats with a per-image count problem
        self.ref_sizes: dict[str, tuple[int, int]] = {}  # image stem -> (W, H)
        self.ref_names: list[str] | None = None  # category names by id order
        self.ref_cat_names: dict = {}  # category id -> name
        self.ref_ids: dict[int, str] = {}  # image id -> stem

    # -- helpers ----------------------------------------------------------------
    def rel(self, path: Path) -> str:
        try:
            return path.relative_to(self.root).as_posix()
        except ValueError:
            return path.as_posix()

    def add(self, path: Path | str, record: str, rule: str, value: object = None) -> None:
        name = path if isinstance(path, str) else self.rel(path)
        self.problems.append(Problem(name, record, rule, value))

    def add_error(self, err: InputFileError) -> None:
        record = getattr(err, "record", "")
        rule = getattr(err, "rule", err.problem)
        value = getattr(err, "value", None)
        self.add(Path(err.path), record, rule, value)

    def image_dirs(self) -> list[Path]:
        return [self.root / "images", self.root / "JPEGImages", self.root]

    def find_image(self, file_name: str) -> Path | None:
        for d in self.image_dirs():
            p = d / file_name
            if p.is_file():
                return p
        return None

    def find_image_by_stem(self, stem: str) -> Path | None:
        if self._stem_index is None:
            self._stem_index = {}
            for d in self.image_dirs()[:2]:
                if d.is_dir():
                    for p in sorted(d.rglob("*")):
                        if p.suffix.lower() in _IMAGE_SUFFIXES and p.is_file():
                            self._stem_index.setdefault(p.relative_to(d).with_suffix("").as_posix(), p)
        return self._stem_index.get(stem)

    def image_size(self, path: Path) -> tuple[int, int] | None:
        """(W, H) of an image file, or None (with a problem) when it does not decode."""
        if path not in self._sizes:
            try:
                with Image.open(path) as im:
                    if self.decode_images:
                        im.load()
                    self._sizes[path] = im.size
            except (OSError, SyntaxError, ValueError, Image.DecompressionBombError) as e:
                self._sizes[path] = None
                self.add(path, "", "image must decode", str(e))
        return self._sizes[path]

    def check_image_file(self, src: Path, record: str, file_name: str, width, height) -> None:
        path = self.find_image(file_name)
        if path is None:
            self.add(src, record, "image file must exist", file_name)
            return
        size = self.image_size(path)
        if size is not None and (width, height) != size:
            self.add(src, record, f"image size (width, height) must match {self.rel(path)} {size}", (width, height))

    # -- COCO -------------------------------------------------------------------
    def coco(self, path: Path, *, reference: bool) -> dict | None:
        try:
            coco = orjson.loads(path.read_bytes())
        except OSError as e:
            self.add(path, "", "file must be readable", str(e))
            return None
        except orjson.JSONDecodeError as e:
            try:  # NaN, Infinity and overflowing numbers: read on, so the values get named
                coco = json.loads(path.read_bytes())
            except ValueError:
                self.add(path, f"line {e.lineno}, column {e.colno}", "file must be valid JSON", e.msg)
                return None
        broken_top = False
        for record, rule, value in structure_problems(coco):
            self.add(path, record, rule, value)
            broken_top |= record == "top level"
        if broken_top:
            return None
        images = [im for im in coco["images"] if isinstance(im, dict)]
        anns = [a for a in coco["annotations"] if isinstance(a, dict)]
        cats = [c for c in coco["categories"] if isinstance(c, dict)]
        self._unique_positive(path, "images", images)
        self._unique_positive(path, "annotations", anns)
        self._unique_positive(path, "categories", cats)
        names = Counter(c.get("name") for c in cats)
        for name, n in names.items():
            if n > 1:
                self.add(path, "categories", "category names must be unique", name)
        cat_ids = {c.get("id") for c in cats}
        files = Counter(im.get("file_name") for im in images)
        size_of = {}
        per_image: dict = {}
        for i, im in enumerate(images):
            record = f"images[{i}] (id {im.get('id')!r})"
            w, h = im.get("width"), im.get("height")
            if not (_is_int(w) and _is_int(h) and w > 0 and h > 0):
                self.add(path, record, "width and height must be positive whole numbers", (w, h))
                continue
            size_of[im.get("id")] = (w, h)
            fn = im.get("file_name")
            if not isinstance(fn, str):
                continue
            if not _inside(fn):
                self.add(path, record, "file_name must be a relative path inside the dataset", fn)
                continue
            if files[fn] > 1:
                self.add(path, record, "file_name must be unique", fn)
            self.check_image_file(path, record, fn, w, h)
        for i, a in enumerate(anns):
            record = f"annotations[{i}] (id {a.get('id')!r})"
            image_id = a.get("image_id")
            if image_id not in size_of:
                if _is_int(image_id):
                    self.add(path, record, "image_id must name an image", image_id)
                continue
            per_image.setdefault(image_id, []).append(a)
            if a.get("category_id") not in cat_ids and _is_int(a.get("category_id")):
                self.add(path, record, "category_id must name a category", a.get("category_id"))
            if "iscrowd" not in a:
                self.add(path, record, "must have 'iscrowd' (0 or 1)", "<missing>")
            w, h = size_of[image_id]
            bbox = a.get("bbox")
            if isinstance(bbox, list) and len(bbox) == 4 and all(_is_num(v) for v in bbox):
                self._coco_box(path, record, bbox, w, h)
            area = a.get("area")
            if _is_num(area) and not (math.isfinite(area) and area >= 0):
                self.add(path, record, "area must be finite and >= 0", area)
            seg = a.get("segmentation")
            if isinstance(seg, dict) and isinstance(seg.get("size"), list):
                if list(seg["size"]) != [h, w]:
                    self.add(path, record, f"RLE size must be the image's [height, width] [{h}, {w}]", seg["size"])
                else:
                    try:
                        rle.decode(seg)
                    except (ValueError, TypeError) as e:
                        self.add(path, record, "RLE segmentation must decode", str(e))
        if reference:  # several reference files (splits without a whole-dataset file) add up
            if self.ref_names is None:
                self.ref_names = [c.get("name") for c in sorted(cats, key=lambda c: _sort_key(c.get("id")))]
                self.ref_cat_names = {c.get("id"): c.get("name") for c in cats}
            if self.ref_objects is None:
                self.ref_objects = {}
            for im in images:
                fn = im.get("file_name")
                if isinstance(fn, str) and im.get("id") in size_of:
                    stem = Path(fn).with_suffix("").as_posix()
                    self.ref_anns[stem] = per_image.get(im["id"], [])
                    self.ref_objects[stem] = len(self.ref_anns[stem])
                    self.ref_files[stem] = fn
                    self.ref_sizes[stem] = size_of[im["id"]]
                    self.ref_ids[im["id"]] = stem
            total = self.counts.setdefault("coco", {"files": 0, "images": 0, "objects": 0, "ignored": 0})
            crowd = sum(a.get("iscrowd") == 1 for a in anns)
            total["files"] += 1
            total["images"] += len(images)
            total["objects"] += len(anns) - crowd
            total["ignored"] += crowd
        return coco

    def _unique_positive(self, path: Path, kind: str, records: list[dict]) -> None:
        seen = Counter(r.get("id") for r in records if _is_int(r.get("id")))
        for i, r in enumerate(records):
            v = r.get("id")
            if not _is_int(v):
                continue
            if v <= 0:
                self.add(path, f"{kind}[{i}]", "id must be a positive whole number", v)
            elif seen[v] > 1:
                self.add(path, f"{kind}[{i}] (id {v})", f"{kind} ids must be unique", v)

    def _coco_box(self, path: Path, record: str, bbox: list, width: int, height: int) -> None:
        x, y, w, h = (float(v) for v in bbox)
        if not all(math.isfinite(v) for v in (x, y, w, h)):
            self.add(path, record, "bbox must be finite", bbox)
        elif w <= 0 or h <= 0:
            self.add(path, record, "bbox must be non-empty (w > 0 and h > 0)", bbox)
        elif x < -_TOL or y < -_TOL or x + w > width + _TOL or y + h > height + _TOL:
            self.add(path, record, f"bbox must lie inside the image [0, {width}] x [0, {height}]", bbox)

    def coco_splits(self, main: dict | None, parts: dict[str, dict]) -> None:
        main_ids = {im.get("id"): im.get("file_name") for im in main["images"]} if main else None
        owner: dict[object, str] = {}
        first_name, (_, first) = next(iter(parts.items()))
        for name, (path, coco) in parts.items():
            if main is not None and coco["categories"] != main["categories"]:
                self.add(path, "categories", "must be the categories of annotations.json", coco["categories"])
            elif main is None and coco["categories"] != first["categories"]:
                self.add(path, "categories", f"must be the categories of {first_name}", coco["categories"])
            for i, im in enumerate(coco["images"]):
                key = im.get("file_name")
                if key in owner:
                    self.add(path, f"images[{i}] (id {im.get('id')!r})", f"image must be in one split only (also in {owner[key]})", key)
                owner[key] = name
                if main_ids is not None and main_ids.get(im.get("id")) != key:
                    self.add(path, f"images[{i}] (id {im.get('id')!r})", "image must appear in annotations.json with the same id", key)

    # -- manifest -----------------------------------------------------------------
    def manifest(self, path: Path) -> None:
        try:
            doc = orjson.loads(path.read_bytes())
        except orjson.JSONDecodeError as e:
            self.add(path, f"line {e.lineno}, column {e.colno}", "file must be valid JSON", e.msg)
            return
        files = doc.get("files") if isinstance(doc, dict) else None
        if not isinstance(files, dict):
            return  # not a synthgen manifest: nothing to compare
        for name, digest in sorted(files.items()):
            target = self.root / name
            if not target.is_file():
                self.add(path, f"files[{name!r}]", "listed file must exist", name)
                continue
            h = hashlib.sha256()
            with open(target, "rb") as f:
                for block in iter(lambda: f.read(1 << 20), b""):
                    h.update(block)
            if h.hexdigest() != digest:
                self.add(path, f"files[{name!r}]", f"file must match its sha256 digest {digest}", h.hexdigest())
        self.counts["manifest"] = {"files": len(files)}

    # -- object counts against the reference ------------------------------------------
    def compare(
        self, fmt: str, path: Path, stem: str, found: list, size: tuple[int, int] | None = None, *,
        record: str = "", tol: float = 0.5, what: str = "objects", crowd: bool = True,
    ) -> None:
        """Hold one image's objects in a format against the reference annotations.

        ``found`` lists the format's objects as ``(where, category name, xyxy
        box in pixels or None)``; ``crowd`` says whether the format holds the
        ignore regions (``iscrowd`` 1) too.  A count that differs from the
        reference is one problem naming the image and the objects on either side.
        """
        if self.ref_objects is None:
            return
        if stem not in self.ref_objects:
            self.add(path, record, "must belong to an image of annotations.json", stem)
            return
        anns = self.ref_anns[stem]
        ref = anns if crowd else [a for a in anns if a.get("iscrowd", 0) != 1]
        n = len(found)
        if n != len(ref):
            missing, extra = _unmatched([self._ref_object(a) for a in ref], found, tol)
            detail = []
            if missing:
                detail.append(f"not found: annotation id {_listing(missing)}")
            if extra:
                detail.append(f"not in annotations.json: {_listing(extra)}")
            without = "" if crowd else " without ignore regions"
            self.add(
                path, record,
                f"must hold as many {what} as annotations.json{without} gives image {self.ref_files[stem]} ({len(ref)})"
                + "".join(f"; {d}" for d in detail),
                n,
            )
            self.mismatched.add(fmt)
        if size is not None and size != self.ref_sizes[stem]:
            self.add(path, "size", f"must be the image size in annotations.json {self.ref_sizes[stem]}", size)

    def _ref_object(self, ann: dict) -> tuple:
        """(annotation id, category name, xyxy box or None) of a reference annotation."""
        bbox = ann.get("bbox")
        box = None
        if isinstance(bbox, list) and len(bbox) == 4 and all(_is_num(v) for v in bbox):
            box = (bbox[0], bbox[1], bbox[0] + bbox[2], bbox[1] + bbox[3])
        return ann.get("id"), self.ref_cat_names.get(ann.get("category_id")), box

    def compare_total(self, fmt: str, where: Path) -> None:
        """A format whose object total differs from the reference's, unexplained by any per-image problem."""
        if self.ref_objects is None or fmt in self.mismatched or fmt not in self.counts:
            return
        want = sum(self.ref_objects.values())
        plain = sum(1 for anns in self.ref_anns.values() for a in anns if a.get("iscrowd", 0) != 1)
        got = self.counts[fmt]["objects"]
        if got not in (want, plain):
            self.add(where, "", f"must hold as many objects in all as the images of annotations.json ({want})", got)

    def missing(self, fmt: str, seen: set[str], where: str) -> None:
        if self.ref_objects is None:
            return
        for stem in sorted(set(self.ref_objects) - seen):
            self.add(where.format(stem=stem), "", f"{fmt} file must exist for every image", "<missing>")

    # -- VOC ---------------------------------------------------------------------
    def voc(self, d: Path) -> None:
        files = sorted(p for p in d.rglob("*.xml") if "ImageSets" not in p.relative_to(d).parts)
        seen, n_obj = set(), 0
        names_allowed = set(self.ref_names) if self.ref_names is not None else None
        for p in files:
            stem = p.relative_to(d).with_suffix("").as_posix()
            seen.add(stem)
            try:
                doc = voc_fmt.read_voc(p)
            except InputFileError as e:
                self.add_error(e)
                continue
            w, h = doc["width"], doc["height"]
            n = len(doc["names"])
            n_obj += n
            img = self.find_image(doc["filename"]) if _inside(doc["filename"]) else None
            if img is None:
                self.add(p, "filename", "image file must exist", doc["filename"])
            else:
                size = self.image_size(img)
                if size is not None and size != (w, h):
                    self.add(p, "size", f"must match the image {self.rel(img)} {size}", (w, h))
            voc = voc_fmt.voc_box_from_pixel_box(doc["boxes"]) if n else np.zeros((0, 4), np.int64)
            raw = doc["boxes"].copy()
            raw[:, :2] += 1  # back to the file's 1-based values
            for i in range(n):
                record = f"object[{i}]"
                xmin, ymin, xmax, ymax = raw[i].tolist()
                if names_allowed is not None and doc["names"][i] not in names_allowed:
                    self.add(p, record, "name must be a category of annotations.json", doc["names"][i])
                if not np.array_equal(raw[i], voc[i]):
                    self.add(p, f"{record} bndbox", "coordinates must be whole pixel indices", raw[i].tolist())
                if xmin > xmax or ymin > ymax:
                    self.add(p, f"{record} bndbox", "box must be non-empty (xmin <= xmax, ymin <= ymax)", raw[i].tolist())
                elif xmin < 1 or ymin < 1 or xmax > w or ymax > h:
                    self.add(p, f"{record} bndbox", f"box must lie inside the image [1, {w}] x [1, {h}]", raw[i].tolist())
            found = [(f"object[{i}]", doc["names"][i], tuple(doc["boxes"][i].tolist())) for i in range(n)]
            self.compare("voc", p, stem, found, (w, h), tol=1.0)
        self.missing("voc", seen, self.rel(d) + "/{stem}.xml")
        self.counts["voc"] = {"files": len(files), "images": len(files), "objects": n_obj}
        self.compare_total("voc", d)

    # -- YOLO ---------------------------------------------------------------------
    def yolo(self, d: Path) -> None:
        places = [d / yolo_fmt.LABELS_FILE, d / "classes.txt", self.root / "classes.txt"]
        places += [self.root / n for n in _DATA_YAML]
        labels_path = next((p for p in places if p.is_file()), None)
        labels = None
        if labels_path is None:
            self.add(
                d / yolo_fmt.LABELS_FILE, "", f"class-name file must exist (or classes.txt, or {_DATA_YAML[0]})",
                "<missing>",
            )
        else:
            try:
                if labels_path.suffix in (".yaml", ".yml"):
                    labels = yolo_fmt.read_data_yaml(labels_path)
                else:
                    labels = yolo_fmt.read_labels(labels_path)
            except InputFileError as e:
                self.add_error(e)
            if labels is not None and self.ref_names is not None and labels != self.ref_names:
                self.add(labels_path, "", f"must list the categories of annotations.json by id {self.ref_names}", labels)
        skip = {labels_path}
        files = sorted(
            p for p in d.rglob("*.txt") if p not in skip and p.relative_to(d).parts[0] != "splits"
        )
        seen, n_obj = set(), 0
        for p in files:
            stem = p.relative_to(d).with_suffix("").as_posix()
            seen.add(stem)
            try:
                classes, boxes, lines, bad = yolo_fmt.parse_yolo(p)
            except InputFileError as e:
                self.add_error(e)
                continue
            for e in bad:  # every bad line on its own; the good ones are still checked
                self.add_error(e)
            n_obj += classes.size
            if self.find_image_by_stem(stem) is None and self.find_image(stem) is None:
                self.add(p, "", "image file must exist (same base name in images/)", stem)
            names = labels if labels is not None else self.ref_names
            for i in range(classes.size):
                record = f"line {lines[i]}"
                c = int(classes[i])
                xc, yc, w, h = boxes[i].tolist()
                if labels is not None and not 0 <= c < len(labels):
                    self.add(p, record, f"class must be in [0, {len(labels) - 1}] ({labels_path.name})", c)
                if w <= 0 or h <= 0:
                    self.add(p, record, "box must be non-empty (w > 0 and h > 0)", boxes[i].tolist())
                elif xc - w / 2 < -_TOL or yc - h / 2 < -_TOL or xc + w / 2 > 1 + _TOL or yc + h / 2 > 1 + _TOL:
                    self.add(p, record, "box must lie inside the image (normalized [0, 1])", boxes[i].tolist())
            if stem in self.ref_sizes:
                pixels = yolo_fmt.denormalize_boxes(boxes, *self.ref_sizes[stem])
                found = [
                    (f"line {lines[i]}", _name(names, int(classes[i])), tuple(pixels[i].tolist()))
                    for i in range(classes.size)
                ]
            else:
                found = [(f"line {n}", None, None) for n in lines]
            self.compare("yolo", p, stem, found, crowd=False)
        self.missing("yolo", seen, self.rel(d) + "/{stem}.txt")
        self.counts["yolo"] = {"files": len(files), "images": len(files), "objects": n_obj}
        self.compare_total("yolo", d)

    # -- tokens --------------------------------------------------------------------
    def tokens(self, path: Path, vocab_path: Path, *, reference: bool) -> None:
        if not vocab_path.is_file():
            self.add(vocab_path, "", "token vocabulary file must exist", "<missing>")
            return
        try:
            vocab = tokens_fmt.read_vocabulary(vocab_path)
            lines, bad = tokens_fmt.parse_tokens(path, vocab_path)
        except InputFileError as e:
            self.add_error(e)
            return
        if self.ref_names is not None:
            names = [c.get("name") for c in vocab["classes"]]
            if names != self.ref_names:
                self.add(vocab_path, "classes", "must be the categories of annotations.json by id", names)
        seen, n_obj = set(), 0
        for e in bad:  # every bad line on its own; its image is not reported missing as well
            self.add_error(e)
            stem = self.ref_ids.get(e.image_id) if _is_int(e.image_id) else None
            if stem is not None:
                seen.add(stem)
        n_bins = vocab["n_bins"]
        for line in lines:
            record = f"line {line['line_number']}"
            real = ~line["is_noise"]
            n_obj += int(real.sum())
            stem = self.ref_ids.get(line.get("image_id"))
            if self.ref_objects is not None and stem is None:
                self.add(path, record, "image_id must name an image of annotations.json", line.get("image_id"))
                continue
            if stem is None:
                continue
            if stem in seen:
                self.add(path, record, "each image must have one line", line.get("image_id"))
            seen.add(stem)
            width, height = line["width"], line["height"]
            names = [self.ref_cat_names.get(c) for c in line["category_ids"][real].tolist()]
            found = [(f"object {j}", names[j], tuple(b)) for j, b in enumerate(line["boxes"][real].tolist())]
            # a dequantized coordinate is within half a bin of the true one
            self.compare("tokens", path, stem, found, record=record, tol=max(width, height) / n_bins, crowd=False)
            if (width, height) != self.ref_sizes[stem]:
                self.add(path, record, f"width, height must match annotations.json {self.ref_sizes[stem]}", (width, height))
        if reference:
            self.missing("tokens", seen, self.rel(path) + " (image {stem})")
            self.counts["tokens"] = {"files": 1, "images": len(lines) + len(bad), "objects": n_obj}
            self.compare_total("tokens", path)

    # -- masks ---------------------------------------------------------------------
    def masks_png(self, d: Path) -> None:
        files = sorted(d.rglob("*.png"))
        seen, n_obj = set(), 0
        for p in files:
            stem = p.relative_to(d).with_suffix("").as_posix()
            seen.add(stem)
            try:
                ids = masks_fmt.read_instance_png(p)
            except InputFileError as e:
                self.add_error(e)
                continue
            numbered = ids[ids != masks_fmt.IGNORE_ID]
            n_obj += int(np.count_nonzero(np.bincount(numbered)[1:])) if numbered.size else 0
            if self.ref_objects is None or stem not in self.ref_objects:
                self.compare("masks", p, stem, [])
                continue
            h, w = ids.shape
            if (w, h) != self.ref_sizes[stem]:
                self.add(p, "", f"mask size (width, height) must match annotations.json {self.ref_sizes[stem]}", (w, h))
                continue
            anns = self.ref_anns[stem]
            n_plain = sum(a.get("iscrowd", 0) != 1 for a in anns)
            top = int(numbered.max()) if numbered.size else 0
            if top > n_plain:
                self.add(p, "", f"instance ids must be at most the image's object count ({n_plain})", top)
                continue
            if n_plain == len(anns) and numbered.size < ids.size:
                self.add(p, "", f"ignore value {masks_fmt.IGNORE_ID} must mark ignore regions of annotations.json "
                         "(this image has none)", masks_fmt.IGNORE_ID)
            lost = masks_fmt.lost_annotations(anns, ids)
            if lost:
                plain = [a for a in anns if a.get("iscrowd", 0) != 1]
                self.add(
                    p, "",
                    f"every object of image {self.ref_files[stem]} with segmentation pixels must keep one "
                    "(unless each is another annotation's only pixel); none for annotation id "
                    + _listing([plain[i - 1].get("id") for i in lost]),
                    [f"id {i}" for i in lost] if len(lost) <= 5 else len(lost),
                )
                self.mismatched.add("masks")
        self.missing("masks", seen, self.rel(d) + "/{stem}.png")
        # objects = instances with at least one pixel (one drawn over entirely has none); ignore regions not counted
        self.counts["masks"] = {"files": len(files), "images": len(files), "objects": n_obj}

    def masks_rle(self, path: Path) -> None:
        try:
            lines = masks_fmt.read_mask_rles(path)
        except InputFileError as e:
            self.add_error(e)
            return
        n_obj = 0
        for i, line in enumerate(lines):
            n_obj += len(line["masks"])
            stem = self.ref_ids.get(line.get("image_id"))
            if stem is None:
                continue
            by_id = {a.get("id"): a for a in self.ref_anns[stem]}
            found = [
                (f"masks[{j}]", self.ref_cat_names.get(by_id.get(m.get("id"), {}).get("category_id")),
                 _id_box(by_id.get(m.get("id"))))
                for j, m in enumerate(line["masks"])
            ]
            self.compare("masks", path, stem, found, record=f"line {i + 1}", what="masks")
            for m in line["decoded"]:
                if (m.shape[1], m.shape[0]) != self.ref_sizes[stem]:
                    self.add(path, f"line {i + 1}", f"mask size must match annotations.json {self.ref_sizes[stem]}", m.shape)
                    break
        self.counts["masks"] = {"files": 1, "images": len(lines), "objects": n_obj}
        self.compare_total("masks", path)


def _id_box(ann: dict | None) -> tuple | None:
    """The xyxy box of a reference annotation an RLE mask names by id (None when it names none)."""
    if ann is None:
        return None
    x, y, w, h = ann["bbox"]
    return (x, y, x + w, y + h)


def _name(names: list | None, index: int):
    return names[index] if names is not None and 0 <= index < len(names) else None


def _listing(items: list, limit: int = 8) -> str:
    """``"3, 7, 9"``, or the first ``limit`` and how many more.

    >>> _listing([1, 2, 3]), _listing(list(range(10)), limit=2)
    ('1, 2, 3', '0, 1 and 8 more')
    """
    shown = ", ".join(str(v) for v in items[:limit])
    return shown if len(items) <= limit else f"{shown} and {len(items) - limit} more"


def _unmatched(ref: list[tuple], found: list[tuple], tol: float) -> tuple[list, list]:
    """Pair a format's objects with reference annotations; return what stays unpaired on each side.

    Parameters
    ----------
    ref : list of (annotation id, category name, xyxy box or None)
    found : list of (where, category name, xyxy box or None)
    tol : float
        Largest coordinate difference, in pixels, of a pair matched by box.

    Returns
    -------
    missing : list
        Annotation ids no object of the format stands for.
    extra : list
        ``where`` of the format's objects no annotation stands for.

    Objects pair first by category and box (nearest within ``tol``), then the
    rest by category alone, then by nothing.

    Examples
    --------
    >>> ref = [(1, "ring", (0, 0, 4, 4)), (2, "ring", (5, 5, 9, 9)), (3, "star", (1, 1, 2, 2))]
    >>> _unmatched(ref, [("line 1", "ring", (5, 5, 9, 9)), ("line 2", "cross", (0, 0, 1, 1))], 0.5)
    ([1, 3], ['line 2'])
    """
    left = list(range(len(ref)))
    pending = []
    for j, (_, label, box) in enumerate(found):
        best, best_d = None, tol
        if box is not None:
            for i in left:
                if ref[i][1] == label and ref[i][2] is not None:
                    d = max(abs(a - b) for a, b in zip(ref[i][2], box))
                    if d <= best_d:
                        best, best_d = i, d
        if best is None:
            pending.append(j)
        else:
            left.remove(best)
    extra = []
    for j in pending:
        i = next((i for i in left if ref[i][1] == found[j][1]), None)
        if i is None:
            extra.append(found[j][0])
        else:
            left.remove(i)
    return [ref[i][0] for i in left], extra


def _sort_key(v):
    return (0, v) if _is_int(v) else (1, 0)


def _usable_coco_file(path: Path) -> None:
    """Raise InputFileError unless ``path`` parses as JSON holding an object (a file given alone
    that is not even that leaves nothing to check)."""
    raw = read_input(path)
    try:
        doc = orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        try:  # NaN, Infinity and overflowing numbers are for the checker to name
            doc = json.loads(raw)
        except ValueError:
            raise bad_record(path, f"line {e.lineno}, column {e.colno}", "must be valid JSON", e.msg) from None
    if not isinstance(doc, dict):
        raise bad_record(path, "top level", "must be a COCO JSON object", type(doc).__name__)


def check_dataset(path, *, decode_images: bool = True) -> CheckReport:
    """Check a dataset directory (or a COCO JSON file) against every rule above.

    Parameters
    ----------
    path : str or Path
        Dataset directory, or a COCO JSON file (images looked up beside it and
        in its ``images/``).
    decode_images : bool
        Decode every image fully (True) or read only its header for the size.

    Returns
    -------
    CheckReport

    Raises
    ------
    synthgen.errors.InputFileError
        When ``path`` does not exist, holds no format this module knows, or is
        a file that is not JSON holding an object (unusable input).
    """
    path = Path(path)
    if not path.exists():
        raise InputFileError(path, "does not exist")
    if path.is_file():
        if path.suffix.lower() != ".json":
            raise InputFileError(path, "must be a dataset directory or a COCO .json file")
        _usable_coco_file(path)
        root, coco_files = path.parent, [path]
    else:
        root = path
        coco_files = []
        if (root / ANNOTATIONS).is_file():
            coco_files.append(root / ANNOTATIONS)
        coco_files += sorted(p for p in root.glob("annotations.*.json"))
        if (root / "annotations").is_dir():
            coco_files += sorted((root / "annotations").glob("*.json"))
    ck = _Checker(root, decode_images=decode_images)
    formats: list[str] = []
    if coco_files:
        formats.append("coco")
        # The whole-dataset file is the reference for the other formats; without
        # one (only split files, or annotations/*.json), all the files together are.
        whole = coco_files[0].name == ANNOTATIONS
        main = ck.coco(coco_files[0], reference=True) if whole else None
        parts = {}
        for p in coco_files[1:] if whole else coco_files:
            c = ck.coco(p, reference=not whole)
            if c is not None and (p.name.startswith("annotations.") or not whole):
                parts[p.name] = (p, c)
        if parts and (main is not None or len(parts) > 1):
            ck.coco_splits(main, parts)
    voc_dir = next((root / n for n in ("voc", "Annotations") if (root / n).is_dir()), None)
    if voc_dir is not None:
        formats.append("voc")
        ck.voc(voc_dir)
    yolo_dir = next((root / n for n in ("yolo", "labels") if (root / n).is_dir()), None)
    if yolo_dir is not None:
        formats.append("yolo")
        ck.yolo(yolo_dir)
    if (root / TOKENS).is_file():
        formats.append("tokens")
        vocab = root / TOKENS_VOCAB
        ck.tokens(root / TOKENS, vocab, reference=True)
        for p in sorted(root.glob("tokens.*.jsonl")):
            ck.tokens(p, vocab, reference=False)
    if (root / "masks").is_dir():
        formats.append("masks")
        ck.masks_png(root / "masks")
    elif (root / MASKS_RLE).is_file():
        formats.append("masks")
        ck.masks_rle(root / MASKS_RLE)
    if formats and path.is_dir() and (root / MANIFEST).is_file():
        ck.manifest(root / MANIFEST)
    if not formats:
        raise InputFileError(
            path, "holds no dataset format synthgen knows (annotations.json, voc/, yolo/, tokens.jsonl, masks/)"
        )
    return CheckReport(str(path), tuple(formats), ck.counts, tuple(ck.problems))
