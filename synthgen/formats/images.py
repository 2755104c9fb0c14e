"""Image files: PNG and JPEG encoding and decoding.

Arrays are ``(H, W, 3)`` uint8 RGB (see :mod:`synthgen.geometry`).  Encoding
goes through OpenCV, whose PNG and JPEG writers are several times faster than
Pillow's at the same settings (measured in ``benchmarks/bench_make.py``).
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np

__all__ = ["EXTENSIONS", "encode_image", "decode_image", "read_image"]

#: File extension of each ``output.image_format``.
EXTENSIONS = {"png": "png", "jpeg": "jpg"}


def encode_image(image: np.ndarray, image_format: str, *, png_level: int = 1, jpeg_quality: int = 90) -> bytes:
    """Encode an RGB image as PNG or JPEG bytes.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    image_format : {"png", "jpeg"}
    png_level : int
        zlib level 0-9 (PNG only).
    jpeg_quality : int
        1-100 (JPEG only; 4:2:0 chroma subsampling, baseline).
    """
    bgr = cv2.cvtColor(image, cv2.COLOR_RGB2BGR)
    if image_format == "png":
        ok, buf = cv2.imencode(".png", bgr, [cv2.IMWRITE_PNG_COMPRESSION, int(png_level)])
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
