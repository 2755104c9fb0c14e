"""Contact sheets: a dataset's images in a grid with their boxes, predictions and enlarged crops.

Contact sheets
--------------
:func:`contact_sheet` lays out images of a COCO dataset in a grid, each with its
annotated boxes on top, the image id under each tile, a legend, optionally
predictions (dashed, coloured by what each one is) and enlarged crops of small
objects (:data:`ZOOM_PICKS`: the smallest, a spread of sizes, or the smallest missed).  It returns a :class:`Sheet`: the ``(H, W, 3)`` uint8 pixels
and where each tile sits; :func:`save_png` writes the pixels.  How boxes are drawn and coloured is told
in :mod:`synthgen.report.draw`.

Prediction kinds
~~~~~~~~~~~~~~~~
A prediction is one of :data:`PREDICTION_KINDS`.  With a truth sidecar written
by ``synthgen jitter`` the kind is read from it (:func:`read_truth_sidecar`);
otherwise :func:`classify_predictions` decides by COCO's greedy match at IoU 0.5 (the matcher of
:mod:`synthgen.evaluate`).

Ignore regions (annotations with ``iscrowd`` 1) are drawn solid in grey, not
in their category's colour, and are left out of the object counts, the zoom
crops and the statistics (:mod:`synthgen.report.stats`).
"""

from __future__ import annotations

import io
import math
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from synthgen._io import write_atomic
from synthgen.errors import InputFileError, UserError
from synthgen.evaluate.classify import Predictions, classify_predictions, truth_arrays
from synthgen.evaluate.classify import read_prediction_boxes as read_predictions
from synthgen.formats.results import PREDICTION_KINDS, TruthSidecar, read_truth_sidecar
from synthgen.geometry import box_area, box_longer_side
from synthgen.report.dataset import Dataset, load_image
from synthgen.report.draw import (
    CATEGORY_COLOURS,
    DASH,
    PREDICTION_COLOURS,
    category_colour,
    draw_boxes,
    outline_outside_small,
)

__all__ = [
    "PREDICTION_KINDS",
    "Predictions",
    "read_predictions",
    "read_truth_sidecar",
    "TruthSidecar",
    "classify_predictions",
    "auto_scale",
    "Placement",
    "Sheet",
    "contact_sheet",
    "ZOOM_PICKS",
    "save_png",
]


_KIND_LABELS = {
    "true_positive": "true positive",
    "duplicate": "duplicate",
    "localization": "localization error",
    "wrong_class": "wrong class",
    "background": "background",
    "ignored": "on an ignore region",
}

_SHEET_BG = (30, 32, 36)
_TEXT = (225, 228, 232)
_MUTED = (150, 155, 162)
_OUTSIDE = (12, 12, 14)  # beyond the image's border in a zoom crop
_MAX_WIDTH = 4096  # px: default sheets are shrunk to this width at most


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


# --------------------------------------------------------------------------- the sheet


def _font(size: int):
    from PIL import ImageFont

    try:
        return ImageFont.load_default(size=size)
    except (TypeError, OSError, ImportError):  # Pillow without FreeType: the fixed bitmap font
        return ImageFont.load_default()


def _text_width(draw, text: str, font) -> int:
    x0, _, x1, _ = draw.textbbox((0, 0), text, font=font)
    return int(x1 - x0)


def _fit(draw, text: str, font, width: int) -> str:
    """``text`` cut with an ellipsis to fit ``width`` pixels."""
    if _text_width(draw, text, font) <= width:
        return text
    while text and _text_width(draw, text + "…", font) > width:
        text = text[:-1]
    return text + "…"


