"""Coordinate conventions and box arithmetic.

This module is the single statement of synthgen's geometry; every other module
refers here.

Conventions
-----------
* Continuous image coordinates: ``x`` grows to the right, ``y`` grows down, and
  the origin is the top-left corner of the top-left pixel.  Pixel ``(row r,
  col c)`` covers ``[c, c + 1) x [r, r + 1)``; its centre is
  ``(c + 0.5, r + 0.5)``.
* Image arrays are ``(H, W, 3)`` uint8.  Configs give sizes as
  ``(width, height)``; arrays are indexed ``(row, col)`` = ``(y, x)``.
* A box is ``(x0, y0, x1, y1)`` with ``x0 < x1`` and ``y0 < y1``, half-open,
  float64.  Box arrays have shape ``(N, 4)``.
* The tight box of a mask is ``(min_col, min_row, max_col + 1, max_row + 1)``,
  so a 4x4 block of pixels has width 4 and area 16, and one pixel has width 1.

Box kinds (each defined by exactly one function)
------------------------------------------------
* **exact box**: the tight box of the continuous shape, clipped to the canvas
  (:func:`clip_boxes` applied to a shape's analytic box, see
  :mod:`synthgen.scene.shapes`).
* **visible box**: the tight box of the part of an object on the canvas that
  no object drawn above it hides (objects left out of the picture, hidden or
  erased, hide nothing), computed from the continuous outlines
  (:func:`synthgen.scene.visible.visible_box`): exact to floating precision where
  its sides lie on polygon edges or vertices, and at most
  :data:`synthgen.scene.visible.TOLERANCE` (1e-3) px outside the true side where
  they lie on a curve.  It equals the exact box when nothing hides the object.
* **pixel box**: the tight box of the pixels whose coverage is above zero
  (:func:`mask_box`).

File formats (COCO ``[x, y, w, h]``, VOC 1-based inclusive, YOLO normalized
centres) are converted only in :mod:`synthgen.formats`.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "as_boxes",
    "box_area",
    "box_iou",
    "pairwise_iou",
    "pairwise_ioa",
    "box_ioa",
    "clip_boxes",
    "mask_box",
    "boxes_valid",
    "box_intersection",
    "box_longer_side",
    "half_extents",
    "overlapping_pairs",
    "box_relations",
    "group_max_overlap",
]


def as_boxes(boxes) -> np.ndarray:
    """Return ``boxes`` as a float64 array of shape ``(N, 4)``.

    Parameters
    ----------
    boxes : array_like of shape (N, 4) or (4,)
        Boxes ``(x0, y0, x1, y1)``.  A single box is promoted to ``(1, 4)``;
        an empty sequence gives shape ``(0, 4)``.

    Examples
    --------
    >>> as_boxes([0, 0, 2, 2]).shape
    (1, 4)
    >>> as_boxes([]).shape
    (0, 4)
    """
    arr = np.asarray(boxes, dtype=np.float64)
    if arr.size == 0:
        return np.zeros((0, 4), dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != 4:
        raise ValueError(f"boxes must have shape (N, 4) (got {arr.shape})")
    return arr


def box_area(boxes) -> np.ndarray:
    """Areas of boxes, in square pixels.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)

    Returns
    -------
    ndarray of shape (N,)
        ``(x1 - x0) * (y1 - y0)``, zero for degenerate boxes.

    Examples
    --------
    >>> box_area([[0, 0, 4, 4]]).tolist()
    [16.0]
    """
    b = as_boxes(boxes)
    return np.clip(b[:, 2] - b[:, 0], 0, None) * np.clip(b[:, 3] - b[:, 1], 0, None)


def box_intersection(a, b) -> np.ndarray:
    """Intersection areas of every box in ``a`` with every box in ``b``.

    Parameters
    ----------
    a : array_like of shape (N, 4)
    b : array_like of shape (M, 4)

    Returns
    -------
    ndarray of shape (N, M)
    """
    a = as_boxes(a)
    b = as_boxes(b)
    return _overlap(a[:, None, :], b[None, :, :])  # (N, M)


def _overlap(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Intersection areas of box arrays ``(..., 4)`` that broadcast against each other."""
    lt = np.maximum(a[..., :2], b[..., :2])  # (..., 2)
    rb = np.minimum(a[..., 2:], b[..., 2:])  # (..., 2)
    wh = np.clip(rb - lt, 0, None)  # (..., 2)
    return wh[..., 0] * wh[..., 1]


