"""Journals, shards, resume and merge: how a run's work is recorded and put back together.

A run keeps its progress under ``DIR/.synthgen/``::

    DIR/.synthgen/run.json          the resolved config and library versions the run was started with
    DIR/.synthgen/K-of-N.journal    one record per finished image of shard K of N, appended as images finish
    DIR/shard-K-of-N.json           shard manifest, written when shard K of N is complete

A whole run is shard 0 of 1: when it is complete its records are assembled into
``annotations.json`` and ``manifest.json`` and the ``.synthgen`` directory is
removed, so a finished dataset holds only ``images/``, ``annotations.json`` and
``manifest.json``.  Shard ``K`` of ``N`` holds the images whose 0-based index
``k`` has ``k % N == K`` (round robin, so every shard gets a similar mix and
size); :func:`synthgen.run.merge.merge_shards` assembles the shards into the dataset a single run
writes, byte for byte.

Journal record
--------------
One line per image: ``HEADER \\t PAYLOAD \\n``.  ``HEADER`` is compact JSON
``{"index": k, "files": {relative path: sha256}, "dropped": {...}, "ignored": n, "lens": [...]}``
(``ignored``: how many of the annotations are ignore regions, ``iscrowd`` 1);
``PAYLOAD`` is the image's COCO image record followed by its annotation records
(without ``id`` and ``image_id``), each as compact JSON, with byte lengths
``lens``.  Compact JSON from orjson escapes every control character, so neither
tab nor newline occurs inside a header or payload.  A line that is cut short
(the run was killed while appending it) fails the length check and is ignored.

The annotation file is streamed from the records in index order, inserting
``"id"`` and ``"image_id"`` in front of each stored annotation, so memory does
not grow with the number of images and the bytes equal ``orjson.dumps`` of the
whole COCO dict (:func:`synthgen.formats.coco.assemble_coco`).
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import orjson

from synthgen._io import AtomicWriter, named_os_errors, sha256_file
from synthgen.errors import InputFileError, OutputWriteError, UserError
from synthgen.formats.dataset_dir import STATE_DIR

__all__ = [
    "Shard",
    "parse_shard",
    "STATE_DIR",
    "RUN_RECORD",
    "state_dir",
    "journal_path",
    "shard_manifest_path",
    "find_shard_manifests",
    "encode_record",
    "decode_record",
    "RecordStore",
    "AtomicWriter",
    "write_coco_streamed",
    "known_records",
    "append_records",
    "verify_kept",
    "remove_state",
    "sha256_file",
    "OutputWriteError",
]

#: The run record inside :data:`STATE_DIR`.
RUN_RECORD = "run.json"

_SHARD_TEXT = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")
_SHARD_FILE = re.compile(r"^shard-(\d+)-of-(\d+)\.json$")
_JSON = orjson.OPT_SERIALIZE_NUMPY


@dataclass(frozen=True, slots=True)
class Shard:
    """Shard ``index`` of ``count``: the images whose index ``k`` has ``k % count == index``.

    Examples
    --------
    >>> list(Shard(1, 3).indices(8))
    [1, 4, 7]
    >>> Shard().tag
    '0-of-1'
    """

    index: int = 0
    count: int = 1

    def __post_init__(self):
        if not (isinstance(self.count, int) and self.count >= 1 and isinstance(self.index, int)
                and 0 <= self.index < self.count):
            raise UserError(
                f"option '--shard' must be K/N with whole numbers 0 <= K < N (got {self.index}/{self.count})"
            )

    @property
    def whole(self) -> bool:
        """True for the one shard that is the whole run."""
        return self.count == 1

    @property
    def tag(self) -> str:
        """``"K-of-N"``, used in file names."""
        return f"{self.index}-of-{self.count}"

    def indices(self, n_images: int) -> range:
        """Image indices of this shard in a run of ``n_images``."""
        return range(self.index, n_images, self.count)


def parse_shard(text: str) -> Shard:
    """Parse ``--shard K/N``.

    Examples
    --------
    >>> parse_shard("2/4")
    Shard(index=2, count=4)
    >>> parse_shard("4/4")
    Traceback (most recent call last):
    ...
    synthgen.errors.UserError: option '--shard' must be K/N with whole numbers 0 <= K < N (got '4/4')
    """
    m = _SHARD_TEXT.match(text or "")
    if m is None or not int(m.group(1)) < int(m.group(2)):
        raise UserError(f"option '--shard' must be K/N with whole numbers 0 <= K < N (got {text!r})")
    return Shard(int(m.group(1)), int(m.group(2)))


def state_dir(out: Path) -> Path:
    """``DIR/.synthgen``: where an unfinished run keeps its progress."""
    return Path(out) / STATE_DIR


def journal_path(out: Path, shard: Shard) -> Path:
    """Journal of ``shard`` in ``out``."""
    return state_dir(out) / f"{shard.tag}.journal"


def shard_manifest_path(out: Path, shard: Shard) -> Path:
    """Shard manifest of ``shard`` in ``out``."""
    return Path(out) / f"shard-{shard.tag}.json"


def find_shard_manifests(out: Path) -> list[tuple[Shard, Path]]:
    """Shard manifests ``shard-K-of-N.json`` at the top of ``out``, sorted by (N, K)."""
    found = []
    if Path(out).is_dir():
        for p in Path(out).iterdir():
            m = _SHARD_FILE.match(p.name)
            if m and int(m.group(1)) < int(m.group(2)):
                found.append((Shard(int(m.group(1)), int(m.group(2))), p))
    return sorted(found, key=lambda sp: (sp[0].count, sp[0].index))


# --------------------------------------------------------------------------- records


def encode_record(index: int, files: dict, dropped: dict, image: dict, annotations: list[dict]) -> bytes:
    """One journal line for image ``index``.

    Parameters
    ----------
    index : int
        0-based image index.
    files : dict
        ``{path relative to DIR: sha256 hex}`` of the files written for this image.
    dropped : dict
        ``{reason: count}`` of objects not annotated.
    image : dict
        The COCO image record.
    annotations : list of dict
        COCO annotation records without ``id`` and ``image_id``.

    Returns
    -------
    bytes
        ``HEADER \\t PAYLOAD \\n`` (see the module docstring).
    """
    parts = [orjson.dumps(image, option=_JSON)] + [orjson.dumps(a, option=_JSON) for a in annotations]
    ignored = sum(1 for a in annotations if a.get("iscrowd") == 1)
    header = {"index": int(index), "files": files, "dropped": dropped, "ignored": ignored, "lens": [len(p) for p in parts]}
    return orjson.dumps(header, option=_JSON) + b"\t" + b"".join(parts) + b"\n"


def decode_record(line: bytes) -> tuple[dict, list[bytes]] | None:
    """Split a journal line into its header and its JSON fragments (None if damaged).

    Returns
    -------
    (header, fragments)
        ``fragments[0]`` is the image record, the rest its annotations.
    """
    if not line.endswith(b"\n"):
        return None
    tab = line.find(b"\t")
    if tab < 0:
        return None
    try:
        header = orjson.loads(line[:tab])
        lens = header["lens"]
        index = header["index"]
    except (orjson.JSONDecodeError, KeyError, TypeError):
        return None
    if not (isinstance(index, int) and isinstance(lens, list) and lens):
        return None
    fragments, at = [], tab + 1
    try:
        if sum(lens) != len(line) - tab - 2:
            return None
        for n in lens:
            fragments.append(line[at : at + n])
            at += n
    except TypeError:  # a length that is not a whole number
        return None
    return header, fragments


class RecordStore:
    """Where each image's journal record lies, for a run of ``n_images``.

    Holds three integers per image (journal, offset, length), so it stays
    small for millions of images; records are read back from the journals
    when the annotation file is written.

    Parameters
    ----------
    n_images : int
        Number of images of the whole run (``config.count``).
    """

    def __init__(self, n_images: int):
        self.n_images = n_images
        self._src = np.full(n_images, -1, dtype=np.int32)
        self._off = np.zeros(n_images, dtype=np.int64)
        self._len = np.zeros(n_images, dtype=np.int64)
        self._paths: list[Path] = []
        self._files: dict[int, int] = {}

    # -- building
    def _source(self, path: Path) -> int:
        path = Path(path)
        if path in self._paths:
            return self._paths.index(path)
        self._paths.append(path)
        return len(self._paths) - 1

    def add(self, path: Path, index: int, offset: int, length: int) -> None:
        """Note that image ``index``'s record is ``length`` bytes at ``offset`` of journal ``path``."""
        src = self._source(path)
        self._src[index], self._off[index], self._len[index] = src, offset, length

    def load_journal(self, path: Path, wanted: range | None = None) -> int:
        """Index every complete record of journal ``path`` (later records of an index win).

        Parameters
        ----------
        wanted : range or None
            Keep only records of these indices (None: all within the run).

        Returns
        -------
        int
            Byte offset just past the last complete record (where appending may resume).
        """
        path = Path(path)
        end = 0
        offset = 0
        with open(path, "rb") as f:
            for line in f:
                length = len(line)
                rec = decode_record(line)
                if rec is not None:
                    k = rec[0]["index"]
                    if 0 <= k < self.n_images and (wanted is None or k in wanted):
                        self.add(path, k, offset, length)
                    end = offset + length
                offset += length
        return end

    def forget(self, index: int) -> None:
        """Drop image ``index``'s record (its files are damaged)."""
        self._src[index] = -1

    # -- querying
    def has(self, index: int) -> bool:
        """True when image ``index`` has a record."""
        return bool(self._src[index] >= 0)

    def missing(self, indices) -> list[int]:
        """The indices among ``indices`` without a record, in order."""
        idx = np.asarray(list(indices), dtype=np.int64)
        return idx[self._src[idx] < 0].tolist() if idx.size else []

    def read(self, index: int) -> tuple[dict, list[bytes]]:
        """Header and fragments of image ``index``'s record."""
        src = int(self._src[index])
        if src < 0:
            raise KeyError(index)
        fd = self._files.get(src)
        if fd is None:
            fd = self._files[src] = os.open(self._paths[src], os.O_RDONLY)
        # pread, not a buffered reader: a journal may be truncated and appended to while it is open.
        rec = decode_record(os.pread(fd, int(self._len[index]), int(self._off[index])))
        if rec is None:
            raise InputFileError(self._paths[src], f"journal record of image {index} is damaged")
        return rec

    def close(self) -> None:
        """Close the journals opened for reading."""
        for fd in self._files.values():
            os.close(fd)
        self._files.clear()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


