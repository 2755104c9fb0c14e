"""Drawing boxes on an image: outlines on the pixels just inside each box, dashed predictions, the colours.

How a box is drawn
~~~~~~~~~~~~~~~~~~
Boxes are half-open in continuous image coordinates (see
:mod:`synthgen.geometry`): a box from ``x0`` to ``x1`` covers the pixel columns
``x0 .. x1 - 1``.  Its outline is one pixel thick and lies on the pixels *just
inside* the box: in a tile drawn at scale ``s`` the outline's columns are
``floor(s * x0)`` and ``ceil(s * x1) - 1``, its rows ``floor(s * y0)`` and
``ceil(s * y1) - 1`` (:func:`outline_pixels`).  So box ``[2, 3, 7, 9]`` at scale
1 colours columns 2..6 on rows 3 and 8 and rows 3..8 on columns 2 and 6, and
nothing outside the box takes the box's colour.  Edges that fall outside a tile
are not drawn (they would suggest an edge that is not there).  On the
overview tiles of a contact sheet a box under 12 tile pixels across is outlined
on the ring just *outside* it instead (:func:`outline_outside_small`), so a tiny
object stays visible.  To keep a light outline visible on a light image, the ring of pixels just *outside* each
outline is darkened (a halo, :func:`draw_boxes`); predictions are dashed, 4
pixels on and 3 off, with the halo beside the dashes only.

Colours
~~~~~~~
:data:`CATEGORY_COLOURS` were chosen for this module by a max-min search (greedy
start, then swapping one colour at a time, from several random starts) over
sRGB colours on a 17-step grid with lightness 55 to 92 and chroma at least 40
(so that they show on dark and mid-tone images): the smallest CIEDE2000
difference of any pair, as seen with normal colour vision and as simulated for
protanopia, deuteranopia and tritanopia, is as large as possible (14.4), under
the constraint that every two colours differ in CIELAB hue angle by at least
30 degrees.  The constraint is for 1-pixel outlines: on a line that thin,
colours that differ mostly in lightness or chroma (a mint and a green, a
magenta and a pink) look alike, and hue is what tells them apart.  Colours go
to a sheet's categories in order, so the palette is ordered farthest-first
(each colour the farthest from those before it): any first few are as far apart
as the palette allows (the first four: 15.7 units, 71 degrees), and with all
seven shape kinds the ones easy to confuse by outline get far-apart hues
(triangle and star 105 degrees, polygon and cross 147, ellipse and ring
106).  :data:`PREDICTION_COLOURS` (white
for a true positive, then four hues) were picked by hand and checked the same
way.  ``tests/test_report.py`` checks that every pair of categories stays at
least 14 CIEDE2000 units and 30 degrees of hue apart (predictions: 12 units).
Categories beyond the palette's length reuse colours in order; the legend says
which is which.
"""

from __future__ import annotations

import numpy as np

from synthgen.geometry import as_boxes

#: Category outline colours, RGB (see the module docstring for how they were chosen).
CATEGORY_COLOURS: tuple[tuple[int, int, int], ...] = (
    (68, 170, 255),  # sky blue (hue 267 in CIELAB)
    (255, 51, 0),  # vermilion (43)
    (221, 238, 153),  # pale lime (115)
    (0, 255, 238),  # cyan (186)
    (255, 153, 170),  # rose pink (10)
    (51, 153, 85),  # leaf green (148)
    (187, 102, 170),  # mauve (333)
)


#: Prediction outline colours by kind, RGB; drawn dashed.
PREDICTION_COLOURS: dict[str, tuple[int, int, int]] = {
    "true_positive": (255, 255, 255),  # white
    "duplicate": (255, 150, 0),  # orange
    "localization": (0, 170, 255),  # azure
    "wrong_class": (255, 40, 120),  # rose
    "background": (140, 80, 230),  # violet
    "ignored": (185, 185, 185),  # light grey, like the ignore regions
}

_EPS = 1e-6  # px: float noise in x + w must not move an outline onto the next pixel
DASH = (4, 3)  # on, off pixels along a prediction's outline


# --------------------------------------------------------------------------- drawing boxes


