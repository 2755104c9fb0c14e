"""The report page: error breakdown on known answers, figures without the old defects, the page's contents."""

from __future__ import annotations

import math
import re
from html.parser import HTMLParser

import numpy as np
import orjson
import pytest
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.evaluate import evaluate, score_files
from synthgen.page import write_report
from synthgen.page.errors import ERROR_KINDS, breakdown, classify, mend
from synthgen.report import charts
from tests._page_helpers import BY, make_probe_dir

matplotlib = pytest.importorskip("matplotlib")


# --------------------------------------------------------------------------- known answers


def _gt(boxes, cats=None, n_cats=2):
    """One image, one annotation per box (COCO xywh), categories 1..n_cats."""
    cats = cats or [1] * len(boxes)
    return {
        "images": [{"id": 1, "width": 200, "height": 200}],
        "categories": [{"id": k, "name": f"c{k}"} for k in range(1, n_cats + 1)],
        "annotations": [{"id": i + 1, "image_id": 1, "category_id": c, "bbox": list(b), "area": b[2] * b[3],
                         "iscrowd": 0} for i, (b, c) in enumerate(zip(boxes, cats))],
    }


def _p(box, score, cat=1):
    return {"image_id": 1, "category_id": cat, "bbox": list(box), "score": score}


A, B = (10, 10, 40, 40), (100, 100, 40, 40)


def _pycoco_ap50(gt, preds):
    """AP50 by pycocotools, the reference COCO evaluation."""
    import contextlib
    import io

    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    with contextlib.redirect_stdout(io.StringIO()):
        c = COCO()
        c.dataset = gt
        c.createIndex()
        d = c.loadRes(preds)
        e = COCOeval(c, d, "bbox")
        e.evaluate()
        e.accumulate()
        e.summarize()
    return e.stats[1], e


@pytest.mark.parametrize(
    ("kind", "preds"),
    [
        # a duplicate of A scored above the true positive of B
        ("duplicate", [_p(A, 0.9), _p((12, 10, 40, 40), 0.8), _p(B, 0.7)]),
        # a box on nothing scored above the true positive of B
        ("background", [_p(A, 0.9), _p((60, 150, 20, 20), 0.8), _p(B, 0.7)]),
        # B found with IoU 0.31 only (shifted by 21 of 40 px)
        ("localization", [_p(A, 0.9), _p((121, 100, 40, 40), 0.8)]),
        # B found with the wrong class
        ("wrong_class", [_p(A, 0.9), _p(B, 0.8, cat=2)]),
        # B not found at all
        ("missed", [_p(A, 0.9)]),
    ],
)
def test_mending_the_only_kind_of_error_gives_ap50_one(kind, preds):
    """With one kind of error only, mending it gives AP50 1.0 and mending any other kind gains nothing."""
    gt = _gt([A, B])
    b = breakdown(gt, preds)
    ref, _ = _pycoco_ap50(gt, preds)  # pycocotools: the base AP50 is the reference's
    assert b.ap50 == pytest.approx(ref, abs=1e-12)
    assert b.ap50 < 1.0
    assert b.counts[kind] == 1
    assert b.mended[kind][1] == pytest.approx(1.0, abs=1e-12)
    for other in ERROR_KINDS[1:]:
        if other != kind:
            assert b.counts[other] == 0
            assert b.gain(other)[1] == pytest.approx(0.0, abs=1e-12)


def test_duplicate_case_base_ap50_is_the_hand_computed_value():
    """TP, duplicate, TP over two objects: precision 1 up to recall .5, 2/3 after (101-point interpolation)."""
    b = breakdown(_gt([A, B]), [_p(A, 0.9), _p((12, 10, 40, 40), 0.8), _p(B, 0.7)])
    assert b.ap50 == pytest.approx((51 + 50 * 2 / 3) / 101, abs=1e-12)  # COCO rule: 101 recall points


def test_localization_mend_drops_a_box_whose_object_is_already_found():
    """A poorly placed box next to an object a true positive already found is removed, not moved onto it."""
    gt = _gt([A])
    preds = [_p(A, 0.9), _p((25, 10, 40, 40), 0.8)]  # IoU 0.45 with A: a localization error on a found object
    c = classify(gt, preds)
    assert c.kinds == ("true_positive", "localization")
    assert mend(gt, preds, c, "localization") == [preds[0]]


