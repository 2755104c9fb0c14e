"""Photometric degradations applied to a composed image.

They change pixel values only: nothing moves, so every box and mask stays
exact.  Each degradation is a pure function of a uint8 RGB image of shape
``(H, W, 3)`` and its parameters, returning a new array of the same shape and
dtype (the input is never modified):

* :func:`adjust_brightness` -- add an offset (0..255 units), with saturation;
* :func:`adjust_contrast` -- scale the distance from a pivot grey level;
* :func:`vignette` -- illumination falling off towards the corners;
* :func:`gaussian_blur` -- Gaussian blur with a sigma in px;
* :func:`add_noise` -- additive Gaussian sensor noise, sigma in 0..255 units;
* :func:`jpeg_roundtrip` -- encode to JPEG at a quality and decode again.

:func:`degrade` applies them from a :class:`DegradeSpec`, each with its own
probability, in that fixed order: scene illumination first (brightness,
contrast, vignette), then the lens (blur), the sensor (noise) and the codec
(JPEG) last.

Random draws
------------
:func:`degrade` always draws exactly 12 uniforms in one call
(``rng.random(12)``): one gate and one parameter for each degradation, in the
order above, whether or not it applies.  When noise applies it draws 2 more
(the crop offset in the noise bank; see :func:`add_noise`).  So with every
``p == 0`` it draws exactly 12 values and returns an equal image, and turning
one degradation on or off never changes the parameters drawn for the others.
"""

import functools
import math

import cv2
import numpy as np

from synthgen.config import BlurSpec, BrightnessSpec, ContrastSpec, DegradeSpec, JpegSpec, NoiseSpec, VignetteSpec
from synthgen.seeding import NOISE_BANK_SEED, stream

__all__ = [
    "NoiseSpec",
    "BlurSpec",
    "JpegSpec",
    "BrightnessSpec",
    "ContrastSpec",
    "VignetteSpec",
    "DegradeSpec",
    "DEGRADE_ORDER",
    "degrade",
    "degrade_owned",
    "add_noise",
    "gaussian_blur",
    "jpeg_roundtrip",
    "adjust_brightness",
    "adjust_contrast",
    "vignette",
    "NOISE_BANK_SHAPE",
]

DEGRADE_ORDER = ("brightness", "contrast", "vignette", "blur", "noise", "jpeg")
"""The order in which :func:`degrade` applies (and draws for) the degradations."""

NOISE_BANK_SHAPE = (1024, 1536, 3)
"""``(H, W, 3)`` of the per-process bank of standard normal values used by :func:`add_noise`."""



# --------------------------------------------------------------------------- helpers


def _check_image(image: np.ndarray) -> None:
    if not (
        isinstance(image, np.ndarray)
        and image.dtype == np.uint8
        and image.ndim == 3
        and image.shape[2] == 3
        and image.shape[0] >= 1
        and image.shape[1] >= 1
    ):
        shape = getattr(image, "shape", None)
        dtype = getattr(image, "dtype", None)
        raise ValueError(
            f"image must be a uint8 array of shape (H, W, 3), H, W >= 1 (got {shape}, {dtype})"
        )


def _apply_lut(image: np.ndarray, table: np.ndarray) -> np.ndarray:
    lut = np.clip(np.rint(table), 0, 255).astype(np.uint8)
    return cv2.LUT(image, lut)


# --------------------------------------------------------------------------- degradations


def adjust_brightness(image: np.ndarray, offset: float) -> np.ndarray:
    """Add ``offset`` to every channel, rounding half to even and saturating.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    offset : float
        0..255 units; negative darkens.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        ``clip(rint(image + offset), 0, 255)``.

    Examples
    --------
    >>> img = np.array([[[0, 100, 250]]], np.uint8)
    >>> adjust_brightness(img, 30).tolist(), adjust_brightness(img, -30).tolist()
    ([[[30, 130, 255]]], [[[0, 70, 220]]])
    """
    _check_image(image)
    return _apply_lut(image, np.arange(256, dtype=np.float64) + offset)


def adjust_contrast(image: np.ndarray, gain: float, pivot: float | None = None) -> np.ndarray:
    """Scale every value's distance from a pivot grey level, with saturation.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    gain : float
        Factor (>= 0); below 1 flattens, above 1 steepens.
    pivot : float, optional
        Grey level (0..255) left fixed; by default the mean of all the
        image's values, so the mean brightness barely moves.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        ``clip(rint(pivot + gain * (image - pivot)), 0, 255)``.

    Examples
    --------
    >>> img = np.array([[[0, 100, 200]]], np.uint8)
    >>> adjust_contrast(img, 2.0, pivot=100).tolist()
    [[[0, 100, 255]]]
    """
    _check_image(image)
    if pivot is None:
        pivot = _mean_grey(image)
    v = np.arange(256, dtype=np.float64)
    return _apply_lut(image, pivot + gain * (v - pivot))


