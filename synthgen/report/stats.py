"""Dataset statistics: counts, sizes, visibility and overlap of the objects, as JSON-ready values, tables and histograms.

:func:`dataset_stats` summarises a COCO dict as plain JSON-ready values,
:func:`stats_tables` renders them with rich, :func:`stats_figure` draws the
histograms (matplotlib, Agg, no pyplot state).  Facts that only synthgen records
(visible fraction, truncation, settings) are skipped with a note when a file
from another tool lacks them; the max IoU with neighbours is computed from the
annotated boxes, so it is always available.
"""

from __future__ import annotations

import io
import math
from collections import Counter
from collections.abc import Mapping

import numpy as np

from synthgen._io import write_atomic
from synthgen.errors import require_extra
from synthgen.evaluate.classify import truth_arrays
from synthgen.formats.coco import AREA_RANGES
from synthgen.geometry import box_area, box_longer_side, box_relations
from synthgen.report.draw import category_colour
from synthgen.scene.facts import FACTS_BY_NAME

#: The per-object facts the statistics read from ``annotation["synthgen"]``, by their entry in the
#: FACTS table (a renamed fact fails here, on import); ``max_iou`` is always computed from the boxes.
VISIBLE = FACTS_BY_NAME["visible_fraction"]
TRUNCATED = FACTS_BY_NAME["truncated"]
MAX_IOU = FACTS_BY_NAME["max_iou"]

#: COCO size ranges by the ground truth's ``area`` in px^2, both ends inclusive
#: (REFERENCE.md: COCO-style AP).
COCO_AREA_RANGES = tuple(r for r in AREA_RANGES if r[0] != "all")


# --------------------------------------------------------------------------- statistics


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _quantiles(values: np.ndarray) -> dict:
    v = np.asarray(values, dtype=np.float64)
    if v.size == 0:
        return {"n": 0}
    q = np.quantile(v, [0.0, 0.25, 0.5, 0.75, 1.0])
    return {"n": int(v.size), "min": float(q[0]), "p25": float(q[1]), "median": float(q[2]),
            "p75": float(q[3]), "max": float(q[4]), "mean": float(v.mean())}


def _objects_per_image(image_ids: np.ndarray, ann_image_ids: np.ndarray) -> np.ndarray:
    """Annotations per image, in the order of ``image_ids`` (0 for an image without any), shape (I,)."""
    ids, counts = np.unique(ann_image_ids, return_counts=True)
    lookup = dict(zip(ids.tolist(), counts.tolist()))
    return np.array([lookup.get(int(i), 0) for i in image_ids], dtype=np.int64)


def _object_facts(coco: Mapping) -> dict:
    """Per-object arrays the statistics and figures are built from (objects only; ``crowd`` counts the ignore regions)."""
    boxes, img, cat, crowd, anns = truth_arrays(coco)
    keep = ~crowd
    n_crowd = int(crowd.sum())
    boxes, img, cat = boxes[keep], img[keep], cat[keep]
    anns = [a for a, k in zip(anns, keep.tolist()) if k]
    longer = box_longer_side(boxes)
    has_area = np.array([_num(a.get("area")) for a in anns], dtype=bool)
    area = np.array([float(a["area"]) if h else 0.0 for a, h in zip(anns, has_area)])
    if len(anns):
        area = np.where(has_area, area, box_area(boxes))
    facts = [a.get("synthgen") if isinstance(a.get("synthgen"), dict) else {} for a in anns]
    vis = np.array([f[VISIBLE.name] if _num(f.get(VISIBLE.name)) else np.nan for f in facts])
    trunc = [f.get(TRUNCATED.name) for f in facts]
    trunc_known = np.array([isinstance(t, bool) for t in trunc], dtype=bool)
    return {
        "boxes": boxes, "image_id": img, "category_id": cat, "crowd": n_crowd,
        "longer": longer, "area": area, "area_from_field": has_area,
        VISIBLE.name: vis,
        TRUNCATED.name: np.array([bool(t) for t in trunc], dtype=bool), "truncated_known": trunc_known,
        MAX_IOU.name: box_relations(boxes, img)[0],
    }


