"""Writing the case library as one folder per case.

Layout of ``DIR``::

    DIR/README.md                  the cases in a table: name and trap
    DIR/<case>/annotations.json    COCO JSON ground truth
    DIR/<case>/predictions.json    COCO results (a JSON array)
    DIR/<case>/expected.json       the expected values (below)
    DIR/<case>/README.md           the trap, and how the answer follows from the definition

``expected.json`` holds ``stats`` (the twelve COCO statistics by name),
``per_category`` (``AP``, ``AP50``, ``AR100`` by category id), ``buckets``
(the same by size range) and, where a case pins them, ``at_threshold``
(precision, recall and F1 of the predictions scoring at least ``score``,
matched at IoU ``iou``).  -1 marks a value with nothing to average.  Floats
are written with all their digits.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

from synthgen.cases.library import Case, build_cases
from synthgen.cases.reference import BUGS, STAT_NAMES
from synthgen.errors import InputFileError, make_output_dir
from synthgen.formats.dataset_dir import ANNOTATIONS

__all__ = ["write_cases", "FILES"]

#: The files of one case folder.
PREDICTIONS = "predictions.json"
EXPECTED = "expected.json"
CASE_README = "README.md"
#: A case folder: the ground truth (named as in a dataset directory), the results, the answers, the paragraph.
FILES = (ANNOTATIONS, PREDICTIONS, EXPECTED, CASE_README)


def expected_document(case: Case) -> dict:
    """The content of a case's ``expected.json``."""
    return {
        "case": case.name,
        "trap": case.trap,
        "undefined": -1,
        **case.expected,
        "catches": {bug: BUGS[bug] for bug in case.aimed_at},
    }


def case_readme(case: Case) -> str:
    """The ``README.md`` of a case folder: the trap, the reasoning, the headline values."""
    stats = case.expected["stats"]
    lines = [f"# {case.name}", "", f"Trap: {case.trap}.", "", case.why, "", "| statistic | expected |", "|---|---|"]
    lines += [f"| {n} | {stats[n]:.6g} |" for n in STAT_NAMES]
    return "\n".join(lines) + "\n"


def _index(cases) -> str:
    lines = ["# Known-answer cases for detection evaluators", "",
             "Each folder: annotations.json (COCO), predictions.json (COCO results), expected.json, README.md.",
             "-1 marks a value with nothing to average (no counted object in that category or size range).", "",
             "| case | trap |", "|---|---|"]
    lines += [f"| {c.name} | {c.trap} |" for c in cases]
    return "\n".join(lines) + "\n"


def write_cases(out, cases=None) -> list[Path]:
    """Write every case (or the given ones) into a new folder ``out``; returns the case folders.

    ``out`` must not exist or be empty (missing parents are made); the folder is filled under a temporary
    name beside it and renamed at the end, so an interrupted run leaves no
    partial ``out``.

    Raises
    ------
    InputFileError
        ``out`` exists and is not an empty folder, or cannot be created.
    """
    out = Path(out)
    cases = build_cases() if cases is None else tuple(cases)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputFileError(out, "already exists and is not an empty folder; choose a new --out or remove it")
    make_output_dir(out.parent)
    staging = out.parent / f".{out.name}.partial-{os.getpid()}"
    shutil.rmtree(staging, ignore_errors=True)
    try:
        staging.mkdir()
        for case in cases:
            folder = staging / case.name
            folder.mkdir()
            docs = (case.annotations, case.predictions, expected_document(case))
            for name, doc in zip(FILES[:3], docs, strict=True):
                (folder / name).write_text(json.dumps(doc, indent=1) + "\n")
            (folder / FILES[3]).write_text(case_readme(case))
        (staging / CASE_README).write_text(_index(cases))
        if out.exists():
            out.rmdir()
        staging.rename(out)
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise InputFileError(out, f"cannot be written ({exc.strerror or exc})") from None
    return [out / c.name for c in cases]
