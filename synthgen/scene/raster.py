"""Rasterizing onto the canvas: the fills an object's colours make, and the one blend of a coverage patch.

Every drawing of a shape or a clutter mark onto the canvas goes through
:func:`blend`: the canvas value moves towards the fill colour by the pixel's
coverage, in float32, rounded half to even.  :func:`paint` gives the fill colours
of a patch (:data:`synthgen.config.FILLS`).
"""

from __future__ import annotations

import math

import numpy as np

from synthgen.config import FILLS

__all__ = ["SMALL_PATCH", "blend", "paint"]

#: Patches up to this many pixels are blended in one broadcast over RGB (fewer calls); bigger ones per
#: channel plane (PERF-NOTES.md: a trailing axis of 3 is slow on big arrays).  Both give the same bytes.
SMALL_PATCH = 256


def blend(under: np.ndarray, fill: np.ndarray, coverage: np.ndarray) -> np.ndarray:
    """``under + (fill - under) * coverage``, rounded half to even, as uint8.

    Parameters
    ----------
    under : ndarray of shape (..., 3), uint8
        The canvas pixels the object is drawn over.
    fill : ndarray of shape (3,) or (..., 3), float32
        The object's colour (one, or one per pixel).
    coverage : ndarray of shape (...), float
        Share of each pixel the object covers, in [0, 1].

    Returns
    -------
    ndarray of shape (..., 3), uint8

    Examples
    --------
    >>> blend(np.zeros((1, 2, 3), np.uint8), np.full(3, 200, np.float32), np.array([[0.5, 1.0]])).tolist()
    [[[100, 100, 100], [200, 200, 200]]]
    """
    patch = under.astype(np.float32)
    if coverage.size <= SMALL_PATCH:
        patch += (fill - patch) * coverage[..., None]
    else:
        for ch in range(3):
            plane = patch[..., ch]
            plane += (fill[..., ch] - plane) * coverage
    np.rint(patch, out=patch)
    return patch.astype(np.uint8)


def paint(style: str, colors, h: int, w: int, *, row0: int, col0: int, angle: float, period: float) -> np.ndarray:
    """Fill colours for a patch.

    Parameters
    ----------
    style : str
        One of :data:`FILLS`: ``flat`` (``colors[0]`` everywhere), ``gradient``
        (linear ramp from ``colors[0]`` to ``colors[1]`` across the patch's
        pixel centres along direction ``angle``), ``stripes`` (bands ``period``
        px wide along direction ``angle``, anchored at the canvas origin, band
        ``k`` coloured ``colors[k % 2]``).
    colors : array_like of shape (2, 3)
        RGB colours, floats in 0..255.
    h, w : int
        Patch size (rows, columns).
    row0, col0 : int
        Canvas row and column of the patch's top-left pixel.
    angle : float
        Direction of the ramp or of the stripes' normal, degrees clockwise on
        screen from +x.
    period : float
        Stripe width in px, > 0 (used by ``stripes``).

    Returns
    -------
    ndarray of shape (h, w, 3), float32

    Examples
    --------
    >>> paint("stripes", [[0, 0, 0], [255, 255, 255]], 1, 4, row0=0, col0=0, angle=0.0, period=2.0)[0, :, 0].tolist()
    [0.0, 0.0, 255.0, 255.0]
    """
    if style not in FILLS:
        raise ValueError(f"style must be one of {', '.join(FILLS)} (got {style!r})")
    col = np.asarray(colors, dtype=np.float64)
    if col.shape != (2, 3):
        raise ValueError(f"colors must have shape (2, 3) (got {col.shape})")
    h, w = int(h), int(w)
    out = np.empty((h, w, 3), dtype=np.float32)
    if style == "flat":
        for k in range(3):
            out[:, :, k] = col[0, k]
        return out
    th = math.radians(angle)
    px = math.cos(th) * (np.arange(col0, col0 + w, dtype=np.float64) + 0.5)  # (w,)
    py = math.sin(th) * (np.arange(row0, row0 + h, dtype=np.float64) + 0.5)  # (h,)
    proj = py[:, None] + px[None, :]  # (h, w) projection on the direction, px
    if style == "gradient":
        lo = float(px.min() + py.min())
        span = float(px.max() + py.max()) - lo
        t = (proj - lo) / span if span > 0 else np.zeros_like(proj)
        for k in range(3):
            out[:, :, k] = col[0, k] + t * (col[1, k] - col[0, k])
        return out
    period = float(period)
    if not (math.isfinite(period) and period > 0):
        raise ValueError(f"period must be a finite number > 0 px (got {period!r})")
    odd = (np.floor(proj / period) % 2) == 1
    for k in range(3):
        out[:, :, k] = np.where(odd, col[1, k], col[0, k])
    return out
