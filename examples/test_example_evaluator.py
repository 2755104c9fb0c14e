"""Example: testing your own evaluator on datasets whose AP is known in closed form."""

import numpy as np
import pytest
from hypothesis import given, settings

from synthgen.testing import coco_datasets


def my_ap50(gt, preds):
    """The code under test: AP at IoU 0.5, 101-point interpolation, mean over categories."""
    from synthgen.testing import expected_iou_matrix

    aps = []
    for cat in sorted({a["category_id"] for a in gt["annotations"]}):
        gts = [a for a in gt["annotations"] if a["category_id"] == cat]
        ps = sorted((p for p in preds if p["category_id"] == cat), key=lambda p: -p["score"])
        used, tp = set(), []
        for p in ps:
            cands = [g for g in gts if g["image_id"] == p["image_id"] and g["id"] not in used]
            xyxy = lambda b: [b[0], b[1], b[0] + b[2], b[1] + b[3]]  # noqa: E731
            ious = [expected_iou_matrix([xyxy(p["bbox"])], [xyxy(g["bbox"])])[0, 0] for g in cands]
            best = int(np.argmax(ious)) if ious else -1
            hit = best >= 0 and ious[best] >= 0.5
            if hit:
                used.add(cands[best]["id"])
            tp.append(hit)
        tp = np.array(tp, bool)
        recall = np.cumsum(tp) / len(gts)
        precision = np.cumsum(tp) / np.arange(1, len(tp) + 1)
        precision = np.maximum.accumulate(precision[::-1])[::-1] if len(tp) else precision
        points = np.linspace(0, 1, 101)
        idx = np.searchsorted(recall, points, side="left")
        aps.append(float(np.mean([precision[i] if i < len(precision) else 0.0 for i in idx])))
    return float(np.mean(aps))


@settings(max_examples=40, deadline=None)
@given(case=coco_datasets())
def test_my_ap50_matches_the_known_answer(case):
    """Exact, shifted and partly missed predictions: AP50 equals the closed-form value."""
    gt, preds, expected = case
    assert my_ap50(gt, preds) == pytest.approx(expected["AP50"], abs=1e-12)


@pytest.mark.synth(images=6, count=(2, 5), seed=2, detector={"miss": 0.25, "iou": (0.6, 0.9)})
def test_my_ap50_sees_every_miss(synth_predictions):
    """A simulated detector that misses a quarter of the objects: recall, hence AP50, drops accordingly."""
    coco, preds, truth = synth_predictions
    missed = set(truth["missed"])
    assert len(missed) == round(0.25 * len(coco["annotations"]))
    kinds = {p["kind"] for p in truth["predictions"]}
    assert kinds == {"true_positive"}
    # all found objects are matched at IoU >= 0.6 and nothing else is predicted: AP50 < 1 exactly when something is missed
    assert (my_ap50(coco, preds) < 1.0) == bool(missed)
