"""Cases about matching and ranking: IoU thresholds, misses, duplicates, classes, ties, the 100 cut.

Objects are 50 x 50 px (area 2500, medium size) unless a case says otherwise,
so the small and large statistics are -1 and the medium ones equal the overall
ones.
"""

from __future__ import annotations

from fractions import Fraction

from synthgen.cases.draft import Draft, found_all, medium, register, slot, upto

_THRESHOLDS = tuple(Fraction(50 + 5 * i, 100) for i in range(10))


@register
def perfect():
    d = Draft((1, 2))
    found_all(d, 12, categories=(1, 2), score=0.9)
    return d.case(
        "perfect",
        "every object predicted with its own box",
        """Each annotation comes back as a prediction of its own category with the
        annotation's box: every match has IoU 1, so precision is 1 at every recall and
        recall reaches 1 at every threshold. All statistics are 1 (small and large are -1:
        every object is of medium size).""",
        medium(1.0, ar1=0.5),
    )


@register
def empty_predictions():
    d = Draft((1, 2))
    for k in range(6):
        img = d.image_for(k, 3)
        d.truth(img, slot(k % 3), 1 + k % 2)
    return d.case(
        "empty-predictions",
        "no predictions at all (some evaluators crash on an empty results list)",
        """There are objects and no predictions: recall is 0 and no recall point is reached,
        so AP and AR are 0 where there are objects (medium) and -1 where there are none.""",
        medium(0.0),
    )


def _iou_geometry(t: Fraction, below: bool) -> tuple[int, int]:
    """Width ``w`` and x-shift ``s`` of two equal boxes whose IoU ``(w - s) / (w + s)`` is ``t`` or just below.

    Equal boxes offset by ``s`` along x have IoU ``(w - s) / (w + s)`` (analytic
    geometry).  For ``t = p / q`` in lowest terms, ``w - s = p m`` and
    ``w + s = q m`` give integer boxes whose IoU is exactly ``t``, so the double
    the evaluator computes is the double nearest ``t``, the threshold itself.
    Just below: ``w = 400`` and the smallest integer shift past ``t``.
    """
    if below:
        w = 400
        s = int((w * (1 - t) / (1 + t)).__floor__()) + 1
        return w, s
    p, q = t.numerator, t.denominator
    m = 1
    while (p + q) * m % 2 or (p + q) * m // 2 < 40:
        m += 1
    return (p + q) * m // 2, (q - p) * m // 2


@register
def iou_at_each_threshold():
    out = []
    for i, t in enumerate(_THRESHOLDS):
        for below in (False, True):
            w, s = _iou_geometry(t, below)
            h = 40 if not below else 20  # medium either way: 40 x >= 40 or 400 x 20 px
            iou = Fraction(w - s, w + s)
            assert (iou < t) if below else (iou == t)
            d = Draft((1, 2, 3))
            for k in range(6):
                img = d.image_for(k, 3)
                cat = 1 + k % 3
                box = d.truth(img, _wide(k % 3, w, h), cat)
                d.pred(img, [box[0] + s, *box[1:]], 0.9 - 0.05 * k, cat)
            n = i if below else i + 1  # thresholds at which every prediction matches
            stats = medium(n / 10, ap50=float(n >= 1), ap75=float(n >= 6))
            upto_t = f"at the {n} thresholds up to {(50 + 5 * (n - 1)) / 100:.2f}" if n else "at no threshold"
            word = "just below" if below else "exactly at"
            name = f"iou-{'below' if below else 'equal'}-{float(t):.2f}"
            out.append(d.case(
                name,
                f"every prediction at IoU {word} {float(t):.2f}" + ("" if below else " (a match needs IoU >= t)"),
                f"""Every prediction is its object's {w} x {h} px box shifted by {s} px along x,
                so its IoU is ({w} - {s}) / ({w} + {s}) = {iou.numerator}/{iou.denominator}
                ({float(iou):.6f}), {word} the threshold {float(t):.2f}. A prediction matches
                at a threshold t when IoU >= t, so it is a true positive {upto_t}
                and a miss plus a false positive above: AP and AR are {n}/10,
                AP50 {float(n >= 1):.0f} and AP75 {float(n >= 6):.0f}.
                Each image holds one object per category, so AR1 = AR10 = AR100.""",
                stats,
                aimed_at=() if below else ("threshold_strict",),
            ))
    return out


