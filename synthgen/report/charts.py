"""Figures of metrics per slice and across a sweep: SVG for the report page, PNG for ``score --plot``.

Every figure follows the same rules, each there because its absence misled
someone:

* one small panel per fact, every panel on the same 0..1 scale;
* an ordered (numeric) fact is drawn as lines over its bins, a categorical
  fact (kind, truncated, fill) as grouped bars, never as a line joining
  unrelated values;
* the three series differ by line style and marker as well as colour,
  and are shifted sideways a little (bars carry their series' marker) so that equal values (recall at .5 equal
  to AP50, say) stay side by side instead of one hiding the other;
* bin labels are short (two significant digits) with the object count under
  each, so they never run into each other, and the axis names its unit;
* the legend sits above the panels, outside every plot area.

Figures are built on matplotlib's ``Figure`` directly (no pyplot state).
"""

from __future__ import annotations

import html
import io
import math
import re
from collections.abc import Mapping, Sequence
from pathlib import Path

from synthgen._io import write_atomic
from synthgen.errors import InputFileError, UserError, require_extra

__all__ = [
    "FACT_UNITS",
    "SERIES",
    "axis_label",
    "edge_text",
    "bin_ticks",
    "slice_figure",
    "slices_figure",
    "sweep_figure",
    "svg_text",
    "save_png",
]

#: Unit of each fact's values, for axis labels ("" for counts, categories and yes/no facts).
FACT_UNITS = {
    "size": "px",
    "area": "px²",
    "visible_fraction": "fraction",
    "max_iou": "IoU",
    "contrast": "fraction",
    "rotation": "degrees",
    "aspect": "width / height",
    "neighbours": "count",
    "count": "objects per image",
    "blur": "px",
    "noise": "0..255",
}

#: (attribute of BinResult, legend label, colour, line style, marker).  Colours are
#: distinguishable with the common colour-vision deficiencies and dark enough on white; the styles
#: carry the difference without colour.
SERIES = (
    ("ap50", "AP @ IoU .5", "#1f4e99", "-", "o"),
    ("ap", "AP @ IoU .5:.95", "#a0441a", "--", "s"),
    ("recall50", "recall @ IoU .5", "#2f6b2f", ":", "^"),
)

_DPI = 100
_DODGE = 0.1  # bins: sideways shift between series, so equal values stay visible
_INK = "#1b1d21"


def axis_label(fact: str) -> str:
    """The fact's name with its unit, e.g. ``'size (px)'``.

    Examples
    --------
    >>> axis_label("size"), axis_label("objects.size"), axis_label("kind")
    ('size (px)', 'objects.size (px)', 'kind')
    """
    unit = FACT_UNITS.get(fact.rsplit(".", 1)[-1], "")
    return f"{fact} ({unit})" if unit else fact


def edge_text(x: float) -> str:
    """A bin edge in at most about four characters.

    Examples
    --------
    >>> [edge_text(v) for v in (0.3009, 0.414, 16.0, 0.0, 1024.0, 12.75, float("inf"))]
    ['0.3', '0.41', '16', '0', '1024', '13', '∞']
    """
    if math.isinf(x):
        return "∞" if x > 0 else "-∞"
    if float(x).is_integer():
        return str(int(x))
    if abs(x) >= 10:
        return f"{x:.0f}"
    return f"{x:.2g}"


def bin_ticks(bins: Sequence) -> list[str]:
    """Tick labels of bins: ``'lo–hi'`` or the category, then ``'n=K'`` objects on a second line."""
    out = []
    for b in bins:
        name = str(b.value) if b.lo is None else f"{edge_text(b.lo)}–{edge_text(b.hi)}"
        out.append(f"{name}\nn={b.n_gt}")
    return out


def _nan(v) -> float:
    return math.nan if v is None else float(v)


def _figure(width_px: int, height_px: int):
    require_extra("matplotlib", "plots", "a figure")
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_px / _DPI, height_px / _DPI), dpi=_DPI, layout="constrained")
    fig.set_facecolor("white")
    return fig


