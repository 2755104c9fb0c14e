"""Token sequences: quantization, orders, noise objects, writer and reader."""

import numpy as np
import orjson
import pytest

from synthgen.errors import ConfigError, InputFileError
from synthgen.formats import tokens
from synthgen.formats.coco import xyxy_from_bbox
from tests._formats_helpers import build_coco, mark_ignored


@pytest.mark.parametrize("n_bins", [16, 100, 1000])
@pytest.mark.parametrize("length", [256, 1280, 333])
def test_dequantized_within_half_a_bin_and_worst_is_L_over_2n(n_bins, length):
    """Dequantized coordinates err by at most L/(2n), and the worst error equals L/(2n)."""
    # dense values across the axis, bin edges included (0, k*L/n and L)
    v = np.concatenate([np.linspace(0, length, 20011), np.arange(n_bins + 1) * (length / n_bins)])
    err = np.abs(tokens.dequantize(tokens.quantize(v, length, n_bins), length, n_bins) - v)
    # REFERENCE.md: box quantization -- a bin is L/n wide; nearest-centre rounding errs by at most L/(2n)
    bound = length / (2 * n_bins)
    assert err.max() <= bound * (1 + 1e-12)
    assert err.max() == pytest.approx(bound, rel=1e-9)


def test_worked_example_1000_bins_on_1280_px():
    """1000 bins on a 1280-px side are 1.28 px wide, worst error 0.64 px."""
    v = np.linspace(0, 1280, 100001)
    err = np.abs(tokens.dequantize(tokens.quantize(v, 1280, 1000), 1280, 1000) - v)
    # REFERENCE.md: box quantization -- "1000 bins on a 1280-pixel side give 1.28-pixel bins and at most 0.64 px"
    assert tokens.dequantize([1], 1280, 1000)[0] - tokens.dequantize([0], 1280, 1000)[0] == pytest.approx(1.28)
    assert err.max() == pytest.approx(0.64, rel=1e-6)


@pytest.mark.parametrize("n_bins", [16, 100, 1000])
def test_file_round_trip_boxes_within_half_a_bin(tmp_path, n_bins):
    """Boxes read back from tokens.jsonl lie within half a bin of the annotated boxes, per axis."""
    rng = np.random.default_rng(n_bins)
    objects = []
    for _ in range(25):
        x0, y0 = rng.random(2) * [200, 100]
        w, h = 1 + rng.random(2) * 50
        objects.append(((x0, y0, x0 + w, y0 + h), int(rng.integers(1, 4))))
    coco = build_coco([(256, 160, objects), (256, 160, [])])
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=n_bins, order="area", seed=3)
    lines = tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")
    assert len(lines) == 2
    line = lines[0]
    truth = xyxy_from_bbox([a["bbox"] for a in coco["annotations"]])
    by_id = {a["id"]: (t, a["category_id"]) for a, t in zip(coco["annotations"], truth)}
    want = np.array([by_id[i][0] for i in line["annotation_ids"]])
    err = np.abs(line["boxes"] - want)
    # REFERENCE.md: box quantization -- at most L/(2n) per axis
    assert (err[:, [0, 2]] <= 256 / (2 * n_bins) + 1e-9).all()
    assert (err[:, [1, 3]] <= 160 / (2 * n_bins) + 1e-9).all()
    assert line["category_ids"].tolist() == [by_id[i][1] for i in line["annotation_ids"]]
    assert lines[1]["tokens"] == [n_bins + 3 + 1]  # only the end token


def test_vocabulary_states_ranges_bins_size_and_rule(tmp_path):
    """The vocabulary file gives token ranges, bin count, image size and the dequantization rule."""
    coco = build_coco([(64, 48, [((1, 1, 5, 5), 1)])])
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=16, order="raster")
    vocab = orjson.loads((tmp_path / "v.json").read_bytes())
    assert vocab["n_bins"] == 16
    assert vocab["image_size"] == {"width": 64, "height": 48}
    assert vocab["ranges"] == {"coordinate": [0, 15], "class": [16, 18], "noise": [19, 19], "end": [20, 20]}
    assert vocab["vocab_size"] == 21
    assert vocab["dequantize"] == "v = (token + 0.5) * L / n_bins"
    line = orjson.loads((tmp_path / "t.jsonl").read_bytes().splitlines()[0])
    # box (1, 1, 5, 5): bins of 4 px in x, 3 px in y -> x0 0, y0 0, x1 1, y1 1; class rectangle = 16
    assert line["tokens"] == [0, 0, 1, 1, 16, 20]