def outline_pixels(boxes, sx: float = 1.0, sy: float | None = None, ox: float = 0.0, oy: float = 0.0) -> np.ndarray:
    """Pixel rows and columns of the one-pixel outlines of boxes drawn at a scale.

    A box maps to tile coordinates ``X = (x - ox) * sx``, ``Y = (y - oy) * sy``;
    its outline lies on the pixels just inside the half-open mapped box (see
    :mod:`synthgen.geometry` and this module's docstring).

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy in image pixels.
    sx, sy : float
        Tile pixels per image pixel along x and y (``sy`` defaults to ``sx``).
    ox, oy : float
        Image coordinates of the tile's top-left corner.

    Returns
    -------
    ndarray of int64, shape (N, 4)
        ``(c0, r0, c1, r1)``: the outline's left and right columns ``c0, c1``
        and top and bottom rows ``r0, r1``, inclusive; ``c1 >= c0`` and
        ``r1 >= r0``, so a box thinner than a pixel still shows.

    Examples
    --------
    >>> outline_pixels([[2, 3, 7, 9]]).tolist()
    [[2, 3, 6, 8]]
    >>> outline_pixels([[2, 3, 7, 9]], 2.0).tolist()
    [[4, 6, 13, 17]]
    >>> outline_pixels([[2.5, 3.2, 2.7, 3.4]]).tolist()
    [[2, 3, 2, 3]]
    """
    sy = sx if sy is None else sy
    b = as_boxes(boxes)
    x0 = np.floor((b[:, 0] - ox) * sx + _EPS)
    y0 = np.floor((b[:, 1] - oy) * sy + _EPS)
    x1 = np.maximum(np.ceil((b[:, 2] - ox) * sx - _EPS) - 1, x0)
    y1 = np.maximum(np.ceil((b[:, 3] - oy) * sy - _EPS) - 1, y0)
    return np.stack([x0, y0, x1, y1], axis=1).astype(np.int64)


def outline_outside_small(boxes, sx: float, sy: float, limit: float = 12.0) -> np.ndarray:
    """Boxes grown by one tile pixel on every side where they are small on the tile.

    The outline of a box lies on the pixels just inside it; on a box a few
    tile pixels across that ring covers most of the object.  Growing such a box
    by one tile pixel (``1 / sx`` image pixels across, ``1 / sy`` down) puts its
    outline on the ring just outside, and the object's own pixels stay visible.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy in image pixels.
    sx, sy : float
        Tile pixels per image pixel.
    limit : float
        Boxes whose width or height on the tile is below this are grown.

    Examples
    --------
    >>> outline_outside_small([[10, 10, 13, 13], [0, 0, 40, 40]], 1.0, 1.0).tolist()
    [[9.0, 9.0, 14.0, 14.0], [0.0, 0.0, 40.0, 40.0]]
    """
    b = as_boxes(boxes).copy()
    small = ((b[:, 2] - b[:, 0]) * sx < limit) | ((b[:, 3] - b[:, 1]) * sy < limit)
    b[small] += np.array([-1 / sx, -1 / sy, 1 / sx, 1 / sy])
    return b


