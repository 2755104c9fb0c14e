"""Time synthgen.scene.coverage.coverage on the workloads scene composition needs.

Prints medians of several repeats, measured in one run on one core:

* 10 shapes of 16-96 px at samples 4 and 8 (target: about 1-2 ms total at 4),
* 1000 shapes of 2-8 px at samples 4 (target: at most ~60 ms total),
* a few whole-canvas shapes (cost must follow the patch, not the canvas),
* stroked (outline-only) shapes,
* Coverage.inside over the whole patch of a canvas-sized shape,

and, for reference, the same 10 shapes sub-sampled at every pixel, so the gain
from classifying pixels first shows as a ratio.

Run: ``python benchmarks/bench_shapes.py``.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.scene import coverage as coverage_mod  # noqa: E402
from synthgen.scene import shapes  # noqa: E402
from synthgen.scene.coverage import coverage  # noqa: E402
from synthgen.scene.shapes import KINDS, Shape  # noqa: E402

H, W = 480, 640


def random_shapes(n: int, lo: float, hi: float, seed: int) -> list[Shape]:
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        out.append(
            Shape(
                str(rng.choice(KINDS)),
                float(rng.uniform(0, W)),
                float(rng.uniform(0, H)),
                float(rng.uniform(lo, hi)),
                aspect=float(np.exp(rng.uniform(-0.5, 0.5))),
                angle=float(rng.uniform(0, 360)),
                sides=int(rng.integers(3, 9)),
                inner=float(rng.uniform(0.3, 0.7)),
            )
        )
    return out


def timed(fn, repeats: int, warm_grid: bool = False) -> float:
    """Median wall time of ``fn()`` in ms.

    The caches in synthgen.scene.shapes are cleared before each repeat; with
    ``warm_grid`` the sub-sample coordinate cache is kept, as it is after the
    first few images of a dataset.
    """
    times = []
    for _ in range(repeats):
        shapes._GEOMS.clear()  # the geometry cache is a plain dict
        for cached in (shapes.shape_region, shapes._unit, shapes._star_table):
            cached.cache_clear()
        if not warm_grid:
            coverage_mod._grid.cache_clear()
        t0 = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t0) * 1e3)
    return statistics.median(times)


def run_all(batch: list[Shape], **kw) -> None:
    for sh in batch:
        coverage(sh, H, W, **kw)


def main() -> None:
    ten = [random_shapes(10, 16, 96, seed) for seed in range(20)]
    tiny = random_shapes(1000, 2, 8, 99)
    big = [
        Shape("ellipse", W / 2, H / 2, 640.0, aspect=1.3, angle=20.0),
        Shape("star", W / 2, H / 2, 600.0, angle=10.0, sides=7, inner=0.45),
        Shape("cross", W / 2, H / 2, 640.0, angle=30.0, inner=0.3),
        Shape("ring", W / 2, H / 2, 640.0, aspect=1.5, inner=0.6),
    ]

    def ten_at(s, **kw):
        return statistics.median(timed(lambda b=b: run_all(b, samples=s, **kw), 3) for b in ten)

    rows = []
    t4 = ten_at(4)
    rows.append(("10 shapes 16-96 px, samples=4", t4))
    rows.append(("10 shapes 16-96 px, samples=8", ten_at(8)))
    rows.append(("10 shapes 16-96 px, samples=4, stroke=2", ten_at(4, stroke=2.0)))
    saved = coverage_mod._GRID_MAX_PIXELS
    coverage_mod._GRID_MAX_PIXELS = 10**12  # sub-sample every pixel: the plain method
    t4_plain = ten_at(4)
    t8_plain = ten_at(8)
    coverage_mod._GRID_MAX_PIXELS = saved
    rows.append(("  same, every pixel sub-sampled, samples=4", t4_plain))
    rows.append(("  same, every pixel sub-sampled, samples=8", t8_plain))
    rows.append(("1000 shapes 2-8 px, samples=4", timed(lambda: run_all(tiny, samples=4), 5)))
    rows.append(("  same, warm coordinate cache", timed(lambda: run_all(tiny, samples=4), 5, warm_grid=True)))
    rows.append(("1000 shapes 2-8 px, samples=8", timed(lambda: run_all(tiny, samples=8), 3)))
    for sh in big:
        rows.append((f"one {sh.kind} of {sh.size:.0f} px on {W}x{H}, samples=4", timed(lambda sh=sh: coverage(sh, H, W), 3)))
    for sh in big[:2]:
        cov = coverage(sh, H, W)
        h, w = cov.values.shape

        def whole_mask(cov=cov, h=h, w=w):
            cov.inside(cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)

        rows.append((f"inside() over the {h}x{w} patch of that {sh.kind}", timed(whole_mask, 3)))
    width = max(len(r[0]) for r in rows)
    for name, ms in rows:
        print(f"{name:<{width}}  {ms:8.2f} ms")
    print(f"classified / plain at samples=4: {t4 / t4_plain:.2f}")


if __name__ == "__main__":
    main()
