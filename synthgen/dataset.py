"""Many images: render in workers, keep order, write images, COCO JSON and the manifest.

Output directory::

    DIR/images/000000.png ...    one file per image (name = 0-based index)
    DIR/annotations.json         COCO JSON; per-object facts under "synthgen"
    DIR/manifest.json            resolved config, seed, versions, counts, sha256 per file; written last
    DIR/voc/, yolo/, tokens.jsonl, masks/, annotations.<split>.json ...
                                 with ``formats`` / ``split`` (see :mod:`synthgen.formats.export`)

Every file is written under a temporary name and renamed into place, and the
annotation file and manifest are fsync'ed, so a run that dies leaves no
truncated file under a final name; a directory without ``manifest.json`` is an
unfinished run.  Image ``k`` depends only on ``(config, k)``, so the output is
byte-identical for any number of workers.
"""

from __future__ import annotations

import hashlib
import os
import platform
import shutil
import time
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synthgen import __version__
from synthgen.config import Config, to_dict
from synthgen.errors import UserError
from synthgen.formats import rle
from synthgen.formats.coco import bbox_from_xyxy, write_bytes_atomic, write_coco
from synthgen.formats.export import parse_formats, write_formats
from synthgen.formats.splits import check_fractions
from synthgen.formats.images import EXTENSIONS, encode_image
from synthgen.scene import Scene, category_id, render_scene

__all__ = [
    "MakeSummary",
    "make_dataset",
    "image_name",
    "render_image_record",
    "build_coco",
    "prepare_output",
    "usable_cores",
    "OUTPUT_ENTRIES",
]

#: What a run writes at the top of its directory (``--overwrite`` removes only these).
OUTPUT_ENTRIES = ("images", "annotations.json", "manifest.json")
#: What ``--formats`` and ``--split`` add (glob patterns; ``--overwrite`` removes these too).
FORMAT_ENTRIES = (
    "voc",
    "yolo",
    "masks",
    "masks.jsonl",
    "tokens.jsonl",
    "tokens.vocab.json",
    "tokens.*.jsonl",
    "annotations.*.json",
    "splits.json",
)


@dataclass(frozen=True, slots=True)
class MakeSummary:
    """What a run wrote."""

    out: Path
    images: int
    objects: int
    dropped: dict
    seconds: float

    @property
    def images_per_second(self) -> float:
        return self.images / self.seconds if self.seconds > 0 else float("inf")


def usable_cores() -> int:
    """Number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def image_name(config: Config, index: int) -> str:
    """File name of image ``index``: zero-padded index and the format's extension."""
    digits = max(6, len(str(config.count - 1)))
    return f"{index:0{digits}d}.{EXTENSIONS[config.output.image_format]}"


def scene_annotations(scene: Scene, height: int, width: int) -> list[dict]:
    """COCO annotation records (without ``id`` and ``image_id``) for a scene's objects."""
    records = []
    bboxes = bbox_from_xyxy(scene.boxes)
    for i, facts in enumerate(scene.facts):
        row0, col0, support = scene.masks[i]
        records.append(
            {
                "category_id": int(scene.categories[i]),
                "bbox": bboxes[i],
                "area": float(scene.areas[i]),
                "iscrowd": 0,
                "segmentation": rle.encode_patch(support, row0, col0, height, width),
                "synthgen": facts,
            }
        )
    return records


def render_image_record(config: Config, index: int, images_dir: Path | None = None) -> dict:
    """Render image ``index``, optionally write its file, and return its records.

    Returns
    -------
    dict
        ``{"file_name", "digest", "image": COCO image record, "annotations": [...],
        "dropped": {...}}``.
    """
    scene = render_scene(config, index)
    out = config.output
    data = encode_image(scene.image, out.image_format, png_level=out.png_level, jpeg_quality=out.jpeg_quality)
    name = image_name(config, index)
    if images_dir is not None:
        tmp = images_dir / f".{name}.tmp"
        tmp.write_bytes(data)
        os.replace(tmp, images_dir / name)
    height, width = scene.image.shape[:2]
    image = {
        "id": index + 1,
        "file_name": name,
        "width": width,
        "height": height,
        "synthgen": {"index": index, **scene.info},
    }
    return {
        "file_name": name,
        "digest": hashlib.sha256(data).hexdigest(),
        "image": image,
        "annotations": scene_annotations(scene, height, width),
        "dropped": scene.info["dropped"],
    }


def categories(config: Config) -> list[dict]:
    """COCO categories of the configured shape kinds, in canonical order with stable ids."""
    kinds = sorted(config.objects.shapes, key=category_id)
    return [{"id": category_id(k), "name": k, "supercategory": "shape"} for k in kinds]


def build_coco(config: Config, records) -> dict:
    """Assemble the COCO dict from per-image records in index order; ids start at 1."""
    images, annotations = [], []
    next_id = 1
    for rec in records:
        images.append(rec["image"])
        for ann in rec["annotations"]:
            annotations.append({"id": next_id, "image_id": rec["image"]["id"], **ann})
            next_id += 1
    return {
        "info": {"description": "synthgen dataset", "version": __version__, "seed": config.seed},
        "images": images,
        "annotations": annotations,
        "categories": categories(config),
    }