def _mean_grey(image: np.ndarray) -> float:
    """Mean over all pixels and channels (every channel has the same pixel count)."""
    return float(sum(cv2.mean(image)[:3]) / 3.0)


@functools.lru_cache(maxsize=8)
def _radius2(height: int, width: int) -> np.ndarray:
    """Squared distance of each pixel centre from the image centre over that of a corner.

    Returns a read-only float32 array of shape (height, width * 3): each value
    repeated for the three channels of its pixel, so that it lines up with an
    ``(H, W, 3)`` image viewed as ``(H, W * 3)``.  0 at the centre, 1 at the
    image corners (``(0, 0)`` etc. in continuous coordinates).
    """
    cx, cy = width / 2.0, height / 2.0
    far2 = cx * cx + cy * cy
    dx2 = ((np.arange(width) + 0.5 - cx) ** 2 / far2).astype(np.float32)  # (W,)
    dy2 = ((np.arange(height) + 0.5 - cy) ** 2 / far2).astype(np.float32)  # (H,)
    r2 = dy2[:, None] + np.repeat(dx2, 3)[None, :]  # (H, W * 3)
    r2.flags.writeable = False
    return r2


def vignette(image: np.ndarray, strength: float) -> np.ndarray:
    """Darken towards the corners: multiply by ``1 - strength * (r / r_corner)**2``.

    ``r`` is the distance of a pixel centre from the image centre
    ``(W / 2, H / 2)`` and ``r_corner`` the distance from the centre to a
    corner, so the gain is 1 at the centre and ``1 - strength`` at the
    corners.  Values are rounded to nearest.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    strength : float
        Fraction of brightness lost at the corners, in [0, 1].

    Returns
    -------
    ndarray of shape (H, W, 3), uint8

    Examples
    --------
    >>> img = np.full((3, 3, 3), 200, np.uint8)
    >>> vignette(img, 0.5)[..., 0].tolist()  # (r / r_corner)**2 = 0, 2/9 and 4/9
    [[156, 178, 156], [178, 200, 178], [156, 178, 156]]
    """
    _check_image(image)
    h, w = image.shape[:2]
    gain = _radius2(h, w) * np.float32(-strength)  # (H, W * 3)
    gain += np.float32(1.0)
    flat = np.ascontiguousarray(image).reshape(h, w * 3)
    return cv2.multiply(flat, gain, dtype=cv2.CV_8U).reshape(h, w, 3)


def gaussian_blur(image: np.ndarray, sigma: float) -> np.ndarray:
    """Gaussian blur with standard deviation ``sigma`` px, truncated at 4 sigma.

    The kernel is the sampled, normalized Gaussian of radius
    ``int(4 * sigma + 0.5)`` px, applied separably in float32 and rounded to
    nearest; borders are mirrored including the edge pixel (``...cba|abc...``),
    as in scipy's and scikit-image's ``mode='reflect'``.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    sigma : float
        px; 0 returns a copy.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
    """
    _check_image(image)
    radius = int(4.0 * sigma + 0.5)
    if sigma <= 0 or radius == 0:
        return image.copy()
    # A float32 kernel on a float32 result: exact to rounding, and faster here than
    # GaussianBlur's 8-bit fixed-point path (which errs by up to ~1.1 levels).
    kernel = cv2.getGaussianKernel(2 * radius + 1, sigma, ktype=cv2.CV_32F)
    out = cv2.sepFilter2D(image, cv2.CV_32F, kernel, kernel, borderType=cv2.BORDER_REFLECT)
    # Blurred values of a uint8 image lie in [0, 255]: the absolute value changes nothing.
    return cv2.convertScaleAbs(out)


@functools.cache
def _noise_bank() -> np.ndarray:
    """A fixed float32 array of standard normals, identical in every process and run."""
    gen = stream(NOISE_BANK_SEED)
    bank = gen.standard_normal(NOISE_BANK_SHAPE, dtype=np.float32)
    bank.flags.writeable = False
    return bank


def add_noise(image: np.ndarray, sigma: float, *, rng: np.random.Generator) -> np.ndarray:
    """Add independent Gaussian noise of standard deviation ``sigma`` to every value.

    The noise values are a crop, at an offset drawn from ``rng``, of a fixed
    bank of independent standard normals (:data:`NOISE_BANK_SHAPE`, made once
    per process from a constant seed), so each image gets independent
    N(0, sigma^2) values per pixel and channel for about 1 ms instead of
    drawing a fresh full-size array.  Two images share noise values only
    where their crops overlap.  The result is rounded to nearest and
    saturated to [0, 255].

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
    sigma : float
        Standard deviation, 0..255 units.
    rng : numpy.random.Generator
        Draws 2 uniforms (the crop offset); an image larger than the bank
        instead draws ``H * W * 3`` float32 standard normals.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
    """
    _check_image(image)
    h, w = image.shape[:2]
    bh, bw, _ = NOISE_BANK_SHAPE
    if h <= bh and w <= bw:
        uy, ux = rng.random(2)
        y = min(int(uy * (bh - h + 1)), bh - h)
        x = min(int(ux * (bw - w + 1)), bw - w)
        z = _noise_bank()[y : y + h, x : x + w]
    else:
        z = rng.standard_normal(image.shape, dtype=np.float32)
    return cv2.addWeighted(image, 1.0, z, float(sigma), 0.0, dtype=cv2.CV_8U)


