"""Anti-aliased coverage of a shape: the share of each pixel's sub-pixel samples that fall inside it.

A pixel's coverage is the fraction of its ``samples x samples`` sub-pixel centres
(an even grid, see :mod:`synthgen.geometry` for the pixel convention) that the
shape's region (:mod:`synthgen.scene.regions`) contains.  Pixels that a lower
bound on the distance to the boundary (the region's own bound; for ellipses and
rings, their gauge) puts wholly inside or outside are classified without
sampling; the result equals the plain sample rule exactly (:attr:`Coverage.inside`).
"""

from __future__ import annotations

import math
import operator
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from synthgen.scene.regions import EDGE_TOLERANCE as _TOL
from synthgen.scene.regions import (
    ConvexBand,
    ConvexRegion,
    DifferenceRegion,
    EllipseRegion,
    EmptyRegion,
    PolygonBand,
    UnionRegion,
)
from synthgen.scene.shapes import Shape, shape_geometries, shape_geometry, shape_region

__all__ = ["Coverage", "coverage", "coverage_many"]

# Slack (px) added to the classification margin to absorb rounding in the bounds.
_SLACK = 1e-6
# Patches with at most this many pixels are sub-sampled everywhere (cheaper than
# classifying first for small shapes).
_GRID_MAX_PIXELS = 144
# Pixel block (side, px) for the coarse first pass on big patches, from this many pixels on
# (measured over every kind, a quarter outlined: 0.92x the time at 64-120 px against 64 * 64).
_BLOCK = 8
_BLOCKED_MIN_PIXELS = 100 * 100
# Elliptic patches up to this many pixels are classified by their gauge (:func:`_elliptic_classes`);
# bigger ones by blocks, which then costs less (measured: 0.6x below ~110 px a side, 1.1-1.3x above 150).
_GAUGE_MAX_PIXELS = 120 * 120




@lru_cache(maxsize=64)
def _offsets(samples: int) -> np.ndarray:
    return (np.arange(samples) + 0.5) / samples


@lru_cache(maxsize=16384)
def _grid(start: int, stop: int, samples: int) -> np.ndarray:
    """Sub-sample coordinates ``p + (j + 0.5)/s`` for pixels ``start..stop-1`` (read-only)."""
    out = (np.arange(start, stop, dtype=np.float64)[:, None] + _offsets(samples)).ravel()
    out.flags.writeable = False
    return out


@dataclass(frozen=True, slots=True)
class Coverage:
    """Anti-aliased coverage of one shape on a local patch of the canvas.

    Attributes
    ----------
    row0, col0 : int
        Canvas row and column of the patch's top-left pixel.
    values : ndarray of shape (h, w), float32
        Fraction of each pixel's ``samples x samples`` sub-samples inside the
        shape, in [0, 1].
    samples : int
        Supersampling factor ``s``; sub-sample ``(i, j)`` of pixel ``(r, c)``
        sits at ``x = c + (j + 0.5)/s``, ``y = r + (i + 0.5)/s``.
    shape : Shape
    stroke : float
        Outline band thickness in px; 0 for a filled shape.
    """

    row0: int
    col0: int
    values: np.ndarray
    samples: int
    shape: Shape
    stroke: float

    def inside(self, r0: int, c0: int, r1: int, c1: int) -> np.ndarray:
        """Sub-sample mask for canvas pixel rows ``r0:r1`` and columns ``c0:c1``.

        Returns
        -------
        ndarray of bool, shape ((r1 - r0) * s, (c1 - c0) * s)
            Element ``((r - r0) * s + i, (c - c0) * s + j)`` tells whether
            sub-sample ``(i, j)`` of pixel ``(r, c)`` is inside; these are the
            samples behind :attr:`values`, so
            ``values[r - row0, c - col0] == float32(inside(r, c, r + 1, c + 1).mean())``
            (exactly equal without the cast when ``s`` is a power of two).
        """
        h, w = self.values.shape
        if not (self.row0 <= r0 < r1 <= self.row0 + h and self.col0 <= c0 < c1 <= self.col0 + w):
            raise ValueError(
                f"rows {r0}:{r1}, cols {c0}:{c1} must lie within the patch rows "
                f"{self.row0}:{self.row0 + h}, cols {self.col0}:{self.col0 + w}"
            )
        s = self.samples
        region = shape_region(self.shape, self.stroke)
        bh, bw = r1 - r0, c1 - c0
        if bh * bw <= _GRID_MAX_PIXELS or s == 1:
            return region.contains(_grid(c0, c1, s)[None, :], _grid(r0, r1, s)[:, None])
        # Same decisions as the plain sample test, settling whole pixels first.
        interior, rr, cc, inside = _classify(region, r0, c0, bh, bw, s)
        mask = np.repeat(np.repeat(interior, s, axis=0), s, axis=1)
        mask.reshape(bh, s, bw, s)[rr, :, cc, :] = inside.transpose(2, 0, 1)  # (K, s, s)
        return mask


