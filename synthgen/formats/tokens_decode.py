"""A model's token sequence back to boxes, labels and scores: the inverse of the token writer.

The vocabulary (token ranges, bins, the dequantization rule) is the one of
:mod:`synthgen.formats.tokens`; this module only reads predicted sequences.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import NamedTuple

import numpy as np

from synthgen.formats.tokens import dequantize

__all__ = ["DecodedTokens", "tokens_to_boxes"]


class DecodedTokens(NamedTuple):
    """Objects read from one predicted token sequence (:func:`tokens_to_boxes`).

    Attributes
    ----------
    boxes : ndarray of float64, shape (K, 4)
        xyxy bin centres in pixels, in sequence order.
    category_ids : ndarray of int64, shape (K,)
    scores : ndarray of float64, shape (K,)
        Probability of each object's class token (1 when none were given).
    n_noise : int
        Well-formed groups with the noise class token, left out.
    n_malformed : int
        Groups left out because they break the layout (see :func:`tokens_to_boxes`).
    """

    boxes: np.ndarray
    category_ids: np.ndarray
    scores: np.ndarray
    n_noise: int
    n_malformed: int

    def results(self, image_id: int) -> list[dict]:
        """COCO results records ``{image_id, category_id, bbox: [x, y, w, h], score}``, for scoring."""
        b = self.boxes
        return [
            {"image_id": image_id, "category_id": c, "bbox": [x0, y0, x1 - x0, y1 - y0], "score": s}
            for (x0, y0, x1, y1), c, s in zip(b.tolist(), self.category_ids.tolist(), self.scores.tolist(), strict=True)
        ]


def tokens_to_boxes(tokens, vocab: Mapping, *, width: float | None = None, height: float | None = None,
                    probs=None) -> DecodedTokens:
    """Boxes, category ids and scores from a predicted token sequence: the inverse of
    :func:`synthgen.formats.tokens.encode_objects`.

    Reading rule: the sequence is cut at its first ``end`` token (read whole
    when there is none, as for an output cut off at a length limit); what
    remains is read in groups of five at positions ``5 j .. 5 j + 4``.  A group
    becomes an object when its first four tokens are coordinate tokens with
    ``x1 >= x0`` and ``y1 >= y0`` (equal tokens: an object narrower than a bin,
    a box of zero width) and its fifth a class token.  A group whose fifth is
    the noise token is a noise object and is left out (``n_noise``); any other
    group -- a token of the wrong kind in a slot, an unknown token, inverted
    corners, a short last group -- is malformed and left out whole
    (``n_malformed``); the next group still starts five tokens later.

    Parameters
    ----------
    tokens : array_like of int, shape (T,)
    vocab : mapping
        A vocabulary document (:func:`synthgen.formats.tokens.vocabulary`,
        :func:`synthgen.formats.tokens.read_vocabulary`).
    width, height : float, optional
        Image size in pixels; default the vocabulary's ``image_size``.
    probs : array_like of float, shape (T,) or (T, V), optional
        The model's probability of each emitted token, or its distribution
        over the ``V`` tokens at each position; an object's score is the
        probability of its class token.  Default: every score 1.

    Returns
    -------
    DecodedTokens

    Examples
    --------
    >>> from synthgen.formats.tokens import vocabulary
    >>> vocab = vocabulary([{"id": 7, "name": "washer"}], 16, (256, 128), order="raster", seed=0)
    >>> out = tokens_to_boxes([0, 1, 3, 15, 16, 2, 2, 4, 4, 17, 18], vocab)
    >>> out.boxes.tolist(), out.category_ids.tolist(), out.n_noise
    ([[8.0, 12.0, 56.0, 124.0]], [7], 1)
    """
    n_bins = int(vocab["n_bins"])
    if width is None or height is None:
        size = vocab.get("image_size") or {}
        width = size.get("width") if width is None else width
        height = size.get("height") if height is None else height
        if width is None or height is None:
            raise ValueError("the vocabulary has no single image size: pass width and height")
    t = np.asarray(tokens, dtype=np.int64).reshape(-1)
    p = None if probs is None else np.asarray(probs, dtype=np.float64)
    if p is not None and p.shape[0] != t.size:
        raise ValueError(f"probs must have one row per token ({t.size}) (got {p.shape[0]})")
    end = np.flatnonzero(t == vocab["ranges"]["end"][0])
    stop = int(end[0]) if end.size else t.size
    n_groups = stop // 5
    q = t[: 5 * n_groups].reshape(-1, 5)
    coords, cls = q[:, :4], q[:, 4]
    category_of = {int(c["token"]): int(c["category_id"]) for c in vocab["classes"]}
    is_class = np.isin(cls, np.fromiter(category_of, dtype=np.int64, count=len(category_of)))
    well_formed = ((coords >= 0) & (coords < n_bins)).all(axis=1)
    well_formed &= (coords[:, 2] >= coords[:, 0]) & (coords[:, 3] >= coords[:, 1])
    noise = well_formed & (cls == vocab["ranges"]["noise"][0])
    keep = well_formed & is_class
    boxes = np.empty((int(keep.sum()), 4), dtype=np.float64)
    boxes[:, 0::2] = dequantize(coords[keep][:, 0::2], width, n_bins)
    boxes[:, 1::2] = dequantize(coords[keep][:, 1::2], height, n_bins)
    at = 5 * np.flatnonzero(keep) + 4  # positions of the kept class tokens
    if p is None:
        scores = np.ones(at.size)
    elif p.ndim == 1:
        scores = p[at]
    else:
        scores = p[at, t[at]]
    return DecodedTokens(
        boxes=boxes,
        category_ids=np.array([category_of[c] for c in cls[keep].tolist()], dtype=np.int64),
        scores=scores.astype(np.float64),
        n_noise=int(noise.sum()),
        n_malformed=int(n_groups - keep.sum() - noise.sum() + (stop % 5 != 0)),
    )