def test_wrong_class_mend_relabels_to_the_target_class():
    gt = _gt([A, B], cats=[1, 2])
    preds = [_p(A, 0.9), _p(B, 0.8, cat=1)]
    c = classify(gt, preds)
    assert c.kinds == ("true_positive", "wrong_class")
    assert int(c.target[1]) == 1
    fixed = mend(gt, preds, c, "wrong_class")
    assert fixed[1]["category_id"] == 2 and preds[1]["category_id"] == 1  # input untouched


def test_objects_near_an_error_are_not_counted_missed():
    """An object a localization error points at is that error's, not a miss: each failure counted once."""
    gt = _gt([A, B])
    c = classify(gt, [_p(A, 0.9), _p((121, 100, 40, 40), 0.8)])
    assert c.missed == () and c.counts()["localization"] == 1


def test_breakdown_on_simulated_detections_matches_the_reference_and_the_sidecar(small_dataset, tmp_path):
    """On a jittered run: true positives equal pycocotools' matches at IoU .5, kinds equal the jitter sidecar's."""
    ds, _ = small_dataset
    from synthgen.jitter.coco import jitter_files
    from tests._page_helpers import SPEC

    jitter_files(ds, tmp_path / "p.json", seed=9, spec=SPEC)
    gt = orjson.loads((ds / "annotations.json").read_bytes())
    preds = orjson.loads((tmp_path / "p.json").read_bytes())
    side = orjson.loads((tmp_path / "p.truth.json").read_bytes())
    b = breakdown(gt, preds)
    _, e = _pycoco_ap50(gt, preds)
    # pycocotools: dtMatches[t=0] of the "all" range (index 0 of areaRngLbl) over max 100 dets
    matched = sum(int((img["dtMatches"][0] > 0).sum() - img["dtIgnore"][0].sum())
                  for img in e.evalImgs if img is not None and img["aRng"] == [0, 1e10])
    assert b.counts["true_positive"] == matched
    # the objects found are the ones pycocotools' matcher gave a detection (gtMatches[t=0], crowd left out)
    ref_found = {int(g) for img in e.evalImgs if img is not None and img["aRng"] == [0, 1e10]
                 for g, m, ign in zip(img["gtIds"], img["gtMatches"][0], img["gtIgnore"]) if m > 0 and not ign}
    assert {gt["annotations"][g]["id"] for g in b.classified.found} == ref_found
    clear = [r for r in side["predictions"] if (r["other_iou"] or 0) < 0.5 and (r["crowd_overlap"] or 0) < 0.5]
    agree = [b.classified.kinds[r["index"]] == r["kind"] for r in clear]
    assert len(clear) > 20 and all(agree)
    assert b.counts["missed"] <= len(side["missed"])
    for kind in ERROR_KINDS[1:]:
        assert b.gain(kind)[1] >= -1e-12  # mending never lowers AP50 here


# --------------------------------------------------------------------------- figures


def _bins(small_dataset, tmp_path, fact, edges=None):
    ds, _ = small_dataset
    gt = orjson.loads((ds / "annotations.json").read_bytes())
    preds = [{"image_id": a["image_id"], "category_id": a["category_id"], "bbox": a["bbox"], "score": 1.0}
             for a in gt["annotations"][::2]]
    return evaluate(gt, preds).slice_by(fact, edges)


def _rendered(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig).draw()
    return fig.canvas.get_renderer()


def test_categorical_fact_is_drawn_as_bars_not_lines(small_dataset, tmp_path):
    fig = charts.slice_figure("kind", _bins(small_dataset, tmp_path, "kind"))
    ax = fig.axes[0]
    assert len(ax.patches) >= 3 * 2  # three series of bars over at least two kinds
    assert all(line.get_linestyle() in ("None", "none", "") for line in ax.lines)


def test_quantile_bin_labels_do_not_overlap(small_dataset, tmp_path):
    """Contrast has quantile edges like 0.3009, 0.414: the tick labels must not run into each other."""
    bins = _bins(small_dataset, tmp_path, "contrast")
    assert len(bins) >= 4
    fig = charts.slice_figure("contrast", bins)
    r = _rendered(fig)
    boxes = [t.get_window_extent(r) for t in fig.axes[0].get_xticklabels()]
    for a, b in zip(boxes, boxes[1:]):
        assert a.x1 <= b.x0, (a, b)
    assert "[" not in "".join(t.get_text() for t in fig.axes[0].get_xticklabels())


