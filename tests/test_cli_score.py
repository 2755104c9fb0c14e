"""`synthgen score` as a user meets it: tables, JSON, figure, exit codes."""

from __future__ import annotations

import json

import numpy as np
from PIL import Image
from typer.testing import CliRunner

from synthgen.cli import app


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def _predictions(ds, tmp_path, shift=0.0):
    gt = json.loads((ds / "annotations.json").read_text())
    preds = [{"image_id": a["image_id"], "category_id": a["category_id"],
              "bbox": [a["bbox"][0] + shift * a["bbox"][2], *a["bbox"][1:]], "score": 0.9} for a in gt["annotations"]]
    path = tmp_path / "pred.json"
    path.write_text(json.dumps(preds))
    return path, preds


def test_score_prints_tables_and_writes_json(small_dataset, tmp_path):
    """Ground truth fed back scores AP 1.0 in the table and in --json (REFERENCE.md: COCO-style AP)."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path)
    res = run("score", ds, pred, "--by", "size", "--by", "kind", "--json", tmp_path / "out.json")
    assert res.exit_code == 0, res.output
    assert "COCO box metrics" in res.stdout and "by kind" in res.stdout
    out = json.loads((tmp_path / "out.json").read_text())
    assert abs(out["stats"]["AP"] - 1.0) < 1e-9
    # slices count objects; ignore regions (iscrowd 1) are in the ground truth but in no slice
    assert sum(b["n_gt"] for b in out["slices"]["kind"]) == out["counts"]["ground_truth"] - out["counts"]["crowd"]


def test_score_plot_is_a_png_of_the_stated_size(small_dataset, tmp_path):
    """--plot writes a PNG of 480x360 px per --by panel with a non-blank plot area."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path, shift=0.2)
    res = run("score", ds, pred, "--by", "size", "--by", "visible_fraction", "--by", "kind",
              "--plot", tmp_path / "f.png")
    assert res.exit_code == 0, res.output
    with Image.open(tmp_path / "f.png") as im:
        assert im.format == "PNG" and im.size == (1440, 360)
        img = np.asarray(im.convert("RGB")).astype(int)
    panel = img[40:-60, 60:460]
    assert (panel.sum(axis=2) < 600).mean() > 0.002  # some non-white ink inside the axes
    assert len(np.unique(panel.reshape(-1, 3), axis=0)) > 20


def test_malformed_predictions_exit_2_naming_the_record(small_dataset, tmp_path):
    """A prediction with a negative width exits 2 with one line naming the file and record."""
    ds, _ = small_dataset
    pred, preds = _predictions(ds, tmp_path)
    preds[3]["bbox"][2] = -1.0
    pred.write_text(json.dumps(preds))
    res = run("score", ds, pred)
    assert res.exit_code == 2
    assert "pred.json: record 3: 'bbox' must be" in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_predictions_not_a_list_exit_2(small_dataset, tmp_path):
    """A JSON object instead of an array of records exits 2."""
    ds, _ = small_dataset
    (tmp_path / "p.json").write_text('{"image_id": 1}')
    res = run("score", ds, tmp_path / "p.json")
    assert res.exit_code == 2 and "must be a JSON array" in res.stderr


def test_unknown_fact_and_bad_edges_exit_2(small_dataset, tmp_path):
    """Slicing by a fact no object has, or by decreasing edges, exits 2."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path)
    res = run("score", ds, pred, "--by", "shininess")
    assert res.exit_code == 2 and "'shininess' is not recorded" in res.stderr
    res = run("score", ds, pred, "--by", "size:8,4")
    assert res.exit_code == 2 and "strictly increasing" in res.stderr


def test_plot_without_by_exits_2(small_dataset, tmp_path):
    """--plot needs a --by fact."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path)
    res = run("score", ds, pred, "--plot", tmp_path / "f.png")
    assert res.exit_code == 2 and not (tmp_path / "f.png").exists()


def test_missing_predictions_file_exits_2(small_dataset, tmp_path):
    """A predictions path that does not exist names the file."""
    ds, _ = small_dataset
    res = run("score", ds, tmp_path / "nope.json")
    assert res.exit_code == 2 and "nope.json: cannot be read" in res.stderr


