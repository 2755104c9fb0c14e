"""Where objects go: placement strategies over object boxes.

A strategy receives each object's half-extents (half the width and height of
its unclipped exact box, which is centred on the object's centre) and returns
centres in image coordinates (see :mod:`synthgen.geometry`).  Strategies know
nothing about shapes or pixels, only boxes, so their guarantees (overlap
limits, target IoUs) are statements about exact boxes.

Strategies (``objects.layout``)
-------------------------------
``scatter``
    Independent uniform centres; overlaps and border cuts allowed.
``separated``
    No two exact boxes have an IoU above ``objects.max_iou`` (0: no overlap of
    positive area).  Candidates are checked against a uniform grid of cells
    (each placed box is listed in every cell it meets), so a check costs the
    number of nearby boxes, not the number placed.  Each object gets at most
    ``objects.attempts`` candidate centres; what does not fit is left out and
    counted (``no_room``), so a crowded request ends, never hangs.
``pairs``
    Objects ``2k`` and ``2k + 1`` form a pair whose boxes have an IoU drawn
    from ``objects.pair_iou``; the offset between them is solved in closed
    form (:func:`pair_offset`).  Pairs (and a last single object) are then
    kept apart like ``separated`` boxes, using their union boxes.
``grid``
    A regular lattice of pitch ``objects.grid_pitch`` px (0: the largest
    square pitch that holds every object), centred on the canvas, each centre
    moved by up to ``objects.grid_jitter`` pitches along each axis.
``clusters``
    A few centres (``objects.clusters``), objects spread around them with a
    normal offset whose standard deviation is drawn from
    ``objects.cluster_spread`` px per cluster.

Boxes are kept inside the canvas whenever they fit (``separated``, ``pairs``),
so clipping never changes the boxes whose overlap was controlled.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "Placement",
    "scatter",
    "separated",
    "pairs",
    "grid",
    "clusters",
    "pair_offset",
    "pair_max_iou",
    "place",
]


@dataclass(frozen=True, slots=True)
class Placement:
    """Result of a placement strategy.

    Attributes
    ----------
    centres : ndarray of shape (N, 2)
        ``(x, y)`` centre of each placed object, pixels.
    index : ndarray of shape (N,)
        Which of the requested objects each centre belongs to, increasing (a
        strategy may place fewer than requested).
    info : dict
        JSON-able facts about the placement: ``layout``, ``requested``,
        ``placed``, ``no_room`` (requested objects that did not fit).
    facts : tuple of dict
        Per placed object (aligned with ``index``), JSON-able facts the
        strategy fixed, e.g. ``pair_id``; empty dicts when there are none.
    """

    centres: np.ndarray
    index: np.ndarray
    info: dict = field(default_factory=dict)
    facts: tuple = ()


def _summary(layout: str, requested: int, placed: int, **extra) -> dict:
    return {"layout": layout, "requested": requested, "placed": placed, "no_room": requested - placed, **extra}


def _centre_bounds(half: np.ndarray, extent: float) -> tuple[np.ndarray, np.ndarray]:
    """Range of centres keeping a box of half-extent ``half`` inside ``[0, extent]``.

    A box longer than the canvas gets the centres for which it covers the
    whole side.
    """
    a, b = half, extent - half
    return np.minimum(a, b), np.maximum(a, b)


def scatter(half_extents: np.ndarray, width: int, height: int, *, rng: np.random.Generator) -> Placement:
    """Independent uniform centres over the canvas; overlaps and border cuts allowed.

    Parameters
    ----------
    half_extents : ndarray of shape (N, 2)
        Half width and half height of each object's box, pixels (unused: a
        centre anywhere on the canvas keeps part of every object visible).
    width, height : int
        Canvas size, pixels.
    rng : numpy.random.Generator
    """
    n = len(half_extents)
    centres = np.empty((n, 2), dtype=np.float64)
    centres[:, 0] = rng.uniform(0.0, width, size=n)
    centres[:, 1] = rng.uniform(0.0, height, size=n)
    return Placement(centres=centres, index=np.arange(n))


#: Candidate centres drawn at a time by :func:`separated`.
_BLOCK = 8


class _BoxGrid:
    """Uniform grid of square cells listing the boxes that meet each cell.

    For ``max_iou == 0`` it also keeps a finer raster of the cells that lie
    wholly inside a placed box: a candidate whose centre falls in one surely
    overlaps that box, which settles most candidates on a crowded canvas
    without looking at any box.
    """

    def __init__(self, cell: float, width: float, height: float, exclusive: bool):
        self.cell = float(cell)
        self.cells: dict[tuple[int, int], list[int]] = {}
        self.boxes: list[tuple[float, float, float, float]] = []
        self.fine = max(1.0, self.cell / 4.0)
        self.covered = (
            np.zeros((int(height // self.fine) + 2, int(width // self.fine) + 2), dtype=bool) if exclusive else None
        )

    def _span(self, x0, y0, x1, y1):
        g = self.cell
        return int(math.floor(x0 / g)), int(math.floor(y0 / g)), int(math.floor(x1 / g)), int(math.floor(y1 / g))

    def fits(self, box, max_iou: float) -> bool:
        """True when ``box`` has IoU <= max_iou (intersection 0 when max_iou is 0) with every listed box."""
        x0, y0, x1, y1 = box
        if self.covered is not None:
            r, c = int((y0 + y1) / 2.0 // self.fine), int((x0 + x1) / 2.0 // self.fine)
            if 0 <= r < self.covered.shape[0] and 0 <= c < self.covered.shape[1] and self.covered[r, c]:
                return False
        area = (x1 - x0) * (y1 - y0)
        i0, j0, i1, j1 = self._span(x0, y0, x1, y1)
        seen = set()
        cells, boxes = self.cells, self.boxes
        for i in range(i0, i1 + 1):
            for j in range(j0, j1 + 1):
                for k in cells.get((i, j), ()):
                    if k in seen:
                        continue
                    seen.add(k)
                    a0, b0, a1, b1 = boxes[k]
                    w = min(x1, a1) - max(x0, a0)
                    h = min(y1, b1) - max(y0, b0)
                    if w <= 0 or h <= 0:
                        continue
                    inter = w * h
                    if max_iou <= 0:
                        return False
                    if inter > max_iou * (area + (a1 - a0) * (b1 - b0) - inter):
                        return False
        return True

    def add(self, box) -> None:
        k = len(self.boxes)
        self.boxes.append(tuple(box))
        x0, y0, x1, y1 = box
        i0, j0, i1, j1 = self._span(x0, y0, x1, y1)
        for i in range(i0, i1 + 1):
            for j in range(j0, j1 + 1):
                self.cells.setdefault((i, j), []).append(k)
        if self.covered is not None:
            f = self.fine
            # Fine cells [c f, (c + 1) f) wholly inside the box (clamped to the raster).
            c0, c1 = max(0, math.ceil(x0 / f)), max(0, math.floor(x1 / f))
            r0, r1 = max(0, math.ceil(y0 / f)), max(0, math.floor(y1 / f))
            if c1 > c0 and r1 > r0:
                self.covered[r0:r1, c0:c1] = True


def _separate(
    half_extents: np.ndarray, width: int, height: int, max_iou: float, attempts: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Place boxes, biggest first, each at the first of ``attempts`` random centres that fits.

    Returns the placed indices (increasing) and their centres (M, 2).
    """
    n = len(half_extents)
    if n == 0:
        return np.zeros(0, dtype=np.int64), np.zeros((0, 2))
    half = np.asarray(half_extents, dtype=np.float64)
    # Cells about the size of a typical box: a box meets few cells and a cell holds few boxes.
    cell = max(1.0, float(np.median(2.0 * half.max(axis=1))))
    index = _BoxGrid(cell, float(width), float(height), exclusive=max_iou <= 0)
    xlo, xhi = _centre_bounds(half[:, 0], float(width))
    ylo, yhi = _centre_bounds(half[:, 1], float(height))
    order = np.argsort(-(half[:, 0] * half[:, 1]), kind="stable")
    centres = np.full((n, 2), np.nan)
    for i in order.tolist():
        hw, hh = float(half[i, 0]), float(half[i, 1])
        tried = 0
        while tried < attempts and np.isnan(centres[i, 0]):
            # Candidates come in small blocks: most objects fit at the first try.
            m = min(_BLOCK, attempts - tried)
            tried += m
            u = rng.random(size=(m, 2))
            xs = (xlo[i] + u[:, 0] * (xhi[i] - xlo[i])).tolist()
            ys = (ylo[i] + u[:, 1] * (yhi[i] - ylo[i])).tolist()
            for x, y in zip(xs, ys):
                box = (x - hw, y - hh, x + hw, y + hh)
                if index.fits(box, max_iou):
                    index.add(box)
                    centres[i] = (x, y)
                    break
    placed = np.flatnonzero(~np.isnan(centres[:, 0]))
    return placed, centres[placed]


