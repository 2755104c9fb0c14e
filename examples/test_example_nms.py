"""Example: testing your own NMS with pairs of boxes whose IoU is known exactly."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from synthgen.testing import box_pairs, boxes, expected_nms


def my_nms(b, scores, threshold):
    """The code under test: vectorized greedy NMS."""
    order = np.argsort(-scores, kind="stable")
    keep = []
    suppressed = np.zeros(len(b), bool)
    for i in order:
        if suppressed[i]:
            continue
        keep.append(i)
        lt = np.maximum(b[i, :2], b[:, :2])
        rb = np.minimum(b[i, 2:], b[:, 2:])
        inter = np.prod(np.clip(rb - lt, 0, None), axis=1)
        union = np.prod(b[i, 2:] - b[i, :2]) + np.prod(b[:, 2:] - b[:, :2], axis=1) - inter
        suppressed |= inter / union > threshold
    return np.array(keep, dtype=np.int64)


@settings(max_examples=50, deadline=None)
@given(pair=box_pairs(iou=(0.1, 0.9)), threshold=st.floats(0.05, 0.95))
def test_a_pair_is_suppressed_exactly_above_the_threshold(pair, threshold):
    """Two boxes at IoU t: the weaker survives iff t <= threshold."""
    a, b, t = pair
    kept = my_nms(np.stack([a, b]), np.array([0.9, 0.8]), threshold)
    assert (1 in kept) == (t <= threshold) or abs(t - threshold) < 1e-9


@settings(max_examples=50, deadline=None)
@given(b=boxes(canvas=(64, 64), n=(0, 12)), data=st.data())
def test_my_nms_matches_the_reference(b, data):
    """Random boxes and distinct scores: same kept indices as the reference."""
    scores = np.array(data.draw(st.lists(st.floats(0, 1), min_size=len(b), max_size=len(b), unique=True)))
    assert my_nms(b, scores, 0.5).tolist() == expected_nms(b, scores, 0.5).tolist()
