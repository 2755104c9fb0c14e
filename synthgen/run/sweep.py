"""Sweeps: one dataset per combination of varied config values.

``synthgen sweep [CONFIG] --vary KEY=V1,V2,... [--vary ...] --out DIR`` writes
one dataset (:func:`synthgen.run.make.make_dataset`) per combination of the
varied values, nested one directory level per varied key::

    DIR/objects.size=[1,4]/layout.../      (one level per --vary, in the order given)
    DIR/sweep.json                         the subsets and their varied values; written last
    DIR/.synthgen/sweep.json               while it runs: the base config and varied values asked for

Every subset is the base config (file, then ``--set`` overrides, then
``--count``/``--seed``) with only the varied keys changed, so subsets share the
seed and differ in nothing else; their manifests show it.  Each value is a TOML
value, as for ``--set``; values are separated by commas outside brackets and
quotes, so ``--vary objects.size=[1,4],[8,16]`` has two values.  Every
combination is validated before anything is written.
"""

from __future__ import annotations

import itertools
import shutil
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import orjson

from synthgen._io import write_atomic
from synthgen.config import Config, load_config, parse_override, to_dict
from synthgen.errors import ConfigError, UserError, make_output_dir
from synthgen.run.journal import state_dir
from synthgen.run.make import make_dataset
from synthgen.run.outdir import describe_differences, read_record

__all__ = ["Vary", "SweepSummary", "parse_vary", "value_label", "plan_sweep", "run_sweep"]


@dataclass(frozen=True, slots=True)
class Vary:
    """One ``--vary`` option: a dotted key and the values it takes, in order."""

    key: str
    values: tuple


@dataclass(frozen=True, slots=True)
class SweepSummary:
    """What a sweep wrote."""

    out: Path
    subsets: int
    images: int
    objects: int
    seconds: float
    records: tuple = ()  # per subset: path, values, images, objects, ignored, dropped (as in sweep.json)
    kept: int = 0  # images a resumed sweep found intact and did not render again


def _split_values(raw: str) -> list[str]:
    """Split on commas that are outside brackets and quotes."""
    parts, depth, quote, cur = [], 0, "", []
    for ch in raw:
        if quote:
            cur.append(ch)
            if ch == quote:
                quote = ""
            continue
        if ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == "," and depth == 0:
            parts.append("".join(cur).strip())
            cur = []
            continue
        cur.append(ch)
    parts.append("".join(cur).strip())
    return parts


def parse_vary(text: str) -> Vary:
    """Parse one ``KEY=V1,V2,...`` option; each value is a TOML value (bare words are strings).

    Raises
    ------
    ConfigError
        Naming ``--vary`` when the text is not of that form or a value is empty
        or not TOML.

    Examples
    --------
    >>> parse_vary("objects.size=[1,4],[8,16]")
    Vary(key='objects.size', values=([1, 4], [8, 16]))
    >>> parse_vary("background.kind=noise,checker").values
    ('noise', 'checker')
    """
    key, sep, raw = text.partition("=")
    key = key.strip()
    rule = "must look like KEY=V1,V2,... with a dotted key and TOML values, e.g. objects.max_iou=0,0.3"
    if not sep or not key or not raw.strip():
        raise ConfigError("--vary", rule, text)
    values = []
    for part in _split_values(raw):
        if not part:
            raise ConfigError("--vary", rule + " (an empty value)", text)
        try:
            k, value = parse_override(f"{key}={part}")
        except ConfigError:
            raise ConfigError("--vary", rule, text) from None
        values.append(value)
    return Vary(key=k, values=tuple(values))