# --------------------------------------------------------------------------- writing


def write_coco_streamed(path: Path, store: RecordStore, indices, *, info: dict, categories: list[dict]):
    """Write the COCO file of images ``indices`` from their journal records, atomically.

    The bytes equal ``orjson.dumps({"info": info, "images": [...],
    "annotations": [...], "categories": categories})`` with image records in
    the order of ``indices`` and annotation ids 1, 2, ... in that order.

    Parameters
    ----------
    path : Path
        Output file, e.g. ``DIR/annotations.json``.
    store : RecordStore
        Holds a record for every index in ``indices``.
    indices : sequence of int
        Images to include, in output order.

    Returns
    -------
    (n_objects, sha256 hex, dropped, files, ignored)
        Number of objects (annotations with ``iscrowd`` 0), digest of the
        file, ``{reason: count}`` summed in index order, ``{relative path:
        sha256}`` of the images' files, and the number of ignore regions
        (annotations with ``iscrowd`` 1).
    """
    dropped: dict[str, int] = {}
    files: dict[str, str] = {}
    ignored = 0
    with AtomicWriter(path) as w:
        w.write(b'{"info":' + orjson.dumps(info, option=_JSON) + b',"images":[')
        for i, k in enumerate(indices):
            header, fragments = store.read(k)
            w.write(fragments[0] if i == 0 else b"," + fragments[0])
            for reason, n in header["dropped"].items():
                dropped[reason] = dropped.get(reason, 0) + n
            ignored += header.get("ignored", 0)
            files.update(header["files"])
        w.write(b'],"annotations":[')
        next_id = 1
        for k in indices:
            _, fragments = store.read(k)
            if len(fragments) == 1:
                continue
            image_id = orjson.loads(fragments[0])["id"]
            chunk = []
            for frag in fragments[1:]:
                # '{"id":N,"image_id":M,' + the stored object without its opening brace
                chunk.append(b'{"id":%d,"image_id":%d,%s' % (next_id, image_id, frag[1:]))
                next_id += 1
            w.write((b"," if next_id - 1 > len(chunk) else b"") + b",".join(chunk))
        n_objects = next_id - 1 - ignored
        w.write(b'],"categories":' + orjson.dumps(categories, option=_JSON) + b"}")
    return n_objects, w.sha256.hexdigest(), dropped, files, ignored


