"""Clutter: unlabelled distractor marks drawn on the background, under the objects.

Marks are never annotated; they make the background harder to tell from the
objects.  Each mark is anti-aliased with the same supersampled coverage as the
objects (:func:`synthgen.scene.coverage.coverage`) and blended with a flat or noisy
colour:

* ``line`` -- a straight segment 1 to 3 px thick (a thin rotated rectangle);
* ``blob`` -- three to five overlapping ellipses in one colour, an irregular patch;
* ``texture`` -- an ellipse filled with value noise between two colours;
* ``similar`` marks (a share ``clutter.similar`` of all marks) -- one of the
  labelled shape kinds cut by a straight line so that only part of it is left
  (roughly a third to two thirds of it): a hard negative that looks like an
  object but is not a whole one.

Marks are placed uniformly over the canvas and may be cut by its border.
"""

from __future__ import annotations

import math

import numpy as np

from synthgen.scene.backgrounds import value_noise
from synthgen.scene.coverage import coverage
from synthgen.scene.raster import blend
from synthgen.scene.shapes import Shape

__all__ = ["render_clutter", "MARK_KINDS"]

#: Kinds of marks as recorded in an image's ``clutter`` info.
MARK_KINDS = ("line", "blob", "texture", "similar")


def _blend(canvas: np.ndarray, cov, fill: np.ndarray, keep: np.ndarray | None = None) -> None:
    """Blend ``fill`` (h, w, 3) into ``canvas`` (modified) with the coverage patch ``cov``."""
    v = cov.values if keep is None else cov.values * keep
    h, w = v.shape
    rows = slice(cov.row0, cov.row0 + h)
    cols = slice(cov.col0, cov.col0 + w)
    canvas[rows, cols] = blend(canvas[rows, cols], fill, v)


def _flat(colour, h: int, w: int) -> np.ndarray:
    out = np.empty((h, w, 3), dtype=np.float32)
    out[...] = np.asarray(colour, dtype=np.float32)
    return out


def _line(canvas, size, rng, samples):
    height, width = canvas.shape[:2]
    thick = float(rng.uniform(1.0, 3.0))
    length = max(float(size), thick * 1.01)
    x, y = rng.uniform(0, width), rng.uniform(0, height)
    colour = rng.uniform(0, 255, size=3)
    angle = float(rng.uniform(0, 180))
    # Shape.size is the longer side of the rotated box; choose it so the segment is length x thick.
    c, s = abs(math.cos(math.radians(angle))), abs(math.sin(math.radians(angle)))
    box_long = max(length * c + thick * s, length * s + thick * c)
    shape = Shape("rectangle", x, y, box_long, aspect=length / thick, angle=angle)
    cov = coverage(shape, height, width, samples=samples)
    if cov is not None:
        _blend(canvas, cov, _flat(colour, *cov.values.shape))


def _blob(canvas, size, rng, samples):
    height, width = canvas.shape[:2]
    k = int(rng.integers(3, 6))
    x, y = rng.uniform(0, width), rng.uniform(0, height)
    colour = rng.uniform(0, 255, size=3)
    parts = rng.uniform(size=(k, 4))
    for u in parts:
        dx, dy = (u[0] - 0.5) * size * 0.5, (u[1] - 0.5) * size * 0.5
        shape = Shape("ellipse", x + dx, y + dy, max(size * (0.35 + 0.4 * u[2]), 0.5),
                      aspect=0.5 + u[3], angle=float(360 * u[2]))
        cov = coverage(shape, height, width, samples=samples)
        if cov is not None:
            _blend(canvas, cov, _flat(colour, *cov.values.shape))


