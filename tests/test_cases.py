"""Known-answer evaluator cases: closed forms, pycocotools, synthgen's scorer, wrong evaluators, conform."""

from __future__ import annotations

import json
import math
import re
import sys
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from synthgen.cases import BUGS, STAT_NAMES, build_cases, conform, stats_from, write_cases
from synthgen.cases.adapters import AdapterError
from synthgen.cases.reference import counts_at
from synthgen.cli import app
from synthgen.errors import UserError
from synthgen.testing import evaluator_cases
from tests import _cases_evaluators as ev

ROOT = Path(__file__).resolve().parents[1]
HELPERS = "tests/_cases_evaluators.py"
CASES = build_cases()
BY_NAME = {c.name: c for c in CASES}


def _close(a, b, tol=1e-9) -> bool:
    return abs(a - b) <= tol


def test_library_size_names_and_closed_forms():
    """At least 40 cases with unique folder-safe names, each stating some values in closed form."""
    assert len(CASES) >= 40
    assert len(BY_NAME) == len(CASES)
    for c in CASES:
        assert re.fullmatch(r"[a-z0-9.-]+", c.name), c.name
        assert c.closed and c.trap and len(c.why) > 80, c.name
        # build_cases refuses a closed form that the reference contradicts; check it here too
        flat = {**c.expected["stats"], **{f"category {k} {m}": v for k, d in c.expected["per_category"].items()
                                          for m, v in d.items()}, **c.expected.get("at_threshold", {})}
        assert all(_close(flat[k], v, 1e-12) for k, v in c.closed.items()), c.name


def test_worked_values_from_the_reference_notes():
    """Predictions at IoU 0.60 give AP50 1, AP75 0, AP 0.3; at 0.59 AP 0.2.

    REFERENCE.md: COCO-style AP, worked values measured with pycocotools 2.0.11
    (our 'below 0.60' case sits at IoU 0.5974).
    """
    at, below = BY_NAME["iou-equal-0.60"].expected["stats"], BY_NAME["iou-below-0.60"].expected["stats"]
    assert (at["AP50"], at["AP75"]) == (1.0, 0.0) and _close(at["AP"], 0.3)
    assert _close(below["AP"], 0.2)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_pycocotools_gives_the_expected_values(case):
    """pycocotools 2.0.x COCOeval (the reference implementation) equals every expected value to 1e-9."""
    coco = ev.pycocotools_eval(case.annotations, case.predictions)
    exp = case.expected
    assert np.allclose(coco.stats, [exp["stats"][n] for n in STAT_NAMES], rtol=0, atol=1e-9)
    per_cat, buckets = ev.details(coco.eval["precision"], coco.eval["recall"], coco.params.catIds)
    for got, want in ((per_cat, exp["per_category"]), (buckets, exp["buckets"])):
        assert got.keys() == want.keys()
        assert all(_close(got[k][m], want[k][m]) for k in want for m in want[k]), case.name
    if "at_threshold" in exp:
        counts = ev.pycocotools_counts_at(coco, exp["at_threshold"]["score"])
        assert counts == {m: exp["at_threshold"][m] for m in ("tp", "fp", "n_objects")}


def test_synthgen_scorer_gives_the_expected_values():
    """synthgen's own scorer (synthgen.evaluate.evaluate) equals every expected value to 1e-9."""
    for case in CASES:
        res = ev.synthgen_stats(case.annotations, case.predictions)
        exp = case.expected
        assert np.allclose(res.stats, [exp["stats"][n] for n in STAT_NAMES], rtol=0, atol=1e-9), case.name
        cat_ids = [c.id for c in res.per_category]
        per_cat, buckets = ev.details(res.precision, res.recall, cat_ids)
        for got, want in ((per_cat, exp["per_category"]), (buckets, exp["buckets"])):
            assert all(_close(got[k][m], want[k][m]) for k in want for m in want[k]), case.name


