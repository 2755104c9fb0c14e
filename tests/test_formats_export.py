"""export: further formats and splits from an existing dataset, without re-rendering."""

import orjson
import pytest

from synthgen.errors import ConfigError, InputFileError
from synthgen.formats import export, read_coco
from synthgen.formats.splits import assign_splits
from tests._formats_helpers import make_dataset


def test_export_writes_every_format_in_place(tmp_path):
    """export writes voc/, yolo/, tokens and masks beside annotations.json."""
    coco = make_dataset(tmp_path)
    done = export(tmp_path, ["voc", "yolo", "tokens", "masks"])
    assert done == {"voc": 3, "yolo": 3, "tokens": 3, "masks": 3}
    assert sorted(p.name for p in (tmp_path / "voc").iterdir()) == ["000000.xml", "000001.xml", "000002.xml"]
    assert sorted(p.name for p in (tmp_path / "yolo").iterdir()) == [
        "000000.txt",
        "000001.txt",
        "000002.txt",
        "labels.txt",
    ]
    assert len((tmp_path / "tokens.jsonl").read_bytes().splitlines()) == len(coco["images"])
    assert (tmp_path / "tokens.vocab.json").is_file()
    assert sorted(p.name for p in (tmp_path / "masks").iterdir()) == ["000000.png", "000001.png", "000002.png"]
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporaries left


def test_export_to_another_directory_copies_the_coco_file(tmp_path):
    """export --out elsewhere writes annotations.json there too."""
    make_dataset(tmp_path / "d")
    export(tmp_path / "d", ["coco", "yolo"], out=tmp_path / "o")
    assert read_coco(tmp_path / "o" / "annotations.json") == read_coco(tmp_path / "d" / "annotations.json")
    assert (tmp_path / "o" / "yolo" / "000002.txt").is_file()


def test_export_splits_in_every_format(tmp_path):
    """With a split, each split gets a COCO file, VOC/YOLO lists and a token file, all agreeing."""
    make_dataset(tmp_path)
    fractions = {"train": 2 / 3, "val": 1 / 3}
    done = export(tmp_path, ["voc", "yolo", "tokens"], split=fractions, seed=5)
    want = assign_splits(3, fractions, seed=5)
    assert done["split:train"] == want.count("train") == 2
    for name in fractions:
        part = read_coco(tmp_path / f"annotations.{name}.json")
        files = [f"{k:06d}.png" for k, s in enumerate(want) if s == name]
        assert [im["file_name"] for im in part["images"]] == files
        stems = [f[:-4] for f in files]
        assert (tmp_path / "voc" / "ImageSets" / "Main" / f"{name}.txt").read_text().split() == stems
        assert (tmp_path / "yolo" / "splits" / f"{name}.txt").read_text().split() == [f"images/{f}" for f in files]
        lines = [orjson.loads(t) for t in (tmp_path / f"tokens.{name}.jsonl").read_bytes().splitlines()]
        assert [ln["file_name"] for ln in lines] == files
    doc = orjson.loads((tmp_path / "splits.json").read_bytes())
    assert doc["seed"] == 5 and doc["splits"]["val"] == [f"{k:06d}.png" for k, s in enumerate(want) if s == "val"]


def test_export_takes_the_seed_from_the_manifest(tmp_path):
    """Without --seed, export uses the manifest's seed for the split."""
    make_dataset(tmp_path)
    (tmp_path / "manifest.json").write_bytes(orjson.dumps({"seed": 42}))
    export(tmp_path, [], split={"a": 1 / 3, "b": 2 / 3})
    assert orjson.loads((tmp_path / "splits.json").read_bytes())["seed"] == 42


def test_export_rejects_an_unknown_format(tmp_path):
    """An unknown format name raises ConfigError suggesting the close one."""
    make_dataset(tmp_path)
    with pytest.raises(ConfigError, match="did you mean 'yolo'"):
        export(tmp_path, ["yollo"])


def test_export_needs_annotations(tmp_path):
    """A directory without annotations.json is an InputFileError naming the file."""
    with pytest.raises(InputFileError, match="annotations.json: cannot be read"):
        export(tmp_path, ["voc"])


def test_exported_files_and_directories_have_plain_modes(tmp_path):
    """Staged files and directories end with the modes open()/mkdir() give, not tempfile's private ones."""
    import os

    make_dataset(tmp_path)
    export(tmp_path, ["voc", "tokens"])
    mask = os.umask(0o022)
    os.umask(mask)
    # common practice: POSIX open(2)/mkdir(2) create with 0666/0777 less the umask
    assert (tmp_path / "voc").stat().st_mode & 0o777 == 0o777 & ~mask
    assert (tmp_path / "tokens.jsonl").stat().st_mode & 0o777 == 0o666 & ~mask
    assert (tmp_path / "tokens.vocab.json").stat().st_mode & 0o777 == 0o666 & ~mask


