"""One image: sample objects from the config, place them, draw them in z-order, measure them.

The composer draws objects bottom to top.  Occlusion is measured on the
supersampled coverage (see :class:`synthgen.shapes.Coverage`): a sub-pixel
sample of an object is hidden when any object drawn later covers the same
sample.  From that come, per object, the visible coverage, the visible
fraction, the visible box and the pixel box (box kinds are defined in
:mod:`synthgen.geometry`).

Randomness: :func:`image_rng` gives image ``k`` its own generator from
``SeedSequence(seed, spawn_key=(k,))``; :func:`compose` spawns one child per
stage (background, objects, clutter, degradation), so changing one stage never
moves the random draws of another.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from synthgen import layout as layout_mod
from synthgen.backgrounds import render_background
from synthgen.degrade import degrade
from synthgen.geometry import clip_boxes, mask_box, pairwise_iou
from synthgen.shapes import KINDS, Shape, coverage, exact_box, paint

__all__ = [
    "Scene",
    "image_rng",
    "compose",
    "render_scene",
    "compose_shapes",
    "visible_box",
    "category_id",
    "luminance",
    "LUMA",
]

#: Rec. 601 luma weights for R, G, B (common practice for perceived brightness).
LUMA = np.array([0.299, 0.587, 0.114])

#: Number of child generators :func:`compose` spawns (background, objects, clutter, degradation).
STAGES = 4


def category_id(kind: str) -> int:
    """Stable COCO category id of a shape kind: its 1-based place in :data:`synthgen.shapes.KINDS`."""
    return KINDS.index(kind) + 1


def luminance(rgb) -> np.ndarray:
    """Luma in [0, 1] of RGB values in [0, 255], shape ``(..., 3)`` -> ``(...)``."""
    return np.asarray(rgb, dtype=np.float64) @ LUMA / 255.0


@dataclass(frozen=True, slots=True)
class Scene:
    """A composed image and its exact annotations.

    Attributes
    ----------
    image : ndarray of shape (H, W, 3), uint8
    boxes : ndarray of shape (N, 4), float64
        Annotated boxes, xyxy (visible boxes, or full boxes with
        ``objects.box = "full"``).
    categories : ndarray of shape (N,), int64
        COCO category ids (:func:`category_id`).
    areas : ndarray of shape (N,), float64
        Coverage-weighted visible area of each object, square pixels.
    facts : tuple of dict
        Per-object facts, JSON-able (see the README's table of facts).
    masks : tuple of (row0, col0, ndarray of bool (h, w))
        Support (coverage > 0) of each object's visible coverage, as a patch
        whose top-left pixel is ``(row0, col0)``; its tight box is the pixel box.
    info : dict
        Image-level facts: background, degradations, dropped objects by reason.
    """

    image: np.ndarray
    boxes: np.ndarray
    categories: np.ndarray
    areas: np.ndarray
    facts: tuple
    masks: tuple
    info: dict = field(default_factory=dict)


def image_rng(seed: int, index: int) -> np.random.Generator:
    """The generator of image ``index`` of a run with root ``seed``.

    ``SeedSequence(seed, spawn_key=(index,))`` makes every image's stream
    independent of the others, so image ``k`` can be rebuilt alone and results
    do not depend on worker count or order.
    """
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(index,))))


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
    bg_rng, obj_rng, _clutter_rng, deg_rng = rng.spawn(STAGES)

    canvas, bg_info = render_background(config.background, height, width, rng=bg_rng)
    shapes, styles = _sample_objects(config, obj_rng)
    placement = layout_mod.place(
        config.objects.layout, _half_extents(shapes), width, height, config.objects, rng=obj_rng
    )
    shapes = [_moved(shapes[i], placement.centres[j]) for j, i in enumerate(placement.index)]
    styles = [styles[i] for i in placement.index]

    scene = compose_shapes(canvas, shapes, config, rng=obj_rng, styles=styles)
    image, deg_info = degrade(scene.image, config.degrade, rng=deg_rng)
    info = {"background": bg_info, "degradations": deg_info, **scene.info}
    if placement.info:
        info["placement"] = placement.info
    return replace(scene, image=image, info=info)


def compose_shapes(canvas: np.ndarray, shapes, config, *, rng: np.random.Generator, styles=None) -> Scene:
    """Draw given shapes bottom to top on a copy of ``canvas`` and annotate them.

    The building block of :func:`compose`, public so that tests and users can
    place shapes by hand.

    Parameters
    ----------
    canvas : ndarray of shape (H, W, 3), uint8
        Background; not modified.
    shapes : sequence of synthgen.shapes.Shape
        In draw order (first is bottom).
    config : Config
        Uses ``objects`` (annotation rules, contrast) and ``render.samples``.
    rng : numpy.random.Generator
        Draws fill colours.
    styles : sequence of dict or None
        Paint style per shape (``fill``, ``outline``, ``stroke``, ``fill_angle``,
        ``period``); None paints every shape flat.

    Returns
    -------
    Scene
        No degradations applied; ``info`` holds ``dropped``.
    """
    image = np.array(canvas, dtype=np.uint8, copy=True)
    if styles is None:
        styles = [dict(_FLAT) for _ in shapes]
    drawn = _draw(image, shapes, styles, config, rng)
    _measure_occlusion(drawn)
    kept, dropped = _annotate(drawn, len(shapes) - len(drawn), config)
    return _assemble(image, kept, {"dropped": dropped})


_FLAT = {"fill": "flat", "outline": False, "stroke": 0.0, "fill_angle": 0.0, "period": 4.0}


# --------------------------------------------------------------------------- sampling


def _sample_objects(config, rng: np.random.Generator):
    """Draw each object's shape parameters and paint style, all centred at the origin."""
    spec = config.objects
    n = int(rng.integers(spec.count[0], spec.count[1] + 1))
    kinds = rng.choice(len(spec.shapes), size=n)
    lo, hi = spec.size
    if spec.size_law == "log-uniform":
        sizes = np.exp(rng.uniform(np.log(lo), np.log(hi), size=n))
    else:
        sizes = rng.uniform(lo, hi, size=n)
    aspects = np.exp(rng.uniform(np.log(spec.aspect[0]), np.log(spec.aspect[1]), size=n))
    angles = rng.uniform(0.0, 360.0, size=n) if spec.rotate else np.zeros(n)
    sides = rng.integers(spec.sides[0], spec.sides[1] + 1, size=n)
    inner = rng.uniform(spec.inner[0], spec.inner[1], size=n)
    fills = rng.choice(len(spec.fills), size=n)
    outline = rng.random(size=n) < spec.outline
    strokes = rng.uniform(spec.stroke[0], spec.stroke[1], size=n)
    fill_angles = rng.uniform(0.0, 180.0, size=n)
    periods = rng.uniform(2.0, 8.0, size=n)
    shapes, styles = [], []
    for i in range(n):
        kind = spec.shapes[kinds[i]]
        shapes.append(
            Shape(
                kind=kind,
                cx=0.0,
                cy=0.0,
                size=float(sizes[i]),
                aspect=float(aspects[i]),
                angle=float(angles[i]),
                sides=int(sides[i]),
                inner=float(inner[i]),
            )
        )
        is_outline = bool(outline[i])
        styles.append(
            {
                "fill": "flat" if is_outline else spec.fills[fills[i]],
                "outline": is_outline,
                "stroke": float(min(strokes[i], max(sizes[i] / 4.0, 0.5))) if is_outline else 0.0,
                "fill_angle": float(fill_angles[i]),
                "period": float(max(periods[i], sizes[i] / 8.0)),
            }
        )
    return shapes, styles


def _half_extents(shapes) -> np.ndarray:
    out = np.empty((len(shapes), 2), dtype=np.float64)
    for i, s in enumerate(shapes):
        box = exact_box(s)
        out[i] = ((box[2] - box[0]) / 2.0, (box[3] - box[1]) / 2.0)
    return out


def _moved(shape: Shape, centre) -> Shape:
    return replace(shape, cx=float(centre[0]), cy=float(centre[1]))


# --------------------------------------------------------------------------- drawing


@dataclass(slots=True)
class _Drawn:
    shape: Shape
    style: dict
    cov: object  # synthgen.shapes.Coverage
    box: np.ndarray  # unclipped exact box (4,)
    contrast: float
    visible: np.ndarray | None = None  # visible coverage, float32 (h, w)
    sample_box: np.ndarray | None = None  # box of visible samples when occluded


def _pick_colours(under_lum: float, min_contrast: float, k: int, rng: np.random.Generator):
    """``k`` fill colours (k, 3) whose luma differs from ``under_lum`` by at least ``min_contrast``.

    Draws a fixed number of candidates (so the stream does not depend on the
    background); when none qualifies, the best is shifted in brightness toward
    the side with more room.  Returns the colours and the smallest achieved
    contrast.
    """
    cands = rng.uniform(0.0, 255.0, size=(k, 8, 3))
    lum = cands @ LUMA / 255.0  # (k, 8)
    contrast = np.abs(lum - under_lum)
    colours = np.empty((k, 3))
    achieved = np.empty(k)
    for t in range(k):
        ok = np.flatnonzero(contrast[t] >= min_contrast)
        if ok.size:
            colours[t] = cands[t, ok[0]]
        else:
            c = cands[t, int(np.argmax(contrast[t]))]
            target = under_lum + min_contrast if under_lum <= 0.5 else under_lum - min_contrast
            target = min(max(target, 0.0), 1.0)
            colours[t] = np.clip(c + (target - float(c @ LUMA / 255.0)) * 255.0, 0.0, 255.0)
        achieved[t] = abs(float(colours[t] @ LUMA / 255.0) - under_lum)
    return colours, float(achieved.min())


def _draw(canvas: np.ndarray, shapes, styles, config, rng: np.random.Generator) -> list:
    """Draw shapes bottom to top onto ``canvas`` (modified in place); return what was drawn."""
    height, width = canvas.shape[:2]
    samples = config.render.samples
    min_contrast = config.objects.min_contrast
    drawn = []
    for shape, style in zip(shapes, styles):
        cov = coverage(shape, height, width, samples=samples, stroke=style["stroke"])
        # Colours are drawn for every object, drawn or not, to keep the stream aligned.
        n_col = 1 if style["fill"] == "flat" else 2
        if cov is None:
            rng.uniform(size=(n_col, 8, 3))
            continue
        v = cov.values
        h, w = v.shape
        rows = slice(cov.row0, cov.row0 + h)
        cols = slice(cov.col0, cov.col0 + w)
        patch = canvas[rows, cols].astype(np.float32)
        total = float(v.sum())
        if total > 0:
            under = [float((patch[..., ch] * v).sum()) / total for ch in range(3)]
            under_lum = float(luminance(under))
        else:
            under_lum = 0.5
        colours, contrast = _pick_colours(under_lum, min_contrast, n_col, rng)
        if n_col == 1:
            colours = np.vstack([colours, colours])
        fill = paint(
            style["fill"], colours, h, w, row0=cov.row0, col0=cov.col0,
            angle=style["fill_angle"], period=style["period"],
        )
        for ch in range(3):
            plane = patch[..., ch]
            plane += (fill[..., ch] - plane) * v
        np.rint(patch, out=patch)
        canvas[rows, cols] = patch.astype(np.uint8)
        drawn.append(_Drawn(shape=shape, style=style, cov=cov, box=exact_box(shape), contrast=contrast))
    return drawn


def _patch_rects(drawn) -> np.ndarray:
    """Pixel rectangles of the coverage patches as boxes (N, 4) (col0, row0, col1, row1)."""
    rects = np.zeros((len(drawn), 4), dtype=np.float64)
    for i, d in enumerate(drawn):
        h, w = d.cov.values.shape
        rects[i] = (d.cov.col0, d.cov.row0, d.cov.col0 + w, d.cov.row0 + h)
    return rects


def _measure_occlusion(drawn) -> None:
    """Fill in each drawn object's visible coverage from the samples of the objects above it."""
    from synthgen.geometry import box_intersection

    if not drawn:
        return
    rects = _patch_rects(drawn)
    overlaps = box_intersection(rects, rects) > 0  # (N, N)
    np.fill_diagonal(overlaps, False)
    for i, d in enumerate(drawn):
        above = np.flatnonzero(overlaps[i, i + 1 :]) + i + 1
        if above.size == 0:
            d.visible = d.cov.values
            continue
        c0, r0, c1, r1 = rects[i]
        inter = rects[above].copy()
        inter[:, 0] = np.maximum(inter[:, 0], c0)
        inter[:, 1] = np.maximum(inter[:, 1], r0)
        inter[:, 2] = np.minimum(inter[:, 2], c1)
        inter[:, 3] = np.minimum(inter[:, 3], r1)
        rc0, rr0 = int(inter[:, 0].min()), int(inter[:, 1].min())
        rc1, rr1 = int(inter[:, 2].max()), int(inter[:, 3].max())
        s = d.cov.samples
        own = d.cov.inside(rr0, rc0, rr1, rc1)
        occ = np.zeros_like(own)
        for j, (a0, b0, a1, b1) in zip(above, inter.astype(int)):
            occ[(b0 - rr0) * s : (b1 - rr0) * s, (a0 - rc0) * s : (a1 - rc0) * s] |= drawn[j].cov.inside(b0, a0, b1, a1)
        hidden = own & occ
        if not hidden.any():
            d.visible = d.cov.values
            continue
        hh, ww = rr1 - rr0, rc1 - rc0
        lost = hidden.reshape(hh, s, ww, s).sum(axis=(1, 3), dtype=np.int64).astype(np.float32) / (s * s)
        vis = d.cov.values.copy()
        pr, pc = rr0 - d.cov.row0, rc0 - d.cov.col0
        vis[pr : pr + hh, pc : pc + ww] -= lost
        np.clip(vis, 0.0, 1.0, out=vis)
        d.visible = vis
        h, w = d.cov.values.shape
        full = d.cov.inside(d.cov.row0, d.cov.col0, d.cov.row0 + h, d.cov.col0 + w)
        full[pr * s : (pr + hh) * s, pc * s : (pc + ww) * s] &= ~occ
        d.sample_box = mask_box(full, origin=(d.cov.col0, d.cov.row0), scale=1.0 / s)


def visible_box(exact: np.ndarray, sample_box: np.ndarray | None) -> np.ndarray | None:
    """The visible box: the exact (clipped) box, tightened to the visible samples when occluded.

    Parameters
    ----------
    exact : ndarray of shape (4,)
        Exact box clipped to the canvas.
    sample_box : ndarray of shape (4,) or None
        Tight box of the visible sub-pixel sample cells; None when nothing hides
        the object.

    Returns
    -------
    ndarray of shape (4,) or None (when nothing is visible)
    """
    if sample_box is None:
        return exact.copy()
    out = np.concatenate([np.maximum(exact[:2], sample_box[:2]), np.minimum(exact[2:], sample_box[2:])])
    if out[2] <= out[0] or out[3] <= out[1]:
        return None
    return out


def _annotate(drawn, outside: int, config):
    """Per-object facts for the objects that pass the annotation rules; counts of the rest."""
    width, height = config.canvas.width, config.canvas.height
    spec = config.objects
    dropped = {"outside": outside, "hidden": 0, "min_visible": 0, "min_area": 0}
    kept = []
    for z, d in enumerate(drawn):
        full_cov = float(d.cov.values.sum())
        vis_cov = float(d.visible.sum())
        fraction = vis_cov / full_cov if full_cov > 0 else 0.0
        full_box = clip_boxes(d.box, width, height)[0]
        vbox = visible_box(full_box, d.sample_box) if vis_cov > 0 else None
        support = d.visible > 0
        pbox = mask_box(support, origin=(d.cov.col0, d.cov.row0))
        if full_cov <= 0:  # too small to cover any sample
            dropped["min_area"] += 1
            continue
        if vbox is None or pbox is None or vis_cov <= 0:
            dropped["hidden"] += 1
            continue
        if fraction < spec.min_visible:
            dropped["min_visible"] += 1
            continue
        if vis_cov < spec.min_area:
            dropped["min_area"] += 1
            continue
        b = d.box
        truncated = bool(b[0] < 0 or b[1] < 0 or b[2] > width or b[3] > height)
        facts = {
            "kind": d.shape.kind,
            "z": z,
            "full_box": full_box.tolist(),
            "visible_box": vbox.tolist(),
            "pixel_box": pbox.tolist(),
            "size": float(max(b[2] - b[0], b[3] - b[1])),
            "aspect": d.shape.aspect,
            "rotation": d.shape.angle,
            "visible_fraction": min(fraction, 1.0),
            "truncated": truncated,
            "contrast": d.contrast,
            "fill": d.style["fill"],
            "outline": d.style["outline"],
        }
        box = vbox if spec.box == "visible" else full_box
        kept.append((box, vis_cov, facts, (d.cov.row0, d.cov.col0, support)))
    return kept, dropped


def _assemble(image, kept, info) -> Scene:
    n = len(kept)
    boxes = np.array([k[0] for k in kept], dtype=np.float64).reshape(n, 4)
    iou = pairwise_iou(boxes, boxes)  # (N, N)
    np.fill_diagonal(iou, 0.0)
    for i, k in enumerate(kept):
        k[2]["max_iou"] = float(iou[i].max()) if n > 1 else 0.0
        k[2]["neighbours"] = int((iou[i] > 0).sum())
    return Scene(
        image=image,
        boxes=boxes,
        categories=np.array([category_id(k[2]["kind"]) for k in kept], dtype=np.int64),
        areas=np.array([k[1] for k in kept], dtype=np.float64),
        facts=tuple(k[2] for k in kept),
        masks=tuple(k[3] for k in kept),
        info=info,
    )
