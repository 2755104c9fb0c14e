"""Tests for synthgen.jitter: boxes wrong by a known amount, checked against shapely and pycocotools."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from synthgen.errors import ConfigError
from synthgen.jitter import (
    DETECTION_KINDS,
    ERROR_MODES,
    IOU_TOLERANCE,
    OUTCOMES,
    DetectorSpec,
    background_boxes,
    box_at_iou,
    detection_scores,
    duplicates,
    gaussian_center_size,
    gaussian_edges,
    near_misses,
    pad_with_noise,
    relabel,
    simulate_detections,
    to_iou,
    uniform_shift_scale,
)
from tests._coco_cases import coco_reference

# ----------------------------------------------------------------------------- helpers


def shapely_iou(a, b) -> np.ndarray:
    """Element-wise IoU of two (N, 4) box arrays computed by shapely polygon areas."""
    a = np.asarray(a, float).reshape(-1, 4)
    b = np.asarray(b, float).reshape(-1, 4)
    pa = shapely.box(a[:, 0], a[:, 1], a[:, 2], a[:, 3])
    pb = shapely.box(b[:, 0], b[:, 1], b[:, 2], b[:, 3])
    inter = shapely.area(shapely.intersection(pa, pb))
    union = shapely.area(shapely.union(pa, pb))
    return inter / union


def shapely_iou_matrix(a, b) -> np.ndarray:
    """(N, M) IoU of every box in a with every box in b, by shapely."""
    a = np.asarray(a, float).reshape(-1, 4)
    b = np.asarray(b, float).reshape(-1, 4)
    ia, ib = np.meshgrid(np.arange(len(a)), np.arange(len(b)), indexing="ij")
    return shapely_iou(a[ia.ravel()], b[ib.ravel()]).reshape(len(a), len(b))


def inside(boxes, width, height) -> bool:
    b = np.asarray(boxes)
    return bool(np.all((b[:, 0] >= 0) & (b[:, 1] >= 0) & (b[:, 2] <= width) & (b[:, 3] <= height)))


def grid_truth(rows: int, cols: int, cell: float, rng) -> np.ndarray:
    """Random boxes, one per grid cell, each well inside its cell (neighbours never overlap)."""
    out = []
    for r in range(rows):
        for c in range(cols):
            w, h = rng.uniform(0.2, 0.5, 2) * cell
            x0 = c * cell + rng.uniform(0.1, 0.9 - w / cell) * cell if w / cell < 0.8 else c * cell
            y0 = r * cell + rng.uniform(0.1, 0.9 - h / cell) * cell if h / cell < 0.8 else r * cell
            out.append([x0, y0, x0 + w, y0 + h])
    return np.array(out)


def coco_gt(truth, labels, image, sizes) -> dict:
    """A COCO ground-truth dict; ids start at 1 and iscrowd is present (REFERENCE.md: COCO JSON pitfalls)."""
    images = [{"id": k + 1, "width": int(w), "height": int(h), "file_name": f"{k:06d}.png"} for k, (w, h) in enumerate(sizes)]
    anns = []
    for i, (b, c, k) in enumerate(zip(truth, labels, image)):
        w, h = float(b[2] - b[0]), float(b[3] - b[1])
        anns.append(
            {"id": i + 1, "image_id": int(k) + 1, "category_id": int(c), "bbox": [float(b[0]), float(b[1]), w, h],
             "area": w * h, "iscrowd": 0}
        )
    cats = [{"id": int(c), "name": f"class{c}", "supercategory": "shape"} for c in sorted(set(int(v) for v in labels))]
    return {"images": images, "annotations": anns, "categories": cats}


def coco_results(det) -> list[dict]:
    """A COCO results list (REFERENCE.md: results file is {image_id, category_id, bbox, score})."""
    return [
        {"image_id": int(k) + 1, "category_id": int(c), "bbox": [float(b[0]), float(b[1]), float(b[2] - b[0]), float(b[3] - b[1])],
         "score": float(s)}
        for b, c, k, s in zip(det.boxes, det.labels, det.image, det.scores)
    ]


def coco_evaluate(gt: dict, results: list[dict], iou_thrs=None):
    """pycocotools' bbox evaluation (tests/_coco_cases.py); there must be results to evaluate."""
    assert results, "loadRes([]) raises in pycocotools (REFERENCE.md)"
    return coco_reference(gt, results, iou_thrs=iou_thrs)


# ----------------------------------------------------------------------------- strategies

