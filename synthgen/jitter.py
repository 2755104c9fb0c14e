"""Boxes that are wrong by a known amount.

Everything here is a pure function over float64 box arrays of shape
``(N, 4)`` in the xyxy convention of :mod:`synthgen.geometry` (half-open,
continuous pixel coordinates).  Every random function takes a keyword-only
``rng: numpy.random.Generator``; no global random state is used.

Families
--------
* **Perturbation models**: :func:`gaussian_edges`, :func:`gaussian_center_size`,
  :func:`uniform_shift_scale` (noise scaled by each box's width and height),
  and :func:`to_iou` / :func:`box_at_iou`, which place a box at an exactly
  known IoU with its source along a direction of error.
* **Duplicates**: :func:`duplicates`.
* **Distractors**: :func:`background_boxes` (IoU with every true box below a
  bound) and :func:`near_misses` (best IoU with the truth inside a range).
* **Class confusion**: :func:`relabel`.
* **Training noise objects**: :func:`pad_with_noise`.
* **Simulated detector**: :func:`simulate_detections` with a
  :class:`DetectorSpec`, scores from :func:`detection_scores`.

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

from synthgen.errors import ConfigError, check_number, check_range
from synthgen.evaluate.cocoeval import IOU_THRESHOLDS
from synthgen.formats.results import DETECTION_KINDS
from synthgen.geometry import as_boxes, box_ioa, box_iou, boxes_valid, group_max_overlap
from synthgen.seeding import NOISE_STREAM, stream

__all__ = [
    "NOISE_STREAM",
    "noise_padder",
    "IOU_TOLERANCE",
    "COCO_IOU_THRESHOLDS",
    "COCO_MARGIN",
    "clear_of_thresholds",
    "MAX_BACKGROUND",
    "FALLBACK_BACKGROUND_SIZE",
    "ERROR_MODES",
    "DETECTION_KINDS",
    "OUTCOMES",
    "Perturbed",
    "Placed",
    "Relabelled",
    "NoisePadded",
    "Detections",
    "DetectorSpec",
    "box_at_iou",
    "to_iou",
    "gaussian_edges",
    "gaussian_center_size",
    "uniform_shift_scale",
    "duplicates",
    "background_boxes",
    "near_misses",
    "relabel",
    "pad_with_noise",
    "detection_scores",
    "simulate_detections",
]

#: Largest allowed difference between a requested and an achieved IoU.
IOU_TOLERANCE = 1e-9

#: The IoU thresholds of COCO-style AP, 0.5, 0.55, ..., 0.95 (their home is :mod:`synthgen.evaluate`).
COCO_IOU_THRESHOLDS = tuple(float(t) for t in IOU_THRESHOLDS)

#: How far :func:`clear_of_thresholds` moves a range end that sits on a COCO threshold:
#: far above :data:`IOU_TOLERANCE` and the rounding of any float64 IoU, far below any
#: difference a detector's user could mean.
COCO_MARGIN = 1e-6

#: Directions of error for :func:`to_iou`:
#: ``shift`` moves the box without changing its size; ``grow`` scales it up
#: about a random anchor point inside it; ``shrink`` scales it down about such a
#: point; ``aspect`` widens one axis and narrows the other; ``free`` moves the
#: four edges by a random direction (a mix of all of these).
ERROR_MODES = ("shift", "grow", "shrink", "aspect", "free")


#: What happened to a ground-truth box in a simulated detector (see :class:`Detections`).
OUTCOMES = ("detected", "missed", "mislocated", "wrong_class")

#: Largest mean number of background boxes per image a :class:`DetectorSpec`
#: accepts: far beyond any detector's output (maxDets is 100), small enough that
#: the boxes of a few thousand images fit in memory.
MAX_BACKGROUND = 10_000

_ROUNDS = 64  # redraws for rejection sampling before giving up


# --------------------------------------------------------------------------- results


def _freeze(obj) -> None:
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, np.ndarray):
            value.flags.writeable = False


@dataclass(frozen=True, slots=True)
class Perturbed:
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

    def __post_init__(self):
        _freeze(self)

    def __len__(self) -> int:
        return len(self.boxes)


@dataclass(frozen=True, slots=True)
class Placed:
    """Distractor boxes and how close they come to the truth.

    Attributes
    ----------
    boxes : ndarray of float64, shape (N, 4)
        xyxy in pixels.
    source : ndarray of int64, shape (N,)
        Index of the true box a near miss was made from; -1 for background.
    iou : ndarray of float64, shape (N,)
        IoU with the source; NaN for background.
    other_iou : ndarray of float64, shape (N,)
        Largest IoU with any true box other than the source (for background:
        with any true box); 0 when there is none.

    Arrays are read-only.
    """

    boxes: np.ndarray
    source: np.ndarray
    iou: np.ndarray
    other_iou: np.ndarray

    def __post_init__(self):
        _freeze(self)

    def __len__(self) -> int:
        return len(self.boxes)


@dataclass(frozen=True, slots=True)
class Relabelled:
    """Class labels after confusion.

    Attributes
    ----------
    labels : ndarray of int64, shape (N,)
        New labels.
    original : ndarray of int64, shape (N,)
        Labels given.
    changed : ndarray of bool, shape (N,)
        Whether the label was changed (then ``labels != original``).
    """

    labels: np.ndarray
    original: np.ndarray
    changed: np.ndarray

    def __post_init__(self):
        _freeze(self)


@dataclass(frozen=True, slots=True)
class NoisePadded:
    """A box list padded to a fixed length with noise objects.

    The first ``N`` entries are the true objects in their given order; the
    rest are noise objects.

    Attributes
    ----------
    boxes : ndarray of float64, shape (L, 4)
        xyxy in pixels, inside the canvas.
    labels : ndarray of int64, shape (L,)
        True labels, then the noise label for every noise object.
    is_noise : ndarray of bool, shape (L,)
    learn_box : ndarray of bool, shape (L,)
        False where the box's coordinates must carry no loss (every noise
        object); True for the true objects.
    source : ndarray of int64, shape (L,)
        Index of the true box a box is (or was jittered from); -1 for random
        noise boxes.
    iou : ndarray of float64, shape (L,)
        IoU with the source (1 for true objects, NaN for random noise boxes).
    """

    boxes: np.ndarray
    labels: np.ndarray
    is_noise: np.ndarray
    learn_box: np.ndarray
    source: np.ndarray
    iou: np.ndarray

    def __post_init__(self):
        _freeze(self)

    def __len__(self) -> int:
        return len(self.boxes)


@dataclass(frozen=True, slots=True)
class Detections:
    """Output of :func:`simulate_detections`: predictions that know what they are.

    Attributes
    ----------
    boxes : ndarray of float64, shape (P, 4)
        Predicted boxes, xyxy in pixels, ordered by image, then by falling score.
    labels : ndarray of int64, shape (P,)
        Predicted class labels.
    scores : ndarray of float64, shape (P,)
        Confidence in (0, 1].
    image : ndarray of int64, shape (P,)
        Image index of each prediction.
    kind : ndarray of str, shape (P,)
        One of :data:`DETECTION_KINDS`:

        * ``true_positive``: right class, made from ground truth ``source`` at
          IoU ``iou`` (drawn from the spec's ``iou`` range);
        * ``duplicate``: an extra right-class box of a detected ``source`` at
          IoU ``iou`` (from ``duplicate_iou``);
        * ``localization``: the only box of ``source``, right class, at IoU
          ``iou`` from ``near_iou`` (a poorly placed detection);
        * ``wrong_class``: the only box of ``source``, placed like a true
          positive but with another class;
        * ``background``: a box whose IoU with every true box of its image is
          below ``background_iou`` (``source`` -1, ``iou`` NaN).
    source : ndarray of int64, shape (P,)
        Index into the ground-truth arrays given, -1 for background.
    iou : ndarray of float64, shape (P,)
        IoU with the source, measured on ``boxes``; NaN for background.
    other_iou : ndarray of float64, shape (P,)
        Largest IoU with any other true box of the same image, of any class
        (for background: with any true box).  A sourced prediction is drawn
        again until ``other_iou < iou``; entries where that failed are kept
        and show it here.
    outcome : ndarray of str, shape (N,)
        Per ground-truth box, one of :data:`OUTCOMES`: ``detected`` (it has a
        true positive), ``missed`` (no prediction is made from it),
        ``mislocated`` (its only prediction is a localization error),
        ``wrong_class`` (its only prediction has another class).
    background_shortfall : int
        Background boxes drawn but not placed because no spot with IoU below
        the bound was found (0 unless the truth covers nearly every spot).
    """

    boxes: np.ndarray
    labels: np.ndarray
    scores: np.ndarray
    image: np.ndarray
    kind: np.ndarray
    source: np.ndarray
    iou: np.ndarray
    other_iou: np.ndarray
    outcome: np.ndarray
    background_shortfall: int = 0

    def __post_init__(self):
        _freeze(self)

    def __len__(self) -> int:
        return len(self.boxes)

    @property
    def missed(self) -> np.ndarray:
        """Indices of the ground-truth boxes with no prediction, shape (K,)."""
        return np.flatnonzero(self.outcome == "missed")


# --------------------------------------------------------------------------- checks


def _arg(check, name: str, value, **rule) -> None:
    """Run a synthgen.errors check on a function argument; raise ValueError naming the argument."""
    try:
        check(name, value, **rule)
    except ConfigError as exc:
        shown = list(exc.value) if isinstance(exc.value, tuple) else exc.value
        raise ValueError(f"'{name}' {exc.rule} (got {shown!r})") from None


def _check_sources(b: np.ndarray, what: str = "boxes") -> None:
    if not boxes_valid(b).all():
        i = int(np.flatnonzero(~boxes_valid(b))[0])
        raise ValueError(f"{what} must be finite with x0 < x1 and y0 < y1 (box {i} is {b[i].tolist()})")


def _check_iou_range(iou, name: str = "iou") -> tuple[float, float]:
    if np.isscalar(iou):
        iou = (float(iou), float(iou))
    lo, hi = (float(v) for v in iou)
    if not (0.0 < lo <= hi <= 1.0):
        raise ValueError(f"'{name}' must be [lo, hi] with 0 < lo <= hi <= 1 (got [{lo}, {hi}])")
    return lo, hi


def _check_modes(modes) -> tuple[str, ...]:
    if isinstance(modes, str):
        modes = (modes,)
    modes = tuple(modes)
    bad = [m for m in modes if m not in ERROR_MODES]
    if not modes or bad:
        raise ValueError(f"'modes' must be a non-empty subset of {', '.join(ERROR_MODES)} (got {list(modes)})")
    return modes


def _canvas_arrays(canvas, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Canvas width and height per box, shape (n,) each; inf when ``canvas`` is None."""
    if canvas is None:
        return np.full(n, np.inf), np.full(n, np.inf)
    c = np.asarray(canvas, dtype=np.float64)
    if c.shape == (2,):
        c = np.broadcast_to(c, (n, 2))
    if c.shape != (n, 2) or not (np.isfinite(c).all() and (c > 0).all()):
        raise ValueError(f"'canvas' must be (width, height) or an array of shape ({n}, 2) of positive sizes")
    return c[:, 0].copy(), c[:, 1].copy()


def _check_inside(b: np.ndarray, cw: np.ndarray, ch: np.ndarray) -> None:
    out = _outside(b, cw, ch)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        raise ValueError(
            f"boxes must lie inside the canvas to be kept inside it "
            f"(box {i} is {b[i].tolist()} on a {cw[i]:g} x {ch[i]:g} canvas)"
        )


def _count(rate: float, n: int) -> int:
    """``rate * n`` rounded half up: how many of ``n`` items a fraction selects."""
    return int(math.floor(rate * n + 0.5))


# --------------------------------------------------------------------------- exact IoU


def _sizes4(b: np.ndarray) -> np.ndarray:
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


def _path(b, dwh, s, cw, ch) -> np.ndarray:
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
        above = box_iou(b, _path(b, dwh, mid, cw, ch)) >= t
        lo = np.where(above, mid, lo)
        hi = np.where(above, hi, mid)
    p_lo = _path(b, dwh, lo, cw, ch)
    p_hi = _path(b, dwh, hi, cw, ch)
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
        floor = box_iou(b[held], _path(b[held], d[held] * wh[held], s_end, cw[held], ch[held]))
        s_hi[held] = np.where(floor <= t[held], s_end, np.nan)
    return s_hi


def _solve(b, d, t, cw, ch):
    """Boxes along directions ``d`` at IoU ``t`` with their sources ``b``.

    Returns (boxes (N, 4), achieved IoU (N,), adjusted (N,) bool).
    """
    n = len(b)
    wh = _sizes4(b)
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
    _check_sources(b)
    if not (np.isfinite(d).all() and (np.abs(d).max(axis=1, initial=0) > 0).all()) and n:
        raise ValueError("'directions' must be finite and not all zero in any row")
    if n and not ((t > 0) & (t <= 1)).all():
        raise ValueError(f"'targets' must lie in (0, 1] (got {t[~((t > 0) & (t <= 1))][0]!r})")
    cw, ch = _canvas_arrays(canvas, n)
    if canvas is not None:
        _check_inside(b, cw, ch)
    p, iou, adjusted = _solve(b, d, t, cw, ch)
    return Perturbed(p, np.arange(n), iou, t, np.full(n, "given"), adjusted)


def _directions(modes: tuple[str, ...], n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Random unit-scale directions, one mode per box; returns (d (n, 4), mode names (n,))."""
    pick = rng.integers(len(modes), size=n)
    u = rng.random(n)
    v = rng.random(n)
    theta = rng.uniform(0.0, 2 * np.pi, n)
    swap = rng.random(n) < 0.5
    z = rng.standard_normal((n, 4))
    zn = np.linalg.norm(z, axis=1, keepdims=True)
    z = np.where(zn > 0, z / np.where(zn > 0, zn, 1.0), np.array([1.0, 0.0, 1.0, 0.0]))
    c, s = np.cos(theta), np.sin(theta)
    table = {
        "shift": np.stack([c, s, c, s], axis=1),
        # scale about the anchor (x0 + u w, y0 + v h)
        "grow": np.stack([-u, -v, 1 - u, 1 - v], axis=1),
        "shrink": np.stack([u, v, u - 1, v - 1], axis=1),
        "aspect": np.where(
            swap[:, None],
            np.stack([u, -v, u - 1, 1 - v], axis=1),  # narrower, taller
            np.stack([-u, v, 1 - u, v - 1], axis=1),  # wider, lower
        ),
        "free": z,
    }
    d = np.zeros((n, 4))
    for k, m in enumerate(modes):
        d[pick == k] = table[m][pick == k]
    names = np.asarray(modes)[pick] if n else np.zeros(0, dtype="<U6")
    return d, names


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


def _draw_targets(lo: float, hi: float, n: int, rng: np.random.Generator) -> np.ndarray:
    return lo + (hi - lo) * rng.random(n)


def to_iou(boxes, iou, *, rng: np.random.Generator, modes=ERROR_MODES, canvas=None) -> Perturbed:
    """Perturbed boxes whose IoU with their sources is drawn from a range, achieved exactly.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        Source boxes, xyxy in pixels, positive width and height.
    iou : (lo, hi) or float
        Target IoU range, ``0 < lo <= hi <= 1``; each box's target is uniform
        in it.  A float means ``lo == hi``.
    rng : numpy.random.Generator
    modes : sequence of str
        Directions of error to draw from, uniformly per box; a subset of
        :data:`ERROR_MODES`.
    canvas : (width, height) or array_like of shape (N, 2), optional
        Keep the boxes inside the canvas (see :func:`box_at_iou`).

    Returns
    -------
    Perturbed
        ``iou`` is within :data:`IOU_TOLERANCE` of ``target``; ``mode`` is the
        direction drawn (``adjusted`` marks boxes the canvas bent).

    Raises
    ------
    ValueError
        Bad arguments, or a box whose coordinates are too large for its size to
        reach the tolerance in float64.

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> r = to_iou([[10, 10, 30, 20], [0, 0, 1, 1]], (0.5, 0.7), rng=rng, canvas=(64, 48))
    >>> bool(np.all(np.abs(r.iou - r.target) <= IOU_TOLERANCE)), bool(np.all((r.target >= 0.5) & (r.target <= 0.7)))
    (True, True)
    """
    b = as_boxes(boxes)
    n = len(b)
    lo, hi = _check_iou_range(iou)
    modes = _check_modes(modes)
    _check_sources(b)
    cw, ch = _canvas_arrays(canvas, n)
    if canvas is not None:
        _check_inside(b, cw, ch)
    t = _draw_targets(lo, hi, n, rng)
    d, names = _directions(modes, n, rng)
    p, achieved, adjusted = _solve(b, d, t, cw, ch)
    return Perturbed(p, np.arange(n), achieved, t, names, adjusted)


# --------------------------------------------------------------------------- noise models


def _redraw(b: np.ndarray, draw, cw, ch, what: str) -> tuple[np.ndarray, np.ndarray]:
    """Draw boxes with ``draw(index) -> boxes``, clip to the canvas, redraw invalid ones.

    Returns (boxes (N, 4), clipped (N,) bool).
    """
    n = len(b)
    out = np.empty((n, 4))
    clipped = np.zeros(n, dtype=bool)
    todo = np.arange(n)
    for _ in range(_ROUNDS):
        if todo.size == 0:
            break
        raw = draw(todo)
        p = _path(raw, np.zeros_like(raw), np.zeros(len(raw)), cw[todo], ch[todo])
        ok = boxes_valid(p)
        out[todo[ok]] = p[ok]
        clipped[todo[ok]] = np.any(p[ok] != raw[ok], axis=1)
        todo = todo[~ok]
    if todo.size:
        raise ValueError(
            f"{what} left {todo.size} of {n} boxes empty after {_ROUNDS} draws "
            f"(box {int(todo[0])} is {b[todo[0]].tolist()}); use a smaller noise level"
        )
    return out, clipped


def _noise_result(b, p, clipped, mode: str) -> Perturbed:
    n = len(b)
    return Perturbed(p, np.arange(n), box_iou(b, p), np.full(n, np.nan), np.full(n, mode), clipped)


def gaussian_edges(boxes, sigma: float, *, rng: np.random.Generator, canvas=None) -> Perturbed:
    """Add Gaussian noise to every edge, scaled by the box's width (x) and height (y).

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy in pixels.
    sigma : float
        Standard deviation of each edge's offset as a fraction of the box's
        width (``x0``, ``x1``) or height (``y0``, ``y1``); ``>= 0``.
    rng : numpy.random.Generator
    canvas : (width, height) or array_like of shape (N, 2), optional
        Clip the boxes to the canvas.

    Returns
    -------
    Perturbed
        Boxes that came out empty (``x0 >= x1`` after the noise or clipping)
        are drawn again; ``adjusted`` marks clipped boxes.

    Examples
    --------
    >>> r = gaussian_edges([[0, 0, 10, 20]], 0.0, rng=np.random.default_rng(0))
    >>> r.boxes.tolist(), r.iou.tolist()
    ([[0.0, 0.0, 10.0, 20.0]], [1.0])
    """
    _arg(check_number, "sigma", sigma, lo=0)
    b = as_boxes(boxes)
    _check_sources(b)
    wh = _sizes4(b)
    cw, ch = _canvas_arrays(canvas, len(b))
    p, clipped = _redraw(b, lambda i: b[i] + rng.standard_normal((len(i), 4)) * sigma * wh[i], cw, ch, "gaussian_edges")
    return _noise_result(b, p, clipped, "gaussian_edges")


def gaussian_center_size(
    boxes, center: float, size: float, *, rng: np.random.Generator, canvas=None
) -> Perturbed:
    """Gaussian noise on the centre (scaled by width and height) and log-normal noise on the size.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy in pixels.
    center : float
        Standard deviation of the centre's offset as a fraction of the width
        (x) and height (y); ``>= 0``.
    size : float
        Standard deviation of the natural log of each side's scale factor
        (``w' = w exp(size * z)``), ``>= 0``; sizes stay positive.
    rng : numpy.random.Generator
    canvas : (width, height) or array_like of shape (N, 2), optional
        Clip the boxes to the canvas.

    Returns
    -------
    Perturbed
    """
    _arg(check_number, "center", center, lo=0)
    _arg(check_number, "size", size, lo=0)
    b = as_boxes(boxes)
    _check_sources(b)
    cw, ch = _canvas_arrays(canvas, len(b))

    def draw(i):
        z = rng.standard_normal((len(i), 4))
        w = b[i, 2] - b[i, 0]
        h = b[i, 3] - b[i, 1]
        cx = 0.5 * (b[i, 0] + b[i, 2]) + z[:, 0] * center * w
        cy = 0.5 * (b[i, 1] + b[i, 3]) + z[:, 1] * center * h
        w2 = 0.5 * w * np.exp(z[:, 2] * size)
        h2 = 0.5 * h * np.exp(z[:, 3] * size)
        return np.stack([cx - w2, cy - h2, cx + w2, cy + h2], axis=1)

    p, clipped = _redraw(b, draw, cw, ch, "gaussian_center_size")
    return _noise_result(b, p, clipped, "gaussian_center_size")


def uniform_shift_scale(
    boxes, shift: float, scale: float, *, rng: np.random.Generator, canvas=None
) -> Perturbed:
    """Uniform shift of the centre and uniform scale of each side.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy in pixels.
    shift : float
        Largest centre offset as a fraction of the width (x) and height (y);
        offsets are uniform in ``[-shift, shift]``.
    scale : float
        Each side is multiplied by a factor uniform in ``[1 - scale, 1 + scale]``,
        drawn separately for width and height; ``0 <= scale < 1``.
    rng : numpy.random.Generator
    canvas : (width, height) or array_like of shape (N, 2), optional
        Clip the boxes to the canvas.

    Returns
    -------
    Perturbed
    """
    _arg(check_number, "shift", shift, lo=0)
    _arg(check_number, "scale", scale, lo=0, hi=1, hi_open=True)
    b = as_boxes(boxes)
    _check_sources(b)
    cw, ch = _canvas_arrays(canvas, len(b))

    def draw(i):
        r = rng.uniform(-1.0, 1.0, (len(i), 4))
        w = b[i, 2] - b[i, 0]
        h = b[i, 3] - b[i, 1]
        cx = 0.5 * (b[i, 0] + b[i, 2]) + r[:, 0] * shift * w
        cy = 0.5 * (b[i, 1] + b[i, 3]) + r[:, 1] * shift * h
        w2 = 0.5 * w * (1 + r[:, 2] * scale)
        h2 = 0.5 * h * (1 + r[:, 3] * scale)
        return np.stack([cx - w2, cy - h2, cx + w2, cy + h2], axis=1)

    p, clipped = _redraw(b, draw, cw, ch, "uniform_shift_scale")
    return _noise_result(b, p, clipped, "uniform_shift_scale")


def duplicates(
    boxes, iou, *, rng: np.random.Generator, counts=1, modes=ERROR_MODES, canvas=None
) -> Perturbed:
    """Extra boxes near true ones, each at an IoU with its source drawn from a range.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        True boxes, xyxy in pixels.
    iou : (lo, hi) or float
        IoU range of each duplicate with its source, ``0 < lo <= hi <= 1``.
    rng : numpy.random.Generator
    counts : int or array_like of int, shape (N,)
        Duplicates per true box.
    modes : sequence of str
        Directions of error, as in :func:`to_iou`.
    canvas : (width, height) or array_like of shape (N, 2), optional
        Keep duplicates inside the canvas.

    Returns
    -------
    Perturbed
        ``source`` indexes ``boxes``; duplicates of one box are adjacent.
    """
    b = as_boxes(boxes)
    n = len(b)
    k = np.broadcast_to(np.asarray(counts), (n,))
    if not (np.issubdtype(k.dtype, np.integer) and (k >= 0).all()):
        raise ValueError(f"'counts' must be whole numbers >= 0 (got {np.asarray(counts).tolist()!r})")
    src = np.repeat(np.arange(n), k)
    c = None
    if canvas is not None:
        cw, ch = _canvas_arrays(canvas, n)
        c = np.stack([cw, ch], axis=1)[src]
    r = to_iou(b[src], iou, rng=rng, modes=modes, canvas=c)
    return Perturbed(r.boxes.copy(), src, r.iou.copy(), r.target.copy(), r.mode.copy(), r.adjusted.copy())


# --------------------------------------------------------------------------- distractors


def _random_boxes(cw, ch, size, aspect, rng) -> np.ndarray:
    """Random boxes inside canvases ``cw x ch`` (shape (K,) each).

    ``size`` is either ``(lo, hi)``, the side as a fraction of the shorter
    side (aspect log-uniform in ``aspect``), or a float array of shape (M, 2):
    sizes ``(w, h)`` in pixels, one drawn uniformly per box.
    """
    k = len(cw)
    if isinstance(size, np.ndarray):
        wh = size[rng.integers(len(size), size=k)]  # (K, 2)
        w = np.minimum(wh[:, 0], cw)
        h = np.minimum(wh[:, 1], ch)
    else:
        side = rng.uniform(size[0], size[1], k) * np.minimum(cw, ch)
        a = np.exp(rng.uniform(np.log(aspect[0]), np.log(aspect[1]), k))
        w = np.minimum(side * np.sqrt(a), cw)
        h = np.minimum(side / np.sqrt(a), ch)
    x0 = rng.random(k) * (cw - w)
    y0 = rng.random(k) * (ch - h)
    return np.stack([x0, y0, x0 + w, y0 + h], axis=1)


def _check_fraction_range(value, name: str, *, lo_open: bool = True) -> tuple[float, float]:
    _arg(check_range, name, tuple(value), lo=0, lo_open=lo_open, hi=1)
    return float(value[0]), float(value[1])


#: Background box side as a fraction of the shorter image side when there are no true boxes to size them by.
FALLBACK_BACKGROUND_SIZE = (0.05, 0.3)


def _background_sizes(truth: np.ndarray, size):
    """What :func:`_random_boxes` draws sizes from: ``size`` as given, or the truth's ``(w, h)`` when None."""
    if size is not None:
        return size
    if len(truth) == 0:
        return FALLBACK_BACKGROUND_SIZE
    return np.stack([truth[:, 2] - truth[:, 0], truth[:, 3] - truth[:, 1]], axis=1)  # (N, 2)


def _place_background(truth, truth_img, counts, cw_img, ch_img, max_iou, size, aspect, rng, ignore=None):
    """Background boxes for each image; returns (boxes, image, other_iou, shortfall).

    ``size`` as for :func:`_random_boxes`, or None for the sizes of ``truth``.
    ``ignore``: ``(boxes (K, 4), image (K,))`` of ignore regions; a background
    box also keeps below ``max_iou`` of its own area on each of them, so that
    a COCO evaluation does not ignore it (crowd matching) but counts it false.
    """
    size = _background_sizes(truth, size)
    img = np.repeat(np.arange(len(counts)), counts)
    k = len(img)
    boxes = np.empty((k, 4))
    other = np.full(k, np.inf)
    clear = np.zeros(k, dtype=bool)
    todo = np.arange(k)
    for _ in range(_ROUNDS):
        if todo.size == 0:
            break
        cand = _random_boxes(cw_img[img[todo]], ch_img[img[todo]], size, aspect, rng)
        o = group_max_overlap(cand, img[todo], truth, truth_img)
        ok = o < max_iou
        if ignore is not None and len(ignore[0]):
            ok &= group_max_overlap(cand, img[todo], ignore[0], ignore[1], measure=box_ioa) < max_iou
        boxes[todo] = cand
        other[todo] = o
        clear[todo] = ok
        todo = todo[~ok]
    return boxes[clear], img[clear], other[clear], int(k - clear.sum())


def background_boxes(
    truth,
    n: int,
    *,
    rng: np.random.Generator,
    canvas,
    max_iou: float = 0.1,
    size=None,
    aspect=(0.5, 2.0),
) -> Placed:
    """Random boxes whose IoU with every true box is below a bound (background false positives).

    Parameters
    ----------
    truth : array_like of shape (M, 4)
        True boxes of one image, xyxy in pixels (may be empty).
    n : int
        Number of boxes to make.
    rng : numpy.random.Generator
    canvas : (width, height)
        Image size in pixels; boxes lie inside it.
    max_iou : float
        Bound in (0, 1]: every box has IoU ``< max_iou`` with every true box.
    size : (lo, hi), optional
        Side length ``sqrt(w h)`` as a fraction of the canvas's shorter side,
        ``0 < lo <= hi <= 1``.  Default: sized like the true boxes (each box
        takes the width and height of a true box drawn uniformly), or
        :data:`FALLBACK_BACKGROUND_SIZE` when there are none.
    aspect : (lo, hi)
        Range of ``w / h`` (log-uniform), ``0 < lo <= hi``, for ``size`` ranges.

    Returns
    -------
    Placed
        ``source`` -1, ``iou`` NaN, ``other_iou`` the largest IoU with any true box.

    Raises
    ------
    ValueError
        When fewer than ``n`` boxes could be placed (the truth leaves no room).
    """
    t = as_boxes(truth)
    _arg(check_number, "n", n, lo=0, integer=True)
    _arg(check_number, "max_iou", max_iou, lo=0, lo_open=True, hi=1)
    if size is not None:
        size = _check_fraction_range(size, "size")
    _arg(check_range, "aspect", tuple(aspect), lo=0, lo_open=True)
    cw, ch = _canvas_arrays(canvas, 1)
    boxes, _, other, short = _place_background(
        t, np.zeros(len(t), dtype=np.int64), np.array([n]), cw, ch, max_iou, size, aspect, rng
    )
    if short:
        raise ValueError(
            f"placed only {n - short} of {n} background boxes with IoU < {max_iou} after {_ROUNDS} draws each; "
            f"lower 'size' or raise 'max_iou'"
        )
    return Placed(boxes, np.full(n, -1), np.full(n, np.nan), other)


def _from_sources(truth, truth_img, src, targets, modes, cw, ch, rng):
    """Boxes from ``truth[src]`` at IoU ``targets``, redrawn until no other true box is closer.

    Returns (boxes (K, 4), iou (K,), other_iou (K,), adjusted (K,)).
    """
    k = len(src)
    boxes = np.empty((k, 4))
    iou = np.empty(k)
    other = np.empty(k)
    adjusted = np.zeros(k, dtype=bool)
    todo = np.arange(k)
    for _ in range(_ROUNDS):
        if todo.size == 0:
            break
        s = src[todo]
        d, _ = _directions(modes, todo.size, rng)
        p, a, adj = _solve(truth[s], d, targets[todo], cw[s], ch[s])
        o = group_max_overlap(p, truth_img[s], truth, truth_img, exclude=s)
        boxes[todo], iou[todo], other[todo], adjusted[todo] = p, a, o, adj
        todo = todo[o >= a]
    return boxes, iou, other, adjusted


def near_misses(
    truth, sources, iou, *, rng: np.random.Generator, modes=ERROR_MODES, canvas=None
) -> Placed:
    """Localization errors: boxes whose best IoU with the truth is their IoU with a source, in a range.

    Parameters
    ----------
    truth : array_like of shape (M, 4)
        True boxes of one image, xyxy in pixels.
    sources : array_like of int, shape (N,)
        Index into ``truth`` of the box each near miss is made from (repeat an
        index for several near misses of one box).
    iou : (lo, hi) or float
        IoU range with the source, ``0 < lo <= hi <= 1``, e.g. ``(0.1, 0.45)``
        for boxes that fail a 0.5 match.
    rng : numpy.random.Generator
    modes : sequence of str
        Directions of error, as in :func:`to_iou`.
    canvas : (width, height), optional
        Keep the boxes inside the canvas.

    Returns
    -------
    Placed
        ``iou`` in the range (to :data:`IOU_TOLERANCE`) and ``other_iou < iou``:
        the source is the closest true box.

    Raises
    ------
    ValueError
        When some box keeps coming closer to another true box than to its
        source after repeated draws.
    """
    t = as_boxes(truth)
    src = np.asarray(sources, dtype=np.int64).reshape(-1)
    if src.size and (src.min() < 0 or src.max() >= len(t)):
        raise ValueError(f"'sources' must index 'truth' (0 .. {len(t) - 1})")
    lo, hi = _check_iou_range(iou)
    modes = _check_modes(modes)
    _check_sources(t, "truth")
    cw, ch = _canvas_arrays(canvas, len(t))
    if canvas is not None:
        _check_inside(t, cw, ch)
    targets = _draw_targets(lo, hi, src.size, rng)
    boxes, achieved, other, _ = _from_sources(t, np.zeros(len(t), dtype=np.int64), src, targets, modes, cw, ch, rng)
    if (other >= achieved).any():
        i = int(np.flatnonzero(other >= achieved)[0])
        raise ValueError(
            f"near miss {i} of truth box {int(src[i])} came closer to another true box "
            f"(IoU {other[i]:.4f} >= {achieved[i]:.4f}) in {_ROUNDS} draws; the true boxes overlap too much"
        )
    return Placed(boxes, src, achieved, other)


# --------------------------------------------------------------------------- labels


def relabel(labels, rate: float, classes, *, rng: np.random.Generator) -> Relabelled:
    """Give a fraction of the boxes another class, chosen uniformly among the others.

    Parameters
    ----------
    labels : array_like of int, shape (N,)
        Class labels, each one of ``classes``.
    rate : float
        Fraction in [0, 1] to relabel; exactly ``floor(rate * N + 0.5)`` boxes
        change.
    classes : array_like of int, shape (C,)
        Labels to choose from; needs ``C >= 2`` when anything changes.
    rng : numpy.random.Generator

    Returns
    -------
    Relabelled

    Examples
    --------
    >>> r = relabel([1, 1, 2, 3], 0.5, [1, 2, 3], rng=np.random.default_rng(1))
    >>> int(r.changed.sum()), bool(np.all((r.labels != r.original) == r.changed))
    (2, True)
    """
    _arg(check_number, "rate", rate, lo=0, hi=1)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    cls = np.unique(np.asarray(classes, dtype=np.int64).reshape(-1))
    if not np.isin(lab, cls).all():
        raise ValueError(f"'labels' must all be in 'classes' (got {sorted(set(lab.tolist()) - set(cls.tolist()))})")
    k = _count(rate, lab.size)
    if k and cls.size < 2:
        raise ValueError(f"relabelling needs at least 2 classes (got {cls.tolist()})")
    chosen = np.sort(rng.permutation(lab.size)[:k])
    new = lab.copy()
    if k:
        pos = np.searchsorted(cls, lab[chosen])
        j = rng.integers(cls.size - 1, size=k)
        new[chosen] = cls[j + (j >= pos)]
    changed = np.zeros(lab.size, dtype=bool)
    changed[chosen] = True
    return Relabelled(new, lab, changed)


# --------------------------------------------------------------------------- training noise


def pad_with_noise(
    boxes,
    labels,
    length: int,
    *,
    rng: np.random.Generator,
    canvas,
    noise_label: int,
    jittered: float = 0.5,
    shift: float = 0.2,
    scale: float = 0.4,
    size=(0.05, 0.5),
    aspect=(0.5, 2.0),
) -> NoisePadded:
    """Pad a box list to a fixed length with noise objects for sequence-style training.

    Noise objects are a mix of jittered true boxes (:func:`uniform_shift_scale`
    of a randomly chosen true box) and random boxes, all labelled
    ``noise_label`` and marked ``learn_box = False`` so that their coordinates
    carry no loss.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        True boxes, xyxy in pixels, inside the canvas.
    labels : array_like of int, shape (N,)
        Their class labels.
    length : int
        Length of the padded list, ``>= N``.
    rng : numpy.random.Generator
    canvas : (width, height)
        Image size in pixels; noise boxes lie inside it.
    noise_label : int
        Label of every noise object; must differ from every true label.
    jittered : float
        Fraction in [0, 1] of the noise objects made by jittering true boxes
        (exactly ``floor(jittered * (length - N) + 0.5)``; none when N = 0).
    shift, scale : float
        Jitter strength, as in :func:`uniform_shift_scale`.
    size, aspect : (lo, hi)
        Random boxes' side as a fraction of the shorter canvas side, and their
        ``w / h`` range.

    Returns
    -------
    NoisePadded
        True objects first, in their order; then the noise objects in random order.

    Examples
    --------
    >>> r = pad_with_noise([[4, 4, 20, 20]], [2], 5, rng=np.random.default_rng(0), canvas=(32, 32), noise_label=99)
    >>> r.labels.tolist(), r.learn_box.tolist()
    ([2, 99, 99, 99, 99], [True, False, False, False, False])
    """
    b = as_boxes(boxes)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    n = len(b)
    if lab.size != n:
        raise ValueError(f"'labels' must have one entry per box ({n}) (got {lab.size})")
    _arg(check_number, "length", length, lo=n, integer=True)
    _arg(check_number, "jittered", jittered, lo=0, hi=1)
    if np.any(lab == noise_label):
        raise ValueError(f"'noise_label' {noise_label} is also a true label")
    if size is not None:
        size = _check_fraction_range(size, "size")
    _arg(check_range, "aspect", tuple(aspect), lo=0, lo_open=True)
    m = int(length) - n
    k_jit = _count(jittered, m) if n else 0
    cw, ch = _canvas_arrays(canvas, max(n, 1))
    src = rng.integers(n, size=k_jit) if n else np.zeros(0, dtype=np.int64)
    jit = uniform_shift_scale(b[src], shift, scale, rng=rng, canvas=(cw[0], ch[0]))
    rand = _random_boxes(np.full(m - k_jit, cw[0]), np.full(m - k_jit, ch[0]), size, aspect, rng)
    noise_boxes = np.concatenate([jit.boxes, rand])
    noise_src = np.concatenate([src, np.full(m - k_jit, -1)])
    noise_iou = np.concatenate([jit.iou, np.full(m - k_jit, np.nan)])
    order = rng.permutation(m)
    return NoisePadded(
        boxes=np.concatenate([b, noise_boxes[order]]),
        labels=np.concatenate([lab, np.full(m, noise_label, dtype=np.int64)]),
        is_noise=np.arange(n + m) >= n,
        learn_box=np.arange(n + m) < n,
        source=np.concatenate([np.arange(n), noise_src[order]]).astype(np.int64),
        iou=np.concatenate([np.ones(n), noise_iou[order]]),
    )


# --------------------------------------------------------------------------- simulated detector


def detection_scores(positive, overlap: float, *, rng: np.random.Generator) -> np.ndarray:
    """Confidence scores where true positives outrank false positives by a set overlap.

    True positives are uniform on ``(1 - L, 1]`` and the rest on ``(0, L]``,
    with ``L = 1 / (2 - overlap)``: the two supports share a stretch that is the
    fraction ``overlap`` of each.  ``overlap = 0`` puts every true positive
    above every other score; ``overlap = 1`` makes scores carry no information.

    Parameters
    ----------
    positive : array_like of bool, shape (P,)
    overlap : float
        In [0, 1].
    rng : numpy.random.Generator

    Returns
    -------
    ndarray of float64, shape (P,), values in (0, 1].

    Examples
    --------
    >>> s = detection_scores([True, False] * 50, 0.0, rng=np.random.default_rng(0))
    >>> bool(s[0::2].min() > s[1::2].max())
    True
    """
    _arg(check_number, "overlap", overlap, lo=0, hi=1)
    pos = np.asarray(positive, dtype=bool).reshape(-1)
    width = 1.0 / (2.0 - overlap)
    u = rng.random(pos.size)  # [0, 1)
    return np.where(pos, 1.0 - width * u, width * (1.0 - u))


@dataclass(frozen=True, slots=True)
class DetectorSpec:
    """How a simulated detector errs.

    Rates are fractions of all ground-truth boxes; the counts are
    ``floor(rate * N + 0.5)`` over the whole input, so they are exact.  Each
    true box gets one outcome (detected, missed, mislocated, wrong class), so
    ``miss + localization + relabel <= 1``; duplicates are extra boxes of
    detected ones, so ``duplicates <= 1 - miss - localization - relabel``.

    Attributes
    ----------
    miss : float
        Fraction of true boxes with no prediction.
    iou : (lo, hi)
        IoU range of a true positive (and of a wrong-class box) with its source.
    modes : tuple of str
        Directions of localization error, from :data:`ERROR_MODES`.
    localization : float
        Fraction of true boxes whose only prediction is a near miss.
    near_iou : (lo, hi)
        IoU range of a near miss with its source.
    duplicates : float
        Fraction of true boxes that get one extra, lower-ranked box.
    duplicate_iou : (lo, hi)
        IoU range of a duplicate with its source.
    background : float
        Mean number of background boxes per image (Poisson), at most
        :data:`MAX_BACKGROUND`.
    background_iou : float
        Background boxes have IoU below this with every true box, in (0, 1].
    background_size : (lo, hi) or None
        Background box side as a fraction of the image's shorter side; None
        (the default) sizes them like the true boxes: each takes the width and
        height of a true box drawn uniformly from the whole input, so a sweep
        of tiny objects gets tiny false positives too.
    relabel : float
        Fraction of true boxes whose only prediction has another class.
    score_overlap : float
        Overlap of true-positive and other scores, see :func:`detection_scores`.
    keep_inside : bool
        Keep every box inside its image.
    """

    miss: float = 0.0
    iou: tuple[float, float] = (0.7, 0.95)
    modes: tuple[str, ...] = ERROR_MODES
    localization: float = 0.0
    near_iou: tuple[float, float] = (0.1, 0.45)
    duplicates: float = 0.0
    duplicate_iou: tuple[float, float] = (0.5, 0.9)
    background: float = 0.0
    background_iou: float = 0.1
    background_size: tuple[float, float] | None = None
    relabel: float = 0.0
    score_overlap: float = 0.0
    keep_inside: bool = True

    def __post_init__(self):
        from synthgen.errors import as_tuples, check_choice

        as_tuples(self)
        for key in ("miss", "localization", "duplicates", "relabel", "score_overlap"):
            check_number(f"jitter.{key}", getattr(self, key), lo=0, hi=1)
        for key in ("iou", "near_iou", "duplicate_iou", "background_size"):
            if key != "background_size" or self.background_size is not None:
                check_range(f"jitter.{key}", getattr(self, key), lo=0, lo_open=True, hi=1)
        check_number("jitter.background", self.background, lo=0)
        if self.background > MAX_BACKGROUND:
            raise ConfigError("jitter.background", f"must be at most {MAX_BACKGROUND} boxes per image", self.background)
        check_number("jitter.background_iou", self.background_iou, lo=0, lo_open=True, hi=1)
        if not isinstance(self.modes, tuple) or not self.modes:
            raise ConfigError("jitter.modes", "must be a non-empty list of " + ", ".join(ERROR_MODES), self.modes)
        for m in self.modes:
            check_choice("jitter.modes", m, ERROR_MODES)
        if not isinstance(self.keep_inside, bool):
            raise ConfigError("jitter.keep_inside", "must be true or false", self.keep_inside)
        taken = self.miss + self.localization + self.relabel
        if taken > 1 + 1e-12:
            raise ConfigError(
                "jitter.miss", "plus 'jitter.localization' plus 'jitter.relabel' must be at most 1", round(taken, 12)
            )
        if self.duplicates > 1 - taken + 1e-12:
            raise ConfigError(
                "jitter.duplicates",
                f"must be at most 1 - miss - localization - relabel = {max(0.0, 1 - taken):.6g}",
                self.duplicates,
            )


def simulate_detections(
    truth,
    labels,
    canvas,
    *,
    rng: np.random.Generator,
    spec: DetectorSpec = DetectorSpec(),
    image=None,
    classes=None,
    ignore=None,
) -> Detections:
    """Predictions of an imaginary detector whose every mistake is known.

    Parameters
    ----------
    truth : array_like of shape (N, 4)
        Ground-truth boxes, xyxy in pixels, possibly from many images.
    labels : array_like of int, shape (N,)
        Their class labels.
    canvas : (width, height) or array_like of shape (M, 2)
        Size of each image in pixels, indexed by ``image``; one pair applies
        to every image.
    rng : numpy.random.Generator
    spec : DetectorSpec
        Error rates and ranges.
    image : array_like of int, shape (N,), optional
        Image index of each true box, in ``0 .. M - 1``; all 0 by default.
    classes : array_like of int, optional
        Labels for wrong-class and background boxes; default: the labels seen.
    ignore : (array_like of shape (K, 4), array_like of int, shape (K,)), optional
        Ignore regions (COCO ``iscrowd`` 1) and their image indices: no
        prediction is made from them, and background boxes keep below
        ``background_iou`` of their own area on them, so that an evaluator
        counts them as false positives rather than ignoring them.

    Returns
    -------
    Detections

    Notes
    -----
    Each stage (outcomes, placement, near misses, duplicates, background,
    labels, scores) draws from its own child of ``rng``, so changing one rate
    leaves the other stages' draws where they were.  Sourced boxes are drawn
    again (same target IoU, new direction) until their source is the closest
    true box; background boxes until they clear the bound.
    """
    t = as_boxes(truth)
    n = len(t)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    if lab.size != n:
        raise ValueError(f"'labels' must have one entry per box ({n}) (got {lab.size})")
    img = np.zeros(n, dtype=np.int64) if image is None else np.asarray(image, dtype=np.int64).reshape(-1)
    c = np.asarray(canvas, dtype=np.float64)
    if c.shape == (2,):  # one size for every image
        c = np.broadcast_to(c, (int(img.max()) + 1 if img.size else 1, 2))
    n_img = len(c)
    if img.size != n or (n and (img.min() < 0 or img.max() >= n_img)):
        raise ValueError(f"'image' must give each box an index in 0 .. {n_img - 1}")
    cw_img, ch_img = _canvas_arrays(c, n_img)
    _check_sources(t, "truth")
    if spec.keep_inside:
        _check_inside(t, cw_img[img], ch_img[img])
        cw, ch = cw_img[img], ch_img[img]
    else:
        cw, ch = np.full(n, np.inf), np.full(n, np.inf)
    cls = np.unique(lab if classes is None else np.asarray(classes, dtype=np.int64).reshape(-1))
    if not np.isin(lab, cls).all():
        raise ValueError(f"'labels' must all be in 'classes' (got {sorted(set(lab.tolist()) - set(cls.tolist()))})")
    r_out, r_place, r_near, r_dup, r_bg, r_label, r_score = rng.spawn(7)

    # One outcome per true box, with exact counts.
    perm = r_out.permutation(n)
    k_miss = _count(spec.miss, n)
    k_loc = min(_count(spec.localization, n), n - k_miss)
    k_rel = min(_count(spec.relabel, n), n - k_miss - k_loc)
    outcome = np.full(n, "detected", dtype="<U11")
    outcome[perm[:k_miss]] = "missed"
    outcome[perm[k_miss : k_miss + k_loc]] = "mislocated"
    outcome[perm[k_miss + k_loc : k_miss + k_loc + k_rel]] = "wrong_class"
    if k_rel and cls.size < 2:
        raise ValueError(f"relabelling needs at least 2 classes (got {cls.tolist()})")
    detected = np.flatnonzero(outcome == "detected")
    k_dup = min(_count(spec.duplicates, n), detected.size)

    parts = []  # (boxes, labels, image, kind, source, iou, other_iou)

    def sourced(src, iou_range, kind, r):
        targets = _draw_targets(*iou_range, src.size, r)
        boxes, achieved, other, _ = _from_sources(t, img, src, targets, spec.modes, cw, ch, r)
        parts.append((boxes, lab[src], img[src], kind, src, achieved, other))

    main = np.flatnonzero((outcome == "detected") | (outcome == "wrong_class"))
    sourced(main, spec.iou, np.where(outcome[main] == "detected", "true_positive", "wrong_class"), r_place)
    sourced(np.flatnonzero(outcome == "mislocated"), spec.near_iou, "localization", r_near)
    sourced(np.sort(r_dup.permutation(detected)[:k_dup]), spec.duplicate_iou, "duplicate", r_dup)

    counts = r_bg.poisson(spec.background, n_img) if spec.background > 0 else np.zeros(n_img, dtype=np.int64)
    if ignore is not None:
        ignore = (as_boxes(ignore[0]), np.asarray(ignore[1], dtype=np.int64).reshape(-1))
    bg, bg_img, bg_other, short = _place_background(
        t, img, counts, cw_img, ch_img, spec.background_iou, spec.background_size, (0.5, 2.0), r_bg, ignore
    )
    if bg_img.size and cls.size == 0:
        raise ValueError("background boxes need at least one class ('classes' is empty)")
    k_bg = bg_img.size
    parts.append((bg, np.zeros(k_bg, dtype=np.int64), bg_img, "background", np.full(k_bg, -1), np.full(k_bg, np.nan), bg_other))

    boxes = np.concatenate([p[0] for p in parts]).reshape(-1, 4)
    out_lab = np.concatenate([p[1] for p in parts]).astype(np.int64)
    out_img = np.concatenate([p[2] for p in parts]).astype(np.int64)
    kind = np.concatenate([np.broadcast_to(np.asarray(p[3], dtype="<U13"), (len(p[0]),)) for p in parts])
    source = np.concatenate([p[4] for p in parts]).astype(np.int64)
    iou = np.concatenate([p[5] for p in parts]).astype(np.float64)
    other = np.concatenate([p[6] for p in parts]).astype(np.float64)

    wrong = kind == "wrong_class"
    if wrong.any():
        pos = np.searchsorted(cls, out_lab[wrong])
        j = r_label.integers(cls.size - 1, size=int(wrong.sum()))
        out_lab[wrong] = cls[j + (j >= pos)]
    is_bg = kind == "background"
    if is_bg.any():
        out_lab[is_bg] = cls[r_label.integers(cls.size, size=int(is_bg.sum()))]
    scores = detection_scores(kind == "true_positive", spec.score_overlap, rng=r_score)

    order = np.lexsort((-scores, out_img))
    return Detections(
        boxes=boxes[order],
        labels=out_lab[order],
        scores=scores[order],
        image=out_img[order],
        kind=kind[order],
        source=source[order],
        iou=iou[order],
        other_iou=other[order],
        outcome=outcome,
        background_shortfall=short,
    )




def noise_padder(seed: int, length: int, *, jittered: float = 0.5, shift: float = 0.2, scale: float = 0.4):
    """A per-image training-noise maker for token sequences (see :func:`synthgen.formats.tokens.write_tokens`).

    Returns ``noise(k, boxes, category_ids, (width, height)) -> NoisePadded``
    that pads image ``k``'s objects to ``max(length, N)`` with
    :func:`pad_with_noise`, drawing from ``SeedSequence(seed, spawn_key=(k, NOISE_STREAM))``
    so every image's noise is fixed by the seed and its index alone.

    Examples
    --------
    >>> pad = noise_padder(0, 4)
    >>> out = pad(0, np.array([[2.0, 2.0, 9.0, 9.0]]), np.array([3]), (32, 32))
    >>> out.boxes.shape, int(out.is_noise.sum())
    ((4, 4), 3)
    """
    if length < 0:
        raise ValueError(f"length must be >= 0 (got {length})")

    def noise(k: int, boxes, category_ids, canvas) -> NoisePadded:
        rng = stream(seed, int(k), NOISE_STREAM)
        b = as_boxes(boxes)
        return pad_with_noise(
            b, np.asarray(category_ids, dtype=np.int64), max(length, len(b)), rng=rng, canvas=canvas,
            noise_label=-1, jittered=jittered, shift=shift, scale=scale,
        )

    return noise
