"""The make --formats/--split options and the check and export commands, as a user meets them."""

from __future__ import annotations

import hashlib
import json
import shutil

import numpy as np
import orjson
import pytest
from pycocotools import mask as cocomask
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.formats import export, voc, yolo
from synthgen.formats.check import check_dataset
from synthgen.formats.coco import xyxy_from_bbox

SMALL = ["--count", "4", "--set", "canvas.width=64", "--set", "canvas.height=48", "--quiet", "--workers", "1"]


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A dataset made with every format and a split."""
    out = tmp_path_factory.mktemp("cli") / "d"
    res = run("make", "--out", out, *SMALL, "--formats", "coco,voc,yolo,tokens,masks", "--split", "train=0.5,val=0.5")
    assert res.exit_code == 0, res.output
    return out


def test_make_writes_every_requested_format_and_split(made):
    """make --formats ... --split ... writes each format, each split, and lists them in the manifest."""
    for name in ("voc/000003.xml", "yolo/labels.txt", "tokens.jsonl", "tokens.vocab.json", "masks/000000.png"):
        assert (made / name).is_file(), name
    for name in ("annotations.train.json", "annotations.val.json", "tokens.train.jsonl", "voc/ImageSets/Main/val.txt"):
        assert (made / name).is_file(), name
    manifest = json.loads((made / "manifest.json").read_text())
    for name, digest in manifest["files"].items():
        assert hashlib.sha256((made / name).read_bytes()).hexdigest() == digest
    assert "voc/000000.xml" in manifest["files"] and "splits.json" in manifest["files"]
    assert manifest["outputs"]["split"] == {"train": 0.5, "val": 0.5}


def test_check_passes_what_make_writes(made):
    """synthgen check exits 0 on a dataset make wrote, with the summary on stdout."""
    res = run("check", made)
    assert res.exit_code == 0, res.output
    assert res.stdout.strip().endswith("no problems")


def test_voc_and_yolo_of_a_rendered_dataset_match_its_coco_file(made):
    """VOC boxes are the tight boxes of the RLE masks (decoded by pycocotools); YOLO gives back the COCO bbox."""
    coco = json.loads((made / "annotations.json").read_text())
    for im in coco["images"]:
        anns = [a for a in coco["annotations"] if a["image_id"] == im["id"]]
        stem = im["file_name"].rsplit(".", 1)[0]
        doc = voc.read_voc(made / "voc" / f"{stem}.xml")
        for a, box in zip(anns, doc["boxes"]):
            seg = dict(a["segmentation"], counts=a["segmentation"]["counts"].encode())
            m = cocomask.decode(seg)  # REFERENCE.md: COCO JSON (pycocotools mask.py)
            rows, cols = np.flatnonzero(m.any(1)), np.flatnonzero(m.any(0))
            # tight box (min_col, min_row, max_col + 1, max_row + 1) back from VOC's 1-based inclusive indices
            assert box.tolist() == [cols[0], rows[0], cols[-1] + 1, rows[-1] + 1]
        # VOC marks ignore regions difficult (REFERENCE.md: Pascal VOC XML); YOLO has no such flag and leaves them out
        assert doc["difficult"].tolist() == [a["iscrowd"] == 1 for a in anns]
        _, boxes = yolo.read_yolo(made / "yolo" / f"{stem}.txt", im["width"], im["height"])
        want = xyxy_from_bbox([a["bbox"] for a in anns if a["iscrowd"] == 0]).reshape(-1, 4)
        np.testing.assert_allclose(boxes, want, rtol=0, atol=1e-5)


def test_check_reports_problems_and_exits_1(made, tmp_path):
    """A broken copy exits 1 with one line per problem naming file and record."""
    bad = tmp_path / "bad"
    shutil.copytree(made, bad)
    (bad / "images" / "000001.png").unlink()
    res = run("check", bad)
    assert res.exit_code == 1
    assert "annotations.json: images[1] (id 2): image file must exist (got '000001.png')" in res.stdout
    assert "problem" in res.stdout.strip().splitlines()[-1]


def test_check_of_a_missing_directory_exits_2(tmp_path):
    """check on a path that does not exist exits 2 with one line."""
    res = run("check", tmp_path / "nope")
    assert res.exit_code == 2 and "does not exist" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_export_writes_formats_from_an_existing_dataset(made, tmp_path):
    """export --formats voc,yolo --out writes them without re-rendering and they pass check."""
    res = run("export", made, "--formats", "coco,voc,tokens", "--out", tmp_path / "o", "--order", "area", "--bins", "64")
    assert res.exit_code == 0, res.output
    assert (tmp_path / "o" / "voc" / "000000.xml").is_file()
    vocab = json.loads((tmp_path / "o" / "tokens.vocab.json").read_text())
    assert vocab["n_bins"] == 64 and vocab["order"] == "area"


@pytest.mark.parametrize(
    "args, pattern",
    [
        (["--formats", "coco,vok"], "option '--formats' must be one of"),
        (["--split", "train=0.9,val=0.2"], "option '--split' fractions must add up to 1"),
    ],
)
def test_bad_formats_or_split_exit_2_and_write_nothing(tmp_path, args, pattern):
    """make with an unknown format or a bad split exits 2 with one line and writes nothing."""
    res = run("make", "--out", tmp_path / "d", *SMALL, *args)
    assert res.exit_code == 2 and pattern in res.stderr
    assert not (tmp_path / "d").exists()


def test_overwrite_removes_earlier_format_files(made, tmp_path):
    """make --overwrite without --formats removes the format files an earlier run wrote."""
    out = tmp_path / "d"
    shutil.copytree(made, out)
    res = run("make", "--out", out, *SMALL, "--overwrite")
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == ["annotations.json", "images", "manifest.json"]
    assert check_dataset(out).ok
    assert export(out, ["yolo"]) == {"yolo": 4}


def test_check_finds_a_file_changed_after_make(made, tmp_path):
    """A file whose bytes no longer match the manifest's sha256 is reported."""
    bad = tmp_path / "bad"
    shutil.copytree(made, bad)
    path = bad / "yolo" / "000000.txt"
    path.write_text(path.read_text() + "\n")  # same labels, different bytes
    report = check_dataset(bad)
    manifest = orjson.loads((bad / "manifest.json").read_bytes())
    expected = manifest["files"]["yolo/000000.txt"]
    actual = hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib: the outside reference
    assert [(p.file, p.record, p.rule, p.value) for p in report.problems] == [
        ("manifest.json", "files['yolo/000000.txt']", f"file must match its sha256 digest {expected}", actual)
    ]
    assert expected in str(report.problems[0]) and actual in str(report.problems[0])


