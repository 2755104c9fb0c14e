"""COCO JSON writer, reader and box conversions."""

import os

import numpy as np
import orjson
import pytest
from pycocotools.coco import COCO

from synthgen.errors import InputFileError
from synthgen.formats import coco as cf
from synthgen.formats import rle


def _tiny():
    m = np.zeros((6, 8), bool)
    m[2:5, 3:7] = True
    return {
        "images": [{"id": 1, "file_name": "000000.png", "width": 8, "height": 6}],
        "annotations": [
            {
                "id": 1,
                "image_id": 1,
                "category_id": 1,
                "bbox": [3.0, 2.0, 4.0, 3.0],
                "area": 12.0,
                "iscrowd": 0,
                "segmentation": rle.encode(m),
            }
        ],
        "categories": [{"id": 1, "name": "rectangle", "supercategory": "shape"}],
    }


def test_bbox_from_xyxy_matches_the_coco_worked_example():
    """Rows 2..4, columns 3..6 give COCO bbox [3, 2, 4, 3]."""
    # REFERENCE.md: COCO JSON -- "rows 2..4 and columns 3..6 has box [3, 2, 4, 3] and area 12"
    assert cf.bbox_from_xyxy([[3, 2, 7, 5]]) == [[3.0, 2.0, 4.0, 3.0]]


def test_first_pixel_is_bbox_0_0_1_1():
    """The first pixel's xyxy box [0, 0, 1, 1] is COCO bbox [0, 0, 1, 1]."""
    # REFERENCE.md: COCO JSON -- bbox [0, 0, 1, 1] encloses exactly the first pixel
    assert cf.bbox_from_xyxy([[0, 0, 1, 1]]) == [[0.0, 0.0, 1.0, 1.0]]


def test_bbox_round_trip():
    """xyxy_from_bbox inverts bbox_from_xyxy."""
    rng = np.random.default_rng(1)
    xy = rng.random((20, 2)) * 100
    boxes = np.hstack([xy, xy + 1 + rng.random((20, 2)) * 50])
    np.testing.assert_allclose(cf.xyxy_from_bbox(cf.bbox_from_xyxy(boxes)), boxes, rtol=0, atol=1e-12)


def test_empty_box_arrays():
    """Empty box arrays convert to empty results."""
    assert cf.bbox_from_xyxy(np.zeros((0, 4))) == []
    assert cf.xyxy_from_bbox([]).shape == (0, 4)


def test_written_file_loads_in_pycocotools(tmp_path):
    """pycocotools' COCO class loads what write_coco writes, mask and area intact."""
    path = tmp_path / "annotations.json"
    cf.write_coco(path, _tiny())
    api = COCO(str(path))  # REFERENCE.md: COCO JSON (pycocotools coco.py)
    ann = api.loadAnns([1])[0]
    assert api.annToMask(ann).sum() == 12
    assert ann["bbox"] == [3.0, 2.0, 4.0, 3.0]


def test_write_leaves_no_temporary_file(tmp_path):
    """write_coco leaves only the final file in the directory."""
    cf.write_coco(tmp_path / "a.json", _tiny())
    assert os.listdir(tmp_path) == ["a.json"]


def test_write_replaces_existing_file(tmp_path):
    """write_coco replaces an existing file whole."""
    path = tmp_path / "a.json"
    path.write_text("x" * 100000)
    cf.write_coco(path, _tiny())
    assert cf.read_coco(path) == _tiny()


def test_numpy_values_are_written_as_numbers(tmp_path):
    """numpy scalars and arrays are written as plain JSON numbers."""
    coco = _tiny()
    coco["annotations"][0]["area"] = np.float64(12.0)
    coco["annotations"][0]["bbox"] = np.array([3.0, 2.0, 4.0, 3.0])
    cf.write_coco(tmp_path / "a.json", coco)
    assert cf.read_coco(tmp_path / "a.json") == _tiny()


def test_read_rejects_malformed_json_naming_the_file(tmp_path):
    """Malformed JSON raises InputFileError naming the file and the place."""
    path = tmp_path / "broken.json"
    path.write_bytes(b'{"images": [')
    with pytest.raises(InputFileError, match=r"broken\.json: is not valid JSON at line 1"):
        cf.read_coco(path)