def test_orders_raster_area_distance():
    """raster is top edge then left edge, area is largest first, distance is nearest centre first."""
    boxes = np.array([[50, 0, 60, 10], [0, 20, 40, 60], [0, 0, 4, 4], [10, 0, 12, 2]], float)
    assert tokens.object_order(boxes, "raster").tolist() == [2, 3, 0, 1]
    assert tokens.object_order(boxes, "area").tolist() == [1, 0, 2, 3]
    assert tokens.object_order(boxes, "distance").tolist() == [2, 3, 1, 0]


def test_ties_keep_annotation_order():
    """Equal keys keep annotation order (stable)."""
    boxes = np.array([[0, 0, 2, 2], [5, 5, 7, 7], [9, 0, 11, 2]], float)
    assert tokens.object_order(boxes, "area").tolist() == [0, 1, 2]


def _random_order_lines(tmp_path, seed, name):
    objects = [((i * 3, i * 2, i * 3 + 2, i * 2 + 2), 1 + i % 3) for i in range(12)]
    coco = build_coco([(64, 48, objects), (64, 48, objects)])
    tokens.write_tokens(coco, tmp_path / name, tmp_path / f"{name}.vocab", n_bins=64, order="random", seed=seed)
    return tokens.read_tokens(tmp_path / name, tmp_path / f"{name}.vocab")


def test_random_order_is_reproducible_per_seed_and_differs_between_images(tmp_path):
    """The random order repeats for the same seed, differs for another seed and between images."""
    a = _random_order_lines(tmp_path, 7, "a")
    b = _random_order_lines(tmp_path, 7, "b")
    c = _random_order_lines(tmp_path, 8, "c")
    assert [x["annotation_ids"] for x in a] == [x["annotation_ids"] for x in b]
    assert a[0]["annotation_ids"] != c[0]["annotation_ids"]
    first = [i - 1 for i in a[0]["annotation_ids"]]
    second = [i - 13 for i in a[1]["annotation_ids"]]
    assert first != second


def test_random_order_of_image_k_uses_its_own_stream(tmp_path):
    """Image k's random order is the permutation drawn from SeedSequence(seed, spawn_key=(k, ORDER_STREAM))."""
    lines = _random_order_lines(tmp_path, 11, "a")
    ss = np.random.SeedSequence(11, spawn_key=(1, tokens.ORDER_STREAM))
    perm = np.random.Generator(np.random.PCG64(ss)).permutation(12)
    assert [i - 13 for i in lines[1]["annotation_ids"]] == perm.tolist()


def test_noise_objects_are_appended_with_noise_token_and_zero_coordinate_weight(tmp_path):
    """Noise objects come after the real ones with the noise class token and zero weight on their coordinates."""
    coco = build_coco([(64, 48, [((1, 1, 5, 5), 1)])])
    noise = {1: (np.array([[10.0, 10.0, 20.0, 20.0], [-5.0, 0.0, 70.0, 48.0]]), np.array([2, 3]))}
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=16, order="raster", noise=noise)
    line = tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")[0]
    noise_token = 16 + 3
    assert line["tokens"][9] == noise_token and line["tokens"][14] == noise_token
    assert line["weights"] == [1] * 5 + [0, 0, 0, 0, 1] * 2 + [1]
    assert line["is_noise"].tolist() == [False, True, True]
    assert line["noise_labels"] == [2, 3]
    assert line["n_objects"] == 1 and line["n_noise"] == 2
    # a noise box outside the image is clipped to the first and last bins
    assert line["tokens"][10:14] == [0, 0, 15, 15]


