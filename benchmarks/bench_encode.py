"""Which PNG and JPEG encoder settings `make` should use: time and size of each candidate.

Renders the images of three configs (the demo tray, the default noise
background, and that with Gaussian sensor noise on every image, the hardest
case for PNG) and encodes
the same pixels with every candidate, interleaving the candidates so that a
slow moment of the machine hits all of them alike.  Prints, per config,
milliseconds per image (min and median of the repetitions) and the total
size relative to the settings `make` used up to 0.1.0 (OpenCV level 1 with its
default row-filter search), plus Pillow's default PNG (level 6) and JPEG q90
as the fixed outside reference.

    python benchmarks/bench_encode.py [--images 16] [--repeats 5]

The choice in :mod:`synthgen.formats.images` is the fastest candidate whose
files stay within 10% of the old size on the demo and noise configs.
"""

from __future__ import annotations

import argparse
import io
import statistics
import sys
import time
from pathlib import Path

import cv2
import numpy as np
from PIL import Image

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.config import load_config  # noqa: E402
from synthgen.formats.images import encode_image  # noqa: E402
from synthgen.scene import render_scene  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = {
    "demo": (ROOT / "configs" / "demo.toml", []),
    "noise": (None, ["background.kind=noise"]),
    "sensor": (None, ["background.kind=noise", "degrade.noise.p=1"]),
}

_F = {
    "none": cv2.IMWRITE_PNG_FILTER_NONE, "sub": cv2.IMWRITE_PNG_FILTER_SUB, "up": cv2.IMWRITE_PNG_FILTER_UP,
    "avg": cv2.IMWRITE_PNG_FILTER_AVG, "paeth": cv2.IMWRITE_PNG_FILTER_PAETH,
}
_S = {"default": cv2.IMWRITE_PNG_STRATEGY_DEFAULT, "filtered": cv2.IMWRITE_PNG_STRATEGY_FILTERED,
      "rle": cv2.IMWRITE_PNG_STRATEGY_RLE}


def _cv_png(params):
    def enc(rgb):
        ok, buf = cv2.imencode(".png", cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR), params)
        return buf.tobytes()
    return enc


def _pil(fmt, **kw):
    def enc(rgb):
        out = io.BytesIO()
        Image.fromarray(rgb).save(out, fmt, **kw)
        return out.getvalue()
    return enc


def _cv_jpeg(rgb):
    return cv2.imencode(".jpg", cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR), [cv2.IMWRITE_JPEG_QUALITY, 90])[1].tobytes()


def candidates() -> dict:
    """Name -> encode function (RGB uint8 -> bytes)."""
    c = {
        "old: cv2 L1 filter search": _cv_png([cv2.IMWRITE_PNG_COMPRESSION, 1]),
        "synthgen now (png)": lambda rgb: encode_image(rgb, "png"),
        "Pillow PNG L6 (reference)": _pil("PNG"),
        "Pillow PNG L1": _pil("PNG", compress_level=1),
    }
    for f in ("none", "sub", "up", "paeth"):
        for s in ("default", "rle", "filtered"):
            c[f"cv2 L1 {f} {s}"] = _cv_png(
                [cv2.IMWRITE_PNG_COMPRESSION, 1, cv2.IMWRITE_PNG_FILTER, _F[f], cv2.IMWRITE_PNG_STRATEGY, _S[s]]
            )
    c["cv2 L2 up default"] = _cv_png([cv2.IMWRITE_PNG_COMPRESSION, 2, cv2.IMWRITE_PNG_FILTER, _F["up"]])
    c["Pillow JPEG q90 (reference)"] = _pil("JPEG", quality=90)
    c["cv2 JPEG q90"] = _cv_jpeg
    c["synthgen now (jpeg)"] = lambda rgb: encode_image(rgb, "jpeg")
    return c


def measure(images, encoders: dict, repeats: int) -> dict:
    """name -> (min ms/image, median ms/image, total bytes), repetitions interleaved across encoders."""
    times = {k: [] for k in encoders}
    sizes = {k: sum(len(fn(im)) for im in images) for k, fn in encoders.items()}
    for _ in range(repeats):
        for k, fn in encoders.items():
            t = time.perf_counter()
            for im in images:
                fn(im)
            times[k].append(1000 * (time.perf_counter() - t) / len(images))
    return {k: (min(v), statistics.median(v), sizes[k]) for k, v in times.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=16)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    cv2.setNumThreads(1)
    encoders = candidates()
    print(f"OpenCV {cv2.__version__}, Pillow {Image.__version__}; {args.images} images 640x480, "
          f"{args.repeats} interleaved repetitions; size relative to the old settings")
    for name, (path, overrides) in CONFIGS.items():
        cfg = load_config(path, overrides=[f"count={args.images}", *overrides])
        images = [np.ascontiguousarray(render_scene(cfg, k).image) for k in range(args.images)]
        res = measure(images, encoders, args.repeats)
        base = res["old: cv2 L1 filter search"][2]
        print(f"\n{name}: {'encoder':30s} {'min ms':>7s} {'med ms':>7s} {'size':>6s}")
        for k, (lo, med, size) in res.items():
            print(f"{name}: {k:30s} {lo:7.2f} {med:7.2f} {size / base:6.3f}")


if __name__ == "__main__":
    main()
