"""Procedural background canvases.

A background is a uint8 RGB canvas of shape ``(H, W, 3)`` drawn before any
object.  Each kind has a pure drawing function that takes its parameters
explicitly (:func:`solid`, :func:`linear`, :func:`radial`, :func:`noise`,
:func:`checker`, :func:`stripes`); :func:`render_background` draws the
parameters from a :class:`BackgroundSpec` and calls one of them.

Coordinates follow :mod:`synthgen.geometry`: ``x`` to the right, ``y`` down,
pixel ``(r, c)`` has its centre at ``(c + 0.5, r + 0.5)``.  Angles are in
degrees, measured from the ``+x`` axis towards ``+y`` (clockwise on screen).
Colours are RGB triples of integers in ``[0, 255]``.

Speed: every kind works on 2-D float32 planes (one per channel, never a
trailing axis of 3) and converts with OpenCV, so a 640x480 canvas takes
about a millisecond (see ``benchmarks/bench_backgrounds.py``).

Random draws
------------
:func:`render_background` draws, in order: for ``mix``, one integer (which
kind); then the kind's colours (solid: one colour; the others: a pair), then
the kind's own parameters (see each ``_draw_*`` helper), then, for ``noise``,
the lattice values; finally, when ``texture`` is not ``(0, 0)``, one amplitude
and the texture's lattice values.  The same generator state always gives the
same bytes.
"""

import colorsys
import math

import cv2
import numpy as np

from synthgen.config import BACKGROUND_KINDS, BackgroundSpec

__all__ = [
    "BACKGROUND_KINDS",
    "BackgroundSpec",
    "render_background",
    "sample_colour",
    "sample_colour_pair",
    "value_noise",
    "noise_octaves_drawn",
    "solid",
    "linear",
    "radial",
    "noise",
    "checker",
    "stripes",
    "add_texture",
]


# --------------------------------------------------------------------------- colours


def sample_colour(
    brightness: tuple[float, float], saturation: tuple[float, float], *, rng: np.random.Generator
) -> tuple[int, int, int]:
    """Draw one RGB colour with uniform hue, saturation and value in ranges.

    Draws three uniforms: hue, saturation, value.

    Parameters
    ----------
    brightness, saturation : (float, float)
        Ranges of HSV value and saturation, fractions in [0, 1].

    Returns
    -------
    (int, int, int)
        RGB, each in [0, 255].

    Examples
    --------
    >>> sample_colour((0.0, 0.0), (0.0, 1.0), rng=np.random.default_rng(0))
    (0, 0, 0)
    """
    h, s, v = rng.random(3)
    s = saturation[0] + s * (saturation[1] - saturation[0])
    v = brightness[0] + v * (brightness[1] - brightness[0])
    return _hsv_to_rgb255(h, s, v)


def sample_colour_pair(
    brightness: tuple[float, float],
    saturation: tuple[float, float],
    contrast: tuple[float, float],
    *,
    rng: np.random.Generator,
) -> tuple[tuple[int, int, int], tuple[int, int, int]]:
    """Draw two RGB colours whose HSV values differ by a drawn contrast.

    Draws seven uniforms: the value gap, the lower value, which colour is the
    darker one, and a hue and saturation for each colour.  The lower value
    lies in ``brightness`` when the gap fits in it; the higher value is the
    lower plus the gap, capped at 1.

    Returns
    -------
    ((int, int, int), (int, int, int))
        Two RGB colours.
    """
    u = rng.random(7)
    gap = contrast[0] + u[0] * (contrast[1] - contrast[0])
    top = max(brightness[0], brightness[1] - gap)
    v_lo = brightness[0] + u[1] * (top - brightness[0])
    v_hi = min(1.0, v_lo + gap)
    if u[2] < 0.5:
        v_lo, v_hi = v_hi, v_lo
    s0 = saturation[0] + u[4] * (saturation[1] - saturation[0])
    s1 = saturation[0] + u[6] * (saturation[1] - saturation[0])
    return _hsv_to_rgb255(u[3], s0, v_lo), _hsv_to_rgb255(u[5], s1, v_hi)


def _hsv_to_rgb255(h: float, s: float, v: float) -> tuple[int, int, int]:
    r, g, b = colorsys.hsv_to_rgb(float(h), float(s), float(v))
    return (round(r * 255), round(g * 255), round(b * 255))


# --------------------------------------------------------------------------- helpers


def _check_size(height: int, width: int) -> None:
    if height < 1 or width < 1:
        raise ValueError(f"canvas size must be at least 1x1 (got height={height}, width={width})")


