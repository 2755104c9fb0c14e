"""Slicing by per-object fact: the facts' values, the bins (default bins from the FACTS table), and the bins' results.

:mod:`synthgen.evaluate.cocoeval` scores each bin like a COCO size range (see its docstring for
how ignored objects and unmatched detections are treated); this module says which objects and
which detections belong to which bin.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from synthgen.errors import UserError, is_number
from synthgen.evaluate.parse import Truth, show_value
from synthgen.formats.coco import xyxy_from_bbox
from synthgen.geometry import box_relations
from synthgen.scene.facts import DEFAULT_EDGES, GEOMETRIC_BASE

#: Facts a detection box can be measured on, for assigning unmatched
#: detections to a bin: box area ``w * h`` and longer side ``max(w, h)``.
BOX_FACTS = ("area", "size")


@dataclass(frozen=True, slots=True)
class BinResult:
    """Metrics of one bin of a per-object fact.

    ``lo``/``hi`` bound a numeric bin ``[lo, hi)`` (the last bin includes
    ``hi``); ``value`` names a categorical bin.  Recalls are pooled over
    categories (found objects / objects in the bin, up to 100 detections per
    image and category); APs are COCO's mean over categories with objects in
    the bin; ``mean_iou`` averages the IoU of the pairs matched at IoU 0.5.
    Undefined values are NaN.
    """

    fact: str
    label: str
    lo: float | None
    hi: float | None
    value: object
    n_gt: int
    n_found50: int
    recall50: float
    recall75: float
    ap50: float
    ap: float
    mean_iou: float

    def to_dict(self) -> dict:
        """Plain JSON-able dictionary (NaN and infinities become None)."""
        return {f: _json_value(getattr(self, f)) for f in self.__slots__}


def _json_value(v):
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, np.generic):
        return _json_value(v.item())
    return v


#: Facts that follow from a COCO annotation alone, derived for objects that do not record them
#: (a COCO file from another tool): ``size`` the bbox's longer side, ``kind`` the category name,
#: ``max_iou`` and ``neighbours`` from the bboxes of the image's other non-crowd annotations
#: (largest IoU, and how many overlap it), as synthgen computes them from the annotated boxes.
DERIVED_FACTS = ("size", "kind", "max_iou", "neighbours")


def derive_fact(fact: str, truth: Truth) -> list:
    """Values of a fact in :data:`DERIVED_FACTS` for every ground-truth object, from its annotation.

    Returns a list of length G (float, or the category name for ``kind``);
    crowd regions get None for the box-relation facts.
    """
    if fact == "kind":
        return [truth.cat_names[k] for k in truth.cat.tolist()]
    if fact == "size":
        return np.maximum(truth.box[:, 2], truth.box[:, 3]).tolist()
    keep = ~truth.crowd
    best, count = np.zeros(len(keep)), np.zeros(len(keep), dtype=np.int64)
    best[keep], count[keep] = box_relations(xyxy_from_bbox(truth.box)[keep], truth.img[keep])
    values = best if fact == "max_iou" else count.astype(np.float64)
    return [None if c else v for v, c in zip(values.tolist(), truth.crowd.tolist())]


def _geometric_edges(values: np.ndarray, base: float, refine: int = 2) -> np.ndarray:
    """Powers of ``base`` spanning the positive values, with 0 first when some value is below the first power.

    When distinct values fall in fewer than three such bins (a narrow subset,
    say sizes 9 to 14 px), the base is replaced by its square root, up to
    ``refine`` times, so that a figure shows a trend rather than one point.

    Examples
    --------
    >>> _geometric_edges(np.array([1.5, 3.0, 7.9]), 2.0).tolist()
    [1.0, 2.0, 4.0, 8.0]
    >>> _geometric_edges(np.array([0.0, 5.0]), 2.0).tolist()
    [0.0, 4.0, 8.0]
    >>> [round(float(x), 2) for x in _geometric_edges(np.array([9.0, 11.0, 14.0]), 2.0)]
    [8.0, 9.51, 11.31, 13.45, 16.0]
    """
    e = _powers_spanning(values, base)
    positive = values[values > 0]
    if refine > 0 and len(e) < 4 and positive.size and positive.max() > positive.min():
        return _geometric_edges(values, math.sqrt(base), refine - 1)
    return e


def _powers_spanning(values: np.ndarray, base: float) -> np.ndarray:
    positive = values[values > 0]
    if positive.size == 0:
        return np.array([0.0, 1.0])
    lb = math.log(base)
    k0 = math.floor(math.log(positive.min()) / lb)
    k1 = max(math.ceil(math.log(positive.max()) / lb), k0 + 1)
    e = base ** np.arange(k0, k1 + 1, dtype=np.float64)
    while e[0] > positive.min():  # guard against rounding in the logarithms
        e = np.r_[e[0] / base, e]
    while e[-1] < positive.max():
        e = np.r_[e, e[-1] * base]
    return np.r_[0.0, e] if (values < e[0]).any() else e


def _bin_masks(values: np.ndarray, e: np.ndarray) -> np.ndarray:
    """(A, N) membership of values in bins ``[e_i, e_{i+1})``, the last bin closed."""
    n_bins = len(e) - 1
    idx = np.searchsorted(e, values, side="right") - 1
    idx = np.where(values == e[-1], n_bins - 1, idx)
    idx = np.where(np.isnan(values) | (values < e[0]) | (values > e[-1]), -1, idx)
    return idx[None, :] == np.arange(n_bins)[:, None]


def _fmt_edge(x: float) -> str:
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.4g}"


def _bin_label(e: np.ndarray, i: int) -> str:
    close = "]" if i == len(e) - 2 and math.isfinite(e[-1]) else ")"
    return f"[{_fmt_edge(e[i])}, {_fmt_edge(e[i + 1])}{close}"


def fact_values(fact: str, truth: Truth) -> tuple[np.ndarray, bool]:
    """Values of a per-object fact for every ground-truth object of ``truth`` (:class:`~synthgen.evaluate.parse.Truth`).

    Returns
    -------
    values : ndarray of shape (G,)
        float64 for numeric facts (NaN where missing), object otherwise
        (None where missing).
    categorical : bool
    """
    recs = truth.records
    if not recs:  # no objects (an empty subset of a sweep, say): no fact can be missing
        return np.zeros(0, dtype=np.float64), False
    if fact == "area":
        raw = [r["area"] for r in recs]
    else:
        raw = [r.get("synthgen", {}).get(fact) if isinstance(r.get("synthgen"), Mapping) else None for r in recs]
    if fact in DERIVED_FACTS and any(v is None for v in raw):
        derived = derive_fact(fact, truth)
        raw = [d if v is None else v for v, d in zip(raw, derived)]
    present = [v for v in raw if v is not None]
    if not present:
        known = sorted({k for r in recs if isinstance(r.get("synthgen"), Mapping) for k in r["synthgen"]})
        raise UserError(
            f"slice fact '{fact}' is not recorded for any object; facts in this dataset: "
            + ", ".join(dict.fromkeys(["area", *DERIVED_FACTS, *known]))
        )
    if all(isinstance(v, (bool, str)) for v in present):
        kinds = {type(v) for v in present}
        if len(kinds) > 1:
            raise UserError(f"slice fact '{fact}' mixes value types {sorted(k.__name__ for k in kinds)}")
        return np.array(raw, dtype=object), True
    if all(is_number(v) for v in present):
        return np.array([np.nan if v is None else float(v) for v in raw], dtype=np.float64), False
    raise UserError(f"slice fact '{fact}' must hold numbers, booleans or strings (got e.g. {show_value(present[0])})")


def bin_edges(fact: str, values: np.ndarray, edges) -> np.ndarray:
    """Bin edges for a numeric fact: the given ones checked, else the FACTS table's, powers of its base, or quintiles."""
    if edges is None:
        if fact in DEFAULT_EDGES:
            return np.asarray(DEFAULT_EDGES[fact], dtype=np.float64)
        finite = values[np.isfinite(values)]
        if fact in GEOMETRIC_BASE:
            return _geometric_edges(finite, GEOMETRIC_BASE[fact])
        if finite.size == 0:
            return np.zeros(0, dtype=np.float64)  # no values, no bins
        e = np.unique(np.quantile(finite, np.linspace(0, 1, 6)))
        return e if len(e) >= 2 else np.array([e[0], e[0]], dtype=np.float64)
    e = np.asarray(list(edges), dtype=np.float64)
    if e.ndim != 1 or len(e) < 2 or np.isnan(e).any() or np.any(np.diff(e) <= 0):
        raise UserError(
            f"bin edges for '{fact}' must be at least two strictly increasing numbers (got {list(edges)})"
        )
    return e


