"""Many images: render in workers, record progress, write images, COCO JSON and the manifest.

Output directory::

    DIR/images/000000.png ...    one file per image (name = 0-based index)
    DIR/annotations.json         COCO JSON; per-object facts under "synthgen"
    DIR/manifest.json            resolved config, seed, versions, counts, sha256 per file; written last

How a run goes (:func:`make_dataset`):

1. :func:`prepare_output` checks ``DIR`` (refusing a directory made from another
   config, naming the keys that differ) and writes the run record
   ``DIR/.synthgen/run.json``.
2. Images are rendered in blocks of indices, by worker processes or a Dask
   cluster.  Each image is written under a temporary name and renamed; its
   record (:func:`render_image_record`, serialized by
   :func:`synthgen.run.journal.encode_record`) is appended to the run's journal and
   flushed as each block finishes.
3. :func:`finish_dataset` streams ``annotations.json`` from the journal in index
   order (:func:`synthgen.run.journal.write_coco_streamed`), writes ``manifest.json``,
   both atomically with fsync, and removes ``.synthgen/``.

Image ``k`` depends only on ``(config, k)``, so the output is byte-identical for
any number of workers, any shard split (:func:`merge_shards`), any cluster and
any resume point.  A run killed at any moment leaves no truncated file under a
final name, and ``resume=True`` keeps every image whose digest matches its
journal record and regenerates the rest.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import fnmatch
import hashlib
import os
import platform
import shutil
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path, PurePosixPath

import numpy as np
import orjson

from synthgen import __version__
from synthgen._io import named_os_errors, sha256_file, write_atomic, write_unsynced
from synthgen.config import Config, build, to_dict
from synthgen.errors import InputFileError, OutputWriteError, UserError, make_output_dir
from synthgen.formats.coco import assemble_coco, coco_categories, read_coco, scene_annotations
from synthgen.formats.dataset_dir import ANNOTATIONS, FORMAT_DIRS, FORMAT_ENTRIES, IMAGES_DIR, MANIFEST, OUTPUT_ENTRIES
from synthgen.formats.export import parse_formats, write_formats
from synthgen.formats.images import EXTENSIONS, encode_image
from synthgen.formats.splits import check_fractions
from synthgen.run.journal import (
    RUN_RECORD,
    STATE_DIR,
    RecordStore,
    Shard,
    decode_record,
    describe_differences,
    encode_record,
    find_shard_manifests,
    journal_path,
    read_json,
    remove_state,
    shard_manifest_path,
    state_dir,
    write_coco_streamed,
)
from synthgen.run.pool import run_unordered, usable_cores
from synthgen.scene import category_id, render_scene

__all__ = [
    "MakeSummary",
    "DROP_KEYS",
    "drop_warning",
    "make_dataset",
    "merge_shards",
    "image_name",
    "render_image_record",
    "render_block",
    "keep_freed_memory",
    "build_coco",
    "coco_info",
    "categories",
    "build_manifest",
    "finish_dataset",
    "prepare_output",
    "usable_cores",
    "local_processes",
    "OUTPUT_ENTRIES",
]

MANIFEST_VERSION = 1


@dataclass(frozen=True, slots=True)
class MakeSummary:
    """What a run wrote.

    ``images`` counts the images of this run (of its shard); ``kept`` how many
    of them a resumed run found intact and did not render again.  ``objects``
    counts the annotated objects, ``ignored`` the ignore regions, ``dropped``
    the requested objects not annotated, by reason (the ignore regions among them).
    """

    out: Path
    images: int
    objects: int
    dropped: dict
    seconds: float
    kept: int = 0
    shard: Shard = field(default_factory=Shard)
    ignored: int = 0

    @property
    def rendered(self) -> int:
        """Images this run rendered (the rest it kept)."""
        return self.images - self.kept

    @property
    def images_per_second(self) -> float:
        """Rendered images per second (kept images took no rendering)."""
        return self.rendered / self.seconds if self.seconds > 0 else float("inf")


#: The config keys that govern each reason a requested object is not annotated.
DROP_KEYS = {
    "no_room": ("objects.layout", "objects.attempts"),
    "outside": ("objects.layout",),
    "hidden": ("objects.count", "objects.layout"),
    "min_visible": ("objects.min_visible",),
    "min_area": ("objects.min_area", "objects.size"),
}


def drop_warning(objects: int, dropped: Mapping[str, int], ignored: int = 0) -> str | None:
    """One line on the objects a run did not annotate, when they are more than a tenth of all it drew on.

    Parameters
    ----------
    objects : int
        Annotated objects.
    dropped : mapping
        Objects not annotated, by reason (``MakeSummary.dropped``).
    ignored : int
        How many of the dropped objects show and are marked as ignore regions.

    Returns
    -------
    str or None
        The counts by reason, each with the keys that govern it; None when at
        most a tenth of the objects were dropped.

    Examples
    --------
    >>> print(drop_warning(394, {"hidden": 1173, "min_visible": 433, "no_room": 0}, ignored=433))
    1606 of 2000 objects (80%) were not annotated: hidden 1173 (objects.count, objects.layout), min_visible 433 (objects.min_visible); 433 of them show and are marked as ignore regions (iscrowd 1)
    >>> drop_warning(95, {"hidden": 5}) is None
    True
    """
    lost = sum(int(n) for n in dropped.values())
    total = objects + lost
    if lost * 10 <= total:
        return None
    reasons = ", ".join(
        f"{reason} {n} ({', '.join(DROP_KEYS.get(reason, ()))})" for reason, n in dropped.items() if n
    )
    line = f"{lost} of {total} objects ({100 * lost / total:.0f}%) were not annotated: {reasons}"
    if ignored:
        line += f"; {ignored} of them show and are marked as ignore regions (iscrowd 1)"
    return line


def image_name(config: Config, index: int) -> str:
    """File name of image ``index``: zero-padded index and the format's extension."""
    digits = max(6, len(str(config.count - 1)))
    return f"{index:0{digits}d}.{EXTENSIONS[config.output.image_format]}"


