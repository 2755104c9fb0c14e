"""Occlusion on sub-pixel samples: the sample buffer against plain per-sample counting."""

from __future__ import annotations

import numpy as np
import pytest

from synthgen.geometry import mask_box
from synthgen.scene.coverage import coverage, coverage_many
from synthgen.scene.occlusion import SampleBuffer, patch_bounds, sample_bits, sample_bits_many
from synthgen.scene.shapes import KINDS, Shape


def _random_shapes(seed: int, n: int, height: int, width: int):
    rng = np.random.default_rng(seed)
    shapes, strokes = [], []
    for _ in range(n):
        shapes.append(Shape(
            KINDS[int(rng.integers(len(KINDS)))], float(rng.uniform(-4, width + 4)), float(rng.uniform(-4, height + 4)),
            float(np.exp(rng.uniform(np.log(0.5), np.log(60.0)))), aspect=float(np.exp(rng.uniform(-1, 1))),
            angle=float(rng.uniform(0, 360)), sides=int(rng.integers(3, 9)), inner=float(rng.uniform(0.2, 0.9)),
        ))
        strokes.append(float(rng.uniform(0.3, 3.0)) if rng.random() < 0.3 else 0.0)
    return shapes, strokes


def _whole_mask(cov, height: int, width: int) -> np.ndarray:
    """The shape's sub-samples on the whole canvas, bool (H s, W s), from Coverage.inside."""
    s = cov.samples
    m = np.zeros((height * s, width * s), dtype=bool)
    h, w = cov.values.shape
    m[cov.row0 * s : (cov.row0 + h) * s, cov.col0 * s : (cov.col0 + w) * s] = cov.inside(
        cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)
    return m


@pytest.mark.parametrize("samples", [1, 3, 4, 6, 8])  # 1, 2, 2, 5 and 8 bytes of sample bits per pixel
@pytest.mark.parametrize("seed", range(3))
def test_buffer_walk_equals_a_whole_canvas_sample_count(seed, samples):
    """Walking top-down, each shape's visible coverage and sample box equal a plain count on canvas-sized masks.

    The reference tests every sub-sample of the canvas with Coverage.inside and ORs the masks of the
    shapes above, the rule stated in synthgen.scene.occlusion; sample boxes by synthgen.geometry.mask_box.
    """
    height, width = 50, 70
    shapes, strokes = _random_shapes(seed, 60, height, width)
    buf = SampleBuffer(height, width, samples)
    above = np.zeros((height * samples, width * samples), dtype=bool)
    occluded = 0
    for shape, stroke in zip(shapes[::-1], strokes[::-1]):
        cov = coverage(shape, height, width, samples=samples, stroke=stroke)
        if cov is None:
            continue
        mask = _whole_mask(cov, height, width)
        visible, box = buf.visible(cov, sample_bits(cov))
        seen = mask & ~above
        counts = seen.reshape(height, samples, width, samples).sum(axis=(1, 3)) / samples**2
        h, w = cov.values.shape
        want = counts[cov.row0 : cov.row0 + h, cov.col0 : cov.col0 + w]
        np.testing.assert_allclose(visible, want, rtol=0, atol=1e-6)
        if (mask & above).any() and seen.any():
            np.testing.assert_allclose(box, mask_box(seen, scale=1.0 / samples), rtol=0, atol=1e-12)
            occluded += 1
        else:
            assert box is None
        buf.cover(cov, sample_bits(cov))
        above |= mask
        full = above.reshape(height, samples, width, samples).all(axis=(1, 3))
        assert np.array_equal(buf.full, full)
    assert occluded >= 10


