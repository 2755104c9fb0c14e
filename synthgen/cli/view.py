"""Commands that read a dataset: check, show, stats."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import DatasetArg, _check_output_file, _parse_ids, reported
from synthgen.errors import UserError, require_extra


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
    zoom_pick: Annotated[
        str,
        typer.Option("--zoom-pick", help="Objects the zoom strip shows: smallest, spread (sizes from the smallest "
                     "up) or missed (the smallest no prediction found; needs --pred)."),
    ] = "smallest",
    zoom_count: Annotated[
        int | None, typer.Option("--zoom-count", help="Number of zoom crops (default: two rows).", min=1)
    ] = None,
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
    if pred is not None:
        predictions, missed, how = report.overlay_predictions(ds, pred, truth)
    sheet = report.contact_sheet(
        ds, n=images, ids=id_list, cols=cols, scale=scale, predictions=predictions, missed=missed, zoom=zoom,
        zoom_count=zoom_count, zoom_pick=zoom_pick,
    )
    report.save_png(sheet.pixels, out)
    shown = len(id_list) if id_list is not None else min(images, len(ds.coco["images"]))
    extra = ""
    if predictions is not None:  # count the predictions drawn, not every one in the file
        extra = f", {report.predictions_on(sheet.tiles, predictions)} of {len(predictions)} predictions drawn, {how}"
    size = f"{sheet.pixels.shape[1]}x{sheet.pixels.shape[0]} px"
    typer.echo(f"wrote {out} ({size}, {shown} image{'s' if shown != 1 else ''}{extra})")


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


