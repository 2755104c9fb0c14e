"""Cases about the dataset's make-up: size ranges, areas, crowd regions, images, categories, borders.

Size ranges go by the annotation's ``area``: small [0, 32^2], medium
[32^2, 96^2], large [96^2, 1e10], both ends included (REFERENCE.md:
COCO-style AP).
"""

from __future__ import annotations

import math

from synthgen.cases.draft import Draft, all_stats, found_all, medium, register, slot, upto

_NO_LARGE = {"AP_large": -1.0, "AR_large": -1.0}
_NO_SMALL = {"AP_small": -1.0, "AR_small": -1.0}


@register
def no_objects_anywhere():
    d = Draft()
    for _ in range(2):
        img = d.image()
        d.pred(img, slot(0), 0.8)
    return d.case(
        "no-objects-anywhere",
        "images listed, no annotations at all, some predictions",
        """Nothing is annotated, so no category has a counted object in any size range: there
        is nothing to average and every statistic is -1 (not 0, not NaN, not a crash).""",
        all_stats(-1.0),
    )


@register
def buckets_perfect_mixed():
    d = Draft()
    for _ in range(3):
        img = d.image()
        for k, (side, score) in enumerate(((20.0, 0.9), (50.0, 0.8), (120.0, 0.7))):
            box = d.truth(img, slot(k, side, side))
            d.pred(img, box, score)
    return d.case(
        "buckets-perfect-mixed",
        "perfect detector, objects of all three sizes: 1.0 in every size range",
        """Each image has a small (20 x 20), a medium (50 x 50) and a large (120 x 120) object,
        each found exactly. In one size range the objects of the other sizes are ignored, and
        a prediction that lands on an ignored object counts neither way, so each range
        scores 1. Dropping the other sizes' objects while keeping their predictions turns
        those predictions into false positives (AP_medium 0.5 and AP_large 1/3 here). AR1 =
        1/3 (one prediction per image counts).""",
        all_stats(1.0, AR1=1 / 3),
        aimed_at=("truth_only_buckets",),
    )


@register
def bucket_false_positive_of_other_size():
    d = Draft()
    for k in range(4):
        img = d.image_for(k, 2)
        box = d.truth(img, slot(k % 2, 20, 20))
        d.pred(img, box, 0.5)
    d.pred(1, slot(7, 150, 150), 0.9)
    return d.case(
        "bucket-false-positive-of-other-size",
        "a large false positive among small objects",
        """Four small objects are found at 0.5; one 150 x 150 background box scores 0.9. Over
        all sizes it is a false positive ahead of four true positives: AP = 4/5. In the small
        range an unmatched prediction whose own area (22500) is outside the range is
        ignored: AP_small = 1. Medium and large have no objects: -1. AR1 = 1/4 (the large
        box is image 1's best).""",
        {"AP": 0.8, "AP50": 0.8, "AP75": 0.8, "AP_small": 1.0, "AP_medium": -1.0, "AP_large": -1.0,
         "AR1": 0.25, "AR100": 1.0, "AR_small": 1.0},
        aimed_at=("truth_only_buckets",),
    )


def _sized(d: Draft, side: float, n: int = 4, *, area=None) -> None:
    for _ in range(n):
        img = d.image()
        box = d.truth(img, slot(0, side, side), area=area)
        d.pred(img, box, 0.9)


@register
def area_on_small_edge():
    d = Draft()
    _sized(d, 32.0)
    return d.case(
        "area-on-small-edge",
        "objects of area exactly 32^2 = 1024: both small and medium",
        """Both ends of a size range are included, so an area of exactly 1024 is in the small
        [0, 1024] and the medium [1024, 9216] range. All four objects are found: AP and AR
        are 1 in both; large has none (-1). Half-open ranges give AP_small or AP_medium -1.""",
        all_stats(1.0, **_NO_LARGE),
    )


@register
def area_on_large_edge():
    d = Draft()
    _sized(d, 96.0)
    return d.case(
        "area-on-large-edge",
        "objects of area exactly 96^2 = 9216: both medium and large",
        """An area of exactly 9216 is in the medium [1024, 9216] and the large [9216, 1e10]
        range (both ends included). All four objects are found: 1 in both; small has none (-1).""",
        all_stats(1.0, **_NO_SMALL),
    )


