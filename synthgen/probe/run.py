"""The probe run: detector over every image of every subset, journal, predictions, scores, record.

:func:`run_probe` is the one library call behind ``synthgen probe``; the
layout it writes is described in :mod:`synthgen.probe`.
"""

from __future__ import annotations

import functools
import hashlib
import os
import shutil
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import orjson

from synthgen import __version__
from synthgen._io import read_json, sha256_file, write_atomic
from synthgen.config import load_config
from synthgen.errors import InputFileError, UserError, make_output_dir
from synthgen.evaluate import evaluate, parse_slice_spec, read_ground_truth, score_sweep
from synthgen.formats.dataset_dir import ANNOTATIONS, IMAGES_DIR, annotations_path, manifest_path
from synthgen.formats.images import read_image
from synthgen.formats.results import read_predictions
from synthgen.probe.contract import Categories, DetectorOutputError, check_batch, to_records
from synthgen.probe.specs import ResultsSource
from synthgen.run.make import make_dataset
from synthgen.run.pool import run_unordered
from synthgen.run.sweep import SWEEP_RECORD, parse_vary, plan_sweep, run_sweep

__all__ = ["Subset", "Source", "ProbeSummary", "DEFAULT_BY", "resolve_source", "run_probe"]

#: Facts scored per bin when ``--by`` is not given (those the dataset records).
DEFAULT_BY = ("size", "visible_fraction", "contrast", "max_iou")
STATE = ".probe"  # DIR/.probe/: run.json (what was asked) and journal.jsonl (done images), while running
PAGE = "report.html"  # DIR/report.html: the run's HTML page (synthgen.page), written after probe.json


@dataclass(frozen=True)
class Subset:
    """One dataset scored on its own: its name (a sweep point's relative path), directory and varied values."""

    name: str
    dataset: Path
    varied: dict | None


@dataclass(frozen=True)
class Source:
    """What the probe runs over."""

    path: Path
    kind: str  # "dataset" or "sweep"
    config: str | None
    subsets: tuple[Subset, ...]
    digest: str


@dataclass(frozen=True)
class ProbeSummary:
    """What a probe run wrote and measured."""

    out: Path
    images: int
    detected: int  # images the detector ran on in this call (the rest came from the journal or results files)
    seconds: float
    detector_seconds: float
    scores: dict  # subset name -> (AP, AP50)
    page: Path | None = None  # the HTML report, when one was written


def _dataset_digest(path: Path) -> str:
    """sha256 of the dataset's manifest (of its COCO file when it has no manifest)."""
    manifest = manifest_path(path)
    return sha256_file(manifest if manifest.is_file() else annotations_path(path))


def _sweep_source(path: Path, config: str | None) -> Source:
    record = read_json(path / SWEEP_RECORD)
    subsets = tuple(Subset(s["path"], path / s["path"], dict(s["values"])) for s in record["subsets"])
    # one digest for the whole sweep: each subset's manifest digest, one line per subset in sweep order
    text = "".join(f"{s.name}\t{_dataset_digest(s.dataset)}\n" for s in subsets)
    return Source(path, "sweep", config, subsets, hashlib.sha256(text.encode()).hexdigest())


def resolve_source(
    source: Path, out: Path, *, vary: Sequence[str] = (), overrides: Sequence[str] = (), workers: int | None = None,
    resume: bool = False, overwrite: bool = False, progress: Callable[[int, int], None] | None = None,
) -> Source:
    """The dataset or sweep at ``source``; a config file is first made into one under ``out/data/``.

    A sweep directory holds ``sweep.json``; a dataset directory holds
    ``annotations.json``; a ``.toml`` file is a config: with ``vary`` a sweep is
    made at ``out/data``, without one dataset at ``out/data/<config stem>``.
    """
    source = Path(source)
    if source.is_file() and source.suffix == ".toml":
        if vary:
            varies = [parse_vary(v) for v in vary]
            plan = plan_sweep(source, varies, overrides)
            run_sweep(source, varies, out / "data", overrides=overrides, resume=resume, overwrite=overwrite,
                      workers=workers, plan=plan, progress=progress)
            return _sweep_source(out / "data", str(source))
        target = out / "data" / source.stem
        make_dataset(load_config(source, list(overrides)), target, resume=resume, overwrite=overwrite,
                     workers=workers, progress=progress)
        return Source(target, "dataset", str(source), (Subset(source.stem, target, None),), _dataset_digest(target))
    if vary or overrides:
        raise UserError("options '--vary', '--set', '--count' and '--seed' need a config file as SOURCE "
                        f"(got {source})")
    if source.is_dir() and (source / SWEEP_RECORD).is_file():
        return _sweep_source(source, None)
    if source.is_dir() and annotations_path(source).is_file():
        name = source.resolve().name
        return Source(source, "dataset", None, (Subset(name, source, None),), _dataset_digest(source))
    raise InputFileError(source, f"must be a dataset directory (with {ANNOTATIONS}), a sweep directory "
                         f"(with {SWEEP_RECORD}) or a TOML config")


