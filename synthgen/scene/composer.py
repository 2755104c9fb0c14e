"""One image: sample objects from the config, place them, judge what shows, draw them in z-order, annotate them.

Occlusion is measured on the supersampled coverage (see
:class:`synthgen.scene.shapes.Coverage`): a sub-pixel sample of an object is hidden
when any object drawn later covers the same sample (:mod:`synthgen.scene.occlusion`).
From that come, per object, the visible coverage, the visible fraction and
the pixel box.  The visible box comes from the continuous outlines of the
object and of the drawn objects above it (:func:`synthgen.scene.visible.visible_box`);
box kinds are defined in :mod:`synthgen.geometry`.
The composer first walks the objects from the top down and judges each
against the annotation rules (``objects.min_visible``, ``objects.min_area``):
an object that passes is annotated; one that fails but still shows becomes an
ignore region (:class:`IgnoreRegions`, COCO ``iscrowd`` 1), or with
``objects.dropped = "erase"`` is left out of the picture; one that shows no
sample is hidden and not drawn.  Then it paints what shows, bottom to top, so
every pixel an object changes lies in an annotation or an ignore region.

Randomness: :func:`image_rng` gives image ``k`` its own generator from
``SeedSequence(seed, spawn_key=(k,))``; :func:`compose` spawns one child per
stage (background, objects, clutter, degradation), so changing one stage never
moves the random draws of another.

Difficulty dials handled here (placement itself is in :mod:`synthgen.scene.placement`):

* ``pairs``: the second object of a pair takes the first one's size, aspect
  and rotation (its kind too when the two boxes could not reach the top of
  ``objects.pair_iou`` otherwise); the achieved box IoU is recorded as
  ``pair_iou`` on both, with ``pair_id``.
* ``objects.occlusion``: an occluder (an extra, filled, annotated object
  drawn above every placed object, with a size from ``objects.size``; never a
  ring unless rings are the only kind) is moved along a random direction
  toward its target until the share of the target's sub-pixel samples it
  covers lies in the range (:func:`place_occluder`); one too small to cover
  enough even when centred is enlarged, up to the top of ``objects.size``.
  Target and occluder share an ``occlusion_id``; the target records
  ``occlusion_goal`` and ``occluder_hides`` (the share its own occluder
  covers), the occluder ``occluder: true``; the measured ``visible_fraction``
  counts every object above the target.
* Clutter (:mod:`synthgen.scene.clutter`) is drawn on the background before the
  objects, from its own random stream.
* When a layout cannot place every requested object, the image's
  ``dropped["no_room"]`` counts them (so the manifest totals them); the
  command line prints one warning line for the run when more than a tenth of
  its objects were dropped for any reason.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from synthgen.geometry import half_extents, overlapping_pairs
from synthgen.scene import coverage as coverage_mod
from synthgen.scene import placement as layout_mod
from synthgen.scene import shapes as shapes_mod
from synthgen.scene.annotate import IgnoreRegions, Scene, annotate, assemble
from synthgen.scene.backgrounds import render_background
from synthgen.scene.clutter import render_clutter
from synthgen.scene.degrade import degrade_owned
from synthgen.scene.kinds import category_id, sample_objects
from synthgen.scene.occluders import add_occluders, place_occluder
from synthgen.scene.occlusion import SampleBuffer, patch_bounds, sample_bits_many
from synthgen.scene.raster import LUMA, SMALL_PATCH, paint_objects
from synthgen.scene.shapes import Shape
from synthgen.seeding import STAGES, image_rng

__all__ = [
    "Scene",
    "IgnoreRegions",
    "image_rng",
    "compose",
    "render_scene",
    "compose_shapes",
    "plan_objects",
    "place_occluder",
    "category_id",
    "luminance",
    "LUMA",
]


def luminance(rgb) -> np.ndarray:
    """Luma in [0, 1] of RGB values in [0, 255], shape ``(..., 3)`` -> ``(...)``."""
    return np.asarray(rgb, dtype=np.float64) @ LUMA / 255.0


def render_scene(config, index: int = 0) -> Scene:
    """Compose image ``index`` of the run described by ``config`` (a :class:`synthgen.config.Config`).

    Examples
    --------
    >>> from synthgen.config import load_config
    >>> scene = render_scene(load_config(overrides=["canvas.width=64", "canvas.height=48"]), 3)
    >>> scene.image.shape
    (48, 64, 3)
    """
    return compose(config, rng=image_rng(config.seed, index))


def compose(config, *, rng: np.random.Generator) -> Scene:
    """Compose one scene from ``config`` with the image's generator ``rng``."""
    width, height = config.canvas.width, config.canvas.height
    spec = config.objects
    bg_rng, obj_rng, clutter_rng, deg_rng = rng.spawn(STAGES)

    canvas, bg_info = render_background(config.background, height, width, rng=bg_rng)
    extra_info = {}
    if config.clutter.count[1] > 0:
        canvas, extra_info["clutter"] = render_clutter(
            canvas, config.clutter, spec.shapes, samples=config.render.samples, rng=clutter_rng
        )
    shapes, styles, extras, placement, more = plan_objects(config, rng=obj_rng)
    extra_info.update(more)
    # The canvas was made for this image alone: draw on it and degrade it without
    # the defensive copies the public compose_shapes and degrade make (same pixels).
    scene = _compose_on(_own(canvas), shapes, config, rng=obj_rng, styles=styles, extras=extras)
    image, deg_info = degrade_owned(scene.image, config.degrade, rng=deg_rng)
    no_room = int(placement.info.get("no_room", 0))
    scene.info["dropped"]["no_room"] = no_room
    info = {"background": bg_info, "degradations": deg_info, **scene.info, **extra_info}
    if placement.info:
        info["placement"] = placement.info
    return replace(scene, image=image, info=info)