def coverage(
    shape: Shape, height: int, width: int, *, samples: int = 4, stroke: float = 0.0, _sampled: list | None = None
) -> Coverage | None:
    """Anti-aliased coverage of ``shape`` on a ``(height, width)`` canvas.

    Parameters
    ----------
    shape : Shape
    height, width : int
        Canvas size in pixels (array order: rows, columns).
    samples : int
        Supersampling factor ``s`` (``s x s`` sub-samples per pixel), >= 1.
    stroke : float
        0 for a filled shape; > 0 for the outline band of this thickness in px
        (the rule is in the module docstring).

    Returns
    -------
    Coverage or None
        The patch holds the canvas pixels that meet the shape's exact box
        clipped to the canvas; None when that clipped box is empty.  A shape
        thinner than the sample spacing may give an all-zero patch.  The cost
        depends on the patch, not on the canvas.

    Examples
    --------
    >>> cov = coverage(Shape("rectangle", 4.0, 4.0, 4.0), 10, 10)
    >>> (cov.row0, cov.col0, cov.values.shape, float(cov.values.sum()))
    (2, 2, (4, 4), 16.0)
    >>> coverage(Shape("rectangle", -5.0, 4.0, 4.0), 10, 10) is None
    True
    """
    s = operator.index(samples)
    if s < 1:
        raise ValueError(f"samples must be >= 1 (got {samples!r})")
    stroke = float(stroke)
    if not (math.isfinite(stroke) and stroke >= 0.0):
        raise ValueError(f"stroke must be a finite number >= 0 px (got {stroke!r})")
    g = shape_geometry(shape)
    bx0, by0, bx1, by1 = g.box
    x0, y0 = max(bx0, 0.0), max(by0, 0.0)
    x1, y1 = min(bx1, float(width)), min(by1, float(height))
    if not (x0 < x1 and y0 < y1):
        return None
    col0, row0 = int(math.floor(x0)), int(math.floor(y0))
    col1, row1 = int(math.ceil(x1)), int(math.ceil(y1))
    h, w = row1 - row0, col1 - col0
    region = shape_region(shape, stroke)
    if h * w <= _GRID_MAX_PIXELS or s == 1:
        inside = region.contains(_grid(col0, col1, s)[None, :], _grid(row0, row1, s)[:, None])
        counts = inside.reshape(h, s, w, s).sum(axis=(1, 3))
        values = (counts / (s * s)).astype(np.float32)
        if _sampled is not None:  # (callers that reuse the samples: the whole-patch mask)
            _sampled.append(inside)
    else:
        parts = _classify(region, row0, col0, h, w, s)
        values = _classified(*parts, s)
        if _sampled is not None:  # (interior, rr, cc, inside), as _classify returns them
            _sampled.append(parts)
    return Coverage(row0, col0, values, s, shape, stroke)


