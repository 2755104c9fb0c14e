"""`synthgen probe`: detector specs, the output contract, journal and resume, workers, the files written."""

from __future__ import annotations

import hashlib
import json
import pickle
import re
import sys
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.errors import UserError
from synthgen.probe import DetectorOutputError, parse_detector, run_probe
from synthgen.probe.contract import Categories, to_records
from synthgen.probe.specs import CallableDetector, ResultsSource

HERE = Path(__file__).resolve().parent
PERFECT = "tests._probe_detectors:perfect"


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


@pytest.fixture
def truth(small_dataset, monkeypatch):
    """The small dataset, with the test detectors pointed at its ground truth."""
    ds, _ = small_dataset
    monkeypatch.setenv("SYNTHGEN_TEST_TRUTH", str(ds / "annotations.json"))
    monkeypatch.delenv("SYNTHGEN_TEST_BREAK", raising=False)
    return ds


def _files(out: Path) -> dict:
    """Every output whose bytes must not depend on how the run went (probe.json has a date and a duration)."""
    names = ["score.json", *(str(p.relative_to(out)) for p in sorted((out / "predictions").rglob("*.json")))]
    return {name: (out / name).read_bytes() for name in names}


# --------------------------------------------------------------------------- specs


def test_spec_module_function_loads_and_pickles_by_name():
    """module:function names a callable; it pickles as its names and loads again."""
    det = parse_detector(PERFECT)
    assert isinstance(det, CallableDetector) and det.name == "perfect" and det.module == "tests._probe_detectors"
    again = pickle.loads(pickle.dumps(det))
    assert again._fn is None and again.load() is det.load()


def test_spec_file_path_function(tmp_path):
    """path/to/file.py:function imports the file and takes the function."""
    src = tmp_path / "mine.py"
    src.write_text("def detect(images):\n    return [([], [], []) for _ in images]\n")
    det = parse_detector(f"{src}:detect")
    assert det.path == str(src.resolve()) and det([np.zeros((2, 2, 3), np.uint8)]) == [([], [], [])]


def test_spec_builtin_and_results(tmp_path):
    """builtin is the reference detector; results:DIR names precomputed files."""
    assert parse_detector("builtin").name == "builtin"
    res = parse_detector(f"results:{tmp_path}")
    assert isinstance(res, ResultsSource) and res.file_for("objects.size=[1,2]", single=False) == (
        tmp_path / "objects.size=[1,2].json")


@pytest.mark.parametrize(("spec", "rule"), [
    ("nonsense", "must be one of"),
    ("no_such_module_xyz:fn", "cannot be imported"),
    ("tests._probe_detectors:no_such_fn", "does not define"),
    ("tests._probe_detectors:_CACHE", "not callable"),
    ("missing.py:fn", "does not exist"),
    ("results:", "needs a directory"),
    ("results:/no/such/dir", "does not exist"),
])
def test_bad_spec_is_one_line_naming_the_option(spec, rule):
    """A spec of no known form, or naming nothing loadable, is refused with the option, rule and value."""
    with pytest.raises(UserError, match=re.escape(rule)) as info:
        parse_detector(spec)
    assert "'--detector'" in str(info.value) and repr(spec) in str(info.value) and "\n" not in str(info.value)


# --------------------------------------------------------------------------- contract


def test_records_are_coco_results():
    """xyxy boxes become COCO [x, y, w, h] (REFERENCE.md: COCO JSON, results file), names and ids both map."""
    cats = Categories([{"id": 3, "name": "washer"}, {"id": 5, "name": "plate"}])
    recs = to_records({"boxes": np.array([[1.0, 2.0, 4.0, 8.0]] * 2), "scores": [0.9, 0.1], "labels": ["plate", 3]},
                      7, cats, "image 0")
    assert recs == [{"image_id": 7, "category_id": 5, "bbox": [1.0, 2.0, 3.0, 6.0], "score": 0.9},
                    {"image_id": 7, "category_id": 3, "bbox": [1.0, 2.0, 3.0, 6.0], "score": 0.1}]
    assert to_records(([], [], []), 7, cats, "image 0") == []


# --------------------------------------------------------------------------- runs


