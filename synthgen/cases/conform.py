"""Running any evaluator over the known-answer cases and comparing with the expected values.

An evaluator is named by a SPEC:

* ``module:function`` or ``path/to/file.py:function``: a callable taking
  ``(annotations, predictions)`` (a COCO dict and a COCO results list, deep
  copies; file paths instead with ``paths=True``);
* a command template holding ``{annotations}``, ``{predictions}`` and
  ``{out}``: split like a shell line (no shell runs), the placeholders become
  file paths, and the command writes its result as JSON to ``{out}``.

What it returns (or writes) is read by :func:`synthgen.cases.adapters.stats_from`.
"""

from __future__ import annotations

import copy
import importlib
import importlib.util
import json
import math
import re
import shlex
import subprocess
import tempfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path

from synthgen.cases.adapters import DEFAULT_TOLERANCE, compare, stats_from
from synthgen.cases.library import Case, build_cases
from synthgen.cases.reference import STAT_NAMES
from synthgen.cases.write import EXPECTED, PREDICTIONS
from synthgen.errors import InputFileError, UserError
from synthgen.formats.dataset_dir import ANNOTATIONS

__all__ = ["CaseOutcome", "conform", "compare", "load_cases", "load_evaluator", "stats_from", "outcome_table",
           "summary", "DEFAULT_TOLERANCE"]

_PLACEHOLDERS = ("{annotations}", "{predictions}", "{out}")


@dataclass(frozen=True)
class CaseOutcome:
    """One case run through an evaluator.

    ``got`` holds the statistics the evaluator gave (by name), ``mismatches``
    the names whose value is off by more than the tolerance, ``error`` what
    went wrong when the evaluator failed on this case.
    """

    name: str
    trap: str
    expected: dict
    got: dict | None
    mismatches: tuple
    error: str | None = None

    @property
    def passed(self) -> bool:
        return self.error is None and not self.mismatches


# --------------------------------------------------------------------------- cases


def _read_json(path: Path):
    try:
        return json.loads(path.read_text())
    except FileNotFoundError:
        raise InputFileError(path, "is missing (a case folder holds annotations.json, predictions.json, "
                                   "expected.json)") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputFileError(path, f"cannot be read as JSON ({exc})") from None


def load_cases(folder=None) -> list[Case]:
    """The library's cases, or those written in ``folder`` (one sub-folder per case, in name order)."""
    if folder is None:
        return list(build_cases())
    folder = Path(folder)
    if not folder.is_dir():
        raise InputFileError(folder, "must be a folder of cases written by 'synthgen cases --out'")
    subs = sorted(p for p in folder.iterdir() if p.is_dir() and not p.name.startswith("."))
    if not subs:
        raise InputFileError(folder, "holds no case folders")
    out = []
    for sub in subs:
        expected = _read_json(sub / EXPECTED)
        stats = expected.get("stats") if isinstance(expected, dict) else None
        if not isinstance(stats, dict) or any(not isinstance(stats.get(n), (int, float)) for n in STAT_NAMES):
            raise InputFileError(sub / EXPECTED, "must hold 'stats' with a number for each of "
                                 + ", ".join(STAT_NAMES))
        gt, preds = _read_json(sub / ANNOTATIONS), _read_json(sub / PREDICTIONS)
        if not isinstance(gt, dict) or not isinstance(preds, list):
            raise InputFileError(sub, "annotations.json must be a COCO object and predictions.json an array")
        out.append(Case(sub.name, str(expected.get("trap", "")), "", gt, preds, {}, expected=expected))
    return out


# --------------------------------------------------------------------------- evaluators


def _import_callable(spec: str) -> Callable:
    where, _, name = spec.rpartition(":")
    if where.endswith(".py"):
        path = Path(where)
        if not path.is_file():
            raise UserError(f"evaluator '{spec}': file '{where}' does not exist")
        module_spec = importlib.util.spec_from_file_location(f"_synthgen_conform_{path.stem}", path)
        module = importlib.util.module_from_spec(module_spec)
        try:
            module_spec.loader.exec_module(module)
        except Exception as exc:
            raise UserError(f"evaluator '{spec}': loading '{where}' failed ({type(exc).__name__}: {exc})") from None
    else:
        try:
            module = importlib.import_module(where)
        except Exception as exc:
            raise UserError(f"evaluator '{spec}': cannot import '{where}' ({type(exc).__name__}: {exc})") from None
    fn = getattr(module, name, None)
    if not callable(fn):
        raise UserError(f"evaluator '{spec}': '{where}' has no function '{name}'")
    return fn


def _run_command(template: list[str], case: Case, tmp: Path):
    files = {"{annotations}": tmp / ANNOTATIONS, "{predictions}": tmp / PREDICTIONS,
             "{out}": tmp / "out.json"}
    _write_inputs(case, files["{annotations}"], files["{predictions}"])
    args = [_fill(arg, files) for arg in template]
    try:
        done = subprocess.run(args, capture_output=True, text=True, check=False)
    except OSError as exc:
        raise UserError(f"evaluator command cannot run: {args[0]} ({exc.strerror or exc})") from None
    if done.returncode != 0:
        last = (done.stderr.strip().splitlines() or ["no message"])[-1]
        raise RuntimeError(f"command exited {done.returncode}: {last}")
    try:
        return json.loads(files["{out}"].read_text())
    except (OSError, json.JSONDecodeError) as exc:
        raise RuntimeError(f"command wrote no JSON to {{out}} ({exc})") from None


