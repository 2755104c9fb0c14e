"""Validate a detection dataset directory in any of synthgen's formats.

:func:`check_dataset` looks for each format it knows (whoever wrote the files)
and reports every rule a file breaks as a :class:`Problem` (file, record,
rule, value), with a summary of what it found.  Each format's check rule
(the ``check`` of its :mod:`synthgen.formats.registry` entry) says in its
docstring where it looks, relative to the dataset directory ``DIR`` (or a COCO
file given directly): :func:`~synthgen.formats.coco.check_coco`,
:func:`~synthgen.formats.voc.check_voc`, :func:`~synthgen.formats.yolo.check_yolo`,
:func:`~synthgen.formats.tokens.check_tokens`, :func:`~synthgen.formats.masks.check_masks`.
Images are looked up in ``images/`` (or ``JPEGImages/`` for VOC, or beside the
COCO file).

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

This module is the driver: each format's rules live beside its writer and
reader, as the ``check`` of its :mod:`synthgen.formats.registry` entry, and
share one :class:`~synthgen.formats.check_context.CheckContext`; the COCO rules
are :func:`synthgen.formats.coco.coco_problems`.
"""


from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import orjson

from synthgen._io import read_input
from synthgen.errors import InputFileError, bad_record
from synthgen.formats.check_context import CheckContext, Problem
from synthgen.formats.coco import loads_lenient
from synthgen.formats.dataset_dir import MANIFEST
from synthgen.formats.registry import REGISTRY

__all__ = ["Problem", "CheckReport", "check_dataset"]


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


def _check_manifest(ctx: CheckContext, path: Path) -> None:
    try:
        doc = orjson.loads(path.read_bytes())
    except orjson.JSONDecodeError as e:
        ctx.add(path, f"line {e.lineno}, column {e.colno}", "file must be valid JSON", e.msg)
        return
    files = doc.get("files") if isinstance(doc, dict) else None
    if not isinstance(files, dict):
        return  # not a synthgen manifest: nothing to compare
    for name, digest in sorted(files.items()):
        target = ctx.root / name
        if not target.is_file():
            ctx.add(path, f"files[{name!r}]", "listed file must exist", name)
            continue
        h = hashlib.sha256()
        with open(target, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                h.update(block)
        if h.hexdigest() != digest:
            ctx.add(path, f"files[{name!r}]", f"file must match its sha256 digest {digest}", h.hexdigest())
    ctx.counts["manifest"] = {"files": len(files)}


def _usable_coco_file(path: Path) -> None:
    """Raise InputFileError unless ``path`` parses as JSON holding an object (a file given alone
    that is not even that leaves nothing to check)."""
    try:  # NaN, Infinity and overflowing numbers are for the COCO rules to name
        doc = loads_lenient(read_input(path))
    except orjson.JSONDecodeError as e:
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
    given = None
    if path.is_file():
        if path.suffix.lower() != ".json":
            raise InputFileError(path, "must be a dataset directory or a COCO .json file")
        _usable_coco_file(path)
        given = path
    ctx = CheckContext(path.parent if given else path, decode_images=decode_images, given=given)
    formats = [f.name for f in REGISTRY.values() if f.check(ctx)]
    if formats and given is None and (path / MANIFEST).is_file():
        _check_manifest(ctx, path / MANIFEST)
    if not formats:
        looked = ", ".join(f.looked_for for f in REGISTRY.values())
        raise InputFileError(path, f"holds no dataset format synthgen knows ({looked})")
    return CheckReport(str(path), tuple(formats), ctx.counts, tuple(ctx.problems))
