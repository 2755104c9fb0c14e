"""Known-answer helpers, hypothesis strategies and pytest fixtures for testing detection code.

Installed as a pytest plugin (entry point ``synthgen`` in group ``pytest11``),
so after ``pip install 'synthgen-shapes[testing]'`` the fixtures :func:`synth_scene`,
:func:`synth_dataset` and :func:`synth_predictions` are available in any test
suite with no set-up.  The plain helpers import neither pytest nor hypothesis;
the strategies import hypothesis when called.

Boxes are float64 ``(N, 4)`` xyxy in continuous image coordinates (see
:mod:`synthgen.geometry`).

Reference implementations
-------------------------
:func:`expected_iou_matrix` and :func:`expected_nms` are deliberately slow and
literal: plain Python loops over floats, written from the definitions, so that
a vectorized implementation under test is checked against something that
shares none of its code.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = [
    "expected_iou_matrix",
    "expected_nms",
    "pair_at_iou",
    "dense_masks",
    "small_config",
    "small_scene",
    "small_dataset",
    "MARKER_KEYS",
    "check_marker_options",
    "boxes",
    "box_pairs",
    "scenes",
    "coco_datasets",
    "evaluator_cases",
]

# --------------------------------------------------------------------------- plain helpers


def expected_iou_matrix(a, b) -> np.ndarray:
    """IoU of every box in ``a`` with every box in ``b``, by a double loop from the definition.

    ``IoU = area(A n B) / area(A u B)`` with continuous boxes (no "+1"); 0 when
    the union is empty.

    Parameters
    ----------
    a : array_like of shape (N, 4)
    b : array_like of shape (M, 4)

    Returns
    -------
    ndarray of shape (N, M), float64

    Examples
    --------
    >>> expected_iou_matrix([[0, 0, 2, 2]], [[1, 1, 3, 3]]).tolist()  # 1/7
    [[0.14285714285714285]]
    """
    a = [tuple(map(float, r)) for r in np.asarray(a, dtype=float).reshape(-1, 4)]
    b = [tuple(map(float, r)) for r in np.asarray(b, dtype=float).reshape(-1, 4)]
    out = np.zeros((len(a), len(b)))
    for i, (ax0, ay0, ax1, ay1) in enumerate(a):
        for j, (bx0, by0, bx1, by1) in enumerate(b):
            iw = min(ax1, bx1) - max(ax0, bx0)
            ih = min(ay1, by1) - max(ay0, by0)
            inter = iw * ih if iw > 0 and ih > 0 else 0.0
            union = (ax1 - ax0) * (ay1 - ay0) + (bx1 - bx0) * (by1 - by0) - inter
            out[i, j] = inter / union if union > 0 else 0.0
    return out


def expected_nms(boxes, scores, iou_threshold: float) -> np.ndarray:
    """Indices kept by greedy non-maximum suppression, from the definition.

    Rule: visit boxes by descending score (equal scores: lower index first);
    keep a box unless a box already kept overlaps it with IoU strictly greater
    than ``iou_threshold``.  Returns kept indices in the order they were kept
    (descending score).  This is the common greedy NMS (common practice: boxes
    overlapping by more than the threshold are suppressed, equality is kept).

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
    scores : array_like of shape (N,)
    iou_threshold : float

    Returns
    -------
    ndarray of shape (K,), int64

    Examples
    --------
    >>> expected_nms([[0, 0, 10, 10], [1, 0, 11, 10], [20, 20, 30, 30]], [0.9, 0.8, 0.7], 0.5).tolist()
    [0, 2]
    """
    boxes = np.asarray(boxes, dtype=float).reshape(-1, 4)
    scores = [float(s) for s in np.asarray(scores, dtype=float).reshape(-1)]
    if len(scores) != len(boxes):
        raise ValueError(f"boxes and scores differ in length ({len(boxes)} and {len(scores)})")
    order = sorted(range(len(scores)), key=lambda i: (-scores[i], i))
    kept: list[int] = []
    for i in order:
        if all(expected_iou_matrix(boxes[i : i + 1], boxes[k : k + 1])[0, 0] <= iou_threshold for k in kept):
            kept.append(i)
    return np.array(kept, dtype=np.int64)


def pair_at_iou(box, iou: float, *, axis: int = 0) -> np.ndarray:
    """A box of the same size as ``box`` whose IoU with it is exactly ``iou``, shifted along one axis.

    Two equal ``w x h`` boxes offset by ``d`` along x have IoU ``(w - d) / (w + d)``,
    so the offset for IoU ``t`` is ``d = w (1 - t) / (1 + t)`` (analytic geometry).

    Parameters
    ----------
    box : array_like of shape (4,)
    iou : float in (0, 1]
    axis : 0 (shift along x) or 1 (along y)

    Examples
    --------
    >>> np.round(pair_at_iou([0, 0, 10, 10], 1 / 3), 9).tolist()
    [5.0, 0.0, 15.0, 10.0]
    """
    if not 0.0 < iou <= 1.0:
        raise ValueError(f"iou must be in (0, 1] (got {iou})")
    b = np.asarray(box, dtype=float).copy()
    length = b[2 + axis] - b[axis]
    d = length * (1.0 - iou) / (1.0 + iou)
    b[axis] += d
    b[2 + axis] += d
    return b


def dense_masks(scene) -> np.ndarray:
    """A scene's visible-support masks as one bool array of shape (N, H, W)."""
    h, w = scene.image.shape[:2]
    out = np.zeros((len(scene.masks), h, w), dtype=bool)
    for i, (row0, col0, patch) in enumerate(scene.masks):
        out[i, row0 : row0 + patch.shape[0], col0 : col0 + patch.shape[1]] = patch
    return out