@register
def area_field_smaller_than_box():
    d = Draft()
    _sized(d, 34.0, area=math.pi * 17.0**2)
    return d.case(
        "area-field-smaller-than-box",
        "round parts: area field (pi r^2 = 908) small, box area (34^2 = 1156) medium",
        """Each object is a disc of radius 17 px: its box is 34 x 34 (1156 px^2, medium) but
        its annotated area is pi x 17^2 = 907.9 (small). Size ranges use the annotation's area,
        so all four found objects are small: AP_small = AR_small = 1, medium and large -1.
        Taking the area from the box makes them medium.""",
        all_stats(1.0, AP_medium=-1.0, AR_medium=-1.0, **_NO_LARGE),
        aimed_at=("area_from_box",),
    )


@register
def area_field_larger_than_box():
    d = Draft()
    _sized(d, 20.0, area=2000.0)
    return d.case(
        "area-field-larger-than-box",
        "area field 2000 (medium) on a 20 x 20 box (400, small)",
        """Each object's box is 20 x 20 but its annotated area is 2000 (the whole part, partly
        outside its box's crop). By the area field all four found objects are medium:
        AP_medium = AR_medium = 1, small and large -1. Taking the area from the box makes
        them small.""",
        all_stats(1.0, **_NO_SMALL, **_NO_LARGE),
        aimed_at=("area_from_box",),
    )


_CROWD = [16.0, 300.0, 400.0, 400.0]  # a crowd region of 400 x 400 px (large)


@register
def crowd_absorbs_predictions():
    d = Draft()
    img = d.image()
    for k in range(2):
        d.pred(img, d.truth(img, slot(k)), 0.5)
    d.truth(img, _CROWD, crowd=True)
    for x, y in ((50, 350), (200, 450), (300, 600)):
        d.pred(img, [float(x), float(y), 50.0, 50.0], 0.9)
    return d.case(
        "crowd-absorbs-predictions",
        "three predictions inside a crowd region, scored above the true positives",
        """A crowd region need not be found, and a prediction lying inside it (intersection
        over the prediction's own area >= t) is ignored, however many there are. The two
        ordinary objects are found: AP = AR100 = 1. AR1 keeps the image's best prediction,
        which lies in the crowd region: 0.""",
        medium(1.0, ar1=0.0),
        aimed_at=("no_crowd",),
    )


@register
def crowd_not_a_miss():
    d = Draft()
    found_all(d, 4, per_image=2)
    d.truth(1, _CROWD, crowd=True)
    return d.case(
        "crowd-not-a-miss",
        "a crowd region with no prediction on it",
        """Crowd regions are not counted objects: leaving one unpredicted costs nothing. The
        four ordinary objects are found: AP = AR100 = 1, AR1 = 1/2; the large range, holding
        only the crowd region, is -1.""",
        medium(1.0, ar1=0.5),
        aimed_at=("no_crowd",),
    )


@register
def crowd_partial_overlap():
    d = Draft()
    img = d.image()
    for k in range(4):
        d.pred(img, d.truth(img, slot(k)), 0.5)
    d.truth(img, [500.0, 500.0, 300.0, 300.0], crowd=True)
    d.pred(img, [481.0, 600.0, 50.0, 40.0], 0.9)  # 31 of its 50 columns inside: 1240 / 2000 = 0.62
    return d.case(
        "crowd-partial-overlap",
        "a prediction 62 % inside a crowd region",
        """Against a crowd region IoU is intersection over the prediction's own area: here
        1240/2000 = 0.62. At thresholds 0.50-0.60 the prediction is ignored (AP 1); at
        0.65-0.95 it is a false positive ranked above the four true positives (best
        precision 4/5). AP = (3 + 7 x 0.8)/10 = 0.86, AP50 = 1, AP75 = 0.8, AR100 = 1;
        AR1 = 0 (the image's best prediction is that one).""",
        medium(0.86, ap50=1.0, ap75=0.8, ar=1.0, ar1=0.0),
        aimed_at=("no_crowd",),
    )


@register
def crowd_object_inside_crowd():
    d = Draft()
    img = d.image()
    d.truth(img, _CROWD, crowd=True)
    box = d.truth(img, [200.0, 400.0, 50.0, 50.0])
    d.pred(img, box, 0.9)
    d.pred(img, box, 0.8)
    return d.case(
        "crowd-object-inside-crowd",
        "an ordinary object inside a crowd region, predicted twice",
        """A prediction takes a counted object before it may fall back on a crowd region. The
        first prediction takes the object (a true positive); its copy finds the object taken
        and lands on the crowd region around it, so it is ignored rather than a false
        positive. AP = AR = 1. Matching the crowd region first loses the object.""",
        medium(1.0),
        aimed_at=("no_crowd",),
    )


