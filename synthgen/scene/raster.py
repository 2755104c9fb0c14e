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

__all__ = ["LUMA", "SMALL_PATCH", "blend", "paint", "paint_objects"]

#: Rec. 601 luma weights for R, G, B (common practice for perceived brightness).
LUMA = np.array([0.299, 0.587, 0.114])
_LUMA_R, _LUMA_G, _LUMA_B = (float(w) for w in LUMA)  # the same weights for scalar sums

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
    odd = _odd_band(proj / period)
    for k in range(3):
        out[:, :, k] = np.where(odd, col[1, k], col[0, k])
    return out


def _odd_band(q: np.ndarray) -> np.ndarray:
    """Whether ``floor(q)`` is odd: ``(np.floor(q) % 2) == 1``, element for element, without the slow float modulo.

    ``q * 0.5`` is exact, so ``floor(q * 0.5) * 2`` equals ``floor(q)`` exactly when
    ``floor(q)`` is even (also for huge or infinite ``q``, even by either rule).  A NaN
    would count as odd here and even there; callers pass finite positions and periods.

    >>> _odd_band(np.array([-3.5, -2.0, -0.5, 0.0, 1.2, 2.9, 1e300])).tolist()
    [False, False, True, False, True, False, False]
    """
    return np.floor(q * 0.5) * 2.0 != np.floor(q)


# --------------------------------------------------------------------------- painting


def _pick_colours(under_lum: float, min_contrast: float, cands: np.ndarray, lum: np.ndarray):
    """Fill colours (k, 3) whose luma differs from ``under_lum`` by at least ``min_contrast``.

    ``cands`` (k, 8, 3) are candidate colours drawn before looking at the
    background (so the stream does not depend on it), ``lum`` (k, 8) their
    luma.  The first qualifying candidate is taken; when none qualifies, the
    best is shifted in brightness toward the side with more room.  Returns the
    colours and the smallest achieved contrast.
    """
    k = len(cands)
    colours = np.empty((k, 3))
    achieved = []
    for t, row in enumerate(lum.tolist()):  # plain floats: k <= 2 rows of 8, cheaper than array calls
        contrast = [abs(x - under_lum) for x in row]
        pick = next((m for m, c in enumerate(contrast) if c >= min_contrast), -1)
        if pick >= 0:
            colours[t] = cands[t, pick]
            achieved.append(contrast[pick])
            continue
        c = cands[t, contrast.index(max(contrast))]
        target = under_lum + min_contrast if under_lum <= 0.5 else under_lum - min_contrast
        target = min(max(target, 0.0), 1.0)
        colours[t] = np.clip(c + (target - float(c @ LUMA / 255.0)) * 255.0, 0.0, 255.0)
        achieved.append(abs(float(colours[t] @ LUMA / 255.0) - under_lum))
    return colours, float(min(achieved))


def paint_objects(canvas: np.ndarray, drawn, cands: np.ndarray, lums: np.ndarray, min_contrast: float) -> None:
    """Paint the shown objects ``drawn`` bottom to top onto ``canvas`` (in place); set their ``contrast``.

    ``cands`` (N, 2, 8, 3) and ``lums`` (N, 2, 8) are the candidate fill colours
    of every shape given to the composer, indexed by ``_Drawn.index``.

    Each shape's colours depend on the canvas under it as painted so far, so a
    shape is painted after every earlier shape whose patch meets its own.  Many
    small shapes are painted in bulk: shapes are put in levels (a shape's level
    is one more than the highest level of the earlier shapes whose patches it
    meets), the patches of one level never meet, and a level's small patches
    are read, coloured, blended and written back in one pass over their pixels
    with the same arithmetic as one shape at a time (:func:`_draw_one`,
    :func:`_draw_level`).
    """
    if not drawn:
        return
    order = np.array([d.index for d in drawn])
    cands, lums = cands[order], lums[order]  # by position in `drawn`
    covs = [d.cov for d in drawn]
    styles = [d.style for d in drawn]
    contrasts: dict = {}
    if len(drawn) >= _BULK_DRAW_MIN:
        for group in _levels(covs, canvas.shape[0], canvas.shape[1], [d.alone for d in drawn]):
            small = [i for i in group if covs[i].values.size <= SMALL_PATCH]
            if len(small) < 2:
                small = []
            for i in group:
                if not small or covs[i].values.size > SMALL_PATCH:
                    contrasts[i] = _draw_one(canvas, covs[i], styles[i], cands[i], lums[i], min_contrast)
            if small:
                contrasts.update(_draw_level(canvas, small, covs, styles, cands, lums, min_contrast))
    else:
        for i in range(len(drawn)):
            contrasts[i] = _draw_one(canvas, covs[i], styles[i], cands[i], lums[i], min_contrast)
    for i, d in enumerate(drawn):
        d.contrast = contrasts[i]


#: From this many shapes on, :func:`paint_objects` paints small patches in bulk.
_BULK_DRAW_MIN = 32


