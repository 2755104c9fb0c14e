"""Shards put back together: the outputs of ``make --shard K/N`` for every K become one dataset.

The result equals a single run of the same config byte for byte.  Every shard's journal and
image is checked against its digest before anything is written, so a missing or damaged
shard leaves the output directory as it was.
"""

from __future__ import annotations

import contextlib
import hashlib
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from synthgen import __version__
from synthgen._io import sha256_file, write_unsynced
from synthgen.config import Config, build
from synthgen.errors import InputFileError, UserError, make_output_dir
from synthgen.formats.dataset_dir import IMAGES_DIR
from synthgen.run.finish import MakeSummary, finish_dataset
from synthgen.run.journal import RecordStore, Shard, find_shard_manifests, shard_manifest_path
from synthgen.run.outdir import (
    describe_differences,
    dir_entries,
    earlier_run_paths,
    read_record,
    remove_paths,
    write_error,
)

__all__ = ["merge_shards"]


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
            m = read_record(path, "shard manifest")
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
        if dir_entries(out):
            if not overwrite:
                raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its dataset)")
            clear = earlier_run_paths(out)  # refuses files the earlier run did not write
    store = RecordStore(config.count)
    try:
        copies = _check_shard_files(found, config, store, out)  # every shard, before anything is written
        remove_paths(clear)
        _copy_all(copies, out)
    except OSError as exc:
        store.close()
        raise write_error(exc, out) from None
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
