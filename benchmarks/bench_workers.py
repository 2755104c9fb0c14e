"""When do worker processes pay off?  make_dataset with one process against two, by image count.

Prints, per count and config, the median wall time of each and their ratio, all measured in one
run (interleaved repetitions).  The cut-off below which ``make_dataset`` renders in its own process
(:data:`synthgen.run.backends.MIN_IMAGES_PER_WORKER`) comes from this table.

    python benchmarks/bench_workers.py [--reps 3] [--counts 4,8,16,32,64]
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import tempfile
import time
from pathlib import Path

import synthgen.run.backends
from synthgen.config import load_config
from synthgen.run.make import make_dataset

CONFIGS = {
    "default 640x480": [],
    "demo 20-30 objects": ["objects.count=[20, 30]"],
    "tiny 96x72": ["canvas.width=96", "canvas.height=72", "objects.count=[2, 8]"],
}


def _time(config, workers: int, root: Path) -> float:
    out = Path(tempfile.mkdtemp(dir=root))
    start = time.perf_counter()
    make_dataset(config, out / "d", workers=workers)
    took = time.perf_counter() - start
    shutil.rmtree(out)
    return took


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=3)
    parser.add_argument("--counts", default="4,8,16,32,64")
    args = parser.parse_args()
    counts = [int(c) for c in args.counts.split(",")]
    synthgen.run.backends.MIN_IMAGES_PER_WORKER = 1  # measure the pool itself, not the shortcut it sets
    root = Path(tempfile.mkdtemp(prefix="bench-workers-"))
    try:
        print(f"{'config':<20} {'images':>6} {'1 process s':>12} {'2 workers s':>12} {'2w / 1p':>8}")
        for name, overrides in CONFIGS.items():
            for n in counts:
                config = load_config("configs/demo.toml" if name.startswith("demo") else None,
                                     [*overrides, f"count={n}", "seed=5"])
                one, two = [], []
                for _ in range(args.reps):
                    one.append(_time(config, 1, root))
                    two.append(_time(config, 2, root))
                a, b = statistics.median(one), statistics.median(two)
                print(f"{name:<20} {n:>6} {a:>12.3f} {b:>12.3f} {b / a:>8.2f}", flush=True)
    finally:
        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
