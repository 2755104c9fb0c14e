"""The batched paths of synthgen.scene.visible and synthgen.scene.occlusion equal their one-object paths bit for bit."""

from __future__ import annotations

import numpy as np
import pytest

from synthgen.config import load_config
from synthgen.scene import render_scene
from synthgen.scene import shapes as shapes_mod
from synthgen.scene.shapes import Shape
from synthgen.scene.visible import _sides_in_view, _sides_in_view_many, visible_boxes
from tests.test_batch_paths import _tiny_scene


def _with_above(shapes, strokes):
    """Each shape with the later shapes whose unclipped boxes meet its own (as the composer passes them)."""
    boxes = np.array([shapes_mod.shape_geometry(s).box for s in shapes])
    items = []
    for i, s in enumerate(shapes):
        b = boxes[i]
        later = np.arange(i + 1, len(shapes))
        lb = boxes[later]
        meet = later[(lb[:, 0] < b[2]) & (b[0] < lb[:, 2]) & (lb[:, 1] < b[3]) & (b[1] < lb[:, 3])]
        items.append((s, [(shapes[j], strokes[j]) for j in meet.tolist()]))
    return items


@pytest.mark.parametrize("seed", range(8))
@pytest.mark.parametrize("sizes", [(0.3, 8.0), (4.0, 40.0)])
def test_sides_in_view_many_equals_one_at_a_time(seed, sizes):
    shapes, strokes, h, w = _tiny_scene(seed, 150, *sizes)
    items = [(s, above) for s, above in _with_above(shapes, strokes) if above]
    many = _sides_in_view_many(items, h, w)
    assert many.shape == (len(items), 4) and many.dtype == bool
    for (shape, above), got in zip(items, many):
        assert np.array_equal(got, _sides_in_view(shape, above, h, w))


def test_sides_in_view_many_edge_cases():
    """No objects, and objects with nothing above (every touch point on the canvas is in view)."""
    assert _sides_in_view_many([], 20, 20).shape == (0, 4)
    disc, square = Shape("ellipse", 10.0, 10.0, 8.0), Shape("rectangle", 10.0, 10.0, 6.0, angle=30.0)
    got = _sides_in_view_many([(disc, []), (square, [])], 20, 20)
    assert got.tolist() == [[True] * 4, [True] * 4]
    assert _sides_in_view_many([(square, [(disc, 0.0)])], 20, 20).tolist() == [[False] * 4]


@pytest.mark.parametrize("overrides", [["objects.count=[60,60]"], ["objects.count=[400,400]", "objects.size=[2,8]"]])
def test_visible_boxes_of_a_scene_equal_one_object_calls(overrides, monkeypatch):
    """Whole scenes: the boxes of all objects at once equal each object's own call on the one-object path."""
    import synthgen.scene.annotate as annotate_mod

    calls = []

    def spy(items, height, width):
        calls.append((items, height, width))
        return visible_boxes(items, height, width)

    monkeypatch.setattr(annotate_mod, "visible_boxes", spy)
    render_scene(load_config(overrides=["background.kind=solid", *overrides]), 1)
    (items, h, w), = calls
    assert len(items) > 10
    many = visible_boxes(items, h, w)
    # the one-object path: each object's sides tested on their own
    import synthgen.scene.visible as visible_mod

    monkeypatch.setattr(visible_mod, "_sides_in_view_many", lambda its, hh, ww: np.array(
        [_sides_in_view(s, a, hh, ww) for s, a in its], dtype=bool).reshape(-1, 4))
    for item, got in zip(items, many):
        want = visible_boxes([item], h, w)[0]
        assert (got is None and want is None) or np.array_equal(got, want)


@pytest.mark.parametrize("nb", [1, 2, 3, 4, 8])
def test_set_bits_equals_the_sum_of_byte_counts(nb):
    """The 16-bit table gives each packed pixel the count of its bytes' set bits (int.bit_count, Python)."""
    from synthgen.scene.occlusion import _set_bits

    rng = np.random.default_rng(nb)
    packed = rng.integers(0, 256, (7, 5, nb), dtype=np.uint8)
    want = np.array([[sum(int(b).bit_count() for b in px) for px in row] for row in packed])
    assert np.array_equal(_set_bits(packed), want)
    assert np.array_equal(_set_bits(packed[:, 1:4]), want[:, 1:4])  # a strided view takes the byte path
    assert np.array_equal(_set_bits(packed.reshape(-1, nb)), want.ravel())