@register
def crowd_only_image():
    d = Draft()
    found_all(d, 2, per_image=2)
    img = d.image()
    d.truth(img, _CROWD, crowd=True)
    for x in (50.0, 200.0):
        d.pred(img, [x, 400.0, 50.0, 50.0], 0.9)
    return d.case(
        "crowd-only-image",
        "an image whose only annotation is a crowd region, with predictions in it",
        """Image 2 holds only a crowd region; its two predictions lie inside it and are
        ignored. Image 1's two objects are found: AP = AR100 = 1, AR1 = 1/2.""",
        medium(1.0, ar1=0.5),
        aimed_at=("no_crowd",),
    )


@register
def images_without_objects_with_predictions():
    d = Draft()
    found_all(d, 4, per_image=2)
    for _ in range(2):
        img = d.image()
        for k in range(2):
            d.pred(img, slot(k), 0.9)
    return d.case(
        "images-without-objects-with-predictions",
        "predictions on images that have no annotations are false positives",
        """Images 3 and 4 have no objects; their four predictions (0.9) are false positives
        ranked above the four true positives (0.5) of images 1-2: best precision 4/8, AP =
        0.5, AR100 = 1, AR1 = 1/2. Skipping images without annotations gives AP 1.""",
        medium(0.5, ar=1.0, ar1=0.5),
    )


@register
def images_without_objects_quiet():
    d = Draft()
    found_all(d, 4, per_image=2)
    for _ in range(4):
        d.image()
    return d.case(
        "images-without-objects-quiet",
        "images with neither annotations nor predictions",
        """Four of six images have no objects and no predictions; they add nothing. The four
        objects are found: AP = AR100 = 1, AR1 = 1/2.""",
        medium(1.0, ar1=0.5),
    )


@register
def category_without_objects():
    d = Draft((1, 2, 3))
    found_all(d, 4, per_image=4, categories=(1, 2))
    return d.case(
        "category-without-objects",
        "a listed category with no objects and no predictions",
        """Category 3 is listed but has no objects: its AP is undefined (-1) and left out of the
        mean, not counted as 0 (which would give 2/3). Categories 1 and 2 are found: AP = 1.""",
        {**medium(1.0, ar1=0.5), "category 3 AP": -1.0, "category 3 AR100": -1.0},
    )


@register
def category_without_objects_but_predictions():
    d = Draft((1, 2, 3))
    found_all(d, 4, per_image=4, categories=(1, 2))
    for k in range(4, 6):
        d.pred(1, slot(k), 0.95, 3)
    return d.case(
        "category-without-objects-but-predictions",
        "predictions of a category that has no objects",
        """Category 3 has no objects, so its two predictions have nothing to be measured
        against: its AP stays -1 and out of the mean. Categories 1 and 2 are found: AP = 1.""",
        {**medium(1.0, ar1=0.5), "category 3 AP": -1.0},
    )


@register
def category_ids_from_zero():
    d = Draft((0, 1), names={0: "washer", 1: "bolt"})
    for k in range(8):
        img = d.image_for(k, 4)
        box = d.truth(img, slot(k % 4), k % 2)
        if k % 2 == 0:
            d.pred(img, box, 0.9, 0)
    return d.case(
        "category-ids-from-zero",
        "category ids 0 and 1: category 0 found, category 1 missed",
        """Category ids are labels, not positions. Category 0's four objects are found (AP 1),
        category 1's four are missed (AP 0): AP = 0.5. Assuming ids 1..K drops category 0
        and gives 0.""",
        {**medium(0.5, ar1=0.25), "category 0 AP": 1.0, "category 1 AP": 0.0},
        aimed_at=("ids_from_one",),
    )


@register
def category_ids_sparse():
    d = Draft((90, 3, 17))
    for k in range(12):
        img = d.image_for(k, 6)
        cat = (3, 17, 90)[k % 3]
        box = d.truth(img, slot(k % 6), cat)
        if cat != 17 or k < 6:
            d.pred(img, box, 0.9 - 0.01 * k, cat)
    return d.case(
        "category-ids-sparse",
        "category ids 90, 3, 17 (listed out of order, with gaps)",
        """Categories 3 and 90 are found in full (AP 1); category 17 has two of four objects
        found (recall 0.5: precision 1 at the 51 recall points up to 0.50, AP 51/101). AP =
        (2 + 51/101)/3, AR100 = (1 + 0.5 + 1)/3.""",
        {"AP": (2 + upto(0.5)) / 3, "AR100": 2.5 / 3, "category 3 AP": 1.0, "category 17 AP": upto(0.5),
         "category 90 AP": 1.0},
        aimed_at=("ids_from_one",),
    )


