"""The script a user writes instead of synthgen: the outside yardstick of issue 19's target 5.

Plain Pillow and numpy, one process: a linear two-colour background, 10
rectangles, ellipses and triangles of 16-96 px per 640x480 image, drawn with
``ImageDraw`` at 1x (no anti-aliasing, vertices rounded to whole pixels, no
occlusion handling, boxes from the drawn vertices), each image saved as PNG
level 1 and the boxes as one COCO-style JSON file at the end.  It is what the
comparison in ``benchmarks/run_all.py`` times as a whole process.

    python benchmarks/handwritten.py --images 100 --out DIR
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw


def background(rng, height: int, width: int) -> np.ndarray:
    c0, c1 = rng.integers(0, 256, 3), rng.integers(0, 256, 3)
    angle = rng.uniform(0, 2 * math.pi)
    y, x = np.mgrid[0:height, 0:width].astype(np.float32)
    t = x * math.cos(angle) + y * math.sin(angle)
    t = (t - t.min()) / max(float(t.max() - t.min()), 1e-6)
    planes = [(c0[c] + t * (int(c1[c]) - int(c0[c]))).astype(np.uint8) for c in range(3)]
    return np.dstack(planes)


def draw_objects(draw, rng, height: int, width: int, n: int) -> list[dict]:
    objects = []
    for _ in range(n):
        size = rng.uniform(16, 96)
        cx, cy = rng.uniform(size / 2, width - size / 2), rng.uniform(size / 2, height - size / 2)
        kind = int(rng.integers(3))
        colour = tuple(int(v) for v in rng.integers(0, 256, 3))
        if kind == 0:
            xy = [round(cx - size / 2), round(cy - size / 3), round(cx + size / 2), round(cy + size / 3)]
            draw.rectangle(xy, fill=colour)
        elif kind == 1:
            xy = [round(cx - size / 2), round(cy - size / 2), round(cx + size / 2), round(cy + size / 2)]
            draw.ellipse(xy, fill=colour)
        else:
            a = rng.uniform(0, 2 * math.pi)
            pts = [(round(cx + size / 2 * math.cos(a + k * 2.094)), round(cy + size / 2 * math.sin(a + k * 2.094)))
                   for k in range(3)]
            draw.polygon(pts, fill=colour)
            xs, ys = [p[0] for p in pts], [p[1] for p in pts]
            xy = [min(xs), min(ys), max(xs), max(ys)]
        objects.append({"category_id": kind + 1, "bbox": [xy[0], xy[1], xy[2] - xy[0] + 1, xy[3] - xy[1] + 1]})
    return objects


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=100)
    parser.add_argument("--objects", type=int, default=10)
    parser.add_argument("--out", type=Path, required=True)
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(0)
    images, annotations = [], []
    for k in range(args.images):
        img = Image.fromarray(background(rng, 480, 640))
        objects = draw_objects(ImageDraw.Draw(img), rng, 480, 640, args.objects)
        name = f"{k:06d}.png"
        img.save(args.out / name, compress_level=1)
        images.append({"id": k + 1, "file_name": name, "width": 640, "height": 480})
        for obj in objects:
            annotations.append({"id": len(annotations) + 1, "image_id": k + 1, "iscrowd": 0,
                                "area": obj["bbox"][2] * obj["bbox"][3], **obj})
    cats = [{"id": i + 1, "name": n} for i, n in enumerate(("rectangle", "ellipse", "triangle"))]
    (args.out / "annotations.json").write_text(
        json.dumps({"images": images, "annotations": annotations, "categories": cats})
    )


if __name__ == "__main__":
    main()
