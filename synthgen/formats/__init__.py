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

from synthgen.formats.coco import bbox_from_xyxy, read_coco, write_coco, xyxy_from_bbox
from synthgen.formats.export import FORMATS, export, parse_formats, write_formats
from synthgen.formats.splits import assign_splits, parse_split

__all__ = [
    "FORMATS",
    "assign_splits",
    "bbox_from_xyxy",
    "export",
    "parse_formats",
    "parse_split",
    "read_coco",
    "write_coco",
    "write_formats",
    "xyxy_from_bbox",
]
