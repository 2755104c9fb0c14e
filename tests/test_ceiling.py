"""synthgen.evaluate.ceiling and `synthgen tokens ceiling`: the AP that n coordinate bins allow."""

from __future__ import annotations

import itertools
import math

import numpy as np
import orjson
import pytest
from PIL import Image
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.evaluate.ceiling import (
    Ceiling,
    CeilingRow,
    format_ceiling,
    iou_floor,
    quantized_truth,
    token_ceiling,
)
from synthgen.geometry import box_iou


def _coco(boxes, size=(640, 640), categories=(1,), per_image: int = 20) -> dict:
    """COCO ground truth of xyxy boxes, ``per_image`` to an image, categories cycling."""
    b = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    anns = [{"id": i + 1, "image_id": 1 + i // per_image, "category_id": categories[i % len(categories)],
             "bbox": [x0, y0, x1 - x0, y1 - y0], "area": (x1 - x0) * (y1 - y0), "iscrowd": 0}
            for i, (x0, y0, x1, y1) in enumerate(b.tolist())]
    images = [{"id": k + 1, "width": size[0], "height": size[1], "file_name": f"{k}.png"}
              for k in range(max(1, -(-len(b) // per_image)))]
    return {"images": images, "categories": [{"id": c, "name": f"kind{c}"} for c in categories], "annotations": anns}


def _random_coco(seed: int, n_images: int = 6, n_objects: int = 40) -> dict:
    """Random boxes of 2 to 200 px (log-uniform) on 640x480 images."""
    rng = np.random.default_rng(seed)
    coco = {"images": [], "annotations": [], "categories": [{"id": 1, "name": "a"}, {"id": 2, "name": "b"}]}
    for i in range(n_images):
        coco["images"].append({"id": i + 1, "width": 640, "height": 480, "file_name": f"{i}.png"})
        wh = np.exp(rng.uniform(np.log(2), np.log(200), (n_objects, 2)))
        xy = rng.uniform(0, 1, (n_objects, 2)) * ([640, 480] - wh)
        for j in range(n_objects):
            coco["annotations"].append({"id": len(coco["annotations"]) + 1, "image_id": i + 1,
                                        "category_id": 1 + j % 2, "bbox": [*xy[j].tolist(), *wh[j].tolist()],
                                        "area": float(wh[j, 0] * wh[j, 1]), "iscrowd": 0})
    return coco


# --------------------------------------------------------------------------- the floor


@pytest.mark.parametrize(("n_bins", "m"), [(64, 8), (64, 4), (64, 2), (128, 31), (10, 3)])
def test_square_shrunk_on_every_edge_reaches_the_floor_exactly(n_bins, m):
    """A square [L - m q, L]^2 (left edge on a bin edge, right edge on the border) comes back at IoU (1 - 1/m)^2."""
    q = 640 / n_bins
    box = np.array([[640 - m * q, 640 - m * q, 640.0, 640.0]])
    moved = quantized_truth(box, 640, 640, n_bins)
    assert moved.tolist() == [[640 - m * q + q / 2, 640 - m * q + q / 2, 640 - q / 2, 640 - q / 2]]
    iou = box_iou(moved, box)[0]
    assert iou == pytest.approx((1 - 1 / m) ** 2, abs=1e-12)
    assert iou == pytest.approx(float(iou_floor(m * q, m * q, q, q)), abs=1e-12)
    # the weaker form ((s - q) / (s + q))^2 holds too, strictly below
    assert iou > ((m * q - q) / (m * q + q)) ** 2


def test_rectangle_with_unequal_bins_reaches_its_floor():
    """640x480 and 32 bins (20 x 15 px): a 100 x 45 box in the bottom-right corner drops to (1 - 20/100)(1 - 15/45)."""
    box = np.array([[540.0, 435.0, 640.0, 480.0]])
    iou = box_iou(quantized_truth(box, 640, 480, 32), box)[0]
    assert iou == pytest.approx((1 - 20 / 100) * (1 - 15 / 45), abs=1e-12)
    assert iou == pytest.approx(float(iou_floor(100, 45, 20, 15)), abs=1e-12)


def test_inside_the_image_the_floor_is_approached():
    """Left edge on a bin edge, right edge just below one: the IoU comes within 1e-9 of the floor."""
    q, eps = 10.0, 1e-10
    box = np.array([[100.0, 200.0, 180.0 - eps, 280.0 - eps]])
    iou = box_iou(quantized_truth(box, 640, 640, 64), box)[0]
    assert iou == pytest.approx((1 - q / 80) ** 2, abs=1e-9)


def test_no_box_falls_below_its_floor():
    """Random boxes larger than a bin never lose more than the floor allows; smaller ones can reach IoU 0."""
    rng = np.random.default_rng(2026)
    for n_bins in (7, 10, 25, 64, 100, 333):
        wh = rng.uniform(0.5, 150, (4000, 2))
        xy = rng.uniform(0, 1, (4000, 2)) * ([640, 480] - wh)
        box = np.hstack([xy, xy + wh])
        iou = box_iou(quantized_truth(box, 640, 480, n_bins), box)
        floor = iou_floor(wh[:, 0], wh[:, 1], 640 / n_bins, 480 / n_bins)
        assert (iou >= floor - 1e-12).all()
    assert iou_floor(5, 50, 10, 10) == 0.0


def test_brute_force_over_edge_shifts_agrees_with_the_floor():
    """Over a grid of shifts of each edge by up to q/2 the least IoU is the floor, at all four edges moved inward."""
    w, h, qx, qy = 30.0, 12.0, 4.0, 3.0
    truth = np.array([[0.0, 0.0, w, h]])
    shifts = np.linspace(-0.5, 0.5, 11)
    worst = min(
        box_iou(np.array([[a * qx, b * qy, w + c * qx, h + d * qy]]), truth)[0]
        for a, b, c, d in itertools.product(shifts, repeat=4)
    )
    assert worst == pytest.approx((1 - qx / w) * (1 - qy / h), abs=1e-12)


# --------------------------------------------------------------------------- from the floor to AP


def test_ceiling_at_each_threshold_follows_from_the_floor():
    """Squares that all lose exactly to their floor match at the thresholds up to that IoU and no further."""
    corner = lambda m, q: [640 - m * q, 640 - m * q, 640, 640]  # noqa: E731
    # 64 bins (q = 10): side 80 -> IoU (7/8)^2 = 0.7656: matched at 0.50 ... 0.75, 6 of 10 thresholds
    c = token_ceiling(_coco([corner(8, 10)]), bins=[64])
    r = c.row(64)
    assert (r.ap50, r.ap75) == (pytest.approx(1.0), pytest.approx(1.0))
    assert r.ap == pytest.approx(0.6)
    assert r.worst_iou == pytest.approx(0.765625)
    # side 40 -> IoU (3/4)^2 = 0.5625: matched at 0.50 and 0.55 only (COCO-style AP, REFERENCE.md)
    r = token_ceiling(_coco([corner(4, 10)]), bins=[64]).row(64)
    assert (r.ap50, r.ap75, r.ap) == (pytest.approx(1.0), 0.0, pytest.approx(0.2))


def test_boxes_above_the_side_the_floor_asks_for_keep_ap75_at_one():
    """Every box with sides >= q / (1 - sqrt(0.75)) keeps IoU >= 0.75 wherever it lies, so AP75 is 1."""
    n_bins = 50
    q = 640 / n_bins
    side = q / (1 - math.sqrt(0.75))
    rng = np.random.default_rng(5)
    wh = rng.uniform(side, 3 * side, (200, 2))
    xy = rng.uniform(0, 1, (200, 2)) * (640 - wh)
    r = token_ceiling(_coco(np.hstack([xy, xy + wh])), bins=[n_bins]).row(n_bins)
    assert r.ap75 == pytest.approx(1.0) and r.worst_iou >= 0.75


@pytest.mark.parametrize("seed", range(8))
def test_ap_does_not_fall_as_bins_grow_on_random_datasets(seed):
    """On random datasets AP, AP50 and AP75 are non-decreasing in n, overall and per size bucket of 50+ objects.

    Not a law for every box (the grids of 10 and 25 bins are not nested; a coordinate at a coarse bin's
    centre loses nothing), so a bucket of a few dozen objects can dip (seed 1's 25 objects of 8-16 px
    have AP75 0.054 at 50 bins and 0 at 100); over many objects the floor's rise wins.
    """
    c = token_ceiling(_random_coco(seed), bins=(10, 25, 50, 100, 500, 1000))
    for bucket in c.buckets:
        if c.row(10, bucket).n_objects < 50:
            continue
        for attr in ("ap", "ap50", "ap75"):
            values = [getattr(c.row(n, bucket), attr) for n in c.bins]
            assert all(b >= a - 1e-12 for a, b in zip(values, values[1:])), (bucket, attr, values)


def test_ceiling_equals_pycocotools_on_the_same_predictions():
    """The 'all' row equals pycocotools' AP, AP50, AP75 for the quantized boxes scored by their IoU."""
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    coco = _random_coco(11, n_images=3, n_objects=25)
    c = token_ceiling(coco, bins=[40])
    anns = coco["annotations"]
    xyxy = np.array([[a["bbox"][0], a["bbox"][1], a["bbox"][0] + a["bbox"][2], a["bbox"][1] + a["bbox"][3]]
                     for a in anns])
    moved = quantized_truth(xyxy, 640, 480, 40)
    iou = box_iou(moved, xyxy)
    results = [{"image_id": a["image_id"], "category_id": a["category_id"],
                "bbox": [b[0], b[1], b[2] - b[0], b[3] - b[1]], "score": float(s)}
               for a, b, s in zip(anns, moved.tolist(), iou)]
    gt = COCO()
    gt.dataset = orjson.loads(orjson.dumps(coco))
    gt.createIndex()
    ev = COCOeval(gt, gt.loadRes(results), "bbox")
    import contextlib
    import io

    with contextlib.redirect_stdout(io.StringIO()):
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
    r = c.row(40)
    assert (r.ap, r.ap50, r.ap75) == pytest.approx(tuple(ev.stats[:3]), abs=1e-9)


def test_buckets_hold_their_objects_only_and_ignore_regions_stay():
    """Bucket rows count objects by the longer box side; crowd regions are no objects."""
    coco = _coco([[0, 0, 3, 2], [10, 10, 16, 11], [100, 100, 150, 120]])
    coco["annotations"].append({"id": 9, "image_id": 1, "category_id": 1, "bbox": [300, 300, 50, 50],
                                "area": 2500.0, "iscrowd": 1})
    c = token_ceiling(coco, bins=[1000], sizes=[0, 4, 8, 64])
    assert c.buckets == ("all", "[0, 4)", "[4, 8)", "[8, 64)")
    assert [c.row(1000, b).n_objects for b in c.buckets] == [3, 1, 1, 1]


def test_smallest_bins_needs_every_larger_count_to_keep_the_goal():
    """The smallest n counts only when it and every larger n tried keep AP75 above the goal."""
    def row(n, ap75):
        return CeilingRow(bins=n, bucket="all", lo=0, hi=math.inf, n_objects=1, ap=ap75, ap50=1, ap75=ap75,
                          worst_iou=0.9)

    c = Ceiling(rows=(row(10, 0.995), row(20, 0.98), row(50, 0.999), row(100, 1.0)), bins=(10, 20, 50, 100),
                buckets=("all",))
    assert c.smallest_bins() == {"all": 50}
    assert c.smallest_bins(goal=0.9) == {"all": 10}
    assert c.smallest_bins(goal=1.0) == {"all": None}
    assert "none of those tried" in format_ceiling(c, goal=1.0)


# --------------------------------------------------------------------------- the command


def test_command_prints_the_table_and_writes_json_and_figure(small_dataset, tmp_path):
    """`synthgen tokens ceiling` prints rows per n and bucket, the smallest n, and writes --json and --plot."""
    out, _ = small_dataset
    res = CliRunner().invoke(app, ["tokens", "ceiling", str(out), "--bins", "10,100,1000", "--sizes", "0,16,inf",
                                   "--json", str(tmp_path / "c.json"), "--plot", str(tmp_path / "c.png")])
    assert res.exit_code == 0, res.output
    assert "smallest bins keeping AP75 > 0.99" in res.output
    data = orjson.loads((tmp_path / "c.json").read_bytes())
    assert data["bins"] == [10, 100, 1000]
    assert data["buckets"][0] == "all" and set(data["buckets"][1:]) <= {"[0, 16)", "[16, inf)"}
    assert len(data["rows"]) == 3 * len(data["buckets"])
    assert set(data["smallest_bins_for_ap75"]) == set(data["buckets"])
    for line in res.output.splitlines()[2 : 2 + len(data["rows"])]:
        assert line.split()[0] in {"10", "100", "1000"}
    with Image.open(tmp_path / "c.png") as im:
        assert im.size == (1440, 400)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        (["--bins", "10,x"], "option '--bins' must be comma-separated numbers"),
        (["--bins", "0,10"], "'bins' must be whole numbers >= 1"),
        (["--sizes", "8,4"], "'sizes' (bucket edges) must be at least two increasing numbers"),
    ],
)
def test_command_refuses_bad_options_with_exit_2_and_writes_nothing(small_dataset, tmp_path, args, match):
    """A bad --bins or --sizes is one line, exit 2, and no JSON is written."""
    out, _ = small_dataset
    res = CliRunner().invoke(app, ["tokens", "ceiling", str(out), *args, "--json", str(tmp_path / "c.json")])
    assert res.exit_code == 2
    assert match in res.output
    assert not (tmp_path / "c.json").exists()


def test_help_of_the_tokens_commands_fits_80_columns():
    """`synthgen tokens --help` and `synthgen tokens ceiling --help` fit 80 columns, arguments in upper case."""
    import os
    import subprocess
    import sys

    env = {**os.environ, "COLUMNS": "80", "LINES": "200"}
    env.pop("TERMINAL_WIDTH", None)
    for args in (["tokens"], ["tokens", "ceiling"]):
        res = subprocess.run([sys.executable, "-m", "synthgen", *args, "--help"], capture_output=True, text=True,
                             env=env, timeout=60)
        assert res.returncode == 0, res.stderr
        assert all(len(line) <= 80 for line in res.stdout.splitlines()) and "…" not in res.stdout
    assert "Usage: synthgen tokens ceiling [OPTIONS] DATASET" in res.stdout
    assert "<bool>" not in res.stdout


def test_command_defaults_are_the_library_defaults():
    """The command's --bins and --sizes defaults are DEFAULT_BINS and DEFAULT_SIZES, written out."""
    import inspect

    from synthgen.cli.tokens import ceiling as command
    from synthgen.evaluate.ceiling import DEFAULT_BINS, DEFAULT_SIZES

    params = inspect.signature(command).parameters
    assert params["bins"].default == ",".join(map(str, DEFAULT_BINS))
    assert [float(v) for v in params["sizes"].default.split(",")] == list(DEFAULT_SIZES)
