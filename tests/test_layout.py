"""Placement strategies: overlap limits, exact pair IoUs, lattices, clusters, crowded requests."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from shapely.geometry import box as shapely_box

from synthgen.config import load_config
from synthgen.errors import ConfigError
from synthgen.run.make import make_dataset
from synthgen.scene import placement as layout
from synthgen.scene import render_scene


def shapely_iou(a, b) -> float:
    """Box IoU computed by shapely from polygons (independent of synthgen.geometry)."""
    pa, pb = shapely_box(*a), shapely_box(*b)
    inter = pa.intersection(pb).area
    return inter / (pa.area + pb.area - inter)


def scene(*overrides, index=0):
    cfg = load_config(overrides=["canvas.width=200", "canvas.height=150", "objects.min_visible=0", *overrides])
    return render_scene(cfg, index)


@pytest.mark.parametrize("max_iou", [0.0, 0.15])
def test_separated_pairs_stay_below_max_iou(max_iou):
    """Every pair of exact boxes under `separated` has IoU <= objects.max_iou (shapely polygons)."""
    for k in range(3):
        sc = scene("objects.layout=separated", f"objects.max_iou={max_iou}", "objects.count=[60,60]",
                   "objects.size=[6,40]", "objects.min_area=0", index=k)
        boxes = [f["full_box"] for f in sc.facts]
        assert len(boxes) > 20
        worst = max(shapely_iou(a, b) for a, b in itertools.combinations(boxes, 2))  # reference: shapely
        assert worst <= max_iou + 1e-12


def test_separated_keeps_boxes_inside_the_canvas():
    """Boxes that fit are placed wholly on the canvas (so clipping cannot change them)."""
    p = layout.separated(np.full((30, 2), 6.0), 100, 80, rng=np.random.default_rng(2))
    assert np.all(p.centres - 6.0 >= 0) and np.all(p.centres[:, 0] + 6.0 <= 100) and np.all(p.centres[:, 1] + 6.0 <= 80)


def test_separated_reports_what_did_not_fit():
    """More boxes than the canvas can hold: the placed ones do not overlap, the rest are counted."""
    half = np.full((50, 2), 10.0)  # 20x20 boxes, at most 9 fit on 64x64
    p = layout.separated(half, 64, 64, attempts=200, rng=np.random.default_rng(0))
    assert p.info["placed"] + p.info["no_room"] == 50 and 1 <= p.info["placed"] <= 9
    boxes = np.hstack([p.centres - 10.0, p.centres + 10.0])
    assert all(shapely_iou(a, b) == 0.0 for a, b in itertools.combinations(boxes, 2))  # reference: shapely


def test_impossible_request_finishes_with_warning_and_valid_dataset(tmp_path):
    """100 objects of 200 px, no overlap, on 64x64: a shortfall count and a loadable dataset, quickly."""
    from pycocotools.coco import COCO

    cfg = load_config(overrides=["count=2", "canvas.width=64", "canvas.height=64", "objects.layout=separated",
                                 "objects.count=[100,100]", "objects.size=[200,200]", "objects.max_iou=0"])
    make_dataset(cfg, tmp_path / "d", workers=1)
    manifest = json.loads((tmp_path / "d" / "manifest.json").read_text())
    assert manifest["counts"]["dropped"]["no_room"] == 2 * 99
    images = json.loads((tmp_path / "d" / "annotations.json").read_text())["images"]
    assert [im["synthgen"]["placement"]["placed"] for im in images] == [1, 1]
    coco = COCO(str(tmp_path / "d" / "annotations.json"))  # reference: pycocotools loads it
    assert len(coco.getAnnIds()) == manifest["counts"]["objects"] <= 2


def test_pair_offset_matches_equal_box_formula():
    """Equal w x h boxes at IoU t sit d = w (1 - t) / (1 + t) apart (REFERENCE.md: Geometry)."""
    for t in (0.1, 0.5, 0.9):
        assert layout.pair_offset((6.0, 2.0), (6.0, 2.0), t, axis=0) == pytest.approx(12.0 * (1 - t) / (1 + t))


def test_pair_offset_unequal_boxes_hits_the_iou():
    """For unequal boxes the solved offset gives the target IoU (shapely polygons)."""
    ha, hb = np.array([7.0, 3.0]), np.array([4.0, 5.0])
    for axis, t in itertools.product((0, 1), (0.05, 0.2, layout.pair_max_iou(ha, hb))):
        d = layout.pair_offset(ha, hb, t, axis)
        cb = np.zeros(2)
        cb[axis] = d
        got = shapely_iou((*(-ha), *ha), (*(cb - hb), *(cb + hb)))  # reference: shapely
        assert got == pytest.approx(t, abs=1e-12)


def test_pairs_record_the_iou_they_have():
    """`pairs`: shapely IoU of each pair's exact boxes equals the recorded pair_iou (1e-9) and lies in range."""
    lo, hi = 0.35, 0.8
    seen = 0
    for k in range(4):
        sc = scene("objects.layout=pairs", f"objects.pair_iou=[{lo},{hi}]", "objects.count=[8,8]",
                   "objects.size=[10,40]", "objects.min_area=0", index=k)
        by_pair = {}
        for f in sc.facts:
            if "pair_id" in f:
                by_pair.setdefault(f["pair_id"], []).append(f)
        for members in by_pair.values():
            if len(members) == 2:
                a, b = members
                iou = shapely_iou(a["full_box"], b["full_box"])  # reference: shapely
                assert a["pair_iou"] == b["pair_iou"] == pytest.approx(iou, abs=1e-9)
                assert lo - 1e-9 <= iou <= hi + 1e-9
                seen += 1
    assert seen >= 8


