"""What a detector must return, checked image by image, and its conversion to COCO results.

A detector is called with a list of images, each an ``(H, W, 3)`` uint8 RGB
array, and returns a list (or tuple) with one result per image, in order.  One
result is either a mapping with keys ``"boxes"``, ``"scores"`` and
``"labels"`` or a sequence of those three, where

* ``boxes`` is ``(N, 4)`` numbers, ``x0, y0, x1, y1`` in pixels of that image
  (the conventions of :mod:`synthgen.geometry`), finite, ``x0 < x1`` and
  ``y0 < y1``;
* ``scores`` is ``(N,)`` finite numbers, higher meaning more confident;
* ``labels`` is ``(N,)`` category names (str) or COCO category ids (int) of the
  dataset.

``N = 0`` is allowed (empty arrays or lists).  NumPy arrays, lists and
framework tensors that convert with ``numpy.asarray`` are accepted.  Anything
else raises :class:`DetectorOutputError`, one line naming the image index, the
problem and the value.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from synthgen.errors import UserError

__all__ = ["DetectorOutputError", "Categories", "check_batch", "to_records"]

_KEYS = ("boxes", "scores", "labels")


class DetectorOutputError(UserError):
    """A detector raised or returned something outside the contract (exit 2)."""


class Categories:
    """The dataset's categories: name -> id, and the set of ids."""

    def __init__(self, categories: Sequence[Mapping]):
        self.by_name = {c["name"]: int(c["id"]) for c in categories}
        self.ids = frozenset(self.by_name.values())

    def __eq__(self, other) -> bool:
        return isinstance(other, Categories) and self.by_name == other.by_name

    def __repr__(self) -> str:
        return f"Categories({self.by_name!r})"


def _show(value, limit: int = 60) -> str:
    text = repr(value.tolist() if isinstance(value, np.ndarray) else value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def check_batch(results, n: int, where: str) -> list:
    """The per-image results of a batch of ``n`` images, or a DetectorOutputError naming ``where``."""
    if isinstance(results, (str, bytes, Mapping)) or not isinstance(results, Sequence):
        raise DetectorOutputError(
            f"{where}: the detector must return a list with one result per image "
            f"(got {type(results).__name__})")
    if len(results) != n:
        raise DetectorOutputError(
            f"{where}: the detector returned {len(results)} results for {n} images (one per image expected)")
    return list(results)


def _parts(result, where: str):
    if isinstance(result, Mapping):
        missing = [k for k in _KEYS if k not in result]
        if missing:
            raise DetectorOutputError(f"{where}: result lacks key {missing[0]!r} (got keys {sorted(map(str, result))})")
        return [result[k] for k in _KEYS]
    if isinstance(result, (str, bytes)) or not isinstance(result, Sequence) or len(result) != 3:
        raise DetectorOutputError(
            f"{where}: result must be a mapping with boxes, scores and labels, or a (boxes, scores, labels) "
            f"sequence (got {_show(result) if not isinstance(result, np.ndarray) else 'an array'})")
    return list(result)


def _numbers(value, name: str, where: str) -> np.ndarray:
    try:
        arr = np.asarray(value.detach().cpu().numpy() if hasattr(value, "detach") else value)
    except Exception as exc:
        raise DetectorOutputError(f"{where}: {name} cannot be read as an array ({exc})") from None
    if arr.dtype == bool or not (np.issubdtype(arr.dtype, np.integer) or np.issubdtype(arr.dtype, np.floating)):
        raise DetectorOutputError(f"{where}: {name} must be numbers (got dtype {arr.dtype}: {_show(arr)})")
    return arr.astype(np.float64)


def _labels(value, n: int, categories: Categories, where: str) -> np.ndarray:
    if hasattr(value, "detach"):  # a framework tensor
        value = value.detach().cpu().numpy()
    arr = np.asarray(value, dtype=object)
    if arr.size == 0:
        arr = arr.reshape(0)
    if arr.shape != (n,):
        raise DetectorOutputError(f"{where}: labels must have shape ({n},), one per box (got shape {arr.shape})")
    ids = np.empty(n, dtype=np.int64)
    for j, label in enumerate(arr):
        if isinstance(label, str):
            if label not in categories.by_name:
                raise DetectorOutputError(f"{where}: label {j} is not a category name of the dataset "
                                          f"(got {label!r}; names: {', '.join(categories.by_name)})")
            ids[j] = categories.by_name[label]
        elif isinstance(label, (int, np.integer)) and not isinstance(label, (bool, np.bool_)):
            if int(label) not in categories.ids:
                raise DetectorOutputError(f"{where}: label {j} is not a category id of the dataset "
                                          f"(got {int(label)}; ids: {sorted(categories.ids)})")
            ids[j] = int(label)
        else:
            raise DetectorOutputError(f"{where}: label {j} must be a category name or an integer COCO id "
                                      f"(got {label!r} of type {type(label).__name__})")
    return ids


def to_records(result, image_id: int, categories: Categories, where: str) -> list[dict]:
    """Check one image's result and turn it into COCO results records, in the detector's order.

    Examples
    --------
    >>> cats = Categories([{"id": 1, "name": "disc"}])
    >>> to_records(([[0, 0, 2, 4]], [0.5], ["disc"]), 7, cats, "image 0")
    [{'image_id': 7, 'category_id': 1, 'bbox': [0.0, 0.0, 2.0, 4.0], 'score': 0.5}]
    >>> to_records(([[0, 0, -2, 4]], [0.5], ["disc"]), 7, cats, "image 3")
    Traceback (most recent call last):
    ...
    synthgen.probe.contract.DetectorOutputError: image 3: box 0 must have x0 < x1 and y0 < y1 (got [0.0, 0.0, -2.0, ...
    """
    boxes, scores, labels = _parts(result, where)
    boxes = _numbers(boxes, "boxes", where)
    if boxes.size == 0:
        boxes = boxes.reshape(0, 4)
    if boxes.ndim != 2 or boxes.shape[1] != 4:
        raise DetectorOutputError(f"{where}: boxes must have shape (N, 4) (got shape {boxes.shape})")
    n = len(boxes)
    scores = _numbers(scores, "scores", where)
    if scores.shape != (n,):
        raise DetectorOutputError(f"{where}: scores must have shape ({n},), one per box (got shape {scores.shape})")
    bad = np.flatnonzero(~np.isfinite(boxes).all(axis=1))
    if bad.size:
        raise DetectorOutputError(f"{where}: box {bad[0]} must be finite (got {_show(boxes[bad[0]])})")
    bad = np.flatnonzero(~np.isfinite(scores))
    if bad.size:
        raise DetectorOutputError(f"{where}: score {bad[0]} must be finite (got {scores[bad[0]]})")
    bad = np.flatnonzero((boxes[:, 2] <= boxes[:, 0]) | (boxes[:, 3] <= boxes[:, 1]))
    if bad.size:
        raise DetectorOutputError(f"{where}: box {bad[0]} must have x0 < x1 and y0 < y1 (got {_show(boxes[bad[0]])})")
    ids = _labels(labels, n, categories, where)
    wh = boxes[:, 2:] - boxes[:, :2]
    return [
        {"image_id": image_id, "category_id": int(c), "bbox": [float(x), float(y), float(w), float(h)],
         "score": float(s)}
        for (x, y), (w, h), c, s in zip(boxes[:, :2].tolist(), wh.tolist(), ids, scores.tolist(), strict=True)
    ]