def slice_bins(fact: str, values: np.ndarray, categorical: bool, edges, det_box: np.ndarray):
    """The bins of a fact, which objects fall in each, and which detections each bin leaves out.

    Parameters
    ----------
    values, categorical
        As :func:`fact_values` returns them (G objects).
    edges : sequence of float or None
        Bin edges (numeric facts only; see :func:`bin_edges`).
    det_box : ndarray of shape (D, 4)
        The detections' COCO boxes, for facts a box can be measured on (:data:`BOX_FACTS`).

    Returns
    -------
    bins : list of (label, lo, hi, value)
        Empty when there is no bin.
    in_bin : ndarray of bool, shape (A, G)
    det_out : ndarray of bool, shape (A, D)
    """
    n_det = len(det_box)
    if categorical:
        if edges is not None:
            raise UserError(f"slice fact '{fact}' is categorical and takes no bin edges (got {list(edges)})")
        levels = sorted({v for v in values if v is not None}, key=lambda v: (str(type(v)), v))
        in_bin = np.stack([np.array([v is not None and v == lv and type(v) is type(lv) for v in values], bool)
                           for lv in levels]) if len(values) else np.zeros((len(levels), 0), bool)
        bins = [(str(lv), None, None, lv) for lv in levels]
        return bins, in_bin, np.zeros((len(levels), n_det), dtype=bool)
    e = bin_edges(fact, values, edges)
    if len(e) < 2:  # a fact without default edges, on no objects
        return [], None, None
    bins = [(_bin_label(e, i), float(e[i]), float(e[i + 1]), None) for i in range(len(e) - 1)]
    in_bin = _bin_masks(values, e)
    if fact in BOX_FACTS:
        w, h = det_box[:, 2], det_box[:, 3]
        with np.errstate(over="ignore"):  # an absurd box's area is inf: above every bin
            det_val = w * h if fact == "area" else np.maximum(w, h)
        det_out = ~_bin_masks(det_val, e)
    else:
        det_out = np.zeros((len(bins), n_det), dtype=bool)
    return bins, in_bin, det_out


def parse_slice_spec(spec: str) -> tuple[str, tuple[float, ...] | None]:
    """Parse ``FACT`` or ``FACT:E0,E1,...`` into a fact and optional edges.

    Examples
    --------
    >>> parse_slice_spec("size:0,16,32,inf")
    ('size', (0.0, 16.0, 32.0, inf))
    >>> parse_slice_spec("kind")
    ('kind', None)
    """
    fact, sep, rest = spec.partition(":")
    fact = fact.strip()
    if not fact:
        raise UserError(f"slice '{spec}' must be FACT or FACT:E0,E1,... (no fact named)")
    if not sep:
        return fact, None
    try:
        edges = tuple(float(x) for x in rest.split(","))
    except ValueError:
        raise UserError(f"slice '{spec}': bin edges must be numbers separated by commas (got '{rest}')") from None
    if len(edges) < 2 or any(math.isnan(x) for x in edges) or any(b <= a for a, b in zip(edges, edges[1:])):
        raise UserError(f"slice '{spec}': bin edges must be at least two strictly increasing numbers (got '{rest}')")
    return fact, edges