def _centres(n: int) -> np.ndarray:
    """Pixel-centre coordinates ``0.5, 1.5, ...`` as float32, shape (n,)."""
    return np.arange(n, dtype=np.float32) + np.float32(0.5)


def _blend(t: np.ndarray, colour0, colour1) -> np.ndarray:
    """Mix two colours by a weight plane.

    Parameters
    ----------
    t : ndarray of shape (H, W), float32
        Weight of ``colour1`` in [0, 1].
    colour0, colour1 : (int, int, int)
        RGB colours.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        ``round(colour0 + t * (colour1 - colour0))`` per channel.
    """
    # One float32 -> uint8 pass per channel; the value is in [0, 255] for t in
    # [0, 1], so the absolute value taken by convertScaleAbs changes nothing.
    planes = [
        cv2.convertScaleAbs(t, alpha=float(b - a), beta=float(a))
        for a, b in zip(colour0, colour1)
    ]
    return cv2.merge(planes)


def _two_colour_lut(colour0, colour1) -> np.ndarray:
    lut = np.zeros((256, 1, 3), np.uint8)
    lut[0, 0] = colour0
    lut[1, 0] = colour1
    return lut


# --------------------------------------------------------------------------- kinds


def solid(height: int, width: int, colour) -> np.ndarray:
    """A canvas of one colour.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour : (int, int, int)
        RGB.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8

    Examples
    --------
    >>> solid(2, 3, (10, 20, 30))[1, 2].tolist()
    [10, 20, 30]
    """
    _check_size(height, width)
    out = np.empty((height, width, 3), np.uint8)
    # Fill through a 2-D view: one row of W*3 bytes copied H times.
    out.reshape(height, width * 3)[:] = np.tile(np.asarray(colour, np.uint8), width)
    return out


def linear(height: int, width: int, colour0, colour1, angle: float) -> np.ndarray:
    """A linear gradient from ``colour0`` to ``colour1`` along a direction.

    The weight of ``colour1`` is the projection of each pixel centre on the
    direction ``(cos angle, sin angle)``, rescaled so that it runs from 0 at
    the first corner pixel to 1 at the last one.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour0, colour1 : (int, int, int)
        RGB at the start and at the end of the gradient.
    angle : float
        Direction of increasing weight, degrees from ``+x`` towards ``+y``.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8

    Examples
    --------
    >>> img = linear(1, 5, (0, 0, 0), (200, 200, 200), 0.0)
    >>> img[0, :, 0].tolist()
    [0, 50, 100, 150, 200]
    """
    _check_size(height, width)
    a = math.radians(angle)
    px = _centres(width) * np.float32(math.cos(a))  # (W,)
    py = _centres(height) * np.float32(math.sin(a))  # (H,)
    lo = float(min(px[0], px[-1]) + min(py[0], py[-1]))
    hi = float(max(px[0], px[-1]) + max(py[0], py[-1]))
    span = hi - lo
    if span <= 0.0:
        t = np.zeros((height, width), np.float32)
    else:
        # Rescale the two 1-D factors first so the full plane is built in one pass.
        inv = np.float32(1.0 / span)
        t = (py[:, None] - np.float32(lo)) * inv + px[None, :] * inv  # (H, W)
        np.clip(t, 0.0, 1.0, out=t)
    return _blend(t, colour0, colour1)


def radial(
    height: int, width: int, colour0, colour1, centre: tuple[float, float], radius: float
) -> np.ndarray:
    """A radial gradient: ``colour0`` at the centre, ``colour1`` from ``radius`` out.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour0, colour1 : (int, int, int)
        RGB at the centre and at distance ``radius`` or more.
    centre : (float, float)
        ``(x, y)`` in continuous image coordinates, px.
    radius : float
        Distance, px (> 0), at which the weight of ``colour1`` reaches 1.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8

    Examples
    --------
    >>> img = radial(1, 4, (0, 0, 0), (100, 100, 100), (0.5, 0.5), 2.0)
    >>> img[0, :, 0].tolist()
    [0, 50, 100, 100]
    """
    _check_size(height, width)
    if not radius > 0:
        raise ValueError(f"radius must be > 0 (got {radius})")
    inv = np.float32(1.0 / radius)
    dx = (_centres(width) - np.float32(centre[0])) * inv  # (W,)
    dy = (_centres(height) - np.float32(centre[1])) * inv  # (H,)
    t = dy[:, None] ** 2 + (dx**2)[None, :]  # (H, W)
    cv2.sqrt(t, dst=t)
    np.minimum(t, 1.0, out=t)
    return _blend(t, colour0, colour1)


