"""synthgen.stream: the images make writes, with token order and noise that change with the epoch only."""

from __future__ import annotations

import hashlib
import multiprocessing
import sys
import types

import cv2
import numpy as np
import orjson
import pytest
from pycocotools import mask as mask_utils

from synthgen.config import load_config
from synthgen.errors import ConfigError
from synthgen.evaluate.ceiling import quantized_truth
from synthgen.formats.tokens_decode import tokens_to_boxes
from synthgen.stream import SceneIterable, SceneStream, TokenSpec, loader_worker

TOKENS = TokenSpec(bins=100, order="random", pad_to=12)


@pytest.fixture(scope="module")
def busy_config():
    """Small images with many objects, so that orders can differ."""
    return load_config(overrides=["count=5", "seed=3", "canvas.width=96", "canvas.height=64",
                                  "objects.count=[6, 9]", "objects.size=[6, 24]"])


def _digest(item) -> tuple:
    """What identifies an item: index, epoch, image bytes, boxes, tokens."""
    image, t = item
    return (t["index"], t["epoch"], hashlib.sha256(image.tobytes()).hexdigest(), t["boxes"].tobytes(),
            t["tokens"].tobytes() if "tokens" in t else b"")


def test_items_are_the_images_and_annotations_make_writes(small_dataset):
    """stream[k] has the pixels of make's PNG k and the boxes, labels, ignore regions and masks of its COCO file."""
    out, config = small_dataset
    coco = orjson.loads((out / "annotations.json").read_bytes())
    stream = SceneStream(config, masks=True)
    assert len(stream) == len(coco["images"]) == config.count
    for k, im in enumerate(coco["images"]):
        image, target = stream[k]
        written = cv2.cvtColor(cv2.imread(str(out / "images" / im["file_name"])), cv2.COLOR_BGR2RGB)
        assert np.array_equal(image, written)
        assert target["image_id"] == im["id"]
        anns = [a for a in coco["annotations"] if a["image_id"] == im["id"]]
        objs = [a for a in anns if not a["iscrowd"]]
        crowd = [a for a in anns if a["iscrowd"]]
        bbox = np.array([a["bbox"] for a in objs]).reshape(-1, 4)
        assert np.allclose(target["boxes"][:, :2], bbox[:, :2], atol=1e-9)
        assert np.allclose(target["boxes"][:, 2:] - target["boxes"][:, :2], bbox[:, 2:], atol=1e-9)
        assert target["labels"].tolist() == [a["category_id"] for a in objs]
        assert len(target["ignore_boxes"]) == len(crowd)
        # masks against the COCO RLE decoded by pycocotools (the reference decoder)
        for m, a in zip(target["masks"], objs):
            assert np.array_equal(m, mask_utils.decode(a["segmentation"]).astype(bool))


def test_set_epoch_changes_order_and_noise_never_the_image(busy_config):
    """Another epoch draws another order and other noise boxes; image, boxes and labels stay."""
    stream = SceneStream(busy_config, tokens=TOKENS)
    first = [stream[k] for k in range(len(stream))]
    stream.set_epoch(1)
    second = [stream[k] for k in range(len(stream))]
    for (im0, t0), (im1, t1) in zip(first, second):
        assert np.array_equal(im0, im1)
        assert np.array_equal(t0["boxes"], t1["boxes"]) and np.array_equal(t0["labels"], t1["labels"])
        assert t1["epoch"] == 1
    assert any(not np.array_equal(a[1]["order"], b[1]["order"]) for a, b in zip(first, second))
    assert all(not np.array_equal(a[1]["noise_boxes"], b[1]["noise_boxes"]) for a, b in zip(first, second))


def test_item_is_a_pure_function_of_epoch_and_index(busy_config):
    """A fresh stream at epoch e gives what a used stream set to e gives, in any order of access."""
    used = SceneStream(busy_config, tokens=TOKENS)
    _ = [used[k] for k in (4, 0, 2)]
    used.set_epoch(3)
    fresh = SceneStream(busy_config, epoch=3, tokens=TOKENS)
    for k in (3, 1, 4, 0):
        assert _digest(used[k]) == _digest(fresh[k])
    assert _digest(fresh.item(2, 3)) == _digest(fresh[2])
    assert _digest(fresh.item(2, 3)) != _digest(fresh.item(2, 4))


def _shard_digests(args):
    config, epoch, stop, block, worker, workers = args
    stream = SceneStream(config, epoch=epoch, tokens=TOKENS)
    return [_digest(item) for item in SceneIterable(stream, stop=stop, block=block).shard(worker, workers)]


def _round_robin(shards: list[list], block: int) -> list:
    """Interleave workers block by block, as a loader with batch_size=block does."""
    out, pos = [], [0] * len(shards)
    while any(p < len(s) for p, s in zip(pos, shards)):
        for w, s in enumerate(shards):
            out.extend(s[pos[w] : pos[w] + block])
            pos[w] += block
    return out


