"""Time the mask encoding on make's hot path and the writers of every format.

Usage::

    python benchmarks/bench_formats.py [--width 640] [--height 480] [--objects 20] [--images 300]

Prints, measured in one run (machines drift by 20-30%, so compare ratios):

* microseconds per object for :func:`synthgen.formats.rle.encode_patch` on a
  disc in its local patch, for :func:`synthgen.formats.rle.encode` of the same
  object on the whole canvas, and for ``pycocotools.mask.encode`` of the whole
  canvas, with the ratios of the last two to the first;
* milliseconds per image for writing VOC, YOLO, tokens and instance-id masks
  from a COCO dict of ``--images`` images with ``--objects`` rectangles, and
  each one's ratio to a JPEG q90 encode of a textured canvas of the same size
  (the floor of writing an image).
"""

import argparse
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.formats import rle, write_formats  # noqa: E402
from tests._formats_helpers import build_coco  # noqa: E402


def median_s(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=640)
    ap.add_argument("--height", type=int, default=480)
    ap.add_argument("--objects", type=int, default=20)
    ap.add_argument("--images", type=int, default=300)
    args = ap.parse_args()
    cv2.setNumThreads(1)
    w, h = args.width, args.height

    print("mask encoding, per object (disc in a local patch):")
    for d in (8, 32, 128):
        yy, xx = np.mgrid[:d, :d]
        patch = (yy - d / 2 + 0.5) ** 2 + (xx - d / 2 + 0.5) ** 2 <= (d / 2) ** 2
        full = np.zeros((h, w), bool)
        full[40 : 40 + d, 50 : 50 + d] = patch
        t_patch = median_s(lambda: rle.encode_patch(patch, 40, 50, h, w), 300)
        t_full = median_s(lambda: rle.encode(full), 50)
        line = f"  {d:4d} px: encode_patch {t_patch * 1e6:7.1f} us   encode(canvas) {t_full * 1e6:7.1f} us ({t_full / t_patch:5.1f}x)"
        try:
            from pycocotools import mask as cocomask

            fort = np.asfortranarray(full.astype(np.uint8))
            t_ref = median_s(lambda: cocomask.encode(fort), 50)
            line += f"   pycocotools(canvas) {t_ref * 1e6:7.1f} us ({t_ref / t_patch:5.1f}x)"
        except ImportError:
            pass
        print(line)

    rng = np.random.default_rng(0)
    texture = rng.integers(0, 256, (h, w, 3), dtype=np.uint8)
    t_jpeg = median_s(lambda: cv2.imencode(".jpg", texture, [cv2.IMWRITE_JPEG_QUALITY, 90]), 30)
    images = []
    for _ in range(args.images):
        objs = []
        for _ in range(args.objects):
            x, y = int(rng.integers(0, w - 80)), int(rng.integers(0, h - 80))
            bw, bh = (int(v) for v in rng.integers(2, 80, 2))
            objs.append(((x, y, x + bw, y + bh), int(rng.integers(1, 4))))
        images.append((w, h, objs))
    coco = build_coco(images)
    out = Path(tempfile.mkdtemp(prefix="bench_formats_"))
    try:
        print(f"writers, per image ({args.images} images x {args.objects} objects, {w}x{h}); JPEG q90 encode {t_jpeg * 1e3:.2f} ms:")
        for fmt in ("voc", "yolo", "tokens", "masks"):
            t = time.perf_counter()
            write_formats(coco, out, [fmt], seed=1)
            per = (time.perf_counter() - t) / args.images
            print(f"  {fmt:7s} {per * 1e3:6.2f} ms  ({per / t_jpeg:5.2f}x JPEG encode)")
    finally:
        shutil.rmtree(out, ignore_errors=True)


if __name__ == "__main__":
    main()
