"""The ``synthgen`` command: parse, call one library function, report.

Results go to stdout, progress and errors to stderr.  Exit codes: 0 done,
1 unexpected failure, 2 bad input (config, option or file), with a one-line
message naming the key or file, the rule and the value.
"""

from __future__ import annotations

import functools
import os
import sys
import traceback
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from synthgen.errors import UserError, require_extra
from synthgen.scene.facts import slice_facts

__all__ = ["app", "main"]


class _Plain:
    """Help as people read it: a flag shows no value type (no '<bool>'), and arguments are written
    in upper case, an optional one in brackets, in the usage line and in the arguments panel."""

    def get_params(self, ctx):
        params = super().get_params(ctx)
        for p in params:
            if p.metavar is None and getattr(p, "is_flag", False):
                p.metavar = ""
            elif p.metavar is None and p.param_type_name == "argument":
                p.metavar = p.name.upper()
        return params

    def collect_usage_pieces(self, ctx):
        pieces = [self.options_metavar] if self.options_metavar else []
        for p in self.get_params(ctx):
            if p.param_type_name == "argument":
                name = p.metavar + ("..." if p.nargs != 1 else "")
                pieces.append(name if p.required else f"[{name}]")
        return pieces


class _Command(_Plain, typer.core.TyperCommand):
    pass


class _Group(_Plain, typer.core.TyperGroup):
    def collect_usage_pieces(self, ctx):
        return typer.core.TyperGroup.collect_usage_pieces(self, ctx)


