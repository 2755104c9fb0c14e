"""Matching detections to ground truth, COCO box metrics, and metrics per slice.

:func:`evaluate` scores a results list (COCO results format: records
``{image_id, category_id, bbox: [x, y, w, h], score}``) against a COCO JSON
ground truth and returns an :class:`Evaluation`:

* ``stats``: the twelve standard COCO box statistics, computed by the COCO
  evaluation rules (REFERENCE.md: COCO-style AP) so that they equal the
  reference implementation's to floating precision;
* ``per_category``: the same quantities for each category;
* ``confusion``: detections matched at IoU 0.5 to an object of another class;
* :meth:`Evaluation.slice_by`: recall, AP and mean IoU per bin of any
  per-object fact synthgen records under ``annotation["synthgen"]`` (or the
  annotation's own ``"area"``); for COCO files without those facts, the ones
  a COCO annotation determines are derived (:data:`DERIVED_FACTS`).

The matching rules
------------------
For every image and category separately: detections are taken in descending
score (ties keep the results' order), at most 100 of them.  At each IoU
threshold ``t`` a detection takes, among the ground truths still free, the one
with the highest IoU ``>= t``, preferring objects that count (not crowd, in the
size range) over ignored ones; among equal IoUs the later annotation in the
file wins.  A crowd object may absorb any number of detections and its IoU is
intersection over the *detection's* area.  A detection matched to an ignored
object is ignored; an unmatched detection outside the size range (by its own
box area ``w * h``) is ignored; every other unmatched detection is a false
positive.  Precision is made monotone from the right and read at 101 recall
points; a category without any counted ground truth gives -1 and is left out of
the means.

Boxes here are COCO ``[x, y, w, h]`` as stored in the files, not synthgen's
xyxy (see :mod:`synthgen.geometry`): the reference rules compute areas from the
stored width and height, and comparing IoUs with thresholds bit for bit needs
the same arithmetic.

Slices
------
For a fact and bin edges, each bin is scored like a COCO size range: ground
truth in other bins (or without the fact) is ignored (it may absorb a
detection, which then counts neither way), and an unmatched detection belongs
to a bin by its own box when the fact can be measured on a box: ``"area"`` is
the box's ``w * h`` and ``"size"`` the box's longer side.  For every other fact
(visible fraction, contrast, kind, ...) a box carries no value, and an
unmatched detection is a false positive in *every* bin, as COCO's "all" range
treats it: ignoring such detections would make every bin's precision 1 and AP
a function of recall alone, while counting them everywhere charges each bin
the same false-positive load, so differences between bins come from how well
each bin's objects are found and ranked.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synthgen.errors import InputFileError, UserError
from synthgen.formats._common import read_input
from synthgen.formats.coco import xyxy_from_bbox
from synthgen.geometry import box_iou

__all__ = [
    "IOU_THRESHOLDS",
    "RECALL_POINTS",
    "MAX_DETS",
    "AREA_RANGES",
    "STAT_NAMES",
    "DEFAULT_EDGES",
    "BOX_FACTS",
    "DERIVED_FACTS",
    "derive_fact",
    "CategoryResult",
    "Confusion",
    "BinResult",
    "Evaluation",
    "evaluate",
    "parse_slice_spec",
    "read_predictions",
    "read_ground_truth",
    "score_files",
    "score_sweep",
    "SweepPoint",
]

#: IoU thresholds 0.50, 0.55, ..., 0.95, built exactly as the reference does
#: (REFERENCE.md: COCO-style AP).
IOU_THRESHOLDS = np.linspace(0.5, 0.95, int(np.round((0.95 - 0.5) / 0.05)) + 1, endpoint=True)
#: Recall points 0.00, 0.01, ..., 1.00 at which precision is read.
RECALL_POINTS = np.linspace(0.0, 1.00, int(np.round((1.00 - 0.0) / 0.01)) + 1, endpoint=True)
#: Detections kept per image and category for the recall statistics.
MAX_DETS = (1, 10, 100)
#: COCO size ranges by ground-truth ``area`` in px^2, both ends inclusive.
AREA_RANGES = (
    ("all", 0**2, 1e5**2),
    ("small", 0**2, 32**2),
    ("medium", 32**2, 96**2),
    ("large", 96**2, 1e5**2),
)
#: Names of the twelve statistics, in COCO's order.
STAT_NAMES = (
    "AP",
    "AP50",
    "AP75",
    "AP_small",
    "AP_medium",
    "AP_large",
    "AR1",
    "AR10",
    "AR100",
    "AR_small",
    "AR_medium",
    "AR_large",
)

#: Default bin edges per numeric fact (degrees for rotation, fractions
#: otherwise).  ``size`` (px) and ``area`` (px^2) default to powers of 2 and of
#: 4 spanning the objects' values (:data:`GEOMETRIC_BASE`); numeric facts not
#: listed get quintile edges of the objects' values.
GEOMETRIC_BASE = {"size": 2.0, "area": 4.0}
DEFAULT_EDGES: dict[str, tuple[float, ...]] = {
    "visible_fraction": (0.0, 0.25, 0.5, 0.75, 0.9, 1.0),
    "max_iou": (0.0, 0.1, 0.3, 0.5, 0.7, 1.0),
    "neighbours": (0.0, 1.0, 2.0, 4.0, 8.0, math.inf),
    "contrast": (0.0, 0.1, 0.2, 0.4, 0.6, 1.0),
    "rotation": (0.0, 90.0, 180.0, 270.0, 360.0),
}

#: Facts a detection box can be measured on, for assigning unmatched
#: detections to a bin: box area ``w * h`` and longer side ``max(w, h)``.
BOX_FACTS = ("area", "size")

_MAX_DET = MAX_DETS[-1]
_EPS = np.spacing(1)
_T50 = int(np.flatnonzero(IOU_THRESHOLDS == 0.5)[0])
_T75 = int(np.flatnonzero(IOU_THRESHOLDS == 0.75)[0])


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True)
class CategoryResult:
    """COCO statistics of one category (-1 where it has no counted ground truth).

    ``n_gt`` counts non-crowd objects, ``n_pred`` the category's predictions.
    """

    id: int
    name: str
    n_gt: int
    n_pred: int
    ap: float
    ap50: float
    ap75: float
    ar100: float

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary."""
        return {f: getattr(self, f) for f in self.__slots__}