def small_config(
    *,
    width: int = 96,
    height: int = 72,
    count: tuple[int, int] | int = (3, 6),
    size: tuple[float, float] | float = (6.0, 30.0),
    layout: str = "scatter",
    seed: int = 0,
    images: int = 4,
    overrides: tuple[str, ...] | list[str] = (),
):
    """A small, fast :class:`synthgen.config.Config` (more keys through ``overrides``).

    Raises
    ------
    synthgen.errors.ConfigError
        A bad value, naming this function's keyword (``'size'``) when the
        keyword's own shape is wrong, else the config key it sets.
    """
    from synthgen.config import load_config

    c = _number_or_pair("count", count)
    s = _number_or_pair("size", size)
    return load_config(
        overrides=[
            f"canvas.width={width}",
            f"canvas.height={height}",
            f"objects.count=[{c[0]}, {c[1]}]",
            f"objects.size=[{s[0]}, {s[1]}]",
            f'objects.layout="{layout}"',
            f"seed={seed}",
            f"count={images}",
            *overrides,
        ]
    )


def _number_or_pair(name: str, value) -> tuple:
    """``v -> (v, v)``, ``(lo, hi) -> (lo, hi)``; anything else is a ConfigError naming ``name``."""
    from synthgen.errors import ConfigError

    def num(v):
        return isinstance(v, (int, float)) and not isinstance(v, bool)

    if num(value):
        return (value, value)
    if isinstance(value, (tuple, list)) and len(value) == 2 and all(num(v) for v in value):
        return tuple(value)
    raise ConfigError(name, "must be a number or a pair (min, max)", value)


def small_scene(index: int = 0, **kwargs):
    """One composed :class:`synthgen.scene.Scene` of :func:`small_config` (same keywords)."""
    from synthgen.scene import render_scene

    return render_scene(small_config(**kwargs), index)


def small_dataset(path, *, formats: tuple[str, ...] = ("coco",), **kwargs) -> Path:
    """Write a small dataset to ``path`` (same keywords as :func:`small_config`); return the directory.

    ``formats`` may add the other formats ``synthgen export`` writes (e.g. ``("coco", "voc", "yolo")``).
    """
    from synthgen.run.make import make_dataset

    path = Path(path)
    make_dataset(small_config(**kwargs), path, workers=1)
    extra = tuple(f for f in formats if f != "coco")
    if extra:
        from synthgen.formats import export

        export(path, extra)
    return path


