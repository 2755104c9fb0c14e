"""Commands about predicted boxes: jitter (simulate a detector) and score (evaluate one)."""

from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._common import _check_output_file, _pair, reported
from synthgen.errors import UserError, require_extra
from synthgen.scene.facts import slice_facts

# DetectorSpec field -> the jitter option that sets it (errors about a field name its option)
_JITTER_OPTIONS = {
    "iou": "--iou",
    "miss": "--miss",
    "duplicates": "--duplicates",
    "background": "--background",
    "relabel": "--relabel",
    "localization": "--localization",
    "near_iou": "--near-iou",
    "duplicate_iou": "--duplicate-iou",
    "background_iou": "--background-iou",
    "background_size": "--background-size",
    "score_overlap": "--score-overlap",
    "modes": "--modes",
    "keep_inside": "--keep-inside",
}



@reported
def jitter(
    dataset: Annotated[Path, typer.Argument(help="Dataset directory holding annotations.json.", show_default=False)],
    out: Annotated[Path, typer.Option("--out", "-o", help="COCO results file to write (JSON array).")] = ...,
    truth: Annotated[
        Path | None,
        typer.Option(help="Sidecar saying what each prediction is (default: OUT with .truth.json).", show_default=False),
    ] = None,
    seed: Annotated[int, typer.Option(help="Seed; the same seed gives the same files byte for byte.")] = 0,
    iou: Annotated[str, typer.Option(help="IoU range LO,HI of each true positive with its ground truth.")] = "0.7,0.95",
    miss: Annotated[float, typer.Option(help="Fraction of ground-truth boxes left undetected.")] = 0.0,
    duplicates: Annotated[float, typer.Option(help="Fraction of ground-truth boxes given one extra duplicate.")] = 0.0,
    background: Annotated[float, typer.Option(help="Mean number of background false positives per image.")] = 0.0,
    relabel: Annotated[float, typer.Option(help="Fraction of ground-truth boxes detected with a wrong class.")] = 0.0,
    localization: Annotated[
        float, typer.Option(help="Fraction of ground-truth boxes whose only box is badly placed (see --near-iou).")
    ] = 0.0,
    near_iou: Annotated[str, typer.Option(help="IoU range LO,HI of a badly placed box with its ground truth.")] = "0.1,0.45",
    duplicate_iou: Annotated[str, typer.Option(help="IoU range LO,HI of a duplicate with its ground truth.")] = "0.5,0.9",
    background_iou: Annotated[
        float, typer.Option(help="Background boxes have IoU below this with every ground-truth box.")
    ] = 0.1,
    background_size: Annotated[
        str,
        typer.Option(
            help="Size of background boxes: 'objects' (each takes the size of a ground-truth box drawn at random) "
            "or LO,HI, the side as a fraction of the image's shorter side.",
        ),
    ] = "objects",
    score_overlap: Annotated[
        float, typer.Option(help="Overlap in [0, 1] of true-positive and other scores (0: true positives rank first).")
    ] = 0.0,
    modes: Annotated[
        str,
        typer.Option(
            help="Directions of localization error, comma-separated, from: shift, grow, shrink, aspect, free "
            "(default: all five).",
            show_default=False,
        ),
    ] = "shift,grow,shrink,aspect,free",
    keep_inside: Annotated[bool, typer.Option(help="Keep every predicted box inside its image.")] = True,
) -> None:
    """Simulate a detector on a dataset: COCO results plus a sidecar saying what each prediction is.

    Prints a JSON summary of the counts on stdout.
    """
    import orjson

    from synthgen.errors import check_number
    from synthgen.jitter import parse_spec
    from synthgen.jitter.coco import jitter_files

    spec = parse_spec(
        {
            "miss": miss,
            "iou": _pair(iou, "--iou"),
            "modes": tuple(m.strip() for m in modes.split(",") if m.strip()),
            "localization": localization,
            "near_iou": _pair(near_iou, "--near-iou"),
            "duplicates": duplicates,
            "duplicate_iou": _pair(duplicate_iou, "--duplicate-iou"),
            "background": background,
            "background_iou": background_iou,
            "background_size": None if background_size == "objects" else _pair(background_size, "--background-size"),
            "relabel": relabel,
            "score_overlap": score_overlap,
            "keep_inside": keep_inside,
        },
        key=_JITTER_OPTIONS.__getitem__,
    )
    check_number("--seed", seed, lo=0, integer=True)
    summary = jitter_files(dataset, out, truth=truth, seed=seed, spec=spec)
    typer.echo(orjson.dumps(summary, option=orjson.OPT_INDENT_2).decode())
    _print_notes(summary)


