"""What coordinate bins cost: the best AP a sequence model can reach when its boxes are quantized.

A sequence-style detector writes each coordinate as one of ``n`` bins per axis
and reads it back as the bin centre (:mod:`synthgen.formats.tokens`).  Even a
model that gets every token right returns the truth moved to bin centres.
:func:`token_ceiling` takes a dataset's ground truth, quantizes and
dequantizes every annotated box for each bin count, and scores those boxes as
predictions with the COCO box rules (:func:`synthgen.evaluate.evaluate`): AP,
AP50 and AP75 overall and per size bucket.

Scores.  Each quantized box is scored by its own IoU with the object it came
from, so at every IoU threshold the boxes that still match rank above those
that do not: the result is the best any ranking of these boxes reaches, an
upper bound ("ceiling") for a model with ``n`` bins.

Size buckets.  An object's size is the longer side of its annotated box
(``max(w, h)``, the ``size`` fact of ``synthgen score --by``); bucket
``[lo, hi)`` (the last one closed) is scored as the dataset of its objects
alone, with the ignore regions kept.

How much one box can lose
-------------------------
On an axis of ``L`` px a bin is ``q = L / n`` px wide and each edge moves to
its bin centre, at most ``q / 2`` away (REFERENCE.md, box quantization).  Take
a box of width ``w`` and height ``h`` and bins ``q_x = W / n``,
``q_y = H / n``.  Holding three edges fixed, the IoU as a function of the
fourth edge's shift is largest with that edge in its true place and falls as
it moves away on either side (outward the union grows while the intersection
stays; inward the intersection loses ``k d`` and the union ``(k' - k) d``,
with ``k <= k'`` the intersection's and the box's extents along the edge, and
``k U > (k' - k) I``), so its least value over ``[-q/2, q/2]`` lies at an
end, and the least IoU over all four shifts at a corner of the box of shifts.
Of those corners, each axis either grows by ``q`` (intersection ``w``, union
side ``w + q``), shrinks by ``q`` (both ``w - q``) or shifts by ``q / 2``
(intersection ``w - q / 2``); comparing the nine combinations, shrinking on
both axes is the least, so for ``w > q_x`` and ``h > q_y``::

    IoU  >=  (1 - q_x / w) (1 - q_y / h)                      (IOU FLOOR)

and for a square of side ``s`` with ``q_x = q_y = q``: ``IoU >= (1 - q/s)^2``,
which is tighter than ``((s - q) / (s + q))^2``.  The floor is reached
exactly when every edge moves inward by ``q / 2``: the left and top edges on
a bin boundary, the right and bottom ones on the image border (the last bin
is clipped), e.g. the square ``[L - m q, L]^2`` comes back as
``[L - m q + q/2, L - q/2]^2`` with IoU ``(1 - 1/m)^2``.  (Inside the image
the right edge can only come arbitrarily close to moving ``q / 2`` inward.)
So every box with sides at least ``q / (1 - sqrt(t))`` keeps IoU ``>= t``:
``t = 0.75`` needs sides of at least ``7.47 q``, ``t = 0.95`` of at least
``39.5 q``.  A box narrower than a bin can collapse to zero width (both edges
in one bin) and IoU 0.

More bins do not make every box better (the grids of 10 and 25 bins are not
nested, and a coordinate at a coarse bin's centre loses nothing), but the
floor rises with ``n``, and the ceiling of a bucket of more than a few dozen
objects rises with it (the tests check this on random datasets; a bucket of
25 objects can dip).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

# Every name this module takes from the rest of synthgen, in one place.
from synthgen._io import write_atomic
from synthgen.errors import UserError, require_extra
from synthgen.evaluate.cocoeval import evaluate, read_ground_truth
from synthgen.formats.tokens import dequantize, quantize
from synthgen.geometry import box_iou

__all__ = [
    "DEFAULT_BINS",
    "DEFAULT_SIZES",
    "AP75_GOAL",
    "CeilingRow",
    "Ceiling",
    "iou_floor",
    "quantized_truth",
    "token_ceiling",
    "dataset_ceiling",
    "format_ceiling",
    "plot_ceiling",
]

#: Bin counts tried when none are given.
DEFAULT_BINS = (10, 25, 50, 100, 500, 1000)
#: Size bucket edges (longer box side, px) when none are given.
DEFAULT_SIZES = (0.0, 4.0, 8.0, 16.0, 32.0, 64.0, 128.0, math.inf)
#: AP75 a bin count must keep above to count as enough (:meth:`Ceiling.smallest_bins`).
AP75_GOAL = 0.99


def iou_floor(width, height, step_x, step_y) -> np.ndarray:
    """Least IoU of a ``width x height`` box with itself after each edge moved by up to half a bin.

    Parameters
    ----------
    width, height : array_like
        Box sides in pixels.
    step_x, step_y : array_like
        Bin widths ``W / n`` and ``H / n`` in pixels.

    Returns
    -------
    ndarray of float64
        ``(1 - step_x / width) (1 - step_y / height)`` where both sides are
        larger than their bin, else 0 (see the module docstring).

    Examples
    --------
    >>> float(iou_floor(80, 80, 10, 10))  # (7/8)^2
    0.765625
    """
    w, h = np.asarray(width, dtype=np.float64), np.asarray(height, dtype=np.float64)
    fx = 1 - np.asarray(step_x, dtype=np.float64) / w
    fy = 1 - np.asarray(step_y, dtype=np.float64) / h
    return np.where((fx > 0) & (fy > 0), fx * fy, 0.0)


def quantized_truth(boxes, width, height, n_bins: int) -> np.ndarray:
    """Boxes moved to their bin centres, as a perfect sequence model with ``n_bins`` bins returns them.

    Parameters
    ----------
    boxes : ndarray of shape (N, 4)
        xyxy in pixels.
    width, height : float or ndarray of shape (N,)
        Size of each box's image in pixels.
    n_bins : int

    Returns
    -------
    ndarray of float64, shape (N, 4)
    """
    b = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    w = np.broadcast_to(np.asarray(width, dtype=np.float64), b.shape[:1])[:, None]  # (N, 1)
    h = np.broadcast_to(np.asarray(height, dtype=np.float64), b.shape[:1])[:, None]
    out = np.empty_like(b)
    out[:, 0::2] = dequantize(quantize(b[:, 0::2], w, n_bins), w, n_bins)
    out[:, 1::2] = dequantize(quantize(b[:, 1::2], h, n_bins), h, n_bins)
    return out


@dataclass(frozen=True, slots=True)
class CeilingRow:
    """Ceiling of one bin count on one size bucket (``bucket == "all"``: every object).

    ``worst_iou`` is the least IoU of a quantized box with its object (NaN
    without objects); APs are -1 where the bucket has no objects.
    """

    bins: int
    bucket: str
    lo: float
    hi: float
    n_objects: int
    ap: float
    ap50: float
    ap75: float
    worst_iou: float

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary (infinities and NaN become None)."""
        return {f: (None if isinstance(v, float) and not math.isfinite(v) else v)
                for f in self.__slots__ for v in [getattr(self, f)]}


