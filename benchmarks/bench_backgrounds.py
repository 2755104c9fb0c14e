"""Time each background kind and each degradation on one core.

Usage::

    python benchmarks/bench_backgrounds.py [--width 640] [--height 480] [--repeats 50]

Prints the median milliseconds per call for every background kind and every
degradation, first with the C library's default allocator settings, then
after telling glibc to keep freed blocks (see :func:`tune_malloc`), and each
one's ratio to a JPEG q90 encode of a textured canvas measured in the same run,
the floor of writing an image (machines drift by 20-30% between runs; compare
ratios).
OpenCV is limited to one thread so the numbers describe one core.
"""

import argparse
import ctypes
import ctypes.util
import statistics
import sys
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from synthgen.scene.backgrounds import BACKGROUND_KINDS, BackgroundSpec, render_background  # noqa: E402
from synthgen.scene.degrade import (  # noqa: E402
    add_noise,
    adjust_brightness,
    adjust_contrast,
    gaussian_blur,
    jpeg_roundtrip,
    vignette,
)


def median_ms(fn, repeats: int) -> float:
    fn()  # warm up (caches, the noise bank, lazy imports)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return 1e3 * statistics.median(times)


def tune_malloc() -> bool:
    """Keep freed memory in the heap (glibc) so big temporaries do not page-fault each call.

    By default glibc serves every block above ~128 KiB with a fresh mmap and
    returns it on free, so each 640x480 temporary costs its page faults again.
    Returns False when the C library has no ``mallopt``.
    """
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        m_trim_threshold, m_mmap_threshold = -1, -3
        ok = libc.mallopt(m_mmap_threshold, 32 * 2**20) and libc.mallopt(
            m_trim_threshold, 64 * 2**20
        )
        return bool(ok)
    except (OSError, AttributeError):
        return False


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=640)
    ap.add_argument("--height", type=int, default=480)
    ap.add_argument("--repeats", type=int, default=50)
    args = ap.parse_args(argv)
    cv2.setNumThreads(1)
    h, w, n = args.height, args.width, args.repeats

    rng = np.random.default_rng(0)
    canvas, _ = render_background(BackgroundSpec(kind="noise"), h, w, rng=rng)
    # A textured image stands in for a composed scene (JPEG cost depends on content).
    scene = add_noise(canvas, 6.0, rng=rng)

    kinds = [(kind, BackgroundSpec(kind=kind)) for kind in BACKGROUND_KINDS]
    kinds.append(("noise octaves=8", BackgroundSpec(kind="noise", octaves=8)))
    kinds.append(("checker +texture", BackgroundSpec(kind="checker", texture=(10.0, 10.0))))
    rows = [("background " + name, lambda spec=spec: render_background(spec, h, w, rng=rng))
            for name, spec in kinds]  # fmt: skip
    rows += [
        ("degrade brightness", lambda: adjust_brightness(scene, 17.5)),
        ("degrade contrast", lambda: adjust_contrast(scene, 1.3)),
        ("degrade vignette", lambda: vignette(scene, 0.4)),
        ("degrade blur sigma=1", lambda: gaussian_blur(scene, 1.0)),
        ("degrade blur sigma=3", lambda: gaussian_blur(scene, 3.0)),
        ("degrade noise", lambda: add_noise(scene, 5.0, rng=rng)),
        ("degrade jpeg q=30", lambda: jpeg_roundtrip(scene, 30)),
        ("degrade jpeg q=90", lambda: jpeg_roundtrip(scene, 90)),
        (
            "(noise by standard_normal)",
            lambda: cv2.add(
                scene, rng.standard_normal(scene.shape, dtype=np.float32) * 5.0, dtype=cv2.CV_8U
            ),
        ),
    ]
    encode = ("(JPEG q90 encode)", lambda: cv2.imencode(".jpg", scene, [cv2.IMWRITE_JPEG_QUALITY, 90]))
    rows.insert(0, encode)

    plain = [median_ms(fn, n) for _, fn in rows]
    tuned_ok = tune_malloc()
    tuned = [median_ms(fn, n) for _, fn in rows] if tuned_ok else [float("nan")] * len(rows)
    base = tuned[0] if tuned_ok else plain[0]

    print(f"{w}x{h}, one OpenCV thread, median of {n} calls, ms")
    print("'malloc tuned': after mallopt(M_MMAP_THRESHOLD=32 MiB, M_TRIM_THRESHOLD=64 MiB)")
    print(f"ratio: tuned time / tuned time of one JPEG q90 encode ({base:.3f} ms)\n")
    print(f"{'':<30}{'default':>9}{'malloc tuned':>14}{'x encode':>10}")
    for (name, _), a, b in zip(rows, plain, tuned):
        ratio = (b if tuned_ok else a) / base
        print(f"{name:<30}{a:9.3f}{b:14.3f}{ratio:10.2f}")


if __name__ == "__main__":
    main()
