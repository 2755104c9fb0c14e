"""Instance masks: id PNGs and per-object RLE lines."""

import numpy as np
from PIL import Image
from pycocotools import mask as cocomask

from synthgen.formats import masks, rle
from tests._formats_helpers import build_coco, mark_ignored

IMAGES = [(40, 30, [((3, 2, 7, 5), 1), ((5, 3, 20, 25), 2), ((0, 0, 40, 1), 3)]), (40, 30, [])]


def test_png_is_uint16_with_ids_in_annotation_order(tmp_path):
    """The PNG is uint16; pixel value i marks the i-th annotation of the image, later ones on top."""
    coco = build_coco(IMAGES)
    masks.write_instance_pngs(coco, tmp_path)
    with Image.open(tmp_path / "000000.png") as im:
        assert im.mode == "I;16"
    ids = masks.read_instance_png(tmp_path / "000000.png")
    assert ids.dtype == np.uint16 and ids.shape == (30, 40)
    want = np.zeros((30, 40), np.uint16)
    want[2:5, 3:7] = 1
    want[3:25, 5:20] = 2  # drawn after the first, so it wins where they overlap
    want[0:1, 0:40] = 3
    np.testing.assert_array_equal(ids, want)


def test_png_of_an_empty_image_is_all_background(tmp_path):
    """An image without objects gives an all-zero id image."""
    masks.write_instance_pngs(build_coco(IMAGES), tmp_path)
    assert not masks.read_instance_png(tmp_path / "000001.png").any()


def test_rle_lines_decode_with_pycocotools_to_the_written_masks(tmp_path):
    """Each per-object RLE decodes with pycocotools.mask.decode to exactly the annotation's mask."""
    coco = build_coco(IMAGES)
    masks.write_mask_rles(coco, tmp_path / "masks.jsonl")
    lines = masks.read_mask_rles(tmp_path / "masks.jsonl")
    got = [m for line in lines for m in line["masks"]]
    assert [m["id"] for m in got] == [a["id"] for a in coco["annotations"]]
    for m, a in zip(got, coco["annotations"]):
        x0, y0, x1, y1 = a["synthgen"]["pixel_box"]
        want = np.zeros((30, 40), np.uint8)
        want[int(y0) : int(y1), int(x0) : int(x1)] = 1
        ref = {"size": m["size"], "counts": m["counts"].encode("ascii")}
        # REFERENCE.md: COCO JSON -- pycocotools reads column-major RLE with bytes counts
        np.testing.assert_array_equal(cocomask.decode(ref), want)
        # REFERENCE.md: COCO JSON -- for a binary mask, the RLE area is the annotation's area
        assert float(cocomask.area(ref)) == a["area"]


def test_polygon_segmentations_are_filled(tmp_path):
    """A polygon segmentation (another tool's file) is filled into the mask."""
    coco = build_coco([(20, 20, [((2, 2, 10, 10), 1)])])
    coco["annotations"][0]["segmentation"] = [[2, 2, 10, 2, 10, 10, 2, 10]]
    ids = masks.instance_id_image(coco["annotations"], 20, 20)
    assert ids[5, 5] == 1 and ids[15, 15] == 0
    assert rle.area(rle.encode(ids == 1)) == int((ids == 1).sum())


def test_ignore_regions_get_the_ignore_value_and_objects_keep_their_numbers(tmp_path):
    """An ignore region (iscrowd 1) is painted 65535; the objects are numbered 1, 2, ... among themselves."""
    coco = mark_ignored(build_coco(IMAGES), {2})
    masks.write_instance_pngs(coco, tmp_path)
    ids = masks.read_instance_png(tmp_path / "000000.png")
    want = np.zeros((30, 40), np.uint16)
    want[2:5, 3:7] = 1
    want[3:25, 5:20] = masks.IGNORE_ID  # drawn after the first object, so it wins where they overlap
    want[0:1, 0:40] = 2
    np.testing.assert_array_equal(ids, want)
    masks.write_mask_rles(coco, tmp_path / "masks.jsonl")
    (line, _) = masks.read_mask_rles(tmp_path / "masks.jsonl")
    assert [m["iscrowd"] for m in line["masks"]] == [0, 1, 0]
