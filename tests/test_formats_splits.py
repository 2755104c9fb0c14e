"""Split assignment and parsing."""

import pytest

from synthgen.errors import ConfigError
from synthgen.formats import splits
from tests._formats_helpers import build_coco


def test_sizes_follow_the_fractions():
    """80/10/10 of 1000 images is exactly 800/100/100."""
    s = splits.assign_splits(1000, {"train": 0.8, "val": 0.1, "test": 0.1}, seed=3)
    assert (s.count("train"), s.count("val"), s.count("test")) == (800, 100, 100)


def test_rounding_keeps_the_total():
    """Sizes that do not divide evenly still add up to the image count."""
    s = splits.assign_splits(7, {"a": 1 / 3, "b": 1 / 3, "c": 1 / 3}, seed=0)
    assert sorted(s.count(k) for k in "abc") == [2, 2, 3]
    assert len(s) == 7


def test_assignment_is_deterministic_and_depends_on_the_seed():
    """The same seed gives the same assignment; another seed a different one."""
    f = {"train": 0.5, "val": 0.5}
    assert splits.assign_splits(200, f, seed=1) == splits.assign_splits(200, f, seed=1)
    assert splits.assign_splits(200, f, seed=1) != splits.assign_splits(200, f, seed=2)


def test_parse_split():
    """'train=0.8,val=0.2' parses to a dict in the given order."""
    assert splits.parse_split("train=0.8, val=0.2") == {"train": 0.8, "val": 0.2}


@pytest.mark.parametrize(
    "text, match",
    [
        ("train=0.8,val=0.1", "add up to 1"),
        ("train=0.8,val", "NAME=FRACTION"),
        ("train=x,val=0.2", "must be a number"),
        ("train=1.5,val=-0.5", r"in \(0, 1\]"),
        ("train=0.5,train=0.5", "once"),
    ],
)
def test_parse_split_rejects_bad_text(text, match):
    """Bad --split text raises ConfigError naming --split."""
    with pytest.raises(ConfigError, match=f"'--split'.*{match}"):
        splits.parse_split(text)


def test_split_coco_partitions_images_and_annotations():
    """Each split holds its own images and only their annotations; categories are shared."""
    coco = build_coco([(10, 10, [((0, 0, 2, 2), 1)]), (10, 10, [((1, 1, 3, 3), 2), ((4, 4, 6, 6), 1)]), (10, 10, [])])
    parts = splits.split_coco(coco, ["a", "b", "a"], names=["a", "b", "c"])
    assert [im["id"] for im in parts["a"]["images"]] == [1, 3]
    assert [a["id"] for a in parts["a"]["annotations"]] == [1]
    assert [a["id"] for a in parts["b"]["annotations"]] == [2, 3]
    assert parts["c"]["images"] == [] and parts["c"]["categories"] == coco["categories"]
