"""The library of known-answer cases for detection evaluators, with expected values.

The builders live in :mod:`synthgen.cases.matching_cases` (ranking, IoU,
duplicates, the detection cut) and :mod:`synthgen.cases.dataset_cases` (size
ranges, crowd regions, images and categories, borders); each states in closed
form the values it is about.  :func:`build_cases` adds the full expected values
from the slow reference (:mod:`synthgen.cases.reference`) and refuses a case
whose closed form and reference disagree.
"""

from __future__ import annotations

import functools

from synthgen.cases import dataset_cases, matching_cases  # noqa: F401  (importing registers the builders)
from synthgen.cases.draft import BUILDERS, Case
from synthgen.cases.reference import counts_at, reference_evaluate

__all__ = ["Case", "build_cases", "case_names", "CLOSED_FORM_TOLERANCE"]

#: Closed forms and the reference agree to this (they differ only in rounding).
CLOSED_FORM_TOLERANCE = 1e-12

@functools.cache
def _built() -> tuple[Case, ...]:
    out = []
    order = [m.__name__ for m in (matching_cases, dataset_cases)]  # matching first: the basics lead
    for builder in sorted(BUILDERS, key=lambda b: order.index(b.__module__)):
        made = builder()
        for case in made if isinstance(made, list) else [made]:
            out.append(_complete(case))
    names = [c.name for c in out]
    if len(set(names)) != len(names):
        raise RuntimeError("case names repeat: " + ", ".join(sorted({n for n in names if names.count(n) > 1})))
    return tuple(out)


def _complete(case: Case) -> Case:
    """The case with its expected values from the reference, checked against its closed form."""
    ref = reference_evaluate(case.annotations, case.predictions)
    expected = {
        "stats": ref.stats,
        "per_category": {str(k): v for k, v in ref.per_category.items()},
        "buckets": ref.buckets,
    }
    flat = dict(ref.stats)
    for k, v in ref.per_category.items():
        flat.update({f"category {k} {m}": x for m, x in v.items()})
    if case.threshold is not None:
        expected["at_threshold"] = counts_at(case.annotations, case.predictions, case.threshold)
        flat.update({m: expected["at_threshold"][m] for m in ("precision", "recall", "f1")})
    for key, value in case.closed.items():
        if key not in flat:
            raise RuntimeError(f"case {case.name}: closed form names '{key}', which the reference does not give")
        if abs(flat[key] - value) > CLOSED_FORM_TOLERANCE:
            raise RuntimeError(
                f"case {case.name}: {key} is {value!r} in closed form but {flat[key]!r} by the reference"
            )
    return Case(case.name, case.trap, case.why, case.annotations, case.predictions, case.closed,
                case.aimed_at, case.threshold, expected)


def build_cases() -> tuple[Case, ...]:
    """Every case of the library, with expected values (built once per process, about a second)."""
    return _built()


def case_names() -> list[str]:
    """Names of the cases, in library order."""
    return [c.name for c in build_cases()]