def test_each_wrong_evaluator_fails_exactly_the_cases_aimed_at_its_mistake():
    """The reference with one deliberate mistake fails the cases aimed at it and passes all others."""
    for bug in BUGS:
        outcomes = conform(f"{HELPERS}:wrong_{bug}", tolerance=1e-9)
        failing = {o.name for o in outcomes if not o.passed}
        aimed = {c.name for c in CASES if bug in c.aimed_at}
        assert aimed, bug
        assert failing == aimed, bug
    # the strict-threshold mistake is caught by the ten cases at IoU exactly on a threshold
    assert {c.name for c in CASES if "threshold_strict" in c.aimed_at} == {
        f"iou-equal-{t / 100:.2f}" for t in range(50, 100, 5)
    }


def test_conform_cli_passes_good_evaluators_and_exit_codes():
    """conform: exit 0 when every case passes, 1 with the failing cases named, 2 for an unusable SPEC."""
    runner = CliRunner()
    good = runner.invoke(app, ["conform", f"{HELPERS}:synthgen_stats", "--tolerance", "1e-9"])
    assert good.exit_code == 0, good.output
    assert f"{len(CASES)} of {len(CASES)} cases pass" in good.output
    bad = runner.invoke(app, ["conform", f"{HELPERS}:wrong_area_from_box"])
    assert bad.exit_code == 1
    assert re.search(r"58 of 60 cases pass; failing: area-field-(smaller|larger)-than-box", bad.output)
    for spec, message in (
        ("nonsense", "evaluator must be module:function"),
        (f"{HELPERS}:missing_function", "has no function 'missing_function'"),
        ("no_such_module_xyz:run", "cannot import 'no_such_module_xyz'"),
        ("echo {annotations} {out}", "missing {predictions}"),
        ("operator:is_", "evaluator result must be 12 numbers"),
    ):
        res = runner.invoke(app, ["conform", spec])
        assert res.exit_code == 2, (spec, res.output)
        assert message in res.output and res.output.count("\n") == 1, res.output


def test_written_cases_conform_through_a_command(tmp_path):
    """cases --out writes the four files per case; conform reads them back from the folder."""
    out = tmp_path / "cases"
    res = CliRunner().invoke(app, ["cases", "--out", str(out)])
    assert res.exit_code == 0, res.output
    folders = sorted(p.name for p in out.iterdir() if p.is_dir())
    assert folders == sorted(BY_NAME)
    case = BY_NAME["crowd-partial-overlap"]
    expected = json.loads((out / case.name / "expected.json").read_text())
    assert expected["stats"] == case.expected["stats"] and expected["catches"] == {"no_crowd": BUGS["no_crowd"]}
    assert json.loads((out / case.name / "predictions.json").read_text()) == case.predictions
    assert "62 %" in (out / case.name / "README.md").read_text()
    outcomes = conform(f"{HELPERS}:synthgen_by_name", out, tolerance=1e-9)  # read back from the folder
    assert [o.name for o in outcomes] == folders and all(o.passed for o in outcomes)


def test_conform_runs_a_command_template(tmp_path):
    """A command with {annotations} {predictions} {out} runs per case; its JSON mapping is compared.

    Three cases only: each run starts a Python process.
    """
    picked = [BY_NAME[n] for n in ("perfect", "crowd-partial-overlap", "empty-predictions")]
    write_cases(tmp_path / "three", picked)
    cmd = f"{sys.executable} {ROOT / HELPERS} {{annotations}} {{predictions}} {{out}}"
    outcomes = conform(cmd, tmp_path / "three", tolerance=1e-9)
    assert sorted(o.name for o in outcomes) == sorted(c.name for c in picked)
    assert all(o.passed and len(o.got) == 12 for o in outcomes)
    failing = conform(f"{sys.executable} -c 'import sys; sys.exit(3)' {{annotations}} {{predictions}} {{out}}",
                      tmp_path / "three")
    assert {o.error for o in failing} == {"RuntimeError: command exited 3: no message"}


def test_cases_refuses_a_folder_in_use_and_leaves_it_untouched(tmp_path):
    """--out naming a non-empty folder: exit 2, one line, the folder as it was."""
    (tmp_path / "keep.txt").write_text("mine")
    res = CliRunner().invoke(app, ["cases", "--out", str(tmp_path)])
    assert res.exit_code == 2 and "already exists and is not an empty folder" in res.output
    assert [p.name for p in tmp_path.iterdir()] == ["keep.txt"]