def test_legend_is_outside_the_plot_and_recall_is_beside_ap50(small_dataset, tmp_path):
    fig = charts.slice_figure("size", _bins(small_dataset, tmp_path, "size"))
    r = _rendered(fig)
    ax = fig.axes[0]
    legend = fig.legends[0].get_window_extent(r)
    plot = ax.get_window_extent(r)
    assert legend.y0 >= plot.y1 or legend.y1 <= plot.y0
    lines = {line.get_label(): line for line in ax.lines}
    x_ap50 = np.asarray(lines["AP @ IoU .5"].get_xdata(), float)
    x_rec = np.asarray(lines["recall @ IoU .5"].get_xdata(), float)
    assert np.all(x_rec - x_ap50 > 0.05)  # shifted sideways: equal values stay visible
    assert lines["recall @ IoU .5"].get_linestyle() != lines["AP @ IoU .5"].get_linestyle()


def test_score_plot_title_legend_and_panels_do_not_overlap(small_dataset, tmp_path):
    """score --plot: the title, the legend and every panel each have their own space."""
    slices = {f: _bins(small_dataset, tmp_path, f) for f in ("size", "contrast", "kind", "truncated")}
    fig = charts.slices_figure(slices, title="p.json on ds")
    r = _rendered(fig)
    parts = [fig._suptitle.get_window_extent(r), fig.legends[0].get_window_extent(r)]
    parts += [ax.get_tightbbox(r) for ax in fig.axes]
    for i, a in enumerate(parts):
        for b in parts[i + 1:]:
            assert not a.overlaps(b), (a, b)


def test_axis_labels_carry_units():
    assert charts.axis_label("size") == "size (px)"
    assert charts.axis_label("visible_fraction") == "visible_fraction (fraction)"
    assert charts.axis_label("objects.size") == "objects.size (px)"


def test_narrow_subset_sliced_by_size_gives_several_bins():
    """Objects of 9 to 14 px (one power-of-two bin) still get at least three size bins."""
    sizes = [9, 10, 11, 12, 13, 14]
    gt = _gt([(10 + 30 * i, 10, s, s) for i, s in enumerate(sizes)])
    for a, s in zip(gt["annotations"], sizes):
        a["synthgen"] = {"size": float(s)}
    bins = evaluate(gt, []).slice_by("size")
    assert len(bins) >= 3
    assert sum(b.n_gt for b in bins) == len(sizes)


def test_score_plot_sweep_title_names_the_sweep_and_predictions(small_dataset, tmp_path):
    ds, _ = small_dataset
    sweep = tmp_path / "sw"
    import shutil

    shutil.copytree(ds, sweep / "objects.count=4")
    (tmp_path / "pd").mkdir()
    gt = orjson.loads((ds / "annotations.json").read_bytes())
    preds = [{"image_id": a["image_id"], "category_id": a["category_id"], "bbox": a["bbox"], "score": 1.0}
             for a in gt["annotations"]]
    (tmp_path / "pd" / "objects.count=4.json").write_bytes(orjson.dumps(preds))
    from synthgen.evaluate import score_sweep

    fig = charts.sweep_figure(score_sweep(sweep, tmp_path / "pd"), title="pd on sw")
    assert fig.axes[0].get_title() == "pd on sw"
    result = CliRunner().invoke(app, ["score", str(sweep), "--pred-dir", str(tmp_path / "pd"),
                                      "--plot", str(tmp_path / "s.png")])
    assert result.exit_code == 0, result.output


# --------------------------------------------------------------------------- the page


