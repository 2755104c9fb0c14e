"""Simulated detections for a whole COCO dataset: the library side of ``synthgen jitter``.

:func:`jitter_dataset` turns a COCO ground-truth dict into a COCO results list
(predictions), a *truth sidecar* that says what each prediction is, and a
summary of the counts; :func:`synthgen.formats.results.write_results` writes them atomically;
:func:`jitter_files` does both for a dataset directory.

Truth sidecar (JSON object, ``format`` = :data:`SIDECAR_FORMAT`)
------------------------------------------------------------------
``format`` : str
    ``"synthgen-jitter-truth/1"``.
``seed`` : int
    Seed the predictions were made from.
``spec`` : object
    The :class:`~synthgen.jitter.DetectorSpec` fields as used (ranges as
    2-lists): an IoU range end on a COCO threshold (0.5, 0.55, ..., 0.95) is
    moved inward by :data:`~synthgen.jitter.COCO_MARGIN` (1e-6), so that every
    box is on a known side of it; ``summary.nudged`` says what was asked.
``predictions`` : list of objects, one per entry of the results file, same order
    ``index`` (position in the results file), ``image_id``, ``category_id``,
    ``bbox`` (as in the results file), ``score``, ``kind`` (one of
    :data:`~synthgen.jitter.DETECTION_KINDS`), ``gt_id`` (annotation id of the
    source box, null for background), ``iou`` (IoU with the source box, null for
    background), ``other_iou`` (largest IoU with any other non-crowd annotation
    of the image, any category), ``crowd_overlap`` (largest share of its own
    box area that an ignore region's box, ``iscrowd`` 1, of the image covers:
    the overlap COCO evaluation matches crowd regions by).
``ground_truth`` : list of objects, one per non-crowd annotation, in file order
    ``gt_id``, ``image_id``, ``category_id``, ``outcome`` (one of
    :data:`~synthgen.jitter.OUTCOMES`).
``missed`` : list of int
    ``gt_id`` of every annotation with no prediction.
``summary`` : object
    The summary below.

Summary (JSON object)
---------------------
``images``, ``ground_truth`` (non-crowd annotations), ``ignored_crowd``,
``predictions``; ``kinds`` and ``outcomes`` (count per name, every name
present); ``iou`` (``[min, max]`` of the recorded IoU per sourced kind, null
when there is none); ``ambiguous`` (sourced predictions with ``other_iou >=
0.5``, which an evaluator may match to another box, or with ``crowd_overlap >=
0.5``, which it may ignore); ``background_shortfall``; ``nudged`` (range name ->
``{"asked": [lo, hi], "used": [lo, hi]}`` for every IoU range moved off a COCO
threshold, empty when none was).  Background boxes are kept off the ignore
regions (``crowd_overlap`` below ``background_iou``).

Randomness: one generator from ``SeedSequence(seed, spawn_key=(JITTER_STREAM,))``,
a stream apart from the per-image streams ``spawn_key=(k,)`` of dataset
generation, so reusing a dataset's seed does not correlate the two.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np

from synthgen.errors import InputFileError, UserError, check_number
from synthgen.errors import bad_record as _problem
from synthgen.formats.coco import bbox_from_xyxy, read_coco, structure_problems, xyxy_from_bbox
from synthgen.formats.dataset_dir import ANNOTATIONS
from synthgen.formats.results import SIDECAR_FORMAT, check_result_paths, truth_path_for, write_results
from synthgen.geometry import box_ioa, group_max_overlap
from synthgen.jitter import (
    DETECTION_KINDS,
    OUTCOMES,
    DetectorSpec,
    clear_of_thresholds,
    simulate_detections,
)
from synthgen.seeding import JITTER_STREAM, stream

__all__ = ["SIDECAR_FORMAT", "JITTER_STREAM", "jitter_dataset", "jitter_files", "truth_path_for"]



# Boxes may overshoot their image by float rounding of x + w; beyond this (px) they are an error.
_EDGE_SLACK = 1e-6


def _parse(coco, source: str, keep_inside: bool):
    """Arrays of the non-crowd ground truth and the crowd boxes; raises InputFileError for malformed input."""
    for record, rule, value in structure_problems(coco):
        raise _problem(source, record, rule, value)
    images = coco["images"]
    index_of = {}
    sizes = np.zeros((len(images), 2))
    for k, im in enumerate(images):
        if im["id"] in index_of:
            raise _problem(source, f"images[{k}]", "'id' must be unique", im["id"])
        if im["width"] <= 0 or im["height"] <= 0:
            raise _problem(source, f"images[{k}] (id {im['id']})", "'width' and 'height' must be > 0",
                           [im["width"], im["height"]])
        index_of[im["id"]] = k
        sizes[k] = im["width"], im["height"]
    cat_ids = [c["id"] for c in coco["categories"]]
    if len(set(cat_ids)) != len(cat_ids):
        raise _problem(source, "categories", "ids must be unique", cat_ids)
    known = set(cat_ids)
    seen = set()
    keep = []
    crowd = []
    for i, a in enumerate(coco["annotations"]):
        rec = f"annotations[{i}] (id {a['id']})"
        if a["id"] in seen:
            raise _problem(source, rec, "'id' must be unique", a["id"])
        seen.add(a["id"])
        if a["image_id"] not in index_of:
            raise _problem(source, rec, "'image_id' must name an image", a["image_id"])
        if a["category_id"] not in known:
            raise _problem(source, rec, "'category_id' must name a category", a["category_id"])
        x, y, w, h = a["bbox"]
        if not (all(math.isfinite(v) for v in (x, y, w, h)) and w > 0 and h > 0):
            raise _problem(source, rec, "'bbox' must be finite with width and height > 0", a["bbox"])
        if a.get("iscrowd", 0) == 1:
            crowd.append(a)
            continue
        if keep_inside:
            W, H = sizes[index_of[a["image_id"]]]
            if x < -_EDGE_SLACK or y < -_EDGE_SLACK or x + w > W + _EDGE_SLACK or y + h > H + _EDGE_SLACK:
                raise _problem(
                    source, rec,
                    f"'bbox' must lie inside its {W:g} x {H:g} image to keep predictions inside (or turn keep-inside off)",
                    a["bbox"],
                )
        keep.append(a)
    n = len(keep)
    boxes = xyxy_from_bbox([a["bbox"] for a in keep]) if n else np.zeros((0, 4))
    image = np.array([index_of[a["image_id"]] for a in keep], dtype=np.int64)
    if keep_inside and n:
        # absorb the rounding slack so the boxes meet the library's inside-the-canvas rule exactly
        boxes[:, 0::2] = np.clip(boxes[:, 0::2], 0.0, sizes[image, 0][:, None])
        boxes[:, 1::2] = np.clip(boxes[:, 1::2], 0.0, sizes[image, 1][:, None])
    labels = np.array([a["category_id"] for a in keep], dtype=np.int64)
    ids = np.array([a["id"] for a in keep], dtype=np.int64)
    ignore = (
        xyxy_from_bbox([a["bbox"] for a in crowd]).reshape(-1, 4),
        np.array([index_of[a["image_id"]] for a in crowd], dtype=np.int64),
    )
    return boxes, labels, image, ids, sizes, np.array(sorted(known), dtype=np.int64), ignore


#: The DetectorSpec ranges whose ends :func:`clear_spec` moves off COCO's thresholds.
IOU_RANGES = ("iou", "near_iou", "duplicate_iou")


def clear_spec(spec: DetectorSpec) -> tuple[DetectorSpec, dict]:
    """``spec`` with its IoU ranges moved off COCO's thresholds (:func:`synthgen.jitter.clear_of_thresholds`).

    Returns the spec to use and, per moved range, ``{"asked": [lo, hi], "used": [lo, hi]}``.

    Examples
    --------
    >>> _, nudged = clear_spec(DetectorSpec(iou=(0.5, 0.5)))
    >>> nudged
    {'iou': {'asked': [0.5, 0.5], 'used': [0.500001, 0.500001]}, 'duplicate_iou': {'asked': [0.5, 0.9], 'used': [0.500001, 0.899999]}}
    """
    changes, nudged = {}, {}
    for name in IOU_RANGES:
        asked = getattr(spec, name)
        used = clear_of_thresholds(asked)
        if used != tuple(asked):
            changes[name] = used
            nudged[name] = {"asked": list(asked), "used": list(used)}
    return (dataclasses.replace(spec, **changes) if changes else spec), nudged


def _num(v: float):
    return None if not math.isfinite(v) else float(v)


def _spec_json(spec: DetectorSpec) -> dict:
    return {f.name: (list(v) if isinstance(v := getattr(spec, f.name), tuple) else v) for f in dataclasses.fields(spec)}


def _prediction_records(det, ids, image_ids, on_crowd) -> tuple[list[dict], list[dict]]:
    """The COCO results entries of ``det`` and the sidecar's record of each (same order)."""
    bboxes = bbox_from_xyxy(det.boxes)
    predictions = []
    records = []
    for i in range(len(det)):
        src = int(det.source[i])
        pred = {
            "image_id": image_ids[int(det.image[i])],
            "category_id": int(det.labels[i]),
            "bbox": bboxes[i],
            "score": float(det.scores[i]),
        }
        predictions.append(pred)
        records.append({
            "index": i,
            **pred,
            "kind": str(det.kind[i]),
            "gt_id": int(ids[src]) if src >= 0 else None,
            "iou": _num(det.iou[i]),
            "other_iou": float(det.other_iou[i]),
            "crowd_overlap": float(on_crowd[i]),
        })
    return predictions, records


