"""Scoring detections against a dataset's truth: COCO box metrics, slices by per-object fact, error kinds, sweeps.

The entry points are importable from here::

    from synthgen.evaluate import evaluate, read_ground_truth, read_predictions, score_files, score_sweep
"""

from synthgen.evaluate.classify import Confusion, Predictions, classify_predictions
from synthgen.evaluate.cocoeval import (
    IOU_THRESHOLDS,
    MAX_DETS,
    STAT_NAMES,
    CategoryResult,
    Evaluation,
    evaluate,
    read_ground_truth,
    read_predictions,
    score_files,
)
from synthgen.evaluate.slices import BinResult, parse_slice_spec
from synthgen.evaluate.sweep import SweepPoint, score_sweep

__all__ = [
    "IOU_THRESHOLDS",
    "MAX_DETS",
    "STAT_NAMES",
    "BinResult",
    "CategoryResult",
    "Confusion",
    "Predictions",
    "classify_predictions",
    "Evaluation",
    "SweepPoint",
    "evaluate",
    "parse_slice_spec",
    "read_ground_truth",
    "read_predictions",
    "score_files",
    "score_sweep",
]