def _ratio(inter: np.ndarray, union: np.ndarray) -> np.ndarray:
    """``inter / union``, 0 where the union is empty."""
    out = np.zeros_like(inter)
    np.divide(inter, union, out=out, where=union > 0)
    return out


def pairwise_iou(a, b) -> np.ndarray:
    """Intersection over union of every box in ``a`` with every box in ``b``.

    IoU is ``|A n B| / |A u B|`` on continuous boxes, with no "+1" pixel
    convention.  A pair whose union is empty has IoU 0.

    Parameters
    ----------
    a : array_like of shape (N, 4)
    b : array_like of shape (M, 4)

    Returns
    -------
    ndarray of shape (N, M)

    Examples
    --------
    >>> float(pairwise_iou([[0, 0, 2, 2]], [[1, 1, 3, 3]])[0, 0]) == 1 / 7
    True
    """
    a = as_boxes(a)
    b = as_boxes(b)
    inter = box_intersection(a, b)  # (N, M)
    union = box_area(a)[:, None] + box_area(b)[None, :] - inter  # (N, M)
    return _ratio(inter, union)


def pairwise_ioa(a, b) -> np.ndarray:
    """Intersection over the area of the box of ``a``, for every box in ``a`` with every box in ``b``.

    The overlap COCO evaluation uses for a crowd region (an ignore region):
    ``|A n B| / |A|`` for a detection ``A`` and the region's box ``B``; 0 for
    an empty ``A``.

    Parameters
    ----------
    a : array_like of shape (N, 4)
    b : array_like of shape (M, 4)

    Returns
    -------
    ndarray of shape (N, M)

    Examples
    --------
    >>> pairwise_ioa([[1, 1, 3, 3]], [[0, 0, 10, 10], [2, 0, 10, 10]]).tolist()
    [[1.0, 0.5]]
    """
    a = as_boxes(a)
    inter = box_intersection(a, b)  # (N, M)
    return _ratio(inter, np.broadcast_to(box_area(a)[:, None], inter.shape))


def box_ioa(a, b) -> np.ndarray:
    """Element-wise intersection over the area of the box of ``a`` (see :func:`pairwise_ioa`).

    Parameters
    ----------
    a, b : array_like of shape (N, 4)

    Returns
    -------
    ndarray of shape (N,)
    """
    a = as_boxes(a)
    return _ratio(_overlap(a, as_boxes(b)), box_area(a))


def box_iou(a, b) -> np.ndarray:
    """Element-wise IoU of two equally long box arrays.

    Parameters
    ----------
    a, b : array_like of shape (N, 4)

    Returns
    -------
    ndarray of shape (N,)
    """
    a = as_boxes(a)
    b = as_boxes(b)
    if a.shape != b.shape:
        raise ValueError(f"box arrays must have equal shapes (got {a.shape} and {b.shape})")
    inter = _overlap(a, b)  # (N,)
    return _ratio(inter, box_area(a) + box_area(b) - inter)


def clip_boxes(boxes, width: float, height: float) -> np.ndarray:
    """Clip boxes to the canvas ``[0, width] x [0, height]``.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
    width, height : float
        Canvas size in pixels.

    Returns
    -------
    ndarray of shape (N, 4)
        A box entirely outside the canvas becomes degenerate (zero width or
        height); check with :func:`boxes_valid`.
    """
    b = as_boxes(boxes).copy()
    b[:, 0::2] = np.clip(b[:, 0::2], 0.0, float(width))
    b[:, 1::2] = np.clip(b[:, 1::2], 0.0, float(height))
    return b