def coverage_many(
    shapes, height: int, width: int, *, samples: int = 4, strokes=None, insides=None, edges=None, _geometry=None
) -> list:
    """:func:`coverage` of many shapes at once: ``[coverage(shape, ...) for shape in shapes]``.

    Shapes whose patch holds at most :data:`_GRID_MAX_PIXELS` pixels (the ones
    :func:`coverage` sub-samples everywhere) are grouped by the structure of
    their region and tested together, with the same point test, the same
    sample positions and the same arithmetic, element by element, as the
    one-shape path, so every value is identical; the others go through
    :func:`coverage`.  This removes the per-shape call overhead that dominates
    scenes of hundreds of tiny objects.

    Parameters
    ----------
    shapes : sequence of Shape
    height, width : int
        Canvas size in pixels.
    samples : int
        Supersampling factor, >= 1.
    strokes : sequence of float or None
        Outline band per shape (0 for filled); None fills all.
    insides : list or None
        When a list, it is filled with one entry per shape: the sub-sample
        mask of the whole patch (what ``cov.inside(row0, col0, row0 + h,
        col0 + w)`` returns, read-only) for the shapes whose every sample was
        tested, else None.
    edges : list or None
        When a list, filled with one entry per shape: for the shapes whose
        pixels were settled by class (big patches), ``(interior, rr, cc, inside)``:
        bool (h, w), pixels whose samples all lie inside; patch rows and columns
        (K,) of the sub-sampled pixels; their samples, bool (s, s, K); else None.

    Returns
    -------
    list of Coverage or None, one per shape
    """
    s = operator.index(samples)
    if s < 1:
        raise ValueError(f"samples must be >= 1 (got {samples!r})")
    n = len(shapes)
    strokes = [0.0] * n if strokes is None else [float(v) for v in strokes]
    out: list = [None] * n
    if insides is not None:
        insides[:] = [None] * n
    if edges is not None:
        edges[:] = [None] * n
    groups: dict = {}
    W, H = float(width), float(height)
    geoms = shape_geometries(shapes) if _geometry is None else _geometry  # (callers that hold them already)
    for i, (shape, stroke, g) in enumerate(zip(shapes, strokes, geoms)):
        if not (math.isfinite(stroke) and stroke >= 0.0):
            raise ValueError(f"stroke must be a finite number >= 0 px (got {stroke!r})")
        bx0, by0, bx1, by1 = g.box
        x0, y0 = max(bx0, 0.0), max(by0, 0.0)
        x1, y1 = min(bx1, W), min(by1, H)
        if not (x0 < x1 and y0 < y1):
            continue
        col0, row0 = int(math.floor(x0)), int(math.floor(y0))
        h, w = int(math.ceil(y1)) - row0, int(math.ceil(x1)) - col0
        region = g.region if stroke <= 0.0 else shape_region(shape, stroke)  # as shape_region gives
        sig = _signature(region) if h * w <= _GRID_MAX_PIXELS else None
        if sig is None:
            sampled: list | None = [] if insides is not None or edges is not None else None
            out[i] = coverage(shape, height, width, samples=s, stroke=stroke, _sampled=sampled)
            if sampled:
                if isinstance(sampled[0], tuple):
                    if edges is not None:
                        edges[i] = sampled[0]
                elif insides is not None:
                    sampled[0].flags.writeable = False
                    insides[i] = sampled[0]
            continue
        groups.setdefault(sig, []).append((i, row0, col0, h, w, region))
    offs = _offsets(s)
    for sig, items in groups.items():
        _cover_group(sig, items, shapes, strokes, s, offs, out, insides)
    return out


def _size_chunks(items, limit: int) -> list:
    """``items`` ``(i, row0, col0, h, w, ...)`` sorted by patch size and cut into runs whose padded patches
    (every patch padded to the run's largest height and width) hold at most ``limit`` pixels (one at least)."""
    items = sorted(items, key=lambda it: (it[3], it[4]))
    chunks: list = []
    run: list = []
    wm = 0
    for it in items:
        w2 = max(wm, it[4])
        if run and (len(run) + 1) * it[3] * w2 > limit:
            chunks.append(run)
            run, w2 = [], it[4]
        run.append(it)
        wm = w2
    if run:
        chunks.append(run)
    return chunks