@dataclass(frozen=True, slots=True)
class Confusion:
    """Detections by predicted class (columns) and the class of the object they hit (rows).

    A detection that is a true positive at IoU 0.5 counts on the diagonal.  A
    false positive at IoU 0.5 counts in the row of the non-crowd object of
    *another* class in the same image with which it has the highest IoU, when
    that IoU is at least 0.5, and otherwise in the last row, ``"none"``
    (background, poor localisation or a duplicate).  Detections matched to
    crowd objects, and those beyond the 100 per image and category the
    evaluation keeps, are not counted.

    Attributes
    ----------
    names : tuple of str
        Category names, in category id order (K of them).
    counts : ndarray of int, shape (K + 1, K)
        ``counts[i, j]``: detections of class ``j`` hitting an object of class
        ``i``; row ``K`` is ``"none"``.
    """

    names: tuple[str, ...]
    counts: np.ndarray

    @property
    def confused(self) -> int:
        """Number of detections that hit an object of another class."""
        k = len(self.names)
        block = self.counts[:k]
        return int(block.sum() - np.trace(block))

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary."""
        return {
            "rows": [*self.names, "none"],
            "columns": list(self.names),
            "counts": self.counts.tolist(),
            "confused": self.confused,
        }


@dataclass(frozen=True, slots=True)
class BinResult:
    """Metrics of one bin of a per-object fact.

    ``lo``/``hi`` bound a numeric bin ``[lo, hi)`` (the last bin includes
    ``hi``); ``value`` names a categorical bin.  Recalls are pooled over
    categories (found objects / objects in the bin, up to 100 detections per
    image and category); APs are COCO's mean over categories with objects in
    the bin; ``mean_iou`` averages the IoU of the pairs matched at IoU 0.5.
    Undefined values are NaN.
    """

    fact: str
    label: str
    lo: float | None
    hi: float | None
    value: object
    n_gt: int
    n_found50: int
    recall50: float
    recall75: float
    ap50: float
    ap: float
    mean_iou: float

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary (NaN and infinities become None)."""
        return {f: _json_value(getattr(self, f)) for f in self.__slots__}


def _json_value(v):
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, np.generic):
        return _json_value(v.item())
    return v


# --------------------------------------------------------------------------- input parsing


@dataclass(frozen=True, slots=True)
class _Truth:
    """Ground truth, restricted to listed images and categories, in file order."""

    image_ids: np.ndarray  # (I,) sorted unique image ids
    cat_ids: np.ndarray  # (K,) sorted unique category ids
    cat_names: tuple[str, ...]
    img: np.ndarray  # (G,) image index
    cat: np.ndarray  # (G,) category index
    box: np.ndarray  # (G, 4) COCO [x, y, w, h]
    area: np.ndarray  # (G,) the annotation's "area"
    crowd: np.ndarray  # (G,) bool
    records: tuple  # (G,) the annotation dicts, for facts


@dataclass(frozen=True, slots=True)
class _Preds:
    img: np.ndarray  # (N,) image index
    cat: np.ndarray  # (N,) category index, -1 when not a ground-truth category
    box: np.ndarray  # (N, 4) COCO [x, y, w, h]
    score: np.ndarray  # (N,)
    unknown: tuple = ()  # sorted category ids of predictions that name no ground-truth category


def _is_int(v) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_))


def _is_real(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))


def _int_array(values) -> np.ndarray | None:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.dtype.kind not in "iu":
        return None
    return arr.astype(np.int64)


def _real_array(values, shape_tail=()) -> np.ndarray | None:
    try:
        arr = np.asarray(values)
    except ValueError:  # ragged
        return None
    if arr.dtype.kind not in "iuf" or arr.shape[1:] != shape_tail or arr.ndim != 1 + len(shape_tail):
        return None
    return arr.astype(np.float64)


def _show(v) -> str:
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def _check_box(name: str, where: str, bbox) -> None:
    rule = "'bbox' must be [x, y, width, height]: 4 finite numbers with width >= 0 and height >= 0"
    ok = isinstance(bbox, (list, tuple)) and len(bbox) == 4 and all(_is_real(v) for v in bbox)
    ok = ok and all(math.isfinite(v) for v in bbox) and bbox[2] >= 0 and bbox[3] >= 0
    if not ok:
        raise InputFileError(name, f"{where}: {rule} (got {_show(bbox)})")


def _parse_truth(coco_gt, name: str) -> _Truth:
    if not isinstance(coco_gt, Mapping):
        raise InputFileError(name, "must be a COCO JSON object with 'images', 'annotations', 'categories'")
    for key in ("images", "annotations", "categories"):
        if not isinstance(coco_gt.get(key), list):
            raise InputFileError(name, f"'{key}' must be a list (got {_show(coco_gt.get(key))})")
    image_ids = []
    for i, im in enumerate(coco_gt["images"]):
        if not isinstance(im, Mapping) or not _is_int(im.get("id")):
            raise InputFileError(name, f"images[{i}]: 'id' must be an integer (got {_show(im)})")
        image_ids.append(int(im["id"]))
    cats = {}
    for i, c in enumerate(coco_gt["categories"]):
        if not isinstance(c, Mapping) or not _is_int(c.get("id")):
            raise InputFileError(name, f"categories[{i}]: 'id' must be an integer (got {_show(c)})")
        cats[int(c["id"])] = str(c.get("name", c["id"]))
    image_arr = np.unique(np.asarray(image_ids, dtype=np.int64))
    cat_arr = np.asarray(sorted(cats), dtype=np.int64)
    cat_index = {c: k for k, c in enumerate(cat_arr.tolist())}

    anns = coco_gt["annotations"]
    cols = _fast_annotations(anns, image_arr, cat_arr)
    if cols is None:
        cols = _scan_annotations(anns, name, set(image_ids), cat_index)
    img, cat, box, area, crowd = cols
    return _Truth(
        image_ids=image_arr,
        cat_ids=cat_arr,
        cat_names=tuple(cats[c] for c in cat_arr.tolist()),
        img=np.searchsorted(image_arr, img).astype(np.int64),
        cat=np.searchsorted(cat_arr, cat).astype(np.int64),
        box=box,
        area=area,
        crowd=crowd,
        records=tuple(anns),
    )


_ANN_KEYS = ("id", "image_id", "category_id", "bbox", "area", "iscrowd")


def _member(sorted_ids: np.ndarray, values: np.ndarray) -> np.ndarray:
    if len(sorted_ids) == 0:
        return np.zeros(len(values), dtype=bool)
    pos = np.minimum(np.searchsorted(sorted_ids, values), len(sorted_ids) - 1)
    return sorted_ids[pos] == values


def _fast_annotations(anns: list, image_arr: np.ndarray, cat_arr: np.ndarray):
    """Columns of well-formed annotations, or None to fall back to the record scan."""
    n = len(anns)
    if n == 0:
        return (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((0, 4)), np.zeros(0), np.zeros(0, bool))
    try:
        raw = [[a[k] for a in anns] for k in _ANN_KEYS]
    except (KeyError, TypeError, IndexError):
        return None
    ids, img, cat, crowd = (_int_array(raw[i]) for i in (0, 1, 2, 5))
    box, area = _real_array(raw[3], (4,)), _real_array(raw[4])
    if any(v is None for v in (ids, img, cat, crowd, box, area)):
        return None
    ok = (
        np.all(ids != 0)
        and len(np.unique(ids)) == n
        and np.all(_member(image_arr, img))
        and np.all(_member(cat_arr, cat))
        and np.isfinite(box).all()
        and np.all(box[:, 2:] >= 0)
        and np.isfinite(area).all()
        and np.all((crowd == 0) | (crowd == 1))
    )
    return (img, cat, box, area, crowd.astype(bool)) if ok else None


