"""Example: testing your own IoU function against synthgen's slow reference."""

import numpy as np
from hypothesis import given, settings

from synthgen.testing import boxes, expected_iou_matrix


def my_iou(a, b):
    """The code under test: a broadcast IoU matrix (what a project would write)."""
    lt = np.maximum(a[:, None, :2], b[None, :, :2])
    rb = np.minimum(a[:, None, 2:], b[None, :, 2:])
    inter = np.prod(np.clip(rb - lt, 0, None), axis=2)
    area_a = np.prod(a[:, 2:] - a[:, :2], axis=1)
    area_b = np.prod(b[:, 2:] - b[:, :2], axis=1)
    return inter / (area_a[:, None] + area_b[None, :] - inter)


@settings(max_examples=50, deadline=None)
@given(a=boxes(canvas=(100, 80), n=(1, 8)), b=boxes(canvas=(100, 80), n=(1, 8)))
def test_my_iou_matches_the_reference(a, b):
    """Any valid boxes: my_iou equals the double-loop definition."""
    assert np.allclose(my_iou(a, b), expected_iou_matrix(a, b), atol=1e-12)


def test_my_iou_on_a_scene(synth_scene):
    """Boxes of a composed scene: each box has IoU 1 with itself."""
    b = synth_scene.boxes
    assert np.allclose(np.diag(my_iou(b, b)), 1.0)