def boxes_valid(boxes) -> np.ndarray:
    """Whether each box is finite with ``x0 < x1`` and ``y0 < y1``.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)

    Returns
    -------
    ndarray of bool, shape (N,)
    """
    b = as_boxes(boxes)
    return np.isfinite(b).all(axis=1) & (b[:, 2] > b[:, 0]) & (b[:, 3] > b[:, 1])


def mask_box(mask, origin: tuple[float, float] = (0.0, 0.0), scale: float = 1.0) -> np.ndarray | None:
    """Tight half-open box of the true (non-zero) cells of a 2-D mask.

    Parameters
    ----------
    mask : ndarray of shape (M, N)
        Any dtype; cells that are non-zero count as inside.
    origin : (x, y)
        Image coordinates of the top-left corner of cell ``(0, 0)``, in pixels.
    scale : float
        Size of one cell in pixels (``1 / s`` for an ``s``-times supersampled
        mask).

    Returns
    -------
    ndarray of shape (4,) or None
        ``(x + min_col * scale, y + min_row * scale, x + (max_col + 1) * scale,
        y + (max_row + 1) * scale)``, or None when no cell is set.

    Examples
    --------
    >>> m = np.zeros((8, 8), bool); m[2:6, 3:7] = True
    >>> mask_box(m).tolist()
    [3.0, 2.0, 7.0, 6.0]
    """
    m = np.asarray(mask)
    rows = np.flatnonzero(m.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(m.any(axis=0))
    x0, y0 = origin
    return np.array(
        [
            x0 + cols[0] * scale,
            y0 + rows[0] * scale,
            x0 + (cols[-1] + 1) * scale,
            y0 + (rows[-1] + 1) * scale,
        ],
        dtype=np.float64,
    )


def box_longer_side(boxes) -> np.ndarray:
    """The longer side ``max(x1 - x0, y1 - y0)`` of each box, px, shape (N,).

    Examples
    --------
    >>> box_longer_side([[0, 0, 4, 2], [1, 1, 2, 6]]).tolist()
    [4.0, 5.0]
    """
    b = as_boxes(boxes)
    return np.maximum(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1])


def half_extents(boxes) -> np.ndarray:
    """Half width and half height of each box, shape (N, 2).

    Examples
    --------
    >>> half_extents([[0, 0, 4, 2]]).tolist()
    [[2.0, 1.0]]
    """
    b = as_boxes(boxes)
    return np.stack([(b[:, 2] - b[:, 0]) / 2.0, (b[:, 3] - b[:, 1]) / 2.0], axis=1)


def overlapping_pairs(boxes: np.ndarray, *, step: int = 128):
    """Index pairs ``(i, j)``, ``i < j``, of boxes (N, 4) whose intersection has positive area, a block at a time.

    Yields ``(i, j)`` int arrays.  Boxes are sorted by ``x0``; a block of
    ``step`` of them is tested only against the later boxes that start before
    the block's largest ``x1``, so the work follows the number of near pairs,
    not N^2, and memory one block's pairs.

    Examples
    --------
    >>> b = np.array([[0, 0, 2, 2], [1, 1, 3, 3], [2, 0, 4, 2.0]])
    >>> [(i.tolist(), j.tolist()) for i, j in overlapping_pairs(b)]
    [([0, 1], [1, 2])]
    """
    n = len(boxes)
    if n < 2:
        return
    order = np.argsort(boxes[:, 0], kind="stable")
    b = boxes[order]
    x0, y0, x1, y1 = b[:, 0], b[:, 1], b[:, 2], b[:, 3]
    for s0 in range(0, n, step):
        s1 = min(n, s0 + step)
        stop = int(np.searchsorted(x0, x1[s0:s1].max(), side="left"))
        if stop <= s0 + 1:
            continue
        cols = slice(s0, stop)
        ov = (
            (x0[cols][None, :] < x1[s0:s1, None])
            & (y0[s0:s1, None] < y1[cols][None, :])
            & (y0[cols][None, :] < y1[s0:s1, None])
        )  # (rows, cols); x0[row] <= x0[col] holds by the sort
        r, c = np.nonzero(ov)
        r, c = r + s0, c + s0
        keep = c > r
        a, z = order[r[keep]], order[c[keep]]
        yield np.minimum(a, z), np.maximum(a, z)