def plan_objects(config, *, rng: np.random.Generator):
    """Sample the objects of one image and place them (layout, then occluders), without drawing.

    ``rng`` is the objects' stream (the second child :func:`compose` spawns);
    :func:`compose` then draws colours from the same stream.

    Returns
    -------
    shapes : list of Shape
        In draw order (occluders last).
    styles : list of dict
        Paint style per shape.
    extras : list of dict
        Facts each shape's annotation will carry (``pair_id``, ``occlusion_id``, ...).
    placement : synthgen.scene.placement.Placement
    info : dict
        ``{"occlusion": {...}}`` when the occlusion dial is on, else empty.
    """
    spec = config.objects
    width, height = config.canvas.width, config.canvas.height
    shapes, styles = sample_objects(config, rng)
    if spec.layout == "pairs":
        shapes = _pair_geometry(shapes, spec.pair_iou[1])
    if spec.layout in _BOX_LAYOUTS:
        half = _half_extents(shapes)
    else:  # these layouts only count the objects; exact boxes are built once, in place
        half = np.zeros((len(shapes), 2))
    placement = layout_mod.place(spec.layout, half, width, height, spec, rng=rng)
    index = placement.index.tolist()
    extras = [dict(f) for f in placement.facts] if placement.facts else [{} for _ in index]
    centres = placement.centres.tolist()
    shapes = [shapes_mod.moved_to(shapes[i], centres[j][0], centres[j][1]) for j, i in enumerate(index)]
    styles = [styles[i] for i in index]
    info = {}
    if spec.occlusion[1] > 0:
        shapes, styles, extras, info["occlusion"] = add_occluders(shapes, styles, extras, config, rng)
    return shapes, styles, extras, placement, info


def compose_shapes(canvas: np.ndarray, shapes, config, *, rng: np.random.Generator, styles=None, extras=None) -> Scene:
    """Draw given shapes bottom to top on a copy of ``canvas`` and annotate them.

    The building block of :func:`compose`, public so that tests and users can
    place shapes by hand.

    Parameters
    ----------
    canvas : ndarray of shape (H, W, 3), uint8
        Background; not modified.
    shapes : sequence of synthgen.scene.shapes.Shape
        In draw order (first is bottom).
    config : Config
        Uses ``objects`` (annotation rules, contrast) and ``render.samples``.
    rng : numpy.random.Generator
        Draws fill colours.
    styles : sequence of dict or None
        Paint style per shape (``fill``, ``outline``, ``stroke``, ``fill_angle``,
        ``period``); None paints every shape flat.
    extras : sequence of dict or None
        Facts to add to each shape's annotation (e.g. ``pair_id``); a
        ``pair_id`` shared by two shapes makes both record ``pair_iou``, the
        IoU of their exact (clipped) boxes.

    Returns
    -------
    Scene
        No degradations applied; ``info`` holds ``dropped``.
    """
    return _compose_on(np.array(canvas, dtype=np.uint8, copy=True), shapes, config, rng=rng, styles=styles, extras=extras)


