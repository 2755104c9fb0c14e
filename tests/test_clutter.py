"""Clutter marks: drawn under the objects, never annotated, counted per image and in the manifest."""

from __future__ import annotations

import json

import numpy as np
import pytest

from synthgen.config import ClutterSpec, load_config
from synthgen.errors import ConfigError
from synthgen.run.make import make_dataset
from synthgen.scene import render_scene
from synthgen.scene.clutter import render_clutter

BASE = ["canvas.width=128", "canvas.height=96", "objects.count=[5,5]", "objects.size=[10,30]",
        "objects.min_contrast=0", "objects.fills=[\"flat\"]", "objects.outline=0", "background.kind=solid"]


def test_clutter_changes_pixels_not_annotations():
    """Turning clutter on leaves every box, area and category as it was (clutter has its own stream)."""
    plain = render_scene(load_config(overrides=BASE), 3)
    busy = render_scene(load_config(overrides=BASE + ["clutter.count=[30,30]", "clutter.similar=0.5"]), 3)
    assert not np.array_equal(plain.image, busy.image)
    assert np.array_equal(plain.boxes, busy.boxes) and np.array_equal(plain.areas, busy.areas)
    assert np.array_equal(plain.categories, busy.categories)
    assert busy.info["clutter"]["marks"] == 30 and "clutter" not in plain.info


def test_clutter_lies_under_the_objects():
    """Pixels an unhidden object covers fully look the same with and without clutter."""
    plain = render_scene(load_config(overrides=BASE), 5)
    busy = render_scene(load_config(overrides=BASE + ["clutter.count=[40,40]"]), 5)
    changed = np.any(plain.image != busy.image, axis=2)
    touched = 0
    for (row0, col0, support), f in zip(busy.masks, busy.facts):
        if f["visible_fraction"] == 1.0:
            # interior pixels: the support eroded by one pixel has coverage 1 for a filled convex-ish shape
            from scipy.ndimage import binary_erosion

            inner = binary_erosion(support, iterations=2)
            h, w = inner.shape
            assert not changed[row0 : row0 + h, col0 : col0 + w][inner].any()
            touched += bool(changed[row0 : row0 + h, col0 : col0 + w].any())
    assert touched >= 1  # some mark does reach under an object


def test_similar_share_and_counts():
    """clutter.similar = 1 makes every mark a cut copy of a labelled kind; 0 makes none; counts add up."""
    img = np.full((64, 64, 3), 90, np.uint8)
    _, all_similar = render_clutter(img, ClutterSpec(count=(12, 12), similar=1.0), ["star"], rng=np.random.default_rng(0))
    _, none_similar = render_clutter(img, ClutterSpec(count=(12, 12), similar=0.0, marks=("line",)), ["star"],
                                     rng=np.random.default_rng(0))
    assert all_similar["similar"] == 12 and none_similar["similar"] == 0 and none_similar["line"] == 12
    assert sum(v for k, v in all_similar.items() if k != "marks") == all_similar["marks"]


def test_clutter_input_is_not_modified():
    """render_clutter returns a new image and leaves the canvas it was given alone."""
    img = np.full((32, 32, 3), 10, np.uint8)
    out, _ = render_clutter(img, ClutterSpec(count=(5, 5)), ["rectangle"], rng=np.random.default_rng(1))
    assert (img == 10).all() and out is not img


def test_clutter_keys_are_checked():
    """A bad mark kind or share is a config error naming the key."""
    with pytest.raises(ConfigError, match="clutter.marks"):
        load_config(overrides=['clutter.marks=["smoke"]'])
    with pytest.raises(ConfigError, match="clutter.similar"):
        load_config(overrides=["clutter.similar=2"])


def test_manifest_records_clutter(tmp_path):
    """The manifest keeps the clutter settings; each COCO image records its marks."""
    cfg = load_config(overrides=BASE + ["count=2", "clutter.count=[7,7]", "clutter.similar=0.25"])
    make_dataset(cfg, tmp_path / "d", workers=1)
    manifest = json.loads((tmp_path / "d" / "manifest.json").read_text())
    assert manifest["config"]["clutter"]["similar"] == 0.25
    coco = json.loads((tmp_path / "d" / "annotations.json").read_text())
    assert [im["synthgen"]["clutter"]["marks"] for im in coco["images"]] == [7, 7]


def test_no_marks_still_returns_a_copy():
    """With zero marks the result is a new array equal to the canvas, so writing to it leaves the input alone."""
    canvas = np.full((8, 8, 3), 7, np.uint8)
    out, info = render_clutter(canvas, ClutterSpec(count=(0, 0)), ["star"], rng=np.random.default_rng(0))
    assert info["marks"] == 0 and np.array_equal(out, canvas)
    out[0, 0] = 0
    assert canvas[0, 0].tolist() == [7, 7, 7]
