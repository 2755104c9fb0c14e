"""The files a detector's answers travel in: a COCO results file and synthgen's truth sidecar.

* results file: a JSON array of ``{image_id, category_id, bbox: [x, y, w, h], score}``
  (the COCO results format), read by :func:`read_predictions`;
* truth sidecar (format :data:`SIDECAR_FORMAT`, written by ``synthgen jitter`` beside the
  results file as ``PRED.truth.json``): what each prediction is, one of
  :data:`PREDICTION_KINDS`, and which ground truth was missed; read by
  :func:`read_truth_sidecar`, which also takes the close aliases other tools use.

:func:`write_results` writes a results file and its sidecar together, atomically.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import orjson

from synthgen._io import read_json, write_atomic
from synthgen.errors import InputFileError

__all__ = [
    "SIDECAR_FORMAT",
    "DETECTION_KINDS",
    "PREDICTION_KINDS",
    "read_predictions",
    "write_results",
    "truth_path_for",
    "check_result_paths",
    "read_truth_sidecar",
    "TruthSidecar",
]

#: Format tag of the truth sidecar.
SIDECAR_FORMAT = "synthgen-jitter-truth/1"
#: What a simulated detection is (see :class:`synthgen.jitter.Detections`).
DETECTION_KINDS = ("true_positive", "duplicate", "localization", "wrong_class", "background")
#: What a prediction is: a detection kind, or ``ignored`` for one that COCO evaluation matches
#: to an ignore region (neither true nor false).
PREDICTION_KINDS = (*DETECTION_KINDS, "ignored")


def read_predictions(path) -> list:
    """Load a COCO results file (a JSON array of records).

    Raises
    ------
    InputFileError
        When the file is missing, not JSON, or not an array.
    """
    path = Path(path)
    data = read_json(path)
    if not isinstance(data, list):
        raise InputFileError(
            path,
            "predictions must be a JSON array of {image_id, category_id, bbox, score} records "
            f"(got {type(data).__name__})",
        )
    return data


def truth_path_for(out) -> Path:
    """Default sidecar path next to a results file: ``PRED.json`` -> ``PRED.truth.json``."""
    out = Path(out)
    return out.with_name(out.stem + ".truth.json")


def check_result_paths(out: Path, truth: Path) -> None:
    """Refuse, before anything is written, a results or sidecar path that cannot be written or that coincide."""
    for path in (out, truth):
        if not path.parent.is_dir():
            raise InputFileError(path, "cannot be written: its directory does not exist")
        if path.is_dir():
            raise InputFileError(path, "cannot be written: it is a directory")
    if out.resolve() == truth.resolve():
        raise InputFileError(truth, "the truth sidecar must not be the predictions file")


def write_results(out, truth, predictions: list[dict], sidecar: dict) -> None:
    """Write the results file and its truth sidecar, each atomically.

    Both documents are serialized and both paths checked before anything is
    written, so bad paths leave no file behind.

    Parameters
    ----------
    out : str or Path
        COCO results file (JSON array).
    truth : str or Path
        Truth sidecar (JSON object).
    predictions, sidecar
        As returned by :func:`jitter_dataset`.

    Raises
    ------
    synthgen.errors.InputFileError
        When a directory is missing or both paths are the same.
    """
    out, truth = Path(out), Path(truth)
    check_result_paths(out, truth)
    pred_bytes = orjson.dumps(predictions)
    truth_bytes = orjson.dumps(sidecar)
    write_atomic(truth, truth_bytes)
    write_atomic(out, pred_bytes)


# Names other files may use for the same kinds.
_KIND_ALIASES = {
    "tp": "true_positive",
    "true positive": "true_positive",
    "truepositive": "true_positive",
    "dup": "duplicate",
    "localisation": "localization",
    "localization_error": "localization",
    "localisation_error": "localization",
    "loc": "localization",
    "mislocated": "localization",
    "wrong_label": "wrong_class",
    "class": "wrong_class",
    "relabelled": "wrong_class",
    "relabeled": "wrong_class",
    "bg": "background",
    "false_positive": "background",
    "distractor": "background",
}
_SIDECAR_KIND_KEYS = ("kind", "what", "status", "type")
_SIDECAR_LIST_KEYS = ("predictions", "records", "detections", "items")
_SIDECAR_INDEX_KEYS = ("index", "prediction")


def _kind_name(value) -> str | None:
    if not isinstance(value, str):
        return None
    v = value.strip().lower().replace("-", "_")
    if v in PREDICTION_KINDS:
        return v
    return _KIND_ALIASES.get(v, _KIND_ALIASES.get(v.replace("_", " ")))


@dataclass(frozen=True, slots=True)
class TruthSidecar:
    """What a truth sidecar says.

    Attributes
    ----------
    kinds : tuple of str
        One of :data:`PREDICTION_KINDS` per prediction, in the results file's order.
    missed : frozenset of int or None
        Annotation ids no prediction was made from (None when the file does not say).
    """

    kinds: tuple[str, ...]
    missed: frozenset | None = None


def read_truth_sidecar(path, n_predictions: int) -> TruthSidecar:
    """Read what each prediction is from a truth sidecar written by ``synthgen jitter``.

    The file is read defensively.  Accepted shapes: a JSON array with one
    record per prediction, in the predictions file's order, or an object holding
    such an array under ``"predictions"`` (or ``"records"``, ``"detections"``,
    ``"items"``).  A record gives the kind under ``"kind"`` (or ``"what"``,
    ``"status"``, ``"type"``), one of :data:`PREDICTION_KINDS` or a close alias
    (``"localization_error"``, ``"tp"``, ...); a record with an integer
    ``"index"`` (or ``"prediction"``) refers to that position in the
    predictions file instead of its own position.  A top-level ``"missed"``
    list of annotation ids, when present, says which ground truth has no
    prediction.  These are the keys ``synthgen jitter`` writes
    (``synthgen.jitter.coco``, format ``synthgen-jitter-truth/1``).

    Parameters
    ----------
    path : str or Path
    n_predictions : int
        Records in the predictions file.

    Returns
    -------
    TruthSidecar

    Raises
    ------
    synthgen.errors.InputFileError
        When the file has no such records, a record's kind is unknown, or the
        records do not cover every prediction.
    """
    import orjson

    path = Path(path)
    try:
        data = orjson.loads(path.read_bytes())
    except OSError as e:
        raise InputFileError(path, f"cannot be read ({e.strerror or e})") from None
    except orjson.JSONDecodeError as e:
        raise InputFileError(path, f"is not valid JSON ({e.msg})") from None
    records = data
    if isinstance(data, dict):
        records = next((data[k] for k in _SIDECAR_LIST_KEYS if isinstance(data.get(k), list)), None)
    if not isinstance(records, list):
        raise InputFileError(
            path, "must be a JSON array of per-prediction records, or an object with one under 'predictions'"
        )
    kinds: list[str | None] = [None] * n_predictions
    for i, r in enumerate(records):
        if not isinstance(r, dict):
            raise InputFileError(path, f"record {i} must be an object (got {type(r).__name__})")
        raw = next((r[k] for k in _SIDECAR_KIND_KEYS if k in r), None)
        kind = _kind_name(raw)
        if kind is None:
            raise InputFileError(
                path, f"record {i}: the kind must be one of {', '.join(PREDICTION_KINDS)} (got {raw!r})"
            )
        j = next((r[k] for k in _SIDECAR_INDEX_KEYS if type(r.get(k)) is int), i)
        if not 0 <= j < n_predictions:
            raise InputFileError(
                path, f"record {i} refers to prediction {j}, but the predictions file has {n_predictions}"
            )
        kinds[j] = kind
    missing = [j for j, k in enumerate(kinds) if k is None]
    if missing:
        raise InputFileError(
            path, f"says nothing about {len(missing)} of {n_predictions} predictions (first: prediction {missing[0]})"
        )
    missed = None
    if isinstance(data, dict) and isinstance(data.get("missed"), list):
        missed = frozenset(int(g) for g in data["missed"] if type(g) is int)
    return TruthSidecar(tuple(kinds), missed)  # type: ignore[arg-type]


