"""Commands for evaluator authors: cases, conform."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import reported


@reported
def cases(
    out: Annotated[
        Path | None,
        typer.Option("--out", help="Write one folder per case into this new (or empty) folder.", show_default=False),
    ] = None,
) -> None:
    """Known-answer cases for detection evaluators: list them, or write them with --out."""
    from synthgen.cases import build_cases, write_cases

    if out is None:
        for case in build_cases():
            typer.echo(f"{case.name}  {case.trap}")
        return
    typer.echo(f"wrote {len(write_cases(out))} cases to {out}")


@reported
def conform(
    spec: Annotated[
        str,
        typer.Argument(
            help="The evaluator: module:function or file.py:function taking (annotations, predictions), "
            "or a command with {annotations} {predictions} {out} that writes its stats as JSON to {out}.",
            show_default=False,
        ),
    ],
    cases_dir: Annotated[
        Path | None,
        typer.Option("--cases", help="Folder written by 'synthgen cases --out' (default: the built-in cases).",
                     show_default=False),
    ] = None,
    tolerance: Annotated[float, typer.Option("--tolerance", help="Largest accepted difference per statistic.")] = 1e-6,
    paths: Annotated[
        bool, typer.Option("--paths", help="Pass file paths, not a dict and a list, to a Python evaluator.")
    ] = False,
) -> None:
    """Run an evaluator on the known-answer cases: a table, exit 1 when any case fails."""
    from rich.console import Console

    from synthgen.cases import conform as run_cases
    from synthgen.cases import outcome_table, summary

    outcomes = run_cases(spec, cases_dir, tolerance=tolerance, paths=paths)
    Console().print(outcome_table(outcomes))
    typer.echo(summary(outcomes))
    if not all(o.passed for o in outcomes):
        raise typer.Exit(1)