def _style_axes(ax, xlabel: str, ylabel: str = "fraction (0 to 1)") -> None:
    ax.set_ylim(0.0, 1.05)
    ax.set_ylabel(ylabel, fontsize=8, color=_INK)
    ax.set_xlabel(xlabel, fontsize=9, color=_INK)
    ax.tick_params(labelsize=7.5, colors=_INK)
    ax.grid(True, axis="y", alpha=0.35)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _draw_bins(ax, fact: str, bins: Sequence) -> tuple[list, list]:
    """Lines for an ordered fact, grouped bars for a categorical one, on ``ax``: (legend handles, labels)."""
    categorical = bool(bins) and bins[0].lo is None
    n = len(bins)
    handles, labels = [], []
    for j, (attr, label, colour, style, marker) in enumerate(SERIES):
        x = [i + (j - 1) * (_DODGE if not categorical else 0.27) for i in range(n)]
        y = [_nan(getattr(b, attr)) for b in bins]
        if categorical:
            # the series' marker on top of each bar tells the bars apart without colour (hatching
            # would too, at ten times the SVG size)
            bars = ax.bar(x, [0 if math.isnan(v) else v for v in y], width=0.26, color=colour, alpha=0.8,
                          edgecolor=colour, linewidth=0.8)
            (dots,) = ax.plot(x, y, linestyle="none", marker=marker, color=colour, markerfacecolor="white",
                              markeredgewidth=1.4, markersize=6, label=label, zorder=4)
            handles.append((bars.patches[0], dots) if bars.patches else dots)
        else:
            filled = colour if marker != "^" else "white"  # recall: hollow triangles on top
            (line,) = ax.plot(x, y, linestyle=style, marker=marker, color=colour, markerfacecolor=filled,
                              markersize=5.5, linewidth=1.6, label=label, zorder=3 + j)
            handles.append(line)
        labels.append(label)
    ax.set_xticks(range(n))
    ax.set_xticklabels(bin_ticks(bins), rotation=0)
    ax.set_xlim(-0.6, n - 0.4)
    _style_axes(ax, axis_label(fact) + ("" if categorical else ", bins"))
    return handles, labels


def _legend(fig, handles: list, labels: list, where: str = "upper") -> None:
    """One legend for the figure, outside every plot area: above the panels, or below them (under a title).

    A bar series' entry shows its bar and its marker together.
    """
    from matplotlib.legend_handler import HandlerTuple

    fig.legend(handles, labels, loc=f"outside {where} center", ncols=len(labels), fontsize=8, frameon=False,
               handler_map={tuple: HandlerTuple(ndivide=None, pad=0.2)})


def slice_figure(fact: str, bins: Sequence, *, width_px: int = 400, height_px: int = 280):
    """One small figure of AP50, AP and recall at .5 per bin of one fact.

    Parameters
    ----------
    fact : str
    bins : sequence of BinResult
        From :meth:`synthgen.evaluate.Evaluation.slice_by`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig = _figure(width_px, height_px)
    ax = fig.add_subplot(1, 1, 1)
    _legend(fig, *_draw_bins(ax, fact, bins))
    return fig


def slices_figure(slices: Mapping[str, Sequence], *, panel_px=(480, 360), columns: int = 3, title=None):
    """All facts' panels in one figure, ``columns`` per row, one legend above them."""
    facts = [f for f, bins in slices.items() if bins]
    if not facts:
        raise UserError("nothing to plot: the figure needs at least one slice with bins (give --by FACT)")
    cols = min(len(facts), columns)
    rows = math.ceil(len(facts) / columns)
    fig = _figure(panel_px[0] * cols, panel_px[1] * rows)
    axes = [fig.add_subplot(rows, cols, i + 1) for i in range(len(facts))]
    legend = {}
    for ax, fact in zip(axes, facts):
        for h, lab in zip(*_draw_bins(ax, fact, slices[fact])):
            legend.setdefault(lab, h)  # the first panel's kind of entry (line, or bar and marker)
        ax.set_title(f"by {fact}", fontsize=10, color=_INK)
    _legend(fig, list(legend.values()), list(legend), "lower" if title else "upper")
    if title:
        fig.suptitle(title, fontsize=11, color=_INK)
    return fig


