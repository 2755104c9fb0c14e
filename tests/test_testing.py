"""synthgen.testing: reference answers, strategies and the pytest plugin, checked from outside."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import box as sbox

from synthgen.geometry import boxes_valid, pairwise_iou
from synthgen.testing import (
    box_pairs,
    boxes,
    coco_datasets,
    dense_masks,
    expected_iou_matrix,
    expected_nms,
    pair_at_iou,
    scenes,
)
from tests._coco_cases import coco_reference

pytest_plugins = ["pytester"]


def shapely_iou(a, b) -> float:
    """IoU of two xyxy boxes with shapely polygons (reference library)."""
    pa, pb = sbox(*a), sbox(*b)
    return pa.intersection(pb).area / pa.union(pb).area


@settings(max_examples=60, deadline=None)
@given(a=boxes(canvas=(50, 40), n=(1, 5)), b=boxes(canvas=(50, 40), n=(1, 5)))
def test_expected_iou_matrix_matches_shapely(a, b):
    """The reference IoU equals shapely's polygon IoU on every pair."""
    want = np.array([[shapely_iou(x, y) for y in b] for x in a])
    assert np.allclose(expected_iou_matrix(a, b), want, atol=1e-12)
    assert np.allclose(pairwise_iou(a, b), want, atol=1e-12)


def test_expected_nms_hand_cases():
    """Greedy NMS on hand-made cases (common practice: suppress IoU > threshold, keep equality)."""
    b = [[0, 0, 10, 10], [0, 0, 10, 10], [5, 0, 15, 10], [40, 40, 50, 50]]
    # boxes 0 and 1 coincide (IoU 1); box 2 has IoU 1/3 with box 0 (REFERENCE.md: (w - d)/(w + d))
    assert expected_nms(b, [0.9, 0.8, 0.7, 0.6], 0.5).tolist() == [0, 2, 3]
    assert expected_nms(b, [0.9, 0.8, 0.7, 0.6], 0.3).tolist() == [0, 3]
    assert expected_nms(b, [0.9, 0.8, 0.7, 0.6], 1 / 3).tolist() == [0, 2, 3]  # equality is kept
    assert expected_nms(b, [0.5, 0.5, 0.5, 0.5], 0.5).tolist() == [0, 2, 3]  # ties: lower index first
    assert expected_nms(b, [0.1, 0.8, 0.7, 0.6], 0.5).tolist() == [1, 2, 3]
    assert expected_nms(np.zeros((0, 4)), [], 0.5).tolist() == []


@settings(max_examples=60, deadline=None)
@given(b=boxes(canvas=(120, 90), min_size=2, max_size=30, n=(0, 10)))
def test_boxes_strategy_gives_valid_boxes_in_the_canvas(b):
    """Every drawn box is valid, inside the canvas and within the size limits (shapely containment)."""
    assert b.shape[1] == 4 and boxes_valid(b).all()
    canvas = sbox(0, 0, 120, 90)
    for x in b:
        assert canvas.covers(sbox(*x))
        assert 2 - 1e-9 <= x[2] - x[0] <= 30 + 1e-9 and 2 - 1e-9 <= x[3] - x[1] <= 30 + 1e-9


@settings(max_examples=100, deadline=None)
@given(pair=box_pairs(iou=(0.2, 0.95), canvas=(200, 150)))
def test_box_pairs_have_the_stated_iou(pair):
    """Each pair's shapely IoU equals the stated IoU to 1e-9, and both boxes fit the canvas."""
    a, b, t = pair
    assert 0.2 <= t <= 0.95
    assert shapely_iou(a, b) == pytest.approx(t, abs=1e-9)
    canvas = sbox(0, 0, 200, 150)
    assert canvas.covers(sbox(*a)) and canvas.covers(sbox(*b))


def test_pair_at_iou_formula():
    """Offset d = w (1 - t)/(1 + t) gives IoU t (REFERENCE.md: Geometry)."""
    b = pair_at_iou([3, 4, 13, 10], 0.6, axis=1)
    assert shapely_iou([3, 4, 13, 10], b) == pytest.approx(0.6, abs=1e-12)


def _pycoco_stats(gt, preds):
    return coco_reference(gt, preds).stats  # pycocotools COCOeval (tests/_coco_cases.py)


@settings(max_examples=60, deadline=None)
@given(case=coco_datasets())
def test_coco_datasets_expected_ap_matches_pycocotools(case):
    """The closed-form AP, AP50 and AP75 equal pycocotools' stats (reference library)."""
    gt, preds, expected = case
    if not preds:  # pycocotools' loadRes([]) raises (REFERENCE.md: pitfalls); nothing was found
        assert expected["AP"] == 0.0
        return
    stats = _pycoco_stats(gt, preds)
    assert stats[0] == pytest.approx(expected["AP"], abs=1e-9)
    assert stats[1] == pytest.approx(expected["AP50"], abs=1e-9)
    assert stats[2] == pytest.approx(expected["AP75"], abs=1e-9)


@settings(max_examples=15, deadline=None)
@given(scene=scenes(count=(0, 6)))
def test_scenes_strategy_gives_consistent_scenes(scene):
    """A drawn scene's arrays agree in length and its masks' boxes are the pixel boxes."""
    from synthgen.geometry import mask_box

    n = len(scene.boxes)
    assert scene.categories.shape == (n,) and len(scene.facts) == n
    for m, f in zip(dense_masks(scene), scene.facts):
        assert mask_box(m).tolist() == f["pixel_box"]