@pytest.mark.parametrize("samples", [1, 2, 4, 5, 8])
def test_sample_bits_agree_on_every_path(samples):
    """Packed sample bits are the same from coverage_many's masks, its pixel classes, point tests, and in bulk."""
    height, width = 60, 80
    shapes, strokes = _random_shapes(7, 120, height, width)
    insides: list = []
    edges: list = []
    covs = coverage_many(shapes, height, width, samples=samples, strokes=strokes, insides=insides, edges=edges)
    paths = {"mask": 0, "classes": 0}
    many = sample_bits_many([c for c in covs if c is not None],
                            [m if e is None else e for c, m, e in zip(covs, insides, edges) if c is not None])
    many = iter(many)
    for cov, inside, edge in zip(covs, insides, edges):
        if cov is None:
            continue
        h, w = cov.values.shape
        flags = cov.inside(cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)
        want = np.packbits(flags.reshape(h, samples, w, samples).transpose(0, 2, 1, 3).reshape(h, w, -1),
                           axis=-1, bitorder="little")
        assert np.array_equal(sample_bits(cov), want)
        assert np.array_equal(sample_bits(cov, inside, edge), want)
        assert np.array_equal(next(many), want)
        paths["mask" if inside is not None else "classes"] += edge is not None or inside is not None
    assert paths["mask"] > 20 and (paths["classes"] > 10 or samples == 1)


def test_patch_bounds_are_the_coverage_patch():
    """patch_bounds gives the rows and columns of coverage's patch, and None exactly when coverage is None."""
    from synthgen.scene.shapes import exact_box

    shapes, strokes = _random_shapes(3, 300, 40, 50)
    for shape in shapes:
        cov = coverage(shape, 40, 50)
        got = patch_bounds(exact_box(shape), 40, 50)
        if cov is None:
            assert got is None
        else:
            h, w = cov.values.shape
            assert got == (cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)


@pytest.mark.parametrize("samples", [1, 2, 3, 4, 5, 6, 8, 11])
def test_full_pixels_set_every_sample_bit_where_the_mask_is(samples):
    """Packed full pixels: all s^2 sample bits set (numpy.packbits, little bit order) where the mask holds, 0 elsewhere;
    the same bytes whatever width (1 to 16 bytes) a packed pixel takes."""
    from synthgen.scene.occlusion import _full_pixels

    rng = np.random.default_rng(samples)
    mask = rng.random((7, 9)) < 0.5
    assert np.array_equal(_full_pixels(np.asfortranarray(mask), samples), _full_pixels(mask, samples))  # any layout
    got = _full_pixels(mask, samples)
    nb = (samples * samples + 7) // 8
    assert got.shape == (7, 9, nb) and got.dtype == np.uint8 and got.flags.writeable
    full = np.packbits(np.ones(samples * samples, dtype=bool), bitorder="little")
    want = np.where(mask[..., None], full, np.uint8(0))
    assert np.array_equal(got, want)
    # every set pixel unpacks to s^2 samples, every other to none
    counts = np.unpackbits(got, axis=-1, bitorder="little").sum(axis=-1)
    assert np.array_equal(counts, np.where(mask, samples * samples, 0))


@pytest.mark.parametrize("samples", [1, 3, 4, 5, 6, 8, 16])
def test_packed_pixel_gather_and_scatter_equal_fancy_indexing(samples):
    """The buffer reads and writes packed pixels by flat index exactly as taken[rr, cc] does, for every pixel width
    (1, 2, 4, 5, 8 and 32 bytes)."""
    rng = np.random.default_rng(samples)
    buf = SampleBuffer(20, 30, samples)
    buf.taken[...] = rng.integers(0, 256, size=buf.taken.shape, dtype=np.uint8)
    flat = rng.permutation(20 * 30)[:200]
    rr, cc = flat // 30, flat % 30
    assert np.array_equal(buf._take(flat), buf.taken[rr, cc])
    values = rng.integers(0, 256, size=(200, buf.taken.shape[-1]), dtype=np.uint8)
    want = buf.taken.copy()
    want[rr, cc] = values
    buf._put(flat, values)
    assert np.array_equal(buf.taken, want)