class _Cells(HTMLParser):
    """Collects data-stat cells and every tag's attributes."""

    def __init__(self):
        super().__init__()
        self.stats, self.tags = [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "data-stat" in a and "data-value" in a:
            self.stats.append((a["data-subset"], a["data-stat"], float(a["data-value"])))


@pytest.fixture(scope="module")
def probe_page(small_dataset, tmp_path_factory):
    """A probe directory and its page: (run dir, page path, HTML text)."""
    root = tmp_path_factory.mktemp("page")
    run = make_probe_dir(root, small_dataset[0])
    out = root / "report.html"
    write_report(run, out)
    return run, out, out.read_text(encoding="utf-8")


def test_page_headline_equals_score_json(probe_page):
    run, _, text = probe_page
    score = orjson.loads((run / "score.json").read_bytes())["subsets"]
    p = _Cells()
    p.feed(text)
    table = [(s, n, v) for s, n, v in p.stats]
    assert len(table) >= 12
    for subset, name, value in table:
        assert value == score[subset]["stats"][name]


def test_page_holds_no_machine_paths_and_no_urls(probe_page):
    run, out, text = probe_page
    for path in (str(run), str(run.parent), str(out), str(run.resolve().parent.parent), "/home/", "/tmp/"):
        assert path not in text
    outside_data = re.sub(r'"data:[^"]*"', '""', text)  # base64 may hold any letters
    assert not re.search(r"https?:|//[a-z]|file:|@import|url\((?!#)", outside_data, flags=re.I)
    p = _Cells()
    p.feed(text)
    for tag, a in p.tags:
        for key in ("src", "href"):
            assert key not in a or a[key].startswith(("data:", "#")), (tag, a)


def test_every_figure_and_crop_has_alt_text(probe_page):
    p = _Cells()
    p.feed(probe_page[2])
    figures = [a for tag, a in p.tags if tag == "svg" and a.get("role") == "img"]
    assert len(figures) >= len(BY) + 2
    assert all(len(a.get("aria-label", "")) > 10 for a in figures)
    assert all(a.get("alt") for tag, a in p.tags if tag == "img")
    svgs = [a for tag, a in p.tags if tag == "svg"]
    assert all(a.get("role") == "img" or a.get("aria-hidden") == "true" for a in svgs)


def test_page_shows_the_caution_the_facts_and_every_error_kind(probe_page):
    text = probe_page[2]
    assert "never evidence that a detector is safe" in text
    assert "simulated detector" in text and "0" * 64 in text
    for kind in ERROR_KINDS:
        assert kind.replace("_", " ") in text


def test_report_cli_on_a_dataset_and_on_a_sweep(small_dataset, tmp_path):
    ds, _ = small_dataset
    from synthgen.jitter.coco import jitter_files

    jitter_files(ds, tmp_path / "p.json", seed=2)
    r = CliRunner().invoke(app, ["report", str(ds), str(tmp_path / "p.json"), "--out", str(tmp_path / "a.html")])
    assert r.exit_code == 0, r.output
    assert "wrote" in r.output and (tmp_path / "a.html").stat().st_size > 10_000
    ev, _ = score_files(ds, tmp_path / "p.json")
    text = (tmp_path / "a.html").read_text(encoding="utf-8")
    assert f'data-stat="AP50" data-value="{ev.stats[1]!r}"' in text

    import shutil

    for n in (4, 8):
        shutil.copytree(ds, tmp_path / "sw" / f"objects.count={n}")
        (tmp_path / "pd").mkdir(exist_ok=True)
        shutil.copy(tmp_path / "p.json", tmp_path / "pd" / f"objects.count={n}.json")
    r = CliRunner().invoke(app, ["report", str(tmp_path / "sw"), str(tmp_path / "pd"), "--out",
                                 str(tmp_path / "s.html"), "--by", "size", "--crops", "2"])
    assert r.exit_code == 0, r.output
    text = (tmp_path / "s.html").read_text(encoding="utf-8")
    assert "Across the sweep" in text and "objects.count (objects per image)" in text


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["{ds}", "--out", "{tmp}/r.html"], "not a probe directory"),
        (["{run}", "{tmp}/p.json", "--out", "{tmp}/r.html"], "give no PREDICTIONS"),
        (["{ds}", "{tmp}/none.json", "--out", "{tmp}/r.html"], "none.json"),
        (["{run}", "--out", "{tmp}/r.html", "--by", "nosuchfact"], "nosuchfact"),
        (["{run}", "--out", "{tmp}/nodir/r.html"], "folder that does not exist"),
    ],
)
def test_report_bad_input_exits_2_in_one_line(probe_page, small_dataset, tmp_path, args, message):
    run = probe_page[0]
    args = [a.format(ds=small_dataset[0], tmp=tmp_path, run=run) for a in args]
    r = CliRunner().invoke(app, ["report", *args])
    assert r.exit_code == 2, r.output
    assert message in r.output and "Traceback" not in r.output
    assert not (tmp_path / "r.html").exists()


def test_page_numbers_are_finite_or_dashes(probe_page):
    p = _Cells()
    p.feed(probe_page[2])
    assert all(math.isfinite(v) for _, _, v in p.stats)
