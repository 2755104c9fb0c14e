"""``synthgen tokens``: token sequences for sequence-style detectors (what their bins cost)."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import APP_SETTINGS, _check_output_file, _Command, _Group, reported
from synthgen.errors import UserError

app = typer.Typer(
    help="Token sequences for sequence-style detectors: what their bins cost.",
    cls=_Group,
    **APP_SETTINGS,
)


def _numbers(text: str, option: str, convert) -> list:
    """Comma-separated numbers of an option, or a one-line error naming it."""
    try:
        return [convert(v) for v in text.split(",")]
    except ValueError:
        raise UserError(f"option '{option}' must be comma-separated numbers (got {text!r})") from None


@app.command(cls=_Command)
@reported
def ceiling(
    dataset: Annotated[
        Path,
        typer.Argument(help="Dataset directory (reads its annotations.json) or a COCO JSON file.", show_default=False),
    ],
    bins: Annotated[
        str, typer.Option("--bins", help="Bin counts per axis to try, comma-separated.")
    ] = "10,25,50,100,500,1000",
    sizes: Annotated[
        str,
        typer.Option("--sizes", help="Size bucket edges on the longer box side in px, comma-separated (inf allowed)."),
    ] = "0,4,8,16,32,64,128,inf",
    json_out: Annotated[
        Path | None, typer.Option("--json", help="Also write the table as JSON to this file.")
    ] = None,
    plot: Annotated[
        Path | None,
        typer.Option("--plot", help="Also write a PNG (1440x400 px): AP, AP50, AP75 against n per size bucket."),
    ] = None,
) -> None:
    """The best AP a sequence model can reach when its box coordinates are quantized into n bins."""
    from synthgen.evaluate.ceiling import dataset_ceiling, format_ceiling

    _check_output_file("--json", json_out)
    _check_output_file("--plot", plot)
    result = dataset_ceiling(
        dataset, _numbers(bins, "--bins", int), _numbers(sizes, "--sizes", float), json_path=json_out, plot_path=plot
    )
    typer.echo(format_ceiling(result))