def auto_scale(width: int, height: int) -> float:
    """Default tile scale: small images enlarged by a whole factor, large ones shrunk.

    With ``side = max(width, 4/3 * height)``: below 480 px the image is
    enlarged by the largest whole factor (at most 8) that keeps ``side`` at most
    720 px (pixel repetition, so pixels stay square and sharp and a 1-pixel
    object is not hidden by its own outline); above 1024 px it is shrunk to
    1024; otherwise it is shown at scale 1.

    Examples
    --------
    >>> auto_scale(320, 240), auto_scale(640, 480), auto_scale(2048, 1536)
    (2.0, 1.0, 0.5)
    """
    side = max(width, height * 4 / 3)
    if side < 480:
        return float(max(1, min(8, int(720 // side))))
    if side > 1024:
        return 1024 / side
    return 1.0


def _scaled(image: np.ndarray, scale: float) -> tuple[np.ndarray, float, float]:
    """The image at ``scale``: whole factors by pixel repetition, others by area averaging."""
    h, w = image.shape[:2]
    if scale == 1:
        return image, 1.0, 1.0
    if float(scale).is_integer() and scale > 1:
        k = int(scale)
        return np.repeat(np.repeat(image, k, axis=0), k, axis=1), float(k), float(k)
    from PIL import Image

    nw, nh = max(1, round(w * scale)), max(1, round(h * scale))
    resample = Image.Resampling.BOX if scale < 1 else Image.Resampling.NEAREST
    small = np.asarray(Image.fromarray(image).resize((nw, nh), resample))
    return small, nw / w, nh / h


def _select_images(coco: Mapping, n: int, ids: Sequence[int] | None) -> list[dict]:
    images = list(coco.get("images", []))
    if ids is None:
        return sorted(images, key=lambda im: im["id"])[:n]
    by_id = {im["id"]: im for im in images}
    unknown = [i for i in ids if i not in by_id]
    if unknown:
        known = sorted(by_id)
        span = f"{known[0]}..{known[-1]}" if known else "none"
        raise UserError(f"option '--ids': image id {unknown[0]} is not in the dataset (ids: {span})")
    return [by_id[i] for i in ids]


@dataclass(frozen=True, slots=True)
class Placement:
    """Where an image (or an enlarged crop) sits on a sheet and how it is mapped.

    A point ``(x, y)`` of the image lands on sheet pixel column
    ``left + (x - ox) * sx`` and row ``top + (y - oy) * sy``.

    Attributes
    ----------
    image_id : int
        COCO image id.
    left, top, width, height : int
        The tile's rectangle on the sheet, in sheet pixels.
    sx, sy : float
        Sheet pixels per image pixel.
    ox, oy : float
        Image coordinates of the tile's top-left corner (0 for whole images).
    annotation : int or None
        For a zoom crop, the index (file order) of the annotation it shows.
    """

    image_id: int
    left: int
    top: int
    width: int
    height: int
    sx: float
    sy: float
    ox: float = 0.0
    oy: float = 0.0
    annotation: int | None = None


@dataclass(frozen=True, slots=True)
class Sheet:
    """A contact sheet and where each tile is on it.

    Attributes
    ----------
    pixels : ndarray of shape (H, W, 3), uint8
    tiles : tuple of Placement
        One per image shown, in grid order.
    crops : tuple of Placement
        One per zoom crop (empty without ``zoom``).
    """

    pixels: np.ndarray
    tiles: tuple[Placement, ...]
    crops: tuple[Placement, ...] = ()


@dataclass(frozen=True, slots=True)
class _Overlay:
    """Everything drawn over the images: truth boxes by category, predictions by kind."""

    boxes: np.ndarray  # (N, 4) truth, xyxy
    image_id: np.ndarray  # (N,)
    category_id: np.ndarray  # (N,)
    crowd: np.ndarray  # (N,) bool: an ignore region (iscrowd 1)
    colours: np.ndarray  # (N, 3) uint8
    area: np.ndarray  # (N,) the annotation's area, or its box's where it has none
    category_names: dict
    predictions: Predictions | None
    pred_colours: np.ndarray | None  # (P, 3) uint8
    missed: np.ndarray | None  # (N,) bool: no prediction found this object (None: not known)

    @classmethod
    def build(cls, coco: Mapping, predictions: Predictions | None, missed=None) -> _Overlay:
        boxes, img, cat, crowd, anns = truth_arrays(coco)
        cats = sorted(coco.get("categories", []), key=lambda c: c["id"])
        order = {c["id"]: i for i, c in enumerate(cats)}
        colours = np.array([_MUTED if is_crowd else category_colour(order.get(int(c), len(order)))
                            for c, is_crowd in zip(cat, crowd)], dtype=np.uint8)
        areas = box_area(boxes)
        area = np.array([float(a["area"]) if _num(a.get("area")) and a["area"] > 0 else b
                         for a, b in zip(anns, areas)])
        pred_colours = None
        if predictions is not None:
            pred_colours = np.array([PREDICTION_COLOURS.get(k, _MUTED) for k in predictions.kind], dtype=np.uint8)
        missed_flags = None
        if missed is not None:
            missed_flags = np.array([a.get("id") in missed for a in anns], dtype=bool)
        return cls(
            boxes, img, cat, crowd, colours.reshape(-1, 3), area, {c["id"]: c["name"] for c in cats},
            predictions, None if pred_colours is None else pred_colours.reshape(-1, 3), missed_flags,
        )

    def for_image(self, image_id: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Boxes (K, 4), colours (K, 3) and dashed flags (K,) of one image: truth first, then predictions."""
        sel = self.image_id == image_id
        boxes, colours, dashed = self.boxes[sel], self.colours[sel], np.zeros(int(sel.sum()), dtype=bool)
        if self.predictions is not None:
            psel = self.predictions.image_id == image_id
            boxes = np.concatenate([boxes, self.predictions.boxes[psel]])
            colours = np.concatenate([colours, self.pred_colours[psel]])
            dashed = np.r_[dashed, np.ones(int(psel.sum()), dtype=bool)]
        return boxes, colours, dashed


@dataclass(frozen=True, slots=True)
class _Tile:
    image_id: int
    pixels: np.ndarray  # (h, w, 3) with boxes drawn
    caption: str
    sx: float
    sy: float


def _render_tile(ds: Dataset, image: Mapping, overlay: _Overlay, scale: float, show_factor: bool,
                 small: float = 12.0) -> _Tile:
    """One image at ``scale`` with its boxes drawn (outside where smaller than ``small`` tile px), and its caption."""
    pix, sx, sy = _scaled(load_image(ds, image), scale)
    image_id = int(image["id"])
    boxes, colours, dashed = overlay.for_image(image_id)
    boxes = outline_outside_small(boxes, sx, sy, small)
    here = overlay.image_id == image_id
    n_obj = int(np.count_nonzero(here & ~overlay.crowd))
    caption = f"id {image_id} · {n_obj} object{'s' if n_obj != 1 else ''}"
    n_ignored = int(np.count_nonzero(here & overlay.crowd))
    if n_ignored:
        caption += f" · {n_ignored} ignored"
    if show_factor and scale != 1:
        caption += f" · x{scale:g}" if scale > 1 else f" · x{scale:.2f}"
    p = overlay.predictions
    if p is not None:
        kinds = Counter(k for k, i in zip(p.kind, p.image_id) if i == image_id)
        caption += f" · {sum(kinds.values())} pred, {kinds.get('true_positive', 0)} TP"
        if overlay.missed is not None:
            caption += f", {int(np.count_nonzero(overlay.missed[overlay.image_id == image_id]))} missed"
    return _Tile(image_id, draw_boxes(pix, boxes, colours, sx=sx, sy=sy, dashed=dashed), caption, sx, sy)


#: Side of a zoom crop on the sheet, px.
_ZOOM_SIDE = 128


def _zoom_limit(side: int) -> float:
    """Longest object side (px) that still gets a x2 enlargement in a ``side``-pixel crop."""
    return side / 6


def _zoom_factor(longer, side: int):
    """Whole enlargement in [2, 32] that makes an object about a third of the crop."""
    return np.clip(side // np.maximum(3.0 * np.asarray(longer, dtype=float), 1.0), 2, 32).astype(int)


def _enlarged_crop(img: np.ndarray, centre: tuple[float, float], z: int, side: int) -> tuple[np.ndarray, float, float]:
    """A ``side`` x ``side`` crop of ``img`` enlarged ``z`` times (nearest neighbour), centred on ``centre``.

    Image pixels stay whole ``z`` x ``z`` blocks; the window may start inside a
    block so that the centre lands in the middle.  Outside the image is
    :data:`_OUTSIDE`.  Returns the crop and the image coordinates ``(ox, oy)``
    of its top-left corner, so a point ``x`` lands on column ``(x - ox) * z``.
    """
    h, w = img.shape[:2]
    X0 = round(centre[0] * z - side / 2)  # crop origin in the enlarged image, px
    Y0 = round(centre[1] * z - side / 2)
    c0, r0 = X0 // z, Y0 // z  # first image column / row in the crop
    n_c = math.ceil((side + X0 - c0 * z) / z) + 1
    n_r = math.ceil((side + Y0 - r0 * z) / z) + 1
    patch = np.empty((n_r, n_c, 3), dtype=np.uint8)
    patch[:] = _OUTSIDE
    a0, b0, a1, b1 = max(c0, 0), max(r0, 0), min(c0 + n_c, w), min(r0 + n_r, h)
    if a1 > a0 and b1 > b0:
        patch[b0 - r0 : b1 - r0, a0 - c0 : a1 - c0] = img[b0:b1, a0:a1]
    big = np.repeat(np.repeat(patch, z, axis=0), z, axis=1)
    big = big[Y0 - r0 * z : Y0 - r0 * z + side, X0 - c0 * z : X0 - c0 * z + side]
    return big, X0 / z, Y0 / z


#: How the zoom strip chooses its objects among those an enlargement helps.
ZOOM_PICKS = ("smallest", "spread", "missed")

#: What the zoom strip's label calls the objects of each pick.
_ZOOM_PICK_TEXT = {"smallest": "smallest objects", "spread": "objects spread over sizes, smallest first",
                   "missed": "smallest missed objects"}


def _zoom_order(area: np.ndarray, helps: np.ndarray, missed, pick: str, count: int) -> np.ndarray:
    """Indices (into the candidates) of the objects the zoom strip shows, in the order shown.

    ``smallest``: by area, smallest first; ``spread``: ``count`` objects evenly
    spaced in area rank from the smallest to the largest that still gets
    enlarged; ``missed``: the smallest objects no prediction found.

    Examples
    --------
    >>> _zoom_order(np.array([5., 1., 9., 3., 7.]), np.ones(5, bool), None, "spread", 3).tolist()
    [1, 0, 2]
    """
    order = np.argsort(area, kind="stable")
    order = order[helps[order]]
    if pick == "missed":
        order = order[np.asarray(missed, dtype=bool)[order]] if missed is not None else order[:0]
    if pick == "spread" and len(order) > count > 0:
        order = order[np.unique(np.round(np.linspace(0, len(order) - 1, count)).astype(int))]
    return order[:count]


def _zoom_crops(ds: Dataset, chosen, overlay: _Overlay, tile_scales: dict, count: int, side: int = _ZOOM_SIDE,
                pick: str = "smallest"):
    """Enlarged crops of chosen objects of the shown images (:func:`_zoom_order`).

    Returns a list of (pixels, line 1, line 2, Placement).
    """
    ids = [int(im["id"]) for im in chosen]
    sel = np.flatnonzero(np.isin(overlay.image_id, ids) & ~overlay.crowd)
    if sel.size == 0 or count <= 0:
        return []
    b = overlay.boxes[sel]
    longer = box_longer_side(b)
    # only objects an enlargement helps: at least x2, and more than their tile already shows
    tile_scale = np.array([tile_scales.get(int(g), 1.0) for g in overlay.image_id[sel]])
    helps = (longer <= _zoom_limit(side)) & (_zoom_factor(longer, side) > tile_scale)
    missed = None if overlay.missed is None else overlay.missed[sel]
    pick = sel[_zoom_order(overlay.area[sel], helps, missed, pick, count)]
    by_id = {int(im["id"]): im for im in chosen}
    cache: dict[int, np.ndarray] = {}
    out = []
    for i in pick:
        image_id = int(overlay.image_id[i])
        if image_id not in cache:
            cache[image_id] = load_image(ds, by_id[image_id])
        x0, y0, x1, y1 = overlay.boxes[i]
        z = int(_zoom_factor(max(x1 - x0, y1 - y0), side))
        big, ox, oy = _enlarged_crop(cache[image_id], ((x0 + x1) / 2, (y0 + y1) / 2), z, side)
        boxes, colours, dashed = overlay.for_image(image_id)
        big = draw_boxes(big, boxes, colours, sx=z, ox=ox, oy=oy, dashed=dashed)
        cat = int(overlay.category_id[i])
        name = overlay.category_names.get(cat, str(cat))
        where = Placement(image_id, 0, 0, side, side, float(z), float(z), ox, oy, int(i))
        out.append((big, f"id {image_id} · {name}", f"{x1 - x0:.1f} x {y1 - y0:.1f} px · x{z}", where))
    return out


@dataclass(frozen=True, slots=True)
class _Fonts:
    px: int
    text: object
    small: object
    title: object

    @classmethod
    def for_width(cls, tile_w: int) -> _Fonts:
        px = 14 if tile_w >= 240 else 12
        return cls(px, _font(px), _font(px - 1), _font(px + 3))


def _legend_rows(draw, label: str, items, fonts: _Fonts, left: int, right: int):
    """Place legend items (name, rgb, dashed) after ``label``, wrapping at ``right``: (placed, height)."""
    if not items:
        return [], 0
    indent = left + _text_width(draw, label, fonts.text) + 10
    placed, x, y = [], indent, 0
    for name, rgb, dashed in items:
        w = 26 + _text_width(draw, name, fonts.text) + 16
        if x + w > right and x > indent:
            x, y = indent, y + fonts.px + 8
        placed.append((x, y, name, rgb, dashed))
        x += w
    return placed, y + fonts.px + 8


def _draw_legend(draw, label: str, placed, top: int, left: int, fonts: _Fonts) -> None:
    draw.text((left, top), label, fill=_MUTED, font=fonts.text)
    for x, y, name, rgb, dashed in placed:
        yy = top + y + fonts.px // 2 + 1
        for k in range(20):  # a line sample, dashed like the boxes it stands for
            if not dashed or (k % sum(DASH)) < DASH[0]:
                draw.rectangle([x + k, yy - 1, x + k, yy + 1], fill=tuple(int(v) for v in rgb))
        draw.text((x + 26, top + y), name, fill=_TEXT, font=fonts.text)


def _tile_scales(chosen: list, scale: float | None, cols: int) -> tuple[dict, bool]:
    """Each image's :func:`auto_scale` (shrunk to keep a wide grid within _MAX_WIDTH), and whether they differ."""
    auto = {int(im["id"]): auto_scale(im["width"], im["height"]) for im in chosen}
    if scale is None:  # a wide grid of large images is shrunk to keep the sheet within _MAX_WIDTH
        widest = max(auto[int(im["id"])] * im["width"] for im in chosen)
        fit = (_MAX_WIDTH - 24 - 10 * (cols - 1)) / (cols * widest)
        if fit < 1:
            auto = {k: v * fit for k, v in auto.items()}
    mixed = scale is None and len(set(auto.values())) > 1
    return auto, mixed


def _legend_items(ds: Dataset, overlay: _Overlay, predictions: Predictions | None, shown_ids):
    """The legend's labels and items: the categories present in the shown images, then the prediction kinds present."""
    cats = sorted(ds.coco.get("categories", []), key=lambda c: c["id"])
    shown = np.isin(overlay.image_id, list(shown_ids))
    present = set(overlay.category_id[shown & ~overlay.crowd].tolist())
    cat_items = [(c["name"], category_colour(i), False) for i, c in enumerate(cats) if c["id"] in present]
    if (shown & overlay.crowd).any():
        cat_items.append(("ignore region", _MUTED, False))
    truth_label = "truth (solid):" if predictions is not None else "categories:"
    if len(cats) > len(CATEGORY_COLOURS):
        truth_label = truth_label[:-1] + f" (colours repeat after {len(CATEGORY_COLOURS)}):"
    pred_label, pred_items = "predictions (dashed):", []
    if predictions is not None:
        kinds = set(predictions.kind)
        pred_items = [(_KIND_LABELS[k], PREDICTION_COLOURS[k], True) for k in PREDICTION_KINDS if k in kinds]
        if kinds - set(PREDICTION_KINDS):
            pred_items.append(("unclassified", _MUTED, True))
    return truth_label, cat_items, pred_label, pred_items


def _draw_crops(sheet, draw, crops: list, one_image: bool, layout: tuple, sheet_w: int, fonts: _Fonts,
                pick: str = "smallest") -> list:
    """Draw the zoom section's label (naming the objects ``pick`` chose) and its crops; returns their placements.

    ``layout`` is ``(pad, y0, gap, title_h, zoom_cap, zoom_cols)``: the sheet's margin, the section's top,
    the gap between crops, the label's height, a crop's caption height, and crops per row.
    """
    from PIL import Image

    pad, y0, gap, title_h, zoom_cap, zoom_cols = layout
    placed_crops = []
    limit = f"{_zoom_limit(_ZOOM_SIDE):.0f}"
    if crops:
        these = "this image" if one_image else "these images"
        label = (f"the {len(crops)} {_ZOOM_PICK_TEXT[pick]} (by area; longer side up to {limit} px) in {these}, "
                 "enlarged with nearest neighbour")
    else:
        these = "this image" if one_image else "these images"
        label = f"no object in {these} is small enough to enlarge (longer side up to {limit} px)"
    draw.text((pad, y0), _fit(draw, label, fonts.text, sheet_w - 2 * pad), fill=_MUTED, font=fonts.text)
    for i, (pix, line1, line2, where) in enumerate(crops):
        r, c = divmod(i, zoom_cols)
        x = pad + c * (_ZOOM_SIDE + gap)
        y = y0 + title_h + r * (_ZOOM_SIDE + zoom_cap + gap)
        sheet.paste(Image.fromarray(pix), (x, y))
        placed_crops.append(Placement(where.image_id, x, y, where.width, where.height, where.sx, where.sy,
                                      where.ox, where.oy, where.annotation))
        draw.text((x, y + _ZOOM_SIDE + 2), _fit(draw, line1, fonts.small, _ZOOM_SIDE),
                  fill=_TEXT, font=fonts.small)
        draw.text((x, y + _ZOOM_SIDE + fonts.px + 2), _fit(draw, line2, fonts.small, _ZOOM_SIDE),
                  fill=_MUTED, font=fonts.small)
    return placed_crops


def _draw_header(draw, ds: Dataset, tiles: list, mixed: bool, legends: tuple, layout: tuple, fonts: _Fonts) -> None:
    """The sheet's title and its two legends (``legends``: truth label, rows, prediction label, rows, truth height)."""
    truth_label, legend1, pred_label, legend2, h1 = legends
    pad, title_h, sheet_w = layout
    total = len(ds.coco.get("images", []))
    title = f"{ds.name} · {len(tiles)} of {total} image{'s' if total != 1 else ''}"
    if not mixed and tiles[0].sx != 1:
        title += f" · shown at x{tiles[0].sx:g}" if tiles[0].sx > 1 else f" · shown at x{tiles[0].sx:.2f}"
    draw.text((pad, pad), _fit(draw, title, fonts.title, sheet_w - 2 * pad), fill=_TEXT, font=fonts.title)
    if legend1:
        _draw_legend(draw, truth_label, legend1, pad + title_h, pad, fonts)
    else:
        these = "this image" if len(tiles) == 1 else "these images"
        draw.text((pad, pad + title_h), f"no annotated objects in {these}", fill=_MUTED, font=fonts.text)
    if legend2:
        _draw_legend(draw, pred_label, legend2, pad + title_h + h1, pad, fonts)


def _paste_tiles(sheet, draw, tiles: list, cols: int, layout: tuple, fonts: _Fonts) -> list:
    """Paste the tiles in a grid with their captions; returns their placements."""
    from PIL import Image

    pad, gap, header_h, tile_w, tile_h, cap_h = layout
    placed_tiles = []
    for i, t in enumerate(tiles):
        r, c = divmod(i, cols)
        x, y = pad + c * (tile_w + gap), header_h + r * (tile_h + cap_h + gap)
        sheet.paste(Image.fromarray(t.pixels), (x, y))
        h, w = t.pixels.shape[:2]
        placed_tiles.append(Placement(t.image_id, x, y, w, h, t.sx, t.sy))
        draw.text((x, y + h + 3), _fit(draw, t.caption, fonts.text, tile_w), fill=_TEXT, font=fonts.text)
    return placed_tiles


def _legends(ds: Dataset, overlay, predictions, auto, fonts, pad: int, sheet_w: int):
    """The header's legend rows, ``(truth_label, rows1, pred_label, rows2, h1)``, and ``h2``, px.

    The categories present in the shown images, then the prediction kinds present.
    """
    from PIL import Image, ImageDraw

    probe = ImageDraw.Draw(Image.new("RGB", (8, 8)))
    truth_label, cat_items, pred_label, pred_items = _legend_items(ds, overlay, predictions, auto)
    legend1, h1 = _legend_rows(probe, truth_label, cat_items, fonts, pad, sheet_w - pad)
    legend2, h2 = _legend_rows(probe, pred_label, pred_items, fonts, pad, sheet_w - pad)
    h1 = h1 or fonts.px + 8  # room for "no annotated objects"
    return (truth_label, legend1, pred_label, legend2, h1), h2


def _zoom_strip(ds: Dataset, chosen, overlay, tiles, zoom_count, layout, fonts, pick: str = "smallest"):
    """The zoom strip's crops, crops per row, caption height and total height, px."""
    pad, gap, title_h, sheet_w = layout
    zoom_cols = max(1, (sheet_w - 2 * pad + gap) // (_ZOOM_SIDE + gap))
    scales = {t.image_id: t.sx for t in tiles}
    crops = _zoom_crops(ds, chosen, overlay, scales, zoom_count if zoom_count is not None else 2 * zoom_cols,
                        pick=pick)
    zoom_cap = 2 * fonts.px + 6
    return crops, zoom_cols, zoom_cap, title_h + math.ceil(len(crops) / zoom_cols) * (_ZOOM_SIDE + zoom_cap + gap)


def _check_zoom_pick(zoom: bool, pick: str, missed) -> None:
    """Refuse a zoom pick before any image is drawn."""
    if not zoom:
        return
    if pick not in ZOOM_PICKS:
        raise UserError(f"zoom pick must be one of {', '.join(ZOOM_PICKS)} (got {pick!r})")
    if pick == "missed" and missed is None:
        raise UserError("zoom pick 'missed' needs predictions (--pred) to know which objects were missed")


def contact_sheet(
    ds: Dataset,
    *,
    n: int = 16,
    ids: Sequence[int] | None = None,
    cols: int | None = None,
    scale: float | None = None,
    predictions: Predictions | None = None,
    missed=None,
    zoom: bool = False,
    zoom_count: int | None = None,
    zoom_pick: str = "smallest",
    small_outline: float = 12.0,
) -> Sheet:
    """A grid of a dataset's images with their boxes drawn on top.

    Parameters
    ----------
    ds : Dataset
    n, ids : int, sequence of int (optional)
        The first ``n`` images by image id, or these COCO image ids in this order.
    cols : int, optional
        Tiles per row (default: about the square root of the number of images).
    scale : float, optional
        Tile pixels per image pixel (default: each image's :func:`auto_scale`, in the captions, shrunk
        when the grid would be wider than 4096 px); boxes drawn as :func:`outline_pixels` says.
    predictions : Predictions, optional
        Drawn dashed over the truth, coloured by ``kind`` (:data:`PREDICTION_COLOURS`).
    missed : collection of int, optional
        Annotation ids no prediction found; each caption then counts its image's.
    zoom, zoom_count, zoom_pick : bool, int (default two rows), str
        Add a strip of ``zoom_count`` small objects (longer side up to 21 px), each enlarged by a
        whole factor (2 to 32) to about a third of its 128-pixel crop; :data:`ZOOM_PICKS` says which.
    small_outline : float
        Boxes under this many tile pixels are outlined just outside (:func:`outline_outside_small`),
        so a tiny object is not hidden under its own outline; 0 keeps every outline inside.

    Returns
    -------
    Sheet
        The pixels and where each tile and crop is.

    Raises
    ------
    synthgen.errors.UserError
        An id not in the dataset, no images, or an image file missing or unreadable.
    """
    from PIL import Image, ImageDraw

    chosen = _select_images(ds.coco, n, ids)
    if not chosen:
        raise InputFileError(ds.source, "has no images to show")
    _check_zoom_pick(zoom, zoom_pick, missed)
    overlay = _Overlay.build(ds.coco, predictions, missed)
    cols = min(cols or max(1, math.ceil(math.sqrt(len(chosen)))), len(chosen))
    auto, mixed = _tile_scales(chosen, scale, cols)
    tiles = [_render_tile(ds, im, overlay, auto[int(im["id"])] if scale is None else scale, mixed, small_outline)
             for im in chosen]
    rows = math.ceil(len(tiles) / cols)
    tile_w = max(t.pixels.shape[1] for t in tiles)
    tile_h = max(t.pixels.shape[0] for t in tiles)
    fonts = _Fonts.for_width(tile_w)
    pad, gap, cap_h, title_h = 12, 10, fonts.px + 8, fonts.px + 13
    sheet_w = max(pad * 2 + cols * tile_w + (cols - 1) * gap, 520)

    legends, h2 = _legends(ds, overlay, predictions, auto, fonts, pad, sheet_w)
    header_h = pad + title_h + legends[4] + h2 + 6
    crops, zoom_cols, zoom_cap, zoom_h = [], 1, 0, 0
    if zoom:
        crops, zoom_cols, zoom_cap, zoom_h = _zoom_strip(ds, chosen, overlay, tiles, zoom_count,
                                                         (pad, gap, title_h, sheet_w), fonts, zoom_pick)

    grid_h = rows * (tile_h + cap_h) + (rows - 1) * gap
    sheet = Image.new("RGB", (sheet_w, header_h + grid_h + (gap + zoom_h if zoom else 0) + pad), _SHEET_BG)
    draw = ImageDraw.Draw(sheet)
    _draw_header(draw, ds, tiles, mixed, legends, (pad, title_h, sheet_w), fonts)
    placed_tiles = _paste_tiles(sheet, draw, tiles, cols, (pad, gap, header_h, tile_w, tile_h, cap_h), fonts)
    crop_layout = (pad, header_h + grid_h + gap, gap, title_h, zoom_cap, zoom_cols)
    placed_crops = _draw_crops(sheet, draw, crops, len(tiles) == 1, crop_layout, sheet_w, fonts, zoom_pick) if zoom else []
    return Sheet(np.asarray(sheet), tuple(placed_tiles), tuple(placed_crops))


# --------------------------------------------------------------------------- saving


def save_png(image: np.ndarray, path, *, optimize: bool = False) -> None:
    """Write an ``(H, W, 3)`` uint8 array as a PNG, atomically.

    ``optimize`` makes Pillow search for the smallest encoding: about 10%
    smaller and 7x slower on a 16-image sheet (measured: 1.40 MB in 2.6 s
    against 1.54 MB in 0.37 s), so it is off by default.
    """
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.asarray(image, dtype=np.uint8)).save(buf, format="PNG", optimize=optimize)
    write_atomic(path, buf.getvalue())