# Nothing in (0, 1e-300): GEOS' overlay, the shapely reference, mis-measures boxes with coordinates at the
# bottom of the double range ([0, 5e-324, 1, 1] and [2.2e-308, 0, 1, 1] against unit-size boxes, found by
# hypothesis; to_iou's IoU was exact, shapely's off by up to 0.06); from 1e-300 up it agrees to 1e-16.
coords = st.floats(0, 2000, allow_nan=False, allow_infinity=False).map(lambda v: 0.0 if v < 1e-300 else v)
sides = st.one_of(st.just(1.0), st.floats(1, 800, allow_nan=False), st.integers(1, 800).map(float))


@st.composite
def box_sets(draw, max_boxes=25):
    """Boxes (N, 4) with sides >= 1 px, some on a canvas they touch, plus a canvas or None."""
    n = draw(st.integers(0, max_boxes))
    b = np.array([[x, y, x + w, y + h] for x, y, w, h in
                  (draw(st.tuples(coords, coords, sides, sides)) for _ in range(n))]).reshape(-1, 4)
    if draw(st.booleans()):
        pad = draw(st.sampled_from([0.0, 0.5, 50.0]))  # 0: every box touches the right/bottom border
        width = float(b[:, 2].max()) + pad if n else 100.0
        height = float(b[:, 3].max()) + pad if n else 100.0
        if draw(st.booleans()) and n:  # make the first box fill the whole canvas
            b[0] = [0.0, 0.0, width, height]
        return b, (width, height)
    return b, None


iou_ranges = st.one_of(
    st.tuples(st.floats(0.01, 1.0), st.floats(0.01, 1.0)).map(lambda p: (min(p), max(p))),
    st.floats(0.01, 1.0).map(lambda v: (v, v)),  # lo == hi
    st.just((1.0, 1.0)),
    st.just((0.01, 0.02)),
)
mode_sets = st.one_of(st.just(ERROR_MODES), st.sampled_from(ERROR_MODES).map(lambda m: (m,)))


# ----------------------------------------------------------------------------- to_iou


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(box_sets(), iou_ranges, mode_sets, st.integers(0, 2**32 - 1))
def test_to_iou_matches_shapely_and_range(data, rng_range, modes, seed):
    """Every to_iou box has shapely IoU equal to the recorded IoU (1e-9), inside the range and the canvas."""
    boxes, canvas = data
    lo, hi = rng_range
    r = to_iou(boxes, (lo, hi), rng=np.random.default_rng(seed), modes=modes, canvas=canvas)
    assert r.boxes.shape == boxes.shape
    if len(boxes) == 0:
        return
    ref = shapely_iou(boxes, r.boxes)  # outside reference: shapely polygon areas
    np.testing.assert_allclose(r.iou, ref, rtol=0, atol=IOU_TOLERANCE)
    np.testing.assert_allclose(r.iou, r.target, rtol=0, atol=IOU_TOLERANCE)
    assert np.all((r.target >= lo) & (r.target <= hi))
    assert np.all((ref >= lo - IOU_TOLERANCE) & (ref <= hi + IOU_TOLERANCE))
    if canvas is not None:
        assert inside(r.boxes, *canvas)


def test_shift_matches_offset_formula():
    """A pure shift to IoU t moves an equal box by d = w (1 - t) / (1 + t)."""
    t = np.array([0.3, 0.5, 0.9])
    r = box_at_iou(np.tile([10.0, 20.0, 50.0, 30.0], (3, 1)), np.tile([1.0, 0, 1.0, 0], (3, 1)), t)
    # REFERENCE.md: Geometry, offset along x gives IoU (w - d) / (w + d)
    np.testing.assert_allclose(r.boxes[:, 0] - 10.0, 40.0 * (1 - t) / (1 + t), rtol=1e-12)
    np.testing.assert_allclose(r.boxes[:, 2] - r.boxes[:, 0], 40.0, rtol=1e-12)


def test_uniform_growth_matches_area_ratio():
    """Growing a box about its centre to IoU t scales its area by exactly 1 / t (IoU = A / A')."""
    r = box_at_iou([[0.0, 0.0, 8.0, 6.0]], [[-0.5, -0.5, 0.5, 0.5]], 0.25)
    # analytic geometry: a box containing the source has IoU = source area / its area
    area = (r.boxes[0, 2] - r.boxes[0, 0]) * (r.boxes[0, 3] - r.boxes[0, 1])
    assert area == pytest.approx(48.0 / 0.25, rel=1e-12)
    assert r.boxes[0].tolist() == pytest.approx([-4.0, -3.0, 12.0, 9.0], rel=1e-12)


def test_iou_one_returns_the_source():
    """A target of 1.0 gives the source box itself, IoU exactly 1."""
    b = np.array([[3.0, 4.0, 4.0, 5.0], [0.0, 0.0, 64.0, 48.0]])
    r = to_iou(b, 1.0, rng=np.random.default_rng(0), canvas=(64, 48))
    assert r.boxes.tolist() == b.tolist()
    assert r.iou.tolist() == [1.0, 1.0]