def _settings(coco: Mapping, manifest: Mapping | None) -> tuple[dict, list[str]]:
    """Clutter, degradation and background settings used, from the manifest and the image facts.

    Image facts read (under ``image["synthgen"]``): ``background`` (a kind, or
    an object with ``kind``), ``degradations`` (name -> parameters of each one
    applied to the image), ``clutter`` (``marks``: marks drawn, and a count per
    mark kind).  From the manifest: ``config.degrade`` (the degradations with
    ``p > 0``), ``config.clutter``, ``config.background.kind``.
    """
    notes = []
    out: dict = {}
    images = coco.get("images", [])
    facts = [im.get("synthgen") for im in images if isinstance(im.get("synthgen"), dict)]
    if facts:
        bg: Counter = Counter()
        applied: Counter = Counter()
        params: dict[str, dict[str, list[float]]] = {}
        marks, mark_kinds = [], Counter()
        for f in facts:
            b = f.get("background")
            kind = b.get("kind") if isinstance(b, dict) else b
            if isinstance(kind, str):
                bg[kind] += 1
            d = f.get("degradations")
            if isinstance(d, dict):
                for name, v in d.items():
                    if v in (None, False, [], {}) and not isinstance(v, dict):
                        continue
                    applied[name] += 1
                    for key, x in (v.items() if isinstance(v, dict) else ()):
                        if _num(x):
                            params.setdefault(name, {}).setdefault(key, []).append(float(x))
            elif isinstance(d, list):
                applied.update(str(k) for k in d)
            c = f.get("clutter")
            if isinstance(c, dict):
                n = c.get("marks", c.get("count"))
                if _num(n):
                    marks.append(n)
                mark_kinds.update({k: int(v) for k, v in c.items() if k not in ("marks", "count") and _num(v)})
        if bg:
            out["backgrounds"] = dict(sorted(bg.items()))
        out["degraded_images"] = dict(sorted(applied.items()))
        ranges = {name: {k: [min(v), max(v)] for k, v in kv.items()} for name, kv in params.items()}
        if ranges:
            out["degradation_ranges"] = ranges
        if marks:
            out["clutter_marks_per_image"] = _quantiles(np.array(marks, dtype=float))
            out["clutter_marks_by_kind"] = dict(sorted(mark_kinds.items()))
    config = manifest.get("config") if isinstance(manifest, Mapping) else None
    if isinstance(config, Mapping):
        deg = config.get("degrade")
        if isinstance(deg, Mapping):
            on = {k: dict(v) for k, v in deg.items() if isinstance(v, Mapping) and _num(v.get("p")) and v["p"] > 0}
            out["degrade_config"] = on
        cl = config.get("clutter")
        if isinstance(cl, Mapping):
            out["clutter_config"] = dict(cl)
        bgc = config.get("background")
        if isinstance(bgc, Mapping) and isinstance(bgc.get("kind"), str):
            out["background_config"] = bgc["kind"]
    elif not facts:
        notes.append("settings: no synthgen manifest or image facts; clutter and degradation settings unknown")
    if (isinstance(config, Mapping) or facts) and "clutter_config" not in out and "clutter_marks_per_image" not in out:
        notes.append("clutter: not recorded by the tool that made this dataset; skipped")
    return out, notes


def _area_ranges(f: dict, notes: list[str]):
    """Objects per COCO area range, by the annotation's area (a note where the box area stands in)."""
    area = f["area"]
    if len(area) and not f["area_from_field"].all():
        notes.append(f"area: {int((~f['area_from_field']).sum())} annotations have no 'area'; their box w*h is used")
    ranges = {name: int(np.count_nonzero((area >= lo) & (area <= hi))) for name, lo, hi in COCO_AREA_RANGES}
    ranges["rule"] = (
        "by the annotation's area (px^2): small [0, 32^2], medium [32^2, 96^2], large [96^2, inf), ends inclusive"
    )
    return ranges


