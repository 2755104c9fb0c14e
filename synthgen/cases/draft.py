"""What a known-answer case is, and the helpers its builder uses to lay it out.

Every builder lays out a handful of boxes on a parts tray (images of 960 x 960
px, objects on a 160 px grid so that no two objects overlap unless the case
says so), writes predictions whose outcome is fixed by construction, and states
in closed form the statistics the case is about
(:func:`synthgen.cases.library.build_cases` adds the rest from the reference).

A value with nothing to average (a size range or category without counted
objects) is -1, the usual COCO convention.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

from synthgen.cases.adapters import DEFAULT_TOLERANCE, compare, stats_from
from synthgen.cases.reference import STAT_NAMES

__all__ = ["Case", "BUILDERS", "register"]

#: Builders of the library, in registration order; each returns a Case or a list of them.
BUILDERS: list[Callable[[], Case | list[Case]]] = []


@dataclass(frozen=True)
class Case:
    """One known-answer case.

    Attributes
    ----------
    name : str
        Folder name, e.g. ``"iou-equal-0.75"``.
    trap : str
        One line: what an evaluator can get wrong here.
    why : str
        How the answer follows from the definition (the README paragraph).
    annotations : dict
        COCO JSON ground truth.
    predictions : list of dict
        COCO results records.
    closed : dict
        The values stated in closed form: stat names (:data:`STAT_NAMES`),
        ``"category <id> AP"`` style per-category keys, ``"precision"``,
        ``"recall"``, ``"f1"``.
    aimed_at : tuple of str
        The deliberate mistakes (:data:`synthgen.cases.reference.BUGS`) this case exposes.
    threshold : float or None
        Score threshold at which precision, recall and F1 are pinned.
    expected : dict
        The full expected values (``stats``, ``per_category``, ``buckets``,
        optionally ``at_threshold``), filled by :func:`build_cases`.
    """

    name: str
    trap: str
    why: str
    annotations: dict
    predictions: list
    closed: dict
    aimed_at: tuple = ()
    threshold: float | None = None
    expected: dict = field(default_factory=dict)

    def check(self, result, *, tolerance: float | None = None) -> None:
        """Raise ``AssertionError`` unless an evaluator's result gives this case's statistics.

        ``result`` is anything :func:`synthgen.cases.stats_from` reads (12 numbers,
        a mapping by statistic name, an object with ``.stats``); only the
        statistics it holds are compared, to ``tolerance`` (default
        :data:`synthgen.cases.adapters.DEFAULT_TOLERANCE`).
        """
        got = stats_from(result)
        bad = compare(self.expected["stats"], got, DEFAULT_TOLERANCE if tolerance is None else tolerance)
        if bad:
            diffs = "; ".join(f"{n} expected {self.expected['stats'][n]:.6g}, got {got[n]:.6g}" for n in bad)
            raise AssertionError(f"case {self.name} ({self.trap}): {diffs}")


def register(fn):
    """Add a case builder to the library."""
    BUILDERS.append(fn)
    return fn


# --------------------------------------------------------------------------- drafting


class Draft:
    """Images, objects and predictions of a case under construction (ids from 1 in order)."""

    def __init__(self, categories=(1,), *, names=None):
        self.categories = [{"id": c, "name": (names or {}).get(c, f"part{c}"), "supercategory": "part"}
                           for c in categories]
        self.images: list = []
        self.annotations: list = []
        self.predictions: list = []

    def image(self, width: int = 960, height: int = 960) -> int:
        i = len(self.images) + 1
        self.images.append({"id": i, "file_name": f"tray{i:03d}.png", "width": width, "height": height})
        return i

    def image_for(self, k: int, per_image: int) -> int:
        """The image of the ``k``-th object when each image holds ``per_image``: a new one every ``per_image``."""
        return self.image() if k % per_image == 0 else self.images[-1]["id"]

    def truth(self, image: int, box, category=None, *, area=None, crowd: bool = False) -> list:
        x, y, w, h = (float(v) for v in box)
        self.annotations.append({
            "id": len(self.annotations) + 1, "image_id": image,
            "category_id": self.categories[0]["id"] if category is None else category,
            "bbox": [x, y, w, h], "area": w * h if area is None else float(area), "iscrowd": int(crowd),
        })
        return [x, y, w, h]

    def pred(self, image: int, box, score: float, category=None) -> None:
        self.predictions.append({
            "image_id": image, "category_id": self.categories[0]["id"] if category is None else category,
            "bbox": [float(v) for v in box], "score": float(score),
        })

    def case(self, name, trap, why, closed, *, aimed_at=(), threshold=None) -> Case:
        gt = {"images": self.images, "annotations": self.annotations, "categories": self.categories}
        return Case(name, trap, " ".join(why.split()), gt, self.predictions, dict(closed), tuple(aimed_at), threshold)


def slot(i: int, w: float = 50.0, h: float = 50.0) -> list:
    """Box ``[x, y, w, h]`` in grid cell ``i`` (5 cells of 160 px per row)."""
    return [16.0 + 160.0 * (i % 5), 16.0 + 160.0 * (i // 5), float(w), float(h)]


def upto(recall: float) -> float:
    """Interpolated AP of a list that keeps precision 1 up to ``recall`` and finds nothing more.

    The recall points 0, 0.01, ..., recall each read precision 1 and the rest 0.
    """
    return (math.floor(100 * recall + 1e-9) + 1) / 101


def all_stats(value: float, **others) -> dict:
    """The twelve statistics all equal to ``value``, except those given."""
    out = dict.fromkeys(STAT_NAMES, value)
    out.update(others)
    return out


def medium(value: float, *, ap50=None, ap75=None, ar=None, ar1=None, ar10=None) -> dict:
    """The twelve statistics when every object is of medium size (small and large are -1)."""
    ar = value if ar is None else ar
    return {
        "AP": value, "AP50": value if ap50 is None else ap50, "AP75": value if ap75 is None else ap75,
        "AP_small": -1.0, "AP_medium": value, "AP_large": -1.0,
        "AR1": ar if ar1 is None else ar1, "AR10": ar if ar10 is None else ar10, "AR100": ar,
        "AR_small": -1.0, "AR_medium": ar, "AR_large": -1.0,
    }


def found_all(d: Draft, n: int, *, per_image: int = 5, score: float = 0.5, categories=None) -> list:
    """``n`` medium objects over images of ``per_image``, each predicted exactly; returns (image, box) pairs."""
    placed = []
    for k in range(n):
        img = d.image_for(k, per_image)
        cat = None if categories is None else categories[k % len(categories)]
        box = d.truth(img, slot(k % per_image), cat)
        d.pred(img, box, score, cat)
        placed.append((img, box))
    return placed


