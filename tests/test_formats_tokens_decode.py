"""tokens_to_boxes: a model's token sequence back to boxes, labels and scores."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from synthgen.evaluate import evaluate
from synthgen.formats.tokens import dequantize, encode_objects, quantize, vocabulary
from synthgen.formats.tokens_decode import tokens_to_boxes

CATS = [{"id": 3, "name": "washer"}, {"id": 5, "name": "bracket"}, {"id": 9, "name": "plate"}]


def _vocab(n_bins: int, size=(200, 100)) -> dict:
    return vocabulary(CATS, n_bins, size, order="raster", seed=0)


def _ids(vocab):
    r = vocab["ranges"]
    return r["class"][0], r["noise"][0], r["end"][0]


@st.composite
def _objects(draw):
    n_bins = draw(st.integers(1, 2000))
    w, h = draw(st.integers(1, 1000)), draw(st.integers(1, 1000))
    n = draw(st.integers(0, 12))
    xs = np.sort(np.array(draw(st.lists(st.floats(0, w), min_size=2 * n, max_size=2 * n))).reshape(n, 2), axis=1)
    ys = np.sort(np.array(draw(st.lists(st.floats(0, h), min_size=2 * n, max_size=2 * n))).reshape(n, 2), axis=1)
    boxes = np.stack([xs[:, 0], ys[:, 0], xs[:, 1], ys[:, 1]], axis=1).reshape(n, 4)
    labels = draw(st.lists(st.integers(0, 2), min_size=n, max_size=n))
    m = draw(st.integers(0, 4))
    return n_bins, (w, h), boxes, np.array(labels, dtype=np.int64), m


@settings(max_examples=150, deadline=None)
@given(_objects())
def test_round_trip_is_exact_up_to_quantization(case):
    """Decoding what the encoder wrote gives each box at its bin centres (within L/(2n)), in order, noise skipped."""
    n_bins, (w, h), boxes, labels, m = case
    vocab = _vocab(n_bins, (w, h))
    first_class, noise_token, end = _ids(vocab)
    noise = np.tile([[0.0, 0.0, w / 2, h / 2]], (m, 1))
    tokens, _ = encode_objects(boxes, first_class + labels, w, h, n_bins, end_token=end,
                               noise_boxes=noise, noise_token=noise_token)
    out = tokens_to_boxes(tokens, vocab)
    expected = np.empty_like(boxes)
    expected[:, 0::2] = dequantize(quantize(boxes[:, 0::2], w, n_bins), w, n_bins)
    expected[:, 1::2] = dequantize(quantize(boxes[:, 1::2], h, n_bins), h, n_bins)
    assert np.array_equal(out.boxes, expected)
    err = np.abs(out.boxes - boxes)
    assert (err[:, 0::2] <= w / (2 * n_bins) * (1 + 1e-12)).all()
    assert (err[:, 1::2] <= h / (2 * n_bins) * (1 + 1e-12)).all()
    assert out.category_ids.tolist() == [CATS[i]["id"] for i in labels.tolist()]
    assert (out.n_noise, out.n_malformed) == (m, 0)
    assert (out.scores == 1).all()


def test_worst_coordinate_error_is_half_a_bin():
    """A coordinate on a bin edge comes back L/(2n) away, the most any can (REFERENCE.md, box quantization)."""
    vocab = _vocab(16, (256, 128))  # 16 px bins in x, 8 px in y
    first_class, _, end = _ids(vocab)
    tokens, _ = encode_objects([[16, 8, 256, 128]], [first_class], 256, 128, 16, end_token=end)
    out = tokens_to_boxes(tokens, vocab)
    # 1000 bins on 1280 px err by at most 0.64 px (REFERENCE.md); here 256 / 32 = 8 and 128 / 32 = 4
    assert (out.boxes - [[16, 8, 256, 128]]).tolist() == [[8.0, 4.0, -8.0, -4.0]]


def test_noise_and_malformed_groups_are_skipped_and_counted():
    """Noise groups, wrong kinds of token in a slot, inverted corners and a short last group are left out."""
    vocab = _vocab(10, (100, 100))
    c, noise, end = _ids(vocab)
    seq = [
        1, 1, 4, 4, c,          # kept: washer
        2, 2, 3, 3, noise,      # noise object
        1, 1, 4, 4, 2,          # coordinate token in the class slot
        1, c, 4, 4, c + 1,      # class token in a coordinate slot
        5, 1, 4, 4, c,          # x1 < x0
        3, 3, 3, 3, c + 2,      # kept: both edges in one bin, a zero-size box
        1, 1, 99, 4, c,         # a token outside the vocabulary
        0, 0, 9,                # short last group
        end, 0, 0, 9, 9, c,     # after the end token: not read
    ]
    out = tokens_to_boxes(seq, vocab)
    assert out.boxes.tolist() == [[15.0, 15.0, 45.0, 45.0], [35.0, 35.0, 35.0, 35.0]]
    assert out.category_ids.tolist() == [3, 9]
    assert (out.n_noise, out.n_malformed) == (1, 5)


def test_sequence_without_end_token_is_read_whole():
    """An output cut off at a length limit (no end token) still gives its complete groups."""
    vocab = _vocab(10, (100, 100))
    c, _, _ = _ids(vocab)
    out = tokens_to_boxes([0, 0, 9, 9, c + 1, 0, 0], vocab)
    assert out.category_ids.tolist() == [5] and out.n_malformed == 1


def test_scores_are_class_token_probabilities():
    """Scores come from the probability of each class token, given per token or as full distributions."""
    vocab = _vocab(10, (100, 100))
    c, _, end = _ids(vocab)
    seq = [0, 0, 5, 5, c, 1, 1, 6, 6, c + 2, end]
    per_token = np.linspace(0.1, 0.9, len(seq))
    assert tokens_to_boxes(seq, vocab, probs=per_token).scores.tolist() == [per_token[4], per_token[9]]
    dist = np.zeros((len(seq), vocab["vocab_size"]))
    dist[4, c], dist[9, c + 2] = 0.7, 0.4
    assert tokens_to_boxes(seq, vocab, probs=dist).scores.tolist() == [0.7, 0.4]
    with pytest.raises(ValueError, match="one row per token"):
        tokens_to_boxes(seq, vocab, probs=per_token[:3])


def test_image_size_from_arguments_when_the_vocabulary_has_none():
    """A vocabulary of mixed image sizes needs width and height from the caller."""
    vocab = vocabulary(CATS, 10, None, order="raster", seed=0)
    c, _, end = _ids(vocab)
    with pytest.raises(ValueError, match="width and height"):
        tokens_to_boxes([0, 0, 9, 9, c, end], vocab)
    assert tokens_to_boxes([0, 0, 9, 9, c, end], vocab, width=50, height=20).boxes.tolist() == [[2.5, 1.0, 47.5, 19.0]]


def test_decoded_results_go_straight_into_score():
    """Records from results() score with the COCO rules: the truth at 1000 bins gives AP 1 on large boxes."""
    vocab = _vocab(1000, (200, 100))
    c, _, end = _ids(vocab)
    truth = np.array([[10.3, 5.2, 90.7, 60.1], [100.0, 20.0, 190.0, 95.5]])
    tokens, _ = encode_objects(truth, [c, c + 1], 200, 100, 1000, end_token=end)
    records = tokens_to_boxes(tokens, vocab).results(image_id=7)
    gt = {"images": [{"id": 7, "width": 200, "height": 100}], "categories": CATS,
          "annotations": [{"id": i + 1, "image_id": 7, "category_id": cat,
                           "bbox": [b[0], b[1], b[2] - b[0], b[3] - b[1]],
                           "area": (b[2] - b[0]) * (b[3] - b[1]), "iscrowd": 0}
                          for i, (b, cat) in enumerate(zip(truth.tolist(), (3, 5)))]}
    assert [r["category_id"] for r in records] == [3, 5]
    assert evaluate(gt, records).stats[0] == pytest.approx(1.0, abs=1e-9)
