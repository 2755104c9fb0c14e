"""YOLO txt writer and reader."""

import numpy as np
import pytest

from synthgen.errors import InputFileError
from synthgen.formats import yolo
from synthgen.formats.coco import xyxy_from_bbox
from tests._formats_helpers import build_coco, mark_ignored


def test_lines_follow_the_normalization_rule(tmp_path):
    """Each line is class, (x + w/2)/W, (y + h/2)/H, w/W, h/H to 1e-6."""
    coco = build_coco([(64, 48, [((5.25, 4.5, 12.75, 20.0), 1), ((20, 0, 64, 48), 3)])])
    yolo.write_yolo(coco, tmp_path)
    lines = (tmp_path / "000000.txt").read_text().splitlines()
    assert len(lines) == 2
    W, H = 64, 48
    for line, a in zip(lines, coco["annotations"]):
        cls, xc, yc, wn, hn = line.split()
        x, y, w, h = a["bbox"]
        # REFERENCE.md: YOLO txt -- derived: xc = (x + w/2)/W, yc = (y + h/2)/H, wn = w/W, hn = h/H
        assert float(xc) == pytest.approx((x + w / 2) / W, abs=1e-6)
        assert float(yc) == pytest.approx((y + h / 2) / H, abs=1e-6)
        assert float(wn) == pytest.approx(w / W, abs=1e-6)
        assert float(hn) == pytest.approx(h / H, abs=1e-6)
    # REFERENCE.md: YOLO txt -- class index 0-based (category ids 1 and 3 -> lines 0 and 2 of labels.txt)
    assert [ln.split()[0] for ln in lines] == ["0", "2"]


def test_labels_file_lists_categories_by_id(tmp_path):
    """labels.txt holds the category names in id order, one per line."""
    coco = build_coco([(10, 10, [])], categories=(3, 1, 2))
    yolo.write_yolo(coco, tmp_path)
    assert (tmp_path / "labels.txt").read_text() == "rectangle\nellipse\ntriangle\n"
    assert yolo.read_labels(tmp_path / "labels.txt") == ["rectangle", "ellipse", "triangle"]


def test_image_without_objects_gets_an_empty_file(tmp_path):
    """An image with no objects has an empty .txt file."""
    yolo.write_yolo(build_coco([(10, 10, [])]), tmp_path)
    # REFERENCE.md: YOLO txt -- an image with no objects gets an empty file
    assert (tmp_path / "000000.txt").read_bytes() == b""
    classes, boxes = yolo.read_yolo(tmp_path / "000000.txt", 10, 10)
    assert classes.shape == (0,) and boxes.shape == (0, 4)


def test_round_trip_coco_yolo_reader(tmp_path):
    """COCO -> YOLO -> reader gives back the boxes to the file's 8 decimals and the classes."""
    rng = np.random.default_rng(4)
    objects = []
    for _ in range(40):
        x0, y0 = rng.random(2) * [540, 380]
        w, h = 0.5 + rng.random(2) * 100
        objects.append(((x0, y0, min(x0 + w, 640), min(y0 + h, 480)), int(rng.integers(1, 4))))
    coco = build_coco([(640, 480, objects)])
    yolo.write_yolo(coco, tmp_path)
    classes, boxes = yolo.read_yolo(tmp_path / "000000.txt", 640, 480)
    want = xyxy_from_bbox([a["bbox"] for a in coco["annotations"]])
    # 8 decimals of a fraction of 640 px: at most 640 * 5e-9 ~ 3.2e-6 px per value, twice for the edges
    np.testing.assert_allclose(boxes, want, rtol=0, atol=1e-5)
    assert classes.tolist() == [a["category_id"] - 1 for a in coco["annotations"]]


def test_normalize_and_denormalize_are_inverse():
    """denormalize_boxes inverts normalize_boxes."""
    boxes = np.array([[1.5, 2.0, 30.25, 7.0], [0, 0, 64, 48]])
    np.testing.assert_allclose(yolo.denormalize_boxes(yolo.normalize_boxes(boxes, 64, 48), 64, 48), boxes, atol=1e-12)


def test_reader_names_file_and_line_of_a_bad_value(tmp_path):
    """A non-numeric value raises InputFileError naming the file and the line."""
    path = tmp_path / "x.txt"
    path.write_text("0 0.5 0.5 0.1 0.1\n1 0.5 abc 0.1 0.1\n")
    with pytest.raises(InputFileError, match=r"x\.txt: line 2: xc yc w h must be numbers"):
        yolo.read_yolo(path)


def test_reader_rejects_a_file_that_is_not_utf8(tmp_path):
    """A label file in another encoding raises InputFileError naming the file and the byte."""
    path = tmp_path / "a.txt"
    path.write_bytes(b"0 0.5 0.5 0.1 0.1\n\xe9\n")
    with pytest.raises(InputFileError, match=r"a.txt: cannot be read as UTF-8 text \(invalid .* at byte 18\)"):
        yolo.read_yolo(path)


def test_ignore_regions_are_left_out(tmp_path):
    """YOLO txt has no ignore flag (REFERENCE.md: YOLO txt), so an ignore region (iscrowd 1) gets no line."""
    coco = mark_ignored(build_coco([(64, 48, [((5, 4, 12, 20), 1), ((20, 0, 64, 48), 3), ((1, 1, 3, 3), 2)])]), {2})
    yolo.write_yolo(coco, tmp_path)
    classes, boxes = yolo.read_yolo(tmp_path / "000000.txt", 64, 48)
    assert classes.tolist() == [0, 1]
    np.testing.assert_allclose(boxes, [[5, 4, 12, 20], [1, 1, 3, 3]], atol=1e-6)