def separated(
    half_extents: np.ndarray,
    width: int,
    height: int,
    *,
    max_iou: float = 0.0,
    attempts: int = 100,
    rng: np.random.Generator,
) -> Placement:
    """Centres such that no two exact boxes overlap with an IoU above ``max_iou``.

    Parameters
    ----------
    half_extents : ndarray of shape (N, 2)
        Half width and half height of each object's box, pixels.
    width, height : int
        Canvas size, pixels.
    max_iou : float
        Largest allowed box IoU of any two placed objects, in [0, 1]; 0 allows
        touching boxes only.
    attempts : int
        Random candidate centres tried per object before it is left out.
    rng : numpy.random.Generator
        Candidates are drawn in blocks of 8 centres as needed.

    Returns
    -------
    Placement
        ``info["no_room"]`` counts the objects left out.  Boxes lie inside the
        canvas when they fit in it.

    Examples
    --------
    >>> p = separated(np.full((3, 2), 5.0), 100, 100, rng=np.random.default_rng(0))
    >>> p.info["placed"], p.info["no_room"]
    (3, 0)
    """
    placed, centres = _separate(half_extents, width, height, float(max_iou), int(attempts), rng)
    n = len(half_extents)
    return Placement(
        centres=centres, index=placed, info=_summary("separated", n, len(placed)),
        facts=tuple({} for _ in placed),
    )