@pytest.mark.parametrize("where", ["annotations.json", "annotations.json/sub"])
def test_export_into_a_file_is_an_input_error(tmp_path, where):
    """An output path that is (or lies under) a file raises InputFileError naming it; nothing is written."""
    make_dataset(tmp_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(InputFileError, match="cannot be"):
        export(tmp_path, ["voc"], out=tmp_path / where)
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_export_refuses_an_rle_of_the_wrong_size_before_writing(tmp_path):
    """An RLE segmentation whose size is not its image's names the record; nothing is written."""
    make_dataset(tmp_path / "d")
    path = tmp_path / "d" / "annotations.json"
    coco = orjson.loads(path.read_bytes())
    coco["annotations"][1]["segmentation"] = {"size": [3, 3], "counts": "abc"}
    path.write_bytes(orjson.dumps(coco))
    with pytest.raises(InputFileError, match=r"annotations\[1\] \(id 2\): RLE 'size' must be its image's"):
        export(tmp_path / "d", ["masks"], out=tmp_path / "o")
    assert not (tmp_path / "o").exists()


def test_png_masks_refuse_more_objects_than_ids_before_writing(tmp_path, monkeypatch):
    """More objects in one image than a uint16 id PNG numbers is a user error pointing to RLE masks."""
    from synthgen.errors import UserError
    from synthgen.formats import masks as masks_fmt

    make_dataset(tmp_path / "d")
    monkeypatch.setattr(masks_fmt, "MAX_IDS", 1)  # stands in for 65535, so the test stays small
    with pytest.raises(UserError, match=r"at most 1 objects per image \(got 3 in image id \d+\).*--masks rle"):
        export(tmp_path / "d", ["masks"], out=tmp_path / "o")
    assert not (tmp_path / "o").exists()
    export(tmp_path / "d", ["masks"], out=tmp_path / "o", masks="rle")
    assert (tmp_path / "o" / "masks.jsonl").is_file()


def test_export_refuses_a_file_name_outside_the_dataset_before_writing(tmp_path):
    """An image file_name climbing out of the dataset names its record; no output directory is made."""
    make_dataset(tmp_path / "d")
    path = tmp_path / "d" / "annotations.json"
    coco = orjson.loads(path.read_bytes())
    coco["images"][2]["file_name"] = "../elsewhere.png"
    path.write_bytes(orjson.dumps(coco))
    with pytest.raises(InputFileError, match=r"images\[2\] \(id 3\): 'file_name' must be a relative path inside"):
        export(tmp_path / "d", ["voc"], out=tmp_path / "o")
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("mode", ["png", "rle"])
def test_masks_of_annotations_without_segmentation_are_refused_before_writing(tmp_path, mode):
    """A box-only COCO file (another tool's) cannot give masks: the record is named, nothing is written."""
    make_dataset(tmp_path / "d")
    path = tmp_path / "d" / "annotations.json"
    coco = orjson.loads(path.read_bytes())
    del coco["annotations"][0]["segmentation"]
    path.write_bytes(orjson.dumps(coco))
    with pytest.raises(InputFileError, match=r"annotations\[0\] \(id 1\): must have a 'segmentation'.*got '<missing>'"):
        export(tmp_path / "d", ["voc", "masks"], out=tmp_path / "o", masks=mode)
    assert not (tmp_path / "o").exists()
    export(tmp_path / "d", ["voc"], out=tmp_path / "o")  # formats without masks still work


def test_export_to_another_directory_is_a_dataset_of_its_own(tmp_path):
    """export --out OTHER links the images and writes annotations.json, so check passes on OTHER alone."""
    from synthgen.formats.check import check_dataset

    make_dataset(tmp_path / "d")
    done = export(tmp_path / "d", ["yolo"], out=tmp_path / "o", split={"a": 2 / 3, "b": 1 / 3})
    assert done["images"] == 3 and done["coco"] == 3
    for name in ("000000.png", "000001.png", "000002.png"):
        src, dst = tmp_path / "d" / "images" / name, tmp_path / "o" / "images" / name
        assert dst.read_bytes() == src.read_bytes()
    report = check_dataset(tmp_path / "o")
    assert report.problems == () and report.formats == ("coco", "yolo")
    # the YOLO split lists point at the exported folder's own images
    listed = (tmp_path / "o" / "yolo" / "splits" / "a.txt").read_text().split()
    assert listed and all((tmp_path / "o" / p).is_file() and p.startswith("images/") for p in listed)
    # once more into the same folder: the images are already there, nothing new to link
    assert export(tmp_path / "d", ["voc"], out=tmp_path / "o")["images"] == 0


def test_export_refuses_to_replace_another_image_in_the_output(tmp_path):
    """A different file where an exported image goes is refused before anything is written."""
    make_dataset(tmp_path / "d")
    (tmp_path / "o" / "images").mkdir(parents=True)
    (tmp_path / "o" / "images" / "000001.png").write_bytes(b"my own picture")
    with pytest.raises(InputFileError, match=r"000001\.png: already exists and is not the image"):
        export(tmp_path / "d", ["yolo"], out=tmp_path / "o")
    assert [p.name for p in (tmp_path / "o").rglob("*")] == ["images", "000001.png"]


def test_export_copies_where_it_cannot_link(tmp_path, monkeypatch):
    """Across file systems (os.link fails), the images are copied."""
    import os

    def no_link(src, dst):
        raise OSError(18, "Invalid cross-device link")

    make_dataset(tmp_path / "d")
    monkeypatch.setattr(os, "link", no_link)
    assert export(tmp_path / "d", ["voc"], out=tmp_path / "o")["images"] == 3
    dst = tmp_path / "o" / "images" / "000000.png"
    assert dst.read_bytes() == (tmp_path / "d" / "images" / "000000.png").read_bytes()
    assert dst.stat().st_nlink == 1
