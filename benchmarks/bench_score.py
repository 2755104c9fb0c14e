"""Time synthgen's scoring against pycocotools and faster-coco-eval on the same data, in one run.

5,000 images x 20 ground-truth boxes x 50 predictions, 3 classes (PERF-NOTES.md:
Scoring).  Prints, asserting nothing:

* in process: ``synthgen.evaluate.evaluate`` (+ the confusion table) against pycocotools'
  evaluate + accumulate + summarize, and whether the 12 stats are identical;
* whole command: ``synthgen score GT PRED`` (imports, JSON, scoring, printed report) against a
  script doing the same with faster-coco-eval (import, load both files, evaluate, accumulate,
  summarize), each in its own process, repetitions interleaved; CPU time (user + system) of the
  child processes, medians, since other work on the machine inflates wall time.  The ratio is
  nan when faster-coco-eval is not installed (it is never a dependency of synthgen).

    python benchmarks/bench_score.py [--images 5000] [--repeat 5] [--baseline DIR] [--no-pycocotools]

``--baseline DIR`` also times ``synthgen score`` from another source tree (say an older commit
unpacked with ``git archive REV synthgen | tar -x -C DIR``), in the same interleaved loop.
"""

from __future__ import annotations

import argparse
import contextlib
import copy
import importlib.util
import io
import math
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.evaluate import STAT_NAMES, evaluate  # noqa: E402


def make_data(n_images: int, n_gt: int, n_pred: int, n_cls: int, seed: int = 0) -> tuple[dict, list]:
    """Ground truth and predictions: each prediction is a jittered true box or a random box."""
    rng = np.random.default_rng(seed)
    images = [{"id": i + 1, "width": 640, "height": 480, "file_name": f"{i:06d}.png"} for i in range(n_images)]
    cats = [{"id": c + 1, "name": f"class{c + 1}", "supercategory": "shape"} for c in range(n_cls)]
    wh = rng.uniform(8, 160, (n_images, n_gt, 2))
    xy = rng.uniform(0, 1, (n_images, n_gt, 2)) * (np.array([640, 480]) - wh)
    gcls = rng.integers(1, n_cls + 1, (n_images, n_gt))
    anns = []
    for i in range(n_images):
        for j in range(n_gt):
            w, h = wh[i, j]
            anns.append({"id": len(anns) + 1, "image_id": i + 1, "category_id": int(gcls[i, j]),
                         "bbox": [float(xy[i, j, 0]), float(xy[i, j, 1]), float(w), float(h)],
                         "area": float(w * h), "iscrowd": 0})
    src = rng.integers(0, n_gt, (n_images, n_pred))
    real = rng.random((n_images, n_pred)) < 0.6
    jit = rng.normal(0, 0.12, (n_images, n_pred, 4))
    rwh = rng.uniform(8, 160, (n_images, n_pred, 2))
    rxy = rng.uniform(0, 480, (n_images, n_pred, 2))
    relabel = rng.random((n_images, n_pred)) < 0.1
    rcls = rng.integers(1, n_cls + 1, (n_images, n_pred))
    score = np.round(rng.random((n_images, n_pred)), 3)
    preds = []
    for i in range(n_images):
        for j in range(n_pred):
            if real[i, j]:
                g = src[i, j]
                w, h = wh[i, g]
                x, y = xy[i, g]
                box = [x + jit[i, j, 0] * w, y + jit[i, j, 1] * h, w * np.exp(jit[i, j, 2]), h * np.exp(jit[i, j, 3])]
                cls = int(rcls[i, j]) if relabel[i, j] else int(gcls[i, g])
            else:
                box = [*rxy[i, j], *rwh[i, j]]
                cls = int(rcls[i, j])
            preds.append({"image_id": i + 1, "category_id": cls, "bbox": [float(v) for v in box],
                          "score": float(score[i, j])})
    return {"images": images, "annotations": anns, "categories": cats}, preds


_FCE_SCRIPT = """
import sys
from faster_coco_eval import COCO, COCOeval_faster
gt = COCO(sys.argv[1])
ev = COCOeval_faster(gt, gt.loadRes(sys.argv[2]), "bbox")
ev.evaluate()
ev.accumulate()
ev.summarize()
"""