def _visible_stats(f: dict, notes: list[str]):
    """Visible-fraction quantiles and shares, or None when the file does not record the fact."""
    vis = f["visible_fraction"]
    known = ~np.isnan(vis)
    if len(vis) and known.any():
        visible = _quantiles(vis[known]) | {
            "fully_visible": float(np.mean(vis[known] >= 1.0)),
            "below_half": float(np.mean(vis[known] < 0.5)),
        }
        if not known.all():
            notes.append(f"visible fraction: recorded for {int(known.sum())} of {len(vis)} objects")
    else:
        visible = None
        if len(vis):
            notes.append("visible fraction: not recorded in this file (no synthgen facts); skipped")
    return visible


def _truncated_stats(f: dict, notes: list[str]):
    """How many objects the border cuts, or None when the file does not record the fact."""
    tk = f["truncated_known"]
    if len(tk) and tk.any():
        truncated = {"count": int(f["truncated"][tk].sum()), "of": int(tk.sum()),
                     "share": float(f["truncated"][tk].mean())}
    else:
        truncated = None
        if len(tk):
            notes.append("truncated: not recorded in this file (no synthgen facts); skipped")
    return truncated


def dataset_stats(coco: Mapping, manifest: Mapping | None = None) -> dict:
    """Summary statistics of a COCO dataset, as JSON-ready values.

    Parameters
    ----------
    coco : dict
        COCO JSON (any tool's; synthgen's per-object facts are used when present).
    manifest : dict, optional
        synthgen's ``manifest.json``, for the settings used.

    Returns
    -------
    dict
        ``images``, ``objects``, ``ignore_regions`` (annotations with
        ``iscrowd`` 1, left out of everything else), ``objects_per_image`` (min/median/max/mean),
        ``per_category`` (id, name, count, in id order), ``size`` (quantiles of
        the annotated box's longer side, px), ``area_ranges`` (COCO small /
        medium / large counts by the ``area`` field, both ends inclusive, so an
        area of exactly 1024 counts in small and medium), ``visible_fraction``,
        ``max_iou`` (largest box IoU with another annotated object of the same
        image, computed from the boxes), ``truncated``, ``settings``,
        ``notes`` (what was skipped and why).  A quantity the file does not
        record is ``None``.

    Examples
    --------
    >>> coco = {"images": [{"id": 1, "width": 9, "height": 9}], "categories": [{"id": 1, "name": "a"}],
    ...         "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "bbox": [0, 0, 4, 2], "area": 8.0}]}
    >>> s = dataset_stats(coco)
    >>> s["objects"], s["size"]["max"], s["area_ranges"]["small"]
    (1, 4.0, 1)
    """
    f = _object_facts(coco)
    notes: list[str] = []
    images = list(coco.get("images", []))
    image_ids = np.array([im["id"] for im in images], dtype=np.int64)
    per_image = _objects_per_image(image_ids, f["image_id"])
    orphans = int(np.count_nonzero(~np.isin(f["image_id"], image_ids)))
    if orphans:
        notes.append(f"{orphans} annotations refer to image ids not in 'images'")
    cats = sorted(coco.get("categories", []), key=lambda c: c["id"])
    cat_counts = Counter(f["category_id"].tolist())
    per_category = [{"id": c["id"], "name": c["name"], "count": int(cat_counts.get(c["id"], 0))} for c in cats]
    unknown_cat = sum(v for k, v in cat_counts.items() if k not in {c["id"] for c in cats})
    if unknown_cat:
        notes.append(f"{unknown_cat} annotations have a category id not in 'categories'")

    ranges = _area_ranges(f, notes)
    visible = _visible_stats(f, notes)
    truncated = _truncated_stats(f, notes)
    mi = f["max_iou"]
    max_iou = None
    if len(mi):
        max_iou = _quantiles(mi) | {
            "overlapping": float(np.mean(mi > 0)),
            "source": "computed from the annotated boxes",
        }
    size = None
    if len(f["longer"]):
        size = _quantiles(f["longer"]) | {"measure": "longer side of the annotated box, px"}
    if f["crowd"]:
        notes.append(f"{f['crowd']} ignore regions (iscrowd 1) are left out of these statistics")

    settings, more = _settings(coco, manifest)
    notes.extend(more)
    return {
        "images": len(images),
        "objects": int(len(f["boxes"])),
        "ignore_regions": f["crowd"],
        "objects_per_image": _quantiles(per_image) if len(per_image) else None,
        "per_category": per_category,
        "size": size,
        "area_ranges": ranges,
        VISIBLE.name: visible,
        MAX_IOU.name: max_iou,
        TRUNCATED.name: truncated,
        "settings": settings,
        "notes": notes,
    }