def _under_luma(v: np.ndarray, patch: np.ndarray) -> float:
    """Luma in [0, 1] of the coverage-weighted mean colour of ``patch`` (h, w, 3) under ``v`` (h, w).

    Computed in float64 from the exact products (coverage values are float32,
    pixels integers), so on small patches it does not depend on summation order;
    0.5 where the coverage is all zero.
    """
    vv = v.astype(np.float64).ravel()
    total = float(vv.sum())
    if total <= 0:
        return 0.5
    u = (vv @ patch.reshape(-1, 3).astype(np.float64)) / total
    return _luma3(float(u[0]), float(u[1]), float(u[2]))


def _luma3(r: float, g: float, b: float) -> float:
    return (r * _LUMA_R + g * _LUMA_G + b * _LUMA_B) / 255.0


def _draw_one(canvas, cov, style, cand, lum, min_contrast: float) -> float:
    """Draw one shape's coverage ``cov`` onto ``canvas`` (in place); return the achieved contrast."""
    v = cov.values
    h, w = v.shape
    rows = slice(cov.row0, cov.row0 + h)
    cols = slice(cov.col0, cov.col0 + w)
    under_lum = _under_luma(v, canvas[rows, cols])
    flat = style["fill"] == "flat"
    n_col = 1 if flat else 2
    colours, contrast = _pick_colours(under_lum, min_contrast, cand[:n_col], lum[:n_col])
    if flat:
        fill = colours[0].astype(np.float32)  # (3,)
    else:
        fill = paint(
            style["fill"], colours, h, w, row0=cov.row0, col0=cov.col0,
            angle=style["fill_angle"], period=style["period"],
        )
    canvas[rows, cols] = blend(canvas[rows, cols], fill, v)
    return contrast


def _levels(covs, height: int, width: int, alone) -> list:
    """Positions of ``covs`` by painting level, lowest first (lists of positions, in order within a level).

    A level map of the canvas holds, per pixel, the level of the last patch
    that met it; levels only grow along the painting order at any pixel, so the
    highest level among the earlier patches that meet a patch is the map's
    maximum over it.  Time follows the patches' total size, not the number of
    pairs that meet.  A patch known to meet no other (``alone``, bool per
    patch) is level 0 without looking.
    """
    level_map = np.full((height, width), -1, dtype=np.int32)
    groups: list = [[]]
    for pos, cov in enumerate(covs):
        if alone[pos]:
            groups[0].append(pos)
            continue
        h, w = cov.values.shape
        view = level_map[cov.row0 : cov.row0 + h, cov.col0 : cov.col0 + w]
        level = int(view.max()) + 1
        view[...] = level
        if level == len(groups):
            groups.append([])
        groups[level].append(pos)
    return groups


def _draw_level(canvas, idx, covs, styles, cands, lums, min_contrast: float) -> dict:
    """:func:`_draw_one` for small patches that never meet, all in one pass over their pixels.

    The pixels of all patches are listed end to end (each patch row by row);
    every per-pixel value (mean colour sums, fills, blend) is computed by the
    same operations as for one patch, and the sums are exact, so the canvas
    and contrasts come out identical.
    """
    k = len(idx)
    cov_list = [covs[i] for i in idx]
    hs = np.array([c.values.shape[0] for c in cov_list])
    ws = np.array([c.values.shape[1] for c in cov_list])
    r0 = np.array([c.row0 for c in cov_list])
    c0 = np.array([c.col0 for c in cov_list])
    sizes = hs * ws
    starts = np.cumsum(sizes) - sizes
    seg = np.repeat(np.arange(k), sizes)  # patch of each listed pixel
    local = np.arange(seg.size) - starts[seg]
    wseg = ws[seg]
    rr = r0[seg] + local // wseg
    cc = c0[seg] + local % wseg
    v = np.concatenate([c.values.ravel() for c in cov_list])  # (M,) float32, row by row
    where = rr * canvas.shape[1] + cc  # flat canvas index of each listed pixel
    under8 = _canvas_take(canvas, where)  # (M, 3) uint8
    # coverage-weighted mean colour under each shape: exact float64 sums, as _under_luma
    v64 = v.astype(np.float64)
    total = np.bincount(seg, weights=v64, minlength=k)
    sums = [np.bincount(seg, weights=v64 * under8[:, ch], minlength=k) for ch in range(3)]
    covered = total > 0
    safe = np.where(covered, total, 1.0)
    lum = ((sums[0] / safe) * _LUMA_R + (sums[1] / safe) * _LUMA_G + (sums[2] / safe) * _LUMA_B) / 255.0
    under_lum = np.where(covered, lum, 0.5)
    # colours: the first qualifying candidate of each colour slot, as _pick_colours
    idx_arr = np.array(idx)
    n_col = np.array([1 if styles[i]["fill"] == "flat" else 2 for i in idx])
    contrast_all = np.abs(lums[idx_arr] - under_lum[:, None, None])  # (K, 2, 8)
    ok = contrast_all >= min_contrast
    pick = ok.argmax(axis=2)  # (K, 2)
    found = ok.any(axis=2)
    colours = cands[idx_arr[:, None], np.arange(2)[None, :], pick]  # (K, 2, 3)
    picked = np.take_along_axis(contrast_all, pick[..., None], axis=2)[..., 0]  # (K, 2)
    achieved = np.where(n_col == 1, picked[:, 0], np.minimum(picked[:, 0], picked[:, 1])).tolist()
    settled = (found[:, 0] & ((n_col == 1) | found[:, 1])).tolist()
    under_list = under_lum.tolist()
    out = {}
    for t, i in enumerate(idx):
        if settled[t]:
            out[i] = achieved[t]
        else:  # no candidate qualifies: the brightness shift of _pick_colours
            nc = int(n_col[t])
            colours[t, :nc], out[i] = _pick_colours(under_list[t], min_contrast, cands[i, :nc], lums[i, :nc])
    fill = np.empty((seg.size, 3), dtype=np.float32)
    kinds = np.array([_FILL_CODE[styles[i]["fill"]] for i in idx])
    flat = kinds[seg] == 0
    fs = seg[flat]
    for ch in range(3):  # per channel: a take of one number a pixel, not a gather of rows of 3
        fill[flat, ch] = colours[:, 0, ch].take(fs)
    if not flat.all():
        _paint_pixels(fill, ~flat, kinds, seg, rr, cc, colours, idx, styles)
    _canvas_put(canvas, where, blend(under8, fill, v))
    return out