def _print_notes(summary: dict) -> None:
    """Notes on stderr: IoU ranges nudged off a COCO threshold, predictions an evaluator may pair otherwise."""
    for name, change in summary["nudged"].items():
        lo, hi = change["asked"]
        if lo == hi:  # one IoU on a threshold: half the boxes would have fallen on each side; say so
            option = _JITTER_OPTIONS[name]
            asked, used = (",".join(f"{v:g}" for v in change[k]) for k in ("asked", "used"))
            typer.echo(
                f"synthgen: note: {option} {asked} ends on a COCO IoU threshold; used {used}, so every box is "
                "on a known side of it (recorded under 'nudged')",
                err=True,
            )
    if summary["ambiguous"]:
        n = summary["ambiguous"]
        typer.echo(
            f"synthgen: note: 'ambiguous': {n} prediction{'s' if n != 1 else ''} also overlap another ground-truth "
            "box at IoU >= 0.5 (less than their own); an evaluator may pair such a box with that other object when "
            "its own is already taken, so counts per kind can differ from an evaluator's by up to this number",
            err=True,
        )


@reported
def score(
    dataset: Annotated[
        Path,
        typer.Argument(help="Dataset directory (reads its annotations.json), a COCO JSON file, or with --pred-dir a sweep directory."),
    ],
    predictions: Annotated[
        Path | None,
        typer.Argument(help="COCO results JSON: an array of records with image_id, category_id, bbox (x, y, width, height) and score.", show_default=False),
    ] = None,
    by: Annotated[
        list[str] | None,
        typer.Option(
            "--by",
            help="Also score per bin of a per-object fact: FACT (default bins) or FACT:E0,E1,... "
            f"(e.g. size:0,8,16,32,inf). Facts: {', '.join(slice_facts())}. Repeatable.",
        ),
    ] = None,
    json_out: Annotated[Path | None, typer.Option("--json", help="Write every metric to this JSON file.")] = None,
    plot: Annotated[
        Path | None,
        typer.Option(
            "--plot",
            help="Write a PNG: recall and AP per bin, one 480x360 px panel per --by fact, 3 per row; "
            "with --pred-dir one 480x360 px panel of AP and AR across the sweep.",
        ),
    ] = None,
    pred_dir: Annotated[
        Path | None,
        typer.Option(
            "--pred-dir",
            help="Score a sweep: DATASET is the sweep directory and this directory holds one results file "
            "per subset, at the subset's relative path plus .json (e.g. objects.size=[4,8].json).",
        ),
    ] = None,
) -> None:
    """Score detections by the COCO box rules, overall, per category and per bin of a fact."""
    import orjson
    from rich.console import Console

    from synthgen._io import write_atomic
    from synthgen.evaluate import score_files, score_sweep
    from synthgen.report import figures as rep

    if (predictions is None) == (pred_dir is None):
        raise UserError("give either a PREDICTIONS file or --pred-dir DIR for a sweep (got "
                        + ("both" if predictions is not None else "neither") + ")")
    _check_output_file("--json", json_out)
    _check_output_file("--plot", plot)
    if plot is not None:
        require_extra("matplotlib", "plots", "option '--plot'")
    if pred_dir is not None:
        points = score_sweep(dataset, pred_dir, by or ())
        console = Console()
        console.print(rep.sweep_table(points))
        for p in points:
            for fact, bins in p.slices.items():
                console.print(rep.slice_table(f"{fact}, {p.label or p.subset}", bins))
        if plot is not None:  # the figure first: a figure that cannot be drawn leaves no JSON behind
            rep.plot_sweep(points, plot, title=f"{pred_dir.name} on the sweep {dataset.name}")
        if json_out is not None:
            write_atomic(json_out, orjson.dumps({"sweep": [p.to_dict() for p in points]}, option=orjson.OPT_INDENT_2))
        return
    if plot is not None and not by:
        raise UserError("option '--plot' needs at least one --by FACT to plot")
    evaluation, slices = score_files(dataset, predictions, by or ())
    rep.print_report(evaluation, slices)
    if evaluation.n_unknown_category:
        n, ids = evaluation.n_unknown_category, ", ".join(map(str, evaluation.unknown_category_ids[:10]))
        more = "" if len(evaluation.unknown_category_ids) <= 10 else ", ..."
        typer.echo(
            f"synthgen: warning: {n} prediction{'s' if n != 1 else ''} in {predictions} name a category_id the "
            f"ground truth does not list ({ids}{more}); they count in no metric",
            err=True,
        )
    if plot is not None:
        rep.plot_slices(slices, plot, title=f"{predictions.name} on {dataset.name}")
    if json_out is not None:
        write_atomic(json_out, orjson.dumps(evaluation.to_dict(slices), option=orjson.OPT_INDENT_2))


