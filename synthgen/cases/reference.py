"""A slow, literal COCO box evaluator written from the definitions, for checking the case library.

Plain Python over floats and dicts: no numpy, and nothing shared with
:mod:`synthgen.evaluate`, so that the expected values of the known-answer cases
come from code that is independent of the scorer they are used to check.

The rules, as the COCO detection evaluation defines them (REFERENCE.md:
COCO-style AP):

* IoU thresholds 0.50, 0.55, ..., 0.95 and recall points 0.00, 0.01, ..., 1.00,
  each the double nearest the decimal value.  (pycocotools builds them with
  ``numpy.linspace``, which gives 0.8999999999999999 for 0.90 and puts ten
  recall points, 0.35, 0.41, 0.47, 0.57, 0.69, 0.70, 0.82, 0.83, 0.94 and 0.95,
  one step of the last digit above the decimal; no case's answer depends on
  that, as the tests against pycocotools show.)
* Box IoU is intersection over union with no "+1"; against a crowd region it
  is intersection over the detection's own area.
* For every image and category, detections are ranked by descending score
  (ties keep the order of the results list) and only the first 100 are kept.
* Size ranges use the annotation's ``area`` field: small [0, 32^2],
  medium [32^2, 96^2], large [96^2, 1e10], both ends included.  Crowd objects
  and objects outside the range are *ignored*: they need not be found, and a
  detection that lands on one counts neither way.  An unmatched detection
  whose own box area ``w * h`` is outside the range is ignored too.
* At threshold ``t`` each detection, in rank order, takes the free counted
  object with the highest IoU ``>= t``; only when there is none may it land on
  an ignored object (a crowd region may take any number of detections).
  Among equal IoUs the later object in the file wins.
* Precision ``tp / (tp + fp)`` along the ranked list (all images pooled, ties
  in image-id order, then file order) is made non-increasing from the right
  and read at each recall point (0 past the last recall reached); AP is the
  mean of the 101 values.  Recall is the fraction of counted objects found.
* A category with no counted object in a size range has no AP or recall
  there; it is written -1 and left out of the means (-1 when nothing is left).

``bug`` switches on one deliberate mistake at a time, so that tests can show
which cases catch which mistake (:data:`BUGS`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["STAT_NAMES", "BUGS", "ReferenceResult", "reference_evaluate", "counts_at"]

#: The twelve COCO box statistics, in COCO's order.
STAT_NAMES = (
    "AP", "AP50", "AP75", "AP_small", "AP_medium", "AP_large",
    "AR1", "AR10", "AR100", "AR_small", "AR_medium", "AR_large",
)
_THRESHOLDS = tuple((50 + 5 * i) / 100 for i in range(10))
_RECALL_POINTS = tuple(k / 100 for k in range(101))
_MAX_DETS = (1, 10, 100)
_RANGES = (("all", 0.0, 1e10), ("small", 0.0, 32.0**2), ("medium", 32.0**2, 96.0**2), ("large", 96.0**2, 1e10))

#: The deliberate mistakes :func:`reference_evaluate` can make, one at a time.
BUGS = {
    "area_from_box": "size range of an object from its box w*h instead of its 'area' field",
    "threshold_strict": "a match needs IoU > threshold instead of >=",
    "no_crowd": "crowd regions treated as ordinary objects",
    "truth_only_buckets": "a size range drops the objects outside it but keeps every detection",
    "ids_from_one": "categories assumed to be 1..K (K = number of categories)",
    "no_detection_cut": "no limit of 100 detections per image and category",
}


@dataclass(frozen=True)
class ReferenceResult:
    """Metrics from :func:`reference_evaluate`; -1 marks a value with nothing to average.

    Attributes
    ----------
    stats : dict of str to float
        The twelve statistics by name (:data:`STAT_NAMES`).
    per_category : dict of int to dict
        ``{"AP", "AP50", "AR100"}`` of each category over all sizes.
    buckets : dict of str to dict
        ``{"AP", "AP50", "AR100"}`` of each size range: small, medium, large.
    """

    stats: dict
    per_category: dict
    buckets: dict


def _iou(det, gt, crowd: bool) -> float:
    """COCO box IoU of ``[x, y, w, h]`` boxes; over the detection's area when ``gt`` is a crowd region."""
    dx, dy, dw, dh = det
    gx, gy, gw, gh = gt
    iw = min(dx + dw, gx + gw) - max(dx, gx)
    ih = min(dy + dh, gy + gh) - max(dy, gy)
    if iw <= 0 or ih <= 0:
        return 0.0
    inter = iw * ih
    union = dw * dh if crowd else dw * dh + gw * gh - inter
    return inter / union if union > 0 else 0.0


