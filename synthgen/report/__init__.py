"""What people look at: contact sheets (dataset, sheet, draw), dataset statistics (stats), score tables and figures (figures)."""

from synthgen._lazy import lazy_exports

#: public name -> module that defines it (loaded on first use, so importing :mod:`.figures` does
#: not import the sheets, Pillow and every format)
_EXPORTS = {
    **{n: "synthgen.report.dataset" for n in ("Dataset", "open_dataset", "overlay_predictions", "predictions_on")},
    **{n: "synthgen.report.draw" for n in ("CATEGORY_COLOURS", "PREDICTION_COLOURS", "draw_boxes", "outline_pixels")},
    **{
        n: "synthgen.report.sheet"
        for n in (
            "PREDICTION_KINDS",
            "Placement",
            "Predictions",
            "Sheet",
            "TruthSidecar",
            "auto_scale",
            "classify_predictions",
            "contact_sheet",
            "read_predictions",
            "read_truth_sidecar",
            "save_png",
        )
    },
    **{
        n: "synthgen.report.stats"
        for n in ("COCO_AREA_RANGES", "dataset_stats", "save_figure", "save_json", "stats_figure", "stats_tables")
    },
}

__all__ = sorted(_EXPORTS)

__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
