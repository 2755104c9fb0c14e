"""Option and argument values converted in a line each, without a validation model per option.

typer converts each value through a pydantic ``TypeAdapter`` it builds the first
time the parameter is used.  For a one-image ``make`` that costs more than the
rendering: importing pydantic and building a dozen adapters took about 0.14 s of a
0.6 s run.  synthgen's commands take only plain values (whole numbers, numbers,
text, paths, flags, a choice of a ``StrEnum``, lists of these, each possibly ``None``),
so :func:`install` gives every such parameter a direct conversion with the same
rules typer applies (its ``min``/``max`` bounds, case-sensitive choices) and a
message that names the rule and the value.  A parameter of any other type keeps
typer's own conversion, and so does every parameter under a typer without this
hook (then the commands behave the same, only start slower).
"""

from __future__ import annotations

import enum
import math
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import typer

try:  # the per-parameter conversion typer calls from Parameter.process_value
    from typer._coercion import RuntimeParam as _Hook
except ImportError:  # pragma: no cover - another typer: its own conversion stays
    _Hook = None

__all__ = ["converter", "install", "without_none"]


def _whole(value: Any) -> int:
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    try:
        return int(str(value).strip())
    except ValueError:
        raise ValueError(f"must be a whole number (got {value!r})") from None


def _number(value: Any) -> float:
    try:
        out = float(value if isinstance(value, (int, float)) else str(value).strip())
    except ValueError:
        raise ValueError(f"must be a number (got {value!r})") from None
    if not math.isfinite(out):
        raise ValueError(f"must be a finite number (got {value!r})")
    return out


_TRUE, _FALSE = frozenset({"1", "true", "yes", "on", "y", "t"}), frozenset({"0", "false", "no", "off", "n", "f"})


def _flag(value: Any) -> bool:
    if isinstance(value, bool):
        return value
    text = str(value).strip().lower()
    if text not in _TRUE | _FALSE:
        raise ValueError(f"must be true or false (got {value!r})")
    return text in _TRUE


def _choice(kind: type[enum.Enum], case_sensitive: bool):
    names = {str(m.value) if case_sensitive else str(m.value).lower(): m for m in kind}

    def convert(value: Any):
        if isinstance(value, kind):
            return value
        key = str(value) if case_sensitive else str(value).lower()
        if key not in names:
            raise ValueError(f"must be one of {', '.join(str(m.value) for m in kind)} (got {value!r})")
        return names[key]

    return convert


def _bounded(convert, low, high):
    def bounded(value: Any):
        out = convert(value)
        if low is not None and out < low:
            raise ValueError(f"must be >= {low} (got {value!r})")
        if high is not None and out > high:
            raise ValueError(f"must be <= {high} (got {value!r})")
        return out

    return bounded


def without_none(annotation):
    """``X | None`` -> ``X``; other annotations as they are."""
    if isinstance(annotation, types.UnionType) or typing.get_origin(annotation) is typing.Union:
        args = [a for a in typing.get_args(annotation) if a is not type(None)]
        if len(args) == 1:
            return args[0]
    return annotation


def converter(annotation, info=None):
    """The conversion of one value of ``annotation``, or None when typer's own is kept.

    ``info`` is typer's parameter info (its ``min``, ``max``, ``clamp`` and
    ``case_sensitive``); a list annotation converts each item.

    >>> converter(int)("12"), converter(float)("0.5"), converter(list[Path])(("a", "b"))
    (12, 0.5, [PosixPath('a'), PosixPath('b')])
    >>> converter(int | None)("x")
    Traceback (most recent call last):
    ...
    ValueError: must be a whole number (got 'x')
    """
    annotation = without_none(annotation)
    if typing.get_origin(annotation) is list:
        (item,) = typing.get_args(annotation)
        one = converter(item, info)
        return None if one is None else (lambda values: [one(v) for v in values])
    if getattr(info, "parser", None) is not None or getattr(info, "clamp", False):
        return None
    if isinstance(annotation, type) and issubclass(annotation, enum.Enum):
        return _choice(annotation, getattr(info, "case_sensitive", True))
    basic = {bool: _flag, int: _whole, float: _number, str: str, Path: Path}.get(annotation)
    low, high = getattr(info, "min", None), getattr(info, "max", None)
    if basic is None or (basic in (_flag, str, Path) and (low is not None or high is not None)):
        return None
    return basic if low is None and high is None else _bounded(basic, low, high)


if _Hook is not None:

    @dataclass(frozen=True)
    class _Direct(_Hook):
        """typer's per-parameter conversion, done by :func:`converter`."""

        convert: Any = field(default=None)

        def _coerce_value(self, value: Any, param, ctx) -> Any:
            try:
                return self.convert(value)
            except ValueError as exc:
                raise typer.BadParameter(str(exc), ctx=ctx, param=param) from None


def install(param) -> bool:
    """Give ``param`` (a typer parameter) the direct conversion; True when it has it.

    Idempotent; a parameter typer has already converted keeps what it has.
    """
    if _Hook is None or not hasattr(param, "_runtime_param") or not hasattr(param, "type_descriptor"):
        return False
    if isinstance(param._runtime_param, _Direct):
        return True
    desc = param.type_descriptor
    if param._runtime_param is not None or getattr(desc, "file_annotation", None) is not None:
        return False
    convert = converter(desc.annotation, desc.parameter_info)
    if convert is None:
        return False
    param._runtime_param = _Direct(parameter_info=desc.parameter_info, annotation=desc.annotation, convert=convert)
    return True
