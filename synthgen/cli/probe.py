"""``synthgen probe``: run a detector over a dataset or sweep and score it factor by factor."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import SetOpt, _count, _overrides, reported


@reported
def probe(
    source: Annotated[
        Path,
        typer.Argument(help="Dataset directory, sweep directory, or TOML config (made first under DIR/data).",
                       show_default=False),
    ],
    detector: Annotated[
        str,
        typer.Option(
            "--detector", "-d",
            help="builtin (the reference detector), MODULE:FUNC or FILE.py:FUNC (your Python callable), "
            "onnx:MODEL.onnx (needs the onnx extra) or results:DIR (COCO results per subset).",
        ),
    ] = ...,
    out: Annotated[
        Path, typer.Option("--out", "-o", help="Probe directory: predictions, score.json, figures, probe.json.")
    ] = ...,
    by: Annotated[
        list[str] | None,
        typer.Option("--by", help="Score per bin of this fact, FACT or FACT:E0,E1,... Repeatable "
                     "(default: size, visible_fraction, contrast, max_iou)."),
    ] = None,
    batch: Annotated[int, typer.Option("--batch", help="Images per detector call.", min=1)] = 8,
    workers: Annotated[int, typer.Option(help="Processes to run the detector in (it must be picklable).", min=1)] = 1,
    resume: Annotated[bool, typer.Option("--resume", help="Continue an interrupted probe in DIR.")] = False,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace the probe in a non-empty DIR.")] = False,
    vary: Annotated[
        list[str] | None,
        typer.Option("--vary", help="With a config SOURCE: make a sweep, KEY=V1,V2,... as for `sweep`. Repeatable."),
    ] = None,
    count: Annotated[int | None, typer.Option(help="With a config SOURCE: images per dataset.")] = None,
    seed: Annotated[int | None, typer.Option(help="With a config SOURCE: root seed.")] = None,
    set_: SetOpt = None,
    report: Annotated[
        bool, typer.Option("--report/--no-report", help="Also write DIR/report.html (needs the plots extra).")
    ] = True,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
) -> None:
    """Run a detector over a dataset or sweep, keep its predictions and score them factor by factor."""
    from synthgen.probe import parse_detector, run_probe
    from synthgen.probe.progress import stderr_bar

    spec = parse_detector(detector)
    with stderr_bar("rendering", quiet) as data_progress, stderr_bar("detecting", quiet) as progress:
        summary = run_probe(
            source, spec, out, by=by, batch=batch, workers=workers, resume=resume, overwrite=overwrite,
            vary=vary or (), overrides=_overrides(set_, count, seed), progress=progress, data_progress=data_progress,
            report=report,
        )
    for name, (ap, ap50) in summary.scores.items():
        typer.echo(f"{name}: AP {ap:.3f}, AP50 {ap50:.3f}")
    rate = "" if not summary.detector_seconds else (
        f", {summary.detected / summary.detector_seconds:.1f} images/s in the detector")
    typer.echo(f"probed {_count(summary.images, 'image')} into {summary.out} in {summary.seconds:.2f} s{rate}")
    if summary.page is not None:
        typer.echo(f"wrote {summary.page}")
    elif report:
        typer.echo("no report.html: the page needs matplotlib (pip install 'synthgen-shapes[plots]')", err=True)