def test_full_canvas_box_cannot_grow_so_turns_inward():
    """A box filling the canvas asked to grow reaches the target by shrinking and says so."""
    r = to_iou([[0.0, 0.0, 32.0, 32.0]], 0.4, rng=np.random.default_rng(5), modes="grow", canvas=(32, 32))
    assert r.adjusted.tolist() == [True]
    assert inside(r.boxes, 32, 32)
    assert shapely_iou([[0, 0, 32, 32]], r.boxes)[0] == pytest.approx(0.4, abs=IOU_TOLERANCE)  # shapely reference


def test_border_shift_stops_at_the_edge():
    """A box on the left border shifted left keeps its left edge at 0 and still hits the IoU."""
    r = box_at_iou([[0.0, 5.0, 10.0, 15.0]], [[-1.0, 0.0, -1.0, 0.0]], 0.8, canvas=(20, 20))
    assert r.boxes[0, 0] == 0.0
    assert r.adjusted.tolist() == [True]
    assert shapely_iou([[0, 5, 10, 15]], r.boxes)[0] == pytest.approx(0.8, abs=IOU_TOLERANCE)  # shapely reference


def test_one_pixel_boxes_in_every_corner():
    """1-px boxes in the four corners of a canvas reach low and high targets inside it."""
    b = np.array([[0, 0, 1, 1], [9, 0, 10, 1], [0, 9, 1, 10], [9, 9, 10, 10]], float)
    for lo in (0.05, 0.5, 0.95):
        r = to_iou(b, lo, rng=np.random.default_rng(1), canvas=(10, 10))
        np.testing.assert_allclose(shapely_iou(b, r.boxes), lo, atol=IOU_TOLERANCE)  # shapely reference
        assert inside(r.boxes, 10, 10)


def test_to_iou_empty_input():
    """No boxes in, no boxes out."""
    r = to_iou(np.zeros((0, 4)), (0.5, 0.6), rng=np.random.default_rng(0), canvas=(10, 10))
    assert r.boxes.shape == (0, 4) and r.iou.shape == (0,)


@pytest.mark.parametrize(
    ("iou", "match"),
    [((0.7, 0.6), "0 < lo <= hi <= 1"), ((0.0, 0.5), "0 < lo <= hi <= 1"), ((0.5, 1.2), "0 < lo <= hi <= 1")],
)
def test_to_iou_rejects_bad_ranges(iou, match):
    """Empty, zero and above-one IoU ranges are refused."""
    with pytest.raises(ValueError, match=match):
        to_iou([[0, 0, 1, 1]], iou, rng=np.random.default_rng(0))


def test_to_iou_rejects_empty_source_boxes():
    """A source box with zero width is refused rather than given a meaningless IoU."""
    with pytest.raises(ValueError, match="x0 < x1"):
        to_iou([[5, 5, 5, 8]], 0.5, rng=np.random.default_rng(0))


def test_to_iou_rejects_sources_outside_canvas():
    """Keeping boxes inside a canvas needs sources inside it."""
    with pytest.raises(ValueError, match="inside the canvas"):
        to_iou([[-1, 0, 5, 5]], 0.5, rng=np.random.default_rng(0), canvas=(10, 10))


def test_huge_coordinates_raise_instead_of_lying():
    """A 1-px box at x = 1e12 cannot be placed to 1e-9 in float64, so it raises."""
    with pytest.raises(ValueError, match="too large for its size"):
        box_at_iou([[1e12, 0, 1e12 + 1, 1]], [[1, 0, 1, 0]], 0.37)


def test_results_are_read_only():
    """Result arrays cannot be modified in place."""
    r = to_iou([[0, 0, 4, 4]], 0.5, rng=np.random.default_rng(0))
    with pytest.raises(ValueError, match="read-only"):
        r.boxes[0, 0] = 1.0


def test_to_iou_same_seed_same_boxes():
    """The same seed gives the same boxes byte for byte; another seed does not."""
    b = grid_truth(3, 3, 40.0, np.random.default_rng(2))
    one = to_iou(b, (0.3, 0.9), rng=np.random.default_rng(11), canvas=(120, 120))
    two = to_iou(b, (0.3, 0.9), rng=np.random.default_rng(11), canvas=(120, 120))
    other = to_iou(b, (0.3, 0.9), rng=np.random.default_rng(12), canvas=(120, 120))
    assert one.boxes.tobytes() == two.boxes.tobytes()
    assert one.boxes.tobytes() != other.boxes.tobytes()


