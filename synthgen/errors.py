"""Errors that mean "the user gave bad input" and the checks that raise them.

The command-line tool turns every :class:`UserError` into a one-line message on
stderr and exit code 2; anything else is an unexpected failure (exit 1), among them
:class:`OutputWriteError` (the disk is full, a directory is not writable).
Messages name the config key or file, the rule, and the value::

    config key 'objects.size' must be [min, max] with 0 < min <= max (got [8, 4])
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence

__all__ = [
    "UserError",
    "ConfigError",
    "InputFileError",
    "check_choice",
    "check_number",
    "check_range",
    "as_tuples",
    "make_output_dir",
    "require_extra",
    "OutputWriteError",
    "bad_record",
    "is_int",
    "is_number",
]


class UserError(Exception):
    """Bad input from the user: a config, an option or a file (exit code 2)."""


class ConfigError(UserError, ValueError):
    """A config value breaks a rule.

    Parameters
    ----------
    key : str
        Dotted config key, e.g. ``"objects.size"``.
    rule : str
        What the value must be, phrased to follow the key
        (``"must be a number in [0, 1]"``).
    value : object
        The offending value, shown with ``repr``.
    """

    def __init__(self, key: str, rule: str, value: object = None, *, hint: str = ""):
        self.key = key
        self.rule = rule
        self.value = value
        shown = _show(value)
        what = "option" if key.startswith("-") else "config key"  # e.g. '--set', '--formats'
        msg = f"{what} '{key}' {rule} (got {shown})"
        if hint:
            msg += f"; {hint}"
        super().__init__(msg)


class OutputWriteError(Exception):
    """Writing the output failed (disk full, permission denied...): exit code 1.

    Parameters
    ----------
    path : str or Path
        The file or directory that could not be written.
    reason : str
        The system's reason, e.g. ``"No space left on device"``.
    """

    def __init__(self, path, reason: str):
        self.path = str(path)
        self.reason = reason
        super().__init__(
            f"cannot write {path}: {reason}; the images finished so far are kept, "
            "run the same command with --resume to continue"
        )


class InputFileError(UserError):
    """An input file is missing, unreadable or malformed.

    The message names the file, what is wrong and, where there is one, the
    record.
    """

    def __init__(self, path, problem: str):
        self.path = str(path)
        self.problem = problem
        super().__init__(f"{path}: {problem}")


def bad_record(path, record: str, rule: str, value: object) -> InputFileError:
    """An :class:`InputFileError` that also carries ``record``, ``rule`` and ``value``.

    Readers of input files raise it so that :mod:`synthgen.formats.check` can report the parts apart.
    """
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    err = InputFileError(path, f"{record}: {rule} (got {text})" if record else f"{rule} (got {text})")
    err.record, err.rule, err.value = record, rule, value
    return err

def make_output_dir(path) -> None:
    """Create output directory ``path`` and its parents; a path that cannot be one is an :class:`InputFileError`.

    The message names the part of the path that is a file, or the system's reason
    (permission denied, a read-only or special file system).
    """
    from pathlib import Path

    path = Path(path)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        blocker = next((p for p in [path, *path.parents] if p.exists() and not p.is_dir()), None)
        why = f"'{blocker}' is a file" if blocker is not None else exc.strerror or str(exc)
        raise InputFileError(path, f"cannot be created as an output directory ({why})") from None


def require_extra(module: str, extra: str, what: str) -> None:
    """Raise :class:`UserError` naming the extra to install when the optional ``module`` cannot be imported.

    ``what`` names the feature, e.g. ``"option '--plot'"``.
    """
    import importlib

    try:
        importlib.import_module(module)
    except ImportError:
        from synthgen import DISTRIBUTION

        raise UserError(
            f"{what} needs {module}, which is not installed: pip install '{DISTRIBUTION}[{extra}]'"
        ) from None


def _show(value: object) -> str:
    if isinstance(value, tuple):
        value = list(value)
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def is_int(v: object) -> bool:
    """Whether ``v`` is an integer, a numpy one included (``True``/``False`` are not).

    Examples
    --------
    >>> is_int(3), is_int(3.0), is_int(True)
    (True, False, False)
    """
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


def is_number(v: object) -> bool:
    """Whether ``v`` is a real number, a numpy one included (``True``/``False`` are not)."""
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def as_tuples(spec) -> None:
    """Turn the list-valued fields of a frozen spec into tuples, in place (call first in ``__post_init__``).

    The config loader already gives tuples; specs built directly in Python may
    be given lists (``ObjectSpec(size=[4, 8])``), and frozen specs should hold
    only hashable values whatever built them.

    Examples
    --------
    >>> from synthgen.config import ObjectSpec
    >>> ObjectSpec(size=[4, 8]).size
    (4, 8)
    """
    import dataclasses

    for f in dataclasses.fields(spec):
        value = getattr(spec, f.name)
        if isinstance(value, list):
            object.__setattr__(spec, f.name, tuple(value))


def check_number(
    key: str,
    value: object,
    *,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    integer: bool = False,
) -> None:
    """Raise :class:`ConfigError` unless ``value`` is a finite number in bounds.

    Examples
    --------
    >>> check_number("canvas.width", 64, lo=1, integer=True)
    >>> check_number("objects.min_visible", 1.5, lo=0, hi=1)
    Traceback (most recent call last):
    ...
    synthgen.errors.ConfigError: config key 'objects.min_visible' must be a number in [0, 1] (got 1.5)
    """
    kind = "a whole number" if integer else "a number"
    rule = f"must be {kind}{_bounds_text(lo, hi, lo_open, hi_open)}"
    ok = is_number(value) and math.isfinite(value)
    if ok and integer and value != int(value):
        ok = False
    if ok and lo is not None and (value <= lo if lo_open else value < lo):
        ok = False
    if ok and hi is not None and (value >= hi if hi_open else value > hi):
        ok = False
    if not ok:
        raise ConfigError(key, rule, value)


def check_range(
    key: str,
    value: object,
    *,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    integer: bool = False,
) -> None:
    """Raise :class:`ConfigError` unless ``value`` is ``(min, max)``, min <= max, in bounds.

    Examples
    --------
    >>> check_range("objects.size", (8, 4), lo=0, lo_open=True)
    Traceback (most recent call last):
    ...
    synthgen.errors.ConfigError: config key 'objects.size' must be [min, max] with 0 < min <= max (got [8, 4])
    """
    left = "" if lo is None else f"{_fmt(lo)} {'<' if lo_open else '<='} "
    right = "" if hi is None else f" <= {_fmt(hi)}"
    kind = " whole numbers" if integer else ""
    rule = f"must be [min, max]{kind} with {left}min <= max{right}"
    ok = isinstance(value, (tuple, list)) and len(value) == 2
    if ok:
        a, b = value
        ok = is_number(a) and is_number(b) and math.isfinite(a) and math.isfinite(b) and a <= b
        if ok and integer:
            ok = a == int(a) and b == int(b)
        if ok and lo is not None:
            ok = a > lo if lo_open else a >= lo
        if ok and hi is not None:
            ok = b <= hi
    if not ok:
        raise ConfigError(key, rule, value)


def check_choice(key: str, value: object, choices: Sequence[str]) -> None:
    """Raise :class:`ConfigError` unless ``value`` is one of ``choices``.

    The message suggests the closest choice when the value looks misspelt.
    """
    if isinstance(value, str) and value in choices:
        return
    hint = ""
    if isinstance(value, str):
        import difflib

        close = difflib.get_close_matches(value, list(choices), n=1)
        if close:
            hint = f"did you mean '{close[0]}'?"
    raise ConfigError(key, "must be one of " + ", ".join(choices), value, hint=hint)


def _fmt(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))


def _bounds_text(lo, hi, lo_open, hi_open) -> str:
    if lo is not None and hi is not None:
        return f" in {'(' if lo_open else '['}{_fmt(lo)}, {_fmt(hi)}{')' if hi_open else ']'}"
    if lo is not None:
        return f" {'>' if lo_open else '>='} {_fmt(lo)}"
    if hi is not None:
        return f" {'<' if hi_open else '<='} {_fmt(hi)}"
    return ""
