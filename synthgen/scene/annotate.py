"""What a composed image annotates: kept objects, ignore regions, drop reasons, and each object's facts.

After the composer has measured every drawn object (its coverage, what hides it),
:func:`annotate` decides which are annotated, which become ignore regions and why
the others were dropped, and :func:`assemble` builds the :class:`Scene` with each
object's boxes (:mod:`synthgen.geometry` states the box conventions), masks and
facts (the table of facts is :mod:`synthgen.scene.facts`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from synthgen.geometry import box_iou, box_relations, clip_boxes, mask_box, overlapping_pairs
from synthgen.scene.kinds import category_id, identifiable
from synthgen.scene.shapes import (
    clipped_box,
    natural_aspect,
)
from synthgen.scene.visible import visible_boxes

__all__ = ["IgnoreRegions", "Scene", "annotate", "assemble"]


@dataclass(frozen=True, slots=True)
class IgnoreRegions:
    """Objects drawn with visible pixels that the annotation rules dropped: regions a detector is not scored on.

    They become COCO annotations with ``iscrowd: 1`` (see the README's table of
    what is annotated).  Same conventions as the fields of :class:`Scene`, but
    that ``boxes`` are pixel boxes (the boxes of the masks; exact boxes with
    ``objects.box = "full"``) and the facts hold no ``visible_box``; each
    fact dict also says ``ignored``: the rule that dropped the object
    (``"min_visible"`` or ``"min_area"``).
    """

    boxes: np.ndarray = field(default_factory=lambda: np.zeros((0, 4)))
    categories: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    areas: np.ndarray = field(default_factory=lambda: np.zeros(0))
    facts: tuple = ()
    masks: tuple = ()


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
        Image-level facts: background, degradations, ``dropped`` (objects not
        annotated, by reason) and ``ignored`` (how many of those are ignore
        regions, by reason).
    ignored : IgnoreRegions
        Dropped objects that still show (``objects.dropped = "ignore"``).
    """

    image: np.ndarray
    boxes: np.ndarray
    categories: np.ndarray
    areas: np.ndarray
    facts: tuple
    masks: tuple
    info: dict = field(default_factory=dict)
    ignored: IgnoreRegions = field(default_factory=IgnoreRegions)


def _full_boxes(drawn, width: int, height: int) -> np.ndarray:
    """Exact boxes (N, 4) of ``drawn`` clipped to the canvas: for a shape cut by the border, the tight box of its part on the canvas."""
    raw = np.array([d.box for d in drawn], dtype=np.float64).reshape(-1, 4)
    full = clip_boxes(raw, width, height)
    cut = (raw[:, 0] < 0) | (raw[:, 1] < 0) | (raw[:, 2] > width) | (raw[:, 3] > height)
    for z in np.flatnonzero(cut).tolist():
        # the tight box of the part on the canvas, which for a rotated shape can be smaller than its full box clipped
        part = clipped_box(drawn[z].shape, height, width)
        if part is not None:
            full[z] = part
    return full


#: Reasons an object is dropped; those that can leave visible pixels become ignore regions.
_DROP_REASONS = ("outside", "hidden", "min_visible", "min_area")
_IGNORABLE = ("min_visible", "min_area")


