"""The visible box of hidden objects: how exact it is, how exact the sample rule was, and what it costs.

For a few configs (640x480), over the objects of each image that an object
drawn above overlaps (their exact boxes meet), measured in this run:

* ``err new``: largest distance (px) of a visible box side from an independent
  computation (shapely on dense polygons, built from the shape parameters by
  ``tests/_visible_reference.py``);
* ``err old`` and ``old > 1/s``: the same for the rule synthgen used before,
  the exact box cut to the tight box of the visible sub-pixel sample cells,
  and the share of those objects it put more than one sample spacing off;
* ``us/call``: CPU time of the visible boxes in ``render_scene``
  (:func:`synthgen.scene.visible.visible_boxes`) per object measured there (an
  annotated object that a drawn object above overlaps), ``us/object`` the
  same spread over every annotated object of the images, and ``share``: its
  part of the CPU time of rendering the images.

    python benchmarks/bench_visible_box.py [--images 8]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # for tests/_visible_reference.py

import synthgen.scene.annotate as scene_mod  # noqa: E402
from synthgen.config import load_config  # noqa: E402
from synthgen.geometry import mask_box  # noqa: E402
from synthgen.scene import (  # noqa: E402
    image_rng,
    plan_objects,
    render_scene,
    visible,  # noqa: E402
)
from synthgen.scene.coverage import coverage  # noqa: E402
from synthgen.scene.shapes import clipped_box, exact_box  # noqa: E402
from tests import _visible_reference as reference  # noqa: E402

CASES = {
    "defaults": [],
    "occlusion dial": ["objects.layout=separated", "objects.count=[8,8]", "objects.size=[20,80]",
                       "objects.occlusion=[0.2,0.6]", "objects.min_visible=0"],
    "100 objects": ["objects.count=[100,100]", "objects.size=[8,60]"],
    "300 small": ["objects.count=[300,300]", "objects.size=[2,12]"],
}


def old_rule(i, shapes, strokes, height, width, s):
    """The previous visible box: the exact box cut to the tight box of the visible sample cells."""
    own = coverage(shapes[i], height, width, samples=s, stroke=strokes[i])
    if own is None:
        return None
    h, w = own.values.shape
    r0, c0 = own.row0, own.col0
    seen = own.inside(r0, c0, r0 + h, c0 + w).copy()
    for j in range(i + 1, len(shapes)):
        up = coverage(shapes[j], height, width, samples=s, stroke=strokes[j])
        if up is None:
            continue
        uh, uw = up.values.shape
        a0, b0 = max(r0, up.row0), max(c0, up.col0)
        a1, b1 = min(r0 + h, up.row0 + uh), min(c0 + w, up.col0 + uw)
        if a0 < a1 and b0 < b1:
            seen[(a0 - r0) * s : (a1 - r0) * s, (b0 - c0) * s : (b1 - c0) * s] &= ~up.inside(a0, b0, a1, b1)
    cells = mask_box(seen, origin=(c0, r0), scale=1.0 / s)
    exact = clipped_box(shapes[i], height, width)
    if cells is None or exact is None:
        return None
    return np.concatenate([np.maximum(exact[:2], cells[:2]), np.minimum(exact[2:], cells[2:])])


def accuracy(cfg, images: int):
    """Errors of the new and the old visible boxes of the overlapped objects, against the reference."""
    height, width, s = cfg.canvas.height, cfg.canvas.width, cfg.render.samples
    new_err, old_err = [], []
    for k in range(images):
        obj_rng = image_rng(cfg.seed, k).spawn(4)[1]  # the composer's object stream
        shapes, styles = plan_objects(cfg, rng=obj_rng)[:2]
        strokes = [st["stroke"] for st in styles]
        boxes = np.array([exact_box(sh) for sh in shapes]).reshape(-1, 4)
        for i, shape in enumerate(shapes):
            b = boxes[i]
            later = boxes[i + 1 :]
            if not ((later[:, 0] < b[2]) & (b[0] < later[:, 2]) & (later[:, 1] < b[3]) & (b[1] < later[:, 3])).any():
                continue
            above = list(zip(shapes[i + 1 :], strokes[i + 1 :]))
            truth = reference.visible(shape, strokes[i], above, height, width)
            new = visible.visible_box(shape, above, height, width, stroke=strokes[i])
            old = old_rule(i, shapes, strokes, height, width, s)
            if truth is None or new is None or old is None:
                continue
            new_err.append(float(np.abs(new - truth).max()))
            old_err.append(float(np.abs(old - truth).max()))
    return np.array(new_err), np.array(old_err)


def cost(cfg, images: int):
    """CPU seconds of the visible boxes, objects measured, objects annotated and the CPU seconds of the images."""
    spent, calls = [0.0], [0]
    plain = scene_mod.visible_boxes

    def timed(items, *args, **kwargs):
        start = time.process_time()
        out = plain(items, *args, **kwargs)
        spent[0] += time.process_time() - start
        calls[0] += len(items)
        return out

    render_scene(cfg, images)  # warm caches and imports
    scene_mod.visible_boxes = timed
    try:
        start = time.process_time()
        objects = sum(len(render_scene(cfg, k).boxes) for k in range(images))
        total = time.process_time() - start
    finally:
        scene_mod.visible_boxes = plain
    return spent[0], calls[0], objects, total


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=8)
    args = parser.parse_args()
    print(f"{'case':16s} {'objects':>8s} {'err new':>9s} {'err old':>8s} {'old > 1/s':>10s} "
          f"{'us/call':>8s} {'us/object':>10s} {'share':>6s}")
    for name, overrides in CASES.items():
        cfg = load_config(overrides=overrides)
        new_err, old_err = accuracy(cfg, max(1, args.images // 2))
        spent, calls, objects, total = cost(cfg, args.images)
        off = float((old_err > 1.0 / cfg.render.samples).mean()) if old_err.size else 0.0
        print(f"{name:16s} {new_err.size:8d} {new_err.max(initial=0):9.2e} {old_err.max(initial=0):8.2f} {off:10.1%} "
              f"{1e6 * spent / max(calls, 1):8.0f} {1e6 * spent / max(objects, 1):10.1f} {spent / total:6.1%}")


if __name__ == "__main__":
    main()
