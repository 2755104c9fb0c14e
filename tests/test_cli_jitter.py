"""The `synthgen jitter` command as a user meets it: outputs, exit codes, one-line errors, nothing written on bad input."""

from __future__ import annotations

import json
import os

import pytest
from typer.testing import CliRunner

from synthgen.cli import app


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def dataset(root):
    """A two-image dataset directory with a hand-written annotations.json (ids from 1, iscrowd present)."""
    root.mkdir()
    anns = [
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [2.0, 3.0, 20.0, 10.0], "area": 200.0, "iscrowd": 0},
        {"id": 2, "image_id": 1, "category_id": 2, "bbox": [40.0, 30.0, 8.0, 8.0], "area": 64.0, "iscrowd": 0},
        {"id": 3, "image_id": 2, "category_id": 1, "bbox": [0.0, 0.0, 1.0, 1.0], "area": 1.0, "iscrowd": 0},
        {"id": 4, "image_id": 2, "category_id": 2, "bbox": [10.0, 10.0, 30.0, 20.0], "area": 600.0, "iscrowd": 0},
    ]
    coco = {
        "images": [{"id": 1, "file_name": "000000.png", "width": 64, "height": 48},
                   {"id": 2, "file_name": "000001.png", "width": 64, "height": 48}],
        "annotations": anns,
        "categories": [{"id": 1, "name": "rectangle", "supercategory": "shape"},
                       {"id": 2, "name": "ellipse", "supercategory": "shape"}],
    }
    (root / "annotations.json").write_text(json.dumps(coco), encoding="utf-8")
    return root


def test_jitter_writes_results_sidecar_and_prints_summary(tmp_path):
    """With every rate 0, each prediction is a true positive inside --iou; the summary goes to stdout."""
    ds = dataset(tmp_path / "ds")
    res = run("jitter", ds, "--out", tmp_path / "pred.json", "--iou", "0.6,0.8",
              "--miss", "0", "--duplicates", "0", "--background", "0", "--relabel", "0")
    assert res.exit_code == 0, res.output
    summary = json.loads(res.stdout)
    assert summary["kinds"]["true_positive"] == 4 and summary["predictions"] == 4
    preds = json.loads((tmp_path / "pred.json").read_text())
    # REFERENCE.md: COCO JSON results file, an array of {image_id, category_id, bbox, score}
    assert [sorted(p) for p in preds] == [["bbox", "category_id", "image_id", "score"]] * 4
    side = json.loads((tmp_path / "pred.truth.json").read_text())
    assert all(r["kind"] == "true_positive" and 0.6 - 1e-9 <= r["iou"] <= 0.8 + 1e-9 for r in side["predictions"])


def test_jitter_truth_option_and_same_seed_same_bytes(tmp_path):
    """--truth names the sidecar; two runs with one seed give identical bytes."""
    ds = dataset(tmp_path / "ds")
    args = ["--miss", "0.25", "--duplicates", "0.25", "--background", "2", "--relabel", "0.25", "--seed", "7"]
    assert run("jitter", ds, "-o", tmp_path / "a.json", "--truth", tmp_path / "a_t.json", *args).exit_code == 0
    assert run("jitter", ds, "-o", tmp_path / "b.json", "--truth", tmp_path / "b_t.json", *args).exit_code == 0
    assert (tmp_path / "a.json").read_bytes() == (tmp_path / "b.json").read_bytes()
    assert (tmp_path / "a_t.json").read_bytes() == (tmp_path / "b_t.json").read_bytes()
    assert json.loads((tmp_path / "a_t.json").read_text())["summary"]["outcomes"]["missed"] == 1