def _scan_annotations(anns: list, name: str, image_set: set, cat_index: dict):
    """Check annotations one by one; raise for the first bad one, else return columns."""
    seen_ids = set()
    img, cat, box, area, crowd = [], [], [], [], []
    for i, a in enumerate(anns):
        where = f"annotations[{i}]"
        if not isinstance(a, Mapping):
            raise InputFileError(name, f"{where}: must be an object (got {_show(a)})")
        for key in _ANN_KEYS:
            if key not in a:
                raise InputFileError(name, f"{where}: missing key '{key}'")
        aid = a["id"]
        if not _is_int(aid) or aid == 0:
            # COCO evaluation stores matches by id and reads 0 as "unmatched".
            raise InputFileError(name, f"{where}: 'id' must be a non-zero integer (got {_show(aid)})")
        if aid in seen_ids:
            raise InputFileError(name, f"{where}: 'id' must be unique (got {aid} again)")
        seen_ids.add(aid)
        if not _is_int(a["image_id"]) or a["image_id"] not in image_set:
            raise InputFileError(
                name, f"{where}: 'image_id' must be the id of a listed image (got {_show(a['image_id'])})"
            )
        if not _is_int(a["category_id"]) or a["category_id"] not in cat_index:
            raise InputFileError(
                name, f"{where}: 'category_id' must be the id of a listed category (got {_show(a['category_id'])})"
            )
        _check_box(name, where, a["bbox"])
        if not _is_real(a["area"]) or not math.isfinite(a["area"]):
            raise InputFileError(name, f"{where}: 'area' must be a finite number (got {_show(a['area'])})")
        if a["iscrowd"] not in (0, 1) or isinstance(a["iscrowd"], float):
            raise InputFileError(name, f"{where}: 'iscrowd' must be 0 or 1 (got {_show(a['iscrowd'])})")
        img.append(int(a["image_id"]))
        cat.append(int(a["category_id"]))
        box.append([float(v) for v in a["bbox"]])
        area.append(float(a["area"]))
        crowd.append(bool(a["iscrowd"]))
    g = len(img)
    return (
        np.asarray(img, dtype=np.int64),
        np.asarray(cat, dtype=np.int64),
        np.asarray(box, dtype=np.float64).reshape(g, 4),
        np.asarray(area, dtype=np.float64),
        np.asarray(crowd, dtype=bool),
    )


_PRED_KEYS = ("image_id", "category_id", "bbox", "score")


def _bad_prediction(predictions, name: str, truth: _Truth) -> None:
    """Scan records one by one and raise for the first that breaks a rule."""
    known = set(truth.image_ids.tolist())
    for i, p in enumerate(predictions):
        where = f"record {i}"
        if not isinstance(p, Mapping):
            raise InputFileError(name, f"{where}: must be an object {{image_id, category_id, bbox, score}} (got {_show(p)})")
        for key in _PRED_KEYS:
            if key not in p:
                raise InputFileError(name, f"{where}: missing key '{key}'")
        if not _is_int(p["image_id"]):
            raise InputFileError(name, f"{where}: 'image_id' must be an integer (got {_show(p['image_id'])})")
        if p["image_id"] not in known:
            raise InputFileError(
                name, f"{where}: 'image_id' must be the id of an image in the ground truth (got {p['image_id']})"
            )
        if not _is_int(p["category_id"]):
            raise InputFileError(name, f"{where}: 'category_id' must be an integer (got {_show(p['category_id'])})")
        _check_box(name, where, p["bbox"])
        if not _is_real(p["score"]) or not math.isfinite(p["score"]):
            raise InputFileError(name, f"{where}: 'score' must be a finite number (got {_show(p['score'])})")


def _parse_predictions(predictions, name: str, truth: _Truth) -> _Preds:
    if not isinstance(predictions, list):
        raise InputFileError(
            name,
            "predictions must be a JSON array of {image_id, category_id, bbox, score} records "
            f"(got {type(predictions).__name__})",
        )
    n = len(predictions)
    try:
        cols = [[p[k] for p in predictions] for k in _PRED_KEYS]
    except (KeyError, TypeError, IndexError):
        cols = None
    arrays = None
    if cols is not None:
        img = _int_array(cols[0]) if n else np.zeros(0, np.int64)
        cat = _int_array(cols[1]) if n else np.zeros(0, np.int64)
        box = _real_array(cols[2], (4,)) if n else np.zeros((0, 4))
        score = _real_array(cols[3]) if n else np.zeros(0)
        if img is not None and cat is not None and box is not None and score is not None:
            arrays = (img, cat, box, score)
    ok = arrays is not None
    if ok:
        img, cat, box, score = arrays
        ok = bool(
            np.all(_member(truth.image_ids, img))
            and np.isfinite(box).all()
            and np.all(box[:, 2:] >= 0)
            and np.isfinite(score).all()
        )
    if not ok:
        # Find and report the first bad record; records that pass are read one by one.
        _bad_prediction(predictions, name, truth)
        img = np.array([int(p["image_id"]) for p in predictions], dtype=np.int64)
        cat = np.array([int(p["category_id"]) for p in predictions], dtype=np.int64)
        box = np.array([[float(v) for v in p["bbox"]] for p in predictions], dtype=np.float64).reshape(n, 4)
        score = np.array([float(p["score"]) for p in predictions], dtype=np.float64)
    pos = np.searchsorted(truth.image_ids, img)
    in_gt = _member(truth.cat_ids, cat)
    cpos = np.searchsorted(truth.cat_ids, cat)
    return _Preds(
        img=pos.astype(np.int64), cat=np.where(in_gt, cpos, -1).astype(np.int64), box=box, score=score,
        unknown=tuple(np.unique(cat[~in_gt]).tolist()),
    )


# --------------------------------------------------------------------------- matching


def _coco_iou(d: np.ndarray, g: np.ndarray, crowd: np.ndarray) -> np.ndarray:
    """Element-wise IoU of COCO boxes by the reference rules.

    Parameters
    ----------
    d, g : ndarray of shape (P, 4)
        Detection and ground-truth boxes ``[x, y, w, h]`` in px.
    crowd : ndarray of bool, shape (P,)
        Whether the ground truth is a crowd region; its "IoU" is then the
        intersection over the detection's area.

    Returns
    -------
    ndarray of shape (P,)
        Areas are ``w * h`` of the stored sizes and the union is
        ``(da + ga) - inter``, evaluated in that order, so that threshold
        comparisons agree with the reference bit for bit.
    """
    with np.errstate(over="ignore"):  # absurd but finite boxes (1e308) overflow to inf, as in the reference
        iw = np.minimum(d[:, 0] + d[:, 2], g[:, 0] + g[:, 2]) - np.maximum(d[:, 0], g[:, 0])
        ih = np.minimum(d[:, 1] + d[:, 3], g[:, 1] + g[:, 3]) - np.maximum(d[:, 1], g[:, 1])
        inter = np.maximum(iw, 0) * np.maximum(ih, 0)  # 0 for disjoint pairs (whose product may overflow)
        da = d[:, 2] * d[:, 3]
        union = np.where(crowd, da, da + g[:, 2] * g[:, 3] - inter)
    out = np.zeros(len(d))
    np.divide(inter, union, out=out, where=(iw > 0) & (ih > 0))
    return out


@dataclass(frozen=True, slots=True)
class _Problem:
    """Detections kept for evaluation and their candidate pairs.

    Detections (D of them) are in *match order*: by rank within their image
    and category (rank 0 = highest score), then by image and category.  Pairs
    (P of them) join each detection to every ground truth of its image and
    category, in detection order and then file order of the ground truth.
    """

    rec: np.ndarray  # (D,) index of the record in the predictions list
    img: np.ndarray  # (D,)
    cat: np.ndarray  # (D,)
    rank: np.ndarray  # (D,)
    score: np.ndarray  # (D,)
    box: np.ndarray  # (D, 4)
    p_det: np.ndarray  # (P,) detection index
    p_gt: np.ndarray  # (P,) ground-truth index
    p_iou: np.ndarray  # (P,)
    rank_start: np.ndarray  # (ranks + 1,) first pair of each rank
    acc_order: np.ndarray  # (D,) detections by category, -score, image, rank
    cat_start: np.ndarray  # (K + 1,) first position of each category in acc_order


