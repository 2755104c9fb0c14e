"""Tests for synthgen.scene.kinds: kinds told apart by their pixels, their parameter ranges and the identifiable fact."""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.config import load_config
from synthgen.errors import ConfigError
from synthgen.scene import kinds, render_scene
from synthgen.scene.kinds import sample_objects as _sample_objects
from synthgen.scene.shapes import KINDS, Shape, natural_aspect, own_size
from tests._kind_descriptors import NearestCentroid, classes, descriptors, render, sample

# --------------------------------------------------------------------------- ranges


@pytest.mark.parametrize(
    ("key", "value"),
    [
        ("objects.sides", "[3, 8]"),  # a 3-gon is a triangle
        ("objects.sides", "[4, 6]"),  # a 4-gon turned 45 degrees is a square
        ("objects.sides", "[5, 12]"),  # a 12-gon is an ellipse to the eye
        ("objects.points", "[4, 6]"),  # a thin 4-point star is a cross
        ("objects.inner", "[0.4, 0.85]"),  # a fat star is a polygon
        ("objects.hole", "[0.5, 0.9]"),  # a thin ring is an outlined ellipse
        ("objects.bar", "[0.3, 0.8]"),  # a thick cross is an octagon
    ],
)
def test_a_range_that_overlaps_another_kind_is_refused(key, value):
    """Each kind's parameters may narrow their range but never reach another kind's outline."""
    with pytest.raises(ConfigError, match=rf"config key '{key}' must be \[min, max\].*\(got .*\); "):
        load_config(overrides=[f"{key}={value}"])


def test_narrower_ranges_are_accepted():
    """A config may narrow a kind's range."""
    cfg = load_config(overrides=["objects.sides=[6, 6]", "objects.hole=[0.4, 0.5]", "objects.points=[5, 5]"])
    assert (cfg.objects.sides, cfg.objects.hole, cfg.objects.points) == ((6, 6), (0.4, 0.5), (5, 5))


def test_overlap_on_the_command_line_is_one_line_exit_2(tmp_path):
    """`make --set objects.sides=[3,8]`: exit 2, one line naming the key and why, nothing written."""
    res = CliRunner().invoke(app, ["make", "--out", str(tmp_path / "d"), "--set", "objects.sides=[3,8]", "--quiet"])
    assert res.exit_code == 2
    (line,) = res.stderr.strip().splitlines()
    assert "config key 'objects.sides'" in line and "triangle" in line
    assert not (tmp_path / "d").exists()


def test_sampled_objects_keep_their_kinds_ranges():
    """Objects drawn from the config have their kind's parameters in range; rings are never outline-only."""
    cfg = load_config(overrides=["objects.outline=0.5", "objects.aspect=[0.25, 4]"])
    shapes, styles = _sample_objects(cfg, np.random.default_rng(3), n=3000)
    for shape, style in zip(shapes, styles):
        if shape.kind == "polygon":
            assert 5 <= shape.sides <= 8
        elif shape.kind == "star":
            assert 5 <= shape.sides <= 8 and 0.3 <= shape.inner <= 0.55
        elif shape.kind == "ring":
            assert 0.3 <= shape.inner <= 0.6 and not style["outline"]
        elif shape.kind == "cross":
            assert 0.2 <= shape.inner <= 0.4
        if style["outline"]:
            # the band never takes more than an eighth of the shape's shorter side (but 0.5 px at least)
            assert style["stroke"] <= max(min(own_size(shape)) / 8.0, 0.5) * (1 + 1e-9)
    assert {s.sides for s in shapes if s.kind == "polygon"} == {5, 6, 7, 8}


def test_outline_of_an_ellipse_never_has_a_ring_sized_hole():
    """An outlined ellipse's hole spans at least 3/4 of it; a ring's at most 0.6 (the ranges are disjoint)."""
    for size, aspect in [(10.0, 1.0), (40.0, 2.0), (200.0, 0.3)]:
        e = Shape("ellipse", 0.0, 0.0, size, aspect=aspect)
        band = kinds.stroke_limit(size, aspect)
        w, h = own_size(e)
        if band > 0.5:  # above the 0.5 px floor
            assert (min(w, h) - 2 * band) / min(w, h) >= 0.75 - 1e-12
    assert kinds.RING_HOLE[1] < 0.75


# --------------------------------------------------------------------------- the identifiable fact


def test_identifiable_follows_the_measured_breadth():
    """Just below the table's breadth a shape is not identifiable, at it it is."""
    for kind in KINDS:
        b = kinds.IDENTIFIABLE_BREADTH[kind, False]
        sides, inner = 6, {"star": 0.4, "ring": 0.45, "cross": 0.3}.get(kind, 0.5)
        aspect = natural_aspect(kind, sides, inner)
        probe = Shape(kind, 0.0, 0.0, 10.0, aspect, 20.0, sides, inner)
        size = 10.0 * b / kinds.breadth(probe)
        assert kinds.identifiable(Shape(kind, 0.0, 0.0, size * 1.001, aspect, 20.0, sides, inner))
        assert not kinds.identifiable(Shape(kind, 0.0, 0.0, size * 0.99, aspect, 20.0, sides, inner))


