"""The reference detector: classical image processing, no download, no GPU, no learning framework.

What it does, per image (numpy and OpenCV only):

1. **Background.**  A quadratic surface per colour channel, fitted by least
   squares to the cells of a 1/8-scale copy and refitted on the cells it
   explains (five rounds), then corrected by a local median of what is left
   in the cells away from foreground (5 x 5 cells, about 40 px), so that
   smooth gradients, vignettes and slow value noise belong to the background.
2. **Foreground.**  A pixel is foreground when its largest channel difference
   from the background exceeds both ``min_contrast`` (a fraction of 255) and
   ``noise_k`` times the image's noise level (estimated from neighbour
   differences); on very noisy images (sigma above 8 grey levels) the
   difference is smoothed 3 x 3 first, and on noisy ones specks of one or two
   pixels barely above the threshold are dropped.
3. **Objects.**  8-connected components of the foreground; a component that
   is not convex enough is split at its distance-transform cores (two touching
   discs become two), each pixel going to the nearest core, when the parts
   look like kinds much better than the whole (a cross stays whole).
4. **Boxes.**  Each component's pixel box, each edge moved inwards by the
   uncovered part of its outermost row or column (coverage estimated as the
   pixel's difference over the component's typical difference), for
   sub-pixel edges.
5. **Kinds.**  Five descriptors of the silhouette after whitening it by its
   second moments (so stretch and rotation do not change them): solidity,
   share of holes, how much of its minimal enclosing circle and rectangle the
   convex hull fills, and the hull's inner over outer radius.  Class centroids (one per kind and style,
   filled or outline-only) and a pooled spread are fitted on a training set
   rendered by synthgen itself (:func:`fit_prototypes`, fixed seed, about a
   second, kept in memory per process); a detection gets the kinds within
   reach of a Gaussian nearest-centroid rule, at most three, the rule's
   spread widening as blobs shrink (a few pixels say little about shape).
6. **Scores.**  ``contrast term x size term x kind probability``: faint,
   small and ambiguous blobs rank low, so AP measures ranking as well as
   finding.

Where it must fail (by design; this is a measuring instrument, not a model):
textured backgrounds (checker, stripes, fine noise, clutter marks) become
foreground; objects whose contrast is below ``min_contrast`` or the noise
vanish; objects of a few pixels have no shape, so their kind is a guess;
overlapping objects of similar colour merge unless their union has a neck;
a partly hidden object is boxed by what shows, and its kind from a truncated
silhouette; blur and JPEG widen and soften edges.
"""

from __future__ import annotations

import functools
from dataclasses import asdict, dataclass

import cv2
import numpy as np

from synthgen.config import load_config
from synthgen.geometry import pairwise_iou
from synthgen.scene import render_scene

__all__ = ["BuiltinSettings", "BuiltinDetector", "fit_prototypes", "describe"]

N_FEATURES = 5


@dataclass(frozen=True, slots=True)
class BuiltinSettings:
    """The reference detector's settings (recorded in ``probe.json``)."""

    min_contrast: float = 0.06  # fraction of 255 a pixel must differ from the background
    noise_k: float = 4.0  # ... and this many noise sigmas
    split_below: float = 0.8  # components less solid than this are tried for splitting
    core: float = 0.45  # distance-transform cores: this fraction of the component's largest distance
    max_kinds: int = 3  # kind hypotheses per blob
    train_images: int = 40
    train_seed: int = 20261202


# --------------------------------------------------------------------------- background and foreground


@functools.lru_cache(maxsize=8)
def _basis(h: int, w: int) -> np.ndarray:
    """Quadratic surface basis on an ``h x w`` grid of cell centres, shape (6, h * w), float64."""
    y, x = np.mgrid[0:h, 0:w]
    x = (x.ravel() + 0.5) / w - 0.5
    y = (y.ravel() + 0.5) / h - 0.5
    return np.stack([np.ones_like(x), x, y, x * x, x * y, y * y])


