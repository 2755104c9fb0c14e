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
    workers: Annotated[Optional[int], typer.Option(help="Processes to render with (default: usable cores).", min=1)] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
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
    bar, advance = _progress(cfg.count, quiet, "rendering")
    with bar:
        summary = make_dataset(cfg, out, overwrite=overwrite, workers=workers, progress=advance)
    typer.echo(
        f"wrote {summary.images} images, {summary.objects} objects to {summary.out} "
        f"in {summary.seconds:.2f} s ({summary.images_per_second:.1f} images/s)"
    )


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
        int, typer.Option("--images", "-n", help="Number of images: the first N by image id.", min=1)
    ] = 16,
    ids: Annotated[
        Optional[str],
        typer.Option("--ids", help="Comma-separated COCO image ids to show, e.g. 3,7,9 (instead of --images)."),
    ] = None,
    pred: Annotated[
        Optional[Path],
        typer.Option("--pred", help="COCO results file; predictions are drawn dashed, coloured by what each is."),
    ] = None,
    truth: Annotated[
        Optional[Path],
        typer.Option(
            "--truth",
            help="Sidecar from `synthgen jitter` saying what each prediction is (default: match at IoU 0.5).",
        ),
    ] = None,
    zoom: Annotated[
        bool, typer.Option("--zoom", help="Add enlarged crops of the smallest objects (nearest neighbour).")
    ] = False,
    cols: Annotated[
        Optional[int], typer.Option("--cols", help="Tiles per row (default: about the square root of the count).", min=1)
    ] = None,
    scale: Annotated[
        Optional[float],
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

    if truth is not None and pred is None:
        raise UserError("option '--truth' needs '--pred' (the predictions the sidecar describes)")
    ds = report.open_dataset(dataset)
    id_list = _parse_ids(ids) if ids is not None else None
    predictions = None
    how = ""
    if pred is not None:
        predictions = report.read_predictions(pred)
        if truth is not None:
            kinds = report.read_truth_sidecar(truth, len(predictions))
            predictions = report.Predictions(
                predictions.boxes, predictions.image_id, predictions.category_id, predictions.score, kinds
            )
            how = f", kinds from {truth}"
        else:
            predictions, _ = report.classify_predictions(ds.coco, predictions)
            how = ", kinds by matching at IoU 0.5"
    sheet = report.contact_sheet(
        ds, n=images, ids=id_list, cols=cols, scale=scale, predictions=predictions, zoom=zoom
    )
    report.save_png(sheet.pixels, out)
    shown = len(id_list) if id_list is not None else min(images, len(ds.coco["images"]))
    extra = f", {len(predictions)} predictions{how}" if predictions is not None else ""
    typer.echo(f"wrote {out} ({sheet.pixels.shape[1]}x{sheet.pixels.shape[0]} px, {shown} images{extra})")


@app.command()
@reported
def stats(
    dataset: DatasetArg,
    json_out: Annotated[
        Optional[Path], typer.Option("--json", help="Also write the statistics as JSON to this file.")
    ] = None,
    plot: Annotated[
        Optional[Path], typer.Option("--plot", help="Also write a figure of histograms (PNG, 1200x700 px).")
    ] = None,
) -> None:
    """Summarise a dataset: counts, sizes, COCO area ranges, visibility, overlap, settings used."""
    from rich.console import Console

    from synthgen import report

    ds = report.open_dataset(dataset)
    result = report.dataset_stats(ds.coco, ds.manifest)
    Console(highlight=False, soft_wrap=False).print(report.stats_tables(result, title=ds.name))
    if json_out is not None:
        report.save_json(result, json_out)
        typer.echo(f"wrote {json_out}")
    if plot is not None:
        title = f"{ds.name}: {result['images']} images, {result['objects']} objects"
        fig = report.stats_figure(ds.coco, title=title)
        report.save_figure(fig, plot)
        typer.echo(f"wrote {plot}")


def main() -> None:
    """Entry point of the ``synthgen`` console script."""
    app(prog_name="synthgen")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