def _fmt(v, digits: int = 3) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        if v.is_integer() and abs(v) < 1e9:
            return str(int(v))
        return f"{v:.{digits}g}"
    return str(v)


def stats_tables(stats: Mapping, title: str = "dataset"):
    """Rich renderables for :func:`dataset_stats` output.

    Tables: overview (counts and shares), distributions (quantiles per
    quantity), COCO area ranges, objects per category, settings used; then the
    notes on what was skipped.

    Returns
    -------
    rich.console.Group
    """
    from rich.console import Group
    from rich.markup import escape
    from rich.table import Table
    from rich.text import Text

    n_obj = stats["objects"]
    share = (lambda k: f"{100 * k / n_obj:.1f}%") if n_obj else (lambda k: "-")

    overview = Table(title=escape(f"{title}: overview"), header_style="bold", title_justify="left")
    overview.add_column("quantity")
    overview.add_column("value", justify="right")
    _add(overview, "images", str(stats["images"]))
    _add(overview, "objects", str(n_obj))
    if stats.get("ignore_regions"):
        _add(overview, "ignore regions (iscrowd 1)", str(stats["ignore_regions"]))
    _add(overview, "categories", str(len(stats["per_category"])))
    vf, mi, tr = stats.get("visible_fraction"), stats.get("max_iou"), stats.get("truncated")
    if vf:
        _add(overview, "fully visible", f"{100 * vf['fully_visible']:.1f}%")
        _add(overview, "less than half visible", f"{100 * vf['below_half']:.1f}%")
    if tr:
        _add(overview, "truncated by the border", f"{100 * tr['share']:.1f}% ({tr['count']})")
    if mi:
        _add(overview, "overlapping another box", f"{100 * mi['overlapping']:.1f}%")

    dist = Table(title="distributions", header_style="bold", title_justify="left")
    dist.add_column("quantity")
    for col in ("min", "p25", "median", "p75", "max", "mean"):
        dist.add_column(col, justify="right")
    opi = stats.get("objects_per_image")
    for label, q in (
        ("objects per image", opi),
        ("size, longer side (px)", stats.get("size")),
        ("visible fraction", vf),
        ("max IoU with another box", mi),
    ):
        if q and q.get("n"):
            _add(dist, label, *(_fmt(q[k]) for k in ("min", "p25", "median", "p75", "max", "mean")))

    ar = stats["area_ranges"]
    areas = Table(title="COCO area ranges (px², ends inclusive)", header_style="bold", title_justify="left")
    areas.add_column("range")
    areas.add_column("area", justify="right")
    areas.add_column("objects", justify="right")
    areas.add_column("share", justify="right")
    for name, span in (("small", "0 .. 32²"), ("medium", "32² .. 96²"), ("large", "96² .. ∞")):
        _add(areas, name, span, str(ar[name]), share(ar[name]))

    cats = Table(title="objects per category", header_style="bold", title_justify="left")
    cats.add_column("id", justify="right")
    cats.add_column("category")
    cats.add_column("objects", justify="right")
    cats.add_column("share", justify="right")
    for c in stats["per_category"]:
        _add(cats, str(c["id"]), c["name"], str(c["count"]), share(c["count"]))

    parts = [overview, dist, areas, cats]
    st = stats.get("settings") or {}
    if st:
        parts.append(_settings_table(st))
    for note in stats.get("notes", []):
        parts.append(Text(f"note: {note}", style="dim"))
    return Group(*parts)