def test_any_number_of_worker_processes_gives_the_same_stream(busy_config):
    """Worker processes, each taking every n-th block, give the serial stream when interleaved by blocks."""
    stop, block, epoch = 7, 2, 2
    serial = _shard_digests((busy_config, epoch, stop, block, 0, 1))
    assert [d[0] for d in serial] == list(range(stop))  # past count (5) the run goes on with new scenes
    ctx = multiprocessing.get_context("fork" if sys.platform.startswith("linux") else "spawn")
    with ctx.Pool(2) as pool:
        for workers in (2, 3):
            shards = pool.map(_shard_digests, [(busy_config, epoch, stop, block, w, workers) for w in range(workers)])
            assert _round_robin(shards, block) == serial
            assert sorted(d for s in shards for d in s) == sorted(serial)
        # map-style: items fetched by other processes in any order equal the serial ones
        mapped = pool.map(_map_item, [(busy_config, epoch, k) for k in (4, 1, 3, 0, 2)])
    assert mapped == [serial[k] for k in (4, 1, 3, 0, 2)]


def _map_item(args):
    config, epoch, k = args
    return _digest(SceneStream(config, epoch=epoch, tokens=TOKENS)[k])


def test_iterable_asks_a_loaded_torch_which_worker_it_is(busy_config, monkeypatch):
    """Without torch the iterable is worker 0 of 1; inside a (stand-in) torch loader worker it yields its shard."""
    monkeypatch.delitem(sys.modules, "torch", raising=False)
    assert loader_worker() == (0, 1)
    stream = SceneStream(busy_config)
    info = types.SimpleNamespace(id=1, num_workers=3)
    fake = types.SimpleNamespace(utils=types.SimpleNamespace(data=types.SimpleNamespace(get_worker_info=lambda: info)))
    monkeypatch.setitem(sys.modules, "torch", fake)
    assert loader_worker() == (1, 3)
    assert [t["index"] for _, t in SceneIterable(stream, stop=9, block=2)] == [2, 3, 8]
    endless = iter(SceneIterable(stream, start=1, block=1))
    assert [next(endless)[1]["index"] for _ in range(3)] == [2, 5, 8]


def test_tokens_decode_to_the_boxes_in_sequence_order_noise_left_out(busy_config):
    """tokens_to_boxes on an item's sequence gives its boxes at bin centres, in its order, and skips the noise."""
    stream = SceneStream(busy_config, epoch=1, tokens=TOKENS)
    _, t = stream[2]
    n = len(t["boxes"])
    assert t["tokens"].shape == (5 * max(n, TOKENS.pad_to) + 1,)
    decoded = tokens_to_boxes(t["tokens"], stream.vocab)
    expected = quantized_truth(t["boxes"][t["order"]], 96, 64, TOKENS.bins)
    assert np.array_equal(decoded.boxes, expected)
    assert decoded.category_ids.tolist() == t["labels"][t["order"]].tolist()
    assert decoded.n_noise == TOKENS.pad_to - n == len(t["noise_boxes"])
    weights = t["weights"][:-1].reshape(-1, 5)
    assert (weights[:n] == 1).all() and (weights[n:, :4] == 0).all() and (weights[n:, 4] == 1).all()


def test_plain_iteration_and_index_rules(busy_config):
    """A stream iterates over its count; out-of-range and non-integer indices are refused."""
    stream = SceneStream(busy_config)
    assert [t["index"] for _, t in stream] == list(range(5))
    assert _digest(stream[-1]) == _digest(stream[4])
    with pytest.raises(IndexError, match="item 5 is outside the stream of 5 images"):
        stream[5]
    with pytest.raises(TypeError):
        stream["1"]


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"bins": 0}, "tokens.n_bins"),
        ({"order": "zigzag"}, "tokens.order"),
        ({"pad_to": -1}, "tokens.pad_to"),
        ({"jittered": 1.5}, "tokens.jittered"),
    ],
)
def test_token_spec_refuses_bad_values(kwargs, match):
    """Each bad TokenSpec field is named in a one-line error."""
    with pytest.raises(ConfigError, match=match):
        TokenSpec(**kwargs)


def test_epoch_and_block_must_be_whole_numbers(busy_config):
    """A negative epoch or a zero block is refused with its name."""
    with pytest.raises(ConfigError, match="epoch"):
        SceneStream(busy_config, epoch=-1)
    with pytest.raises(ConfigError, match="block"):
        SceneStream(busy_config).iterable(block=0)


def test_stream_survives_pickling_as_spawned_loader_workers_receive_it(busy_config):
    """A pickled copy (what a spawned loader worker gets) gives the same items, at the epoch it was set to."""
    import pickle

    stream = SceneStream(busy_config, tokens=TOKENS, masks=True)
    stream.set_epoch(2)
    copy = pickle.loads(pickle.dumps(stream))
    assert copy.epoch == 2
    assert _digest(copy[1]) == _digest(stream[1])
    assert np.array_equal(copy[1][1]["masks"], stream[1][1]["masks"])
