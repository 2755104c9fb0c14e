"""How much `make` costs over the floor of only encoding and writing the same images.

Renders N 640x480 images (noise background, 10 objects) with one worker, as
PNG and as JPEG, then encodes and writes the very same pixels again with the
same settings; prints images/s and the ratio make / (encode + write), both
measured in this run.  Targets on one core: PNG ratio <= 1.5, JPEG <= 4.

    python benchmarks/bench_make.py [--images 40] [--objects 10]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

from synthgen.config import load_config
from synthgen.formats.images import encode_image
from synthgen.run.make import make_dataset
from synthgen.run.render import image_name
from synthgen.scene import render_scene


def floor_seconds(cfg, images, out: Path) -> float:
    """Encode and write the given images with cfg's output settings (tmp + rename, like make)."""
    o = cfg.output
    start = time.perf_counter()
    for k, img in enumerate(images):
        data = encode_image(img, o.image_format, png_level=o.png_level, jpeg_quality=o.jpeg_quality)
        tmp = out / f".{k}.tmp"
        tmp.write_bytes(data)
        os.replace(tmp, out / image_name(cfg, k))
    return time.perf_counter() - start


def bench(fmt: str, n: int, objects: int, tmp: Path) -> tuple[float, float]:
    cfg = load_config(
        overrides=[
            f"count={n}", "background.kind=noise", f"objects.count=[{objects}, {objects}]",
            "objects.size=[16, 96]", f"output.image_format={fmt}",
        ]
    )
    make_dataset(cfg, tmp / f"warm-{fmt}", workers=1)  # warm caches and imports
    start = time.perf_counter()
    make_dataset(cfg, tmp / f"make-{fmt}", workers=1)
    make_s = time.perf_counter() - start
    images = [render_scene(cfg, k).image for k in range(n)]
    (tmp / f"floor-{fmt}").mkdir()
    floor_s = floor_seconds(cfg, images, tmp / f"floor-{fmt}")
    return make_s, floor_s


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=40)
    parser.add_argument("--objects", type=int, default=10)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as d:
        for fmt, target in (("png", 1.5), ("jpeg", 4.0)):
            make_s, floor_s = bench(fmt, args.images, args.objects, Path(d))
            print(
                f"{fmt:4s}: make {args.images / make_s:7.1f} images/s ({1000 * make_s / args.images:6.2f} ms/image); "
                f"encode+write only {1000 * floor_s / args.images:6.2f} ms/image; "
                f"ratio {make_s / floor_s:4.2f} (target <= {target})"
            )


if __name__ == "__main__":
    main()