def test_plugin_loads_in_an_outside_project(pytester, monkeypatch):
    """A fresh pytest run of a project that only installs synthgen gets the fixtures and marker."""
    pytester.makepyfile(
        """
        import numpy as np
        import pytest

        def test_scene(synth_scene):
            assert synth_scene.image.dtype == np.uint8 and synth_scene.boxes.shape[1] == 4

        @pytest.mark.synth(width=40, height=30, count=(2, 2), size=(4, 6), seed=1)
        def test_marker(synth_scene):
            assert synth_scene.image.shape == (30, 40, 3)

        @pytest.mark.parametrize("synth_scene", [{"count": (0, 0)}], indirect=True)
        def test_indirect(synth_scene):
            assert len(synth_scene.boxes) == 0

        def test_dataset(synth_dataset):
            assert (synth_dataset / "annotations.json").exists()

        @pytest.mark.synth(detector={"miss": 0.5})
        def test_predictions(synth_predictions):
            coco, preds, truth = synth_predictions
            assert len(preds) == len(coco["annotations"]) - len(truth["missed"])
        """
    )
    _run_as_outside_project(pytester, monkeypatch).assert_outcomes(passed=5)


def _run_as_outside_project(pytester, monkeypatch):
    """Run pytest in a subprocess on the files made in ``pytester``, with synthgen's plugin as installed."""
    from importlib.metadata import entry_points

    installed = any(ep.value == "synthgen.testing" for ep in entry_points(group="pytest11"))
    args = ["-p", "no:cacheprovider"]
    if not installed:  # running from a source tree: make the package importable, load the plugin by name
        from pathlib import Path

        monkeypatch.setenv("PYTHONPATH", str(Path(__file__).resolve().parent.parent))
        args += ["-p", "synthgen.testing"]
    return pytester.runpytest_subprocess(*args)


@settings(max_examples=100, deadline=None)
@given(b=boxes(canvas=(64, 64), n=(1, 25)), data=st.data())
def test_expected_nms_agrees_with_opencv(b, data):
    """expected_nms keeps the same boxes as OpenCV's cv2.dnn.NMSBoxes (reference library).

    OpenCV is already a dependency, unlike torchvision (a multi-GB install here); scores are
    distinct and no pair sits within 1e-9 of the threshold, where float rounding may differ.
    """
    import cv2

    n = len(b)
    scores = np.array(data.draw(st.permutations(range(n)))) / n + 0.01
    threshold = data.draw(st.floats(0.1, 0.9))
    iou = expected_iou_matrix(b, b)
    if np.any(np.abs(iou - threshold) < 1e-9):
        return
    xywh = [[float(x0), float(y0), float(x1 - x0), float(y1 - y0)] for x0, y0, x1, y1 in b]
    kept_cv = np.array(cv2.dnn.NMSBoxes(xywh, scores.tolist(), 0.0, threshold)).reshape(-1)
    assert sorted(expected_nms(b, scores, threshold).tolist()) == sorted(kept_cv.tolist())


def test_box_pairs_at_the_far_edge_stay_inside_the_canvas():
    """Pairs pushed against the far edge (all free room used) still fit the canvas after rounding."""
    from synthgen.testing import _placed_pair

    rng = np.random.default_rng(0)
    canvas = sbox(0, 0, 200, 150)
    for _ in range(500):
        t, axis = rng.uniform(0.2, 0.95), int(rng.integers(2))
        a, b = _placed_pair(t, axis, rng.uniform(2, 100), rng.uniform(2, 75), 1.0, 1.0, 200.0, 150.0)
        # shapely: the canvas polygon covers both boxes, and their IoU is the requested one
        assert canvas.covers(sbox(*a)) and canvas.covers(sbox(*b))
        assert shapely_iou(a, b) == pytest.approx(t, abs=1e-9)


def test_marker_mistakes_fail_with_one_line(pytester, monkeypatch):
    """A misspelt marker key or a bad value fails the test with the CLI's one-line message, no traceback."""
    pytester.makepyfile(
        """
        import pytest

        @pytest.mark.synth(sizes=(2, 4))
        def test_misspelt(synth_scene):
            pass

        @pytest.mark.synth(overlap="lots")
        def test_unknown(synth_dataset):
            pass

        @pytest.mark.synth(layout="lots")
        def test_bad_layout(synth_scene):
            pass

        @pytest.mark.synth(size="big")
        def test_bad_size(synth_dataset):
            pass

        @pytest.mark.synth(detector={"mis": 0.2})
        def test_detector_key(synth_predictions):
            pass

        @pytest.mark.synth(detector={"iou": (0.9, 0.5)})
        def test_detector_value(synth_predictions):
            pass
        """
    )
    result = _run_as_outside_project(pytester, monkeypatch)
    result.assert_outcomes(errors=6)
    text = result.stdout.str()
    for line in [
        "synth marker setting 'sizes' is not a known setting (got [2, 4]); did you mean 'size'?",
        "synth marker setting 'overlap' is not a known setting (got 'lots'); known: width, height, count,",
        "synth marker setting 'layout' must be one of scatter, separated, pairs, grid, clusters (got 'lots')",
        "synth marker setting 'size' must be a number or a pair (min, max) (got 'big')",
        "synth marker setting 'detector.mis' is not a DetectorSpec field (got 0.2); did you mean 'miss'?",
        "synth marker setting 'detector.iou' must be",
    ]:
        assert line in text, text
    assert "Traceback" not in text and "TypeError" not in text and "synthgen/testing.py" not in text
    assert "During handling" not in text and "synth marker: synth marker" not in text
