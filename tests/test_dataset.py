"""Datasets on disk: COCO JSON that pycocotools accepts, determinism, refusal to clobber."""

from __future__ import annotations

import contextlib
import io
import json
import shutil

import numpy as np
import pytest

from synthgen.errors import UserError
from synthgen.formats.images import read_image
from synthgen.run.make import make_dataset
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
    crowd = 0
    for a in coco["annotations"]:
        # an ignore region (a dropped object that still shows) is iscrowd 1, says why it was dropped
        # and is boxed by its pixel box (the box of its segmentation); an object by its visible box
        crowd += a["iscrowd"]
        assert a["iscrowd"] == ("ignored" in a["synthgen"]) and a["area"] > 0
        x0, y0, x1, y1 = a["synthgen"]["pixel_box" if a["iscrowd"] else "visible_box"]
        assert a["bbox"] == pytest.approx([x0, y0, x1 - x0, y1 - y0], abs=1e-9)
    assert crowd >= 1  # the small dataset holds an ignore region, so both rules are checked


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


def test_two_workers_same_bytes(tmp_path, small_config, small_dataset, pool_always):
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


def test_overwrite_refuses_a_file_it_did_not_write_and_removes_nothing(tmp_path, small_config, small_dataset):
    """--overwrite names a user's file inside images/ (exit 2 from the CLI) and changes nothing in the directory."""
    out = tmp_path / "ds"
    shutil.copytree(small_dataset[0], out)
    (out / "images" / "my_photo.jpg").write_bytes(b"mine")
    before = _tree(out)
    with pytest.raises(UserError, match=r"my_photo\.jpg: this file was not written by the earlier run"):
        make_dataset(small_config, out, overwrite=True, workers=1)
    assert _tree(out) == before


def test_overwrite_refuses_images_without_a_manifest_or_journal(tmp_path, small_config):
    """A folder of images no synthgen run listed is not synthgen's to delete."""
    out = tmp_path / "ds"
    (out / "images").mkdir(parents=True)
    (out / "images" / "000000.png").write_bytes(b"someone else's")
    with pytest.raises(UserError, match=r"000000\.png: this file was not written"):
        make_dataset(small_config, out, overwrite=True, workers=1)
    assert (out / "images" / "000000.png").read_bytes() == b"someone else's"


def test_overwrite_removes_what_the_earlier_run_and_export_wrote(tmp_path, small_config):
    """Files the earlier run listed, and the format files export derived from its images, are replaced."""
    from synthgen.config import load_config
    from synthgen.formats import export

    out = tmp_path / "ds"
    make_dataset(load_config(overrides=["count=3", "canvas.width=32", "canvas.height=32"]), out, workers=1,
                 formats=("coco", "tokens"))
    export(out, ["voc", "yolo", "masks"], split={"train": 0.5, "val": 0.5})
    (out / "notes.txt").write_text("mine")  # beside the dataset, not in a folder synthgen replaces
    make_dataset(small_config, out, overwrite=True, workers=1)
    assert sorted(p.name for p in out.iterdir()) == ["annotations.json", "images", "manifest.json", "notes.txt"]
    assert len(list((out / "images").iterdir())) == small_config.count


def test_overwrite_of_an_unfinished_run_uses_its_journal(tmp_path, small_config):
    """An interrupted run (journal, no manifest) is replaced: its journal lists its images."""
    from synthgen.config import load_config
    from synthgen.run.journal import Shard, journal_path
    from synthgen.run.outdir import prepare_output
    from synthgen.run.render import render_block

    other = load_config(overrides=["count=4", "canvas.width=32", "canvas.height=32"])
    out = tmp_path / "ds"
    prepare_output(out, other)
    journal_path(out, Shard()).write_bytes(b"".join(render_block(other, range(2), out)))
    make_dataset(small_config, out, overwrite=True, workers=1)
    assert _tree(out).keys() == _tree(make_dataset(small_config, tmp_path / "ref", workers=1).out).keys()


def test_three_workers_same_bytes(tmp_path, small_config, small_dataset, pool_always):
    """More workers than cores still give the same files (blocks finish out of order)."""
    make_dataset(small_config, tmp_path / "w3", workers=3)
    assert _tree(tmp_path / "w3") == _tree(small_dataset[0])


def _valid_overrides():
    """A hypothesis strategy of --set overrides that make a valid tiny config."""
    from hypothesis import strategies as st

    from synthgen.scene.backgrounds import BACKGROUND_KINDS
    from synthgen.scene.shapes import FILLS, KINDS

    def pair(lo, hi, *, integer=False):
        elem = st.integers(lo, hi) if integer else st.floats(lo, hi, allow_nan=False)
        return st.tuples(elem, elem).map(sorted)

    def names(pool):
        return st.lists(st.sampled_from(pool), min_size=1, max_size=len(pool), unique=True)

    def toml(v):
        return json.dumps(list(v) if isinstance(v, (list, tuple)) else v)

    fields = {
        "canvas.width": st.integers(1, 48),
        "canvas.height": st.integers(1, 48),
        "background.kind": st.sampled_from(BACKGROUND_KINDS),
        "objects.count": pair(0, 8, integer=True),
        "objects.size": pair(0.5, 80.0),
        "objects.size_law": st.sampled_from(["uniform", "log-uniform"]),
        "objects.aspect": pair(0.2, 5.0),
        "objects.rotate": st.booleans(),
        "objects.shapes": names(list(KINDS)),
        "objects.fills": names(list(FILLS)),
        "objects.outline": st.floats(0, 1),
        "objects.min_visible": st.floats(0, 1),
        "objects.min_contrast": st.floats(0, 1),
        "objects.box": st.sampled_from(["visible", "full"]),
        "render.samples": st.integers(1, 8),
        "degrade.noise.p": st.floats(0, 1),
        "degrade.blur.p": st.floats(0, 1),
        "degrade.jpeg.p": st.floats(0, 1),
        "output.image_format": st.sampled_from(["png", "jpeg"]),
        "seed": st.integers(0, 2**63 - 1),
    }
    def fit(d):  # at most one object per pixel (objects.min_area = 1): more is refused up front
        room = d["canvas.width"] * d["canvas.height"]
        return dict(d, **{"objects.count": [min(c, room) for c in d["objects.count"]]})

    return st.fixed_dictionaries(fields).map(lambda d: ["count=2"] + [f"{k}={toml(v)}" for k, v in fit(d).items()])


