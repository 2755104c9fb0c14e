"""Speed of the builtin reference detector on one core, against rendering the same images, in one run.

640x480 images with 10 objects each (the issue's goal: at least 50 images/s per core).  Images are
rendered in memory first; then the detector runs over them, interleaved in repetitions, and the
medians are printed with their ratio.  Asserts nothing.

    python benchmarks/bench_probe.py [--images 40] [--repeats 3] [--background linear]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.config import KINDS, load_config  # noqa: E402
from synthgen.probe.builtin import BuiltinDetector  # noqa: E402
from synthgen.scene import render_scene  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=40)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--background", default="linear")
    args = parser.parse_args()
    config = load_config(None, ["canvas.width=640", "canvas.height=480", "objects.count=[10,10]",
                                f'background.kind="{args.background}"', f"count={args.images}"])
    detector = BuiltinDetector()
    start = time.perf_counter()
    detector = detector.prepare(KINDS)
    fit_s = time.perf_counter() - start
    render, detect = [], []
    for _ in range(args.repeats):
        t = time.perf_counter()
        images = [render_scene(config, k).image for k in range(args.images)]
        render.append(time.perf_counter() - t)
        t = time.perf_counter()
        detector(images)
        detect.append(time.perf_counter() - t)
    r, d = statistics.median(render), statistics.median(detect)
    print(f"fitting the kind centroids: {fit_s:.2f} s (once per process)")
    print(f"render {args.images / r:.1f} images/s, builtin detector {args.images / d:.1f} images/s "
          f"({1000 * d / args.images:.1f} ms per image; detector/render time ratio {d / r:.2f})")


if __name__ == "__main__":
    main()