def _cover_group(sig, items, shapes, strokes, s: int, offs, out: list, insides) -> None:
    """:func:`coverage_many` for one group of patches sharing a region signature.

    ``items`` are ``(i, row0, col0, h, w, region)``; each shape's :class:`Coverage`
    goes to ``out[i]`` (and its sample mask to ``insides[i]`` when given).  Patches
    of similar size are tested together, padded to the largest (the padding's
    samples are computed and dropped).
    """
    # chunks of about _MANY_SAMPLES samples keep the temporaries in cache
    for chunk in _size_chunks(items, max(1, _MANY_SAMPLES // (s * s))):
        hm = max(it[3] for it in chunk)
        wm = max(it[4] for it in chunk)
        rows = np.array([it[1] for it in chunk])
        cols = np.array([it[2] for it in chunk])
        # the same values as _grid(col0, col0 + w, s) for each shape, padded to wm columns
        xs = ((cols[:, None] + np.arange(wm)).astype(np.float64)[:, :, None] + offs).reshape(len(chunk), 1, wm * s)
        ys = ((rows[:, None] + np.arange(hm)).astype(np.float64)[:, :, None] + offs).reshape(len(chunk), hm * s, 1)
        inside = _contains_many(sig, [it[5] for it in chunk], xs, ys)
        counts = _block_counts(inside, len(chunk), hm, wm, s)
        values = (counts / (s * s)).astype(np.float32)
        for k, (i, row0, col0, h, w, _) in enumerate(chunk):
            out[i] = Coverage(row0, col0, values[k, :h, :w].copy(), s, shapes[i], strokes[i])
        if insides is not None:
            inside.flags.writeable = False
            for k, (i, _r, _c, h, w, _) in enumerate(chunk):
                insides[i] = inside[k, : h * s, : w * s]


def _block_counts(inside: np.ndarray, k: int, h: int, w: int, s: int) -> np.ndarray:
    """Number of set sub-samples per pixel: bool (k, h s, w s) -> (k, h, w) integers.

    The same integers as ``inside.reshape(k, h, s, w, s).sum(axis=(2, 4))``,
    summed slice by slice in small integer types (much faster on small patches).
    """
    u = inside.view(np.uint8).reshape(k, h, s, w * s)
    rows = u[:, :, 0].copy()
    for i in range(1, s):
        rows += u[:, :, i]  # at most s <= 255
    cols = rows.reshape(k, h, w, s).astype(np.uint16 if s * s > 255 else np.uint8)
    out = cols[..., 0].copy()
    for j in range(1, s):
        out += cols[..., j]
    return out


#: Sub-samples tested together per array pass in :func:`coverage_many` (temporaries stay in cache).
_MANY_SAMPLES = 1 << 15


def _signature(region):
    """Hashable structure of a region that :func:`_contains_many` can test in bulk, or None."""
    if isinstance(region, ConvexRegion):
        return ("C", region.nx.shape)
    if isinstance(region, EllipseRegion):
        return ("E",)
    if isinstance(region, EmptyRegion):
        return ("N",)
    if isinstance(region, ConvexBand):
        return ("B", region.fill.nx.shape)
    if isinstance(region, UnionRegion):
        parts = tuple(_signature(p) for p in region.parts)
        return None if None in parts else ("U", parts)
    if isinstance(region, DifferenceRegion):
        keep, cut = _signature(region.keep), _signature(region.cut)
        return None if keep is None or cut is None else ("D", keep, cut)
    return None


def _column(values) -> np.ndarray:
    return np.array(values, dtype=np.float64).reshape(-1, 1, 1)


def _piece_max_many(regions, xs, ys) -> np.ndarray:
    """Largest signed edge distance of every convex piece of each region, (N, P, Hs, Ws).

    Element for element the same arithmetic as ``ConvexRegion._edge_max``:
    ``(nx x - c) + ny y`` per edge, then the maximum over the edges.
    """
    nx = np.stack([r.nx for r in regions])[..., None, None]  # (N, P, E, 1, 1)
    ny = np.stack([r.ny for r in regions])[..., None, None]
    c = np.stack([r.c for r in regions])[..., None, None]
    a = nx * xs[:, None, None] - c  # (N, P, E, 1, Ws)
    b = ny * ys[:, None, None]  # (N, P, E, Hs, 1)
    # edge by edge into one running maximum: the same sums, without an (N, P, E, Hs, Ws) temporary
    m = a[:, :, 0] + b[:, :, 0]
    v = np.empty_like(m)
    for e in range(1, a.shape[2]):
        np.add(a[:, :, e], b[:, :, e], out=v)
        np.maximum(m, v, out=m)
    return m


def _contains_many(sig, regions, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """``region.contains`` for N regions of one structure ``sig``: xs (N, 1, Ws), ys (N, Hs, 1) -> (N, Hs, Ws)."""
    kind = sig[0]
    if kind == "C":
        m = _piece_max_many(regions, xs, ys)
        return m[:, 0] <= _TOL if m.shape[1] == 1 else (m <= _TOL).any(axis=1)
    if kind == "B":
        m = _piece_max_many([r.fill for r in regions], xs, ys)
        f = m[:, 0] if m.shape[1] == 1 else m.min(axis=1)
        width = _column([r.width for r in regions])
        return (f <= _TOL) & (f > -width)
    if kind == "E":
        dx = xs - _column([r.ex for r in regions])
        dy = ys - _column([r.ey for r in regions])
        qa = _column([r.qa for r in regions])
        qb = _column([r.qb for r in regions])
        qc = _column([r.qc for r in regions])
        return ((qa * dx * dx + qc * dy * dy) + (qb * dx) * dy) <= 1.0
    if kind == "N":
        return np.zeros((len(regions), ys.shape[1], xs.shape[2]), dtype=bool)
    if kind == "U":
        out = None
        for k, part_sig in enumerate(sig[1]):
            inside = _contains_many(part_sig, [r.parts[k] for r in regions], xs, ys)
            out = inside if out is None else (out | inside)
        return out
    # "D": points of keep outside cut
    keep = _contains_many(sig[1], [r.keep for r in regions], xs, ys)
    return keep & ~_contains_many(sig[2], [r.cut for r in regions], xs, ys)


def _classify(region, row0: int, col0: int, h: int, w: int, s: int):
    """Settle pixels by a conservative centre test; sub-sample only the rest.

    Returns ``(interior, rr, cc, inside)``: ``interior`` bool (h, w) marks the
    pixels whose sub-samples are all inside; ``rr``, ``cc`` (K,) index the
    undecided pixels within the block and ``inside`` bool (s, s, K) holds their
    sub-samples (sub-row i, sub-column j, pixel).  Every other pixel is outside.
    """
    # Every sub-sample lies within this distance of its pixel centre.
    margin = (0.5 - 0.5 / s) * math.sqrt(2.0) + _SLACK
    xc = np.arange(col0, col0 + w, dtype=np.float64) + 0.5
    yc = np.arange(row0, row0 + h, dtype=np.float64) + 0.5
    classes = _elliptic_classes(region, xc, yc, margin) if h * w <= _GAUGE_MAX_PIXELS else None
    if classes is not None:
        interior, undecided = classes
        rr, cc = np.divmod(np.flatnonzero(undecided), w)
    else:
        if h * w >= _BLOCKED_MIN_PIXELS:
            f = _blocked_bound(region, xc, yc, margin)
        else:
            f = region.bound(xc[None, :], yc[:, None])  # (h, w)
        interior = f < -margin
        rr, cc = np.divmod(np.flatnonzero(np.abs(f) <= margin), w)  # np.nonzero's pairs, in its order, faster
    cols = (cc + col0).astype(np.float64)
    rows = (rr + row0).astype(np.float64)
    if rr.size == 0:
        inside = np.zeros((s, s, 0), dtype=bool)
    elif isinstance(region, UnionRegion):
        inside = _sparse_contains(region, cols, rows, s, margin)
    elif isinstance(region, PolygonBand):
        inside = _sparse_band(region, cols, rows, s, margin)
    else:
        offs = _offsets(s)
        # pixels on the last axis keep numpy's inner loops long
        inside = region.contains(cols[None, None, :] + offs[None, :, None], rows[None, None, :] + offs[:, None, None])
    return interior, rr, cc, inside


def _gauge_sides(e: EllipseRegion, xc: np.ndarray, yc: np.ndarray, margin: float):
    """Pixel centres (h, w) deeper than ``margin`` inside the ellipse ``e``, and those farther than it outside.

    From the quadratic form ``q = rho^2`` alone (three array operations a pixel):
    the gauge ``rho`` changes by at most ``d / min(a, b)`` over a distance
    ``d``, so a centre with ``rho < 1 - r / min(a, b)`` has every point within
    ``r`` inside, and one with ``rho > 1 + r / min(a, b)`` none.  ``r`` exceeds
    ``margin`` by a millionth of the larger semi-axis, far above the rounding
    of ``q`` at any aspect, so both sets are conservative for the sample test.
    """
    m = min(e.a, e.b)
    r = margin + 1e-6 * max(1.0, e.a, e.b)
    q = e._q(xc[None, :], yc[:, None])  # the one point test's own arithmetic
    lo = 1.0 - r / m
    deep = q < lo * lo if lo > 0.0 else np.zeros(q.shape, dtype=bool)
    return deep, q > (1.0 + r / m) ** 2


def _elliptic_classes(region, xc: np.ndarray, yc: np.ndarray, margin: float):
    """``(interior, undecided)`` bool (h, w) of a filled ellipse or of an ellipse minus an ellipse (ring,
    outlined ellipse), from :func:`_gauge_sides`; None for other regions.

    Cheaper than the distance bound of the region (which takes two square
    roots a pixel) and as safe: a pixel left undecided is sub-sampled with the
    exact point test, so the coverage is the same; only the looser gauge may
    leave a few more boundary pixels to sample on elongated ellipses.
    """
    if isinstance(region, EllipseRegion):
        deep, far = _gauge_sides(region, xc, yc, margin)
        return deep, ~(deep | far)
    if not (isinstance(region, DifferenceRegion) and isinstance(region.keep, EllipseRegion)):
        return None
    if isinstance(region.cut, EmptyRegion):
        deep, far = _gauge_sides(region.keep, xc, yc, margin)
        return deep, ~(deep | far)
    if not isinstance(region.cut, EllipseRegion):
        return None
    deep, far = _gauge_sides(region.keep, xc, yc, margin)
    cut_deep, cut_far = _gauge_sides(region.cut, xc, yc, margin)
    interior = deep & cut_far
    return interior, ~(interior | far | cut_deep)


def _classified(interior, rr, cc, inside, s: int) -> np.ndarray:
    """Coverage values (h, w) float32 from what :func:`_classify` returns."""
    values = interior.astype(np.float32)
    values[rr, cc] = _sample_counts(inside, s) / (s * s)
    return values


def _sample_counts(inside: np.ndarray, s: int) -> np.ndarray:
    """``inside.sum(axis=(0, 1))`` of bool (s, s, K): the same integers, summed in a small integer type (faster)."""
    flags = inside.reshape(s * s, -1).view(np.uint8)
    return np.add.reduce(flags, axis=0, dtype=np.uint8 if s * s <= 255 else np.uint16)


def _sparse_contains(region: UnionRegion, cols: np.ndarray, rows: np.ndarray, s: int, margin: float) -> np.ndarray:
    """``region.contains`` at the sub-samples of K boundary pixels, testing only nearby pieces.

    ``cols``, ``rows`` (K,) are the pixels' canvas column and row as floats.  A
    convex piece whose bound at a pixel centre exceeds ``margin`` holds none of
    that pixel's sub-samples, so each pixel is tested against the one or two
    pieces near it instead of all of them; the answer is the same.  Returns bool
    (s, s, K), indexed (sub-row i, sub-column j, pixel).
    """
    k = cols.size
    out = np.zeros((s, s, k), dtype=bool)
    # All parts' pieces in one pass (fewer array calls than part by part): a short
    # piece is padded with a copy of one of its edges, which gives the same
    # value again and so cannot change the maximum over the edges.
    nx, ny, c = region.padded()  # (E, P), C-ordered (cached with the region)
    _sparse_pieces(nx, ny, c, cols, rows, s, margin, out)
    return out


def _sparse_pieces(nx, ny, c, cols: np.ndarray, rows: np.ndarray, s: int, margin: float, out: np.ndarray) -> None:
    """OR into ``out`` (s, s, K) the samples of the K pixels inside the convex pieces near them.

    ``nx``, ``ny``, ``c`` (E, P) are the pieces' half-planes, edge-major, so that gathers stay contiguous.
    """
    offs = _offsets(s)
    fp = ((nx[:, :, None] * (cols + 0.5) - c[:, :, None]) + ny[:, :, None] * (rows + 0.5)).max(axis=0)  # (P, K)
    kk, pp = np.nonzero((fp <= margin).T)  # pairs (pixel, piece), sorted by pixel
    if kk.size == 0:
        return
    # every (pixel, piece) pair in one pass, then OR over each pixel's pairs
    x = cols[kk][None, None, :] + offs[None, :, None]  # (1, s, N): the same c + o as everywhere
    y = rows[kk][None, None, :] + offs[:, None, None]  # (s, 1, N)
    # C-ordered coefficients keep the (E, s, s, N) result C-ordered, which the reduction needs to be fast
    a_x = np.ascontiguousarray(nx[:, pp])[:, None, None, :]
    a_y = np.ascontiguousarray(ny[:, pp])[:, None, None, :]
    a_c = np.ascontiguousarray(c[:, pp])[:, None, None, :]
    vals = (a_x * x - a_c) + a_y * y  # (E, s, s, N)
    hit = vals.max(axis=0) <= _TOL  # (s, s, N)
    starts = np.flatnonzero(np.concatenate(([True], kk[1:] != kk[:-1])))
    out[:, :, kk[starts]] |= np.logical_or.reduceat(hit, starts, axis=2)


def _sparse_band(region: PolygonBand, cols: np.ndarray, rows: np.ndarray, s: int, margin: float) -> np.ndarray:
    """``region.contains`` at the sub-samples of K boundary pixels, with nearby segments only.

    A boundary segment farther than ``width + margin`` from a pixel centre is
    farther than ``width`` from all its sub-samples and cannot change the
    minimum distance where it matters.  Layout as in :func:`_sparse_contains`.
    """
    offs = _offsets(s)
    k = cols.size
    if isinstance(region.fill, UnionRegion):
        inside = _sparse_contains(region.fill, cols, rows, s, margin)
    else:
        inside = region.fill.contains(cols[None, None, :] + offs[None, :, None], rows[None, None, :] + offs[:, None, None])
    ax, ay, dx, dy, inv = region.ax, region.ay, region.dx, region.dy, region.inv
    # squared distance of every segment to every pixel centre, (S, K)
    px = (cols + 0.5)[None, :] - ax[:, None]
    py = (rows + 0.5)[None, :] - ay[:, None]
    t = np.clip((px * dx[:, None] + py * dy[:, None]) * inv[:, None], 0.0, 1.0)
    d2c = (px - t * dx[:, None]) ** 2 + (py - t * dy[:, None]) ** 2
    reach = region.width + margin
    kk, sg = np.nonzero((d2c <= reach * reach).T)  # pairs (pixel, segment), sorted by pixel
    dmin = np.full((s, s, k), np.inf)
    if kk.size:
        # every (pixel, segment) pair in one pass, the same operations, in the same
        # order, as PolygonBand._dist2 for one segment; then the minimum over each pixel's pairs
        qx = (cols[kk][None, None, :] + offs[None, :, None]) - ax[sg]  # (1, s, N)
        qy = (rows[kk][None, None, :] + offs[:, None, None]) - ay[sg]  # (s, 1, N)
        sdx, sdy = dx[sg], dy[sg]
        t = np.clip((qx * sdx + qy * sdy) * inv[sg], 0.0, 1.0)  # (s, s, N)
        ex = qx - t * sdx
        ey = qy - t * sdy
        starts = np.flatnonzero(np.concatenate(([True], kk[1:] != kk[:-1])))
        dmin[:, :, kk[starts]] = np.minimum.reduceat(ex * ex + ey * ey, starts, axis=2)
    return inside & (dmin < region.width * region.width)


def _blocked_bound(region, xc: np.ndarray, yc: np.ndarray, margin: float) -> np.ndarray:
    """Centre bounds for a big patch, settling whole pixel blocks where possible.

    Returns an (h, w) array that is ``-inf`` / ``+inf`` in blocks that lie
    entirely inside / outside, and the pixel-centre bound elsewhere.
    """
    h, w = yc.size, xc.size
    B = _BLOCK
    nby, nbx = -(-h // B), -(-w // B)
    # Block centres; a block's pixel centres lie within (B - 1)/sqrt(2) of it.
    bx = xc[0] - 0.5 + B * (np.arange(nbx) + 0.5)
    by = yc[0] - 0.5 + B * (np.arange(nby) + 0.5)
    fb = region.bound(bx[None, :], by[:, None])  # (nby, nbx)
    reach = (B - 1) / math.sqrt(2.0) + margin + _SLACK
    f = np.empty((nby * B, nbx * B))
    fv = f.reshape(nby, B, nbx, B)
    fv[...] = np.where(fb < -reach, -np.inf, np.inf)[:, None, :, None]
    ub, vb = np.nonzero(np.abs(fb) <= reach)
    if ub.size:
        ob = np.arange(B, dtype=np.float64)
        px = (xc[0] + B * vb.astype(np.float64))[None, None, :] + ob[None, :, None]  # (1, B, K)
        py = (yc[0] + B * ub.astype(np.float64))[None, None, :] + ob[:, None, None]  # (B, 1, K)
        fv[ub, :, vb, :] = region.bound(px, py).transpose(2, 0, 1)  # (K, B, B)
    return f[:h, :w]
