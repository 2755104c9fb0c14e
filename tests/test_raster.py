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


def test_stripe_parity_equals_the_float_modulo_rule():
    """The stripe band parity equals ``floor(q) % 2 == 1`` (numpy's float modulo) everywhere, signs and huge values too."""
    rng = np.random.default_rng(5)
    q = np.concatenate([
        rng.uniform(-500.0, 500.0, 20000),
        np.arange(-6.0, 6.0, 0.25),  # whole and half values, on both sides of zero
        np.array([-0.0, 2.0**52 + 1.0, 2.0**53, -(2.0**52) - 1.0, 1e300, -1e300]),
    ])
    with np.errstate(invalid="ignore"):
        want = (np.floor(q) % 2) == 1
    assert np.array_equal(raster._odd_band(q), want)
    assert raster._odd_band(q).any() and not raster._odd_band(q).all()


def test_stripes_paint_bands_of_alternating_colours():
    """Stripes of period 3 along +x: columns 0-2 colour 0, 3-5 colour 1, 6-8 colour 0, from the pixel centres."""
    out = raster.paint("stripes", [[0, 0, 0], [255, 255, 255]], 1, 9, row0=0, col0=0, angle=0.0, period=3.0)
    assert out[0, :, 0].tolist() == [0.0] * 3 + [255.0] * 3 + [0.0] * 3


def test_canvas_gather_and_scatter_by_flat_index_equal_fancy_indexing():
    """Pixels read and written by flat index are those of canvas[rr, cc], on contiguous and strided canvases."""
    rng = np.random.default_rng(8)
    base = rng.integers(0, 256, size=(30, 40, 3), dtype=np.uint8)
    for canvas in (base.copy(), np.asfortranarray(base), base.copy()[:, ::-1]):
        flat = rng.permutation(30 * 40)[:500]  # no pixel twice, as within one painting level
        rr, cc = flat // 40, flat % 40
        assert np.array_equal(raster._canvas_take(canvas, flat), canvas[rr, cc])
        values = rng.integers(0, 256, size=(500, 3), dtype=np.uint8)
        want = np.array(canvas)
        want[rr, cc] = values
        raster._canvas_put(canvas, flat, values)
        assert np.array_equal(canvas, want)