# --------------------------------------------------------------------------- pairs


def pair_max_iou(half_a, half_b) -> float:
    """Largest IoU two axis-aligned boxes can reach with their centres on a common axis line.

    Nesting the shorter extents in the longer ones gives intersection
    ``min(wa, wb) * min(ha, hb)``.

    Parameters
    ----------
    half_a, half_b : array_like of shape (2,)
        Half width and half height of each box, px.

    Examples
    --------
    >>> pair_max_iou((2.0, 1.0), (2.0, 1.0))
    1.0
    >>> pair_max_iou((1.0, 1.0), (2.0, 2.0))  # a 2x2 box inside a 4x4 one: 4 / 16
    0.25
    """
    wa, ha = 2.0 * float(half_a[0]), 2.0 * float(half_a[1])
    wb, hb = 2.0 * float(half_b[0]), 2.0 * float(half_b[1])
    inter = min(wa, wb) * min(ha, hb)
    return inter / (wa * ha + wb * hb - inter)


def pair_offset(half_a, half_b, iou: float, axis: int) -> float:
    """Centre distance along ``axis`` giving two boxes the box IoU ``iou``.

    The boxes share their centre coordinate on the other axis, so their overlap
    across ``axis`` is the smaller of their extents there, and the overlap
    along ``axis`` is solved from ``I = iou * (A + B) / (1 + iou)``.  For equal
    boxes of width ``w`` offset along x this is ``d = w (1 - t) / (1 + t)``.

    Parameters
    ----------
    half_a, half_b : array_like of shape (2,)
        Half width and half height of each box, px.
    iou : float
        Target IoU in (0, 1].
    axis : {0, 1}
        0 offsets along x, 1 along y.

    Returns
    -------
    float
        Distance between the centres, px, >= 0; NaN when ``iou`` cannot be
        reached along this axis.

    Examples
    --------
    >>> pair_offset((5.0, 2.0), (5.0, 2.0), 1 / 3, axis=0)  # (w - d) / (w + d) = 1/3 with w = 10
    5.0
    """
    ext_a = 2.0 * np.asarray(half_a, dtype=np.float64)
    ext_b = 2.0 * np.asarray(half_b, dtype=np.float64)
    a, b = float(ext_a[axis]), float(ext_b[axis])
    across = min(float(ext_a[1 - axis]), float(ext_b[1 - axis]))
    inter = iou * (a * float(ext_a[1 - axis]) + b * float(ext_b[1 - axis])) / (1.0 + iou)
    along = inter / across
    shorter = min(a, b)
    if along > shorter * (1.0 + 1e-12):
        return float("nan")
    if along >= shorter:
        return abs(a - b) / 2.0
    return (a + b) / 2.0 - along