def remove_state(out: Path) -> None:
    """Remove an unfinished run's progress (``.synthgen/`` and shard manifests) from ``out``."""
    for _, p in find_shard_manifests(out):
        p.unlink()
    shutil.rmtree(state_dir(out), ignore_errors=True)


# --------------------------------------------------------------------------- a run's journal


def known_records(n_images: int, out: Path, shard: Shard, *, resume_from: bool) -> tuple[RecordStore, int]:
    """Records already in ``out``'s journals, and where this shard's journal may be appended to.

    A whole run may also use the records of earlier shard runs in the same directory.
    """
    store = RecordStore(n_images)
    journal = journal_path(out, shard)
    end = 0
    if resume_from:
        mine = shard.indices(n_images)
        if shard.whole:
            for other in sorted(state_dir(out).glob("*.journal")):
                if other != journal:
                    store.load_journal(other, wanted=mine)
        if journal.exists():
            end = store.load_journal(journal, wanted=mine)
    return store, end


def append_records(journal: Path, end: int, results, store: RecordStore, report) -> None:
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


def _write_all(raw, data: bytes) -> None:
    """Write all of ``data`` to an unbuffered file (a raw write may take only part)."""
    view = memoryview(data)
    while view:
        view = view[raw.write(view):]


def verify_kept(out: Path, store: RecordStore, indices) -> int:
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
