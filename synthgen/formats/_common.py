"""Helpers shared by the format writers: grouping a COCO dict, staged output."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path, PurePosixPath

import numpy as np

from synthgen.errors import InputFileError

__all__ = [
    "annotations_by_image",
    "categories_in_order",
    "image_index",
    "pixel_box",
    "bad_record",
    "sidecar_name",
    "staged_dir",
    "staged_file",
    "publish_mode",
    "read_input",
    "read_input_text",
    "is_int",
    "is_number",
    "inside_dataset",
]


def bad_record(path, record: str, rule: str, value: object) -> InputFileError:
    """An :class:`InputFileError` that also carries ``record``, ``rule`` and ``value``.

    Readers raise it so that :mod:`synthgen.check` can report the parts apart.
    """
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    err = InputFileError(path, f"{record}: {rule} (got {text})" if record else f"{rule} (got {text})")
    err.record, err.rule, err.value = record, rule, value
    return err


def read_input(path) -> bytes:
    """The bytes of an input file; a missing or unreadable one is an :class:`InputFileError` naming it."""
    try:
        return Path(path).read_bytes()
    except OSError as e:
        raise InputFileError(path, f"cannot be read ({e.strerror or e})") from None


def read_input_text(path) -> str:
    """An input file as UTF-8 text (see :func:`read_input`); other encodings are an InputFileError too."""
    raw = read_input(path)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as e:
        raise InputFileError(path, f"cannot be read as UTF-8 text ({e.reason} at byte {e.start})") from None


def annotations_by_image(coco: dict) -> dict[int, list[dict]]:
    """Annotations of each image id, in the order they appear in the file."""
    out: dict[int, list[dict]] = {im["id"]: [] for im in coco["images"]}
    for a in coco["annotations"]:
        out.setdefault(a["image_id"], []).append(a)
    return out


def categories_in_order(coco: dict) -> list[dict]:
    """Categories sorted by id: the order of class indices in every format."""
    return sorted(coco["categories"], key=lambda c: c["id"])


def image_index(image: dict, position: int) -> int:
    """0-based image index ``k``: synthgen's own when recorded, else the position."""
    facts = image.get("synthgen")
    if isinstance(facts, dict) and is_int(facts.get("index")):
        return facts["index"]
    return position


def is_int(v) -> bool:
    """Whether a parsed JSON value is an integer (``true``/``false`` are not)."""
    return isinstance(v, int) and not isinstance(v, bool)


def is_number(v) -> bool:
    """Whether a parsed JSON value is a number (``true``/``false`` are not)."""
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def inside_dataset(file_name: str) -> bool:
    """Whether a ``file_name`` from a file is a relative path that stays inside the dataset.

    >>> inside_dataset("a/000001.png"), inside_dataset("../x.png"), inside_dataset("/etc/x.png")
    (True, False, False)
    """
    p = PurePosixPath(file_name.replace("\\", "/"))
    return not p.is_absolute() and ".." not in p.parts


def sidecar_name(file_name: str, suffix: str) -> str:
    """Per-image file name for another format: the image's path with ``suffix``.

    >>> sidecar_name("000012.png", ".xml")
    '000012.xml'
    """
    if not inside_dataset(file_name):
        raise InputFileError(file_name, "image file_name must be a relative path inside the dataset")
    return str(PurePosixPath(file_name.replace("\\", "/")).with_suffix(suffix))


def pixel_box(ann: dict) -> np.ndarray:
    """Pixel box (xyxy, integer-valued floats) of an annotation.

    synthgen's recorded ``synthgen.pixel_box`` when present; else the tight box
    of an RLE segmentation; else the COCO bbox rounded outwards to whole pixels
    (the pixels the box touches).
    """
    facts = ann.get("synthgen")
    if isinstance(facts, dict) and facts.get("pixel_box") is not None:
        return np.asarray(facts["pixel_box"], dtype=np.float64)
    seg = ann.get("segmentation")
    if isinstance(seg, dict) and "counts" in seg:
        from synthgen.formats import rle
        from synthgen.geometry import mask_box

        box = mask_box(rle.decode(seg))
        if box is not None:
            return box
    x, y, w, h = (float(v) for v in ann["bbox"])
    return np.array([np.floor(x), np.floor(y), np.ceil(x + w), np.ceil(y + h)], dtype=np.float64)


def _umask() -> int:
    mask = os.umask(0o022)  # reading the umask means setting it; put it straight back
    os.umask(mask)
    return mask


def publish_mode(path: Path, *, directory: bool = False) -> None:
    """Give a staged temporary file or directory the permissions of a plain one.

    ``tempfile`` creates its files 0600 and directories 0700 (private to the
    owner); a dataset is meant to be read by others, so before the rename the
    staged path gets ``0666`` (``0777`` for a directory) less the umask, what
    ``open()`` or ``mkdir()`` would have given it.
    """
    os.chmod(path, (0o777 if directory else 0o666) & ~_umask())


@contextlib.contextmanager
def staged_dir(final: Path) -> Iterator[Path]:
    """Yield a temporary directory beside ``final`` that replaces it on success.

    Files inside are written without a per-file fsync (thousands of small
    files); the directory appears under its final name only once complete, and
    an existing directory of that name is replaced as a whole.
    """
    final = Path(final)
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp"))
    try:
        yield tmp
        publish_mode(tmp, directory=True)
        old = None
        if final.exists():
            old = final.parent / f".{final.name}.old-{os.getpid()}"
            os.replace(final, old)
        os.replace(tmp, final)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def temp_beside(final: Path) -> tuple[int, str]:
    """``mkstemp`` beside ``final``, with the permissions a plain write would give (see :func:`publish_mode`).

    Returns the open descriptor and the temporary name; the caller renames it over ``final``.
    """
    final = Path(final)
    fd, name = tempfile.mkstemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp")
    os.fchmod(fd, 0o666 & ~_umask())
    return fd, name


@contextlib.contextmanager
def staged_file(final: Path) -> Iterator[Path]:
    """Yield a temporary file path beside ``final``, renamed over it on success.

    The file is fsync'ed before the rename and the directory after it, so a
    crash leaves either the old file or the whole new one under ``final``.
    """
    final = Path(final)
    final.parent.mkdir(parents=True, exist_ok=True)
    fd, name = temp_beside(final)
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        with open(tmp, "rb+") as f:
            os.fsync(f.fileno())
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(final.parent)


def fsync_dir(path: Path) -> None:
    """Make a rename in ``path`` durable, where the platform allows it."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