def test_perfect_detector_scores_one(truth, tmp_path):
    """The ground truth fed back scores AP 1.0 (REFERENCE.md: COCO-style AP, worked values)."""
    res = run("probe", truth, "--detector", PERFECT, "--out", tmp_path / "p", "-q")
    assert res.exit_code == 0, res.output
    score = json.loads((tmp_path / "p" / "score.json").read_text())
    stats = score["subsets"]["ds"]["stats"]
    assert abs(stats["AP"] - 1.0) < 1e-9 and abs(stats["AP50"] - 1.0) < 1e-9
    assert set(score["subsets"]["ds"]["slices"]) == {"size", "visible_fraction", "contrast", "max_iou"}
    probe = json.loads((tmp_path / "p" / "probe.json").read_text())
    assert probe["detector"] == {"spec": PERFECT, "name": "perfect", "settings": {"module": "tests._probe_detectors"}}
    assert probe["subsets"] == [{"name": "ds", "dataset": str(truth), "predictions": "predictions/ds.json",
                                 "varied": None}]
    assert probe["source"]["kind"] == "dataset" and probe["images"] == 6 and not (tmp_path / "p" / ".probe").exists()
    assert probe["source"]["manifest_digest"] == hashlib.sha256((truth / "manifest.json").read_bytes()).hexdigest()
    page = (tmp_path / "p" / "report.html").read_text()  # the command writes the report by default
    assert "perfect" in page and probe["source"]["manifest_digest"] in page and f"wrote {tmp_path / 'p'}" in res.stdout


def test_tuples_and_coco_ids_are_accepted_and_batch_does_not_matter(truth, tmp_path):
    """(boxes, scores, labels) tuples with COCO ids give the same files as mappings with names, any batch size."""
    run_probe(truth, parse_detector(PERFECT), tmp_path / "a", batch=1)
    run_probe(truth, parse_detector("tests._probe_detectors:as_tuples"), tmp_path / "b", batch=4)
    assert _files(tmp_path / "a") == _files(tmp_path / "b")


def test_workers_do_not_change_outputs(truth, tmp_path):
    """Two worker processes write the same bytes as one process."""
    run_probe(truth, parse_detector(PERFECT), tmp_path / "one", batch=2, workers=1)
    run_probe(truth, parse_detector(PERFECT), tmp_path / "two", batch=2, workers=2)
    assert _files(tmp_path / "one") == _files(tmp_path / "two")


