"""synthgen check: each seeded fault is found and named; clean datasets pass."""

import orjson
import pytest

from synthgen.check import Problem, check_dataset
from synthgen.errors import InputFileError
from synthgen.formats import export
from tests._formats_helpers import make_dataset


def _edit_coco(root, edit):
    path = root / "annotations.json"
    coco = orjson.loads(path.read_bytes())
    edit(coco)
    path.write_bytes(orjson.dumps(coco))


def _only(report, rule_part):
    hits = [p for p in report.problems if rule_part in p.rule]
    assert hits, f"no problem with {rule_part!r} among {[str(p) for p in report.problems]}"
    return hits


def test_clean_dataset_in_every_format_passes(tmp_path):
    """A dataset written by synthgen's writers, in every format and with splits, has no problems."""
    make_dataset(tmp_path)
    export(tmp_path, ["voc", "yolo", "tokens", "masks"], split={"train": 2 / 3, "val": 1 / 3}, seed=1)
    report = check_dataset(tmp_path)
    assert report.problems == ()
    assert report.ok
    assert report.formats == ("coco", "voc", "yolo", "tokens", "masks")
    assert report.counts["coco"] == {"files": 1, "images": 3, "objects": 5, "ignored": 0}
    assert report.counts["voc"]["objects"] == report.counts["yolo"]["objects"] == 5
    assert "no problems" in report.summary()


def test_ignore_regions_pass_in_every_format_and_are_counted_apart(tmp_path):
    """Ignore regions (iscrowd 1): VOC holds them as difficult, YOLO and tokens leave them out, masks mark them."""
    make_dataset(tmp_path, ignored={2, 5})
    export(tmp_path, ["voc", "yolo", "tokens", "masks"])
    report = check_dataset(tmp_path)
    assert report.problems == ()
    assert report.counts["coco"] == {"files": 1, "images": 3, "objects": 3, "ignored": 2}
    assert report.counts["voc"]["objects"] == 5 and report.counts["yolo"]["objects"] == 3
    assert report.counts["tokens"]["objects"] == 3 and report.counts["masks"]["objects"] == 3
    assert "(+2 ignore regions)" in report.summary()


def test_an_ignore_region_written_as_a_yolo_object_is_found(tmp_path):
    """A YOLO file that lists an ignore region as an object disagrees with the COCO file."""
    make_dataset(tmp_path, ignored={2})
    export(tmp_path, ["yolo"])
    label = tmp_path / "yolo" / "000000.txt"
    label.write_text(label.read_text() + "1 0.5 0.5 0.5 0.5\n")
    (p,) = _only(check_dataset(tmp_path), "without ignore regions")
    assert p.file == "yolo/000000.txt" and p.value == 3


def test_clean_dataset_with_rle_masks_passes(tmp_path):
    """The per-object RLE mask file of a clean dataset passes."""
    make_dataset(tmp_path)
    export(tmp_path, ["masks"], masks="rle")
    assert check_dataset(tmp_path).problems == ()


def test_missing_image(tmp_path):
    """A deleted image file is reported against its image record."""
    make_dataset(tmp_path)
    (tmp_path / "images" / "000002.png").unlink()
    (p,) = _only(check_dataset(tmp_path), "image file must exist")
    assert (p.file, p.record, p.value) == ("annotations.json", "images[2] (id 3)", "000002.png")


def test_box_outside_the_image(tmp_path):
    """A bbox reaching past the right edge is reported against its annotation."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["annotations"][1].update(bbox=[30.0, 10.0, 20.0, 5.0]))
    (p,) = _only(check_dataset(tmp_path), "inside the image")
    assert (p.file, p.record) == ("annotations.json", "annotations[1] (id 2)")


def test_duplicate_annotation_id(tmp_path):
    """Two annotations sharing an id are both reported."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["annotations"][3].update(id=1))
    hits = _only(check_dataset(tmp_path), "ids must be unique")
    assert [p.record for p in hits] == ["annotations[0] (id 1)", "annotations[3] (id 1)"]


