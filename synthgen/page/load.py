"""Reading a scored run into one shape, whatever it came from.

A run is one of:

* a probe output directory: ``probe.json`` (what was run, on what, the subsets
  and the facts sliced by), ``predictions/<subset>.json`` and ``score.json``;
* a dataset (directory or COCO JSON file) plus a predictions file, and
  optionally the truth sidecar ``synthgen jitter`` wrote beside it;
* a sweep directory plus a predictions directory laid out as ``synthgen score
  --pred-dir`` reads it.

:func:`load_run` scores every subset with :mod:`synthgen.evaluate` and measures
its errors (:mod:`synthgen.page.errors`); the page is built from the
:class:`Run` alone.
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

from synthgen._io import read_json, sha256_file
from synthgen.errors import InputFileError, UserError
from synthgen.evaluate import (
    Evaluation,
    evaluate,
    parse_slice_spec,
    read_ground_truth,
    read_predictions,
    score_sweep,
)
from synthgen.formats.dataset_dir import manifest_path
from synthgen.page.errors import Breakdown, breakdown
from synthgen.report import Dataset, open_dataset

__all__ = ["DEFAULT_FACTS", "Subset", "Run", "load_run"]

#: Facts sliced by when neither the run nor the caller names any (those a dataset records).
DEFAULT_FACTS = ("size", "visible_fraction", "max_iou", "contrast", "kind", "truncated")


@dataclass(frozen=True)
class Subset:
    """One scored dataset of a run.

    Attributes
    ----------
    name : str
        ``"all"`` for a single dataset, the subset's relative path in a sweep.
    dataset : Dataset
        The ground truth and where its images are.
    predictions : list of dict
        COCO results records.
    predictions_name : str
        The predictions file's name, relative to the run where it is inside it.
    varied : dict
        The varied config values of a sweep subset (empty otherwise).
    evaluation : Evaluation
    slices : dict of fact -> list of BinResult
    errors : Breakdown
    """

    name: str
    dataset: Dataset
    predictions: list
    predictions_name: str
    varied: dict
    evaluation: Evaluation
    slices: dict
    errors: Breakdown


@dataclass(frozen=True)
class Run:
    """Everything the page shows.

    Attributes
    ----------
    kind : str
        ``"probe"``, ``"dataset"`` or ``"sweep"``.
    title : str
    detector : dict
        ``name``, ``spec`` and ``settings`` where known.
    source : dict
        ``path`` (as given, relative where possible), ``kind``, ``manifest_digest``, ``config``.
    synthgen_version, created : str
    by : tuple of str
        Facts sliced by.
    subsets : list of Subset
    seconds : float or None
        Time the probe took.
    """

    kind: str
    title: str
    detector: dict
    source: dict
    synthgen_version: str
    created: str
    by: tuple[str, ...]
    subsets: list = field(default_factory=list)
    seconds: float | None = None


def _read_json_object(path: Path) -> dict:
    data = read_json(path)
    if not isinstance(data, dict):
        raise InputFileError(path, f"must be a JSON object (got {type(data).__name__})")
    return data


def _slices(evaluation: Evaluation, by: Sequence[str], explicit: bool) -> dict:
    """Slice by each fact; facts the dataset does not record are skipped unless asked for by name."""
    out = {}
    for spec in by:
        fact, edges = parse_slice_spec(spec)
        try:
            bins = evaluation.slice_by(fact, edges)
        except UserError:
            if explicit:
                raise
            continue
        if bins:
            out[fact] = bins
    return out


def _subset(name: str, ds: Dataset, preds: list, pred_name: str, varied: dict, by, explicit: bool,
            ev: Evaluation | None = None) -> Subset:
    """One scored subset; ``ev`` is its evaluation when the caller has scored it already (a sweep)."""
    if ev is None:
        ev = evaluate(ds.coco, preds, gt_name=str(ds.source), pred_name=pred_name)
    return Subset(name, ds, preds, pred_name, varied, ev, _slices(ev, by, explicit), breakdown(ds.coco, preds))


def _manifest_summary(ds: Dataset) -> dict:
    """Name, kind, config and the SHA-256 of ``manifest.json`` (which lists the SHA-256 of every file)."""
    digest = sha256_file(manifest_path(ds.source.parent))
    return {"path": ds.name, "kind": "dataset", "manifest_digest": digest, "config": (ds.manifest or {}).get("config")}


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")


def _version() -> str:
    from synthgen import __version__

    return __version__


def _load_probe(run: Path, by, explicit: bool) -> Run:
    meta = _read_json_object(run / "probe.json")
    subsets_meta = meta.get("subsets")
    if not isinstance(subsets_meta, list) or not subsets_meta:
        raise InputFileError(run / "probe.json", "'subsets' must be a non-empty list of subsets")
    facts = tuple(by) if explicit else tuple(meta.get("by") or DEFAULT_FACTS)
    subsets = []
    for i, s in enumerate(subsets_meta):
        where = f"subsets[{i}]"
        if not isinstance(s, dict) or not all(isinstance(s.get(k), str) for k in ("dataset", "predictions")):
            raise InputFileError(run / "probe.json", f"'{where}' must hold 'dataset' and 'predictions' paths")
        ds = open_dataset(run / s["dataset"])
        preds = read_predictions(run / s["predictions"])
        name = str(s.get("name") or Path(s["dataset"]).name)
        subsets.append(_subset(name, ds, preds, s["predictions"], dict(s.get("varied") or {}), facts,
                               explicit and bool(by)))
    det = meta.get("detector") if isinstance(meta.get("detector"), dict) else {}
    src = meta.get("source") if isinstance(meta.get("source"), dict) else {}
    source = {**src, "path": Path(str(src.get("path", ""))).name or src.get("path", "")}
    seconds = meta.get("seconds")
    return Run(
        kind="probe",
        title=f"{det.get('name') or 'detector'} on {source.get('path') or run.name}",
        detector=det,
        source=source,
        synthgen_version=str(meta.get("synthgen_version", _version())),
        created=str(meta.get("created") or _now()),
        by=facts,
        subsets=subsets,
        seconds=float(seconds) if isinstance(seconds, (int, float)) and math.isfinite(seconds) else None,
    )


def _load_dataset(dataset: Path, predictions: Path, by, explicit: bool) -> Run:
    ds = open_dataset(dataset)
    preds = read_predictions(predictions)
    facts = tuple(by) if explicit else DEFAULT_FACTS
    sub = _subset("all", ds, preds, predictions.name, {}, facts, explicit)
    return Run("dataset", f"{predictions.name} on {ds.name}", {"name": predictions.name}, _manifest_summary(ds),
               _version(), _now(), facts, [sub])


def _load_sweep(sweep: Path, pred_dir: Path, by, explicit: bool) -> Run:
    facts = tuple(by) if explicit else DEFAULT_FACTS
    subsets = []
    for point in score_sweep(sweep, pred_dir):
        ds = open_dataset(sweep / point.subset)
        pred_path = pred_dir / (point.subset + ".json")
        preds = read_predictions(pred_path)
        subsets.append(_subset(point.subset, ds, preds, point.subset + ".json", point.values, facts, explicit,
                               point.evaluation))  # score_sweep scored it: no second evaluation
    digest = sha256_file(sweep / "sweep.json")  # the sweep's listing of its subsets
    source = {"path": sweep.name, "kind": "sweep", "manifest_digest": digest,
              "config": (subsets[0].dataset.manifest or {}).get("config") if subsets else None}
    return Run("sweep", f"{pred_dir.name} on the sweep {sweep.name}", {"name": pred_dir.name}, source,
               _version(), _now(), facts, subsets)


def load_run(run, predictions=None, *, by: Sequence[str] | None = None) -> Run:
    """Read and score a run (see the module docstring for the three shapes).

    Parameters
    ----------
    run : path-like
        A probe output directory, a dataset, or a sweep directory.
    predictions : path-like, optional
        For a dataset, its COCO results file; for a sweep, the predictions
        directory.  Must be left out for a probe directory.
    by : sequence of str, optional
        Slice specs ``FACT`` or ``FACT:E0,E1,...``.  Default: the probe's own,
        else those of :data:`DEFAULT_FACTS` the dataset records.

    Raises
    ------
    synthgen.errors.UserError
        On a missing or malformed file, naming it.
    """
    run = Path(run)
    explicit = by is not None
    by = tuple(by or ())
    if (run / "probe.json").is_file():
        if predictions is not None:
            raise UserError(f"'{run}' is a probe directory and holds its predictions; give no PREDICTIONS")
        return _load_probe(run, by, explicit)
    if predictions is None:
        raise UserError(f"'{run}' is not a probe directory (no probe.json); give PREDICTIONS too")
    predictions = Path(predictions)
    if predictions.is_dir():
        return _load_sweep(run, predictions, by, explicit)
    if not run.exists():
        raise InputFileError(run, "is missing")
    read_ground_truth(run)  # a clear message for a folder without annotations.json
    return _load_dataset(run, predictions, by, explicit)
