"""Every name the probe takes from the rest of synthgen, imported here and nowhere else in ``probe/``.

Kept in one module so that moving those names (the package's layout by stage)
changes only these lines.  Imports are made on first use so that importing
the probe stays light.
"""

from __future__ import annotations


def version() -> str:
    from synthgen import __version__

    return __version__


def errors():
    """(UserError, InputFileError, require_extra, make_output_dir)."""
    from synthgen.errors import InputFileError, UserError, make_output_dir, require_extra

    return UserError, InputFileError, require_extra, make_output_dir


def write_bytes_atomic(path, data: bytes) -> None:
    from synthgen.formats.coco import write_bytes_atomic as write

    write(path, data)


def scorer():
    """(evaluate, read_ground_truth, parse_slice_spec, score_sweep) of the one scorer."""
    from synthgen.score import evaluate, parse_slice_spec, read_ground_truth, score_sweep

    return evaluate, read_ground_truth, parse_slice_spec, score_sweep


def figures():
    """(plot_slices, plot_sweep): the figures ``score --plot`` draws."""
    from synthgen.report_score import plot_slices, plot_sweep

    return plot_slices, plot_sweep


def run_unordered(fn, items, workers: int):
    from synthgen.pool import run_unordered as run

    return run(fn, items, workers)


def load_config(path, overrides=()):
    from synthgen.config import load_config as load

    return load(path, list(overrides))


def make_dataset(config, out, **kwargs):
    from synthgen.dataset import make_dataset as make

    return make(config, out, **kwargs)


def sweep_api():
    """(parse_vary, plan_sweep, run_sweep)."""
    from synthgen.sweep import parse_vary, plan_sweep, run_sweep

    return parse_vary, plan_sweep, run_sweep


def render_scene(config, index: int):
    from synthgen.scene import render_scene as render

    return render(config, index)


def pairwise_iou(a, b):
    from synthgen.geometry import pairwise_iou as iou

    return iou(a, b)
