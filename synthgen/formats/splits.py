"""Dataset splits (train / val / test ...): assignment and the per-split files.

Rule
----
Split sizes follow the fractions exactly up to rounding (largest remainder,
ties to the split named first).  Which images go where is decided by one key
per image: ``u_k``, the k-th draw of ``Generator(PCG64(SeedSequence(seed,
spawn_key=(SPLIT_STREAM,))))``; images sorted by ``u_k`` (ties by index) fill
the splits in the order given.  So the assignment depends only on the image
index, the seed, the image count and the fractions, never on worker count or
run order.

Files (the images stay in one folder, ``images/``):

* ``annotations.<split>.json``: COCO JSON holding only that split's images and
  their annotations (all categories kept); ``annotations.json`` keeps every image;
* ``splits.json``: seed, fractions, and each split's image file names;
* ``voc/ImageSets/Main/<split>.txt``: the split's image stems, one per line
  (the VOC devkit's list layout);
* ``yolo/splits/<split>.txt``: the split's image paths relative to the
  output directory, one per line (kept out of ``yolo/`` itself, where every
  ``.txt`` is an image's label file);
* ``tokens.<split>.jsonl``: the token lines of the split's images.
"""

from __future__ import annotations

import math
import re

import numpy as np

from synthgen.errors import ConfigError
from synthgen.formats.dataset_dir import split_annotations_name
from synthgen.seeding import SPLIT_STREAM, stream

__all__ = ["SPLIT_STREAM", "parse_split", "check_fractions", "assign_splits", "split_coco", "coco_split_name"]


_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def coco_split_name(split: str) -> str:
    """File name of a split's COCO file (:func:`synthgen.formats.dataset_dir.split_annotations_name`).

    >>> coco_split_name("train")
    'annotations.train.json'
    """
    return split_annotations_name(split)


def check_fractions(fractions: dict[str, float], key: str = "split") -> None:
    """Raise :class:`~synthgen.errors.ConfigError` unless ``fractions`` names splits whose fractions add up to 1."""
    if not fractions:
        raise ConfigError(key, "must name at least one split, e.g. train=0.8,val=0.2", fractions)
    for name, f in fractions.items():
        if not isinstance(name, str) or not _NAME.match(name):
            raise ConfigError(key, "split names must be letters, digits, '_' or '-', starting with a letter", name)
        if isinstance(f, bool) or not isinstance(f, (int, float)) or not math.isfinite(f) or not 0 < f <= 1:
            raise ConfigError(key, f"fraction of split '{name}' must be a number in (0, 1]", f)
    total = sum(fractions.values())
    if abs(total - 1.0) > 1e-6:
        raise ConfigError(key, "fractions must add up to 1", round(total, 9))


def parse_split(text: str, *, key: str = "--split") -> dict[str, float]:
    """Fractions from ``"train=0.8,val=0.1,test=0.1"``.

    Examples
    --------
    >>> parse_split("train=0.8,val=0.2")
    {'train': 0.8, 'val': 0.2}
    """
    out: dict[str, float] = {}
    for part in (p.strip() for p in text.split(",")):
        name, eq, value = part.partition("=")
        name = name.strip()
        if not eq or not name:
            raise ConfigError(key, "must be NAME=FRACTION pairs separated by commas", text)
        if name in out:
            raise ConfigError(key, "names each split once", text)
        try:
            out[name] = float(value)
        except ValueError:
            raise ConfigError(key, f"fraction of split '{name}' must be a number", value.strip()) from None
    check_fractions(out, key)
    return out


def _sizes(n: int, fractions: list[float]) -> list[int]:
    exact = [f * n for f in fractions]
    sizes = [math.floor(e) for e in exact]
    rest = n - sum(sizes)
    order = sorted(range(len(exact)), key=lambda i: (-(exact[i] - sizes[i]), i))
    for i in order[:rest]:
        sizes[i] += 1
    return sizes


def assign_splits(n_images: int, fractions: dict[str, float], *, seed: int) -> list[str]:
    """The split of each image.

    Parameters
    ----------
    n_images : int
        Number of images; image ``k`` is the k-th (0-based).
    fractions : dict
        Split name -> fraction, adding up to 1, e.g. ``{"train": 0.8, "val": 0.2}``.
    seed : int
        The dataset's root seed.

    Returns
    -------
    list of str, length n_images

    Examples
    --------
    >>> s = assign_splits(10, {"train": 0.8, "val": 0.2}, seed=1)
    >>> s.count("train"), s.count("val")
    (8, 2)
    """
    check_fractions(fractions, "split")
    names = list(fractions)
    sizes = _sizes(n_images, [fractions[k] for k in names])
    rng = stream(seed, SPLIT_STREAM)
    u = rng.random(n_images)
    ranked = np.argsort(u, kind="stable")
    label = np.empty(n_images, dtype=np.int64)
    label[ranked] = np.repeat(np.arange(len(names)), sizes)
    return [names[i] for i in label.tolist()]


def split_coco(coco: dict, splits: list[str], names: list[str] | None = None) -> dict[str, dict]:
    """One COCO dict per split.

    Parameters
    ----------
    coco : dict
    splits : list of str
        The split of each entry of ``coco["images"]`` (same order).
    names : list of str, optional
        Splits to return, in this order, also when empty (default: those in
        ``splits``, in order of first appearance).

    Returns
    -------
    dict
        Split name -> COCO dict with that split's images and their annotations;
        other top-level keys (``info``, ``categories``, ...) are shared.
    """
    if len(splits) != len(coco["images"]):
        raise ValueError(f"{len(splits)} split labels for {len(coco['images'])} images")
    out: dict[str, dict] = {}
    split_of_image = {}
    for im, name in zip(coco["images"], splits):
        split_of_image[im["id"]] = name
    for name in names if names is not None else dict.fromkeys(splits):
        part = {k: v for k, v in coco.items() if k not in ("images", "annotations")}
        part["images"] = [im for im, s in zip(coco["images"], splits) if s == name]
        part["annotations"] = [a for a in coco["annotations"] if split_of_image.get(a["image_id"]) == name]
        out[name] = part
    return out
