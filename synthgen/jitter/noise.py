"""Training noise objects: a true-box list padded to a fixed length for sequence-style training.

:func:`pad_with_noise` pads one image's boxes; :func:`noise_padder` makes the per-image padder the
token writer calls, each image drawing from its own stream (``NOISE_STREAM``) of the seed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthgen.errors import check_number, check_range
from synthgen.geometry import as_boxes
from synthgen.jitter.iou import BoxArrays, canvas_arrays, check_arg, count_of
from synthgen.jitter.models import check_fraction_range, random_boxes, uniform_shift_scale
from synthgen.seeding import NOISE_STREAM, stream

__all__ = [
    "NOISE_STREAM",
    "NoisePadded",
    "pad_with_noise",
    "noise_padder",
]


@dataclass(frozen=True, slots=True)
class NoisePadded(BoxArrays):
    """A box list padded to a fixed length with noise objects.

    The first ``N`` entries are the true objects in their given order; the
    rest are noise objects.

    Attributes
    ----------
    boxes : ndarray of float64, shape (L, 4)
        xyxy in pixels, inside the canvas.
    labels : ndarray of int64, shape (L,)
        True labels, then the noise label for every noise object.
    is_noise : ndarray of bool, shape (L,)
    learn_box : ndarray of bool, shape (L,)
        False where the box's coordinates must carry no loss (every noise
        object); True for the true objects.
    source : ndarray of int64, shape (L,)
        Index of the true box a box is (or was jittered from); -1 for random
        noise boxes.
    iou : ndarray of float64, shape (L,)
        IoU with the source (1 for true objects, NaN for random noise boxes).
    """

    boxes: np.ndarray
    labels: np.ndarray
    is_noise: np.ndarray
    learn_box: np.ndarray
    source: np.ndarray
    iou: np.ndarray


def pad_with_noise(
    boxes,
    labels,
    length: int,
    *,
    rng: np.random.Generator,
    canvas,
    noise_label: int,
    jittered: float = 0.5,
    shift: float = 0.2,
    scale: float = 0.4,
    size=(0.05, 0.5),
    aspect=(0.5, 2.0),
) -> NoisePadded:
    """Pad a box list to a fixed length with noise objects for sequence-style training.

    Noise objects are a mix of jittered true boxes (:func:`uniform_shift_scale`
    of a randomly chosen true box) and random boxes, all labelled
    ``noise_label`` and marked ``learn_box = False`` so that their coordinates
    carry no loss.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        True boxes, xyxy in pixels, inside the canvas.
    labels : array_like of int, shape (N,)
        Their class labels.
    length : int
        Length of the padded list, ``>= N``.
    rng : numpy.random.Generator
    canvas : (width, height)
        Image size in pixels; noise boxes lie inside it.
    noise_label : int
        Label of every noise object; must differ from every true label.
    jittered : float
        Fraction in [0, 1] of the noise objects made by jittering true boxes
        (exactly ``floor(jittered * (length - N) + 0.5)``; none when N = 0).
    shift, scale : float
        Jitter strength, as in :func:`uniform_shift_scale`.
    size, aspect : (lo, hi)
        Random boxes' side as a fraction of the shorter canvas side, and their
        ``w / h`` range.

    Returns
    -------
    NoisePadded
        True objects first, in their order; then the noise objects in random order.

    Examples
    --------
    >>> r = pad_with_noise([[4, 4, 20, 20]], [2], 5, rng=np.random.default_rng(0), canvas=(32, 32), noise_label=99)
    >>> r.labels.tolist(), r.learn_box.tolist()
    ([2, 99, 99, 99, 99], [True, False, False, False, False])
    """
    b = as_boxes(boxes)
    lab = np.asarray(labels, dtype=np.int64).reshape(-1)
    n = len(b)
    size = _check_padding(n, lab, length, noise_label, jittered, size, aspect)
    m = int(length) - n
    k_jit = count_of(jittered, m) if n else 0
    cw, ch = canvas_arrays(canvas, max(n, 1))
    src = rng.integers(n, size=k_jit) if n else np.zeros(0, dtype=np.int64)
    jit = uniform_shift_scale(b[src], shift, scale, rng=rng, canvas=(cw[0], ch[0]))
    rand = random_boxes(np.full(m - k_jit, cw[0]), np.full(m - k_jit, ch[0]), size, aspect, rng)
    noise_boxes = np.concatenate([jit.boxes, rand])
    noise_src = np.concatenate([src, np.full(m - k_jit, -1)])
    noise_iou = np.concatenate([jit.iou, np.full(m - k_jit, np.nan)])
    order = rng.permutation(m)
    return NoisePadded(
        boxes=np.concatenate([b, noise_boxes[order]]),
        labels=np.concatenate([lab, np.full(m, noise_label, dtype=np.int64)]),
        is_noise=np.arange(n + m) >= n,
        learn_box=np.arange(n + m) < n,
        source=np.concatenate([np.arange(n), noise_src[order]]).astype(np.int64),
        iou=np.concatenate([np.ones(n), noise_iou[order]]),
    )


def _check_padding(n: int, lab: np.ndarray, length, noise_label: int, jittered, size, aspect):
    """Raise ValueError on a bad argument of :func:`pad_with_noise`; return ``size`` as a checked range or None."""
    if lab.size != n:
        raise ValueError(f"'labels' must have one entry per box ({n}) (got {lab.size})")
    check_arg(check_number, "length", length, lo=n, integer=True)
    check_arg(check_number, "jittered", jittered, lo=0, hi=1)
    if np.any(lab == noise_label):
        raise ValueError(f"'noise_label' {noise_label} is also a true label")
    if size is not None:
        size = check_fraction_range(size, "size")
    check_arg(check_range, "aspect", tuple(aspect), lo=0, lo_open=True)
    return size


def noise_padder(seed: int, length: int, *, jittered: float = 0.5, shift: float = 0.2, scale: float = 0.4):
    """A per-image training-noise maker for token sequences (see :func:`synthgen.formats.tokens.write_tokens`).

    Returns ``noise(k, boxes, category_ids, (width, height)) -> NoisePadded``
    that pads image ``k``'s objects to ``max(length, N)`` with
    :func:`pad_with_noise`, drawing from ``SeedSequence(seed, spawn_key=(k, NOISE_STREAM))``
    so every image's noise is fixed by the seed and its index alone.

    Examples
    --------
    >>> pad = noise_padder(0, 4)
    >>> out = pad(0, np.array([[2.0, 2.0, 9.0, 9.0]]), np.array([3]), (32, 32))
    >>> out.boxes.shape, int(out.is_noise.sum())
    ((4, 4), 3)
    """
    if length < 0:
        raise ValueError(f"length must be >= 0 (got {length})")

    def noise(k: int, boxes, category_ids, canvas) -> NoisePadded:
        rng = stream(seed, int(k), NOISE_STREAM)
        b = as_boxes(boxes)
        return pad_with_noise(
            b, np.asarray(category_ids, dtype=np.int64), max(length, len(b)), rng=rng, canvas=canvas,
            noise_label=-1, jittered=jittered, shift=shift, scale=scale,
        )

    return noise