app = typer.Typer(
    name="synthgen",
    help="Object-detection test data whose right answer is known exactly.",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    cls=_Group,
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version(value: bool) -> None:
    if value:
        from synthgen import __version__

        typer.echo(f"synthgen {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Object-detection test data whose right answer is known exactly."""


def _fail(message: str, code: int) -> None:
    typer.echo(f"synthgen: {message}", err=True)
    raise typer.Exit(code)


def reported(fn):
    """Turn user errors into one line and exit 2, other failures into one line and exit 1.

    ``SYNTHGEN_DEBUG=1`` adds the traceback of unexpected failures.
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except UserError as exc:
            _fail(f"error: {exc}", 2)
        except (typer.Exit, typer.Abort, typer.TyperException):
            raise
        except KeyboardInterrupt:
            _fail("interrupted", 130)
        except BrokenPipeError:  # the reader of stdout went away (e.g. `| head`): stop quietly
            try:
                sys.stdout = open(os.devnull, "w")
            except OSError:
                pass
            raise typer.Exit(0) from None
        except Exception as exc:  # unexpected: report it, exit 1
            if os.environ.get("SYNTHGEN_DEBUG"):
                traceback.print_exc()
            where = f" ({exc.filename})" if isinstance(exc, OSError) and exc.filename else ""
            _fail(f"unexpected failure: {type(exc).__name__}: {exc}{where}", 1)

    return wrapper


def _progress(total: int, quiet: bool, label: str):
    """A rich progress bar on stderr, or a no-op; returns (context manager, advance(done)).

    The bar appears at the first ``advance``, once the work has started, so an
    error found before (a bad option, an output that may not be written) is
    printed alone.
    """
    from contextlib import contextmanager, nullcontext

    if quiet or total <= 1:
        return nullcontext(), None
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    progress = Progress(
        TextColumn(label),
        BarColumn(),
        MofNCompleteColumn(),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = progress.add_task(label, total=total)

    def advance(done: int) -> None:
        if not progress.live.is_started:
            progress.start()
        progress.update(task, completed=done)

    @contextmanager
    def shown():
        try:
            yield
        finally:
            if progress.live.is_started:
                progress.stop()

    return shown(), advance


ConfigArg = Annotated[
    Path | None,
    typer.Argument(help="TOML config; keys not given take built-in defaults (see configs/).", show_default=False),
]
SetOpt = Annotated[
    list[str] | None,
    typer.Option("--set", help="Override a config key with a TOML value, e.g. --set objects.count=[5,10]. Repeatable."),
]


# -- options shared by make and export (formats and splits) ------------------------
FormatsOpt = Annotated[
    str,
    typer.Option(
        "--formats", help="Comma-separated formats: coco, voc, yolo, tokens, masks (COCO JSON is always written by make)."
    ),
]
SplitOpt = Annotated[
    str | None,
    typer.Option("--split", help="Split the images, e.g. train=0.8,val=0.2 (one COCO file per split)."),
]


def _overrides(set_: list[str] | None, count: int | None, seed: int | None) -> list[str]:
    """--set values, then --count and --seed as the overrides they stand for."""
    overrides = list(set_ or [])
    if count is not None:
        overrides.append(f"count={count}")
    if seed is not None:
        overrides.append(f"seed={seed}")
    return overrides


def _formats_and_split(formats: str, split: str | None):
    from synthgen.formats import parse_formats, parse_split

    return parse_formats(formats), (parse_split(split) if split else None)


@app.command()
@reported
def make(
    config: ConfigArg = None,
    out: Annotated[Path, typer.Option("--out", "-o", help="Output directory.")] = ...,
    count: Annotated[int | None, typer.Option(help="Number of images (same as --set count=N).")] = None,
    seed: Annotated[int | None, typer.Option(help="Root seed (same as --set seed=S).")] = None,
    set_: SetOpt = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the dataset in a non-empty output directory.")] = False,
    resume: Annotated[
        bool,
        typer.Option("--resume", help="Continue an interrupted run in DIR: keep intact images, render the rest."),
    ] = False,
    workers: Annotated[int | None, typer.Option(help="Processes to render with (default: usable cores).")] = None,
    shard: Annotated[
        str | None,
        typer.Option(
            "--shard", metavar="K/N",
            help="Render only shard K of N (images whose index % N == K) and a shard manifest; join with `merge`.",
        ),
    ] = None,
    cluster: Annotated[
        str | None,
        typer.Option(
            "--cluster", metavar="ADDRESS|local",
            help="Render on a Dask cluster (scheduler address, or 'local'); needs pip install 'synthgen-shapes\\[cluster]'.",
        ),
    ] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
    formats: FormatsOpt = "coco",
    split: SplitOpt = None,
) -> None:
    """Render a dataset: images, COCO JSON annotations and a manifest."""
    from synthgen.config import load_config
    from synthgen.errors import OutputWriteError
    from synthgen.run.journal import parse_shard
    from synthgen.run.make import make_dataset

    overrides = _overrides(set_, count, seed)
    cfg = load_config(config, overrides)
    format_names, fractions = _formats_and_split(formats, split)
    part = parse_shard(shard) if shard is not None else None
    total = len(part.indices(cfg.count)) if part is not None else cfg.count
    bar, advance = _progress(total, quiet, "rendering")
    try:
        with bar:
            summary = make_dataset(
                cfg, out, overwrite=overwrite, resume=resume, workers=workers, shard=part, cluster=cluster,
                progress=None if advance is None else (lambda done, _total: advance(done)),
                formats=format_names, split=fractions,
            )
    except OutputWriteError as exc:
        _fail(f"error: {exc}", 1)
    what = "" if summary.shard.whole else f" (shard {summary.shard.index}/{summary.shard.count})"
    rate = f"{summary.images_per_second:.1f} images/s"
    if summary.kept:  # the rate of a resumed run counts only what it rendered
        rendered = f"{summary.rendered} rendered ({rate})" if summary.rendered else "none rendered"
        how = f": {rendered}, {summary.kept} kept from before"
    else:
        how = f" ({rate})"
    typer.echo(
        f"wrote {_count(summary.images, 'image')}{what}, {_count(summary.objects, 'object')} to {summary.out} "
        f"in {summary.seconds:.2f} s{how}"
    )
    _warn_drops(summary.objects, summary.dropped, summary.ignored)


def _count(n: int, word: str) -> str:
    """``"1 image"``, ``"2 images"``."""
    return f"{n} {word}{'' if n == 1 else 's'}"


def _warn_drops(objects: int, dropped: dict, ignored: int, where: str = "") -> None:
    """One warning line on stderr when more than a tenth of the objects were not annotated."""
    from synthgen.run.make import drop_warning

    line = drop_warning(objects, dropped, ignored)
    if line is not None:
        typer.echo(f"synthgen: warning: {where}{line} (manifest: counts.dropped)", err=True)


# DetectorSpec field -> the jitter option that sets it (errors about a field name its option)
_JITTER_OPTIONS = {
    "iou": "--iou",
    "miss": "--miss",
    "duplicates": "--duplicates",
    "background": "--background",
    "relabel": "--relabel",
    "localization": "--localization",
    "near_iou": "--near-iou",
    "duplicate_iou": "--duplicate-iou",
    "background_iou": "--background-iou",
    "background_size": "--background-size",
    "score_overlap": "--score-overlap",
    "modes": "--modes",
    "keep_inside": "--keep-inside",
}


def _pair(text: str, option: str) -> tuple[float, float]:
    """Parse ``LO,HI`` (or one number V meaning ``V,V``)."""
    parts = [p.strip() for p in text.split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) not in (1, 2):
        raise UserError(f"option '{option}' must be LO,HI or one number (got {text!r})")
    return (values[0], values[-1])


# -- check and export -----------------------------------------------------------------
class TokenOrder(StrEnum):
    random = "random"
    raster = "raster"
    area = "area"
    distance = "distance"


class MaskMode(StrEnum):
    png = "png"
    rle = "rle"


@app.command()
@reported
def jitter(
    dataset: Annotated[Path, typer.Argument(help="Dataset directory holding annotations.json.", show_default=False)],
    out: Annotated[Path, typer.Option("--out", "-o", help="COCO results file to write (JSON array).")] = ...,
    truth: Annotated[
        Path | None,
        typer.Option(help="Sidecar saying what each prediction is (default: OUT with .truth.json).", show_default=False),
    ] = None,
    seed: Annotated[int, typer.Option(help="Seed; the same seed gives the same files byte for byte.")] = 0,
    iou: Annotated[str, typer.Option(help="IoU range LO,HI of each true positive with its ground truth.")] = "0.7,0.95",
    miss: Annotated[float, typer.Option(help="Fraction of ground-truth boxes left undetected.")] = 0.0,
    duplicates: Annotated[float, typer.Option(help="Fraction of ground-truth boxes given one extra duplicate.")] = 0.0,
    background: Annotated[float, typer.Option(help="Mean number of background false positives per image.")] = 0.0,
    relabel: Annotated[float, typer.Option(help="Fraction of ground-truth boxes detected with a wrong class.")] = 0.0,
    localization: Annotated[
        float, typer.Option(help="Fraction of ground-truth boxes whose only box is badly placed (see --near-iou).")
    ] = 0.0,
    near_iou: Annotated[str, typer.Option(help="IoU range LO,HI of a badly placed box with its ground truth.")] = "0.1,0.45",
    duplicate_iou: Annotated[str, typer.Option(help="IoU range LO,HI of a duplicate with its ground truth.")] = "0.5,0.9",
    background_iou: Annotated[
        float, typer.Option(help="Background boxes have IoU below this with every ground-truth box.")
    ] = 0.1,
    background_size: Annotated[
        str,
        typer.Option(
            help="Size of background boxes: 'objects' (each takes the size of a ground-truth box drawn at random) "
            "or LO,HI, the side as a fraction of the image's shorter side.",
        ),
    ] = "objects",
    score_overlap: Annotated[
        float, typer.Option(help="Overlap in [0, 1] of true-positive and other scores (0: true positives rank first).")
    ] = 0.0,
    modes: Annotated[
        str,
        typer.Option(
            help="Directions of localization error, comma-separated, from: shift, grow, shrink, aspect, free "
            "(default: all five).",
            show_default=False,
        ),
    ] = "shift,grow,shrink,aspect,free",
    keep_inside: Annotated[bool, typer.Option(help="Keep every predicted box inside its image.")] = True,
) -> None:
    """Simulate a detector on a dataset: COCO results plus a sidecar saying what each prediction is.

    Prints a JSON summary of the counts on stdout.
    """
    import orjson

    from synthgen.errors import check_number
    from synthgen.jitter import parse_spec
    from synthgen.jitter.coco import jitter_files

    spec = parse_spec(
        {
            "miss": miss,
            "iou": _pair(iou, "--iou"),
            "modes": tuple(m.strip() for m in modes.split(",") if m.strip()),
            "localization": localization,
            "near_iou": _pair(near_iou, "--near-iou"),
            "duplicates": duplicates,
            "duplicate_iou": _pair(duplicate_iou, "--duplicate-iou"),
            "background": background,
            "background_iou": background_iou,
            "background_size": None if background_size == "objects" else _pair(background_size, "--background-size"),
            "relabel": relabel,
            "score_overlap": score_overlap,
            "keep_inside": keep_inside,
        },
        key=_JITTER_OPTIONS.__getitem__,
    )
    check_number("--seed", seed, lo=0, integer=True)
    summary = jitter_files(dataset, out, truth=truth, seed=seed, spec=spec)
    typer.echo(orjson.dumps(summary, option=orjson.OPT_INDENT_2).decode())
    for name, change in summary["nudged"].items():
        lo, hi = change["asked"]
        if lo == hi:  # one IoU on a threshold: half the boxes would have fallen on each side; say so
            option = _JITTER_OPTIONS[name]
            asked, used = (",".join(f"{v:g}" for v in change[k]) for k in ("asked", "used"))
            typer.echo(
                f"synthgen: note: {option} {asked} ends on a COCO IoU threshold; used {used}, so every box is "
                "on a known side of it (recorded under 'nudged')",
                err=True,
            )
    if summary["ambiguous"]:
        n = summary["ambiguous"]
        typer.echo(
            f"synthgen: note: 'ambiguous': {n} prediction{'s' if n != 1 else ''} also overlap another ground-truth "
            "box at IoU >= 0.5 (less than their own); an evaluator may pair such a box with that other object when "
            "its own is already taken, so counts per kind can differ from an evaluator's by up to this number",
            err=True,
        )

@app.command()
@reported
def score(
    dataset: Annotated[
        Path,
        typer.Argument(help="Dataset directory (reads its annotations.json), a COCO JSON file, or with --pred-dir a sweep directory."),
    ],
    predictions: Annotated[
        Path | None,
        typer.Argument(help="COCO results JSON: an array of records with image_id, category_id, bbox (x, y, width, height) and score.", show_default=False),
    ] = None,
    by: Annotated[
        list[str] | None,
        typer.Option(
            "--by",
            help="Also score per bin of a per-object fact: FACT (default bins) or FACT:E0,E1,... "
            f"(e.g. size:0,8,16,32,inf). Facts: {', '.join(slice_facts())}. Repeatable.",
        ),
    ] = None,
    json_out: Annotated[Path | None, typer.Option("--json", help="Write every metric to this JSON file.")] = None,
    plot: Annotated[
        Path | None,
        typer.Option(
            "--plot",
            help="Write a PNG: recall and AP per bin, one 480x360 px panel per --by fact, 3 per row; "
            "with --pred-dir one 480x360 px panel of AP and AR across the sweep.",
        ),
    ] = None,
    pred_dir: Annotated[
        Path | None,
        typer.Option(
            "--pred-dir",
            help="Score a sweep: DATASET is the sweep directory and this directory holds one results file "
            "per subset, at the subset's relative path plus .json (e.g. objects.size=[4,8].json).",
        ),
    ] = None,
) -> None:
    """Score detections by the COCO box rules, overall, per category and per bin of a fact."""
    import orjson
    from rich.console import Console

    from synthgen._io import write_atomic
    from synthgen.evaluate import score_files, score_sweep
    from synthgen.report import figures as rep

    if (predictions is None) == (pred_dir is None):
        raise UserError("give either a PREDICTIONS file or --pred-dir DIR for a sweep (got "
                        + ("both" if predictions is not None else "neither") + ")")
    _check_output_file("--json", json_out)
    _check_output_file("--plot", plot)
    if plot is not None:
        require_extra("matplotlib", "plots", "option '--plot'")
    if pred_dir is not None:
        points = score_sweep(dataset, pred_dir, by or ())
        console = Console()
        console.print(rep.sweep_table(points))
        for p in points:
            for fact, bins in p.slices.items():
                console.print(rep.slice_table(f"{fact}, {p.label or p.subset}", bins))
        if plot is not None:  # the figure first: a figure that cannot be drawn leaves no JSON behind
            rep.plot_sweep(points, plot)
        if json_out is not None:
            write_atomic(json_out, orjson.dumps({"sweep": [p.to_dict() for p in points]}, option=orjson.OPT_INDENT_2))
        return
    if plot is not None and not by:
        raise UserError("option '--plot' needs at least one --by FACT to plot")
    evaluation, slices = score_files(dataset, predictions, by or ())
    rep.print_report(evaluation, slices)
    if evaluation.n_unknown_category:
        n, ids = evaluation.n_unknown_category, ", ".join(map(str, evaluation.unknown_category_ids[:10]))
        more = "" if len(evaluation.unknown_category_ids) <= 10 else ", ..."
        typer.echo(
            f"synthgen: warning: {n} prediction{'s' if n != 1 else ''} in {predictions} name a category_id the "
            f"ground truth does not list ({ids}{more}); they count in no metric",
            err=True,
        )
    if plot is not None:
        rep.plot_slices(slices, plot, title=f"{predictions.name} on {dataset.name}")
    if json_out is not None:
        write_atomic(json_out, orjson.dumps(evaluation.to_dict(slices), option=orjson.OPT_INDENT_2))


def _check_output_file(option: str, path: Path | None) -> None:
    """Refuse an output file path whose folder is missing or that names a folder, before any work."""
    if path is None:
        return
    if path.is_dir():
        raise UserError(f"option '{option}' must name a file, not a directory (got '{path}')")
    if path.parent.exists() and not path.parent.is_dir():
        raise UserError(f"option '{option}' names a file in '{path.parent}', which is a file (got '{path}')")
    if not path.parent.is_dir():
        raise UserError(f"option '{option}' names a file in a folder that does not exist (got '{path}')")


@app.command()
@reported
def check(
    dataset: Annotated[Path, typer.Argument(help="Dataset directory, or a COCO JSON file.", show_default=False)],
    quick: Annotated[
        bool, typer.Option("--quick", help="Read only image headers for their sizes; do not decode the pixels.")
    ] = False,
) -> None:
    """Validate a dataset in COCO, VOC, YOLO, token or mask format (exit 0 clean, 1 problems, 2 unusable)."""
    from synthgen.formats.check import check_dataset

    report = check_dataset(dataset, decode_images=not quick)
    for problem in report.problems:
        typer.echo(str(problem))
    typer.echo(report.summary())
    if not report.ok:
        raise typer.Exit(1)


@app.command()
@reported
def export(
    dataset: Annotated[Path, typer.Argument(help="Dataset directory written by make.", show_default=False)],
    formats: FormatsOpt = "voc,yolo",
    out: Annotated[
        Path | None,
        typer.Option(
            "--out", "-o",
            help="Output directory (default: the dataset). Another directory becomes a dataset of its own: "
            "images hard-linked (or copied), annotations.json, the formats.",
        ),
    ] = None,
    split: SplitOpt = None,
    seed: Annotated[
        int | None, typer.Option(help="Seed for splits and random token order (default: the manifest's).")
    ] = None,
    bins: Annotated[int, typer.Option("--bins", help="Token bins per axis.")] = 1000,
    order: Annotated[
        TokenOrder,
        typer.Option(metavar="ORDER", help="Object order in token sequences: random, raster, area or distance."),
    ] = TokenOrder.random,
    masks: Annotated[MaskMode, typer.Option(help="Instance masks as id PNGs or per-object RLE lines.")] = MaskMode.png,
    pad_to: Annotated[
        int | None,
        typer.Option(
            "--pad-to", min=0,
            help="Token sequences: pad each image to this many objects with training noise objects "
            "(jittered true boxes and random boxes, noise class, zero coordinate weight).",
        ),
    ] = None,
    noise_jittered: Annotated[
        float, typer.Option("--noise-jittered", min=0.0, max=1.0, help="Share of noise objects made by jittering true boxes.")
    ] = 0.5,
) -> None:
    """Write further formats (and splits) of an existing dataset, without re-rendering."""
    from synthgen.formats import export as export_formats
    from synthgen.formats.export import dataset_seed

    format_names, fractions = _formats_and_split(formats, split)
    noise = None
    if pad_to is not None:
        from synthgen.jitter import noise_padder

        if "tokens" not in format_names:
            raise UserError("option '--pad-to' pads token sequences, so --formats must include tokens (got " f"{formats!r})")
        seed = dataset_seed(dataset) if seed is None else seed
        noise = noise_padder(seed, pad_to, jittered=noise_jittered)
    done = export_formats(
        dataset, format_names, out=out, split=fractions, seed=seed, n_bins=bins, order=order.value, masks=masks.value,
        noise=noise,
    )
    linked = done.pop("images", None)
    written = ", ".join(f"{k} ({n} images)" for k, n in done.items()) or "nothing new"
    where = out if out is not None else dataset
    took = "" if linked is None else f"; {linked} image{'s' if linked != 1 else ''} linked or copied into {where / 'images'}"
    typer.echo(f"wrote {written} to {where}{took}")


@app.command()
@reported
def sweep(
    config: ConfigArg = None,
    vary: Annotated[
        list[str],
        typer.Option(
            "--vary",
            help="A key and the values it takes, KEY=V1,V2,... (TOML values), e.g. --vary objects.max_iou=0,0.3. "
            "Repeatable: one dataset per combination.",
        ),
    ] = ...,
    out: Annotated[Path, typer.Option("--out", "-o", help="Sweep directory: one dataset per combination, and sweep.json.")] = ...,
    count: Annotated[int | None, typer.Option(help="Images per dataset (same as --set count=N).")] = None,
    seed: Annotated[int | None, typer.Option(help="Root seed of every dataset (same as --set seed=S).")] = None,
    set_: SetOpt = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the datasets of a non-empty sweep directory.")] = False,
    resume: Annotated[
        bool, typer.Option("--resume", help="Continue an interrupted sweep in DIR: keep intact images, render the rest.")
    ] = False,
    workers: Annotated[int | None, typer.Option(help="Processes to render with (default: usable cores).", min=1)] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
) -> None:
    """Render one dataset per combination of varied config values, under DIR/<key>=<value>/."""
    from synthgen.run.sweep import parse_vary, plan_sweep, run_sweep

    overrides = _overrides(set_, count, seed)
    varies = [parse_vary(v) for v in vary]
    plan = plan_sweep(config, varies, overrides)
    total = sum(cfg.count for _, _, cfg in plan)
    bar, advance = _progress(total, quiet, "sweeping")
    with bar:
        summary = run_sweep(
            config, varies, out, overrides=overrides, overwrite=overwrite, resume=resume, workers=workers, plan=plan,
            progress=None if advance is None else (lambda done, _total: advance(done)),
        )
    kept = f", {summary.kept} images kept from before" if summary.kept else ""
    typer.echo(
        f"wrote {_count(summary.subsets, 'dataset')} ({_count(summary.images, 'image')}, "
        f"{_count(summary.objects, 'object')}) to {summary.out}{kept} in {summary.seconds:.2f} s"
    )
    for (rel, _, _cfg), record in zip(plan, summary.records):
        _warn_drops(record["objects"], record["dropped"], record["ignored"], where=f"{rel}: ")


@app.command()
@reported
def merge(
    dirs: Annotated[list[Path], typer.Argument(help="Directories written by make --shard K/N (all K of one N).")],
    out: Annotated[
        Path | None,
        typer.Option("--out", "-o", help="Output directory (default: merge in place when one directory is given)."),
    ] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace a dataset in a non-empty --out.")] = False,
) -> None:
    """Join shard outputs into the dataset a single run writes, byte for byte."""
    from synthgen.errors import OutputWriteError
    from synthgen.run.merge import merge_shards

    try:
        summary = merge_shards(dirs, out, overwrite=overwrite)
    except OutputWriteError as exc:
        _fail(f"error: {exc}", 1)
    typer.echo(f"merged {_count(summary.images, 'image')}, {_count(summary.objects, 'object')} into {summary.out} "
               f"in {summary.seconds:.2f} s")


# -- show and stats -------------------------------------------------------------------
def _parse_ids(text: str) -> list[int]:
    """``"3,7,9"`` -> ``[3, 7, 9]``; a bad list is a user error naming the option."""
    try:
        ids = [int(part) for part in text.replace(" ", "").split(",") if part]
    except ValueError:
        ids = []
    if not ids:
        raise UserError(f"option '--ids' must be comma-separated image ids, e.g. 3,7,9 (got {text!r})")
    return ids


DatasetArg = Annotated[
    Path,
    typer.Argument(help="Dataset directory (with annotations.json) or a COCO JSON file.", show_default=False),
]


@app.command()
@reported
def show(
    dataset: DatasetArg,
    out: Annotated[Path, typer.Option("--out", "-o", help="Contact sheet to write (PNG).")] = ...,
    images: Annotated[
        int | None,
        typer.Option("--images", "-n", help="Number of images: the first N by image id (default: 16).", min=1),
    ] = None,
    ids: Annotated[
        str | None,
        typer.Option("--ids", help="Comma-separated COCO image ids to show, e.g. 3,7,9 (instead of --images)."),
    ] = None,
    pred: Annotated[
        Path | None,
        typer.Option("--pred", help="COCO results file; predictions are drawn dashed, coloured by what each is."),
    ] = None,
    truth: Annotated[
        Path | None,
        typer.Option(
            "--truth",
            help="Sidecar from `synthgen jitter` saying what each prediction is (default: match at IoU 0.5).",
        ),
    ] = None,
    zoom: Annotated[
        bool, typer.Option("--zoom", help="Add enlarged crops of the smallest objects (nearest neighbour).")
    ] = False,
    image_dir: Annotated[
        Path | None,
        typer.Option("--image-dir", help="Directory holding the images, if not beside the annotation file."),
    ] = None,
    cols: Annotated[
        int | None, typer.Option("--cols", help="Tiles per row (default: about the square root of the count).", min=1)
    ] = None,
    scale: Annotated[
        float | None,
        typer.Option(
            "--scale",
            help="Tile pixels per image pixel (default: small images enlarged by a whole factor, large shrunk).",
            min=0.05,
            max=32,
        ),
    ] = None,
) -> None:
    """Draw a contact sheet: images in a grid with their boxes, ids and a legend."""
    from synthgen import report

    _check_output_file("--out", out)
    if images is not None and ids is not None:
        raise UserError("options '--images' and '--ids' choose the images in two ways; give one")
    images = 16 if images is None else images
    if truth is not None and pred is None:
        raise UserError("option '--truth' needs '--pred' (the predictions the sidecar describes)")
    ds = report.open_dataset(dataset, image_dir=image_dir)
    id_list = _parse_ids(ids) if ids is not None else None
    predictions = missed = None
    how = ""
    if pred is not None:
        predictions = report.read_predictions(pred)
        if truth is not None:
            side = report.read_truth_sidecar(truth, len(predictions))
            predictions = predictions.with_kinds(side.kinds)
            missed = side.missed
            how = f", kinds from {truth}"
        else:
            predictions, missed = report.classify_predictions(ds.coco, predictions)
            how = ", kinds by matching at IoU 0.5"
    sheet = report.contact_sheet(
        ds, n=images, ids=id_list, cols=cols, scale=scale, predictions=predictions, missed=missed, zoom=zoom
    )
    report.save_png(sheet.pixels, out)
    shown = len(id_list) if id_list is not None else min(images, len(ds.coco["images"]))
    extra = f", {len(predictions)} predictions{how}" if predictions is not None else ""
    size = f"{sheet.pixels.shape[1]}x{sheet.pixels.shape[0]} px"
    typer.echo(f"wrote {out} ({size}, {shown} image{'s' if shown != 1 else ''}{extra})")


@app.command()
@reported
def stats(
    dataset: DatasetArg,
    json_out: Annotated[
        Path | None, typer.Option("--json", help="Also write the statistics as JSON to this file.")
    ] = None,
    plot: Annotated[
        Path | None, typer.Option("--plot", help="Also write a figure of histograms (PNG, 1200x700 px).")
    ] = None,
) -> None:
    """Summarise a dataset: counts, sizes, COCO area ranges, visibility, overlap, settings used."""
    from rich.console import Console

    from synthgen import report

    _check_output_file("--json", json_out)
    _check_output_file("--plot", plot)
    if plot is not None:
        require_extra("matplotlib", "plots", "option '--plot'")
    ds = report.open_dataset(dataset)
    result = report.dataset_stats(ds.coco, ds.manifest)
    Console(highlight=False, soft_wrap=False).print(report.stats_tables(result, title=ds.name))
    if json_out is not None:
        report.save_json(result, json_out)
        typer.echo(f"wrote {json_out}")
    if plot is not None:
        n_im, n_obj = result["images"], result["objects"]
        title = f"{ds.name}: {n_im} image{'s' if n_im != 1 else ''}, {n_obj} object{'s' if n_obj != 1 else ''}"
        fig = report.stats_figure(ds.coco, title=title)
        report.save_figure(fig, plot)
        typer.echo(f"wrote {plot}")


for _info in app.registered_commands:  # every command's help in the plain style above
    if _info.cls in (None, typer.core.TyperCommand):
        _info.cls = _Command


def main() -> None:
    """Entry point of the ``synthgen`` console script.

    Usage mistakes caught by the option parser (an unknown option, a value of
    the wrong type) are printed as one line, like every other user error.
    """
    try:
        code = app(prog_name="synthgen", standalone_mode=False)
    except typer.TyperException as exc:  # the parser's usage errors
        text = exc.format_message() if hasattr(exc, "format_message") else str(exc)
        text = " ".join(text.split()).rstrip(".")
        if text:  # empty when the parser has just shown the help for a bare command
            ctx = getattr(exc, "ctx", None)
            help_ = f"see '{ctx.command_path} --help'" if ctx is not None else ""
            # after a question ("Did you mean 'make'?") the pointer to the help goes in brackets
            where = "" if not help_ else f" ({help_})" if text.endswith("?") else f"; {help_}"
            typer.echo(f"synthgen: error: {text}{where}", err=True)
        sys.exit(getattr(exc, "exit_code", 2))
    except typer.Abort:
        typer.echo("synthgen: interrupted", err=True)
        sys.exit(130)
    sys.exit(code if isinstance(code, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()