# --------------------------------------------------------------------------- one image


def render_image_record(config: Config, index: int, images_dir: Path | None = None) -> dict:
    """Render image ``index``, optionally write its file, and return its records.

    Returns
    -------
    dict
        ``{"file_name", "digest", "files": {path relative to DIR: sha256},
        "image": COCO image record, "annotations": [...] (without ids),
        "dropped": {...}}``.
    """
    scene = render_scene(config, index)
    out = config.output
    data = encode_image(scene.image, out.image_format, png_level=out.png_level, jpeg_quality=out.jpeg_quality)
    name = image_name(config, index)
    if images_dir is not None:
        write_unsynced(Path(images_dir) / name, data)
    height, width = scene.image.shape[:2]
    image = {
        "id": index + 1,
        "file_name": name,
        "width": width,
        "height": height,
        "synthgen": {"index": index, **scene.info},
    }
    digest = hashlib.sha256(data).hexdigest()
    return {
        "file_name": name,
        "digest": digest,
        "files": {f"images/{name}": digest},
        "image": image,
        "annotations": scene_annotations(scene, height, width),
        "dropped": scene.info["dropped"],
    }


def journal_line(record: dict, index: int) -> bytes:
    """The journal line of a record from :func:`render_image_record`."""
    return encode_record(index, record["files"], record["dropped"], record["image"], record["annotations"])


#: glibc mallopt parameters (malloc.h): M_TRIM_THRESHOLD, M_MMAP_THRESHOLD.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_malloc_tuned = False


def keep_freed_memory() -> None:
    """Let glibc's malloc reuse freed memory for the next image (once per process; no-op elsewhere).

    Every image allocates several fresh full-canvas arrays (background planes,
    canvas, encoder input).  By default glibc serves such blocks with mmap, or
    gives the freed top of the heap back to the system, so each image pays
    first-touch page faults again (~570 per 640x480 noise background, about
    a sixth of the make time).  Blocks up to 32 MiB are taken from the heap
    instead, and up to 128 MiB of free heap is kept.  Only speed changes: no
    value depends on where memory comes from.  Affects the whole process.
    """
    global _malloc_tuned
    if _malloc_tuned:
        return
    _malloc_tuned = True
    if platform.system() != "Linux" or platform.libc_ver()[0] != "glibc":
        return
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        libc.mallopt(_M_MMAP_THRESHOLD, 32 << 20)  # the largest value glibc accepts on 64-bit
        libc.mallopt(_M_TRIM_THRESHOLD, 128 << 20)
    except (OSError, AttributeError):  # no usable libc: keep the defaults
        pass


def render_block(config: Config, indices: Sequence[int], out: str | Path) -> list[bytes]:
    """Render and write images ``indices`` into ``out/images``; return their journal lines.

    This is the unit of work of every backend (worker process, Dask task).
    """
    keep_freed_memory()
    images_dir = Path(out) / IMAGES_DIR
    return [journal_line(render_image_record(config, k, images_dir), k) for k in indices]


# --------------------------------------------------------------------------- the COCO file and manifest


def categories(config: Config) -> list[dict]:
    """COCO categories of the configured shape kinds, in canonical order with stable ids."""
    return coco_categories((category_id(k), k) for k in config.objects.shapes)


def coco_info(config: Config) -> dict:
    """The COCO ``info`` record."""
    return {"description": "synthgen dataset", "version": __version__, "seed": config.seed}


def build_coco(config: Config, records) -> dict:
    """Assemble the COCO dict from per-image records in index order; ids start at 1.

    The in-memory reference for :func:`synthgen.run.journal.write_coco_streamed`,
    which writes the same bytes without holding every record.
    """
    return assemble_coco(coco_info(config), categories(config), records)


def versions() -> dict:
    """Versions of Python and of the libraries whose output ends up in the files."""
    import cv2
    import PIL
    import shapely

    return {
        "synthgen": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pillow": PIL.__version__,
        "opencv": cv2.__version__,
        "shapely": shapely.__version__,  # visible boxes (GEOS polygon arithmetic)
    }