def value_noise(
    height: int,
    width: int,
    *,
    octaves: int,
    persistence: float,
    scale: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """Fractal value noise, built coarse to fine with one final resize.

    Octave 0 is a lattice of uniform values in [-1, 1] with spacing about
    ``scale`` px.  Each further octave doubles the lattice resolution (cubic
    upsampling of the sum so far) and adds fresh uniform values with
    amplitude ``persistence ** i``.  Octaves whose lattice would be finer than
    the pixel grid are not drawn.  The sum is divided by the total amplitude
    and resized once to the canvas.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    octaves : int
        Requested number of octaves (>= 1).
    persistence : float
        Amplitude ratio between successive octaves.
    scale : float
        Lattice spacing of octave 0, px (>= 1).

    Returns
    -------
    ndarray of shape (height, width), float32
        Values in about [-1, 1] (cubic interpolation may overshoot slightly).

    Notes
    -----
    Draws ``h0 * w0 * (1 + 4 + ... + 4 ** (n - 1))`` float32 uniforms, where
    ``(h0, w0)`` is the coarsest lattice and ``n`` the octaves drawn
    (:func:`noise_octaves_drawn`).
    """
    _check_size(height, width)
    h0, w0, n = _noise_lattice(height, width, octaves, scale)
    g = _uniform_pm1(rng, (h0, w0))
    amp, total = 1.0, 1.0
    for _ in range(1, n):
        h, w = g.shape
        g = cv2.resize(g, (2 * w, 2 * h), interpolation=cv2.INTER_CUBIC)
        amp *= persistence
        total += amp
        g += np.float32(amp) * _uniform_pm1(rng, g.shape)
    g *= np.float32(1.0 / total)
    return cv2.resize(g, (width, height), interpolation=cv2.INTER_CUBIC)


def noise_octaves_drawn(height: int, width: int, octaves: int, scale: float) -> int:
    """How many of ``octaves`` :func:`value_noise` draws on this canvas.

    Examples
    --------
    >>> noise_octaves_drawn(480, 640, 5, 128.0)
    5
    >>> noise_octaves_drawn(16, 16, 5, 8.0)
    4
    """
    return _noise_lattice(height, width, octaves, scale)[2]


def _noise_lattice(height: int, width: int, octaves: int, scale: float) -> tuple[int, int, int]:
    """Coarsest lattice ``(h0, w0)`` and the number of octaves not finer than a pixel."""
    h0 = max(2, round(height / scale))
    w0 = max(2, round(width / scale))
    n = 1
    while n < octaves and h0 * 2**n <= height and w0 * 2**n <= width:
        n += 1
    return h0, w0, n


def _uniform_pm1(rng: np.random.Generator, shape) -> np.ndarray:
    u = rng.random(shape, dtype=np.float32)
    u *= 2.0
    u -= 1.0
    return u


def noise(
    height: int,
    width: int,
    colour0,
    colour1,
    *,
    octaves: int,
    persistence: float,
    scale: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """Fractal value noise mapped between two colours.

    The field from :func:`value_noise` is stretched so that its minimum maps
    to ``colour0`` and its maximum to ``colour1``.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour0, colour1 : (int, int, int)
        RGB at the field's minimum and maximum.
    octaves, persistence, scale
        As for :func:`value_noise`.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8
    """
    f = value_noise(height, width, octaves=octaves, persistence=persistence, scale=scale, rng=rng)
    lo, hi, _, _ = cv2.minMaxLoc(f)
    if hi > lo:
        f -= np.float32(lo)
        f *= np.float32(1.0 / (hi - lo))
    else:
        f[...] = 0.0
    return _blend(f, colour0, colour1)


def checker(
    height: int, width: int, colour0, colour1, cell: int, offset: tuple[int, int] = (0, 0)
) -> np.ndarray:
    """An axis-aligned checkerboard of square cells.

    Pixel ``(r, c)`` gets ``colour1`` when ``(c + ox) // cell + (r + oy) // cell``
    is odd, ``colour0`` otherwise.

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour0, colour1 : (int, int, int)
        RGB of the two cell colours.
    cell : int
        Cell side, px (>= 1).
    offset : (int, int)
        ``(ox, oy)`` shift of the pattern, px.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8

    Examples
    --------
    >>> checker(2, 4, (0, 0, 0), (9, 9, 9), 2)[..., 0].tolist()
    [[0, 0, 9, 9], [0, 0, 9, 9]]
    """
    _check_size(height, width)
    if cell < 1:
        raise ValueError(f"cell must be >= 1 (got {cell})")
    cols = (((np.arange(width) + offset[0]) // cell) & 1).astype(np.uint8)  # (W,)
    rows = (((np.arange(height) + offset[1]) // cell) & 1).astype(np.uint8)  # (H,)
    idx = rows[:, None] ^ cols[None, :]  # (H, W), 0 or 1
    return cv2.LUT(cv2.merge([idx, idx, idx]), _two_colour_lut(colour0, colour1))


def stripes(
    height: int,
    width: int,
    colour0,
    colour1,
    period: float,
    angle: float,
    duty: float = 0.5,
    phase: float = 0.0,
) -> np.ndarray:
    """Parallel straight stripes, anti-aliased.

    Let ``u = x cos(angle) + y sin(angle) + phase`` at each pixel centre.  The
    band ``0 <= u mod period < duty * period`` has ``colour1``, the rest
    ``colour0``.  Each pixel's weight of ``colour1`` is the length of a 1 px
    segment across the stripes, centred on the pixel centre, that falls
    inside a band: the exact pixel coverage for axis-aligned stripes of any
    width (an approximation at other angles).

    Parameters
    ----------
    height, width : int
        Canvas size, px.
    colour0, colour1 : (int, int, int)
        RGB of the two stripe colours.
    period : float
        Distance between successive ``colour1`` bands, px.
    angle : float
        Direction of the stripes' normal, degrees from ``+x`` towards ``+y``.
    duty : float
        Fraction of the period taken by ``colour1``.
    phase : float
        Shift along the normal, px.

    Returns
    -------
    ndarray of shape (height, width, 3), uint8

    Examples
    --------
    >>> stripes(1, 8, (0, 0, 0), (100, 100, 100), 4.0, 0.0)[0, :, 0].tolist()
    [100, 100, 0, 0, 100, 100, 0, 0]
    """
    _check_size(height, width)
    if not period > 0:
        raise ValueError(f"period must be > 0 (got {period})")
    a = math.radians(angle)
    band = duty * period
    # Work in units of one period: q = (u - band/2) / P + 1/2, so that
    # frac(q) - 1/2 is the signed distance from the band's middle over P.
    inv = 1.0 / period
    shift = (phase - band / 2.0) * inv + 0.5
    px = _centres(width) * np.float32(math.cos(a) * inv)  # (W,)
    py = _centres(height) * np.float32(math.sin(a) * inv) + np.float32(shift)  # (H,)
    q = py[:, None] + px[None, :]  # (H, W)
    e = np.floor(q)
    np.subtract(q, e, out=e)
    e -= np.float32(0.5)
    np.abs(e, out=e)
    e *= np.float32(period)  # d: distance from the nearest band's middle, px, in [0, P/2]
    # Overlap of [d - 1/2, d + 1/2] with this band [-b/2, b/2] ...
    half = np.float32(band / 2.0)
    weight = np.minimum(e + np.float32(0.5), half)
    weight -= np.maximum(e - np.float32(0.5), -half)
    np.maximum(weight, 0.0, out=weight)
    # ... plus with the next band, which starts at P - b/2 (reached only by gaps < 1 px).
    e -= np.float32(period - band / 2.0 - 0.5)
    np.maximum(e, 0.0, out=e)
    weight += e
    np.minimum(weight, 1.0, out=weight)
    return _blend(weight, colour0, colour1)


def add_texture(
    image: np.ndarray, amplitude: float, scale: float, *, rng: np.random.Generator
) -> np.ndarray:
    """Add a fine grey value-noise texture to a canvas, with saturation.

    Parameters
    ----------
    image : ndarray of shape (H, W, 3), uint8
        Canvas; not modified.
    amplitude : float
        Peak texture offset, 0..255 units.
    scale : float
        Lattice spacing of the texture's coarsest octave, px.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        ``image`` plus ``amplitude`` times three octaves of value noise
        (persistence 0.5), the same offset on every channel.
    """
    h, w = image.shape[:2]
    tex = value_noise(h, w, octaves=3, persistence=0.5, scale=scale, rng=rng)
    tex *= np.float32(amplitude)
    return cv2.add(image, cv2.merge([tex, tex, tex]), dtype=cv2.CV_8U)


# --------------------------------------------------------------------------- sampling


def _uniform(rng: np.random.Generator, lohi) -> float:
    lo, hi = lohi
    return float(lo + rng.random() * (hi - lo))


def _pair(spec: BackgroundSpec, rng):
    return sample_colour_pair(spec.brightness, spec.saturation, spec.contrast, rng=rng)


def _draw_solid(spec, height, width, rng):
    colour = sample_colour(spec.brightness, spec.saturation, rng=rng)
    return solid(height, width, colour), {"colour": list(colour)}


def _draw_linear(spec, height, width, rng):
    c0, c1 = _pair(spec, rng)
    angle = float(rng.random() * 360.0)
    img = linear(height, width, c0, c1, angle)
    return img, {"colours": [list(c0), list(c1)], "angle": angle}


def _draw_radial(spec, height, width, rng):
    c0, c1 = _pair(spec, rng)
    cx, cy = rng.random(2)
    cx, cy = float(cx * width), float(cy * height)
    far = max(math.hypot(cx - x, cy - y) for x in (0, width) for y in (0, height))
    radius = _uniform(rng, spec.radial_reach) * far
    img = radial(height, width, c0, c1, (cx, cy), radius)
    return img, {"colours": [list(c0), list(c1)], "centre": [cx, cy], "radius": radius}


def _draw_noise(spec, height, width, rng):
    c0, c1 = _pair(spec, rng)
    scale = _uniform(rng, spec.noise_scale)
    img = noise(
        height, width, c0, c1,
        octaves=spec.octaves, persistence=spec.persistence, scale=scale, rng=rng,
    )  # fmt: skip
    info = {
        "colours": [list(c0), list(c1)],
        "scale": scale,
        "octaves": noise_octaves_drawn(height, width, spec.octaves, scale),
        "persistence": float(spec.persistence),
    }
    return img, info


def _draw_checker(spec, height, width, rng):
    c0, c1 = _pair(spec, rng)
    lo, hi = spec.checker_cell
    cell = int(rng.integers(lo, hi, endpoint=True))
    ox, oy = (int(v) for v in rng.integers(0, cell, size=2))
    img = checker(height, width, c0, c1, cell, (ox, oy))
    return img, {"colours": [list(c0), list(c1)], "cell": cell, "offset": [ox, oy]}


def _draw_stripes(spec, height, width, rng):
    c0, c1 = _pair(spec, rng)
    period = _uniform(rng, spec.stripe_period)
    duty = _uniform(rng, spec.stripe_duty)
    angle = _uniform(rng, spec.stripe_angle)
    phase = float(rng.random() * period)
    img = stripes(height, width, c0, c1, period, angle, duty, phase)
    info = {
        "colours": [list(c0), list(c1)],
        "period": period,
        "duty": duty,
        "angle": angle,
        "phase": phase,
    }
    return img, info


_DRAW = {
    "solid": _draw_solid,
    "linear": _draw_linear,
    "radial": _draw_radial,
    "noise": _draw_noise,
    "checker": _draw_checker,
    "stripes": _draw_stripes,
}


def render_background(
    spec: BackgroundSpec, height: int, width: int, *, rng: np.random.Generator
) -> tuple[np.ndarray, dict]:
    """Draw one background canvas from a spec.

    Parameters
    ----------
    spec : BackgroundSpec
        What to draw.
    height, width : int
        Canvas size, px (array order ``(H, W)``).
    rng : numpy.random.Generator
        Source of every random choice (see the module notes for the order).

    Returns
    -------
    image : ndarray of shape (height, width, 3), uint8
        RGB canvas.
    info : dict
        JSON-able record of what was drawn: ``{"kind": ..., **parameters}``;
        for ``mix`` the kind actually picked, with ``"mixed": True``; with a
        texture, ``"texture": amplitude``.

    Examples
    --------
    >>> img, info = render_background(BackgroundSpec(kind="checker"), 48, 64,
    ...                               rng=np.random.default_rng(1))
    >>> img.shape, img.dtype.name, info["kind"]
    ((48, 64, 3), 'uint8', 'checker')
    """
    _check_size(height, width)
    kind = spec.kind
    mixed = kind == "mix"
    if mixed:
        kind = spec.mix[int(rng.integers(len(spec.mix)))]
    image, params = _DRAW[kind](spec, height, width, rng)
    info = {"kind": kind, **params}
    if mixed:
        info["mixed"] = True
    if spec.texture[1] > 0:
        amplitude = _uniform(rng, spec.texture)
        image = add_texture(image, amplitude, spec.texture_scale, rng=rng)
        info["texture"] = amplitude
    return image, info
