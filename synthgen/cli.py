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
from enum import Enum
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


# -- options shared by make and export (formats and splits) ------------------------
FormatsOpt = Annotated[
    str,
    typer.Option(
        "--formats", help="Comma-separated formats: coco, voc, yolo, tokens, masks (COCO JSON is always written by make)."
    ),
]
SplitOpt = Annotated[
    Optional[str],
    typer.Option("--split", help="Split the images, e.g. train=0.8,val=0.1,test=0.1 (one COCO file per split)."),
]


def _formats_and_split(formats: str, split: str | None):
    from synthgen.formats import parse_formats, parse_split

    return parse_formats(formats), (parse_split(split) if split else None)


@app.command()
@reported
def make(
    config: ConfigArg = None,
    out: Annotated[Path, typer.Option("--out", "-o", help="Output directory.")] = ...,
    count: Annotated[Optional[int], typer.Option(help="Number of images (same as --set count=N).")] = None,
    seed: Annotated[Optional[int], typer.Option(help="Root seed (same as --set seed=S).")] = None,
    set_: SetOpt = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the dataset in a non-empty output directory.")] = False,
    workers: Annotated[Optional[int], typer.Option(help="Processes to render with (default: usable cores).", min=1)] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
    formats: FormatsOpt = "coco",
    split: SplitOpt = None,
) -> None:
    """Render a dataset: images, COCO JSON annotations and a manifest."""
    from synthgen.config import load_config
    from synthgen.dataset import make_dataset

    overrides = list(set_ or [])
    if count is not None:
        overrides.append(f"count={count}")
    if seed is not None:
        overrides.append(f"seed={seed}")
    cfg = load_config(config, overrides)
    format_names, fractions = _formats_and_split(formats, split)
    bar, advance = _progress(cfg.count, quiet, "rendering")
    with bar:
        summary = make_dataset(
            cfg, out, overwrite=overwrite, workers=workers, progress=advance, formats=format_names, split=fractions
        )
    typer.echo(
        f"wrote {summary.images} images, {summary.objects} objects to {summary.out} "
        f"in {summary.seconds:.2f} s ({summary.images_per_second:.1f} images/s)"
    )


# -- check and export -----------------------------------------------------------------
class TokenOrder(str, Enum):
    random = "random"
    raster = "raster"
    area = "area"
    distance = "distance"


class MaskMode(str, Enum):
    png = "png"
    rle = "rle"


@app.command()
@reported
def check(
    dataset: Annotated[Path, typer.Argument(help="Dataset directory, or a COCO JSON file.", show_default=False)],
    quick: Annotated[
        bool, typer.Option("--quick", help="Read only image headers for their sizes; do not decode the pixels.")
    ] = False,
) -> None:
    """Validate a dataset in COCO, VOC, YOLO, token or mask format (exit 0 clean, 1 problems, 2 unusable)."""
    from synthgen.check import check_dataset

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
    out: Annotated[Optional[Path], typer.Option("--out", "-o", help="Output directory (default: the dataset).")] = None,
    split: SplitOpt = None,
    seed: Annotated[
        Optional[int], typer.Option(help="Seed for splits and random token order (default: the manifest's).")
    ] = None,
    bins: Annotated[int, typer.Option("--bins", help="Token bins per axis.")] = 1000,
    order: Annotated[TokenOrder, typer.Option(help="Object order in token sequences.")] = TokenOrder.random,
    masks: Annotated[MaskMode, typer.Option(help="Instance masks as id PNGs or per-object RLE lines.")] = MaskMode.png,
) -> None:
    """Write further formats (and splits) of an existing dataset, without re-rendering."""
    from synthgen.formats import export as export_formats

    format_names, fractions = _formats_and_split(formats, split)
    done = export_formats(
        dataset, format_names, out=out, split=fractions, seed=seed, n_bins=bins, order=order.value, masks=masks.value
    )
    written = ", ".join(f"{k} ({n} images)" for k, n in done.items()) or "nothing new"
    typer.echo(f"wrote {written} to {out if out is not None else dataset}")


def main() -> None:
    """Entry point of the ``synthgen`` console script."""
    app(prog_name="synthgen")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
