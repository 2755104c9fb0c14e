"""Image files: PNG and JPEG encoding and decoding.

Arrays are ``(H, W, 3)`` uint8 RGB (see :mod:`synthgen.geometry`).  Encoding
goes through OpenCV with settings chosen by measurement
(``benchmarks/bench_encode.py``: 12 images 640x480 of each config, one core,
OpenCV 5.0, interleaved repetitions, min ms per image; size relative to
OpenCV's level 1 with its per-row filter search, which synthgen used up to 0.1.0):

================================  ==========  ==========  ====================
PNG, level 1                      demo tray   noise bg    noise bg + sensor
================================  ==========  ==========  ====================
per-row filter search (old)       8.2, 1.00   13.1, 1.00  23.1, 1.00
Pillow's default, level 6         24.4, 0.67  61.3, 0.73  47.4, 0.94
fixed NONE                        3.3, 0.95   6.8, 1.16   20.1, 1.16
fixed SUB                         4.5, 1.12   8.1, 1.02   16.7, 1.03
**fixed UP** (chosen)             4.2, 1.02   8.1, 0.97   16.7, 1.03
fixed UP, zlib RLE strategy       4.2, 1.14   7.2, 0.81   8.3, 0.94
fixed PAETH, zlib RLE strategy    5.2, 0.96   9.3, 0.76   12.8, 0.96
================================  ==========  ==========  ====================

A fixed UP row filter with zlib's default strategy is the fastest setting
whose files stay within 10% of the old size on both the demo and the noise
configs: encoding takes about half the time.  NONE grows noisy images by 16%,
and the RLE strategy smooth ones by 14%.  (With per-pixel sensor noise on
every image, UP with RLE would be twice as fast again; the choice is one
setting for every image, so it is not taken.)  ``output.png_level`` still
sets the zlib level.

JPEG goes through OpenCV's libjpeg-turbo (0.70 ms per image at q90 against
Pillow's 0.85 on the same pixels, sizes equal within 0.1%), 4:2:0 chroma
subsampling, baseline.  The PNG row-filter flag needs OpenCV 4.12 or later
(the version floor in ``pyproject.toml``).
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np

__all__ = ["EXTENSIONS", "encode_image", "decode_image", "read_image"]

#: File extension of each ``output.image_format``.
EXTENSIONS = {"png": "png", "jpeg": "jpg"}

#: Every PNG row uses the UP filter (type 2) with zlib's default strategy: see the table above.
_PNG_FIXED = (
    cv2.IMWRITE_PNG_FILTER, cv2.IMWRITE_PNG_FILTER_UP,
    cv2.IMWRITE_PNG_STRATEGY, cv2.IMWRITE_PNG_STRATEGY_DEFAULT,
)


def encode_image(image: np.ndarray, image_format: str, *, png_level: int = 1, jpeg_quality: int = 90) -> bytes:
    """Encode an RGB image as PNG or JPEG bytes.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    image_format : {"png", "jpeg"}
    png_level : int
        zlib level 0-9 (PNG only; every row filtered with UP).
    jpeg_quality : int
        1-100 (JPEG only; 4:2:0 chroma subsampling, baseline).
    """
    bgr = cv2.cvtColor(image, cv2.COLOR_RGB2BGR)
    if image_format == "png":
        ok, buf = cv2.imencode(".png", bgr, [*_PNG_FIXED, cv2.IMWRITE_PNG_COMPRESSION, int(png_level)])
    elif image_format == "jpeg":
        ok, buf = cv2.imencode(".jpg", bgr, [cv2.IMWRITE_JPEG_QUALITY, int(jpeg_quality)])
    else:
        raise ValueError(f"unknown image format {image_format!r}")
    if not ok:
        raise RuntimeError(f"OpenCV could not encode a {image.shape} image as {image_format}")
    return buf.tobytes()


def decode_image(data: bytes) -> np.ndarray | None:
    """Decode PNG or JPEG bytes to an RGB ``(H, W, 3)`` uint8 array (None if undecodable)."""
    arr = cv2.imdecode(np.frombuffer(data, dtype=np.uint8), cv2.IMREAD_COLOR)
    if arr is None:
        return None
    return cv2.cvtColor(arr, cv2.COLOR_BGR2RGB)


def read_image(path: Path) -> np.ndarray | None:
    """Read an image file as RGB ``(H, W, 3)`` uint8 (None if it does not decode)."""
    return decode_image(Path(path).read_bytes())
