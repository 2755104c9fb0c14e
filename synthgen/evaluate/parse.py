"""Reading COCO ground truth and a results list into arrays, rule by rule, for :mod:`synthgen.evaluate.cocoeval`.

Each record that breaks a rule raises :class:`~synthgen.errors.InputFileError` naming the record and the rule.
Boxes stay COCO ``[x, y, w, h]`` as stored (see :mod:`synthgen.evaluate.cocoeval` for why).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from synthgen.errors import InputFileError, is_int, is_number


@dataclass(frozen=True, slots=True)
class Truth:
    """Ground truth, restricted to listed images and categories, in file order."""

    image_ids: np.ndarray  # (I,) sorted unique image ids
    cat_ids: np.ndarray  # (K,) sorted unique category ids
    cat_names: tuple[str, ...]
    img: np.ndarray  # (G,) image index
    cat: np.ndarray  # (G,) category index
    box: np.ndarray  # (G, 4) COCO [x, y, w, h]
    area: np.ndarray  # (G,) the annotation's "area"
    crowd: np.ndarray  # (G,) bool
    records: tuple  # (G,) the annotation dicts, for facts


@dataclass(frozen=True, slots=True)
class Preds:
    img: np.ndarray  # (N,) image index
    cat: np.ndarray  # (N,) category index, -1 when not a ground-truth category
    box: np.ndarray  # (N, 4) COCO [x, y, w, h]
    score: np.ndarray  # (N,)
    unknown: tuple = ()  # sorted category ids of predictions that name no ground-truth category


def _int_array(values) -> np.ndarray | None:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.dtype.kind not in "iu":
        return None
    return arr.astype(np.int64)


def _real_array(values, shape_tail=()) -> np.ndarray | None:
    try:
        arr = np.asarray(values)
    except ValueError:  # ragged
        return None
    if arr.dtype.kind not in "iuf" or arr.shape[1:] != shape_tail or arr.ndim != 1 + len(shape_tail):
        return None
    return arr.astype(np.float64)


def show_value(v) -> str:
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def _check_box(name: str, where: str, bbox) -> None:
    rule = "'bbox' must be [x, y, width, height]: 4 finite numbers with width >= 0 and height >= 0"
    ok = isinstance(bbox, (list, tuple)) and len(bbox) == 4 and all(is_number(v) for v in bbox)
    ok = ok and all(math.isfinite(v) for v in bbox) and bbox[2] >= 0 and bbox[3] >= 0
    if not ok:
        raise InputFileError(name, f"{where}: {rule} (got {show_value(bbox)})")


def parse_truth(coco_gt, name: str) -> Truth:
    if not isinstance(coco_gt, Mapping):
        raise InputFileError(name, "must be a COCO JSON object with 'images', 'annotations', 'categories'")
    for key in ("images", "annotations", "categories"):
        if not isinstance(coco_gt.get(key), list):
            raise InputFileError(name, f"'{key}' must be a list (got {show_value(coco_gt.get(key))})")
    image_ids = []
    for i, im in enumerate(coco_gt["images"]):
        if not isinstance(im, Mapping) or not is_int(im.get("id")):
            raise InputFileError(name, f"images[{i}]: 'id' must be an integer (got {show_value(im)})")
        image_ids.append(int(im["id"]))
    cats = {}
    for i, c in enumerate(coco_gt["categories"]):
        if not isinstance(c, Mapping) or not is_int(c.get("id")):
            raise InputFileError(name, f"categories[{i}]: 'id' must be an integer (got {show_value(c)})")
        cats[int(c["id"])] = str(c.get("name", c["id"]))
    image_arr = np.unique(np.asarray(image_ids, dtype=np.int64))
    cat_arr = np.asarray(sorted(cats), dtype=np.int64)
    cat_index = {c: k for k, c in enumerate(cat_arr.tolist())}

    anns = coco_gt["annotations"]
    cols = _fast_annotations(anns, image_arr, cat_arr)
    if cols is None:
        cols = _scan_annotations(anns, name, set(image_ids), cat_index)
    img, cat, box, area, crowd = cols
    return Truth(
        image_ids=image_arr,
        cat_ids=cat_arr,
        cat_names=tuple(cats[c] for c in cat_arr.tolist()),
        img=np.searchsorted(image_arr, img).astype(np.int64),
        cat=np.searchsorted(cat_arr, cat).astype(np.int64),
        box=box,
        area=area,
        crowd=crowd,
        records=tuple(anns),
    )


_ANN_KEYS = ("id", "image_id", "category_id", "bbox", "area", "iscrowd")


def _member(sorted_ids: np.ndarray, values: np.ndarray) -> np.ndarray:
    if len(sorted_ids) == 0:
        return np.zeros(len(values), dtype=bool)
    pos = np.minimum(np.searchsorted(sorted_ids, values), len(sorted_ids) - 1)
    return sorted_ids[pos] == values


def _fast_annotations(anns: list, image_arr: np.ndarray, cat_arr: np.ndarray):
    """Columns of well-formed annotations, or None to fall back to the record scan."""
    n = len(anns)
    if n == 0:
        return (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((0, 4)), np.zeros(0), np.zeros(0, bool))
    try:
        raw = [[a[k] for a in anns] for k in _ANN_KEYS]
    except (KeyError, TypeError, IndexError):
        return None
    ids, img, cat, crowd = (_int_array(raw[i]) for i in (0, 1, 2, 5))
    box, area = _real_array(raw[3], (4,)), _real_array(raw[4])
    if any(v is None for v in (ids, img, cat, crowd, box, area)):
        return None
    ok = (
        np.all(ids != 0)
        and len(np.unique(ids)) == n
        and np.all(_member(image_arr, img))
        and np.all(_member(cat_arr, cat))
        and np.isfinite(box).all()
        and np.all(box[:, 2:] >= 0)
        and np.isfinite(area).all()
        and np.all((crowd == 0) | (crowd == 1))
    )
    return (img, cat, box, area, crowd.astype(bool)) if ok else None


def _scan_annotations(anns: list, name: str, image_set: set, cat_index: dict):
    """Check annotations one by one; raise for the first bad one, else return columns."""
    seen_ids = set()
    img, cat, box, area, crowd = [], [], [], [], []
    for i, a in enumerate(anns):
        where = f"annotations[{i}]"
        if not isinstance(a, Mapping):
            raise InputFileError(name, f"{where}: must be an object (got {show_value(a)})")
        for key in _ANN_KEYS:
            if key not in a:
                raise InputFileError(name, f"{where}: missing key '{key}'")
        aid = a["id"]
        if not is_int(aid) or aid == 0:
            # COCO evaluation stores matches by id and reads 0 as "unmatched".
            raise InputFileError(name, f"{where}: 'id' must be a non-zero integer (got {show_value(aid)})")
        if aid in seen_ids:
            raise InputFileError(name, f"{where}: 'id' must be unique (got {aid} again)")
        seen_ids.add(aid)
        if not is_int(a["image_id"]) or a["image_id"] not in image_set:
            raise InputFileError(
                name, f"{where}: 'image_id' must be the id of a listed image (got {show_value(a['image_id'])})"
            )
        if not is_int(a["category_id"]) or a["category_id"] not in cat_index:
            raise InputFileError(
                name, f"{where}: 'category_id' must be the id of a listed category (got {show_value(a['category_id'])})"
            )
        _check_box(name, where, a["bbox"])
        if not is_number(a["area"]) or not math.isfinite(a["area"]):
            raise InputFileError(name, f"{where}: 'area' must be a finite number (got {show_value(a['area'])})")
        if a["iscrowd"] not in (0, 1) or isinstance(a["iscrowd"], float):
            raise InputFileError(name, f"{where}: 'iscrowd' must be 0 or 1 (got {show_value(a['iscrowd'])})")
        img.append(int(a["image_id"]))
        cat.append(int(a["category_id"]))
        box.append([float(v) for v in a["bbox"]])
        area.append(float(a["area"]))
        crowd.append(bool(a["iscrowd"]))
    g = len(img)
    return (
        np.asarray(img, dtype=np.int64),
        np.asarray(cat, dtype=np.int64),
        np.asarray(box, dtype=np.float64).reshape(g, 4),
        np.asarray(area, dtype=np.float64),
        np.asarray(crowd, dtype=bool),
    )


_PRED_KEYS = ("image_id", "category_id", "bbox", "score")


def _bad_prediction(predictions, name: str, truth: Truth) -> None:
    """Scan records one by one and raise for the first that breaks a rule."""
    known = set(truth.image_ids.tolist())
    for i, p in enumerate(predictions):
        where = f"record {i}"
        if not isinstance(p, Mapping):
            raise InputFileError(name, f"{where}: must be an object {{image_id, category_id, bbox, score}} (got {show_value(p)})")
        for key in _PRED_KEYS:
            if key not in p:
                raise InputFileError(name, f"{where}: missing key '{key}'")
        if not is_int(p["image_id"]):
            raise InputFileError(name, f"{where}: 'image_id' must be an integer (got {show_value(p['image_id'])})")
        if p["image_id"] not in known:
            raise InputFileError(
                name, f"{where}: 'image_id' must be the id of an image in the ground truth (got {p['image_id']})"
            )
        if not is_int(p["category_id"]):
            raise InputFileError(name, f"{where}: 'category_id' must be an integer (got {show_value(p['category_id'])})")
        _check_box(name, where, p["bbox"])
        if not is_number(p["score"]) or not math.isfinite(p["score"]):
            raise InputFileError(name, f"{where}: 'score' must be a finite number (got {show_value(p['score'])})")


def parse_predictions(predictions, name: str, truth: Truth) -> Preds:
    if not isinstance(predictions, list):
        raise InputFileError(
            name,
            "predictions must be a JSON array of {image_id, category_id, bbox, score} records "
            f"(got {type(predictions).__name__})",
        )
    n = len(predictions)
    try:
        cols = [[p[k] for p in predictions] for k in _PRED_KEYS]
    except (KeyError, TypeError, IndexError):
        cols = None
    arrays = None
    if cols is not None:
        img = _int_array(cols[0]) if n else np.zeros(0, np.int64)
        cat = _int_array(cols[1]) if n else np.zeros(0, np.int64)
        box = _real_array(cols[2], (4,)) if n else np.zeros((0, 4))
        score = _real_array(cols[3]) if n else np.zeros(0)
        if img is not None and cat is not None and box is not None and score is not None:
            arrays = (img, cat, box, score)
    ok = arrays is not None
    if ok:
        img, cat, box, score = arrays
        ok = bool(
            np.all(_member(truth.image_ids, img))
            and np.isfinite(box).all()
            and np.all(box[:, 2:] >= 0)
            and np.isfinite(score).all()
        )
    if not ok:
        # Find and report the first bad record; records that pass are read one by one.
        _bad_prediction(predictions, name, truth)
        img = np.array([int(p["image_id"]) for p in predictions], dtype=np.int64)
        cat = np.array([int(p["category_id"]) for p in predictions], dtype=np.int64)
        box = np.array([[float(v) for v in p["bbox"]] for p in predictions], dtype=np.float64).reshape(n, 4)
        score = np.array([float(p["score"]) for p in predictions], dtype=np.float64)
    pos = np.searchsorted(truth.image_ids, img)
    in_gt = _member(truth.cat_ids, cat)
    cpos = np.searchsorted(truth.cat_ids, cat)
    return Preds(
        img=pos.astype(np.int64), cat=np.where(in_gt, cpos, -1).astype(np.int64), box=box, score=score,
        unknown=tuple(np.unique(cat[~in_gt]).tolist()),
    )