# ----------------------------------------------------------------------------- noise models


def big_sample(n=20000):
    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 500, (n, 2))
    wh = rng.uniform(5, 200, (n, 2))
    return np.concatenate([xy, xy + wh], axis=1)


def test_gaussian_edges_spread_scales_with_size():
    """Edge offsets divided by width/height have standard deviation sigma (20k boxes, 3% tolerance)."""
    b = big_sample()
    r = gaussian_edges(b, 0.05, rng=np.random.default_rng(0))
    w = b[:, 2] - b[:, 0]
    h = b[:, 3] - b[:, 1]
    z = (r.boxes - b) / np.stack([w, h, w, h], axis=1)
    np.testing.assert_allclose(z.std(axis=0), 0.05, rtol=0.03)
    np.testing.assert_allclose(r.iou, shapely_iou(b, r.boxes), atol=1e-12)  # shapely reference


def test_gaussian_edges_zero_sigma_is_identity():
    """sigma = 0 returns the boxes unchanged with IoU 1."""
    b = big_sample(10)
    r = gaussian_edges(b, 0.0, rng=np.random.default_rng(0))
    assert r.boxes.tolist() == b.tolist() and np.all(r.iou == 1.0)


def test_gaussian_edges_large_noise_stays_valid_and_inside():
    """Even sigma = 1 yields valid boxes inside the canvas (empty draws are redrawn)."""
    b = np.array([[0, 0, 10, 10], [90, 90, 100, 100]], float)
    r = gaussian_edges(np.repeat(b, 500, axis=0), 1.0, rng=np.random.default_rng(0), canvas=(100, 100))
    assert np.all(r.boxes[:, 2] > r.boxes[:, 0]) and np.all(r.boxes[:, 3] > r.boxes[:, 1])
    assert inside(r.boxes, 100, 100)


def test_gaussian_center_size_log_spread():
    """The log of each side's scale factor has standard deviation 'size'; centres move by 'center' * side."""
    b = big_sample()
    r = gaussian_center_size(b, 0.1, 0.2, rng=np.random.default_rng(0))
    w = b[:, 2] - b[:, 0]
    w2, h2 = r.boxes[:, 2] - r.boxes[:, 0], r.boxes[:, 3] - r.boxes[:, 1]
    assert np.log(w2 / w).std() == pytest.approx(0.2, rel=0.03)
    dcx = (r.boxes[:, 0] + r.boxes[:, 2] - b[:, 0] - b[:, 2]) / 2 / w
    assert dcx.std() == pytest.approx(0.1, rel=0.03)
    assert np.all(h2 > 0)


def test_uniform_shift_scale_bounds():
    """Uniform noise stays within its bounds: |shift| <= shift * side, factor in [1 - scale, 1 + scale]."""
    b = big_sample()
    r = uniform_shift_scale(b, 0.1, 0.25, rng=np.random.default_rng(0))
    w, h = b[:, 2] - b[:, 0], b[:, 3] - b[:, 1]
    fw = (r.boxes[:, 2] - r.boxes[:, 0]) / w
    dcy = (r.boxes[:, 1] + r.boxes[:, 3] - b[:, 1] - b[:, 3]) / 2 / h
    assert fw.min() >= 0.75 - 1e-12 and fw.max() <= 1.25 + 1e-12
    assert np.abs(dcy).max() <= 0.1 + 1e-12
    assert fw.min() < 0.76 and fw.max() > 1.24  # the whole range is used


# ----------------------------------------------------------------------------- duplicates and distractors


def test_duplicates_iou_in_range_by_shapely():
    """Each duplicate's shapely IoU with its source lies in the requested range."""
    b = grid_truth(4, 4, 50.0, np.random.default_rng(3))
    r = duplicates(b, (0.6, 0.8), rng=np.random.default_rng(0), counts=np.arange(16) % 3, canvas=(200, 200))
    assert r.source.tolist() == np.repeat(np.arange(16), np.arange(16) % 3).tolist()
    ref = shapely_iou(b[r.source], r.boxes)  # shapely reference
    assert np.all((ref >= 0.6 - IOU_TOLERANCE) & (ref <= 0.8 + IOU_TOLERANCE))


def test_background_boxes_below_bound_by_shapely():
    """Shapely IoU of every background box against every true box is below the bound."""
    rng = np.random.default_rng(4)
    truth = np.concatenate([grid_truth(3, 3, 40.0, rng), [[0, 0, 120, 120]]])  # one box covers everything
    r = background_boxes(truth, 200, rng=rng, canvas=(120, 120), max_iou=0.05)
    m = shapely_iou_matrix(r.boxes, truth)  # shapely reference
    assert len(r) == 200
    assert m.max() < 0.05
    np.testing.assert_allclose(r.other_iou, m.max(axis=1), atol=1e-12)
    assert inside(r.boxes, 120, 120)


