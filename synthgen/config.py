"""The run schema: frozen spec dataclasses, built-in defaults, TOML loading and overrides.

Every key has a built-in default, so an empty config is a valid config.  This
module holds the whole schema (every section's spec, the kind and fill names,
the kinds' parameter ranges, the background kinds), assembles it into one
:class:`Config` and is the only place that turns user text into specs; the
stages in :mod:`synthgen.scene` read the specs and import nothing back.  Validation happens once, here, at the boundary:
wrong types and unknown keys are caught by :func:`build`, and each spec's
``__post_init__`` checks its own rules.  Every error is a
:class:`~synthgen.errors.ConfigError` naming the dotted key, the rule and the
value.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import re
import tomllib
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from synthgen.errors import ConfigError, InputFileError, as_tuples, check_choice, check_number, check_range

__all__ = [
    "CanvasSpec",
    "ObjectSpec",
    "ClutterSpec",
    "RenderSpec",
    "OutputSpec",
    "Config",
    "LAYOUTS",
    "DROPPED",
    "MAX_CANVAS_SIDE",
    "object_room",
    "build",
    "load_config",
    "parse_override",
    "to_dict",
]

#: Largest accepted canvas side, in pixels (a 16384 x 16384 RGB canvas is 768 MiB).
MAX_CANVAS_SIDE = 16384
#: Largest accepted number of objects per image.
MAX_OBJECTS = 100_000
#: Largest accepted number of images in one run.
MAX_IMAGES = 100_000_000

LAYOUTS = ("scatter", "separated", "pairs", "grid", "clusters")
MARKS = ("line", "blob", "texture")
SIZE_LAWS = ("uniform", "log-uniform")
BOX_KINDS = ("visible", "full")
DROPPED = ("ignore", "erase")
IMAGE_FORMATS = ("png", "jpeg")


# --------------------------------------------------------------------------- objects: kinds, fills, parameters

KINDS = ("rectangle", "ellipse", "triangle", "polygon", "star", "ring", "cross")
"""Shape kinds, in canonical order (category ids are ``KINDS.index(kind) + 1``)."""

FILLS = ("flat", "gradient", "stripes")
"""Fill styles understood by :func:`paint`."""

SIDES = (5, 8)
"""Sides of a polygon."""
POINTS = (5, 8)
"""Points of a star."""
STAR_INNER = (0.3, 0.55)
"""Inner / outer radius of a star."""
RING_HOLE = (0.3, 0.6)
"""Hole / outer semi-axes of a ring."""
CROSS_BAR = (0.2, 0.4)
"""Bar thickness / length of a cross."""

#: The parameter ranges a config may narrow: key -> (range, whole numbers, what lies beyond it).
_KEYS = {
    "objects.sides": (SIDES, True, "polygons of fewer sides are triangles or rectangles, of more ellipses"),
    "objects.points": (POINTS, True, "stars of fewer points are triangles or crosses, of more blobs"),
    "objects.inner": (STAR_INNER, False, "fuller stars are polygons, thinner ones sets of lines"),
    "objects.hole": (RING_HOLE, False, "rings with wider holes are outlined ellipses, with smaller ones ellipses"),
    "objects.bar": (CROSS_BAR, False, "crosses with thicker bars are octagons, with thinner ones lines"),
}


def check_parameters(spec) -> None:
    """Raise :class:`~synthgen.errors.ConfigError` unless each kind's parameter range in ``spec`` keeps the kinds apart.

    ``spec`` is a :class:`synthgen.config.ObjectSpec`; its ``sides``, ``points``,
    ``inner``, ``hole`` and ``bar`` may narrow the ranges above, never widen them.
    """
    for key, (bounds, integer, why) in _KEYS.items():
        value = getattr(spec, key.split(".")[1])
        try:
            check_range(key, value, lo=bounds[0], hi=bounds[1], integer=integer)
        except ConfigError as err:
            raise ConfigError(key, err.rule, value, hint=why) from None


# --------------------------------------------------------------------------- background


BACKGROUND_KINDS = ("solid", "linear", "radial", "noise", "checker", "stripes", "mix")


@dataclass(frozen=True, slots=True)
class BackgroundSpec:
    """What backgrounds to draw (TOML table ``[background]``).

    Parameters
    ----------
    kind : str
        One of :data:`BACKGROUND_KINDS`.  ``mix`` picks one of ``mix``
        uniformly per image.
    mix : tuple of str
        The kinds ``mix`` picks from (any kind except ``mix``).
    brightness : (float, float)
        Range of colour value (HSV ``V``), fraction of full scale in [0, 1].
    saturation : (float, float)
        Range of colour saturation (HSV ``S``) in [0, 1].
    contrast : (float, float)
        Range of the difference in value (HSV ``V``) between the two colours
        of a two-colour kind, fraction of full scale in [0, 1].
    radial_reach : (float, float)
        Radius of a radial gradient as a fraction of the distance from its
        centre to the farthest canvas corner; beyond it the outer colour holds.
    octaves : int
        Number of value-noise octaves, each at twice the lattice frequency of
        the previous one (1 to 12).
    persistence : float
        Amplitude ratio of each noise octave to the previous one, in [0, 1].
    noise_scale : (float, float)
        Range of the coarsest noise octave's lattice spacing, px (>= 1).
    checker_cell : (int, int)
        Range of the checkerboard cell side, px (whole numbers >= 1).
    stripe_period : (float, float)
        Range of the stripe period (one stripe of each colour), px (>= 2).
    stripe_duty : (float, float)
        Range of the fraction of each period taken by the second colour,
        in (0, 1].
    stripe_angle : (float, float)
        Range of the stripes' normal direction, degrees.
    texture : (float, float)
        Range of the amplitude of a fine grey texture added over any kind,
        in 0..255 units; ``(0, 0)`` turns it off (and draws nothing).
    texture_scale : float
        Lattice spacing of the texture's coarsest octave, px (>= 1).
    """

    kind: str = "noise"
    mix: tuple[str, ...] = ("solid", "linear", "radial", "noise", "checker", "stripes")
    brightness: tuple[float, float] = (0.2, 0.9)
    saturation: tuple[float, float] = (0.0, 0.7)
    contrast: tuple[float, float] = (0.15, 0.6)
    radial_reach: tuple[float, float] = (0.6, 1.4)
    octaves: int = 5
    persistence: float = 0.5
    noise_scale: tuple[float, float] = (48.0, 192.0)
    checker_cell: tuple[int, int] = (8, 64)
    stripe_period: tuple[float, float] = (8.0, 48.0)
    stripe_duty: tuple[float, float] = (0.3, 0.7)
    stripe_angle: tuple[float, float] = (0.0, 180.0)
    texture: tuple[float, float] = (0.0, 0.0)
    texture_scale: float = 4.0

    def __post_init__(self):
        as_tuples(self)
        check_choice("background.kind", self.kind, BACKGROUND_KINDS)
        if (
            not isinstance(self.mix, tuple)
            or not self.mix
            or not all(isinstance(k, str) for k in self.mix)
        ):
            raise ConfigError(
                "background.mix", "must be a non-empty list of background kinds", self.mix
            )
        for k in self.mix:
            check_choice("background.mix", k, BACKGROUND_KINDS[:-1])
        check_range("background.brightness", self.brightness, lo=0, hi=1)
        check_range("background.saturation", self.saturation, lo=0, hi=1)
        check_range("background.contrast", self.contrast, lo=0, hi=1)
        check_range("background.radial_reach", self.radial_reach, lo=0, lo_open=True)
        check_number("background.octaves", self.octaves, lo=1, hi=12, integer=True)
        check_number("background.persistence", self.persistence, lo=0, hi=1)
        check_range("background.noise_scale", self.noise_scale, lo=1)
        check_range("background.checker_cell", self.checker_cell, lo=1, integer=True)
        check_range("background.stripe_period", self.stripe_period, lo=2)
        check_range("background.stripe_duty", self.stripe_duty, lo=0, lo_open=True, hi=1)
        check_range("background.stripe_angle", self.stripe_angle)
        check_range("background.texture", self.texture, lo=0, hi=255)
        check_number("background.texture_scale", self.texture_scale, lo=1)


# --------------------------------------------------------------------------- degrade


def _check_p(key: str, p) -> None:
    check_number(key, p, lo=0, hi=1)


@dataclass(frozen=True, slots=True)
class NoiseSpec:
    """Gaussian sensor noise (TOML table ``[degrade.noise]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    sigma : (float, float)
        Range of the noise standard deviation, 0..255 units, in [0, 128].
    """

    p: float = 0.0
    sigma: tuple[float, float] = (2.0, 8.0)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.noise.p", self.p)
        check_range("degrade.noise.sigma", self.sigma, lo=0, hi=128)


@dataclass(frozen=True, slots=True)
class BlurSpec:
    """Gaussian blur (TOML table ``[degrade.blur]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    sigma : (float, float)
        Range of the blur standard deviation, px, in [0, 32].
    """

    p: float = 0.0
    sigma: tuple[float, float] = (0.5, 1.5)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.blur.p", self.p)
        check_range("degrade.blur.sigma", self.sigma, lo=0, hi=32)


@dataclass(frozen=True, slots=True)
class JpegSpec:
    """JPEG round trip (TOML table ``[degrade.jpeg]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    quality : (int, int)
        Range of the JPEG quality, whole numbers in [1, 100] (both ends drawn).
    """

    p: float = 0.0
    quality: tuple[int, int] = (30, 90)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.jpeg.p", self.p)
        check_range("degrade.jpeg.quality", self.quality, lo=1, hi=100, integer=True)


@dataclass(frozen=True, slots=True)
class BrightnessSpec:
    """Brightness change (TOML table ``[degrade.brightness]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    offset : (float, float)
        Range of the offset added to every channel, 0..255 units, in [-255, 255].
    """

    p: float = 0.0
    offset: tuple[float, float] = (-40.0, 40.0)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.brightness.p", self.p)
        check_range("degrade.brightness.offset", self.offset, lo=-255, hi=255)


@dataclass(frozen=True, slots=True)
class ContrastSpec:
    """Contrast change (TOML table ``[degrade.contrast]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    gain : (float, float)
        Range of the factor applied to each value's distance from the image's
        mean grey level, in [0, 8] (1 leaves the image unchanged).
    """

    p: float = 0.0
    gain: tuple[float, float] = (0.6, 1.4)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.contrast.p", self.p)
        check_range("degrade.contrast.gain", self.gain, lo=0, hi=8)


@dataclass(frozen=True, slots=True)
class VignetteSpec:
    """Illumination falling off towards the corners (TOML table ``[degrade.vignette]``).

    Parameters
    ----------
    p : float
        Probability of applying it to an image, in [0, 1].
    strength : (float, float)
        Range of the fraction of brightness lost at the corners, in [0, 1].
    """

    p: float = 0.0
    strength: tuple[float, float] = (0.1, 0.5)

    def __post_init__(self):
        as_tuples(self)
        _check_p("degrade.vignette.p", self.p)
        check_range("degrade.vignette.strength", self.strength, lo=0, hi=1)


_SUBSPECS = {
    "brightness": BrightnessSpec,
    "contrast": ContrastSpec,
    "vignette": VignetteSpec,
    "blur": BlurSpec,
    "noise": NoiseSpec,
    "jpeg": JpegSpec,
}


@dataclass(frozen=True, slots=True)
class DegradeSpec:
    """All photometric degradations (TOML table ``[degrade]`` and its sub-tables).

    Every probability defaults to 0: by default images are not degraded.

    Parameters
    ----------
    noise : NoiseSpec
    blur : BlurSpec
    jpeg : JpegSpec
    brightness : BrightnessSpec
    contrast : ContrastSpec
    vignette : VignetteSpec
    """

    noise: NoiseSpec = field(default_factory=NoiseSpec)
    blur: BlurSpec = field(default_factory=BlurSpec)
    jpeg: JpegSpec = field(default_factory=JpegSpec)
    brightness: BrightnessSpec = field(default_factory=BrightnessSpec)
    contrast: ContrastSpec = field(default_factory=ContrastSpec)
    vignette: VignetteSpec = field(default_factory=VignetteSpec)

    def __post_init__(self):
        for name, cls in _SUBSPECS.items():
            value = getattr(self, name)
            if not isinstance(value, cls):
                raise ConfigError(f"degrade.{name}", "must be a table", value)


@dataclass(frozen=True, slots=True)
class CanvasSpec:
    """Image size in pixels (``[canvas]``)."""

    width: int = 640
    height: int = 480

    def __post_init__(self):
        as_tuples(self)
        check_number("canvas.width", self.width, lo=1, hi=MAX_CANVAS_SIDE, integer=True)
        check_number("canvas.height", self.height, lo=1, hi=MAX_CANVAS_SIDE, integer=True)


@dataclass(frozen=True, slots=True)
class ObjectSpec:
    """What objects each image holds and where they go (``[objects]``).

    Sizes are the longer side of an object's unclipped exact box, in pixels.
    Layout keys (see :mod:`synthgen.scene.placement`): ``max_iou`` and ``attempts``
    (``separated``; ``max_iou`` also keeps pairs apart under ``pairs``),
    ``pair_iou`` (``pairs``), ``grid_pitch`` and ``grid_jitter`` (``grid``),
    ``clusters`` and ``cluster_spread`` (``clusters``).  ``occlusion`` = [lo,
    hi] with hi > 0 puts an occluder over a share ``occlusion_share`` of the
    placed objects so that each hides a fraction in [lo, hi] of its target
    (targets hidden beyond ``1 - min_visible`` are still dropped, so lower
    ``min_visible`` for heavy occlusion).  ``dropped`` says what becomes of an
    object that ``min_visible`` or ``min_area`` drops but that still shows:
    ``"ignore"`` draws it and marks its pixels as an ignore region (COCO
    ``iscrowd`` 1), ``"erase"`` leaves it out of the picture.
    """

    count: tuple[int, int] = (3, 12)
    size: tuple[float, float] = (12.0, 120.0)
    size_law: str = "log-uniform"
    aspect: tuple[float, float] = (0.5, 2.0)
    rotate: bool = True
    shapes: tuple[str, ...] = KINDS
    layout: str = "scatter"
    min_visible: float = 0.2
    min_area: float = 1.0
    min_contrast: float = 0.15
    fills: tuple[str, ...] = FILLS
    outline: float = 0.15
    stroke: tuple[float, float] = (1.5, 4.0)
    sides: tuple[int, int] = SIDES  # polygon sides; these five keep the kinds apart (synthgen.scene.kinds)
    points: tuple[int, int] = POINTS  # star points
    inner: tuple[float, float] = STAR_INNER  # star inner / outer radius
    hole: tuple[float, float] = RING_HOLE  # ring hole / outer size
    bar: tuple[float, float] = CROSS_BAR  # cross bar thickness / length
    box: str = "visible"
    dropped: str = "ignore"  # what becomes of a dropped object that still shows: ignore region, or erased
    max_iou: float = 0.0  # largest exact-box IoU of two objects, in [0, 1] (0: none overlap)
    attempts: int = 100  # candidate centres per object before it is left out (no_room)
    pair_iou: tuple[float, float] = (0.3, 0.7)  # box IoU range within a pair, in (0, 1]
    grid_pitch: float = 0.0  # lattice spacing, px (0: largest pitch that holds every object)
    grid_jitter: float = 0.0  # largest centre move per axis, in pitches, [0, 0.5]
    clusters: tuple[int, int] = (2, 5)  # number of cluster centres per image
    cluster_spread: tuple[float, float] = (8.0, 40.0)  # normal spread around a centre, px
    occlusion: tuple[float, float] = (0.0, 0.0)  # hidden share of a target by its occluder
    occlusion_share: float = 1.0  # share of placed objects that get an occluder

    def __post_init__(self):
        as_tuples(self)
        check_range("objects.count", self.count, lo=0, hi=MAX_OBJECTS, integer=True)
        check_range("objects.size", self.size, lo=0, lo_open=True, hi=4 * MAX_CANVAS_SIDE)
        check_choice("objects.size_law", self.size_law, SIZE_LAWS)
        check_range("objects.aspect", self.aspect, lo=0, lo_open=True)
        if self.aspect[1] > 100 or self.aspect[0] < 0.01:
            raise ConfigError("objects.aspect", "must lie within [0.01, 100]", self.aspect)
        _check_names("objects.shapes", self.shapes, KINDS)
        check_choice("objects.layout", self.layout, LAYOUTS)
        check_number("objects.min_visible", self.min_visible, lo=0, hi=1)
        check_number("objects.min_area", self.min_area, lo=0)
        check_number("objects.min_contrast", self.min_contrast, lo=0, hi=1)
        _check_names("objects.fills", self.fills, FILLS)
        check_number("objects.outline", self.outline, lo=0, hi=1)
        check_range("objects.stroke", self.stroke, lo=0, lo_open=True)
        check_parameters(self)
        check_choice("objects.box", self.box, BOX_KINDS)
        check_choice("objects.dropped", self.dropped, DROPPED)
        check_number("objects.max_iou", self.max_iou, lo=0, hi=1)
        check_number("objects.attempts", self.attempts, lo=1, hi=100_000, integer=True)
        check_range("objects.pair_iou", self.pair_iou, lo=0, lo_open=True, hi=1)
        check_number("objects.grid_pitch", self.grid_pitch, lo=0, hi=MAX_CANVAS_SIDE)
        check_number("objects.grid_jitter", self.grid_jitter, lo=0, hi=0.5)
        check_range("objects.clusters", self.clusters, lo=1, hi=MAX_OBJECTS, integer=True)
        check_range("objects.cluster_spread", self.cluster_spread, lo=0, hi=4 * MAX_CANVAS_SIDE)
        check_range("objects.occlusion", self.occlusion, lo=0, hi=0.99)
        check_number("objects.occlusion_share", self.occlusion_share, lo=0, hi=1)


@dataclass(frozen=True, slots=True)
class ClutterSpec:
    """Unlabelled distractor marks drawn under the objects (``[clutter]``).

    Parameters
    ----------
    count : (int, int)
        Range of the number of marks per image (both ends drawn).
    similar : float
        Share of the marks, in [0, 1], that are partial copies of the labelled
        shape kinds (half-plane cuts keeping 30-60 % of a shape): hard negatives.
    size : (float, float)
        Range of a mark's longer side, px.
    marks : tuple of str
        Kinds of the other marks: ``line`` (anti-aliased segment), ``blob``
        (smooth irregular patch), ``texture`` (a patch of value noise).
    """

    count: tuple[int, int] = (0, 0)
    similar: float = 0.0
    size: tuple[float, float] = (4.0, 48.0)
    marks: tuple[str, ...] = MARKS

    def __post_init__(self):
        as_tuples(self)
        check_range("clutter.count", self.count, lo=0, hi=MAX_OBJECTS, integer=True)
        check_number("clutter.similar", self.similar, lo=0, hi=1)
        check_range("clutter.size", self.size, lo=0, lo_open=True, hi=4 * MAX_CANVAS_SIDE)
        _check_names("clutter.marks", self.marks, MARKS)


@dataclass(frozen=True, slots=True)
class RenderSpec:
    """Anti-aliasing (``[render]``): sub-pixel samples per pixel side."""

    samples: int = 4

    def __post_init__(self):
        as_tuples(self)
        check_number("render.samples", self.samples, lo=1, hi=16, integer=True)


@dataclass(frozen=True, slots=True)
class OutputSpec:
    """How images are encoded (``[output]``)."""

    image_format: str = "png"
    png_level: int = 1
    jpeg_quality: int = 90

    def __post_init__(self):
        as_tuples(self)
        check_choice("output.image_format", self.image_format, IMAGE_FORMATS)
        check_number("output.png_level", self.png_level, lo=0, hi=9, integer=True)
        check_number("output.jpeg_quality", self.jpeg_quality, lo=1, hi=100, integer=True)


@dataclass(frozen=True, slots=True)
class Config:
    """One run: seed, number of images and every section."""

    seed: int = 0
    count: int = 8
    canvas: CanvasSpec = field(default_factory=CanvasSpec)
    background: BackgroundSpec = field(default_factory=BackgroundSpec)
    objects: ObjectSpec = field(default_factory=ObjectSpec)
    clutter: ClutterSpec = field(default_factory=ClutterSpec)
    render: RenderSpec = field(default_factory=RenderSpec)
    degrade: DegradeSpec = field(default_factory=DegradeSpec)
    output: OutputSpec = field(default_factory=OutputSpec)

    def __post_init__(self):
        as_tuples(self)
        check_number("seed", self.seed, lo=0, hi=2**63 - 1, integer=True)
        check_number("count", self.count, lo=1, hi=MAX_IMAGES, integer=True)
        _check_room(self)


def object_room(config: Config) -> int:
    """The most objects one image of ``config`` can annotate, whatever their size and place.

    An annotated object shows at least ``objects.min_area`` px^2 of visible
    coverage and at least one sub-pixel sample (``1 / render.samples^2``
    px^2), and no sample shows two objects, so at most ``W H / max(min_area,
    1 / s^2)`` objects fit on a ``W x H`` canvas.

    Examples
    --------
    >>> object_room(build(Config, {"canvas": {"width": 64, "height": 64}}))
    4096
    """
    s = config.render.samples
    need = max(config.objects.min_area, 1.0 / (s * s))
    return math.floor(config.canvas.width * config.canvas.height / need + 1e-9)


def _check_room(config: Config) -> None:
    """Refuse a request for more objects per image than the canvas can ever show annotated."""
    room = object_room(config)
    if config.objects.count[0] > room:
        w, h = config.canvas.width, config.canvas.height
        s = config.render.samples
        if config.objects.min_area >= 1.0 / (s * s):
            why = f"each annotated object needs objects.min_area = {config.objects.min_area:g} px^2 of it to itself"
        else:
            why = f"each annotated object needs a sub-pixel sample, 1/{s * s} px^2 at render.samples = {s}, to itself"
        raise ConfigError(
            "objects.count",
            f"must ask for at most {room} objects per image on a {w}x{h} canvas ({why})",
            config.objects.count,
        )


def _check_names(key: str, names: tuple[str, ...], allowed: tuple[str, ...]) -> None:
    if len(names) == 0:
        raise ConfigError(key, "must name at least one of " + ", ".join(allowed), list(names))
    for name in names:
        check_choice(key, name, allowed)
    if len(set(names)) != len(names):
        raise ConfigError(key, "must not repeat a name", list(names))


# --------------------------------------------------------------------------- building


def build(cls: type, data: dict[str, Any], prefix: str = ""):
    """Build spec ``cls`` from a nested dict of TOML values, checking types and keys.

    Parameters
    ----------
    cls : dataclass type
    data : dict
        Values as TOML gives them (lists for ranges and name lists).
    prefix : str
        Dotted key of ``cls``'s section, for messages.

    Raises
    ------
    ConfigError
        For an unknown key (with a suggestion), a value of the wrong type, or a
        value that breaks a spec's rule.

    Examples
    --------
    >>> build(CanvasSpec, {"width": 320}).width
    320
    >>> build(CanvasSpec, {"widht": 320}, "canvas.")
    Traceback (most recent call last):
    ...
    synthgen.errors.ConfigError: config key 'canvas.widht' is not a known key (got 320); did you mean 'canvas.width'?
    """
    if not isinstance(data, dict):
        raise ConfigError(prefix.rstrip(".") or "<top>", "must be a table", data)
    hints = typing.get_type_hints(cls)
    names = [f.name for f in dataclasses.fields(cls)]
    kwargs = {}
    for key, value in data.items():
        dotted = prefix + key
        if key not in names:
            close = difflib.get_close_matches(key, names, n=1)
            hint = f"did you mean '{prefix}{close[0]}'?" if close else "known keys: " + ", ".join(names)
            raise ConfigError(dotted, "is not a known key", value, hint=hint)
        kwargs[key] = _convert(hints[key], value, dotted)
    return cls(**kwargs)


def _convert(tp, value, key: str):
    if dataclasses.is_dataclass(tp):
        return build(tp, value, key + ".")
    if tp is bool:
        if not isinstance(value, bool):
            raise ConfigError(key, "must be true or false", value)
        return value
    if tp is int:
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        if not isinstance(value, int) or isinstance(value, bool):
            raise ConfigError(key, "must be a whole number", value)
        return value
    if tp is float:
        return _number(value, key)
    if tp is str:
        if not isinstance(value, str):
            raise ConfigError(key, "must be a string", value)
        return value
    origin = typing.get_origin(tp)
    args = typing.get_args(tp)
    if origin is tuple and len(args) == 2 and args[1] is Ellipsis:
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise ConfigError(key, "must be a list of names", value)
        return tuple(value)
    if origin is tuple and len(args) == 2:
        # A [min, max] range; a single number v means [v, v].
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            value = [value, value]
        if not isinstance(value, list) or len(value) != 2:
            raise ConfigError(key, "must be [min, max] or a single number", value)
        return tuple(_convert(args[0], v, key) for v in value)
    raise TypeError(f"unsupported field type {tp!r} for {key}")  # a programming error


def _number(value, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(key, "must be a number", value)
    if not math.isfinite(value):
        raise ConfigError(key, "must be a finite number", value)
    return float(value)


# --------------------------------------------------------------------------- TOML and overrides

_KEY = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*$")
_BARE = re.compile(r"^[A-Za-z_][A-Za-z0-9_.+-]*$")


def parse_override(text: str) -> tuple[str, Any]:
    """Parse one ``KEY=VALUE`` override; the value is a TOML value.

    A bare word that is not valid TOML (``background.kind=noise``) is taken as
    a string, so quotes are optional for names.

    Examples
    --------
    >>> parse_override("objects.count=[5, 10]")
    ('objects.count', [5, 10])
    >>> parse_override("background.kind=checker")
    ('background.kind', 'checker')
    """
    key, sep, raw = text.partition("=")
    key = key.strip()
    raw = raw.strip()
    if not sep or not _KEY.match(key):
        raise ConfigError("--set", "must look like KEY=VALUE with a dotted key such as canvas.width=320", text)
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        if _BARE.match(raw) and raw.lower() not in ("nan", "inf", "+inf", "-inf"):
            value = raw
        else:
            raise ConfigError(key, "must be given a TOML value (a number, true/false, \"text\" or [a, b])", raw) from None
    return key, value


def _set_dotted(tree: dict, key: str, value) -> None:
    parts = key.split(".")
    node = tree
    for i, part in enumerate(parts[:-1]):
        child = node.setdefault(part, {})
        if not isinstance(child, dict):
            raise ConfigError(".".join(parts[: i + 1]), "is a value, not a table, so it has no sub-keys", child)
        node = child
    node[parts[-1]] = value


def read_toml(path: Path) -> dict:
    """Read a TOML config file; errors name the file."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputFileError(path, "config file does not exist") from None
    except IsADirectoryError:
        raise InputFileError(path, "is a directory, not a TOML config file") from None
    except OSError as exc:
        raise InputFileError(path, f"cannot be read ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputFileError(path, "is not a UTF-8 text file (expected a TOML config)") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, f"is not valid TOML: {exc}") from None


def load_config(path: Path | None = None, overrides: list[str] | tuple[str, ...] = ()) -> Config:
    """Resolve a run's config: built-in defaults, then the TOML file, then ``--set`` overrides.

    Parameters
    ----------
    path : Path or None
        TOML file; None uses the built-in defaults only.
    overrides : sequence of str
        ``KEY=VALUE`` strings applied in order after the file.

    Examples
    --------
    >>> load_config(overrides=["canvas.width=320", "objects.count=[5, 10]"]).objects.count
    (5, 10)
    """
    tree = read_toml(path) if path is not None else {}
    for text in overrides:
        key, value = parse_override(text)
        _set_dotted(tree, key, value)
    return build(Config, tree)


def to_dict(spec) -> dict:
    """A spec as plain JSON-able data (tuples become lists), e.g. for the manifest."""

    def plain(v):
        if dataclasses.is_dataclass(v):
            return {f.name: plain(getattr(v, f.name)) for f in dataclasses.fields(v)}
        if isinstance(v, tuple):
            return [plain(x) for x in v]
        return v

    return plain(spec)
