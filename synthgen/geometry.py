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
  :mod:`synthgen.shapes`).
* **visible box**: the tight box of the part of an object on the canvas that
  no object drawn above it hides (objects left out of the picture, hidden or
  erased, hide nothing), computed from the continuous outlines
  (:func:`synthgen.visible.visible_box`): exact to floating precision where
  its sides lie on polygon edges or vertices, and at most
  :data:`synthgen.visible.TOLERANCE` (1e-3) px outside the true side where
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
