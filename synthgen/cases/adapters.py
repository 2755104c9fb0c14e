"""Reading an evaluator's result as the twelve COCO statistics, and comparing them with the expected ones.

What an evaluator returns (or writes) is read by :func:`stats_from`: a sequence of the
twelve COCO statistics in COCO order; a mapping by statistic name (``AP``,
``AP50``, ... ``AR_large``; case, ``_``, ``-``, ``@`` and ``.`` do not
matter, an ``m`` prefix as in ``map_50`` or ``mar_100`` is allowed; only the
statistics given are compared); a mapping with a ``stats`` entry; or an object
with a ``stats`` attribute (``COCOeval`` after ``summarize()``,
:class:`synthgen.evaluate.Evaluation`).
"""

from __future__ import annotations

import re
from collections.abc import Mapping

from synthgen.cases.reference import STAT_NAMES
from synthgen.errors import UserError

__all__ = ["AdapterError", "DEFAULT_TOLERANCE", "compare", "stats_from"]

#: Largest accepted difference from an expected value (float32 evaluators differ by about 1e-7).
DEFAULT_TOLERANCE = 1e-6
_KEY = {re.sub(r"[^a-z0-9]", "", n.lower()): n for n in STAT_NAMES}




class AdapterError(UserError):
    """The evaluator's result has no shape :func:`stats_from` understands."""


def _number(v, where: str) -> float:
    try:
        return float(v.item() if hasattr(v, "item") else v)
    except (TypeError, ValueError):
        raise AdapterError(f"evaluator result: {where} is not a number (got {v!r:.60})") from None


def stats_from(result) -> dict:
    """The statistics in an evaluator's result, by name (:data:`STAT_NAMES`).

    Examples
    --------
    >>> stats_from({"mAP": 0.5, "map_50": 0.75})
    {'AP': 0.5, 'AP50': 0.75}
    >>> stats_from([0.1] * 12)["AR_large"]
    0.1
    """
    if hasattr(result, "stats") and not isinstance(result, Mapping):
        return stats_from(result.stats)
    if isinstance(result, Mapping):
        if "stats" in result:
            return stats_from(result["stats"])
        out = {}
        for key, v in result.items():
            norm = re.sub(r"[^a-z0-9]", "", str(key).lower())
            name = _KEY.get(norm) or (_KEY.get(norm[1:]) if norm.startswith("m") else None)
            if name is not None:
                out[name] = _number(v, f"'{key}'")
        if not out:
            raise AdapterError(
                "evaluator result is a mapping without any statistic name (got keys "
                f"{', '.join(map(str, list(result)[:8]))}); known: {', '.join(STAT_NAMES)}"
            )
        return out
    values = result.tolist() if hasattr(result, "tolist") else result
    if isinstance(values, (list, tuple)) and len(values) == len(STAT_NAMES):
        return {n: _number(v, f"stat {i} ({n})") for i, (n, v) in enumerate(zip(STAT_NAMES, values, strict=True))}
    shape = f"a sequence of {len(values)}" if isinstance(values, (list, tuple)) else type(result).__name__
    raise AdapterError(
        f"evaluator result must be 12 numbers in COCO order, a mapping by statistic name or an object with "
        f".stats (got {shape})"
    )


def compare(expected: Mapping, got: Mapping, tolerance: float = DEFAULT_TOLERANCE) -> tuple:
    """Names of the statistics in ``got`` that differ from ``expected`` by more than ``tolerance`` (NaN differs)."""
    return tuple(
        n for n in STAT_NAMES if n in got and not abs(got[n] - expected[n]) <= tolerance
    )