def test_non_positive_id(tmp_path):
    """An annotation id of 0 is reported (COCOeval treats 0 as unmatched)."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["annotations"][0].update(id=0))
    # REFERENCE.md: COCO JSON -- an annotation id of 0 never matches in COCOeval, so ids start at 1
    (p,) = _only(check_dataset(tmp_path), "positive")
    assert p.record == "annotations[0]"


def test_zero_area_box(tmp_path):
    """A bbox of zero width is reported as empty."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["annotations"][2].update(bbox=[5.0, 5.0, 0.0, 3.0]))
    (p,) = _only(check_dataset(tmp_path), "non-empty")
    assert (p.file, p.record, p.value) == ("annotations.json", "annotations[2] (id 3)", [5.0, 5.0, 0.0, 3.0])


def test_non_finite_box(tmp_path):
    """A bbox with a huge/infinite value is reported as not finite."""
    make_dataset(tmp_path)
    path = tmp_path / "annotations.json"
    text = path.read_text().replace('"bbox":[3.0,2.0,4.0,3.0]', '"bbox":[3.0,2.0,1e999,3.0]')
    path.write_text(text)
    (p,) = _only(check_dataset(tmp_path), "finite")
    assert p.record == "annotations[0] (id 1)"


def test_wrong_image_size(tmp_path):
    """An image record whose width disagrees with the file is reported."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["images"][1].update(width=50))
    (p,) = _only(check_dataset(tmp_path), "image size")
    assert (p.file, p.record, p.value) == ("annotations.json", "images[1] (id 2)", (50, 30))


def test_malformed_json(tmp_path):
    """A truncated annotations.json is reported with its line and column."""
    make_dataset(tmp_path)
    path = tmp_path / "annotations.json"
    path.write_bytes(path.read_bytes()[:50])
    (p,) = _only(check_dataset(tmp_path), "valid JSON")
    assert p.file == "annotations.json" and p.record.startswith("line 1, column")


def test_unknown_category_and_image(tmp_path):
    """Annotations naming a missing category or image are reported."""
    make_dataset(tmp_path)

    def edit(c):
        c["annotations"][0]["category_id"] = 9
        c["annotations"][1]["image_id"] = 77

    _edit_coco(tmp_path, edit)
    report = check_dataset(tmp_path)
    assert _only(report, "category_id must name")[0].record == "annotations[0] (id 1)"
    assert _only(report, "image_id must name")[0].record == "annotations[1] (id 2)"


def test_voc_non_numeric_coordinate(tmp_path):
    """A VOC file with a non-numeric coordinate is reported with its file and object."""
    make_dataset(tmp_path)
    export(tmp_path, ["voc"])
    path = tmp_path / "voc" / "000000.xml"
    path.write_text(path.read_text().replace("<ymax>25</ymax>", "<ymax>2S</ymax>"))
    (p,) = _only(check_dataset(tmp_path), "must be a number")
    assert (p.file, p.record, p.value) == ("voc/000000.xml", "object[1] bndbox", "2S")


def test_voc_box_outside_and_missing_file(tmp_path):
    """A VOC box past the image and a missing VOC file are reported."""
    make_dataset(tmp_path)
    export(tmp_path, ["voc"])
    path = tmp_path / "voc" / "000002.xml"
    path.write_text(path.read_text().replace("<xmax>40</xmax>", "<xmax>41</xmax>"))
    (tmp_path / "voc" / "000001.xml").unlink()
    report = check_dataset(tmp_path)
    (p,) = _only(report, "inside the image [1, 40]")
    assert (p.file, p.record) == ("voc/000002.xml", "object[1] bndbox")
    (m,) = _only(report, "voc file must exist")
    assert m.file == "voc/000001.xml"


def test_yolo_counts_and_classes_must_agree(tmp_path):
    """A YOLO file missing a line, and a class index past labels.txt, are reported."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    p0 = tmp_path / "yolo" / "000000.txt"
    p0.write_text("".join(p0.read_text().splitlines(keepends=True)[:2]))
    p2 = tmp_path / "yolo" / "000002.txt"
    p2.write_text(p2.read_text().replace("1 ", "7 ", 1))
    report = check_dataset(tmp_path)
    (c,) = _only(report, "as many objects")
    assert (c.file, c.value) == ("yolo/000000.txt", 2)
    (k,) = _only(report, "class must be in [0, 2]")
    assert (k.file, k.record, k.value) == ("yolo/000002.txt", "line 2", 7)


