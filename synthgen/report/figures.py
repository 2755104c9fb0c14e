"""Scoring results for people: rich tables, and PNG figures of metrics per slice and across a sweep.

The figures are drawn by :mod:`synthgen.report.charts` (which the HTML report
page shares) on matplotlib's ``Figure`` directly: no pyplot, no global backend
switch, so they work headless and inside other programs.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

from synthgen.evaluate import STAT_NAMES, BinResult, Evaluation, SweepPoint
from synthgen.report import charts

__all__ = [
    "PANEL_PX",
    "figure_size_px",
    "plot_slices",
    "plot_sweep",
    "sweep_table",
    "stats_table",
    "category_table",
    "confusion_table",
    "slice_table",
    "print_report",
]

#: Size of one figure panel in pixels, (width, height).
PANEL_PX = (480, 360)
_COLUMNS = 3

_STAT_TEXT = {
    "AP": "AP  IoU .50:.95  all sizes   100 dets",
    "AP50": "AP  IoU .50      all sizes   100 dets",
    "AP75": "AP  IoU .75      all sizes   100 dets",
    "AP_small": "AP  IoU .50:.95  small       100 dets",
    "AP_medium": "AP  IoU .50:.95  medium      100 dets",
    "AP_large": "AP  IoU .50:.95  large       100 dets",
    "AR1": "AR  IoU .50:.95  all sizes     1 det",
    "AR10": "AR  IoU .50:.95  all sizes    10 dets",
    "AR100": "AR  IoU .50:.95  all sizes   100 dets",
    "AR_small": "AR  IoU .50:.95  small       100 dets",
    "AR_medium": "AR  IoU .50:.95  medium      100 dets",
    "AR_large": "AR  IoU .50:.95  large       100 dets",
}


def figure_size_px(n_panels: int) -> tuple[int, int]:
    """Pixel size ``(width, height)`` of a figure with ``n_panels`` panels.

    Panels are :data:`PANEL_PX` each, up to three per row.

    Examples
    --------
    >>> figure_size_px(1), figure_size_px(4)
    ((480, 360), (1440, 720))
    """
    cols = min(max(n_panels, 1), _COLUMNS)
    rows = max(math.ceil(n_panels / _COLUMNS), 1)
    return PANEL_PX[0] * cols, PANEL_PX[1] * rows


def plot_slices(slices: Mapping[str, Sequence[BinResult]], path, *, title: str | None = None) -> tuple[int, int]:
    """Write a PNG of AP50, AP and recall at .5 per bin, one panel per fact.

    Drawn by :func:`synthgen.report.charts.slices_figure` (bars for categorical
    facts, units on the axes, the legend outside the panels).

    Parameters
    ----------
    slices : mapping of fact -> list of BinResult
        As returned by :meth:`synthgen.evaluate.Evaluation.slice_by`.
    path : path-like
        Output PNG.
    title : str, optional
        Figure title.

    Returns
    -------
    (int, int)
        The image's ``(width, height)`` in pixels, :func:`figure_size_px`.
    """
    fig = charts.slices_figure(slices, panel_px=PANEL_PX, columns=_COLUMNS, title=title)
    return charts.save_png(fig, path)


def plot_sweep(points: Sequence[SweepPoint], path, *, title: str = "across the sweep") -> tuple[int, int]:
    """Write a PNG of AP50, AP and recall at .5 across the subsets of a sweep.

    Drawn by :func:`synthgen.report.charts.sweep_figure`.

    Parameters
    ----------
    points : sequence of SweepPoint
        As returned by :func:`synthgen.evaluate.score_sweep`, in plotting order.
        With one varied key of plain numbers the x-axis is that number;
        otherwise each subset is a tick labelled with its varied values.
    path : path-like
    title : str
        Should name the sweep and the predictions.

    Returns
    -------
    (int, int)
        Pixel size of the one-panel figure, :data:`PANEL_PX`.
    """
    return charts.save_png(charts.sweep_figure(points, title=title, width_px=PANEL_PX[0], height_px=PANEL_PX[1]), path)


def sweep_table(points: Sequence[SweepPoint]):
    """A rich Table with one row per sweep subset."""
    from rich.table import Table

    table = Table(title="across the sweep")
    for col in ("subset", "objects", "predictions", "AP", "AP50", "AP75", "AR100"):
        table.add_column(col, justify="left" if col == "subset" else "right")
    for p in points:
        st = dict(zip(STAT_NAMES, p.evaluation.stats))
        counts = p.evaluation.to_dict()["counts"]
        table.add_row(
            p.label or p.subset,
            str(counts["ground_truth"]),
            str(counts["predictions"]),
            *(_num(st[n]) for n in ("AP", "AP50", "AP75", "AR100")),
        )
    return table


# --------------------------------------------------------------------------- tables


def _num(v, digits: int = 3) -> str:
    if v is None or (isinstance(v, float) and (math.isnan(v) or v < 0)):
        return "-"
    return f"{v:.{digits}f}"


def stats_table(evaluation: Evaluation, title: str = "COCO box metrics"):
    """A rich Table of the twelve standard statistics ("-" where no ground truth counts)."""
    from rich.table import Table

    table = Table(title=title)
    table.add_column("metric")
    table.add_column("what")
    table.add_column("value", justify="right")
    for name, value in zip(STAT_NAMES, evaluation.stats):
        table.add_row(name, _STAT_TEXT[name], _num(value))
    return table


def category_table(evaluation: Evaluation):
    """A rich Table with one row per category."""
    from rich.table import Table

    table = Table(title="per category")
    for col in ("category", "objects", "predictions", "AP", "AP50", "AP75", "AR100"):
        table.add_column(col, justify="left" if col == "category" else "right")
    for c in evaluation.per_category:
        table.add_row(c.name, str(c.n_gt), str(c.n_pred), _num(c.ap), _num(c.ap50), _num(c.ap75), _num(c.ar100))
    return table


def confusion_table(evaluation: Evaluation):
    """A rich Table of detections by predicted class (columns) and object hit (rows) at IoU 0.5."""
    from rich.table import Table

    conf = evaluation.confusion
    table = Table(title="detections at IoU 0.5: object hit (rows) by predicted class (columns)")
    table.add_column("object")
    for name in conf.names:
        table.add_column(name, justify="right")
    for row_name, row in zip([*conf.names, "none"], conf.counts.tolist()):
        table.add_row(row_name, *[str(v) for v in row])
    return table


def slice_table(fact: str, bins: Sequence[BinResult]):
    """A rich Table with one row per bin of a fact."""
    from rich.table import Table

    table = Table(title=f"by {fact}", caption="R: recall, IoU: mean IoU of the pairs matched at IoU .5")
    for col in ("bin", "objects", "found", "R@.5", "R@.75", "AP50", "AP", "IoU"):
        table.add_column(col, justify="left" if col == "bin" else "right", no_wrap=col == "bin")
    for b in bins:
        table.add_row(
            b.label,
            str(b.n_gt),
            str(b.n_found50),
            _num(b.recall50),
            _num(b.recall75),
            _num(b.ap50),
            _num(b.ap),
            _num(b.mean_iou),
        )
    return table


def print_report(evaluation: Evaluation, slices: Mapping[str, Sequence[BinResult]], console=None) -> None:
    """Print the statistics, per-category, confusion and slice tables to ``console`` (stdout by default)."""
    from rich.console import Console

    console = console or Console()
    console.print(stats_table(evaluation))
    console.print(category_table(evaluation))
    console.print(confusion_table(evaluation))
    for fact, bins in slices.items():
        console.print(slice_table(fact, bins))
