"""The names of everything in a dataset directory: the one home of its file layout.

::

    DIR/images/<name>.png|.jpg
    DIR/annotations.json          COCO JSON, per-object facts under the key "synthgen"
    DIR/manifest.json             config as resolved, versions, counts, per-file digests; written last
    DIR/.synthgen/                an unfinished run's journal and run record
    DIR/voc/<stem>.xml, DIR/voc/ImageSets/Main/<split>.txt
    DIR/yolo/<stem>.txt, DIR/yolo/labels.txt, DIR/yolo/splits/<split>.txt
    DIR/tokens.jsonl, DIR/tokens.vocab.json, DIR/tokens.<split>.jsonl
    DIR/masks/<stem>.png or DIR/masks.jsonl
    DIR/annotations.<split>.json, DIR/splits.json

Every other module names these files through this one.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "IMAGES_DIR",
    "ANNOTATIONS",
    "MANIFEST",
    "STATE_DIR",
    "VOC_DIR",
    "YOLO_DIR",
    "MASKS_DIR",
    "MASKS_RLE",
    "TOKENS",
    "TOKENS_VOCAB",
    "SPLITS",
    "OUTPUT_ENTRIES",
    "FORMAT_DIRS",
    "FORMAT_ENTRIES",
    "annotations_path",
    "manifest_path",
    "split_annotations_name",
    "split_tokens_name",
]

IMAGES_DIR = "images"
ANNOTATIONS = "annotations.json"
MANIFEST = "manifest.json"
#: Hidden directory holding an unfinished run's progress.
STATE_DIR = ".synthgen"
VOC_DIR = "voc"
YOLO_DIR = "yolo"
MASKS_DIR = "masks"
MASKS_RLE = "masks.jsonl"
TOKENS = "tokens.jsonl"
TOKENS_VOCAB = "tokens.vocab.json"
SPLITS = "splits.json"

#: What a run writes at the top of its directory (``--overwrite`` removes only these and shard manifests).
OUTPUT_ENTRIES = (IMAGES_DIR, ANNOTATIONS, MANIFEST, STATE_DIR)
#: Directories the format writers own as a whole.
FORMAT_DIRS = (VOC_DIR, YOLO_DIR, MASKS_DIR)
#: What ``formats`` and ``split`` add (glob patterns; ``--overwrite`` removes these too).
FORMAT_ENTRIES = (
    VOC_DIR,
    YOLO_DIR,
    MASKS_DIR,
    MASKS_RLE,
    TOKENS,
    TOKENS_VOCAB,
    "tokens.*.jsonl",
    "annotations.*.json",
    SPLITS,
)


def annotations_path(directory) -> Path:
    """``DIR/annotations.json``."""
    return Path(directory) / ANNOTATIONS


def manifest_path(directory) -> Path:
    """``DIR/manifest.json``."""
    return Path(directory) / MANIFEST


def split_annotations_name(split: str) -> str:
    """File name of a split's COCO file.

    >>> split_annotations_name("train")
    'annotations.train.json'
    """
    return f"annotations.{split}.json"


def split_tokens_name(split: str) -> str:
    """File name of a split's token lines.

    >>> split_tokens_name("val")
    'tokens.val.jsonl'
    """
    return f"tokens.{split}.jsonl"