def test_background_boxes_without_truth():
    """With no true boxes every background box has other_iou 0."""
    r = background_boxes(np.zeros((0, 4)), 5, rng=np.random.default_rng(0), canvas=(50, 40))
    assert r.other_iou.tolist() == [0.0] * 5 and inside(r.boxes, 50, 40)


def test_background_boxes_impossible_raises():
    """No spot below IoU 0.001 exists for large boxes on a canvas fully covered by one box."""
    with pytest.raises(ValueError, match="placed only"):
        background_boxes([[0, 0, 10, 10]], 3, rng=np.random.default_rng(0), canvas=(10, 10), max_iou=0.001,
                         size=(0.9, 1.0))


def test_near_misses_best_iou_in_range_by_shapely():
    """A near miss's best shapely IoU over all true boxes is its IoU with its source, in the range."""
    rng = np.random.default_rng(5)
    truth = np.array([[10, 10, 50, 50], [30, 30, 70, 70], [60, 5, 90, 40], [5, 60, 25, 95]], float)
    src = np.repeat(np.arange(4), 25)
    r = near_misses(truth, src, (0.2, 0.45), rng=rng, canvas=(100, 100))
    m = shapely_iou_matrix(r.boxes, truth)  # shapely reference
    best = m.max(axis=1)
    assert np.all(m.argmax(axis=1) == src)
    assert np.all((best >= 0.2 - IOU_TOLERANCE) & (best <= 0.45 + IOU_TOLERANCE))
    np.testing.assert_allclose(r.iou, best, atol=IOU_TOLERANCE)


# ----------------------------------------------------------------------------- labels and training noise


def test_relabel_exact_count_and_other_class():
    """relabel changes exactly round(rate * N) labels, each to another allowed class."""
    rng = np.random.default_rng(0)
    lab = rng.integers(1, 5, 101)
    r = relabel(lab, 0.3, [1, 2, 3, 4], rng=rng)
    assert int(r.changed.sum()) == 30  # floor(30.3 + 0.5)
    assert np.all(r.labels[r.changed] != lab[r.changed]) and np.all(r.labels[~r.changed] == lab[~r.changed])
    assert set(r.labels.tolist()) <= {1, 2, 3, 4}


def test_relabel_one_class_refused():
    """Relabelling with a single class is impossible and says so."""
    with pytest.raises(ValueError, match="at least 2 classes"):
        relabel([1, 1], 0.5, [1], rng=np.random.default_rng(0))


def test_pad_with_noise_layout():
    """Padding keeps the true objects first and marks every noise object as noise with no coordinate loss."""
    rng = np.random.default_rng(0)
    b = grid_truth(2, 3, 30.0, rng)
    r = pad_with_noise(b, [1, 2, 3, 1, 2, 3], 26, rng=rng, canvas=(90, 60), noise_label=0, jittered=0.25)
    assert len(r) == 26
    assert r.boxes[:6].tolist() == b.tolist() and r.labels[:6].tolist() == [1, 2, 3, 1, 2, 3]
    assert r.is_noise.tolist() == [False] * 6 + [True] * 20
    assert r.learn_box.tolist() == [True] * 6 + [False] * 20
    assert np.all(r.labels[6:] == 0)
    assert int((r.source[6:] >= 0).sum()) == 5  # 0.25 * 20 jittered, the rest random
    jit = r.is_noise & (r.source >= 0)
    np.testing.assert_allclose(r.iou[jit], shapely_iou(b[r.source[jit]], r.boxes[jit]), atol=1e-12)  # shapely
    assert inside(r.boxes, 90, 60)


def test_pad_with_noise_no_truth_is_all_random():
    """With no true boxes the padding is all random boxes."""
    r = pad_with_noise(np.zeros((0, 4)), [], 4, rng=np.random.default_rng(0), canvas=(20, 20), noise_label=9)
    assert r.source.tolist() == [-1] * 4 and r.labels.tolist() == [9] * 4


def test_pad_with_noise_rejects_short_length_and_clashing_label():
    """The padded length must hold the true boxes, and the noise label must be new."""
    with pytest.raises(ValueError, match="'length' must be a whole number >= 3"):
        pad_with_noise([[0, 0, 1, 1]] * 3, [1, 1, 1], 2, rng=np.random.default_rng(0), canvas=(5, 5), noise_label=0)
    with pytest.raises(ValueError, match="also a true label"):
        pad_with_noise([[0, 0, 1, 1]], [0], 2, rng=np.random.default_rng(0), canvas=(5, 5), noise_label=0)


