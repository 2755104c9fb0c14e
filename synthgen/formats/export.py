"""Write further formats (and splits) from a COCO dict, without re-rendering.

Every writer works from the COCO dict (and, for masks, nothing else: the
segmentations are in it), so ``make`` and ``export`` share this one path.

Output layout under the output directory ``OUT`` (``DIR`` for export in place)::

    OUT/images/<file_name>                  export to another OUT: hard links to DIR's images (or copies)
    OUT/annotations.json                    coco (export always writes it when OUT is not DIR)
    OUT/voc/<stem>.xml                      voc
    OUT/yolo/<stem>.txt, OUT/yolo/labels.txt  yolo
    OUT/tokens.jsonl, OUT/tokens.vocab.json tokens
    OUT/masks/<stem>.png                    masks (mode "png"), or OUT/masks.jsonl (mode "rle")

plus, with splits, the files listed in :mod:`synthgen.formats.splits`.  Each
directory is built under a temporary name and renamed when complete; single
files are written to a temporary file and renamed.
"""

from __future__ import annotations

import filecmp
import os
import shutil
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path

import orjson

from synthgen._io import staged_file, write_atomic
from synthgen.errors import ConfigError, InputFileError, UserError, check_choice, is_int
from synthgen.formats import masks as masks_fmt
from synthgen.formats import tokens as tokens_fmt
from synthgen.formats._common import WriteJob, bad_record, inside_dataset, sidecar_name
from synthgen.formats.coco import read_coco, write_coco
from synthgen.formats.dataset_dir import (
    ANNOTATIONS,
    IMAGES_DIR,
    MANIFEST,
    SPLITS,
)
from synthgen.formats.registry import FORMATS, REGISTRY
from synthgen.formats.splits import assign_splits, coco_split_name, split_coco

__all__ = ["FORMATS", "parse_formats", "write_formats", "export"]


def parse_formats(text: str | Iterable[str], *, key: str = "--formats") -> tuple[str, ...]:
    """Format names from ``"coco,voc,yolo"`` (or a sequence), validated, duplicates dropped.

    Examples
    --------
    >>> parse_formats("voc, yolo,voc")
    ('voc', 'yolo')
    """
    parts = text.split(",") if isinstance(text, str) else list(text)
    out = []
    for p in (str(p).strip() for p in parts):
        if not p:
            continue
        check_choice(key, p, FORMATS)
        if p not in out:
            out.append(p)
    if not out:
        raise ConfigError(key, f"must name at least one of {', '.join(FORMATS)}", text)
    return tuple(out)


def write_formats(
    coco: dict,
    out,
    formats: Iterable[str],
    *,
    images_dir=None,
    split: Mapping[str, float] | None = None,
    seed: int = 0,
    n_bins: int = 1000,
    order: str = "random",
    noise: Mapping[int, object] | Callable | None = None,
    masks: str = "png",
) -> dict[str, int]:
    """Write the given formats of ``coco`` into ``out``.

    Parameters
    ----------
    coco : dict
        COCO dict of the whole dataset.
    out : str or Path
        Output directory (created when missing).
    formats : iterable of str
        Any of ``FORMATS`` (may be empty, to write only splits); ``"coco"``
        writes ``out/annotations.json``.
    images_dir : str or Path, optional
        Folder holding the images (default ``out/images``); YOLO split lists
        give image paths relative to ``out`` through it.
    split : mapping, optional
        Split name -> fraction (adding up to 1).  Writes per-split files (see
        :mod:`synthgen.formats.splits`) for COCO and each listed format.
    seed : int
        The dataset's root seed (split assignment, random token order).
    n_bins, order : int, str
        Token options (see :mod:`synthgen.formats.tokens`).
    noise : mapping or callable, optional
        Training noise objects for the tokens (see
        :func:`synthgen.formats.tokens.write_tokens`).
    masks : {"png", "rle"}
        Instance-mask mode (see :mod:`synthgen.formats.masks`).

    Returns
    -------
    dict
        Format (or ``"split:<name>"``) -> number of images written.
    """
    formats = parse_formats(list(formats)) if formats else ()
    _check_options(coco, formats, n_bins, order, masks)
    out = _output_dir(out)
    images_dir = Path(images_dir) if images_dir is not None else out / IMAGES_DIR
    labels = assign_splits(len(coco["images"]), dict(split), seed=seed) if split else None
    parts = split_coco(coco, labels, names=list(split)) if split else {}
    stems = {name: [sidecar_name(im["file_name"], "") for im in part["images"]] for name, part in parts.items()}
    done: dict[str, int] = {}

    job = WriteJob(coco, out, images_dir, parts, stems, seed, n_bins, order, noise, masks)
    for name, fmt in REGISTRY.items():
        if name in formats:
            done[name] = fmt.write(job)
    for name, part in parts.items():
        write_coco(out / coco_split_name(name), part)
        done[f"split:{name}"] = len(part["images"])
    if parts:
        doc = {
            "seed": seed,
            "fractions": dict(split),
            "splits": {name: [im["file_name"] for im in part["images"]] for name, part in parts.items()},
        }
        write_atomic(out / SPLITS, orjson.dumps(doc, option=orjson.OPT_INDENT_2))
    return done