def prepare_output(out: Path, *, overwrite: bool) -> None:
    """Check that ``out`` may be written; with ``overwrite``, remove what an earlier run wrote.

    Raises
    ------
    UserError
        When ``out`` is a file, or a non-empty directory and ``overwrite`` is off.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: output path is a file, not a directory")
    if out.is_dir() and any(out.iterdir()):
        if not overwrite:
            raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its dataset)")
        # The manifest goes first, so an interrupted overwrite never looks finished.
        for entry in ("manifest.json",) + tuple(e for e in OUTPUT_ENTRIES if e != "manifest.json"):
            path = out / entry
            if path.is_dir():
                shutil.rmtree(path)
            elif path.exists():
                path.unlink()
        for pattern in FORMAT_ENTRIES:
            for path in sorted(out.glob(pattern)):
                if path.is_dir():
                    shutil.rmtree(path)
                else:
                    path.unlink()


def _versions() -> dict:
    import cv2
    import PIL

    return {
        "synthgen": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pillow": PIL.__version__,
        "opencv": cv2.__version__,
    }


def _worker_init() -> None:
    import cv2

    cv2.setNumThreads(1)


_CONFIG: Config | None = None
_IMAGES_DIR: Path | None = None


def _set_worker_state(config: Config, images_dir: Path) -> None:
    global _CONFIG, _IMAGES_DIR
    _worker_init()
    _CONFIG, _IMAGES_DIR = config, images_dir


def _render_in_worker(index: int) -> dict:
    return render_image_record(_CONFIG, index, _IMAGES_DIR)


def iter_records(config: Config, images_dir: Path, indices, *, workers: int = 1):
    """Render and write the images ``indices``, yielding their records in order."""
    indices = list(indices)
    if workers <= 1 or len(indices) < 2:
        for k in indices:
            yield render_image_record(config, k, images_dir)
        return
    chunk = max(1, min(16, len(indices) // (workers * 4)))
    with ProcessPoolExecutor(
        max_workers=workers, initializer=_set_worker_state, initargs=(config, images_dir)
    ) as pool:
        yield from pool.map(_render_in_worker, indices, chunksize=chunk)


def make_dataset(
    config: Config,
    out: Path,
    *,
    overwrite: bool = False,
    workers: int | None = None,
    progress: Callable[[int], None] | None = None,
    formats: Sequence[str] = ("coco",),
    split: Mapping[str, float] | None = None,
) -> MakeSummary:
    """Write a dataset of ``config.count`` images to ``out``.

    Parameters
    ----------
    config : Config
        A resolved config (:func:`synthgen.config.load_config`).
    out : Path
        Output directory; created if missing.  A non-empty directory is
        refused unless ``overwrite``.
    workers : int or None
        Processes to render with (None: every usable core).  The output does not
        depend on it.
    progress : callable or None
        Called with the number of images finished after each image.
    formats : sequence of str
        Formats to write (see :mod:`synthgen.formats.export`); COCO JSON is
        always written, the others from it before the manifest.
    split : mapping or None
        Split name -> fraction, e.g. ``{"train": 0.8, "val": 0.2}``: per-split
        files (:mod:`synthgen.formats.splits`), assigned with ``config.seed``.
    """
    start = time.perf_counter()
    out = Path(out)
    formats = parse_formats(formats)  # bad names and fractions fail before anything is written
    if split:
        check_fractions(split)
    prepare_output(out, overwrite=overwrite)
    images_dir = out / "images"
    images_dir.mkdir(parents=True, exist_ok=True)
    workers = usable_cores() if workers is None else max(1, int(workers))

    records = []
    dropped: dict[str, int] = {}
    files: dict[str, str] = {}
    for done, rec in enumerate(iter_records(config, images_dir, range(config.count), workers=workers), 1):
        files[f"images/{rec['file_name']}"] = rec["digest"]
        for reason, n in rec["dropped"].items():
            dropped[reason] = dropped.get(reason, 0) + n
        records.append(rec)
        if progress is not None:
            progress(done)

    coco = build_coco(config, records)
    write_coco(out / "annotations.json", coco)
    files["annotations.json"] = hashlib.sha256((out / "annotations.json").read_bytes()).hexdigest()
    # -- further formats and splits, written from the COCO dict --
    extra = [f for f in formats if f != "coco"]
    if extra or split:
        write_formats(coco, out, extra, split=split, seed=config.seed)
        for pattern in FORMAT_ENTRIES:
            for top in out.glob(pattern):
                for path in sorted(top.rglob("*")) if top.is_dir() else [top]:
                    if path.is_file():
                        files[path.relative_to(out).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    n_objects = len(coco["annotations"])
    manifest = {
        "tool": "synthgen",
        "manifest_version": 1,
        "seed": config.seed,
        "config": to_dict(config),
        "versions": _versions(),
        "counts": {"images": config.count, "objects": n_objects, "dropped": dropped},
        "outputs": {"formats": ["coco", *extra], "split": dict(split) if split else None},
        "files": dict(sorted(files.items())),
    }
    import orjson

    write_bytes_atomic(out / "manifest.json", orjson.dumps(manifest, option=orjson.OPT_INDENT_2))
    return MakeSummary(
        out=out, images=config.count, objects=n_objects, dropped=dropped, seconds=time.perf_counter() - start
    )
