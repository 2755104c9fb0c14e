"""Sweeps: one dataset per combination of varied config values.

``synthgen sweep [CONFIG] --vary KEY=V1,V2,... [--vary ...] --out DIR`` writes
one dataset (:func:`synthgen.dataset.make_dataset`) per combination of the
varied values, nested one directory level per varied key::

    DIR/objects.size=[1,4]/layout.../      (one level per --vary, in the order given)
    DIR/sweep.json                         the subsets and their varied values; written last

Every subset is the base config (file, then ``--set`` overrides, then
``--count``/``--seed``) with only the varied keys changed, so subsets share the
seed and differ in nothing else; their manifests show it.  Each value is a TOML
value, as for ``--set``; values are separated by commas outside brackets and
quotes, so ``--vary objects.size=[1,4],[8,16]`` has two values.  Every
combination is validated before anything is written.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from synthgen.config import Config, load_config, parse_override, to_dict
from synthgen.errors import ConfigError, UserError

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
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    plan=None,
) -> SweepSummary:
    """Write one dataset per combination of varied values, then ``out/sweep.json``.

    Parameters
    ----------
    config_path : Path or None
        Base TOML config (None: built-in defaults).
    varies : sequence of Vary
        From :func:`parse_vary`, one per ``--vary``.
    out : Path
        Sweep directory.  A non-empty one is refused unless ``overwrite``
        (which replaces each subset's dataset and ``sweep.json``).
    overrides : sequence of str
        ``KEY=VALUE`` applied to the base config before the varied keys.
    workers : int or None
        Processes per dataset (see :func:`synthgen.dataset.make_dataset`).
    progress : callable or None
        Called with (images done, images in all subsets).
    plan : list or None
        :func:`plan_sweep` of the same arguments, when the caller has it already.
    """
    import orjson

    from synthgen.dataset import make_dataset
    from synthgen.formats.coco import write_bytes_atomic

    start = time.perf_counter()
    if plan is None:
        plan = plan_sweep(config_path, varies, overrides)
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: output path is a file, not a directory")
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise UserError(f"{out}: output directory is not empty (pass --overwrite to replace its sweep)")
    out.mkdir(parents=True, exist_ok=True)
    if (out / "sweep.json").exists():
        (out / "sweep.json").unlink()  # an interrupted overwrite never looks finished
    total = sum(cfg.count for _, _, cfg in plan)
    done = 0
    subsets = []
    n_objects = 0
    for rel, values, cfg in plan:
        offset = done

        def advance(k, _subset_total, offset=offset):  # make_dataset calls progress(done, total)
            if progress is not None:
                progress(offset + k, total)

        summary = make_dataset(cfg, out / rel, overwrite=overwrite, workers=workers, progress=advance)
        done += summary.images
        n_objects += summary.objects
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
    base = plan[0][2]
    record = {
        "tool": "synthgen",
        "sweep_version": 1,
        "config": None if config_path is None else str(config_path),
        "overrides": list(overrides),
        "seed": base.seed,
        "vary": [{"key": v.key, "values": list(v.values)} for v in varies],
        "subsets": subsets,
        "base": to_dict(load_config(config_path, list(overrides))),
    }
    write_bytes_atomic(out / "sweep.json", orjson.dumps(record, option=orjson.OPT_INDENT_2))
    return SweepSummary(
        out=out, subsets=len(plan), images=done, objects=n_objects, seconds=time.perf_counter() - start,
        records=tuple(subsets),
    )