def _own(canvas: np.ndarray) -> np.ndarray:
    """``canvas`` itself when it can be drawn on in place as compose_shapes' copy would be, else that copy."""
    if canvas.dtype == np.uint8 and canvas.flags.c_contiguous and canvas.flags.writeable:
        return canvas
    return np.array(canvas, dtype=np.uint8, copy=True)


def _compose_on(image: np.ndarray, shapes, config, *, rng: np.random.Generator, styles=None, extras=None) -> Scene:
    """:func:`compose_shapes` drawing on ``image`` (H, W, 3) uint8 itself, modified in place.

    Occlusion does not depend on colours, so it is settled first, from the top
    object down (:func:`_measure`): which objects are annotated, which show
    but are dropped, which are hidden.  Then the objects that show are painted
    bottom to top (hidden ones have no visible sample and are not painted; with
    ``objects.dropped = "erase"`` neither are dropped ones, and they hide
    nothing below them), and annotated.
    """
    if styles is None:
        styles = [dict(_FLAT) for _ in shapes]
    if extras is None:
        extras = [{} for _ in shapes]
    height, width = image.shape[:2]
    # Candidate fill colours for every object at once, shown or not: (N, 2, 8, 3).
    cands = rng.uniform(0.0, 255.0, size=(len(shapes), 2, 8, 3))
    lums = cands @ LUMA / 255.0  # (N, 2, 8)
    measured = _measure(shapes, styles, extras, config, height, width)
    shown = [d for d in measured if d.shown]
    paint_objects(image, shown, cands, lums, config.objects.min_contrast)
    kept, ignored, info = annotate(measured, len(shapes) - len(measured), config)
    return assemble(image, kept, ignored, info)


_FLAT = {"fill": "flat", "outline": False, "stroke": 0.0, "fill_angle": 0.0, "period": 4.0}


# --------------------------------------------------------------------------- sampling


_BOX_LAYOUTS = frozenset({"separated", "pairs"})


def _half_extents(shapes) -> np.ndarray:
    """Half width and half height (N, 2) of each shape's exact box (geometry built in bulk)."""
    return half_extents(np.array([g.box for g in shapes_mod.shape_geometries(shapes)], dtype=np.float64).reshape(-1, 4))


def _moved(shape: Shape, centre) -> Shape:
    return shapes_mod.moved_to(shape, float(centre[0]), float(centre[1]))