def _perimeter(c0: int, r0: int, c1: int, r1: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows and columns of a rectangle's outline, clockwise from the top-left pixel, each pixel once."""
    top_c = np.arange(c0, c1 + 1)
    right_r = np.arange(r0 + 1, r1 + 1)
    bottom_c = np.arange(c1 - 1, c0 - 1, -1) if r1 > r0 else np.zeros(0, dtype=np.int64)
    left_r = np.arange(r1 - 1, r0, -1) if c1 > c0 else np.zeros(0, dtype=np.int64)
    rows = np.concatenate([np.full(top_c.size, r0), right_r, np.full(bottom_c.size, r1), left_r])
    cols = np.concatenate([top_c, np.full(right_r.size, c1), bottom_c, np.full(left_r.size, c0)])
    return rows.astype(np.int64), cols.astype(np.int64)


def _inside(rows: np.ndarray, cols: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    return (rows >= 0) & (rows < shape[0]) & (cols >= 0) & (cols < shape[1])


def _halo_mask(px: np.ndarray, strokes: list, dash: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """(H, W) bool: the ring just outside each outline (beside the dashes only, for a dashed one)."""
    dark = np.zeros(shape, dtype=bool)
    for (c0, r0, c1, r1), (rows, cols), d in zip(px, strokes, dash):
        hr, hc = _perimeter(int(c0) - 1, int(r0) - 1, int(c1) + 1, int(r1) + 1)
        if d:  # halo only beside the dashes, so the gaps stay open
            on = (np.arange(rows.size) % sum(DASH)) < DASH[0]
            near = np.zeros((int(r1 - r0) + 3, int(c1 - c0) + 3), dtype=bool)  # window around the ring
            for dr, dc in ((-1, 0), (1, 0), (0, -1), (0, 1)):  # the ring pixel right beside each dash pixel
                near[rows[on] - r0 + 1 + dr, cols[on] - c0 + 1 + dc] = True
            keep = near[hr - r0 + 1, hc - c0 + 1]
            hr, hc = hr[keep], hc[keep]
        k = _inside(hr, hc, shape)
        dark[hr[k], hc[k]] = True
    return dark


def draw_boxes(
    image: np.ndarray,
    boxes,
    colours,
    *,
    sx: float = 1.0,
    sy: float | None = None,
    ox: float = 0.0,
    oy: float = 0.0,
    dashed=False,
    halo: float | None = 0.45,
) -> np.ndarray:
    """Draw one-pixel box outlines on a copy of an image.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
        The tile to draw on (already scaled).
    boxes : array_like of shape (N, 4)
        xyxy in image pixels, mapped to the tile as in :func:`outline_pixels`.
    colours : array_like of shape (N, 3) or (3,)
        RGB per box, or one for all.
    sx, sy, ox, oy : float
        Scale and origin, as in :func:`outline_pixels`.
    dashed : bool or array_like of bool, shape (N,)
        Draw 4 pixels on, 3 off along an outline (clockwise from its top-left
        pixel) instead of a solid line; the halo then lies only beside the dashes.
    halo : float or None
        Multiply the ring of pixels just *outside* each outline by this factor
        (darkening it) so that a light outline stays visible on a light
        image; the box's own pixels are never touched by it.  None: no halo.
        All halos are drawn before any outline, so a halo never hides another
        box's outline.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        A new array.  Edges outside the tile are left out.
    """
    out = np.array(image, dtype=np.uint8, copy=True)
    b = as_boxes(boxes)
    if len(b) == 0:
        return out
    rgb = np.asarray(colours, dtype=np.uint8)
    if rgb.ndim == 1:
        rgb = np.broadcast_to(rgb, (len(b), 3))
    dash = np.broadcast_to(np.asarray(dashed, dtype=bool), (len(b),))
    h, w = out.shape[:2]
    # A box reaching far beyond the tile (a wild prediction) is cut 2 px outside it: the same
    # pixels are drawn, and the work stays the size of the tile.
    syy = sx if sy is None else sy
    b = b.copy()
    b[:, 0::2] = np.clip(b[:, 0::2], ox - 2 / sx, ox + (w + 2) / sx)
    b[:, 1::2] = np.clip(b[:, 1::2], oy - 2 / syy, oy + (h + 2) / syy)
    px = outline_pixels(b, sx, sy, ox, oy)

    # Outline pixels to colour, per box: solid, or every on-stretch of the dash pattern.
    strokes = []
    for c0, r0, c1, r1 in px:
        rows, cols = _perimeter(int(c0), int(r0), int(c1), int(r1))
        strokes.append((rows, cols))
    if halo is not None:
        dark = _halo_mask(px, strokes, dash, (h, w))
        out[dark] = (out[dark] * halo).astype(np.uint8)
    for (rows, cols), colour, d in zip(strokes, rgb, dash):
        keep = _inside(rows, cols, (h, w))
        if d:
            keep &= (np.arange(rows.size) % sum(DASH)) < DASH[0]
        out[rows[keep], cols[keep]] = colour
    return out


def category_colour(index: int) -> tuple[int, int, int]:
    return CATEGORY_COLOURS[index % len(CATEGORY_COLOURS)]
