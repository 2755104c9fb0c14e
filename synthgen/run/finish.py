"""The end of a run: ``annotations.json`` streamed from the journal, further formats, the manifest last.

A whole run (:func:`finish_dataset`) writes the COCO file in index order, the formats and split
asked for, then ``manifest.json``, and removes its ``.synthgen/`` state; a shard
(:func:`finish_shard`) writes only its shard manifest, which :mod:`synthgen.run.merge` reads.
Nothing written here depends on how the work was split or when it ran.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import orjson

from synthgen import __version__
from synthgen._io import sha256_file
from synthgen.config import Config, to_dict
from synthgen.formats.coco import assemble_coco, coco_categories, read_coco
from synthgen.formats.dataset_dir import ANNOTATIONS, FORMAT_ENTRIES, MANIFEST
from synthgen.formats.export import write_formats
from synthgen.run.journal import (
    RecordStore,
    Shard,
    journal_path,
    remove_state,
    shard_manifest_path,
    write_coco_streamed,
)
from synthgen.run.outdir import remove_temporaries, write_error, write_small
from synthgen.run.render import versions
from synthgen.scene import category_id

__all__ = [
    "MakeSummary",
    "categories",
    "coco_info",
    "build_coco",
    "build_manifest",
    "finish_dataset",
    "finish_shard",
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


def dump_manifest(manifest: dict) -> bytes:
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
        write_small(out / MANIFEST, dump_manifest(manifest))
    except OSError as exc:
        raise write_error(exc, out) from None
    finally:
        store.close()
    remove_state(out)
    remove_temporaries(out)
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


def finish_shard(config: Config, out: Path, shard: Shard, store: RecordStore) -> tuple[int, dict]:
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
        write_small(shard_manifest_path(out, shard), dump_manifest(manifest))
    except OSError as exc:
        raise write_error(exc, out) from None
    remove_temporaries(out)
    return n_objects, dropped, ignored