def pairs(
    half_extents: np.ndarray,
    width: int,
    height: int,
    *,
    pair_iou: tuple[float, float] = (0.3, 0.7),
    max_iou: float = 0.0,
    attempts: int = 100,
    rng: np.random.Generator,
) -> Placement:
    """Objects two by two, each pair's boxes overlapping with an IoU drawn from ``pair_iou``.

    Pair ``k`` is objects ``2k`` and ``2k + 1``; an odd last object stays
    single.  Each pair's IoU ``t`` is uniform in ``pair_iou`` (cut to what the
    two boxes can reach, :func:`pair_max_iou`), the axis and side of the offset
    are random, and the offset is :func:`pair_offset`.  Pairs are then placed
    like :func:`separated` boxes using their union boxes, so two pairs overlap
    by at most ``max_iou``.

    Returns
    -------
    Placement
        ``facts`` give ``pair_id`` (k) and ``pair_target`` (t) for the
        members of a pair; ``info["no_room"]`` counts the objects left out.

    Examples
    --------
    >>> p = pairs(np.full((2, 2), 4.0), 64, 64, pair_iou=(0.5, 0.5), rng=np.random.default_rng(1))
    >>> from synthgen.geometry import pairwise_iou
    >>> boxes = np.hstack([p.centres - 4.0, p.centres + 4.0])
    >>> round(float(pairwise_iou(boxes[:1], boxes[1:])[0, 0]), 12)
    0.5
    """
    half = np.asarray(half_extents, dtype=np.float64).reshape(-1, 2)
    n = len(half)
    n_pairs = n // 2
    lo, hi = float(pair_iou[0]), float(pair_iou[1])
    draws = rng.random(size=(max(n_pairs, 0), 3))  # IoU, axis, side
    members: list[list[int]] = []
    offsets: list[np.ndarray] = []  # centre of each member relative to the unit's box centre
    unit_half = []
    targets = []
    for k in range(n_pairs):
        a, b = 2 * k, 2 * k + 1
        top = min(hi, pair_max_iou(half[a], half[b]))
        t = lo + draws[k, 0] * (top - lo) if top >= lo else top
        axis = int(draws[k, 1] < 0.5)
        d = pair_offset(half[a], half[b], t, axis)
        if not math.isfinite(d):
            axis = 1 - axis
            d = pair_offset(half[a], half[b], t, axis)
        sign = 1.0 if draws[k, 2] < 0.5 else -1.0
        cb = np.zeros(2)
        cb[axis] = sign * d
        lo_xy = np.minimum(-half[a], cb - half[b])
        hi_xy = np.maximum(half[a], cb + half[b])
        mid = (lo_xy + hi_xy) / 2.0
        members.append([a, b])
        offsets.append(np.stack([-mid, cb - mid]))
        unit_half.append((hi_xy - lo_xy) / 2.0)
        targets.append(t)
    if n % 2:
        members.append([n - 1])
        offsets.append(np.zeros((1, 2)))
        unit_half.append(half[n - 1])
        targets.append(None)
    placed_units, unit_centres = _separate(
        np.array(unit_half, dtype=np.float64).reshape(-1, 2), width, height, float(max_iou), int(attempts), rng
    )
    idx, cen, facts = [], [], []
    for u, c in zip(placed_units, unit_centres):
        for m, off in zip(members[u], offsets[u]):
            idx.append(m)
            cen.append(c + off)
            facts.append({} if targets[u] is None else {"pair_id": int(u), "pair_target": float(targets[u])})
    order = np.argsort(np.array(idx, dtype=np.int64), kind="stable")
    index = np.array(idx, dtype=np.int64)[order]
    centres = np.array(cen, dtype=np.float64).reshape(-1, 2)[order]
    return Placement(
        centres=centres, index=index, info=_summary("pairs", n, len(index), pairs=n_pairs),
        facts=tuple(facts[i] for i in order),
    )


# --------------------------------------------------------------------------- grid and clusters


def _auto_pitch(n: int, width: int, height: int) -> float:
    """Largest square pitch whose lattice on the canvas has at least ``n`` cells."""
    if n <= 1:
        return float(min(width, height))
    p = math.sqrt(width * height / n)
    while p > 1e-6 and max(1, math.floor(width / p)) * max(1, math.floor(height / p)) < n:
        p *= 0.99
    return p