def _wide(k: int, w: int, h: int) -> list:
    """Box of width ``w`` in row ``k`` of an image (rows 200 px apart, room for a shift)."""
    return [40.0, 40.0 + 200.0 * k, float(w), float(h)]


@register
def missed_quarter():
    d = Draft()
    for k in range(20):
        img = d.image_for(k, 5)
        box = d.truth(img, slot(k % 5))
        if k % 4 != 3:
            d.pred(img, box, 0.95 - 0.01 * k)
    return d.case(
        "missed-quarter",
        "a quarter of the objects missed, every prediction right",
        """Of 20 objects of one category, every fourth is missed and the other 15 are
        predicted exactly. Precision stays 1 up to recall 15/20 = 0.75 and nothing more is
        found, so the interpolated precision is 1 at the 76 recall points 0, 0.01, ..., 0.75
        and 0 at the other 25: AP = 76/101 at every threshold, not 0.75 (area under the
        curve) and not 1 (precision alone). AR100 = 0.75.""",
        medium(upto(0.75), ar=0.75, ar1=0.2, ar10=0.75),
    )


@register
def missed_third():
    d = Draft()
    for k in range(9):
        img = d.image_for(k, 3)
        box = d.truth(img, slot(k % 3))
        if k % 3 != 1:
            d.pred(img, box, 0.9)
    return d.case(
        "missed-third",
        "a third of the objects missed (recall 2/3, between recall points)",
        """Six of nine objects are found, each exactly; recall 2/3 = 0.667 lies between the
        recall points 0.66 and 0.67, so precision 1 is read at the 67 points up to 0.66:
        AP = 67/101. AR100 = 2/3; AR1 = 1/3 (one prediction per image counts).""",
        medium(upto(2 / 3), ar=2 / 3, ar1=1 / 3),
    )


@register
def duplicate_after_match():
    d = Draft()
    placed = found_all(d, 8, per_image=4, score=0.9)
    for img, box in placed:
        d.pred(img, box, 0.6)
    return d.case(
        "duplicate-after-match",
        "every object predicted twice, the copy scored lower",
        """Each object has two identical predictions, at 0.9 and 0.6. The first takes the
        object; the copy finds it taken and is a false positive. The copies rank below
        every true positive, so precision is 1 up to recall 1: AP = AR = 1. At score
        threshold 0.5 both copies count: 8 true and 8 false positives, precision 0.5,
        recall 1, F1 = 2/3.""",
        {**medium(1.0, ar1=0.25), "precision": 0.5, "recall": 1.0, "f1": 2 / 3},
        threshold=0.5,
    )


@register
def duplicate_ranked_first():
    d = Draft()
    w, s = 81, 19  # IoU (81 - 19) / (81 + 19) = 0.62
    for _ in range(4):
        img = d.image()
        box = d.truth(img, [40.0, 40.0, float(w), 40.0])
        d.pred(img, [box[0] + s, *box[1:]], 0.9)
        d.pred(img, box, 0.8)
    return d.case(
        "duplicate-ranked-first",
        "a loose prediction outscores the exact one on the same object (greedy by score, not best IoU)",
        """Each of four objects (one per image) has a prediction at IoU 0.62 scored 0.9 and an
        exact one scored 0.8. Matching goes by score: at thresholds 0.50-0.60 the loose one
        takes the object and the exact one is a false positive ranked after every true
        positive (AP 1); at 0.65-0.95 the loose ones are four false positives ahead of four
        true positives, and the best precision at any recall is 4/8 (AP 0.5). AP =
        (3 x 1 + 7 x 0.5)/10 = 0.65, AP75 = 0.5, AR100 = 1; AR1 keeps only the loose
        prediction: 3/10.""",
        medium(0.65, ap50=1.0, ap75=0.5, ar=1.0, ar1=0.3),
    )


