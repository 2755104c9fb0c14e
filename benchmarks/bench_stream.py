"""Items per second of SceneStream on one core, against what a loader reading JPEG files pays.

640x480 images with 10 objects (the built-in defaults otherwise), measured in
this run, interleaved so that drift of the machine hits every variant alike:

* ``stream``: ``SceneStream(config)[k]`` (image and target, no tokens);
* ``stream + tokens``: the same with ``TokenSpec(bins=1000, order="random", pad_to=20)``;
* ``cv2 JPEG decode``: ``cv2.imdecode`` of a 640x480 JPEG (quality 90) of one
  of these images, from bytes in memory (the least a file-reading loader pays
  per image, before any augmentation);

then the ratios.  The issue's goal is 150 items/s per core for the stream.

    python benchmarks/bench_stream.py [--items 60] [--rounds 3]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import cv2
import numpy as np

from synthgen.config import load_config
from synthgen.stream import SceneStream, TokenSpec


def _rate(fn, items: int) -> float:
    """Items per second of ``fn(k)`` over ``items`` calls, CPU time of this process (one core)."""
    t0 = time.process_time()
    for k in range(items):
        fn(k)
    return items / (time.process_time() - t0)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--items", type=int, default=60, help="items per variant and round")
    parser.add_argument("--rounds", type=int, default=3, help="interleaved rounds (medians are printed)")
    args = parser.parse_args()
    if hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})  # one core
    config = load_config(overrides=["canvas.width=640", "canvas.height=480", "objects.count=[10,10]",
                                    f"count={max(args.items, 3)}"])  # the warm-up reads 3 items
    plain = SceneStream(config)
    tokens = SceneStream(config, tokens=TokenSpec(bins=1000, order="random", pad_to=20))
    image = plain[0][0]
    ok, jpeg = cv2.imencode(".jpg", cv2.cvtColor(image, cv2.COLOR_RGB2BGR), [cv2.IMWRITE_JPEG_QUALITY, 90])
    assert ok
    data = jpeg.tobytes()
    variants = {
        "stream": lambda k: plain[k],
        "stream + tokens": lambda k: tokens[k],
        "cv2 JPEG decode": lambda k: cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_COLOR),
    }
    rates = {name: [] for name in variants}
    for fn in variants.values():  # warm-up: imports, caches, first allocations
        _rate(fn, 3)
    for _ in range(args.rounds):
        for name, fn in variants.items():
            rates[name].append(_rate(fn, args.items * (20 if name.startswith("cv2") else 1)))
    med = {name: statistics.median(r) for name, r in rates.items()}
    print(f"640x480, 10 objects, one core, {args.items} items x {args.rounds} rounds (medians)")
    for name, r in med.items():
        print(f"  {name:<18} {r:9.1f} items/s   {1000 / r:7.3f} ms/item")
    print(f"  tokens cost            {med['stream'] / med['stream + tokens']:.3f}x the plain stream's time")
    print(f"  stream / JPEG decode   {med['cv2 JPEG decode'] / med['stream']:.1f}x the time of decoding a JPEG")
    with_tokens = med["stream + tokens"]
    print(f"  goal 150 items/s       {'met' if with_tokens >= 150 else 'not met'} with tokens "
          f"({with_tokens / 150:.2f}x of it); 8 such cores: {8 * with_tokens:.0f} items/s")


if __name__ == "__main__":
    main()
