"""Tests for synthgen.report.figures: the slice figure and the tables."""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image
from rich.console import Console

from synthgen.errors import InputFileError, UserError
from synthgen.evaluate import SweepPoint, evaluate
from synthgen.report.figures import figure_size_px, plot_slices, plot_sweep, print_report


def _case():
    boxes = [[40.0 * i, 10.0, 4.0 + 6 * i, 4.0 + 6 * i] for i in range(8)]
    anns = [{"id": i + 1, "image_id": 1, "category_id": 1 + i % 2, "bbox": b, "area": b[2] * b[3], "iscrowd": 0,
             "synthgen": {"size": b[2], "kind": "star" if i % 2 else "ring"}} for i, b in enumerate(boxes)]
    gt = {"images": [{"id": 1, "width": 400, "height": 100}], "annotations": anns,
          "categories": [{"id": 1, "name": "ring"}, {"id": 2, "name": "star"}]}
    preds = [{"image_id": 1, "category_id": a["category_id"], "bbox": [a["bbox"][0] + 1, *a["bbox"][1:]],
              "score": 0.1 * (i + 1)} for i, a in enumerate(anns) if i % 3]
    return evaluate(gt, preds)


def _plot_area_is_drawn(png, n_panels):
    img = np.asarray(Image.open(png).convert("RGB")).astype(int)
    w = img.shape[1] // min(n_panels, 3)
    panel = img[40:-60, 60:w - 20]  # inside the first panel's axes, away from labels
    # the first two series' colours (AP50 and AP), as the figure module defines them
    from synthgen.report.charts import SERIES

    rgb = [[int(c[1 + 2 * i : 3 + 2 * i], 16) for i in range(3)] for c in (SERIES[0][2], SERIES[1][2])]
    c0 = (np.abs(panel - rgb[0]).sum(axis=2) < 40).sum()
    c1 = (np.abs(panel - rgb[1]).sum(axis=2) < 40).sum()
    return c0 > 50 and c1 > 50


def test_slice_figure_has_the_stated_size_and_drawn_lines(tmp_path):
    """The PNG is 480x360 px per panel, 3 per row, and its plot area holds the recall lines."""
    ev = _case()
    out = tmp_path / "slices.png"
    size = plot_slices({"size": ev.slice_by("size"), "kind": ev.slice_by("kind")}, out)
    with Image.open(out) as im:
        assert im.format == "PNG" and im.size == size == (960, 360)
    assert _plot_area_is_drawn(out, 2)


def test_figure_size_wraps_after_three_panels():
    """Four panels take two rows of three columns."""
    assert figure_size_px(4) == (1440, 720)


def test_plot_without_slices_is_a_user_error(tmp_path):
    """Nothing to plot raises UserError and writes no file."""
    with pytest.raises(UserError, match="nothing to plot"):
        plot_slices({}, tmp_path / "x.png")
    assert not (tmp_path / "x.png").exists()


def test_sweep_figure(tmp_path):
    """The sweep figure is one 480x360 panel with drawn lines."""
    ev = _case()
    points = [SweepPoint(f"objects.count={v}", {"objects.count": v}, ev, {}) for v in (4, 8, 16)]
    out = tmp_path / "sweep.png"
    assert plot_sweep(points, out) == (480, 360)
    with Image.open(out) as im:
        assert im.size == (480, 360)
    assert _plot_area_is_drawn(out, 1)


def test_report_prints_every_table():
    """The report shows the stats, per-category, confusion and slice tables."""
    ev = _case()
    buf = io.StringIO()
    print_report(ev, {"kind": ev.slice_by("kind")}, Console(file=buf, width=120))
    text = buf.getvalue()
    for title in ("COCO box metrics", "per category", "object hit", "by kind", "AR_large"):
        assert title in text


@pytest.mark.parametrize("where", ["missing/dir/x.png", "."])
def test_plot_to_an_unwritable_path_is_a_user_error(tmp_path, where):
    """A figure path in a missing directory, or a directory, raises InputFileError naming it (exit 2)."""
    ev = _case()
    target = tmp_path / where
    with pytest.raises(InputFileError, match=r"cannot be written") as info:
        plot_slices({"size": ev.slice_by("size")}, target)
    assert info.value.path == str(target)
    with pytest.raises(InputFileError, match=r"cannot be written"):
        plot_sweep([SweepPoint("objects.count=4", {"objects.count": 4}, ev, {})], target)
    assert sorted(p.name for p in tmp_path.iterdir()) == []