def box_relations(boxes, groups=None) -> tuple[np.ndarray, np.ndarray]:
    """Per box: its largest IoU with another box of its group, and how many boxes of the group it overlaps.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
    groups : array_like of int, shape (N,), optional
        Group of each box (e.g. its image id); None: one group.

    Returns
    -------
    best : ndarray of float64, shape (N,)
        0 for a box that overlaps no other.
    count : ndarray of int64, shape (N,)
        Boxes of the group whose IoU with it is above 0.

    Examples
    --------
    >>> b = np.array([[0, 0, 2, 2], [1, 1, 3, 3], [5, 5, 6, 6], [0, 0, 2, 2.0]])
    >>> best, count = box_relations(b, [0, 0, 0, 1])
    >>> best.round(4).tolist(), count.tolist()
    ([0.1429, 0.1429, 0.0, 0.0], [1, 1, 0, 0])
    """
    b = as_boxes(boxes)
    n = len(b)
    best = np.zeros(n)
    count = np.zeros(n, dtype=np.int64)
    if groups is None:
        members = [np.arange(n)]
    else:
        g = np.asarray(groups)
        order = np.argsort(g, kind="stable")
        starts = np.flatnonzero(np.r_[True, g[order][1:] != g[order][:-1]]) if n else np.zeros(0, int)
        members = np.split(order, starts[1:])
    for idx in members:
        if len(idx) < 2:
            continue
        sub = b[idx]
        # Only boxes that overlap have a positive IoU: compute it for those pairs alone.
        for ii, jj in overlapping_pairs(sub):
            iou = box_iou(sub[ii], sub[jj])  # (P,)
            gi, gj = idx[ii], idx[jj]
            np.maximum.at(best, gi, iou)
            np.maximum.at(best, gj, iou)
            hit = iou > 0
            count += np.bincount(gi[hit], minlength=n) + np.bincount(gj[hit], minlength=n)
    return best, count


def group_max_overlap(a, a_group, b, b_group, exclude=None, measure=None) -> np.ndarray:
    """Largest overlap of each box of ``a`` with the boxes of ``b`` in its group, skipping ``exclude``.

    Parameters
    ----------
    a : ndarray of shape (P, 4)
    a_group : ndarray of int, shape (P,)
    b : ndarray of shape (N, 4)
    b_group : ndarray of int, shape (N,)
    exclude : ndarray of int, shape (P,), optional
        Index into ``b`` to leave out for each box of ``a`` (-1: none).
    measure : callable, optional
        Element-wise overlap of box pairs; default :func:`box_iou`
        (:func:`box_ioa` gives the share of each ``a`` box covered).

    Returns
    -------
    ndarray of shape (P,), 0 where no other box of ``b`` shares the group.

    Examples
    --------
    >>> a = np.array([[0, 0, 2, 2.0]]); b = np.array([[1, 0, 3, 2], [0, 0, 2, 2.0]])
    >>> group_max_overlap(a, np.array([0]), b, np.array([0, 1])).tolist()
    [0.3333333333333333]
    """
    measure = box_iou if measure is None else measure
    out = np.zeros(len(a))
    if len(a) == 0 or len(b) == 0:
        return out
    order = np.argsort(b_group, kind="stable")
    sorted_group = b_group[order]
    start = np.searchsorted(sorted_group, a_group, side="left")
    cnt = np.searchsorted(sorted_group, a_group, side="right") - start  # (P,)
    pi = np.repeat(np.arange(len(a)), cnt)  # one row per (box of a, box of b in its group) pair
    offset = np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt)
    gi = order[np.repeat(start, cnt) + offset]
    v = measure(a[pi], b[gi])
    if exclude is not None:
        v[gi == exclude[pi]] = 0.0
    np.maximum.at(out, pi, v)
    return out