@dataclass(frozen=True, slots=True)
class Ceiling:
    """Result of :func:`token_ceiling`: one row per bin count and bucket (``all`` first, then by size)."""

    rows: tuple[CeilingRow, ...]
    bins: tuple[int, ...]
    buckets: tuple[str, ...]

    def row(self, bins: int, bucket: str = "all") -> CeilingRow:
        """The row of a bin count and bucket."""
        for r in self.rows:
            if r.bins == bins and r.bucket == bucket:
                return r
        raise KeyError((bins, bucket))

    def smallest_bins(self, goal: float = AP75_GOAL) -> dict[str, int | None]:
        """Per bucket, the smallest bin count from which every larger one tried keeps AP75 above ``goal``.

        None where even the largest bin count tried does not.
        """
        out = {}
        for bucket in self.buckets:
            best = None
            for n in sorted(self.bins, reverse=True):
                if self.row(n, bucket).ap75 <= goal:
                    break
                best = n
            out[bucket] = best
        return out

    def to_dict(self, goal: float = AP75_GOAL) -> dict:
        """Plain JSON-able dictionary: the rows and the smallest bin counts."""
        return {
            "bins": list(self.bins),
            "buckets": list(self.buckets),
            "scores": "each quantized box scored by its IoU with its object: the best ranking (an upper bound)",
            "rows": [r.to_dict() for r in self.rows],
            "ap75_goal": goal,
            "smallest_bins_for_ap75": self.smallest_bins(goal),
        }


