"""The simulated detector: predictions of an imaginary detector whose every mistake is known.

:class:`DetectorSpec` says how it errs; :func:`simulate_detections` makes :class:`Detections`
(each prediction's kind, source and IoU, each true box's outcome); :func:`detection_scores`
gives scores whose true/false positive overlap is set.
"""

from __future__ import annotations

import dataclasses
import types
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from synthgen.errors import ConfigError, as_tuples, check_choice, check_number, check_range
from synthgen.formats.results import DETECTION_KINDS
from synthgen.geometry import as_boxes
from synthgen.jitter.iou import BoxArrays, canvas_arrays, check_arg, check_inside, check_sources, count_of
from synthgen.jitter.models import ERROR_MODES, draw_targets, from_sources, place_background

__all__ = [
    "DETECTION_KINDS",
    "OUTCOMES",
    "MAX_BACKGROUND",
    "Detections",
    "DetectorSpec",
    "check_spec",
    "parse_spec",
    "detection_scores",
    "simulate_detections",
]


#: What happened to a ground-truth box in a simulated detector (see :class:`Detections`).
OUTCOMES = ("detected", "missed", "mislocated", "wrong_class")

#: Largest mean number of background boxes per image a :class:`DetectorSpec`
#: accepts: far beyond any detector's output (maxDets is 100), small enough that
#: the boxes of a few thousand images fit in memory.
MAX_BACKGROUND = 10_000


@dataclass(frozen=True, slots=True)
class Detections(BoxArrays):
    """Output of :func:`simulate_detections`: predictions that know what they are.

    Attributes
    ----------
    boxes : ndarray of float64, shape (P, 4)
        Predicted boxes, xyxy in pixels, ordered by image, then by falling score.
    labels : ndarray of int64, shape (P,)
        Predicted class labels.
    scores : ndarray of float64, shape (P,)
        Confidence in (0, 1].
    image : ndarray of int64, shape (P,)
        Image index of each prediction.
    kind : ndarray of str, shape (P,)
        One of :data:`DETECTION_KINDS`:

        * ``true_positive``: right class, made from ground truth ``source`` at
          IoU ``iou`` (drawn from the spec's ``iou`` range);
        * ``duplicate``: an extra right-class box of a detected ``source`` at
          IoU ``iou`` (from ``duplicate_iou``);
        * ``localization``: the only box of ``source``, right class, at IoU
          ``iou`` from ``near_iou`` (a poorly placed detection);
        * ``wrong_class``: the only box of ``source``, placed like a true
          positive but with another class;
        * ``background``: a box whose IoU with every true box of its image is
          below ``background_iou`` (``source`` -1, ``iou`` NaN).
    source : ndarray of int64, shape (P,)
        Index into the ground-truth arrays given, -1 for background.
    iou : ndarray of float64, shape (P,)
        IoU with the source, measured on ``boxes``; NaN for background.
    other_iou : ndarray of float64, shape (P,)
        Largest IoU with any other true box of the same image, of any class
        (for background: with any true box).  A sourced prediction is drawn
        again until ``other_iou < iou``; entries where that failed are kept
        and show it here.
    outcome : ndarray of str, shape (N,)
        Per ground-truth box, one of :data:`OUTCOMES`: ``detected`` (it has a
        true positive), ``missed`` (no prediction is made from it),
        ``mislocated`` (its only prediction is a localization error),
        ``wrong_class`` (its only prediction has another class).
    background_shortfall : int
        Background boxes drawn but not placed because no spot with IoU below
        the bound was found (0 unless the truth covers nearly every spot).
    """

    boxes: np.ndarray
    labels: np.ndarray
    scores: np.ndarray
    image: np.ndarray
    kind: np.ndarray
    source: np.ndarray
    iou: np.ndarray
    other_iou: np.ndarray
    outcome: np.ndarray
    background_shortfall: int = 0

    @property
    def missed(self) -> np.ndarray:
        """Indices of the ground-truth boxes with no prediction, shape (K,)."""
        return np.flatnonzero(self.outcome == "missed")


