"""What each detection is: the confusion between classes, and each prediction's error kind, at IoU 0.5.

:class:`Confusion` tables detections by predicted class and the class of the object they hit;
:func:`confusion_counts` fills it from the matches :mod:`synthgen.evaluate.cocoeval` made.
:func:`classify_predictions` names each prediction's kind (:data:`synthgen.formats.results.PREDICTION_KINDS`) from the
same matcher, for the contact sheet of :mod:`synthgen.report`; :func:`classify_matches` adds the annotation each
prediction took, for the error breakdown of the report page (:mod:`synthgen.page.errors`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synthgen.errors import InputFileError, is_int
from synthgen.evaluate.match import build_problem, match
from synthgen.evaluate.parse import Preds, Truth
from synthgen.formats.coco import bbox_from_xyxy, xyxy_from_bbox
from synthgen.formats.results import read_predictions as read_prediction_records
from synthgen.geometry import box_iou, pairwise_iou


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


def confusion_counts(t, pb, hit: np.ndarray, tp: np.ndarray, det_out: np.ndarray) -> Confusion:
    """Count detections by predicted class and the class of the object they hit (see :class:`Confusion`).

    Parameters
    ----------
    t, pb
        The parsed ground truth and the evaluation's detections in match order
        (:mod:`synthgen.evaluate.parse`, :mod:`synthgen.evaluate.cocoeval`).
    hit, tp : ndarray of bool, shape (D,)
        Matched at IoU 0.5, and matched to an object that counts.
    det_out : ndarray of bool, shape (D,)
        Detections left out of the size range.
    """
    n_k = len(t.cat_ids)
    fp = np.flatnonzero(~hit & ~det_out)
    best = _best_other_class(t, pb, fp, xyxy_from_bbox(t.box), xyxy_from_bbox(pb.box))  # (F,) object or -1
    fp_row = np.full(len(fp), n_k, dtype=np.int64)  # "none" unless it hit an object of another class
    fp_row[best >= 0] = t.cat[best[best >= 0]]
    row = np.concatenate([pb.cat[tp], fp_row])
    col = np.concatenate([pb.cat[tp], pb.cat[fp]])
    counts = np.bincount(row * n_k + col, minlength=(n_k + 1) * n_k).reshape(n_k + 1, n_k)
    return Confusion(names=t.cat_names, counts=counts)


def _best_other_class(t, pb, fp: np.ndarray, gt_xyxy: np.ndarray, det_xyxy: np.ndarray) -> np.ndarray:
    """For each detection in ``fp``, the non-crowd object of another class in its image with the highest IoU
    (xyxy IoU of :func:`synthgen.geometry.box_iou`) when it is at least 0.5, the first in file order among
    equals; -1 where there is none.

    The candidates are laid out as a table with one row per detection and one column per object of
    its image (padded), so the IoUs are a few whole-table array operations; an image with far more
    objects than the others would make the padding dominate, and then the pairs are listed one by one.
    """
    keep = np.flatnonzero(~t.crowd)
    g_order = keep[np.argsort(t.img[keep], kind="stable")]  # non-crowd objects by image, file order within
    n_img = int(max(t.img.max(initial=-1), pb.img.max(initial=-1))) + 1
    per_img = np.bincount(t.img[g_order], minlength=n_img)
    width = int(per_img.max(initial=0))
    n_pairs = int(per_img[pb.img[fp]].sum())
    if len(fp) == 0 or n_pairs == 0:
        return np.full(len(fp), -1, dtype=np.int64)
    if len(fp) * width > 4 * n_pairs + (1 << 20):
        return _best_other_class_pairs(t, pb, fp, g_order, per_img, gt_xyxy, det_xyxy)
    start = np.cumsum(per_img) - per_img
    col = np.arange(len(g_order)) - start[t.img[g_order]]
    table = np.full((n_img, width), -1, dtype=np.int64)
    table[t.img[g_order], col] = g_order
    best = np.empty(len(fp), dtype=np.int64)
    step = max(1, (1 << 18) // max(width, 1))  # rows at once, so that the temporaries stay small
    for r0 in range(0, len(fp), step):
        f = fp[r0 : r0 + step]
        cand = table[pb.img[f]]  # (F, W)
        valid = cand >= 0
        g = np.where(valid, cand, 0)
        valid &= t.cat[g] != pb.cat[f][:, None]
        iou = box_iou(np.repeat(det_xyxy[f], width, axis=0), gt_xyxy[g.ravel()]).reshape(g.shape)
        iou[~(valid & (iou >= 0.5))] = -1.0  # (NaN, from absurd boxes, is below too)
        j = np.argmax(iou, axis=1)  # the first column among equal IoUs: file order
        rows = np.arange(len(f))
        best[r0 : r0 + step] = np.where(iou[rows, j] >= 0.5, cand[rows, j], -1)
    return best


def _best_other_class_pairs(t, pb, fp, g_order, per_img, gt_xyxy, det_xyxy) -> np.ndarray:
    """:func:`_best_other_class` by listing every (detection, object) pair, for very uneven images."""
    start = np.cumsum(per_img) - per_img
    lo = start[pb.img[fp]]
    cnt = per_img[pb.img[fp]]
    q = np.repeat(np.arange(len(fp)), cnt)
    q_gt = g_order[np.repeat(lo, cnt) + np.arange(len(q)) - np.repeat(np.cumsum(cnt) - cnt, cnt)]
    other = t.cat[q_gt] != pb.cat[fp[q]]
    q, q_gt = q[other], q_gt[other]
    iou = box_iou(det_xyxy[fp[q]], gt_xyxy[q_gt])
    ok = iou >= 0.5
    q, q_gt, iou = q[ok], q_gt[ok], iou[ok]
    order = np.lexsort((q_gt, -iou, q))  # best IoU per detection, the first in file order among equals
    q, q_gt = q[order], q_gt[order]
    first = np.r_[True, q[1:] != q[:-1]] if len(q) else np.zeros(0, bool)
    best = np.full(len(fp), -1, dtype=np.int64)
    best[q[first]] = q_gt[first]
    return best


# --------------------------------------------------------------------------- error kinds


@dataclass(frozen=True, slots=True)
class Predictions:
    """Predicted boxes and what each one is.

    Attributes
    ----------
    boxes : ndarray of float64, shape (P, 4)
        xyxy in pixels.
    image_id, category_id : ndarray of int64, shape (P,)
    score : ndarray of float64, shape (P,)
        1.0 where the file gives none.
    kind : tuple of str, length P
        One of :data:`synthgen.formats.results.PREDICTION_KINDS`, or ``""`` until classified.
    """

    boxes: np.ndarray
    image_id: np.ndarray
    category_id: np.ndarray
    score: np.ndarray
    kind: tuple[str, ...]

    def __len__(self) -> int:
        return len(self.boxes)

    def with_kinds(self, kinds: Sequence[str]) -> Predictions:
        """The same predictions with ``kind`` replaced (one name per prediction)."""
        if len(kinds) != len(self):
            raise ValueError(f"'kinds' must have one entry per prediction ({len(self)}), got {len(kinds)}")
        return Predictions(self.boxes, self.image_id, self.category_id, self.score, tuple(kinds))

    @classmethod
    def from_records(cls, records: Sequence[Mapping]) -> Predictions:
        """Unclassified predictions from COCO results records (already checked), in their order; score 1.0 if absent."""
        n = len(records)
        return cls(
            boxes=xyxy_from_bbox([r["bbox"] for r in records]).reshape(-1, 4) if n else np.zeros((0, 4)),
            image_id=np.array([r["image_id"] for r in records], dtype=np.int64),
            category_id=np.array([r["category_id"] for r in records], dtype=np.int64),
            score=np.array([float(r.get("score", 1.0)) for r in records], dtype=np.float64),
            kind=("",) * n,
        )


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def read_prediction_boxes(path) -> Predictions:
    """Read a COCO results file: a JSON array of ``{image_id, category_id, bbox, score}``.

    Raises
    ------
    synthgen.errors.InputFileError
        Naming the file and the first bad record.
    """
    path = Path(path)
    data = read_prediction_records(path)
    for i, r in enumerate(data):
        if not isinstance(r, dict):
            raise InputFileError(path, f"record {i} must be an object (got {type(r).__name__})")
        for key in ("image_id", "category_id"):
            if not is_int(r.get(key)):
                got = r.get(key, "<missing>")
                raise InputFileError(path, f"record {i}: '{key}' must be an integer (got {got!r})")
        b = r.get("bbox")
        if not (isinstance(b, list) and len(b) == 4 and all(_finite(v) for v in b) and b[2] >= 0 and b[3] >= 0):
            rule = "'bbox' must be 4 finite numbers [x, y, w, h] with w, h >= 0"
            raise InputFileError(path, f"record {i}: {rule} (got {b!r})")
        if "score" in r and not _finite(r["score"]):
            raise InputFileError(path, f"record {i}: 'score' must be a finite number (got {r['score']!r})")
    return Predictions.from_records(data)




def truth_arrays(coco: Mapping):
    """Ground truth as arrays: boxes (N, 4) xyxy, image ids, category ids, crowd flags, records."""
    anns = list(coco.get("annotations", []))
    boxes = xyxy_from_bbox([a["bbox"] for a in anns]) if anns else np.zeros((0, 4))
    img = np.array([a["image_id"] for a in anns], dtype=np.int64)
    cat = np.array([a["category_id"] for a in anns], dtype=np.int64)
    crowd = np.array([bool(a.get("iscrowd", 0)) for a in anns], dtype=bool)
    return boxes, img, cat, crowd, anns


def classify_predictions(coco: Mapping, preds: Predictions, *, iou: float = 0.5, near: float = 0.1):
    """Say what each prediction is by COCO's greedy match to the ground truth (:func:`synthgen.evaluate.match.match`).

    Per image and class, predictions are taken in descending score (ties keep
    the file's order, as the COCO evaluation does; REFERENCE.md: COCO-style
    AP).  Each takes the free ground truth of its own class with the highest
    IoU ``>= iou`` (among equal IoUs the later annotation, as pycocotools does)
    and is a ``true_positive``; otherwise it is ``ignored`` when an ignore
    region (``iscrowd`` 1) of its class covers at least ``iou`` of its own box
    area (COCO's overlap with a crowd region; the COCO evaluation counts such a
    detection neither way), a ``duplicate`` when a taken box of its class has
    IoU ``>= iou``, ``wrong_class`` when a box of another class has IoU
    ``>= iou``, ``localization`` when a box of its class has IoU in ``[near,
    iou)``, and ``background`` otherwise.  There is no cap on detections per
    image.

    Parameters
    ----------
    coco : dict
        COCO ground truth.
    preds : Predictions
    iou, near : float
        Match threshold and the lowest IoU still counted as a localization error.

    Returns
    -------
    kinds : Predictions
        ``preds`` with ``kind`` filled in.
    missed : frozenset of int
        Ids of the non-crowd annotations no true positive matched.

    See Also
    --------
    classify_matches : the same kinds, with the annotation each prediction took.

    Examples
    --------
    >>> gt = {"annotations": [{"image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10]}]}
    >>> p = Predictions(np.array([[0., 0, 10, 10], [1, 0, 11, 10], [50, 50, 60, 60]]),
    ...                 np.array([1, 1, 1]), np.array([1, 1, 1]), np.array([.9, .8, .7]), ("",) * 3)
    >>> classify_predictions(gt, p)[0].kind
    ('true_positive', 'duplicate', 'background')
    """
    out, took = classify_matches(coco, preds, iou=iou, near=near)
    *_, crowd, anns = truth_arrays(coco)
    matched = np.zeros(len(anns), dtype=bool)
    matched[took[np.array(out.kind, dtype=object) == "true_positive"]] = True
    missed = frozenset(a.get("id") for a, m, c in zip(anns, matched, crowd) if not m and not c)
    return out, missed


def classify_matches(coco: Mapping, preds: Predictions, *, iou: float = 0.5, near: float = 0.1):
    """Each prediction's kind (rules of :func:`classify_predictions`) and the annotation its match took.

    Returns
    -------
    kinds : Predictions
        ``preds`` with ``kind`` filled in.
    took : ndarray of int64, shape (P,)
        Index (file order) of the annotation each prediction matched at IoU
        ``iou`` (a true positive's object, or an ignore region), -1 for none.
    """
    gt_boxes, gt_img, gt_cat, crowd, anns = truth_arrays(coco)
    took = _match_at(anns, gt_img, gt_cat, crowd, preds, iou)
    hit = took >= 0
    on_crowd = np.zeros(len(preds), dtype=bool)
    on_crowd[hit] = crowd[took[hit]]
    kinds = np.where(hit & ~on_crowd, "true_positive", np.where(on_crowd, "ignored", "")).astype(object)
    rest = np.flatnonzero(~hit)
    for image_id in np.unique(preds.image_id[rest]):
        p_idx = rest[preds.image_id[rest] == image_id]
        g_idx = np.flatnonzero((gt_img == image_id) & ~crowd)
        v = pairwise_iou(preds.boxes[p_idx], gt_boxes[g_idx])  # (P_i, G_i)
        same = gt_cat[g_idx][None, :] == preds.category_id[p_idx][:, None]
        kinds[p_idx] = np.select(
            [(same & (v >= iou)).any(1), (~same & (v >= iou)).any(1), (same & (v >= near)).any(1)],
            ["duplicate", "wrong_class", "localization"],
            "background",
        )
    return preds.with_kinds([str(k) for k in kinds]), took


def _match_at(anns: list, gt_img: np.ndarray, gt_cat: np.ndarray, crowd: np.ndarray, preds, iou: float) -> np.ndarray:
    """Index of the annotation each prediction takes at IoU ``iou`` (or -1), every prediction kept (no cap)."""
    image_ids = np.unique(np.r_[gt_img, preds.image_id])
    cat_ids = np.unique(np.r_[gt_cat, preds.category_id])
    gt_box = np.array([a["bbox"] for a in anns], dtype=np.float64).reshape(-1, 4)
    truth = Truth(image_ids=image_ids, cat_ids=cat_ids, cat_names=(), img=np.searchsorted(image_ids, gt_img),
                  cat=np.searchsorted(cat_ids, gt_cat), box=gt_box, area=np.zeros(len(anns)), crowd=crowd, records=())
    xywh = np.array(bbox_from_xyxy(preds.boxes), dtype=np.float64).reshape(-1, 4)
    pr = Preds(img=np.searchsorted(image_ids, preds.image_id), cat=np.searchsorted(cat_ids, preds.category_id),
               box=xywh, score=preds.score)
    pb = build_problem(truth, pr, None)
    took = np.full(len(preds), -1, dtype=np.int64)
    took[pb.rec] = match(pb, crowd[None, :], crowd, np.array([iou]))[0, 0]
    return took