def jpeg_roundtrip(image: np.ndarray, quality: int) -> np.ndarray:
    """Encode ``image`` as a baseline JPEG at ``quality`` and decode it again.

    Encoding uses OpenCV's libjpeg with its defaults (4:2:0 chroma
    subsampling, standard quantization tables scaled by ``quality``); the RGB
    image is handed over in the BGR order the codec expects, so luma and
    chroma are computed from the right channels.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
        RGB.
    quality : int
        1 (worst) to 100.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        RGB.
    """
    _check_image(image)
    bgr = cv2.cvtColor(image, cv2.COLOR_RGB2BGR)
    ok, data = cv2.imencode(".jpg", bgr, [cv2.IMWRITE_JPEG_QUALITY, int(quality)])
    if not ok:  # pragma: no cover - OpenCV reports failure only for impossible inputs
        raise RuntimeError("JPEG encoding failed")
    return cv2.cvtColor(cv2.imdecode(data, cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)


# --------------------------------------------------------------------------- pipeline


def _lerp(lohi, u: float) -> float:
    lo, hi = lohi
    return float(lo + u * (hi - lo))


def degrade(
    image: np.ndarray, spec: DegradeSpec, *, rng: np.random.Generator
) -> tuple[np.ndarray, dict]:
    """Apply the degradations of ``spec``, each with its probability, in :data:`DEGRADE_ORDER`.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
        Composed RGB image; not modified.
    spec : DegradeSpec
    rng : numpy.random.Generator
        Draws 12 uniforms always, plus 2 when noise applies (module notes).

    Returns
    -------
    image : ndarray of shape (H, W, 3), uint8
        A new array, equal to the input when nothing applied.
    applied : dict
        JSON-able, in application order, one entry per degradation applied
        with its drawn parameters, e.g.
        ``{"blur": {"sigma": 0.9}, "noise": {"sigma": 4.2}}``; empty when
        nothing applied.

    Examples
    --------
    >>> img = np.full((4, 4, 3), 100, np.uint8)
    >>> spec = DegradeSpec(brightness=BrightnessSpec(p=1.0, offset=(20, 20)))
    >>> out, applied = degrade(img, spec, rng=np.random.default_rng(0))
    >>> int(out[0, 0, 0]), applied
    (120, {'brightness': {'offset': 20.0}})
    """
    out, applied = degrade_owned(image, spec, rng=rng)
    if out is image:
        out = image.copy()
    return out, applied


def degrade_owned(
    image: np.ndarray, spec: DegradeSpec, *, rng: np.random.Generator
) -> tuple[np.ndarray, dict]:
    """:func:`degrade`, returning ``image`` itself (not a copy) when nothing applied.

    For callers that own ``image`` and drop it afterwards; saves a full-image copy.
    """
    _check_image(image)
    u = rng.random(2 * len(DEGRADE_ORDER))
    gate = dict(zip(DEGRADE_ORDER, u[: len(DEGRADE_ORDER)]))
    draw = dict(zip(DEGRADE_ORDER, u[len(DEGRADE_ORDER) :]))
    out = image
    applied: dict[str, dict] = {}

    def on(name: str) -> bool:
        return bool(gate[name] < getattr(spec, name).p)

    if on("brightness"):
        offset = _lerp(spec.brightness.offset, draw["brightness"])
        out = adjust_brightness(out, offset)
        applied["brightness"] = {"offset": offset}
    if on("contrast"):
        gain = _lerp(spec.contrast.gain, draw["contrast"])
        pivot = _mean_grey(out)
        out = adjust_contrast(out, gain, pivot)
        applied["contrast"] = {"gain": gain, "pivot": pivot}
    if on("vignette"):
        strength = _lerp(spec.vignette.strength, draw["vignette"])
        out = vignette(out, strength)
        applied["vignette"] = {"strength": strength}
    if on("blur"):
        sigma = _lerp(spec.blur.sigma, draw["blur"])
        out = gaussian_blur(out, sigma)
        applied["blur"] = {"sigma": sigma}
    if on("noise"):
        sigma = _lerp(spec.noise.sigma, draw["noise"])
        out = add_noise(out, sigma, rng=rng)
        applied["noise"] = {"sigma": sigma}
    if on("jpeg"):
        lo, hi = spec.jpeg.quality
        quality = min(int(lo + math.floor(draw["jpeg"] * (hi - lo + 1))), int(hi))
        out = jpeg_roundtrip(out, quality)
        applied["jpeg"] = {"quality": quality}
    return out, applied