def detection_scores(positive, overlap: float, *, rng: np.random.Generator) -> np.ndarray:
    """Confidence scores where true positives outrank false positives by a set overlap.

    True positives are uniform on ``(1 - L, 1]`` and the rest on ``(0, L]``,
    with ``L = 1 / (2 - overlap)``: the two supports share a stretch that is the
    fraction ``overlap`` of each.  ``overlap = 0`` puts every true positive
    above every other score; ``overlap = 1`` makes scores carry no information.

    Parameters
    ----------
    positive : array_like of bool, shape (P,)
    overlap : float
        In [0, 1].
    rng : numpy.random.Generator

    Returns
    -------
    ndarray of float64, shape (P,), values in (0, 1].

    Examples
    --------
    >>> s = detection_scores([True, False] * 50, 0.0, rng=np.random.default_rng(0))
    >>> bool(s[0::2].min() > s[1::2].max())
    True
    """
    check_arg(check_number, "overlap", overlap, lo=0, hi=1)
    pos = np.asarray(positive, dtype=bool).reshape(-1)
    width = 1.0 / (2.0 - overlap)
    u = rng.random(pos.size)  # [0, 1)
    return np.where(pos, 1.0 - width * u, width * (1.0 - u))


@dataclass(frozen=True, slots=True)
class DetectorSpec:
    """How a simulated detector errs.

    Rates are fractions of all ground-truth boxes; the counts are
    ``floor(rate * N + 0.5)`` over the whole input, so they are exact.  Each
    true box gets one outcome (detected, missed, mislocated, wrong class), so
    ``miss + localization + relabel <= 1``; duplicates are extra boxes of
    detected ones, so ``duplicates <= 1 - miss - localization - relabel``.

    Attributes
    ----------
    miss : float
        Fraction of true boxes with no prediction.
    iou : (lo, hi)
        IoU range of a true positive (and of a wrong-class box) with its source.
    modes : tuple of str
        Directions of localization error, from :data:`ERROR_MODES`.
    localization : float
        Fraction of true boxes whose only prediction is a near miss.
    near_iou : (lo, hi)
        IoU range of a near miss with its source.
    duplicates : float
        Fraction of true boxes that get one extra, lower-ranked box.
    duplicate_iou : (lo, hi)
        IoU range of a duplicate with its source.
    background : float
        Mean number of background boxes per image (Poisson), at most
        :data:`MAX_BACKGROUND`.
    background_iou : float
        Background boxes have IoU below this with every true box, in (0, 1].
    background_size : (lo, hi) or None
        Background box side as a fraction of the image's shorter side; None
        (the default) sizes them like the true boxes: each takes the width and
        height of a true box drawn uniformly from the whole input, so a sweep
        of tiny objects gets tiny false positives too.
    relabel : float
        Fraction of true boxes whose only prediction has another class.
    score_overlap : float
        Overlap of true-positive and other scores, see :func:`detection_scores`.
    keep_inside : bool
        Keep every box inside its image.
    """

    miss: float = 0.0
    iou: tuple[float, float] = (0.7, 0.95)
    modes: tuple[str, ...] = ERROR_MODES
    localization: float = 0.0
    near_iou: tuple[float, float] = (0.1, 0.45)
    duplicates: float = 0.0
    duplicate_iou: tuple[float, float] = (0.5, 0.9)
    background: float = 0.0
    background_iou: float = 0.1
    background_size: tuple[float, float] | None = None
    relabel: float = 0.0
    score_overlap: float = 0.0
    keep_inside: bool = True

    def __post_init__(self):
        as_tuples(self)
        check_spec(self)


def config_key(field: str) -> str:
    """The name a :class:`DetectorSpec` field has in error messages by default: ``jitter.<field>``."""
    return f"jitter.{field}"


_RATES = ("miss", "localization", "duplicates", "relabel", "score_overlap")
_IOU_RANGES = ("iou", "near_iou", "duplicate_iou", "background_size")


