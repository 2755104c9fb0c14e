"""Many images: render in workers, record progress, write images, COCO JSON and the manifest.

Output directory::

    DIR/images/000000.png ...    one file per image (name = 0-based index)
    DIR/annotations.json         COCO JSON; per-object facts under "synthgen"
    DIR/manifest.json            resolved config, seed, versions, counts, sha256 per file; written last

How a run goes (:func:`make_dataset`):

1. :func:`synthgen.run.outdir.prepare_output` checks ``DIR`` (refusing a directory made
   from another config, naming the keys that differ) and writes the run record
   ``DIR/.synthgen/run.json``.
2. Images are rendered in blocks of indices by a backend (:mod:`synthgen.run.backends`:
   worker processes or a Dask cluster).  Each image is written under a temporary name and
   renamed; its record (:func:`synthgen.run.render.render_image_record`, serialized by
   :func:`synthgen.run.journal.encode_record`) is appended to the run's journal and
   flushed as each block finishes.
3. :func:`synthgen.run.finish.finish_dataset` streams ``annotations.json`` from the journal
   in index order (:func:`synthgen.run.journal.write_coco_streamed`), writes ``manifest.json``,
   both atomically with fsync, and removes ``.synthgen/``.

Image ``k`` depends only on ``(config, k)``, so the output is byte-identical for
any number of workers, any shard split (:func:`synthgen.run.merge.merge_shards`), any
cluster and any resume point.  A run killed at any moment leaves no truncated file under a
final name, and ``resume=True`` keeps every image whose digest matches its
journal record and regenerates the rest.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from synthgen._io import sha256_file
from synthgen.config import Config
from synthgen.errors import UserError
from synthgen.formats.dataset_dir import IMAGES_DIR, MANIFEST
from synthgen.formats.export import parse_formats
from synthgen.formats.splits import check_fractions
from synthgen.run.backends import block_size, blocks_of, open_backend
from synthgen.run.finish import MakeSummary, finish_dataset, finish_shard
from synthgen.run.journal import (
    Shard,
    append_records,
    journal_path,
    known_records,
    remove_state,
    verify_kept,
)
from synthgen.run.outdir import prepare_output, read_record, remove_temporaries, write_error
from synthgen.run.pool import usable_cores
from synthgen.run.render import image_name, render_block, render_image_record

__all__ = ["MakeSummary", "DROP_KEYS", "drop_warning", "make_dataset"]


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
        Most processes to render with (None: every usable core); small runs render in this
        process (:class:`synthgen.run.backends.LocalBackend`).  Workers are fresh interpreters
        that import synthgen only (:mod:`synthgen.run.pool`), so a plain script needs no
        ``if __name__ == "__main__":`` guard.  The output does not depend on it.
    shard : Shard or None
        Render only this shard's images and write its shard manifest
        (``DIR/shard-K-of-N.json``); :func:`synthgen.run.merge.merge_shards` assembles them.
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
    formats, workers = _check_options(shard, workers, formats, split, overwrite=overwrite, resume=resume)
    backend = open_backend(cluster, workers)  # a cluster fails here, before anything is written
    try:
        state = prepare_output(out, config, shard, overwrite=overwrite, resume=resume)
        if state == "finished":
            summary = _resume_finished(config, out, shard, formats, split, start)
            if summary is not None:
                return summary
        store, kept = _render_missing(config, out, shard, backend, resumed=state == "unfinished", progress=progress)
    except OSError as exc:
        raise write_error(exc, out) from None
    finally:
        backend.close()

    if shard.whole:
        n_objects, dropped, ignored = finish_dataset(config, out, store, formats=formats, split=split)
    else:
        n_objects, dropped, ignored = finish_shard(config, out, shard, store)
    return MakeSummary(out, len(shard.indices(config.count)), n_objects, dropped, time.perf_counter() - start,
                       kept=kept, shard=shard, ignored=ignored)


def _check_options(shard: Shard, workers, formats, split, *, overwrite: bool, resume: bool) -> tuple[list, int]:
    """The formats and the number of workers, once the options are known to go together."""
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
    return formats, workers


def _resume_finished(config: Config, out: Path, shard: Shard, formats, split, start: float) -> MakeSummary | None:
    """Check and repair a finished dataset of this config; None when it must be rendered again."""
    wanted = {"formats": ["coco", *[f for f in formats if f != "coco"]], "split": dict(split) if split else None}
    had = read_record(out / MANIFEST, "manifest").get("outputs", {"formats": ["coco"], "split": None})
    if had != wanted:
        raise UserError(
            f"{out}: this finished dataset was written with formats {','.join(had['formats'])} and split "
            f"{had['split']}, not {','.join(wanted['formats'])} and {wanted['split']}; "
            "add formats with 'synthgen export', or pass --overwrite to write it again"
        )
    kept = _repair_finished(config, out)
    if kept is None:
        # The annotations are damaged too: render every image again.
        (out / MANIFEST).unlink(missing_ok=True)
        return None
    counts = read_record(out / MANIFEST, "manifest")["counts"]
    return MakeSummary(out, counts["images"], counts["objects"], counts["dropped"],
                       time.perf_counter() - start, kept=kept, shard=shard,
                       ignored=counts.get("ignored", 0))


def _render_missing(config: Config, out: Path, shard: Shard, backend, *, resumed: bool, progress):
    """Render this shard's images that have no intact record, journaling them; return the store and the kept count."""
    mine = shard.indices(config.count)
    if resumed:
        remove_temporaries(out)
    store, end = known_records(config.count, out, shard, resume_from=resumed)
    kept = verify_kept(out, store, mine)
    todo = store.missing(mine)
    blocks = blocks_of(todo, block_size(len(todo), backend.processes(len(todo))))
    results = backend.run(render_block, config, out, blocks)
    report = None if progress is None else (lambda done: progress(kept + done, len(mine)))
    append_records(journal_path(out, shard), end, results, store, report)
    return store, kept


def _repair_finished(config: Config, out: Path) -> int | None:
    """Check a finished dataset against its manifest and re-render damaged images.

    Returns the number of images found intact, or None when the annotation file
    (or anything but images) is damaged, or a re-rendered image does not
    reproduce its recorded digest; the caller then renders the whole run again.
    """
    files = read_record(out / MANIFEST, "manifest").get("files")
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
    remove_temporaries(out)
    return config.count - len(bad)
