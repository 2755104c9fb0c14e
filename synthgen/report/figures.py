"""Scoring results for people: rich tables and a figure of metrics per slice.

The figure is drawn with matplotlib's Agg canvas directly (no pyplot, no global
backend switch), so it works headless and inside other programs.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from pathlib import Path

from synthgen._io import write_atomic
from synthgen.errors import InputFileError, UserError, require_extra
from synthgen.evaluate import STAT_NAMES, BinResult, Evaluation, SweepPoint

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
_DPI = 100
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


def _new_figure(n_panels: int):
    require_extra("matplotlib", "plots", "a figure")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = figure_size_px(n_panels)
    fig = Figure(figsize=(w / _DPI, h / _DPI), dpi=_DPI, layout="constrained")
    FigureCanvasAgg(fig)
    cols = min(n_panels, _COLUMNS)
    rows = math.ceil(n_panels / _COLUMNS)
    axes = [fig.add_subplot(rows, cols, i + 1) for i in range(n_panels)]
    return fig, axes


def _save(fig, path) -> None:
    """Write ``fig`` as a PNG, atomically; a path that cannot be written is the user's mistake."""
    path = Path(path)
    if path.is_dir():
        raise InputFileError(path, "cannot be written: it is a directory")
    if not path.parent.is_dir():  # a figure never creates folders
        raise InputFileError(path, "cannot be written (No such file or directory)")
    buf = io.BytesIO()
    fig.savefig(buf, dpi=_DPI, format="png")
    try:
        write_atomic(path, buf.getvalue())
    except OSError as e:
        raise InputFileError(path, f"cannot be written ({e.strerror or e})") from None


def _nan(v) -> float:
    return math.nan if v is None else float(v)


def plot_slices(slices: Mapping[str, Sequence[BinResult]], path, *, title: str | None = None) -> tuple[int, int]:
    """Write a PNG of recall and AP per bin, one panel per fact.

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
    facts = [f for f, bins in slices.items() if bins]
    if not facts:
        raise UserError("nothing to plot: the figure needs at least one slice with bins (give --by FACT)")
    fig, axes = _new_figure(len(facts))
    series = (
        ("recall50", "recall @ IoU .5", "-", "o"),
        ("recall75", "recall @ IoU .75", "--", "o"),
        ("ap50", "AP @ IoU .5", "-", "s"),
        ("ap", "AP @ IoU .5:.95", "--", "s"),
    )
    for ax, fact in zip(axes, facts):
        bins = slices[fact]
        x = list(range(len(bins)))
        for attr, label, style, marker in series:
            ax.plot(x, [_nan(getattr(b, attr)) for b in bins], linestyle=style, marker=marker, label=label)
        ax.set_xticks(x)
        ax.set_xticklabels([f"{b.label}\nn={b.n_gt}" for b in bins], fontsize=8, rotation=30 if len(bins) > 5 else 0)
        ax.set_ylim(0.0, 1.05)
        ax.set_xlim(-0.5, len(bins) - 0.5)
        ax.set_xlabel(f"{fact} (bin, objects)")
        ax.set_ylabel("recall / AP")
        ax.set_title(f"by {fact}")
        ax.grid(True, alpha=0.3)
    axes[0].legend(fontsize=8, loc="best")
    if title:
        fig.suptitle(title)
    _save(fig, path)
    return figure_size_px(len(facts))


def plot_sweep(points: Sequence[SweepPoint], path) -> tuple[int, int]:
    """Write a PNG of AP, AP50, AP75 and AR100 across the subsets of a sweep.

    Parameters
    ----------
    points : sequence of SweepPoint
        As returned by :func:`synthgen.evaluate.score_sweep`, in plotting order.
        With one varied key of plain numbers the x-axis is that number;
        otherwise each subset is a tick labelled with its varied values.
    path : path-like

    Returns
    -------
    (int, int)
        Pixel size of the one-panel figure, :data:`PANEL_PX`.
    """
    if not points:
        raise UserError("nothing to plot: the sweep has no subsets")
    fig, (ax,) = _new_figure(1)
    keys = list(dict.fromkeys(k for p in points for k in p.values))
    xs = [p.values.get(keys[0]) for p in points] if len(keys) == 1 else []
    numeric = bool(xs) and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in xs)
    x = xs if numeric else list(range(len(points)))
    for name, style in (("AP", "-o"), ("AP50", "-s"), ("AP75", "--s"), ("AR100", ":o")):
        i = STAT_NAMES.index(name)
        ax.plot(x, [p.evaluation.stats[i] if p.evaluation.stats[i] >= 0 else math.nan for p in points], style, label=name)
    if not numeric:
        ax.set_xticks(x)
        labels = [p.label or p.subset for p in points]
        if len(keys) == 1:
            labels = [lab.partition("=")[2] for lab in labels]
        ax.set_xticklabels(labels, fontsize=8, rotation=30 if len(points) > 4 else 0)
    ax.set_ylim(0.0, 1.05)
    ax.set_xlabel(", ".join(keys) if keys else "subset")
    ax.set_ylabel("AP / AR")
    ax.set_title("across the sweep")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    _save(fig, path)
    return figure_size_px(1)


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