# --------------------------------------------------------------------------- the work of one batch


def _read_image(path: Path):
    image = read_image(path)
    if image is None:
        raise InputFileError(path, "cannot be read as an image")
    return image


def _where(subset: str, index: int, file: str, single: bool) -> str:
    return f"image {index} ({file}{'' if single else ' of ' + subset})"


def detect_batch(detector, item) -> tuple:
    """Run the detector on one batch and check its output (module level: picklable for workers).

    ``item`` is ``(subset name, categories, single, [(index, image_id, path, file_name), ...])``.
    Returns ``(subset, [(index, records), ...], error message or None, seconds)``: the images
    before a bad one keep their records.
    """
    subset, categories, single, images = item
    pixels = [_read_image(Path(p)) for _, _, p, _ in images]
    first, last = images[0], images[-1]
    span = (_where(subset, first[0], first[3], single) if len(images) == 1 else
            f"images {first[0]}-{last[0]} ({first[3]}-{last[3]}{'' if single else ' of ' + subset})")
    start = time.perf_counter()
    try:
        raw = detector(pixels)
    except Exception as exc:
        text = " ".join(str(exc).split())  # one line, whatever the detector's message
        return subset, [], f"{span}: the detector raised {type(exc).__name__}: {text}", 0.0
    seconds = time.perf_counter() - start
    done = []
    try:
        results = check_batch(raw, len(images), span)
        for (index, image_id, _, file), result in zip(images, results, strict=True):
            done.append((index, to_records(result, image_id, categories, _where(subset, index, file, single))))
    except DetectorOutputError as exc:
        return subset, done, str(exc), seconds
    return subset, done, None, seconds


# --------------------------------------------------------------------------- journal


class Journal:
    """``DIR/.probe/journal.jsonl``: one line per finished image, appended and fsync'ed per batch."""

    def __init__(self, path: Path):
        self.path = path
        self.done: dict[tuple[str, int], list] = {}
        if path.is_file():
            data = path.read_bytes()
            end = data.rfind(b"\n") + 1  # a line cut by a crash is dropped
            for line in data[:end].splitlines():
                rec = orjson.loads(line)
                self.done[(rec["s"], rec["i"])] = rec["r"]
            if end != len(data):
                with open(path, "r+b") as f:
                    f.truncate(end)
        self._file = open(path, "ab")

    def add(self, subset: str, done: list) -> None:
        for index, records in done:
            self.done[(subset, index)] = records
        self._file.write(b"".join(orjson.dumps({"s": subset, "i": i, "r": r}) + b"\n" for i, r in done))
        self._file.flush()
        os.fsync(self._file.fileno())

    def close(self) -> None:
        self._file.close()


# --------------------------------------------------------------------------- the run


def _prepare_out(out: Path, resume: bool, overwrite: bool) -> None:
    if resume and overwrite:
        raise UserError("options '--overwrite' and '--resume' exclude each other: pass one of them")
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: output path is a file, not a directory")
    if out.is_dir() and any(out.iterdir()):
        if overwrite:
            for name in ("probe.json", "score.json", PAGE):
                (out / name).unlink(missing_ok=True)
            for name in ("predictions", "figures", STATE):
                shutil.rmtree(out / name, ignore_errors=True)
        elif not resume:
            raise UserError(f"{out}: output directory is not empty (pass --resume to continue a probe there, "
                            "or --overwrite to replace it)")
    make_output_dir(out)
    (out / "probe.json").unlink(missing_ok=True)  # until the run is done again, it does not look finished


def _default_by(truths: list[dict]) -> list[str]:
    """DEFAULT_BY, less the facts no subset records (size and max_iou are derived from boxes)."""
    facts = {"size", "max_iou"}
    for gt in truths:
        for ann in gt.get("annotations", [])[:1]:
            facts.update((ann.get("synthgen") or {}).keys())
    return [f for f in DEFAULT_BY if f in facts]


def _record_run(state: Path, asked: dict, resume: bool) -> None:
    path = state / "run.json"
    if resume and path.is_file():
        there = read_json(path)
        for key in ("detector", "source", "by"):
            if there.get(key) != asked[key]:
                raise UserError(f"{state.parent}: holds a probe of another {key} ({there.get(key)!r} there, "
                                f"{asked[key]!r} here); pass --overwrite to replace it")
        return
    shutil.rmtree(state, ignore_errors=True)
    state.mkdir(parents=True)
    write_atomic(path, orjson.dumps(asked, option=orjson.OPT_INDENT_2))


