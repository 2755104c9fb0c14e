"""synthgen check: each seeded fault is found and named; clean datasets pass."""

import numpy as np
import orjson
import pytest

from synthgen.errors import InputFileError
from synthgen.formats import export
from synthgen.formats.check import Problem, check_dataset
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


# -- every count mismatch is named (issue 13 item 3) ------------------------------------
def test_a_yolo_file_missing_an_object_names_the_image_and_the_annotation(tmp_path):
    """A YOLO file short of one line is one problem naming the image file and the annotation id it lacks."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    path = tmp_path / "yolo" / "000000.txt"
    lines = path.read_text().splitlines(keepends=True)
    path.write_text(lines[0] + lines[2])  # drop annotation id 2 (the second of image 000000)
    (p,) = _only(check_dataset(tmp_path), "as many objects")
    assert p.file == "yolo/000000.txt" and p.value == 2
    assert "image 000000.png (3)" in p.rule and "not found: annotation id 2" in p.rule


def test_a_yolo_line_no_annotation_stands_for_is_named(tmp_path):
    """An extra YOLO line is named by its line number."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    path = tmp_path / "yolo" / "000002.txt"
    path.write_text(path.read_text() + "2 0.5 0.5 0.1 0.1\n")
    (p,) = _only(check_dataset(tmp_path), "as many objects")
    assert p.file == "yolo/000002.txt" and "not in annotations.json: line 3" in p.rule


def test_a_token_line_missing_an_object_names_it(tmp_path):
    """A token line without one object's five tokens names the annotation whose box is gone."""
    make_dataset(tmp_path)
    export(tmp_path, ["tokens"], order="raster", n_bins=40)
    path = tmp_path / "tokens.jsonl"
    lines = [orjson.loads(t) for t in path.read_bytes().splitlines()]
    gone = lines[0]["annotation_ids"][1]
    lines[0]["tokens"] = lines[0]["tokens"][:5] + lines[0]["tokens"][10:]
    path.write_bytes(b"\n".join(orjson.dumps(x) for x in lines) + b"\n")
    (p,) = _only(check_dataset(tmp_path), "as many objects")
    assert (p.file, p.record) == ("tokens.jsonl", "line 1")
    assert f"not found: annotation id {gone}" in p.rule