def test_bad_options_are_config_errors(tmp_path):
    """An unknown order or a bin count below 1 raises ConfigError naming the key."""
    coco = build_coco([(64, 48, [])])
    with pytest.raises(ConfigError, match="tokens.order"):
        tokens.write_tokens(coco, tmp_path / "t", tmp_path / "v", order="spiral")
    with pytest.raises(ConfigError, match="tokens.n_bins"):
        tokens.write_tokens(coco, tmp_path / "t", tmp_path / "v", n_bins=0)


def test_reader_rejects_a_sequence_without_end_token(tmp_path):
    """A line whose tokens do not end with the end token raises InputFileError naming the line."""
    coco = build_coco([(64, 48, [((1, 1, 5, 5), 1)])])
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=16, order="raster")
    line = orjson.loads((tmp_path / "t.jsonl").read_bytes())
    line["tokens"] = line["tokens"][:-1]
    (tmp_path / "t.jsonl").write_bytes(orjson.dumps(line) + b"\n")
    with pytest.raises(InputFileError, match=r"t\.jsonl: line 1: must be 5 tokens per object"):
        tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")


def test_noise_callable_with_a_padded_result(tmp_path):
    """A callable noise hook returning boxes/is_noise/source rows labels each noise object by its source's category."""
    from types import SimpleNamespace

    coco = build_coco([(64, 48, [((1, 1, 5, 5), 1), ((10, 10, 20, 20), 3)])])
    calls = []

    def hook(k, boxes, cats, size):
        calls.append((k, boxes.tolist(), cats.tolist(), size))
        rows = np.vstack([boxes, [[2, 2, 6, 6], [30, 30, 40, 40]]])
        return SimpleNamespace(
            boxes=rows, is_noise=np.array([False, False, True, True]), source=np.array([0, 1, 1, -1])
        )

    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=16, order="raster", noise=hook)
    assert calls == [(0, [[1.0, 1.0, 5.0, 5.0], [10.0, 10.0, 20.0, 20.0]], [1, 3], (64, 48))]
    line = tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")[0]
    assert line["noise_labels"] == [3, -1]
    assert line["is_noise"].tolist() == [False, False, True, True]
    np.testing.assert_allclose(line["boxes"][2], [2, 1.5, 6, 7.5])  # bin centres: 4 px in x, 3 px in y


@pytest.mark.parametrize(
    ("field", "value", "match"),
    [
        ("n_bins", True, r"n_bins: must be a positive whole number \(got True\)"),
        ("ranges.end", [True, True], r"ranges.end: must be \[first, last\] token ids"),
        ("tokens", None, r"line 1: tokens must be integers"),
    ],
)
def test_json_true_is_not_a_whole_number(tmp_path, field, value, match):
    """JSON true where a token count or id belongs is rejected (Python's bool is an int, JSON's is not)."""
    coco = build_coco([(64, 48, [((2, 2, 9, 9), 1)])])
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=16, order="raster", seed=0)
    vocab = orjson.loads((tmp_path / "v.json").read_bytes())
    if field == "n_bins":
        vocab["n_bins"] = value
    elif field == "ranges.end":
        vocab["ranges"]["end"] = value
    else:
        line = orjson.loads((tmp_path / "t.jsonl").read_bytes())
        line["tokens"][0] = True
        (tmp_path / "t.jsonl").write_bytes(orjson.dumps(line) + b"\n")
    (tmp_path / "v.json").write_bytes(orjson.dumps(vocab))
    with pytest.raises(InputFileError, match=match):
        tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")


def test_ignore_regions_are_left_out(tmp_path):
    """An ignore region (iscrowd 1) is no object of the sequence: only the objects are encoded."""
    coco = mark_ignored(build_coco([(64, 48, [((5, 4, 12, 20), 1), ((20, 0, 64, 48), 3), ((1, 1, 3, 3), 2)])]), {2})
    tokens.write_tokens(coco, tmp_path / "t.jsonl", tmp_path / "v.json", n_bins=64, order="raster")
    (line,) = tokens.read_tokens(tmp_path / "t.jsonl", tmp_path / "v.json")
    assert line["n_objects"] == 2 and sorted(line["annotation_ids"]) == [1, 3]
    assert line["category_ids"].tolist() == [2, 1]  # raster order: (1, 1) before (5, 4)