def test_check_quick_reads_headers_only(made):
    """check --quick still checks sizes (from the headers) and exits 0 on a clean dataset."""
    res = run("check", made, "--quick")
    assert res.exit_code == 0, res.output
    assert "coco 4 images" in res.stdout


def test_manifest_lists_format_files_but_not_foreign_ones(made, tmp_path):
    """--overwrite with formats lists the new format files in the manifest, not a user's own file left in place."""
    out = tmp_path / "d"
    shutil.copytree(made, out)
    (out / "notes.txt").write_text("mine")
    res = run("make", "--out", out, *SMALL, "--overwrite", "--formats", "yolo")
    assert res.exit_code == 0, res.output
    files = json.loads((out / "manifest.json").read_text())["files"]
    assert "yolo/labels.txt" in files and "notes.txt" not in files
    assert not any(name.startswith("voc/") for name in files)


def test_export_pads_token_sequences_with_training_noise(tmp_path):
    """--pad-to L: every sequence holds max(L, N) objects, noise ones with the noise class and zero box weight.

    Noise objects carry zero loss weight on their coordinates (REFERENCE.md: box quantization for
    token sequences, training-time noise objects).
    """
    from synthgen.formats.tokens import read_tokens, read_vocabulary

    out = tmp_path / "d"
    assert run("make", "--out", out, *SMALL).exit_code == 0
    res = run("export", out, "--formats", "tokens", "--pad-to", 12, "--out", tmp_path / "t")
    assert res.exit_code == 0, res.output
    vocab = read_vocabulary(tmp_path / "t" / "tokens.vocab.json")
    rows = read_tokens(tmp_path / "t" / "tokens.jsonl", tmp_path / "t" / "tokens.vocab.json")
    coco = json.loads((out / "annotations.json").read_text())
    for row, im in zip(rows, coco["images"]):
        n = sum(a["image_id"] == im["id"] and a["iscrowd"] == 0 for a in coco["annotations"])  # no ignore regions
        assert len(row["boxes"]) == max(12, n) and int(row["is_noise"].sum()) == max(12, n) - n
        w = np.asarray(row["weights"][:-1]).reshape(-1, 5)  # 5 tokens per object, then the end token
        assert (w[row["is_noise"], :4] == 0).all() and (w[~row["is_noise"]] == 1).all()
        assert vocab["ranges"]["noise"][0] in row["tokens"] or n >= 12
    again = run("export", out, "--formats", "tokens", "--pad-to", 12, "--out", tmp_path / "t2")
    assert again.exit_code == 0
    assert (tmp_path / "t" / "tokens.jsonl").read_bytes() == (tmp_path / "t2" / "tokens.jsonl").read_bytes()


def test_pad_to_needs_tokens(tmp_path):
    """--pad-to without the tokens format is a usage error naming the option."""
    out = tmp_path / "d"
    assert run("make", "--out", out, *SMALL).exit_code == 0
    res = run("export", out, "--formats", "voc", "--pad-to", 5)
    assert res.exit_code == 2 and "--pad-to" in res.stderr


def test_export_elsewhere_then_check_it(made, tmp_path):
    """export DIR --out OTHER gives a folder check passes on its own, and says how many images it took along."""
    res = run("export", made, "--formats", "yolo,tokens", "--out", tmp_path / "o")
    assert res.exit_code == 0, res.output
    assert res.stdout.strip().endswith(f"4 images linked or copied into {tmp_path / 'o' / 'images'}")
    res = run("check", tmp_path / "o")
    assert res.exit_code == 0, res.output
    assert "coco 4 images" in res.stdout and "yolo 4 images" in res.stdout and "no problems" in res.stdout
