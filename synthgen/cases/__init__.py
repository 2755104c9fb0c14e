"""Known-answer cases for detection evaluators, and a conformance run against any evaluator.

:func:`build_cases` gives the library (each case: COCO ground truth, COCO
results, expected values derived from the COCO definitions);
:func:`write_cases` writes it as one folder per case; :func:`conform` runs an
evaluator over the cases and compares.
"""

from synthgen.cases.conform import CaseOutcome, conform, load_cases, load_evaluator, outcome_table, stats_from, summary
from synthgen.cases.library import Case, build_cases, case_names
from synthgen.cases.reference import BUGS, STAT_NAMES, counts_at, reference_evaluate
from synthgen.cases.write import write_cases

__all__ = [
    "Case",
    "CaseOutcome",
    "BUGS",
    "STAT_NAMES",
    "build_cases",
    "case_names",
    "conform",
    "counts_at",
    "load_cases",
    "load_evaluator",
    "outcome_table",
    "reference_evaluate",
    "stats_from",
    "summary",
    "write_cases",
]
