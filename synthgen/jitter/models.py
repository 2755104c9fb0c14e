"""Perturbation models: boxes wrong by a known amount.

Pure functions over float64 ``(N, 4)`` xyxy box arrays (see :mod:`synthgen.geometry`); every random
function takes a keyword-only ``rng: numpy.random.Generator``; no global random state is used.

* Noise models: :func:`gaussian_edges`, :func:`gaussian_center_size`, :func:`uniform_shift_scale`
  (noise scaled by each box's width and height), and :func:`to_iou`, which places a box at an
  exactly known IoU with its source along a direction of error (the solver is :mod:`synthgen.jitter.iou`).
* Duplicates: :func:`duplicates`.
* Distractors: :func:`background_boxes` (IoU with every true box below a bound) and
  :func:`near_misses` (best IoU with the truth inside a range).
* Class confusion: :func:`relabel`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthgen.errors import check_number, check_range
from synthgen.geometry import as_boxes, box_ioa, box_iou, boxes_valid, group_max_overlap
from synthgen.jitter.iou import (
    BoxArrays,
    Perturbed,
    canvas_arrays,
    check_arg,
    check_inside,
    check_iou_range,
    check_sources,
    count_of,
    freeze_arrays,
    sizes4,
    solve_iou,
    stopped_path,
)

__all__ = [
    "ERROR_MODES",
    "FALLBACK_BACKGROUND_SIZE",
    "Placed",
    "Relabelled",
    "to_iou",
    "gaussian_edges",
    "gaussian_center_size",
    "uniform_shift_scale",
    "duplicates",
    "background_boxes",
    "near_misses",
    "relabel",
]


#: Directions of error for :func:`to_iou`:
#: ``shift`` moves the box without changing its size; ``grow`` scales it up
#: about a random anchor point inside it; ``shrink`` scales it down about such a
#: point; ``aspect`` widens one axis and narrows the other; ``free`` moves the
#: four edges by a random direction (a mix of all of these).
ERROR_MODES = ("shift", "grow", "shrink", "aspect", "free")


_ROUNDS = 64  # redraws for rejection sampling before giving up


@dataclass(frozen=True, slots=True)
class Placed(BoxArrays):
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
        freeze_arrays(self)


def _check_modes(modes) -> tuple[str, ...]:
    if isinstance(modes, str):
        modes = (modes,)
    modes = tuple(modes)
    bad = [m for m in modes if m not in ERROR_MODES]
    if not modes or bad:
        raise ValueError(f"'modes' must be a non-empty subset of {', '.join(ERROR_MODES)} (got {list(modes)})")
    return modes


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


def draw_targets(lo: float, hi: float, n: int, rng: np.random.Generator) -> np.ndarray:
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
    >>> from synthgen.jitter.iou import IOU_TOLERANCE
    >>> rng = np.random.default_rng(3)
    >>> r = to_iou([[10, 10, 30, 20], [0, 0, 1, 1]], (0.5, 0.7), rng=rng, canvas=(64, 48))
    >>> bool(np.all(np.abs(r.iou - r.target) <= IOU_TOLERANCE)), bool(np.all((r.target >= 0.5) & (r.target <= 0.7)))
    (True, True)
    """
    b = as_boxes(boxes)
    n = len(b)
    lo, hi = check_iou_range(iou)
    modes = _check_modes(modes)
    check_sources(b)
    cw, ch = canvas_arrays(canvas, n)
    if canvas is not None:
        check_inside(b, cw, ch)
    t = draw_targets(lo, hi, n, rng)
    d, names = _directions(modes, n, rng)
    p, achieved, adjusted = solve_iou(b, d, t, cw, ch)
    return Perturbed(p, np.arange(n), achieved, t, names, adjusted)


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
        p = stopped_path(raw, np.zeros_like(raw), np.zeros(len(raw)), cw[todo], ch[todo])
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
    check_arg(check_number, "sigma", sigma, lo=0)
    b = as_boxes(boxes)
    check_sources(b)
    wh = sizes4(b)
    cw, ch = canvas_arrays(canvas, len(b))
    p, clipped = _redraw(b, lambda i: b[i] + rng.standard_normal((len(i), 4)) * sigma * wh[i], cw, ch, "gaussian_edges")
    return _noise_result(b, p, clipped, "gaussian_edges")


def _moved_and_scaled(b: np.ndarray, offset: np.ndarray, sx: np.ndarray, sy: np.ndarray) -> np.ndarray:
    """Boxes ``b`` (n, 4) with the centre moved by ``offset`` (n, 2) widths and heights, the sides scaled by ``sx``, ``sy``."""
    w = b[:, 2] - b[:, 0]
    h = b[:, 3] - b[:, 1]
    cx = 0.5 * (b[:, 0] + b[:, 2]) + offset[:, 0] * w
    cy = 0.5 * (b[:, 1] + b[:, 3]) + offset[:, 1] * h
    w2 = 0.5 * w * sx
    h2 = 0.5 * h * sy
    return np.stack([cx - w2, cy - h2, cx + w2, cy + h2], axis=1)