def test_shapes_outside_their_kinds_ranges_are_not_identifiable():
    """A hand-made 'polygon' of 3 sides or a ring of hole 0.9 is not identifiable as its kind, however big."""
    assert not kinds.identifiable(Shape("polygon", 0.0, 0.0, 80.0, sides=3))
    assert not kinds.identifiable(Shape("ring", 0.0, 0.0, 80.0, inner=0.9))
    assert not kinds.identifiable(Shape("star", 0.0, 0.0, 80.0, sides=5, inner=0.8))
    assert not kinds.identifiable(Shape("ring", 0.0, 0.0, 80.0, inner=0.5), stroke=2.0)  # an outlined ring
    assert not kinds.identifiable(Shape("rectangle", 0.0, 0.0, 80.0, aspect=20.0))  # thinner than measured
    assert kinds.identifiable(Shape("rectangle", 0.0, 0.0, 80.0), stroke=2.0)
    assert not kinds.identifiable(Shape("rectangle", 0.0, 0.0, 80.0), stroke=0.5)  # band thinner than measured


def test_scene_facts_carry_identifiable():
    """Every annotation records whether its kind is identifiable at its size (a fact `score --by` can slice on)."""
    cfg = load_config(overrides=["objects.count=[30, 30]", "objects.size=[2, 60]", "objects.outline=0.3"])
    scene = render_scene(cfg, 0)
    values = [f["identifiable"] for f in scene.facts]
    assert set(values) == {True, False}
    small = [f for f in scene.facts if f["size"] < 4]
    assert small and not any(f["identifiable"] for f in small)


# --------------------------------------------------------------------------- told apart by the pixels


def _objects(rng, breadths, per_class):
    """Descriptors, classes and kinds of rendered objects of every class at ``breadths(least breadth)``."""
    x, labels = [], []
    for cls in classes():
        for b in breadths(kinds.IDENTIFIABLE_BREADTH[cls[0], cls[1]]):
            for _ in range(per_class):
                x.append(descriptors(render(*sample(cls, b, rng))))
                labels.append(cls)
    return np.array(x), labels, [c[0] for c in labels]


def test_kinds_are_told_apart_by_their_pixels():
    """Objects at or above their identifiable breadth: a nearest-centroid classifier never confuses two kinds.

    Outside reference: scikit-image (regionprops solidity and holes, moments_central) measures
    every rendered object (tests/_kind_descriptors.py); the classifier, one centroid per kind,
    style and part of its parameter range, is trained on objects at the table's breadths and up,
    and labels a held-out set drawn independently at random breadths from the table's value to
    three times it, any aspect in MEASURED_ASPECT, any rotation, and outline bands from
    MEASURED_STROKE to OUTLINE_SHARE of the breadth.
    """
    rng = np.random.default_rng(2026)
    x, labels, _ = _objects(rng, lambda least: [least, 1.5 * least, 2 * least, 3 * least], 6)
    model = NearestCentroid().fit(x, labels)
    held, _, truth = _objects(rng, lambda least: rng.uniform(least, 3 * least, size=4), 8)
    predicted = [label[0] for label in model.predict(held)]
    confused = [(t, p) for t, p in zip(truth, predicted) if t != p]
    assert confused == []
    assert len(truth) == 4 * 8 * len(classes())


def test_kind_table_is_the_schemas_kinds_with_stable_category_ids():
    """One registry entry per kind of the schema, in its order; category ids 1..7 in that order (the COCO
    category ids datasets already carry: changing them would relabel every published annotation file)."""
    from synthgen.config import KINDS

    assert tuple(kinds.KIND_TABLE) == KINDS
    assert [kinds.category_id(k) for k in KINDS] == list(range(1, len(KINDS) + 1))
    assert len({k.category for k in kinds.KIND_TABLE.values()}) == len(KINDS)


def test_kind_table_entries_drive_sampling_ranges_and_limits():
    """The config keys an entry names are the ranges its parameters are drawn from, and its limits are the schema's."""
    from synthgen.config import ObjectSpec

    spec = ObjectSpec(sides=(6, 6), points=(7, 7), inner=(0.4, 0.4), hole=(0.5, 0.5), bar=(0.3, 0.3))
    counts, ratios = kinds.parameter_ranges(spec)
    assert counts == {"polygon": (6, 6), "star": (7, 7)}
    assert ratios == {"star": (0.4, 0.4), "ring": (0.5, 0.5), "cross": (0.3, 0.3)}
    assert not kinds.outlined("ring") and kinds.outlined("cross")
    assert not kinds.identifiable(Shape("ring", 0.0, 0.0, 60.0, inner=0.45), stroke=2.0)  # never outline-only
    assert kinds.identifiable(Shape("ring", 0.0, 0.0, 60.0, inner=0.45))
    assert not kinds.identifiable(Shape("cross", 0.0, 0.0, 60.0, inner=0.45))  # bars beyond CROSS_BAR: an octagon