def _build_problem(truth: _Truth, preds: _Preds) -> _Problem:
    k_cats = len(truth.cat_ids)
    idx = np.flatnonzero(preds.cat >= 0)
    group = preds.img[idx] * k_cats + preds.cat[idx]
    # Stable order by descending score within each image and category.
    order = np.lexsort((idx, -preds.score[idx], group))
    sorted_group = group[order]
    n = len(order)
    first = np.ones(n, dtype=bool)
    first[1:] = sorted_group[1:] != sorted_group[:-1]
    rank = np.arange(n) - np.maximum.accumulate(np.where(first, np.arange(n), 0))
    keep = rank < _MAX_DET
    order, rank, sorted_group = order[keep], rank[keep], sorted_group[keep]
    mo = np.lexsort((sorted_group, rank))
    rec = idx[order[mo]]
    rank = rank[mo]
    d_group = sorted_group[mo]
    d_count = len(rec)

    g_group = truth.img * k_cats + truth.cat
    g_order = np.argsort(g_group, kind="stable")
    g_sorted = g_group[g_order]
    lo = np.searchsorted(g_sorted, d_group, side="left")
    cnt = np.searchsorted(g_sorted, d_group, side="right") - lo
    p_det = np.repeat(np.arange(d_count), cnt)
    offsets = np.cumsum(cnt) - cnt
    within = np.arange(len(p_det)) - np.repeat(offsets, cnt)
    p_gt = g_order[np.repeat(lo, cnt) + within]
    box = preds.box[rec]
    p_iou = _coco_iou(box[p_det], truth.box[p_gt], truth.crowd[p_gt])
    n_ranks = int(rank.max()) + 1 if d_count else 0
    rank_start = np.searchsorted(rank[p_det], np.arange(n_ranks + 1), side="left")

    cat = preds.cat[rec]
    img = preds.img[rec]
    score = preds.score[rec]
    acc_order = np.lexsort((rank, img, -score, cat))
    cat_start = np.searchsorted(cat[acc_order], np.arange(k_cats + 1), side="left")
    return _Problem(rec, img, cat, rank, score, box, p_det, p_gt, p_iou, rank_start, acc_order, cat_start)


def _match(pb: _Problem, gt_ignore: np.ndarray, crowd: np.ndarray) -> np.ndarray:
    """Greedy matching at every IoU threshold and every range.

    Parameters
    ----------
    gt_ignore : ndarray of bool, shape (A, G)
        Per range, which ground truths are ignored (crowd or out of range).
    crowd : ndarray of bool, shape (G,)

    Returns
    -------
    ndarray of int, shape (A, T, D)
        Index of the matched ground truth, or -1.

    Notes
    -----
    A detection's choice among its free candidates with IoU >= t is the
    maximum of one integer key per pair: ``counted * big + iou_rank * width +
    position``, where ``iou_rank`` is the pair's IoU's rank among all distinct
    IoUs and ``position`` its place in file order within the detection's
    candidates (``width`` bounds it).  So an object that counts beats any
    ignored one, then the higher IoU wins, then the later annotation, which is
    the reference's order of preference.
    """
    n_a, n_g = gt_ignore.shape
    n_t = len(IOU_THRESHOLDS)
    n_d = len(pb.rec)
    matched = np.full((n_a, n_t, n_d), -1, dtype=np.int64)
    if len(pb.p_det) == 0:
        return matched
    taken = np.zeros((n_a, n_t, n_g), dtype=bool)
    thr = IOU_THRESHOLDS[None, :, None]
    new_seg = np.r_[True, pb.p_det[1:] != pb.p_det[:-1]]
    seg_first = np.flatnonzero(new_seg)
    position = np.arange(len(pb.p_det)) - np.repeat(seg_first, np.diff(np.r_[seg_first, len(pb.p_det)]))
    width = int(position.max()) + 1
    iou_rank = np.unique(pb.p_iou, return_inverse=True)[1].reshape(-1)
    big = (int(iou_rank.max()) + 1) * width
    key_base = iou_rank * width + position  # (P,)
    for r in range(len(pb.rank_start) - 1):
        p0, p1 = pb.rank_start[r], pb.rank_start[r + 1]
        if p0 == p1:
            continue
        # Within one rank each image-category group has at most one detection,
        # so the detections of a rank are matched simultaneously.
        pg = pb.p_gt[p0:p1]
        starts = np.flatnonzero(new_seg[p0:p1])
        eligible = (~taken[:, :, pg] | crowd[pg]) & (pb.p_iou[p0:p1] >= thr)  # (A, T, P)
        key = key_base[p0:p1] + np.where(gt_ignore[:, pg], 0, big)[:, None, :]  # (A, 1, P)
        best = np.maximum.reduceat(np.where(eligible, key, -1), starts, axis=2)  # (A, T, S)
        a_i, t_i, s_i = np.nonzero(best >= 0)
        pair = p0 + starts[s_i] + best[a_i, t_i, s_i] % width
        g_i = pb.p_gt[pair]
        taken[a_i, t_i, g_i] = True
        matched[a_i, t_i, pb.p_det[pair]] = g_i
    return matched


def _accumulate(
    pb: _Problem,
    truth: _Truth,
    gt_ignore: np.ndarray,
    det_out: np.ndarray,
    matched: np.ndarray,
    max_dets: Sequence[int],
) -> tuple[np.ndarray, np.ndarray]:
    """Precision at the recall points and final recall, as the reference accumulates them.

    Parameters
    ----------
    gt_ignore : ndarray of bool, shape (A, G)
    det_out : ndarray of bool, shape (A, D)
        Detections outside each range (ignored when unmatched).
    matched : ndarray of int, shape (A, T, D)
    max_dets : sequence of int (M values)

    Returns
    -------
    precision : ndarray of shape (T, R, K, A, M)
    recall : ndarray of shape (T, K, A, M)
        -1 where a category has no counted ground truth in a range.
    """
    n_a = gt_ignore.shape[0]
    n_t, n_r, n_k, n_m = len(IOU_THRESHOLDS), len(RECALL_POINTS), len(truth.cat_ids), len(max_dets)
    precision = -np.ones((n_t, n_r, n_k, n_a, n_m))
    recall = -np.ones((n_t, n_k, n_a, n_m))
    is_match = matched >= 0
    det_ig = np.where(is_match, _ignored_match(gt_ignore, matched), det_out[:, None, :])  # (A, T, D)
    tps_all = is_match & ~det_ig
    fps_all = ~is_match & ~det_ig
    # Counted ground truth per category and range.
    npig = np.zeros((n_k, n_a), dtype=np.int64)
    for a in range(n_a):
        npig[:, a] = np.bincount(truth.cat[~gt_ignore[a]], minlength=n_k)
    for k in range(n_k):
        if not npig[k].any():
            continue
        seg = pb.acc_order[pb.cat_start[k] : pb.cat_start[k + 1]]
        for m, max_det in enumerate(max_dets):
            sel = seg[pb.rank[seg] < max_det]
            nd = len(sel)
            # Counts stay exact integers in float64 (the reference casts int cumsums to float).
            tp = np.cumsum(tps_all[:, :, sel], axis=2, dtype=np.float64)  # (A, T, nd)
            fp = np.cumsum(fps_all[:, :, sel], axis=2, dtype=np.float64)
            for a in range(n_a):
                if npig[k, a] == 0:
                    continue
                rc = tp[a] / npig[k, a]  # (T, nd)
                pr = tp[a] / (fp[a] + tp[a] + _EPS)
                recall[:, k, a, m] = rc[:, -1] if nd else 0.0
                pr = np.maximum.accumulate(pr[:, ::-1], axis=1)[:, ::-1]
                for t in range(n_t):
                    inds = np.searchsorted(rc[t], RECALL_POINTS, side="left")
                    ok = inds < nd
                    q = np.zeros(n_r)
                    q[ok] = pr[t, inds[ok]]
                    precision[t, :, k, a, m] = q
    return precision, recall