def _fill(arg: str, files: dict) -> str:
    for key, path in files.items():
        arg = arg.replace(key, str(path))
    return arg


def _write_inputs(case: Case, annotations: Path, predictions: Path) -> None:
    annotations.write_text(json.dumps(case.annotations))
    predictions.write_text(json.dumps(case.predictions))


def load_evaluator(spec: str, *, paths: bool = False) -> Callable[[Case, Path], object]:
    """A function ``(case, scratch_dir) -> result`` running the evaluator named by ``spec`` on one case.

    Raises
    ------
    UserError
        ``spec`` names nothing that can run.
    """
    if any(p in spec for p in _PLACEHOLDERS):
        missing = [p for p in _PLACEHOLDERS if p not in spec]
        if missing:
            raise UserError(f"evaluator command must hold {', '.join(_PLACEHOLDERS)} (missing {', '.join(missing)})")
        try:
            template = shlex.split(spec)
        except ValueError as exc:
            raise UserError(f"evaluator command cannot be split into words ({exc}): {spec}") from None
        return lambda case, tmp: _run_command(template, case, tmp)
    if not re.fullmatch(r"[^:\s]+:[A-Za-z_]\w*", spec):
        raise UserError(
            "evaluator must be module:function, path/to/file.py:function, or a command holding "
            f"{{annotations}} {{predictions}} {{out}} (got '{spec}')"
        )
    fn = _import_callable(spec)
    if paths:
        def run(case, tmp):
            _write_inputs(case, tmp / ANNOTATIONS, tmp / PREDICTIONS)
            return fn(str(tmp / ANNOTATIONS), str(tmp / PREDICTIONS))
        return run
    return lambda case, tmp: fn(copy.deepcopy(case.annotations), copy.deepcopy(case.predictions))


def conform(spec: str, cases=None, *, tolerance: float = DEFAULT_TOLERANCE, paths: bool = False) -> list[CaseOutcome]:
    """Run the evaluator ``spec`` on every case and compare its statistics with the expected ones.

    Parameters
    ----------
    spec : str
        The evaluator (module docstring).
    cases : path-like, optional
        A folder written by :func:`synthgen.cases.write_cases`; the library's cases by default.
    tolerance : float
        Largest accepted absolute difference.
    paths : bool
        Pass file paths instead of a dict and a list to a callable evaluator.

    Raises
    ------
    UserError
        The cases or the evaluator cannot be used, or the evaluator's result
        has no known shape (exit code 2 on the command line).  An evaluator
        that raises on a case fails that case.
    """
    if not (tolerance >= 0 and math.isfinite(tolerance)):
        raise UserError(f"option '--tolerance' must be a finite number >= 0 (got {tolerance})")
    run = load_evaluator(spec, paths=paths)
    outcomes = []
    for case in load_cases(cases):
        with tempfile.TemporaryDirectory(prefix="synthgen-conform-") as tmp:
            try:
                result = run(case, Path(tmp))
            except UserError:
                raise
            except Exception as exc:  # the evaluator failed on this case: that is a result
                error = f"{type(exc).__name__}: {exc}".splitlines()[0][:200]
                outcomes.append(CaseOutcome(case.name, case.trap, case.expected["stats"], None, (), error))
                continue
        got = stats_from(result)
        mismatches = compare(case.expected["stats"], got, tolerance)
        outcomes.append(CaseOutcome(case.name, case.trap, case.expected["stats"], got, mismatches))
    return outcomes


# --------------------------------------------------------------------------- the table


def _values(stats: Mapping, names) -> str:
    return ", ".join(f"{n} {stats[n]:.4f}" for n in names)


def outcome_table(outcomes: list[CaseOutcome]):
    """A rich table: case, what it tests, expected, got, pass/fail (the first differing statistics)."""
    from rich.table import Table

    table = Table(show_lines=False)
    for col in ("case", "what it tests", "expected", "got", "result"):
        table.add_column(col, overflow="fold")
    for o in outcomes:
        if o.error is not None:
            shown = ["AP"]
            row = (_values(o.expected, shown), o.error, "[red]error[/red]")
        elif o.mismatches:
            shown = list(o.mismatches[:3])
            row = (_values(o.expected, shown), _values(o.got, shown), "[red]fail[/red]")
        else:
            shown = [n for n in ("AP", "AR100") if n in o.got] or list(o.got)[:2]
            row = (_values(o.expected, shown), _values(o.got, shown), "[green]pass[/green]")
        table.add_row(o.name, o.trap, *row)
    return table


def summary(outcomes: list[CaseOutcome]) -> str:
    """One line: how many cases pass, and which fail."""
    failed = [o.name for o in outcomes if not o.passed]
    line = f"{len(outcomes) - len(failed)} of {len(outcomes)} cases pass"
    return line + (f"; failing: {', '.join(failed)}" if failed else "")

