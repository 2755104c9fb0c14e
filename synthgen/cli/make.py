"""Commands that write datasets: make, export, sweep, merge."""

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import (
    ConfigArg,
    FormatsOpt,
    SetOpt,
    SplitOpt,
    _count,
    _fail,
    _formats_and_split,
    _overrides,
    _progress,
    _warn_drops,
    reported,
)
from synthgen.errors import UserError


class TokenOrder(StrEnum):
    random = "random"
    raster = "raster"
    area = "area"
    distance = "distance"


class MaskMode(StrEnum):
    png = "png"
    rle = "rle"



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
            help="Render on a Dask cluster (scheduler address, or 'local'); needs the [cluster] extra.",
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
    from synthgen.formats.dataset_dir import IMAGES_DIR

    took = "" if linked is None else f"; {linked} image{'s' if linked != 1 else ''} linked or copied into {where / IMAGES_DIR}"
    typer.echo(f"wrote {written} to {where}{took}")


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