def check_spec(spec, key: Callable[[str], str] = config_key) -> None:
    """Raise :class:`~synthgen.errors.ConfigError` unless ``spec`` holds a valid detector.

    ``spec`` has the fields of :class:`DetectorSpec` as attributes (lists as tuples);
    ``key`` names a field in the message, e.g. a command-line option (see :func:`parse_spec`).

    Examples
    --------
    >>> check_spec(DetectorSpec())  # the defaults hold
    """
    for field in _RATES:
        check_number(key(field), getattr(spec, field), lo=0, hi=1)
    for field in _IOU_RANGES:
        if field != "background_size" or spec.background_size is not None:
            check_range(key(field), getattr(spec, field), lo=0, lo_open=True, hi=1)
    check_number(key("background"), spec.background, lo=0)
    if spec.background > MAX_BACKGROUND:
        raise ConfigError(key("background"), f"must be at most {MAX_BACKGROUND} boxes per image", spec.background)
    check_number(key("background_iou"), spec.background_iou, lo=0, lo_open=True, hi=1)
    if not isinstance(spec.modes, tuple) or not spec.modes:
        raise ConfigError(key("modes"), "must be a non-empty list of " + ", ".join(ERROR_MODES), spec.modes)
    for m in spec.modes:
        check_choice(key("modes"), m, ERROR_MODES)
    if not isinstance(spec.keep_inside, bool):
        raise ConfigError(key("keep_inside"), "must be true or false", spec.keep_inside)
    taken = spec.miss + spec.localization + spec.relabel
    if taken > 1 + 1e-12:
        raise ConfigError(
            key("miss"), f"plus '{key('localization')}' plus '{key('relabel')}' must be at most 1", round(taken, 12)
        )
    if spec.duplicates > 1 - taken + 1e-12:
        raise ConfigError(
            key("duplicates"),
            f"must be at most 1 - miss - localization - relabel = {max(0.0, 1 - taken):.6g}",
            spec.duplicates,
        )


def parse_spec(values: Mapping[str, object], *, key: Callable[[str], str] = config_key) -> DetectorSpec:
    """A :class:`DetectorSpec` from field values, its errors naming each field by ``key(field)``.

    A front end that reads the fields under its own names (command-line options, say) passes
    the mapping from field to name here, so an error names what its user typed.

    Examples
    --------
    >>> parse_spec({"miss": 0.2}).miss
    0.2
    >>> parse_spec({"iou": (0.9, 0.5)}, key={"iou": "--iou"}.get)
    Traceback (most recent call last):
    ...
    synthgen.errors.ConfigError: option '--iou' must be [min, max] with 0 < min <= max <= 1 (got [0.9, 0.5])
    >>> parse_spec({"miss": 0.7, "relabel": 0.5}, key=lambda field: "--" + field)
    Traceback (most recent call last):
    ...
    synthgen.errors.ConfigError: option '--miss' plus '--localization' plus '--relabel' must be at most 1 (got 1.2)
    """
    fields = {f.name: f.default for f in dataclasses.fields(DetectorSpec)}
    unknown = sorted(set(values) - set(fields))
    if unknown:
        raise TypeError(f"DetectorSpec has no field {unknown[0]!r}")
    fields.update({k: tuple(v) if isinstance(v, list) else v for k, v in values.items()})
    check_spec(types.SimpleNamespace(**fields), key)
    return DetectorSpec(**values)


