"""Exact IoU: boxes placed at a known IoU with their sources, and the checks the jitter models share.

Everything in :mod:`synthgen.jitter` is a pure function over float64 box arrays of shape
``(N, 4)`` in the xyxy convention of :mod:`synthgen.geometry` (half-open,
continuous pixel coordinates).

Exact IoU along a direction
---------------------------
A direction ``d = (d0, d1, d2, d3)`` moves the four edges of a box of size
``w x h`` to ``(x0 + s d0 w, y0 + s d1 h, x1 + s d2 w, y1 + s d3 h)`` for a
step ``s >= 0``.  Each edge moves away from where it started, so every edge
either leaves the source (adding area outside it) or cuts into it (removing
more of the box than of the intersection); both lower the IoU.  Hence the IoU
falls strictly and continuously from 1 at ``s = 0`` until the boxes stop
overlapping (or towards 0 as the box grows without bound), and each target
``t`` in ``(0, 1]`` is met at exactly one step.  While the boxes overlap, the
overlap and the size of the moved box are linear in ``s``, so ``IoU(s) = t``
is the quadratic (in units of ``w`` and ``h``)::

    (1 - t) - s [(1 + t)(ax + ay) + t (gx + gy)] + s^2 [(1 + t) ax ay - t gx gy] = 0

with ``ax = max(d0, 0) + max(-d2, 0)`` (how fast the x-overlap shrinks),
``gx = d2 - d0`` (how fast the width grows), and likewise in y.  Its smallest
positive root is the step.  When the box must stay on the canvas, an edge that
reaches the border stops there; the IoU along that path is still continuous and
non-increasing, and the step is found by bisection.  When no step along the
stopped path reaches the target (a box already filling the canvas cannot grow),
the direction is turned inward (every edge moves into the source), which reaches
every target.  The achieved IoU is always measured on the returned boxes and
checked against the target to :data:`IOU_TOLERANCE`; a box that cannot be placed
that precisely raises instead of being returned.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from synthgen.errors import ConfigError
from synthgen.evaluate.cocoeval import IOU_THRESHOLDS
from synthgen.geometry import as_boxes, box_iou, boxes_valid

__all__ = [
    "IOU_TOLERANCE",
    "COCO_IOU_THRESHOLDS",
    "COCO_MARGIN",
    "clear_of_thresholds",
    "Perturbed",
    "box_at_iou",
]


#: Largest allowed difference between a requested and an achieved IoU.
IOU_TOLERANCE = 1e-9


#: The IoU thresholds of COCO-style AP, 0.5, 0.55, ..., 0.95 (their home is :mod:`synthgen.evaluate`).
COCO_IOU_THRESHOLDS = tuple(float(t) for t in IOU_THRESHOLDS)


#: How far :func:`clear_of_thresholds` moves a range end that sits on a COCO threshold:
#: far above :data:`IOU_TOLERANCE` and the rounding of any float64 IoU, far below any
#: difference a detector's user could mean.
COCO_MARGIN = 1e-6


def freeze_arrays(obj) -> None:
    """Make every ndarray field of the dataclass instance ``obj`` read-only."""
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, np.ndarray):
            value.flags.writeable = False


class BoxArrays:
    """Base of the jitter results: every array field is read-only; ``len`` is the number of boxes."""

    __slots__ = ()

    def __post_init__(self):
        freeze_arrays(self)

    def __len__(self) -> int:
        return len(self.boxes)


@dataclass(frozen=True, slots=True)
class Perturbed(BoxArrays):
    """Boxes made from source boxes, each with its IoU to its source.

    Attributes
    ----------
    boxes : ndarray of float64, shape (N, 4)
        The new boxes, xyxy in pixels.
    source : ndarray of int64, shape (N,)
        Index of each box's source in the input array.
    iou : ndarray of float64, shape (N,)
        IoU of each box with its source, measured on ``boxes``.
    target : ndarray of float64, shape (N,)
        Requested IoU (within :data:`IOU_TOLERANCE` of ``iou``), NaN for
        models that do not aim at an IoU.
    mode : ndarray of str, shape (N,)
        Error model or direction used: one of :data:`ERROR_MODES`, ``"given"``
        for :func:`box_at_iou`, or the model's name (``"gaussian_edges"``, ...).
    adjusted : ndarray of bool, shape (N,)
        The canvas changed the box: an edge stopped at the border, or (for
        IoU targets) the direction was turned inward to reach the target.

    Arrays are read-only.
    """

    boxes: np.ndarray
    source: np.ndarray
    iou: np.ndarray
    target: np.ndarray
    mode: np.ndarray
    adjusted: np.ndarray


# -- shared by the jitter modules (not in __all__): argument checks, counts, the clipped path


def check_arg(check, name: str, value, **rule) -> None:
    """Run a synthgen.errors check on a function argument; raise ValueError naming the argument."""
    try:
        check(name, value, **rule)
    except ConfigError as exc:
        shown = list(exc.value) if isinstance(exc.value, tuple) else exc.value
        raise ValueError(f"'{name}' {exc.rule} (got {shown!r})") from None


def check_sources(b: np.ndarray, what: str = "boxes") -> None:
    if not boxes_valid(b).all():
        i = int(np.flatnonzero(~boxes_valid(b))[0])
        raise ValueError(f"{what} must be finite with x0 < x1 and y0 < y1 (box {i} is {b[i].tolist()})")


def check_iou_range(iou, name: str = "iou") -> tuple[float, float]:
    if np.isscalar(iou):
        iou = (float(iou), float(iou))
    lo, hi = (float(v) for v in iou)
    if not (0.0 < lo <= hi <= 1.0):
        raise ValueError(f"'{name}' must be [lo, hi] with 0 < lo <= hi <= 1 (got [{lo}, {hi}])")
    return lo, hi


def canvas_arrays(canvas, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Canvas width and height per box, shape (n,) each; inf when ``canvas`` is None."""
    if canvas is None:
        return np.full(n, np.inf), np.full(n, np.inf)
    c = np.asarray(canvas, dtype=np.float64)
    if c.shape == (2,):
        c = np.broadcast_to(c, (n, 2))
    if c.shape != (n, 2) or not (np.isfinite(c).all() and (c > 0).all()):
        raise ValueError(f"'canvas' must be (width, height) or an array of shape ({n}, 2) of positive sizes")
    return c[:, 0].copy(), c[:, 1].copy()


