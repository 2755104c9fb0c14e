"""The output formats, one entry each: name, the entries of a dataset directory it owns, its writer,
its check rule.

Adding a format is one :class:`Format` entry in :data:`REGISTRY` plus its own module
(the writer from a COCO dict, the reader, the check rule) and tests; ``make --formats``,
``export``, ``--overwrite`` (which removes what the formats own), ``synthgen check``
and the list of accepted names follow from the table.  A writer gets a
:class:`~synthgen.formats._common.WriteJob` and returns the number of images written;
directories are built under a temporary name and swapped in whole, single files
written to a temporary file and renamed (:mod:`synthgen._io`).
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import orjson

from synthgen._io import staged_dir, staged_file
from synthgen.formats import masks as masks_fmt
from synthgen.formats import tokens as tokens_fmt
from synthgen.formats import voc as voc_fmt
from synthgen.formats import yolo as yolo_fmt
from synthgen.formats._common import WriteJob, write_lines
from synthgen.formats.check_context import CheckContext
from synthgen.formats.coco import check_coco, write_coco
from synthgen.formats.dataset_dir import (
    ANNOTATIONS,
    MASKS_DIR,
    MASKS_RLE,
    TOKENS,
    TOKENS_VOCAB,
    VOC_DIR,
    YOLO_DIR,
    split_tokens_name,
)

__all__ = ["Format", "WriteJob", "REGISTRY", "FORMATS", "owned_entries"]


@dataclass(frozen=True, slots=True)
class Format:
    """One output format.

    Attributes
    ----------
    name : str
        The name ``--formats`` takes.
    owns : tuple of str
        Entries (glob patterns) at the top of a dataset directory that this format writes.
    write : callable
        ``write(job: WriteJob) -> int``, images written.
    check : callable
        ``check(ctx: CheckContext) -> bool``: look for the format in ``ctx.root``
        (whoever wrote it), add each broken rule to ``ctx`` and return whether
        the format was there (:mod:`synthgen.formats.check`).
    looked_for : str
        Where the check rule looks first, as ``synthgen check`` names it when it finds no format.
    """

    name: str
    owns: tuple[str, ...]
    write: Callable[[WriteJob], int]
    check: Callable[[CheckContext], bool]
    looked_for: str


def _write_coco(job: WriteJob) -> int:
    write_coco(job.out / ANNOTATIONS, job.coco)
    return len(job.coco["images"])


def _write_voc(job: WriteJob) -> int:
    with staged_dir(job.out / VOC_DIR) as tmp:
        n = voc_fmt.write_voc(job.coco, tmp)
        for name, names in job.stems.items():
            write_lines(tmp / "ImageSets" / "Main" / f"{name}.txt", names)
    return n


def _write_yolo(job: WriteJob) -> int:
    with staged_dir(job.out / YOLO_DIR) as tmp:
        n = yolo_fmt.write_yolo(job.coco, tmp)
        for name, part in job.parts.items():
            paths = [Path(os.path.relpath(job.images_dir / im["file_name"], job.out)).as_posix() for im in part["images"]]
            write_lines(tmp / "splits" / f"{name}.txt", paths)
    return n


def _write_tokens(job: WriteJob) -> int:
    with staged_file(job.out / TOKENS) as tmp, staged_file(job.out / TOKENS_VOCAB) as vtmp:
        n = tokens_fmt.write_tokens(
            job.coco, tmp, vtmp, n_bins=job.n_bins, order=job.order, seed=job.seed, noise=job.noise
        )
    if job.parts:
        # Reuse the lines just written, so each split file holds the same bytes.
        raw = (job.out / TOKENS).read_bytes().splitlines()
        lines = {orjson.loads(t)["image_id"]: t for t in raw if t.strip()}
        for name, part in job.parts.items():
            chosen = [lines[im["id"]] for im in part["images"]]
            with staged_file(job.out / split_tokens_name(name)) as tmp:
                tmp.write_bytes(b"\n".join(chosen) + (b"\n" if chosen else b""))
    return n


def _write_masks(job: WriteJob) -> int:
    if job.masks == "png":
        with staged_dir(job.out / MASKS_DIR) as tmp:
            return masks_fmt.write_instance_pngs(job.coco, tmp)
    with staged_file(job.out / MASKS_RLE) as tmp:
        return masks_fmt.write_mask_rles(job.coco, tmp)


#: Every output format, in the order they are written (and checked: COCO, the reference, first).
REGISTRY: dict[str, Format] = {
    f.name: f
    for f in (
        Format("coco", (ANNOTATIONS,), _write_coco, check_coco, ANNOTATIONS),
        Format("voc", (VOC_DIR,), _write_voc, voc_fmt.check_voc, f"{VOC_DIR}/"),
        Format("yolo", (YOLO_DIR,), _write_yolo, yolo_fmt.check_yolo, f"{YOLO_DIR}/"),
        Format("tokens", (TOKENS, TOKENS_VOCAB, split_tokens_name("*")), _write_tokens, tokens_fmt.check_tokens, TOKENS),
        Format("masks", (MASKS_DIR, MASKS_RLE), _write_masks, masks_fmt.check_masks, f"{MASKS_DIR}/"),
    )
}

#: The names ``--formats`` accepts.
FORMATS = tuple(REGISTRY)


def owned_entries() -> tuple[str, ...]:
    """Every top-level entry (glob pattern) a format writes, in registry order.

    Examples
    --------
    >>> owned_entries()[:3]
    ('annotations.json', 'voc', 'yolo')
    """
    return tuple(p for f in REGISTRY.values() for p in f.owns)