def annotate(measured, outside: int, config):
    """Annotations of the objects that pass the rules and ignore regions of the shown rest; counts of the drops.

    Returns ``(kept, ignored, info)``: lists of ``(box, area, facts, mask)`` in
    draw order, and ``{"dropped": {reason: n}, "ignored": {reason: n}}``.
    """
    width, height = config.canvas.width, config.canvas.height
    spec = config.objects
    dropped = dict.fromkeys(_DROP_REASONS, 0)
    dropped["outside"] = outside
    ignored_counts = dict.fromkeys(_IGNORABLE, 0)
    for d in measured:
        if d.verdict is not None:
            dropped[d.verdict] += 1
            if d.shown:
                ignored_counts[d.verdict] += 1
    zs = [z for z, d in enumerate(measured) if d.shown]
    shown = [measured[z] for z in zs]
    full_boxes = _full_boxes(shown, width, height)
    pair_iou = _pair_ious(measured, width, height)
    supports, pboxes = _supports_and_pixel_boxes(shown)
    raw = np.array([d.box for d in shown]).reshape(-1, 4)
    sizes = np.maximum(raw[:, 2] - raw[:, 0], raw[:, 3] - raw[:, 1]).tolist()
    cut = ((raw[:, 0] < 0) | (raw[:, 1] < 0) | (raw[:, 2] > width) | (raw[:, 3] > height)).tolist()
    full_lists = full_boxes.tolist()
    box_visible = spec.box == "visible"
    vboxes = _visible_boxes(shown, full_boxes, pboxes, config)
    kept, ignored = [], []
    for t, (z, d) in enumerate(zip(zs, shown)):
        full_list = full_lists[t]
        pbox = pboxes[t]  # never None: a shown object has a visible sample
        vbox = vboxes[t]
        shape = d.shape
        facts = {
            "kind": shape.kind,
            "z": z,
            "full_box": full_list,
            "visible_box": vbox,
            "pixel_box": pbox,
            "size": sizes[t],
            "aspect": shape.aspect / natural_aspect(shape.kind, shape.sides, shape.inner),
            "rotation": shape.angle,
            "visible_fraction": min(d.vis_cov / d.full_cov, 1.0),
            "truncated": cut[t],
            "contrast": d.contrast,
            "fill": d.style["fill"],
            "outline": d.style["outline"],
            "identifiable": identifiable(shape, d.style["stroke"]),
            **d.extra,
        }
        if "pair_id" in d.extra and d.extra["pair_id"] in pair_iou:
            facts["pair_iou"] = pair_iou[d.extra["pair_id"]]
        # The mask patch is cropped to the pixel box (less to run-length encode).
        c0, r0, c1, r1 = int(pbox[0]), int(pbox[1]), int(pbox[2]), int(pbox[3])
        pr, pc = r0 - d.cov.row0, c0 - d.cov.col0
        mask = (r0, c0, supports[t][pr : pr + r1 - r0, pc : pc + c1 - c0])
        if d.verdict is None:
            kept.append((vbox if box_visible else full_list, d.vis_cov, facts, mask))
        else:
            # An ignore region stands for pixels that show: its box is the box of its segmentation
            # (the pixel box), which holds every pixel it changed.  Its geometric visible box would
            # cost several times an object's (most of it lies under many shapes) and is not recorded.
            del facts["visible_box"]
            facts["ignored"] = d.verdict
            ignored.append((pbox if box_visible else full_list, d.vis_cov, facts, mask))
    return kept, ignored, {"dropped": dropped, "ignored": ignored_counts}


def _visible_boxes(shown, full_boxes: np.ndarray, pboxes: list, config) -> list:
    """Visible box (list of 4 floats) of each annotated object of ``shown``; None for ignore regions.

    An object that nothing drawn above overlaps (exact boxes) shows its exact
    box; the others get the box from the geometry
    (:func:`synthgen.scene.visible.visible_boxes`, all at once), against the drawn
    objects above whose exact boxes meet theirs, starting from the box of
    their visible samples.
    """
    height, width = config.canvas.height, config.canvas.width
    above = _drawn_above(full_boxes)
    out: list = [None] * len(shown)
    todo, items = [], []
    for t, d in enumerate(shown):
        if d.verdict is not None:  # an ignore region: the box of its segmentation (see annotate)
            continue
        ups = above.get(t)
        if ups is None:  # nothing drawn above meets its exact box: the visible box is the exact box
            out[t] = full_boxes[t].tolist()
            continue
        ups = [(shown[u].shape, shown[u].style["stroke"]) for u in ups]
        todo.append(t)
        inside = _centres_box(d.sample_box, config.render.samples)
        items.append((d.shape, d.style["stroke"], ups, full_boxes[t], inside))
    for t, got in zip(todo, visible_boxes(items, height, width)):
        # None only when the geometry leaves no area where some sample still showed (floating
        # point at a shared edge): the pixel box within the exact box stands in
        out[t] = got.tolist() if got is not None else _within_box(pboxes[t], full_boxes[t].tolist())
    return out


def _drawn_above(boxes: np.ndarray) -> dict:
    """For each drawn object, the later drawn objects whose exact boxes overlap its own.

    ``boxes`` (N, 4) are the exact (clipped) boxes of the objects painted, in
    draw order; the result maps a position to the ascending positions above it
    (positions with nothing above are left out).  Built from the pairs of
    overlapping boxes (:func:`overlapping_pairs`), so the work follows
    the number of such pairs, not N^2.  Objects that are not painted (hidden,
    erased) are not in ``boxes``: they hide nothing.
    """
    blocks = list(overlapping_pairs(boxes))
    lo = np.concatenate([b[0] for b in blocks] or [np.zeros(0, dtype=np.int64)])
    hi = np.concatenate([b[1] for b in blocks] or [np.zeros(0, dtype=np.int64)])
    if lo.size == 0:
        return {}
    order = np.lexsort((hi, lo))
    lo, hi = lo[order], hi[order]
    starts = np.flatnonzero(np.r_[True, lo[1:] != lo[:-1]])
    return dict(zip(lo[starts].tolist(), (part.tolist() for part in np.split(hi, starts[1:]))))