def check_inside(b: np.ndarray, cw: np.ndarray, ch: np.ndarray) -> None:
    out = _outside(b, cw, ch)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        raise ValueError(
            f"boxes must lie inside the canvas to be kept inside it "
            f"(box {i} is {b[i].tolist()} on a {cw[i]:g} x {ch[i]:g} canvas)"
        )


def count_of(rate: float, n: int) -> int:
    """``rate * n`` rounded half up: how many of ``n`` items a fraction selects."""
    return int(math.floor(rate * n + 0.5))


def sizes4(b: np.ndarray) -> np.ndarray:
    w = b[:, 2] - b[:, 0]
    h = b[:, 3] - b[:, 1]
    return np.stack([w, h, w, h], axis=1)  # (N, 4)


def _shrink_rates(d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """How fast the x- and y-overlap with the source shrink along ``d`` (units of w, h per step)."""
    ax = np.maximum(d[:, 0], 0) + np.maximum(-d[:, 2], 0)
    ay = np.maximum(d[:, 1], 0) + np.maximum(-d[:, 3], 0)
    return ax, ay


def _ray_step(d: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Step ``s`` at which the unconstrained ray along ``d`` has IoU ``t``, shape (N,)."""
    ax, ay = _shrink_rates(d)
    gx = d[:, 2] - d[:, 0]
    gy = d[:, 3] - d[:, 1]
    qa = (1 + t) * ax * ay - t * gx * gy
    qb = (1 + t) * (ax + ay) + t * (gx + gy)  # > 0 for any non-zero direction
    qc = 1 - t
    disc = np.sqrt(np.maximum(qb * qb - 4 * qa * qc, 0.0))
    return 2 * qc / (qb + disc)  # the smaller root, without cancellation


def stopped_path(b, dwh, s, cw, ch) -> np.ndarray:
    """Boxes at step ``s`` along ``dwh`` (pixels per unit step), edges stopped at the canvas."""
    p = b + s[:, None] * dwh
    p[:, 0::2] = np.clip(p[:, 0::2], _floor(cw)[:, None], cw[:, None])
    p[:, 1::2] = np.clip(p[:, 1::2], _floor(ch)[:, None], ch[:, None])
    return p


def _floor(size: np.ndarray) -> np.ndarray:
    """Lower coordinate bound for canvas sizes: 0, or -inf where there is no canvas (size inf)."""
    return np.where(np.isinf(size), -np.inf, 0.0)


def _outside(p, cw, ch) -> np.ndarray:
    return (p[:, 0] < _floor(cw)) | (p[:, 1] < _floor(ch)) | (p[:, 2] > cw) | (p[:, 3] > ch)


def _bisect(b, dwh, t, cw, ch, s_hi) -> np.ndarray:
    """Boxes along the stopped path whose IoU is closest to ``t``; needs IoU(s_hi) <= t."""
    lo = np.zeros(len(b))
    hi = s_hi.copy()
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if np.all((mid == lo) | (mid == hi)):
            break
        above = box_iou(b, stopped_path(b, dwh, mid, cw, ch)) >= t
        lo = np.where(above, mid, lo)
        hi = np.where(above, hi, mid)
    p_lo = stopped_path(b, dwh, lo, cw, ch)
    p_hi = stopped_path(b, dwh, hi, cw, ch)
    take_hi = np.abs(box_iou(b, p_hi) - t) < np.abs(box_iou(b, p_lo) - t)
    return np.where(take_hi[:, None], p_hi, p_lo)


def _bracket(b, d, wh, t, cw, ch) -> np.ndarray:
    """A step at which the stopped path's IoU is <= ``t``; NaN where the path never gets that low."""
    ax, ay = _shrink_rates(d)
    cut = np.maximum(ax, ay)
    s_hi = np.full(len(b), np.nan)
    # Some edge moves into the source: the boxes stop overlapping (IoU 0) at this step,
    # and such an edge never meets the border first.
    cuts = cut > 0
    s_hi[cuts] = 1 / cut[cuts]
    # Pure growth without a canvas: IoU(s) <= 1 / (1 + s max(gx, gy)), which is < t here.
    free = ~cuts & np.isinf(cw)
    g = np.maximum(d[:, 2] - d[:, 0], d[:, 3] - d[:, 1])
    s_hi[free] = 2 * (1 / t[free] - 1) / g[free]
    # Pure growth on a canvas: the IoU bottoms out once the last moving edge meets the border.
    held = np.flatnonzero(~cuts & ~free)
    if held.size:
        gap = np.stack([b[held, 0], b[held, 1], cw[held] - b[held, 2], ch[held] - b[held, 3]], axis=1)  # (K, 4)
        speed = np.abs(d[held]) * wh[held]
        s_end = np.where(speed > 0, gap / np.where(speed > 0, speed, 1.0), 0.0).max(axis=1)
        floor = box_iou(b[held], stopped_path(b[held], d[held] * wh[held], s_end, cw[held], ch[held]))
        s_hi[held] = np.where(floor <= t[held], s_end, np.nan)
    return s_hi


def solve_iou(b, d, t, cw, ch):
    """Boxes along directions ``d`` at IoU ``t`` with their sources ``b``.

    Returns (boxes (N, 4), achieved IoU (N,), adjusted (N,) bool).
    """
    n = len(b)
    wh = sizes4(b)
    p = b + _ray_step(d, t)[:, None] * d * wh
    adjusted = _outside(p, cw, ch)
    # Boxes the canvas stops, and (rarely) closed-form steps that lost precision, go to bisection.
    redo = np.flatnonzero(adjusted | (np.abs(box_iou(b, p) - t) > IOU_TOLERANCE / 4))
    if redo.size:
        bi, di, ti, cwi, chi, whi = b[redo], d[redo].copy(), t[redo], cw[redo], ch[redo], wh[redo]
        s_hi = _bracket(bi, di, whi, ti, cwi, chi)
        turn = np.isnan(s_hi)
        if turn.any():
            # No step reaches the target: move every edge into the source instead.
            di[turn] = np.abs(di[turn]) * np.array([1.0, 1.0, -1.0, -1.0])
            s_hi[turn] = _bracket(bi[turn], di[turn], whi[turn], ti[turn], cwi[turn], chi[turn])
        p[redo] = _bisect(bi, di * whi, ti, cwi, chi, s_hi)
        adjusted[redo] |= turn
    iou = box_iou(b, p)
    err = np.abs(iou - t)
    if n and err.max() > IOU_TOLERANCE:
        k = int(np.argmax(err))
        raise ValueError(
            f"cannot place box {k} ({b[k].tolist()}) at IoU {t[k]!r} to within {IOU_TOLERANCE:g}: "
            f"got {iou[k]!r}; its coordinates are too large for its size in float64"
        )
    return p, iou, adjusted


def box_at_iou(boxes, directions, targets, *, canvas=None) -> Perturbed:
    """Move each box along a direction until its IoU with itself is the target.

    Deterministic; see the module notes for the method.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        Source boxes, xyxy in pixels, with positive width and height.
    directions : array_like of shape (N, 4)
        Edge velocities ``(d0, d1, d2, d3)`` in units of the box's width (x
        edges) and height (y edges), not all zero.  ``(1, 0, 1, 0)`` shifts
        right, ``(-1, -1, 1, 1)`` grows about the centre.
    targets : array_like of shape (N,) or float
        IoU in (0, 1] to reach.
    canvas : (width, height) or array_like of shape (N, 2), optional
        Keep every box inside ``[0, width] x [0, height]``: edges stop at the
        border, and where that cannot reach the target the direction turns
        inward (``adjusted`` is then True).  Sources must lie inside it.

    Returns
    -------
    Perturbed
        ``mode`` is ``"given"``.

    Examples
    --------
    Two equal boxes offset by ``d`` have IoU ``(w - d) / (w + d)``:

    >>> r = box_at_iou([[0, 0, 10, 10]], [[1, 0, 1, 0]], 0.5)
    >>> r.boxes.round(12).tolist()
    [[3.333333333333, 0.0, 13.333333333333, 10.0]]
    >>> abs(float(r.iou[0]) - 0.5) < 1e-12
    True
    """
    b = as_boxes(boxes)
    n = len(b)
    d = np.asarray(directions, dtype=np.float64).reshape(-1, 4) if n else np.zeros((0, 4))
    t = np.broadcast_to(np.asarray(targets, dtype=np.float64), (n,)).copy()
    if d.shape != (n, 4):
        raise ValueError(f"'directions' must have shape ({n}, 4) (got {d.shape})")
    check_sources(b)
    if not (np.isfinite(d).all() and (np.abs(d).max(axis=1, initial=0) > 0).all()) and n:
        raise ValueError("'directions' must be finite and not all zero in any row")
    if n and not ((t > 0) & (t <= 1)).all():
        raise ValueError(f"'targets' must lie in (0, 1] (got {t[~((t > 0) & (t <= 1))][0]!r})")
    cw, ch = canvas_arrays(canvas, n)
    if canvas is not None:
        check_inside(b, cw, ch)
    p, iou, adjusted = solve_iou(b, d, t, cw, ch)
    return Perturbed(p, np.arange(n), iou, t, np.full(n, "given"), adjusted)


def clear_of_thresholds(iou, thresholds=COCO_IOU_THRESHOLDS, margin: float = COCO_MARGIN) -> tuple[float, float]:
    """An IoU range moved off the evaluation thresholds its ends sit on.

    A box made at IoU exactly ``t`` comes out at ``t`` plus or minus a few
    1e-15, so an evaluator's ``IoU >= t`` test passes for about half of them.
    An end within 1e-9 of a threshold ``t`` is therefore moved inward by
    ``margin``: a low end to ``t + margin`` (every box matched at ``t``, as
    the ``>=`` rule means), a high end to ``t - margin`` (none matched at
    ``t``); a one-point range ``[t, t]`` becomes ``[t + margin, t + margin]``.

    Parameters
    ----------
    iou : (lo, hi)
    thresholds : sequence of float
        Default: COCO's ``0.5, 0.55, ..., 0.95``.
    margin : float

    Returns
    -------
    (lo, hi)
        The range to draw from (the same when no end touches a threshold).

    Examples
    --------
    >>> clear_of_thresholds((0.5, 0.5)), clear_of_thresholds((0.55, 0.7)), clear_of_thresholds((0.52, 0.68))
    ((0.500001, 0.500001), (0.550001, 0.699999), (0.52, 0.68))
    """
    lo, hi = (float(v) for v in iou)

    def touches(v: float) -> float | None:
        return next((t for t in thresholds if abs(v - t) <= 1e-9), None)

    t_lo, t_hi = touches(lo), touches(hi)
    if lo == hi:
        return (round(t_lo + margin, 12),) * 2 if t_lo is not None else (lo, hi)
    new_lo = round(t_lo + margin, 12) if t_lo is not None else lo
    new_hi = round(t_hi - margin, 12) if t_hi is not None else hi
    return (new_lo, new_hi) if new_lo <= new_hi else (lo, hi)