def _pair_geometry(shapes, top_iou: float):
    """Give the second object of each pair the first one's size, aspect and rotation.

    Its kind (and sides, inner ratio) is taken too when the two boxes could not
    otherwise overlap with an IoU of ``top_iou`` (equal boxes reach any IoU).
    """
    out = list(shapes)
    for k in range(len(out) // 2):
        a, b = out[2 * k], out[2 * k + 1]
        b = replace(b, size=a.size, aspect=a.aspect, angle=a.angle)
        ha, hb = _half_extents([a, b])
        if layout_mod.pair_max_iou(ha, hb) < top_iou:
            b = replace(b, kind=a.kind, sides=a.sides, inner=a.inner)
        out[2 * k + 1] = b
    return out


# --------------------------------------------------------------------------- occlusion dial





@dataclass(slots=True)
class _Drawn:
    """One object on the canvas, as measured by :func:`_measure` (coverage only while it is shown)."""

    shape: Shape
    style: dict
    box: np.ndarray  # unclipped exact box (4,)
    extra: dict
    index: int  # position in the list of shapes given (for its candidate colours)
    full_cov: float  # coverage sum, px^2
    vis_cov: float  # visible coverage sum, px^2
    verdict: str | None  # None: annotated; else the rule that dropped it (a key of `dropped`)
    shown: bool  # painted: some sample is visible, and it is not erased
    cov: object = None  # synthgen.scene.shapes.Coverage, kept for shown objects
    visible: np.ndarray | None = None  # visible coverage, float32 (h, w), for shown objects
    sample_box: np.ndarray | None = None  # box of visible samples when occluded
    contrast: float = 0.0
    alone: bool = False  # its patch meets no other object's patch


#: Shapes whose geometry :func:`_measure` holds at once.
_MEASURE_CHUNK = 4096
#: Patch pixels whose coverage :func:`_measure` computes together (bounds the coverage and sample masks held at once).
_MEASURE_PIXELS = 1 << 21
#: ... and at most this many times the canvas: once patches cover the canvas a few times over,
#: the shapes below are mostly hidden, and the next run skips them before computing their coverage.
_MEASURE_DEPTH = 2


def _verdict(full_cov: float, vis_cov: float, spec) -> str | None:
    """The annotation rule an object fails (a reason of ``dropped``), or None when it is annotated."""
    if full_cov <= 0:  # too small to cover any sample: nothing of it is drawn
        return "min_area"
    if vis_cov <= 0:
        return "hidden"
    if vis_cov / full_cov < spec.min_visible:
        return "min_visible"
    if vis_cov < spec.min_area:
        return "min_area"
    return None


def _measure(shapes, styles, extras, config, height: int, width: int) -> list:
    """Visible coverage and verdict of every shape on the canvas, in draw order (one ``_Drawn`` each).

    The objects are walked from the top down against a
    :class:`synthgen.scene.occlusion.SampleBuffer` of the samples covered by the
    objects above.  An object that shows enters the buffer, so it hides what
    lies below it; with ``objects.dropped = "erase"`` a dropped object does
    not (it is not drawn), so an object below it is judged by what is drawn
    above it in the final picture.  An object whose whole patch is covered
    already is hidden without computing its coverage; the others' coverage is
    computed a run of shapes at a time (:func:`_runs`) and dropped as soon as
    an object turns out not to be shown.  So time and memory follow the
    canvas and the objects that show, plus a small cost per object, however
    many end hidden.

    Within a run the objects go in levels (an object's level is one more than
    the highest level of the objects above it whose patches meet its own), so
    the patches of one level never meet and a level's small patches are
    judged together (:meth:`synthgen.scene.occlusion.SampleBuffer.visible_many`).
    """
    spec = config.objects
    s = config.render.samples
    erase = spec.dropped == "erase"
    buffer = SampleBuffer(height, width, s)
    level_map = np.zeros((height, width), dtype=np.int32)
    walked = []
    base = 1
    for stop in range(len(shapes), 0, -_MEASURE_CHUNK):
        chunk = range(stop - 1, max(0, stop - _MEASURE_CHUNK) - 1, -1)  # top first
        geoms = dict(zip(chunk, shapes_mod.shape_geometries([shapes[i] for i in chunk])))  # built in bulk, held per chunk
        patches = {i: patch_bounds(geoms[i].box, height, width) for i in chunk}
        on_canvas = [i for i in chunk if patches[i] is not None]
        clear: tuple = (set(), set())
        if stop == len(shapes) and stop <= _MEASURE_CHUNK:
            # one chunk for the whole image: the patches that meet show what nothing hides or is hidden by
            clear = _clear_sides(on_canvas, patches)
        judged: dict = {}
        for part in _runs(on_canvas, patches, min(_MEASURE_PIXELS, _MEASURE_DEPTH * height * width)):
            base = _walk(part, shapes, styles, patches, geoms, buffer, level_map, base, judged, spec, erase, clear)
        for i in chunk:
            if patches[i] is None:  # off the canvas
                continue
            if i not in judged:
                walked.append(_Drawn(shapes[i], styles[i], geoms[i].box, extras[i], i, 0.0, 0.0, "hidden", False))
                continue
            cov, visible, sample_box, full_cov, vis_cov, verdict, shown = judged[i]
            d = _Drawn(shapes[i], styles[i], geoms[i].box, extras[i], i, full_cov, vis_cov, verdict, shown)
            if shown:
                d.cov, d.visible, d.sample_box, d.alone = cov, visible, sample_box, i in clear[0] and i in clear[1]
            walked.append(d)
    walked.reverse()
    return walked


def _clear_sides(order: list, patches: dict) -> tuple[set, set]:
    """The shapes of ``order`` (top first) whose patch meets no patch above it, and those it meets none below.

    From the pairs of patches that meet (:func:`overlapping_pairs`),
    given up (empty sets, the safe answer) once the pairs outnumber
    :data:`_CONTACT_PAIRS` per patch, so crowded scenes never pay for all their pairs.
    """
    r = np.array([patches[i] for i in order], dtype=np.int64).reshape(-1, 4)
    boxes = r[:, [1, 0, 3, 2]]  # (col0, row0, col1, row1): xyxy of the pixel ranges
    has_below = np.zeros(len(r), dtype=bool)  # pairs (a, b) with a < b: a lies above b
    has_above = np.zeros(len(r), dtype=bool)
    pairs = 0
    for ii, jj in overlapping_pairs(boxes):
        has_below[ii] = True
        has_above[jj] = True
        pairs += ii.size
        if pairs > _CONTACT_PAIRS * len(r):
            return set(), set()
    return ({i for i, v in zip(order, has_above.tolist()) if not v},
            {i for i, v in zip(order, has_below.tolist()) if not v})


#: Pairs of meeting patches per patch up to which :func:`_clear_sides` looks at them.
_CONTACT_PAIRS = 8


def _runs(order: list, patches: dict, budget: int):
    """Consecutive runs of ``order`` whose patches hold at most ``budget`` pixels (one shape at least)."""
    run, pixels = [], 0
    for i in order:
        r0, c0, r1, c1 = patches[i]
        area = (r1 - r0) * (c1 - c0)
        if run and pixels + area > budget:
            yield run
            run, pixels = [], 0
        run.append(i)
        pixels += area
    if run:
        yield run


def _walk(part, shapes, styles, patches, geoms, buffer, level_map, base: int, judged: dict, spec, erase: bool,
          clear: tuple = (frozenset(), frozenset())) -> int:
    """Judge the shapes ``part`` (top first) against ``buffer``; fill ``judged``; return the next free level.

    Shapes whose patch is covered already are left out (hidden); the others'
    coverage is computed together, then they are judged level by level.
    ``clear`` holds the shapes whose patch meets no patch above it (nothing
    can hide them: they are judged from their coverage) and those whose patch
    meets none below (they need not enter the buffer).
    """
    height, width = level_map.shape
    s = buffer.samples
    free_above, free_below = clear
    todo = [i for i in part if i in free_above or not buffer.hides(*patches[i])]
    insides: list = []
    edges: list = []
    covs = coverage_mod.coverage_many(
        [shapes[i] for i in todo], height, width, samples=s, strokes=[styles[i]["stroke"] for i in todo],
        insides=insides, edges=edges, _geometry=[geoms[i] for i in todo],
    )
    covs = dict(zip(todo, covs))
    samples = {i: m if e is None else e for i, m, e in zip(todo, insides, edges)}
    del insides, edges
    for i in todo:
        if i in free_above and i in free_below:  # alone: no occlusion either way
            judged[i] = _judge(covs[i], covs[i].values, None, False, spec, erase)
    todo = [i for i in todo if i not in judged]
    bits = dict(zip(todo, sample_bits_many([covs[i] for i in todo], [samples[i] for i in todo])))
    del samples
    if len(todo) < _BULK_WALK_MIN * 4:  # few shapes: one at a time, top first
        levels = [[i] for i in todo]
    else:
        levels = []
        for i in todo:  # top first: the level map holds the levels of the objects above
            r0, c0, r1, c1 = patches[i]
            view = level_map[r0:r1, c0:c1]
            level = max(int(view.max()) + 1, base)
            view[...] = level
            while len(levels) <= level - base:
                levels.append([])
            levels[level - base].append(i)
    for group in levels:
        small = [i for i in group if covs[i].values.size <= SMALL_PATCH] if len(group) >= _BULK_WALK_MIN else []
        for i in group:
            if not small or covs[i].values.size > SMALL_PATCH:
                if i in free_above:
                    hides, (visible, sample_box) = False, (covs[i].values, None)
                else:
                    hides = buffer.hides(*patches[i])
                    visible, sample_box = (None, None) if hides else buffer.visible(covs[i], bits[i])
                judged[i] = _judge(covs[i], visible, sample_box, hides, spec, erase)
                if judged[i][-1] and i not in free_below:
                    buffer.cover(covs[i], bits[i])
        if small:
            results, hides, pixels = buffer.visible_many([covs[i] for i in small], [bits[i] for i in small])
            for i, (visible, sample_box), hide in zip(small, results, hides.tolist()):
                judged[i] = _judge(covs[i], visible, sample_box, hide, spec, erase)
            buffer.cover_many(pixels, [judged[i][-1] for i in small])
    return base + len(levels)


def _judge(cov, visible, sample_box, hides: bool, spec, erase: bool):
    """``(cov, visible, sample_box, full_cov, vis_cov, verdict, shown)`` of one object under the objects above it.

    ``hides``: every sample of its patch was covered already (then ``visible``
    is not looked at and the object is hidden).
    """
    if hides:
        return cov, None, None, 0.0, 0.0, "hidden", False
    full_cov = float(cov.values.sum())
    vis_cov = full_cov if visible is cov.values else float(visible.sum())
    verdict = _verdict(full_cov, vis_cov, spec)
    return cov, visible, sample_box, full_cov, vis_cov, verdict, vis_cov > 0 and (verdict is None or not erase)


#: From this many objects in a level, :func:`_measure` judges their small patches together.
_BULK_WALK_MIN = 8