def simulate_detections(
    truth,
    labels,
    canvas,
    *,
    rng: np.random.Generator,
    spec: DetectorSpec = DetectorSpec(),
    image=None,
    classes=None,
    ignore=None,
) -> Detections:
    """Predictions of an imaginary detector whose every mistake is known.

    Parameters
    ----------
    truth : array_like of shape (N, 4)
        Ground-truth boxes, xyxy in pixels, possibly from many images.
    labels : array_like of int, shape (N,)
        Their class labels.
    canvas : (width, height) or array_like of shape (M, 2)
        Size of each image in pixels, indexed by ``image``; one pair applies
        to every image.
    rng : numpy.random.Generator
    spec : DetectorSpec
        Error rates and ranges.
    image : array_like of int, shape (N,), optional
        Image index of each true box, in ``0 .. M - 1``; all 0 by default.
    classes : array_like of int, optional
        Labels for wrong-class and background boxes; default: the labels seen.
    ignore : (array_like of shape (K, 4), array_like of int, shape (K,)), optional
        Ignore regions (COCO ``iscrowd`` 1) and their image indices: no
        prediction is made from them, and background boxes keep below
        ``background_iou`` of their own area on them, so that an evaluator
        counts them as false positives rather than ignoring them.

    Returns
    -------
    Detections

    Notes
    -----
    Each stage (outcomes, placement, near misses, duplicates, background,
    labels, scores) draws from its own child of ``rng``, so changing one rate
    leaves the other stages' draws where they were.  Sourced boxes are drawn
    again (same target IoU, new direction) until their source is the closest
    true box; background boxes until they clear the bound.
    """
    t, lab, img, (cw_img, ch_img), (cw, ch), cls = _truth_arrays(truth, labels, canvas, image, classes, spec.keep_inside)
    n, n_img = len(t), len(cw_img)
    r_out, r_place, r_near, r_dup, r_bg, r_label, r_score = rng.spawn(7)
    outcome = _outcomes(n, spec, r_out)
    if (outcome == "wrong_class").any() and cls.size < 2:
        raise ValueError(f"relabelling needs at least 2 classes (got {cls.tolist()})")
    parts = _sourced_parts(t, lab, img, outcome, spec, cw, ch, (r_place, r_near, r_dup))
    counts = r_bg.poisson(spec.background, n_img) if spec.background > 0 else np.zeros(n_img, dtype=np.int64)
    if ignore is not None:
        ignore = (as_boxes(ignore[0]), np.asarray(ignore[1], dtype=np.int64).reshape(-1))
    bg, bg_img, bg_other, short = place_background(
        t, img, counts, cw_img, ch_img, spec.background_iou, spec.background_size, (0.5, 2.0), r_bg, ignore
    )
    if bg_img.size and cls.size == 0:
        raise ValueError("background boxes need at least one class ('classes' is empty)")
    k_bg = bg_img.size
    parts.append((bg, np.zeros(k_bg, dtype=np.int64), bg_img, "background", np.full(k_bg, -1), np.full(k_bg, np.nan), bg_other))
    boxes, out_lab, out_img, kind, source, iou, other = _gather(parts)
    _draw_labels(out_lab, kind, cls, r_label)
    scores = detection_scores(kind == "true_positive", spec.score_overlap, rng=r_score)
    order = np.lexsort((-scores, out_img))
    sorted_fields = (a[order] for a in (boxes, out_lab, scores, out_img, kind, source, iou, other))
    return Detections(*sorted_fields, outcome=outcome, background_shortfall=short)


def _truth_arrays(truth, labels, canvas, image, classes, keep_inside: bool):
    """Checked arrays of :func:`simulate_detections`' input.

    Returns the boxes, labels, image index, (width, height) per image, the bounds per box (the
    image's size, or inf when boxes need not stay inside), and the sorted classes.
    """
    t = as_boxes(truth)
    n = len(t)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    if lab.size != n:
        raise ValueError(f"'labels' must have one entry per box ({n}) (got {lab.size})")
    img = np.zeros(n, dtype=np.int64) if image is None else np.asarray(image, dtype=np.int64).reshape(-1)
    c = np.asarray(canvas, dtype=np.float64)
    if c.shape == (2,):  # one size for every image
        c = np.broadcast_to(c, (int(img.max()) + 1 if img.size else 1, 2))
    n_img = len(c)
    if img.size != n or (n and (img.min() < 0 or img.max() >= n_img)):
        raise ValueError(f"'image' must give each box an index in 0 .. {n_img - 1}")
    cw_img, ch_img = canvas_arrays(c, n_img)
    check_sources(t, "truth")
    if keep_inside:
        check_inside(t, cw_img[img], ch_img[img])
        cw, ch = cw_img[img], ch_img[img]
    else:
        cw, ch = np.full(n, np.inf), np.full(n, np.inf)
    cls = np.unique(lab if classes is None else np.asarray(classes, dtype=np.int64).reshape(-1))
    if not np.isin(lab, cls).all():
        raise ValueError(f"'labels' must all be in 'classes' (got {sorted(set(lab.tolist()) - set(cls.tolist()))})")
    return t, lab, img, (cw_img, ch_img), (cw, ch), cls