def grid(
    half_extents: np.ndarray,
    width: int,
    height: int,
    *,
    pitch: float = 0.0,
    jitter: float = 0.0,
    rng: np.random.Generator,
) -> Placement:
    """Centres on a square lattice, for dense counting-style scenes.

    Parameters
    ----------
    half_extents : ndarray of shape (N, 2)
        Only N is used.
    width, height : int
        Canvas size, pixels.
    pitch : float
        Lattice spacing, px; 0 picks the largest pitch with at least N cells.
    jitter : float
        Largest move of a centre along each axis, as a fraction of the pitch,
        in [0, 0.5].
    rng : numpy.random.Generator

    Returns
    -------
    Placement
        When there are more objects than cells, the extra ones are left out
        (``no_room``); otherwise a random choice of cells is filled, in
        row-major order.  ``facts`` give each object's ``grid_row`` and
        ``grid_col``.

    Examples
    --------
    >>> grid(np.ones((4, 2)), 20, 20, rng=np.random.default_rng(0)).centres.tolist()
    [[5.0, 5.0], [15.0, 5.0], [5.0, 15.0], [15.0, 15.0]]
    """
    n = len(half_extents)
    p = float(pitch) if pitch > 0 else _auto_pitch(n, width, height)
    ncols = max(1, math.floor(width / p))
    nrows = max(1, math.floor(height / p))
    cells = ncols * nrows
    x0 = (width - ncols * p) / 2.0
    y0 = (height - nrows * p) / 2.0
    m = min(n, cells)
    chosen = np.sort(rng.permutation(cells)[:m]) if m < cells else np.arange(cells)[:m]
    r, c = np.divmod(chosen, ncols)
    centres = np.empty((m, 2), dtype=np.float64)
    centres[:, 0] = x0 + (c + 0.5) * p
    centres[:, 1] = y0 + (r + 0.5) * p
    if jitter > 0:
        centres += rng.uniform(-jitter, jitter, size=(m, 2)) * p
    return Placement(
        centres=centres, index=np.arange(m), info=_summary("grid", n, m, pitch=p, cells=cells),
        facts=tuple({"grid_row": int(a), "grid_col": int(b)} for a, b in zip(r, c)),
    )


def clusters(
    half_extents: np.ndarray,
    width: int,
    height: int,
    *,
    clusters: tuple[int, int] = (2, 5),
    spread: tuple[float, float] = (8.0, 40.0),
    rng: np.random.Generator,
) -> Placement:
    """Centres gathered around a few cluster centres.

    Cluster centres are uniform on the canvas; each object joins a random
    cluster and lies at a normal offset from its centre, with a per-cluster
    standard deviation uniform in ``spread`` px; centres are kept on the canvas.

    Returns
    -------
    Placement
        ``facts`` give each object's ``cluster``.

    Examples
    --------
    >>> p = clusters(np.ones((50, 2)), 200, 100, clusters=(1, 1), spread=(0.0, 0.0), rng=np.random.default_rng(0))
    >>> bool(np.all(p.centres == p.centres[0]))
    True
    """
    n = len(half_extents)
    k = int(rng.integers(clusters[0], clusters[1] + 1))
    heads = rng.uniform(size=(k, 2)) * (width, height)
    sd = rng.uniform(spread[0], spread[1], size=k)
    member = rng.integers(0, k, size=n)
    offs = rng.standard_normal(size=(n, 2))
    centres = heads[member] + offs * sd[member, None]
    centres[:, 0] = np.clip(centres[:, 0], 0.0, np.nextafter(float(width), 0.0))
    centres[:, 1] = np.clip(centres[:, 1], 0.0, np.nextafter(float(height), 0.0))
    return Placement(
        centres=centres, index=np.arange(n), info=_summary("clusters", n, n, clusters=k),
        facts=tuple({"cluster": int(m)} for m in member),
    )


def place(layout: str, half_extents: np.ndarray, width: int, height: int, spec, *, rng: np.random.Generator) -> Placement:
    """Run the placement strategy named ``layout`` with the keys of ``spec`` (an ObjectSpec)."""
    if layout == "scatter":
        return scatter(half_extents, width, height, rng=rng)
    if layout == "separated":
        return separated(half_extents, width, height, max_iou=spec.max_iou, attempts=spec.attempts, rng=rng)
    if layout == "pairs":
        return pairs(
            half_extents, width, height, pair_iou=spec.pair_iou, max_iou=spec.max_iou,
            attempts=spec.attempts, rng=rng,
        )
    if layout == "grid":
        return grid(half_extents, width, height, pitch=spec.grid_pitch, jitter=spec.grid_jitter, rng=rng)
    if layout == "clusters":
        return clusters(
            half_extents, width, height, clusters=spec.clusters, spread=spec.cluster_spread, rng=rng
        )
    raise ValueError(f"unknown layout {layout!r}")