# ----------------------------------------------------------------------------- scores


@pytest.mark.parametrize("overlap", [0.0, 0.5, 1.0])
def test_score_supports_share_the_set_overlap(overlap):
    """True-positive scores lie on (1 - L, 1], others on (0, L], L = 1 / (2 - overlap)."""
    pos = np.arange(20000) % 2 == 0
    s = detection_scores(pos, overlap, rng=np.random.default_rng(0))
    width = 1 / (2 - overlap)
    assert s[pos].min() > 1 - width and s[pos].max() <= 1.0
    assert s[~pos].min() > 0.0 and s[~pos].max() <= width
    shared = max(0.0, s[~pos].max() - s[pos].min())  # measured overlap of the two supports
    assert shared / width == pytest.approx(overlap, abs=1e-3)


# ----------------------------------------------------------------------------- simulated detector


def scene(rng, images=6, rows=3, cols=4, cell=40.0, classes=(1, 2, 3)):
    truth, image = [], []
    for k in range(images):
        g = grid_truth(rows, cols, cell, rng)
        truth.append(g)
        image += [k] * len(g)
    truth = np.concatenate(truth)
    labels = rng.choice(classes, len(truth))
    sizes = np.tile([cols * cell, rows * cell], (images, 1))
    return truth, labels, np.array(image), sizes


def test_detector_counts_are_exact():
    """Each error rate selects exactly round(rate * N) true boxes, and every box says what it is."""
    rng = np.random.default_rng(0)
    truth, labels, image, sizes = scene(rng)  # 72 true boxes
    spec = DetectorSpec(miss=0.25, localization=0.125, relabel=0.125, duplicates=0.25, background=2.0)
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=spec, image=image)
    n = len(truth)
    assert {k: int((det.outcome == k).sum()) for k in OUTCOMES} == {
        "detected": n - 18 - 9 - 9, "missed": 18, "mislocated": 9, "wrong_class": 9}
    kinds = {k: int((det.kind == k).sum()) for k in DETECTION_KINDS}
    assert kinds["true_positive"] == 36 and kinds["duplicate"] == 18
    assert kinds["localization"] == 9 and kinds["wrong_class"] == 9
    assert det.missed.tolist() == np.flatnonzero(det.outcome == "missed").tolist()
    assert not np.isin(det.missed, det.source).any()


def test_detector_boxes_are_what_they_claim():
    """Recorded IoUs match shapely; ranges, labels and background bounds hold for each kind."""
    rng = np.random.default_rng(1)
    truth, labels, image, sizes = scene(rng)
    spec = DetectorSpec(miss=0.1, localization=0.1, relabel=0.1, duplicates=0.2, background=3.0,
                        iou=(0.6, 0.9), near_iou=(0.15, 0.4), duplicate_iou=(0.5, 0.7), background_iou=0.05)
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=spec, image=image)
    src = det.source >= 0
    ref = shapely_iou(truth[det.source[src]], det.boxes[src])  # shapely reference
    np.testing.assert_allclose(det.iou[src], ref, atol=IOU_TOLERANCE)
    for kind, (lo, hi) in {"true_positive": spec.iou, "wrong_class": spec.iou, "localization": spec.near_iou,
                           "duplicate": spec.duplicate_iou}.items():
        m = det.kind == kind
        assert np.all((det.iou[m] >= lo - IOU_TOLERANCE) & (det.iou[m] <= hi + IOU_TOLERANCE)), kind
    assert np.all(det.labels[src & (det.kind != "wrong_class")] == labels[det.source[src & (det.kind != "wrong_class")]])
    wrong = det.kind == "wrong_class"
    assert np.all(det.labels[wrong] != labels[det.source[wrong]])
    bg = det.kind == "background"
    assert bg.sum() > 0 and np.isnan(det.iou[bg]).all()
    for k in range(len(sizes)):
        on = bg & (det.image == k)
        if on.any():
            assert shapely_iou_matrix(det.boxes[on], truth[image == k]).max() < 0.05  # shapely reference
    assert inside(det.boxes, *sizes[0])
    assert np.all(np.diff(det.image) >= 0)


def test_detector_empty_truth():
    """No ground truth still gives background boxes, and nothing else."""
    det = simulate_detections(np.zeros((0, 4)), [], (64, 64), rng=np.random.default_rng(0),
                              spec=DetectorSpec(background=5.0), classes=[1, 2])
    assert set(det.kind.tolist()) <= {"background"} and det.outcome.shape == (0,)