# --------------------------------------------------------------------------- hypothesis strategies


def _strategies():
    """``hypothesis.strategies``, or an ImportError saying which extra brings it."""
    try:
        from hypothesis import strategies
    except ImportError:
        from synthgen import DISTRIBUTION

        raise ImportError(
            f"synthgen's strategies need hypothesis, which is not installed: pip install '{DISTRIBUTION}[testing]'"
        ) from None
    return strategies


def boxes(
    canvas: tuple[float, float] = (640.0, 480.0),
    *,
    min_size: float = 1.0,
    max_size: float | None = None,
    n: int | tuple[int, int] = (0, 20),
):
    """Strategy for valid box arrays of shape (N, 4) inside a ``(width, height)`` canvas.

    Every box has ``min_size <= x1 - x0, y1 - y0 <= max_size`` and lies in
    ``[0, width] x [0, height]``.
    """
    st = _strategies()

    width, height = float(canvas[0]), float(canvas[1])
    top = min(width, height) if max_size is None else min(max_size, width, height)
    if not 0 < min_size <= top:
        raise ValueError(f"need 0 < min_size <= max_size <= canvas side (got {min_size}, {top})")
    lo, hi = (n, n) if isinstance(n, int) else n
    unit = st.floats(0.0, 1.0, allow_nan=False)

    @st.composite
    def one(draw):
        w = min_size + draw(unit) * (top - min_size)
        h = min_size + draw(unit) * (top - min_size)
        x0 = draw(unit) * (width - w)
        y0 = draw(unit) * (height - h)
        return [x0, y0, min(x0 + w, width), min(y0 + h, height)]

    return st.lists(one(), min_size=lo, max_size=hi).map(lambda rows: np.array(rows, dtype=np.float64).reshape(-1, 4))


def box_pairs(iou: tuple[float, float] = (0.05, 1.0), canvas: tuple[float, float] = (640.0, 480.0), *, min_size: float = 2.0):
    """Strategy for ``(a, b, t)``: two boxes of shape (4,) whose IoU is exactly ``t`` in ``iou``.

    ``b`` has ``a``'s size and is shifted along x or y by the analytic offset
    of :func:`pair_at_iou`; both lie inside the canvas.
    """
    st = _strategies()

    lo, hi = iou
    if not 0.0 < lo <= hi <= 1.0:
        raise ValueError(f"iou must be (lo, hi) with 0 < lo <= hi <= 1 (got {iou})")
    width, height = float(canvas[0]), float(canvas[1])

    @st.composite
    def pair(draw):
        t = draw(st.floats(lo, hi, allow_nan=False))
        axis = draw(st.sampled_from((0, 1)))
        side = (width, height)
        # the shifted box must fit: length + d <= side, with d = length (1 - t) / (1 + t)
        limit = side[axis] * (1.0 + t) / 2.0
        w = draw(st.floats(min_size, max(min_size, min(limit, width) / 2.0)))
        h = draw(st.floats(min_size, max(min_size, min(limit, height) / 2.0)))
        # positions below 1e-300 px trip polygon references (GEOS mis-measures them): use 0 there
        unit = st.floats(0.0, 1.0).map(lambda v: 0.0 if v < 1e-300 else v)
        ux, uy = draw(unit), draw(unit)
        a, b = _placed_pair(t, axis, w, h, ux, uy, width, height)
        return a, b, t

    return pair()


def _placed_pair(t, axis, w, h, ux, uy, width, height) -> tuple[np.ndarray, np.ndarray]:
    """Boxes ``a`` (``w x h`` at fractions ``ux, uy`` of the free room) and its IoU-``t`` shift, inside the canvas."""
    d = (w, h)[axis] * (1.0 - t) / (1.0 + t)
    # a margin of 1e-9 of the side keeps x0 + w + d, rounded, inside the canvas
    room_x = width * (1.0 - 1e-9) - w - (d if axis == 0 else 0.0)
    room_y = height * (1.0 - 1e-9) - h - (d if axis == 1 else 0.0)
    x0 = ux * max(room_x, 0.0)
    y0 = uy * max(room_y, 0.0)
    a = np.array([x0, y0, x0 + w, y0 + h])
    return a, pair_at_iou(a, t, axis=axis)