def test_any_valid_config_makes_a_dataset_pycocotools_accepts():
    """Random valid configs: make of 2 tiny images never crashes; pycocotools loads it and loadRes of the gt works."""
    import tempfile
    from pathlib import Path

    from hypothesis import HealthCheck, given, settings

    from synthgen.config import load_config

    @settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(_valid_overrides())
    def check(overrides):
        cfg = load_config(overrides=overrides)
        with tempfile.TemporaryDirectory() as d:
            make_dataset(cfg, Path(d) / "ds", workers=1)
            gt = coco_api(Path(d) / "ds" / "annotations.json")  # pycocotools' COCO() accepts the file
            assert len(gt.getImgIds()) == 2
            anns = gt.dataset["annotations"]
            if anns:  # pycocotools' loadRes cannot take an empty list
                dets = [{"image_id": a["image_id"], "category_id": a["category_id"], "bbox": a["bbox"],
                         "score": 1.0} for a in anns]
                with contextlib.redirect_stdout(io.StringIO()):
                    res = gt.loadRes(dets)
                assert len(res.getAnnIds()) == len(anns)

    check()


def test_written_files_and_folders_get_the_usual_permissions(tmp_path, small_config):
    """Annotations, manifest and format folders are readable by others under umask 022 (like plain writes)."""
    import os

    old = os.umask(0o022)
    try:
        make_dataset(small_config, tmp_path / "d", workers=1, formats=("coco", "voc"))
    finally:
        os.umask(old)
    d = tmp_path / "d"
    for path in (d / "annotations.json", d / "manifest.json", next((d / "images").iterdir()), next((d / "voc").iterdir())):
        assert path.stat().st_mode & 0o777 == 0o644, path
    assert (d / "voc").stat().st_mode & 0o777 == 0o755


def test_resume_of_a_dataset_with_formats_repairs_them(tmp_path, small_config):
    """--resume on a finished dataset with VOC files keeps them, and repairs a damaged one."""
    out = tmp_path / "d"
    make_dataset(small_config, out, workers=1, formats=("coco", "voc"))
    before = _tree(out)
    make_dataset(small_config, out, workers=1, formats=("coco", "voc"), resume=True)
    assert _tree(out) == before
    (out / "voc" / "000001.xml").write_text("junk")
    make_dataset(small_config, out, workers=1, formats=("coco", "voc"), resume=True)
    assert _tree(out) == before


def test_resume_with_other_formats_is_refused(tmp_path, small_config):
    """Asking a finished dataset's resume for other formats names both and points to export."""
    out = tmp_path / "d"
    make_dataset(small_config, out, workers=1, formats=("coco", "voc"))
    with pytest.raises(UserError, match="written with formats coco,voc .*'synthgen export'"):
        make_dataset(small_config, out, workers=1, resume=True)


def test_manifest_counts_objects_and_ignore_regions_apart(tmp_path):
    """counts.objects are the iscrowd-0 annotations, counts.ignored the iscrowd-1 ones; shards merge to the same."""
    from synthgen.config import load_config
    from synthgen.run.journal import Shard
    from synthgen.run.merge import merge_shards

    cfg = load_config("configs/tiny.toml", ["count=3", "objects.count=[300,400]"])
    summary = make_dataset(cfg, tmp_path / "one", workers=1)
    coco = json.loads((tmp_path / "one" / "annotations.json").read_text())
    counts = json.loads((tmp_path / "one" / "manifest.json").read_text())["counts"]
    crowd = sum(a["iscrowd"] for a in coco["annotations"])
    assert crowd > 0 and counts["ignored"] == summary.ignored == crowd
    assert counts["objects"] == summary.objects == len(coco["annotations"]) - crowd
    assert crowd == sum(sum(im["synthgen"]["ignored"].values()) for im in coco["images"])
    assert crowd <= counts["dropped"]["min_visible"] + counts["dropped"]["min_area"]
    for im in coco["images"]:  # draw order, bottom first, objects and ignore regions together
        zs = [a["synthgen"]["z"] for a in coco["annotations"] if a["image_id"] == im["id"]]
        assert zs == sorted(zs)
    for k in range(2):
        make_dataset(cfg, tmp_path / "parts", workers=1, shard=Shard(k, 2))
    merged = merge_shards([tmp_path / "parts"], tmp_path / "merged")
    assert (merged.objects, merged.ignored) == (summary.objects, summary.ignored)
    assert (tmp_path / "merged" / "manifest.json").read_bytes() == (tmp_path / "one" / "manifest.json").read_bytes()