def _match_cell(dets, gts, lo, hi, t, bug) -> tuple[list, int]:
    """Match one image and category at threshold ``t`` within size range ``[lo, hi]``.

    ``dets``: ranked ``(score, bbox)``; ``gts``: ``(bbox, area, crowd)`` in file order.
    Returns each detection's ``(score, outcome)`` with outcome ``"tp"``, ``"fp"`` or
    ``"ignore"``, and the number of counted objects.
    """
    if bug == "truth_only_buckets":
        gts = [g for g in gts if g[2] or lo <= g[1] <= hi]
    counted = [i for i, g in enumerate(gts) if not g[2] and lo <= g[1] <= hi]
    if bug == "truth_only_buckets":
        counted = [i for i, g in enumerate(gts) if not g[2]]
    ignored = [i for i in range(len(gts)) if i not in counted]
    taken: set[int] = set()
    out = []
    for score, box in dets:
        outcome = None
        for group, result in ((counted, "tp"), (ignored, "ignore")):
            best, best_iou = None, t
            for i in group:
                bbox, _, crowd = gts[i]
                if i in taken and not crowd:
                    continue
                v = _iou(box, bbox, crowd)
                if v > best_iou if bug == "threshold_strict" else v >= best_iou:
                    best, best_iou = i, v
            if best is not None:
                taken.add(best)
                outcome = result
                break
        if outcome is None:
            area = box[2] * box[3]
            outside = (area < lo or area > hi) and bug != "truth_only_buckets"
            outcome = "ignore" if outside else "fp"
        out.append((score, outcome))
    return out, len(counted)


def _interpolated_ap(outcomes: list, n_counted: int) -> tuple[float, float]:
    """AP (101-point interpolated) and final recall of a ranked list of outcomes."""
    ranked = [o for _, o in sorted(outcomes, key=lambda so: -so[0]) if o != "ignore"]  # sorted() is stable
    tp = fp = 0
    curve = []  # (recall, precision) after each detection
    for o in ranked:
        tp += o == "tp"
        fp += o == "fp"
        curve.append((tp / n_counted, tp / (tp + fp)))
    if not curve:
        return 0.0, 0.0
    for i in range(len(curve) - 2, -1, -1):  # non-increasing from the right
        curve[i] = (curve[i][0], max(curve[i][1], curve[i + 1][1]))
    read, j = [], 0  # precision at the first point of the curve whose recall reaches r (recall never falls)
    for r in _RECALL_POINTS:
        while j < len(curve) and curve[j][0] < r:
            j += 1
        if j == len(curve):
            break  # the rest read 0
        read.append(curve[j][1])
    read += [0.0] * (len(_RECALL_POINTS) - len(read))
    return math.fsum(read) / len(read), curve[-1][0]


def _mean(values) -> float:
    kept = [v for v in values if v != -1]
    return math.fsum(kept) / len(kept) if kept else -1.0


def _prepare(annotations: dict, predictions: list, bug):
    """Categories, image ids, and ground truth and ranked detections per (image, category)."""
    cats = sorted(c["id"] for c in annotations["categories"])
    if bug == "ids_from_one":
        cats = list(range(1, len(cats) + 1))
    images = sorted(im["id"] for im in annotations["images"])
    gts: dict = {}
    for a in annotations["annotations"]:
        x, y, w, h = (float(v) for v in a["bbox"])
        area = w * h if bug == "area_from_box" else float(a["area"])
        crowd = bool(a.get("iscrowd", 0)) and bug != "no_crowd"
        gts.setdefault((a["image_id"], a["category_id"]), []).append(((x, y, w, h), area, crowd))
    dets: dict = {}
    for p in predictions:
        dets.setdefault((p["image_id"], p["category_id"]), []).append(
            (float(p["score"]), tuple(float(v) for v in p["bbox"]))
        )
    keep = None if bug == "no_detection_cut" else _MAX_DETS[-1]
    for key, lst in dets.items():
        dets[key] = sorted(lst, key=lambda d: -d[0])[:keep]
    return cats, images, gts, dets