def _ignored_match(gt_ignore: np.ndarray, matched: np.ndarray) -> np.ndarray:
    """Whether each matched ground truth is ignored (False where unmatched).

    ``gt_ignore`` is (A, G); ``matched`` is (A, ...) of indices or -1.
    """
    n_a, n_g = gt_ignore.shape
    padded = np.concatenate([gt_ignore, np.zeros((n_a, 1), dtype=bool)], axis=1)
    idx = np.where(matched >= 0, matched, n_g)
    return padded[np.arange(n_a).reshape((n_a,) + (1,) * (matched.ndim - 1)), idx]


def _mean_valid(s: np.ndarray) -> float:
    v = s[s > -1]
    return float(np.mean(v)) if v.size else -1.0


def _summarize(precision: np.ndarray, recall: np.ndarray) -> tuple[float, ...]:
    """The twelve statistics from arrays shaped as :func:`_accumulate` returns (4 ranges, 3 maxDets)."""
    m100 = MAX_DETS.index(100)

    def ap(a=0, t=None):
        s = precision if t is None else precision[[t]]
        return _mean_valid(s[:, :, :, a, m100])

    def ar(a=0, m=m100):
        return _mean_valid(recall[:, :, a, m])

    return (
        ap(),
        ap(t=_T50),
        ap(t=_T75),
        ap(1),
        ap(2),
        ap(3),
        ar(m=0),
        ar(m=1),
        ar(),
        ar(1),
        ar(2),
        ar(3),
    )


# --------------------------------------------------------------------------- evaluation


def _range_ignore(values: np.ndarray, lo: float, hi: float) -> np.ndarray:
    return (values < lo) | (values > hi)


