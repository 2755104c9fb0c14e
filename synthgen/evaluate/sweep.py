"""Scoring a sweep: every subset dataset against its own predictions file, in the order of the varied values."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from synthgen.errors import InputFileError
from synthgen.evaluate.cocoeval import Evaluation, score_files
from synthgen.formats.dataset_dir import ANNOTATIONS


@dataclass(frozen=True, slots=True)
class SweepPoint:
    """One subset of a sweep: where it is, its varied values, and its scores."""

    subset: str
    values: dict
    evaluation: Evaluation
    slices: dict

    @property
    def label(self) -> str:
        """``key=value`` pairs of the varied keys, comma-separated."""
        return ", ".join(f"{k}={_json_text(v)}" for k, v in self.values.items())

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary."""
        return {"subset": self.subset, "values": self.values, **self.evaluation.to_dict(self.slices)}


def _json_text(v) -> str:
    import orjson

    return v if isinstance(v, str) else orjson.dumps(v).decode()


def _parse_value(text: str):
    import orjson

    try:
        return orjson.loads(text)
    except orjson.JSONDecodeError:
        return text


def _sweep_order(point: SweepPoint):
    def key(v):
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return (0, (float(v),), "")
        if isinstance(v, list) and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v):
            return (0, tuple(float(x) for x in v), "")
        return (1, (), _json_text(v))

    return tuple(key(v) for v in point.values.values()) + (point.subset,)


def score_sweep(sweep_dir, pred_dir, by: Sequence[str] = ()) -> list[SweepPoint]:
    """Score every subset of a sweep against its own predictions file.

    Parameters
    ----------
    sweep_dir : path-like
        A sweep: subset datasets in directories named ``KEY=VALUE`` (nested
        for several varied keys), each with its ``annotations.json``.
    pred_dir : path-like
        One COCO results file per subset at the same relative path plus
        ``.json``: subset ``SWEEP/objects.size=[4, 8]`` reads
        ``PRED_DIR/objects.size=[4, 8].json``.
    by : sequence of str
        Slice specs, applied to every subset.

    Returns
    -------
    list of SweepPoint
        Ordered by the varied values (numbers and number lists numerically).

    Raises
    ------
    InputFileError
        When the sweep has no subsets or a subset's predictions file is missing.
    """
    sweep_dir, pred_dir = Path(sweep_dir), Path(pred_dir)
    if not sweep_dir.is_dir():
        raise InputFileError(sweep_dir, "must be a sweep directory of subset datasets")
    subsets = sorted(p.parent for p in sweep_dir.rglob(ANNOTATIONS) if p.parent != sweep_dir)
    if not subsets:
        raise InputFileError(sweep_dir, "holds no subset directories KEY=VALUE with an annotations.json")
    points = []
    for sub in subsets:
        rel = sub.relative_to(sweep_dir)
        values = {}
        for part in rel.parts:
            key, sep, text = part.partition("=")
            if sep:
                values[key] = _parse_value(text)
        pred = pred_dir / (str(rel) + ".json")
        if not pred.is_file():
            raise InputFileError(pred, f"predictions for sweep subset '{rel}' are missing (expected this file)")
        ev, slices = score_files(sub, pred, by)
        points.append(SweepPoint(subset=str(rel), values=values, evaluation=ev, slices=slices))
    return sorted(points, key=_sweep_order)
