"""A dataset as the report reads it: its COCO JSON, manifest, name and where its images are."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synthgen.errors import InputFileError
from synthgen.formats.dataset_dir import ANNOTATIONS, IMAGES_DIR, MANIFEST


@dataclass(frozen=True, slots=True)
class Dataset:
    """A COCO dataset on disk.

    Attributes
    ----------
    coco : dict
        The parsed COCO JSON.
    source : Path
        The annotation file.
    root : Path
        Directory the images' ``file_name`` values are looked up in (its
        ``images/`` subdirectory first, then itself): the annotation file's
        directory unless ``image_dir`` is given.
    manifest : dict or None
        synthgen's ``manifest.json`` next to the annotation file, if there is one.
    image_dir : Path or None
        A directory to look in first (for layouts that keep images apart from
        the annotation file, e.g. ``annotations/`` beside ``val/``).
    """

    coco: dict
    source: Path
    root: Path
    manifest: dict | None = None
    image_dir: Path | None = None

    @property
    def name(self) -> str:
        """A short name for titles: the dataset directory's name."""
        if self.source.name != ANNOTATIONS:
            return self.source.name
        return self.root.resolve().name or str(self.root)

    def image_path(self, image: Mapping) -> Path:
        """Path of an image record's file (the first candidate that exists)."""
        name = str(image.get("file_name", ""))
        first = (self.image_dir / name,) if self.image_dir is not None else ()
        cands = (*first, self.root / IMAGES_DIR / name, self.root / name)
        for cand in cands:
            if cand.is_file():
                return cand
        return cands[0]


def open_dataset(path, *, image_dir=None) -> Dataset:
    """Open a dataset directory (its ``annotations.json``) or a COCO JSON file.

    Parameters
    ----------
    path : str or Path
    image_dir : str or Path, optional
        Where the images are, when not beside the annotation file (see
        :class:`Dataset`).

    Raises
    ------
    synthgen.errors.InputFileError
        When the file is missing or not a COCO file.
    """
    from synthgen.formats.coco import read_coco

    path = Path(path)
    source = path / ANNOTATIONS if path.is_dir() else path
    if not source.exists():
        what = "has no annotations.json" if path.is_dir() else "does not exist"
        raise InputFileError(path, what)
    coco = read_coco(source)
    manifest = None
    mpath = source.parent / MANIFEST
    if mpath.is_file():
        import orjson

        try:
            manifest = orjson.loads(mpath.read_bytes())
        except (OSError, orjson.JSONDecodeError):
            manifest = None
        if not isinstance(manifest, dict):
            manifest = None
    if image_dir is not None and not Path(image_dir).is_dir():
        raise InputFileError(image_dir, "is not a directory")
    return Dataset(
        coco=coco, source=source, root=source.parent, manifest=manifest,
        image_dir=None if image_dir is None else Path(image_dir),
    )


def load_image(ds: Dataset, image: Mapping) -> np.ndarray:
    from synthgen.formats.images import read_image

    path = ds.image_path(image)
    try:
        arr = read_image(path)
    except OSError as e:
        raise InputFileError(path, f"cannot be read ({e.strerror or e})") from None
    if arr is None:
        raise InputFileError(path, "is not an image file OpenCV can decode")
    return arr


def overlay_predictions(ds: Dataset, pred, truth=None):
    """Predictions to draw over a dataset, each with its kind, and the annotation ids none found.

    The kinds come from a truth sidecar written by ``synthgen jitter`` when ``truth`` is given, else
    from COCO's matcher at IoU 0.5 (:func:`synthgen.evaluate.classify.classify_predictions`).

    Returns
    -------
    (Predictions, missed, how)
        ``missed`` the ids of the annotations no prediction found, ``how`` a few words saying where the
        kinds came from (for a caption).
    """
    from synthgen.evaluate.classify import classify_predictions, read_prediction_boxes
    from synthgen.formats.results import read_truth_sidecar

    predictions = read_prediction_boxes(pred)
    if truth is not None:
        side = read_truth_sidecar(truth, len(predictions))
        return predictions.with_kinds(side.kinds), side.missed, f"kinds from {truth}"
    predictions, missed = classify_predictions(ds.coco, predictions)
    return predictions, missed, "kinds by matching at IoU 0.5"


def predictions_on(tiles, predictions) -> int:
    """How many of ``predictions`` fall on the images of ``tiles`` (what a sheet actually draws)."""
    on_sheet = {t.image_id for t in tiles}
    return sum(int(i) in on_sheet for i in predictions.image_id)