# Gathers and scatters of canvas pixels by flat index ``row * width + column``: the same bytes as
# ``canvas[rr, cc]`` (and its assignment), several times faster than fancy indexing rows of 3 bytes.


def _canvas_take(canvas: np.ndarray, flat: np.ndarray) -> np.ndarray:
    """``canvas[rr, cc]`` (M, 3) of (H, W, 3) ``canvas`` at the pixels ``flat``."""
    if not canvas.flags.c_contiguous:
        return canvas[flat // canvas.shape[1], flat % canvas.shape[1]]
    return canvas.reshape(-1, 3).take(flat, axis=0)


def _canvas_put(canvas: np.ndarray, flat: np.ndarray, values: np.ndarray) -> None:
    """``canvas[rr, cc] = values`` (M, 3) at the pixels ``flat`` (no pixel repeated), in place."""
    if not canvas.flags.c_contiguous:
        canvas[flat // canvas.shape[1], flat % canvas.shape[1]] = values
        return
    pixels = canvas.reshape(-1, 3)  # a view: the canvas is C-contiguous
    for ch in range(3):  # one channel at a time: a strided scatter of single bytes
        pixels[:, ch][flat] = values[:, ch]


_FILL_CODE = {"flat": 0, "gradient": 1, "stripes": 2}


def _paint_pixels(fill, sel, kinds, seg, rr, cc, colours, idx, styles) -> None:
    """Gradient and stripe fills at the listed pixels ``sel``, as :func:`synthgen.scene.shapes.paint` computes them."""
    k = len(idx)
    ths = [math.radians(styles[i]["fill_angle"]) for i in idx]
    cos = np.array([math.cos(t) for t in ths])
    sin = np.array([math.sin(t) for t in ths])
    sg = seg[sel]
    px = cos[sg] * (cc[sel].astype(np.float64) + 0.5)
    py = sin[sg] * (rr[sel].astype(np.float64) + 0.5)
    proj = py + px
    grad = kinds[sg] == 1
    stripe = ~grad
    # per channel, on 1-D arrays (the same operations as over (S, 3) rows, several times faster)
    vals = [np.empty(sg.size) for _ in range(3)]
    if grad.any():
        g = sg[grad]
        lo_x, lo_y = np.full(k, np.inf), np.full(k, np.inf)
        hi_x, hi_y = np.full(k, -np.inf), np.full(k, -np.inf)
        np.minimum.at(lo_x, g, px[grad])
        np.minimum.at(lo_y, g, py[grad])
        np.maximum.at(hi_x, g, px[grad])
        np.maximum.at(hi_y, g, py[grad])
        lo = lo_x + lo_y
        span = (hi_x + hi_y) - lo
        wide = span[g] > 0
        t = (proj[grad] - lo[g]) / np.where(wide, span[g], 1.0)
        t[~wide] = 0.0
        for ch in range(3):
            a, b = colours[:, 0, ch].take(g), colours[:, 1, ch].take(g)
            vals[ch][grad] = a + t * (b - a)
    if stripe.any():
        period = np.array([styles[i]["period"] for i in idx], dtype=np.float64)
        st = sg[stripe]
        odd = _odd_band(proj[stripe] / period[st])
        for ch in range(3):
            vals[ch][stripe] = np.where(odd, colours[:, 1, ch].take(st), colours[:, 0, ch].take(st))
    for ch in range(3):
        fill[sel, ch] = vals[ch]