def _check_options(coco: dict, formats, n_bins: int, order: str, masks: str) -> None:
    """Raise, before anything is written, for options the writers would refuse."""
    check_choice("masks", masks, masks_fmt.MASK_MODES)
    if "tokens" in formats:
        tokens_fmt.check_token_options(n_bins, order)
    if "masks" in formats and masks == "png":
        _check_png_ids(coco)


def _output_dir(out) -> Path:
    """Make the output directory (and its parents); a path that is or lies under a file is an InputFileError."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputFileError(out, "cannot be written: it is a file, not a directory")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputFileError(out, f"cannot be created ({e.strerror or e})") from None
    return out


def _check_png_ids(coco: dict) -> None:
    """Refuse, before writing anything, an image with more objects than a uint16 id PNG can number."""
    counts: dict = {}
    for a in coco["annotations"]:
        if a.get("iscrowd", 0) != 1:  # ignore regions share one value
            counts[a["image_id"]] = counts.get(a["image_id"], 0) + 1
    worst = max(counts.items(), key=lambda kv: kv[1], default=(None, 0))
    if worst[1] > masks_fmt.MAX_IDS:
        raise UserError(
            f"masks as instance-id PNGs hold at most {masks_fmt.MAX_IDS} objects per image "
            f"(got {worst[1]} in image id {worst[0]}); write them as per-object RLE instead (--masks rle)"
        )


def _check_input(coco: dict, path: Path, formats) -> None:
    """What the writers rely on and other tools' files may break: image file names inside the
    dataset, RLE segmentations of their image's size, and (for masks) a segmentation on every
    annotation.  Checked before anything is written."""
    for i, im in enumerate(coco["images"]):
        if not inside_dataset(im["file_name"]):
            raise bad_record(
                path, f"images[{i}] (id {im['id']})", "'file_name' must be a relative path inside the dataset",
                im["file_name"],
            )
    size_of = {im["id"]: [im["height"], im["width"]] for im in coco["images"]}
    for i, a in enumerate(coco["annotations"]):
        seg = a.get("segmentation")
        want = size_of.get(a["image_id"])
        if isinstance(seg, dict) and want is not None and list(seg["size"]) != want:
            raise bad_record(
                path, f"annotations[{i}] (id {a['id']})", f"RLE 'size' must be its image's [height, width] {want}", seg["size"]
            )
        if "masks" in formats and not (isinstance(seg, dict) or (isinstance(seg, list) and seg)):
            raise bad_record(
                path, f"annotations[{i}] (id {a['id']})", "must have a 'segmentation' (polygons or RLE) to write masks",
                "<missing>" if seg is None else seg,
            )


def _manifest_seed(dataset_dir: Path) -> int | None:
    path = dataset_dir / MANIFEST
    if not path.is_file():
        return None
    try:
        seed = orjson.loads(path.read_bytes()).get("seed")
    except (orjson.JSONDecodeError, AttributeError):
        raise InputFileError(path, "is not a valid manifest (JSON object)") from None
    return seed if is_int(seed) else None


def dataset_seed(dataset_dir) -> int:
    """The root seed recorded in ``dataset_dir/manifest.json`` (0 when there is none)."""
    return _manifest_seed(Path(dataset_dir)) or 0


def export(
    dataset_dir,
    formats: Iterable[str],
    *,
    out=None,
    split: Mapping[str, float] | None = None,
    seed: int | None = None,
    n_bins: int = 1000,
    order: str = "random",
    noise: Mapping[int, object] | Callable | None = None,
    masks: str = "png",
) -> dict[str, int]:
    """Write formats of an existing dataset from its ``annotations.json``.

    Parameters
    ----------
    dataset_dir : str or Path
        A dataset directory holding ``annotations.json`` and ``images/``.
    formats : iterable of str
        Any of ``FORMATS``.
    out : str or Path, optional
        Output directory (default: ``dataset_dir`` itself).  Another directory
        becomes a dataset of its own: ``out/images/`` gets every image (hard
        links where the file system allows, so no space is spent and editing
        one edits both; copies otherwise), ``out/annotations.json`` the COCO
        file, then the formats asked for.  An image already there with the same
        bytes is kept; one with other bytes is refused before anything is written.
    seed : int, optional
        Root seed for splits and random token order; default the ``seed`` of
        ``dataset_dir/manifest.json``, else 0.
    split, n_bins, order, noise, masks
        As for :func:`write_formats`.

    Returns
    -------
    dict
        Format -> number of images written (``"images"``: images linked or
        copied into another ``out``).

    Raises
    ------
    synthgen.errors.InputFileError
        When ``dataset_dir`` has no readable ``annotations.json``, misses an
        image, or ``out`` holds a different file where an image goes.
    """
    dataset_dir = Path(dataset_dir)
    if not dataset_dir.is_dir():
        raise InputFileError(dataset_dir, "is not a directory")
    coco = read_coco(dataset_dir / ANNOTATIONS)
    if seed is None:
        seed = dataset_seed(dataset_dir)
    out = Path(out) if out is not None else dataset_dir
    formats = list(formats)
    formats = parse_formats(formats) if formats or not split else ()  # splits alone are fine
    _check_input(coco, dataset_dir / ANNOTATIONS, formats)
    in_place = out.resolve() == dataset_dir.resolve()
    done: dict[str, int] = {}
    if in_place:
        formats = tuple(f for f in formats if f != "coco")  # already there
    else:
        # A folder of its own is a whole dataset: its images and its COCO file, then the formats.
        links = _image_links(coco, dataset_dir, out)
        _check_options(coco, formats, n_bins, order, masks)  # refused before any image is linked
        _output_dir(out)
        done["images"] = _link_images(links)
        formats = ("coco", *(f for f in formats if f != "coco"))
    done.update(write_formats(
        coco,
        out,
        formats,
        images_dir=dataset_dir / IMAGES_DIR if in_place else out / IMAGES_DIR,
        split=split,
        seed=seed,
        n_bins=n_bins,
        order=order,
        noise=noise,
        masks=masks,
    ))
    return done


def _image_links(coco: dict, dataset_dir: Path, out: Path) -> list[tuple[Path, Path]]:
    """(source, target) of every image to link into ``out/images``, checked before anything is written.

    A source is ``images/<file_name>`` of the dataset (or ``<file_name>`` beside
    its annotations.json); a target that already holds the same bytes is left
    alone, one that holds other bytes is refused.
    """
    links = []
    for im in coco["images"]:
        name = im["file_name"]
        src = next((p for p in (dataset_dir / IMAGES_DIR / name, dataset_dir / name) if p.is_file()), None)
        if src is None:
            raise InputFileError(dataset_dir / IMAGES_DIR / name, "does not exist (export --out takes every image along)")
        dst = out / IMAGES_DIR / name
        if dst.exists():
            if dst.is_file() and (os.path.samefile(src, dst) or filecmp.cmp(src, dst, shallow=False)):
                continue
            raise InputFileError(
                dst, f"already exists and is not the image {src} it would become; remove it or choose another --out"
            )
        links.append((src, dst))
    return links


def _link_images(links: list[tuple[Path, Path]]) -> int:
    """Hard-link each source to its target, copying where the file system cannot link; returns the count."""
    for src, dst in links:
        dst.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.link(src, dst)
        except OSError:  # another file system, or links not allowed: copy through a temporary name
            with staged_file(dst) as tmp:
                shutil.copyfile(src, tmp)
    return len(links)