def gaussian_center_size(boxes, center: float, size: float, *, rng: np.random.Generator, canvas=None) -> Perturbed:
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
        As for :func:`gaussian_edges`: empty boxes are drawn again, ``adjusted`` marks clipped ones.
    """
    check_arg(check_number, "center", center, lo=0)
    check_arg(check_number, "size", size, lo=0)
    b = as_boxes(boxes)
    check_sources(b)
    cw, ch = canvas_arrays(canvas, len(b))

    def draw(i):
        z = rng.standard_normal((len(i), 4))
        return _moved_and_scaled(b[i], z[:, :2] * center, np.exp(z[:, 2] * size), np.exp(z[:, 3] * size))

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
    check_arg(check_number, "shift", shift, lo=0)
    check_arg(check_number, "scale", scale, lo=0, hi=1, hi_open=True)
    b = as_boxes(boxes)
    check_sources(b)
    cw, ch = canvas_arrays(canvas, len(b))

    def draw(i):
        r = rng.uniform(-1.0, 1.0, (len(i), 4))
        return _moved_and_scaled(b[i], r[:, :2] * shift, 1 + r[:, 2] * scale, 1 + r[:, 3] * scale)

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
        cw, ch = canvas_arrays(canvas, n)
        c = np.stack([cw, ch], axis=1)[src]
    r = to_iou(b[src], iou, rng=rng, modes=modes, canvas=c)
    return Perturbed(r.boxes.copy(), src, r.iou.copy(), r.target.copy(), r.mode.copy(), r.adjusted.copy())


def random_boxes(cw, ch, size, aspect, rng) -> np.ndarray:
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


def check_fraction_range(value, name: str, *, lo_open: bool = True) -> tuple[float, float]:
    check_arg(check_range, name, tuple(value), lo=0, lo_open=lo_open, hi=1)
    return float(value[0]), float(value[1])


#: Background box side as a fraction of the shorter image side when there are no true boxes to size them by.
FALLBACK_BACKGROUND_SIZE = (0.05, 0.3)


def _background_sizes(truth: np.ndarray, size):
    """What :func:`random_boxes` draws sizes from: ``size`` as given, or the truth's ``(w, h)`` when None."""
    if size is not None:
        return size
    if len(truth) == 0:
        return FALLBACK_BACKGROUND_SIZE
    return np.stack([truth[:, 2] - truth[:, 0], truth[:, 3] - truth[:, 1]], axis=1)  # (N, 2)


def place_background(truth, truth_img, counts, cw_img, ch_img, max_iou, size, aspect, rng, ignore=None):
    """Background boxes for each image; returns (boxes, image, other_iou, shortfall).

    ``size`` as for :func:`random_boxes`, or None for the sizes of ``truth``.
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
        cand = random_boxes(cw_img[img[todo]], ch_img[img[todo]], size, aspect, rng)
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
    check_arg(check_number, "n", n, lo=0, integer=True)
    check_arg(check_number, "max_iou", max_iou, lo=0, lo_open=True, hi=1)
    if size is not None:
        size = check_fraction_range(size, "size")
    check_arg(check_range, "aspect", tuple(aspect), lo=0, lo_open=True)
    cw, ch = canvas_arrays(canvas, 1)
    boxes, _, other, short = place_background(
        t, np.zeros(len(t), dtype=np.int64), np.array([n]), cw, ch, max_iou, size, aspect, rng
    )
    if short:
        raise ValueError(
            f"placed only {n - short} of {n} background boxes with IoU < {max_iou} after {_ROUNDS} draws each; "
            f"lower 'size' or raise 'max_iou'"
        )
    return Placed(boxes, np.full(n, -1), np.full(n, np.nan), other)


def from_sources(truth, truth_img, src, targets, modes, cw, ch, rng):
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
        p, a, adj = solve_iou(truth[s], d, targets[todo], cw[s], ch[s])
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
    lo, hi = check_iou_range(iou)
    modes = _check_modes(modes)
    check_sources(t, "truth")
    cw, ch = canvas_arrays(canvas, len(t))
    if canvas is not None:
        check_inside(t, cw, ch)
    targets = draw_targets(lo, hi, src.size, rng)
    boxes, achieved, other, _ = from_sources(t, np.zeros(len(t), dtype=np.int64), src, targets, modes, cw, ch, rng)
    if (other >= achieved).any():
        i = int(np.flatnonzero(other >= achieved)[0])
        raise ValueError(
            f"near miss {i} of truth box {int(src[i])} came closer to another true box "
            f"(IoU {other[i]:.4f} >= {achieved[i]:.4f}) in {_ROUNDS} draws; the true boxes overlap too much"
        )
    return Placed(boxes, src, achieved, other)


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
    check_arg(check_number, "rate", rate, lo=0, hi=1)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    cls = np.unique(np.asarray(classes, dtype=np.int64).reshape(-1))
    if not np.isin(lab, cls).all():
        raise ValueError(f"'labels' must all be in 'classes' (got {sorted(set(lab.tolist()) - set(cls.tolist()))})")
    k = count_of(rate, lab.size)
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
