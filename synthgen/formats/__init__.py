"""Open file formats: the only place that knows their box conventions.

One module per format, each with a writer and a reader, each stating its rule
in its docstring:

* :mod:`synthgen.formats.coco` -- COCO JSON (``bbox`` = ``[x, y, w, h]``);
* :mod:`synthgen.formats.rle` -- COCO run-length encoded masks;
* :mod:`synthgen.formats.voc` -- Pascal VOC XML (1-based inclusive pixel indices);
* :mod:`synthgen.formats.yolo` -- YOLO txt (normalized centre and size);
* :mod:`synthgen.formats.tokens` -- quantized token sequences;
* :mod:`synthgen.formats.masks` -- instance-id PNGs or per-object RLE;
* :mod:`synthgen.formats.splits` -- train/val/test assignment and per-split files;
* :mod:`synthgen.formats.export` -- writing any of these from a COCO dict.

Everything outside this package speaks xyxy (see :mod:`synthgen.geometry`).
"""

from synthgen._lazy import lazy_exports

#: public name -> module that defines it (loaded on first use, so a run that needs only
#: :mod:`.dataset_dir` or :mod:`.images` does not import every writer, Pillow and ElementTree)
_EXPORTS = {
    **{n: "synthgen.formats.coco" for n in ("bbox_from_xyxy", "read_coco", "write_coco", "xyxy_from_bbox")},
    **{n: "synthgen.formats.export" for n in ("FORMATS", "export", "parse_formats", "write_formats")},
    **{n: "synthgen.formats.splits" for n in ("assign_splits", "parse_split")},
}

__all__ = sorted(_EXPORTS)

__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
