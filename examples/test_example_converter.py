"""Example: testing your own COCO-to-YOLO converter on a dataset with exact boxes."""

import json

import pytest


def my_coco_to_yolo(coco):
    """The code under test: {file_name: [(class, xc, yc, w, h), ...]} from a COCO dict."""
    cats = {c["id"]: i for i, c in enumerate(sorted(coco["categories"], key=lambda c: c["id"]))}
    images = {im["id"]: im for im in coco["images"]}
    out = {im["file_name"]: [] for im in coco["images"]}
    for a in coco["annotations"]:
        im = images[a["image_id"]]
        x, y, w, h = a["bbox"]
        out[im["file_name"]].append(
            (cats[a["category_id"]], (x + w / 2) / im["width"], (y + h / 2) / im["height"], w / im["width"], h / im["height"])
        )
    return out


@pytest.mark.synth(count=(2, 6), images=3, seed=4)
def test_centres_land_inside_the_image(synth_dataset):
    """Every converted centre and size is normalized to [0, 1] (YOLO txt convention)."""
    coco = json.loads((synth_dataset / "annotations.json").read_text())
    lines = my_coco_to_yolo(coco)
    assert sum(len(v) for v in lines.values()) == len(coco["annotations"])
    for rows in lines.values():
        for _, xc, yc, w, h in rows:
            assert 0 <= xc <= 1 and 0 <= yc <= 1 and 0 < w <= 1 and 0 < h <= 1


@pytest.mark.synth(count=(2, 6), images=3, seed=4)
def test_back_conversion_recovers_the_boxes(synth_dataset):
    """Converting back gives the original COCO boxes to 1e-9 px."""
    coco = json.loads((synth_dataset / "annotations.json").read_text())
    lines = my_coco_to_yolo(coco)
    im = coco["images"][0]
    anns = [a for a in coco["annotations"] if a["image_id"] == im["id"]]
    for a, (_, xc, yc, w, h) in zip(anns, lines[im["file_name"]]):
        W, H = im["width"], im["height"]
        back = [xc * W - w * W / 2, yc * H - h * H / 2, w * W, h * H]
        assert back == pytest.approx(a["bbox"], abs=1e-9)