def test_a_failing_evaluator_fails_its_case_and_the_rest_run(tmp_path):
    """An evaluator that raises on a case (as pycocotools' loadRes does on []) fails that case only."""
    script = tmp_path / "fragile.py"
    script.write_text(
        "from synthgen.evaluate import evaluate\n"
        "def run(gt, preds):\n"
        "    if not preds:\n"
        "        raise IndexError('list index out of range')\n"
        "    return evaluate(gt, preds)\n"
    )
    outcomes = conform(f"{script}:run")
    failed = [o for o in outcomes if not o.passed]
    assert [o.name for o in failed] == ["empty-predictions"]
    assert failed[0].error == "IndexError: list index out of range"


def test_paths_option_passes_files(tmp_path):
    """With paths=True a Python evaluator receives the two file paths."""
    script = tmp_path / "by_path.py"
    script.write_text(
        "import json\nfrom pathlib import Path\nfrom synthgen.evaluate import evaluate\n"
        "def run(gt_path, pred_path):\n"
        "    return evaluate(json.loads(Path(gt_path).read_text()), json.loads(Path(pred_path).read_text()))\n"
    )
    assert all(o.passed for o in conform(f"{script}:run", paths=True))


def test_stats_from_reads_the_common_shapes():
    """Twelve numbers (list or array), a mapping by name (aliases), a 'stats' entry, an object with .stats."""
    twelve = [i / 12 for i in range(12)]
    by_name = dict(zip(STAT_NAMES, twelve, strict=True))
    assert stats_from(twelve) == by_name
    assert stats_from(np.array(twelve)) == by_name
    assert stats_from({"stats": twelve}) == by_name
    assert stats_from(type("R", (), {"stats": np.array(twelve)})()) == by_name
    assert stats_from({"map": 0.5, "map_50": 0.7, "mar_100": 0.9, "AP@75": 0.1, "ar_small": 0.2, "other": "x"}) == {
        "AP": 0.5, "AP50": 0.7, "AR100": 0.9, "AP75": 0.1, "AR_small": 0.2
    }
    for bad in ([1, 2, 3], {"loss": 1.0}, "AP", {"AP": "high"}):
        with pytest.raises(AdapterError):
            stats_from(bad)


def test_tolerance_must_be_a_number_at_least_zero():
    """A negative or NaN tolerance is a user error."""
    for tol in (-1.0, math.nan):
        with pytest.raises(UserError, match="--tolerance"):
            conform(f"{HELPERS}:synthgen_stats", tolerance=tol)


def test_evaluator_cases_are_pytest_params_with_a_check():
    """evaluator_cases(): one param per case, id = name; check() passes the right stats, names a wrong one."""
    params = evaluator_cases()
    assert [p.id for p in params] == [c.name for c in CASES]
    case = params[0].values[0]
    case.check(ev.synthgen_stats(case.annotations, case.predictions))
    wrong = dict(case.expected["stats"], AP=case.expected["stats"]["AP"] - 0.01)
    with pytest.raises(AssertionError, match=r"perfect .* AP expected 1, got 0\.99"):
        case.check(wrong)


def test_counts_at_threshold_follow_their_definition():
    """Precision, recall and F1 of 'precision-recall-at-threshold' are 0.8 each (8 of 10 kept are right)."""
    case = BY_NAME["precision-recall-at-threshold"]
    c = counts_at(case.annotations, case.predictions, 0.5)
    assert (c["tp"], c["fp"], c["n_objects"]) == (8, 2, 10)
    assert counts_at(case.annotations, case.predictions, 0.95)["precision"] == -1.0  # nothing kept


def test_readme_pytest_example_runs():
    """The README's five-line pytest example, run as pytest would: its test on every parameter."""
    text = (ROOT / "README.md").read_text()
    block = re.search(r"```python\n(# test_evaluator_conformance\.py\n.*?)```", text, re.S)
    assert block, "README lacks the pytest example"
    namespace: dict = {}
    exec(compile(block.group(1), "README.md", "exec"), namespace)
    test = namespace["test_evaluator_conforms"]
    (mark,) = test.pytestmark
    assert mark.name == "parametrize" and mark.args[0] == "case"
    for param in mark.args[1]:
        test(*param.values)
    assert len(mark.args[1]) == len(CASES)