def sweep_figure(points: Sequence, *, title: str, width_px: int = 480, height_px: int = 360):
    """AP50, AP and recall at .5 (mean over categories) against the sweep's varied value.

    Parameters
    ----------
    points : sequence of SweepPoint
        As :func:`synthgen.evaluate.score_sweep` returns them (ordered).
    title : str
        Names the sweep and the predictions.
    """
    from synthgen.evaluate import STAT_NAMES

    if not points:
        raise UserError("nothing to plot: the sweep has no subsets")
    fig = _figure(width_px, height_px)
    ax = fig.add_subplot(1, 1, 1)
    keys = list(dict.fromkeys(k for p in points for k in p.values))
    xs = [p.values.get(keys[0]) for p in points] if len(keys) == 1 else []
    numeric = bool(xs) and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in xs)
    x = [float(v) for v in xs] if numeric else list(range(len(points)))
    span = (max(x) - min(x)) if len(x) > 1 else 1.0
    handles = []
    for j, (attr, label, colour, style, marker) in enumerate(SERIES):
        if attr == "recall50":
            y = [_recall50(p.evaluation) for p in points]
        else:
            v = [p.evaluation.stats[STAT_NAMES.index("AP50" if attr == "ap50" else "AP")] for p in points]
            y = [s if s >= 0 else math.nan for s in v]
        xj = [xi + (j - 1) * _DODGE * span / max(len(x), 1) for xi in x]
        handles += ax.plot(xj, y, linestyle=style, marker=marker, color=colour, markersize=5.5, linewidth=1.6,
                           label=label, markerfacecolor=colour if marker != "^" else "white", zorder=3 + j)
    counts = [p.evaluation.to_dict()["counts"]["ground_truth"] for p in points]
    if numeric:
        ax.set_xticks(x)
        ax.set_xticklabels([f"{edge_text(v)}\nn={c}" for v, c in zip(x, counts)])
    else:
        labels = [(p.label.partition("=")[2] if len(keys) == 1 else p.label) or p.subset for p in points]
        ax.set_xticks(x)
        ax.set_xticklabels([f"{lab}\nn={c}" for lab, c in zip(labels, counts)],
                           rotation=30 if len(points) > 4 else 0)
    _style_axes(ax, axis_label(", ".join(keys) if keys else "subset"))
    ax.set_title(title, fontsize=10, color=_INK)
    _legend(fig, handles, [h.get_label() for h in handles])
    return fig


def _recall50(evaluation) -> float:
    """COCO recall at IoU .5 (all sizes, 100 detections), mean over categories with objects."""
    import numpy as np

    from synthgen.evaluate import IOU_THRESHOLDS, MAX_DETS

    t = int(np.flatnonzero(IOU_THRESHOLDS == 0.5)[0])
    r = evaluation.recall[t, :, 0, MAX_DETS.index(100)]
    r = r[r >= 0]
    return float(r.mean()) if r.size else math.nan


def svg_text(fig, alt: str, *, id_prefix: str = "f") -> str:
    """The figure as an inline ``<svg>`` element with ``role="img"``, a title and an aria-label.

    Text stays text (no glyph paths), width and height give way to the page's
    CSS (the ``viewBox`` keeps the aspect ratio), and every element id is
    prefixed with ``id_prefix`` so that several figures can share one page.
    """
    import matplotlib
    from matplotlib.backends.backend_svg import FigureCanvasSVG

    buf = io.StringIO()
    FigureCanvasSVG(fig)
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "synthgen"}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None}, facecolor="white")
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)
    # inline SVG in HTML needs no namespace declarations; SVG 2 reads plain href
    text = re.sub(r'\s+xmlns(:xlink)?="[^"]*"', "", text)
    text = text.replace("xlink:href=", "href=")
    text = re.sub(r'id="([^"]+)"', lambda m: f'id="{id_prefix}-{m.group(1)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{id_prefix}-{m.group(1)})", text)
    text = re.sub(r'href="#([^"]+)"', lambda m: f'href="#{id_prefix}-{m.group(1)}"', text)
    safe = html.escape(alt, quote=True)
    text = re.sub(r'<svg ([^>]*?)width="[^"]*" height="[^"]*"',
                  lambda m: f'<svg {m.group(1)}role="img" aria-label="{safe}" class="chart"', text, count=1)
    head_end = text.index(">") + 1
    return (text[:head_end] + f"<title>{html.escape(alt, quote=False)}</title>" + text[head_end:]).strip()


def save_png(fig, path) -> tuple[int, int]:
    """Write ``fig`` as a PNG, atomically; returns its ``(width, height)`` in pixels.

    A path that cannot be written is the user's mistake (a figure never creates folders).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    path = Path(path)
    if path.is_dir():
        raise InputFileError(path, "cannot be written: it is a directory")
    if not path.parent.is_dir():
        raise InputFileError(path, "cannot be written (No such file or directory)")
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, dpi=_DPI, format="png", facecolor="white")
    try:
        write_atomic(path, buf.getvalue())
    except OSError as e:
        raise InputFileError(path, f"cannot be written ({e.strerror or e})") from None
    w, h = fig.get_size_inches() * _DPI
    return round(w), round(h)