def test_tokens_count_must_agree(tmp_path):
    """A token line whose object count disagrees with the COCO file is reported."""
    make_dataset(tmp_path)
    export(tmp_path, ["tokens"], order="raster")
    path = tmp_path / "tokens.jsonl"
    lines = [orjson.loads(t) for t in path.read_bytes().splitlines()]
    lines[0]["tokens"] = lines[0]["tokens"][5:]
    path.write_bytes(b"\n".join(orjson.dumps(x) for x in lines) + b"\n")
    (p,) = _only(check_dataset(tmp_path), "as many objects")
    assert (p.file, p.record, p.value) == ("tokens.jsonl", "line 1", 2)


def test_mask_size_must_agree(tmp_path):
    """An instance-id PNG of the wrong size is reported."""
    from PIL import Image

    make_dataset(tmp_path)
    export(tmp_path, ["masks"])
    Image.new("I;16", (10, 10)).save(tmp_path / "masks" / "000001.png")
    (p,) = _only(check_dataset(tmp_path), "mask size")
    assert p.file == "masks/000001.png"


def test_a_coco_file_from_another_tool_is_checked_directly(tmp_path):
    """A COCO file given by path, images beside it, is checked (polygons allowed)."""
    make_dataset(tmp_path)
    coco = orjson.loads((tmp_path / "annotations.json").read_bytes())
    for a in coco["annotations"]:
        a.pop("synthgen")
        x, y, w, h = a["bbox"]
        a["segmentation"] = [[x, y, x + w, y, x + w, y + h, x, y + h]]
    (tmp_path / "other.json").write_bytes(orjson.dumps(coco))
    report = check_dataset(tmp_path / "other.json")
    assert report.problems == () and report.formats == ("coco",)


def test_empty_directory_is_unusable(tmp_path):
    """A directory with no known format raises InputFileError (exit 2 in the CLI)."""
    with pytest.raises(InputFileError, match="holds no dataset format"):
        check_dataset(tmp_path)


def test_problem_text_names_file_record_rule_and_value():
    """A Problem prints as 'file: record: rule (got value)'."""
    p = Problem("voc/000000.xml", "object[1] bndbox", "<ymax> must be a number", "2S")
    assert str(p) == "voc/000000.xml: object[1] bndbox: <ymax> must be a number (got '2S')"


def test_split_files_must_not_share_images(tmp_path):
    """An image listed in two split COCO files is reported."""
    make_dataset(tmp_path)
    export(tmp_path, [], split={"train": 2 / 3, "val": 1 / 3}, seed=1)
    train = orjson.loads((tmp_path / "annotations.train.json").read_bytes())
    val_path = tmp_path / "annotations.val.json"
    val = orjson.loads(val_path.read_bytes())
    val["images"].append(train["images"][0])
    val_path.write_bytes(orjson.dumps(val))
    (p,) = _only(check_dataset(tmp_path), "one split only")
    assert p.file == "annotations.val.json"


def _foreign_voc(root):
    """A VOC layout as other tools write it: Annotations/*.xml beside JPEGImages/*.jpg, no COCO file."""
    from PIL import Image

    from synthgen.formats.voc import write_voc
    from tests._formats_helpers import build_coco

    coco = build_coco([(40, 30, [((3, 2, 7, 5), 1)]), (40, 30, [((0, 0, 40, 30), 2)])])
    for im in coco["images"]:
        im["file_name"] = im["file_name"].replace(".png", ".jpg")
    (root / "JPEGImages").mkdir(parents=True)
    for im in coco["images"]:
        Image.new("RGB", (40, 30), (90, 120, 30)).save(root / "JPEGImages" / im["file_name"], quality=90)
    write_voc(coco, root / "Annotations")