def build_manifest(
    config: Config,
    n_objects: int,
    dropped: dict,
    files: dict,
    libraries: dict | None = None,
    outputs: dict | None = None,
    ignored: int = 0,
) -> dict:
    """The manifest dict; nothing in it depends on how the work was split or when it ran.

    ``libraries`` are the versions that rendered the images (default: this process's);
    ``outputs`` the formats and split written (default: COCO JSON only); ``ignored``
    the number of ignore regions.
    """
    return {
        "tool": "synthgen",
        "manifest_version": MANIFEST_VERSION,
        "seed": config.seed,
        "config": to_dict(config),
        "versions": versions() if libraries is None else libraries,
        "counts": {"images": config.count, "objects": n_objects, "ignored": ignored, "dropped": dropped},
        "outputs": outputs if outputs is not None else {"formats": ["coco"], "split": None},
        "files": dict(sorted(files.items())),
    }


def _dump_manifest(manifest: dict) -> bytes:
    return orjson.dumps(manifest, option=orjson.OPT_INDENT_2)


def finish_dataset(
    config: Config,
    out: Path,
    store: RecordStore,
    libraries: dict | None = None,
    *,
    formats: Sequence[str] = ("coco",),
    split: Mapping[str, float] | None = None,
) -> tuple[int, dict]:
    """Write ``annotations.json``, the further ``formats`` and ``split``, then ``manifest.json``; remove the run's state.

    ``libraries``: versions that rendered the images, for the manifest (default: this process's).
    The further formats are written from the COCO file (:func:`synthgen.formats.export.write_formats`),
    which is read back for them, so only runs that ask for them hold all annotations in memory.

    Returns
    -------
    (n_objects, dropped, ignored)
    """
    out = Path(out)
    try:
        n_objects, digest, dropped, files, ignored = write_coco_streamed(
            out / ANNOTATIONS, store, range(config.count), info=coco_info(config), categories=categories(config)
        )
        files[ANNOTATIONS] = digest
        extra = [f for f in formats if f != "coco"]
        if extra or split:
            write_formats(read_coco(out / ANNOTATIONS), out, extra, split=split, seed=config.seed)
            files.update(_format_digests(out))
        outputs = {"formats": ["coco", *extra], "split": dict(split) if split else None}
        manifest = build_manifest(config, n_objects, dropped, files, libraries, outputs, ignored)
        _write_small(out / MANIFEST, _dump_manifest(manifest))
    except OSError as exc:
        raise _write_error(exc, out) from None
    finally:
        store.close()
    remove_state(out)
    _remove_temporaries(out)
    return n_objects, dropped, ignored


def _format_digests(out: Path) -> dict:
    """sha256 of every file the format writers put in ``out``, by relative path."""
    files = {}
    for pattern in FORMAT_ENTRIES:
        for top in sorted(out.glob(pattern)):
            for path in sorted(top.rglob("*")) if top.is_dir() else [top]:
                if path.is_file():
                    files[path.relative_to(out).as_posix()] = sha256_file(path)
    return files


# --------------------------------------------------------------------------- output directory


def _run_record(config: Config) -> dict:
    return {"tool": "synthgen", "config": to_dict(config), "versions": versions()}


def _entries(out: Path) -> list[str]:
    return sorted(p.name for p in out.iterdir()) if out.is_dir() else []