def test_grid_holds_a_thousand_tiny_objects():
    """1000 objects of 2-8 px on 640x480 on a lattice: all placed, one per cell, on the pitch."""
    cfg = load_config(overrides=["objects.layout=grid", "objects.count=[1000,1000]", "objects.size=[2,8]",
                                 "objects.min_visible=0", "objects.min_area=0"])
    sc = render_scene(cfg, 0)
    info = sc.info["placement"]
    assert info["placed"] == 1000 and info["no_room"] == 0
    dropped = sum(sc.info["dropped"].values())
    assert len(sc.boxes) + dropped == 1000 and len(sc.boxes) > 950
    cells = {(f["grid_row"], f["grid_col"]) for f in sc.facts}
    assert len(cells) == len(sc.facts)
    p = info["pitch"]
    assert 640 // p * (480 // p) >= 1000


def test_grid_jitter_moves_centres_within_bound():
    """Each centre lies within jitter * pitch of its cell centre along each axis."""
    p = layout.grid(np.ones((12, 2)), 120, 90, pitch=30.0, jitter=0.25, rng=np.random.default_rng(4))
    rel = (p.centres - (0.5 * 30.0)) / 30.0  # lattice starts at x0 = y0 = 0 here
    assert np.all(np.abs(rel - np.round(rel)) <= 0.25 + 1e-12)
    assert not np.allclose(rel, np.round(rel))


def test_clusters_spread_is_the_requested_deviation():
    """One cluster with spread 5 px: offsets from the cluster centre have standard deviation ~5 (normal law)."""
    p = layout.clusters(np.ones((4000, 2)), 10_000, 10_000, clusters=(1, 1), spread=(5.0, 5.0),
                        rng=np.random.default_rng(7))
    sd = p.centres.std(axis=0)
    # common practice: the sample sd of n normal draws has relative error ~ 1/sqrt(2n) (~1.1 % here)
    assert np.all(np.abs(sd - 5.0) < 0.3)


def test_layout_keys_are_checked():
    """A bad layout name or max_iou is a config error naming the key."""
    with pytest.raises(ConfigError, match="objects.layout"):
        load_config(overrides=["objects.layout=stacked"])
    with pytest.raises(ConfigError, match="objects.max_iou"):
        load_config(overrides=["objects.max_iou=1.5"])
    with pytest.raises(ConfigError, match="objects.pair_iou"):
        load_config(overrides=["objects.pair_iou=[0, 0.5]"])


def test_cli_warns_on_stderr_and_succeeds(tmp_path):
    """`synthgen make` on an impossible request exits 0, warns once per process on stderr, writes the manifest."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    # filled objects only: the band of an outline-only 200 px shape can miss a 64 px canvas (then
    # nothing of it is drawn and the line would count it under min_area too)
    res = subprocess.run(
        [sys.executable, "-m", "synthgen", "make", "--out", str(tmp_path / "d"), "--count", "3", "--workers", "1",
         "--set", "canvas.width=64", "--set", "canvas.height=64", "--set", "objects.layout=separated",
         "--set", "objects.count=[100,100]", "--set", "objects.size=[200,200]", "--set", "objects.outline=0",
         "--quiet"],
        capture_output=True, text=True, env=env,
    )
    assert res.returncode == 0, res.stderr
    assert res.stderr.count(
        "synthgen: warning: 297 of 300 objects (99%) were not annotated: no_room 297 (objects.layout, objects.attempts)"
    ) == 1
    assert len(res.stderr.strip().splitlines()) == 1 and res.stdout.startswith("wrote 3 images")
    assert json.loads((tmp_path / "d" / "manifest.json").read_text())["counts"]["dropped"]["no_room"] == 3 * 99


def test_dials_give_identical_files_for_one_and_two_workers(tmp_path, pool_always):
    """Pairs, occluders, clutter and degradations: 1 worker and 2 workers write the same bytes (numpy.random: spawn keys)."""
    cfg = load_config(overrides=["count=4", "canvas.width=96", "canvas.height=64", "objects.layout=pairs",
                                 "objects.count=[4,6]", "objects.size=[6,20]", "objects.occlusion=[0.2,0.4]",
                                 "objects.occlusion_share=0.5", "clutter.count=[3,6]", "clutter.similar=0.5",
                                 "degrade.noise.p=0.5"])
    make_dataset(cfg, tmp_path / "one", workers=1)
    make_dataset(cfg, tmp_path / "two", workers=2)
    files = [json.loads((tmp_path / d / "manifest.json").read_text())["files"] for d in ("one", "two")]
    assert files[0] == files[1] and len(files[0]) == 5
