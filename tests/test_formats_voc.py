"""Pascal VOC XML writer and reader."""

import xml.etree.ElementTree as ET

import numpy as np
import pytest

from synthgen.errors import InputFileError
from synthgen.formats import voc
from synthgen.formats.coco import xyxy_from_bbox
from tests._formats_helpers import build_coco, mark_ignored


def _write(tmp_path, images):
    coco = build_coco(images)
    voc.write_voc(coco, tmp_path)
    return coco


def test_pixel_aligned_box_gives_xmin_x_plus_1_and_xmax_x_plus_w(tmp_path):
    """A pixel-aligned COCO box [x, y, w, h] is VOC xmin=x+1, ymin=y+1, xmax=x+w, ymax=y+h."""
    _write(tmp_path, [(40, 30, [((3, 2, 7, 5), 1), ((10, 10, 30, 25), 2)])])
    root = ET.parse(tmp_path / "000000.xml").getroot()  # the standard library's XML parser
    got = [[int(o.find(f"bndbox/{t}").text) for t in ("xmin", "ymin", "xmax", "ymax")] for o in root.iter("object")]
    # REFERENCE.md: Pascal VOC -- derived: xmin = x + 1, ymin = y + 1, xmax = x + w, ymax = y + h
    # COCO [3, 2, 4, 3] and [10, 10, 20, 15]
    assert got == [[3 + 1, 2 + 1, 3 + 4, 2 + 3], [10 + 1, 10 + 1, 10 + 20, 10 + 15]]


def test_devkit_width_is_xmax_minus_xmin_plus_1(tmp_path):
    """The devkit's width xmax - xmin + 1 equals the box width in pixels."""
    _write(tmp_path, [(40, 30, [((0, 0, 1, 1), 1), ((0, 0, 40, 30), 2)])])
    root = ET.parse(tmp_path / "000000.xml").getroot()
    widths = [int(o.find("bndbox/xmax").text) - int(o.find("bndbox/xmin").text) + 1 for o in root.iter("object")]
    # REFERENCE.md: Pascal VOC -- the top-left pixel is (1, 1); width = xmax - xmin + 1
    assert widths == [1, 40]
    first = root.find("object/bndbox")
    assert (first.find("xmin").text, first.find("ymin").text) == ("1", "1")


def test_document_has_the_voc_fields(tmp_path):
    """filename, size/{width,height,depth} and per object name/pose/truncated/occluded/difficult are present."""
    _write(tmp_path, [(40, 30, [((3, 2, 7, 5), 1)])])
    root = ET.parse(tmp_path / "000000.xml").getroot()
    # REFERENCE.md: Pascal VOC -- annotation/{filename, size/{width, height, depth}, object*}
    assert root.tag == "annotation"
    assert root.find("filename").text == "000000.png"
    assert [root.find(f"size/{t}").text for t in ("width", "height", "depth")] == ["40", "30", "3"]
    obj = root.find("object")
    assert [obj.find(t).text for t in ("name", "pose", "truncated", "occluded", "difficult")] == [
        "rectangle",
        "Unspecified",
        "0",
        "0",
        "0",
    ]


def test_flags_come_from_the_facts(tmp_path):
    """truncated follows synthgen.truncated and occluded follows visible_fraction < 1."""
    coco = build_coco([(40, 30, [((3, 2, 7, 5), 1), ((10, 10, 20, 20), 2)])])
    coco["annotations"][0]["synthgen"]["truncated"] = True
    coco["annotations"][1]["synthgen"]["visible_fraction"] = 0.5
    voc.write_voc(coco, tmp_path)
    doc = voc.read_voc(tmp_path / "000000.xml")
    assert doc["truncated"].tolist() == [True, False]
    assert doc["occluded"].tolist() == [False, True]


def test_subpixel_box_is_written_as_its_pixel_box(tmp_path):
    """A sub-pixel box is written from its pixel box (pixels it covers), 1-based inclusive."""
    _write(tmp_path, [(40, 30, [((5.25, 4.5, 12.75, 20.0), 1)])])
    doc = voc.read_voc(tmp_path / "000000.xml")
    # covered pixels: columns 5..12, rows 4..19 -> VOC 6..13, 5..20
    assert doc["boxes"].tolist() == [[5.0, 4.0, 13.0, 20.0]]


def test_round_trip_coco_voc_reader(tmp_path):
    """COCO -> VOC -> reader gives back each pixel box and category name."""
    rng = np.random.default_rng(2)
    objects = []
    for _ in range(30):
        x0, y0 = rng.integers(0, 60, 2)
        w, h = rng.integers(1, 40, 2)
        objects.append(((x0, y0, x0 + w, y0 + h), int(rng.integers(1, 4))))
    coco = _write(tmp_path, [(100, 100, objects)])
    doc = voc.read_voc(tmp_path / "000000.xml")
    np.testing.assert_array_equal(doc["boxes"], xyxy_from_bbox([a["bbox"] for a in coco["annotations"]]))
    names = {c["id"]: c["name"] for c in coco["categories"]}
    assert doc["names"] == [names[a["category_id"]] for a in coco["annotations"]]


def test_image_without_objects_has_no_object_elements(tmp_path):
    """An image without objects gives a VOC file with no <object> and an empty box array."""
    _write(tmp_path, [(40, 30, [])])
    doc = voc.read_voc(tmp_path / "000000.xml")
    assert doc["boxes"].shape == (0, 4)
    assert doc["names"] == []


def test_reader_names_file_and_object_for_a_non_numeric_coordinate(tmp_path):
    """A non-numeric <xmax> raises InputFileError naming the file and the object."""
    _write(tmp_path, [(40, 30, [((3, 2, 7, 5), 1), ((10, 10, 20, 20), 2)])])
    path = tmp_path / "000000.xml"
    text = path.read_text().replace("<xmax>20</xmax>", "<xmax>twenty</xmax>")
    path.write_text(text)
    with pytest.raises(InputFileError, match=r"000000\.xml: object\[1\] bndbox: <xmax> must be a number"):
        voc.read_voc(path)


def test_reader_rejects_malformed_xml(tmp_path):
    """Broken XML raises InputFileError naming the file."""
    path = tmp_path / "bad.xml"
    path.write_text("<annotation><size>")
    with pytest.raises(InputFileError, match=r"bad\.xml: must be well-formed XML"):
        voc.read_voc(path)


def test_ignore_regions_are_difficult_objects(tmp_path):
    """An ignore region (COCO iscrowd 1) is written with difficult 1, which VOC evaluation leaves out.

    REFERENCE.md: Pascal VOC XML -- difficult objects are ignored in evaluation.
    """
    coco = mark_ignored(build_coco([(40, 30, [((3, 2, 7, 5), 1), ((10, 10, 30, 25), 2)])]), {2})
    voc.write_voc(coco, tmp_path)
    doc = voc.read_voc(tmp_path / "000000.xml")
    assert doc["difficult"].tolist() == [False, True] and doc["names"] == ["rectangle", "ellipse"]
