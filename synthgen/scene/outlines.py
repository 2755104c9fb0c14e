"""Each polygon kind's outline in its own frame: vertices, convex pieces, area and box size.

Every kind is drawn in its own frame, centred on its own tight box, with width
``aspect`` and height 1 (x right, y down); :mod:`synthgen.scene.shapes` then
rotates, scales and moves it, and builds the two curved kinds itself:

* ``rectangle``: ``[-aspect/2, aspect/2] x [-1/2, 1/2]``.
* ``ellipse``: semi-axes ``aspect/2`` (x) and ``1/2`` (y).
* ``triangle``: isosceles, apex up: ``(0, -1/2)``, ``(aspect/2, 1/2)``,
  ``(-aspect/2, 1/2)``.
* ``polygon``: the regular ``sides``-gon with one vertex straight up, stretched
  to width ``aspect`` and height 1 (so it is regular only when ``aspect``
  equals :func:`synthgen.scene.shapes.natural_aspect`).
* ``star``: ``sides`` points, outer radius 1 and inner radius ``inner``, one
  point straight up, stretched to ``aspect`` x 1 like the polygon.
* ``ring``: the ellipse with a concentric elliptical hole whose semi-axes are
  ``inner`` times the outer ones.
* ``cross``: the union of the bars ``[-aspect/2, aspect/2] x [-inner/2,
  inner/2]`` and ``[-inner*aspect/2, inner*aspect/2] x [-1/2, 1/2]``; each
  bar's thickness is ``inner`` times the length of the other bar.

The functions here give the polygon kinds in their natural frame (a regular
polygon of circumradius 1, a star of outer radius 1), which the caller
stretches to ``aspect`` x 1.  A convex piece is a set of half-planes
``nx * x + ny * y <= c`` with unit normals; the pieces together make up the shape.
:func:`own_frame` gives one shape's outline, :func:`own_frames` the outlines of
many shapes of one kind and side count as arrays over the shapes (the same
operations, element by element, so both give identical numbers).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from synthgen.scene.regions import ConvexRegion

__all__ = ["own_frame", "own_frames"]

@lru_cache(maxsize=64)
def _unit(kind: str, sides: int):
    """Own-frame geometry of a rectangle, triangle or regular polygon.

    Returns ``(verts (2, K), groups, area, ext_x, ext_y)``: the ring's vertices
    as columns; ``groups``, a tuple of ``(nx, ny, c)`` half-plane arrays of shape
    (P, E) (unit normals) whose convex pieces together make up the shape; its area
    and its box size.  The frame is the natural one (a polygon has circumradius
    1); :func:`_build` stretches it to width ``aspect`` and height 1.
    """
    if kind == "rectangle":
        v = np.array([[-0.5, -0.5], [0.5, -0.5], [0.5, 0.5], [-0.5, 0.5]])
        area = 1.0
    elif kind == "triangle":
        v = np.array([[0.0, -0.5], [0.5, 0.5], [-0.5, 0.5]])
        area = 0.5
    else:
        phi = 2.0 * np.pi * np.arange(sides) / sides
        v = np.stack([np.sin(phi), -np.cos(phi)], axis=1)
        area = sides * math.sin(2.0 * math.pi / sides) / 2.0  # n R^2 sin(2 pi / n) / 2
    hp = ConvexRegion.from_pieces(v[None, :, :])
    ext = v.max(axis=0) - v.min(axis=0)
    verts = np.ascontiguousarray(v.T)
    for arr in (verts, hp.nx, hp.ny, hp.c):
        arr.flags.writeable = False
    return verts, ((hp.nx, hp.ny, hp.c),), area, float(ext[0]), float(ext[1])


@lru_cache(maxsize=64)
def _star_table(sides: int):
    """Per-``sides`` constants of a star: vertex directions, parity and kite turns."""
    n2 = 2 * sides
    phi = np.pi * np.arange(n2) / sides
    dirs = np.stack([np.sin(phi), -np.cos(phi)])  # (2, 2n), point 0 straight up
    odd = np.arange(n2) % 2 == 1
    turn = 2.0 * np.pi * np.arange(sides) / sides
    for arr in (dirs, odd):
        arr.flags.writeable = False
    return dirs, odd, np.cos(turn)[:, None], np.sin(turn)[:, None]


def _star(sides: int, inner: float):
    """Own-frame geometry of a star (outer radius 1), in :func:`_unit`'s layout."""
    dirs, odd, ct, st = _star_table(sides)
    verts = dirs * np.where(odd, inner, 1.0)  # (2, 2n)
    lo = verts.min(axis=1)
    hi = verts.max(axis=1)
    # Kite 0 = (centre, inner vertex before, point straight up, inner vertex after);
    # its outward edge normals, in order, then the other kites turned about the centre.
    sa, ca = math.sin(math.pi / sides), math.cos(math.pi / sides)
    r = inner
    inv = 1.0 / math.hypot(1.0 - r * ca, r * sa)
    n0x = np.array([-ca, (r * ca - 1.0) * inv, (1.0 - r * ca) * inv, ca])
    n0y = np.array([sa, -r * sa * inv, -r * sa * inv, sa])
    c0 = np.array([0.0, r * sa * inv, r * sa * inv, 0.0])
    nx = ct * n0x - st * n0y  # (n, 4)
    ny = st * n0x + ct * n0y
    c = np.broadcast_to(c0, nx.shape)
    # The core n-gon through the inner vertices overlaps the kites along their
    # shared edges, so that no interior point sits on the edge of every piece
    # holding it (such points would needlessly count as boundary).
    core = (st.T, -ct.T, np.full((1, sides), r * ca))
    area = sides * inner * sa
    return verts, ((nx, ny, c), core), area, float(hi[0] - lo[0]), float(hi[1] - lo[1])