def prepare_output(
    out: Path, config: Config, shard: Shard = Shard(), *, overwrite: bool = False, resume: bool = False
) -> str:
    """Check that ``out`` may be written for this run and set it up.

    Returns
    -------
    str
        What ``out`` held: ``"new"`` (nothing of ours), ``"unfinished"`` (a run of
        this config to resume), or ``"finished"`` (a complete dataset of this
        config, with ``resume``).

    Raises
    ------
    UserError
        When ``out`` is a file; holds a dataset or run of a different config
        (the message names the differing keys); holds other files; or holds
        this config's unfinished run and neither ``resume`` nor ``overwrite``
        is set.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: output path is a file, not a directory")
    here = to_dict(config)
    entries = _entries(out)
    if entries and overwrite:
        _clear(out)
        entries = []
    state = "new"
    if entries:
        run_file = state_dir(out) / RUN_RECORD
        manifest_file = out / MANIFEST
        if manifest_file.exists():
            there, what = _config_of(manifest_file, "manifest"), "a finished dataset"
        elif run_file.exists():
            there, what = _config_of(run_file, "run record"), "an unfinished run"
        elif _only_empty_state(out, entries):  # killed before its run record was written
            there, what = {"config": here, "versions": versions()}, "an unfinished run"
        else:
            raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its dataset)")
        if there["config"] != here:
            raise UserError(
                f"{out}: holds {what} made from a different config, differing in "
                f"{describe_differences(there['config'], here)} (pass --overwrite to replace it)"
            )
        if there.get("versions") != versions() and what == "an unfinished run":
            raise UserError(
                f"{out}: its unfinished run was started with other library versions ({there.get('versions')}), "
                "so resuming would not reproduce it (pass --overwrite to start again)"
            )
        foreign = [
            e for e in entries
            if e not in OUTPUT_ENTRIES and not e.startswith("shard-")
            and not any(fnmatch.fnmatchcase(e, pattern) for pattern in FORMAT_ENTRIES)
        ]
        if foreign:
            raise UserError(f"{out}: output directory holds other files ({', '.join(foreign[:3])}); use an empty directory")
        own_journal = journal_path(out, shard).exists() or shard_manifest_path(out, shard).exists()
        if what == "a finished dataset":
            if not resume:
                raise UserError(
                    f"{out}: output directory is not empty: it holds a finished dataset of this config "
                    "(pass --resume to check and repair it, or --overwrite to write it again)"
                )
            state = "finished"
        elif resume:
            state = "unfinished"
        elif own_journal or shard.whole:
            raise UserError(
                f"{out}: output directory is not empty: it holds an unfinished run of this config "
                "(pass --resume to continue it, or --overwrite to start again)"
            )
    make_output_dir(out)  # a path that cannot be a directory is bad input, found before any work
    try:
        (out / IMAGES_DIR).mkdir(exist_ok=True)
        state_dir(out).mkdir(exist_ok=True)
        run_file = state_dir(out) / RUN_RECORD
        if not run_file.exists():
            _write_small(run_file, orjson.dumps(_run_record(config), option=orjson.OPT_INDENT_2))
    except OSError as exc:
        raise _write_error(exc, out) from None
    return state


def _only_empty_state(out: Path, entries: list[str]) -> bool:
    """True when ``out`` holds only an empty ``images/`` and ``.synthgen/``."""
    if not set(entries) <= {"images", STATE_DIR}:
        return False
    for name in entries:
        d = out / name
        if not d.is_dir() or any(not p.name.startswith(".") for p in d.iterdir()):
            return False
    return True


def _config_of(path: Path, what: str) -> dict:
    data = read_json(path, what)
    if not isinstance(data.get("config"), dict):
        raise InputFileError(path, f"{what} has no 'config' table (not written by synthgen?)")
    return data


def _clear(out: Path) -> None:
    """Remove what an earlier run wrote in ``out``, and nothing else (see :func:`_earlier_run_paths`)."""
    _remove(_earlier_run_paths(out))


def _earlier_run_paths(out: Path) -> list[Path]:
    """The files and folders in ``out`` an earlier run wrote, to be removed before a new run; the manifest first.

    Every file at a path a run writes (``annotations.json``, ``manifest.json``,
    anything under ``images/`` and the format folders, the format files at the
    top) must be one the earlier run's manifest, journals or shard manifests
    list, or one the format writers derive from those images.

    Raises
    ------
    UserError
        Naming a file synthgen would replace that the earlier run did not write.
    """
    owned = _files_of_earlier_run(out)
    stems = {PurePosixPath(rel).stem for rel in owned if rel.startswith("images/")}
    replaced = [out / name for name in (MANIFEST, ANNOTATIONS, "images", *FORMAT_DIRS)]
    replaced += [p for pattern in FORMAT_ENTRIES if pattern not in FORMAT_DIRS for p in sorted(out.glob(pattern))]
    for top in replaced:
        for path in sorted(top.rglob("*")) if top.is_dir() else [top] if top.exists() else []:
            rel = path.relative_to(out).as_posix()
            if not path.is_dir() and rel not in owned and not _derived_name(rel, stems):
                raise UserError(
                    f"{path}: this file was not written by the earlier run in {out} (its manifest and journal "
                    "do not list it), and --overwrite would replace it; move it away or use another output directory"
                )
    bookkeeping = [state_dir(out)] + [p for _, p in find_shard_manifests(out)]
    return [p for p in replaced + bookkeeping if p.exists()]


def _remove(paths: list[Path]) -> None:
    """Remove these files and folders, in order."""
    for path in paths:
        if path.is_dir():
            shutil.rmtree(path)
        else:
            path.unlink(missing_ok=True)


#: Folders written whole by the format writers (staged, then renamed over the old one).


def _files_of_earlier_run(out: Path) -> set[str]:
    """Paths relative to ``out`` that the manifest, the journals and the shard manifests in ``out`` list.

    Includes those bookkeeping files themselves, and the temporary names of images being written.
    """
    owned: set[str] = set()
    listings = [out / MANIFEST] + [p for _, p in find_shard_manifests(out)]
    for path in listings:
        if path.is_file():
            files = read_json(path, "manifest").get("files")
            owned.add(path.name)
            owned.update(files if isinstance(files, dict) else ())
    for journal in sorted(state_dir(out).glob("*.journal")):
        with open(journal, "rb") as f:
            for line in f:
                rec = decode_record(line)
                if rec is not None and isinstance(rec[0].get("files"), dict):
                    owned.update(rec[0]["files"])
    images = out / IMAGES_DIR
    if owned and images.is_dir():
        owned.update(p.relative_to(out).as_posix() for p in images.glob(".*.tmp"))  # write_unsynced's names
    return owned


def _derived_name(rel: str, stems: set[str]) -> bool:
    """True when ``rel`` is a file name the format writers give for the images with these stems.

    ``voc/<stem>.xml``, ``yolo/<stem>.txt``, ``masks/<stem>.png``, ``yolo/labels.txt``, the split
    lists (``voc/ImageSets/Main/<split>.txt``, ``yolo/splits/<split>.txt``), and the top-level
    format files (:data:`FORMAT_ENTRIES`) of a dataset whose images are known.
    """
    if not stems:
        return False
    path = PurePosixPath(rel)
    top, inner = path.parts[0], PurePosixPath(*path.parts[1:]) if len(path.parts) > 1 else None
    if top not in FORMAT_DIRS:
        return len(path.parts) == 1 and any(fnmatch.fnmatchcase(rel, p) for p in FORMAT_ENTRIES)
    if inner is None:
        return False
    per_image = {"voc": ".xml", "yolo": ".txt", "masks": ".png"}[top]
    if inner.suffix == per_image and inner.with_suffix("").as_posix() in stems:
        return True
    lists = {"voc": "ImageSets/Main", "yolo": "splits"}.get(top)
    return (top == "yolo" and rel == "yolo/labels.txt") or (
        lists is not None and inner.parent.as_posix() == lists and inner.suffix == ".txt"
    )


def _remove_temporaries(out: Path) -> None:
    images = Path(out) / IMAGES_DIR
    if images.is_dir():
        for p in images.glob(".*.tmp"):
            p.unlink(missing_ok=True)


def _write_small(path: Path, data: bytes) -> None:
    """Write a manifest or run record atomically (temp file, fsync, rename); errors name ``path``."""
    with named_os_errors(path):
        write_atomic(path, data)


def _write_all(raw, data: bytes) -> None:
    """Write all of ``data`` to an unbuffered file (a raw write may take only part)."""
    view = memoryview(data)
    while view:
        view = view[raw.write(view):]


def _write_error(exc: OSError, out: Path) -> OutputWriteError:
    return OutputWriteError(exc.filename or out, exc.strerror or str(exc))


# --------------------------------------------------------------------------- running


def _worker_setup() -> None:
    """Once per worker process: OpenCV on one thread (the workers are the parallelism)."""
    import cv2

    cv2.setNumThreads(1)


def blocks_of(indices: Sequence[int], size: int) -> list[list[int]]:
    """Split ``indices`` into consecutive blocks of at most ``size``."""
    indices = list(indices)
    return [indices[i : i + size] for i in range(0, len(indices), size)]


def _block_size(n: int, workers: int) -> int:
    return max(1, min(16, n // (workers * 4)))


#: A run starts ``min(workers, images // MIN_IMAGES_PER_WORKER)`` worker processes and renders in
#: its own process when that is below 2.  A worker costs 0.4-0.6 s to start (a fresh interpreter
#: importing numpy, OpenCV and synthgen); with two workers on two cores giving 1.2-1.8x, they pay off
#: from roughly 45-130 default 640x480 images (benchmarks/bench_workers.py).
MIN_IMAGES_PER_WORKER = 32


def local_processes(n_images: int, workers: int) -> int:
    """Processes a local run of ``n_images`` uses with at most ``workers`` (1: this process alone).

    Examples
    --------
    >>> local_processes(16, 2), local_processes(64, 2), local_processes(1000, 2), local_processes(1000, 1)
    (1, 2, 2, 1)
    """
    n = min(workers, n_images // MIN_IMAGES_PER_WORKER)
    return n if n >= 2 else 1


def _run_local(config: Config, out: Path, blocks: list[list[int]], workers: int) -> Iterator[list[bytes]]:
    """Journal lines of each block, in order of completion, from ``workers`` processes (or this one)."""
    if workers <= 1 or len(blocks) < 2:
        for block in blocks:
            yield render_block(config, block, out)
        return
    yield from run_unordered(partial(render_block, config, out=str(out)), blocks, workers, setup=_worker_setup)


def _verify_kept(out: Path, store: RecordStore, indices) -> int:
    """Forget the records of images whose files are missing or do not match their digests; count the kept."""
    kept = 0
    for k in indices:
        if not store.has(k):
            continue
        header, _ = store.read(k)
        if all(sha256_file(Path(out) / rel) == digest for rel, digest in header["files"].items()):
            kept += 1
        else:
            store.forget(k)
    return kept


def make_dataset(
    config: Config,
    out: Path,
    *,
    overwrite: bool = False,
    resume: bool = False,
    workers: int | None = None,
    shard: Shard | None = None,
    cluster: str | None = None,
    progress: Callable[[int, int], None] | None = None,
    formats: Sequence[str] = ("coco",),
    split: Mapping[str, float] | None = None,
) -> MakeSummary:
    """Write a dataset of ``config.count`` images (or one shard of it) to ``out``.

    Parameters
    ----------
    config : Config
        A resolved config (:func:`synthgen.config.load_config`).
    out : Path
        Output directory; created if missing.  A non-empty directory is
        refused unless ``overwrite`` or (for this config's run) ``resume``.
    overwrite : bool
        Replace what an earlier run wrote in ``out``.
    resume : bool
        Continue this config's unfinished run in ``out``: keep the images whose
        digests match the journal, render the rest.  On a finished dataset,
        check every file against the manifest and repair what differs.
    workers : int or None
        Most processes to render with (None: every usable core).  Workers are
        fresh Python processes that import synthgen only, so a plain script
        calling this without an ``if __name__ == "__main__":`` guard is safe
        (:mod:`synthgen.run.pool`).  A run renders in this process when it has fewer
        than ``2 * MIN_IMAGES_PER_WORKER`` images to render, or when ``workers``
        is 1: starting a worker costs about as much as rendering that many
        images.  The output does not depend on it.
    shard : Shard or None
        Render only this shard's images and write its shard manifest
        (``DIR/shard-K-of-N.json``); :func:`merge_shards` assembles the shards.
    cluster : str or None
        Address of a Dask scheduler, or ``"local"`` for a local cluster; the
        cluster's workers render blocks into ``out`` (which they must see at
        the same path), this process writes the annotations and manifest.
    progress : callable or None
        Called as ``progress(done, total)`` after each block of images.
    formats : sequence of str
        Formats to write (see :mod:`synthgen.formats.export`); COCO JSON is
        always written, the others from it before the manifest.
    split : mapping or None
        Split name -> fraction, e.g. ``{"train": 0.8, "val": 0.2}``: per-split
        files (:mod:`synthgen.formats.splits`), assigned with ``config.seed``.

    Raises
    ------
    UserError
        Bad options or an output directory that may not be written (exit 2).
    OutputWriteError
        The disk is full or a file cannot be written (exit 1); what was
        written is resumable.
    """
    start = time.perf_counter()
    out = Path(out)
    shard = Shard() if shard is None else shard
    if overwrite and resume:
        raise UserError("options '--overwrite' and '--resume' exclude each other: pass one of them")
    formats = parse_formats(formats)  # bad names and fractions fail before anything is written
    if split:
        check_fractions(split)
    if not shard.whole and (split or list(formats) != ["coco"]):
        raise UserError(
            "options '--formats' and '--split' do not go with '--shard': merge the shards, "
            "then run 'synthgen export' on the merged dataset"
        )
    workers = usable_cores() if workers is None else int(workers)
    if workers < 1:
        raise UserError(f"option '--workers' must be a whole number >= 1 (got {workers})")
    backend = None
    if cluster is not None:
        from synthgen.run import backends as cluster_mod

        # Fails with an install hint before anything is written; a local cluster gets `workers` processes.
        backend = cluster_mod.connect(cluster, workers=workers)

    try:
        state = prepare_output(out, config, shard, overwrite=overwrite, resume=resume)
        if state == "finished":
            wanted = {"formats": ["coco", *[f for f in formats if f != "coco"]], "split": dict(split) if split else None}
            had = read_json(out / MANIFEST, "manifest").get("outputs", {"formats": ["coco"], "split": None})
            if had != wanted:
                raise UserError(
                    f"{out}: this finished dataset was written with formats {','.join(had['formats'])} and split "
                    f"{had['split']}, not {','.join(wanted['formats'])} and {wanted['split']}; "
                    "add formats with 'synthgen export', or pass --overwrite to write it again"
                )
            kept = _repair_finished(config, out)
            if kept is not None:
                counts = read_json(out / MANIFEST, "manifest")["counts"]
                return MakeSummary(out, counts["images"], counts["objects"], counts["dropped"],
                                   time.perf_counter() - start, kept=kept, shard=shard,
                                   ignored=counts.get("ignored", 0))
            # The annotations are damaged too: render every image again.
            (out / MANIFEST).unlink(missing_ok=True)
        mine = shard.indices(config.count)
        store, end = _known_records(config, out, shard, resume_from=state == "unfinished")
        kept = _verify_kept(out, store, mine)
        todo = store.missing(mine)
        procs = local_processes(len(todo), workers) if backend is None else backend.workers
        blocks = blocks_of(todo, _block_size(len(todo), procs))
        results = _run_local(config, out, blocks, procs) if backend is None else backend.run(render_block, config, out, blocks)
        report = None if progress is None else (lambda done: progress(kept + done, len(mine)))
        _append_records(journal_path(out, shard), end, results, store, report)
    except OSError as exc:
        raise _write_error(exc, out) from None
    finally:
        if backend is not None:
            backend.close()

    if shard.whole:
        n_objects, dropped, ignored = finish_dataset(config, out, store, formats=formats, split=split)
    else:
        n_objects, dropped, ignored = _finish_shard(config, out, shard, store)
    return MakeSummary(out, len(mine), n_objects, dropped, time.perf_counter() - start, kept=kept, shard=shard,
                       ignored=ignored)


def _known_records(config: Config, out: Path, shard: Shard, *, resume_from: bool) -> tuple[RecordStore, int]:
    """Records already in ``out``'s journals, and where this shard's journal may be appended to.

    A whole run may also use the records of earlier shard runs in the same directory.
    """
    store = RecordStore(config.count)
    journal = journal_path(out, shard)
    end = 0
    if resume_from:
        _remove_temporaries(out)
        mine = shard.indices(config.count)
        if shard.whole:
            for other in sorted(state_dir(out).glob("*.journal")):
                if other != journal:
                    store.load_journal(other, wanted=mine)
        if journal.exists():
            end = store.load_journal(journal, wanted=mine)
    return store, end


def _append_records(journal: Path, end: int, results, store: RecordStore, report) -> None:
    """Append each finished block's records to ``journal`` (cut back to ``end``) and index them in ``store``."""
    journal.touch()
    done = 0
    if report is not None:
        report(done)
    # Unbuffered: each record reaches the OS as its block finishes, and closing has nothing left to fail on.
    with open(journal, "r+b", buffering=0) as jf, contextlib.closing(results):
        jf.truncate(end)  # drop a record cut short by a crash
        offset = jf.seek(end)
        for lines in results:
            with named_os_errors(journal):
                for line in lines:
                    _write_all(jf, line)
                    store.add(journal, orjson.loads(line[: line.index(b"\t")])["index"], offset, len(line))
                    offset += len(line)
            done += len(lines)
            if report is not None:
                report(done)
        with named_os_errors(journal):
            os.fsync(jf.fileno())