def value_label(value) -> str:
    """Compact text of a TOML value for a directory name (``[1,4]``, ``0.3``, ``noise``).

    Examples
    --------
    >>> value_label([1, 4.5]), value_label(True), value_label("a/b"), value_label({"kind": "noise"})
    ('[1,4.5]', 'true', 'a_b', '{kind=noise}')
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return "[" + ",".join(value_label(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ",".join(f"{value_label(k)}={value_label(v)}" for k, v in value.items()) + "}"
    if isinstance(value, str):
        return value.replace("/", "_").replace("\\", "_") or "_"
    return repr(value)


def _toml_text(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml_text(v) for v in value) + "]"
    if isinstance(value, dict):  # an inline table, e.g. --vary "background={kind='noise'},{kind='checker'}"
        return "{" + ", ".join(f"{_toml_text(k)} = {_toml_text(v)}" for k, v in value.items()) + "}"
    return repr(value)


def plan_sweep(
    config_path: Path | None, varies, overrides=()
) -> list[tuple[str, dict, Config]]:
    """Resolve every subset of a sweep: ``(relative path, {key: value}, Config)`` in order.

    The varied values are applied after ``overrides``; the last ``--vary``
    changes fastest.

    Raises
    ------
    ConfigError
        For a key varied twice, or a value the config refuses (the message
        names the key and the value).
    """
    varies = list(varies)
    if not varies:
        raise ConfigError("--vary", "must be given at least once (KEY=V1,V2,...)", None)
    keys = [v.key for v in varies]
    for k in keys:
        if keys.count(k) > 1:
            raise ConfigError("--vary", "must not vary the same key twice", k)
    plan = []
    for combo in itertools.product(*(v.values for v in varies)):
        extra = [f"{k}={_toml_text(val)}" for k, val in zip(keys, combo)]
        cfg = load_config(config_path, list(overrides) + extra)
        rel = "/".join(f"{k}={value_label(val)}" for k, val in zip(keys, combo))
        plan.append((rel, dict(zip(keys, combo)), cfg))
    rels = [p[0] for p in plan]
    if len(set(rels)) != len(rels):
        raise ConfigError("--vary", "must give values with distinct directory names", [v.values for v in varies])
    return plan


def run_sweep(
    config_path: Path | None,
    varies,
    out: Path,
    *,
    overrides=(),
    overwrite: bool = False,
    resume: bool = False,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    plan=None,
) -> SweepSummary:
    """Write one dataset per combination of varied values, then ``out/sweep.json``.

    While a sweep runs, ``out/.synthgen/sweep.json`` records what it was asked
    for (the resolved base config and the varied values); ``sweep.json`` at the
    top is written last, so a directory without it is an unfinished sweep.

    Parameters
    ----------
    config_path : Path or None
        Base TOML config (None: built-in defaults).
    varies : sequence of Vary
        From :func:`parse_vary`, one per ``--vary``.
    out : Path
        Sweep directory.  A non-empty one is refused unless ``overwrite``
        (which replaces each subset's dataset and ``sweep.json``) or ``resume``.
    overrides : sequence of str
        ``KEY=VALUE`` applied to the base config before the varied keys.
    resume : bool
        Continue an interrupted sweep of the same base config and varied
        values: each subset is resumed as ``make --resume`` does (finished
        subsets are checked against their manifests), and the result is the
        files an uninterrupted sweep writes.
    workers : int or None
        Processes per dataset (see :func:`synthgen.run.make.make_dataset`).
    progress : callable or None
        Called with (images done, images in all subsets).
    plan : list or None
        :func:`plan_sweep` of the same arguments, when the caller has it already.

    Raises
    ------
    UserError
        A bad output directory, ``overwrite`` with ``resume``, or ``resume`` on
        a directory holding another sweep (the message names what differs).
    """
    start = time.perf_counter()
    if overwrite and resume:
        raise UserError("options '--overwrite' and '--resume' exclude each other: pass one of them")
    if plan is None:
        plan = plan_sweep(config_path, varies, overrides)
    out = Path(out)
    asked = {
        "tool": "synthgen",
        "sweep_version": 1,
        "vary": [{"key": v.key, "values": list(v.values)} for v in varies],
        "base": to_dict(load_config(config_path, list(overrides))),
    }
    record_path = state_dir(out) / SWEEP_RECORD
    _check_sweep_dir(out, record_path, asked, overwrite=overwrite, resume=resume)
    make_output_dir(out)
    (out / "sweep.json").unlink(missing_ok=True)  # until every subset is done again, it does not look finished
    make_output_dir(state_dir(out))
    write_atomic(record_path, orjson.dumps(asked, option=orjson.OPT_INDENT_2))
    subsets, summaries = _make_subsets(plan, out, overwrite=overwrite, resume=resume, workers=workers,
                                       progress=progress)
    record = _sweep_record(config_path, overrides, plan[0][2].seed, asked, subsets)
    write_atomic(out / "sweep.json", orjson.dumps(record, option=orjson.OPT_INDENT_2))
    shutil.rmtree(state_dir(out), ignore_errors=True)
    return SweepSummary(
        out=out, subsets=len(plan), images=sum(s.images for s in summaries),
        objects=sum(s.objects for s in summaries), seconds=time.perf_counter() - start,
        records=tuple(subsets), kept=sum(s.kept for s in summaries),
    )


def _sweep_record(config_path: Path | None, overrides, seed: int, asked: dict, subsets: list) -> dict:
    """The finished sweep's ``sweep.json``: what was asked, and each subset's path, values and counts."""
    return {
        "tool": "synthgen",
        "sweep_version": 1,
        "config": None if config_path is None else str(config_path),
        "overrides": list(overrides),
        "seed": seed,
        "vary": asked["vary"],
        "subsets": subsets,
        "base": asked["base"],
    }


def _check_sweep_dir(out: Path, record_path: Path, asked: dict, *, overwrite: bool, resume: bool) -> None:
    """Refuse a sweep directory this sweep may not write: a file, another sweep, or a non-empty one without an option."""
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: output path is a file, not a directory")
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        earlier = record_path if record_path.exists() else out / "sweep.json"
        if not resume or not earlier.exists():
            hint = ("pass --resume to continue it, or --overwrite to start again" if record_path.exists()
                    else "pass --overwrite to replace its sweep")
            raise UserError(f"{out}: output directory is not empty ({hint})")
        there = read_record(earlier, "sweep record")
        if there.get("vary") != asked["vary"] or there.get("base") != asked["base"]:
            differs = describe_differences(there.get("base") or {}, asked["base"]) or (
                f"--vary {_vary_text(there.get('vary'))} there, {_vary_text(asked['vary'])} here")
            raise UserError(f"{out}: holds a sweep of other settings, differing in {differs} "
                            "(pass --overwrite to replace it)")


def _make_subsets(plan, out: Path, *, overwrite: bool, resume: bool, workers, progress) -> tuple[list, list]:
    """Make every subset's dataset in plan order; return their sweep.json records and make summaries."""
    total = sum(cfg.count for _, _, cfg in plan)
    done = 0
    subsets, summaries = [], []
    for rel, values, cfg in plan:
        offset = done

        def advance(k, _subset_total, offset=offset):  # make_dataset calls progress(done, total)
            if progress is not None:
                progress(offset + k, total)

        summary = make_dataset(cfg, out / rel, overwrite=overwrite, resume=resume, workers=workers, progress=advance)
        done += summary.images
        summaries.append(summary)
        subsets.append(
            {
                "path": rel,
                "values": values,
                "images": summary.images,
                "objects": summary.objects,
                "ignored": summary.ignored,
                "dropped": summary.dropped,
            }
        )
    return subsets, summaries


#: The record of an unfinished sweep, inside the sweep directory's ``.synthgen/``.
SWEEP_RECORD = "sweep.json"


def _vary_text(vary) -> str:
    if not isinstance(vary, list):
        return repr(vary)
    return " ".join(f"{v.get('key')}={','.join(map(value_label, v.get('values', [])))}" for v in vary
                    if isinstance(v, dict))
