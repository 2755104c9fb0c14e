"""The one blend of a coverage patch onto the canvas."""

import numpy as np

from synthgen.scene import raster


def test_blend_is_the_same_bytes_on_both_paths():
    """Broadcast (small patches) and per-channel (big ones) blending give identical bytes, flat or per-pixel fill."""
    rng = np.random.default_rng(3)
    side = 40  # 1600 px: above SMALL_PATCH
    assert side * side > raster.SMALL_PATCH
    under = rng.integers(0, 256, size=(side, side, 3), dtype=np.uint8)
    cov = rng.random((side, side), dtype=np.float32)
    for fill in (np.array([10.0, 200.0, 77.5], np.float32), rng.uniform(0, 255, (side, side, 3)).astype(np.float32)):
        big = raster.blend(under, fill, cov)
        tiles = np.concatenate(
            [raster.blend(under[r : r + 8], fill if fill.ndim == 1 else fill[r : r + 8], cov[r : r + 8]) for r in range(0, side, 8)]
        )  # 320 px each: still per channel
        small = np.concatenate([raster.blend(under[r : r + 1], fill if fill.ndim == 1 else fill[r : r + 1], cov[r : r + 1])
                                for r in range(side)])  # 40 px each: broadcast
        assert big.dtype == np.uint8 and np.array_equal(big, tiles) and np.array_equal(big, small)


def test_blend_rounds_half_to_even_and_keeps_uncovered_pixels():
    """Coverage 0 leaves the canvas, 1 gives the fill; halves round to even (numpy rint, IEEE 754 default)."""
    under = np.array([[[0, 0, 0], [7, 8, 9]]], np.uint8)
    out = raster.blend(under, np.array([5.0, 5.0, 5.0], np.float32), np.array([[0.5, 0.0]]))
    assert out.tolist() == [[[2, 2, 2], [7, 8, 9]]]  # 2.5 -> 2