def _texture(canvas, size, rng, samples):
    height, width = canvas.shape[:2]
    x, y = rng.uniform(0, width), rng.uniform(0, height)
    colours = rng.uniform(0, 255, size=(2, 3)).astype(np.float32)
    shape = Shape("ellipse", x, y, size, aspect=float(rng.uniform(0.5, 2.0)), angle=float(rng.uniform(0, 180)))
    n_rng = rng.spawn(1)[0]
    cov = coverage(shape, height, width, samples=samples)
    if cov is None:
        return
    h, w = cov.values.shape
    t = value_noise(h, w, octaves=3, persistence=0.5, scale=max(2.0, size / 4.0), rng=n_rng)
    t = np.clip(0.5 + 0.5 * t, 0.0, 1.0)[..., None]
    fill = colours[0] + t * (colours[1] - colours[0])
    _blend(canvas, cov, fill.astype(np.float32))


def _similar(canvas, size, kinds, rng, samples):
    height, width = canvas.shape[:2]
    kind = kinds[int(rng.integers(len(kinds)))]
    x, y = rng.uniform(0, width), rng.uniform(0, height)
    colour = rng.uniform(0, 255, size=3)
    angle = float(rng.uniform(0, 360))
    shape = Shape(kind, x, y, size, aspect=float(np.exp(rng.uniform(np.log(0.6), np.log(1.6)))), angle=angle,
                  sides=int(rng.integers(3, 9)), inner=float(rng.uniform(0.35, 0.65)))
    cut = math.radians(float(rng.uniform(0, 360)))
    offset = float(rng.uniform(-0.2, 0.15)) * size  # signed distance of the cut from the centre
    cov = coverage(shape, height, width, samples=samples)
    if cov is None:
        return
    h, w = cov.values.shape
    xc = np.arange(cov.col0, cov.col0 + w, dtype=np.float64) + 0.5
    yc = np.arange(cov.row0, cov.row0 + h, dtype=np.float64) + 0.5
    dist = math.cos(cut) * (xc[None, :] - x) + math.sin(cut) * (yc[:, None] - y) - offset  # (h, w), px
    keep = np.clip(0.5 - dist, 0.0, 1.0).astype(np.float32)  # kept side, anti-aliased over one pixel
    _blend(canvas, cov, _flat(colour, h, w), keep)


def render_clutter(
    canvas: np.ndarray, spec, kinds, *, samples: int = 4, rng: np.random.Generator
) -> tuple[np.ndarray, dict]:
    """Draw a ``clutter`` spec's marks on a copy of ``canvas``.

    Parameters
    ----------
    canvas : ndarray of shape (H, W, 3), uint8
        Background; not modified.
    spec : synthgen.config.ClutterSpec
        ``count``, ``similar``, ``size`` and ``marks``.
    kinds : sequence of str
        Labelled shape kinds that ``similar`` marks imitate (``objects.shapes``).
    samples : int
        Supersampling factor for the marks' anti-aliasing.
    rng : numpy.random.Generator

    Returns
    -------
    image : ndarray of shape (H, W, 3), uint8
    info : dict
        ``{"marks": n, "line": .., "blob": .., "texture": .., "similar": ..}``
        counts of the marks drawn.

    Examples
    --------
    >>> from synthgen.config import ClutterSpec
    >>> img = np.full((32, 32, 3), 128, np.uint8)
    >>> out, info = render_clutter(img, ClutterSpec(count=(5, 5)), ["star"], rng=np.random.default_rng(0))
    >>> info["marks"], out.shape, bool((out != img).any())
    (5, (32, 32, 3), True)
    """
    counts = {k: 0 for k in MARK_KINDS}
    n = int(rng.integers(spec.count[0], spec.count[1] + 1))
    image = np.array(canvas, dtype=np.uint8, copy=True)  # a copy even with no marks, as documented
    if n == 0:
        return image, {"marks": 0, **counts}
    lo, hi = spec.size
    is_similar = rng.random(size=n) < spec.similar
    which = rng.integers(0, len(spec.marks), size=n)
    sizes = np.exp(rng.uniform(math.log(lo), math.log(hi), size=n))
    for i in range(n):
        size = float(sizes[i])
        if is_similar[i]:
            kind = "similar"
            _similar(image, size, kinds, rng, samples)
        else:
            kind = spec.marks[int(which[i])]
            {"line": _line, "blob": _blob, "texture": _texture}[kind](image, size, rng, samples)
        counts[kind] += 1
    return image, {"marks": n, **counts}
