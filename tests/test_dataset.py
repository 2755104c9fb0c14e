"""Datasets on disk: COCO JSON that pycocotools accepts, determinism, refusal to clobber."""

from __future__ import annotations

import contextlib
import io
import json

import numpy as np
import pytest

from synthgen.dataset import make_dataset
from synthgen.errors import UserError
from synthgen.formats.images import read_image
from synthgen.scene import render_scene


def coco_api(path):
    """pycocotools' COCO loaded quietly (it prints progress to stdout)."""
    from pycocotools.coco import COCO

    with contextlib.redirect_stdout(io.StringIO()):
        return COCO(str(path))


def test_pycocotools_loads_and_gt_as_predictions_scores_one(small_dataset):
    """Ground truth fed back as predictions gives AP 1.0 (REFERENCE.md: COCO-style AP)."""
    from pycocotools.cocoeval import COCOeval

    out, _ = small_dataset
    gt = coco_api(out / "annotations.json")
    dets = [
        {"image_id": a["image_id"], "category_id": a["category_id"], "bbox": list(a["bbox"]), "score": 1.0}
        for a in gt.dataset["annotations"]
    ]
    with contextlib.redirect_stdout(io.StringIO()):
        ev = COCOeval(gt, gt.loadRes(dets), "bbox")
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
    # AP at every IoU and size range, and AR@100, are 1; AR@1 and AR@10 may be lower because they
    # cap detections per image and category (REFERENCE.md: maxDets applied per image and category).
    ap = [s for s in ev.stats[:6] if s != -1]
    assert len(ap) >= 4
    assert np.allclose(ap + [ev.stats[8]], 1.0, atol=1e-9)


def test_coco_records_follow_the_format(small_dataset):
    """Ids start at 1, bbox is [x, y, w, h], iscrowd is present (REFERENCE.md: COCO JSON pitfalls)."""
    out, cfg = small_dataset
    coco = json.loads((out / "annotations.json").read_text())
    assert [im["id"] for im in coco["images"]] == list(range(1, cfg.count + 1))
    assert [a["id"] for a in coco["annotations"]] == list(range(1, len(coco["annotations"]) + 1))
    for a in coco["annotations"]:
        x0, y0, x1, y1 = a["synthgen"]["visible_box"]
        assert a["bbox"] == pytest.approx([x0, y0, x1 - x0, y1 - y0], abs=1e-9)
        assert a["iscrowd"] == 0 and a["area"] > 0


def test_segmentation_decodes_to_the_pixel_box(small_dataset):
    """pycocotools decodes each RLE to a mask whose regionprops box is the pixel box (scikit-image)."""
    from pycocotools import mask as mask_utils
    from skimage.measure import regionprops

    out, _ = small_dataset
    gt = coco_api(out / "annotations.json")
    for a in gt.dataset["annotations"]:
        m = mask_utils.decode(a["segmentation"])
        (region,) = regionprops(m.astype(np.uint8))
        r0, c0, r1, c1 = region.bbox  # skimage: (min_row, min_col, max_row, max_col), half-open
        assert [c0, r0, c1, r1] == a["synthgen"]["pixel_box"]
        if a["synthgen"]["visible_fraction"] == 1.0:
            full = a["synthgen"]["full_box"]
            assert np.all(np.abs(np.array([c0, r0, c1, r1]) - np.array(full)) <= 1.0)


def test_images_decode_to_the_rendered_pixels(small_dataset):
    """The PNG files hold exactly the composed images (lossless)."""
    out, cfg = small_dataset
    for k in (0, cfg.count - 1):
        assert np.array_equal(read_image(out / "images" / f"{k:06d}.png"), render_scene(cfg, k).image)


def test_manifest_lists_every_file_digest(small_dataset):
    """The manifest's sha256 digests match the files, and it records seed and versions."""
    import hashlib

    out, cfg = small_dataset
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["seed"] == cfg.seed and "numpy" in manifest["versions"]
    assert len(manifest["files"]) == cfg.count + 1
    for name, digest in manifest["files"].items():
        assert hashlib.sha256((out / name).read_bytes()).hexdigest() == digest


def _tree(path):
    return {p.relative_to(path).as_posix(): p.read_bytes() for p in sorted(path.rglob("*")) if p.is_file()}


def test_same_config_same_bytes(tmp_path, small_config, small_dataset):
    """A second run of the same config and seed gives byte-identical files."""
    make_dataset(small_config, tmp_path / "again", workers=1)
    assert _tree(tmp_path / "again") == _tree(small_dataset[0])


def test_two_workers_same_bytes(tmp_path, small_config, small_dataset):
    """The output does not depend on the number of worker processes."""
    make_dataset(small_config, tmp_path / "w2", workers=2)
    assert _tree(tmp_path / "w2") == _tree(small_dataset[0])


def test_non_empty_output_is_refused_untouched(tmp_path, small_config):
    """A non-empty directory is refused without --overwrite and nothing in it changes."""
    out = tmp_path / "full"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(UserError, match="not empty"):
        make_dataset(small_config, out)
    assert _tree(out) == {"keep.txt": b"mine"}


def test_overwrite_replaces_an_earlier_dataset(tmp_path, small_config):
    """--overwrite replaces a previous dataset's files and leaves foreign files alone."""
    from synthgen.config import load_config

    out = tmp_path / "ds"
    make_dataset(load_config(overrides=["count=3", "canvas.width=32", "canvas.height=32"]), out, workers=1)
    (out / "notes.txt").write_text("mine")
    make_dataset(small_config, out, overwrite=True, workers=1)
    assert len(list((out / "images").iterdir())) == small_config.count
    assert (out / "notes.txt").read_text() == "mine"