def reference_evaluate(annotations: dict, predictions: list, *, bug: str | None = None) -> ReferenceResult:
    """COCO box metrics from the definitions (slow: for small known-answer cases).

    Parameters
    ----------
    annotations : dict
        COCO JSON ground truth (``images``, ``annotations``, ``categories``).
    predictions : list of dict
        COCO results records ``{image_id, category_id, bbox, score}``.
    bug : str, optional
        One of :data:`BUGS`: make that mistake on purpose.

    Examples
    --------
    >>> gt = {"images": [{"id": 1}], "categories": [{"id": 1}],
    ...       "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10],
    ...                        "area": 100.0, "iscrowd": 0}]}
    >>> r = reference_evaluate(gt, [{"image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10], "score": 0.5}])
    >>> r.stats["AP"], r.stats["AP_small"], r.stats["AP_large"]
    (1.0, 1.0, -1.0)
    """
    if bug is not None and bug not in BUGS:
        raise ValueError(f"bug must be one of {', '.join(BUGS)} (got {bug!r})")
    cats, images, gts, dets = _prepare(annotations, predictions, bug)
    # ap[(t, k, range, maxdet)], rec[...]: -1 where the category has no counted object
    ap: dict = {}
    rec: dict = {}
    for name, lo, hi in _RANGES:
        for k in cats:
            for ti, t in enumerate(_THRESHOLDS):
                cells = [_match_cell(dets.get((i, k), []), gts.get((i, k), []), lo, hi, t, bug) for i in images]
                n_counted = sum(n for _, n in cells)
                for m in _MAX_DETS:
                    limit = None if (bug == "no_detection_cut" and m == _MAX_DETS[-1]) else m
                    pooled = [o for outcomes, _ in cells for o in outcomes[:limit]]
                    if n_counted == 0:
                        ap[ti, k, name, m] = rec[ti, k, name, m] = -1.0
                    else:
                        ap[ti, k, name, m], rec[ti, k, name, m] = _interpolated_ap(pooled, n_counted)
    return _summaries(ap, rec, cats)


def _summaries(ap: dict, rec: dict, cats: list) -> ReferenceResult:
    ts = range(len(_THRESHOLDS))
    t50, t75 = _THRESHOLDS.index(0.5), _THRESHOLDS.index(0.75)

    def ap_of(range_name, t_sel=ts, ks=cats):
        return _mean(ap[t, k, range_name, 100] for t in t_sel for k in ks)

    def ar_of(range_name, m=100, ks=cats):
        return _mean(rec[t, k, range_name, m] for t in ts for k in ks)

    stats = dict(
        zip(
            STAT_NAMES,
            (
                ap_of("all"), ap_of("all", (t50,)), ap_of("all", (t75,)),
                ap_of("small"), ap_of("medium"), ap_of("large"),
                ar_of("all", 1), ar_of("all", 10), ar_of("all", 100),
                ar_of("small"), ar_of("medium"), ar_of("large"),
            ),
            strict=True,
        )
    )
    per_category = {
        k: {"AP": ap_of("all", ks=(k,)), "AP50": ap_of("all", (t50,), (k,)), "AR100": ar_of("all", ks=(k,))}
        for k in cats
    }
    buckets = {
        name: {"AP": ap_of(name), "AP50": ap_of(name, (t50,)), "AR100": ar_of(name)}
        for name in ("small", "medium", "large")
    }
    return ReferenceResult(stats, per_category, buckets)


def counts_at(annotations: dict, predictions: list, score: float, iou: float = 0.5) -> dict:
    """Precision, recall and F1 of the detections scoring at least ``score``, matched at IoU ``iou``.

    Matching is the COCO one over all sizes (100 detections per image and
    category, crowd regions absorb detections, which then count neither way).
    Precision is -1 when no detection counts, recall -1 without counted
    objects, F1 -1 when either is -1 (0 when both are 0).

    Examples
    --------
    >>> gt = {"images": [{"id": 1}], "categories": [{"id": 1}],
    ...       "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10],
    ...                        "area": 100.0, "iscrowd": 0}]}
    >>> preds = [{"image_id": 1, "category_id": 1, "bbox": b, "score": s}
    ...          for b, s in (([0, 0, 10, 10], 0.9), ([50, 50, 10, 10], 0.8), ([70, 0, 5, 5], 0.1))]
    >>> c = counts_at(gt, preds, 0.5)
    >>> c["tp"], c["fp"], c["precision"], c["recall"], round(c["f1"], 6)
    (1, 1, 0.5, 1.0, 0.666667)
    """
    cats, images, gts, dets = _prepare(annotations, predictions, None)
    tp = fp = n = 0
    for i in images:
        for k in cats:
            outcomes, counted = _match_cell(dets.get((i, k), []), gts.get((i, k), []), 0.0, 1e10, iou, None)
            n += counted
            tp += sum(o == "tp" for s, o in outcomes if s >= score)
            fp += sum(o == "fp" for s, o in outcomes if s >= score)
    precision = tp / (tp + fp) if tp + fp else -1.0
    recall = tp / n if n else -1.0
    if precision == -1 or recall == -1:
        f1 = -1.0
    else:
        f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
    return {"score": score, "iou": iou, "tp": tp, "fp": fp, "n_objects": n,
            "precision": precision, "recall": recall, "f1": f1}
