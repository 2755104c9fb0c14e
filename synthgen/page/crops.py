"""Failures you can see: crops around the worst misses and the worst false positives.

A crop is a square window of the image around one object or prediction,
embedded as a small PNG of the image's own pixels inside an ``<svg>`` that
draws the boxes as vectors: truth solid, predictions dashed and coloured by
kind.  The page shows every crop at the same size, so a tiny object's window
(at least :data:`MIN_WINDOW` image pixels across) is enlarged several times,
pixels kept square (``image-rendering: pixelated``), and the object is
visible beside its box rather than under it.  Box coordinates are synthgen's
xyxy in image pixels (:mod:`synthgen.geometry`); the ``viewBox`` is the
window, so they are written unchanged.

Which failures are worst:

* misses: objects no true positive found, largest area first (a large object
  missed is the most telling);
* false positives: duplicates, localization errors, wrong classes and
  background boxes, highest score first (the detector was surest of them).
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from synthgen.formats.coco import xyxy_from_bbox
from synthgen.geometry import pairwise_iou
from synthgen.report.dataset import load_image  # the one reader of a dataset's image, with its error messages

__all__ = ["KIND_COLOURS", "TRUTH_COLOUR", "MIN_WINDOW", "Crop", "worst_failures", "crop_svg"]

#: Dashed outline colour of a prediction by kind (hex), shown on images of any brightness over a dark halo.
KIND_COLOURS = {
    "true_positive": "#ffffff",
    "duplicate": "#ff9600",
    "localization": "#00aaff",
    "wrong_class": "#ff2878",
    "background": "#b48cff",
    "ignored": "#b9b9b9",
}
#: Solid outline colour of the ground truth.
TRUTH_COLOUR = "#ffe14d"
#: Smallest window side, image pixels: a 1 or 2 px object is shown some 20 times enlarged.
MIN_WINDOW = 10
#: Width at which the page shows a crop, CSS px (about; the grid may stretch it a little).
SHOWN_PX = 200
#: Largest side of a crop's embedded pixels; larger windows are shrunk by area averaging (the page
#: shows crops about 200 px wide, so more pixels would add bytes, not detail).
MAX_CROP_PX = 200
_CONTEXT = 3.0  # window side in object sides

_FP_KINDS = ("duplicate", "localization", "wrong_class", "background")


@dataclass(frozen=True, slots=True)
class Crop:
    """One failure to show.

    Attributes
    ----------
    subset : str
    image_id : int
    what : str
        ``"missed"`` or a prediction kind.
    window : tuple of int
        ``(x0, y0, x1, y1)`` image pixels shown.
    pixels : ndarray of shape (h, w, 3), uint8
        The window's pixels.
    truth, preds : list of (xyxy tuple, label)
        Boxes inside or crossing the window; ``preds`` labels are kinds.
    focus : tuple of float
        The xyxy of the object or prediction the crop is about.
    caption : str
    """

    subset: str
    image_id: int
    what: str
    window: tuple
    pixels: np.ndarray
    truth: list
    preds: list
    focus: tuple
    caption: str


def _window(box, width: int, height: int) -> tuple[int, int, int, int]:
    """A square window of whole pixels around ``box``, inside the image where it fits."""
    x0, y0, x1, y1 = box
    side = int(np.ceil(max(x1 - x0, y1 - y0) * _CONTEXT))
    side = min(max(side, MIN_WINDOW), max(width, height))
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    left = int(np.clip(round(cx - side / 2), 0, max(width - side, 0)))
    top = int(np.clip(round(cy - side / 2), 0, max(height - side, 0)))
    return left, top, min(left + side, width), min(top + side, height)


def _fact_text(ann: Mapping) -> str:
    facts = ann.get("synthgen") if isinstance(ann.get("synthgen"), Mapping) else {}
    parts = []
    if isinstance(facts.get("size"), (int, float)):
        parts.append(f"size {facts['size']:.1f} px")
    if isinstance(facts.get("visible_fraction"), (int, float)):
        parts.append(f"visible {facts['visible_fraction']:.2f}")
    if isinstance(facts.get("max_iou"), (int, float)) and facts["max_iou"] > 0:
        parts.append(f"overlap IoU {facts['max_iou']:.2f}")
    if isinstance(facts.get("contrast"), (int, float)):
        parts.append(f"contrast {facts['contrast']:.2f}")
    return " · ".join(parts)


def _ranked(subset, count: int):
    """(kind, annotation index or prediction index) of the worst misses, then the worst false positives."""
    coco, cl = subset.dataset.coco, subset.errors.classified
    anns = coco.get("annotations", [])
    unfound = [g for g, a in enumerate(anns) if not a.get("iscrowd", 0) and g not in cl.found]
    unfound.sort(key=lambda g: -float(anns[g]["bbox"][2]) * float(anns[g]["bbox"][3]))
    fps = [i for i, k in enumerate(cl.kinds) if k in _FP_KINDS]
    fps.sort(key=lambda i: -float(subset.predictions[i].get("score", 1.0)))
    return [("missed", g) for g in unfound[:count]], [(cl.kinds[i], i) for i in fps[:count]]


def worst_failures(subset, count: int = 6) -> tuple[list[Crop], list[Crop]]:
    """Crops of the ``count`` worst misses and ``count`` worst false positives of a subset."""
    coco = subset.dataset.coco
    anns = coco.get("annotations", [])
    names = {c["id"]: c["name"] for c in coco.get("categories", [])}
    images = {im["id"]: im for im in coco.get("images", [])}
    gt_xyxy = xyxy_from_bbox([a["bbox"] for a in anns]).reshape(-1, 4) if anns else np.zeros((0, 4))
    preds = subset.predictions
    p_xyxy = xyxy_from_bbox([p["bbox"] for p in preds]).reshape(-1, 4) if preds else np.zeros((0, 4))
    kinds = subset.errors.classified.kinds
    cache: dict[int, np.ndarray] = {}
    misses, fps = _ranked(subset, count)
    out: tuple[list[Crop], list[Crop]] = ([], [])
    for group, items in enumerate((misses, fps)):
        for what, idx in items:
            if what == "missed":
                image_id, focus = anns[idx]["image_id"], gt_xyxy[idx]
            else:
                image_id, focus = preds[idx]["image_id"], p_xyxy[idx]
            if image_id not in cache:
                cache[image_id] = load_image(subset.dataset, images[image_id])
            img = cache[image_id]
            win = _window(focus, img.shape[1], img.shape[0])
            g_sel = [g for g, a in enumerate(anns) if a["image_id"] == image_id]
            p_sel = [i for i, p in enumerate(preds) if p["image_id"] == image_id]
            truth = [(tuple(gt_xyxy[g]), "ignore region" if anns[g].get("iscrowd") else
                      names.get(anns[g]["category_id"], str(anns[g]["category_id"]))) for g in g_sel]
            shown = [(tuple(p_xyxy[i]), kinds[i]) for i in p_sel if _crosses(p_xyxy[i], win)]
            caption = _caption(what, idx, image_id, anns, preds, names, gt_xyxy, p_xyxy, kinds)
            pix = _at_most(img[win[1]:win[3], win[0]:win[2]], MAX_CROP_PX)
            out[group].append(Crop(subset.name, int(image_id), what, win, pix, truth, shown, tuple(focus), caption))
    return out


def _at_most(pixels: np.ndarray, side: int) -> np.ndarray:
    """``pixels`` shrunk by area averaging so that neither side exceeds ``side`` (unchanged if it fits)."""
    h, w = pixels.shape[:2]
    if max(h, w) <= side:
        return pixels
    from PIL import Image

    k = side / max(h, w)
    small = Image.fromarray(np.ascontiguousarray(pixels)).resize((max(1, round(w * k)), max(1, round(h * k))),
                                                                 Image.Resampling.BOX)
    return np.asarray(small)


def _crosses(box, win) -> bool:
    return box[0] < win[2] and box[2] > win[0] and box[1] < win[3] and box[3] > win[1]


def _caption(what, idx, image_id, anns, preds, names, gt_xyxy, p_xyxy, kinds) -> str:
    same_image = [g for g, a in enumerate(anns) if a["image_id"] == image_id and not a.get("iscrowd", 0)]
    if what == "missed":
        a = anns[idx]
        others = [i for i, p in enumerate(preds) if p["image_id"] == image_id]
        head = f"missed {names.get(a['category_id'], a['category_id'])}"
        tail = "no prediction near it (IoU < 0.1)"
        if others:
            iou = pairwise_iou(gt_xyxy[idx : idx + 1], p_xyxy[others])[0]
            j = int(np.argmax(iou))
            if iou[j] >= 0.1:
                tail = f"best prediction IoU {iou[j]:.2f} ({kinds[others[j]].replace('_', ' ')})"
        facts = _fact_text(a)
    else:
        p = preds[idx]
        best = float(pairwise_iou(p_xyxy[idx : idx + 1], gt_xyxy[same_image]).max()) if same_image else 0.0
        head = f"{what.replace('_', ' ')}: {names.get(p['category_id'], p['category_id'])}"
        tail = f"score {float(p.get('score', 1.0)):.2f} · best object IoU {best:.2f}"
        facts = ""
    parts = [f"image {image_id}", head, facts, tail]
    return " · ".join(x for x in parts if x)


def _rect(box, win, colour: str, dashed: bool, focus: bool) -> str:
    """Two rectangles: a dark halo under the coloured outline; the crop's subject drawn thicker.

    Both lie just *outside* the box (grown by the halo's half width on
    screen), so that no pixel of the object is covered by its own outline.
    """
    width = 3.5 if focus else 1.5
    pad = ((width + 2) / 2 + 0.5) * max(win[2] - win[0], win[3] - win[1]) / SHOWN_PX  # image px
    x0, y0, x1, y1 = box
    x, y = x0 - win[0] - pad, y0 - win[1] - pad
    w, h = max(x1 - x0, 0.01) + 2 * pad, max(y1 - y0, 0.01) + 2 * pad
    geom = f'x="{x:.3f}" y="{y:.3f}" width="{w:.3f}" height="{h:.3f}"'
    dash = ' stroke-dasharray="5 3"' if dashed else ""
    return (f'<rect {geom} fill="none" stroke="#000" stroke-opacity="0.7" stroke-width="{width + 2}"{dash} '
            f'vector-effect="non-scaling-stroke"/>'
            f'<rect {geom} fill="none" stroke="{colour}" stroke-width="{width}"{dash} '
            f'vector-effect="non-scaling-stroke"/>')


def _png_base64(pixels: np.ndarray) -> str:
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(pixels)).save(buf, format="PNG", optimize=True)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def crop_svg(crop: Crop) -> str:
    """The crop as an inline ``<svg role="img">`` with its caption as title and aria-label."""
    x0, y0, x1, y1 = crop.window
    w, h = x1 - x0, y1 - y0  # the viewBox is the window in image pixels, whatever the embedded size
    alt = html.escape(f"{crop.caption}. {w} x {h} image pixels around it; truth solid yellow, predictions "
                      "dashed, both just outside the box; the subject drawn thicker.", quote=True)
    parts = [f'<svg class="crop" viewBox="0 0 {w} {h}" role="img" aria-label="{alt}"><title>{alt}</title>',
             f'<image width="{w}" height="{h}" href="data:image/png;base64,{_png_base64(crop.pixels)}"/>',
             '<g class="truth">']
    for box, _label in crop.truth:
        if _crosses(box, crop.window):
            parts.append(_rect(box, crop.window, TRUTH_COLOUR, False, crop.what == "missed" and box == crop.focus))
    parts.append('</g><g class="pred">')
    for box, kind in crop.preds:
        parts.append(_rect(box, crop.window, KIND_COLOURS.get(kind, "#b9b9b9"), True, box == crop.focus))
    parts.append("</g></svg>")
    return "".join(parts)
