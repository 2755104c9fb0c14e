"""``synthgen report``: one self-contained HTML page of a scored run."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import _check_output_file, reported


@reported
def report(
    run: Annotated[
        Path,
        typer.Argument(help="A probe output directory, a dataset (directory or COCO JSON file), or a sweep directory."),
    ],
    predictions: Annotated[
        Path | None,
        typer.Argument(help="For a dataset its COCO results file; for a sweep its predictions directory "
                       "(one file per subset, as score --pred-dir reads).", show_default=False),
    ] = None,
    out: Annotated[Path, typer.Option("--out", "-o", help="HTML page to write (one self-contained file).")] = ...,
    by: Annotated[
        list[str] | None,
        typer.Option("--by", help="Facts to slice by, FACT or FACT:E0,E1,... (default: the probe's, else size, "
                     "visible_fraction, max_iou, contrast, kind, truncated where recorded). Repeatable."),
    ] = None,
    crops: Annotated[
        int, typer.Option("--crops", help="Worst misses and worst false positives shown per subset, each.", min=0)
    ] = 10,
) -> None:
    """Write one HTML page of a scored run: what was run, headline, errors, curves, failures, tables."""
    from synthgen.page import write_report

    _check_output_file("--out", out)
    done = write_report(run, out, predictions, by=by, crops=crops)
    n = done["subsets"]
    typer.echo(f"wrote {out} ({done['bytes'] / 1024:.0f} KB, {n} subset{'s' if n != 1 else ''})")
