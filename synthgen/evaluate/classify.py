"""What each detection is: the confusion between classes at IoU 0.5.

:class:`Confusion` tables detections by predicted class and the class of the object they hit;
:func:`confusion_counts` fills it from the matches :mod:`synthgen.evaluate.cocoeval` made.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthgen.formats.coco import xyxy_from_bbox
from synthgen.geometry import box_iou


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
    counts = np.zeros((n_k + 1, n_k), dtype=np.int64)
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