_CROSS_NX = np.array([[1.0, -1.0, 0.0, 0.0], [1.0, -1.0, 0.0, 0.0]])
_CROSS_NY = np.array([[0.0, 0.0, 1.0, -1.0], [0.0, 0.0, 1.0, -1.0]])


def _cross(inner: float):
    """Own-frame geometry of a cross (1 x 1), in :func:`_unit`'s layout."""
    h = inner / 2.0
    verts = np.array(
        [
            [-h, h, h, 0.5, 0.5, h, h, -h, -h, -0.5, -0.5, -h],
            [-0.5, -0.5, -h, -h, h, h, 0.5, 0.5, h, h, -h, -h],
        ]
    )
    c = np.array([[0.5, 0.5, h, h], [h, h, 0.5, 0.5]])  # horizontal bar, vertical bar
    return verts, ((_CROSS_NX, _CROSS_NY, c),), 2.0 * inner - inner * inner, 1.0, 1.0


def own_frame(kind: str, sides: int, inner: float):
    """One polygon-kind shape's own-frame geometry, in :func:`_unit`'s layout."""
    if kind == "star":
        return _star(sides, inner)
    if kind == "cross":
        return _cross(inner)
    return _unit(kind, sides if kind == "polygon" else 0)


def own_frames(kind: str, sides: int, shapes):
    """:func:`own_frame` for N shapes of one polygon kind and side count, as arrays over the shapes.

    Returns ``(verts, groups, area, ext_x, ext_y)``: ``verts`` (N, 2, K), or
    (2, K) shared by all; ``groups``, ``(nx, ny, c)`` half-plane arrays of shape
    (N, P, E); ``area`` (N,) or a float; ``ext_x``, ``ext_y`` (N,).
    """
    n = len(shapes)
    if kind == "star":
        return _star_group(sides, np.array([s.inner for s in shapes]))
    if kind == "cross":
        return _cross_group(np.array([s.inner for s in shapes]))
    verts, groups0, area0, ex0, ey0 = _unit(kind, sides)
    groups = tuple((g[0][None], g[1][None], g[2][None]) for g in groups0)
    return verts, groups, area0, np.full(n, ex0), np.full(n, ey0)


def _star_group(sides: int, r: np.ndarray):
    """:func:`_star` for stars of inner ratios ``r`` (N,), in :func:`own_frames`' layout."""
    n = len(r)
    dirs, odd, ct, st = _star_table(sides)
    verts = dirs * np.where(odd, r[:, None], 1.0)[:, None, :]  # (N, 2, 2n)
    ext = verts.max(axis=2) - verts.min(axis=2)  # (N, 2)
    ex, ey = ext[:, 0], ext[:, 1]
    sa, ca = math.sin(math.pi / sides), math.cos(math.pi / sides)
    rca, rsa = r * ca, r * sa
    inv = np.array([1.0 / math.hypot(a, b) for a, b in zip((1.0 - rca).tolist(), rsa.tolist())])
    n0x = np.stack([np.full(n, -ca), (rca - 1.0) * inv, (1.0 - rca) * inv, np.full(n, ca)], axis=1)[:, None, :]
    n0y = np.stack([np.full(n, sa), -r * sa * inv, -r * sa * inv, np.full(n, sa)], axis=1)[:, None, :]
    c0 = np.stack([np.zeros(n), rsa * inv, rsa * inv, np.zeros(n)], axis=1)[:, None, :]
    kites = (ct * n0x - st * n0y, st * n0x + ct * n0y, np.broadcast_to(c0, (n, sides, 4)))
    core = (
        np.broadcast_to(st.T, (n, 1, sides)),
        np.broadcast_to(-ct.T, (n, 1, sides)),
        np.broadcast_to(rca[:, None, None], (n, 1, sides)),
    )
    groups = (kites, core)
    area0 = sides * r * sa
    return verts, groups, area0, ex, ey


def _cross_group(r: np.ndarray):
    """:func:`_cross` for crosses of bar ratios ``r`` (N,), in :func:`own_frames`' layout."""
    n = len(r)
    h = r / 2.0
    half = np.full(n, 0.5)
    verts = np.stack(
        [
            np.stack([-h, h, h, half, half, h, h, -h, -h, -half, -half, -h], axis=1),
            np.stack([-half, -half, -h, -h, h, h, half, half, h, h, -h, -h], axis=1),
        ],
        axis=1,
    )  # (N, 2, 12)
    c = np.stack([np.stack([half, half, h, h], axis=1), np.stack([h, h, half, half], axis=1)], axis=1)
    groups = ((np.broadcast_to(_CROSS_NX, (n, 2, 4)), np.broadcast_to(_CROSS_NY, (n, 2, 4)), c),)
    area0 = 2.0 * r - r * r
    ex = ey = np.ones(n)
    return verts, groups, area0, ex, ey