def _repair_finished(config: Config, out: Path) -> int | None:
    """Check a finished dataset against its manifest and re-render damaged images.

    Returns the number of images found intact, or None when the annotation file
    (or anything but images) is damaged, or a re-rendered image does not
    reproduce its recorded digest; the caller then renders the whole run again.
    """
    files = read_json(out / MANIFEST, "manifest").get("files")
    if not isinstance(files, dict):
        return None
    names = {f"images/{image_name(config, k)}": k for k in range(config.count)}
    bad = [rel for rel, digest in files.items() if sha256_file(out / rel) != digest]
    if any(rel not in names for rel in bad):
        return None
    for rel in bad:
        if render_image_record(config, names[rel], out / IMAGES_DIR)["files"][rel] != files[rel]:
            return None
    remove_state(out)
    _remove_temporaries(out)
    return config.count - len(bad)


def _finish_shard(config: Config, out: Path, shard: Shard, store: RecordStore) -> tuple[int, dict]:
    """Write the shard manifest: config, versions, shard, counts, files, and the journal's digest."""
    n_objects, ignored, dropped, files = 0, 0, {}, {}
    with store:
        for k in shard.indices(config.count):
            header, fragments = store.read(k)
            ignored += header.get("ignored", 0)
            n_objects += len(fragments) - 1 - header.get("ignored", 0)
            for reason, n in header["dropped"].items():
                dropped[reason] = dropped.get(reason, 0) + n
            files.update(header["files"])
    journal = journal_path(out, shard)
    manifest = {
        "tool": "synthgen",
        "manifest_version": MANIFEST_VERSION,
        "shard": {"index": shard.index, "count": shard.count, "rule": "image index % count == index"},
        "seed": config.seed,
        "config": to_dict(config),
        "versions": versions(),
        "counts": {"images": len(shard.indices(config.count)), "objects": n_objects, "ignored": ignored,
                   "dropped": dropped},
        "journal": {"path": journal.relative_to(out).as_posix(), "sha256": sha256_file(journal)},
        "files": dict(sorted(files.items())),
    }
    try:
        _write_small(shard_manifest_path(out, shard), _dump_manifest(manifest))
    except OSError as exc:
        raise _write_error(exc, out) from None
    _remove_temporaries(out)
    return n_objects, dropped, ignored