@register
def many_categories():
    ids = list(range(100, 0, -1))
    d = Draft(ids)
    for k in range(100):
        img = d.image_for(k, 25)
        cat = k + 1
        box = d.truth(img, slot(k % 25), cat)
        if cat % 2:
            d.pred(img, box, 0.5, cat)
    return d.case(
        "many-categories",
        "100 categories, one object each, the odd ones found",
        """Each of 100 categories has one object; the 50 with odd ids are found (AP 1 each), the
        others are not (AP 0): AP = AR100 = 0.5. AP is a mean over categories, not over
        objects or predictions.""",
        medium(0.5),
    )


@register
def unknown_category_predictions():
    d = Draft()
    placed = found_all(d, 4, per_image=2)
    for img, box in placed:
        d.pred(img, box, 0.95, 7)
    return d.case(
        "unknown-category-predictions",
        "predictions labelled with a category id the annotations do not list",
        """The four objects (category 1) are found, and each also has a prediction labelled 7,
        which no category of the ground truth has. Metrics are computed for the listed
        categories only, so those predictions count nowhere: AP = AR100 = 1.""",
        medium(1.0, ar1=0.5),
    )


@register
def boxes_touching_border():
    d = Draft()
    for x, y in ((0.0, 0.0), (150.0, 0.0), (0.0, 100.0), (150.0, 100.0)):
        img = d.image(200, 150)
        box = d.truth(img, [x, y, 50.0, 50.0])
        d.pred(img, box, 0.9)
    return d.case(
        "boxes-touching-border",
        "objects flush with each image corner (edges on 0, width and height)",
        """Boxes are continuous: [150, 100, 50, 50] in a 200 x 150 image ends exactly on the
        right and bottom edges. Each object is found with its own box: AP = AR = 1 (clipping
        to width - 1 or adding 1 to sizes breaks the IoU of 1).""",
        medium(1.0),
    )


@register
def prediction_past_border():
    d = Draft()
    for k in range(4):
        img = d.image(200, 150)
        if k % 2 == 0:
            d.truth(img, [0.0, 50.0, 40.0, 40.0])
            d.pred(img, [-8.0, 50.0, 48.0, 40.0], 0.9)
        else:
            d.truth(img, [160.0, 50.0, 40.0, 40.0])
            d.pred(img, [160.0, 50.0, 48.0, 40.0], 0.9)
    return d.case(
        "prediction-past-border",
        "predictions reaching 8 px past the image edge (not clipped)",
        """Each 40 x 40 object touches a side edge; its prediction is 48 px wide and reaches 8 px
        past that edge. Boxes are compared as given: IoU = 40/48 = 0.833, a true positive at
        the 7 thresholds 0.50-0.80: AP = AR = 0.7, AP50 = AP75 = 1. Clipping predictions to
        the image first gives IoU 1 and AP 1.""",
        medium(0.7, ap50=1.0, ap75=1.0),
    )


@register
def zero_width_predictions():
    d = Draft()
    placed = found_all(d, 4, per_image=2)
    for img, box in placed:
        d.pred(img, [box[0], box[1], 0.0, box[3]], 0.9)
    return d.case(
        "zero-width-predictions",
        "predictions of zero width on each object's left edge",
        """A box of zero width has zero area and IoU 0 with everything (no division by zero:
        the union is the object's area). The four zero-width predictions (0.9) are false
        positives ahead of four exact ones (0.5): AP = 4/8 = 0.5. Their area, 0, is outside
        the medium range, so there they are ignored: AP_medium = 1. AR1 = 0.""",
        {"AP": 0.5, "AP50": 0.5, "AP75": 0.5, "AP_small": -1.0, "AP_medium": 1.0, "AP_large": -1.0,
         "AR1": 0.0, "AR10": 1.0, "AR100": 1.0, "AR_small": -1.0, "AR_medium": 1.0, "AR_large": -1.0},
        aimed_at=("truth_only_buckets",),
    )