def test_jitter_after_make(tmp_path):
    """A dataset made by `synthgen make` can be jittered straight away."""
    made = run("make", "--out", tmp_path / "d", "--count", "2", "--set", "canvas.width=48", "--set",
               "canvas.height=32", "--quiet")
    assert made.exit_code == 0, made.output
    res = run("jitter", tmp_path / "d", "--out", tmp_path / "p.json", "--miss", "0.5", "--background", "1")
    assert res.exit_code == 0, res.output
    summary = json.loads(res.stdout)
    anns = json.loads((tmp_path / "d" / "annotations.json").read_text())["annotations"]
    n = sum(a["iscrowd"] == 0 for a in anns)  # ignore regions are no ground truth to detect
    assert n > 0 and summary["ground_truth"] == n
    # DetectorSpec: exactly floor(rate * N + 0.5) boxes are missed; the sidecar lists them
    assert summary["outcomes"]["missed"] == int(0.5 * n + 0.5)
    assert len(json.loads((tmp_path / "p.truth.json").read_text())["missed"]) == int(0.5 * n + 0.5)


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["--miss", "1.5"], "option '--miss' must be a number in [0, 1] (got 1.5)"),
        (["--relabel", "-0.1"], "option '--relabel' must be a number in [0, 1] (got -0.1)"),
        (["--duplicates", "2"], "option '--duplicates' must be a number in [0, 1] (got 2.0)"),
        (["--background", "-1"], "option '--background' must be a number >= 0 (got -1.0)"),
        (["--background", "1e9"], "option '--background' must be at most 10000 boxes per image (got 1000000000.0)"),
        (["--iou", "0.9,0.5"], "option '--iou' must be [min, max] with 0 < min <= max <= 1 (got [0.9, 0.5])"),
        (["--iou", "0,0.5"], "option '--iou' must be [min, max] with 0 < min <= max <= 1 (got [0.0, 0.5])"),
        (["--iou", "high"], "option '--iou' must be LO,HI or one number (got 'high')"),
        (["--miss", "0.6", "--relabel", "0.6"], "option '--miss' plus '--localization' plus '--relabel' must be at most 1"),
        (["--modes", "shift,twist"], "option '--modes' must be one of shift, grow, shrink, aspect, free (got 'twist')"),
        (["--seed", "-3"], "option '--seed' must be a whole number >= 0 (got -3)"),
        (["--miss", "0.5", "--duplicates", "0.6"], "option '--duplicates' must be at most 1 - miss - localization"),
        (["--near-iou", "0.5,0.2"], "option '--near-iou' must be [min, max]"),
        (["--background-size", "0,0.2"], "option '--background-size' must be [min, max]"),
        (["--background-iou", "0"], "option '--background-iou' must be a number in (0, 1]"),
        (["--modes", ","], "option '--modes' must be a non-empty list of shift, grow, shrink, aspect, free (got [])"),
    ],
)
def test_bad_options_exit_2_and_write_nothing(tmp_path, args, pattern):
    """Bad option values exit 2 with one line naming the option and value, and write nothing."""
    ds = dataset(tmp_path / "ds")
    res = run("jitter", ds, "--out", tmp_path / "pred.json", *args)
    assert res.exit_code == 2, res.output
    assert pattern in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert sorted(os.listdir(tmp_path)) == ["ds"]


def test_missing_dataset_exits_2(tmp_path):
    """A dataset directory that does not exist is named, exit 2, nothing written."""
    res = run("jitter", tmp_path / "nowhere", "--out", tmp_path / "pred.json")
    assert res.exit_code == 2 and "nowhere: is not a dataset directory" in res.stderr
    assert os.listdir(tmp_path) == []


def test_missing_annotations_exits_2(tmp_path):
    """A dataset directory without annotations.json is named, exit 2."""
    (tmp_path / "ds").mkdir()
    res = run("jitter", tmp_path / "ds", "--out", tmp_path / "pred.json")
    assert res.exit_code == 2 and "annotations.json: cannot be read" in res.stderr
    assert sorted(os.listdir(tmp_path)) == ["ds"]


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ('{"images": [', "is not valid JSON"),
        ('{"images": [], "annotations": {}, "categories": []}', "'annotations' must be a list"),
        ('{"images": [{"id": 1, "file_name": "a.png", "width": 8, "height": 8}], "categories": [{"id": 1, "name": "r"}],'
         ' "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 0, 4], "iscrowd": 0}]}',
         "'bbox' must be finite with width and height > 0"),
    ],
)
def test_malformed_annotations_exit_2(tmp_path, text, pattern):
    """A malformed annotations.json exits 2 with one line naming the file and the problem; nothing written."""
    (tmp_path / "ds").mkdir()
    (tmp_path / "ds" / "annotations.json").write_text(text, encoding="utf-8")
    res = run("jitter", tmp_path / "ds", "--out", tmp_path / "pred.json")
    assert res.exit_code == 2, res.output
    assert "annotations.json" in res.stderr and pattern in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.stderr
    assert sorted(os.listdir(tmp_path)) == ["ds"]