# --------------------------------------------------------------------------- merging shards


@dataclass(frozen=True, slots=True)
class _ShardInput:
    shard: Shard
    directory: Path
    manifest: dict


def _collect_shards(dirs: Sequence[Path]) -> list[_ShardInput]:
    found: list[_ShardInput] = []
    for d in dirs:
        d = Path(d)
        if not d.is_dir():
            raise InputFileError(d, "is not a directory (expected the output of make --shard K/N)")
        manifests = find_shard_manifests(d)
        if not manifests:
            raise InputFileError(d, "holds no shard manifest shard-K-of-N.json (expected the output of make --shard K/N)")
        for shard, path in manifests:
            m = read_json(path, "shard manifest")
            if not isinstance(m.get("config"), dict) or not isinstance(m.get("journal"), dict):
                raise InputFileError(path, "is not a synthgen shard manifest (no 'config' or 'journal')")
            found.append(_ShardInput(shard, d, m))
    return found


def _check_shards(found: list[_ShardInput]) -> None:
    first = found[0]
    for s in found[1:]:
        where = shard_manifest_path(s.directory, s.shard)
        if s.manifest["config"] != first.manifest["config"]:
            diff = describe_differences(first.manifest["config"], s.manifest["config"])
            raise InputFileError(where, f"was made from a different config than shard {first.shard.tag}: {diff}")
        if s.manifest.get("versions") != first.manifest.get("versions"):
            raise InputFileError(
                where, f"was made with other library versions than shard {first.shard.tag}, so the merge would not "
                "reproduce a single run"
            )
    counts = {s.shard.count for s in found}
    if len(counts) > 1:
        raise UserError(f"shards of different splits cannot be merged (found N = {sorted(counts)})")
    n = counts.pop()
    seen: dict[int, Path] = {}
    for s in found:
        if s.shard.index in seen:
            raise UserError(f"shard {s.shard.index}/{n} is given twice ({seen[s.shard.index]} and {s.directory})")
        seen[s.shard.index] = s.directory
    missing = [f"{k}/{n}" for k in range(n) if k not in seen]
    if missing:
        raise UserError(f"cannot merge: missing shard(s) {', '.join(missing[:8])} of {n}")