def _add(table, *cells) -> None:
    """Add a row; names and values from files may hold "[...]", which rich reads as markup."""
    from rich.markup import escape

    table.add_row(*(escape(str(c)) for c in cells))


def _settings_table(st: Mapping):
    """The "settings used" table of :func:`stats_tables`."""
    from rich.table import Table

    t = Table(title="settings used", header_style="bold", title_justify="left")
    t.add_column("setting")
    t.add_column("value")
    if "background_config" in st:
        _add(t, "background.kind (config)", st["background_config"])
    if "backgrounds" in st:
        _add(t, "backgrounds drawn (images)", ", ".join(f"{k} {v}" for k, v in st["backgrounds"].items()))
    if "degrade_config" in st:
        on = st["degrade_config"]
        text = "; ".join(
            f"{k} p={_fmt(v.get('p'))}" + "".join(f" {kk}={_fmt_value(vv)}" for kk, vv in v.items() if kk != "p")
            for k, v in on.items()
        )
        _add(t, "degradations (config)", text or "none")
    if "degraded_images" in st:
        d, r = st["degraded_images"], st.get("degradation_ranges", {})

        def applied(name, n):
            spans = ", ".join(f"{k} {_fmt(lo)}..{_fmt(hi)}" for k, (lo, hi) in r.get(name, {}).items())
            return f"{name} {n}" + (f" ({spans})" if spans else "")

        _add(t, "degradations applied (images)", "; ".join(applied(k, v) for k, v in d.items()) or "none")
    if "clutter_config" in st:
        _add(t, "clutter (config)", ", ".join(f"{k}={_fmt_value(v)}" for k, v in st["clutter_config"].items()))
    if "clutter_marks_per_image" in st:
        q = st["clutter_marks_per_image"]
        text = f"min {_fmt(q['min'])}, median {_fmt(q['median'])}, max {_fmt(q['max'])}"
        _add(t, "clutter marks per image", text)
        kinds = st.get("clutter_marks_by_kind") or {}
        if kinds:
            _add(t, "clutter marks by kind", ", ".join(f"{k} {v}" for k, v in kinds.items()))
    return t


def _fmt_value(v) -> str:
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_fmt_value(x) for x in v) + "]"
    return _fmt(v)


def stats_figure(coco: Mapping, *, width: float = 12.0, height: float = 7.0, title: str | None = None):
    """Histograms of a dataset: size (log scale), objects per image, visible fraction, max IoU, categories.

    Parameters
    ----------
    coco : dict
        COCO JSON.
    width, height : float
        Figure size in inches; :func:`save_figure` writes ``width * dpi`` by
        ``height * dpi`` pixels.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Six panels (the sixth: COCO area ranges); a panel whose fact the file
        does not record says so instead of plotting.
    """
    require_extra("matplotlib", "plots", "a figure")
    from matplotlib.figure import Figure

    f = _object_facts(coco)
    fig = Figure(figsize=(width, height), layout="constrained")
    axes = fig.subplots(2, 3)
    if title:
        fig.suptitle(title, fontsize=13)
    for row, col, panel in _PANELS:
        panel(axes[row, col], f, coco)
    for a in axes.flat:
        a.spines[["top", "right"]].set_visible(False)
    return fig


