"""PNG and JPEG files as make writes them: lossless PNG with fixed row filters, decodable JPEG."""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest
from PIL import Image

from synthgen.formats.images import decode_image, encode_image


def _image(seed: int = 7, noise: int = 40) -> np.ndarray:
    """Smooth ramps plus noise: content on which a per-row filter search picks different filters."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:48, 0:64]
    ramp = np.stack([x * 3, y * 4, (x + y) * 2], axis=-1)
    return np.clip(ramp + rng.integers(0, noise + 1, ramp.shape), 0, 255).astype(np.uint8)


def _row_filters(png: bytes, width: int, height: int) -> list[int]:
    """Filter-type byte of every scanline of an 8-bit RGB, non-interlaced PNG.

    PNG specification (ISO/IEC 15948, sections 5.3 and 9.2): chunks are length, type, data, CRC;
    the IDAT data concatenated is one zlib stream of ``height`` rows, each one filter-type byte
    followed by ``3 * width`` filtered bytes.
    """
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat = 8, b""
    while pos < len(png):
        (length,) = struct.unpack(">I", png[pos : pos + 4])
        if png[pos + 4 : pos + 8] == b"IDAT":
            idat += png[pos + 8 : pos + 8 + length]
        pos += 12 + length
    raw = zlib.decompress(idat)
    stride = 1 + 3 * width
    assert len(raw) == stride * height
    return [raw[r * stride] for r in range(height)]


def test_png_rows_all_use_the_up_filter():
    """Every scanline is filtered with type 2 (Up, PNG spec 9.2): the setting chosen in images.py."""
    img = _image()
    assert set(_row_filters(encode_image(img, "png"), 64, 48)) == {2}


@pytest.mark.parametrize("level", [0, 1, 6, 9])
def test_png_is_lossless_read_by_pillow(level):
    """Pillow (the outside decoder) reads back the exact RGB pixels at every zlib level."""
    img = _image(level)
    back = np.asarray(Image.open(io.BytesIO(encode_image(img, "png", png_level=level))).convert("RGB"))
    np.testing.assert_array_equal(back, img)
    np.testing.assert_array_equal(decode_image(encode_image(img, "png", png_level=level)), img)


def test_jpeg_decodes_close_to_the_original():
    """Pillow decodes our q90 JPEG to within a few levels on average of the input (common practice)."""
    img = _image(noise=4)
    back = np.asarray(Image.open(io.BytesIO(encode_image(img, "jpeg", jpeg_quality=90))).convert("RGB"))
    assert back.shape == img.shape
    assert np.abs(back.astype(int) - img).mean() < 8


def test_unknown_format_is_refused():
    with pytest.raises(ValueError, match="unknown image format 'tiff'"):
        encode_image(_image(), "tiff")