def merge_shards(dirs: Sequence[Path], out: Path | None = None, *, overwrite: bool = False) -> MakeSummary:
    """Assemble the outputs of ``make --shard K/N`` for every K into one dataset.

    The result is identical, file for file and byte for byte, to a single run
    of the same config.  Every shard's journal and every image are checked
    against their digests before anything is written, so a missing or damaged
    shard leaves ``out`` as it was (a failed copy removes what it copied),
    and the same merge works once the shard is repaired.

    Parameters
    ----------
    dirs : sequence of Path
        Directories holding shard outputs; one directory may hold several
        shards (array jobs writing to a shared directory).
    out : Path or None
        Output directory; None merges in place into ``dirs[0]`` (which must then
        be the only directory).  ``out`` may be one of ``dirs``.
    overwrite : bool
        Replace a dataset in a non-empty ``out`` that is not one of ``dirs``.

    Raises
    ------
    UserError
        Missing, repeated or mismatched shards, a damaged image or journal, or
        an output directory that may not be written.
    """
    start = time.perf_counter()
    dirs = [Path(d) for d in dirs]
    if not dirs:
        raise UserError("merge needs at least one shard directory")
    if out is None:
        if len(dirs) > 1:
            raise UserError("option '--out' is needed to merge more than one directory (or give one shared directory)")
        out = dirs[0]
    out = Path(out)
    found = _collect_shards(dirs)
    _check_shards(found)
    config = build(Config, found[0].manifest["config"])
    libraries = found[0].manifest.get("versions") or {}
    if libraries.get("synthgen") != __version__:
        raise UserError(
            f"{shard_manifest_path(found[0].directory, found[0].shard)}: was made by synthgen "
            f"{libraries.get('synthgen')}, this is {__version__}; merge with the version that made the shards"
        )
    in_place = {d.resolve() for d in dirs}
    clear = []
    if out.exists() and out.resolve() not in in_place:
        if out.is_file():
            raise UserError(f"{out}: output path is a file, not a directory")
        if _entries(out):
            if not overwrite:
                raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its dataset)")
            clear = _earlier_run_paths(out)  # refuses files the earlier run did not write
    store = RecordStore(config.count)
    try:
        copies = _check_shard_files(found, config, store, out)  # every shard, before anything is written
        _remove(clear)
        _copy_all(copies, out)
    except OSError as exc:
        store.close()
        raise _write_error(exc, out) from None
    except BaseException:
        store.close()
        raise
    n_objects, dropped, ignored = finish_dataset(config, out, store, libraries)
    return MakeSummary(out, config.count, n_objects, dropped, time.perf_counter() - start, ignored=ignored)