def test_pred_dir_scores_every_subset_of_a_sweep(small_dataset, tmp_path):
    """--pred-dir scores each KEY=VALUE subset with its own results file, in value order, and plots one curve."""
    import shutil

    ds, _ = small_dataset
    sweep = tmp_path / "sweep"
    preds_dir = tmp_path / "preds"
    preds_dir.mkdir()
    gt = json.loads((ds / "annotations.json").read_text())
    for shift in (0.0, 0.1, 0.3):  # IoU (1 - s) / (1 + s): 1.0, 0.818, 0.538 (REFERENCE.md: Geometry)
        sub = sweep / f"jitter.shift={shift}"
        shutil.copytree(ds, sub)
        preds = [{"image_id": a["image_id"], "category_id": a["category_id"], "score": 0.9,
                  "bbox": [a["bbox"][0] + shift * a["bbox"][2], *a["bbox"][1:]]} for a in gt["annotations"]]
        (preds_dir / f"jitter.shift={shift}.json").write_text(json.dumps(preds))
    res = run("score", sweep, "--pred-dir", preds_dir, "--json", tmp_path / "s.json", "--plot", tmp_path / "s.png")
    assert res.exit_code == 0, res.output
    out = json.loads((tmp_path / "s.json").read_text())["sweep"]
    assert [p["values"]["jitter.shift"] for p in out] == [0.0, 0.1, 0.3]
    ap50 = [p["stats"]["AP50"] for p in out]
    assert abs(ap50[0] - 1) < 1e-9 and abs(ap50[2] - 1) < 1e-9  # every IoU >= 0.5
    ap = [p["stats"]["AP"] for p in out]
    assert ap[0] > ap[1] > ap[2]
    with Image.open(tmp_path / "s.png") as im:
        assert im.size == (480, 360)


def test_pred_dir_missing_subset_file_exits_2(small_dataset, tmp_path):
    """A sweep subset without its results file names the expected path."""
    import shutil

    ds, _ = small_dataset
    shutil.copytree(ds, tmp_path / "sweep" / "objects.count=5")
    (tmp_path / "preds").mkdir()
    res = run("score", tmp_path / "sweep", "--pred-dir", tmp_path / "preds")
    assert res.exit_code == 2 and "objects.count=5.json: predictions for sweep subset" in res.stderr


def test_predictions_and_pred_dir_together_exit_2(small_dataset, tmp_path):
    """Exactly one of PREDICTIONS and --pred-dir is needed."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path)
    assert run("score", ds, pred, "--pred-dir", tmp_path).exit_code == 2
    assert run("score", ds).exit_code == 2


def test_output_paths_are_checked_before_scoring(tmp_path):
    """--json into a missing folder, or --plot naming a folder, exit 2 naming the option; nothing is written."""
    from typer.testing import CliRunner

    from synthgen.cli import app

    out = tmp_path / "d"
    runner = CliRunner()
    assert runner.invoke(app, ["make", "--out", str(out), "--count", "2", "--quiet", "--set", "canvas.width=48",
                               "--set", "canvas.height=32"]).exit_code == 0
    preds = tmp_path / "p.json"
    assert runner.invoke(app, ["jitter", str(out), "--out", str(preds)]).exit_code == 0
    res = runner.invoke(app, ["score", str(out), str(preds), "--json", str(tmp_path / "nope" / "s.json")])
    assert res.exit_code == 2 and "option '--json'" in res.stderr
    res = runner.invoke(app, ["score", str(out), str(preds), "--by", "size", "--plot", str(tmp_path),
                              "--json", str(tmp_path / "s.json")])
    assert res.exit_code == 2 and "option '--plot' must name a file" in res.stderr
    assert not (tmp_path / "s.json").exists()


def test_huge_finite_boxes_score_without_warnings(small_dataset, tmp_path):
    """Predictions of absurd but finite size ([0,0,1e308,1e308]) give pycocotools' stats and a clean stderr."""
    from tests._coco_cases import coco_reference

    ds, _ = small_dataset
    gt = json.loads((ds / "annotations.json").read_text())
    pred, preds = _predictions(ds, tmp_path)
    preds += [{"image_id": im["id"], "category_id": gt["annotations"][0]["category_id"], "bbox": box, "score": 0.95}
              for im in gt["images"] for box in ([0, 0, 1e308, 1e308], [1e308, 1e308, 1e308, 1e308])]
    pred.write_text(json.dumps(preds))
    res = run("score", ds, pred, "--by", "size", "--by", "area", "--json", tmp_path / "s.json")
    assert res.exit_code == 0, res.output
    assert res.stderr == ""
    stats = json.loads((tmp_path / "s.json").read_text())["stats"]
    ref = coco_reference(gt, preds)  # reference: pycocotools COCOeval (its areas overflow to inf as well)
    assert np.allclose(list(stats.values()), ref.stats, atol=1e-9)