class Evaluation:
    """The result of :func:`evaluate`.

    Attributes
    ----------
    stats : tuple of 12 float
        COCO box statistics in COCO order (:data:`STAT_NAMES`); -1 where no
        ground truth counts.
    precision : ndarray of shape (T, R, K, A, M)
        Precision at IoU threshold ``T`` (10), recall point ``R`` (101),
        category ``K``, size range ``A`` (:data:`AREA_RANGES`), max detections
        ``M`` (:data:`MAX_DETS`); -1 where undefined.
    recall : ndarray of shape (T, K, A, M)
    per_category : list of CategoryResult
    confusion : Confusion
    n_predictions : int
        Records in the predictions list.
    n_unknown_category : int
        Predictions whose category is not a ground-truth category (left out
        of every metric, as in the reference).
    unknown_category_ids : tuple of int
        Those predictions' category ids, sorted, each once.
    """

    def __init__(self, truth: _Truth, preds: _Preds, problem: _Problem):
        self._truth = truth
        self._preds = preds
        self._pb = problem
        gt_ignore = np.stack([truth.crowd | _range_ignore(truth.area, lo, hi) for _, lo, hi in AREA_RANGES])
        with np.errstate(over="ignore"):  # an absurd box's area is inf, outside every range but "all"
            det_area = problem.box[:, 2] * problem.box[:, 3]
        det_out = np.stack([_range_ignore(det_area, lo, hi) for _, lo, hi in AREA_RANGES])
        self._matched = _match(problem, gt_ignore, truth.crowd)
        self.precision, self.recall = _accumulate(problem, truth, gt_ignore, det_out, self._matched, MAX_DETS)
        self.stats = _summarize(self.precision, self.recall)
        self.n_predictions = len(preds.score)
        self.n_unknown_category = int(np.count_nonzero(preds.cat < 0))
        self.unknown_category_ids = preds.unknown
        self.per_category = self._per_category()
        self._all_range = (gt_ignore[0], det_out[0])

    @functools.cached_property
    def confusion(self) -> Confusion:
        """Detections by predicted class and the class of the object they hit (computed on first use)."""
        return self._confusion(*self._all_range)

    # ---- summaries

    def _per_category(self) -> list[CategoryResult]:
        t = self._truth
        n_k = len(t.cat_ids)
        n_gt = np.bincount(t.cat[~t.crowd], minlength=n_k)
        n_pred = np.bincount(self._preds.cat[self._preds.cat >= 0], minlength=n_k)
        m100 = MAX_DETS.index(100)
        out = []
        for k in range(n_k):
            p = self.precision[:, :, k, 0, m100]
            out.append(
                CategoryResult(
                    id=int(t.cat_ids[k]),
                    name=t.cat_names[k],
                    n_gt=int(n_gt[k]),
                    n_pred=int(n_pred[k]),
                    ap=_mean_valid(p),
                    ap50=_mean_valid(p[_T50]),
                    ap75=_mean_valid(p[_T75]),
                    ar100=_mean_valid(self.recall[:, k, 0, m100]),
                )
            )
        return out

    def _confusion(self, gt_ignore: np.ndarray, det_out: np.ndarray) -> Confusion:
        t, pb = self._truth, self._pb
        n_k = len(t.cat_ids)
        counts = np.zeros((n_k + 1, n_k), dtype=np.int64)
        m = self._matched[0, _T50]  # (D,)
        hit = m >= 0
        tp = hit & ~_ignored_match(gt_ignore[None], m[None])[0]
        np.add.at(counts, (pb.cat[tp], pb.cat[tp]), 1)
        fp = np.flatnonzero(~hit & ~det_out)
        # Pairs of each false positive with every non-crowd object of its image.
        g_order = np.argsort(t.img, kind="stable")
        g_img = t.img[g_order]
        lo = np.searchsorted(g_img, pb.img[fp], side="left")
        cnt = np.searchsorted(g_img, pb.img[fp], side="right") - lo
        q_det = np.repeat(fp, cnt)
        q_gt = g_order[np.repeat(lo, cnt) + np.arange(len(q_det)) - np.repeat(np.cumsum(cnt) - cnt, cnt)]
        keep = (t.cat[q_gt] != pb.cat[q_det]) & ~t.crowd[q_gt]
        q_det, q_gt = q_det[keep], q_gt[keep]
        iou = box_iou(xyxy_from_bbox(pb.box)[q_det], xyxy_from_bbox(t.box)[q_gt])
        ok = iou >= 0.5
        q_det, q_gt, iou = q_det[ok], q_gt[ok], iou[ok]
        # Best IoU per detection (the first in file order among equals).
        order = np.lexsort((q_gt, -iou, q_det))
        q_det, q_gt = q_det[order], q_gt[order]
        first = np.r_[True, q_det[1:] != q_det[:-1]] if len(q_det) else np.zeros(0, bool)
        q_det, q_gt = q_det[first], q_gt[first]
        np.add.at(counts, (t.cat[q_gt], pb.cat[q_det]), 1)
        explained = np.zeros(len(pb.rec), dtype=bool)
        explained[q_det] = True
        rest = fp[~explained[fp]]
        np.add.at(counts, (np.full(len(rest), n_k), pb.cat[rest]), 1)
        return Confusion(names=t.cat_names, counts=counts)

    # ---- slices

    def fact_values(self, fact: str) -> tuple[np.ndarray, bool]:
        """Values of a per-object fact for every ground-truth object.

        Returns
        -------
        values : ndarray of shape (G,)
            float64 for numeric facts (NaN where missing), object otherwise
            (None where missing).
        categorical : bool
        """
        recs = self._truth.records
        if not recs:  # no objects (an empty subset of a sweep, say): no fact can be missing
            return np.zeros(0, dtype=np.float64), False
        if fact == "area":
            raw = [r["area"] for r in recs]
        else:
            raw = [r.get("synthgen", {}).get(fact) if isinstance(r.get("synthgen"), Mapping) else None for r in recs]
        if fact in DERIVED_FACTS and any(v is None for v in raw):
            derived = derive_fact(fact, self._truth)
            raw = [d if v is None else v for v, d in zip(raw, derived)]
        present = [v for v in raw if v is not None]
        if not present:
            known = sorted({k for r in recs if isinstance(r.get("synthgen"), Mapping) for k in r["synthgen"]})
            raise UserError(
                f"slice fact '{fact}' is not recorded for any object; facts in this dataset: "
                + ", ".join(dict.fromkeys(["area", *DERIVED_FACTS, *known]))
            )
        if all(isinstance(v, (bool, str)) for v in present):
            kinds = {type(v) for v in present}
            if len(kinds) > 1:
                raise UserError(f"slice fact '{fact}' mixes value types {sorted(k.__name__ for k in kinds)}")
            return np.array(raw, dtype=object), True
        if all(_is_real(v) for v in present):
            return np.array([np.nan if v is None else float(v) for v in raw], dtype=np.float64), False
        raise UserError(f"slice fact '{fact}' must hold numbers, booleans or strings (got e.g. {_show(present[0])})")

    def slice_by(self, fact: str, edges: Sequence[float] | None = None) -> list[BinResult]:
        """Metrics per bin of a per-object fact.

        Parameters
        ----------
        fact : str
            A key of ``annotation["synthgen"]``, or ``"area"`` (the
            annotation's own area, px^2).
        edges : sequence of float, optional
            Increasing bin edges for a numeric fact: bins ``[e0, e1)``, ...,
            ``[e_{n-1}, e_n]`` (the last one closed); objects outside every
            bin are in none.  Defaults to :data:`DEFAULT_EDGES`, powers of 2
            (size) or 4 (area) spanning the values, or, for other numeric
            facts, quintiles of the values.  Categorical facts (strings,
            booleans) are binned by value and take no edges.

        Returns
        -------
        list of BinResult
            One per bin, in edge or value order.  See the module docstring
            for how ignored objects and unmatched detections are treated.
        """
        values, categorical = self.fact_values(fact)
        t, pb = self._truth, self._pb
        if categorical:
            if edges is not None:
                raise UserError(f"slice fact '{fact}' is categorical and takes no bin edges (got {list(edges)})")
            levels = sorted({v for v in values if v is not None}, key=lambda v: (str(type(v)), v))
            in_bin = np.stack([np.array([v is not None and v == lv and type(v) is type(lv) for v in values], bool)
                               for lv in levels]) if len(values) else np.zeros((len(levels), 0), bool)
            bins = [(str(lv), None, None, lv) for lv in levels]
            det_out = np.zeros((len(levels), len(pb.rec)), dtype=bool)
        else:
            e = self._edges(fact, values, edges)
            if len(e) < 2:  # a fact without default edges, on no objects
                return []
            bins = [(_bin_label(e, i), float(e[i]), float(e[i + 1]), None) for i in range(len(e) - 1)]
            in_bin = _bin_masks(values, e)
            if fact in BOX_FACTS:
                w, h = pb.box[:, 2], pb.box[:, 3]
                with np.errstate(over="ignore"):  # an absurd box's area is inf: above every bin
                    det_val = w * h if fact == "area" else np.maximum(w, h)
                det_out = ~_bin_masks(det_val, e)
            else:
                det_out = np.zeros((len(bins), len(pb.rec)), dtype=bool)
        if not bins:
            return []
        gt_ignore = t.crowd[None, :] | ~in_bin  # (A, G)
        matched = self._matched_for(gt_ignore)
        precision, _ = _accumulate(pb, t, gt_ignore, det_out, matched, (_MAX_DET,))
        out = []
        for a, (label, lo, hi, value) in enumerate(bins):
            n_gt = int(np.count_nonzero(~gt_ignore[a]))
            found = []
            for ti in (_T50, _T75):
                m = matched[a, ti]
                found.append((m >= 0) & ~_ignored_match(gt_ignore[a : a + 1], m[None])[0])
            n50, n75 = int(found[0].sum()), int(found[1].sum())
            d50 = np.flatnonzero(found[0])
            if d50.size:
                g50 = matched[a, _T50, d50]
                mean_iou = float(np.mean(_coco_iou(pb.box[d50], t.box[g50], t.crowd[g50])))
            else:
                mean_iou = math.nan
            p = precision[:, :, :, a, 0]
            ap = _mean_valid(p)
            ap50 = _mean_valid(p[_T50])
            out.append(
                BinResult(
                    fact=fact,
                    label=label,
                    lo=lo,
                    hi=hi,
                    value=value,
                    n_gt=n_gt,
                    n_found50=n50,
                    recall50=n50 / n_gt if n_gt else math.nan,
                    recall75=n75 / n_gt if n_gt else math.nan,
                    ap50=ap50 if ap50 >= 0 else math.nan,
                    ap=ap if ap >= 0 else math.nan,
                    mean_iou=mean_iou,
                )
            )
        return out

    def _matched_for(self, gt_ignore: np.ndarray) -> np.ndarray:
        return _match(self._pb, gt_ignore, self._truth.crowd)

    @staticmethod
    def _edges(fact: str, values: np.ndarray, edges) -> np.ndarray:
        if edges is None:
            if fact in DEFAULT_EDGES:
                return np.asarray(DEFAULT_EDGES[fact], dtype=np.float64)
            finite = values[np.isfinite(values)]
            if fact in GEOMETRIC_BASE:
                return _geometric_edges(finite, GEOMETRIC_BASE[fact])
            if finite.size == 0:
                return np.zeros(0, dtype=np.float64)  # no values, no bins
            e = np.unique(np.quantile(finite, np.linspace(0, 1, 6)))
            return e if len(e) >= 2 else np.array([e[0], e[0]], dtype=np.float64)
        e = np.asarray(list(edges), dtype=np.float64)
        if e.ndim != 1 or len(e) < 2 or np.isnan(e).any() or np.any(np.diff(e) <= 0):
            raise UserError(
                f"bin edges for '{fact}' must be at least two strictly increasing numbers (got {list(edges)})"
            )
        return e

    # ---- output

    def to_dict(self, slices: Mapping[str, Sequence[BinResult]] | None = None) -> dict:
        """Everything as plain JSON-able values.

        Parameters
        ----------
        slices : mapping of fact -> list of BinResult, optional
            Results of :meth:`slice_by` to include.
        """
        out = {
            "stats": dict(zip(STAT_NAMES, (float(s) for s in self.stats))),
            "per_category": [c.to_dict() for c in self.per_category],
            "confusion": self.confusion.to_dict(),
            "counts": {
                "images": int(len(self._truth.image_ids)),
                "ground_truth": int(len(self._truth.img)),
                "crowd": int(np.count_nonzero(self._truth.crowd)),
                "predictions": self.n_predictions,
                "predictions_unknown_category": self.n_unknown_category,
                "unknown_category_ids": list(self.unknown_category_ids),
                "predictions_evaluated": int(len(self._pb.rec)),
            },
        }
        if slices:
            out["slices"] = {fact: [b.to_dict() for b in bins] for fact, bins in slices.items()}
        return out