def test_missing_output_directory_exits_2(tmp_path):
    """An output path in a missing directory exits 2 before anything is written."""
    ds = dataset(tmp_path / "ds")
    res = run("jitter", ds, "--out", tmp_path / "no" / "pred.json")
    assert res.exit_code == 2 and "directory does not exist" in res.stderr
    assert sorted(os.listdir(tmp_path)) == ["ds"]


def test_every_spec_field_has_an_option_of_the_command():
    """Errors name options through one field -> option table: it covers every DetectorSpec field, each a real option."""
    import dataclasses

    from synthgen import cli
    from synthgen.jitter import DetectorSpec

    command = next(c for c in cli.app.registered_commands if c.callback.__name__ == "jitter")
    declared = {opt for p in typer_params(command) for opt in p}
    assert set(cli._JITTER_OPTIONS) == {f.name for f in dataclasses.fields(DetectorSpec)}
    assert set(cli._JITTER_OPTIONS.values()) <= declared


def typer_params(command):
    """The option strings of a registered typer command, per parameter."""
    import typer.main

    click_command = typer.main.get_command_from_info(
        command, pretty_exceptions_short=True, rich_markup_mode=None
    )
    return [p.opts for p in click_command.params]


def test_option_defaults_are_the_library_defaults(tmp_path):
    """Without options the command runs the library's default detector spec."""
    import dataclasses

    from synthgen.jitter import DetectorSpec
    from synthgen.jitter.coco import clear_spec

    ds = dataset(tmp_path / "ds")
    res = run("jitter", ds, "--out", tmp_path / "p.json")
    assert res.exit_code == 0 and res.stderr == ""  # nudges of ranges (not points) are recorded, not announced
    spec = json.loads((tmp_path / "p.truth.json").read_text())["spec"]
    used, _ = clear_spec(DetectorSpec())  # as used: range ends moved off COCO's thresholds
    expected = {f.name: getattr(used, f.name) for f in dataclasses.fields(DetectorSpec)}
    assert spec == {k: list(v) if isinstance(v, tuple) else v for k, v in expected.items()}


def test_a_range_on_a_coco_threshold_is_nudged_with_a_note(tmp_path):
    """--iou 0.5,0.5 draws at 0.5 + 1e-6 and says so on stderr; the summary records what was asked and used."""
    ds = dataset(tmp_path / "ds")
    res = run("jitter", ds, "--out", tmp_path / "p.json", "--iou", "0.5,0.5")
    assert res.exit_code == 0, res.output
    assert "note: --iou 0.5,0.5 ends on a COCO IoU threshold; used 0.500001,0.500001" in res.stderr
    summary = json.loads(res.stdout)
    assert summary["nudged"]["iou"] == {"asked": [0.5, 0.5], "used": [0.500001, 0.500001]}
    side = json.loads((tmp_path / "p.truth.json").read_text())
    assert all(abs(p["iou"] - 0.500001) < 1e-9 for p in side["predictions"])


def test_ambiguous_predictions_are_explained(tmp_path):
    """When predictions also overlap another object at IoU >= 0.5, a note says what 'ambiguous' means."""
    root = tmp_path / "ds"
    root.mkdir()
    anns = [  # two nearly identical boxes: every box made from one overlaps the other at IoU > 0.5
        {"id": 1, "image_id": 1, "category_id": 1, "bbox": [10.0, 10.0, 40.0, 40.0], "area": 1600.0, "iscrowd": 0},
        {"id": 2, "image_id": 1, "category_id": 1, "bbox": [11.0, 10.0, 40.0, 40.0], "area": 1600.0, "iscrowd": 0},
    ]
    coco = {"images": [{"id": 1, "file_name": "a.png", "width": 64, "height": 64}], "annotations": anns,
            "categories": [{"id": 1, "name": "ring", "supercategory": "shape"}]}
    (root / "annotations.json").write_text(json.dumps(coco))
    res = run("jitter", root, "--out", tmp_path / "p.json", "--iou", "0.9,0.95")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["ambiguous"] == 2
    assert "note: 'ambiguous': 2 predictions also overlap another ground-truth box at IoU >= 0.5" in res.stderr