def _child_cpu(cmd: list[str], cwd: str, env: dict | None = None) -> float:
    """User + system CPU seconds of one child process (its output discarded)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, env=env, cwd=cwd)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def whole_command(gt: dict, preds: list, repeat: int, baseline: str | None) -> dict[str, list[float]]:
    """CPU seconds per run of each whole command, runs interleaved."""
    import orjson

    root = str(Path(__file__).resolve().parents[1])
    have_fce = importlib.util.find_spec("faster_coco_eval") is not None
    times: dict[str, list[float]] = {"synthgen score": []}
    if baseline:
        times["synthgen score (baseline)"] = []
    times["faster-coco-eval"] = []
    with tempfile.TemporaryDirectory(prefix="bench_score.") as tmp:
        gt_path, pred_path = Path(tmp) / "gt.json", Path(tmp) / "preds.json"
        gt_path.write_bytes(orjson.dumps(gt))
        pred_path.write_bytes(orjson.dumps(preds))
        files = [str(gt_path), str(pred_path)]
        ours = [sys.executable, "-m", "synthgen", "score", *files]
        env_ours = {**os.environ, "PYTHONPATH": root}
        env_base = {**os.environ, "PYTHONPATH": str(Path(baseline).resolve())} if baseline else None
        for _ in range(repeat):
            # cwd is the temporary directory: "-m" puts it first on sys.path, before PYTHONPATH.
            times["synthgen score"].append(_child_cpu(ours, tmp, env_ours))
            if baseline:
                times["synthgen score (baseline)"].append(_child_cpu(ours, tmp, env_base))
            if have_fce:
                times["faster-coco-eval"].append(_child_cpu([sys.executable, "-c", _FCE_SCRIPT, *files], tmp))
    return times


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--images", type=int, default=5000)
    ap.add_argument("--repeat", type=int, default=5, help="interleaved runs of each whole command (default 5)")
    ap.add_argument("--baseline", help="another synthgen source tree to time beside this one")
    ap.add_argument("--no-pycocotools", action="store_true", help="skip the in-process comparison (about a minute)")
    args = ap.parse_args()
    gt, preds = make_data(args.images, 20, 50, 3)
    print(f"{args.images} images, {len(gt['annotations'])} ground truth, {len(preds)} predictions, 3 classes")

    times = whole_command(gt, preds, args.repeat, args.baseline)
    med = {name: statistics.median(v) if v else math.nan for name, v in times.items()}
    print(f"whole command, CPU s (user + system), median of {args.repeat} interleaved runs [min .. max]:")
    for name, v in times.items():
        spread = f"[{min(v):.2f} .. {max(v):.2f}]" if v else "(not installed)"
        print(f"  {name:<28} {med[name]:6.2f} {spread}")
    paired = [a / b for a, b in zip(times["synthgen score"], times["faster-coco-eval"])]
    print(f"ratio synthgen score / faster-coco-eval, whole command: {med['synthgen score'] / med['faster-coco-eval']:.3f}"
          f" (target <= 0.5; median of the {len(paired)} paired runs' ratios: "
          f"{statistics.median(paired) if paired else math.nan:.3f})")
    if args.baseline:
        base = med["synthgen score (baseline)"]
        print(f"ratio baseline / faster-coco-eval: {base / med['faster-coco-eval']:.3f}; "
              f"this tree / baseline: {med['synthgen score'] / base:.3f}")

    cpu = time.process_time
    t0 = cpu()
    ours = evaluate(gt, preds)
    t_ours = cpu() - t0
    print(f"in process, CPU s: synthgen.evaluate.evaluate (validation, matching, 12 stats, per category): {t_ours:.2f}")
    t0 = cpu()
    ours.confusion  # noqa: B018 (computed on first use)
    t_conf = cpu() - t0
    print(f"  + confusion table: {t_conf:.2f}")
    if args.no_pycocotools:
        return

    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    with contextlib.redirect_stdout(io.StringIO()):
        coco = COCO()
        coco.dataset = copy.deepcopy(gt)
        coco.createIndex()
        dt = coco.loadRes(copy.deepcopy(preds))
        ev = COCOeval(coco, dt, "bbox")
        t0 = cpu()
        ev.evaluate()
        ev.accumulate()
        ev.summarize()
        t_ref = cpu() - t0
    print(f"pycocotools evaluate+accumulate+summarize: {t_ref:.2f}")
    print(f"ratio synthgen / pycocotools: {t_ours / t_ref:.3f} (with confusion {(t_ours + t_conf) / t_ref:.3f})")
    same = [a == b for a, b in zip(ours.stats, ev.stats)]
    diff = np.abs(np.array(ours.stats) - np.array(ev.stats)).max()
    print(f"stats bitwise identical: {all(same)} (max |diff| = {diff:.3g})")
    for name, a, b in zip(STAT_NAMES, ours.stats, ev.stats):
        print(f"  {name:<10} {float(a)!r:<22} {float(b)!r}")


if __name__ == "__main__":
    main()
