"""What the difficulty dials cost: 10 vs 1000 objects per image, and `separated` when crowded.

All on 640x480 noise backgrounds, one worker, encoding and writing included
(``make_dataset``), measured in this run:

* ``10``: 10 objects of 16-96 px (the bench_make scene);
* ``1000 tiny``: 1000 objects of 2-8 px, ``scatter``; target: at most 3x the time of ``10``;
* ``1000 tiny separated``: the same with ``separated``, ``max_iou = 0``;
* ``crowded separated``: 1500 objects of 8-24 px, ``max_iou = 0`` (about all of the canvas
  is asked for, so many do not fit): ms/image, objects placed, and the time of the
  placement step alone.

    python benchmarks/bench_dials.py [--images 12] [--format png|jpeg]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from synthgen.config import load_config
from synthgen.run.make import make_dataset
from synthgen.scene import placement as layout
from synthgen.scene.composer import _half_extents, image_rng
from synthgen.scene.kinds import sample_objects as _sample_objects

CASES = {
    "10": ["objects.count=[10,10]", "objects.size=[16,96]"],
    "1000 tiny": ["objects.count=[1000,1000]", "objects.size=[2,8]", "objects.min_area=0.5"],
    "1000 tiny separated": ["objects.count=[1000,1000]", "objects.size=[2,8]", "objects.min_area=0.5",
                            "objects.layout=separated", "objects.max_iou=0"],
    "crowded separated": ["objects.count=[1500,1500]", "objects.size=[8,24]", "objects.layout=separated",
                          "objects.max_iou=0"],
}


def config(case: str, n: int, fmt: str):
    return load_config(overrides=[f"count={n}", "background.kind=noise", f"output.image_format={fmt}", *CASES[case]])


def time_make(cfg, out: Path):
    start = time.perf_counter()
    summary = make_dataset(cfg, out, workers=1)
    return (time.perf_counter() - start) / cfg.count, summary


def time_placement(cfg, n: int) -> tuple[float, float]:
    """Mean seconds of the separated placement alone, and the mean share placed."""
    total, placed = 0.0, 0.0
    for k in range(n):
        _bg, obj_rng, _c, _d = image_rng(cfg.seed, k).spawn(4)
        shapes, _ = _sample_objects(cfg, obj_rng)
        half = _half_extents(shapes)
        start = time.perf_counter()
        p = layout.separated(half, cfg.canvas.width, cfg.canvas.height, max_iou=cfg.objects.max_iou,
                             attempts=cfg.objects.attempts, rng=obj_rng)
        total += time.perf_counter() - start
        placed += p.info["placed"] / p.info["requested"]
    return total / n, placed / n


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=12)
    parser.add_argument("--format", choices=("png", "jpeg"), default="png")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as d:
        make_dataset(config("10", 2, args.format), Path(d) / "warm", workers=1)
        times = {}
        for case in CASES:
            cfg = config(case, args.images, args.format)
            per_image, summary = time_make(cfg, Path(d) / case.replace(" ", "-"))
            times[case] = per_image
            ratio = per_image / times["10"]
            print(f"{case:21s} {args.format}: {1000 * per_image:7.1f} ms/image, "
                  f"{summary.objects / summary.images:6.1f} objects/image annotated, {ratio:5.2f}x the 10-object time")
        cfg = config("crowded separated", args.images, args.format)
        secs, share = time_placement(cfg, args.images)
        print(f"crowded separated placement alone: {1000 * secs:.1f} ms/image, {100 * share:.0f}% of 1500 placed "
              f"(<= {cfg.objects.attempts} tries each)")
        print(f"target: 1000 tiny <= 3x the 10-object time (measured {times['1000 tiny'] / times['10']:.2f}x)")


if __name__ == "__main__":
    main()
