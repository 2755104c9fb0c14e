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
   :func:`synthgen.shards.encode_record`) is appended to the run's journal and
   flushed as each block finishes.
3. :func:`finish_dataset` streams ``annotations.json`` from the journal in index
   order (:func:`synthgen.shards.write_coco_streamed`), writes ``manifest.json``,
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
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from itertools import islice
from pathlib import Path

import numpy as np
import orjson

from synthgen import __version__
from synthgen.config import Config, build, to_dict
from synthgen.errors import InputFileError, UserError
from synthgen.formats import rle
from synthgen.formats.coco import bbox_from_xyxy, read_coco, write_bytes_atomic
from synthgen.formats.export import parse_formats, write_formats
from synthgen.formats.splits import check_fractions
from synthgen.formats.images import EXTENSIONS, encode_image
from synthgen.scene import Scene, category_id, render_scene
from synthgen.shards import (
    RUN_RECORD,
    STATE_DIR,
    OutputWriteError,
    RecordStore,
    Shard,
    describe_differences,
    encode_record,
    find_shard_manifests,
    journal_path,
    read_json,
    remove_state,
    sha256_file,
    shard_manifest_path,
    state_dir,
    write_coco_streamed,
)

__all__ = [
    "MakeSummary",
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
    "OUTPUT_ENTRIES",
]

#: What a run writes at the top of its directory (``--overwrite`` removes only these and shard manifests).
OUTPUT_ENTRIES = ("images", "annotations.json", "manifest.json", ".synthgen")
#: What ``formats`` and ``split`` add (glob patterns; ``--overwrite`` removes these too).
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

MANIFEST_VERSION = 1


@dataclass(frozen=True, slots=True)
class MakeSummary:
    """What a run wrote.

    ``images`` counts the images of this run (of its shard); ``kept`` how many
    of them a resumed run found intact and did not render again.
    """

    out: Path
    images: int
    objects: int
    dropped: dict
    seconds: float
    kept: int = 0
    shard: Shard = field(default_factory=Shard)

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


# --------------------------------------------------------------------------- one image


def scene_annotations(scene: Scene, height: int, width: int) -> list[dict]:
    """COCO annotation records (without ``id`` and ``image_id``) for a scene's objects."""
    bboxes = bbox_from_xyxy(scene.boxes)
    segmentations = rle.encode_patches(scene.masks, height, width)  # all masks in one pass
    return [
        {
            "category_id": category,
            "bbox": bbox,
            "area": area,
            "iscrowd": 0,
            "segmentation": segmentation,
            "synthgen": facts,
        }
        for category, bbox, area, segmentation, facts in zip(
            scene.categories.tolist(), bboxes, scene.areas.tolist(), segmentations, scene.facts
        )
    ]