@register
def wrong_class_all():
    d = Draft((1, 2))
    for k in range(8):
        img = d.image_for(k, 4)
        cat = 1 + k % 2
        box = d.truth(img, slot(k % 4), cat)
        d.pred(img, box, 0.9, 3 - cat)
    return d.case(
        "wrong-class-all",
        "every box exact but labelled with the other category",
        """A prediction only matches objects of its own category. Every prediction has the
        other category's label, so each is a false positive and each object is missed:
        every statistic is 0 (an evaluator that ignores the label gives 1).""",
        medium(0.0),
    )


@register
def wrong_class_half():
    d = Draft((1, 2))
    for k in range(8):
        img = d.image_for(k, 4)
        cat = 1 + k % 2
        box = d.truth(img, slot(k % 4), cat)
        d.pred(img, box, 0.9 if cat == 1 else 0.4, 1)
    return d.case(
        "wrong-class-half",
        "objects of category 2 all predicted as category 1, ranked after the true positives",
        """Category 1's four objects are found at score 0.9; category 2's four are predicted
        with label 1 at 0.4, false positives of category 1 ranked after its true positives.
        Category 1 has AP 1, category 2 AP 0 (nothing predicted): AP = 0.5, AR100 = 0.5.""",
        {**medium(0.5, ar1=0.25), "category 1 AP": 1.0, "category 2 AP": 0.0, "category 2 AR100": 0.0},
    )


def _with_background(found: float, background: float) -> Draft:
    """Two images, each with two objects found at score ``found`` and two background boxes at ``background``."""
    d = Draft()
    found_all(d, 4, per_image=2, score=found)
    for img in (1, 2):
        for k in (2, 3):
            d.pred(img, slot(k), background)
    return d


@register
def background_after():
    return _with_background(0.9, 0.3).case(
        "background-after",
        "false positives on background, all scored below the true positives",
        """Four objects are found at 0.9 and four boxes on empty background score 0.3. The
        false positives come after recall 1 is reached with precision 1, so AP = AR = 1. At
        score threshold 0.2 all eight count: precision 0.5, recall 1, F1 2/3.""",
        {**medium(1.0, ar1=0.5), "precision": 0.5, "recall": 1.0, "f1": 2 / 3},
        threshold=0.2,
    )


@register
def background_before():
    return _with_background(0.5, 0.95).case(
        "background-before",
        "false positives on background, all scored above the true positives",
        """Four boxes on background score 0.95, four exact predictions 0.5. After the four false
        positives, the k-th true positive gives precision k/(4 + k); the highest precision at
        any recall is 4/8, so AP = 0.5 at every threshold, AR100 = 1.""",
        medium(0.5, ar=1.0, ar1=0.0),
    )


@register
def precision_recall_at_threshold():
    d = Draft()
    for k in range(10):
        img = d.image_for(k, 5)
        box = d.truth(img, slot(k % 5))
        if k < 6:
            d.pred(img, box, 0.9)
        elif k < 8:
            d.pred(img, box, 0.6)
    d.pred(1, slot(5), 0.7)
    d.pred(2, slot(5), 0.7)
    d.pred(2, slot(6), 0.3)
    return d.case(
        "precision-recall-at-threshold",
        "precision, recall and F1 at score 0.5, and a curve with a dip",
        """Ten objects: six found at 0.9, two false positives at 0.7, two more found at 0.6,
        two missed, one false positive at 0.3. At score threshold 0.5: 8 true and 2 false
        positives, precision 0.8, recall 0.8, F1 0.8. The curve keeps precision 1 to recall
        0.6, then 8/10 at recall 0.8: the interpolated precision is 1 at the 61 points up to
        0.60 and 0.8 at the 20 points 0.61-0.80, AP = (61 + 16)/101.""",
        {**medium(77 / 101, ar=0.8, ar1=0.2), "precision": 0.8, "recall": 0.8, "f1": 0.8},
        threshold=0.5,
    )


@register
def ties_all_true():
    d = Draft()
    found_all(d, 8, per_image=4, score=0.5)
    return d.case(
        "ties-all-true",
        "every prediction has the same score (order among ties must not matter here)",
        """Eight exact predictions all score 0.5. However the ties are ordered, every
        prediction is a true positive, so AP = AR = 1; AR1 = 2/8 (one prediction per image).""",
        medium(1.0, ar1=0.25),
    )


