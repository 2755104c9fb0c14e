"""Matching detections to ground truth, COCO box metrics, and metrics per slice.

This module parses (through :mod:`synthgen.evaluate.parse`), matches, accumulates and
summarizes; :mod:`synthgen.evaluate.slices` says which objects and detections fall in each
bin of a fact, :mod:`synthgen.evaluate.classify` tables the confusion between classes, and
:mod:`synthgen.evaluate.sweep` scores a sweep.

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
  a COCO annotation determines are derived (:data:`synthgen.evaluate.slices.DERIVED_FACTS`).

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

import contextlib
import functools
import gc
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synthgen._io import read_json
from synthgen.errors import InputFileError
from synthgen.evaluate.classify import Confusion, confusion_counts
from synthgen.evaluate.match import Problem, build_problem, coco_iou, match
from synthgen.evaluate.parse import Preds, Truth, parse_predictions, parse_truth
from synthgen.evaluate.slices import (
    BinResult,
    fact_values,
    parse_slice_spec,
    slice_bins,
)
from synthgen.formats.coco import AREA_RANGES
from synthgen.formats.dataset_dir import ANNOTATIONS
from synthgen.formats.results import read_predictions

__all__ = [
    "IOU_THRESHOLDS",
    "RECALL_POINTS",
    "MAX_DETS",
    "AREA_RANGES",
    "STAT_NAMES",
    "CategoryResult",
    "Evaluation",
    "evaluate",
    "read_predictions",
    "read_ground_truth",
    "score_files",
]

#: IoU thresholds 0.50, 0.55, ..., 0.95, built exactly as the reference does
#: (REFERENCE.md: COCO-style AP).
IOU_THRESHOLDS = np.linspace(0.5, 0.95, int(np.round((0.95 - 0.5) / 0.05)) + 1, endpoint=True)
#: Recall points 0.00, 0.01, ..., 1.00 at which precision is read.
RECALL_POINTS = np.linspace(0.0, 1.00, int(np.round((1.00 - 0.0) / 0.01)) + 1, endpoint=True)
#: Detections kept per image and category for the recall statistics.
MAX_DETS = (1, 10, 100)
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


def _accumulate(
    pb: Problem,
    truth: Truth,
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
        seg_rank = pb.rank[seg]
        tps_k, fps_k = tps_all[:, :, seg], fps_all[:, :, seg]  # (A, T, n)
        count_type = np.int32 if len(seg) < 2**31 else np.int64
        for m, max_det in enumerate(max_dets):
            keep = seg_rank < max_det
            every = bool(keep.all())
            nd = len(seg) if every else int(np.count_nonzero(keep))
            # Integer counts, as the reference's cumsums; once in float64 they are the same exact values.
            tp = np.cumsum(tps_k if every else tps_k[:, :, keep], axis=2, dtype=count_type)  # (A, T, nd)
            fp = np.cumsum(fps_k if every else fps_k[:, :, keep], axis=2, dtype=count_type)
            fp += tp  # detections counted so far
            for a in range(n_a):
                if npig[k, a] == 0:
                    continue
                rc = tp[a] / npig[k, a]  # (T, nd)
                pr = tp[a] / (fp[a] + _EPS)
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
    padded = np.zeros((n_a, n_g + 1), dtype=bool)  # column n_g: "unmatched", never ignored
    padded[:, :n_g] = gt_ignore
    out = np.empty(matched.shape, dtype=bool)
    for a in range(n_a):
        np.take(padded[a], matched[a], out=out[a], mode="wrap")  # -1 wraps to column n_g
    return out


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

    def __init__(self, truth: Truth, preds: Preds, problem: Problem):
        self._truth = truth
        self._preds = preds
        self._pb = problem
        gt_ignore = np.stack([truth.crowd | _range_ignore(truth.area, lo, hi) for _, lo, hi in AREA_RANGES])
        with np.errstate(over="ignore"):  # an absurd box's area is inf, outside every range but "all"
            det_area = problem.box[:, 2] * problem.box[:, 3]
        det_out = np.stack([_range_ignore(det_area, lo, hi) for _, lo, hi in AREA_RANGES])
        self._matched = match(problem, gt_ignore, truth.crowd, IOU_THRESHOLDS)
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
        m = self._matched[0, _T50]  # (D,)
        hit = m >= 0
        tp = hit & ~_ignored_match(gt_ignore[None], m[None])[0]
        return confusion_counts(self._truth, self._pb, hit, tp, det_out)

    # ---- slices

    def fact_values(self, fact: str) -> tuple[np.ndarray, bool]:
        """Values of a per-object fact for every ground-truth object (:func:`synthgen.evaluate.slices.fact_values`)."""
        return fact_values(fact, self._truth)

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
            bin are in none.  Defaults to :data:`synthgen.scene.facts.DEFAULT_EDGES`, powers of 2
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
        bins, in_bin, det_out = slice_bins(fact, values, categorical, edges, pb.box)
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
                mean_iou = float(np.mean(coco_iou(pb.box[d50], t.box[g50], t.crowd[g50])))
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
        return match(self._pb, gt_ignore, self._truth.crowd, IOU_THRESHOLDS)

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
    truth = parse_truth(coco_gt, gt_name)
    preds = parse_predictions(predictions, pred_name, truth)
    return Evaluation(truth, preds, build_problem(truth, preds, _MAX_DET, min_iou=IOU_THRESHOLDS.min()))


# --------------------------------------------------------------------------- files and options


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
        path = path / ANNOTATIONS
    data = read_json(path)
    if not isinstance(data, dict):
        raise InputFileError(path, f"must be a COCO JSON object (got {type(data).__name__})")
    return data, path


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
    with _collector_paused():
        gt, gt_path = read_ground_truth(dataset)
        preds = read_predictions(predictions)
        ev = evaluate(gt, preds, gt_name=str(gt_path), pred_name=str(predictions))
        del preds  # only arrays are kept
        slices = {}
        for spec in by:
            fact, edges = parse_slice_spec(spec)
            slices[fact] = ev.slice_by(fact, edges)
    return ev, slices


@contextlib.contextmanager
def _collector_paused():
    """Pause Python's cycle collector while files are read and scored.

    Parsing builds hundreds of thousands of dicts and lists, none in a reference cycle; the
    collector would walk all of them again and again as they are made (more than half of the
    JSON reading time on the benchmark data).  Reference counting still frees everything.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()