BAD = {
    "raises": "the detector raised ValueError: the model fell over (a second line of its message)",
    "shape": "boxes must have shape (N, 4) (got shape",
    "nan": "box 0 must be finite (got [",
    "inf_score": "score 0 must be finite (got inf)",
    "negative": "box 0 must have x0 < x1 and y0 < y1 (got [",
    "label": "label 0 is not a category name of the dataset (got 'hexnut'",
    "label_id": "label 0 is not a category id of the dataset (got 99",
    "label_float": "label 0 must be a category name or an integer COCO id (got 1.5",
    "scores_len": "scores must have shape (",
    "not_a_result": "result must be a mapping with boxes, scores and labels",
    "text_boxes": "boxes must be numbers (got dtype",
    "missing_key": "result lacks key 'scores'",
    "count": "results for",
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_output_exits_2_naming_image_and_keeps_what_was_done(truth, tmp_path, monkeypatch, case):
    """Each broken output: exit 2, one line naming the image index, the problem and the value; earlier images kept."""
    monkeypatch.setenv("SYNTHGEN_TEST_BREAK", f"{case}@3")
    out = tmp_path / "p"
    res = run("probe", truth, "--detector", PERFECT, "--out", out, "--batch", "1", "-q")
    assert res.exit_code == 2, res.output
    line = res.stderr.strip()
    assert "\n" not in line and "image 3 (000003.png)" in line and BAD[case] in line, line
    assert "predictions of 3 images done are kept" in line
    journal = (out / ".probe" / "journal.jsonl").read_text().splitlines()
    assert sorted(json.loads(x)["i"] for x in journal) == [0, 1, 2]
    assert not (out / "probe.json").exists()


def test_resume_finishes_to_the_bytes_of_an_uninterrupted_run(truth, tmp_path, monkeypatch):
    """A run stopped by a bad image, resumed once the detector is mended, equals a run never stopped."""
    run_probe(truth, parse_detector(PERFECT), tmp_path / "whole", batch=2)
    monkeypatch.setenv("SYNTHGEN_TEST_BREAK", "raises@4")
    with pytest.raises(DetectorOutputError, match=r"images 4-5 \(000004.png-000005.png\)"):
        run_probe(truth, parse_detector(PERFECT), tmp_path / "cut", batch=2)
    # a line cut short by a crash is dropped, not misread
    with open(tmp_path / "cut" / ".probe" / "journal.jsonl", "ab") as f:
        f.write(b'{"s": "ds", "i": 5, "r": [')
    monkeypatch.delenv("SYNTHGEN_TEST_BREAK")
    with pytest.raises(UserError, match="not empty"):
        run_probe(truth, parse_detector(PERFECT), tmp_path / "cut", batch=2)
    summary = run_probe(truth, parse_detector(PERFECT), tmp_path / "cut", batch=3, resume=True)
    assert summary.detected == 2
    assert _files(tmp_path / "cut") == _files(tmp_path / "whole")


def test_resume_refuses_another_detector(truth, tmp_path, monkeypatch):
    """--resume on a probe of another detector names what differs."""
    monkeypatch.setenv("SYNTHGEN_TEST_BREAK", "raises@2")
    with pytest.raises(DetectorOutputError):
        run_probe(truth, parse_detector(PERFECT), tmp_path / "p")
    with pytest.raises(UserError, match="holds a probe of another detector"):
        run_probe(truth, parse_detector("tests._probe_detectors:as_tuples"), tmp_path / "p", resume=True)


def test_results_spec_scores_precomputed_files(truth, tmp_path):
    """results:DIR scores files made elsewhere exactly as the detector's own run scores them."""
    run_probe(truth, parse_detector(PERFECT), tmp_path / "det")
    summary = run_probe(truth, parse_detector(f"results:{tmp_path / 'det' / 'predictions'}"), tmp_path / "res")
    assert summary.detected == 0
    assert _files(tmp_path / "res") == _files(tmp_path / "det")


def test_results_spec_missing_file_is_named(truth, tmp_path):
    """A results directory without the subset's file: exit 2 naming the file expected."""
    (tmp_path / "empty").mkdir()
    res = run("probe", truth, "-d", f"results:{tmp_path / 'empty'}", "-o", tmp_path / "p", "-q")
    assert res.exit_code == 2 and "ds.json" in res.stderr and "missing" in res.stderr


def test_sweep_probe_files_and_score_agree(tmp_path):
    """probe.json names every sweep point; score.json's sweep equals `score --pred-dir --json` on the same files."""
    out = tmp_path / "p"
    res = run("probe", HERE.parent / "configs" / "tiny.toml", "-d", "builtin", "-o", out, "-q", "--count", "2",
              "--set", "objects.count=[5,10]", "--vary", "objects.size=[2,4],[8,16]", "--by", "size")
    assert res.exit_code == 0, res.output
    probe = json.loads((out / "probe.json").read_text())
    assert [s["name"] for s in probe["subsets"]] == ["objects.size=[2,4]", "objects.size=[8,16]"]
    assert probe["subsets"][1]["varied"] == {"objects.size": [8, 16]} and probe["source"]["kind"] == "sweep"
    assert probe["source"]["path"] == "data" and probe["subsets"][0]["dataset"] == "data/objects.size=[2,4]"
    res = run("score", out / "data", "--pred-dir", out / "predictions", "--by", "size", "--json", tmp_path / "s.json")
    assert res.exit_code == 0, res.output
    mine = json.loads((out / "score.json").read_text())
    assert mine["sweep"] == json.loads((tmp_path / "s.json").read_text())["sweep"]
    assert set(mine["subsets"]) == {"objects.size=[2,4]", "objects.size=[8,16]"}
    assert (out / "figures" / "sweep.png").is_file() and (out / "figures" / "objects.size=[8,16].png").is_file()
    assert "objects.size=[8,16]" in (out / "report.html").read_text()


def test_progress_reports_images_per_second(truth, tmp_path):
    """Without --quiet a bar runs on stderr; stdout has the scores and the detector's images/s."""
    res = run("probe", truth, "-d", PERFECT, "-o", tmp_path / "p", "--batch", "1", "--no-report")
    assert res.exit_code == 0, res.output
    assert "ds: AP 1.000, AP50 1.000" in res.stdout and "images/s" in res.stdout
    assert not (tmp_path / "p" / "report.html").exists()


def test_set_without_config_is_refused(truth, tmp_path):
    """--set and --vary need a config source."""
    res = run("probe", truth, "-d", PERFECT, "-o", tmp_path / "p", "--set", "count=2")
    assert res.exit_code == 2 and "need a config file as SOURCE" in res.stderr


if sys.platform == "win32":  # pragma: no cover
    pytestmark = pytest.mark.skip("worker processes pass pipes by descriptor (POSIX)")