def test_read_rejects_a_bad_bbox_naming_the_record(tmp_path):
    """A bbox of 3 numbers raises InputFileError naming the annotation."""
    coco = _tiny()
    coco["annotations"][0]["bbox"] = [1, 2, 3]
    path = tmp_path / "a.json"
    path.write_bytes(orjson.dumps(coco))
    with pytest.raises(InputFileError, match=r"a\.json: annotations\[0\] \(id 1\): 'bbox' must be a list of 4"):
        cf.read_coco(path)


def test_read_rejects_missing_lists(tmp_path):
    """A file without 'categories' raises InputFileError naming the key."""
    coco = _tiny()
    del coco["categories"]
    path = tmp_path / "a.json"
    path.write_bytes(orjson.dumps(coco))
    with pytest.raises(InputFileError, match="'categories' must be a list"):
        cf.read_coco(path)


def test_read_missing_file(tmp_path):
    """A missing file raises InputFileError naming it."""
    with pytest.raises(InputFileError, match="nothere.json: cannot be read"):
        cf.read_coco(tmp_path / "nothere.json")


def _plain_file_mode() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def test_written_file_has_the_mode_open_would_give(tmp_path):
    """The atomic write's file is readable by others as a plain write would be (not tempfile's 0600)."""
    cf.write_coco(tmp_path / "a.json", {"images": [], "annotations": [], "categories": []})
    # common practice: new files get 0666 less the umask (POSIX open(2) with O_CREAT)
    assert (tmp_path / "a.json").stat().st_mode & 0o777 == _plain_file_mode()


def test_coco_problems_hold_the_bbox_and_rle_conventions():
    """The one COCO validator: bbox is [x, y, width, height] in pixels from the image's top-left corner and an RLE's
    size is [height, width] (COCO data format, cocodataset.org "Data format"; pycocotools mask API)."""
    doc = _tiny()
    assert list(cf.coco_problems(doc)) == []
    doc["annotations"][0]["bbox"] = [0.0, 0.0, 8.0, 6.0]  # exactly the whole 8 x 6 image
    assert list(cf.coco_problems(doc)) == []
    doc["annotations"][0]["bbox"] = [1.0, 0.0, 8.0, 6.0]  # one pixel past the right edge
    assert [r for _, r, _ in cf.coco_problems(doc)] == ["bbox must lie inside the image [0, 8] x [0, 6]"]
    doc = _tiny()
    seg = doc["annotations"][0]["segmentation"]
    seg["size"] = seg["size"][::-1]  # [width, height]: the wrong order
    assert [r for _, r, _ in cf.coco_problems(doc)] == ["RLE size must be the image's [height, width] [6, 8]"]


def test_coco_problems_start_with_the_structure_and_stop_at_a_broken_top_level():
    """coco_problems yields structure_problems first; a broken top level ends the walk (nothing else can be read)."""
    doc = _tiny()
    doc["annotations"].append({"id": 1, "image_id": 9, "category_id": 1, "bbox": [0, 0, 1, 1], "iscrowd": 0})
    assert [(r, rule) for r, rule, _ in cf.coco_problems(doc)] == [
        ("annotations[0] (id 1)", "annotations ids must be unique"),
        ("annotations[1] (id 1)", "annotations ids must be unique"),
        ("annotations[1] (id 1)", "image_id must name an image"),
    ]
    assert list(cf.coco_problems({"images": 3, "annotations": [], "categories": []})) == [
        ("top level", "'images' must be a list", 3)
    ]


def test_check_reports_exactly_what_coco_problems_finds(tmp_path):
    """synthgen check has no COCO rules of its own: on a COCO file alone its problems are coco_problems' plus image files."""
    from synthgen.formats.check import check_dataset

    doc = _tiny()
    doc["annotations"][0]["bbox"] = [7.0, 2.0, 4.0, 3.0]
    doc["categories"].append({"id": 1, "name": "ring"})
    path = tmp_path / "gt.json"
    path.write_bytes(orjson.dumps(doc))
    report = check_dataset(path)
    got = [(p.record, p.rule) for p in report.problems if p.rule != "image file must exist"]
    assert got == [(r, rule) for r, rule, _ in cf.coco_problems(doc)] and got