def _check_bins(bins) -> tuple[int, ...]:
    values = tuple(bins)
    if not values or any(not isinstance(v, (int, np.integer)) or isinstance(v, bool) or v < 1 for v in values):
        raise UserError(f"'bins' must be whole numbers >= 1 (got {list(values)})")
    return tuple(sorted(set(int(v) for v in values)))


def _check_sizes(sizes) -> np.ndarray:
    e = np.asarray(list(sizes), dtype=np.float64)
    if e.ndim != 1 or len(e) < 2 or np.isnan(e).any() or e[0] < 0 or np.any(np.diff(e) <= 0):
        raise UserError(f"'sizes' (bucket edges) must be at least two increasing numbers >= 0 (got {list(sizes)})")
    return e


def _edge(x: float) -> str:
    return "inf" if math.isinf(x) else f"{x:g}"


def _truth_arrays(coco: Mapping):
    """Non-crowd annotations as arrays: boxes xyxy (N, 4), image width and height (N,), longer side (N,)."""
    size = {im["id"]: (im["width"], im["height"]) for im in coco["images"]}
    anns = [a for a in coco["annotations"] if a.get("iscrowd", 0) != 1]
    bbox = np.array([a["bbox"] for a in anns], dtype=np.float64).reshape(-1, 4)
    xyxy = np.hstack([bbox[:, :2], bbox[:, :2] + bbox[:, 2:]])
    wh = np.array([size[a["image_id"]] for a in anns], dtype=np.float64).reshape(-1, 2)
    return anns, xyxy, wh[:, 0], wh[:, 1], bbox[:, 2:].max(axis=1, initial=0.0) if len(anns) else np.zeros(0)


def token_ceiling(coco: Mapping, bins: Sequence[int] = DEFAULT_BINS, sizes: Sequence[float] = DEFAULT_SIZES) -> Ceiling:
    """AP, AP50 and AP75 of the ground truth quantized with each bin count, overall and per size bucket.

    Parameters
    ----------
    coco : dict
        COCO ground truth (images need ``width`` and ``height``).
    bins : sequence of int
        Bin counts per axis.
    sizes : sequence of float
        Increasing bucket edges on the longer box side, px; buckets without
        objects are left out.

    Returns
    -------
    Ceiling

    Examples
    --------
    >>> gt = {"images": [{"id": 1, "width": 64, "height": 64}], "categories": [{"id": 1, "name": "plate"}],
    ...       "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [32, 32, 32, 32],
    ...                        "area": 1024.0, "iscrowd": 0}]}
    >>> c = token_ceiling(gt, bins=[8, 640])
    >>> round(c.row(8).ap, 6), round(c.row(640).ap, 6)  # IoU (1 - 8/32)^2 = 0.5625 and (1 - 0.1/32)^2
    (0.2, 1.0)
    """
    bins_ = _check_bins(bins)
    edges = _check_sizes(sizes)
    anns, xyxy, width, height, side = _truth_arrays(coco)
    n_buckets = len(edges) - 1
    where = np.searchsorted(edges, side, side="right") - 1
    where[side == edges[-1]] = n_buckets - 1  # the last bucket is closed
    buckets = [("all", 0.0, math.inf, np.ones(len(anns), dtype=bool))]
    for i in range(n_buckets):
        inside = where == i
        if inside.any():
            name = f"[{_edge(edges[i])}, {_edge(edges[i + 1])})"
            buckets.append((name, float(edges[i]), float(edges[i + 1]), inside))
    crowd = [a for a in coco["annotations"] if a.get("iscrowd", 0) == 1]
    rows = []
    for n in bins_:
        moved = quantized_truth(xyxy, width, height, n)
        iou = box_iou(moved, xyxy)
        preds = [
            {"image_id": a["image_id"], "category_id": a["category_id"],
             "bbox": [x0, y0, x1 - x0, y1 - y0], "score": s}
            for a, (x0, y0, x1, y1), s in zip(anns, moved.tolist(), iou.tolist(), strict=True)
        ]
        for name, lo, hi, inside in buckets:
            keep = np.flatnonzero(inside).tolist()
            subset = {**coco, "annotations": [anns[i] for i in keep] + crowd}
            ev = evaluate(subset, [preds[i] for i in keep])
            rows.append(CeilingRow(bins=n, bucket=name, lo=lo, hi=hi, n_objects=len(keep), ap=float(ev.stats[0]),
                                   ap50=float(ev.stats[1]), ap75=float(ev.stats[2]),
                                   worst_iou=float(iou[inside].min()) if keep else math.nan))
    return Ceiling(rows=tuple(rows), bins=bins_, buckets=tuple(b[0] for b in buckets))