#: Facts that follow from a COCO annotation alone, derived for objects that do not record them
#: (a COCO file from another tool): ``size`` the bbox's longer side, ``kind`` the category name,
#: ``max_iou`` and ``neighbours`` from the bboxes of the image's other non-crowd annotations
#: (largest IoU, and how many overlap it), as synthgen computes them from the annotated boxes.
DERIVED_FACTS = ("size", "kind", "max_iou", "neighbours")


def derive_fact(fact: str, truth: _Truth) -> list:
    """Values of a fact in :data:`DERIVED_FACTS` for every ground-truth object, from its annotation.

    Returns a list of length G (float, or the category name for ``kind``);
    crowd regions get None for the box-relation facts.
    """
    if fact == "kind":
        return [truth.cat_names[k] for k in truth.cat.tolist()]
    if fact == "size":
        return np.maximum(truth.box[:, 2], truth.box[:, 3]).tolist()
    best, count = _box_relations(xyxy_from_bbox(truth.box), truth.img, truth.crowd)
    values = best if fact == "max_iou" else count.astype(np.float64)
    return [None if c else v for v, c in zip(values.tolist(), truth.crowd.tolist())]


def _box_relations(boxes: np.ndarray, img: np.ndarray, crowd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per box: largest IoU with another non-crowd box of its image, and how many of them it overlaps.

    Parameters
    ----------
    boxes : ndarray of shape (G, 4)
        xyxy.
    img : ndarray of int, shape (G,)
    crowd : ndarray of bool, shape (G,)

    Returns
    -------
    best : ndarray of float64, shape (G,)
    count : ndarray of int64, shape (G,)

    Examples
    --------
    >>> b = np.array([[0, 0, 2, 2], [1, 1, 3, 3], [5, 5, 6, 6], [0, 0, 2, 2.0]])
    >>> best, count = _box_relations(b, np.array([0, 0, 0, 1]), np.zeros(4, bool))
    >>> best.round(4).tolist(), count.tolist()
    ([0.1429, 0.1429, 0.0, 0.0], [1, 1, 0, 0])
    """
    from synthgen.geometry import pairwise_iou

    best = np.zeros(len(boxes))
    count = np.zeros(len(boxes), dtype=np.int64)
    order = np.argsort(img, kind="stable")
    starts = np.flatnonzero(np.r_[True, img[order][1:] != img[order][:-1]]) if len(img) else np.zeros(0, int)
    for idx in np.split(order, starts[1:]):
        keep = idx[~crowd[idx]]
        if len(keep) < 2:
            continue
        iou = pairwise_iou(boxes[keep], boxes[keep])  # (n, n)
        np.fill_diagonal(iou, 0.0)
        best[keep] = iou.max(axis=1)
        count[keep] = np.count_nonzero(iou > 0, axis=1)
    return best, count


def _geometric_edges(values: np.ndarray, base: float, refine: int = 2) -> np.ndarray:
    """Powers of ``base`` spanning the positive values, with 0 first when some value is below the first power.

    When distinct values fall in fewer than three such bins (a narrow subset,
    say sizes 9 to 14 px), the base is replaced by its square root, up to
    ``refine`` times, so that a figure shows a trend rather than one point.

    Examples
    --------
    >>> _geometric_edges(np.array([1.5, 3.0, 7.9]), 2.0).tolist()
    [1.0, 2.0, 4.0, 8.0]
    >>> _geometric_edges(np.array([0.0, 5.0]), 2.0).tolist()
    [0.0, 4.0, 8.0]
    >>> [round(float(x), 2) for x in _geometric_edges(np.array([9.0, 11.0, 14.0]), 2.0)]
    [8.0, 9.51, 11.31, 13.45, 16.0]
    """
    e = _powers_spanning(values, base)
    positive = values[values > 0]
    if refine > 0 and len(e) < 4 and positive.size and positive.max() > positive.min():
        return _geometric_edges(values, math.sqrt(base), refine - 1)
    return e


def _powers_spanning(values: np.ndarray, base: float) -> np.ndarray:
    positive = values[values > 0]
    if positive.size == 0:
        return np.array([0.0, 1.0])
    lb = math.log(base)
    k0 = math.floor(math.log(positive.min()) / lb)
    k1 = max(math.ceil(math.log(positive.max()) / lb), k0 + 1)
    e = base ** np.arange(k0, k1 + 1, dtype=np.float64)
    while e[0] > positive.min():  # guard against rounding in the logarithms
        e = np.r_[e[0] / base, e]
    while e[-1] < positive.max():
        e = np.r_[e, e[-1] * base]
    return np.r_[0.0, e] if (values < e[0]).any() else e


def _bin_masks(values: np.ndarray, e: np.ndarray) -> np.ndarray:
    """(A, N) membership of values in bins ``[e_i, e_{i+1})``, the last bin closed."""
    n_bins = len(e) - 1
    idx = np.searchsorted(e, values, side="right") - 1
    idx = np.where(values == e[-1], n_bins - 1, idx)
    idx = np.where(np.isnan(values) | (values < e[0]) | (values > e[-1]), -1, idx)
    return idx[None, :] == np.arange(n_bins)[:, None]


def _fmt_edge(x: float) -> str:
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.4g}"


def _bin_label(e: np.ndarray, i: int) -> str:
    close = "]" if i == len(e) - 2 and math.isfinite(e[-1]) else ")"
    return f"[{_fmt_edge(e[i])}, {_fmt_edge(e[i + 1])}{close}"


def evaluate(
    coco_gt: Mapping,
    predictions: list,
    *,
    gt_name: str = "ground truth",
    pred_name: str = "predictions",
) -> Evaluation:
    """Score detections against COCO ground truth by the COCO box rules.

    Parameters
    ----------
    coco_gt : dict
        COCO JSON (``images``, ``annotations`` with ``id``, ``image_id``,
        ``category_id``, ``bbox``, ``area``, ``iscrowd``; ``categories``).
    predictions : list of dict
        COCO results records ``{image_id, category_id, bbox: [x, y, w, h],
        score}``; not modified.  An empty list is valid: AP and AR are 0
        wherever there is ground truth.
    gt_name, pred_name : str
        Names used in error messages (usually the file paths).

    Returns
    -------
    Evaluation

    Raises
    ------
    InputFileError
        When a record breaks a rule; the message names the record and rule.

    Examples
    --------
    >>> gt = {"images": [{"id": 1}], "categories": [{"id": 1, "name": "disc"}],
    ...       "annotations": [{"id": 1, "image_id": 1, "category_id": 1,
    ...                        "bbox": [0, 0, 10, 10], "area": 100.0, "iscrowd": 0}]}
    >>> ev = evaluate(gt, [{"image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10], "score": 0.9}])
    >>> round(ev.stats[0], 6), round(ev.stats[1], 6)
    (1.0, 1.0)
    """
    truth = _parse_truth(coco_gt, gt_name)
    preds = _parse_predictions(predictions, pred_name, truth)
    return Evaluation(truth, preds, _build_problem(truth, preds))


# --------------------------------------------------------------------------- files and options


def _read_json(path: Path):
    import orjson

    data = read_input(path)
    try:
        return orjson.loads(data)
    except orjson.JSONDecodeError as exc:
        raise InputFileError(path, f"is not valid JSON ({exc})") from None


def read_predictions(path) -> list:
    """Load a COCO results file (a JSON array of records).

    Raises
    ------
    InputFileError
        When the file is missing, not JSON, or not an array.
    """
    path = Path(path)
    data = _read_json(path)
    if not isinstance(data, list):
        raise InputFileError(
            path,
            "predictions must be a JSON array of {image_id, category_id, bbox, score} records "
            f"(got {type(data).__name__})",
        )
    return data


def read_ground_truth(path) -> tuple[dict, Path]:
    """Load COCO ground truth from a dataset directory or a JSON file.

    Parameters
    ----------
    path : path-like
        A synthgen dataset directory (its ``annotations.json`` is read) or a
        COCO JSON file.

    Returns
    -------
    (dict, Path)
        The parsed JSON and the file it came from.
    """
    path = Path(path)
    if path.is_dir():
        path = path / "annotations.json"
    data = _read_json(path)
    if not isinstance(data, dict):
        raise InputFileError(path, f"must be a COCO JSON object (got {type(data).__name__})")
    return data, path


def parse_slice_spec(spec: str) -> tuple[str, tuple[float, ...] | None]:
    """Parse ``FACT`` or ``FACT:E0,E1,...`` into a fact and optional edges.

    Examples
    --------
    >>> parse_slice_spec("size:0,16,32,inf")
    ('size', (0.0, 16.0, 32.0, inf))
    >>> parse_slice_spec("kind")
    ('kind', None)
    """
    fact, sep, rest = spec.partition(":")
    fact = fact.strip()
    if not fact:
        raise UserError(f"slice '{spec}' must be FACT or FACT:E0,E1,... (no fact named)")
    if not sep:
        return fact, None
    try:
        edges = tuple(float(x) for x in rest.split(","))
    except ValueError:
        raise UserError(f"slice '{spec}': bin edges must be numbers separated by commas (got '{rest}')") from None
    if len(edges) < 2 or any(math.isnan(x) for x in edges) or any(b <= a for a, b in zip(edges, edges[1:])):
        raise UserError(f"slice '{spec}': bin edges must be at least two strictly increasing numbers (got '{rest}')")
    return fact, edges


def score_files(dataset, predictions, by: Sequence[str] = ()) -> tuple[Evaluation, dict[str, list[BinResult]]]:
    """Score a predictions file against a dataset, with slices.

    Parameters
    ----------
    dataset : path-like
        Dataset directory or COCO JSON file (:func:`read_ground_truth`).
    predictions : path-like
        COCO results JSON (:func:`read_predictions`).
    by : sequence of str
        Slice specs ``FACT`` or ``FACT:E0,E1,...`` (:func:`parse_slice_spec`).

    Returns
    -------
    (Evaluation, dict of fact -> list of BinResult)
    """
    gt, gt_path = read_ground_truth(dataset)
    preds = read_predictions(predictions)
    ev = evaluate(gt, preds, gt_name=str(gt_path), pred_name=str(predictions))
    slices = {}
    for spec in by:
        fact, edges = parse_slice_spec(spec)
        slices[fact] = ev.slice_by(fact, edges)
    return ev, slices


@dataclass(frozen=True, slots=True)
class SweepPoint:
    """One subset of a sweep: where it is, its varied values, and its scores."""

    subset: str
    values: dict
    evaluation: Evaluation
    slices: dict

    @property
    def label(self) -> str:
        """``key=value`` pairs of the varied keys, comma-separated."""
        return ", ".join(f"{k}={_json_text(v)}" for k, v in self.values.items())

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary."""
        return {"subset": self.subset, "values": self.values, **self.evaluation.to_dict(self.slices)}


def _json_text(v) -> str:
    import orjson

    return v if isinstance(v, str) else orjson.dumps(v).decode()


def _parse_value(text: str):
    import orjson

    try:
        return orjson.loads(text)
    except orjson.JSONDecodeError:
        return text


def _sweep_order(point: SweepPoint):
    def key(v):
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return (0, (float(v),), "")
        if isinstance(v, list) and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v):
            return (0, tuple(float(x) for x in v), "")
        return (1, (), _json_text(v))

    return tuple(key(v) for v in point.values.values()) + (point.subset,)


def score_sweep(sweep_dir, pred_dir, by: Sequence[str] = ()) -> list[SweepPoint]:
    """Score every subset of a sweep against its own predictions file.

    Parameters
    ----------
    sweep_dir : path-like
        A sweep: subset datasets in directories named ``KEY=VALUE`` (nested
        for several varied keys), each with its ``annotations.json``.
    pred_dir : path-like
        One COCO results file per subset at the same relative path plus
        ``.json``: subset ``SWEEP/objects.size=[4, 8]`` reads
        ``PRED_DIR/objects.size=[4, 8].json``.
    by : sequence of str
        Slice specs, applied to every subset.

    Returns
    -------
    list of SweepPoint
        Ordered by the varied values (numbers and number lists numerically).

    Raises
    ------
    InputFileError
        When the sweep has no subsets or a subset's predictions file is missing.
    """
    sweep_dir, pred_dir = Path(sweep_dir), Path(pred_dir)
    if not sweep_dir.is_dir():
        raise InputFileError(sweep_dir, "must be a sweep directory of subset datasets")
    subsets = sorted(p.parent for p in sweep_dir.rglob("annotations.json") if p.parent != sweep_dir)
    if not subsets:
        raise InputFileError(sweep_dir, "holds no subset directories KEY=VALUE with an annotations.json")
    points = []
    for sub in subsets:
        rel = sub.relative_to(sweep_dir)
        values = {}
        for part in rel.parts:
            key, sep, text = part.partition("=")
            if sep:
                values[key] = _parse_value(text)
        pred = pred_dir / (str(rel) + ".json")
        if not pred.is_file():
            raise InputFileError(pred, f"predictions for sweep subset '{rel}' are missing (expected this file)")
        ev, slices = score_files(sub, pred, by)
        points.append(SweepPoint(subset=str(rel), values=values, evaluation=ev, slices=slices))
    return sorted(points, key=_sweep_order)