def test_voc_from_another_tool_passes(tmp_path):
    """A clean Annotations/ + JPEGImages/ layout passes."""
    _foreign_voc(tmp_path)
    report = check_dataset(tmp_path)
    assert report.formats == ("voc",) and report.problems == ()


def test_voc_from_another_tool_with_a_wrong_size(tmp_path):
    """A VOC <size> that disagrees with its JPEG is reported."""
    _foreign_voc(tmp_path)
    path = tmp_path / "Annotations" / "000001.xml"
    path.write_text(path.read_text().replace("<width>40</width>", "<width>41</width>"))
    (p,) = _only(check_dataset(tmp_path), "must match the image")
    assert (p.file, p.record, p.value) == ("Annotations/000001.xml", "size", (41, 30))


def test_yolo_from_another_tool(tmp_path):
    """labels/ + images/ + classes.txt is checked; a box past the right edge is reported with its line."""
    from PIL import Image

    (tmp_path / "images").mkdir()
    (tmp_path / "labels").mkdir()
    Image.new("RGB", (20, 10)).save(tmp_path / "images" / "a.png")
    (tmp_path / "classes.txt").write_text("boat\nbuoy\n")
    (tmp_path / "labels" / "a.txt").write_text("0 0.5 0.5 0.2 0.2\n1 0.95 0.5 0.2 0.2\n")
    report = check_dataset(tmp_path)
    assert report.formats == ("yolo",)
    (p,) = report.problems
    assert (p.file, p.record, p.rule) == ("labels/a.txt", "line 2", "box must lie inside the image (normalized [0, 1])")


def test_image_that_does_not_decode(tmp_path):
    """A truncated PNG is reported as not decoding."""
    make_dataset(tmp_path)
    path = tmp_path / "images" / "000000.png"
    path.write_bytes(path.read_bytes()[:200])
    (p,) = _only(check_dataset(tmp_path), "image must decode")
    assert p.file == "images/000000.png"


def test_file_name_outside_the_dataset(tmp_path):
    """An image file_name that climbs out of the dataset is reported, not opened."""
    make_dataset(tmp_path)
    _edit_coco(tmp_path, lambda c: c["images"][0].update(file_name="../../etc/passwd"))
    (p,) = _only(check_dataset(tmp_path), "relative path inside the dataset")
    assert p.record == "images[0] (id 1)"


def test_split_files_alone_are_the_reference_together(tmp_path):
    """Without annotations.json, every split file together is what VOC/YOLO/tokens are compared with."""
    make_dataset(tmp_path)
    export(tmp_path, ["voc", "yolo", "tokens"], split={"train": 2 / 3, "val": 1 / 3}, seed=1)
    (tmp_path / "annotations.json").unlink()
    report = check_dataset(tmp_path)
    assert report.problems == ()
    assert report.counts["coco"] == {"files": 2, "images": 3, "objects": 5, "ignored": 0}


def test_split_files_alone_must_not_share_images(tmp_path):
    """Without annotations.json, an image in two split files is still reported."""
    make_dataset(tmp_path)
    export(tmp_path, [], split={"train": 2 / 3, "val": 1 / 3}, seed=1)
    (tmp_path / "annotations.json").unlink()
    train = orjson.loads((tmp_path / "annotations.train.json").read_bytes())
    val_path = tmp_path / "annotations.val.json"
    val = orjson.loads(val_path.read_bytes())
    val["images"].append(train["images"][0])
    val_path.write_bytes(orjson.dumps(val))
    (p,) = _only(check_dataset(tmp_path), "one split only")
    assert p.file == "annotations.val.json"


def test_unreadable_yolo_file_is_one_line_without_a_value(tmp_path):
    """A YOLO file that is not UTF-8 is reported as unreadable, with no '(got None)' tail."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    (tmp_path / "yolo" / "000001.txt").write_bytes(b"\xff\xfe0 0.5 0.5 0.1 0.1\n")
    (p,) = _only(check_dataset(tmp_path), "cannot be read as UTF-8")
    assert str(p) == "yolo/000001.txt: cannot be read as UTF-8 text (invalid start byte at byte 0)"