def _centres_box(cells: np.ndarray | None, samples: int) -> np.ndarray | None:
    """Box of the centres of the sample cells whose tight box is ``cells`` (None passes through).

    The visible samples of an object are points in view, so this box lies
    inside its visible box (:func:`synthgen.scene.visible.visible_box`, ``inside``).
    """
    if cells is None:
        return None
    half = 0.5 / samples
    return cells + np.array([half, half, -half, -half])


def _within_box(box: list, bound: list) -> list:
    """``box`` (x0, y0, x1, y1) cut to ``bound``, or ``bound`` itself when they do not overlap."""
    out = [max(box[0], bound[0]), max(box[1], bound[1]), min(box[2], bound[2]), min(box[3], bound[3])]
    return out if out[0] < out[2] and out[1] < out[3] else list(bound)


def _supports_and_pixel_boxes(drawn):
    """Support (visible coverage > 0) and pixel box (list of 4 floats, or None) of each drawn object.

    The same boxes as :func:`synthgen.geometry.mask_box` on each support with
    the patch's origin, found for all patches of one size in one array pass.
    """
    n = len(drawn)
    supports: list = [None] * n
    pboxes: list = [None] * n
    by_size: dict = {}
    for z, d in enumerate(drawn):
        by_size.setdefault(d.visible.shape, []).append(z)
    for (h, w), zs in by_size.items():
        if h * w > _BULK_SUPPORT_PIXELS or len(zs) == 1:
            for z in zs:
                d = drawn[z]
                support = d.visible > 0
                supports[z] = support
                box = mask_box(support, origin=(d.cov.col0, d.cov.row0))
                pboxes[z] = None if box is None else box.tolist()
            continue
        sup = np.stack([drawn[z].visible for z in zs]) > 0  # (K, h, w)
        rows = sup.any(axis=2)  # (K, h)
        cols = sup.any(axis=1)  # (K, w)
        has = rows.any(axis=1).tolist()
        r0 = rows.argmax(axis=1).tolist()
        r1 = (h - rows[:, ::-1].argmax(axis=1)).tolist()
        c0 = cols.argmax(axis=1).tolist()
        c1 = (w - cols[:, ::-1].argmax(axis=1)).tolist()
        for k, z in enumerate(zs):
            supports[z] = sup[k]
            if has[k]:
                d = drawn[z]
                x0, y0 = d.cov.col0, d.cov.row0
                pboxes[z] = [float(x0 + c0[k]), float(y0 + r0[k]), float(x0 + c1[k]), float(y0 + r1[k])]
    return supports, pboxes


#: Patches up to this many pixels get their support and pixel box in bulk.
_BULK_SUPPORT_PIXELS = 1024


def _pair_ious(measured, width: int, height: int) -> dict:
    """IoU of the exact (clipped) boxes of each pair of objects on the canvas, by ``pair_id``."""
    members: dict = {}
    for d in measured:
        if "pair_id" in d.extra:
            members.setdefault(d.extra["pair_id"], []).append(d)
    pairs = [(pid, ds) for pid, ds in members.items() if len(ds) == 2]
    if not pairs:
        return {}
    full = _full_boxes([d for _, ds in pairs for d in ds], width, height)  # (2 P, 4)
    ious = box_iou(full[0::2], full[1::2])  # (P,)
    return {pid: float(v) for (pid, _), v in zip(pairs, ious.tolist())}


def _regions(items) -> tuple:
    """Boxes (N, 4), category ids, areas, facts and masks of ``(box, area, facts, mask)`` items."""
    n = len(items)
    return (
        np.array([k[0] for k in items], dtype=np.float64).reshape(n, 4),
        np.array([category_id(k[2]["kind"]) for k in items], dtype=np.int64),
        np.array([k[1] for k in items], dtype=np.float64),
        tuple(k[2] for k in items),
        tuple(k[3] for k in items),
    )


def assemble(image, kept, ignored, info) -> Scene:
    boxes, categories, areas, facts, masks = _regions(kept)
    best, count = box_relations(boxes)
    for i, f in enumerate(facts):
        f["max_iou"] = float(best[i])
        f["neighbours"] = int(count[i])
    return Scene(image=image, boxes=boxes, categories=categories, areas=areas, facts=facts, masks=masks, info=info,
                 ignored=IgnoreRegions(*_regions(ignored)))
