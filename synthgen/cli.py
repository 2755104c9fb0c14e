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
from pathlib import Path
from typing import Annotated, Optional

import click
import typer

from synthgen.errors import UserError

__all__ = ["app", "main"]

app = typer.Typer(
    name="synthgen",
    help="Object-detection test data whose right answer is known exactly.",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
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
        except (typer.Exit, typer.Abort, click.exceptions.ClickException, click.exceptions.Exit):
            raise
        except KeyboardInterrupt:
            _fail("interrupted", 130)
        except Exception as exc:  # unexpected: report it, exit 1
            if os.environ.get("SYNTHGEN_DEBUG"):
                traceback.print_exc()
            where = f" ({exc.filename})" if isinstance(exc, OSError) and exc.filename else ""
            _fail(f"unexpected failure: {type(exc).__name__}: {exc}{where}", 1)

    return wrapper


def _progress(total: int, quiet: bool, label: str):
    """A rich progress bar on stderr, or a no-op; returns (context manager, advance(done))."""
    from contextlib import nullcontext

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
    return progress, lambda done: progress.update(task, completed=done)


ConfigArg = Annotated[
    Optional[Path],
    typer.Argument(help="TOML config; keys not given take built-in defaults (see configs/).", show_default=False),
]
SetOpt = Annotated[
    Optional[list[str]],
    typer.Option("--set", help="Override a config key with a TOML value, e.g. --set objects.count=[5,10]. Repeatable."),
]


@app.command()
@reported
def make(
    config: ConfigArg = None,
    out: Annotated[Path, typer.Option("--out", "-o", help="Output directory.")] = ...,
    count: Annotated[Optional[int], typer.Option(help="Number of images (same as --set count=N).")] = None,
    seed: Annotated[Optional[int], typer.Option(help="Root seed (same as --set seed=S).")] = None,
    set_: SetOpt = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the dataset in a non-empty output directory.")] = False,
    resume: Annotated[
        bool,
        typer.Option("--resume", help="Continue an interrupted run in DIR: keep intact images, render the rest."),
    ] = False,
    workers: Annotated[Optional[int], typer.Option(help="Processes to render with (default: usable cores).")] = None,
    shard: Annotated[
        Optional[str],
        typer.Option(
            "--shard", metavar="K/N",
            help="Render only shard K of N (images whose index % N == K) and a shard manifest; join with `merge`.",
        ),
    ] = None,
    cluster: Annotated[
        Optional[str],
        typer.Option(
            "--cluster", metavar="ADDRESS|local",
            help="Render on a Dask cluster (scheduler address, or 'local'); needs pip install 'synthgen\\[cluster]'.",
        ),
    ] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
) -> None:
    """Render a dataset: images, COCO JSON annotations and a manifest."""
    from synthgen.config import load_config
    from synthgen.dataset import make_dataset
    from synthgen.shards import OutputWriteError, parse_shard

    overrides = list(set_ or [])
    if count is not None:
        overrides.append(f"count={count}")
    if seed is not None:
        overrides.append(f"seed={seed}")
    cfg = load_config(config, overrides)
    part = parse_shard(shard) if shard is not None else None
    if workers is not None and workers < 1:
        raise UserError(f"option '--workers' must be a whole number >= 1 (got {workers})")
    total = len(part.indices(cfg.count)) if part is not None else cfg.count
    bar, advance = _progress(total, quiet, "rendering")
    try:
        with bar:
            summary = make_dataset(
                cfg, out, overwrite=overwrite, resume=resume, workers=workers, shard=part, cluster=cluster,
                progress=None if advance is None else (lambda done, _total: advance(done)),
            )
    except OutputWriteError as exc:
        _fail(f"error: {exc}", 1)
    what = "" if summary.shard.whole else f" (shard {summary.shard.index}/{summary.shard.count})"
    kept = f", {summary.kept} kept from before" if summary.kept else ""
    typer.echo(
        f"wrote {summary.images} images{what}, {summary.objects} objects to {summary.out}{kept} "
        f"in {summary.seconds:.2f} s ({summary.images_per_second:.1f} images/s)"
    )


@app.command()
@reported
def merge(
    dirs: Annotated[list[Path], typer.Argument(help="Directories written by make --shard K/N (all K of one N).")],
    out: Annotated[
        Optional[Path],
        typer.Option("--out", "-o", help="Output directory (default: merge in place when one directory is given)."),
    ] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace a dataset in a non-empty --out.")] = False,
) -> None:
    """Join shard outputs into the dataset a single run writes, byte for byte."""
    from synthgen.dataset import merge_shards
    from synthgen.shards import OutputWriteError

    try:
        summary = merge_shards(dirs, out, overwrite=overwrite)
    except OutputWriteError as exc:
        _fail(f"error: {exc}", 1)
    typer.echo(f"merged {summary.images} images, {summary.objects} objects into {summary.out} in {summary.seconds:.2f} s")


def main() -> None:
    """Entry point of the ``synthgen`` console script."""
    app(prog_name="synthgen")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
