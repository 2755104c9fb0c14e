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
    count: Annotated[Optional[int], typer.Option(help="Images per dataset (same as --set count=N).")] = None,
    seed: Annotated[Optional[int], typer.Option(help="Root seed of every dataset (same as --set seed=S).")] = None,
    set_: SetOpt = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the datasets of a non-empty sweep directory.")] = False,
    workers: Annotated[Optional[int], typer.Option(help="Processes to render with (default: usable cores).", min=1)] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
) -> None:
    """Render one dataset per combination of varied config values, under DIR/<key>=<value>/."""
    from synthgen.sweep import parse_vary, plan_sweep, run_sweep

    overrides = list(set_ or [])
    if count is not None:
        overrides.append(f"count={count}")
    if seed is not None:
        overrides.append(f"seed={seed}")
    varies = [parse_vary(v) for v in vary]
    total = sum(cfg.count for _, _, cfg in plan_sweep(config, varies, overrides))
    bar, advance = _progress(total, quiet, "sweeping")
    with bar:
        summary = run_sweep(
            config, varies, out, overrides=overrides, overwrite=overwrite, workers=workers,
            progress=None if advance is None else (lambda done, _total: advance(done)),
        )
    typer.echo(
        f"wrote {summary.subsets} datasets ({summary.images} images, {summary.objects} objects) "
        f"to {summary.out} in {summary.seconds:.2f} s"
    )


def main() -> None:
    """Entry point of the ``synthgen`` console script."""
    app(prog_name="synthgen")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
