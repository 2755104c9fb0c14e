"""What `make` costs per image against a fixed outside floor, and how much of it is rendering.

Renders N 640x480 images (noise background, 10 objects of 16-96 px) with one
worker, as PNG and as JPEG, and per format measures, in interleaved
repetitions (so a slow moment of a shared machine hits every case alike):

* ``make``: the whole ``make_dataset`` (render, encode, write, RLE, facts,
  journal, COCO JSON, manifest);
* ``render``: :func:`synthgen.render_scene` of the same images, in memory
  (everything but encoding and writing the image);
* ``floor``: encoding the very same pixels with Pillow's defaults (PNG level
  6, JPEG quality 90) and writing them (temporary file + rename, like make).

The floor is fixed outside synthgen on purpose: a faster encoder in synthgen
makes the ratio ``make / floor`` smaller, never larger.  Prints min and
median milliseconds per image and the ratios of the medians.

    python benchmarks/bench_make.py [--images 30] [--objects 10] [--repeats 3]
"""

from __future__ import annotations

import argparse
import io
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

from PIL import Image

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.config import load_config  # noqa: E402
from synthgen.run.make import make_dataset  # noqa: E402
from synthgen.scene import render_scene  # noqa: E402

FORMATS = ("png", "jpeg")


def make_config(fmt: str, n: int, objects: int, *extra: str):
    """The bench scene: n images 640x480, noise background, ``objects`` objects of 16-96 px."""
    return load_config(overrides=[
        f"count={n}", "background.kind=noise", f"objects.count=[{objects}, {objects}]",
        "objects.size=[16, 96]", f"output.image_format={fmt}", *extra,
    ])


def reference_floor_s(images, fmt: str, out: Path) -> float:
    """Seconds to encode ``images`` with Pillow's defaults (PNG level 6 / JPEG q90) and write them."""
    out.mkdir(parents=True, exist_ok=True)
    kind, ext, kw = ("PNG", "png", {}) if fmt == "png" else ("JPEG", "jpg", {"quality": 90})
    start = time.perf_counter()
    for k, img in enumerate(images):
        buf = io.BytesIO()
        Image.fromarray(img).save(buf, kind, **kw)
        tmp = out / f".{k}.tmp"
        tmp.write_bytes(buf.getvalue())
        os.replace(tmp, out / f"{k:06d}.{ext}")
    return time.perf_counter() - start


def render_s(cfg) -> float:
    """Seconds to render every image of ``cfg`` in memory."""
    start = time.perf_counter()
    for k in range(cfg.count):
        render_scene(cfg, k)
    return time.perf_counter() - start


def make_s(cfg, out: Path) -> float:
    """Seconds of one whole ``make_dataset`` with one worker into a fresh ``out``."""
    shutil.rmtree(out, ignore_errors=True)
    start = time.perf_counter()
    make_dataset(cfg, out, workers=1)
    return time.perf_counter() - start


def measure(n: int, objects: int, repeats: int, tmp: Path) -> dict:
    """``{fmt: {"make"|"render"|"floor": [ms per image per repetition]}}``, repetitions interleaved."""
    cfgs = {fmt: make_config(fmt, n, objects) for fmt in FORMATS}
    images = {fmt: [render_scene(cfg, k).image for k in range(n)] for fmt, cfg in cfgs.items()}
    for fmt, cfg in cfgs.items():  # warm imports, caches and the noise bank
        make_s(cfg, tmp / f"warm-{fmt}")
    res = {fmt: {"make": [], "render": [], "floor": []} for fmt in FORMATS}
    for r in range(repeats):
        for fmt, cfg in cfgs.items():
            res[fmt]["make"].append(1000 * make_s(cfg, tmp / f"make-{fmt}") / n)
            res[fmt]["render"].append(1000 * render_s(cfg) / n)
            res[fmt]["floor"].append(1000 * reference_floor_s(images[fmt], fmt, tmp / f"floor-{fmt}-{r}") / n)
    return res


def summary(times: list[float]) -> tuple[float, float]:
    return min(times), statistics.median(times)


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=30)
    parser.add_argument("--objects", type=int, default=10)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as d:
        res = measure(args.images, args.objects, args.repeats, Path(d))
    print(f"{args.images} images 640x480, {args.objects} objects, one worker, {args.repeats} interleaved "
          "repetitions; ms per image (min / median)")
    for fmt, r in res.items():
        (m0, m1), (r0, r1), (f0, f1) = summary(r["make"]), summary(r["render"]), summary(r["floor"])
        print(f"{fmt:4s}: make {m0:6.2f} / {m1:6.2f}  render {r0:6.2f} / {r1:6.2f}  "
              f"Pillow floor {f0:6.2f} / {f1:6.2f}  make/floor {m1 / f1:4.2f}  render share {r1 / m1:4.2f}")


if __name__ == "__main__":
    main()