def _check_shard_files(found: list[_ShardInput], config: Config, store: RecordStore, out: Path) -> list[tuple]:
    """Load every shard's journal into ``store`` and check every file against its digest.

    Returns the ``(source, relative path, digest, shard)`` of each file to copy into ``out``
    (none for shards already in ``out``).
    """
    copies = []
    for s in found:
        journal = s.directory / s.manifest["journal"]["path"]
        if sha256_file(journal) != s.manifest["journal"].get("sha256"):
            raise InputFileError(journal, f"journal of shard {s.shard.tag} is missing or damaged "
                                 f"(rerun make --shard {s.shard.index}/{s.shard.count} --resume there)")
        store.load_journal(journal, wanted=s.shard.indices(config.count))
        lacking = store.missing(s.shard.indices(config.count))
        if lacking:
            raise InputFileError(journal, f"has no record of image {lacking[0]} (shard {s.shard.tag} unfinished?)")
        same = out.exists() and s.directory.resolve() == out.resolve()
        for k in s.shard.indices(config.count):
            header, _ = store.read(k)
            for rel, digest in header["files"].items():
                if sha256_file(s.directory / rel) != digest:
                    raise _damaged_shard_file(s.directory / rel, s.shard)
                if not same:
                    copies.append((s.directory / rel, rel, digest, s.shard))
    return copies


def _copy_all(copies: list[tuple], out: Path) -> None:
    """Copy the checked shard files into ``out``; on any failure remove what was copied, so ``out`` is as it was."""
    made = [d for d in (out, out / IMAGES_DIR) if not d.exists()]
    written = []
    try:
        make_output_dir(out / IMAGES_DIR)
        for src, rel, digest, shard in copies:
            data = src.read_bytes()
            if hashlib.sha256(data).hexdigest() != digest:  # changed since it was checked
                raise _damaged_shard_file(src, shard)
            write_unsynced(out / rel, data)
            written.append(out / rel)
    except BaseException:
        for path in written:
            path.unlink(missing_ok=True)
        for d in reversed(made):
            with contextlib.suppress(OSError):
                d.rmdir()
        raise


def _damaged_shard_file(path: Path, shard: Shard) -> InputFileError:
    return InputFileError(path, f"is missing or damaged (rerun make --shard {shard.index}/{shard.count} --resume "
                          "in its directory)")
