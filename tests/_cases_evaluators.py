"""Evaluators run against the known-answer cases: pycocotools, synthgen's scorer, deliberately wrong ones.

Each is named to ``conform`` as ``tests/_cases_evaluators.py:NAME``.  Run as a
script, ``python tests/_cases_evaluators.py ANNOTATIONS PREDICTIONS OUT``
writes synthgen's statistics by name to OUT (a command-template evaluator).
"""

from __future__ import annotations

import contextlib
import copy
import io
import json
import sys

import numpy as np

from synthgen.cases.reference import BUGS, STAT_NAMES, reference_evaluate
from synthgen.evaluate import evaluate as synthgen_evaluate  # the one import of synthgen's scorer here


def pycocotools_eval(annotations: dict, predictions: list):
    """pycocotools' COCOeval (bbox) after evaluate, accumulate and summarize, on copies of the inputs.

    ``loadRes`` cannot take an empty list (REFERENCE.md: COCO JSON pitfalls), so
    no predictions are given as an empty COCO object instead.
    """
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    with contextlib.redirect_stdout(io.StringIO()):
        gt = COCO()
        gt.dataset = copy.deepcopy(annotations)
        gt.createIndex()
        if predictions:
            dt = gt.loadRes(copy.deepcopy(predictions))
        else:
            dt = COCO()
            dt.dataset = {"images": copy.deepcopy(annotations["images"]), "annotations": [],
                          "categories": copy.deepcopy(annotations["categories"])}
            dt.createIndex()
        ev = COCOeval(gt, dt, "bbox")
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
    return ev


def pycocotools_stats(annotations: dict, predictions: list):
    """The COCOeval object itself (``conform`` reads its ``.stats``)."""
    return pycocotools_eval(annotations, predictions)


def synthgen_stats(annotations: dict, predictions: list):
    """synthgen's own scorer; returns its Evaluation (``conform`` reads its ``.stats``)."""
    return synthgen_evaluate(annotations, predictions)


def synthgen_by_name(annotations: dict, predictions: list) -> dict:
    """synthgen's statistics as a mapping by name."""
    return dict(zip(STAT_NAMES, synthgen_evaluate(annotations, predictions).stats, strict=True))


def _wrong(bug: str):
    def evaluator(annotations, predictions):
        return reference_evaluate(annotations, predictions, bug=bug).stats

    evaluator.__name__ = f"wrong_{bug}"
    evaluator.__doc__ = f"The reference with one mistake: {BUGS[bug]}."
    return evaluator


for _bug in BUGS:  # wrong_area_from_box, wrong_threshold_strict, ...
    globals()[f"wrong_{_bug}"] = _wrong(_bug)


def details(precision: np.ndarray, recall: np.ndarray, cat_ids) -> tuple[dict, dict]:
    """Per-category and per-size-range AP, AP50, AR100 from COCO-layout arrays.

    ``precision`` is (T, R, K, A, M) and ``recall`` (T, K, A, M), areas all,
    small, medium, large and max detections 1, 10, 100, as pycocotools'
    ``eval["precision"]`` and synthgen's ``Evaluation.precision``.
    """

    def mean(a):
        kept = a[a > -1]
        return float(kept.mean()) if kept.size else -1.0

    per_cat = {
        str(int(c)): {"AP": mean(precision[:, :, k, 0, 2]), "AP50": mean(precision[0, :, k, 0, 2]),
                      "AR100": mean(recall[:, k, 0, 2])}
        for k, c in enumerate(cat_ids)
    }
    buckets = {
        name: {"AP": mean(precision[:, :, :, a, 2]), "AP50": mean(precision[0, :, :, a, 2]),
               "AR100": mean(recall[:, :, a, 2])}
        for a, name in ((1, "small"), (2, "medium"), (3, "large"))
    }
    return per_cat, buckets


def pycocotools_counts_at(ev, score: float) -> dict:
    """True and false positives at IoU 0.5 of the detections scoring >= ``score``, from COCOeval's per-image records."""
    tp = fp = n = 0
    for e in ev.evalImgs:
        if e is None or e["aRng"] != ev.params.areaRng[0] or e["maxDet"] != ev.params.maxDets[-1]:
            continue
        keep = np.asarray(e["dtScores"]) >= score
        matched, ignored = e["dtMatches"][0] > 0, e["dtIgnore"][0].astype(bool)
        tp += int(np.count_nonzero(keep & matched & ~ignored))
        fp += int(np.count_nonzero(keep & ~matched & ~ignored))
        n += int(np.count_nonzero(~np.asarray(e["gtIgnore"], dtype=bool)))
    return {"tp": tp, "fp": fp, "n_objects": n}


if __name__ == "__main__":
    gt_path, pred_path, out_path = sys.argv[1:4]
    with open(gt_path) as f, open(pred_path) as g:
        stats = synthgen_by_name(json.load(f), json.load(g))
    with open(out_path, "w") as f:
        json.dump(stats, f)