def test_detector_same_seed_same_output():
    """The same seed gives the same detections byte for byte."""
    truth, labels, image, sizes = scene(np.random.default_rng(2))
    spec = DetectorSpec(miss=0.2, duplicates=0.3, background=1.5, relabel=0.1, score_overlap=0.4)
    a = simulate_detections(truth, labels, sizes, rng=np.random.default_rng(9), spec=spec, image=image)
    b = simulate_detections(truth, labels, sizes, rng=np.random.default_rng(9), spec=spec, image=image)
    for name in ("boxes", "labels", "scores", "image", "kind", "source", "iou", "other_iou", "outcome"):
        assert getattr(a, name).tobytes() == getattr(b, name).tobytes(), name


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"miss": 1.5}, r"'jitter.miss' must be a number in \[0, 1\] \(got 1.5\)"),
        ({"iou": (0.8, 0.6)}, r"'jitter.iou' must be \[min, max\]"),
        ({"miss": 0.6, "relabel": 0.6}, "at most 1"),
        ({"miss": 0.5, "duplicates": 0.6}, "jitter.duplicates"),
        ({"modes": ("shfit",)}, "did you mean 'shift'"),
        ({"background": -1.0}, "jitter.background"),
        ({"background": 1e9}, r"'jitter.background' must be at most 10000 boxes per image \(got 1000000000.0\)"),
    ],
)
def test_detector_spec_validation(kwargs, match):
    """Bad detector settings raise ConfigError naming the key, the rule and the value."""
    with pytest.raises(ConfigError, match=match):
        DetectorSpec(**kwargs)


# ----------------------------------------------------------------------------- pycocotools known answers


def test_coco_ap_mid_iou_predictions():
    """All predictions at IoU in [0.55, 0.70], no false positives: AP50 = 1 and AP75 = 0 (pycocotools)."""
    rng = np.random.default_rng(10)
    truth, labels, image, sizes = scene(rng)
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=DetectorSpec(iou=(0.55, 0.70)), image=image)
    assert set(det.kind.tolist()) == {"true_positive"} and np.all(det.other_iou < det.iou)
    ev = coco_evaluate(coco_gt(truth, labels, image, sizes), coco_results(det))
    # pycocotools 2.0.x: stats[1] is AP50, stats[2] AP75 (REFERENCE.md: COCO-style AP)
    assert ev.stats[1] == pytest.approx(1.0, abs=1e-9)
    assert ev.stats[2] == 0.0


def test_coco_ap_high_iou_predictions():
    """All predictions at IoU >= 0.96: AP@[.5:.95] = 1.0 within 1e-9 (pycocotools)."""
    rng = np.random.default_rng(11)
    truth, labels, image, sizes = scene(rng)
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=DetectorSpec(iou=(0.96, 1.0)), image=image)
    ev = coco_evaluate(coco_gt(truth, labels, image, sizes), coco_results(det))
    assert ev.stats[0] == pytest.approx(1.0, abs=1e-9)  # REFERENCE.md: COCO-style AP, stats[0] = AP@[.5:.95]


@pytest.mark.parametrize("miss", [0.0, 0.15, 0.5, 0.9])
def test_coco_recall_equals_one_minus_miss_rate(miss):
    """Detector with miss rate m: recall at IoU 0.5, 100 detections, is exactly 1 - missed / total (pycocotools)."""
    rng = np.random.default_rng(12)
    truth, labels, image, sizes = scene(rng)
    spec = DetectorSpec(miss=miss, duplicates=min(0.3, 1 - miss), background=2.0, score_overlap=0.5, iou=(0.5, 0.9))
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=spec, image=image)
    # the known answer needs every box to be no closer than 0.5 to a true box other than its own
    assert np.all(det.other_iou < 0.5)
    ev = coco_evaluate(coco_gt(truth, labels, image, sizes), coco_results(det), iou_thrs=[0.5])
    recall = ev.eval["recall"][0, :, 0, -1]  # pycocotools 2.0.x: [iouThr, category, area 'all', maxDets 100]
    for k, c in enumerate(ev.params.catIds):
        total = int((labels == c).sum())
        missed = int(np.isin(det.missed, np.flatnonzero(labels == c)).sum())
        assert recall[k] == (total - missed) / total
    if len(det.missed) == 0:
        assert np.all(recall == 1.0)


def test_coco_recall_single_class_overall():
    """With one class, AR@100 at IoU 0.5 equals 1 - missed / total over the whole dataset (pycocotools)."""
    rng = np.random.default_rng(13)
    truth, labels, image, sizes = scene(rng, images=10, classes=(1,))
    det = simulate_detections(truth, labels, sizes, rng=rng, spec=DetectorSpec(miss=0.3, background=1.0), image=image)
    ev = coco_evaluate(coco_gt(truth, labels, image, sizes), coco_results(det), iou_thrs=[0.5])
    total = len(truth)
    assert ev.eval["recall"][0, 0, 0, -1] == (total - len(det.missed)) / total
    assert len(det.missed) == 36  # floor(0.3 * 120 + 0.5)