_BLUE, _ORANGE, _GREEN = "#3a6fd8", "#e07a10", "#2a9d6a"


def _labels(ax, title: str, xlabel: str, ylabel: str) -> None:
    ax.set_title(title)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)


def _size_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: size, log scale, stacked by COCO area range."""
    longer = f["longer"][f["longer"] > 0]
    if longer.size:
        lo, hi = longer.min(), longer.max()
        if hi <= lo * 1.05:
            lo, hi = lo / 1.2, hi * 1.2
        edges = np.geomspace(lo, hi, 25)
        area = f["area"][f["longer"] > 0]
        groups = [longer[area <= 32**2], longer[(area > 32**2) & (area <= 96**2)], longer[area > 96**2]]
        ax.hist(groups, bins=edges, stacked=True, color=[_BLUE, _ORANGE, _GREEN],
                label=["small: area ≤ 32²", "medium", "large: > 96²"], edgecolor="white", linewidth=0.4)
        ax.set_xscale("log")
        _pow2_ticks(ax, lo, hi)
        ax.margins(y=0.25)
        ax.legend(fontsize=7.5, frameon=False, ncol=3, loc="upper center", handlelength=1.0, columnspacing=1.0)
        ax.yaxis.get_major_locator().set_params(integer=True)
    else:
        _empty(ax, "no objects")
    _labels(ax, "object size (longer side of box)", "px (log scale)", "objects")


def _per_image_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: objects per image."""
    image_ids = np.array([im["id"] for im in coco.get("images", [])], dtype=np.int64)
    if image_ids.size:
        per = _objects_per_image(image_ids, f["image_id"])
        low, top = int(per.min()), int(per.max())
        step = max(1, math.ceil((top - low + 1) / 40))  # whole-number bins, at most 40 of them
        edges = np.arange(low, top + step + 1, step) - 0.5
        ax.hist(per, bins=edges, color=_BLUE, edgecolor="white", linewidth=0.4)
        ax.set_xlim(edges[0] - (step if low > 0 else 0), edges[-1] + step)
        ax.xaxis.get_major_locator().set_params(integer=True)
        ax.yaxis.get_major_locator().set_params(integer=True)
        ax.text(0.97, 0.95, f"min {per.min()} · median {np.median(per):g} · max {per.max()}",
                transform=ax.transAxes, ha="right", va="top", fontsize=8, color="#555555")
        ax.margins(y=0.15)
    else:
        _empty(ax, "no images")
    _labels(ax, "objects per image", "objects", "images")


def _visible_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: visible fraction."""
    vis = f["visible_fraction"]
    vis = vis[~np.isnan(vis)]
    if vis.size:
        counts_v, _, _ = ax.hist(vis, bins=np.linspace(0, 1, 21), color=_BLUE, edgecolor="white", linewidth=0.4)
        if counts_v.max() > 0.8 * vis.size and vis.size >= 20:  # one bin dominates: show the rest too
            from matplotlib.ticker import FuncFormatter

            ax.set_yscale("log")
            ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            ax.set_ylabel("objects (log scale)")
        else:
            ax.yaxis.get_major_locator().set_params(integer=True)
        ax.set_xlim(0, 1)
        ax.text(0.03, 0.95, f"{int(np.count_nonzero(vis >= 1))} of {vis.size} fully visible",
                transform=ax.transAxes, ha="left", va="top", fontsize=8, color="#555555")
        ax.margins(y=0.15)
    else:
        _empty(ax, "not recorded in this file\n(a synthgen per-object fact)" if f["boxes"].size else "no objects")
    ax.set_title("visible fraction")
    ax.set_xlabel("visible / full coverage")
    if ax.get_yscale() != "log":
        ax.set_ylabel("objects")


def _max_iou_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: max IoU."""
    mi = f["max_iou"]
    if mi.size:
        alone = int(np.count_nonzero(mi == 0))
        ax.hist(mi[mi > 0], bins=np.linspace(0, 1, 21), color=_ORANGE, edgecolor="white", linewidth=0.4)
        ax.set_xlim(0, 1)
        ax.yaxis.get_major_locator().set_params(integer=True)
        ax.text(0.97, 0.95, f"{alone} of {mi.size} overlap no other box\n(IoU 0, not shown)", transform=ax.transAxes,
                ha="right", va="top", fontsize=8, color="#555555")
        ax.margins(y=0.15)
    else:
        _empty(ax, "no objects")
    _labels(ax, "max IoU with another box in the image", "IoU", "objects")


