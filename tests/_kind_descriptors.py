"""Shape descriptors measured by scikit-image, and a nearest-centroid classifier over them.

The outside reference for "kinds are told apart by their pixels" (tests/test_kinds.py) and for
the measurement behind synthgen.scene.kinds.IDENTIFIABLE_BREADTH (tools/measure_identifiable.py).
Each object is rendered alone (synthgen.scene.shapes.coverage) and described by scikit-image:

* ``skimage.measure.regionprops``: the holes of the pixels the object touches at all
  (``image_filled``), so that even a thin outline encloses its hole; the share of the
  silhouette's coverage that the holes take (as its square root: a ring's hole ratio); and
  the solidity (``area / area_convex``) of the pixels at least half covered once the holes
  are filled;
* ``skimage.measure.moments_central`` (to order 8) of the coverage with the holes filled: the
  silhouette is whitened by its second moments (which undoes any stretch and rotation), then
  described by how much of its moment ellipse it fills, its radial spread, and the strength
  of its 3-fold, 4-fold and 5- to 8-fold symmetric parts (``|E z^k|`` of the whitened
  ``z = x + i y``).

All seven are unchanged by moving, scaling, rotating or stretching a continuous shape, so what
moves them is the kind, its own parameters, and the pixels.  The classifier standardizes each
descriptor over the training set and gives each sample the label of the nearest class mean.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from skimage.measure import moments_central, regionprops
from skimage.morphology import dilation

from synthgen.scene import kinds
from synthgen.scene.coverage import coverage
from synthgen.scene.shapes import KINDS, Shape, exact_box, natural_aspect

#: Names of the descriptors, in order.
NAMES = ("solidity", "holes", "ellipse_fill", "radial", "fold3", "fold4", "fold5to8")


_COUNTS = {"polygon": kinds.SIDES, "star": kinds.POINTS}
_HALVES = {"ring": kinds.RING_HOLE, "cross": kinds.CROSS_BAR}


def classes() -> list[tuple[str, bool, int]]:
    """Classes ``(kind, outline-only, part)``: a part is a side or point count, or the lower (0) or upper (1)
    half of a ring's hole or a cross's bar range; rings are never outline-only."""
    out = []
    for outline in (False, True):
        for kind in KINDS:
            if kind == "ring" and outline:
                continue
            if kind in _COUNTS:
                out += [(kind, outline, n) for n in range(_COUNTS[kind][0], _COUNTS[kind][1] + 1)]
            else:
                out += [(kind, outline, part) for part in ((0, 1) if kind in _HALVES else (0,))]
    return out


def sample(cls, b: float, rng: np.random.Generator):
    """A random object of class ``cls`` (see :func:`classes`) with breadth ``b`` px: ``(shape, stroke)``.

    Aspect log-uniform in ``kinds.MEASURED_ASPECT`` times the kind's natural one, any rotation,
    random sub-pixel position; an outline band log-uniform from ``kinds.MEASURED_STROKE`` to
    ``kinds.OUTLINE_SHARE`` of the breadth.
    """
    kind, outline, part = cls
    sides = part if kind in _COUNTS else 5
    inner = 0.5
    if kind == "star":
        inner = float(rng.uniform(*kinds.STAR_INNER))
    elif kind in _HALVES:
        lo, hi = _HALVES[kind]
        mid = (lo + hi) / 2.0
        inner = float(rng.uniform(lo, mid) if part == 0 else rng.uniform(mid, hi))
    lo, hi = kinds.MEASURED_ASPECT
    aspect = math.exp(rng.uniform(math.log(lo), math.log(hi))) * natural_aspect(kind, sides, inner)
    angle = float(rng.uniform(0.0, 360.0))
    size = 10.0 * b / kinds.breadth(Shape(kind, 0.0, 0.0, 10.0, aspect, angle, sides, inner))  # breadth ~ size
    shape = Shape(kind, float(rng.uniform(0, 1)), float(rng.uniform(0, 1)), size, aspect, angle, sides, inner)
    stroke = 0.0
    if outline:
        top = kinds.OUTLINE_SHARE * b
        stroke = float(math.exp(rng.uniform(math.log(kinds.MEASURED_STROKE), math.log(top))))
    return shape, stroke


def render(shape, stroke: float = 0.0, samples: int = 4) -> np.ndarray:
    """Coverage of ``shape`` alone, float (H, W), on a canvas with a 2 px margin around its box."""
    x0, y0, x1, y1 = exact_box(shape)
    w, h = int(math.ceil(x1 - math.floor(x0))) + 4, int(math.ceil(y1 - math.floor(y0))) + 4
    # moved by whole pixels, so that the sub-pixel phase of the shape stays as it was
    moved = replace(shape, cx=shape.cx - math.floor(x0) + 2.0, cy=shape.cy - math.floor(y0) + 2.0)
    cov = coverage(moved, h, w, samples=samples, stroke=stroke)
    out = np.zeros((h, w))
    if cov is not None:
        ph, pw = cov.values.shape
        out[cov.row0 : cov.row0 + ph, cov.col0 : cov.col0 + pw] = cov.values
    return out


def descriptors(image: np.ndarray) -> np.ndarray:
    """The seven descriptors of :data:`NAMES` for one object's coverage ``image`` (H, W)."""
    touched = image > 0  # every pixel the object touches: a thin outline stays closed
    (region,) = regionprops(touched.astype(np.uint8))  # reference: scikit-image regionprops
    inside = np.zeros_like(touched)
    r0, c0, r1, c1 = region.bbox
    inside[r0:r1, c0:c1] = region.image_filled
    # a pixel next to the outside keeps its coverage (the outline's own edge); the others of the
    # silhouette, hole and inner edge of a band alike, count as covered
    edge = inside & dilation(~inside, footprint=np.ones((3, 3), bool))
    filled = np.where(inside & ~edge, 1.0, image)
    holes = math.sqrt(max(0.0, 1.0 - image.sum() / filled.sum()))
    (solid,) = regionprops((filled >= 0.5).astype(np.uint8))
    solidity = solid.area / solid.area_convex
    mu = moments_central(filled, order=8)  # reference: scikit-image; mu[p, q] sums drow^p dcol^q
    m00 = mu[0, 0]

    def m(px: int, py: int) -> float:  # central moment of x^px y^py (x = column, y = row), per unit mass
        return mu[py, px] / m00

    cov = np.array([[m(2, 0), m(1, 1)], [m(1, 1), m(0, 2)]])
    ev, vec = np.linalg.eigh(cov)
    whiten = vec @ np.diag(ev**-0.5) @ vec.T  # symmetric inverse square root
    ellipse_fill = m00 / (4.0 * math.pi * math.sqrt(np.linalg.det(cov)))
    inv = np.linalg.inv(cov)
    a, b, c = inv[0, 0], inv[0, 1], inv[1, 1]
    # E |z|^4 with |z|^2 = a x^2 + 2 b x y + c y^2
    radial = (a * a * m(4, 0) + 4 * a * b * m(3, 1) + (4 * b * b + 2 * a * c) * m(2, 2) + 4 * b * c * m(1, 3)
              + c * c * m(0, 4)) / 4.0
    alpha = complex(whiten[0, 0], whiten[1, 0])  # z = alpha x + beta y
    beta = complex(whiten[0, 1], whiten[1, 1])

    def fold(k: int) -> float:
        e = sum(math.comb(k, j) * alpha**j * beta ** (k - j) * m(j, k - j) for j in range(k + 1))
        return abs(e) / 2.0 ** (k / 2.0)

    # how thin a band is says nothing of the kind: holes beyond 0.8 count as 0.8; symmetric parts
    # on a log scale, so that a star's strong ones do not swamp a polygon's weak ones
    folds = [math.log(_FLOOR + v) for v in (fold(3), fold(4), max(fold(k) for k in range(5, 9)))]
    return np.array([solidity, min(holes, 0.8), ellipse_fill, radial, *folds])


#: Added to the symmetric parts before their logarithm (about what a disc's pixels give).
_FLOOR = 0.02


class NearestCentroid:
    """Label of the nearest class mean, on descriptors standardized over the training set."""

    def fit(self, x: np.ndarray, labels) -> NearestCentroid:
        x = np.asarray(x, dtype=np.float64)
        self.labels = sorted(set(labels))
        self.mean = x.mean(axis=0)
        self.scale = x.std(axis=0) + 1e-12
        z = (x - self.mean) / self.scale
        lab = np.array([self.labels.index(v) for v in labels])
        self.centroids = np.stack([z[lab == i].mean(axis=0) for i in range(len(self.labels))])
        return self

    def predict(self, x: np.ndarray) -> list:
        z = (np.asarray(x, dtype=np.float64) - self.mean) / self.scale
        d = ((z[:, None, :] - self.centroids[None, :, :]) ** 2).sum(axis=2)  # (N, classes)
        return [self.labels[i] for i in d.argmin(axis=1)]