def _detection_counts(det, on_crowd) -> dict:
    """The summary's counts of ``det``: predictions, per kind and outcome, IoU ranges, ambiguous, shortfall."""
    iou_ranges = {}
    for kind in DETECTION_KINDS[:-1]:
        v = det.iou[det.kind == kind]
        iou_ranges[kind] = [float(v.min()), float(v.max())] if v.size else None
    return {
        "predictions": len(det),
        "kinds": {k: int((det.kind == k).sum()) for k in DETECTION_KINDS},
        "outcomes": {k: int((det.outcome == k).sum()) for k in OUTCOMES},
        "iou": iou_ranges,
        "ambiguous": int(((det.source >= 0) & ((det.other_iou >= 0.5) | (on_crowd >= 0.5))).sum()),
        "background_shortfall": int(det.background_shortfall),
    }


def jitter_dataset(
    coco: dict, *, seed: int, spec: DetectorSpec = DetectorSpec(), source: str = ANNOTATIONS
) -> tuple[list[dict], dict, dict]:
    """Simulated detections for a COCO dataset, with a sidecar saying what each one is.

    Parameters
    ----------
    coco : dict
        COCO ground truth (``images``, ``annotations``, ``categories``); not
        modified.  Crowd annotations are left out of the truth.
    seed : int
        Seed, ``>= 0``; the same seed gives the same outputs byte for byte.
    spec : DetectorSpec
        How the simulated detector errs (see :class:`synthgen.jitter.DetectorSpec`).
    source : str
        Name of the input, used in error messages.

    Returns
    -------
    predictions : list of dict
        COCO results: ``{image_id, category_id, bbox: [x, y, w, h], score}``,
        grouped by image, falling score within each.
    sidecar : dict
        What each prediction is; schema in the module docstring.
    summary : dict
        Counts; schema in the module docstring (also ``sidecar["summary"]``).

    Raises
    ------
    synthgen.errors.InputFileError
        Malformed ground truth (names ``source``, the record and the rule).
    synthgen.errors.ConfigError
        A bad seed.
    """
    check_number("seed", seed, lo=0, integer=True)
    boxes, labels, image, ids, sizes, classes, ignore = _parse(coco, source, spec.keep_inside)
    if spec.relabel > 0 and len(classes) < 2:
        raise UserError(f"{source}: relabelling needs at least 2 categories (got {classes.tolist()})")
    if spec.background > 0 and len(classes) == 0:
        raise UserError(f"{source}: background boxes need at least one category (got none)")
    spec, nudged = clear_spec(spec)
    rng = stream(seed, JITTER_STREAM)
    det = simulate_detections(boxes, labels, sizes, rng=rng, spec=spec, image=image, classes=classes, ignore=ignore)
    on_crowd = group_max_overlap(det.boxes, det.image, ignore[0], ignore[1], measure=box_ioa)

    image_ids = [im["id"] for im in coco["images"]]
    predictions, records = _prediction_records(det, ids, image_ids, on_crowd)
    truth = [
        {"gt_id": int(ids[g]), "image_id": image_ids[int(image[g])], "category_id": int(labels[g]),
         "outcome": str(det.outcome[g])}
        for g in range(len(ids))
    ]
    summary = {
        "images": len(image_ids),
        "ground_truth": len(ids),
        "ignored_crowd": len(ignore[1]),
        **_detection_counts(det, on_crowd),
        "nudged": nudged,
    }
    sidecar = {
        "format": SIDECAR_FORMAT,
        "seed": int(seed),
        "spec": _spec_json(spec),
        "predictions": records,
        "ground_truth": truth,
        "missed": [int(ids[g]) for g in det.missed],
        "summary": summary,
    }
    return predictions, sidecar, summary


def jitter_files(dataset, out, *, truth=None, seed: int = 0, spec: DetectorSpec = DetectorSpec()) -> dict:
    """Read ``DATASET/annotations.json``, simulate detections, write results and sidecar.

    Parameters
    ----------
    dataset : str or Path
        Dataset directory holding ``annotations.json``.
    out : str or Path
        COCO results file to write.
    truth : str or Path, optional
        Truth sidecar to write; default :func:`truth_path_for` ``(out)``.
    seed : int
    spec : DetectorSpec

    Returns
    -------
    dict
        The summary (see the module docstring).

    Raises
    ------
    synthgen.errors.UserError
        Missing dataset, malformed annotations, bad output paths; nothing is
        written then.
    """
    dataset = Path(dataset)
    out = Path(out)
    truth = truth_path_for(out) if truth is None else Path(truth)
    if not dataset.is_dir():
        raise InputFileError(dataset, "is not a dataset directory (expected a directory holding annotations.json)")
    check_result_paths(out, truth)
    ann = dataset / ANNOTATIONS
    coco = read_coco(ann)
    predictions, sidecar, summary = jitter_dataset(coco, seed=seed, spec=spec, source=str(ann))
    write_results(out, truth, predictions, sidecar)
    return summary