def _category_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: categories."""
    cats = sorted(coco.get("categories", []), key=lambda c: c["id"])
    if cats:
        cc = Counter(f["category_id"].tolist())
        names = [c["name"] for c in cats][::-1]
        vals = [cc.get(c["id"], 0) for c in cats][::-1]
        colours = ["#{:02x}{:02x}{:02x}".format(*category_colour(i)) for i in range(len(cats))][::-1]
        ax.barh(np.arange(len(cats)), vals, color=colours, edgecolor="#333333", linewidth=0.5)
        ax.set_xlim(0, max(max(vals), 1) * 1.05)
        ax.set_yticks(np.arange(len(cats)), names, fontsize=8 if len(cats) <= 20 else 6)
        if len(cats) > 40:
            ax.set_yticks([])
    else:
        _empty(ax, "no categories")
    ax.set_title("objects per category")
    ax.set_xlabel("objects")


def _area_panel(ax, f: dict, coco: Mapping) -> None:
    """Panel: COCO area ranges."""
    area = f["area"]
    counts = [int(np.count_nonzero((area >= lo) & (area <= hi))) for _, lo, hi in COCO_AREA_RANGES]
    ax.bar(["small\n[0, 32²]", "medium\n[32², 96²]", "large\n[96², ∞)"], counts, color=[_BLUE, _ORANGE, _GREEN])
    for i, v in enumerate(counts):
        ax.text(i, v, str(v), ha="center", va="bottom", fontsize=9)
    _labels(ax, "COCO area ranges", "by the annotation's area (px²), ends inclusive", "objects")
    ax.margins(y=0.15)
    ax.set_ylim(0, max(max(counts), 1) * 1.15)


#: The panels of :func:`stats_figure`: (row, column, drawing function), drawn in this order.
_PANELS = (
    (0, 0, _size_panel),
    (0, 1, _per_image_panel),
    (0, 2, _visible_panel),
    (1, 0, _max_iou_panel),
    (1, 1, _category_panel),
    (1, 2, _area_panel),
)


def _pow2_ticks(ax, lo: float, hi: float) -> None:
    """Label a log axis at powers of two, as plain numbers."""
    from matplotlib.ticker import FixedLocator, NullFormatter

    left, right = lo / 1.05, hi * 1.05
    ticks = [2.0**k for k in range(math.floor(math.log2(left)), math.ceil(math.log2(right)) + 1)]
    inside = [t for t in ticks if left <= t <= right]
    ticks = inside if len(inside) >= 2 else ticks  # a narrow range keeps its neighbours
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.set_xticks(ticks, [f"{t:g}" for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlim(min(ticks[0], left), max(ticks[-1], right))


def _empty(ax, text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color="#777777")
    ax.set_xticks([])
    ax.set_yticks([])


def save_figure(fig, path, *, dpi: int = 100) -> None:
    """Write a matplotlib figure as a PNG of exactly ``figsize * dpi`` pixels, atomically."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    write_atomic(path, buf.getvalue())


def save_json(obj, path) -> None:
    """Write JSON-ready values (e.g. :func:`dataset_stats` output) indented, atomically."""
    import orjson

    write_atomic(path, orjson.dumps(obj, option=orjson.OPT_INDENT_2 | orjson.OPT_SERIALIZE_NUMPY) + b"\n")
