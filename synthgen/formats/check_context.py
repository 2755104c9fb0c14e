"""What every format's check rule shares: the problems found so far, image lookup, and the reference.

:func:`synthgen.formats.check.check_dataset` makes one :class:`CheckContext` per
dataset directory and hands it to each format's check rule (the ``check`` field
of its :mod:`synthgen.formats.registry` entry), in registry order.  The COCO rule
runs first and fills the reference (per image: its annotations, size, file name;
the category names by id) that the other formats are held against with
:meth:`CheckContext.compare`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

from synthgen.errors import InputFileError
from synthgen.errors import is_int as _is_int
from synthgen.errors import is_number as _is_num
from synthgen.formats.dataset_dir import IMAGES_DIR

__all__ = ["Problem", "CheckContext", "listing", "name_at"]

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



class CheckContext:
    """One dataset directory being checked: problems, counts per format, image lookup, the reference."""

    def __init__(self, root: Path, *, decode_images: bool, given: Path | None = None):
        self.root = root
        self.given = given  # a COCO file given instead of a directory (root is then its folder)
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
        return [self.root / IMAGES_DIR, self.root / "JPEGImages", self.root]

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

    def read_each(self, d: Path, files: list[Path], read: Callable, seen: set[str]) -> Iterator[tuple[Path, str, object]]:
        """``(file, stem, read(file))`` for each of a format's files under ``d``.

        Each file's stem (its path below ``d`` without suffix) goes into ``seen``;
        a file ``read`` cannot read (:class:`InputFileError`) is a problem and skipped.
        """
        for p in files:
            stem = p.relative_to(d).with_suffix("").as_posix()
            seen.add(stem)
            try:
                doc = read(p)
            except InputFileError as e:
                self.add_error(e)
                continue
            yield p, stem, doc

    def image_size(self, path: Path) -> tuple[int, int] | None:
        """(W, H) of an image file, or None (with a problem) when it does not decode."""
        from PIL import Image

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

    def image_file_problems(self, record: str, file_name: str, width, height):
        """``(record, rule, value)`` of an image record whose file is missing or has another size."""
        path = self.find_image(file_name)
        if path is None:
            yield record, "image file must exist", file_name
            return
        size = self.image_size(path)
        if size is not None and (width, height) != size:
            yield record, f"image size (width, height) must match {self.rel(path)} {size}", (width, height)

    def take_reference(self, images: list[dict], categories: list[dict], per_image: dict, size_of: dict) -> None:
        """Add a COCO file's images (those with a usable size) and categories to the reference.

        Several reference files (splits without a whole-dataset file) add up; the
        categories come from the first.
        """
        if self.ref_names is None:
            self.ref_names = [c.get("name") for c in sorted(categories, key=lambda c: _sort_key(c.get("id")))]
            self.ref_cat_names = {c.get("id"): c.get("name") for c in categories}
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

    def count(self, fmt: str, files: int, images: int, objects: int) -> None:
        """Record what a format holds (for the summary and :meth:`compare_total`)."""
        self.counts[fmt] = {"files": files, "images": images, "objects": objects}

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
                detail.append(f"not found: annotation id {listing(missing)}")
            if extra:
                detail.append(f"not in annotations.json: {listing(extra)}")
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


def name_at(names: list | None, index: int):
    """``names[index]``, or None when there are no names or the index is outside them."""
    return names[index] if names is not None and 0 <= index < len(names) else None


def listing(items: list, limit: int = 8) -> str:
    """``"3, 7, 9"``, or the first ``limit`` and how many more.

    >>> listing([1, 2, 3]), listing(list(range(10)), limit=2)
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

