"""The run schema: frozen spec dataclasses, built-in defaults, TOML loading and overrides.

Every key has a built-in default, so an empty config is a valid config.  A
section's spec lives beside the code that reads it (:class:`BackgroundSpec` in
:mod:`synthgen.backgrounds`, :class:`DegradeSpec` in :mod:`synthgen.degrade`);
this module assembles them into one :class:`Config` and is the only place that
turns user text into specs.  Validation happens once, here, at the boundary:
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
from synthgen.scene.backgrounds import BackgroundSpec
from synthgen.scene.degrade import DegradeSpec
from synthgen.scene.kinds import CROSS_BAR, POINTS, RING_HOLE, SIDES, STAR_INNER, check_parameters
from synthgen.scene.shapes import FILLS, KINDS

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
    Layout keys (see :mod:`synthgen.layout`): ``max_iou`` and ``attempts``
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
    sides: tuple[int, int] = SIDES  # polygon sides; these five keep the kinds apart (synthgen.kinds)
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