def background(image: np.ndarray) -> np.ndarray:
    """Smooth background estimate of ``image`` (H, W, 3) uint8, as (H, W, 3) uint8.

    A quadratic surface per channel fitted to the cells of a 1/8-scale copy that
    it explains: the first rounds keep the better-fitting 60% of the cells, the
    later ones those within 3 robust sigmas (at least 6 grey levels).  What the
    surface leaves in cells it explains, and away from cells it does not, is
    added back as a local 5 x 5-cell median.
    """
    h, w = image.shape[:2]
    sh, sw = max(2, h // 8), max(2, w // 8)
    small = cv2.resize(image, (sw, sh), interpolation=cv2.INTER_AREA).reshape(-1, 3).astype(np.float64)
    basis = _basis(sh, sw)
    keep = np.ones(len(small), dtype=bool)
    for rnd in range(5):
        b = basis[:, keep]
        coef = np.linalg.solve(b @ b.T + 1e-9 * np.eye(6), b @ small[keep])  # (6, 3) least squares
        resid = np.abs(small - basis.T @ coef).max(axis=1)
        if rnd < 2:
            keep = resid <= np.quantile(resid[keep], 0.6)
        else:
            keep = resid <= max(6.0, 3.0 * 1.4826 * float(np.median(resid[keep])))
    fit = (basis.T @ coef).reshape(sh, sw, 3)
    rest = (small.reshape(sh, sw, 3) - fit).astype(np.float32)
    near = cv2.dilate((~keep).reshape(sh, sw).astype(np.uint8), np.ones((3, 3), np.uint8)) > 0
    rest[near] = 0.0  # cells on or beside foreground do not move the local correction
    local = np.stack([cv2.medianBlur(np.ascontiguousarray(rest[..., c]), 5) for c in range(3)], axis=-1)
    small_bg = np.clip(np.rint(fit + local), 0, 255).astype(np.uint8)
    return cv2.resize(small_bg, (w, h), interpolation=cv2.INTER_LINEAR)


def noise_sigma(image: np.ndarray) -> float:
    """Robust per-pixel noise level (grey levels) from horizontal neighbour differences of the green channel.

    Every fourth row is enough for the median.
    """
    g = image[::4, :, 1].astype(np.int16)
    return float(np.median(np.abs(np.diff(g, axis=1)))) / (0.6745 * np.sqrt(2.0))


# --------------------------------------------------------------------------- descriptors


def _whiten(points: np.ndarray, mask: np.ndarray) -> np.ndarray:
    m = cv2.moments(mask, binaryImage=True)
    cov = np.array([[m["mu20"], m["mu11"]], [m["mu11"], m["mu02"]]]) / max(m["m00"], 1.0)
    vals, vecs = np.linalg.eigh(cov + np.eye(2) / 12.0)  # + one pixel's own spread: tiny blobs stay finite
    return (points - points.mean(axis=0)) @ (vecs / np.sqrt(vals)) @ vecs.T


def describe(mask: np.ndarray) -> np.ndarray:
    """Five shape descriptors of one blob ``mask`` (h, w) uint8 {0, 1}; shape (5,), float64.

    Solidity (pixels over the area of the convex hull of their corners), share
    of holes, and the whitened hull's fill of its minimal enclosing circle,
    rectangle and triangle.

    Examples
    --------
    >>> square = np.ones((20, 20), np.uint8)
    >>> np.round(describe(square)[[0, 1, 3]], 2).tolist()   # solid, no hole, fills its rectangle
    [1.0, 0.0, 1.0]
    """
    padded = cv2.copyMakeBorder(mask, 1, 1, 1, 1, cv2.BORDER_CONSTANT, value=0)
    contours, _ = cv2.findContours(padded, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    outer = max(contours, key=len).reshape(-1, 2).astype(np.float64)
    filled = np.zeros_like(padded)
    cv2.drawContours(filled, contours, -1, 1, thickness=cv2.FILLED)
    area, filled_area = float(mask.sum()), float(filled.sum())
    corners = (outer[:, None, :] + np.array([[-0.5, -0.5], [0.5, -0.5], [0.5, 0.5], [-0.5, 0.5]])).reshape(-1, 2)
    hull = cv2.convexHull(corners.astype(np.float32)).reshape(-1, 2).astype(np.float64)
    hull_area = cv2.contourArea(hull.astype(np.float32))
    white = _whiten(hull, filled).astype(np.float32)
    w_area = max(cv2.contourArea(white), 1e-9)
    (_, _), radius = cv2.minEnclosingCircle(white)
    (_, _), (rw, rh), _ = cv2.minAreaRect(white)
    centre = white.mean(axis=0)
    edge = np.roll(white, -1, axis=0) - white  # (K, 2) hull edges
    cross = np.abs(edge[:, 0] * (centre[1] - white[:, 1]) - edge[:, 1] * (centre[0] - white[:, 0]))
    inner = float((cross / np.maximum(np.hypot(edge[:, 0], edge[:, 1]), 1e-9)).min())
    outer_r = float(np.hypot(*(white - centre).T).max())
    return np.array([
        min(filled_area / max(hull_area, 1.0), 1.0),
        1.0 - area / max(filled_area, 1.0),
        min(w_area / (np.pi * radius * radius + 1e-9), 1.0),
        min(w_area / (rw * rh + 1e-9), 1.0),
        min(inner / max(outer_r, 1e-9), 1.0),
    ])


# --------------------------------------------------------------------------- blobs


@dataclass(frozen=True, slots=True)
class Blob:
    """One candidate object: its box (xyxy, px), mask patch, mean contrast (0-1), shape descriptors (5,)."""

    box: tuple
    mask: np.ndarray
    contrast: float
    features: np.ndarray


def _split(mask: np.ndarray, core: float) -> list[np.ndarray]:
    """Split a blob at its distance-transform cores; each pixel joins the nearest core."""
    dist = cv2.distanceTransform(cv2.copyMakeBorder(mask, 1, 1, 1, 1, cv2.BORDER_CONSTANT, value=0),
                                 cv2.DIST_L2, 3)[1:-1, 1:-1]
    cores = (dist > core * dist.max()).astype(np.uint8)
    n, core_labels = cv2.connectedComponents(cores, connectivity=8)
    if n <= 2:
        return [mask]
    _, nearest = cv2.distanceTransformWithLabels(1 - cores, cv2.DIST_L2, 5, labelType=cv2.DIST_LABEL_CCOMP)
    # nearest labels number the zero pixels' components of ``1 - cores``, i.e. the cores, in their own order
    parts = []
    for lab in np.unique(nearest[mask > 0]):
        part = ((nearest == lab) & (mask > 0)).astype(np.uint8)
        if part.sum() >= 4:
            parts.append(part)
    return parts or [mask]


def _refined_box(part: np.ndarray, diff: np.ndarray, r0: int, c0: int) -> tuple:
    """Pixel box of ``part`` with each edge moved in by the uncovered share of its outermost row/column."""
    rows, cols = np.flatnonzero(part.any(axis=1)), np.flatnonzero(part.any(axis=0))
    top, bottom, left, right = rows[0], rows[-1], cols[0], cols[-1]
    vals = diff[part > 0]
    k = (3 * (len(vals) - 1)) // 4
    full = max(float(np.partition(vals, k)[k]), 1e-6)  # the blob's typical full-coverage difference
    cov = np.clip(diff / full, 0.0, 1.0) * part
    if bottom - top >= 1:
        y0, y1 = top + 1.0 - cov[top].max(), bottom + cov[bottom].max()
    else:
        y0, y1 = float(top), bottom + 1.0
    if right - left >= 1:
        x0, x1 = left + 1.0 - cov[:, left].max(), right + cov[:, right].max()
    else:
        x0, x1 = float(left), right + 1.0
    return (c0 + x0, r0 + y0, c0 + x1, r0 + y1)


def _maybe_split(mask: np.ndarray, settings: BuiltinSettings, prototypes) -> list[tuple]:
    """``(part, descriptors)`` of the blob's parts when they look like kinds much better than the whole does,
    else of the blob."""
    features = describe(mask)
    if prototypes is None or mask.sum() < 40 or features[0] >= settings.split_below:
        return [(mask, features)]
    parts = _split(mask, settings.core)
    if len(parts) < 2:
        return [(mask, features)]
    whole = prototypes.kind_probabilities(features, float(mask.sum()))[1]
    each = [describe(p) for p in parts]
    near = [prototypes.kind_probabilities(f, float(p.sum()))[1] for p, f in zip(parts, each, strict=True)]
    return list(zip(parts, each, strict=True)) if float(np.mean(near)) < 0.5 * whole else [(mask, features)]


def find_blobs(image: np.ndarray, settings: BuiltinSettings, prototypes=None) -> list[Blob]:
    """Candidate objects of ``image`` (H, W, 3) uint8 RGB, in raster order of their components.

    With ``prototypes``, a blob less solid than ``settings.split_below`` is split at its
    distance-transform cores when its parts are much nearer to kind centroids than the whole.
    """
    bg = background(image)
    planes = cv2.split(cv2.absdiff(image, bg))
    diff = cv2.max(cv2.max(planes[0], planes[1]), planes[2])  # per plane: a trailing axis of 3 is slow
    sigma = noise_sigma(image)
    noisy = sigma > 1.5
    if sigma > 8.0:  # smoothing costs shape (star points, thin bars): only where the noise would swamp the threshold
        diff = cv2.GaussianBlur(diff, (3, 3), 0)
        sigma /= 2.0  # a 3 x 3 Gaussian of sigma 0.8 divides white noise's sigma by about two
    thr = max(settings.min_contrast * 255.0, settings.noise_k * sigma)
    fg = (diff > thr).view(np.uint8)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(fg, connectivity=8)
    blobs = []
    for i in range(1, n):
        c0, r0, w, h, area = (int(v) for v in stats[i])
        mask = (labels[r0:r0 + h, c0:c0 + w] == i).astype(np.uint8)
        sub = diff[r0:r0 + h, c0:c0 + w].astype(np.float32)
        if noisy and area < 3 and sub[mask > 0].mean() < 2.0 * thr:
            continue  # a speck barely above the threshold on a noisy image: noise far more often than an object
        for part, features in _maybe_split(mask, settings, prototypes):
            blobs.append(Blob(_refined_box(part, sub, r0, c0), part, float(sub[part > 0].mean()) / 255.0, features))
    return blobs


# --------------------------------------------------------------------------- kinds


@dataclass(frozen=True)
class Prototypes:
    """Class centroids ``means`` (P, 5) of kinds ``kinds`` (P,), and the pooled within-class spread (5,)."""

    means: np.ndarray
    kinds: tuple
    spread: np.ndarray

    def only(self, names) -> Prototypes:
        keep = [i for i, k in enumerate(self.kinds) if k in set(names)]
        return Prototypes(self.means[keep], tuple(self.kinds[i] for i in keep), self.spread)

    def kind_probabilities(self, features: np.ndarray, area: float) -> tuple[dict, float]:
        """Gaussian nearest-centroid: probability per kind, and the squared distance to the nearest centroid.

        The spread widens as the blob shrinks (by ``1 + 64 / area``): a silhouette of a few pixels says
        little about the shape it was drawn from, so its kinds come out nearly equally likely.
        """
        d2 = (((features - self.means) / self.spread) ** 2).sum(axis=1)  # (P,)
        w = np.exp(-0.5 * (d2 - d2.min()) / (1.0 + 64.0 / max(area, 1.0)) ** 2)
        w /= w.sum()
        probs: dict = {}
        for k, p in zip(self.kinds, w, strict=True):
            probs[k] = probs.get(k, 0.0) + float(p)
        return probs, float(d2.min())


def _training_config(settings: BuiltinSettings):
    return load_config(None, [
        f"seed={settings.train_seed}", f"count={settings.train_images}", "canvas.width=320", "canvas.height=240",
        'background.kind="solid"', "objects.count=[5,9]", "objects.size=[18,100]", 'objects.layout="separated"',
        "objects.outline=0.3", "objects.min_visible=1.0", "objects.min_contrast=0.3",
    ])


@functools.lru_cache(maxsize=4)
def fit_prototypes(settings: BuiltinSettings) -> Prototypes:
    """Centroids per (kind, outline) from synthgen scenes of whole, separated objects on solid backgrounds.

    Deterministic (the training set is a fixed config and seed); kept in memory per process.
    """
    config = _training_config(settings)
    feats, keys = [], []
    for index in range(config.count):
        scene = render_scene(config, index)
        blobs = find_blobs(scene.image, settings)
        if not blobs or not len(scene.boxes):
            continue
        iou = pairwise_iou(scene.boxes, np.array([b.box for b in blobs]))  # (N, B)
        for j, facts in enumerate(scene.facts):
            b = int(iou[j].argmax())
            if iou[j, b] >= 0.8:
                feats.append(blobs[b].features)
                keys.append((facts["kind"], bool(facts.get("outline"))))
    feats, keys = np.array(feats), np.array([f"{k}|{o}" for k, o in keys])
    classes = sorted(set(keys))
    means = np.array([feats[keys == c].mean(axis=0) for c in classes])
    resid = feats - means[np.searchsorted(classes, keys)]
    spread = np.maximum(resid.std(axis=0), 0.02)
    return Prototypes(means, tuple(c.split("|")[0] for c in classes), spread)


# --------------------------------------------------------------------------- the detector


class BuiltinDetector:
    """The reference detector (module docstring); picklable, fitted on first use or by :meth:`prepare`.

    Called with a list of (H, W, 3) uint8 RGB images, returns per image
    ``{"boxes": (N, 4) xyxy float64, "scores": (N,), "labels": [kind names]}``.
    """

    spec = "builtin"
    name = "builtin"

    def __init__(self, settings: BuiltinSettings | None = None, prototypes: Prototypes | None = None):
        self.options = settings or BuiltinSettings()
        self.prototypes = prototypes

    @property
    def settings(self) -> dict:
        return asdict(self.options)

    def prepare(self, names) -> BuiltinDetector:
        """A fitted copy that labels only the kinds among ``names`` (the dataset's categories)."""
        protos = (self.prototypes or fit_prototypes(self.options)).only(names)
        return BuiltinDetector(self.options, protos)

    def __call__(self, images) -> list[dict]:
        if self.prototypes is None:
            self.prototypes = fit_prototypes(self.options)
        return [self.detect(image) for image in images]

    def detect(self, image: np.ndarray) -> dict:
        """Detections of one image (H, W, 3) uint8 RGB."""
        boxes, scores, labels = [], [], []
        if not self.prototypes.kinds:
            return {"boxes": np.zeros((0, 4)), "scores": np.zeros(0), "labels": []}
        for blob in find_blobs(image, self.options, self.prototypes):
            area = float(blob.mask.sum())
            probs, d2 = self.prototypes.kind_probabilities(blob.features, area)
            quality = ((1.0 - np.exp(-blob.contrast / 0.1)) * (1.0 - np.exp(-area / 8.0))
                       * np.exp(-max(0.0, d2 - N_FEATURES) / (4.0 * N_FEATURES)))
            ranked = sorted(probs.items(), key=lambda kv: -kv[1])[: self.options.max_kinds]
            for rank, (kind, p) in enumerate(ranked):
                if rank and p < 0.15:
                    break
                boxes.append(blob.box)
                scores.append(quality * p)
                labels.append(kind)
        return {"boxes": np.array(boxes, dtype=np.float64).reshape(-1, 4), "scores": np.array(scores),
                "labels": labels}