def _sourced_parts(t, lab, img, outcome, spec: DetectorSpec, cw, ch, rngs) -> list[tuple]:
    """Boxes made from true boxes: true positives and wrong-class boxes, near misses, duplicates (one part each).

    Each part is ``(boxes, labels, image, kind, source, iou, other_iou)``; ``rngs`` holds one
    generator per part, in that order.
    """
    r_place, r_near, r_dup = rngs
    detected = np.flatnonzero(outcome == "detected")
    k_dup = min(count_of(spec.duplicates, len(t)), detected.size)
    parts = []

    def sourced(src, iou_range, kind, r):
        targets = draw_targets(*iou_range, src.size, r)
        boxes, achieved, other, _ = from_sources(t, img, src, targets, spec.modes, cw, ch, r)
        parts.append((boxes, lab[src], img[src], kind, src, achieved, other))

    main = np.flatnonzero((outcome == "detected") | (outcome == "wrong_class"))
    sourced(main, spec.iou, np.where(outcome[main] == "detected", "true_positive", "wrong_class"), r_place)
    sourced(np.flatnonzero(outcome == "mislocated"), spec.near_iou, "localization", r_near)
    sourced(np.sort(r_dup.permutation(detected)[:k_dup]), spec.duplicate_iou, "duplicate", r_dup)
    return parts


def _outcomes(n: int, spec: DetectorSpec, rng: np.random.Generator) -> np.ndarray:
    """One outcome per true box (:data:`OUTCOMES`), with exact counts from the spec's rates."""
    perm = rng.permutation(n)
    k_miss = count_of(spec.miss, n)
    k_loc = min(count_of(spec.localization, n), n - k_miss)
    k_rel = min(count_of(spec.relabel, n), n - k_miss - k_loc)
    outcome = np.full(n, "detected", dtype="<U11")
    outcome[perm[:k_miss]] = "missed"
    outcome[perm[k_miss : k_miss + k_loc]] = "mislocated"
    outcome[perm[k_miss + k_loc : k_miss + k_loc + k_rel]] = "wrong_class"
    return outcome


def _gather(parts) -> tuple[np.ndarray, ...]:
    """The parts' (boxes, labels, image, kind, source, iou, other_iou) joined into one array each."""
    return (
        np.concatenate([p[0] for p in parts]).reshape(-1, 4),
        np.concatenate([p[1] for p in parts]).astype(np.int64),
        np.concatenate([p[2] for p in parts]).astype(np.int64),
        np.concatenate([np.broadcast_to(np.asarray(p[3], dtype="<U13"), (len(p[0]),)) for p in parts]),
        np.concatenate([p[4] for p in parts]).astype(np.int64),
        np.concatenate([p[5] for p in parts]).astype(np.float64),
        np.concatenate([p[6] for p in parts]).astype(np.float64),
    )


def _draw_labels(labels: np.ndarray, kind: np.ndarray, cls: np.ndarray, rng: np.random.Generator) -> None:
    """In place: another class for each wrong-class box, any class for each background box."""
    wrong = kind == "wrong_class"
    if wrong.any():
        pos = np.searchsorted(cls, labels[wrong])
        j = rng.integers(cls.size - 1, size=int(wrong.sum()))
        labels[wrong] = cls[j + (j >= pos)]
    is_bg = kind == "background"
    if is_bg.any():
        labels[is_bg] = cls[rng.integers(cls.size, size=int(is_bg.sum()))]