def test_every_function_accepts_empty_input():
    """Empty box lists give empty results of the right shapes everywhere."""
    rng = np.random.default_rng(0)
    empty = np.zeros((0, 4))
    assert gaussian_edges(empty, 0.1, rng=rng).boxes.shape == (0, 4)
    assert gaussian_center_size(empty, 0.1, 0.1, rng=rng).boxes.shape == (0, 4)
    assert uniform_shift_scale(empty, 0.1, 0.1, rng=rng, canvas=(8, 8)).boxes.shape == (0, 4)
    assert duplicates(empty, (0.5, 0.6), rng=rng).boxes.shape == (0, 4)
    assert duplicates([[0, 0, 4, 4]], (0.5, 0.6), rng=rng, counts=0).boxes.shape == (0, 4)
    assert background_boxes(empty, 0, rng=rng, canvas=(8, 8)).boxes.shape == (0, 4)
    assert near_misses([[0, 0, 4, 4]], [], (0.2, 0.3), rng=rng).boxes.shape == (0, 4)
    assert relabel([], 0.5, [1, 2], rng=rng).labels.shape == (0,)
    assert len(pad_with_noise(empty, [], 0, rng=rng, canvas=(8, 8), noise_label=0)) == 0
    det = simulate_detections(empty, [], np.zeros((0, 2)), rng=rng, spec=DetectorSpec(miss=0.5, duplicates=0.5))
    assert len(det) == 0 and det.missed.shape == (0,)


def test_background_boxes_are_sized_like_the_objects_by_default():
    """Without background_size, each background box has the width and height of a true box (tiny objects, tiny false positives)."""
    rng = np.random.default_rng(5)
    n = 60
    w = rng.uniform(1.0, 4.0, n)
    h = rng.uniform(1.0, 4.0, n)
    x = rng.uniform(0, 190, n)
    y = rng.uniform(0, 190, n)
    truth = np.stack([x, y, x + w, y + h], axis=1)
    image = np.arange(n) % 3
    det = simulate_detections(
        truth, np.ones(n, dtype=np.int64), (200, 200), rng=np.random.default_rng(1),
        spec=DetectorSpec(background=30.0), image=image,
    )
    bg = det.boxes[det.kind == "background"]
    assert len(bg) > 50
    sizes = {(round(a, 9), round(b, 9)) for a, b in zip(w, h)}
    assert all((round(b[2] - b[0], 9), round(b[3] - b[1], 9)) in sizes for b in bg)
    # a fraction range still sizes them by the image's shorter side: 5-30% of 200 px
    det = simulate_detections(
        truth, np.ones(n, dtype=np.int64), (200, 200), rng=np.random.default_rng(1),
        spec=DetectorSpec(background=30.0, background_size=(0.05, 0.3)), image=image,
    )
    side = np.sqrt(np.prod(np.diff(det.boxes[det.kind == "background"].reshape(-1, 2, 2), axis=1)[:, 0], axis=1))
    assert side.min() >= 10 - 1e-9 and side.max() <= 60 + 1e-9


def test_background_boxes_without_truth_fall_back_to_a_fraction_of_the_image():
    """With no true box to copy, background boxes take 5-30% of the shorter side."""
    out = background_boxes(np.zeros((0, 4)), 40, rng=np.random.default_rng(2), canvas=(100, 80))
    side = np.sqrt((out.boxes[:, 2] - out.boxes[:, 0]) * (out.boxes[:, 3] - out.boxes[:, 1]))
    assert side.min() >= 0.05 * 80 - 1e-9 and side.max() <= 0.3 * 80 + 1e-9


def test_documented_names_import_from_the_package():
    """README (Boxes that are wrong by a known amount) names these functions of ``synthgen.jitter``;
    the package re-exports every public name of its modules, and nothing private."""
    import synthgen.jitter as pkg
    from synthgen.jitter import detector, iou, models, noise

    readme = ["to_iou", "duplicates", "background_boxes", "near_misses", "relabel", "gaussian_edges",
              "uniform_shift_scale", "pad_with_noise", "simulate_detections", "DetectorSpec", "noise_padder"]
    assert all(callable(getattr(pkg, name)) for name in readme)
    modules = (iou, models, noise, detector)
    assert sorted(pkg.__all__) == sorted(n for m in modules for n in m.__all__)
    assert all(getattr(pkg, n) is getattr(m, n) for m in modules for n in m.__all__)
    assert not any(n.startswith("_") for n in pkg.__all__)