def write_file_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` under a temporary name in the same directory, then rename.

    No fsync: a killed process cannot leave a truncated file under ``path``, and
    damage from a power cut is caught by the digests on ``--resume``.
    """
    tmp = path.parent / f".{path.name}.tmp"
    try:
        with _naming(path):
            tmp.write_bytes(data)
            os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)  # give back the space of a partial file
        raise


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
        write_file_atomic(Path(images_dir) / name, data)
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
    images_dir = Path(out) / "images"
    return [journal_line(render_image_record(config, k, images_dir), k) for k in indices]


# --------------------------------------------------------------------------- the COCO file and manifest


def categories(config: Config) -> list[dict]:
    """COCO categories of the configured shape kinds, in canonical order with stable ids."""
    kinds = sorted(config.objects.shapes, key=category_id)
    return [{"id": category_id(k), "name": k, "supercategory": "shape"} for k in kinds]


def coco_info(config: Config) -> dict:
    """The COCO ``info`` record."""
    return {"description": "synthgen dataset", "version": __version__, "seed": config.seed}


def build_coco(config: Config, records) -> dict:
    """Assemble the COCO dict from per-image records in index order; ids start at 1.

    The in-memory reference for :func:`synthgen.shards.write_coco_streamed`,
    which writes the same bytes without holding every record.
    """
    images, annotations = [], []
    next_id = 1
    for rec in records:
        images.append(rec["image"])
        for ann in rec["annotations"]:
            annotations.append({"id": next_id, "image_id": rec["image"]["id"], **ann})
            next_id += 1
    return {"info": coco_info(config), "images": images, "annotations": annotations, "categories": categories(config)}


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
) -> dict:
    """The manifest dict; nothing in it depends on how the work was split or when it ran.

    ``libraries`` are the versions that rendered the images (default: this process's);
    ``outputs`` the formats and split written (default: COCO JSON only).
    """
    return {
        "tool": "synthgen",
        "manifest_version": MANIFEST_VERSION,
        "seed": config.seed,
        "config": to_dict(config),
        "versions": versions() if libraries is None else libraries,
        "counts": {"images": config.count, "objects": n_objects, "dropped": dropped},
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
    (n_objects, dropped)
    """
    out = Path(out)
    try:
        n_objects, digest, dropped, files = write_coco_streamed(
            out / "annotations.json", store, range(config.count), info=coco_info(config), categories=categories(config)
        )
        files["annotations.json"] = digest
        extra = [f for f in formats if f != "coco"]
        if extra or split:
            write_formats(read_coco(out / "annotations.json"), out, extra, split=split, seed=config.seed)
            files.update(_format_digests(out))
        outputs = {"formats": ["coco", *extra], "split": dict(split) if split else None}
        manifest = build_manifest(config, n_objects, dropped, files, libraries, outputs)
        _write_small(out / "manifest.json", _dump_manifest(manifest))
    except OSError as exc:
        raise _write_error(exc, out) from None
    finally:
        store.close()
    remove_state(out)
    _remove_temporaries(out)
    return n_objects, dropped


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
        manifest_file = out / "manifest.json"
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
    try:
        (out / "images").mkdir(parents=True, exist_ok=True)
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
    """Remove what an earlier run wrote; the manifest first, so an interrupted clear never looks finished."""
    paths = [out / e for e in ("manifest.json", "annotations.json", ".synthgen", "images")]
    paths += [p for pattern in FORMAT_ENTRIES for p in sorted(out.glob(pattern))]
    for path in paths:
        if path.is_dir():
            shutil.rmtree(path)
        elif path.exists():
            path.unlink()
    remove_state(out)


def _remove_temporaries(out: Path) -> None:
    images = Path(out) / "images"
    if images.is_dir():
        for p in images.glob(".*.tmp"):
            p.unlink(missing_ok=True)


def _write_small(path: Path, data: bytes) -> None:
    """Write a manifest or run record atomically (temp file, fsync, rename); errors name ``path``."""
    with _naming(path):
        write_bytes_atomic(path, data)


def _write_all(raw, data: bytes) -> None:
    """Write all of ``data`` to an unbuffered file (a raw write may take only part)."""
    view = memoryview(data)
    while view:
        view = view[raw.write(view):]


@contextlib.contextmanager
def _naming(path: Path):
    """Attach ``path`` to an OSError raised without a file name (e.g. by a buffered write)."""
    try:
        yield
    except OSError as exc:
        if exc.filename:
            raise
        raise OSError(exc.errno, exc.strerror or str(exc), str(path)) from None


def _write_error(exc: OSError, out: Path) -> OutputWriteError:
    return OutputWriteError(exc.filename or out, exc.strerror or str(exc))


# --------------------------------------------------------------------------- running


_WORKER: tuple[Config, str] | None = None


def _exit_with(main_pid: int) -> None:
    """Exit this worker as soon as process ``main_pid`` (the run) is gone, e.g. after a SIGKILL.

    A pool worker holds both ends of its task pipe, so it would otherwise wait
    for work forever; a daemon thread watches the run's pidfd (or polls the pid).
    """
    import select
    import threading

    def watch():
        try:
            fd = os.pidfd_open(main_pid)
        except (AttributeError, OSError):
            fd = None
        if fd is not None:
            select.select([fd], [], [])
        else:
            while True:
                time.sleep(0.5)
                try:
                    os.kill(main_pid, 0)
                except ProcessLookupError:
                    break
                except PermissionError:
                    pass
        os._exit(1)

    threading.Thread(target=watch, name="synthgen-watch-run", daemon=True).start()


def _set_worker_state(config: Config, out: str, main_pid: int) -> None:
    global _WORKER
    import cv2

    _exit_with(main_pid)
    cv2.setNumThreads(1)
    _WORKER = (config, out)


def _pool_context():
    """Worker processes forked from a clean server process, not from this one.

    Forking a process that runs threads (OpenCV's pool, a Dask client) can copy a
    held lock into the child and deadlock it; the fork server has none.
    """
    import multiprocessing

    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(["synthgen.dataset"])
    return ctx


def _render_block_in_worker(indices: list[int]) -> list[bytes]:
    config, out = _WORKER
    return render_block(config, indices, out)


def blocks_of(indices: Sequence[int], size: int) -> list[list[int]]:
    """Split ``indices`` into consecutive blocks of at most ``size``."""
    indices = list(indices)
    return [indices[i : i + size] for i in range(0, len(indices), size)]


def _block_size(n: int, workers: int) -> int:
    return max(1, min(16, n // (workers * 4)))


def _run_local(config: Config, out: Path, blocks: list[list[int]], workers: int) -> Iterator[list[bytes]]:
    """Journal lines of each block, in order of completion, from ``workers`` processes."""
    if workers <= 1 or len(blocks) < 2:
        for block in blocks:
            yield render_block(config, block, out)
        return
    ctx = _pool_context()
    pool = ProcessPoolExecutor(
        max_workers=workers, mp_context=ctx, initializer=_set_worker_state,
        initargs=(config, str(out), os.getpid()),
    )
    todo = iter(blocks)
    try:
        # A bounded window of blocks in flight keeps memory flat for any number of images.
        pending = {pool.submit(_render_block_in_worker, b) for b in islice(todo, 4 * workers)}
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                lines = fut.result()
                nxt = next(todo, None)
                if nxt is not None:
                    pending.add(pool.submit(_render_block_in_worker, nxt))
                yield lines
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


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
        Processes to render with (None: every usable core).  The output does not
        depend on it.
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
        from synthgen import cluster as cluster_mod

        # Fails with an install hint before anything is written; a local cluster gets `workers` processes.
        backend = cluster_mod.connect(cluster, workers=workers)

    try:
        state = prepare_output(out, config, shard, overwrite=overwrite, resume=resume)
        if state == "finished":
            wanted = {"formats": ["coco", *[f for f in formats if f != "coco"]], "split": dict(split) if split else None}
            had = read_json(out / "manifest.json", "manifest").get("outputs", {"formats": ["coco"], "split": None})
            if had != wanted:
                raise UserError(
                    f"{out}: this finished dataset was written with formats {','.join(had['formats'])} and split "
                    f"{had['split']}, not {','.join(wanted['formats'])} and {wanted['split']}; "
                    "add formats with 'synthgen export', or pass --overwrite to write it again"
                )
            kept = _repair_finished(config, out)
            if kept is not None:
                counts = read_json(out / "manifest.json", "manifest")["counts"]
                return MakeSummary(out, counts["images"], counts["objects"], counts["dropped"],
                                   time.perf_counter() - start, kept=kept, shard=shard)
            # The annotations are damaged too: render every image again.
            (out / "manifest.json").unlink(missing_ok=True)
        mine = shard.indices(config.count)
        store, end = _known_records(config, out, shard, resume_from=state == "unfinished")
        kept = _verify_kept(out, store, mine)
        todo = store.missing(mine)
        blocks = blocks_of(todo, _block_size(len(todo), workers if backend is None else backend.workers))
        results = _run_local(config, out, blocks, workers) if backend is None else backend.run(config, out, blocks)
        report = None if progress is None else (lambda done: progress(kept + done, len(mine)))
        _append_records(journal_path(out, shard), end, results, store, report)
    except OSError as exc:
        raise _write_error(exc, out) from None
    finally:
        if backend is not None:
            backend.close()

    if shard.whole:
        n_objects, dropped = finish_dataset(config, out, store, formats=formats, split=split)
    else:
        n_objects, dropped = _finish_shard(config, out, shard, store)
    return MakeSummary(out, len(mine), n_objects, dropped, time.perf_counter() - start, kept=kept, shard=shard)


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
            with _naming(journal):
                for line in lines:
                    _write_all(jf, line)
                    store.add(journal, orjson.loads(line[: line.index(b"\t")])["index"], offset, len(line))
                    offset += len(line)
            done += len(lines)
            if report is not None:
                report(done)
        with _naming(journal):
            os.fsync(jf.fileno())


def _repair_finished(config: Config, out: Path) -> int | None:
    """Check a finished dataset against its manifest and re-render damaged images.

    Returns the number of images found intact, or None when the annotation file
    (or anything but images) is damaged, or a re-rendered image does not
    reproduce its recorded digest; the caller then renders the whole run again.
    """
    files = read_json(out / "manifest.json", "manifest").get("files")
    if not isinstance(files, dict):
        return None
    names = {f"images/{image_name(config, k)}": k for k in range(config.count)}
    bad = [rel for rel, digest in files.items() if sha256_file(out / rel) != digest]
    if any(rel not in names for rel in bad):
        return None
    for rel in bad:
        if render_image_record(config, names[rel], out / "images")["files"][rel] != files[rel]:
            return None
    remove_state(out)
    _remove_temporaries(out)
    return config.count - len(bad)


def _finish_shard(config: Config, out: Path, shard: Shard, store: RecordStore) -> tuple[int, dict]:
    """Write the shard manifest: config, versions, shard, counts, files, and the journal's digest."""
    n_objects, dropped, files = 0, {}, {}
    with store:
        for k in shard.indices(config.count):
            header, fragments = store.read(k)
            n_objects += len(fragments) - 1
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
        "counts": {"images": len(shard.indices(config.count)), "objects": n_objects, "dropped": dropped},
        "journal": {"path": journal.relative_to(out).as_posix(), "sha256": sha256_file(journal)},
        "files": dict(sorted(files.items())),
    }
    try:
        _write_small(shard_manifest_path(out, shard), _dump_manifest(manifest))
    except OSError as exc:
        raise _write_error(exc, out) from None
    _remove_temporaries(out)
    return n_objects, dropped


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
    of the same config.  Every image is checked against its shard's digest as
    it is copied (or, in place, read).

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
    if out.exists() and out.resolve() not in in_place:
        if out.is_file():
            raise UserError(f"{out}: output path is a file, not a directory")
        if _entries(out):
            if not overwrite:
                raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its dataset)")
            _clear(out)
    store = RecordStore(config.count)
    try:
        (out / "images").mkdir(parents=True, exist_ok=True)
        for s in found:
            journal = s.directory / s.manifest["journal"]["path"]
            if sha256_file(journal) != s.manifest["journal"].get("sha256"):
                raise InputFileError(journal, f"journal of shard {s.shard.tag} is missing or damaged "
                                     f"(rerun make --shard {s.shard.index}/{s.shard.count} --resume there)")
            store.load_journal(journal, wanted=s.shard.indices(config.count))
            lacking = store.missing(s.shard.indices(config.count))
            if lacking:
                raise InputFileError(journal, f"has no record of image {lacking[0]} (shard {s.shard.tag} unfinished?)")
            same = s.directory.resolve() == out.resolve()
            for k in s.shard.indices(config.count):
                header, _ = store.read(k)
                for rel, digest in header["files"].items():
                    _take_file(s.directory / rel, out / rel, digest, s.shard, copy=not same)
    except OSError as exc:
        store.close()
        raise _write_error(exc, out) from None
    n_objects, dropped = finish_dataset(config, out, store, libraries)
    return MakeSummary(out, config.count, n_objects, dropped, time.perf_counter() - start)


def _take_file(src: Path, dst: Path, digest: str, shard: Shard, *, copy: bool) -> None:
    try:
        data = src.read_bytes()
    except FileNotFoundError:
        data = None
    if data is None or hashlib.sha256(data).hexdigest() != digest:
        raise InputFileError(src, f"is missing or damaged (rerun make --shard {shard.index}/{shard.count} --resume "
                             "in its directory)")
    if copy:
        write_file_atomic(dst, data)
