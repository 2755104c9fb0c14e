"""What went wrong, by kind, and how much AP each kind costs.

Every prediction is given one kind (:func:`classify`), by the rules of
:func:`synthgen.evaluate.classify.classify_predictions` (COCO's greedy match by
score per image at IoU 0.5, :mod:`synthgen.evaluate.match`; a localization error is a box of the right class with IoU in [0.1, 0.5)
with an object of its class):

* ``true_positive``, ``duplicate``, ``localization``, ``wrong_class``,
  ``background``, and ``ignored`` (on an ignore region: neither right nor wrong);
* and every object no true positive found is either the *target* of a
  localization or wrong-class error (the object the faulty box was nearest
  to) or ``missed``: nothing came near it.

How much AP a kind costs is measured by mending only the errors of that kind
and scoring again with :func:`synthgen.evaluate.evaluate` (:func:`breakdown`):

* ``duplicate`` and ``background``: the faulty predictions are removed;
* ``localization``: each faulty box is replaced by its target's box, in
  descending score; a box whose target is already found (by a true positive or
  by a higher-scoring mended box) is removed instead, since it would only be a
  duplicate;
* ``wrong_class``: each faulty prediction takes its target's class, with the
  same rule for targets already found;
* ``missed``: a perfect prediction of each missed object is added, scored above
  every other prediction.

The rise in AP when one kind is mended is that kind's cost.  The costs of the
kinds do not add up to ``1 - AP``: mending one kind changes what the others
cost.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from synthgen.evaluate import STAT_NAMES, evaluate
from synthgen.evaluate.classify import Predictions, classify_matches, truth_arrays
from synthgen.geometry import pairwise_iou

__all__ = ["ERROR_KINDS", "Classified", "Breakdown", "classify", "mend", "breakdown"]

#: The kinds counted in the breakdown, in the order a page shows them.
ERROR_KINDS = ("true_positive", "duplicate", "localization", "wrong_class", "background", "missed")

_IOU = 0.5  # match threshold
_NEAR = 0.1  # lowest IoU still counted as a localization error


@dataclass(frozen=True, slots=True)
class Classified:
    """What each prediction is, and what each object's fate was.

    Attributes
    ----------
    kinds : tuple of str, length P
        Kind of each prediction, in the results list's order.
    target : ndarray of int64, shape (P,)
        For a localization or wrong-class error, the index (file order) of the
        annotation it was nearest to; -1 otherwise.
    missed : tuple of int
        Indices (file order) of the non-crowd annotations that no prediction
        found or came near.
    found : frozenset of int
        Indices of the annotations a true positive found.
    """

    kinds: tuple[str, ...]
    target: np.ndarray
    missed: tuple[int, ...]
    found: frozenset

    def counts(self) -> dict[str, int]:
        """Number of predictions of each kind (objects for ``missed``), every kind in :data:`ERROR_KINDS`."""
        out = {k: 0 for k in ERROR_KINDS}
        for k in self.kinds:
            if k in out:
                out[k] += 1
        out["missed"] = len(self.missed)
        return out


def classify(coco: Mapping, predictions: Sequence[Mapping]) -> Classified:
    """Kind of every prediction and the target of every localization and wrong-class error.

    Parameters
    ----------
    coco : dict
        COCO ground truth.
    predictions : list of dict
        COCO results records.

    Examples
    --------
    >>> gt = {"annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10]},
    ...                       {"id": 2, "image_id": 1, "category_id": 1, "bbox": [40, 40, 10, 10]}]}
    >>> c = classify(gt, [{"image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10], "score": .9},
    ...                   {"image_id": 1, "category_id": 1, "bbox": [1, 0, 10, 10], "score": .8}])
    >>> c.kinds, c.missed
    (('true_positive', 'duplicate'), (1,))
    """
    preds = Predictions.from_records(predictions)
    classified, took = classify_matches(coco, preds, iou=_IOU, near=_NEAR)
    kinds = np.array(classified.kind, dtype=str)
    boxes, img, cat, crowd, _ = truth_arrays(coco)
    target = np.full(len(preds), -1, dtype=np.int64)
    for p in np.flatnonzero(np.isin(kinds, ("localization", "wrong_class"))):
        cand = np.flatnonzero((img == preds.image_id[p]) & ~crowd)
        same = cat[cand] == preds.category_id[p]
        cand = cand[same] if kinds[p] == "localization" else cand[~same]
        iou = pairwise_iou(preds.boxes[p : p + 1], boxes[cand])[0]  # (C,)
        target[p] = cand[len(iou) - 1 - int(np.argmax(iou[::-1]))]  # the later of equal IoUs
    found = set(took[kinds == "true_positive"].tolist())  # the objects COCO's matcher gave true positives
    near = set(target[target >= 0].tolist())
    missed = tuple(int(g) for g in np.flatnonzero(~crowd) if g not in found and g not in near)
    return Classified(classified.kind, target, missed, frozenset(found))


def mend(coco: Mapping, predictions: Sequence[Mapping], classified: Classified, kind: str) -> list[dict]:
    """The predictions with every error of one kind mended (see the module docstring).

    Parameters
    ----------
    kind : str
        One of :data:`ERROR_KINDS` but ``true_positive``.

    Returns
    -------
    list of dict
        New records; the input is not modified.
    """
    if kind not in ERROR_KINDS or kind == "true_positive":
        raise ValueError(f"'kind' must be one of {ERROR_KINDS[1:]} (got {kind!r})")
    kinds = classified.kinds
    if kind in ("duplicate", "background"):
        return [dict(p) for p, k in zip(predictions, kinds) if k != kind]
    anns = list(coco.get("annotations", []))
    if kind == "missed":
        top = max((float(p.get("score", 1.0)) for p in predictions), default=0.0) + 1.0
        added = [{"image_id": anns[g]["image_id"], "category_id": anns[g]["category_id"],
                  "bbox": list(anns[g]["bbox"]), "score": top} for g in classified.missed]
        return [dict(p) for p in predictions] + added
    taken = set(classified.found)
    out: dict[int, dict | None] = {i: dict(p) for i, p in enumerate(predictions)}
    faulty = [i for i, k in enumerate(kinds) if k == kind]
    for i in sorted(faulty, key=lambda i: -float(predictions[i].get("score", 1.0))):
        g = int(classified.target[i])
        if g in taken:
            out[i] = None
            continue
        taken.add(g)
        if kind == "localization":
            out[i]["bbox"] = list(anns[g]["bbox"])
        else:
            out[i]["category_id"] = anns[g]["category_id"]
    return [p for p in out.values() if p is not None]


@dataclass(frozen=True, slots=True)
class Breakdown:
    """Counts per kind and the AP with each kind mended.

    Attributes
    ----------
    counts : dict of str -> int
        Predictions of each kind (objects for ``missed``), :data:`ERROR_KINDS`.
    ignored : int
        Predictions on ignore regions.
    ap, ap50 : float
        AP (IoU .50:.95) and AP50 as scored.
    mended : dict of str -> (float, float)
        ``(AP, AP50)`` with the errors of one kind mended, for every kind but
        ``true_positive``.
    classified : Classified
    """

    counts: dict
    ignored: int
    ap: float
    ap50: float
    mended: dict
    classified: Classified

    def gain(self, kind: str) -> tuple[float, float]:
        """Rise in ``(AP, AP50)`` when the errors of ``kind`` are mended."""
        ap, ap50 = self.mended[kind]
        return ap - self.ap, ap50 - self.ap50

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary."""
        return {
            "counts": dict(self.counts),
            "ignored": self.ignored,
            "AP": self.ap,
            "AP50": self.ap50,
            "mended": {k: {"AP": a, "AP50": b} for k, (a, b) in self.mended.items()},
        }


def _ap_pair(coco: Mapping, predictions: list) -> tuple[float, float]:
    stats = evaluate(coco, predictions).stats
    return float(stats[STAT_NAMES.index("AP")]), float(stats[STAT_NAMES.index("AP50")])


def breakdown(coco: Mapping, predictions: Sequence[Mapping]) -> Breakdown:
    """Classify the predictions and measure what mending each kind of error gains.

    Examples
    --------
    >>> gt = {"images": [{"id": 1}], "categories": [{"id": 1, "name": "disc"}],
    ...       "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 10, 10],
    ...                        "area": 100.0, "iscrowd": 0}]}
    >>> b = breakdown(gt, [{"image_id": 1, "category_id": 1, "bbox": [20, 20, 10, 10], "score": .9}])
    >>> b.counts["background"], b.counts["missed"], b.ap50, round(b.mended["missed"][1], 6)
    (1, 1, 0.0, 1.0)
    """
    predictions = list(predictions)
    ap, ap50 = _ap_pair(coco, predictions)  # validates the records before anything else reads them
    classified = classify(coco, predictions)
    mended = {k: _ap_pair(coco, mend(coco, predictions, classified, k)) for k in ERROR_KINDS[1:]}
    ignored = sum(k == "ignored" for k in classified.kinds)
    return Breakdown(classified.counts(), ignored, ap, ap50, mended, classified)
