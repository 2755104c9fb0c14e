"""What people look at: contact sheets (dataset, sheet, draw), dataset statistics (stats), score tables and figures (figures)."""

from synthgen.report.dataset import Dataset, open_dataset
from synthgen.report.draw import CATEGORY_COLOURS, PREDICTION_COLOURS, draw_boxes, outline_pixels
from synthgen.report.sheet import (
    PREDICTION_KINDS,
    Placement,
    Predictions,
    Sheet,
    TruthSidecar,
    auto_scale,
    classify_predictions,
    contact_sheet,
    read_predictions,
    read_truth_sidecar,
    save_png,
)
from synthgen.report.stats import COCO_AREA_RANGES, dataset_stats, save_figure, save_json, stats_figure, stats_tables

__all__ = [
    "CATEGORY_COLOURS",
    "PREDICTION_COLOURS",
    "PREDICTION_KINDS",
    "COCO_AREA_RANGES",
    "Dataset",
    "Predictions",
    "open_dataset",
    "read_predictions",
    "read_truth_sidecar",
    "TruthSidecar",
    "classify_predictions",
    "outline_pixels",
    "draw_boxes",
    "auto_scale",
    "Placement",
    "Sheet",
    "contact_sheet",
    "dataset_stats",
    "stats_tables",
    "stats_figure",
    "save_png",
    "save_figure",
    "save_json",
]