def test_an_unreadable_format_file_leaves_no_silent_total_mismatch(tmp_path):
    """When a format's object total differs from the COCO file's, a problem says so (the summary never disagrees silently)."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    (tmp_path / "yolo" / "000000.txt").write_bytes(b"\xff\xfe")
    report = check_dataset(tmp_path)
    (p,) = _only(report, "as many objects in all")
    assert (p.file, p.value) == ("yolo", 2)
    assert report.counts["yolo"]["objects"] == 2 and report.counts["coco"]["objects"] == 5


def _covered_pair(tmp_path):
    """One image: a 2x2 square whose pixels all lie under a 4x4 square drawn above it."""
    return make_dataset(tmp_path, images=[(12, 10, [((2, 2, 4, 4), 1), ((1, 1, 5, 5), 2)])])


def test_an_annotation_every_upper_one_covers_keeps_a_mask_pixel(tmp_path):
    """The id mask gives a covered annotation one pixel back, taken from the upper one (which keeps 15)."""
    from synthgen.formats.masks import instance_id_image

    coco = _covered_pair(tmp_path)
    ids = instance_id_image(coco["annotations"], 10, 12)
    assert np.bincount(ids.ravel(), minlength=3).tolist() == [120 - 16, 1, 15]
    assert ids[2, 2] == 1  # the first of its pixels in column-major order (COCO RLE order)
    export(tmp_path, ["masks"])
    assert check_dataset(tmp_path).problems == ()


def test_an_annotation_whose_pixels_are_others_only_pixels_may_have_none(tmp_path):
    """Two one-pixel objects on the same pixel: the lower cannot have it, and check accepts that (README rule)."""
    from synthgen.formats.masks import instance_id_image, lost_annotations

    coco = make_dataset(tmp_path, images=[(12, 10, [((3, 3, 4, 4), 1), ((3, 3, 4, 4), 2)])])
    ids = instance_id_image(coco["annotations"], 10, 12)
    assert np.bincount(ids.ravel(), minlength=3).tolist() == [119, 0, 1]
    assert lost_annotations(coco["annotations"], ids) == []
    export(tmp_path, ["masks"])
    assert check_dataset(tmp_path).problems == ()


def test_check_names_an_annotation_a_mask_lost_against_the_rule(tmp_path):
    """An id mask where the upper object simply wins (no pixel left for the lower) is a problem naming both."""
    from PIL import Image

    _covered_pair(tmp_path)
    export(tmp_path, ["masks"])
    ids = np.zeros((10, 12), np.uint16)
    ids[1:5, 1:5] = 2
    Image.fromarray(ids).save(tmp_path / "masks" / "000000.png")
    (p,) = _only(check_dataset(tmp_path), "must keep one")
    assert p.file == "masks/000000.png" and "image 000000.png" in p.rule
    assert "annotation id 1" in p.rule and p.value == ["id 1"]


# -- corrupt files: every bad line on its own (issue 13 item 4) ----------------------------
def test_every_bad_yolo_line_is_reported(tmp_path):
    """A 4-field line does not hide a class-9 line after it; good lines are still counted."""
    make_dataset(tmp_path)
    export(tmp_path, ["yolo"])
    path = tmp_path / "yolo" / "000000.txt"
    lines = path.read_text().splitlines()
    lines[0] = " ".join(lines[0].split()[:4])
    lines[1] = "9 " + lines[1].split(" ", 1)[1]
    path.write_text("\n".join(lines) + "\n")
    report = check_dataset(tmp_path)
    assert [(p.record, p.rule) for p in report.problems if p.record] == [
        ("line 1", "must be 'class xc yc w h' (5 fields)"),
        ("line 2", "class must be in [0, 2] (labels.txt)"),
    ]
    assert report.counts["yolo"]["objects"] == 4  # lines 2 and 3 of image 0 and both of image 2


def test_a_bad_token_line_names_the_token_and_keeps_the_others(tmp_path):
    """A token outside the vocabulary is reported as itself; the other lines still count."""
    make_dataset(tmp_path)
    export(tmp_path, ["tokens"], order="raster")
    path = tmp_path / "tokens.jsonl"
    lines = [orjson.loads(t) for t in path.read_bytes().splitlines()]
    lines[0]["tokens"][6] = 5000
    path.write_bytes(b"\n".join(orjson.dumps(x) for x in lines) + b"\n")
    report = check_dataset(tmp_path)
    p, total = report.problems
    assert (p.file, p.record, p.value) == ("tokens.jsonl", "line 1", [5000])
    assert p.rule == "tokens must be in the vocabulary [0, 1004]"  # 1000 bins, 3 classes, noise, end
    assert report.counts["tokens"] == {"files": 1, "images": 3, "objects": 2}
    assert (total.file, total.value) == ("tokens.jsonl", 2) and "as many objects in all" in total.rule


def test_a_json_file_given_alone_that_is_not_json_is_unusable(tmp_path):
    """check FILE.json on a file that is not JSON (or not an object) raises InputFileError: exit 2, not 1."""
    (tmp_path / "a.json").write_text("images: none")
    with pytest.raises(InputFileError, match=r"a\.json: line 1, column 1: must be valid JSON"):
        check_dataset(tmp_path / "a.json")
    (tmp_path / "b.json").write_text("[1, 2]")
    with pytest.raises(InputFileError, match=r"b\.json: top level: must be a COCO JSON object \(got 'list'\)"):
        check_dataset(tmp_path / "b.json")


# -- the common YOLO layout with data.yaml (issue 13 item 5) ------------------------------
def _yolo_layout(root, yaml_text):
    from PIL import Image

    for sub in ("images/train", "labels/train"):
        (root / sub).mkdir(parents=True)
    Image.new("RGB", (20, 10)).save(root / "images" / "train" / "a.jpg")
    (root / "labels" / "train" / "a.txt").write_text("0 0.5 0.5 0.2 0.2\n2 0.25 0.5 0.1 0.2\n")
    (root / "data.yaml").write_text(yaml_text)


@pytest.mark.parametrize(
    "yaml_text",
    [
        # both spellings of 'names' in the common YOLO training tools' data.yaml (common practice)
        "path: .\ntrain: images/train\nval: images/train\nnc: 3\nnames: [bolt, nut, washer]\n",
        "path: .\ntrain: images/train\nnames:\n  0: bolt\n  1: nut\n  2: washer\n",
    ],
)
def test_yolo_layout_reads_class_names_from_data_yaml(tmp_path, yaml_text):
    """images/ + labels/ + data.yaml is checked with the class names of data.yaml (list or mapping)."""
    _yolo_layout(tmp_path, yaml_text)
    report = check_dataset(tmp_path)
    assert report.formats == ("yolo",) and report.problems == ()
    assert report.counts["yolo"] == {"files": 1, "images": 1, "objects": 2}


def test_a_class_past_data_yaml_names_is_reported(tmp_path):
    """A class index past the names of data.yaml is reported against data.yaml."""
    _yolo_layout(tmp_path, "names: [bolt, nut]\n")
    (p,) = check_dataset(tmp_path).problems
    assert (p.file, p.record, p.rule, p.value) == ("labels/train/a.txt", "line 2", "class must be in [0, 1] (data.yaml)", 2)


def test_a_data_yaml_without_usable_names_is_reported(tmp_path):
    """data.yaml that is not YAML, or whose nc disagrees with its names, is a problem naming it."""
    _yolo_layout(tmp_path, "names: [bolt, nut\n")
    (p,) = _only(check_dataset(tmp_path), "must be valid YAML")
    assert p.file == "data.yaml"
    (tmp_path / "data.yaml").write_text("nc: 4\nnames: [bolt, nut, washer]\n")
    (p,) = check_dataset(tmp_path).problems
    assert (p.file, p.record, p.value) == ("data.yaml", "nc", 4)