@register
def ties_file_order():
    d = Draft()
    for _ in range(4):
        img = d.image()
        box = d.truth(img, slot(0))
        d.pred(img, slot(3), 0.5)
        d.pred(img, box, 0.5)
    return d.case(
        "ties-file-order",
        "a false and a true positive tie; the results file lists the false one first",
        """Each of four images has one object, a background box and an exact box, both scored
        0.5, the background box first in the results file. Ties keep the file order (a
        stable sort, the COCO convention; the definition itself leaves ties open, so this
        case pins the convention): the ranking alternates false, true, and precision at
        recall k/4 is k/2k = 0.5, so AP = 0.5 and AR100 = 1. An evaluator that puts true
        positives first among ties gives 1.""",
        medium(0.5, ar=1.0, ar1=0.0),
    )


@register
def ar_by_detection_limit():
    d = Draft()
    img = d.image()
    for k in range(10):
        box = d.truth(img, slot(k))
        d.pred(img, box, 0.9 - 0.05 * k)
    return d.case(
        "ar-by-detection-limit",
        "ten objects in one image: AR1, AR10 and AR100 keep 1, 10 and 100 predictions per image",
        """One image holds ten objects of one category, each found. AR1 keeps the best
        prediction of the image: recall 1/10. AR10 and AR100 keep all ten: recall 1.""",
        medium(1.0, ar1=0.1, ar10=1.0),
    )


def _crowded_image(d: Draft, n_objects: int, n_false: int, score_true: float, category=None) -> None:
    """One image with ``n_objects`` found at ``score_true`` and ``n_false`` background boxes at 0.9."""
    img = d.image(2000, 2000)
    for k in range(n_objects):
        box = d.truth(img, [20.0 + 100 * k, 20.0, 50.0, 50.0], category)
        d.pred(img, box, score_true, category)
    for k in range(n_false):
        d.pred(img, [20.0 + 60 * (k % 30), 200.0 + 60 * (k // 30), 50.0, 50.0], 0.9, category)


@register
def cut_true_positives_past_100():
    d = Draft()
    _crowded_image(d, 5, 100, 0.5)
    return d.case(
        "cut-true-positives-past-100",
        "101st to 105th predictions of an image are the true positives",
        """One image, one category: 100 background boxes at 0.9 and the five objects found at
        0.5. Only the first 100 predictions per image and category count, so the five true
        positives are cut: every statistic is 0. Without the cut AP would be 5/105.""",
        medium(0.0),
        aimed_at=("no_detection_cut",),
    )


@register
def cut_exactly_100():
    d = Draft()
    _crowded_image(d, 5, 95, 0.5)
    return d.case(
        "cut-exactly-100",
        "exactly 100 predictions in an image, the true positives last",
        """95 background boxes at 0.9 and five objects found at 0.5 make exactly 100
        predictions, all kept. Precision at recall 1 is 5/100, the highest anywhere: AP =
        0.05, AR100 = 1, AR10 = AR1 = 0. An evaluator keeping 99 loses a true positive.""",
        medium(0.05, ar=1.0, ar1=0.0, ar10=0.0),
    )


@register
def cut_per_category():
    d = Draft((1, 2))
    _crowded_image(d, 2, 100, 0.5, 1)
    for k in range(2):
        box = d.truth(1, [20.0 + 100 * k, 1500.0, 50.0, 50.0], 2)
        d.pred(1, box, 0.4, 2)
    return d.case(
        "cut-per-category",
        "the 100 cut counts per image and category, not per image",
        """One image: category 1 has 100 background boxes at 0.9 and its two objects found at
        0.5 (cut: AP 0); category 2's two objects are found at 0.4, its only predictions (AP 1).
        AP = 0.5. Cutting the image's 102 predictions to 100 regardless of category drops
        category 2's true positives; not cutting gives category 1 AP 2/102.""",
        {**medium(0.5, ar1=0.25), "category 1 AP": 0.0, "category 2 AP": 1.0},
        aimed_at=("no_detection_cut",),
    )