def _batches(subsets, truths, journal: Journal, batch: int, single: bool):
    """Work items of images not in the journal, ``batch`` images each, subset by subset."""
    for sub, gt in zip(subsets, truths, strict=True):
        cats = Categories(gt["categories"])
        todo = [(k, img["id"], str(sub.dataset / IMAGES_DIR / img["file_name"]), img["file_name"])
                for k, img in enumerate(gt["images"]) if (sub.name, k) not in journal.done]
        for i in range(0, len(todo), batch):
            yield sub.name, cats, single, todo[i:i + batch]


def _detect_all(detector, subsets, truths, state: Path, *, batch: int, workers: int,
                progress) -> tuple[dict, int, float]:
    """Run the detector over every image not yet journaled; returns (journal entries, images run, seconds)."""
    journal = Journal(state / "journal.jsonl")
    total = sum(len(gt["images"]) for gt in truths)
    done = len(journal.done)
    ran, seconds = 0, 0.0
    items = _batches(subsets, truths, journal, batch, len(subsets) == 1)
    work = functools.partial(detect_batch, detector)
    results = map(work, items) if workers <= 1 else run_unordered(work, items, workers)
    try:
        if progress is not None:
            progress(done, total)
        for subset, finished, error, secs in results:
            journal.add(subset, finished)
            done, ran, seconds = done + len(finished), ran + len(finished), seconds + secs
            if error is not None:
                raise DetectorOutputError(f"{error}; the predictions of {done} images done are kept, "
                                          "--resume continues")
            if progress is not None:
                progress(done, total)
    finally:
        if hasattr(results, "close"):
            results.close()
        journal.close()
    return journal.done, ran, seconds


def _predictions(subsets, truths, entries: dict) -> dict[str, bytes]:
    out = {}
    for sub, gt in zip(subsets, truths, strict=True):
        records = [r for k in range(len(gt["images"])) for r in entries[(sub.name, k)]]
        out[sub.name] = orjson.dumps(records)
    return out


def _copy_results(results: ResultsSource, subsets, truths) -> dict[str, bytes]:
    out = {}
    for sub, gt in zip(subsets, truths, strict=True):
        path = results.file_for(sub.name, len(subsets) == 1)
        if not path.is_file():
            raise InputFileError(path, f"results for subset '{sub.name}' are missing (expected this file)")
        records = read_predictions(path)
        evaluate(gt, records, gt_name=str(sub.dataset), pred_name=str(path))  # its rules, its messages
        out[sub.name] = orjson.dumps(records)
    return out


def _score(out: Path, source: Source, truths, by: list[str]) -> tuple[dict, list]:
    """score.json's content (and the sweep points), by the one scorer."""
    if source.kind == "sweep":
        points = score_sweep(source.path, out / "predictions", by)
        return {"subsets": {p.subset: p.evaluation.to_dict(p.slices) for p in points},
                "sweep": [p.to_dict() for p in points]}, points
    (sub,), (gt,) = source.subsets, truths
    pred = out / "predictions" / f"{sub.name}.json"
    ev = evaluate(gt, read_predictions(pred), gt_name=str(sub.dataset), pred_name=str(pred))
    slices = {}
    for spec in by:
        fact, edges = parse_slice_spec(spec)
        slices[fact] = ev.slice_by(fact, edges)
    return {"subsets": {sub.name: ev.to_dict(slices)}}, [(sub.name, slices)]


def _figures(out: Path, source: Source, points, detector: str) -> list[str]:
    """score --plot's figures under out/figures/, when matplotlib is installed; their paths."""
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return []
    from synthgen.report.figures import plot_slices, plot_sweep

    written = []
    if source.kind == "sweep":
        (out / "figures").mkdir(parents=True, exist_ok=True)
        plot_sweep(points, out / "figures" / "sweep.png", title=f"{detector} on the sweep {Path(source.config).stem if source.config else source.path.name}")
        written.append("figures/sweep.png")
        pairs = [(p.subset, p.slices) for p in points]
    else:
        pairs = points
    for name, slices in pairs:
        if slices:
            path = out / "figures" / f"{name}.png"
            path.parent.mkdir(parents=True, exist_ok=True)
            plot_slices(slices, path, title=f"{detector} on {name}")
            written.append(f"figures/{name}.png")
    return written


def _relative(path: Path, out: Path) -> str:
    try:
        return str(path.resolve().relative_to(out.resolve()))
    except ValueError:
        return str(path)


def _probe_record(out: Path, src: Source, asked: dict, images: int, seconds: float) -> dict:
    """probe.json's content (the layout in :mod:`synthgen.probe`)."""
    return {
        "synthgen_version": __version__,
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "detector": asked["detector"],
        "source": {**asked["source"], "path": _relative(src.path, out)},
        "subsets": [{"name": s.name, "dataset": _relative(s.dataset, out), "predictions": f"predictions/{s.name}.json",
                     "varied": s.varied} for s in src.subsets],
        "by": asked["by"],
        "images": images,
        "seconds": round(seconds, 3),
    }


