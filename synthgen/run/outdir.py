"""The output directory's rules: what a run may write into, what ``--overwrite`` removes, and how it writes.

A run writes into an empty directory, continues its own unfinished run (``resume``), or
replaces what an earlier run wrote (``overwrite``), and nothing else: a directory made from
another config is refused naming the keys that differ, and a file the earlier run did not
write is never removed.  Small files (manifest, run record) are written atomically; a failed
write becomes one :class:`~synthgen.errors.OutputWriteError` naming the file.
"""

from __future__ import annotations

import fnmatch
import shutil
from pathlib import Path, PurePosixPath

import orjson

from synthgen._io import named_os_errors, write_atomic
from synthgen.config import Config, to_dict
from synthgen.errors import InputFileError, OutputWriteError, UserError, make_output_dir
from synthgen.formats.dataset_dir import ANNOTATIONS, FORMAT_DIRS, FORMAT_ENTRIES, IMAGES_DIR, MANIFEST, OUTPUT_ENTRIES
from synthgen.run.journal import (
    RUN_RECORD,
    STATE_DIR,
    Shard,
    decode_record,
    find_shard_manifests,
    journal_path,
    shard_manifest_path,
    state_dir,
)
from synthgen.run.render import versions

__all__ = [
    "prepare_output",
    "dir_entries",
    "earlier_run_paths",
    "remove_paths",
    "remove_temporaries",
    "write_small",
    "write_error",
    "read_record",
    "config_differences",
    "describe_differences",
]


def _run_record(config: Config) -> dict:
    return {"tool": "synthgen", "config": to_dict(config), "versions": versions()}


def dir_entries(out: Path) -> list[str]:
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
    entries = dir_entries(out)
    if entries and overwrite:
        _clear(out)
        entries = []
    state = _state_of(out, config, shard, entries, resume=resume) if entries else "new"
    make_output_dir(out)  # a path that cannot be a directory is bad input, found before any work
    try:
        (out / IMAGES_DIR).mkdir(exist_ok=True)
        state_dir(out).mkdir(exist_ok=True)
        run_file = state_dir(out) / RUN_RECORD
        if not run_file.exists():
            write_small(run_file, orjson.dumps(_run_record(config), option=orjson.OPT_INDENT_2))
    except OSError as exc:
        raise write_error(exc, out) from None
    return state


def _state_of(out: Path, config: Config, shard: Shard, entries: list[str], *, resume: bool) -> str:
    """What non-empty ``out`` is to this run (see :func:`prepare_output`); ``"new"``: other shards' work only."""
    what = _earlier_run(out, to_dict(config), entries)
    own_journal = journal_path(out, shard).exists() or shard_manifest_path(out, shard).exists()
    if what == "a finished dataset":
        if not resume:
            raise UserError(
                f"{out}: output directory is not empty: it holds a finished dataset of this config "
                "(pass --resume to check and repair it, or --overwrite to write it again)"
            )
        return "finished"
    if resume:
        return "unfinished"
    if own_journal or shard.whole:
        raise UserError(
            f"{out}: output directory is not empty: it holds an unfinished run of this config "
            "(pass --resume to continue it, or --overwrite to start again)"
        )
    return "new"


def _earlier_run(out: Path, here: dict, entries: list[str]) -> str:
    """What non-empty ``out`` holds, ``"a finished dataset"`` or ``"an unfinished run"``, of config ``here``.

    Raises a UserError for anything else: another config (naming the keys), another run's
    library versions, files of someone else's, or no sign of a run.
    """
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
    return what


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
    data = read_record(path, what)
    if not isinstance(data.get("config"), dict):
        raise InputFileError(path, f"{what} has no 'config' table (not written by synthgen?)")
    return data


def _clear(out: Path) -> None:
    """Remove what an earlier run wrote in ``out``, and nothing else (see :func:`earlier_run_paths`)."""
    remove_paths(earlier_run_paths(out))


def earlier_run_paths(out: Path) -> list[Path]:
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


def remove_paths(paths: list[Path]) -> None:
    """Remove these files and folders, in order."""
    for path in paths:
        if path.is_dir():
            shutil.rmtree(path)
        else:
            path.unlink(missing_ok=True)


def _files_of_earlier_run(out: Path) -> set[str]:
    """Paths relative to ``out`` that the manifest, the journals and the shard manifests in ``out`` list.

    Includes those bookkeeping files themselves, and the temporary names of images being written.
    """
    owned: set[str] = set()
    listings = [out / MANIFEST] + [p for _, p in find_shard_manifests(out)]
    for path in listings:
        if path.is_file():
            files = read_record(path, "manifest").get("files")
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


def remove_temporaries(out: Path) -> None:
    images = Path(out) / IMAGES_DIR
    if images.is_dir():
        for p in images.glob(".*.tmp"):
            p.unlink(missing_ok=True)


def write_small(path: Path, data: bytes) -> None:
    """Write a manifest or run record atomically (temp file, fsync, rename); errors name ``path``."""
    with named_os_errors(path):
        write_atomic(path, data)


def write_error(exc: OSError, out: Path) -> OutputWriteError:
    return OutputWriteError(exc.filename or out, exc.strerror or str(exc))


def read_record(path: Path, what: str) -> dict:
    """Read a JSON object written by synthgen; errors name the file."""
    try:
        data = orjson.loads(Path(path).read_bytes())
    except FileNotFoundError:
        raise InputFileError(path, f"{what} does not exist") from None
    except OSError as exc:
        raise InputFileError(path, f"{what} cannot be read ({exc.strerror})") from None
    except orjson.JSONDecodeError:
        raise InputFileError(path, f"{what} is not valid JSON (damaged?)") from None
    if not isinstance(data, dict):
        raise InputFileError(path, f"{what} is not a JSON object")
    return data


def _flatten(tree, prefix: str = "") -> dict:
    flat = {}
    if isinstance(tree, dict):
        for key, value in tree.items():
            flat.update(_flatten(value, f"{prefix}{key}."))
    else:
        flat[prefix.rstrip(".")] = tree
    return flat


def config_differences(a: dict, b: dict) -> list[str]:
    """Dotted keys whose values differ between two config dicts (as :func:`synthgen.config.to_dict` gives).

    Examples
    --------
    >>> config_differences({"seed": 1, "canvas": {"width": 4, "height": 3}}, {"seed": 1, "canvas": {"width": 5, "height": 3}})
    ['canvas.width']
    """
    fa, fb = _flatten(a), _flatten(b)
    return sorted(k for k in set(fa) | set(fb) if fa.get(k, object) != fb.get(k, object))


def describe_differences(there: dict, here: dict, limit: int = 4) -> str:
    """``"canvas.width (160 there, 320 here), seed (1 there, 2 here)"``, at most ``limit`` keys."""
    fa, fb = _flatten(there), _flatten(here)
    keys = config_differences(there, here)
    shown = [f"{k} ({_short(fa.get(k, '<unset>'))} there, {_short(fb.get(k, '<unset>'))} here)" for k in keys[:limit]]
    if len(keys) > limit:
        shown.append(f"and {len(keys) - limit} more")
    return ", ".join(shown)


def _short(v) -> str:
    text = orjson.dumps(v).decode() if not isinstance(v, str) else repr(v)
    return text if len(text) <= 30 else text[:27] + "..."
