"""The unit of work: image ``k``'s scene rendered, encoded, written, and its records.

:func:`render_block` is what every backend runs (:mod:`synthgen.run.backends`): it renders
a block of image indices into ``DIR/images`` and returns their journal lines
(:func:`synthgen.run.journal.encode_record`).  Image ``k`` depends only on ``(config, k)``.
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import platform
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synthgen import __version__
from synthgen._io import write_unsynced
from synthgen.config import Config
from synthgen.formats.coco import scene_annotations
from synthgen.formats.dataset_dir import IMAGES_DIR
from synthgen.formats.images import EXTENSIONS, encode_image
from synthgen.run.journal import encode_record
from synthgen.scene import render_scene

__all__ = ["image_name", "render_image_record", "journal_line", "render_block", "keep_freed_memory", "versions"]


def image_name(config: Config, index: int) -> str:
    """File name of image ``index``: zero-padded index and the format's extension."""
    digits = max(6, len(str(config.count - 1)))
    return f"{index:0{digits}d}.{EXTENSIONS[config.output.image_format]}"


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
    try:  # glibc names itself here (instantly; platform.libc_ver() reads the interpreter binary)
        glibc = os.confstr("CS_GNU_LIBC_VERSION")
    except (AttributeError, ValueError, OSError):
        glibc = None
    if not glibc:
        return
    try:  # the running program's own symbols include glibc's (no library search: it runs ldconfig)
        libc = ctypes.CDLL(None)
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
        # visible boxes (GEOS polygon arithmetic); importing it (~15 ms, when no occlusion did) costs
        # no more than reading the installed metadata
        "shapely": shapely.__version__,
    }