def run_probe(
    source, detector, out, *, by: Sequence[str] | None = None, batch: int = 8, workers: int = 1,
    resume: bool = False, overwrite: bool = False, vary: Sequence[str] = (), overrides: Sequence[str] = (),
    progress: Callable[[int, int], None] | None = None,
    data_progress: Callable[[int, int], None] | None = None, report: bool = False,
) -> ProbeSummary:
    """Run ``detector`` over a dataset or sweep (made from a config first), then score it.

    Parameters
    ----------
    source : path-like
        Dataset directory, sweep directory, or TOML config (:func:`resolve_source`).
    detector
        From :func:`synthgen.probe.specs.parse_detector`: a callable detector or a
        :class:`~synthgen.probe.specs.ResultsSource`.
    out : path-like
        The probe directory (layout in :mod:`synthgen.probe`).
    by : sequence of str or None
        Slice specs ``FACT`` or ``FACT:E0,...`` (None: :data:`DEFAULT_BY`).
    batch, workers : int
        Images per detector call; processes to call it in (1: this process).
        Neither changes the outputs.
    resume, overwrite : bool
        Continue an interrupted probe in ``out`` (same detector, source and
        slices), or replace one.
    vary, overrides : sequence of str
        ``--vary`` and ``--set`` texts for a config source.
    progress, data_progress : callable or None
        ``(done, total)`` images detected; images rendered for a config source.
    report : bool
        Also write the HTML report ``report.html`` (:mod:`synthgen.page`), when matplotlib is installed.

    Raises
    ------
    DetectorOutputError
        The detector raised or broke the contract (:mod:`synthgen.probe.contract`); the
        images done are journaled and ``resume`` continues.
    UserError
        Bad options, source or output directory.
    """
    if batch < 1 or workers < 1:
        raise UserError(f"options '--batch' and '--workers' must be at least 1 (got {batch} and {workers})")
    start = time.perf_counter()
    out = Path(out)
    _prepare_out(out, resume, overwrite)
    src = resolve_source(Path(source), out, vary=vary, overrides=overrides, workers=workers, resume=resume,
                         overwrite=overwrite, progress=data_progress)
    truths = [read_ground_truth(sub.dataset)[0] for sub in src.subsets]
    by = list(by) if by else _default_by(truths)
    asked = {
        "detector": {"spec": detector.spec, "name": detector.name, "settings": detector.settings},
        "source": {"path": str(src.path), "kind": src.kind, "manifest_digest": src.digest, "config": src.config},
        "by": by,
    }
    state = out / STATE
    _record_run(state, asked, resume)
    ran, det_seconds = 0, 0.0
    if isinstance(detector, ResultsSource):
        files = _copy_results(detector, src.subsets, truths)
    else:
        if hasattr(detector, "prepare"):  # e.g. the builtin: fit once, keep only the dataset's categories
            names = [{c["name"] for c in gt["categories"]} for gt in truths]
            detector = detector.prepare(sorted(set.intersection(*names)))
        entries, ran, det_seconds = _detect_all(detector, src.subsets, truths, state, batch=batch, workers=workers,
                                                progress=progress)
        files = _predictions(src.subsets, truths, entries)
    scores = _write_results(out, src, truths, by, files, detector.name)
    images = sum(len(gt["images"]) for gt in truths)
    seconds = time.perf_counter() - start
    record = _probe_record(out, src, asked, images, seconds)
    write_atomic(out / "probe.json", orjson.dumps(record, option=orjson.OPT_INDENT_2))
    shutil.rmtree(state, ignore_errors=True)
    summary_scores = {name: (d["stats"]["AP"], d["stats"]["AP50"]) for name, d in scores["subsets"].items()}
    return ProbeSummary(out=out, images=images, detected=ran, seconds=seconds, detector_seconds=det_seconds,
                        scores=summary_scores, page=_page(out, by) if report else None)


def _write_results(out: Path, src: Source, truths: list, by: list, files: dict, detector: str) -> dict:
    """The predictions files, score.json and the figures; returns the scores."""
    for name, data in files.items():
        write_atomic(out / "predictions" / f"{name}.json", data)
    scores, points = _score(out, src, truths, by)
    write_atomic(out / "score.json", orjson.dumps(scores, option=orjson.OPT_INDENT_2))
    _figures(out, src, points, detector)
    return scores


def _page(out: Path, by: list) -> Path | None:
    """The run's HTML report (:func:`synthgen.page.write_report`) at ``out/report.html``; None without matplotlib."""
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return None
    from synthgen.page import write_report

    write_report(out, out / PAGE, by=by)
    return out / PAGE