def dataset_ceiling(dataset, bins: Sequence[int] = DEFAULT_BINS, sizes: Sequence[float] = DEFAULT_SIZES, *,
                    json_path=None, plot_path=None, goal: float = AP75_GOAL) -> Ceiling:
    """:func:`token_ceiling` of a dataset directory or COCO file, optionally written as JSON and a figure.

    The figure is written first, so one that cannot be drawn leaves no JSON behind.
    """
    if plot_path is not None:
        require_extra("matplotlib", "plots", "option '--plot'")
    coco, _ = read_ground_truth(dataset)
    result = token_ceiling(coco, bins, sizes)
    if plot_path is not None:
        plot_ceiling(result, plot_path, title=f"token ceiling of {Path(dataset).name}")
    if json_path is not None:
        import orjson

        write_atomic(json_path, orjson.dumps(result.to_dict(goal), option=orjson.OPT_INDENT_2))
    return result


def format_ceiling(result: Ceiling, goal: float = AP75_GOAL) -> str:
    """The ceiling as a plain text table, then the smallest bin count per bucket."""
    head = f"{'bins':>6}  {'size (px)':<12} {'objects':>7}  {'AP':>6} {'AP50':>6} {'AP75':>6}  {'worst IoU':>9}"
    lines = [head, "-" * len(head)]
    for r in result.rows:
        ap = [f"{v:6.3f}" if v >= 0 else f"{'-':>6}" for v in (r.ap, r.ap50, r.ap75)]
        worst = f"{r.worst_iou:9.3f}" if math.isfinite(r.worst_iou) else f"{'-':>9}"
        lines.append(f"{r.bins:>6}  {r.bucket:<12} {r.n_objects:>7}  {' '.join(ap)}  {worst}")
    lines.append("")
    lines.append(f"smallest bins keeping AP75 > {goal:g} (from there on, among those tried):")
    for bucket, n in result.smallest_bins(goal).items():
        lines.append(f"  {bucket:<12} {n if n is not None else 'none of those tried'}")
    return "\n".join(lines)


#: Line styles and markers, one pair per bucket, so lines differ without colour.
_STYLES = (("-", "o"), ("--", "s"), (":", "^"), ("-.", "D"), ((0, (5, 1, 1, 1, 1, 1)), "v"),
           ((0, (1, 3)), "P"), ((0, (8, 2)), "X"), ((0, (3, 1, 1, 1)), "*"))


def plot_ceiling(result: Ceiling, path, *, title: str | None = None) -> None:
    """Write a PNG (1440x400 px): AP, AP50 and AP75 against the bin count, one line per size bucket."""
    require_extra("matplotlib", "plots", "a figure")
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(14.4, 4.0), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, 3, sharey=True)
    panels = (("ap", "AP @ IoU .50:.95"), ("ap50", "AP @ IoU .50"), ("ap75", "AP @ IoU .75"))
    for ax, (attr, label) in zip(axes, panels, strict=True):
        for i, bucket in enumerate(result.buckets):
            style, marker = _STYLES[i % len(_STYLES)]
            rows = [result.row(n, bucket) for n in result.bins]
            y = [getattr(r, attr) if getattr(r, attr) >= 0 else math.nan for r in rows]
            ax.plot(result.bins, y, linestyle=style, marker=marker, label=f"{bucket} ({rows[0].n_objects})")
        ax.set_xscale("log")
        ax.set_xticks(result.bins, [str(n) for n in result.bins], minor=False)
        ax.minorticks_off()
        ax.set_xlabel("bins per axis (n)")
        ax.set_title(label)
        ax.set_ylim(-0.02, 1.02)
        ax.grid(True, alpha=0.3)
    axes[0].set_ylabel("ceiling")
    axes[0].legend(title="size (objects)", fontsize=8, loc="lower right")
    if title:
        fig.suptitle(title)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    write_atomic(path, buf.getvalue())