def scenes(
    *,
    width: int = 96,
    height: int = 72,
    count: tuple[int, int] = (0, 8),
    size: tuple[float, float] = (2.0, 40.0),
    layouts: tuple[str, ...] = ("scatter",),
):
    """Strategy for composed scenes (:class:`synthgen.scene.Scene`) with all their facts."""
    st = _strategies()

    from synthgen.scene import render_scene

    @st.composite
    def scene(draw):
        seed = draw(st.integers(0, 2**32 - 1))
        layout = draw(st.sampled_from(layouts))
        cfg = small_config(width=width, height=height, count=count, size=size, layout=layout, seed=seed, images=1)
        return render_scene(cfg, 0)

    return scene()


#: Recall points of COCO-style AP (REFERENCE.md: COCO-style AP, 101 points).
_RECALL_POINTS = np.linspace(0.0, 1.0, 101)
#: IoU thresholds of COCO-style AP, 0.50:0.05:0.95.
_IOU_THRESHOLDS = np.linspace(0.5, 0.95, 10)


def coco_datasets(
    *,
    images: tuple[int, int] = (1, 4),
    objects: tuple[int, int] = (1, 6),
    categories: int = 3,
    cases: tuple[str, ...] = ("exact", "shifted", "missed"),
):
    """Strategy for ``(gt, predictions, expected)``: a COCO dict, results and their known AP.

    Ground-truth boxes are laid out in well separated cells, so a prediction
    can only ever match its own object, and the answer has a closed form:

    * ``"exact"``: predictions equal the ground truth; AP, AP50 and AP75 are 1.
    * ``"shifted"``: every prediction is its object shifted to one IoU ``t``;
      AP50 and AP75 are 1 or 0 as ``t`` reaches them and AP (0.50:0.95) is the
      share of the ten IoU thresholds at or below ``t``.
    * ``"missed"``: some objects get no prediction, the rest exact ones, so
      precision is 1 up to each category's recall ``r``; its AP at every
      threshold is the share of the 101 recall points at or below ``r``, and
      the dataset's AP is the mean over categories.

    ``expected`` is ``{"case", "AP", "AP50", "AP75"}``.
    """
    st = _strategies()

    @st.composite
    def dataset(draw):
        case = draw(st.sampled_from(cases))
        n_images = draw(st.integers(*images))
        cell = 64.0
        side = 6  # cells per row: objects never share a cell
        imgs, anns, preds = [], [], []
        t = None
        if case == "shifted":
            t = draw(st.floats(0.3, 0.99).filter(lambda v: np.all(np.abs(_IOU_THRESHOLDS - v) > 1e-6)))
        for i in range(1, n_images + 1):
            imgs.append({"id": i, "file_name": f"{i:06d}.png", "width": int(cell * side), "height": int(cell * side)})
            n = draw(st.integers(*objects))
            for k in range(n):
                w = draw(st.floats(8.0, 30.0))
                h = draw(st.floats(8.0, 30.0))
                cx, cy = (k % side) * cell + 16.0, (k // side) * cell + 16.0
                cat = draw(st.integers(1, categories))
                box = np.array([cx, cy, cx + w, cy + h])
                ann_id = len(anns) + 1
                anns.append(
                    {"id": ann_id, "image_id": i, "category_id": cat, "bbox": [cx, cy, w, h],
                     "area": w * h, "iscrowd": 0}
                )
                if case == "missed" and draw(st.booleans()):
                    continue
                if case == "shifted":
                    box = pair_at_iou(box, t, axis=draw(st.sampled_from((0, 1))))
                x0, y0, x1, y1 = box.tolist()
                preds.append({"image_id": i, "category_id": cat, "bbox": [x0, y0, x1 - x0, y1 - y0],
                              "score": draw(st.floats(0.05, 1.0))})
        gt = {
            "images": imgs,
            "annotations": anns,
            "categories": [{"id": c, "name": f"kind{c}", "supercategory": "shape"} for c in range(1, categories + 1)],
        }
        return gt, preds, _expected(case, t, anns, preds)

    return dataset()


def _expected(case: str, t, anns, preds) -> dict:
    if case == "exact":
        ap = ap50 = ap75 = 1.0
    elif case == "shifted":
        ap = float(np.count_nonzero(_IOU_THRESHOLDS <= t)) / 10.0
        ap50, ap75 = float(t >= 0.5), float(t >= 0.75)
    else:
        per_cat = []
        for cat in sorted({a["category_id"] for a in anns}):
            total = sum(a["category_id"] == cat for a in anns)
            found = sum(p["category_id"] == cat for p in preds)
            recall = found / total
            per_cat.append(float(np.count_nonzero(_RECALL_POINTS <= recall)) / 101.0 if found else 0.0)
        ap = ap50 = ap75 = float(np.mean(per_cat))
    return {"case": case, "AP": ap, "AP50": ap50, "AP75": ap75}


def evaluator_cases() -> list:
    """The known-answer evaluator cases as ``pytest.param`` values (ids: the case names), for ``parametrize``.

    Each value is a :class:`synthgen.cases.Case` with ``annotations`` (COCO
    dict), ``predictions`` (COCO results list), ``expected`` and
    ``check(result)``, which raises ``AssertionError`` unless ``result`` (12
    stats, a mapping by stat name or an object with ``.stats``) matches::

        @pytest.mark.parametrize("case", evaluator_cases())
        def test_my_evaluator(case):
            case.check(my_evaluator(case.annotations, case.predictions))
    """
    import pytest

    from synthgen.cases import build_cases

    return [pytest.param(case, id=case.name) for case in build_cases()]


# --------------------------------------------------------------------------- pytest fixtures

try:
    import pytest
except ImportError:  # plain helpers work without pytest
    pytest = None


#: Settings of the ``synth`` marker (and of indirect parameter dicts).
MARKER_KEYS = ("width", "height", "count", "size", "layout", "seed", "images", "overrides", "formats", "detector", "index")

# config key a small_config keyword sets -> the keyword, to word errors as the marker's
_MARKER_OF_CONFIG = {
    "canvas.width": "width",
    "canvas.height": "height",
    "objects.count": "count",
    "objects.size": "size",
    "objects.layout": "layout",
    "seed": "seed",
    "count": "images",
}


def check_marker_options(opts: dict) -> None:
    """Raise :class:`~synthgen.errors.UserError` for a setting the ``synth`` marker does not know.

    The message is the one line the command-line tool gives for a misspelt
    config key: the setting, the rule, the value and the closest known name.

    Examples
    --------
    >>> check_marker_options({"sizes": (2, 4)})
    Traceback (most recent call last):
    ...
    synthgen.errors.UserError: synth marker setting 'sizes' is not a known setting (got [2, 4]); did you mean 'size'?
    """
    from synthgen.errors import UserError, _show

    for key, value in opts.items():
        if key not in MARKER_KEYS:
            raise UserError(
                f"synth marker setting '{key}' is not a known setting (got {_show(value)}); "
                + _closest(key, MARKER_KEYS)
            )
    detector = opts.get("detector", {})
    if not isinstance(detector, dict):
        raise UserError(f"synth marker setting 'detector' must be a dict of DetectorSpec fields (got {_show(detector)})")
    from synthgen.jitter import DetectorSpec

    fields = DetectorSpec.__dataclass_fields__
    for key, value in detector.items():
        if key not in fields:
            raise UserError(
                f"synth marker setting 'detector.{key}' is not a DetectorSpec field (got {_show(value)}); "
                + _closest(key, list(fields))
            )


def _closest(name: str, known) -> str:
    """``"did you mean 'x'?"`` for the closest known name, else the list of known names."""
    import difflib

    close = difflib.get_close_matches(name, list(known), n=1)
    return f"did you mean '{close[0]}'?" if close else "known: " + ", ".join(known)


def _marker_error(exc) -> str:
    """The one-line message of a bad marker value, naming the marker's setting where it can."""
    from synthgen.errors import ConfigError, _show

    if isinstance(exc, ConfigError):
        name = _MARKER_OF_CONFIG.get(exc.key, exc.key)
        if exc.key.startswith("jitter."):
            name = "detector." + exc.key.removeprefix("jitter.")
        hint = str(exc).split("; ", 1)[1] if "; " in str(exc) else ""
        return f"synth marker setting '{name}' {exc.rule} (got {_show(exc.value)})" + (f"; {hint}" if hint else "")
    text = str(exc)
    return text if text.startswith("synth marker") else f"synth marker: {text}"


def _options(request) -> dict:
    """Keywords for the fixtures: ``@pytest.mark.synth(...)`` then an indirect parameter dict."""
    opts: dict = {}
    marker = request.node.get_closest_marker("synth")
    if marker is not None:
        opts.update(marker.kwargs)
    param = getattr(request, "param", None)
    if isinstance(param, dict):
        opts.update(param)
    _settle(check_marker_options, opts)
    return opts


def _settle(fn, *args, **kwargs):
    """``fn(*args, **kwargs)``; a user error fails the test with one line and no traceback."""
    from synthgen.errors import UserError

    try:
        return fn(*args, **kwargs)
    except UserError as exc:
        message = _marker_error(exc)
    pytest.fail(message, pytrace=False)  # outside the except block: no chained exception shown


if pytest is not None:

    def pytest_configure(config):
        config.addinivalue_line(
            "markers",
            "synth(width=, height=, count=, size=, layout=, seed=, images=, overrides=, formats=, detector=): "
            "settings for the synthgen fixtures synth_scene, synth_dataset and synth_predictions",
        )

    @pytest.fixture
    def synth_scene(request):
        """One small composed scene (image, boxes, categories, masks, facts).

        Settings through ``@pytest.mark.synth(count=(5, 5), size=(2, 8), layout="scatter", seed=3)``
        or ``indirect=True`` parametrization with a dict of the same keywords
        (see :func:`small_config`).
        """
        opts = _options(request)
        index = opts.pop("index", 0)
        opts.pop("formats", None)
        opts.pop("detector", None)
        return _settle(small_scene, index, **opts)

    @pytest.fixture
    def synth_predictions(request, tmp_path):
        """Simulated detections for a small dataset, with what each one is.

        Returns ``(coco, predictions, truth)``: the dataset's COCO dict, a COCO
        results list, and the truth sidecar (``truth["predictions"][i]["kind"]``
        is ``true_positive``, ``duplicate``, ``localization``, ``wrong_class`` or
        ``background``; ``truth["missed"]`` lists missed annotation ids).  The
        detector is set with ``detector={...}`` (fields of
        :class:`synthgen.jitter.DetectorSpec`, e.g. ``{"miss": 0.2, "iou": (0.5, 0.9)}``)
        in the ``synth`` marker or the indirect parameter; the default makes
        only true positives at IoU 0.7-0.95.
        """
        from synthgen.jitter import DetectorSpec
        from synthgen.jitter.coco import jitter_dataset

        opts = _options(request)
        detector = dict(opts.pop("detector", {}))
        opts.pop("formats", None)
        opts.pop("index", None)
        spec = _settle(DetectorSpec, **detector)
        path = _settle(small_dataset, tmp_path / "synth", **opts)
        import json

        from synthgen.formats.dataset_dir import annotations_path

        coco = json.loads(annotations_path(path).read_text())
        predictions, truth, _ = jitter_dataset(coco, seed=opts.get("seed", 0), spec=spec)
        return coco, predictions, truth

    @pytest.fixture
    def synth_dataset(request, tmp_path):
        """A small dataset directory in ``tmp_path`` (COCO JSON; more with ``formats=("coco", "yolo")``)."""
        opts = _options(request)
        formats = tuple(opts.pop("formats", ("coco",)))
        opts.pop("index", None)
        opts.pop("detector", None)
        return _settle(small_dataset, tmp_path / "synth", formats=formats, **opts)