def _foreign(ds, tmp_path):
    """The dataset's COCO file as another tool writes it: no synthgen facts anywhere."""
    gt = json.loads((ds / "annotations.json").read_text())
    for a in gt["annotations"]:
        a.pop("synthgen", None)
    for im in gt["images"]:
        im.pop("synthgen", None)
    path = tmp_path / "foreign.json"
    path.write_text(json.dumps(gt))
    return path, gt


def test_score_derives_size_and_kind_for_a_coco_file_without_facts(small_dataset, tmp_path):
    """--by size and --by kind work on a COCO file without synthgen's facts: derived from bbox and category."""
    ds, _ = small_dataset
    pred, _ = _predictions(ds, tmp_path)
    foreign, gt = _foreign(ds, tmp_path)
    res = run("score", foreign, pred, "--by", "size", "--by", "kind", "--by", "neighbours", "--json", tmp_path / "o.json")
    assert res.exit_code == 0, res.output
    out = json.loads((tmp_path / "o.json").read_text())
    names = {c["id"]: c["name"] for c in gt["categories"]}
    objects = [a for a in gt["annotations"] if not a["iscrowd"]]  # slices hold objects, not ignore regions
    want = {}
    for a in objects:
        want[names[a["category_id"]]] = want.get(names[a["category_id"]], 0) + 1
    assert {b["label"]: b["n_gt"] for b in out["slices"]["kind"]} == want
    assert sum(b["n_gt"] for b in out["slices"]["size"]) == len(objects)
    assert sum(b["n_gt"] for b in out["slices"]["neighbours"]) == len(objects)


def test_predictions_with_an_unknown_category_are_counted_and_reported(small_dataset, tmp_path):
    """Predictions naming a category_id the ground truth does not list: a warning with their count and ids."""
    ds, _ = small_dataset
    _, preds = _predictions(ds, tmp_path)
    preds[0]["category_id"] = 99
    preds[1]["category_id"] = 42
    preds[2]["category_id"] = 99
    path = tmp_path / "odd.json"
    path.write_text(json.dumps(preds))
    res = run("score", ds, path, "--json", tmp_path / "o.json")
    assert res.exit_code == 0, res.output
    assert f"warning: 3 predictions in {path} name a category_id the ground truth does not list (42, 99)" in res.stderr
    counts = json.loads((tmp_path / "o.json").read_text())["counts"]
    assert counts["predictions_unknown_category"] == 3 and counts["unknown_category_ids"] == [42, 99]


def test_score_files_pauses_the_cycle_collector_and_restores_it(small_dataset, tmp_path, monkeypatch):
    """Reading and scoring run with the collector paused, which is on again afterwards, after an error too."""
    import gc

    import pytest

    from synthgen.errors import InputFileError
    from synthgen.evaluate import cocoeval

    ds, _ = small_dataset
    pred, preds = _predictions(ds, tmp_path)
    seen = []
    real_evaluate = cocoeval.evaluate
    monkeypatch.setattr(cocoeval, "evaluate", lambda *a, **k: seen.append(gc.isenabled()) or real_evaluate(*a, **k))
    assert gc.isenabled()
    cocoeval.score_files(ds, pred)
    assert seen == [False] and gc.isenabled()
    preds[0]["score"] = "high"
    pred.write_text(json.dumps(preds))
    with pytest.raises(InputFileError):
        cocoeval.score_files(ds, pred)
    assert gc.isenabled()
